-- exposure_bands: central exposure and churns by segment and user tenure band
-- (before the running sums: see exposure_running).
--
-- Reads the view exposure_input(segment varchar, start double, stop double,
-- churned integer, cause varchar, weight double) that the caller registers.
-- $edges is the list of band edges in days, e_0 = 0 < e_1 < ... < e_K; band k
-- (k = 0 .. K-1) is tenure (e_k, e_k+1]. A row at risk on (start, stop] adds
-- its overlap with each band (delayed entry: nothing before start); its churn
-- falls in the band holding stop, so a churn exactly on an edge e_k+1 counts
-- in band k, the band that ends there. Time at risk and churns after e_K are
-- left out.
--
-- As in exposure_tenure, no row is exploded into one row per band: each row
-- adds its partial first and last band, and +weight / -weight at the ends of
-- its run of full bands; exposure_running multiplies the running count of
-- full bands by each band's own width (column month_days).
with rows_in as (
    select
        segment,
        start,
        least(stop, list_last($edges)) as stop_in,
        stop,
        churned,
        cause,
        weight
    from exposure_input
    where start < list_last($edges)
),

banded as (
    select
        *,
        -- band k holds start when e_k <= start < e_k+1 (lists count from 1)
        cast(len(list_filter($edges, lambda e: e <= start)) - 1 as bigint) as first_band,
        -- band k holds stop_in when e_k < stop_in <= e_k+1: (a, b] bands
        cast(len(list_filter($edges, lambda e: e < stop_in)) - 1 as bigint) as last_band,
        -- first band whose lower edge is >= start: in force from there
        cast(len(list_filter($edges, lambda e: e < start)) as bigint) as entry_band
    from rows_in
),

at_first as (
    select
        segment,
        first_band as band,
        sum(weight * (least(stop_in, list_extract($edges, first_band + 2)) - start))
            as exposure_days,
        sum(case when last_band > first_band then weight else 0 end) as full_from_next,
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
                 then weight * (stop_in - list_extract($edges, last_band + 1)) else 0 end)
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

-- every band of every segment, with its width in days
grid as (
    select
        segments.segment,
        bands.band,
        list_extract($edges, bands.band + 2) - list_extract($edges, bands.band + 1)
            as width_days
    from (select distinct segment from summed) as segments
    cross join (
        select unnest(range(0, len($edges) - 1)) as band
    ) as bands
)

-- the grid with each band's totals (null where a band has none) and its width
-- in days; the exposure_running step adds the running sums
select
    cast(grid.segment as varchar) as segment,
    cast(grid.band as bigint) as band,
    cast(grid.width_days as double) as month_days,
    cast(summed.exposure_days as double) as exposure_days,
    cast(summed.full_delta as double) as full_delta,
    cast(summed.force_delta as double) as force_delta,
    cast(summed.churns as double) as churns,
    cast(summed.churns_voluntary as double) as churns_voluntary,
    cast(summed.churns_involuntary as double) as churns_involuntary
from grid
left join summed
    on summed.segment = grid.segment and summed.band = grid.band
