-- state_input_all: the rows the states step reads on its first pass: every
-- usable row (no row-level reason, not ignored).
select *
from events
where not ignored and reason is null
