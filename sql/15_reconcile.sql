-- reconcile: what became of every input row. Each row falls in exactly one
-- line: used (in the window), used but outside the window, ignored, or
-- quarantined with its reason (and the reason's stable code from
-- `reason_codes`; empty on the other lines). prepare.py checks that the lines
-- add up to the rows read and raises if they do not.
with row_fates as (
    select 'ignored' as outcome, '' as reason, count(*) as n_rows
    from events
    where ignored
    union all
    select 'quarantined' as outcome, reason, count(*) as n_rows
    from events
    where reason is not null
    group by reason
    union all
    select 'quarantined' as outcome, reason, count(*) as n_rows
    from sequence_problems
    group by reason
    union all
    select
        case when outside_window then 'outside window' else 'used' end as outcome,
        '' as reason,
        count(*) as n_rows
    from spells
    group by outside_window
),

counted as (
    select outcome, reason, sum(n_rows) as n_rows
    from row_fates
    group by outcome, reason
),

final as (
    select
        cast(f.outcome as varchar) as outcome,
        cast(f.reason as varchar) as reason,
        cast(coalesce(c.code, '') as varchar) as code,
        cast(f.n_rows as bigint) as n_rows
    from counted as f
    left join reason_codes as c on c.reason = f.reason
)

select * from final
order by outcome, reason
