-- exposure_running: central exposure, in-force count and churns by segment and
-- band, from the table `exposure_bands` that exposure_tenure or
-- exposure_calendar made. Each band's own exposure is its partial bands plus
-- its width times the running count of rows that cover it in full (a
-- difference array summed over bands); the in-force count is the running sum
-- of entries and exits.
with final as (
    select
        segment,
        band,
        coalesce(exposure_days, 0.0)
            + month_days * sum(coalesce(full_delta, 0.0)) over running as exposure_days,
        sum(coalesce(force_delta, 0.0)) over running as in_force,
        coalesce(churns, 0.0) as churns,
        coalesce(churns_voluntary, 0.0) as churns_voluntary,
        coalesce(churns_involuntary, 0.0) as churns_involuntary
    from exposure_bands
    window running as (
        partition by segment order by band
        rows between unbounded preceding and current row
    )
)

select
    cast(segment as varchar) as segment,
    cast(band as bigint) as band,
    cast(exposure_days as double) as exposure_days,
    cast(in_force as double) as in_force,
    cast(churns as double) as churns,
    cast(churns_voluntary as double) as churns_voluntary,
    cast(churns_involuntary as double) as churns_involuntary
from final
order by segment, band
