-- exposure_tenure: central exposure and churns by segment and tenure band
-- (before the running sums: see exposure_running).
--
-- Reads the view exposure_input(segment varchar, start double, stop double,
-- churned integer, cause varchar, weight double) that the caller registers.
-- Bands are tenure months or the user's own bands:
--   $by_edges false: band k (k = 0, 1, ...) is tenure (k*D, (k+1)*D] days with
--     D = $days_per_month; bands k >= $n_bands are left out (pass a large number
--     for no limit);
--   $by_edges true: $edges lists the band edges in days, e_0 = 0 < e_1 < ... < e_K,
--     band k (k = 0 .. K-1) is tenure (e_k, e_k+1]; time at risk and churns after
--     e_K are left out.
-- A row at risk on (start, stop] adds its overlap with each band (delayed entry:
-- nothing before start); its churn falls in the band holding stop, so a churn
-- exactly on an edge counts in the band that ends there.
--
-- No row is exploded into one row per band: each row adds its partial first
-- and last band, and +weight / -weight at the ends of its run of full bands;
-- exposure_running multiplies the running count of full bands by each band's
-- width (a difference array). Month bands are found by arithmetic, user bands
-- by counting the edges below (only the branch $by_edges names is evaluated).
with rows_in as (
    select
        segment,
        start,
        least(stop, case when $by_edges then list_last(cast($edges as double[]))
                         else $n_bands * $days_per_month end) as stop_in,
        stop,
        churned,
        cause,
        weight
    from exposure_input
    where start < case when $by_edges then list_last(cast($edges as double[]))
                       else $n_bands * $days_per_month end
),

banded as (
    select
        *,
        -- band k holds start when e_k <= start < e_k+1 (lists count from 1)
        cast(case when $by_edges
                  then len(list_filter(cast($edges as double[]), lambda e: e <= start)) - 1
                  else floor(start / $days_per_month) end as bigint) as first_band,
        -- band k holds stop_in when e_k < stop_in <= e_k+1: (a, b] bands
        cast(case when $by_edges
                  then len(list_filter(cast($edges as double[]), lambda e: e < stop_in)) - 1
                  else ceil(stop_in / $days_per_month) - 1 end as bigint) as last_band,
        -- first band whose lower edge is >= start: in force from there
        cast(case when $by_edges
                  then len(list_filter(cast($edges as double[]), lambda e: e < start))
                  else ceil(start / $days_per_month) end as bigint) as entry_band
    from rows_in
),

edged as (
    select
        *,
        -- the upper edge of the first band and the lower edge of the last
        case when $by_edges then list_extract(cast($edges as double[]), first_band + 2)
             else (first_band + 1) * $days_per_month end as first_upper,
        case when $by_edges then list_extract(cast($edges as double[]), last_band + 1)
             else last_band * $days_per_month end as last_lower
    from banded
),

at_first as (
    select
        segment,
        first_band as band,
        sum(weight * (least(stop_in, first_upper) - start)) as exposure_days,
        sum(case when last_band > first_band then weight else 0 end) as full_from_next,
        -- in force from the first band edge >= start: this band (start on an edge) or
        -- the next one (start inside the band), if the row reaches it
        sum(case when entry_band = first_band then weight else 0 end) as entering_here,
        sum(case when entry_band > first_band and entry_band <= last_band
                 then weight else 0 end) as entering_next
    from edged
    group by segment, first_band
),

at_last as (
    select
        segment,
        last_band as band,
        sum(case when last_band > first_band
                 then weight * (stop_in - last_lower) else 0 end)
            as exposure_days,
        sum(case when last_band > first_band then weight else 0 end) as full_until,
        sum(case when entry_band <= last_band then weight else 0 end) as leaving_after,
        sum(case when churned = 1 and stop = stop_in then weight else 0 end) as churns,
        sum(case when churned = 1 and stop = stop_in and cause = 'voluntary'
                 then weight else 0 end) as churns_voluntary,
        sum(case when churned = 1 and stop = stop_in and cause = 'involuntary'
                 then weight else 0 end) as churns_involuntary
    from edged
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

-- every band (user bands: all of them; months: up to the last one reached)
bands as (
    select unnest(range(0, case when $by_edges then len(cast($edges as double[])) - 1
                                else (select max(last_band) + 1 from banded) end)) as band
),

-- every band of every segment, with its width in days
grid as (
    select
        segments.segment,
        bands.band,
        case when $by_edges
             then list_extract(cast($edges as double[]), bands.band + 2)
                  - list_extract(cast($edges as double[]), bands.band + 1)
             else $days_per_month end as width_days
    from (select distinct segment from summed) as segments
    cross join bands
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
