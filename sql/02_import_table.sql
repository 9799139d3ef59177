-- import_table: a table in the user's DuckDB file (prepare.py attaches it) or a
-- table in memory (a DataFrame, an Arrow table or a DuckDB relation, which
-- prepare.py registers), named `source_table`, every column cast to text.
select cast(columns(*) as varchar)
from source_table
