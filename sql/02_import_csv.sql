-- import_csv: the CSV event log exactly as written, every column as text, so
-- that a bad value can be quarantined with its original spelling.
-- The dialect is pinned, never sniffed: the delimiter, quote, escape, header and
-- encoding come from [source] (defaults , " " header utf-8) and there is no
-- comment character, so a value such as `#2` or `Gold #2` is read whole. The
-- column names come from the file's first record (prepare reads it). A record
-- that does not split into those columns is not read here but stored in the
-- table `retain_rejects` (with its number in the file), so prepare can place it
-- in `raw` and quarantine it.
-- Parameters: $path (file or glob), $delimiter, $quote, $escape, $header,
--             $encoding, $columns (name -> varchar for every column).
select *
from read_csv(
    $path,
    auto_detect = false,
    columns = $columns,
    header = $header,
    delim = $delimiter,
    quote = $quote,
    escape = $escape,
    comment = '',
    encoding = $encoding,
    store_rejects = true,
    rejects_table = 'retain_rejects',
    rejects_scan = 'retain_reject_scans'
)
