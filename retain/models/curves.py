"""Retention curves, cohort tables and group comparisons on start-stop data.

The nonparametric layer: Kaplan–Meier retention, Nelson–Aalen cumulative
hazard, lifetime quantiles, restricted mean tenure, log-rank tests, curves by
segment, the cohort × month retention table and a time-grid helper.

Conventions (every function here):

- Time is tenure in days; one month is ``retain.units.DAYS_PER_MONTH`` days.
- Intervals are (start, stop]: a row is at risk just after ``start`` through
  ``stop``. Delayed entry (``start > 0`` on a spell's first row) is handled by
  the risk sets: a spell counts only once it has entered.
- Ties: churns at a time are counted before censorings at the same time (a
  customer censored at ``t`` is at risk for the churns at ``t``).
- Case weights are frequency weights: a row of weight 3 is three identical rows.
- A row followed by another row of the same customer and spell is a change of
  covariates, not a censoring: splitting a row changes nothing. A table without
  customer ids (compressed) counts every non-churn row end as a censoring in
  the ``censored`` column (the curve itself is unaffected).

Entry points validate and return frozen results; the arithmetic lives in
``retain.kernels.risksets`` and ``retain.kernels.km``.
"""

from __future__ import annotations

import copy
import math
from collections.abc import Iterator, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import stats

from retain.data.table import Categorical, StartStop
from retain.errors import DataError, ModelError
from retain.kernels import km as K
from retain.kernels.risksets import (
    at_risk_at,
    continued_rows,
    exposure_to,
    first_of_spell,
    risk_table,
)
from retain.models._segments import column_codes
from retain.results import Result, resolve_level
from retain.units import DAYS_PER_MONTH

INTERVALS = ("log-log", "log", "linear")
GRID_MONTHS = (1, 3, 6, 12, 24)


def reading_day(months: Sequence[float] | np.ndarray | float) -> np.ndarray:
    """The tenure day on which a figure "at k months" is read: ⌊k × DAYS_PER_MONTH⌋, the
    last whole day within k months of 30.4375 days. So 12 months is day 365, and a year
    of follow-up (365 days) observes it; 1, 3, 6 and 24 months are days 30, 91, 182, 730.
    The one month convention for retention at fixed months."""
    m = np.atleast_1d(np.asarray(months, dtype=np.float64))
    return np.floor(m * DAYS_PER_MONTH + 1e-9)


TWELVE_MONTHS_DAYS = float(reading_day(12)[0])  # 365.0


# --------------------------------------------------------------------------- helpers
def _check_table(table: object, where: str) -> StartStop:
    if not isinstance(table, StartStop):
        raise DataError(where, f"expected a StartStop table, got {type(table).__name__}",
                        "build one with StartStop.from_parquet / from_frame")
    if table.n_rows == 0:
        raise ModelError(where, "the table (or group) has no rows",
                         "check the filter or the segment value")
    return table


def _level_z(level: float, ci: str, where: str) -> float:
    """The normal quantile of a level already checked by ``resolve_level``; checks ``ci``."""
    if ci not in INTERVALS:
        raise ModelError(where, f"unknown interval type {ci!r}",
                         f"choose one of: {', '.join(INTERVALS)}")
    return float(stats.norm.isf((1.0 - float(level)) / 2.0))


def _exits(table: StartStop) -> np.ndarray | None:
    """Rows whose stop ends observation (not a covariate change), or None if unknown."""
    if not table.has_customers:
        return None
    return ~continued_rows(table.customer.codes, table.spell, table.start, table.stop)


def _without_covariates(table: StartStop) -> StartStop:
    """A view of the table without covariates, so per-group slices copy only the core."""
    lean = copy.copy(table)
    lean.covariates = {}
    return lean


def _count_customers(table: StartStop) -> int:
    """Distinct customers in O(n) (bincount of the integer codes)."""
    codes = table.customer.codes
    codes = codes[codes >= 0]
    return int(np.count_nonzero(np.bincount(codes))) if codes.size else 0


def _step_lookup(times: np.ndarray, values: np.ndarray, t: np.ndarray,
                 before: float) -> np.ndarray:
    """Right-continuous step function through (times, values), ``before`` left of times[0]."""
    k = np.searchsorted(times, t, side="right")
    padded = np.concatenate(([before], values))
    return padded[k]


def _fmt_days(d: float | None) -> str:
    if d is None or not math.isfinite(d):
        return "not reached"
    return f"{d:.0f} days ({d / DAYS_PER_MONTH:.1f} months)"


# --------------------------------------------------------------------------- results
@dataclass(frozen=True, eq=False)
class LifetimeQuantile(Result):
    """A quantile of tenure: the time by which a fraction ``p`` of customers has churned.

    ``days`` is None when the curve never falls to ``1 - p`` ("not reached");
    ``upper`` is None when the interval's upper end lies beyond the data.
    Interval by Brookmeyer & Crowley (1982): the event times at which the
    pointwise test of ``S(t) = 1 - p`` (on the curve's interval scale) is not
    rejected; the upper limit is the next event time after the last such time.
    """

    label: str
    p: float
    days: float | None
    lower: float | None
    upper: float | None
    level: float
    ci: str

    @property
    def reached(self) -> bool:
        return self.days is not None

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{"label": self.label, "p": self.p, "days": self.days,
                              "lower": self.lower, "upper": self.upper,
                              "reached": self.reached}])

    def summary(self) -> str:
        what = "median tenure" if self.p == 0.5 else f"time to {self.p:.0%} churned"
        return (f"{self.label}: {what} {_fmt_days(self.days)}; {self.level:.0%} interval "
                f"{_fmt_days(self.lower)} to {_fmt_days(self.upper)}")


@dataclass(frozen=True, eq=False)
class RestrictedMean(Result):
    """Restricted mean tenure: expected days retained within the first ``horizon`` days.

    The area under the Kaplan–Meier curve from 0 to ``horizon`` (Irwin 1949),
    SE by Klein & Moeschberger (2003, eq. 4.5.2), normal interval.
    """

    label: str
    horizon: float
    mean: float
    se: float
    lower: float
    upper: float
    level: float
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{"label": self.label, "horizon": self.horizon, "mean": self.mean,
                              "se": self.se, "lower": self.lower, "upper": self.upper}])

    def summary(self) -> str:
        return (f"{self.label}: of the first {self.horizon:g} days a customer stays "
                f"{self.mean:.1f} days on average ({self.level:.0%} CI {self.lower:.1f} to "
                f"{self.upper:.1f})")


@dataclass(frozen=True, eq=False)
class RetentionCurve(Result):
    """Kaplan–Meier retention (survival) curve on start-stop data.

    Arrays are indexed by the distinct times at which a customer churned or left
    observation. ``survival[j]`` holds on ``[times[j], times[j+1])``; before the
    first time it is 1; after ``follow_up`` (the last observed tenure) it is
    not defined (NaN from :meth:`at`).

    With delayed entry the curve is conditional on being retained up to the
    earliest entry time (``first_entry``).
    """

    label: str
    times: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray
    censored: np.ndarray
    survival: np.ndarray
    se: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    greenwood: np.ndarray
    level: float
    ci: str
    n_rows: int
    n_customers: int
    n_events: float
    follow_up: float
    first_entry: float
    warnings: tuple[str, ...] = ()

    @property
    def reached_zero(self) -> bool:
        """Whether the curve has fallen to 0 (everyone at risk at some time churned then).

        A Kaplan–Meier product that reaches 0 stays 0, so past ``follow_up`` the
        curve is known (0), not unobserved.
        """
        return bool(self.survival.size and self.survival[-1] <= 0.0)

    @property
    def known_until(self) -> float:
        """The largest tenure the curve describes: ``follow_up``, or infinity once it is 0."""
        return math.inf if self.reached_zero else float(self.follow_up)

    # ---- evaluation
    def at(self, days: Sequence[float] | np.ndarray | float) -> np.ndarray:
        """Retention at the given tenures (days); NaN past ``follow_up`` or below 0."""
        t = np.atleast_1d(np.asarray(days, dtype=np.float64))
        out = _step_lookup(self.times, self.survival, t, 1.0)
        out[(t > self.follow_up) | (t < 0)] = np.nan
        return out

    def interval_at(self, days: Sequence[float] | np.ndarray | float
                    ) -> tuple[np.ndarray, np.ndarray]:
        """Pointwise (lower, upper) limits at the given tenures; NaN where :meth:`at` is."""
        t = np.atleast_1d(np.asarray(days, dtype=np.float64))
        lo = _step_lookup(self.times, self.lower, t, 1.0)
        hi = _step_lookup(self.times, self.upper, t, 1.0)
        bad = (t > self.follow_up) | (t < 0)
        lo[bad] = np.nan
        hi[bad] = np.nan
        return lo, hi

    def at_months(self, months: Sequence[float] | np.ndarray | float) -> np.ndarray:
        """Retention at k months, read on :func:`reading_day` (12 months: day 365)."""
        return self.at(reading_day(months))

    def interval_at_months(self, months: Sequence[float] | np.ndarray | float
                           ) -> tuple[np.ndarray, np.ndarray]:
        """Pointwise limits at k months, read on :func:`reading_day`."""
        return self.interval_at(reading_day(months))

    def at_risk_at(self, days: Sequence[float] | np.ndarray | float) -> np.ndarray:
        """Weighted number at risk at the given tenures (from the curve's own counts).

        Exact at the curve's times; between times it is the count at the next
        time (no one enters or leaves in between except by delayed entry).
        """
        t = np.atleast_1d(np.asarray(days, dtype=np.float64))
        k = np.searchsorted(self.times, t, side="left")
        padded = np.concatenate((self.at_risk, [0.0]))
        return padded[k]

    def quantile(self, p: float) -> LifetimeQuantile:
        """Time by which a fraction ``p`` has churned: first time with ``S(t) <= 1 - p``.

        A tolerance of 1e-12 absorbs rounding in the product. "Not reached"
        (``days=None``) when the curve stays above ``1 - p``.
        """
        if not (0.0 < p < 1.0):
            raise ModelError(f"quantile of {self.label}", f"p must be in (0, 1), got {p!r}",
                             "p = 0.5 is the median")
        s = 1.0 - p
        ev = self.events > 0
        t, sv, lo, hi = self.times[ev], self.survival[ev], self.lower[ev], self.upper[ev]
        tol = 1e-12
        below = np.flatnonzero(sv <= s + tol)
        days = float(t[below[0]]) if below.size else None
        accept = np.flatnonzero((lo <= s + tol) & (hi >= s - tol))
        if accept.size:
            lower = float(t[accept[0]])
            upper = float(t[accept[-1] + 1]) if accept[-1] + 1 < t.shape[0] else None
        else:
            lower = upper = None
            if days is not None:  # interval collapsed onto the point (tiny SE)
                lower = upper = days
        return LifetimeQuantile(self.label, float(p), days, lower, upper, self.level, self.ci)

    def median(self) -> LifetimeQuantile:
        """Median tenure with its Brookmeyer–Crowley interval."""
        return self.quantile(0.5)

    def restricted_mean(self, horizon: float) -> RestrictedMean:
        """Restricted mean tenure up to ``horizon`` days.

        Refuses (ModelError) a horizon past ``follow_up``: the curve is not
        observed there, and any area beyond it would be invented -- unless the
        curve has reached 0 (:attr:`reached_zero`): S(t) = 0 from then on, the
        area beyond is exactly 0 and the horizon may lie anywhere. (With no
        censoring that makes the restricted mean past the largest tenure the
        sample mean: the area under the empirical survival function is the
        mean, a common identity.)
        """
        where = f"restricted mean of {self.label}"
        if not (isinstance(horizon, (int, float)) and math.isfinite(horizon) and horizon > 0):
            raise ModelError(where, f"horizon must be a positive number of days, got {horizon!r}",
                             "e.g. horizon=365")
        if horizon > self.known_until:
            raise ModelError(where, f"horizon {horizon:g} days is past the last observed tenure "
                             f"({self.follow_up:g} days) and the curve has not reached 0",
                             f"choose a horizon <= {self.follow_up:g} days")
        mean, se = K.restricted_mean(self.times, self.survival, self.at_risk, self.events,
                                     float(horizon))
        z = float(stats.norm.isf((1.0 - self.level) / 2.0))
        warn = ()
        ev_t = self.times[self.events > 0]
        if self.reached_zero and horizon > self.follow_up:
            warn = (f"the curve reached 0 at {self.follow_up:g} days; the area from there to "
                    f"the horizon {horizon:g} days is 0",)
        elif ev_t.size == 0 or horizon > ev_t[-1]:
            warn = (f"no churn observed between the last churn and the horizon {horizon:g} days; "
                    "the curve is held flat there",)
        return RestrictedMean(self.label, float(horizon), mean, se, mean - z * se, mean + z * se,
                              self.level, warn)

    # ---- presentation
    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({
            "time": self.times, "at_risk": self.at_risk, "events": self.events,
            "censored": self.censored, "survival": self.survival, "se": self.se,
            "lower": self.lower, "upper": self.upper,
        })

    def summary(self) -> str:
        yr = TWELVE_MONTHS_DAYS
        parts = [f"Kaplan–Meier retention, {self.label}: {self.n_customers} customers, "
                 f"{self.n_events:g} churns over {self.n_rows} rows"]
        if self.follow_up >= yr:
            s = float(self.at(yr)[0])
            lo, hi = (float(x[0]) for x in self.interval_at(yr))
            parts.append(f"retained at 12 months {s:.1%} ({self.level:.0%} {self.ci} CI "
                         f"{lo:.1%} to {hi:.1%})")
        parts.append(f"median tenure {_fmt_days(self.median().days)}")
        return "; ".join(parts)


@dataclass(frozen=True, eq=False)
class CumulativeHazard(Result):
    """Nelson–Aalen cumulative hazard with Aalen's variance and log-scale interval."""

    label: str
    times: np.ndarray
    at_risk: np.ndarray
    events: np.ndarray
    hazard: np.ndarray
    variance: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    level: float
    follow_up: float
    n_events: float

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(self.variance)

    def at(self, days: Sequence[float] | np.ndarray | float) -> np.ndarray:
        """Cumulative hazard at the given tenures; NaN past ``follow_up``."""
        t = np.atleast_1d(np.asarray(days, dtype=np.float64))
        out = _step_lookup(self.times, self.hazard, t, 0.0)
        out[(t > self.follow_up) | (t < 0)] = np.nan
        return out

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"time": self.times, "at_risk": self.at_risk, "events": self.events,
                             "cumulative_hazard": self.hazard, "se": self.se,
                             "lower": self.lower, "upper": self.upper})

    def summary(self) -> str:
        h = float(self.hazard[-1]) if self.hazard.size else 0.0
        return (f"Nelson–Aalen cumulative hazard, {self.label}: {h:.3f} by day "
                f"{self.follow_up:g} ({self.n_events:g} churns)")


@dataclass(frozen=True, eq=False)
class SegmentCurves(Result):
    """One Kaplan–Meier curve per value of a column (a mapping level -> curve).

    ``basis`` says how rows were assigned: ``"spell start"`` (each spell is
    placed by the column's value on its first row, so a time-varying attribute
    such as plan means "plan at the start of the spell") or ``"row value"``
    (tables without customer ids).
    """

    by: str
    basis: str
    curves: dict[str, RetentionCurve]
    n_missing: float
    warnings: tuple[str, ...] = ()

    def __getitem__(self, level: str) -> RetentionCurve:
        if level not in self.curves:
            raise ModelError(f"curves by {self.by}", f"no segment {level!r}",
                             f"choose one of: {', '.join(self.curves)}")
        return self.curves[level]

    def __iter__(self) -> Iterator[str]:
        return iter(self.curves)

    def __len__(self) -> int:
        return len(self.curves)

    def keys(self) -> list[str]:
        return list(self.curves)

    def items(self) -> list[tuple[str, RetentionCurve]]:
        return list(self.curves.items())

    def to_frame(self) -> pd.DataFrame:
        frames = [c.to_frame().assign(segment=k) for k, c in self.curves.items()]
        out = pd.concat(frames, ignore_index=True)
        return out[["segment"] + [c for c in out.columns if c != "segment"]]

    def summary(self) -> str:
        parts = [f"{k}: median {_fmt_days(c.median().days)}" for k, c in self.curves.items()]
        return f"Retention by {self.by} ({self.basis}): " + "; ".join(parts)


# --------------------------------------------------------------------------- entry points
def kaplan_meier(table: StartStop, *, level: float | None = None, ci: str = "log-log",
                 label: str = "all customers", conf: float | None = None) -> RetentionCurve:
    """Kaplan–Meier retention curve with Greenwood standard errors.

    .. math::

        \\hat S(t) = \\prod_{t_j \\le t} \\left(1 - \\frac{d_j}{n_j}\\right), \\qquad
        \\widehat{\\mathrm{Var}}\\,\\hat S(t) = \\hat S(t)^2
            \\sum_{t_j \\le t} \\frac{d_j}{n_j (n_j - d_j)}

    (Kaplan & Meier 1958; Greenwood 1926) with ``n_j`` the weighted number at
    risk on (start, stop] at ``t_j`` (delayed entry: Tsai, Jewell & Wang 1987)
    and ``d_j`` the weighted churns at ``t_j``; churns before censorings at
    tied times.

    Parameters
    ----------
    table : StartStop
    level : float
        Level of the pointwise intervals (default 0.95); ``conf=`` is accepted as its
        older name.
    ci : {"log-log", "log", "linear"}
        Interval scale; log-log (default) keeps limits inside (0, 1).
    label : str
        Name carried by the result.
    """
    where = f"Kaplan–Meier ({label})"
    table = _check_table(table, where)
    level = resolve_level(level, conf, where)
    z = _level_z(level, ci, where)
    return _km(table, z, float(level), ci, label, _exits(table))


def _km(table: StartStop, z: float, level: float, ci: str, label: str,
        exits: np.ndarray | None) -> RetentionCurve:
    rt = risk_table(table.start, table.stop, table.churned, table.weight, exits=exits)
    surv, gw = K.product_limit(rt.at_risk, rt.events)
    lower, upper = K.survival_interval(surv, gw, z, ci)
    warnings: list[str] = []
    n_events = float(rt.events.sum())
    if n_events == 0:
        warnings.append(f"{label}: no churn observed; the curve stays at 1")
    return RetentionCurve(
        label=label, times=rt.times, at_risk=rt.at_risk, events=rt.events,
        censored=rt.censored, survival=surv, se=surv * np.sqrt(gw), lower=lower, upper=upper,
        greenwood=gw, level=level, ci=ci, n_rows=table.n_rows,
        n_customers=_count_customers(table),
        n_events=n_events, follow_up=float(table.stop.max()),
        first_entry=float(table.start.min()), warnings=tuple(warnings),
    )


def nelson_aalen(table: StartStop, *, level: float | None = None,
                 label: str = "all customers", conf: float | None = None) -> CumulativeHazard:
    """Nelson–Aalen cumulative hazard of churn with Aalen's variance.

    :math:`\\hat H(t) = \\sum_{t_j \\le t} d_j / n_j`, variance
    :math:`\\sum d_j / n_j^2` (Nelson 1972; Aalen 1978). Interval on the log
    scale: :math:`\\hat H \\exp(\\pm z\\, se / \\hat H)`. Same risk sets as
    :func:`kaplan_meier`.
    """
    where = f"Nelson–Aalen ({label})"
    table = _check_table(table, where)
    level = resolve_level(level, conf, where)
    z = _level_z(level, "log", where)
    rt = risk_table(table.start, table.stop, table.churned, table.weight, exits=_exits(table))
    h, var = K.cumulative_hazard(rt.at_risk, rt.events)
    se = np.sqrt(var)
    ratio = np.divide(z * se, h, out=np.zeros_like(h), where=h > 0)
    return CumulativeHazard(label, rt.times, rt.at_risk, rt.events, h, var, h * np.exp(-ratio),
                            h * np.exp(ratio), float(level), float(table.stop.max()),
                            float(rt.events.sum()))


def spell_start_codes(table: StartStop, by: str) -> tuple[np.ndarray, tuple[str, ...], str]:
    """Group codes for ``by``, taken from the first row of each spell.

    Returns (codes, levels, basis). A numeric column is grouped by its distinct
    values. Without customer ids each row keeps its own value (basis
    ``"row value"``). Code -1 marks a missing value.
    """
    codes, levels = column_codes(table.column(by))
    if not table.has_customers:
        return codes, levels, "row value"
    head = first_of_spell(table.customer.codes, table.spell, table.start)
    return codes[head], levels, "spell start"


def curves_by(table: StartStop, by: str, *, level: float | None = None,
              ci: str = "log-log", conf: float | None = None) -> SegmentCurves:
    """Kaplan–Meier curve for each value of column ``by``.

    Any categorical (or numeric, by distinct value) column of the table. Each
    spell is assigned by the column's value on the spell's first row, so for a
    time-varying attribute (e.g. plan) a spell stays in the group it started
    in: the curve answers "customers who started on plan X". Rows with a
    missing value are left out (counted in ``n_missing``). Segments with no
    rows are omitted; a segment with no churn gets a flat curve and a warning.
    """
    where = f"curves by {by!r}"
    table = _check_table(table, where)
    level = resolve_level(level, conf, where)
    z = _level_z(level, ci, where)
    codes, levels, basis = spell_start_codes(table, by)
    exits = _exits(table)
    curves: dict[str, RetentionCurve] = {}
    warnings: list[str] = []
    lean = _without_covariates(table)
    for code, value in enumerate(levels):
        mask = codes == code
        if not mask.any():
            continue
        sub = lean.take(mask)
        c = _km(sub, z, float(level), ci, f"{by} = {value}",
                None if exits is None else exits[mask])
        curves[value] = c
        warnings.extend(c.warnings)
    missing = codes < 0
    n_missing = float(table.weight[missing].sum())
    if n_missing:
        warnings.append(f"{int(missing.sum())} rows have no value of {by!r} and are left out")
    if not curves:
        raise ModelError(where, f"column {by!r} has no values", "pick a column with values")
    return SegmentCurves(by, basis, curves, n_missing, tuple(warnings))


# --------------------------------------------------------------------------- cohort table
@dataclass(frozen=True, eq=False)
class CohortTable(Result):
    """Cohort × month retention: Kaplan–Meier per signup cohort, read at whole months.

    Matrices have one row per cohort (``cohorts``, 'YYYY-MM') and one column per
    month since start (``months`` = 1, 2, ...; month k = tenure
    ``k * DAYS_PER_MONTH`` days). A cell that cannot be observed yet (the
    cohort's oldest spell has not reached that tenure by the last day in the
    data, or nobody of the cohort was under observation then) is NaN, never 0.

    Delayed entry: a cohort whose spells all began before the observation
    window enters at tenure ``entered_at`` (days, > 0). Its cells before that
    tenure are NaN and its later cells are retention *conditional on being
    active at* ``entered_at`` (Kaplan–Meier under left truncation estimates
    S(t) / S(entered_at)); ``warnings`` names such cohorts.

    ``churn_rate[c, k-1]`` is churns in month k (tenure in
    ((k-1)·DAYS_PER_MONTH, k·DAYS_PER_MONTH]) divided by the exposure in that
    month in customer-months (``exposure`` holds the exposure), with an exact
    Poisson interval on the churn count (Garwood 1936; weighted counts are
    treated as counts).
    """

    cohorts: tuple[str, ...]
    months: tuple[int, ...]
    started: np.ndarray
    entered_at: np.ndarray
    retention: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    at_risk: np.ndarray
    churns: np.ndarray
    exposure: np.ndarray
    churn_rate: np.ndarray
    churn_rate_lower: np.ndarray
    churn_rate_upper: np.ndarray
    level: float
    ci: str
    as_of_basis: str
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        """Long form: one row per (cohort, month)."""
        nc, nm = self.retention.shape
        return pd.DataFrame({
            "cohort": np.repeat(np.array(self.cohorts, dtype=object), nm),
            "month": np.tile(np.array(self.months), nc),
            "days": np.tile(np.array(self.months) * DAYS_PER_MONTH, nc),
            "started": np.repeat(self.started, nm),
            "entered_at": np.repeat(self.entered_at, nm),
            "retention": self.retention.ravel(), "lower": self.lower.ravel(),
            "upper": self.upper.ravel(), "at_risk": self.at_risk.ravel(),
            "churns": self.churns.ravel(), "exposure_months": self.exposure.ravel(),
            "churn_rate": self.churn_rate.ravel(),
            "churn_rate_lower": self.churn_rate_lower.ravel(),
            "churn_rate_upper": self.churn_rate_upper.ravel(),
        })

    def retention_frame(self) -> pd.DataFrame:
        """Wide form: cohorts down, months across, retention in the cells (NaN = not yet)."""
        return pd.DataFrame(self.retention, index=pd.Index(self.cohorts, name="cohort"),
                            columns=pd.Index(self.months, name="month"))

    def summary(self) -> str:
        obs = np.isfinite(self.retention)
        return (f"Cohort retention: {len(self.cohorts)} cohorts x {len(self.months)} months, "
                f"{int(obs.sum())} observable cells")


def cohort_retention(table: StartStop, *, months: int = 24, level: float | None = None,
                     ci: str = "log-log", cohort: str = "cohort",
                     conf: float | None = None) -> CohortTable:
    """Cohort × months-since-start retention table built from Kaplan–Meier curves.

    Each cell is the Kaplan–Meier retention of that signup cohort at tenure
    ``k * DAYS_PER_MONTH`` days, with its pointwise interval and the number
    still at risk then; beside it, the monthly churn rate (churns / exposure in
    customer-months) of the cohort in month k.

    Why not the spreadsheet triangle ("still active / started"): that ratio
    counts a customer who signed up 40 days ago and is still active in the
    denominator of month 3 as if month 3 had been observed, and a customer who
    left observation (window end, delayed entry) as retained or lost depending
    on how the sheet was filled. It is biased wherever follow-up differs within
    a cohort. Kaplan–Meier uses each customer only while observed (censoring)
    and only after entry (delayed entry), so a cell is an estimate of the same
    quantity in every cohort, and cells that no one could have reached are left
    empty instead of showing a misleading 0 or 100%.

    Parameters
    ----------
    table : StartStop
        Needs a ``cohort`` column ('YYYY-MM' of the spell's start day) or
        ``start_date`` (the cohort is then derived from it).
    months : int
        Number of month columns (default 24).
    cohort : str
        Name of the cohort column.

    Notes
    -----
    The last observed day is the table's as-of date (:attr:`StartStop.last_day`:
    from its context, else ``max(start_date + stop)``) when ``start_date`` is
    present; a cohort's cell at month k is observable when
    the cohort's earliest start plus k months is on or before that day.
    Without ``start_date`` the cohort's largest observed tenure is used.
    """
    where = "cohort retention"
    table = _check_table(table, where)
    level = resolve_level(level, conf, where)
    z = _level_z(level, ci, where)
    if not (isinstance(months, (int, np.integer)) and months >= 1):
        raise ModelError(where, f"months must be a positive whole number, got {months!r}",
                         "e.g. months=24")
    codes, levels = _cohort_codes(table, cohort, where)
    exits = _exits(table)
    grid = np.arange(1, months + 1, dtype=np.float64) * DAYS_PER_MONTH
    edges = np.concatenate(([0.0], grid))
    if table.start_date is not None:
        start_day = table.start_date.astype("datetime64[D]").astype(np.int64)
        last_day = table.last_day  # the as-of date (context), else the data's last day
        basis = table.last_day_basis
    else:
        start_day = None
        last_day = math.nan
        basis = "largest observed tenure of each cohort"
    shape = (len(levels), months)
    out = {k: np.full(shape, np.nan) for k in
           ("retention", "lower", "upper", "at_risk", "churns", "exposure", "rate")}
    started = np.zeros(len(levels))
    entered = np.zeros(len(levels))
    keep_rows: list[int] = []
    lean = _without_covariates(table)
    warnings: list[str] = []
    for code in range(len(levels)):
        mask = codes == code
        if not mask.any():
            continue
        keep_rows.append(code)
        sub = lean.take(mask)
        ex = None if exits is None else exits[mask]
        started[code] = float(sub.weight[ex].sum()) if ex is not None else float(sub.weight.sum())
        if start_day is not None:
            reach = last_day - float(start_day[mask].min())
        else:
            reach = float(sub.stop.max())
        entered[code] = _cohort_km_cells(out, code, sub, ex, reach, grid, z, float(level), ci,
                                         levels[code], warnings)
        _cohort_monthly_churns(out, code, sub, reach, edges, months)
    rows = np.array(keep_rows, dtype=np.int64)
    rate_lo, rate_hi = _churn_rate_limits(out, float(level))
    missing = codes < 0
    if missing.any():
        warnings.append(f"{int(missing.sum())} rows have no cohort and are left out")
    return CohortTable(
        cohorts=tuple(levels[i] for i in rows), months=tuple(range(1, months + 1)),
        started=started[rows], entered_at=entered[rows], retention=out["retention"][rows],
        lower=out["lower"][rows], upper=out["upper"][rows], at_risk=out["at_risk"][rows],
        churns=out["churns"][rows], exposure=out["exposure"][rows], churn_rate=out["rate"][rows],
        churn_rate_lower=rate_lo[rows], churn_rate_upper=rate_hi[rows], level=float(level), ci=ci,
        as_of_basis=basis, warnings=tuple(warnings),
    )


def _cohort_codes(table: StartStop, cohort: str, where: str
                  ) -> tuple[np.ndarray, Sequence[str]]:
    """Each row's cohort code (of its spell's first row) and the cohort labels."""
    if table.has(cohort):
        col = table.column(cohort)
        if not isinstance(col, Categorical):
            raise DataError(where, f"column {cohort!r} must be text 'YYYY-MM'",
                            "store the cohort as text")
        codes, levels = col.codes, col.levels
    elif table.start_date is not None:
        cat = Categorical.from_values(
            pd.Series(table.start_date.astype("datetime64[M]").astype(str)).to_numpy())
        codes, levels = cat.codes, cat.levels
    else:
        raise DataError(where, f"the table has neither a {cohort!r} column nor start_date",
                        "prepare the table with retain.data.prepare, which adds both")
    if table.has_customers:
        codes = codes[first_of_spell(table.customer.codes, table.spell, table.start)]
    return codes, levels


def _cohort_km_cells(out: dict[str, np.ndarray], code: int, sub: StartStop,
                     ex: np.ndarray | None, reach: float, grid: np.ndarray, z: float,
                     level: float, ci: str, label: str, warnings: list[str]) -> float:
    """Fill one cohort's retention, limits and at-risk cells; returns its entry tenure."""
    c = _km(sub, z, level, ci, label, ex)
    s = _step_lookup(c.times, c.survival, grid, 1.0)
    lo = _step_lookup(c.times, c.lower, grid, 1.0)
    hi = _step_lookup(c.times, c.upper, grid, 1.0)
    n_at = at_risk_at(sub.start, sub.stop, sub.weight, grid)
    if c.first_entry > 0:
        warnings.append(f"cohort {label} entered observation at tenure "
                        f"{c.first_entry:g} day{'' if c.first_entry == 1 else 's'}: its cells "
                        "are retention conditional on "
                        "being active then")
    # observable: reachable by the last day, after entry, someone at risk (or all gone)
    seen = ((grid <= reach + 1e-9) & (grid > c.first_entry)
            & ((n_at > 0) | (s <= 0)))
    out["retention"][code] = np.where(seen, s, np.nan)
    out["lower"][code] = np.where(seen, lo, np.nan)
    out["upper"][code] = np.where(seen, hi, np.nan)
    out["at_risk"][code] = np.where(seen, n_at, np.nan)
    return c.first_entry


def _cohort_monthly_churns(out: dict[str, np.ndarray], code: int, sub: StartStop, reach: float,
                           edges: np.ndarray, months: int) -> None:
    """Fill one cohort's churns, exposure (customer-months) and rate per month of tenure."""
    ev = sub.churned == 1
    month_of = np.searchsorted(edges, sub.stop[ev], side="left") - 1  # (e_k, e_k+1]
    inside = month_of < months
    churns = np.bincount(month_of[inside], weights=sub.weight[ev][inside], minlength=months)
    expo = np.diff(exposure_to(sub.start, sub.stop, sub.weight, edges)) / DAYS_PER_MONTH
    open_ = (edges[:-1] < reach) & (expo > 0)
    out["churns"][code] = np.where(open_, churns, np.nan)
    out["exposure"][code] = np.where(open_, expo, np.nan)
    out["rate"][code] = np.where(open_, churns / np.where(expo > 0, expo, 1.0), np.nan)


def _churn_rate_limits(out: dict[str, np.ndarray], level: float
                       ) -> tuple[np.ndarray, np.ndarray]:
    """Exact Poisson (Garwood 1936) limits of the monthly churn rates; NaN where no rate."""
    alpha = 1.0 - level
    d = out["churns"]
    e = out["exposure"]
    with np.errstate(invalid="ignore", divide="ignore"):
        rate_lo = np.where(d > 0, stats.chi2.ppf(alpha / 2, 2 * d) / 2, 0.0) / e
        rate_hi = stats.chi2.ppf(1 - alpha / 2, 2 * (d + 1)) / 2 / e
    rate_lo[~np.isfinite(out["rate"])] = np.nan
    rate_hi[~np.isfinite(out["rate"])] = np.nan
    return rate_lo, rate_hi

# --------------------------------------------------------------------------- time grid
@dataclass(frozen=True, eq=False)
class RetentionGrid(Result):
    """Retention read off a curve at chosen tenures, with intervals and numbers at risk.

    Points past the curve's last observed tenure are NaN and listed in
    ``warnings``.
    """

    label: str
    months: np.ndarray
    days: np.ndarray
    retention: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    at_risk: np.ndarray
    level: float
    ci: str
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"months": self.months, "days": self.days,
                             "retention": self.retention, "lower": self.lower,
                             "upper": self.upper, "at_risk": self.at_risk})

    def summary(self) -> str:
        parts = []
        for m, r, lo, hi in zip(self.months, self.retention, self.lower, self.upper, strict=True):
            if math.isfinite(r):
                parts.append(f"{m:g} mo {r:.1%} ({lo:.1%}-{hi:.1%})")
            else:
                parts.append(f"{m:g} mo not yet observed")
        return f"{self.label}: " + ", ".join(parts)


def retention_grid(curve: RetentionCurve, months: Sequence[float] | None = GRID_MONTHS, *,
                   days: Sequence[float] | None = None) -> RetentionGrid:
    """Retention at fixed tenures: months (read on :func:`reading_day`) or, if given, days.

    Parameters
    ----------
    curve : RetentionCurve
    months : sequence of float
        Default 1, 3, 6, 12, 24 months. Ignored when ``days`` is given.
    days : sequence of float, optional
        Tenures in days instead of months.
    """
    if not isinstance(curve, RetentionCurve):
        raise ModelError("retention grid", f"expected a RetentionCurve, got {type(curve).__name__}",
                         "pass the result of kaplan_meier")
    if days is not None:
        d = np.asarray(days, dtype=np.float64)
        m = d / DAYS_PER_MONTH
    else:
        m = np.asarray(months if months is not None else GRID_MONTHS, dtype=np.float64)
        d = reading_day(m) if m.ndim == 1 else m * DAYS_PER_MONTH
    if d.ndim != 1 or d.size == 0 or not np.all(np.isfinite(d)) or np.any(d < 0):
        raise ModelError("retention grid", "tenures must be a non-empty list of numbers >= 0",
                         "e.g. months=(1, 3, 6, 12)")
    s = curve.at(d)
    lo, hi = curve.interval_at(d)
    n = np.where(np.isfinite(s), curve.at_risk_at(d), np.nan)
    warn = tuple(f"{curve.label}: {x:g} days is past the last observed tenure "
                 f"({curve.follow_up:g} days)" for x in d[~np.isfinite(s)])
    return RetentionGrid(curve.label, m, d, s, lo, hi, n, curve.level, curve.ci, warn)


# --------------------------------------------------------------------------- comparisons
@dataclass(frozen=True, eq=False)
class GroupTest(Result):
    """A (weighted, optionally stratified) log-rank test that curves are equal.

    ``observed`` and ``expected`` are the weighted churns per group and their
    expectation under equal hazards (summed over strata, without time
    weights); ``statistic`` is chi-square with ``df`` degrees of freedom.
    """

    by: str
    levels: tuple[str, ...]
    weighting: str
    strata: str | None
    n_strata: int
    at_start: np.ndarray
    observed: np.ndarray
    expected: np.ndarray
    scores: np.ndarray
    covariance: np.ndarray
    statistic: float
    df: int
    p_value: float
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"group": list(self.levels), "spells": self.at_start,
                             "observed": self.observed, "expected": self.expected,
                             "observed_over_expected": np.divide(
                                 self.observed, self.expected,
                                 out=np.full_like(self.observed, np.nan),
                                 where=self.expected > 0)})

    def summary(self) -> str:
        strat = f", stratified by {self.strata}" if self.strata else ""
        return (f"{self.weighting} test of equal retention across {self.by} "
                f"({len(self.levels)} groups{strat}): chi-square {self.statistic:.2f} on "
                f"{self.df} df, p = {self.p_value:.3g}")


_WEIGHTINGS = {"logrank": "log-rank", "gehan-breslow": "Gehan–Breslow",
               "tarone-ware": "Tarone–Ware", "peto-peto": "Peto–Peto"}


def _parse_weighting(weighting: object, where: str) -> tuple[str, str, float, float]:
    """(label, kind, p, q) of a weighting option (see :func:`retain.kernels.km.logrank_weights`)."""
    if isinstance(weighting, str) and weighting in _WEIGHTINGS:
        return _WEIGHTINGS[weighting], weighting, 0.0, 0.0
    if (isinstance(weighting, tuple) and len(weighting) == 3
            and weighting[0] == "fleming-harrington"):
        p, q = float(weighting[1]), float(weighting[2])
        if p < 0 or q < 0 or not (math.isfinite(p) and math.isfinite(q)):
            raise ModelError(where, f"Fleming–Harrington exponents must be >= 0, got {p}, {q}",
                             "e.g. ('fleming-harrington', 1, 0)")
        return f"Fleming–Harrington({p:g}, {q:g})", "fleming-harrington", p, q
    raise ModelError(where, f"unknown weighting {weighting!r}",
                     "use 'logrank', 'gehan-breslow', 'tarone-ware', 'peto-peto' or "
                     "('fleming-harrington', p, q)")


def compare_groups(table: StartStop, by: str, *, strata: str | None = None,
                   weighting: object = "logrank") -> GroupTest:
    """Log-rank test (k groups) of equal retention, optionally stratified and weighted.

    Groups and strata are assigned by the columns' values at the start of each
    spell (see :func:`spell_start_codes`). With strata, the scores and their
    covariances are summed over strata (stratified log-rank; Kalbfleisch &
    Prentice 1980, sec. 6.2) and the time weights use each stratum's pooled
    curve.

    Parameters
    ----------
    by : str
        Column defining the groups (two or more values).
    strata : str, optional
        Column defining strata.
    weighting : str or ("fleming-harrington", p, q)
        "logrank", "gehan-breslow", "tarone-ware", "peto-peto", or the tuple.
        Time weights w_j at each churn time (formulas and sources in
        :func:`retain.kernels.km.logrank_weights`; scores in
        :func:`retain.kernels.km.rank_scores`): 1; the number at risk n_j
        (Gehan 1965, Breslow 1970); sqrt(n_j) (Tarone & Ware 1977); a
        survival estimate (Peto & Peto 1972); S^p (1 - S)^q. Gehan–Breslow,
        Tarone–Ware, Peto–Peto and Fleming–Harrington(1, 0) emphasise early
        differences; (0, 1) late ones. With strata, n_j is each stratum's own.
    """
    where = f"comparison of retention by {by!r}"
    table = _check_table(table, where)
    label, kind, p, q = _parse_weighting(weighting, where)
    codes, levels, _ = spell_start_codes(table, by)
    k = len(levels)
    if strata is not None:
        s_codes, s_levels, _ = spell_start_codes(table, strata)
    else:
        s_codes, s_levels = np.zeros(table.n_rows, dtype=np.int32), ("all",)
    exits = _exits(table)
    ok = (codes >= 0) & (s_codes >= 0)
    present = np.bincount(codes[ok], minlength=k) > 0
    if present.sum() < 2:
        raise ModelError(where, f"column {by!r} has {int(present.sum())} group(s) with data; "
                         "a comparison needs two or more", "pick a column with two values or more")
    u = np.zeros(k)
    v = np.zeros((k, k))
    obs = np.zeros(k)
    exp_ = np.zeros(k)
    used_strata = 0
    for sc in range(len(s_levels)):
        m = ok & (s_codes == sc)
        if not m.any():
            continue
        whole = bool(m.all())
        st, sp, ch, w = ((table.start, table.stop, table.churned, table.weight) if whole else
                         (table.start[m], table.stop[m], table.churned[m], table.weight[m]))
        # times = the distinct churn times (no censoring times needed for the test)
        rt = risk_table(st, sp, ch, w, exits=np.zeros(st.shape[0], dtype=bool),
                        group=codes if whole else codes[m], n_groups=k)
        if rt.times.size == 0:
            continue
        used_strata += 1
        n_all = rt.at_risk.sum(axis=1)
        d_all = rt.events.sum(axis=1)
        tw = K.logrank_weights(n_all, d_all, kind, p, q)
        uu, vv = K.rank_scores(rt.at_risk, rt.events, tw)
        u += uu
        v += vv
        obs += rt.events.sum(axis=0)
        share = np.divide(rt.at_risk, n_all[:, None], out=np.zeros_like(rt.at_risk),
                          where=n_all[:, None] > 0)
        exp_ += (share * d_all[:, None]).sum(axis=0)
    warnings: list[str] = []
    for g in range(k):
        if present[g] and obs[g] == 0:
            warnings.append(f"{by} = {levels[g]}: no churn observed in this group")
    if not present.all():
        warnings.append("groups with no rows are left out: "
                        + ", ".join(levels[g] for g in range(k) if not present[g]))
    if obs.sum() == 0:
        warnings.append("no churn in any group: the test has no information")
    stat, df = K.chi_square(u[present], v[np.ix_(present, present)])
    pval = float(stats.chi2.sf(stat, df)) if df > 0 else math.nan
    keep = np.flatnonzero(present)
    last = ok if exits is None else ok & exits  # one row per spell: its last
    at_start = np.bincount(codes[last], weights=table.weight[last], minlength=k)
    return GroupTest(by, tuple(levels[g] for g in keep), label, strata, used_strata,
                     at_start[keep], obs[keep], exp_[keep], u[keep], v[np.ix_(keep, keep)],
                     stat, df, pval, tuple(warnings))


@dataclass(frozen=True, eq=False)
class RestrictedMeanDifference(Result):
    """Difference in restricted mean tenure between two groups (``other`` − ``reference``).

    Independent groups: ``se = sqrt(se_ref^2 + se_other^2)``, normal interval
    and two-sided p-value (Royston & Parmar 2013).
    """

    by: str
    reference: RestrictedMean
    other: RestrictedMean
    horizon: float
    difference: float
    se: float
    lower: float
    upper: float
    p_value: float
    level: float

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([
            {"group": self.reference.label, "mean": self.reference.mean, "se": self.reference.se},
            {"group": self.other.label, "mean": self.other.mean, "se": self.other.se},
            {"group": "difference", "mean": self.difference, "se": self.se},
        ])

    def summary(self) -> str:
        return (f"Within {self.horizon:g} days, {self.other.label} stays {self.difference:+.1f} "
                f"days vs {self.reference.label} ({self.level:.0%} CI {self.lower:+.1f} to "
                f"{self.upper:+.1f}, p = {self.p_value:.3g})")


def rmst_difference(table: StartStop, by: str, horizon: float, *,
                    levels: tuple[str, str] | None = None,
                    level: float | None = None,
                    conf: float | None = None) -> RestrictedMeanDifference:
    """Restricted mean tenure of two groups up to ``horizon`` days and their difference.

    ``levels = (reference, other)``; default: the column's two values in
    sorted order (required when it has more than two). The horizon must not
    pass either group's last observed tenure (ModelError otherwise), unless
    that group's curve has reached 0 (see :meth:`RetentionCurve.restricted_mean`).
    """
    where = f"restricted mean difference by {by!r}"
    table = _check_table(table, where)
    level = resolve_level(level, conf, where)
    curves = curves_by(table, by, level=level)
    if levels is None:
        if len(curves) != 2:
            raise ModelError(where, f"column {by!r} has {len(curves)} groups with data",
                             "pass levels=(reference, other)")
        levels = (curves.keys()[0], curves.keys()[1])
    ref, oth = curves[levels[0]], curves[levels[1]]
    limit = min(ref.known_until, oth.known_until)
    if horizon > limit:
        raise ModelError(where, f"horizon {horizon:g} days is past the last observed tenure of "
                         f"one group ({limit:g} days), whose curve has not reached 0",
                         f"choose a horizon <= {limit:g} days")
    a = ref.restricted_mean(horizon)
    b = oth.restricted_mean(horizon)
    diff = b.mean - a.mean
    se = math.hypot(a.se, b.se)
    z = float(stats.norm.isf((1.0 - level) / 2.0))
    pval = float(2 * stats.norm.sf(abs(diff) / se)) if se > 0 else math.nan
    return RestrictedMeanDifference(by, a, b, float(horizon), diff, se, diff - z * se,
                                    diff + z * se, pval, float(level))
