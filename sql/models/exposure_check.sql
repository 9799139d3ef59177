-- exposure_check: contract checks on exposure_input before any aggregation.
-- One row: how many rows break each rule, and the first offending row's values.
with checked as (
    select
        start,
        stop,
        churned,
        cause,
        weight,
        start is null or stop is null or not isfinite(start) or not isfinite(stop)
            as bad_missing,
        start >= stop as bad_order,
        start < 0 as bad_negative,
        churned is null or churned not in (0, 1) as bad_churned,
        weight is null or not isfinite(weight) or weight <= 0 as bad_weight,
        cause not in ('', 'voluntary', 'involuntary') as bad_cause
    from exposure_input
)

select
    cast(count(*) as bigint) as n_rows,
    cast(count(*) filter (where bad_missing) as bigint) as n_missing,
    cast(count(*) filter (where bad_order) as bigint) as n_order,
    cast(count(*) filter (where bad_negative) as bigint) as n_negative,
    cast(count(*) filter (where bad_churned) as bigint) as n_churned,
    cast(count(*) filter (where bad_weight) as bigint) as n_weight,
    cast(count(*) filter (where bad_cause) as bigint) as n_cause,
    cast(coalesce(sum(weight * churned), 0) as double) as n_events,
    cast(coalesce(sum(weight * (stop - start)), 0) as double) as exposure_days
from checked
