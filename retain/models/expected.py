"""Actual versus expected churn against a basis, with exact intervals and credibility.

A basis is anything with ``expected_events(table) -> per-row expected churns``:
a fitted Cox model (the Breslow cumulative hazard over each row's interval
times its relative risk), a parametric fit, or a stored decrement table
(rates by tenure month, :class:`retain.models.decrements.DecrementTable`; a
saved CSV is read back with :func:`decrement_basis`). For each dimension in
``by`` (a column such as ``plan`` or ``cohort``, or ``tenure_month`` /
``calendar_month``) and each of its levels:

* actual A = weighted churns, expected E = Σ over rows of the expected count
  (for months, each row is first cut at the month edges; the basis hazard is
  additive over the pieces, so the totals do not change);
* A/E with the exact Poisson interval on A (Garwood, 1936), E held fixed:
  [χ²(α/2; 2A) / 2E, χ²(1 − α/2; 2A + 2) / 2E]; flagged ``above`` / ``below``
  when the interval excludes 1;
* optionally limited-fluctuation credibility: Z = min(1, sqrt(E / n_F)) with the
  full-credibility standard n_F = (z_{(1+p)/2} / k)², 1,082 expected churns for
  a ±5 % error with 90 % probability (common practice; Longley-Cook, 1962),
  and the blended ratio Z · (A/E) + (1 − Z) · (A/E of the whole book).

A and E on the same rows, with a Cox basis fitted on those rows, agree in total
exactly (the Breslow estimator makes the martingale residuals sum to zero).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import duckdb
import numpy as np
import pandas as pd
from scipy import stats

from retain.data.table import StartStop
from retain.errors import DataError, ModelError
from retain.kernels.exposure import split_at_edges
from retain.models._segments import ALL, by_names, duckdb_input, segment_codes
from retain.models.decrements import (
    DecrementTable,
    _month_number,
    calendar_months,
    check_input,
    exposure_by_band,
    poisson_interval,
)
from retain.results import DEFAULT_LEVEL, Result, resolve_level
from retain.units import DAYS_PER_MONTH

TENURE_MONTH = "tenure_month"
CALENDAR_MONTH = "calendar_month"
CAUTION = ("Actual-versus-expected compares experience with a basis; it is a statistical "
           "estimate, not a reserving or pricing basis. Bases for reserving and pricing are for "
           "qualified actuaries to set under the company's standards and local practice.")


def full_credibility_standard(probability: float = 0.90, tolerance: float = 0.05) -> float:
    """Expected claims for full credibility, (z_{(1+p)/2} / k)² (limited fluctuation,
    Poisson claim counts; common practice). p = 0.90, k = 0.05 gives 1,082.2."""
    z = stats.norm.ppf(0.5 + probability / 2)
    return float((z / tolerance) ** 2)


@dataclass(frozen=True)
class ActualExpected(Result):
    """A/E by dimension and level.

    ``frame`` columns: dimension, level, actual, expected, ratio, lower, upper,
    flag (``above`` / ``below`` / empty), and with credibility: credibility (Z) and
    blended (the credibility-weighted ratio). The first row is the whole book
    (dimension and level ``all``).
    """

    frame: pd.DataFrame
    basis: str
    level: float
    credibility: bool
    full_credibility: float
    n_rows: int
    total_actual: float
    total_expected: float
    engine: str
    interval: str = "exact Poisson (Garwood) on the actual count, expected held fixed"
    caution: str = CAUTION
    warnings: tuple[str, ...] = field(default_factory=tuple)

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def dimension(self, name: str) -> pd.DataFrame:
        out = self.frame[self.frame["dimension"] == name]
        if out.empty:
            raise DataError("actual vs expected", f"there is no dimension {name!r}",
                            f"choose one of: {', '.join(dict.fromkeys(self.frame['dimension']))}")
        return out.reset_index(drop=True)

    def summary(self) -> str:
        book = self.frame.iloc[0]
        flagged = self.frame[(self.frame["flag"] != "") & (self.frame["dimension"] != ALL)]
        text = (f"Actual vs expected against {self.basis}: {book['actual']:,.0f} churns against "
                f"{book['expected']:,.1f} expected, A/E {book['ratio']:.3f} "
                f"({100 * self.level:g}% interval {book['lower']:.3f} to {book['upper']:.3f})")
        if len(flagged):
            names = ", ".join(f"{r.dimension} {r.level} ({r.flag})"
                              for r in flagged.head(5).itertuples())
            text += f"; {len(flagged)} level(s) outside their interval: {names}"
        return text + "."


def decrement_basis(source: str | Path | pd.DataFrame, *, by: str | Sequence[str] | None = None,
                    name: str = "stored decrement table") -> DecrementTable:
    """A stored decrement table (rates by tenure month) read back as a basis.

    ``source``: a CSV written by ``DecrementTable.to_csv`` or a frame with columns
    ``month`` (0, 1, ...) and ``m`` (churns per customer-month) or ``q`` (monthly
    probability, converted by m = −log(1 − q)), and ``segment`` when ``by`` is given.
    """
    if isinstance(source, (str, Path)):
        path = Path(source)
        if not path.exists():
            raise DataError(str(path), "file not found", "give the path of a saved decrement table")
        frame = pd.read_csv(path, keep_default_na=False, na_values=[""])
        name = str(path)
    else:
        frame = source.copy()
    if "month" not in frame.columns or not ({"m", "q"} & set(frame.columns)):
        raise DataError(name, "a decrement basis needs columns 'month' and 'm' (or 'q')",
                        f"found: {', '.join(map(str, frame.columns))}")
    names = by_names(by)
    if "segment" not in frame.columns:
        if names:
            raise DataError(name, "the basis has no 'segment' column", "leave `by` out")
        frame["segment"] = ALL
    frame["segment"] = frame["segment"].astype(str)
    if "m" not in frame.columns:
        q = frame["q"].to_numpy(dtype=float)
        if ((q < 0) | (q >= 1)).any():
            raise DataError(name, "q must be in [0, 1)", "check the basis")
        frame["m"] = -np.log1p(-q)
    frame = frame.sort_values(["segment", "month"]).reset_index(drop=True)
    for seg, part in frame.groupby("segment"):
        if list(part["month"]) != list(range(len(part))):
            raise DataError(name, f"segment {seg!r}: months must run 0, 1, 2, ... without gaps",
                            "fill every tenure month of the basis")
    if "churns" not in frame.columns:
        frame["churns"] = np.nan
    if "exposure" not in frame.columns:
        frame["exposure"] = np.nan
    return DecrementTable(frame=frame, axis="tenure", by=names, level=0.95, n_rows=0,
                          n_events=float("nan"), total_exposure=float("nan"), engine="stored",
                          source=name, months=None)


def _describe(basis: Any) -> str:
    if isinstance(basis, DecrementTable):
        return f"decrement table ({basis.source})" if basis.engine == "stored" else \
            "decrement table by tenure month" + (f" by {', '.join(basis.by)}" if basis.by else "")
    return getattr(basis, "description", None) or type(basis).__name__


def actual_vs_expected(
    table: Any,
    basis: Any,
    *,
    by: str | Sequence[str] = (),
    level: float = DEFAULT_LEVEL,
    credibility: bool = False,
    full_credibility: float | None = None,
    engine: str = "auto",
    con: duckdb.DuckDBPyConnection | None = None,
) -> ActualExpected:
    """Actual versus expected churns, by each dimension in ``by``.

    Parameters
    ----------
    table : StartStop, or a Parquet path / Arrow table / DataFrame
        The experience. Non-StartStop inputs with a decrement-table basis (no
        segments) are aggregated in DuckDB; otherwise the rows are read into a
        StartStop.
    basis : object with ``expected_events(StartStop) -> array`` or DecrementTable
    by : dimensions
        Column names (``"plan"``, ``"cohort"``, ...) and/or ``"tenure_month"``,
        ``"calendar_month"``. The whole book is always the first row.
    level : float
        Interval level.
    credibility : bool
        Add limited-fluctuation credibility Z and the blended ratio.
    full_credibility : float, optional
        The full-credibility standard in expected churns; default 1,082
        (= (z_0.95 / 0.05)², rounded as usually quoted; common practice).
    engine : ``"auto"``, ``"duckdb"``, ``"numpy"``
    """
    level = resolve_level(level, None, "actual_vs_expected", error=DataError)
    if not callable(getattr(basis, "expected_events", None)):
        raise ModelError("actual_vs_expected", f"a {type(basis).__name__} cannot serve as a basis",
                         "pass a fitted model or decrement table with expected_events(table)")
    if engine not in ("auto", "duckdb", "numpy"):
        raise DataError("actual_vs_expected", f"engine must be auto, duckdb or numpy, not "
                        f"{engine!r}", "use 'auto'")
    dims = by_names(by)
    n_full = float(round(full_credibility_standard())) if full_credibility is None \
        else float(full_credibility)
    if not n_full > 0:
        raise DataError("actual_vs_expected", "full_credibility must be > 0", "use e.g. 1082")
    sql_ok = (isinstance(basis, DecrementTable) and not basis.by and basis.axis == "tenure"
              and CALENDAR_MONTH not in dims)
    if engine == "auto":
        engine = "duckdb" if sql_ok and not isinstance(table, StartStop) else "numpy"
    if engine == "duckdb" and not sql_ok:
        raise DataError("actual_vs_expected", "the DuckDB engine takes a decrement-table basis "
                        "without segments, by tenure month (calendar months: use numpy)",
                        "use engine='numpy'")
    warnings: list[str] = []
    if engine == "duckdb":
        blocks, n_rows = _duckdb_blocks(table, basis, dims, con, warnings)
    else:
        if not isinstance(table, StartStop):
            from retain.models.decrements import _as_startstop

            table = _as_startstop(table)
        blocks, n_rows = _numpy_blocks(table, basis, dims, warnings)
    frame = _ratios(blocks, level, credibility, n_full)
    book = frame.iloc[0]
    return ActualExpected(frame=frame, basis=_describe(basis), level=level,
                          credibility=credibility, full_credibility=n_full, n_rows=n_rows,
                          total_actual=float(book["actual"]),
                          total_expected=float(book["expected"]), engine=engine,
                          warnings=tuple(warnings))


# ---------------------------------------------------------------- numpy path
def _expected(basis: Any, table: StartStop) -> np.ndarray:
    e = np.asarray(basis.expected_events(table), dtype=float)
    if e.shape != (table.n_rows,):
        raise ModelError(_describe(basis), f"expected_events gave {e.shape} values for "
                         f"{table.n_rows} rows", "the basis must return one value per row")
    if not np.isfinite(e).all() or (e < 0).any():
        raise ModelError(_describe(basis), "expected_events gave negative or non-finite values",
                         "check the basis covers these rows' covariates and tenures")
    return e


def _month_split(table: StartStop, kind: str) -> tuple[StartStop, np.ndarray, np.ndarray]:
    """Rows cut at month edges; returns (pieces, month per piece, churn month per piece).

    Churns stay on the last piece of their row. A churn's month follows the
    decrement table: tenure month holding stop, or the calendar month of the
    churn's day (start_date + floor(stop)).
    """
    if kind == TENURE_MONTH:
        offset = np.zeros(table.n_rows)
        k = max(1, int(np.ceil(table.stop.max() / DAYS_PER_MONTH)))
        edges = DAYS_PER_MONTH * np.arange(k + 1, dtype=float)
        first = 0
    else:
        offset, first, _, edges = calendar_months(table)
    row, lo, hi, band, last_piece = split_at_edges(offset + table.start, offset + table.stop,
                                                   edges)
    pieces = table.take(row)
    pieces.start = lo - offset[row]
    pieces.stop = hi - offset[row]
    keep = last_piece & (pieces.churned == 1)
    pieces.churned = keep.astype(np.int8)
    pieces.cause = type(table.cause)(np.where(last_piece, pieces.cause.codes, -1).astype(np.int32),
                                     table.cause.levels)
    month = band + first
    if kind == CALENDAR_MONTH:
        churn_month = np.where(keep, _month_number(np.floor(hi)), month)
    else:
        churn_month = month
    return pieces, month, churn_month


def _numpy_blocks(table: StartStop, basis: Any, dims: tuple[str, ...],
                  warnings: list[str]) -> tuple[list[pd.DataFrame], int]:
    e = _expected(basis, table)
    a = table.weight * table.churned
    if isinstance(basis, DecrementTable):
        months = int(basis.frame.groupby("segment")["month"].max().min()) + 1
        reach = int(np.ceil(table.stop.max() / DAYS_PER_MONTH))
        if reach > months:
            warnings.append(f"the experience runs to tenure month {reach}, the basis to month "
                            f"{months}; later months use the basis's last rate")
    blocks = [pd.DataFrame({"dimension": [ALL], "level": [ALL], "actual": [a.sum()],
                            "expected": [e.sum()]})]
    for dim in dims:
        if dim in (TENURE_MONTH, CALENDAR_MONTH):
            pieces, month, churn_month = _month_split(table, dim)
            ep = _expected(basis, pieces)
            ap = pieces.weight * pieces.churned
            months = np.union1d(month, churn_month)
            idx_e = np.searchsorted(months, month)
            idx_a = np.searchsorted(months, churn_month)
            exp_m = np.bincount(idx_e, weights=ep, minlength=months.shape[0])
            act_m = np.bincount(idx_a, weights=ap, minlength=months.shape[0])
            if not np.isclose(ep.sum(), e.sum(), rtol=1e-9, atol=1e-9):
                warnings.append(f"{dim}: the basis gave {ep.sum():.6g} expected churns on rows "
                                f"cut at month edges but {e.sum():.6g} on whole rows; its hazard "
                                "is not additive over time")
            if dim == TENURE_MONTH:
                labels = [f"month {k + 1}" for k in months]
            else:
                labels = [f"{k // 12:04d}-{k % 12 + 1:02d}" for k in months]
            blocks.append(pd.DataFrame({"dimension": dim, "level": labels, "actual": act_m,
                                        "expected": exp_m}))
            continue
        codes, labels = segment_codes(table, dim)
        g = len(labels)
        blocks.append(pd.DataFrame({
            "dimension": dim, "level": labels,
            "actual": np.bincount(codes, weights=a, minlength=g),
            "expected": np.bincount(codes, weights=e, minlength=g)}))
    return blocks, table.n_rows


# ---------------------------------------------------------------- DuckDB path
def _duckdb_blocks(source: Any, basis: DecrementTable, dims: tuple[str, ...],
                   con: duckdb.DuckDBPyConnection | None,
                   warnings: list[str]) -> tuple[list[pd.DataFrame], int]:
    """A and E against tenure-month rates from the exposure aggregation in DuckDB:
    with rates constant within each month, E = Σ_k exposure_k · m_k exactly
    (months past the basis continue at its last rate). One aggregation per
    column dimension; the whole book and the tenure months are sums over the
    first one's segments."""
    rates = basis.monthly_rates(ALL)
    own = con is None
    if own:
        con = duckdb.connect()
    columns = [d for d in dims if d != TENURE_MONTH]
    per_dim: dict[str | None, pd.DataFrame] = {}
    n_rows = 0
    try:
        for i, dim in enumerate(columns or [None]):
            where = duckdb_input(con, source, dim)
            if i == 0:
                n_rows = int(check_input(con, where)[0])
            raw = exposure_by_band(con, "tenure", 10**9)
            band = raw["band"].to_numpy()
            raw["expected"] = (raw["exposure_days"] / DAYS_PER_MONTH
                               * rates[np.minimum(band, rates.shape[0] - 1)])
            per_dim[dim] = raw
    finally:
        if own:
            con.close()
    first = per_dim[columns[0] if columns else None]
    months = first.groupby("band", sort=True)[["churns", "expected"]].sum()
    blocks = [pd.DataFrame({"dimension": [ALL], "level": [ALL],
                            "actual": [first["churns"].sum()],
                            "expected": [first["expected"].sum()]})]
    for dim in dims:
        if dim == TENURE_MONTH:
            blocks.append(pd.DataFrame({"dimension": TENURE_MONTH,
                                        "level": [f"month {k + 1}" for k in months.index],
                                        "actual": months["churns"].to_numpy(),
                                        "expected": months["expected"].to_numpy()}))
            continue
        agg = per_dim[dim].groupby("segment", sort=True)[["churns", "expected"]].sum()
        blocks.append(pd.DataFrame({"dimension": dim, "level": agg.index.astype(str),
                                    "actual": agg["churns"].to_numpy(),
                                    "expected": agg["expected"].to_numpy()}))
    if months.shape[0] > rates.shape[0]:
        warnings.append(f"the experience runs to tenure month {months.shape[0]}, the basis to "
                        f"month {rates.shape[0]}; later months use the basis's last rate")
    return blocks, n_rows


# ---------------------------------------------------------------- ratios
def _ratios(blocks: list[pd.DataFrame], level: float, credibility: bool,
            n_full: float) -> pd.DataFrame:
    f = pd.concat(blocks, ignore_index=True)
    a = f["actual"].to_numpy(dtype=float)
    e = f["expected"].to_numpy(dtype=float)
    lo, hi = poisson_interval(a, level)
    pos = e > 0
    safe = np.where(pos, e, 1.0)
    f["ratio"] = np.where(pos, a / safe, np.nan)
    f["lower"] = np.where(pos, lo / safe, np.nan)
    f["upper"] = np.where(pos, hi / safe, np.nan)
    f["flag"] = np.where(f["lower"] > 1, "above", np.where(f["upper"] < 1, "below", ""))
    if credibility:
        z = np.minimum(1.0, np.sqrt(np.maximum(e, 0.0) / n_full))
        book = f["ratio"].iloc[0]
        f["credibility"] = z
        f["blended"] = z * np.where(pos, f["ratio"], 0.0) + (1 - z) * book
    return f
