-- spells: every used event with the state of its customer just after it.
--
-- Reads `first_pass` and `redo` (the states step run on all usable rows, then
-- again on the customers with a suspect row, without their repeats and problem
-- rows). Customers without suspect rows keep their first-pass rows; the others
-- take the second pass. Columns: see states.sql; `event` is the event's name.
with troubled as (
    select distinct customer_id
    from first_pass
    where suspect
),

final as (
    select
        * exclude (suspect),
        cast(['start', 'update', 'pause', 'resume', 'payment_failed', 'payment_recovered',
              'end'][event_rank + 1] as varchar) as event
    from (
        select f.*
        from first_pass as f
        anti join troubled as t on f.customer_id = t.customer_id
        union all
        select r.* from redo as r
    )
)

select * from final
