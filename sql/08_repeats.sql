-- repeats: exact repeats among the rows of the customers the states step
-- flagged (`troubled_events`; every other customer's rows are unrepeated).
-- Rows identical in customer, time, event value, reason and every attribute
-- (numbers compared as numbers) are one event; of each set the first (lowest
-- source row) is used.
-- Produces one row per repeat: source_row, reason.
with copies as (
    select
        source_row,
        row_number() over (
            partition by customer_id, event_ts, event_raw, reason_raw,
                         row(*columns('^[sv][cnr]__'))
            order by source_row
        ) as copy_number
    from troubled_events
),

final as (
    select cast(source_row as bigint) as source_row, cast('exact duplicate' as varchar) as reason
    from copies
    where copy_number > 1
)

select * from final
