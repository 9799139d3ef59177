-- state_input_redo: the rows the states step reads on its second pass: the
-- used rows of the customers the sequence step checked, in the reorder step's
-- order (their repeats and rows out of order left out).
select t.*
from troubled_ordered as t
anti join sequence_problems as p on t.source_row = p.source_row
