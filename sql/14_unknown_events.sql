-- unknown_events: each event value that is neither mapped nor ignored, with
-- the number of rows carrying it (so the mapping in retain.toml can be fixed).
with unknown as (
    select event_raw from events where reason = 'unknown event'
),

final as (
    select cast(coalesce(event_raw, '') as varchar) as value, cast(count(*) as bigint) as n_rows
    from unknown
    group by event_raw
)

select * from final
order by n_rows desc, value
