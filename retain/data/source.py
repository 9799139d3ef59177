"""Reading the event log into the DuckDB table ``raw``: every column as text, every
record of the source counted, nothing guessed.

A CSV log is read with its dialect pinned (``[source]`` delimiter, quote, escape,
header, encoding; never a comment character), with the column names taken from
the file's own first record. A record DuckDB cannot split into those columns
(too few or too many fields, a bad quote) does not stop the run and does not
vanish: it becomes a row of ``raw`` whose columns are empty and whose
``MALFORMED`` column holds the record's text, at its own place in the file, so
the later steps quarantine it as a malformed record. Files without such records
take the fast path (one read, no extra column).
"""

from __future__ import annotations

import csv
import glob
import gzip
import io
from typing import Any

import duckdb

from retain.data.config import Config, CsvDialect, SourceConfig
from retain.data.sqlsteps import run_step
from retain.errors import DataError

#: the column of ``raw`` holding a malformed CSV record's text (only when there is one)
MALFORMED = "malformed_record"
_REJECTS, _SCANS = "retain_rejects", "retain_reject_scans"


def _files(src: SourceConfig) -> list[str]:
    pattern = str(src.path)
    if any(ch in pattern for ch in "*?["):
        return sorted(glob.glob(pattern))
    return [pattern]


def _open_text(path: str, encoding: str) -> io.TextIOBase:
    py = {"utf-8": "utf-8-sig", "utf-16": "utf-16", "latin-1": "latin-1"}[encoding]
    if path.lower().endswith(".gz"):
        return io.TextIOWrapper(gzip.open(path, "rb"), encoding=py, newline="")
    return open(path, encoding=py, newline="")  # noqa: SIM115 - closed by the caller


def _reader(fh: io.TextIOBase, d: CsvDialect) -> Any:
    return csv.reader(fh, delimiter=d.delimiter, quotechar=d.quote,
                      doublequote=d.escape == d.quote,
                      escapechar=None if d.escape == d.quote else d.escape, strict=False)


def csv_columns(src: SourceConfig) -> list[str]:
    """The column names: the first record of the first file (``column1`` ... without a
    header row). Read in Python, record by record, so no sample is guessed from."""
    first = _files(src)[0]
    d = src.dialect
    try:
        if first.lower().endswith(".zst"):
            return _duckdb_columns(first, d)
        with _open_text(first, d.encoding) as fh:
            record = next(_reader(fh, d), None)
    except (OSError, UnicodeDecodeError, csv.Error, EOFError) as exc:
        detail = (str(exc).splitlines() or [""])[0]
        raise DataError(first, f"cannot be read as csv (first record: {type(exc).__name__}: "
                        f"{detail})", "check the file and [source] in retain.toml") from exc
    if not record:
        raise DataError(first, "is empty (no header row)",
                        "give a CSV file whose first line names the columns")
    if not d.header:
        return [f"column{i + 1}" for i in range(len(record))]
    names = [name.strip() or f"column{i + 1}" for i, name in enumerate(record)]
    seen: set[str] = set()
    for name in names:
        if name.lower() in seen:
            raise DataError(first, f"the header names column {name!r} twice",
                            "give every column its own name in the first row")
        seen.add(name.lower())
    return names


def _duckdb_columns(path: str, d: CsvDialect) -> list[str]:  # pragma: no cover - .zst only
    con = duckdb.connect()
    try:
        row = con.execute("select Columns from sniff_csv(?, delim = ?, quote = ?, escape = ?, "
                          "comment = '', header = ?)",
                          [path, d.delimiter, d.quote, d.escape, d.header]).fetchone()
    finally:
        con.close()
    return [c["name"] for c in row[0]]


def import_csv(con: duckdb.DuckDBPyConnection, config: Config) -> None:
    """``raw`` from a CSV log: one row per record, malformed records included."""
    src = config.source
    d = src.dialect
    names = csv_columns(src)
    if MALFORMED in names:
        raise DataError(str(src.path), f"has a column named {MALFORMED!r}, which retain "
                        "uses for malformed records", "rename that column")
    params = {"path": str(src.path), "delimiter": d.delimiter, "quote": d.quote,
              "escape": d.escape, "header": d.header, "encoding": d.encoding,
              "columns": {name: "varchar" for name in names}}
    con.execute(f"drop table if exists {_REJECTS}")
    con.execute(f"drop table if exists {_SCANS}")
    try:
        run_step(con, "import_csv", params, create="raw")
    except duckdb.InvalidInputException:
        # DuckDB's strict reader stops on some files a CSV reader must still take
        # (line ends mixed within one file): read those record by record instead
        _import_by_record(con, src, names)
        return
    n_bad = con.execute(f"select count(*) from {_REJECTS}").fetchone()[0]
    if n_bad:
        _place_malformed(con, src, names)


def _import_by_record(con: duckdb.DuckDBPyConnection, src: SourceConfig,
                      names: list[str]) -> None:
    """``raw`` from Python's csv reader (the slow path): ``\\n``, ``\\r\\n`` and ``\\r`` all
    end a record outside quotes and are kept inside them; a record with the wrong
    number of fields or a bad quote is kept as a malformed record with its text."""
    import pyarrow as pa

    d = src.dialect
    n = len(names)
    columns: list[list[str | None]] = [[] for _ in range(n)]
    malformed: list[str | None] = []
    for path in _files(src):
        try:
            with _open_text(path, d.encoding) as fh:
                for fields, text in _records(fh, d, skip_header=d.header):
                    if fields is not None and len(fields) > n and not any(fields[n:]):
                        fields = fields[:n]  # trailing empty fields, as DuckDB takes them
                    if fields is not None and len(fields) == n:
                        for i, value in enumerate(fields):
                            columns[i].append(value if value != "" else None)
                        malformed.append(None)
                    else:
                        for column in columns:
                            column.append(None)
                        malformed.append(text)
        except (OSError, UnicodeDecodeError) as exc:
            detail = (str(exc).splitlines() or [""])[0]
            raise DataError(path, f"cannot be read as csv ({type(exc).__name__}: {detail})",
                            "check the file and [source] in retain.toml (encoding: "
                            f"{d.encoding})") from exc
    arrays = {name: pa.array(values, type=pa.string()) for name, values in zip(names, columns,
                                                                               strict=True)}
    if any(m is not None for m in malformed):
        arrays[MALFORMED] = pa.array(malformed, type=pa.string())
    table = pa.table(arrays)
    con.register("retain_records", table)
    try:
        con.execute("create or replace table raw as select * from retain_records")
    finally:
        con.unregister("retain_records")


def _records(fh: io.TextIOBase, d: CsvDialect, *, skip_header: bool) -> Any:
    """(fields or None, the record's text) for every record; blank lines are skipped."""
    consumed: list[str] = []

    def lines() -> Any:
        for line in fh:
            consumed.append(line)
            yield line

    reader = csv.reader(lines(), delimiter=d.delimiter, quotechar=d.quote,
                        doublequote=d.escape == d.quote,
                        escapechar=None if d.escape == d.quote else d.escape, strict=True)
    first = True
    while True:
        consumed.clear()
        try:
            fields = next(reader)
        except StopIteration:
            return
        except csv.Error:
            fields = None
        text = "".join(consumed).rstrip("\r\n")
        if fields == []:
            continue
        if first and skip_header:
            first = False
            continue
        first = False
        yield fields, text


def _place_malformed(con: duckdb.DuckDBPyConnection, src: SourceConfig,
                     names: list[str]) -> None:
    """Rebuild ``raw`` with each malformed record at its place in the file.

    DuckDB numbers a rejected record by its record count in its file (the header
    and blank lines included; a quoted line break does not start a record). The
    blank lines are found by reading the file again in Python (only files with a
    malformed record pay for this), so ``source_row`` counts data records alone.
    """
    d = src.dialect
    files = _files(src)
    scans = dict(con.execute(f"select file_id, file_path from {_SCANS}").fetchall())
    rejected = con.execute(
        f"select file_id, line, min(csv_line) from {_REJECTS} group by file_id, line "
        "order by file_id, line").fetchall()
    # good rows per file, in file order (one more read, with the bad records skipped)
    if len(files) > 1:
        good = dict(con.execute(
            "select filename, count(*) from read_csv($path, header = $header, auto_detect = "
            "false, delim = $delimiter, quote = $quote, escape = $escape, comment = '', "
            "encoding = $encoding, columns = $columns, ignore_errors = true, filename = true) "
            "group by filename",
            {"path": str(src.path), "header": d.header, "delimiter": d.delimiter,
             "quote": d.quote, "escape": d.escape, "encoding": d.encoding,
             "columns": {n: "varchar" for n in names}}).fetchall())
    else:
        good = {files[0]: con.execute("select count(*) from raw").fetchone()[0]}
    offset_by_file: dict[str, int] = {}
    offset = 0
    bad_by_file: dict[str, list[tuple[int, str]]] = {}
    for file_id, line, text in rejected:
        bad_by_file.setdefault(scans.get(file_id, files[0]), []).append((line, text))
    place: list[tuple[int, str]] = []  # (source_row, record text)
    for f in files:
        offset_by_file[f] = offset
        bad = bad_by_file.get(f, [])
        blanks = _blank_records(f, d) if bad else []
        for line, text in bad:
            record = line - (1 if d.header else 0) - sum(1 for b in blanks if b < line)
            place.append((offset + record, (text or "").lstrip("\r\n").rstrip("\r\n")))
        offset += good.get(f, 0) + len(bad)
    con.execute("create or replace temp table retain_bad (source_row bigint, text varchar)")
    con.executemany("insert into retain_bad values (?, ?)", place)
    cols = ", ".join('"' + n.replace('"', '""') + '"' for n in names)
    nulls = ", ".join("cast(null as varchar)" for _ in names)
    # the k-th good row (0-based) comes after every bad record j whose good rows
    # before it (source_row - j) are at most k: one ASOF join on that count
    con.execute(f"""
        create or replace table raw as
        with bad as (
            select source_row, text, row_number() over (order by source_row) as j
            from retain_bad
        ),
        good as (select rowid as k, {cols} from raw),
        placed as (
            select g.k + 1 + coalesce(b.j, 0) as source_row, {cols},
                   cast(null as varchar) as {MALFORMED}
            from good as g asof left join
                 (select source_row - j as before, max(j) as j from bad group by before)
                 as b on g.k >= b.before
            union all
            select source_row, {nulls}, text from bad
        )
        select * exclude (source_row) from placed order by source_row""")
    con.execute("drop table retain_bad")


def _blank_records(path: str, d: CsvDialect) -> list[int]:
    """Record numbers (as DuckDB counts them, from 1) of the blank lines in a file."""
    out = []
    try:
        with _open_text(path, d.encoding) as fh:
            for i, record in enumerate(_reader(fh, d), start=1):
                if not record:
                    out.append(i)
    except (OSError, UnicodeDecodeError, csv.Error, EOFError):  # pragma: no cover
        return []
    return out
