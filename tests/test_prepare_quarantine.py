"""Quarantine reasons (one case each), the reconciliation identity, strict mode, and
the three kinds of source (CSV, Parquet, a DuckDB table) giving the same table."""

from __future__ import annotations

import re
from pathlib import Path

import duckdb
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest
from test_prepare_support import CORE, project, rows_of, run, toml_text, write_log

from retain.data.config import load_config
from retain.data.prepare import prepare, write_outputs
from retain.data.reasons import REASONS, code_of
from retain.errors import DataError

S = ("search", "north", "standard")
GOOD = [("a", "2024-01-01", "signup", None, "Seedling", "10", *S),
        ("a", "2024-01-31", "cancel")]


def signup(cid, when, price="10"):
    return (cid, when, "signup", None, "Seedling", price, *S)


CASES = [
    ("missing id", [signup(None, "2024-01-05")]),
    ("missing id", [signup("  ", "2024-01-05")]),
    ("unparseable time", [signup("b", "31/12/2024 10:00")]),
    ("unparseable time", [signup("b", None)]),
    ("unparseable time", [signup("b", "2025-02-30")]),
    ("unknown event", [("a", "2024-01-10", "teleport")]),
    ("event before the customer's first start",
     [("b", "2024-01-01", "payment_failed"), signup("b", "2024-01-02")]),
    ("end without an open spell", [("a", "2024-02-10", "cancel")]),
    ("exact duplicate", [("a", "2024-01-31", "cancel")]),
    ("time after the as-of date", [("a", "2025-01-01", "plan_change", None, "Bloom")]),
    ("non-numeric value in a numeric attribute", [("a", "2024-01-10", "price_change", None,
                                                   None, "N/A")]),
    ("non-numeric value in a numeric attribute", [("a", "2024-01-10", "price_change", None,
                                                   None, "inf")]),
    ("unknown churn reason", [signup("b", "2024-01-01"), ("b", "2024-01-05", "cancel", "bored")]),
    ("start during an open spell", [signup("a", "2024-01-10")]),
    ("event outside an open spell", [("a", "2024-02-10", "pause")]),
]


@pytest.mark.parametrize("reason,extra", CASES, ids=[f"{c[0]}-{i}" for i, c in enumerate(CASES)])
def test_each_quarantine_reason(tmp_path, reason, extra):
    p = run(tmp_path, GOOD + extra)
    r = p.reconciliation
    q = p.quarantine.to_pylist()
    assert [row["quarantine_reason"] for row in q] == [reason]
    assert [row["quarantine_code"] for row in q] == [code_of(reason)]
    assert r.by_code == {code_of(reason): 1}
    # the quarantined row is the last one written (source rows count from 1, header excluded)
    if reason not in ("event before the customer's first start", "unknown churn reason"):
        assert q[0]["source_row"] == len(GOOD) + len(extra)
    assert r.by_reason == {reason: 1}
    assert r.rows_in == r.used + r.outside_window + r.ignored + r.quarantined
    # the good customer's row is untouched
    assert ("a", 1, 0.0, 30.0, 1, "voluntary") in rows_of(p, CORE)


def test_quarantine_keeps_the_original_text(tmp_path):
    p = run(tmp_path, GOOD + [("a", "2024-01-10", "price_change", None, None, " N/A ")])
    q = p.quarantine.to_pylist()[0]
    assert q == {"source_row": 3, "account": "a", "occurred_at": "2024-01-10",
                 "kind": "price_change", "cancel_reason": None, "plan": None,
                 "monthly_price": " N/A ", "channel": None, "region": None, "arm": None,
                 "quarantine_reason": "non-numeric value in a numeric attribute",
                 "quarantine_code": "non_numeric_attribute"}


def test_of_exact_duplicates_the_first_is_used(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01"), signup("a", "2024-01-01"),
                       signup("a", "2024-01-01"), ("a", "2024-01-31", "cancel")])
    assert [r["source_row"] for r in p.quarantine.to_pylist()] == [2, 3]
    assert rows_of(p, CORE) == [("a", 1, 0.0, 30.0, 1, "voluntary")]


def test_ignored_events_are_counted_not_quarantined(tmp_path):
    p = run(tmp_path, GOOD + [("a", "2024-01-05", "email_opened"), (None, "x", "email_opened")])
    r = p.reconciliation
    assert (r.rows_in, r.used, r.ignored, r.quarantined) == (4, 2, 2, 0)


def test_reconciliation_lines_add_up_and_are_written(tmp_path):
    rows = GOOD + [signup(None, "2024-01-05"), ("a", "2024-01-10", "teleport"),
                   ("a", "2024-01-11", "teleport"), ("q", "2024-01-11", "zap"),
                   ("a", "2024-01-12", "email_opened")]
    p = run(tmp_path, rows)
    frame = p.reconciliation.to_frame()
    assert frame.n_rows.iloc[0] == 7 and frame.n_rows.iloc[1:].sum() == 7
    assert p.unknown_events == {"teleport": 2, "zap": 1}
    paths = write_outputs(p, tmp_path / "out")
    assert pq.read_table(paths["start_stop"]).num_rows == 1
    assert pacsv.read_csv(paths["quarantine_csv"]).num_rows == 4
    text = paths["reconciliation_json"].read_text()
    assert '"teleport": 2' in text and '"rows_in": 7' in text


def test_strict_events_raise_and_name_every_unknown_value(tmp_path):
    with pytest.raises(DataError) as err:
        run(tmp_path, GOOD + [("a", "2024-01-10", "teleport"), ("a", "2024-01-11", "zap"),
                              ("a", "2024-01-12", "zap")], strict=True)
    msg = err.value.message
    assert "column 'kind': unknown event values: 'zap' (2 rows), 'teleport' (1 rows)" in msg
    assert "map them in [events] map or list them in [events] ignore" in msg


def test_strict_reasons_raise(tmp_path):
    with pytest.raises(DataError, match=r"column 'cancel_reason': unknown churn reasons: 'bored'"):
        run(tmp_path, [signup("b", "2024-01-01"), ("b", "2024-01-05", "cancel", "bored")],
            reasons_strict=True)


def test_a_missing_column_is_named(tmp_path):
    write_log(tmp_path / "events.csv", [("a", "2024-01-01", "signup")],
              header=("account", "occurred_at", "kind"))
    (tmp_path / "retain.toml").write_text(toml_text(), encoding="utf-8")
    with pytest.raises(DataError) as err:
        prepare(load_config(tmp_path / "retain.toml"))
    assert ("has no column 'cancel_reason' (named by [columns] reason in "
            f"{tmp_path / 'retain.toml'}) -- columns found: account, occurred_at, kind"
            ) in err.value.message


def test_no_spell_left_is_an_error(tmp_path):
    with pytest.raises(DataError, match="no spell of any customer lies in the window"):
        run(tmp_path, [("a", "2024-01-31", "cancel")])


def test_parquet_and_duckdb_sources_give_the_same_table(tmp_path):
    rows = GOOD + [signup("b", "2024-03-01"), ("b", "2024-03-05", "pause"),
                   ("b", "2024-04-05", "resume"), ("b", "2024-05-01", "bogus")]
    base = run(tmp_path, rows)
    table = pacsv.read_csv(tmp_path / "events.csv",
                           convert_options=pacsv.ConvertOptions(strings_can_be_null=True))
    pq.write_table(table, tmp_path / "events.parquet")
    con = duckdb.connect(str(tmp_path / "wh.duckdb"))
    con.execute("create table events as select * from read_parquet(?)",
                [str(tmp_path / "events.parquet")])
    con.close()
    for source in ('path = "events.parquet"', 'duckdb = "wh.duckdb"\ntable = "events"'):
        (tmp_path / "retain.toml").write_text(toml_text(source=source), encoding="utf-8")
        other = prepare(load_config(tmp_path / "retain.toml"))
        assert other.arrow.equals(base.arrow), source
        assert other.reconciliation.by_reason == base.reconciliation.by_reason == {
            "unknown event": 1}


def test_engine_settings_reach_duckdb(tmp_path):
    from retain.data.prepare import connect

    cfg = project(tmp_path, GOOD)
    con = connect(cfg)
    try:
        got = con.execute("select current_setting('threads'), current_setting('TimeZone')"
                          ).fetchall()[0]
    finally:
        con.close()
    assert got == (1, "UTC")


def test_every_event_before_the_first_start_is_named_so_even_after_an_end(tmp_path):
    """An end before any start does not make later events 'outside an open spell'."""
    p = run(tmp_path, [("b", "2024-01-01", "cancel"), ("b", "2024-01-02", "pause"),
                       ("b", "2024-01-03", "cancel"), signup("b", "2024-01-04")] + GOOD)
    assert p.reconciliation.by_reason == {"event before the customer's first start": 3}


def test_start_and_end_runs(tmp_path):
    """In a run of starts only the first opens a spell; in a run of ends only the first
    closes it (hand-worked: S S E E S E)."""
    p = run(tmp_path, [signup("b", "2024-01-01"), signup("b", "2024-01-02"),
                       ("b", "2024-01-11", "cancel"), ("b", "2024-01-12", "cancel"),
                       signup("b", "2024-02-01"), ("b", "2024-02-11", "cancel")])
    assert p.reconciliation.by_reason == {"start during an open spell": 1,
                                          "end without an open spell": 1}
    assert rows_of(p, CORE) == [("b", 1, 0.0, 10.0, 1, "voluntary"),
                                ("b", 2, 0.0, 10.0, 1, "voluntary")]


def test_duplicates_compare_numbers_as_numbers_and_times_to_the_second(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01 10:00:00"),
                       signup("a", "2024-01-01 10:00:00", price="10.0"),
                       ("a", "2024-01-31 08:00:00", "cancel"),
                       ("a", "2024-01-31 09:00:00", "cancel")])
    assert [(r["source_row"], r["quarantine_reason"]) for r in p.quarantine.to_pylist()] == [
        (2, "exact duplicate"), (4, "end without an open spell")]


def _sql_reasons() -> set[str]:
    """Every reason sentence the SQL steps can write: the text literals after ``then`` in
    normalise.sql and sequence.sql, and the literal that repeats.sql casts as its reason
    (read from the files, so a new reason cannot slip past)."""
    from retain.data.sqlsteps import step_path

    found: set[str] = set()
    for name in ("normalise", "sequence"):
        text = re.sub(r"--[^\n]*", "", step_path(name).read_text(encoding="utf-8"))
        found |= {m.replace("''", "'") for m in re.findall(r"\bthen\s+'((?:[^']|'')*)'", text)}
    text = step_path("repeats").read_text(encoding="utf-8")
    found |= set(re.findall(r"cast\('([^']*)' as varchar\) as reason", text))
    return found


def test_every_reason_the_sql_writes_has_a_stable_code():
    sql = _sql_reasons()
    assert len(sql) >= 14 and "exact duplicate" in sql and "missing id" in sql
    table = {r.sentence for r in REASONS}
    assert sql - table == set(), "add these reasons to retain/data/reasons.py"
    assert table - sql == set(), "these reasons in retain/data/reasons.py are never written"
    codes = [r.code for r in REASONS]
    assert len(set(codes)) == len(codes)
    assert all(re.fullmatch(r"[a-z][a-z_]*[a-z]", c) and len(c) <= 24 for c in codes)
    # the one table in DEVELOPERS.md lists each code with its sentence
    doc = (Path(__file__).resolve().parents[1] / "DEVELOPERS.md").read_text(encoding="utf-8")
    for r in REASONS:
        assert f"| `{r.code}` | {r.sentence} |" in doc


def test_codes_reach_the_quarantine_files_and_the_reconciliation(tmp_path):
    rows = GOOD + [signup(None, "2024-01-05"), ("a", "2024-01-10", "teleport"),
                   ("a", "2024-01-31", "cancel")]
    p = run(tmp_path, rows)
    assert p.reconciliation.by_code == {"missing_id": 1, "unknown_event": 1,
                                        "exact_duplicate": 1}
    assert p.reconciliation.by_reason == {"missing id": 1, "unknown event": 1,
                                          "exact duplicate": 1}
    paths = write_outputs(p, tmp_path / "out")
    for table in (pq.read_table(paths["quarantine"]), pacsv.read_csv(paths["quarantine_csv"])):
        assert table.column("quarantine_code").to_pylist() == [
            "missing_id", "unknown_event", "exact_duplicate"]
    assert '"by_code"' in paths["reconciliation_json"].read_text()
