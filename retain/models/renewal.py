"""Contractual renewal projection with the shifted-beta-geometric (sBG) model.

Fader & Hardie (2007), "How to project customer retention", Journal of
Interactive Marketing 21(1), 76-90: at the end of every period (a month, a
year) each customer renews with their own probability 1 - q, and q varies
across customers as Beta(alpha, beta). Retention rates then rise with tenure
because the customers most likely to leave leave first -- heterogeneity, not
a change in any one customer. Formulas and the likelihood are in
:mod:`retain.kernels.renewal`.

Inputs

* survivor counts of one cohort, n_0 >= n_1 >= ... >= n_k (FH 2007, table 1);
* several cohorts of different ages (a "cohort triangle"): each contributes
  only the periods it has been observed -- its last count is right-censored;
* a start-stop table: tenure in days is cut into whole periods of
  ``period_days`` (default one month, ``retain.units.DAYS_PER_MONTH``). Row i
  at risk on (start, stop] churned at renewal T = ceil(stop / L) when it
  churned, else survived floor(stop / L) renewals; a row that starts after 0
  is known to have survived floor(start / L) renewals, and its likelihood is
  conditioned on that (left truncation). Because a split row contributes
  log S(k) - log S(k) = 0 at the split, splitting a row changes nothing, and a
  compressed table gives the same fit.

Fitting: Newton on (log alpha, log beta) with the analytic Hessian; intervals
by the delta method on the log scale (alpha, beta) and on the log(-log S)
scale (survival projections).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from retain.data.table import StartStop
from retain.errors import ConvergenceError, DataError, ModelError
from retain.estimates import Estimates, RetentionPrediction, check_level, z_value
from retain.kernels import renewal as R
from retain.kernels.newton import MAX_LOG_STEP, hessian_objective, newton_maximize
from retain.results import Result, resolve_level
from retain.units import DAYS_PER_MONTH

__all__ = [
    "RenewalBacktest",
    "RenewalCounts",
    "RenewalFit",
    "RenewalProjection",
    "RenewalSegments",
    "backtest_renewal",
    "fit_renewal",
    "fit_renewal_by",
    "renewal_counts",
]


# --------------------------------------------------------------------------- counts
@dataclass(frozen=True, eq=False)
class RenewalCounts(Result):
    """Aggregated renewal data: per renewal t = 1..T the churns c_t, the
    right-censored survivors a_t and the left-truncated entries e_t (weighted)."""

    periods: np.ndarray
    churned: np.ndarray
    active: np.ndarray
    entered: np.ndarray
    period_days: float | None
    label: str

    @property
    def at_risk(self) -> np.ndarray:
        """Customers facing renewal t: sum_{s>=t} (c_s + a_s - e_s)."""
        tail = self.churned + self.active - self.entered
        return np.cumsum(tail[::-1])[::-1]

    @property
    def observed_survival(self) -> np.ndarray:
        """Empirical S(t), t = 0..T: the product of observed renewal rates
        (the discrete Kaplan–Meier estimate; the plain n_t / n_0 for one cohort)."""
        risk = self.at_risk
        rate = np.divide(risk - self.churned, risk, out=np.full(risk.shape, np.nan),
                         where=risk > 0)
        return np.concatenate(([1.0], np.cumprod(rate)))

    @property
    def n_periods(self) -> int:
        return int(self.periods.shape[0])

    def truncated(self, k: int) -> RenewalCounts:
        """The counts as they were known after only the first ``k`` renewals.

        Only valid for counts without left truncation after period k (survivor
        input and tables are truncated at the row level by :func:`backtest_renewal`).
        """
        c = self.churned[:k].copy()
        a = self.active[:k].copy()
        e = self.entered[:k].copy()
        a[k - 1] += float(self.churned[k:].sum() + self.active[k:].sum() - self.entered[k:].sum())
        return RenewalCounts(self.periods[:k], c, a, e, self.period_days, self.label)

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"period": self.periods, "churned": self.churned,
                             "still_active_unobserved_after": self.active,
                             "entered_after": self.entered, "at_risk": self.at_risk,
                             "observed_survival": self.observed_survival[1:]})


def _counts_from_survivors(survivors: Any, label: str) -> RenewalCounts:
    """One cohort (1-d) or several cohorts (sequence of sequences) of survivor counts."""
    where = f"renewal counts ({label})"
    arr = np.asarray(survivors, dtype=object)
    cohorts = [survivors] if arr.ndim == 1 and not isinstance(arr[0], (list, tuple, np.ndarray)) \
        else list(survivors)
    series = []
    for i, c in enumerate(cohorts):
        try:
            v = np.asarray(c, dtype=np.float64)
        except (TypeError, ValueError) as exc:
            raise DataError(where, f"cohort {i + 1}: survivor counts must be numbers",
                            "pass counts like [1000, 631, 468, ...]") from exc
        if v.ndim != 1 or v.shape[0] < 2:
            raise DataError(where, f"cohort {i + 1}: need at least two counts (n_0 and n_1)",
                            "pass the cohort's size and its survivors after each renewal")
        if np.any(~np.isfinite(v)) or np.any(v < 0) or v[0] <= 0:
            raise DataError(where, f"cohort {i + 1}: counts must be finite, >= 0, with n_0 > 0",
                            "check the counts")
        if np.any(np.diff(v) > 0):
            j = int(np.flatnonzero(np.diff(v) > 0)[0])
            raise DataError(where, f"cohort {i + 1}: survivors rise from {v[j]:g} to {v[j + 1]:g} "
                            f"at period {j + 1}", "survivor counts can only fall in a cohort")
        series.append(v)
    T = max(v.shape[0] for v in series) - 1
    churned = np.zeros(T)
    active = np.zeros(T)
    for v in series:
        k = v.shape[0] - 1
        churned[:k] += -np.diff(v)
        active[k - 1] += v[-1]
    return RenewalCounts(np.arange(1, T + 1, dtype=np.float64), churned, active, np.zeros(T),
                         None, label)


def _row_periods(table: StartStop, period_days: float) -> tuple[np.ndarray, np.ndarray]:
    """Per row: renewals survived at entry (floor(start/L)) and at exit.

    Exit: T = ceil(stop/L) for a churn (lost at renewal T), floor(stop/L)
    renewals survived otherwise.
    """
    L = period_days
    entry = np.floor(table.start / L + 1e-12).astype(np.int64)
    up = np.ceil(table.stop / L - 1e-12).astype(np.int64)
    down = np.floor(table.stop / L + 1e-12).astype(np.int64)
    exit_ = np.where(table.churned == 1, np.maximum(up, 1), down)
    return entry, exit_


def _counts_from_rows(entry: np.ndarray, exit_: np.ndarray, churned: np.ndarray,
                      w: np.ndarray, period_days: float, label: str,
                      horizon: int | None = None) -> RenewalCounts:
    if horizon is not None:
        keep = entry < horizon
        entry, exit_, churned, w = entry[keep], exit_[keep], churned[keep], w[keep]
        late = exit_ > horizon
        churned = np.where(late, 0, churned)
        exit_ = np.minimum(exit_, horizon)
    T = int(max(exit_.max() if exit_.size else 0, 1))
    if horizon is not None:
        T = max(T, horizon)
    ch = churned == 1
    c = np.bincount(exit_[ch] - 1, weights=w[ch], minlength=T)[:T]
    alive = (~ch) & (exit_ > 0)
    a = np.bincount(exit_[alive] - 1, weights=w[alive], minlength=T)[:T]
    ent = entry > 0
    e = np.bincount(entry[ent] - 1, weights=w[ent], minlength=T)[:T]
    return RenewalCounts(np.arange(1, T + 1, dtype=np.float64), c, a, e, period_days, label)


def renewal_counts(table: StartStop, *, period_days: float = DAYS_PER_MONTH,
                   label: str = "all customers") -> RenewalCounts:
    """Cut a start-stop table into whole renewal periods (see the module docstring)."""
    where = f"renewal counts ({label})"
    if not isinstance(table, StartStop):
        raise DataError(where, f"expected a StartStop table, got {type(table).__name__}",
                        "build one with StartStop.from_parquet / from_frame")
    if not (math.isfinite(period_days) and period_days > 0):
        raise ModelError(where, f"period_days must be a positive number, got {period_days!r}",
                         "use 30.4375 for months or 365.25 for years")
    entry, exit_ = _row_periods(table, float(period_days))
    return _counts_from_rows(entry, exit_, table.churned, table.weight, float(period_days), label)


# --------------------------------------------------------------------------- results
@dataclass(frozen=True, eq=False)
class RenewalProjection(Result):
    """Projected survival S(t), retention rates r_t and survivors per ``cohort_size``.

    ``observed`` marks periods the fit saw; the rest are projections.
    Interval of S: log(-log S) +- z se (delta method in log alpha, log beta).
    """

    label: str
    periods: np.ndarray
    survival: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    retention_rate: np.ndarray
    survivors: np.ndarray
    cohort_size: float
    observed: np.ndarray
    observed_survival: np.ndarray
    period_days: float | None
    level: float
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"period": self.periods, "survival": self.survival,
                             "lower": self.lower, "upper": self.upper,
                             "retention_rate": self.retention_rate, "survivors": self.survivors,
                             "observed_survival": self.observed_survival,
                             "projected": ~self.observed})

    def summary(self) -> str:
        last = len(self.periods) - 1
        text = (f"{self.label}: of {self.cohort_size:g} customers, {self.survivors[last]:.0f} "
                f"expected after {int(self.periods[last])} renewals ({self.level:.0%} CI "
                f"{self.lower[last] * self.cohort_size:.0f} to "
                f"{self.upper[last] * self.cohort_size:.0f})")
        return text + ("; " + "; ".join(self.warnings) if self.warnings else "")


@dataclass(frozen=True, eq=False)
class RenewalFit(Result):
    """A fitted shifted-beta-geometric model.

    ``alpha`` and ``beta`` are the Beta mixing distribution's parameters;
    the mean churn probability at the first renewal is alpha / (alpha + beta).
    ``cov`` is the covariance of (log alpha, log beta).
    """

    label: str
    alpha: float
    beta: float
    cov: np.ndarray
    loglik: float
    counts: RenewalCounts
    n_customers: float
    n_periods: int
    period_days: float | None
    level: float
    iterations: int
    warnings: tuple[str, ...] = ()

    @property
    def _z(self) -> float:
        return float(stats.norm.isf((1.0 - self.level) / 2.0))

    @property
    def intervals(self) -> pd.DataFrame:
        z = self._z
        se = np.sqrt(np.diag(self.cov))
        est = np.array([self.alpha, self.beta])
        return pd.DataFrame({"parameter": ["alpha", "beta"], "estimate": est,
                             "lower": est * np.exp(-z * se), "upper": est * np.exp(z * se),
                             "se_log": se})

    def estimates(self) -> Estimates:
        """(log alpha, log beta) with their covariance, read as alpha and beta."""
        return Estimates(model="shifted-beta-geometric", names=("alpha", "beta"),
                         estimate=np.log([self.alpha, self.beta]), cov=self.cov,
                         scale=("log alpha", "log beta"), level=self.level)

    @property
    def mean_churn_probability(self) -> float:
        """E[q] = alpha / (alpha + beta): the expected churn probability at renewal 1."""
        return self.alpha / (self.alpha + self.beta)

    def survival(self, periods: Sequence[int] | np.ndarray) -> np.ndarray:
        return R.sbg_survival(self.alpha, self.beta, np.asarray(periods, dtype=np.int64))

    def retention_rates(self, periods: Sequence[int] | np.ndarray) -> np.ndarray:
        """r_t = (beta + t - 1) / (alpha + beta + t - 1), t >= 1 (FH 2007, eq. 8)."""
        t = np.asarray(periods, dtype=np.float64)
        if np.any(t < 1):
            raise DataError("retention rates", "renewal periods start at 1", "pass t >= 1")
        return R.sbg_retention_rate(self.alpha, self.beta, t)

    def project(self, periods: int | Sequence[int] = 12, *,
                cohort_size: float = 1000.0, level: float | None = None) -> RenewalProjection:
        """Survival and retention rates for renewals 0..periods (or the given list).

        Intervals at ``level`` (default the fit's). A warning says how many
        periods past the observed ones it reaches.
        """
        lv = self.level if level is None else check_level(level, "renewal projection")
        if isinstance(periods, (int, np.integer)):
            if periods < 1:
                raise DataError("renewal projection", "periods must be >= 1", "pass e.g. 12")
            t = np.arange(0, int(periods) + 1)
        else:
            t = np.asarray(list(periods), dtype=np.int64)
            if t.size == 0 or np.any(t < 0):
                raise DataError("renewal projection", "periods must be whole numbers >= 0",
                                "pass e.g. range(13)")
        surv = self.survival(t)
        # delta method on log(-log S(t)); d log S / d theta by the kernel's formulas
        z = z_value(lv)
        lo = np.ones_like(surv)
        hi = np.ones_like(surv)
        for i, ti in enumerate(t):
            if ti == 0:
                continue
            g = _dlogS(self.alpha, self.beta, int(ti))
            ls = math.log(surv[i])
            grad = g / ls                       # d log(-log S) = d log S / log S
            se = math.sqrt(max(float(grad @ self.cov @ grad), 0.0))
            llS = math.log(-ls)
            lo[i] = math.exp(-math.exp(llS + z * se))
            hi[i] = math.exp(-math.exp(llS - z * se))
        rates = np.where(t >= 1, R.sbg_retention_rate(self.alpha, self.beta, np.maximum(t, 1)),
                         np.nan)
        obs = self.counts.observed_survival
        observed = t <= self.n_periods
        obs_at = np.where(observed, obs[np.minimum(t, len(obs) - 1)], np.nan)
        warnings = []
        beyond = int(t.max()) - self.n_periods
        if beyond > 0:
            unit = _period_unit(self.period_days)
            warnings.append(f"projects {beyond} {unit} past the {self.n_periods} observed")
        return RenewalProjection(self.label, t.astype(np.float64), surv, lo, hi, rates,
                                 surv * cohort_size, float(cohort_size), observed, obs_at,
                                 self.period_days, lv, tuple(warnings))

    def predict_retention(self, times: Sequence[float] | np.ndarray,
                          level: float | None = None) -> RetentionPrediction:
        """Retention at tenures ``times`` (days; renewal periods when the fit has no
        ``period_days``): S of the renewals completed by then, with the log(-log)
        limits of :meth:`project`. Times past the observed periods are flagged."""
        t = np.atleast_1d(np.asarray(times, dtype=np.float64))
        if t.size == 0 or np.any(~np.isfinite(t)) or np.any(t < 0):
            raise DataError("renewal prediction", "times must be finite tenures >= 0",
                            "pass e.g. numpy.arange(0, 731, 30.4375)")
        unit = self.period_days or 1.0
        periods = np.floor(t / unit + 1e-9).astype(np.int64)
        pr = self.project(periods.tolist(), level=level)
        return RetentionPrediction(
            model="shifted-beta-geometric", times=t, survival=pr.survival, lower=pr.lower,
            upper=pr.upper, level=pr.level, extrapolated=periods > self.n_periods,
            cumulative_hazard=-np.log(pr.survival), follow_up=self.n_periods * unit,
            profile={"segment": self.label}, warnings=pr.warnings)

    def derl(self, discount: float, renewals_made: int | Sequence[int] | np.ndarray = 0
             ) -> np.ndarray | float:
        """Discounted expected residual lifetime in periods (Fader & Hardie 2010, eq. 6).

        Expected number of further payments, each discounted by ``discount``
        per period, from a customer who has made ``renewals_made`` renewals,
        valued just before the next renewal decision. Multiply by the margin
        per period for a residual value.
        """
        if not (math.isfinite(discount) and discount > 0):
            raise DataError("DERL", f"the discount rate per period must be > 0, got {discount!r}",
                            "e.g. 0.10 per year, or (1.10 ** (1 / 12) - 1) per month")
        n = np.asarray(renewals_made, dtype=np.float64)
        if np.any(n < 0):
            raise DataError("DERL", "renewals_made must be >= 0", "pass 0 for a new customer")
        out = R.sbg_derl(self.alpha, self.beta, float(discount), n)
        return float(out) if np.ndim(out) == 0 else out

    def to_frame(self) -> pd.DataFrame:
        return self.intervals

    def summary(self) -> str:
        iv = self.intervals
        return (f"{self.label}: shifted-beta-geometric alpha {self.alpha:.3f} "
                f"({iv.lower[0]:.3f} to {iv.upper[0]:.3f}), beta {self.beta:.3f} "
                f"({iv.lower[1]:.3f} to {iv.upper[1]:.3f}); expected churn at the first "
                f"renewal {self.mean_churn_probability:.1%}, fitted on {self.n_periods} "
                f"{_period_unit(self.period_days)}")


def _period_unit(period_days: float | None) -> str:
    if period_days is None:
        return "periods"
    if abs(period_days - DAYS_PER_MONTH) < 1e-9:
        return "months"
    if abs(period_days - 365.25) < 1e-9:
        return "years"
    return f"periods of {period_days:g} days"


def _dlogS(alpha: float, beta: float, t: int) -> np.ndarray:
    """d log S(t) / d(log alpha, log beta), S(t) = prod_{j<=t} (beta+j-1)/(alpha+beta+j-1)."""
    j = np.arange(1, t + 1, dtype=np.float64)
    q = alpha + beta + j - 1.0
    p = beta + j - 1.0
    return np.array([-float(np.sum(alpha / q)), float(np.sum(beta / p - beta / q))])


# --------------------------------------------------------------------------- fitting
def _fit_counts(counts: RenewalCounts, level: float, where: str) -> RenewalFit:
    if counts.churned.sum() <= 0:
        raise ModelError(where, "no customer was lost at any renewal",
                         "the sBG model needs at least one churn; use a longer history")
    if counts.churned[0] >= counts.at_risk[0]:
        raise ModelError(where, "every customer was lost at the first renewal",
                         "alpha / beta are not identified; nothing to project")

    def fun(th: np.ndarray, derivatives: bool = True) -> tuple:
        return R.sbg_loglik(th, counts.periods, counts.churned, counts.active, counts.entered,
                            derivatives=derivatives)

    # start from a moment guess: first-renewal churn rate q1 with alpha + beta = 2
    risk1 = counts.at_risk[0]
    q1 = min(max(counts.churned[0] / risk1 if risk1 > 0 else 0.3, 0.02), 0.98)
    theta0 = np.log([2.0 * q1, 2.0 * (1.0 - q1)])
    res = newton_maximize(hessian_objective(fun), theta0, max_iter=200, max_step=MAX_LOG_STEP)
    theta, ll, hess, converged = res.params, res.loglik, res.hessian, res.converged
    history = [h.as_dict() for h in res.history]
    info_ok = bool(np.all(np.isfinite(hess))) and _negative_definite(hess)
    if np.max(theta) > math.log(1e6) or (converged and not info_ok):
        # the likelihood keeps rising as alpha, beta -> infinity with alpha/(alpha+beta)
        # fixed: one retention rate for everyone (geometric lifetimes)
        risk = counts.at_risk
        rate = 1.0 - float(counts.churned.sum()) / float(risk[risk > 0].sum())
        raise ModelError(where, "the retention rates do not rise with tenure, so the sBG "
                         "maximum lies at alpha, beta -> infinity (no heterogeneity between "
                         f"customers; a constant retention rate of {rate:.1%} per period)",
                         "project with the constant rate (the exponential model) or wait for "
                         "more periods")
    if not converged:
        raise ConvergenceError(where, "the sBG fit did not converge",
                               "check the counts; the iteration history is attached",
                               history=history)
    cov = np.linalg.inv(-hess)
    warnings: list[str] = []
    a, b = float(np.exp(theta[0])), float(np.exp(theta[1]))
    if a > 1e3 or b > 1e3:
        warnings.append("alpha and beta are very large: little sign of heterogeneity, the "
                        "projection is close to a constant retention rate")
    return RenewalFit(label=counts.label, alpha=a, beta=b, cov=cov, loglik=float(ll),
                      counts=counts, n_customers=float(counts.at_risk[0]),
                      n_periods=counts.n_periods, period_days=counts.period_days,
                      level=float(level), iterations=len(history), warnings=tuple(warnings))


def _negative_definite(hess: np.ndarray) -> bool:
    try:
        np.linalg.cholesky(-hess)
    except np.linalg.LinAlgError:
        return False
    return True




def fit_renewal(source: StartStop | Sequence[float] | Sequence[Sequence[float]], *,
                period_days: float = DAYS_PER_MONTH, level: float | None = None,
                label: str = "all customers", conf: float | None = None) -> RenewalFit:
    """Fit the shifted-beta-geometric model by maximum likelihood.

    Parameters
    ----------
    source : StartStop, or survivor counts
        A start-stop table (cut into periods of ``period_days``), one
        cohort's survivors n_0, n_1, ..., n_k, or a list of such cohorts of
        different lengths (each contributes only the periods it was observed).
    period_days : float
        Length of a renewal period in days for a table (default one month).
    level : float
        Interval level (default 0.95); ``conf=`` is accepted as its older name.

    Returns
    -------
    RenewalFit: ``project(periods)``, ``retention_rates(t)``, ``derl(discount, n)``.
    """
    where = f"renewal model ({label})"
    level = resolve_level(level, conf, where)
    if isinstance(source, StartStop):
        counts = renewal_counts(source, period_days=period_days, label=label)
    else:
        counts = _counts_from_survivors(source, label)
    return _fit_counts(counts, level, where)


@dataclass(frozen=True, eq=False)
class RenewalSegments(Result):
    """One sBG fit per segment (each spell in the segment of its first row)."""

    by: str
    fits: dict[str, RenewalFit]
    skipped: dict[str, str]
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        rows = []
        for level, f in self.fits.items():
            rows.append({"segment": level, "alpha": f.alpha, "beta": f.beta,
                         "first_renewal_churn": f.mean_churn_probability,
                         "customers": f.n_customers, "periods_observed": f.n_periods,
                         "loglik": f.loglik})
        return pd.DataFrame(rows)

    def summary(self) -> str:
        parts = [f.summary() for f in self.fits.values()]
        parts += [f"{k}: not fitted ({v})" for k, v in self.skipped.items()]
        return "\n".join(parts)


def fit_renewal_by(table: StartStop, by: str, *, period_days: float = DAYS_PER_MONTH,
                   level: float | None = None, conf: float | None = None
                   ) -> RenewalSegments:
    """:func:`fit_renewal` for each level of ``by`` (e.g. ``"plan"`` or ``"cohort"``).

    A level that cannot be fitted (no churn, or every customer lost at the
    first renewal) is listed in ``skipped`` with the reason, not raised.
    """
    from retain.models.curves import spell_start_codes

    where = f"renewal model by {by!r}"
    level = resolve_level(level, conf, where)
    if not isinstance(table, StartStop):
        raise DataError(where, f"expected a StartStop table, got {type(table).__name__}",
                        "build one with StartStop.from_parquet / from_frame")
    codes, levels, _ = spell_start_codes(table, by)
    fits: dict[str, RenewalFit] = {}
    skipped: dict[str, str] = {}
    for code, value in enumerate(levels):
        mask = codes == code
        if not mask.any():
            continue
        try:
            fits[value] = fit_renewal(table.take(mask), period_days=period_days, level=level,
                                      label=f"{by} = {value}")
        except ModelError as exc:
            skipped[value] = exc.rule
    return RenewalSegments(by, fits, skipped)


# --------------------------------------------------------------------------- backtest
@dataclass(frozen=True, eq=False)
class RenewalBacktest(Result):
    """Fit on the first ``train_periods`` renewals, compared with what came later.

    Errors are on survival (percentage points x 100 = per cent of the cohort)
    and relative to the observed survival.
    """

    label: str
    train_periods: int
    fit: RenewalFit
    periods: np.ndarray
    observed: np.ndarray
    projected: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    warnings: tuple[str, ...] = ()

    @property
    def error(self) -> np.ndarray:
        return self.projected - self.observed

    @property
    def relative_error(self) -> np.ndarray:
        return self.error / self.observed

    @property
    def mean_absolute_percentage_error(self) -> float:
        held = self.periods > self.train_periods
        return float(np.nanmean(np.abs(self.relative_error[held]))) if held.any() else math.nan

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({"period": self.periods, "observed_survival": self.observed,
                             "projected_survival": self.projected, "lower": self.lower,
                             "upper": self.upper, "error": self.error,
                             "relative_error": self.relative_error,
                             "held_out": self.periods > self.train_periods})

    def summary(self) -> str:
        return (f"{self.label}: fitted on {self.train_periods} renewals, the projection of "
                f"renewals {self.train_periods + 1}-{int(self.periods.max())} is off by "
                f"{self.mean_absolute_percentage_error:.1%} on average (mean absolute "
                "percentage error of survival)")


def backtest_renewal(source: StartStop | Sequence[float] | Sequence[Sequence[float]],
                     train_periods: int, *, period_days: float = DAYS_PER_MONTH,
                     level: float | None = None, label: str = "all customers",
                     conf: float | None = None) -> RenewalBacktest:
    """Fit on renewals 1..k only and compare the projection with later observations.

    The training data are what was known when only k renewals had been seen:
    later churns count as survivors at k, rows entering after k are dropped.
    The comparison uses the observed survival of the full data (discrete
    Kaplan–Meier; n_t / n_0 for one cohort).
    """
    where = f"renewal backtest ({label})"
    level = resolve_level(level, conf, where)
    k = int(train_periods)
    if isinstance(source, StartStop):
        full = renewal_counts(source, period_days=period_days, label=label)
        entry, exit_ = _row_periods(source, float(period_days))
        train = _counts_from_rows(entry, exit_, source.churned, source.weight,
                                  float(period_days), label, horizon=k)
    else:
        full = _counts_from_survivors(source, label)
    if not (1 <= k < full.n_periods):
        raise ModelError(where, f"train_periods must be between 1 and {full.n_periods - 1} "
                         f"(the data cover {full.n_periods} renewals), got {train_periods!r}",
                         "hold out at least one observed renewal")
    if not isinstance(source, StartStop):
        train = full.truncated(k)
    fit = _fit_counts(train, level, where)
    proj = fit.project(full.n_periods)
    obs = full.observed_survival
    return RenewalBacktest(label, k, fit, proj.periods, obs, proj.survival, proj.lower,
                           proj.upper, fit.warnings)
