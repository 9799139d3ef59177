-- intervals: the start-stop rows, one per customer, spell and interval in
-- which every covariate is constant; intervals are (start, stop] in days of
-- tenure.
--
-- Reads `spells`. Rules (DEVELOPERS.md, "Preparation rules"):
--   * a day's events take effect just after that day: the row that stops at
--     tenure t carries the values from before t's events;
--   * a day whose state equals the previous day's state is not a cut (the
--     states step marks the cuts: `changed`);
--   * exit: the end's tenure, or the tenure on $as_of when still open
--     (censored); an exit on tenure day 0 counts as 0.5, never 0;
--   * delayed entry: a spell that began before $window_start enters at its
--     tenure on that day; rows before it are cut off; spells that ended on or
--     before it were set aside as outside_window by the states step;
--   * <attribute>_ratio = value / value on the spell's first day.
-- One window over the cuts and the end rows: an interval stops at the next cut
-- of its spell, or at the exit; the end row carries the cause (it is the last
-- event of its day unless a reactivation follows it on that day). The window runs over all rows in the
-- output order (customer_id, spell, start), which the rows keep.
-- Parameters: $as_of (date), $window_start (date or null).
with cuts as (
    select
        -- the placeholders are null: they come back after the window, which need not
        -- carry them (every column the window carries costs in its sort)
        * exclude (vc__0, vn__0, vr__0, sc__0, sn__0)
    from spells
    where not outside_window and ((last_of_day and changed) or event_rank = 6)
),

walked as (
    select
        *,
        -- one window over all rows in output order, so the rows come out sorted. A
        -- spell's first row has tenure 0 and its later rows a larger tenure (one cut a
        -- day; an end that is not its day's last row is its spell's last row), so the
        -- next row belongs to the same spell exactly when its tenure is above 0
        case when lead(tenure) over in_order > 0 then lead(tenure) over in_order end
            as next_tenure,
        case when lead(tenure) over in_order > 0 then lead(cause) over in_order end
            as next_cause,
        -- the spell's first day is a cut, so the last first-day value so far is its
        -- base (NaN stands in for a missing value: numbers are finite here). The
        -- pattern also matches `spell` so that it matches at least once in a project
        -- without a ratio attribute; `ratio__spell` is never selected after.
        columns('^(vr__[A-Za-z].*|spell)$') / nullif(nullif(last_value(
            case when day = start_day
                then coalesce(columns('^(vr__[A-Za-z].*|spell)$'), 'nan'::double) end
            ignore nulls) over in_order, 'nan'::double), 0) as 'ratio__\1',
        cast(null as double) as ratio__vr__0,
        cast(null as category) as vc__0,
        cast(null as double) as vn__0,
        cast(null as double) as vr__0,
        cast(null as category) as sc__0,
        cast(null as double) as sn__0
    from cuts
    window in_order as (order by customer_id, spell, tenure
                        rows between unbounded preceding and current row)
),

timed as (
    -- the spell's exit and entry tenure, after the window for the same reason
    select
        *,
        greatest(
            case
                when end_day is not null then date_diff('day', start_day, end_day)
                else date_diff('day', start_day, $as_of)
            end, 0.5) as exit_time,
        greatest(coalesce(date_diff('day', start_day, cast($window_start as date)), 0), 0)
            as entry_time
    from walked
),

kept as (
    select
        *,
        next_tenure is null or next_tenure >= exit_time as is_last,
        case when next_tenure is null or next_tenure >= exit_time then exit_time
             else next_tenure end as stop_time
    from timed
    where changed and tenure < exit_time
),

final as (
    select
        cast(k.customer_id as varchar) as customer_id,
        cast(k.spell as bigint) as spell,
        cast(greatest(k.tenure, k.entry_time) as double) as start,
        cast(k.stop_time as double) as stop,
        cast(case when k.is_last and k.end_day is not null then 1 else 0 end as integer)
            as churned,
        cast(case
            when not k.is_last or k.end_day is null then ''
            when k.event_rank = 6 then k.cause
            else k.next_cause
        end as varchar) as cause,
        cast(1.0 as double) as weight,
        cast(k.start_day as date) as start_date,
        cast(strftime(k.start_day, '%Y-%m') as varchar) as cohort,
        cast(columns('^(sc__.*)$') as varchar) as '\1',
        cast(columns('^(sn__.*)$') as double) as '\1',
        cast(columns('^(vc__.*)$') as varchar) as '\1',
        cast(columns('^(v[nr]__.*)$') as double) as '\1',
        cast(columns('^(ratio__vr__.*)$') as double) as '\1',
        cast(k.in_recovery as double) as in_recovery,
        cast(k.paused as double) as paused,
        cast(k.spell - 1 as double) as prior_spells
    from kept as k
    where k.stop_time > k.entry_time
)

select * from final
