-- reorder: the flagged customers' rows without their repeats, in the order the
-- same-day rules give (DEVELOPERS.md, "Preparation rules"):
--   * a day that holds more than one start or more than one end: its events in
--     time order (then the fixed same-day rank, then source row), so that a
--     signup, a cancel and a signup again on one day make two spells;
--   * otherwise, a day that begins with a spell open and holds an end (and a
--     start): the end first, then the start (a cancel and a reactivation);
--   * any other day keeps the fixed same-day order (a signup and a cancel on
--     one day: the start first, whatever their times).
-- Only a customer with such a day is ever flagged by these rules (in the
-- one-pass order, with a day's starts before its ends, a start meets an open
-- spell or an end meets none on it).
-- "Open at the start of the day": among the customer's rows of earlier days,
-- starts outnumber ends.
-- Reads `troubled_events` and `repeats`. Same columns as troubled_events, with
-- `ord` rewritten within its day's range [day_ord, day_ord + 2^81): first the
-- rules' key (a moved start takes same-day rank 7; a time-ordered day's key is
-- day_ord + time * 2^43 + rank * 2^40 + source row, time being the field of ord
-- between bits 40 and 78), then day_ord + (place in the day) * 2^40 + source row,
-- so that no two rows of a customer share the fields above the source row (the
-- states step sorts on those alone).
with kept as (
    select t.*, date_diff('day', date '1970-01-01', t.day) as day_number
    from troubled_events as t
    anti join troubled_repeats as r on t.source_row = r.source_row
),

counted as (
    select
        *,
        coalesce(sum(case event_rank when 0 then 1 when 6 then -1 else 0 end) over earlier_days,
                 0) > 0 as open_at_day_start,
        count(*) filter (where event_rank = 0) over same_day as day_starts,
        count(*) filter (where event_rank = 6) over same_day as day_ends
    from kept
    window
        earlier_days as (partition by customer_id order by day_number
                         range between unbounded preceding and 1 preceding),
        same_day as (partition by customer_id, day)
),

by_rule as (
    select
        * exclude (day_number, open_at_day_start, day_starts, day_ends, ord),
        case
            when day_starts > 1 or day_ends > 1
                then day_ord
                    + (ord - day_ord - event_rank * cast(2 ^ 78 as hugeint) - source_row)
                        // cast(2 ^ 40 as hugeint) * cast(2 ^ 43 as hugeint)
                    + event_rank * cast(2 ^ 40 as hugeint) + source_row
            when event_rank = 0 and open_at_day_start and day_ends > 0
                then ord + 7 * cast(2 ^ 78 as hugeint)
            else ord
        end as rule_ord
    from counted
),

final as (
    select
        * exclude (rule_ord),
        cast(day_ord + cast(row_number() over (partition by customer_id, day order by rule_ord)
                            as hugeint) * cast(2 ^ 40 as hugeint) + source_row as hugeint) as ord
    from by_rule
)

select * from final
