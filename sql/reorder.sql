-- reorder: the flagged customers' rows without their repeats, in the order the
-- rules give when a spell is open at the start of a day that has both an end
-- and a start: the end first, then the start (a cancel and a reactivation on
-- one day). On any other day the fixed same-day order stands (a signup and a
-- cancel on one day: the start first). Only a customer with such a day is
-- ever flagged (its start meets an open spell in the one-pass order).
-- "Open at the start of the day": among the customer's rows of earlier days,
-- starts outnumber ends.
-- Reads `troubled_events` and `repeats`. Same columns as troubled_events;
-- such a start's `ord` moves after the day's events (same-day rank 7).
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
        bool_or(event_rank = 6) over same_day as day_has_end
    from kept
    window
        earlier_days as (partition by customer_id order by day_number
                         range between unbounded preceding and 1 preceding),
        same_day as (partition by customer_id, day)
),

final as (
    select
        * exclude (day_number, open_at_day_start, day_has_end, ord),
        cast(case
            when event_rank = 0 and open_at_day_start and day_has_end
                then ord + 7 * cast(2 ^ 78 as hugeint)
            else ord
        end as hugeint) as ord
    from counted
)

select * from final
