-- states: every used event with its customer's state just after it, in one
-- window per customer.
--
-- Reads the view `state_input` (prepare.py points it at `state_input_all`,
-- every usable row, then at `state_input_redo`, the used rows of the few
-- customers the first pass flags). Events in the fixed order `ord` (day,
-- same-day rank start < update < pause < resume < payment_failed <
-- payment_recovered < end, time, source row). The windows sort on
-- `ord_key`, the fields of `ord` above the source row (day, rank, time) as a
-- BIGINT (a narrower sort key than the HUGEINT). Rows with equal keys (same
-- day, rank and time) are `same_moment`, so their customer is suspect and its
-- states come from the second pass, where the reorder step makes every key
-- unique.
--   spell        number of starts so far (1, 2, ...)
--   start_day    day of the spell's start (tenure 0)
--   varying attributes: last non-empty value on a start or update row
--                (an empty value on a later start keeps the last known value)
--   static attributes: the customer's first non-empty value
--   paused       1 after pause, 0 after resume or start
--   in_recovery  1 after payment_failed, 0 after payment_recovered or start
--   cause        on end rows: the mapped reason, else involuntary when in
--                recovery at the end, else voluntary
--   last_of_day  the row is the day's last for its customer: its state is the
--                state the next interval carries
--   changed      the state after this row differs from the state at the end
--                of the customer's previous day with events (always true on
--                the spell's first day): a day that is a cut
--   end_day      the day the spell ended (null while open)
--   outside_window  the spell began before $window_start and ended on or
--                before it, so it never entered the window
--   suspect      the row may be out of order or a repeat: a start while a
--                spell is open, an end or other event while none is, or the
--                same customer, day, rank and time as the next row. The
--                sequence step checks the customers with a suspect row one
--                row at a time; their states are then computed again from
--                their used rows, and this pass's rows of them are not used.
-- Each quantity that a row may set is a `set__` column (null where the row
-- leaves it alone), so one pattern forward-fills them all.
-- Parameters: $window_start (date or null).
with keyed as (
    select
        customer_id,
        source_row,
        day,
        event_rank,
        cause_given,
        cast(ord >> 40 as bigint) as ord_key,
        cast(day_ord >> 40 as bigint) as day_key,
        -- starts in the high bits, ends in the low bits: one running sum gives both
        case event_rank when 0 then cast(1 as bigint) << 32 when 6 then 1 else 0 end
            as boundary_code,
        case when event_rank = 0 then day end as set__start_day,
        case event_rank when 2 then 1 when 3 then 0 when 0 then 0 end as set__paused,
        case event_rank when 4 then 1 when 5 then 0 when 0 then 0 end as set__in_recovery,
        case when event_rank <= 1 then columns('^(v[cnr]__.*)$') end as 'set__\1',
        columns('^(s[cn]__.*)$')
    from state_input
),

walked as (
    select
        customer_id,
        source_row,
        day,
        event_rank,
        cause_given,
        ord_key,
        day_key,
        sum(boundary_code) over upto as boundaries,
        -- starts come in day order, so the spell's start day is the latest so far (a
        -- running max: no backward search for the last non-null over a long history)
        max(set__start_day) over upto as start_day,
        -- the value of the latest row that set it (last_value ignoring nulls would
        -- search back from each row: a scan per row when a long history rarely sets it)
        arg_max(columns('^set__(paused|in_recovery|v[cnr]__[A-Za-z].*)$'), ord_key)
            over upto as '\1',
        -- the state at the end of the customer's previous day with events: over the
        -- earlier days (peer groups of day_key), the value of the latest row that set it
        arg_max(columns('^set__(paused|in_recovery|v[cnr]__[A-Za-z].*)$'), ord_key)
            over before_day as 'before__\1',
        -- the first non-empty value (first_value ignoring nulls searches forward from
        -- each row, so an all-empty column costs a long history a scan per row: the
        -- pattern's extra match is customer_id, never empty, not the placeholder sc__0)
        first_value(columns('^(customer_id|s[cn]__[A-Za-z].*)$') ignore nulls) over whole
            as 'first__\1',
        -- the next end on or after this row ends this row's spell (for a
        -- customer without suspect rows every end closes an open spell); ends
        -- come in day order, so it is the earliest end day from here on
        min(case when event_rank = 6 then day end) over rest as end_day,
        lead(ord_key) over upto as next_key
    from keyed
    window
        -- ord_key begins with the day, so (day_key, ord_key) is ord_key's order; written
        -- so, the four windows share one sort. The earlier days are a GROUPS frame: a
        -- RANGE frame ending just before the day's first key searched for its end in the
        -- sorted partition at every row and expression, which made one customer with a
        -- long history cost far more per event than short ones
        upto as (partition by customer_id order by day_key, ord_key
                 rows between unbounded preceding and current row),
        rest as (partition by customer_id order by day_key, ord_key
                 rows between current row and unbounded following),
        whole as (partition by customer_id order by day_key, ord_key
                  rows between unbounded preceding and unbounded following),
        before_day as (partition by customer_id order by day_key
                       groups between unbounded preceding and 1 preceding)
),

packed as (
    select
        *,
        boundaries >> 32 as spell,
        (boundaries >> 32) - (boundaries & 4294967295) as open_spells,
        -- the next row falls on a later day (day_key steps by 2^41 a day)
        coalesce(next_key >= day_key + (cast(1 as bigint) << 41), true) as is_last_of_day,
        -- the next row has the same day, rank and time (the same key)
        coalesce(next_key = ord_key, false) as same_moment,
        row(*columns('^(v[cnr]__[A-Za-z].*|paused|in_recovery)$')) as state_after,
        row(*columns('^before__.*$')) as state_before,
        cast(null as category) as first__sc__0,
        cast(null as category) as vc__0,
        cast(null as double) as vn__0,
        cast(null as double) as vr__0,
        cast(null as double) as first__sn__0
    from walked
),

final as (
    select
        cast(customer_id as varchar) as customer_id,
        cast(source_row as bigint) as source_row,
        cast(spell as bigint) as spell,
        cast(start_day as date) as start_day,
        cast(day as date) as day,
        cast(date_diff('day', start_day, day) as integer) as tenure,
        cast(event_rank as integer) as event_rank,
        cast(case
            when event_rank <> 6 then null
            when cause_given is not null then cause_given
            when in_recovery = 1 then 'involuntary'
            else 'voluntary'
        end as varchar) as cause,
        cast(is_last_of_day as boolean) as last_of_day,
        cast(day = start_day or state_after is distinct from state_before as boolean)
            as changed,
        cast(end_day as date) as end_day,
        cast(coalesce(start_day < $window_start and end_day <= $window_start, false) as boolean)
            as outside_window,
        cast(coalesce(paused, 0) as integer) as paused,
        cast(coalesce(in_recovery, 0) as integer) as in_recovery,
        columns('^v[cnr]__.*$'),  -- typed by normalise: category or double
        columns('^first__(s[cn]__.*)$') as '\1',
        cast(case when event_rank = 6 then open_spells <> 0 else open_spells <> 1 end
             or same_moment as boolean) as suspect
    from packed
)

select * from final
