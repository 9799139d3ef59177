-- compress: identical start-stop rows collapse into one row whose weight is
-- their count (summed weights). customer_id, spell and start_date are dropped
-- first, as they make every row unique; every other column is kept, so
-- expanding the weights gives back the table without those three columns.
with rows_in as (
    select * exclude (customer_id, spell, start_date)
    from start_stop
),

final as (
    select
        cast(start as double) as start,
        cast(stop as double) as stop,
        cast(churned as integer) as churned,
        cast(cause as varchar) as cause,
        cast(sum(weight) as double) as weight,
        columns(* exclude (start, stop, churned, cause, weight))
    from rows_in
    group by all
)

select * from final
order by all
