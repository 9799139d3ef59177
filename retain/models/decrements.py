"""Decrement tables: central exposure, churns by cause, m, q and survivors by month.

For each segment and month k (tenure month by default: tenure
(k·D, (k+1)·D] days, D = ``retain.units.DAYS_PER_MONTH``; or calendar month;
or the user's own tenure bands (e_k, e_{k+1}] days, ``band_edges``):

* central exposure E_k in customer-months: the weighted time at risk inside
  the month from the (start, stop] rows (delayed entry respected: a row adds
  nothing before its start);
* churns d_k in total and by cause (voluntary / involuntary);
* the central rate m_k = d_k / E_k (churns per customer-month);
* the monthly probability q_k = 1 − exp(−m_k) (constant force within the
  month), and per cause q_k,c = (m_k,c / m_k) q_k, so that the causes add up;
  on user bands of width W_k months, the probability of churning within the
  band, q_k = 1 − exp(−m_k W_k);
* survivors per 10,000 at the start of each month, l_0 = 10,000,
  l_{k+1} = l_k (1 − q_k) (tenure months and bands only).

Intervals (level ``level``): m by the exact Poisson interval on the count
(Garwood, 1936), with E_k held fixed: [χ²(α/2; 2d) / 2E, χ²(1−α/2; 2d+2) / 2E];
q by the same transform as q; survivors on the log scale,
l_k exp(±z sqrt(Σ_{j<k} d_j / E_j²)) (Poisson variance of the cumulative rate).
Weights are read as frequency weights (counts of identical rows).

The table is computed in DuckDB (``sql/models/exposure_tenure.sql``,
``sql/models/exposure_calendar.sql``) from a Parquet file, an Arrow table or a
DataFrame, and in numpy (:mod:`retain.kernels.exposure`) from a StartStop;
the two agree to rounding.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import duckdb
import numpy as np
import pandas as pd
from scipy import stats

from retain.data.sqlsteps import run_step
from retain.data.table import CAUSES, StartStop
from retain.errors import DataError, ModelError
from retain.kernels.exposure import band_counts, band_exposure, piecewise_cumulative
from retain.kernels.graduation import (
    chi_square_test,
    choose_smoothing,
    gcv_score,
    grouping_of_signs_test,
    hat_trace,
    signs_test,
    whittaker_henderson,
)
from retain.models._segments import ALL, by_names, duckdb_input, segment_codes
from retain.results import DEFAULT_LEVEL, Result, resolve_level
from retain.units import DAYS_PER_MONTH

RADIX = 10_000.0
AXES = ("tenure", "calendar")
_UNLIMITED_BANDS = 10**9


def poisson_interval(count: np.ndarray, level: float) -> tuple[np.ndarray, np.ndarray]:
    """Exact (Garwood, 1936) interval for a Poisson mean given the observed count.

    lower = χ²(α/2; 2d) / 2 (0 when d = 0), upper = χ²(1 − α/2; 2d + 2) / 2.
    Non-integer (weighted) counts use the same gamma quantiles.
    """
    d = np.asarray(count, dtype=float)
    alpha = 1.0 - level
    with np.errstate(invalid="ignore"):
        lower = np.where(d > 0, stats.chi2.ppf(alpha / 2, 2 * np.maximum(d, 1e-300)) / 2, 0.0)
        upper = stats.chi2.ppf(1 - alpha / 2, 2 * d + 2) / 2
    return lower, upper


@dataclass(frozen=True)
class DecrementTable(Result):
    """A decrement table by month (and segment); see the module docstring for formulas.

    ``frame`` has one row per (segment, month) with columns segment, month (tenure
    month 0, 1, ... or calendar month number year·12 + month − 1), label, exposure
    (customer-months), in_force (weighted rows at risk at the month's start),
    churns, churns_voluntary, churns_involuntary, m, m_lower, m_upper, q, q_lower,
    q_upper, q_voluntary, q_involuntary, m_voluntary, m_involuntary, and for tenure
    months survivors, survivors_lower, survivors_upper (per 10,000).
    """

    frame: pd.DataFrame
    axis: str
    by: tuple[str, ...]
    level: float
    n_rows: int
    n_events: float
    total_exposure: float
    engine: str
    source: str
    months: int | None
    band_edges: tuple[float, ...] | None = None  # user bands: edges in days, e_0 = 0 first
    interval: str = ("m: exact Poisson (Garwood) on the churn count with exposure fixed; "
                     "q = 1 - exp(-m) of those bounds; survivors: log scale, Poisson variance "
                     "of the cumulative rate")
    assumptions: tuple[str, ...] = (
        "constant force of churn within each month (q = 1 - exp(-m))",
        "weights are frequency weights (counts of identical rows)",
        "one month of tenure = 30.4375 days",
    )
    warnings: tuple[str, ...] = field(default_factory=tuple)

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    @property
    def segments(self) -> list[str]:
        return list(dict.fromkeys(self.frame["segment"]))

    def segment(self, name: str = ALL) -> pd.DataFrame:
        """The rows of one segment (``"all"`` when the table has no ``by``)."""
        if name not in self.segments:
            raise DataError("decrement table", f"there is no segment {name!r}",
                            f"choose one of: {', '.join(self.segments)}")
        return self.frame[self.frame["segment"] == name].reset_index(drop=True)

    def summary(self) -> str:
        unit = "tenure month" if self.axis == "tenure" else "calendar month"
        seg = f" by {', '.join(self.by)}" if self.by else ""
        return (f"Decrement table by {unit}{seg}: {self.n_events:,.0f} churns over "
                f"{self.total_exposure:,.0f} customer-months of exposure "
                f"({self.n_rows:,} start-stop rows, computed in {self.engine}); "
                f"overall {self.n_events / self.total_exposure:.4f} churns per customer-month.")

    # ------------------------------------------------------------ as a basis
    def monthly_rates(self, segment: str = ALL) -> np.ndarray:
        """Central rates m by tenure month for one segment (0 where there is no exposure)."""
        if self.axis != "tenure" or self.band_edges is not None:
            raise ModelError("decrement table", "only a tenure-month table can serve as a basis",
                             "build the basis with axis='tenure'")
        seg = self.segment(segment)
        m = seg["m"].to_numpy(dtype=float)
        return np.where(np.isfinite(m), m, 0.0)

    def expected_events(self, table: StartStop) -> np.ndarray:
        """Expected churns per row of ``table`` under these rates (a stored basis).

        E_i = w_i (H(stop_i) − H(start_i)), H the cumulative of the monthly central
        rates (constant within each tenure month, per day m_k / D). Rows past the
        last month continue at its rate. With ``by`` the rates of each row's segment
        are used (the table needs the same columns).
        """
        if self.axis != "tenure" or self.band_edges is not None:
            raise ModelError("decrement table", "only a tenure-month table can serve as a basis",
                             "build the basis with axis='tenure'")
        out = np.zeros(table.n_rows)
        if self.by:
            codes, labels = segment_codes(table, self.by)
        else:
            codes, labels = np.zeros(table.n_rows, dtype=np.int64), [ALL]
        known = set(self.segments)
        for g, label in enumerate(labels):
            rows = codes == g
            if not rows.any():
                continue
            if label not in known:
                raise ModelError("decrement basis", f"segment {label!r} is not in the basis",
                                 f"the basis has: {', '.join(self.segments)}")
            rate = self.monthly_rates(label) / DAYS_PER_MONTH
            edges = DAYS_PER_MONTH * np.arange(rate.shape[0] + 1)
            h = piecewise_cumulative(edges, rate, table.stop[rows]) - \
                piecewise_cumulative(edges, rate, table.start[rows])
            out[rows] = table.weight[rows] * h
        return out


# ---------------------------------------------------------------- entry point
def decrement_table(
    source: Any,
    *,
    by: str | Sequence[str] | None = None,
    axis: str = "tenure",
    months: int | None = None,
    cause_split: bool = True,
    level: float = DEFAULT_LEVEL,
    engine: str = "auto",
    con: duckdb.DuckDBPyConnection | None = None,
    band_edges: Sequence[float] | None = None,
) -> DecrementTable:
    """Decrement table by tenure month (or calendar month), optionally by segment.

    Parameters
    ----------
    source : StartStop, pyarrow.Table, pandas.DataFrame, or path to Parquet (glob allowed)
        A start-stop table meeting the contract (ARCHITECTURE.md).
    by : column name or names, optional
        Segments (e.g. ``"cohort"``, ``"plan"``, ``["channel", "region"]``). A
        time-varying column splits each customer's exposure by the value in force.
    axis : ``"tenure"`` or ``"calendar"``
        Months of tenure (1 month = 30.4375 days), or calendar months of
        ``start_date + tenure`` (needs ``start_date``).
    months : int, optional
        Keep only the first ``months`` tenure months (exposure and churns after
        them are left out).
    cause_split : bool
        Keep the per-cause columns (voluntary / involuntary); False drops them.
    level : float
        Interval level (default 0.95).
    engine : ``"auto"``, ``"duckdb"`` or ``"numpy"``
        ``auto`` uses numpy for a StartStop and DuckDB otherwise.
    con : DuckDB connection, optional
        Used for the DuckDB engine (its memory limit and threads apply); a
        fresh in-memory connection by default.
    band_edges : sequence of float, optional
        The user's own tenure bands instead of 30.44-day months: increasing
        positive tenures in days e_1 < ... < e_K (e_0 = 0 is implied), e.g.
        ``[7, 14, 21, 28, 60, 91, 182, 365]`` for weeks in the first month
        then months. Band k is (e_k, e_{k+1}]: a churn exactly on an edge
        counts in the band that ends there, and exposure is split at the
        edges. Time at risk and churns after e_K are left out. ``q`` is then
        the probability of churning within the band, 1 − exp(−m W) with W the
        band's width in months (the project file's ``[model] decrement_edges``).
    """
    if axis not in AXES:
        raise DataError("decrement_table", f"axis must be one of {', '.join(AXES)}, not {axis!r}",
                        "use 'tenure' or 'calendar'")
    level = resolve_level(level, None, "decrement_table", error=DataError)
    if months is not None and (int(months) != months or months < 1):
        raise DataError("decrement_table", f"months must be a whole number >= 1, not {months!r}",
                        "or leave it out for every month")
    if months is not None and axis != "tenure":
        raise DataError("decrement_table", "months limits tenure months only",
                        "leave months out for calendar months")
    if engine not in ("auto", "duckdb", "numpy"):
        raise DataError("decrement_table", f"engine must be auto, duckdb or numpy, not {engine!r}",
                        "use 'auto'")
    edges = None if band_edges is None else _check_edges(band_edges, axis, months)
    names = by_names(by)
    if engine == "auto":
        engine = "numpy" if isinstance(source, StartStop) else "duckdb"
    if engine == "numpy":
        if not isinstance(source, StartStop):
            source = _as_startstop(source)
        raw, n_rows, n_events, where = _numpy_counts(source, names, axis, months, edges)
    else:
        raw, n_rows, n_events, where = _duckdb_counts(source, names, axis, months, con, edges)
    frame = _finish(raw, axis, level, cause_split, edges)
    total = float(frame["exposure"].sum())
    n_events = float(frame["churns"].sum())  # inside the months kept
    warnings: list[str] = []
    empty = frame[(frame["exposure"] <= 0) & (frame["churns"] > 0)]
    if len(empty):
        warnings.append(f"{len(empty)} month(s) have churns but no exposure (a churn on the "
                        "first day of a calendar month after exposure ended the month before); "
                        "their rate is not defined")
    extra: dict[str, Any] = {}
    if edges is not None:
        extra = {"band_edges": tuple(float(e) for e in edges), "assumptions": (
            "constant force of churn within each band (q = 1 - exp(-m x band width))",
            "weights are frequency weights (counts of identical rows)",
            "bands (a, b] in days of tenure: a churn on an edge counts in the band that ends "
            f"there; time at risk after {edges[-1]:g} days is left out",
            "rates m are per customer-month of 30.4375 days")}
    return DecrementTable(frame=frame, axis=axis, by=names, level=level, n_rows=n_rows,
                          n_events=n_events, total_exposure=total, engine=engine, source=where,
                          months=months, warnings=tuple(warnings), **extra)


def _check_edges(band_edges: Sequence[float], axis: str, months: int | None) -> np.ndarray:
    """The full edge array (0, e_1, ..., e_K) of user bands, or a DataError."""
    where = "decrement_table band_edges"
    if axis != "tenure" or months is not None:
        raise DataError(where, "user bands are tenure bands and replace months",
                        "use axis='tenure' and leave months out")
    try:
        e = np.asarray(list(band_edges), dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise DataError(where, f"must be numbers of days, got {band_edges!r}",
                        "pass e.g. [7, 14, 21, 28, 60, 91]") from exc
    if e.ndim != 1 or e.size == 0 or not np.all(np.isfinite(e)) or np.any(e <= 0) \
            or np.any(np.diff(e) <= 0):
        raise DataError(where, f"must be increasing positive tenures in days, got "
                        f"{list(band_edges)!r}", "pass e.g. [7, 14, 21, 28, 60, 91] "
                        "(the first band starts at 0)")
    return np.concatenate(([0.0], e))


def _band_label(lo: float, hi: float) -> str:
    return f"{lo:g} to {hi:g} days"


def _as_startstop(source: Any) -> StartStop:
    import pyarrow as pa

    if isinstance(source, pa.Table):
        return StartStop.from_arrow(source)
    if isinstance(source, pd.DataFrame):
        return StartStop.from_frame(source)
    return StartStop.from_parquet(source)


def _numpy_counts(table: StartStop, names: tuple[str, ...], axis: str,
                  months: int | None, user_edges: np.ndarray | None = None
                  ) -> tuple[pd.DataFrame, int, float, str]:
    codes, labels = segment_codes(table, names)
    g = len(labels)
    w = table.weight
    if user_edges is not None:
        edges = user_edges
        n_bands = edges.shape[0] - 1
        lo, hi = table.start, table.stop
        # band k = (e_k, e_k+1] holds a churn at hi when e_k < hi <= e_k+1
        churn_band = np.searchsorted(edges, hi, side="left") - 1
        band_number = np.arange(n_bands)
    elif axis == "tenure":
        n_bands = months if months is not None else max(
            1, int(np.ceil(table.stop.max() / DAYS_PER_MONTH)))
        edges = DAYS_PER_MONTH * np.arange(n_bands + 1, dtype=float)
        lo, hi = table.start, table.stop
        churn_band = np.ceil(hi / DAYS_PER_MONTH).astype(np.int64) - 1
        band_number = np.arange(n_bands)
    else:
        day0, first, last, edges = calendar_months(table)
        lo, hi = day0 + table.start, day0 + table.stop
        band_number = np.arange(first, last + 1)
        churn_band = _month_number(np.floor(hi)) - first
        n_bands = band_number.shape[0]
    exposure, in_force = band_exposure(lo, hi, w, edges, codes, g)
    ev = table.churned == 1
    if axis == "tenure":
        ev = ev & (hi <= edges[-1]) & (hi > edges[0])
    churns = band_counts(churn_band[ev], w[ev], codes[ev], g, n_bands)
    by_cause = {}
    for cause in CAUSES:
        code = table.cause.levels.index(cause) if cause in table.cause.levels else -2
        hit = ev & (table.cause.codes == code)
        by_cause[cause] = band_counts(churn_band[hit], w[hit], codes[hit], g, n_bands)
    rows = {
        "segment": np.repeat(np.array(labels, dtype=object), n_bands),
        "band": np.tile(band_number, g),
        "exposure_days": exposure.ravel(),
        "in_force": in_force.ravel(),
        "churns": churns.ravel(),
        "churns_voluntary": by_cause["voluntary"].ravel(),
        "churns_involuntary": by_cause["involuntary"].ravel(),
    }
    return pd.DataFrame(rows), table.n_rows, table.n_events, table.source


def calendar_months(table: StartStop) -> tuple[np.ndarray, int, int, np.ndarray]:
    """The calendar months a table's rows cover, as epoch days.

    Returns (start day of each row's spell, first and last month number, the
    months' edges: the first day of each month and of the month after the last).
    A row at risk on (lo, hi] days of tenure covers epoch days (day0 + lo, day0 + hi];
    the last month holds the last churn day, floor(day0 + hi).
    """
    if table.start_date is None:
        raise DataError(table.source, "calendar months need the column 'start_date'",
                        "use tenure months, or prepare the table with start dates")
    day0 = table.start_date.astype(np.int64).astype(float)
    lo, hi = day0 + table.start, day0 + table.stop
    first = int(_month_number(np.floor(lo).min()))
    last = int(max(_month_number(np.ceil(hi).max() - 1), _month_number(np.floor(hi).max())))
    edges = _month_first_day(np.arange(first, last + 2)).astype(float)
    return day0, first, last, edges


def _month_number(day: Any) -> Any:
    """Calendar month number (year·12 + month − 1) of an epoch day number."""
    d = np.asarray(day).astype(np.int64).astype("datetime64[D]")
    return d.astype("datetime64[M]").astype(np.int64) + 1970 * 12


def _month_first_day(month_number: np.ndarray) -> np.ndarray:
    """Epoch day number of the first day of each calendar month number."""
    m = (np.asarray(month_number) - 1970 * 12).astype("datetime64[M]")
    return m.astype("datetime64[D]").astype(np.int64)


def exposure_by_band(con: duckdb.DuckDBPyConnection, axis: str, n_bands: int) -> pd.DataFrame:
    """Exposure and churns by segment and band of the view ``exposure_input`` on ``con``.

    ``axis`` "tenure" (bands of ``DAYS_PER_MONTH`` days, the first ``n_bands``) or
    "calendar" (calendar months). Two SQL steps: the band totals, then the running sums.
    """
    if axis == "tenure":
        run_step(con, "models/exposure_tenure",
                 {"days_per_month": DAYS_PER_MONTH, "n_bands": n_bands, "by_edges": False,
                  "edges": []}, create="exposure_bands")
    else:
        run_step(con, "models/exposure_calendar", create="exposure_bands")
    return run_step(con, "models/exposure_running").df()


def _duckdb_counts(source: Any, names: tuple[str, ...], axis: str, months: int | None,
                   con: duckdb.DuckDBPyConnection | None, user_edges: np.ndarray | None = None
                   ) -> tuple[pd.DataFrame, int, float, str]:
    own = con is None
    if own:
        con = duckdb.connect()
    try:
        where = duckdb_input(con, source, names, need_start_date=axis == "calendar")
        facts = check_input(con, where)
        if user_edges is not None:
            run_step(con, "models/exposure_tenure",
                     {"days_per_month": DAYS_PER_MONTH, "n_bands": user_edges.shape[0] - 1,
                      "by_edges": True, "edges": [float(e) for e in user_edges]},
                     create="exposure_bands")
            raw = run_step(con, "models/exposure_running").df()
        else:
            raw = exposure_by_band(con, axis,
                                   _UNLIMITED_BANDS if months is None else int(months))
    finally:
        if own:
            con.close()
    if user_edges is not None:
        raw = _fill_bands(raw, user_edges.shape[0] - 1)
    elif axis == "tenure" and months is not None:
        # the grid stops at the last month with exposure; fill up to `months`
        raw = _fill_bands(raw, months)
    return raw, int(facts[0]), float(facts[7]), where


def check_input(con: duckdb.DuckDBPyConnection, where: str) -> tuple:
    """Check the registered ``exposure_input``; its facts row (sql/models/exposure_check.sql).

    Raises a DataError naming the first broken contract rule.
    """
    row = run_step(con, "models/exposure_check").fetchall()[0]
    n, missing, order, negative, churned, weight, cause = row[:7]
    if n == 0:
        raise DataError(where, "the table has no rows", "check the filter or the input file")
    for count, rule, fix in (
        (missing, "start or stop is missing or not finite",
         "every row needs a finite start and stop"),
        (order, "start must be < stop", "fix or drop those rows"),
        (negative, "start must be >= 0 (tenure in days)",
         "tenure counts from the spell's start day"),
        (churned, "churned must be 0 or 1", "code churn as 1 and censoring as 0"),
        (weight, "weights must be finite and > 0", "drop zero-weight rows"),
        (cause, "cause must be voluntary, involuntary or empty", "map reasons onto the two causes"),
    ):
        if count:
            raise DataError(where, f"{rule} ({count:,} rows)", fix)
    return row


def _fill_bands(raw: pd.DataFrame, months: int) -> pd.DataFrame:
    segs = sorted(raw["segment"].unique()) if len(raw) else [ALL]
    full = pd.MultiIndex.from_product([segs, range(months)], names=["segment", "band"])
    out = raw.set_index(["segment", "band"]).reindex(full)
    out = out.fillna({c: 0.0 for c in out.columns})
    return out.reset_index()


def _finish(raw: pd.DataFrame, axis: str, level: float, cause_split: bool,
            edges: np.ndarray | None = None) -> pd.DataFrame:
    """From raw counts per (segment, band) to the published table.

    With user band ``edges`` each band's width W (months) enters q = 1 − exp(−m W)
    and the survivors l_{k+1} = l_k exp(−m_k W_k), with the Poisson variance of
    the cumulative hazard Σ W_j² d_j / E_j².
    """
    f = pd.DataFrame({"segment": raw["segment"].astype(str).to_numpy(),
                      "month": raw["band"].to_numpy(dtype=np.int64)})
    width = np.ones(len(f))
    if edges is not None:
        k = f["month"].to_numpy()
        f["label"] = [_band_label(edges[i], edges[i + 1]) for i in k]
        f["from_days"] = edges[k]
        f["to_days"] = edges[k + 1]
        width = (edges[k + 1] - edges[k]) / DAYS_PER_MONTH
        f["width_months"] = width
    elif axis == "tenure":
        f["label"] = [f"month {k + 1}" for k in f["month"]]
    else:
        m = f["month"].to_numpy()
        f["label"] = [f"{y:04d}-{mo + 1:02d}" for y, mo in zip(m // 12, m % 12, strict=True)]
    e = raw["exposure_days"].to_numpy(dtype=float) / DAYS_PER_MONTH
    e = np.where(np.abs(e) < 1e-12, 0.0, e)  # running sums leave rounding dust
    d = raw["churns"].to_numpy(dtype=float)
    f["exposure"] = e
    f["in_force"] = np.round(raw["in_force"].to_numpy(dtype=float), 9)
    f["churns"] = d
    f["churns_voluntary"] = raw["churns_voluntary"].to_numpy(dtype=float)
    f["churns_involuntary"] = raw["churns_involuntary"].to_numpy(dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        pos = e > 0
        m = np.where(pos, d / np.where(pos, e, 1.0), np.nan)
        lo, hi = poisson_interval(d, level)
        f["m"] = m
        f["m_lower"] = np.where(pos, lo / np.where(pos, e, 1.0), np.nan)
        f["m_upper"] = np.where(pos, hi / np.where(pos, e, 1.0), np.nan)
        f["q"] = -np.expm1(-m * width)
        f["q_lower"] = -np.expm1(-f["m_lower"].to_numpy() * width)
        f["q_upper"] = -np.expm1(-f["m_upper"].to_numpy() * width)
        for cause in CAUSES:
            dc = f[f"churns_{cause}"].to_numpy()
            mc = np.where(pos, dc / np.where(pos, e, 1.0), np.nan)
            f[f"m_{cause}"] = mc
            f[f"q_{cause}"] = np.where(d > 0, f["q"].to_numpy() * dc / np.where(d > 0, d, 1.0),
                                       np.where(pos, 0.0, np.nan))
    if axis == "tenure":
        z = stats.norm.ppf(0.5 + level / 2)
        surv, s_lo, s_hi = [], [], []
        for _, seg in f.groupby("segment", sort=False):
            ww = width[seg.index.to_numpy()]
            mm = seg["m"].to_numpy() * ww
            ee = seg["exposure"].to_numpy()
            var = np.full(ee.shape, np.nan)
            np.divide(seg["churns"].to_numpy() * ww ** 2, ee ** 2, out=var, where=ee > 0)
            h = np.concatenate([[0.0], np.cumsum(mm)[:-1]])
            v = np.concatenate([[0.0], np.cumsum(var)[:-1]])
            surv.append(RADIX * np.exp(-h))
            s_lo.append(RADIX * np.exp(-h - z * np.sqrt(v)))
            s_hi.append(RADIX * np.exp(-h + z * np.sqrt(v)))
        f["survivors"] = np.concatenate(surv)
        f["survivors_lower"] = np.concatenate(s_lo)
        f["survivors_upper"] = np.concatenate(s_hi)
    if not cause_split:
        f = f.drop(columns=[c for c in f.columns if c.endswith(("_voluntary", "_involuntary"))])
    return f.reset_index(drop=True)


# ---------------------------------------------------------------- graduation
@dataclass(frozen=True)
class Graduation(Result):
    """Crude and Whittaker–Henderson graduated monthly probabilities q, with adherence tests.

    ``frame``: per (segment, month) exposure, churns, q_crude, q_graduated,
    m_graduated = −log(1 − q_graduated), expected = exposure · m_graduated,
    deviation = churns − expected, z = deviation / sqrt(expected).

    ``tests``: per segment the smoothing parameter h (given, or chosen by GCV — by
    UBRE with the Poisson variance when GCV would interpolate), ``criterion``, ``optimum``
    (interior, or the crude / polynomial end of the search range), the GCV score, the
    effective degrees of freedom tr A(h), and the tests: chi-square (X², degrees of
    freedom = months − tr A(h), p; p is NaN when those are not positive), signs (positive
    deviations, months, two-sided p), grouping of signs (Stevens 1939: groups,
    positives, negatives, one-sided p).
    """

    frame: pd.DataFrame
    tests: pd.DataFrame
    order: int
    smoothing: float | None
    weights: str = "exposure (customer-months), scaled to mean 1 over months with exposure"
    method: str = "Whittaker-Henderson: minimise sum w (v - u)^2 + h sum (diff^order v)^2"
    warnings: tuple[str, ...] = field(default_factory=tuple)

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def summary(self) -> str:
        parts = []
        for row in self.tests.itertuples():
            shown = [p for p in (row.chi_square_p, row.signs_p, row.groups_p) if p == p]
            verdict = "adheres" if min(shown) >= 0.05 else "check adherence"
            chi = (f"chi-square p = {row.chi_square_p:.3f} on {row.chi_square_dof:.1f} df"
                   if row.chi_square_dof > 0 else
                   f"chi-square test not shown ({row.chi_square_dof:.1f} degrees of freedom "
                   "left)")
            where = {"interior": "inside its search range"}.get(
                row.optimum, f"at the {row.optimum} end of its search range")
            how = "" if row.criterion == "given" else f" (by {row.criterion}, {where})"
            parts.append(f"{row.segment}: h = {row.smoothing:.3g}{how}, effective parameters "
                         f"{row.effective_parameters:.1f} of {row.months} months, {chi}, "
                         f"signs p = {row.signs_p:.3f}, groups p = {row.groups_p:.3f} "
                         f"({verdict})")
        return (f"Whittaker-Henderson graduation of q, order {self.order}. " + "; ".join(parts)
                + ".")


def _check_graduation_inputs(decrements: Any, order: int, smoothing: float | None) -> None:
    """The checks of :func:`graduate`'s arguments (one line each)."""
    if not isinstance(decrements, DecrementTable):
        raise DataError("graduate", f"needs a DecrementTable, not {type(decrements).__name__}",
                        "build one with decrement_table()")
    if decrements.band_edges is not None:
        raise ModelError("graduate", "the table is on user bands of unequal width",
                         "graduate a table by tenure month (decrement_table without band_edges)")
    if order not in (2, 3):
        raise DataError("graduate", f"order must be 2 or 3, not {order!r}",
                        "2 smooths towards a line, 3 towards a quadratic")
    if smoothing is not None and not (np.isfinite(smoothing) and smoothing >= 0):
        raise DataError("graduate", f"smoothing must be a number >= 0, not {smoothing!r}",
                        "or leave it out to choose it by cross-validation")


def graduate(
    decrements: DecrementTable,
    *,
    order: int = 2,
    smoothing: float | None = None,
) -> Graduation:
    """Graduate the monthly probabilities q of a decrement table by Whittaker–Henderson.

    Parameters
    ----------
    decrements : DecrementTable
        Crude rates; each segment is graduated on its own.
    order : 2 or 3
        Difference order z of the smoothness term (z = 2 tends to a straight line
        as h grows, z = 3 to a quadratic).
    smoothing : float, optional
        h ≥ 0; default chosen per segment by generalised cross-validation.

    Notes
    -----
    Weights are the months' exposures (scaled to mean 1), so that months with
    little exposure are smoothed more; months without exposure get weight 0 and
    are interpolated. Whittaker (1923), Henderson (1924); GCV: Craven and Wahba
    (1979); tests: e.g. Benjamin and Pollard (1980), ch. 13; Stevens (1939).
    """
    _check_graduation_inputs(decrements, order, smoothing)
    frames, tests, warnings = [], [], []
    for label in decrements.segments:
        seg = decrements.segment(label)
        e = seg["exposure"].to_numpy(dtype=float)
        u = seg["q"].to_numpy(dtype=float)
        pos = e > 0
        if int(pos.sum()) <= order:
            warnings.append(f"segment {label!r}: {int(pos.sum())} months with exposure, more "
                            f"than {order} needed; not graduated")
            continue
        w = np.where(pos, e / e[pos].mean(), 0.0)
        u0 = np.where(pos, u, 0.0)
        d = seg["churns"].to_numpy(dtype=float)
        criterion, position = "given", "given"
        if smoothing is None:
            # Poisson: Var(u_i) ≈ m_i / e_i, so the variance per unit weight w_i = e_i / ē is
            # about the overall central rate over the mean exposure
            scale = float(d[pos].sum() / e[pos].sum() / e[pos].mean())
            choice = choose_smoothing(u0, w, order, scale=scale)
            h, criterion, position = choice.h, choice.criterion, choice.position
            gcv = gcv_score(u0, w, h, order)
            if position == "polynomial":
                warnings.append(f"segment {label!r}: {criterion} is lowest at the smooth end "
                                f"of its range (h = {h:.3g}): a polynomial of degree "
                                f"{order - 1} fits as well as any smoother curve")
            elif position == "crude":
                warnings.append(f"segment {label!r}: {criterion} is lowest at the rough end "
                                f"of its range (h = {h:.3g}): the graduation stays close to "
                                "the crude rates")
        else:
            h = float(smoothing)
            gcv = gcv_score(u0, w, h, order)
        v = whittaker_henderson(u0, w, h, order)
        if h == 0:
            v = np.where(pos, u0, np.nan)
        if np.nanmin(v) < 0 or np.nanmax(v) >= 1:
            warnings.append(f"segment {label!r}: graduated q outside [0, 1) set to the bound")
            v = np.clip(v, 0.0, 1.0 - 1e-12)
        m = -np.log1p(-v)
        expected = e * m
        dev = d - expected
        with np.errstate(divide="ignore", invalid="ignore"):
            z = np.where(expected > 0, dev / np.sqrt(expected), np.nan)
        edf = hat_trace(w, h, order)
        use = pos & (expected > 0)
        x2, p_chi = chi_square_test(d[use], expected[use], float(use.sum()) - edf)
        n_pos, n_sig, p_sig = signs_test(dev[use])
        groups, n1, n2, p_grp = grouping_of_signs_test(dev[use])
        frames.append(pd.DataFrame({
            "segment": label, "month": seg["month"], "label": seg["label"], "exposure": e,
            "churns": d, "q_crude": u, "q_graduated": v, "m_graduated": m,
            "expected": expected, "deviation": dev, "z": z}))
        dof = float(use.sum()) - edf
        if not dof > 0:
            warnings.append(f"segment {label!r}: chi-square test not shown: its degrees of "
                            f"freedom ({int(use.sum())} months − {edf:.1f} effective "
                            f"parameters = {dof:.1f}) are not positive")
        tests.append({"segment": label, "smoothing": h, "criterion": criterion,
                      "optimum": position, "gcv": gcv, "effective_parameters": edf,
                      "months": int(use.sum()), "chi_square": x2,
                      "chi_square_dof": dof, "chi_square_p": p_chi,
                      "signs_positive": n_pos, "signs_n": n_sig, "signs_p": p_sig,
                      "groups": groups, "groups_positive": n1, "groups_negative": n2,
                      "groups_p": p_grp})
    if not frames:
        raise ModelError("graduate", "no segment has enough months with exposure",
                         "use more data or fewer segments")
    return Graduation(frame=pd.concat(frames, ignore_index=True), tests=pd.DataFrame(tests),
                      order=order, smoothing=smoothing, warnings=tuple(warnings))
