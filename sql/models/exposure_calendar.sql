-- exposure_calendar: central exposure and churns by segment and calendar month
-- (before the running sums: see exposure_running).
--
-- Reads the view exposure_input(segment varchar, start double, stop double,
-- churned integer, cause varchar, weight double, start_date date).
-- Tenure x of a row is calendar time start_date + x days; calendar month M is
-- the time from midnight of its first day to midnight of the next month's first
-- day. Exposure is the overlap of (start, stop] with each month, in days; a
-- churn counts in the month of its calendar day, start_date + floor(stop)
-- (a churn on the start day has stop 0.5 and so counts on that day).
-- Months are numbered year * 12 + month - 1.
-- Same difference-array method as exposure_tenure: no row is exploded.
with rows_in as (
    select
        segment,
        start,
        stop,
        churned,
        cause,
        weight,
        cast(date_diff('day', date '1970-01-01', start_date) as double) as day0,
        start_date
    from exposure_input
),

banded as (
    select
        *,
        day0 + start as lo,
        day0 + stop as hi,
        year(start_date + cast(floor(start) as integer)) * 12
            + month(start_date + cast(floor(start) as integer)) - 1 as first_band,
        -- the day before ceil(hi) holds the last moment at risk
        year(start_date + cast(ceil(stop) - 1 as integer)) * 12
            + month(start_date + cast(ceil(stop) - 1 as integer)) - 1 as last_band,
        -- first month whose first day starts at or after lo
        year(start_date + cast(ceil(start) - 1 as integer)) * 12
            + month(start_date + cast(ceil(start) - 1 as integer)) as entry_band,
        year(start_date + cast(floor(stop) as integer)) * 12
            + month(start_date + cast(floor(stop) as integer)) - 1 as churn_band
    from rows_in
),

edged as (
    select
        *,
        cast(date_diff('day', date '1970-01-01',
             make_date(cast((first_band + 1) // 12 as bigint),
                       cast((first_band + 1) % 12 + 1 as bigint), 1)) as double)
            as first_band_end,
        cast(date_diff('day', date '1970-01-01',
             make_date(cast(last_band // 12 as bigint), cast(last_band % 12 + 1 as bigint), 1))
             as double) as last_band_begin
    from banded
),

at_first as (
    select
        segment,
        first_band as band,
        sum(weight * (least(hi, first_band_end) - lo)) as exposure_days,
        sum(case when last_band > first_band then weight else 0 end) as full_from_next
    from edged
    group by segment, first_band
),

at_last as (
    select
        segment,
        last_band as band,
        sum(case when last_band > first_band then weight * (hi - last_band_begin) else 0 end)
            as exposure_days,
        sum(case when last_band > first_band then weight else 0 end) as full_until,
        sum(case when entry_band <= last_band then weight else 0 end) as leaving_after
    from edged
    group by segment, last_band
),

at_entry as (
    select
        segment,
        entry_band as band,
        sum(weight) as entering
    from edged
    where entry_band <= last_band
    group by segment, entry_band
),

at_churn as (
    select
        segment,
        churn_band as band,
        sum(weight) as churns,
        sum(case when cause = 'voluntary' then weight else 0 end) as churns_voluntary,
        sum(case when cause = 'involuntary' then weight else 0 end) as churns_involuntary
    from edged
    where churned = 1
    group by segment, churn_band
),

deltas as (
    select segment, band, exposure_days, 0.0 as full_delta, 0.0 as force_delta,
           0.0 as churns, 0.0 as churns_voluntary, 0.0 as churns_involuntary
    from at_first
    union all
    select segment, band + 1, 0.0, full_from_next, 0.0, 0.0, 0.0, 0.0
    from at_first
    union all
    select segment, band, exposure_days, -full_until, 0.0, 0.0, 0.0, 0.0
    from at_last
    union all
    select segment, band + 1, 0.0, 0.0, -leaving_after, 0.0, 0.0, 0.0
    from at_last
    union all
    select segment, band, 0.0, 0.0, entering, 0.0, 0.0, 0.0
    from at_entry
    union all
    select segment, band, 0.0, 0.0, 0.0, churns, churns_voluntary, churns_involuntary
    from at_churn
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

months as (
    select
        band,
        cast(date_diff('day',
             make_date(cast(band // 12 as bigint), cast(band % 12 + 1 as bigint), 1),
             make_date(cast((band + 1) // 12 as bigint), cast((band + 1) % 12 + 1 as bigint), 1))
             as double) as month_days
    from (
        select unnest(range(min(first_band), greatest(max(last_band), max(churn_band)) + 1))
            as band
        from edged
    )
),

grid as (
    select
        segments.segment,
        months.band,
        months.month_days
    from (select distinct segment from summed) as segments
    cross join months
)

-- the grid with each band's totals (null where a band has none) and its width
-- in days; the exposure_running step adds the running sums
select
    cast(grid.segment as varchar) as segment,
    cast(grid.band as bigint) as band,
    cast(grid.month_days as double) as month_days,
    cast(summed.exposure_days as double) as exposure_days,
    cast(summed.full_delta as double) as full_delta,
    cast(summed.force_delta as double) as force_delta,
    cast(summed.churns as double) as churns,
    cast(summed.churns_voluntary as double) as churns_voluntary,
    cast(summed.churns_involuntary as double) as churns_involuntary
from grid
left join summed
    on summed.segment = grid.segment and summed.band = grid.band
