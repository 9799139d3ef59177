-- spells: every used event with the state of its customer just after it.
--
-- Reads `events` and `sequence_problems`. One window per customer in the fixed
-- order (day, same-day rank start < update < pause < resume < payment_failed <
-- payment_recovered < end, then source row) carries:
--   spell        number of starts so far (1, 2, ...)
--   start_day    day of the spell's start (tenure 0)
--   varying attributes: last non-empty value on a start or update row
--                (an empty value on a later start keeps the last known value)
--   static attributes: first non-empty value on any used row of the customer
--   paused       1 after pause, 0 after resume or start
--   in_recovery  1 after payment_failed, 0 after payment_recovered or start
--                (an end clears it for the next spell because that begins
--                with a start)
--   cause        on end rows: the mapped reason, else involuntary when in
--                recovery at the end, else voluntary
--   last_of_day  the row is the day's last for its customer: its state is the
--                state the next interval carries
--   outside_window  the spell began before $window_start and ended on or
--                before it, so it never entered the window
-- Parameters: $window_start (date or null).
with used as (
    select e.*
    from events as e
    anti join sequence_problems as p on e.source_row = p.source_row
    where not e.ignored and e.reason is null
),

states as (
    select
        customer_id,
        source_row,
        day,
        event,
        event_rank,
        cause_given,
        sum(case when event = 'start' then 1 else 0 end) over upto as spell,
        last_value(case when event = 'start' then day end ignore nulls) over upto as start_day,
        last_value(case when event in ('start', 'update') then columns('^(v[cnr]__.*)$') end
                   ignore nulls) over upto as '\1',
        first_value(columns('^(s[cn]__.*)$') ignore nulls) over whole as '\1',
        coalesce(last_value(case event when 'pause' then 1 when 'resume' then 0
                                       when 'start' then 0 end ignore nulls) over upto, 0)
            as paused,
        coalesce(last_value(case event when 'payment_failed' then 1
                                       when 'payment_recovered' then 0
                                       when 'start' then 0 end ignore nulls) over upto, 0)
            as in_recovery,
        -- the next end on or after this row ends this row's spell (the sequence
        -- step removed every end without an open spell)
        first_value(case when event = 'end' then day end ignore nulls) over rest as end_day,
        lead(day) over upto as next_day
    from used
    window
        upto as (partition by customer_id order by day, event_rank, event_ts, source_row
                 rows between unbounded preceding and current row),
        whole as (partition by customer_id order by day, event_rank, event_ts, source_row
                  rows between unbounded preceding and unbounded following),
        rest as (partition by customer_id order by day, event_rank, event_ts, source_row
                 rows between current row and unbounded following)
),

final as (
    select
        cast(customer_id as varchar) as customer_id,
        cast(source_row as bigint) as source_row,
        cast(spell as bigint) as spell,
        cast(start_day as date) as start_day,
        cast(day as date) as day,
        cast(date_diff('day', start_day, day) as integer) as tenure,
        cast(event as varchar) as event,
        cast(case
            when event <> 'end' then null
            when cause_given is not null then cause_given
            when in_recovery = 1 then 'involuntary'
            else 'voluntary'
        end as varchar) as cause,
        cast(next_day is null or next_day <> day as boolean) as last_of_day,
        cast(coalesce(start_day < $window_start and end_day <= $window_start, false) as boolean)
            as outside_window,
        cast(paused as integer) as paused,
        cast(in_recovery as integer) as in_recovery,
        columns('^[sv][cnr]__.*$')  -- typed by normalise: text or double
    from states
)

select * from final
