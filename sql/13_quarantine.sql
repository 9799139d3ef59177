-- quarantine: every row that could not be used, with its original text, the
-- reason and the reason's stable code. Reads `raw` (the imported log, all text,
-- rowid = source row - 1), `events` (row-level reasons), `sequence_problems`
-- (order reasons) and `reason_codes` (reason -> code).
with problems as (
    select source_row, reason from events where reason is not null
    union all
    select source_row, reason from sequence_problems
),

originals as (
    select rowid + 1 as source_row, * from raw
),

final as (
    select
        cast(o.source_row as bigint) as source_row,
        o.* exclude (source_row),
        cast(p.reason as varchar) as quarantine_reason,
        cast(c.code as varchar) as quarantine_code
    from problems as p
    inner join originals as o on o.source_row = p.source_row
    left join reason_codes as c on c.reason = p.reason
)

select * from final
order by source_row
