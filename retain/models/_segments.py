"""Shared helpers of the models: segment labels and DuckDB inputs.

A segment is the value of one column (or a combination of several, joined
with ", "); missing values form their own segment, "(missing)". The numpy
path and the DuckDB path build the same labels, so results from either can
be matched row by row.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pandas as pd
import pyarrow as pa

from retain.data.table import Categorical, StartStop
from retain.errors import DataError

MISSING = "(missing)"
ALL = "all"


def by_names(by: str | Sequence[str] | None) -> tuple[str, ...]:
    """``by`` as a tuple of column names (empty for the whole book)."""
    if by is None:
        return ()
    if isinstance(by, str):
        return (by,)
    return tuple(by)


def column_codes(col: np.ndarray | Categorical) -> tuple[np.ndarray, tuple[str, ...]]:
    """Code of each row's value and the levels' text: the one way a column is labelled.

    A categorical column keeps its own codes and levels; a numeric one is coded by
    its distinct finite values, ascending, written ``f"{v:g}"``. A missing value
    (no level, NaN) has code -1. Every grouping by a column (segments, curves by
    a column, Cox strata) starts here, so a value reads the same everywhere.
    """
    if isinstance(col, Categorical):
        return col.codes, tuple(col.levels)
    finite = np.isfinite(col)
    values = np.unique(col[finite])
    codes = np.searchsorted(values, np.where(finite, col, 0.0)).astype(np.int64)
    codes[~finite] = -1
    return codes, tuple(f"{v:g}" for v in values)


def _labels_of(col: np.ndarray | Categorical) -> tuple[np.ndarray, list[str]]:
    """Codes and labels with missing values as a segment of their own, "(missing)"."""
    codes, levels = column_codes(col)
    codes = codes.astype(np.int64)
    labels = list(levels)
    missing = codes < 0
    if missing.any():
        codes = np.where(missing, len(labels), codes)
        labels.append(MISSING)
    return codes, labels


def segment_codes(table: StartStop, by: str | Sequence[str] | None) -> tuple[np.ndarray, list[str]]:
    """Integer segment code per row and the labels, sorted as text.

    With ``by`` empty every row is in segment ``"all"``.
    """
    names = by_names(by)
    if not names:
        return np.zeros(table.n_rows, dtype=np.int64), [ALL]
    parts = [_labels_of(table.column(name)) for name in names]
    if len(parts) == 1:
        codes, labels = parts[0]
    else:
        text = np.array([", ".join(p) for p in zip(*[np.array(lab, dtype=object)[c]
                                                     for c, lab in parts], strict=True)],
                        dtype=object)
        labels_arr, codes = np.unique(text, return_inverse=True)
        return codes.astype(np.int64), [str(x) for x in labels_arr]
    order = np.argsort(np.array(labels, dtype=object), kind="stable")
    rank = np.empty(len(labels), dtype=np.int64)
    rank[order] = np.arange(len(labels))
    return rank[codes], [labels[i] for i in order]


def is_source_path(source: Any) -> bool:
    return isinstance(source, (str, Path))


def duckdb_input(con: duckdb.DuckDBPyConnection, source: Any, by: str | Sequence[str] | None,
                 *, need_start_date: bool = False, view: str = "exposure_input") -> str:
    """Register ``source`` (Parquet path or glob, Arrow table, DataFrame or StartStop)
    on ``con`` as view ``view`` with columns segment, start, stop, churned, cause,
    weight (and start_date). Returns a description of the source for messages.

    Column names are passed as DuckDB expressions, never formatted into SQL text.
    """
    if isinstance(source, StartStop):
        rel = con.from_arrow(source.to_arrow())
        where = source.source
    elif isinstance(source, pa.Table):
        rel = con.from_arrow(source)
        where = "Arrow table"
    elif isinstance(source, pd.DataFrame):
        rel = con.from_arrow(pa.Table.from_pandas(source, preserve_index=False))
        where = "DataFrame"
    elif is_source_path(source):
        where = str(source)
        if not any(ch in where for ch in "*?[") and not Path(where).exists():
            raise DataError(where, "file not found", "run `retain prepare` first or fix the path")
        rel = con.read_parquet(where)
    else:
        raise DataError("decrement input", f"cannot read a {type(source).__name__}",
                        "pass a StartStop, an Arrow table, a DataFrame or a Parquet path")
    columns = rel.columns
    types = dict(zip(columns, [str(t) for t in rel.types], strict=True))
    for req in ("start", "stop", "churned"):
        if req not in columns:
            raise DataError(where, f"required column {req!r} is missing",
                            f"a start-stop table needs start, stop and churned (found: "
                            f"{', '.join(columns)})")
    if need_start_date and "start_date" not in columns:
        raise DataError(where, "calendar months need the column 'start_date'",
                        "use tenure months, or prepare the table with start dates")
    col = duckdb.ColumnExpression
    const = duckdb.ConstantExpression
    varchar = duckdb.sqltype("VARCHAR")
    double = duckdb.sqltype("DOUBLE")
    names = by_names(by)
    for name in names:
        if name not in columns:
            raise DataError(where, f"there is no column {name!r}",
                            f"choose one of: {', '.join(columns)}")
    labels = []
    for name in names:
        t = types[name].upper()
        if any(k in t for k in ("INT", "DOUBLE", "FLOAT", "DECIMAL", "REAL", "BOOL")):
            text = duckdb.FunctionExpression("format", const("{:g}"), col(name).cast(double))
        else:
            text = col(name).cast(varchar)
        labels.append(duckdb.CoalesceOperator(text, const(MISSING)))
    if not labels:
        segment = const(ALL).cast(varchar)
    elif len(labels) == 1:
        segment = labels[0]
    else:
        segment = duckdb.FunctionExpression("concat_ws", const(", "), *labels)
    exprs = [
        segment.alias("segment"),
        col("start").cast(double).alias("start"),
        col("stop").cast(double).alias("stop"),
        col("churned").cast(duckdb.sqltype("INTEGER")).alias("churned"),
        (duckdb.CoalesceOperator(col("cause").cast(varchar), const(""))
         if "cause" in columns else const("").cast(varchar)).alias("cause"),
        (col("weight").cast(double) if "weight" in columns else const(1.0).cast(double))
        .alias("weight"),
    ]
    if need_start_date:
        exprs.append(col("start_date").cast(duckdb.sqltype("DATE")).alias("start_date"))
    rel.select(*exprs).create_view(view, replace=True)
    return where
