"""A project built in Python: the same settings and the same log, from a file or from
memory, give the same start-stop table, quarantine and reconciliation.

The log is small and hand-made (rows below); the check is that every route gives
exactly what the CSV route gives (row for row, column for column), so the
reference is the CSV reader already tested in test_prepare_rules.py and
test_prepare_input.py. One route, the typed DataFrame, holds real datetimes,
integers and floats, as a notebook user's frame would.
"""

from __future__ import annotations

import dataclasses
import datetime as dt

import duckdb
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from test_prepare_support import toml_text, write_log

import retain
from retain.data.config import load_config, tomllib
from retain.data.prepare import prepare
from retain.data.project import project
from retain.errors import ConfigError

S = ("web", "north", "standard")
LOG = [
    ("1", "2024-01-01 09:00:00", "signup", None, "Seedling", "10", *S),
    ("1", "2024-02-15 10:00:00", "plan_change", None, "Bloom", "20"),
    ("1", "2024-04-01 00:00:00", "cancel", "too_expensive"),
    ("2", "2024-01-05 00:00:00", "signup", None, "Bloom", "20", "partner", "south", "intro"),
    ("2", "2024-03-01 00:00:00", "payment_failed"),
    ("2", "2024-03-03 00:00:00", "cancel"),
    ("2", "2024-06-01 00:00:00", "reactivate", None, "Seedling", "12.5"),
    ("3", "2024-02-01 00:00:00", "signup", None, "Seedling", "10", *S),
    ("3", "2024-02-09 00:00:00", "teleport"),                 # unknown event
    ("3", "2024-02-10 00:00:00", "email_opened"),             # ignored
    ("4", "2025-02-01 00:00:00", "signup", None, "Seedling", "10", *S),  # after as_of
]


def settings(tmp_path) -> dict:
    """The sections of the project file, as Python values."""
    doc = tomllib.loads(toml_text())
    doc.pop("source")
    return doc


@pytest.fixture()
def log(tmp_path):
    path = write_log(tmp_path / "events.csv", LOG)
    (tmp_path / "retain.toml").write_text(toml_text(), encoding="utf-8")
    return path


def outcome(p):
    rec = dataclasses.replace(p.reconciliation, source="")
    quarantine = p.quarantine.select(["source_row", "quarantine_reason"]).to_pylist()
    return p.arrow.to_pylist(), quarantine, rec


def test_every_source_gives_what_the_csv_file_gives(tmp_path, log, monkeypatch):
    monkeypatch.chdir(tmp_path)
    expected = outcome(prepare(load_config(tmp_path / "retain.toml")))
    assert expected[2].rows_in == 11 and expected[2].used == 8 and expected[2].ignored == 1
    text = pd.read_csv(log, dtype=str, keep_default_na=False, na_values=[""])
    arrow = pa.Table.from_pandas(text, preserve_index=False)
    pq.write_table(arrow, tmp_path / "events.parquet")
    other = duckdb.connect()
    relation = other.from_arrow(arrow)
    kw = settings(tmp_path)
    for source in (text, arrow, relation, "events.parquet", tmp_path / "events.csv"):
        got = outcome(prepare(project(source, **kw)))
        assert got == expected, type(source).__name__
    other.close()


def test_a_typed_frame_gives_the_same_table(tmp_path, log):
    expected = outcome(prepare(load_config(tmp_path / "retain.toml")))
    typed = pd.read_csv(log, keep_default_na=False, na_values=[""])
    typed["occurred_at"] = pd.to_datetime(typed["occurred_at"])
    assert typed["account"].dtype.kind == "i" and typed["monthly_price"].dtype.kind == "f"
    got = outcome(prepare(project(typed, **settings(tmp_path))))
    assert got == expected


def test_the_toml_file_and_the_keywords_make_the_same_config(tmp_path, log, monkeypatch):
    monkeypatch.chdir(tmp_path)
    from_file = load_config(tmp_path / "retain.toml")
    from_python = project("events.csv", **settings(tmp_path))
    assert dataclasses.replace(from_python, path=from_file.path) == from_file
    # relative paths anchor at the current folder when there is no file
    assert from_python.output.dir == tmp_path / "out"


def test_dates_and_tuples_are_taken_as_python_values(tmp_path, log):
    kw = settings(tmp_path)
    kw["window"] = {"as_of": dt.date(2024, 12, 31), "timezone": "UTC"}
    kw["events"]["ignore"] = ("email_opened",)
    cfg = project(str(tmp_path / "events.csv"), **kw)
    assert cfg.window.as_of == dt.date(2024, 12, 31) and cfg.events.ignore == ("email_opened",)


@pytest.mark.parametrize(("source", "expected"), [
    ([1, 2], "(project built in Python): [source] data: a list is not a table retain can read "
             "-- give a pandas DataFrame, a pyarrow Table or a DuckDB relation (or a path to a "
             "CSV or Parquet file)"),
    ({"data": pa.table({"a": ["1"]}), "format": "csv"},
     "(project built in Python): [source] format: does not apply with data (a table in memory) "
     "-- remove format"),
])
def test_bad_sources_are_config_errors(tmp_path, source, expected):
    with pytest.raises(ConfigError) as err:
        project(source, **settings(tmp_path))
    assert err.value.message == expected


def test_the_same_checks_as_the_file(tmp_path):
    kw = settings(tmp_path)
    kw["window"] = {"as_of": "2024-12-31", "timezone": "Europe/Londn"}
    with pytest.raises(ConfigError) as err:
        project(pa.table({"a": ["1"]}), **kw)
    assert err.value.message.startswith("(project built in Python): [window] timezone: "
                                        "unknown time zone 'Europe/Londn' -- did you mean "
                                        "Europe/London")


def test_a_missing_column_names_the_key(tmp_path):
    frame = pd.DataFrame({"account": ["1"], "occurred_at": ["2024-01-01"]})
    with pytest.raises(retain.DataError) as err:
        prepare(project(frame, **settings(tmp_path)))
    assert "has no column 'kind' (named by [columns] event" in err.value.message


def test_project_is_public():
    assert retain.project is project
    assert "project" in retain.__all__
