-- normalise: one row per input row, in our words.
--
-- Reads the view `source_events` that prepare.py defines over the imported log:
--   source_row, customer_id, event_time, event, reason  (text)
--   malformed (a CSV record that did not split into the file's columns)
--   one text column per attribute, named by group:
--     sc__<name> static categorical   sn__<name> static numeric
--     vc__<name> varying categorical  vn__<name> varying numeric
--     vr__<name> varying numeric with a ratio to its spell-start value
--   and a null placeholder <group>0 for each group (so every group exists).
-- Produces: typed columns, the calendar day in the configured zone, our event,
-- its same-day rank, the cause given by the reason, `reason` = the first
-- row-level quarantine reason (null = usable so far), and the keys the later steps
-- sort on: `ord`, one integer that orders a customer's events by (day, same-day
-- rank, time, source row), and `day_ord`, the `ord` of the day's first possible
-- event. Ignored events are kept with
-- ignored = true so the reconciliation can count them.
-- Parameters: $timezone, $time_kind (iso, pattern, epoch_seconds,
--             epoch_milliseconds), $time_pattern (a valid strptime pattern even
--             when unused), $as_of, $event_from, $event_to, $event_ignore,
--             $reason_from, $reason_to, $reason_ignore.
with imported as (
    select
        source_row,
        malformed,
        customer_id,
        nullif(trim(event_time), '') as time_text,
        nullif(trim(event), '') as event_raw,
        nullif(trim(reason), '') as reason_raw,
        -- categorical values as members of the ENUM type `category` (categories.sql)
        cast(nullif(trim(columns('^([sv]c__.*)$')), '') as category) as '\1',
        nullif(trim(columns('^([sv][nr]__.*)$')), '') as 'text__\1'
    from source_events
),

parsed as (
    select
        *,
        -- ISO text (a date alone is its midnight) or the [columns] time_format
        -- pattern; a time without an offset is a wall-clock time in the session
        -- zone, which prepare.py sets to $timezone
        case
            when $time_kind = 'iso' then try_cast(time_text as timestamptz)
            when $time_kind = 'pattern'
                then cast(try_strptime(time_text, $time_pattern) as timestamptz)
        end as parsed_ts,
        -- epoch seconds or milliseconds: an instant, whatever the zone
        case
            when $time_kind = 'epoch_seconds' then try_cast(time_text as double)
            when $time_kind = 'epoch_milliseconds' then try_cast(time_text as double) / 1000
        end as epoch_s
    from imported
),

timed as (
    select
        *,
        -- times the later steps cannot order or count days on: infinity (as
        -- database exports write it) and anything outside 1900-01-01 .. 2199-12-31
        case
            when parsed_ts is not null and not isfinite(parsed_ts) then 'non-finite time'
            when parsed_ts < timestamptz '1900-01-01 00:00:00+00'
                or parsed_ts >= timestamptz '2200-01-01 00:00:00+00' then 'time out of range'
            when epoch_s is not null and not isfinite(epoch_s) then 'non-finite time'
            when epoch_s < -2208988800 or epoch_s >= 7258118400 then 'time out of range'
        end as time_problem
    from parsed
),

typed as (
    select
        * exclude (parsed_ts, epoch_s),
        case
            when time_problem is not null then null
            when parsed_ts is not null then parsed_ts
            when epoch_s is not null then to_timestamp(epoch_s)
        end as event_ts,
        try_cast(columns('^text__(.*)$') as double) as '\1',
        (columns('^text__(.*)$') is not null
            and not coalesce(isfinite(try_cast(columns('^text__(.*)$') as double)), false))
            as 'bad__\1'
    from timed
),

mapped as (
    select
        *,
        -- the calendar day in the zone; in UTC straight from the instant (the zone
        -- conversion costs more than all the rest of the row)
        case
            when $timezone = 'UTC' then cast(make_timestamp(epoch_us(event_ts)) as date)
            else cast(timezone($timezone, event_ts) as date)
        end as day,
        cast($event_to as varchar[])[list_position(cast($event_from as varchar[]), event_raw)]
            as event,
        coalesce(list_contains(cast($event_ignore as varchar[]), event_raw), false) as ignored,
        case
            when list_contains(cast($reason_ignore as varchar[]), reason_raw) then null
            else cast($reason_to as varchar[])[
                list_position(cast($reason_from as varchar[]), reason_raw)]
        end as cause_given,
        reason_raw is not null
            and not list_contains(cast($reason_ignore as varchar[]), reason_raw)
            and not list_contains(cast($reason_from as varchar[]), reason_raw) as reason_unknown,
        greatest(*columns('^bad__')) as bad_number
    from typed
),

flagged as (
    select
        *,
        case
            when malformed then 'malformed CSV record'
            when ignored then null
            when customer_id is null or trim(customer_id) = '' then 'missing id'
            when time_problem is not null then time_problem
            when event_ts is null then 'unparseable time'
            when event is null then 'unknown event'
            when day > $as_of then 'time after the as-of date'
            when bad_number then 'non-numeric value in a numeric attribute'
            when event = 'end' and reason_unknown then 'unknown churn reason'
        end as row_reason
    from mapped
),

ranked as (
    select
        *,
        list_position(['start', 'update', 'pause', 'resume', 'payment_failed',
                       'payment_recovered', 'end'], event) - 1 as event_rank,
        -- days since 1970 plus 2^20, so every field of `ord` is non-negative
        date_diff('day', date '1970-01-01', day) + 1048576 as day_number
    from flagged
),

keyed as (
    select
        *,
        -- three fields, high to low: day * 8 + rank | microseconds since the day's
        -- UTC midnight, shifted to be non-negative (a local day lies within 2^37 us
        -- of it) | source row (below 2^40)
        cast(day_number * 8 + event_rank as hugeint) * cast(2 ^ 78 as hugeint)
            + cast(epoch_us(event_ts) - (day_number - 1048576) * cast(86400000000 as bigint)
                   + (cast(1 as bigint) << 37) as hugeint) * cast(2 ^ 40 as hugeint)
            + source_row as ord,
        cast(day_number * 8 as hugeint) * cast(2 ^ 78 as hugeint) as day_ord
    from ranked
),

final as (
    select
        cast(source_row as bigint) as source_row,
        cast(customer_id as varchar) as customer_id,
        cast(day as date) as day,
        cast(event_ts as timestamptz) as event_ts,
        cast(event_raw as varchar) as event_raw,
        cast(reason_raw as varchar) as reason_raw,
        cast(event as varchar) as event,
        cast(event_rank as integer) as event_rank,
        cast(cause_given as varchar) as cause_given,
        cast(ignored as boolean) as ignored,
        cast(row_reason as varchar) as reason,
        cast(ord as hugeint) as ord,
        cast(day_ord as hugeint) as day_ord,
        cast(columns('^([sv]c__.*)$') as category) as '\1',
        cast(columns('^[sv][nr]__.*$') as double)
    from keyed
)

select * from final
