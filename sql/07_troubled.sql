-- troubled: the usable rows of every customer with a suspect row in the
-- states step's first pass (`first_pass.suspect`: possibly out of order or a
-- repeat). Few customers; the sequence step checks them row by row.
with customers_to_check as (
    select distinct customer_id
    from first_pass
    where suspect
)

select e.*
from events as e
semi join customers_to_check as c on e.customer_id = c.customer_id
where not e.ignored and e.reason is null
