-- sequence: rows that are well formed but out of order for their customer.
--
-- Reads `events` (normalise). A spell is opened by `start` and closed by `end`.
-- With the usable rows in the fixed order (day, same-day rank, source row),
-- the state before a row is "open" exactly when the last start/end before it
-- is a start: in a run of starts only the first opens a spell, in a run of
-- ends only the first closes it, and the state after a run is its kind.
-- Produces one row per problem: source_row, reason.
with usable as (
    select source_row, customer_id, day, event, event_rank
    from events
    where not ignored and reason is null
),

ordered as (
    select
        source_row,
        event,
        -- the most recent start or end strictly before this row, and whether
        -- any start came before it
        last_value(case when event in ('start', 'end') then event end ignore nulls)
            over before_row as previous_boundary,
        coalesce(bool_or(event = 'start') over before_row, false) as started_before
    from usable
    window before_row as (
        partition by customer_id
        order by day, event_rank, source_row
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
)

select * from final
