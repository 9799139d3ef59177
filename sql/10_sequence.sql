-- sequence: usable rows that cannot be used because of the rows around them.
--
-- Reads `troubled_repeats` (exact repeats) and `troubled_ordered` (the flagged
-- customers' other rows, in the order of the reorder step; every other
-- customer's rows are in order and unrepeated).
-- Order: a spell is opened by `start` and closed by `end`. With the rows in
-- the order `ord` the state before a row is "open" exactly when the last
-- start/end before it is a start: in a run of starts only the first opens a
-- spell, in a run of ends only the first closes it, and the state after a run
-- is its kind.
-- Produces one row per problem: source_row, reason.
with ordered as (
    select
        u.source_row,
        u.event,
        -- the most recent start or end strictly before this row, and whether
        -- any start came before it
        last_value(case when u.event in ('start', 'end') then u.event end ignore nulls)
            over before_row as previous_boundary,
        coalesce(bool_or(u.event = 'start') over before_row, false) as started_before
    from troubled_ordered as u
    window before_row as (
        partition by u.customer_id order by u.ord
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
    from troubled_repeats
)

select * from final
