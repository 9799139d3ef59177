-- import_csv: the CSV event log exactly as written, every column as text, so
-- that a bad value can be quarantined with its original spelling.
-- Parameters: $path (file or glob).
select *
from read_csv($path, all_varchar = true, header = true, auto_detect = true)
