-- import_table: a table in the user's DuckDB file (prepare.py attaches it and
-- names it `source_table`), every column cast to text.
select cast(columns(*) as varchar)
from source_table
