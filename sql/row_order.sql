-- row_order: the positions of the start-stop rows in the order (customer_id,
-- spell, start). Sorting these three keys and the row number is far cheaper
-- than sorting whole rows; prepare.py puts the Arrow table in this order.
select rowid as position
from start_stop
order by customer_id, spell, start
