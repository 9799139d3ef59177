-- import_parquet: a Parquet event log, every column cast to text (the
-- quarantine keeps original values as text; the normalise step parses them).
-- Parameters: $path (file or glob).
select cast(columns(*) as varchar)
from read_parquet($path)
