"""Reading the log exactly: a pinned CSV dialect, every record counted, every value
kept byte for byte; times that cannot be used quarantined with their own reason.

The CSV cases follow RFC 4180 (Common Format and MIME Type for CSV Files, 2005):
fields holding the delimiter, a quote or a line break are quoted; a quote inside
is doubled; records end in CRLF; the last record may or may not end in one. Each
expected row below is worked by hand from the bytes written in the test.
"""

from __future__ import annotations

import pytest
from test_prepare_support import toml_text

from retain.data.config import load_config
from retain.data.prepare import prepare
from retain.errors import ConfigError, DataError

ATTRS = """
[attributes.plan]
kind = "categorical"
varies = true
"""

HEAD = "account,occurred_at,kind,cancel_reason,plan"


def write(tmp_path, body: bytes, *, source: str = 'path = "events.csv"', **kw):
    (tmp_path / "events.csv").write_bytes(body)
    (tmp_path / "retain.toml").write_text(
        toml_text(source=source, attributes=ATTRS, **kw), encoding="utf-8")
    return load_config(tmp_path / "retain.toml")


def crlf(lines: list[str], *, bom: bool = True, blank_last: bool = True) -> bytes:
    text = "\r\n".join(lines) + "\r\n" + ("\r\n" if blank_last else "")
    return (b"\xef\xbb\xbf" if bom else b"") + text.encode("utf-8")


MESSY = [
    HEAD,
    "1,2024-01-01,signup,,Gold #2",                 # 1: '#' inside a value
    "#1,2024-01-02,signup,,\"a,b\"",                # 2: id starting with '#', comma in quotes
    "3,2024-01-03,signup,,\"say \"\"hi\"\"\r\nnext line\"",  # 3: quotes and CRLF in quotes
    "#1,2024-03-01,cancel,too_expensive,",          # 4: the '#1' customer churns
    "1,2024-02-01,plan_change,,#Silver",            # 5: a value starting with '#'
]


def test_hash_marks_quotes_line_breaks_bom_and_crlf_are_read_exactly(tmp_path):
    p = prepare(write(tmp_path, crlf(MESSY)))
    rec = p.reconciliation
    # five records, none lost to a comment character or a blank last line
    assert rec.rows_in == 5 and rec.used == 5 and rec.quarantined == 0
    rows = {(r["customer_id"], r["start"]): r for r in p.arrow.to_pylist()}
    assert rows[("1", 0.0)]["plan"] == "Gold #2"          # 2024-01-01 .. 2024-02-01
    assert rows[("1", 31.0)]["plan"] == "#Silver"         # the change on tenure day 31
    assert rows[("#1", 0.0)]["plan"] == "a,b"
    assert rows[("#1", 0.0)]["stop"] == 59.0              # 2024-01-02 -> 2024-03-01
    assert rows[("#1", 0.0)]["churned"] == 1
    assert rows[("3", 0.0)]["plan"] == 'say "hi"\r\nnext line'


def test_quarantined_values_keep_their_bytes(tmp_path):
    lines = [HEAD,
             "#7,not a time,signup,,Gold #2",            # 1: unparseable time
             "#8,2024-01-01,signup,,\" padded \"",        # 2
             "#8,2024-01-01,signup,,\" padded \""]        # 3: exact duplicate of row 2
    p = prepare(write(tmp_path, crlf(lines)))
    q = p.quarantine.to_pylist()
    assert [(r["source_row"], r["account"], r["occurred_at"], r["plan"]) for r in q] == [
        (1, "#7", "not a time", "Gold #2"), (3, "#8", "2024-01-01", " padded ")]


def test_malformed_records_are_quarantined_in_place(tmp_path):
    lines = [HEAD,
             "a,2024-01-01,signup,,Gold",                # 1
             "b,2024-01-02,signup",                      # 2: too few fields
             "c,2024-01-03,signup,,\"x\r\ny\"",          # 3: a quoted line break
             "",                                         # blank line: not a record
             "d,2024-01-04,signup,,Gold,extra",          # 4: too many fields
             "e,2024-01-05,signup,,Gold",                # 5
             "f,2024-01-06,signup,,Gold"]                # 6
    p = prepare(write(tmp_path, crlf(lines, bom=False)))
    rec = p.reconciliation
    assert rec.rows_in == 6 and rec.used == 4
    assert rec.by_reason == {"malformed CSV record": 2}
    q = p.quarantine.to_pylist()
    assert [r["source_row"] for r in q] == [2, 4]
    assert q[0]["malformed_record"] == "b,2024-01-02,signup"
    assert q[1]["malformed_record"] == "d,2024-01-04,signup,,Gold,extra"
    assert q[0]["account"] is None
    assert sorted(r["customer_id"] for r in p.arrow.to_pylist()) == ["a", "c", "e", "f"]


def test_an_unterminated_quote_is_one_malformed_record(tmp_path):
    lines = [HEAD, "a,2024-01-01,signup,,Gold", "b,\"2024-01-02,signup,,Gold",
             "c,2024-01-03,signup,,Gold"]
    p = prepare(write(tmp_path, crlf(lines, bom=False, blank_last=False)))
    # the open quote runs to the end of the file: record 2 swallows record 3 (RFC 4180)
    assert p.reconciliation.rows_in == 2
    assert p.reconciliation.by_reason == {"malformed CSV record": 1}


def test_the_dialect_comes_from_the_project_file(tmp_path):
    body = "account;occurred_at;kind;cancel_reason;plan\n" \
           "1;2024-01-01;signup;;'Gold; #2'\n2;2024-01-02;signup;;x\n"
    cfg = write(tmp_path, body.encode("latin-1"),
                source='path = "events.csv"\ndelimiter = ";"\nquote = "\'"\n'
                       'encoding = "latin-1"')
    assert cfg.source.describe() == ("CSV, delimiter ';', quote \"'\", escape \"'\", first "
                                     "row is the header, encoding latin-1, no comment character")
    p = prepare(cfg)
    assert p.reconciliation.rows_in == 2
    assert {r["plan"] for r in p.arrow.to_pylist()} == {"Gold; #2", "x"}


def test_no_header_row_names_columns_by_position(tmp_path):
    body = b"1,2024-01-01,signup\n2,2024-01-02,signup\n"
    (tmp_path / "events.csv").write_bytes(body)
    (tmp_path / "retain.toml").write_text(
        '[source]\npath = "events.csv"\nheader = false\n'
        '[columns]\ncustomer_id = "column1"\nevent_time = "column2"\nevent = "column3"\n'
        '[events]\nmap = { signup = "start", cancel = "end" }\n'
        '[window]\nas_of = "2024-12-31"\n', encoding="utf-8")
    p = prepare(load_config(tmp_path / "retain.toml"))
    assert p.reconciliation.rows_in == 2 and p.reconciliation.used == 2


@pytest.mark.parametrize(("extra", "expected"), [
    ('delimiter = ";;"', "[source] delimiter: must be one character, got ';;'"),
    ('quote = ","', "[source] quote: is the same character as the delimiter (',')"),
    ('encoding = "cp1252"', "[source] encoding: 'cp1252' is not an encoding retain can read"),
    ('header = "yes"', "[source] header: must be true or false, got 'yes'"),
])
def test_dialect_keys_are_checked(tmp_path, extra, expected):
    with pytest.raises(ConfigError) as err:
        write(tmp_path, crlf(MESSY), source=f'path = "events.csv"\n{extra}')
    assert expected in err.value.message


def test_dialect_keys_do_not_apply_to_parquet(tmp_path):
    (tmp_path / "events.parquet").write_bytes(b"")
    with pytest.raises(ConfigError) as err:
        write(tmp_path, b"", source='path = "events.parquet"\ndelimiter = ";"')
    assert "[source] delimiter: only applies to a CSV log (format is parquet)" \
        in err.value.message


# ---------------------------------------------------------------------- times
def simple(tmp_path, lines: list[str], *, columns_extra: str = "", timezone: str = "UTC",
           extra: str = ""):
    (tmp_path / "events.csv").write_text("\n".join(["id,t,ev", *lines]) + "\n",
                                         encoding="utf-8")
    (tmp_path / "retain.toml").write_text(
        '[source]\npath = "events.csv"\n'
        f'[columns]\ncustomer_id = "id"\nevent_time = "t"\nevent = "ev"\n{columns_extra}\n'
        '[events]\nmap = { signup = "start", cancel = "end" }\n'
        f'[window]\nas_of = "2024-12-31"\ntimezone = "{timezone}"\n{extra}', encoding="utf-8")
    return load_config(tmp_path / "retain.toml")


@pytest.mark.parametrize("zone", ["UTC", "Europe/London", "America/New_York"])
def test_non_finite_and_out_of_range_times_are_quarantined(tmp_path, zone):
    cfg = simple(tmp_path, [
        "a,2024-01-01,signup", "a,infinity,cancel",             # rows 1, 2
        "b,-infinity,signup", "b,2024-03-01,cancel",            # rows 3, 4
        "c,0001-01-01,signup", "c,9999-12-31 23:59:59,cancel",  # rows 5, 6
        "d,2024-01-01,signup", "d,2024-01-11,cancel",           # rows 7, 8
    ], timezone=zone)
    p = prepare(cfg)
    rec = p.reconciliation
    assert rec.rows_in == 8 and rec.used == 3            # a's signup, d's two rows
    # b's cancel comes before any usable start once its -infinity signup is set aside
    assert rec.by_reason == {"non-finite time": 2, "time out of range": 2,
                             "event before the customer's first start": 1}
    reasons = {r["source_row"]: r["quarantine_reason"] for r in p.quarantine.to_pylist()}
    assert reasons[2] == reasons[3] == "non-finite time"
    assert reasons[5] == reasons[6] == "time out of range"
    # a is censored at as_of (its infinite cancel is not an end); d ended on day 10
    rows = {r["customer_id"]: r for r in p.arrow.to_pylist()}
    assert rows["a"]["churned"] == 0 and rows["a"]["stop"] == 365.0   # leap year 2024
    assert rows["d"]["churned"] == 1 and rows["d"]["stop"] == 10.0 and rows["d"]["cause"]


def test_a_strptime_pattern_reads_day_first_times_as_wall_clock(tmp_path):
    cfg = simple(tmp_path, ["a,05/01/2024 10:00,signup", "a,04/02/2024 09:00,cancel",
                            "b,31/03/2024 00:30,signup", "b,not a time,cancel"],
                 columns_extra='time_format = "%d/%m/%Y %H:%M"', timezone="Europe/London")
    p = prepare(cfg)
    rows = {r["customer_id"]: r for r in p.arrow.to_pylist()}
    assert rows["a"]["stop"] == 30.0                     # 5 Jan -> 4 Feb
    assert rows["b"]["start_date"].isoformat() == "2024-03-31"
    assert p.reconciliation.by_reason == {"unparseable time": 1}


@pytest.mark.parametrize(("fmt", "scale"), [("epoch_seconds", 1), ("epoch_milliseconds", 1000)])
def test_epoch_times_are_instants(tmp_path, fmt, scale):
    # 1704067200 = 2024-01-01T00:00:00Z (19723 days * 86400 s); 1706731200 =
    # 2024-01-31T20:00:00Z. In New York these are 2023-12-31 19:00 and 2024-01-31 15:00.
    lines = [f"a,{1704067200 * scale},signup", f"a,{1706731200 * scale},cancel",
             "b,1e400,signup", f"b,{-10**10 * scale},signup"]
    utc = prepare(simple(tmp_path, lines, columns_extra=f'time_format = "{fmt}"'))
    ny = prepare(simple(tmp_path, lines, columns_extra=f'time_format = "{fmt}"',
                        timezone="America/New_York"))
    assert utc.arrow.column("stop").to_pylist() == [30.0]
    assert ny.arrow.column("stop").to_pylist() == [31.0]
    assert utc.reconciliation.by_reason == {"non-finite time": 1, "time out of range": 1}


@pytest.mark.parametrize(("value", "expected"), [
    ("dd/mm/yyyy", "[columns] time_format: 'dd/mm/yyyy' is neither a strptime pattern nor an "
                   "epoch unit"),
    ("%d/%m/%Q", "[columns] time_format: '%d/%m/%Q' is not a pattern DuckDB's strptime reads "
                 "(Failed to parse format specifier %d/%m/%Q"),
])
def test_time_format_is_checked(tmp_path, value, expected):
    with pytest.raises(ConfigError) as err:
        simple(tmp_path, [], columns_extra=f'time_format = "{value}"')
    assert expected in err.value.message


def test_check_fails_on_too_many_unparseable_times(tmp_path, capsys):
    from retain.cli import main

    lines = [f"c{i},{d:02d}/01/2024,signup" for i, d in enumerate(range(13, 31))]
    lines += ["x,2024-01-02,signup"] * 2
    simple(tmp_path, lines)
    assert main(["check", str(tmp_path / "retain.toml"), "--quiet"]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1
    assert ("column 't': 18 of 20 rows (90.0%) have times that cannot be parsed with no "
            "time_format (ISO 8601), e.g. '13/01/2024', '14/01/2024', '15/01/2024' -- set "
            "[columns] time_format in") in err[0]
    assert "or raise [check] max_unparseable_share (now 0.01)" in err[0]


def test_check_passes_under_the_share_and_fails_over_it(tmp_path, capsys):
    from retain.cli import main

    lines = [f"c{i},2024-01-02,signup" for i in range(98)] + ["y,2024-01-03,upgrade",
                                                               "z,2024-01-03,downgrade"]
    simple(tmp_path, lines, extra="[check]\nmax_unknown_event_share = 0.02\n")
    assert main(["check", str(tmp_path / "retain.toml"), "--quiet"]) == 0   # 2% is allowed
    out = capsys.readouterr().out
    assert out.startswith("Read as: CSV, delimiter ','")
    simple(tmp_path, lines)                                                  # default 1%
    assert main(["check", str(tmp_path / "retain.toml"), "--quiet"]) == 2
    err = capsys.readouterr().err.strip()
    assert ("column 'ev': 2 of 100 rows (2.0%) have unknown event values, e.g. 'downgrade' "
            "(1 rows), 'upgrade' (1 rows) -- map them in [events] map or list them in "
            "[events] ignore in") in err
    assert "[check] max_unknown_event_share (now 0.01)" in err


# ---------------------------------------------------------------------- messages
def test_as_of_before_every_event_names_the_key_and_the_first_day(tmp_path):
    cfg = simple(tmp_path, ["a,2025-02-03,signup", "a,2025-03-01,cancel"])
    with pytest.raises(ConfigError) as err:
        prepare(cfg)
    assert err.value.message == (f"{tmp_path / 'retain.toml'}: [window] as_of: 2024-12-31 is "
                                 "before the log's first event (2025-02-03) -- set as_of on or "
                                 "after 2025-02-03")


def test_too_little_memory_names_the_memory_limit(tmp_path):
    cfg = simple(tmp_path, [f"c{i},2024-01-0{1 + i % 9},signup" for i in range(50)],
                 extra='[engine]\nmemory_limit = "1MB"\n')
    with pytest.raises(ConfigError) as err:
        prepare(cfg)
    msg = err.value.message
    assert msg.startswith(f"{tmp_path / 'retain.toml'}: [engine] memory_limit: 1MB is not "
                          "enough memory for the ")
    assert "Out of Memory Error" in msg and msg.endswith(
        'raise memory_limit (e.g. "4GB") or set [engine] temp_directory so DuckDB can spill '
        "to disk")


def test_mixed_line_ends_are_read_record_by_record(tmp_path):
    # one file with LF, CRLF and CR record ends (files joined from several exports);
    # a CRLF inside quotes stays in the value
    body = (HEAD + "\r\n" + "a,2024-01-01,signup,,Gold #2\n"
            + "b,2024-01-02,signup,,\"x\r\ny\"\r"
            + "c,2024-01-03,signup\n"                       # too few fields
            + "d,2024-01-04,signup,,\"bad\"quote\r\n"       # a bad quote
            + "e,2024-01-05,signup,,,,\n").encode("utf-8")      # trailing empty fields
    p = prepare(write(tmp_path, body))
    rec = p.reconciliation
    assert rec.rows_in == 5 and rec.used == 3
    assert rec.by_reason == {"malformed CSV record": 2}
    q = p.quarantine.to_pylist()
    assert [(r["source_row"], r["malformed_record"]) for r in q] == [
        (3, "c,2024-01-03,signup"), (4, 'd,2024-01-04,signup,,"bad"quote')]
    plans = {r["customer_id"]: r["plan"] for r in p.arrow.to_pylist()}
    assert plans == {"a": "Gold #2", "b": "x\r\ny", "e": None}


def test_a_wrong_delimiter_is_pointed_at(tmp_path):
    body = b"account;occurred_at;kind;cancel_reason;plan\n1;2024-01-01;signup;;x\n"
    with pytest.raises(DataError) as err:
        prepare(write(tmp_path, body))
    assert err.value.message.endswith(
        "columns found: account;occurred_at;kind;cancel_reason;plan (one column only: is "
        "[source] delimiter ',' the file's?)")


def test_malformed_records_in_several_files_keep_their_places(tmp_path):
    # a glob reads the files in name order; source_row counts records across them.
    # (Extra fields that are all empty, "d,,,,,,", are not an error: no value is lost.)
    one = crlf([HEAD, "a,2024-01-01,signup,,x", "a,2024-01-02", "b,2024-01-03,signup,,y"],
               bom=False)
    two = crlf([HEAD, "", "c,2024-01-04,signup,,z", "d,1,2,3,4,5", "e,2024-01-05,signup,,w"],
               bom=False)
    (tmp_path / "log_1.csv").write_bytes(one)
    (tmp_path / "log_2.csv").write_bytes(two)
    cfg = write(tmp_path, b"", source='path = "log_*.csv"')
    p = prepare(cfg)
    assert p.reconciliation.rows_in == 6 and p.reconciliation.used == 4
    q = p.quarantine.to_pylist()
    assert [(r["source_row"], r["malformed_record"]) for r in q] == [
        (2, "a,2024-01-02"), (5, "d,1,2,3,4,5")]
    assert sorted(r["customer_id"] for r in p.arrow.to_pylist()) == ["a", "b", "c", "e"]


def test_a_header_naming_a_column_twice_is_refused(tmp_path):
    body = b"account,occurred_at,kind,cancel_reason,Plan,plan\n1,2024-01-01,signup,,x,y\n"
    with pytest.raises(DataError) as err:
        prepare(write(tmp_path, body))
    assert err.value.message == (f"{tmp_path / 'events.csv'}: the header names column 'plan' "
                                 "twice -- give every column its own name in the first row")


def test_an_engine_error_in_a_step_becomes_one_line_naming_the_step(tmp_path):
    import duckdb

    from retain.data.prepare import _engine_error

    cfg = simple(tmp_path, [])
    with pytest.raises(duckdb.Error) as raised:   # a real engine error, as a step would meet
        duckdb.connect().execute("select to_timestamp(1e20)")
    err = _engine_error(raised.value, "normalise", cfg)
    assert isinstance(err, DataError)
    assert err.message == (
        f"{tmp_path / 'events.csv'}: preparation step 'normalise': the engine stopped "
        "(ConversionException: Conversion Error: Epoch seconds out of range for TIMESTAMP WITH "
        f"TIME ZONE) -- check the log against [source] and [columns] in "
        f"{tmp_path / 'retain.toml'}; if they match, this is a bug in retain: rerun with "
        "--debug and report it")
