-- exposure_tenure: central exposure and churns by segment and tenure month
-- (before the running sums: see exposure_running).
--
-- Reads the view exposure_input(segment varchar, start double, stop double,
-- churned integer, cause varchar, weight double) that the caller registers.
-- Band k (k = 0, 1, ...) is tenure (k*D, (k+1)*D] days with D = $days_per_month.
-- A row at risk on (start, stop] adds its overlap with each band (delayed
-- entry: nothing before start); its churn falls in the band holding stop.
-- Bands k >= $n_bands are left out (pass a large number for no limit).
--
-- No row is exploded into one row per band: each row adds its partial first
-- and last band, and +weight / -weight at the ends of its run of full bands;
-- a running sum over bands counts the full bands (a difference array).
with rows_in as (
    select
        segment,
        start,
        least(stop, $n_bands * $days_per_month) as stop_in,
        stop,
        churned,
        cause,
        weight
    from exposure_input
    where start < $n_bands * $days_per_month
),

banded as (
    select
        *,
        cast(floor(start / $days_per_month) as bigint) as first_band,
        cast(ceil(stop_in / $days_per_month) - 1 as bigint) as last_band,
        -- first band whose lower edge is >= start: in force from there
        cast(ceil(start / $days_per_month) as bigint) as entry_band
    from rows_in
),

at_first as (
    select
        segment,
        first_band as band,
        sum(weight * (least(stop_in, (first_band + 1) * $days_per_month) - start))
            as exposure_days,
        sum(case when last_band > first_band then weight else 0 end) as full_from_next,
        -- in force from the first band edge >= start: this band (start on an edge) or
        -- the next one (start inside the band), if the row reaches it
        sum(case when entry_band = first_band then weight else 0 end) as entering_here,
        sum(case when entry_band > first_band and entry_band <= last_band
                 then weight else 0 end) as entering_next
    from banded
    group by segment, first_band
),

at_last as (
    select
        segment,
        last_band as band,
        sum(case when last_band > first_band
                 then weight * (stop_in - last_band * $days_per_month) else 0 end)
            as exposure_days,
        sum(case when last_band > first_band then weight else 0 end) as full_until,
        sum(case when entry_band <= last_band then weight else 0 end) as leaving_after,
        sum(case when churned = 1 and stop = stop_in then weight else 0 end) as churns,
        sum(case when churned = 1 and stop = stop_in and cause = 'voluntary'
                 then weight else 0 end) as churns_voluntary,
        sum(case when churned = 1 and stop = stop_in and cause = 'involuntary'
                 then weight else 0 end) as churns_involuntary
    from banded
    group by segment, last_band
),

-- every change, keyed by the band it applies to
deltas as (
    select segment, band, exposure_days, 0.0 as full_delta, entering_here as force_delta,
           0.0 as churns, 0.0 as churns_voluntary, 0.0 as churns_involuntary
    from at_first
    union all
    select segment, band + 1, 0.0, full_from_next, entering_next, 0.0, 0.0, 0.0
    from at_first
    union all
    select segment, band, exposure_days, -full_until, 0.0,
           churns, churns_voluntary, churns_involuntary
    from at_last
    union all
    select segment, band + 1, 0.0, 0.0, -leaving_after, 0.0, 0.0, 0.0
    from at_last
),

summed as (
    select
        segment,
        band,
        sum(exposure_days) as exposure_days,
        sum(full_delta) as full_delta,
        sum(force_delta) as force_delta,
        sum(churns) as churns,
        sum(churns_voluntary) as churns_voluntary,
        sum(churns_involuntary) as churns_involuntary
    from deltas
    group by segment, band
),

grid as (
    select
        segments.segment,
        bands.band
    from (select distinct segment from summed) as segments
    cross join (
        select unnest(range(0, max(last_band) + 1)) as band from banded
    ) as bands
)

-- the grid with each band's totals (null where a band has none) and its width
-- in days; the exposure_running step adds the running sums
select
    cast(grid.segment as varchar) as segment,
    cast(grid.band as bigint) as band,
    cast($days_per_month as double) as month_days,
    cast(summed.exposure_days as double) as exposure_days,
    cast(summed.full_delta as double) as full_delta,
    cast(summed.force_delta as double) as force_delta,
    cast(summed.churns as double) as churns,
    cast(summed.churns_voluntary as double) as churns_voluntary,
    cast(summed.churns_involuntary as double) as churns_involuntary
from grid
left join summed
    on summed.segment = grid.segment and summed.band = grid.band
