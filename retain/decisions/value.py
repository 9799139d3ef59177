"""Lifetime value of new customers and residual value of the active base.

Every figure here is a discounted sum over future months of survival x
margin (see :mod:`retain.kernels.discount` for the formula and the timing
convention: the margin of each month is received at the end of that month,
only if the customer is still active then).

The curve is an explicit input: anything that meets
:class:`~retain.models.value_curves.SurvivalCurve` (``survival(days)``, and
``draws(n, seed)`` for intervals). :mod:`retain.models.value_curves` turns
retain's fitted models into such curves (one adapter per model family) and
has plain curves such as a constant monthly retention; :func:`segment_curves`
fits one per segment as ``[value] curve`` asks.

Intervals: each curve offers draws of its survival function (its parameters
drawn from their sampling distribution, see :mod:`retain.models.value_curves`).
A value figure is computed on every draw and the interval is the pair of
percentiles. It covers the statistical uncertainty of the *expected* value,
not the spread of the cash a given set of customers will actually pay.

These are statistical estimates, not accounting figures: see :data:`CAUTION`.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from retain.data.config import CURVES, PRICE_COLUMN, ValueConfig, as_date, value_settings
from retain.data.table import Categorical, StartStop
from retain.errors import ConfigError, DataError, ModelError, RetainError
from retain.kernels import discount as kd
from retain.kernels.risksets import first_of_spell
from retain.models._segments import column_codes
from retain.models.cox import fit_cox
from retain.models.curves import kaplan_meier
from retain.models.parametric import fit_exponential, fit_weibull
from retain.models.renewal import fit_renewal
from retain.models.value_curves import (
    DrawFn,
    SurvivalCurve,
    curve_from_cox,
    curve_from_kaplan_meier,
    curve_from_model,
    curve_from_renewal,
)
from retain.results import DEFAULT_LEVEL, Result, resolve_level, to_jsonable
from retain.units import DAYS_PER_MONTH

CAUTION = (
    "These values are statistical estimates from fitted retention models, not accounting "
    "figures. Reserves, impairment and revenue recognition follow the company's accounting "
    "standards and need review by a qualified actuary; the intervals cover model estimation "
    "uncertainty only, not changes in pricing, costs or customer behaviour."
)
TIMING = "margin received at the end of each month survived (month k discounted by (1+d)^-k)"
NO_CAP_MONTHS = 1200  # "no horizon cap" sums 100 years of months
DEFAULT_DRAWS = 200
DEFAULT_SEED = 20261202

# ---------------------------------------------------------------- results


def one_row_frame(result: Result) -> pd.DataFrame:
    """A result's fields as one table row, warnings joined by "; "."""
    row = {k: v for k, v in result.to_dict().items() if k != "warnings"}
    row["warnings"] = "; ".join(getattr(result, "warnings", ()))
    return pd.DataFrame([row])


def percentile_interval(draws: np.ndarray, level: float) -> tuple[float, float]:
    """Equal-tailed percentile interval of the finite draws (NaN with fewer than two)."""
    ok = np.asarray(draws, dtype=np.float64)
    ok = ok[np.isfinite(ok)]
    if ok.size < 2:
        return math.nan, math.nan
    a = (1.0 - level) / 2.0
    lo, hi = np.quantile(ok, [a, 1.0 - a])
    return float(lo), float(hi)


def _interval_method(n_draws: int, level: float, available: bool) -> str:
    if not available:
        return "none: the curve offers no parameter draws"
    return (f"percentile interval ({level:.0%}) over {n_draws} draws of the curve from its "
            "parameters' estimated sampling distribution")


@dataclass(frozen=True)
class LifetimeValue(Result):
    """Expected discounted value of one new customer over the horizon.

    ``value = margin_per_month * sum_{k=1}^{H} S(k months) (1 + d)^-k``.
    ``expected_months`` is the undiscounted ``sum_k S(k)``: expected whole
    months kept within the horizon.
    """

    segment: str
    curve: str
    customers: int
    margin_per_month: float
    margin_basis: str
    annual_discount_rate: float
    monthly_discount_rate: float
    horizon_months: int | None
    timing: str
    value: float
    lower: float
    upper: float
    level: float
    interval_method: str
    n_draws: int
    expected_months: float
    survival_at_horizon: float
    extrapolated_months: float
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        return one_row_frame(self)

    def summary(self) -> str:
        h = "no cap" if self.horizon_months is None else f"{self.horizon_months} months"
        ci = ("" if not math.isfinite(self.lower) else
              f" ({self.level:.0%} interval {self.lower:,.2f} to {self.upper:,.2f})")
        return (f"{self.segment}: a new customer is worth {self.value:,.2f}{ci} over {h} at "
                f"{self.annual_discount_rate:.1%} a year, margin {self.margin_per_month:,.2f} a "
                f"month, curve {self.curve}.")


@dataclass(frozen=True)
class SegmentValues(Result):
    """Lifetime value of a new customer, one row per segment."""

    by: tuple[str, ...]
    curve: str
    values: tuple[LifetimeValue, ...]
    as_of: dt.date | None = None
    caution: str = CAUTION
    warnings: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "as_of", as_date(self.as_of, "lifetime value: as_of"))

    def to_frame(self) -> pd.DataFrame:
        if not self.values:
            return pd.DataFrame()
        return pd.concat([v.to_frame() for v in self.values], ignore_index=True)

    def summary(self) -> str:
        return (f"Lifetime value of a new customer for {len(self.values)} segment(s) by "
                f"{', '.join(self.by) or '(all)'} from the {self.curve} curve.")


@dataclass(frozen=True)
class BaseSegment:
    """Residual value of the active customers of one segment."""

    segment: str
    curve: str
    customers: float
    value_per_customer: float
    lower: float
    upper: float
    total: float
    total_lower: float
    total_upper: float
    mean_tenure_months: float
    mean_margin_per_month: float
    extrapolated_months: float
    method: str


@dataclass(frozen=True)
class BaseValue(Result):
    """Residual value of the existing base: each active customer valued given tenure survived.

    For a customer active at tenure ``t``:
    ``value = m * sum_{k=1}^{H} [S(t + k months) / S(t)] (1 + d)^-k``, summed
    over the customers of each segment (``H`` months after the as-of date).
    """

    by: tuple[str, ...]
    segments: tuple[BaseSegment, ...]
    margin_basis: str
    annual_discount_rate: float
    monthly_discount_rate: float
    horizon_months: int | None
    timing: str
    level: float
    interval_method: str
    n_draws: int
    as_of: dt.date | None = None
    caution: str = CAUTION
    warnings: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        object.__setattr__(self, "as_of", as_date(self.as_of, "residual value: as_of"))

    @property
    def total(self) -> float:
        return float(sum(s.total for s in self.segments))

    def to_frame(self) -> pd.DataFrame:
        rows = [to_jsonable(s) for s in self.segments]
        frame = pd.DataFrame(rows)
        for name in ("margin_basis", "annual_discount_rate", "horizon_months", "as_of"):
            frame[name] = getattr(self, name)
        return frame

    def summary(self) -> str:
        n = sum(s.customers for s in self.segments)
        return (f"{n:,.0f} active customers are worth {self.total:,.2f} in expected discounted "
                f"margin over the next {self.horizon_months or 'uncapped'} months.")


# ---------------------------------------------------------------- checks


def _check_money(margin_per_month: float, annual_discount_rate: float,
                 horizon_months: int | None, level: float) -> int:
    where = "value"
    if not (isinstance(margin_per_month, (int, float, np.floating)) and
            math.isfinite(margin_per_month) and margin_per_month >= 0):
        raise ConfigError(f"{where}: margin_per_month", f"must be a finite number >= 0, got "
                          f"{margin_per_month!r}", "set margin_per_month or margin_rate in [value]")
    if not (math.isfinite(annual_discount_rate) and -1.0 < annual_discount_rate < 10.0):
        raise ConfigError(f"{where}: annual_discount_rate", f"must be above -1 (and below 10), "
                          f"got {annual_discount_rate!r}", "give a rate such as 0.10 for 10 %")
    if horizon_months is not None and (int(horizon_months) != horizon_months or horizon_months < 1):
        raise ConfigError(f"{where}: horizon_months", f"must be a whole number >= 1, got "
                          f"{horizon_months!r}", "e.g. horizon_months = 60")
    if not 0.5 <= level < 1.0:
        raise ConfigError(f"{where}: level", f"interval level must be in [0.5, 1), got {level!r}",
                          "use 0.95")
    return NO_CAP_MONTHS if horizon_months is None else int(horizon_months)


def _check_curve(curve: Any, where: str) -> None:
    if not isinstance(curve, SurvivalCurve):
        raise ModelError(where, f"{type(curve).__name__} is not a retention curve",
                         "pass a curve with survival(days) and draws(n, seed), e.g. "
                         "curve_from_model(fit)")


def _extrapolation(curve: SurvivalCurve, reach_days: float) -> tuple[float, str | None]:
    horizon = float(curve.data_horizon_days)
    if not math.isfinite(horizon) or reach_days <= horizon:
        return 0.0, None
    months = (reach_days - horizon) / DAYS_PER_MONTH
    return months, (f"the {curve.label} curve is extrapolated {months:.0f} months past the "
                    f"data (which reach {horizon / DAYS_PER_MONTH:.0f} months of tenure)")


# ---------------------------------------------------------------- lifetime value


def lifetime_value(
    curve: SurvivalCurve,
    *,
    margin_per_month: float,
    annual_discount_rate: float,
    horizon_months: int | None = ValueConfig.horizon_months,
    segment: str = "all",
    customers: int = 0,
    margin_basis: str | None = None,
    level: float = DEFAULT_LEVEL,
    n_draws: int = DEFAULT_DRAWS,
    seed: int = DEFAULT_SEED,
) -> LifetimeValue:
    """Expected discounted value of a new customer from a retention curve.

    ``V = m * sum_{k=1}^{H} S(k * 30.4375 days) * (1 + d)^-k`` with
    ``d = (1 + annual_discount_rate)^(1/12) - 1``: the margin ``m`` of month
    ``k`` is received at the end of month ``k`` if the customer is still
    active (end-of-period timing; for constant retention ``r`` and no cap this
    is ``m r / (1 + d - r)``). ``horizon_months=None`` means no cap (summed
    over 100 years, with a warning if survival is not negligible by then).

    Parameters
    ----------
    curve : SurvivalCurve
        The retention curve (see :func:`curve_from_model` and friends).
    margin_per_month : float
        Margin earned in each month the customer stays.
    annual_discount_rate : float
        Effective annual rate, e.g. 0.10.
    horizon_months : int or None
        Cap on the months counted.
    level, n_draws, seed
        Interval level, number of curve draws and their seed.
    """
    _check_curve(curve, f"lifetime value ({segment})")
    h = _check_money(margin_per_month, annual_discount_rate, horizon_months, level)
    d = kd.monthly_rate(annual_discount_rate)
    days = np.arange(1, h + 1, dtype=np.float64) * DAYS_PER_MONTH
    factors = kd.discount_factors(d, h)
    s = curve.survival(days)
    value = float(kd.discounted_value(s, margin_per_month, factors))
    warnings: list[str] = []
    if not np.all(np.isfinite(s)):
        bad = int(np.flatnonzero(~np.isfinite(s))[0]) + 1
        raise ModelError(f"lifetime value ({segment})", f"the {curve.label} curve is not "
                         f"defined at month {bad} of the {h}-month horizon",
                         "shorten horizon_months or add a parametric tail (km_weibull_tail)")
    fns = curve.draws(n_draws, seed)
    lower = upper = math.nan
    if fns:
        vals = np.array([kd.discounted_value(np.asarray(f(days)), margin_per_month, factors)
                         for f in fns])
        lower, upper = percentile_interval(vals, level)
    else:
        warnings.append(f"no interval: the {curve.label} curve offers no parameter draws")
    extra, msg = _extrapolation(curve, days[-1])
    if msg:
        warnings.append(msg)
    if horizon_months is None and s[-1] > 1e-4:
        warnings.append(f"with no horizon cap, {s[-1]:.2%} are still active after "
                        f"{NO_CAP_MONTHS} months; the sum is cut there")
    basis = margin_basis or f"given margin {margin_per_month:g} per month"
    return LifetimeValue(
        segment=segment, curve=curve.label, customers=int(customers),
        margin_per_month=float(margin_per_month), margin_basis=basis,
        annual_discount_rate=float(annual_discount_rate), monthly_discount_rate=d,
        horizon_months=horizon_months, timing=TIMING, value=value, lower=lower, upper=upper,
        level=level, interval_method=_interval_method(n_draws, level, bool(fns)),
        n_draws=len(fns) if fns else 0, expected_months=float(np.sum(s)),
        survival_at_horizon=float(s[-1]), extrapolated_months=extra,
        warnings=tuple(warnings),
    )


# ---------------------------------------------------------------- sensitivity


@dataclass(frozen=True)
class ValueSensitivity(Result):
    """Lifetime value of a new customer over a grid of discount rates and horizons."""

    curve: str
    segment: str
    margin_per_month: float
    table: pd.DataFrame
    level: float
    interval_method: str
    timing: str = TIMING
    caution: str = CAUTION

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def pivot(self) -> pd.DataFrame:
        """Values with discount rates as rows and horizons as columns."""
        return self.table.pivot(index="annual_discount_rate", columns="horizon_months",
                                values="value")

    def summary(self) -> str:
        v = self.table["value"]
        return (f"{self.segment}: value per new customer ranges from {v.min():,.2f} to "
                f"{v.max():,.2f} over {self.table['annual_discount_rate'].nunique()} discount "
                f"rates and {self.table['horizon_months'].nunique()} horizons.")


def value_sensitivity(
    curve: SurvivalCurve,
    *,
    margin_per_month: float,
    annual_discount_rates: Sequence[float] = (0.0, 0.05, 0.10, 0.15, 0.20),
    horizons_months: Sequence[int] = (12, 24, 36, 60, 120),
    segment: str = "all",
    level: float = DEFAULT_LEVEL,
    n_draws: int = DEFAULT_DRAWS,
    seed: int = DEFAULT_SEED,
) -> ValueSensitivity:
    """Value of a new customer for every (discount rate, horizon) pair, with intervals.

    The same draws of the curve serve every cell, so cells are comparable.
    """
    _check_curve(curve, f"value sensitivity ({segment})")
    if not annual_discount_rates or not horizons_months:
        raise ConfigError("value sensitivity", "needs at least one rate and one horizon",
                          "pass annual_discount_rates and horizons_months")
    for r in annual_discount_rates:
        for hz in horizons_months:
            _check_money(margin_per_month, float(r), int(hz), level)
    hmax = int(max(horizons_months))
    days = np.arange(1, hmax + 1, dtype=np.float64) * DAYS_PER_MONTH
    s = curve.survival(days)
    fns = curve.draws(n_draws, seed)
    sd = np.array([np.asarray(f(days)) for f in fns]) if fns else None
    rows = []
    for r in annual_discount_rates:
        factors = kd.discount_factors(kd.monthly_rate(float(r)), hmax)
        cum = kd.cumulative_value(s, margin_per_month, factors)
        cum_d = kd.cumulative_value(sd, margin_per_month, factors) if sd is not None else None
        for hz in horizons_months:
            lo, hi = (percentile_interval(cum_d[:, hz - 1], level) if cum_d is not None
                      else (math.nan, math.nan))
            rows.append({"annual_discount_rate": float(r), "horizon_months": int(hz),
                         "value": float(cum[hz - 1]), "lower": lo, "upper": hi})
    return ValueSensitivity(curve=curve.label, segment=segment,
                            margin_per_month=float(margin_per_month),
                            table=pd.DataFrame(rows), level=level,
                            interval_method=_interval_method(n_draws, level, bool(fns)))


# ---------------------------------------------------------------- segments


def segment_labels(table: StartStop, by: Sequence[str]) -> np.ndarray:
    """One text label per row: the ``by`` values at the start of the row's spell, joined by ", ".

    A spell stays in the segment it started in (as for the curves by
    segment), so a customer who moved plan is valued with the curve of the
    plan they joined on. Missing values read "(missing)"; no ``by`` -> "all".
    """
    if not by:
        return np.full(table.n_rows, "all", dtype=object)
    head = first_of_spell(table.customer.codes, table.spell, table.start) \
        if table.has_customers else np.arange(table.n_rows)
    parts = []
    for name in by:
        # the one labelling of a column (retain.models._segments); -1 reads "(missing)"
        codes, levels = column_codes(table.column(name))
        parts.append(np.array((*levels, "(missing)"), dtype=object)[codes[head]])
    out = parts[0]
    for p in parts[1:]:
        out = out + ", " + p
    return out


def segment_profiles(table: StartStop, by: Sequence[str]) -> dict[str, dict[str, Any]]:
    """Segment label -> {column: value} (the Cox profile of the segment)."""
    labels = segment_labels(table, by)
    out: dict[str, dict[str, Any]] = {}
    for seg in sorted(set(labels)):
        i = int(np.flatnonzero(labels == seg)[0])
        head = first_of_spell(table.customer.codes, table.spell, table.start)[i] \
            if table.has_customers else i
        prof: dict[str, Any] = {}
        for name in by:
            col = table.column(name)
            prof[name] = (col.values()[head] if isinstance(col, Categorical)
                          else float(col[head]))
        out[seg] = prof
    return out


def _margin_for_rows(table: StartStop, rows: np.ndarray, *, margin_per_month: float | None,
                     margin_rate: float | None, price: str) -> tuple[np.ndarray, str]:
    if margin_per_month is not None:
        if margin_rate is not None:
            raise ConfigError("[value]", "margin_per_month and margin_rate are both set",
                              "keep one of them")
        return np.full(rows.shape[0], float(margin_per_month)), \
            f"margin_per_month = {margin_per_month:g}"
    if margin_rate is None:
        raise ConfigError("[value]", "neither margin_per_month nor margin_rate is set",
                          "set margin_rate (share of the monthly price) or margin_per_month")
    p = table.numeric(price)[rows]
    bad = ~np.isfinite(p)
    if bad.any():
        raise DataError(f"{table.source}: column {price!r}",
                        f"{int(bad.sum())} rows have no price", "fill the price or set "
                        "margin_per_month in [value]")
    return float(margin_rate) * p, f"margin_rate {margin_rate:g} x {price}"


def _residual_per_tenure(fn: DrawFn, points: np.ndarray, inverse: np.ndarray,
                         shape: tuple[int, int], factors: np.ndarray) -> np.ndarray:
    """``sum_k S(t + k) / S(t) v^k`` for each tenure (per unit margin).

    ``points`` are the distinct tenures needed (sorted), ``inverse`` maps the
    (tenure, t + 1..H months) table of ``shape`` onto them: one curve
    evaluation per draw.
    """
    s = np.asarray(fn(points), dtype=np.float64)[inverse].reshape(shape)
    return kd.discounted_value(kd.conditional_survival(s[:, :1], s[:, 1:]), 1.0, factors)


def _base_segment(curve: SurvivalCurve, seg: str, t_seg: np.ndarray, w_seg: np.ndarray,
                  m_seg: np.ndarray, d: float, factors: np.ndarray, *, closed_form: bool,
                  level: float, n_draws: int, seed: int, where: str, warnings: list[str]
                  ) -> tuple[BaseSegment, bool]:
    """Residual value of one segment's active customers (tenures ``t_seg``, weights, margins)
    and whether the curve offered draws; warnings are appended to ``warnings``."""
    months = np.arange(1, factors.shape[0] + 1, dtype=np.float64) * DAYS_PER_MONTH
    uniq, inv = np.unique(t_seg, return_inverse=True)
    wm = np.bincount(inv, w_seg * m_seg, uniq.shape[0])  # margin mass at each tenure
    table_days = np.concatenate((uniq[:, None], uniq[:, None] + months[None, :]), axis=1)
    points, inverse = np.unique(table_days.ravel(), return_inverse=True)
    shape = table_days.shape

    closed = getattr(curve, "residual_months", None)  # a curve may offer a closed form
    a_closed = closed(uniq, d) if closed_form and closed is not None else None
    if a_closed is not None:
        a = np.asarray(a_closed, dtype=np.float64)
        method = "closed form: DERL (Fader & Hardie 2010, eq. 6) / (1 + d)"
    else:
        a = _residual_per_tenure(curve.survival, points, inverse, shape, factors)
        method = "sum over months of S(t + k) / S(t) x margin x discount"
    if not np.all(np.isfinite(a)):
        raise ModelError(where, f"segment {seg!r}: the {curve.label} curve is not defined "
                         f"out to {float(uniq.max() + months[-1]) / DAYS_PER_MONTH:.0f} "
                         "months of tenure", "add a parametric tail (km_weibull_tail) or "
                         "shorten horizon_months")
    total = float(wm @ a)
    n_cust = float(w_seg.sum())
    fns = curve.draws(n_draws, seed)
    lo = hi = tlo = thi = math.nan
    if fns:
        tot_d = np.array([wm @ _residual_per_tenure(f, points, inverse, shape, factors)
                          for f in fns])
        tlo, thi = percentile_interval(tot_d, level)
        lo, hi = tlo / n_cust, thi / n_cust
    else:
        warnings.append(f"segment {seg!r}: no interval, the {curve.label} curve offers "
                        "no parameter draws")
    extra, msg = _extrapolation(curve, float(uniq.max() + months[-1]))
    if msg:
        warnings.append(f"segment {seg!r}: {msg}")
    return BaseSegment(
        segment=seg, curve=curve.label, customers=n_cust, value_per_customer=total / n_cust,
        lower=lo, upper=hi, total=total, total_lower=tlo, total_upper=thi,
        mean_tenure_months=float(np.average(t_seg, weights=w_seg) / DAYS_PER_MONTH),
        mean_margin_per_month=float(np.average(m_seg, weights=w_seg)),
        extrapolated_months=extra, method=method), bool(fns)


def residual_value(
    table: StartStop,
    curves: SurvivalCurve | Mapping[str, SurvivalCurve],
    *,
    by: Sequence[str] = (),
    margin_per_month: float | None = None,
    margin_rate: float | None = None,
    price: str = PRICE_COLUMN,
    annual_discount_rate: float = ValueConfig.annual_discount_rate,
    horizon_months: int | None = ValueConfig.horizon_months,
    as_of: dt.date | str | None = None,
    level: float = DEFAULT_LEVEL,
    n_draws: int = DEFAULT_DRAWS,
    seed: int = DEFAULT_SEED,
) -> BaseValue:
    """Residual value of the active base, by segment.

    An active customer is the last row of a spell still open at the as-of
    date (``churned = 0``). With tenure ``t`` and margin ``m`` (fixed, or
    ``margin_rate`` x the price on that last row) the customer is worth

        m * sum_{k=1}^{H} [S(t + k months) / S(t)] (1 + d)^-k,

    the value conditioned on the tenure already survived. For the renewal
    (sBG) curve and no horizon cap this is ``m * DERL / (1 + d)`` with DERL
    from Fader & Hardie (2010, Marketing Science 29(1), eq. 6).

    ``curves`` is one curve for everybody or a mapping segment label -> curve
    (labels as :func:`segment_labels` makes them).
    """
    where = f"residual value ({table.source})"
    if not table.has_customers:
        raise DataError(where, "the table has no customer_id, so open spells cannot be told "
                        "apart", "use the uncompressed start-stop table")
    h = _check_money(0.0 if margin_per_month is None else margin_per_month,
                     annual_discount_rate, horizon_months, level)
    d = kd.monthly_rate(annual_discount_rate)
    factors = kd.discount_factors(d, h)
    active = np.flatnonzero(table.last_of_spell & (table.churned == 0))
    if active.size == 0:
        raise DataError(where, "no customer is active at the as-of date",
                        "check the as-of date and the table")
    labels = segment_labels(table, by)[active]
    margins, basis = _margin_for_rows(table, active, margin_per_month=margin_per_month,
                                      margin_rate=margin_rate, price=price)
    tenure = table.stop[active]
    weight = table.weight[active]
    segments: list[BaseSegment] = []
    warnings: list[str] = []
    any_draws = False
    for seg in sorted(set(labels)):
        if isinstance(curves, Mapping):
            if seg not in curves:
                warnings.append(f"segment {seg!r}: no curve, its "
                                f"{float(weight[labels == seg].sum()):g} active customers "
                                "are not valued")
                continue
            curve = curves[seg]
        else:
            curve = curves
        _check_curve(curve, where)
        mask = labels == seg
        segment, drawn = _base_segment(curve, seg, tenure[mask], weight[mask], margins[mask],
                                       d, factors, closed_form=horizon_months is None,
                                       level=level, n_draws=n_draws, seed=seed, where=where,
                                       warnings=warnings)
        segments.append(segment)
        any_draws |= drawn
    return BaseValue(
        by=tuple(by), segments=tuple(segments), margin_basis=basis,
        annual_discount_rate=float(annual_discount_rate), monthly_discount_rate=d,
        horizon_months=horizon_months, timing=TIMING, level=level,
        interval_method=_interval_method(n_draws, level, any_draws), n_draws=n_draws,
        as_of=as_of, warnings=tuple(warnings))


# ---------------------------------------------------------------- by segment from the config


def segment_curves(table: StartStop, by: Sequence[str] = (), curve: str = ValueConfig.curve, *,
                   min_events: float = 5.0, level: float | None = None,
                   conf: float | None = None
                   ) -> tuple[dict[str, SurvivalCurve], tuple[str, ...]]:
    """One retention curve per segment (spells grouped by their starting values).

    ``curve``: ``weibull`` / ``exponential`` (a fit per segment),
    ``km_weibull_tail`` (Kaplan-Meier per segment to its last tenure with 30
    at risk, then that segment's Weibull), ``renewal`` (an sBG fit per
    segment, monthly periods) or ``cox`` (one Cox model with the ``by``
    columns, read at spell start, as covariates; each segment's profile).
    Segments with fewer than ``min_events`` churns, or whose fit fails, are
    left out with a warning. ``level`` is the level of the fits' intervals (default
    0.95; ``conf=`` is accepted as its older name).
    """
    level = resolve_level(level, conf, "lifetime value curves")
    if curve not in CURVES:
        raise ConfigError("[value] curve", f"unknown curve {curve!r}",
                          f"allowed values: {', '.join(CURVES)}")
    labels = segment_labels(table, by)
    curves: dict[str, SurvivalCurve] = {}
    warnings: list[str] = []
    if curve == "cox" and not by:
        # a Cox model without covariates is the Breslow (~ Kaplan-Meier) curve itself
        warnings.append("the cox curve without segments is the Kaplan-Meier curve with a "
                        "Weibull tail (a Cox model without covariates has no other content)")
        curve = "km_weibull_tail"
    if curve == "cox":
        head = first_of_spell(table.customer.codes, table.spell, table.start)
        fixed = {name: (table.column(name).take(head) if table.is_categorical(name)
                        else table.column(name)[head]) for name in by}
        try:
            fit = fit_cox(table.with_columns(**fixed), list(by), level=level)
        except RetainError as exc:
            raise ModelError("lifetime value (cox curve)", exc.rule, exc.fix) from exc
        fixed_table = table.with_columns(**fixed)
        try:
            tail_fit = fit_weibull(fixed_table, list(by), level=level)
        except RetainError as exc:
            raise ModelError("lifetime value (cox curve)", f"the Weibull tail failed: {exc.rule}",
                             exc.fix) from exc
        warnings.extend(fit.warnings)
        for seg, prof in segment_profiles(table, by).items():
            curves[seg] = curve_from_cox(fit, prof, curve_from_model(tail_fit, prof))
        return curves, tuple(warnings)
    for seg in sorted(set(labels)):
        sub = table.take(labels == seg)
        if sub.n_events < min_events:
            warnings.append(f"segment {seg!r}: {sub.n_events:g} churns, fewer than "
                            f"{min_events:g}; not valued")
            continue
        try:
            if curve == "weibull":
                curves[seg] = curve_from_model(fit_weibull(sub, level=level))
            elif curve == "exponential":
                curves[seg] = curve_from_model(fit_exponential(sub, level=level))
            elif curve == "km_weibull_tail":
                km = kaplan_meier(sub, level=level, label=seg)
                curves[seg] = curve_from_kaplan_meier(
                    km, curve_from_model(fit_weibull(sub, level=level)))
            else:
                curves[seg] = curve_from_renewal(fit_renewal(sub, level=level, label=seg))
        except RetainError as exc:
            warnings.append(f"segment {seg!r}: not valued ({exc.message})")
    if not curves:
        raise ModelError("lifetime value", f"no segment could be fitted with the {curve} curve",
                         "; ".join(warnings) or "check the table")
    return curves, tuple(warnings)


def _segment_margin(table: StartStop, mask: np.ndarray, spec: ValueConfig) -> tuple[float, str]:
    per_month = spec.margin_per_month
    if per_month is not None:
        return float(per_month), f"margin_per_month = {per_month:g}"
    rate = spec.margin_rate
    price = spec.price_column
    if rate is None:
        raise ConfigError("[value]", "neither margin_per_month nor margin_rate is set",
                          "set margin_rate (share of the monthly price) or margin_per_month")
    p = table.numeric(price)[mask]
    span = (table.stop - table.start)[mask] * table.weight[mask]
    ok = np.isfinite(p)
    if not ok.any():
        raise DataError(f"{table.source}: column {price!r}", "no price in this segment",
                        "fill the price or set margin_per_month")
    mean_price = float(np.average(p[ok], weights=span[ok]))
    return float(rate) * mean_price, (f"margin_rate {rate:g} x {price} (time-weighted mean "
                                      f"{mean_price:.2f} in the segment)")


def value_by_segment(
    table: StartStop,
    spec: ValueConfig | Mapping[str, Any],
    by: Sequence[str] = (),
    *,
    curves: Mapping[str, SurvivalCurve] | None = None,
    as_of: dt.date | str | None = None,
    level: float = DEFAULT_LEVEL,
    n_draws: int = DEFAULT_DRAWS,
    seed: int = DEFAULT_SEED,
) -> SegmentValues:
    """Lifetime value of a new customer in each segment, from a ``[value]`` config.

    ``spec`` is a :class:`~retain.data.config.ValueConfig` (or mapping with
    its keys). Margin per month: ``margin_per_month``, or ``margin_rate`` x
    the segment's mean monthly price weighted by time at risk (what a month
    of a customer in the segment brings in). Curves: fitted by
    :func:`segment_curves` with ``spec.curve`` unless given.
    """
    spec = value_settings(spec)
    kind = spec.curve
    warnings: list[str] = []
    if curves is None:
        curves, w = segment_curves(table, by, kind)
        warnings.extend(w)
    labels = segment_labels(table, by)
    head_mask = np.zeros(table.n_rows, dtype=bool)
    if table.has_customers:
        head_mask[np.unique(first_of_spell(table.customer.codes, table.spell, table.start))] = True
    else:  # compressed table: count the rows that start a spell at signup
        head_mask = table.start == 0.0
    values = []
    for seg, curve in curves.items():
        mask = labels == seg
        margin, basis = _segment_margin(table, mask, spec)
        values.append(lifetime_value(
            curve, margin_per_month=margin,
            annual_discount_rate=float(spec.annual_discount_rate),
            horizon_months=spec.horizon_months, segment=seg,
            customers=int(round(float(table.weight[mask & head_mask].sum()))),
            margin_basis=basis, level=level, n_draws=n_draws, seed=seed))
    return SegmentValues(by=tuple(by), curve=kind, values=tuple(values), as_of=as_of,
                         warnings=tuple(warnings))


def base_value_by_segment(
    table: StartStop,
    spec: ValueConfig | Mapping[str, Any],
    by: Sequence[str] = (),
    *,
    curves: Mapping[str, SurvivalCurve] | None = None,
    as_of: dt.date | str | None = None,
    level: float = DEFAULT_LEVEL,
    n_draws: int = DEFAULT_DRAWS,
    seed: int = DEFAULT_SEED,
) -> BaseValue:
    """Residual value of the active base by segment, from a ``[value]`` config.

    Each active customer's margin is ``margin_per_month``, or ``margin_rate``
    x the price on their last row (their current price).
    """
    spec = value_settings(spec)
    warnings: tuple[str, ...] = ()
    if curves is None:
        curves, warnings = segment_curves(table, by, spec.curve)
    out = residual_value(
        table, curves, by=by, margin_per_month=spec.margin_per_month,
        margin_rate=spec.margin_rate, price=spec.price_column,
        annual_discount_rate=float(spec.annual_discount_rate),
        horizon_months=spec.horizon_months, as_of=as_of, level=level,
        n_draws=n_draws, seed=seed)
    return dataclasses.replace(out, warnings=tuple(warnings) + out.warnings)


# ---------------------------------------------------------------- the finance table

EXPORT_COLUMNS = (
    "figure", "segment", "customers", "value_per_customer", "lower", "upper", "total",
    "total_lower", "total_upper", "interval_level", "interval_method", "curve",
    "annual_discount_rate", "horizon_months", "margin_basis", "timing", "as_of", "caution",
)


def finance_table(
    *,
    new_customers: SegmentValues | None = None,
    base: BaseValue | None = None,
    as_of: dt.date | str | None = None,
) -> pd.DataFrame:
    """Every value figure and its assumptions, one row per (figure, segment).

    ``figure`` is ``new customer`` (value of a new customer; ``total`` is
    blank) or ``active base`` (residual value; ``total`` is the segment's
    sum). Every assumption is a column and the caution text is on every row;
    ``as_of`` (a date) defaults to the results' own. Writing the table to files
    is :func:`retain.publish.finance.finance_export`.
    """
    if new_customers is None and base is None:
        raise ConfigError("finance export", "nothing to export",
                          "pass new_customers and/or base")
    as_of = as_date(as_of, "finance export: as_of")
    rows: list[dict[str, Any]] = []
    if new_customers is not None:
        for v in new_customers.values:
            rows.append({
                "figure": "new customer", "segment": v.segment, "customers": v.customers,
                "value_per_customer": v.value, "lower": v.lower, "upper": v.upper,
                "total": math.nan, "total_lower": math.nan, "total_upper": math.nan,
                "interval_level": v.level, "interval_method": v.interval_method,
                "curve": v.curve, "annual_discount_rate": v.annual_discount_rate,
                "horizon_months": v.horizon_months, "margin_basis": v.margin_basis,
                "timing": v.timing, "as_of": as_of or new_customers.as_of,
            })
    if base is not None:
        for s in base.segments:
            rows.append({
                "figure": "active base", "segment": s.segment, "customers": s.customers,
                "value_per_customer": s.value_per_customer, "lower": s.lower, "upper": s.upper,
                "total": s.total, "total_lower": s.total_lower, "total_upper": s.total_upper,
                "interval_level": base.level, "interval_method": base.interval_method,
                "curve": s.curve, "annual_discount_rate": base.annual_discount_rate,
                "horizon_months": base.horizon_months, "margin_basis": base.margin_basis,
                "timing": base.timing, "as_of": as_of or base.as_of,
            })
    for r in rows:
        r["caution"] = CAUTION
        if r["horizon_months"] is None:
            r["horizon_months"] = "no cap"
    return pd.DataFrame(rows, columns=list(EXPORT_COLUMNS))
