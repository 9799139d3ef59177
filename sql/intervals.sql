-- intervals: the start-stop rows, one per customer, spell and interval in
-- which every covariate is constant; intervals are (start, stop] in days of
-- tenure.
--
-- Reads `spells`. Rules (DEVELOPERS.md, "Preparation rules"):
--   * a day's events take effect just after that day: the row that stops at
--     tenure t carries the values from before t's events;
--   * a day whose state equals the previous day's state is not a cut;
--   * exit: the end's tenure, or the tenure on $as_of when still open
--     (censored); an exit on tenure day 0 counts as 0.5, never 0;
--   * delayed entry: a spell that began before $window_start enters at its
--     tenure on that day; rows before it are cut off; spells that ended on or
--     before it were set aside as outside_window in the spells step;
--   * <attribute>_ratio = value / value on the spell's first day.
-- Parameters: $as_of (date), $window_start (date or null).
with days as (
    select *
    from spells
    where last_of_day and not outside_window
),

marked as (
    select
        *,
        -- a cut where any time-varying value differs from the previous day
        -- (the first day of a spell always differs from "nothing")
        row(*columns('^v[cnr]__'), paused, in_recovery)
            is distinct from lag(row(*columns('^v[cnr]__'), paused, in_recovery)) over by_tenure
            as changed,
        columns('^(vr__.*)$') / nullif(first_value(columns('^(vr__.*)$')) over by_tenure, 0)
            as 'ratio__\1',
        -- the spell's last used day is its end day when it ended
        last_value(event) over whole_spell = 'end' as ended,
        last_value(tenure) over whole_spell as last_tenure,
        last_value(cause) over whole_spell as spell_cause
    from days
    window
        by_tenure as (partition by customer_id, spell order by tenure),
        whole_spell as (partition by customer_id, spell order by tenure
                        rows between unbounded preceding and unbounded following)
),

bounded as (
    select
        *,
        greatest(
            case when ended then last_tenure else date_diff('day', start_day, $as_of) end,
            0.5) as exit_time,
        greatest(coalesce(date_diff('day', start_day, cast($window_start as date)), 0), 0)
            as entry_time
    from marked
),

cuts as (
    select
        *,
        coalesce(lead(tenure) over by_tenure, exit_time) as stop_time,
        lead(tenure) over by_tenure is null as is_last
    from bounded
    where changed and tenure < exit_time
    window by_tenure as (partition by customer_id, spell order by tenure)
),

final as (
    select
        cast(customer_id as varchar) as customer_id,
        cast(spell as bigint) as spell,
        cast(greatest(tenure, entry_time) as double) as start,
        cast(stop_time as double) as stop,
        cast(case when is_last and ended then 1 else 0 end as integer) as churned,
        cast(case when is_last and ended then spell_cause else '' end as varchar) as cause,
        cast(1.0 as double) as weight,
        cast(start_day as date) as start_date,
        cast(strftime(start_day, '%Y-%m') as varchar) as cohort,
        cast(columns('^(sc__.*)$') as varchar) as '\1',
        cast(columns('^(sn__.*)$') as double) as '\1',
        cast(columns('^(vc__.*)$') as varchar) as '\1',
        cast(columns('^(v[nr]__.*)$') as double) as '\1',
        cast(columns('^(ratio__.*)$') as double) as '\1',
        cast(in_recovery as double) as in_recovery,
        cast(paused as double) as paused,
        cast(spell - 1 as double) as prior_spells
    from cuts
    where stop_time > entry_time
)

select * from final
order by customer_id, spell, start
