-- categories: every distinct value of the categorical attributes, trimmed and
-- non-empty: the members of the ENUM type `category` that normalise casts them
-- to. Small codes instead of text make the rows that the states and intervals
-- windows sort several times narrower; the start-stop table gets text back.
-- Reads the view `source_events` (see normalise.sql). One scan: a distinct list
-- per column (a list per column, not the distinct combinations, so one column
-- with many values cannot blow up the rest).
with per_column as (
    select list(distinct columns('^[sv]c__.*$'))
    from source_events
),

flat as (
    select nullif(trim(unnest(flatten([*columns(*)]))), '') as value
    from per_column
),

final as (
    select distinct cast(value as varchar) as value
    from flat
    where value is not null
)

select * from final
