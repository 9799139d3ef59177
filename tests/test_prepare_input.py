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
from retain.errors import ConfigError

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
