"""The start-stop table carries its context: as-of date, window, time zone, covariate schema.

The context travels in the Parquet file's key-value metadata (Apache Parquet
format, FileMetaData.key_value_metadata; pyarrow writes an Arrow schema's
metadata there and reads it back, pyarrow docs "Reading and Writing the Apache
Parquet Format", "Storing custom metadata"). The checks below write files with
pyarrow directly as well as through retain, so the file layout is what any
Parquet reader sees, not only what retain reads back.
"""

from __future__ import annotations

import datetime as dt
import json

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import retain
from retain.data.contract import CONTEXT_KEY, ColumnSchema, TableContext
from retain.data.prepare import compress_table, prepare, write_outputs
from retain.data.table import StartStop
from retain.errors import DataError

CONTEXT = TableContext(
    as_of=dt.date(2026, 11, 30), window_start=dt.date(2024, 1, 1), timezone="Europe/Paris",
    columns=(ColumnSchema("plan", "categorical", True, reference="Seedling"),
             ColumnSchema("price", "numeric", True, ratio=True),
             ColumnSchema("price_ratio", "numeric", True, derived=True)))


def _frame() -> pd.DataFrame:
    # hand-made: customer a has two rows of one spell (churned), b one open row
    return pd.DataFrame({
        "customer_id": ["a", "a", "b"], "spell": [1, 1, 1], "start": [0.0, 10.0, 0.0],
        "stop": [10.0, 25.0, 40.0], "churned": [0, 1, 0],
        "cause": ["", "voluntary", ""], "weight": [1.0, 1.0, 1.0],
        "start_date": pd.to_datetime(["2026-10-01", "2026-10-01", "2026-10-21"]).date,
        "plan": ["Seedling", "Orchard", "Seedling"], "price": [10.0, 12.0, 10.0],
        "price_ratio": [1.0, 1.2, 1.0]})


def test_round_trip_through_parquet(tmp_path) -> None:
    table = StartStop.from_frame(_frame(), context=CONTEXT)
    path = table.to_parquet(tmp_path / "t.parquet")
    back = StartStop.from_parquet(path)
    assert back.context == CONTEXT
    assert isinstance(back.context.as_of, dt.date)
    assert back.context.column("plan").reference == "Seedling"
    assert back.context.column("nope") is None
    # the metadata is plain JSON under one key, readable without retain
    meta = pq.read_schema(path).metadata
    doc = json.loads(meta[CONTEXT_KEY])
    assert doc["as_of"] == "2026-11-30" and doc["timezone"] == "Europe/Paris"
    assert doc["window_start"] == "2024-01-01"


def test_slicing_keeps_the_context() -> None:
    table = StartStop.from_frame(_frame(), context=CONTEXT)
    assert table.take(np.array([0, 2])).context is CONTEXT
    assert table.with_columns(x=[1.0, 2.0, 3.0]).context is CONTEXT
    assert table.for_cause("voluntary").context is CONTEXT
    assert table.expanded().context is CONTEXT
    assert next(iter(table.groups("plan")))[1].context is CONTEXT
    assert table.with_context(None).context is None
    assert StartStop.from_frame(_frame()).context is None


def test_parquet_without_metadata_loads_without_context(tmp_path) -> None:
    path = tmp_path / "plain.parquet"
    pq.write_table(pa.Table.from_pandas(_frame(), preserve_index=False), path)
    table = StartStop.from_parquet(path)
    assert table.context is None
    assert table.n_rows == 3


def test_file_written_by_pyarrow_with_the_metadata_is_read(tmp_path) -> None:
    # the JSON layout written out by hand, as another tool would write it
    doc = {"version": 1, "as_of": "2025-06-30", "window_start": None, "timezone": "UTC",
           "columns": [{"name": "plan", "kind": "categorical", "varies": False,
                        "reference": "Basic"}]}
    arrow = pa.Table.from_pandas(_frame(), preserve_index=False)
    arrow = arrow.replace_schema_metadata({**(arrow.schema.metadata or {}),
                                           b"retain.context": json.dumps(doc).encode()})
    path = tmp_path / "theirs.parquet"
    pq.write_table(arrow, path)
    ctx = StartStop.from_parquet(path).context
    assert ctx == TableContext(as_of=dt.date(2025, 6, 30), timezone="UTC",
                               columns=(ColumnSchema("plan", "categorical", False,
                                                     reference="Basic"),))
    # 2025-06-30 is day 20269 since 1970-01-01 (Python: date(2025,6,30).toordinal() - 719163)
    assert ctx.as_of_day == 20269.0


@pytest.mark.parametrize("raw", [b"not json", b'{"as_of": 20251130}',
                                 b'{"columns": [{"name": "x", "kind": "text"}]}'])
def test_unreadable_context_is_one_line(tmp_path, raw) -> None:
    arrow = pa.Table.from_pandas(_frame(), preserve_index=False)
    arrow = arrow.replace_schema_metadata({b"retain.context": raw})
    with pytest.raises(DataError, match="metadata retain.context: cannot be read"):
        StartStop.from_arrow(arrow)


def _small_project():
    # a hand-made log: two customers, one churns, a plan change, a price with its ratio
    log = pd.DataFrame({
        "id": ["a", "a", "a", "b"],
        "at": ["2026-01-05", "2026-02-01", "2026-03-10", "2026-02-15"],
        "what": ["signup", "change", "cancel", "signup"],
        "plan": ["Basic", "Plus", "", "Basic"], "price": ["10", "12", "", "10"],
        "channel": ["web", "", "", "shop"]})
    return retain.project(
        log, columns={"customer_id": "id", "event_time": "at", "event": "what"},
        events={"map": {"signup": "start", "change": "update", "cancel": "end"}},
        window={"as_of": "2026-06-30", "start": "2026-01-01", "timezone": "America/New_York"},
        attributes={"plan": {"kind": "categorical", "varies": True},
                    "price": {"kind": "numeric", "varies": True, "ratio": True},
                    "channel": {"kind": "categorical", "varies": False}},
        model={"reference": {"plan": "Basic"}})


def test_prepare_fills_the_context_and_the_file_keeps_it(tmp_path) -> None:
    config = _small_project()
    prepared = prepare(config, compress=True)
    ctx = prepared.table.context
    assert ctx.as_of == dt.date(2026, 6, 30)
    assert ctx.window_start == dt.date(2026, 1, 1)
    assert ctx.timezone == "America/New_York"
    # every covariate of the table is described, in the table's column order
    covariates = [c for c in prepared.arrow.column_names
                  if c not in ("customer_id", "spell", "start", "stop", "churned", "cause",
                               "weight", "start_date")]
    assert [c.name for c in ctx.columns] == covariates
    assert ctx.column("plan") == ColumnSchema("plan", "categorical", True, reference="Basic")
    assert ctx.column("price") == ColumnSchema("price", "numeric", True, ratio=True)
    assert ctx.column("channel") == ColumnSchema("channel", "categorical", False)
    assert ctx.column("price_ratio").derived and ctx.column("cohort").derived
    paths = write_outputs(prepared, tmp_path)
    assert StartStop.from_parquet(paths["start_stop"]).context == ctx
    assert StartStop.from_parquet(paths["start_stop_compressed"]).context == ctx
    # compressing keeps it
    assert StartStop.from_arrow(compress_table(prepared.arrow)).context == ctx


# ---------------------------------------------------------------------- the last day
# Day numbers by hand (days since 1970-01-01; Python: date.toordinal() - 719163):
# 2026-10-01 -> 20727, 2026-10-21 -> 20747, 2026-11-30 -> 20787, 2026-12-31 -> 20818.

def test_last_day_from_the_context_else_from_the_data() -> None:
    assert dt.date(2026, 10, 1).toordinal() - 719163 == 20727  # the working above
    plain = StartStop.from_frame(_frame())
    # customer b: 20747 + 40 = 20787; customer a: 20727 + 25 = 20752
    assert plain.last_day == 20787.0
    assert plain.last_day_basis == "last day in the data (start_date + stop)"
    later = plain.with_context(TableContext(as_of=dt.date(2026, 12, 31)))
    assert later.last_day == 20818.0
    assert later.last_day_basis == "as-of date 2026-12-31 (the table's context)"
    # a context without an as-of date says nothing about the day
    assert plain.with_context(TableContext(timezone="UTC")).last_day == 20787.0
    no_dates = StartStop.from_frame(_frame().drop(columns="start_date"))
    assert no_dates.last_day is None


def test_book_and_cohorts_read_the_last_day_from_the_table() -> None:
    from retain.models.curves import cohort_retention
    from retain.run import book_summary
    from retain.units import DAYS_PER_MONTH

    only_a = StartStop.from_frame(_frame()).take(np.array([0, 1]))
    # without context the window is the 30 days before a's churn (20722, 20752]:
    # a's rows (20727, 20737] and (20737, 20752] give 10 + 15 days and one churn
    book = book_summary(only_a, window_days=30)
    assert book.window_exposure_months * DAYS_PER_MONTH == pytest.approx(25.0)
    assert book.window_churns == 1.0
    # as of 2026-11-30 (20787) the window (20757, 20787] holds none of a's time
    dated = only_a.with_context(TableContext(as_of=dt.date(2026, 11, 30)))
    book = book_summary(dated, window_days=30)
    assert book.window_exposure_months == 0.0 and book.window_churns == 0.0
    assert cohort_retention(dated, months=2).as_of_basis.startswith("as-of date 2026-11-30")
    assert cohort_retention(only_a, months=2).as_of_basis.startswith("last day in the data")
