-- sequence: usable rows that are exact duplicates or out of order.
--
-- Reads `troubled_events` (the usable rows of the customers the states step
-- flags; every other customer's rows are in order and unrepeated).
-- Exact duplicates: rows identical in customer, time, event value, reason and
-- every attribute (numbers compared as numbers); of each set the first (lowest
-- source row) is used.
-- Order: a spell is opened by `start` and closed by `end`. With the usable
-- rows in the fixed order (day, same-day rank, time, source row) the state
-- before a row is "open" exactly when the last start/end before it is a
-- start: in a run of starts only the first opens a spell, in a run of ends
-- only the first closes it, and the state after a run is its kind.
-- Produces one row per problem: source_row, reason.
with usable as (
    select *
    from troubled_events
),

copies as (
    select
        u.source_row,
        row_number() over (
            partition by u.customer_id, u.event_ts, u.event_raw, u.reason_raw,
                         row(*columns('^[sv][cnr]__'))
            order by u.source_row
        ) as copy_number
    from usable as u
),

duplicates as (
    select source_row, 'exact duplicate' as reason
    from copies
    where copy_number > 1
),

ordered as (
    select
        u.source_row,
        u.event,
        -- the most recent start or end strictly before this row, and whether
        -- any start came before it
        last_value(case when u.event in ('start', 'end') then u.event end ignore nulls)
            over before_row as previous_boundary,
        coalesce(bool_or(u.event = 'start') over before_row, false) as started_before
    from usable as u
    anti join duplicates as d on u.source_row = d.source_row
    window before_row as (
        partition by u.customer_id
        order by u.day, u.event_rank, u.event_ts, u.source_row
        rows between unbounded preceding and 1 preceding
    )
),

checked as (
    select
        source_row,
        case
            when event = 'start' and previous_boundary = 'start' then 'start during an open spell'
            when event <> 'start' and not started_before
                then 'event before the customer''s first start'
            when event = 'end' and previous_boundary = 'end' then 'end without an open spell'
            when event <> 'start' and previous_boundary = 'end' then 'event outside an open spell'
        end as reason
    from ordered
),

final as (
    select cast(source_row as bigint) as source_row, cast(reason as varchar) as reason
    from checked
    where reason is not null
    union all
    select cast(source_row as bigint) as source_row, cast(reason as varchar) as reason
    from duplicates
)

select * from final
