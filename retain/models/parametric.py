"""Parametric churn models: exponential, Weibull and piecewise-constant hazards.

All three are proportional-hazards models fitted by maximum likelihood on a
start-stop table, with delayed entry, case weights and time-varying
covariates (see :mod:`retain.kernels.parametric` for the likelihoods):

* exponential: h(t|x) = lambda exp(x'b), constant in tenure;
* Weibull: h(t|x) = alpha lambda t**(alpha-1) exp(x'b); alpha > 1 means churn
  risk rises with tenure, alpha < 1 that it falls, alpha = 1 is the
  exponential model;
* piecewise-constant: one hazard per tenure band, times exp(x'b).

Conventions

* Time is tenure in days (``retain.units.DAYS_PER_MONTH`` days = 1 month);
  rows are at risk on (start, stop]. Weights are frequency weights.
* Covariates are coded by :func:`retain.models.design.design_matrix` (the same
  labels as the Cox model: "plan Orchard vs Seedling"); a profile that leaves a
  covariate out takes the reference level (categorical) or the weighted mean
  (numeric), and the result says so.
* Fitting: Newton's method with the analytic Hessian and step halving, on the
  unconstrained scale (log shape), with time divided by the mean exit time
  and covariates centred; estimates are then moved back to days and
  uncentred covariates, the covariance with them (exact Jacobian).
* Standard errors: inverse observed information. Intervals: Wald on the log
  scale for hazard ratios, time ratios, shape and lifetimes; for retention
  curves on the log(-log) scale (log cumulative hazard), which keeps limits in
  (0, 1). All are delta-method intervals (Collett 2015, sec. 5.8;
  Klein & Moeschberger 2003, sec. 12.2).
* Weibull read two ways (Collett 2015, sec. 6.4; Cox & Oakes 1984): as
  proportional hazards, HR_j = exp(b_j); as accelerated failure time, the
  same model is log T = mu - x'(b/alpha) + W/alpha with W extreme-value,
  so the time ratio (acceleration factor) is TR_j = exp(-b_j/alpha) =
  HR_j**(-1/alpha): a hazard ratio above 1 shortens lifetimes.
* Model comparison: AIC = -2 LL + 2k, BIC = -2 LL + k log(churns) -- the number
  of events as the sample size for censored data (Volinsky & Raftery 2000),
  which also keeps BIC unchanged when rows are split or compressed.
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from retain.data.table import StartStop
from retain.errors import ConvergenceError, DataError, ModelError
from retain.estimates import Estimates, RetentionPrediction, check_level, z_value
from retain.kernels import parametric as K
from retain.kernels.exposure import exposure_by_row
from retain.kernels.newton import MAX_LOG_STEP, hessian_objective, newton_maximize
from retain.kernels.threads import one_blas_thread
from retain.models.design import Design, design_matrix
from retain.models.missing import MissingCovariates, apply_missing_rule
from retain.results import Result, resolve_level, to_jsonable
from retain.units import DAYS_PER_MONTH

__all__ = [
    "LifetimeEstimate",
    "LogLogDiagnostic",
    "ModelComparison",
    "ParametricFit",
    "RetentionForecast",
    "ShapeTest",
    "compare_models",
    "fit_exponential",
    "fit_piecewise",
    "fit_weibull",
    "loglog_diagnostic",
]

KINDS = ("exponential", "weibull", "piecewise")
#: default piecewise bands, in months of tenure: 0-1, 1-3, 3-6, 6-12, 12-24, 24+
DEFAULT_BAND_MONTHS = (1.0, 3.0, 6.0, 12.0, 24.0)


# --------------------------------------------------------------------------- helpers


def _check_table(table: object, where: str) -> StartStop:
    if not isinstance(table, StartStop):
        raise DataError(where, f"expected a StartStop table, got {type(table).__name__}",
                        "build one with StartStop.from_parquet / from_frame")
    if table.n_events <= 0:
        raise ModelError(where, "the table has no churns, so no hazard can be estimated",
                         "fit on a longer window or a larger segment")
    return table


def _months(days: float) -> float:
    return days / DAYS_PER_MONTH


def _extrapolation_note(what: str, reach_days: float, follow_up: float) -> str | None:
    """The sentence that says how far a prediction reaches past the data."""
    if not math.isfinite(reach_days):
        return (f"{what} integrates the fitted curve to infinite tenure, past the longest "
                f"observed tenure of {_months(follow_up):.0f} months; it is a model "
                "extrapolation, not an observation")
    if reach_days <= follow_up * (1 + 1e-9):
        return None
    return (f"{what} extrapolates {_months(reach_days - follow_up):.0f} months past the longest "
            f"observed tenure of {_months(follow_up):.0f} months")


def _solve_information(hess: np.ndarray, where: str, names: Sequence[str]) -> np.ndarray:
    info = -hess
    try:
        np.linalg.cholesky(info)
    except np.linalg.LinAlgError as exc:
        raise ModelError(where, "the information matrix is not positive definite at the "
                         f"estimate (parameters: {', '.join(names)})",
                         "drop a covariate whose levels have no churns, or merge levels") from exc
    return np.linalg.inv(info)


def _strip(design: Design) -> Design:
    """The design without its rows (a fit keeps only what codes new rows)."""
    return dataclasses.replace(design, X=np.zeros((0, design.n_columns)))


# --------------------------------------------------------------------------- results
#: the retention prediction of a parametric fit: the one type every model returns
RetentionForecast = RetentionPrediction


@dataclass(frozen=True, eq=False)
class LifetimeEstimate(Result):
    """A median or mean lifetime (days) with a delta-method interval (log scale)."""

    model: str
    measure: str            # "median", "mean", "restricted mean"
    days: float
    lower: float
    upper: float
    horizon: float | None
    level: float
    profile: dict[str, Any]
    filled: dict[str, str]
    warnings: tuple[str, ...] = ()

    @property
    def months(self) -> float:
        return _months(self.days)

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{
            "model": self.model, "measure": self.measure, "days": self.days,
            "months": self.months, "lower_days": self.lower, "upper_days": self.upper,
            "horizon_days": self.horizon, "level": self.level,
        }])

    def summary(self) -> str:
        what = self.measure if self.horizon is None else \
            f"{self.measure} over the first {_months(self.horizon):.0f} months"
        text = (f"{self.model} {what}: {self.months:.1f} months ({self.level:.0%} CI "
                f"{_months(self.lower):.1f} to {_months(self.upper):.1f})")
        return text + ("; " + "; ".join(self.warnings) if self.warnings else "")


@dataclass(frozen=True, eq=False)
class ShapeTest(Result):
    """Weibull shape alpha, its interval, and the likelihood-ratio test of alpha = 1."""

    shape: float
    lower: float
    upper: float
    level: float
    statistic: float
    p_value: float
    loglik_weibull: float
    loglik_exponential: float

    @property
    def reading(self) -> str:
        """The plain sentence: what the shape says about churn risk over tenure."""
        if self.lower > 1.0:
            trend = "churn risk rises with tenure (shape above 1)"
        elif self.upper < 1.0:
            trend = "churn risk falls with tenure (shape below 1): customers who stay become safer"
        else:
            trend = ("the data cannot tell a rising from a falling risk (shape near 1, "
                     "the exponential model's constant risk)")
        return (f"Weibull shape {self.shape:.3f} ({self.level:.0%} CI {self.lower:.3f} to "
                f"{self.upper:.3f}): {trend}. Likelihood-ratio test of shape = 1 "
                f"(exponential): chi-square {self.statistic:.2f} on 1 df, "
                f"{_fmt_p(self.p_value)}.")

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{
            "shape": self.shape, "lower": self.lower, "upper": self.upper, "level": self.level,
            "lr_statistic": self.statistic, "p_value": self.p_value,
            "loglik_weibull": self.loglik_weibull, "loglik_exponential": self.loglik_exponential,
        }])

    def summary(self) -> str:
        return self.reading


def _fmt_p(p: float) -> str:
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


@dataclass(frozen=True, eq=False)
class ParametricFit(Result):
    """A fitted exponential, Weibull or piecewise-constant hazard model.

    ``params`` are in days and uncentred covariates:

    * exponential: (b0, b), h(t|x) = exp(b0 + x'b);
    * Weibull: (b0, g, b), alpha = exp(g), H(t|x) = exp(b0 + x'b) t**alpha;
    * piecewise: (a_1..a_K, b), h(t|x) = exp(a_k + x'b) on band k.

    ``cov`` is their covariance (inverse observed information). The baseline
    (x = 0) is every categorical covariate at its reference level and every
    numeric covariate at 0.
    """

    model: str
    params: np.ndarray
    cov: np.ndarray
    param_names: tuple[str, ...]
    columns: tuple[str, ...]
    labels: tuple[str, ...]
    covariates: tuple[str, ...]
    reference: dict[str, str]
    cuts: tuple[float, ...]
    fixed_shape: float | None
    loglik: float
    n_params: int
    n_rows: int
    n_customers: int
    n_events: float
    exposure_days: float
    follow_up: float
    level: float
    converged: bool
    iterations: int
    history: tuple[dict, ...]
    exponential_loglik: float | None
    design: Design
    warnings: tuple[str, ...] = ()
    missing: MissingCovariates | None = None  # rows left out (or recoded) for missing values
    requested_cuts: tuple[float, ...] = ()  # piecewise: the cut points asked for (days)
    merged_bands: tuple[str, ...] = ()  # piecewise: "a + b -> c" for each band made by merging

    # ------------------------------------------------------------ basics
    def to_dict(self) -> dict[str, Any]:
        out = {f.name: to_jsonable(getattr(self, f.name)) for f in dataclasses.fields(self)
               if f.name != "design"}
        out["levels"] = {k: list(v) for k, v in self.design.levels.items()}
        out["means"] = to_jsonable(self.design.means)
        out["aic"] = self.aic
        out["bic"] = self.bic
        return out

    def estimates(self) -> Estimates:
        """``params`` on their working scale with ``cov``, read through exp.

        Baseline terms: log rate (exponential, Weibull: ``exp(b0)`` multiplies
        ``t**shape`` in the cumulative hazard, per day), log shape (Weibull),
        log hazard per day of each band (piecewise); covariates: log hazard ratio.
        """
        k = self.params.shape[0]
        sl = self._beta_index
        scale = ["log hazard ratio"] * k
        if self.model == "piecewise":
            scale[:sl.start] = ["log hazard"] * sl.start
        else:
            scale[0] = "log rate"
            if self.model == "weibull" and sl.start == 2:
                scale[1] = "log shape"
        names = tuple(self.param_names[:sl.start]) + tuple(self.labels)
        return Estimates(model=self.model, names=names, estimate=self.params,
                         cov=self.cov, scale=tuple(scale), level=self.level)

    @property
    def se(self) -> np.ndarray:
        return np.sqrt(np.diag(self.cov))

    @property
    def aic(self) -> float:
        return -2.0 * self.loglik + 2.0 * self.n_params

    @property
    def bic(self) -> float:
        return -2.0 * self.loglik + self.n_params * math.log(max(self.n_events, 1.0))

    @property
    def _z(self) -> float:
        return float(stats.norm.isf((1.0 - self.level) / 2.0))

    @property
    def _beta_index(self) -> slice:
        first = {"exponential": 1, "weibull": 2}.get(self.model, len(self.cuts) + 1)
        return slice(first, first + len(self.columns))

    @property
    def _cuts(self) -> np.ndarray:
        return np.asarray(self.cuts, dtype=np.float64)

    # ------------------------------------------------------------ readings
    @property
    def hazard_ratios(self) -> pd.DataFrame:
        """exp(b) per design column with Wald interval and p-value."""
        sl = self._beta_index
        b = self.params[sl]
        se = self.se[sl]
        z = self._z
        zstat = np.divide(b, se, out=np.full_like(b, np.nan), where=se > 0)
        return pd.DataFrame({
            "column": list(self.columns), "label": list(self.labels), "coef": b, "se": se,
            "hazard_ratio": np.exp(b), "lower": np.exp(b - z * se), "upper": np.exp(b + z * se),
            "z": zstat, "p_value": 2.0 * stats.norm.sf(np.abs(zstat)),
        })

    def _aft_jacobian(self) -> tuple[np.ndarray, float, np.ndarray]:
        """b, alpha and the Jacobian of log TR = -b/alpha in ``params`` (one row per b_j)."""
        if self.model == "piecewise":
            raise ModelError("time ratios", "the piecewise-constant model has no "
                             "accelerated-failure-time reading", "fit a Weibull model")
        sl = self._beta_index
        b = self.params[sl]
        alpha = self.shape_value
        jac = np.zeros((b.shape[0], self.params.shape[0]))
        for j, i in enumerate(np.arange(self.params.shape[0])[sl]):
            jac[j, i] = -1.0 / alpha
            if self.model == "weibull" and self.fixed_shape is None:
                jac[j, 1] = b[j] / alpha
        return b, alpha, jac

    @property
    def time_ratios(self) -> pd.DataFrame:
        """Accelerated-failure-time reading: TR = exp(-b/alpha) = HR**(-1/alpha).

        Delta method on log TR = -b e^{-g}: d/db = -1/alpha, d/dg = b/alpha.
        Exponential: alpha = 1, TR = 1/HR. Not defined for the piecewise model.
        """
        b, alpha, jac = self._aft_jacobian()
        log_tr = -b / alpha
        var = np.array([grad @ self.cov @ grad for grad in jac])
        se = np.sqrt(var)
        z = self._z
        hr = np.exp(b)
        return pd.DataFrame({
            "column": list(self.columns), "label": list(self.labels),
            "time_ratio": np.exp(log_tr), "lower": np.exp(log_tr - z * se),
            "upper": np.exp(log_tr + z * se), "hazard_ratio": hr,
            "hr_to_the_minus_1_over_shape": hr ** (-1.0 / alpha),
        })

    def time_ratio_estimates(self) -> Estimates:
        """The accelerated-failure-time reading as :class:`Estimates`: log TR = -b/alpha.

        Covariance by the delta method with the Jacobian of :attr:`time_ratios`
        (d/db = -1/alpha; d/d log alpha = b/alpha for a free Weibull shape).
        """
        b, alpha, jac = self._aft_jacobian()
        return Estimates(model=self.model, names=tuple(self.labels), estimate=-b / alpha,
                         cov=jac @ self.cov @ jac.T, scale=("log time ratio",) * b.shape[0],
                         level=self.level)

    @property
    def shape_value(self) -> float:
        if self.model == "weibull":
            return float(np.exp(self.params[1]))
        return 1.0

    @property
    def shape(self) -> ShapeTest:
        """Weibull shape with interval and LR test of shape = 1 (Weibull fits only)."""
        return self.shape_test

    @property
    def shape_test(self) -> ShapeTest:
        if self.model != "weibull" or self.fixed_shape is not None \
                or self.exponential_loglik is None:
            raise ModelError("shape test", f"the {self.model} fit has no free Weibull shape",
                             "fit_weibull(...) without a fixed shape")
        g = float(self.params[1])
        se = float(self.se[1])
        z = self._z
        stat = max(2.0 * (self.loglik - self.exponential_loglik), 0.0)
        return ShapeTest(shape=math.exp(g), lower=math.exp(g - z * se), upper=math.exp(g + z * se),
                         level=self.level, statistic=stat, p_value=float(stats.chi2.sf(stat, 1)),
                         loglik_weibull=self.loglik, loglik_exponential=self.exponential_loglik)

    @property
    def relation(self) -> str:
        """How the hazard-ratio and time-ratio readings relate."""
        if self.model == "piecewise":
            return "piecewise-constant hazards have only the hazard-ratio reading"
        a = self.shape_value
        return (f"time ratio = hazard ratio ^ (-1/shape) = hazard ratio ^ {-1.0 / a:.4f}: "
                "a covariate that multiplies the churn hazard by HR stretches (TR > 1) or "
                "shrinks (TR < 1) every customer's lifetime by TR")

    @property
    def baseline_scale_days(self) -> float:
        """Weibull / exponential scale sigma at x = 0: S(t) = exp(-(t/sigma)**alpha)."""
        if self.model == "piecewise":
            raise ModelError("baseline scale", "the piecewise model has no scale",
                             "read band_hazards instead")
        return float(np.exp(-self.params[0] / self.shape_value))

    @property
    def band_hazards(self) -> pd.DataFrame:
        """Piecewise model: hazard per month in each band at x = 0, with interval."""
        if self.model != "piecewise":
            raise ModelError("band hazards", f"the {self.model} fit has no bands",
                             "fit_piecewise(...)")
        k = len(self.cuts) + 1
        a = self.params[:k]
        se = self.se[:k]
        z = self._z
        lo = np.concatenate(([0.0], self._cuts))
        hi = np.concatenate((self._cuts, [np.inf]))
        return pd.DataFrame({
            "band": [_band_label(x, y) for x, y in zip(lo, hi, strict=True)],
            "from_days": lo, "to_days": hi,
            "hazard_per_month": np.exp(a) * DAYS_PER_MONTH,
            "lower": np.exp(a - z * se) * DAYS_PER_MONTH,
            "upper": np.exp(a + z * se) * DAYS_PER_MONTH,
        })

    def to_frame(self) -> pd.DataFrame:
        if not self.columns:
            return pd.DataFrame(columns=["column", "label", "coef", "se", "hazard_ratio",
                                         "lower", "upper", "z", "p_value"])
        out = self.hazard_ratios
        if self.model != "piecewise":
            tr = self.time_ratios
            out["time_ratio"] = tr["time_ratio"].to_numpy()
            out["time_ratio_lower"] = tr["lower"].to_numpy()
            out["time_ratio_upper"] = tr["upper"].to_numpy()
        return out

    def summary(self) -> str:
        head = (f"{self.model} model on {self.n_rows} rows, {self.n_customers} customers, "
                f"{self.n_events:g} churns: log-likelihood {self.loglik:.2f}, AIC {self.aic:.1f}")
        parts = [head]
        if self.model == "weibull" and self.fixed_shape is None:
            parts.append(self.shape_test.reading)
        for _, row in (self.hazard_ratios.iterrows() if self.columns else []):
            parts.append(f"{row['label']}: hazard ratio {row['hazard_ratio']:.3f} "
                         f"({self.level:.0%} CI {row['lower']:.3f} to {row['upper']:.3f})")
        parts.extend(self.warnings)
        return "\n".join(parts)

    # ------------------------------------------------------------ prediction
    def _profile_row(self, profile: Mapping[str, Any] | None) -> tuple[np.ndarray, dict, dict]:
        profile = dict(profile or {})
        unknown = [k for k in profile if k not in self.covariates]
        if unknown:
            raise DataError("covariate profile", f"{', '.join(map(str, unknown))} not in the model",
                            f"the model's covariates are: {', '.join(self.covariates) or '(none)'}")
        filled: dict[str, str] = {}
        full = dict(profile)
        for c in self.covariates:
            if c in full:
                continue
            if self.design.is_categorical(c):
                full[c] = self.design.reference[c]
                filled[c] = f"{full[c]} (reference level)"
            else:
                j = self.design.terms[c].start
                full[c] = float(self.design.means[j])
                filled[c] = f"{full[c]:.4g} (weighted mean)"
        x = self.design.rows_for(full)[0] if self.covariates else np.zeros(0)
        return x, {k: to_jsonable(v) for k, v in profile.items()}, filled

    def _prediction_times(self, times: Sequence[float] | np.ndarray | None) -> np.ndarray:
        """Checked tenures (days); default every month to twice the longest observed."""
        if times is None:
            top = max(2.0 * self.follow_up, DAYS_PER_MONTH)
            times = np.arange(0.0, top + 1e-9, DAYS_PER_MONTH)
        t = np.atleast_1d(np.asarray(times, dtype=np.float64))
        if np.any(~np.isfinite(t)) or np.any(t < 0):
            raise DataError("prediction times", "times must be finite tenures >= 0 (days)",
                            "pass e.g. numpy.arange(0, 731, 30.4375)")
        return t

    def hazard(self, profile: Mapping[str, Any] | None = None,
               times: Sequence[float] | np.ndarray | None = None) -> np.ndarray:
        """Fitted hazard (per day) at the given tenures (days) for a profile."""
        return self.predict_retention(profile, times).hazard

    def predict_retention(self, profile: Mapping[str, Any] | None = None,
                          times: Sequence[float] | np.ndarray | None = None,
                          level: float | None = None) -> RetentionPrediction:
        """Retention S(t|x), hazard and cumulative hazard at tenures ``times`` (days).

        ``times`` default: every month up to twice the longest observed tenure.
        Times past the data are allowed; the result's warning says how far.
        Intervals at ``level`` (default the fit's): log H +- z se (delta method)
        mapped to S = exp(-H).
        """
        x, prof, filled = self._profile_row(profile)
        t = self._prediction_times(times)
        lv = self.level if level is None else check_level(level, "retention prediction")
        z = z_value(lv)
        pos = t > 0
        tp = np.where(pos, t, 1.0)
        lh, jh = K.log_cumulative_hazard(self.model, self.params, x, tp, self._cuts)
        se_h = np.sqrt(np.einsum("ij,jk,ik->i", jh, self.cov, jh))
        H = np.where(pos, np.exp(lh), 0.0)
        surv = np.exp(-H)
        lower = np.where(pos, np.exp(-np.exp(lh + z * se_h)), 1.0)
        upper = np.where(pos, np.exp(-np.exp(lh - z * se_h)), 1.0)
        lz, jz = K.log_hazard(self.model, self.params, x, tp, self._cuts)
        se_z = np.sqrt(np.einsum("ij,jk,ik->i", jz, self.cov, jz))
        hz = np.exp(lz)
        hz_lo = np.exp(lz - z * se_z)
        hz_hi = np.exp(lz + z * se_z)
        if self.model == "weibull":
            at0 = ~pos
            lim = 0.0 if self.shape_value > 1 else (np.inf if self.shape_value < 1 else None)
            if lim is not None:
                hz[at0] = hz_lo[at0] = hz_hi[at0] = lim
        warnings = list(self.warnings_for(float(t.max()), "the retention curve"))
        return RetentionPrediction(
            model=self.model, profile=prof, filled=filled, times=t, survival=surv,
            lower=lower, upper=upper, hazard=hz, hazard_lower=hz_lo, hazard_upper=hz_hi,
            cumulative_hazard=H, level=lv, follow_up=self.follow_up,
            extrapolated=t > self.follow_up, warnings=tuple(warnings))

    def warnings_for(self, reach_days: float, what: str) -> tuple[str, ...]:
        note = _extrapolation_note(what, reach_days, self.follow_up)
        return (note,) if note else ()

    def median_lifetime(self, profile: Mapping[str, Any] | None = None) -> LifetimeEstimate:
        """Tenure at which fitted retention is 50%, with a log-scale delta interval.

        Implicit-function gradient: H(t*) = log 2 gives
        d log t*/d theta = -(d log H/d theta)(t*) * H(t*) / (t* h(t*)).
        """
        x, prof, filled = self._profile_row(profile)
        t_med = K.quantile_time(self.model, self.params, x, 0.5, self._cuts)
        if not math.isfinite(t_med):
            return LifetimeEstimate(self.model, "median", math.inf, math.nan, math.nan, None,
                                    self.level, prof, filled,
                                    ("fitted retention never falls to 50%",))
        _, jh = K.log_cumulative_hazard(self.model, self.params, x, np.array([t_med]), self._cuts)
        lz, _ = K.log_hazard(self.model, self.params, x, np.array([t_med]), self._cuts)
        grad = -jh[0] * math.log(2.0) / (t_med * math.exp(lz[0]))
        se = math.sqrt(max(float(grad @ self.cov @ grad), 0.0))
        z = self._z
        return LifetimeEstimate(self.model, "median", t_med, t_med * math.exp(-z * se),
                                t_med * math.exp(z * se), None, self.level, prof, filled,
                                self.warnings_for(t_med, "the median lifetime"))

    def mean_lifetime(self, profile: Mapping[str, Any] | None = None,
                      horizon: float | None = None) -> LifetimeEstimate:
        """Mean lifetime (days): restricted to ``horizon`` days, or unrestricted.

        Closed forms in :func:`retain.kernels.parametric.mean_time`; the
        delta-method gradient of its log is taken by central differences
        (step 1e-5 in each parameter; the function is smooth, so the error is
        about 1e-10 relative).
        """
        if horizon is not None and not (math.isfinite(horizon) and horizon > 0):
            raise DataError("mean lifetime", f"horizon must be a positive number of days, "
                            f"got {horizon!r}", "pass e.g. horizon=730.5 (24 months)")
        x, prof, filled = self._profile_row(profile)

        def f(theta: np.ndarray) -> float:
            return K.mean_time(self.model, theta, x, horizon, self._cuts)

        value = f(self.params)
        if not math.isfinite(value):
            return LifetimeEstimate(self.model, "mean", math.inf, math.nan, math.nan, horizon,
                                    self.level, prof, filled,
                                    ("the fitted hazard beyond the last band is zero",))
        k = self.params.shape[0]
        grad = np.empty(k)
        h = 1e-5
        for i in range(k):
            e = np.zeros(k)
            e[i] = h
            grad[i] = (math.log(f(self.params + e)) - math.log(f(self.params - e))) / (2 * h)
        se = math.sqrt(max(float(grad @ self.cov @ grad), 0.0))
        z = self._z
        measure = "mean" if horizon is None else "restricted mean"
        reach = math.inf if horizon is None else float(horizon)
        return LifetimeEstimate(self.model, measure, value, value * math.exp(-z * se),
                                value * math.exp(z * se), horizon, self.level, prof, filled,
                                self.warnings_for(reach, f"the {measure} lifetime"))

    def segment_retention(self, table: StartStop,
                          times: Sequence[float] | np.ndarray | None = None,
                          label: str = "segment") -> RetentionPrediction:
        """Average fitted retention of the spells in ``table`` (a segment), with intervals.

        S_seg(t) = sum_i w_i S(t | x_i) / sum_i w_i over each spell's first row,
        its covariates held at their values at the spell's start (time-varying
        covariates are frozen there). The hazard is the population hazard
        sum w_i S_i h_i / sum w_i S_i. Intervals: delta method, S_seg on the
        log(-log) scale and the hazard on the log scale; the gradients use
        log H(t | x) = log H_0(t) + x'b, whose baseline part does not depend on x.
        """
        from retain.kernels.risksets import first_of_spell

        if not isinstance(table, StartStop):
            raise DataError("segment retention", "expected a StartStop table",
                            "pass the segment's rows, e.g. table.take(mask)")
        t = self._prediction_times(times)
        if table.has_customers:
            heads = np.unique(first_of_spell(table.customer.codes, table.spell, table.start))
        else:
            heads = np.arange(table.n_rows)
        sub = table.take(heads)
        X = self.design.rows_for_table(sub) if self.columns else np.zeros((sub.n_rows, 0))
        w = sub.weight
        W = float(w.sum())
        sl = self._beta_index
        xb = X @ self.params[sl] if self.columns else np.zeros(sub.n_rows)
        pos = t > 0
        tp = np.where(pos, t, 1.0)
        x0 = np.zeros(len(self.columns))
        lh0, jh0 = K.log_cumulative_hazard(self.model, self.params, x0, tp, self._cuts)
        lz0, jz0 = K.log_hazard(self.model, self.params, x0, tp, self._cuts)
        H = np.exp(xb[:, None] + lh0[None, :]) * pos[None, :]      # (m, T)
        S = np.exp(-H)
        hz = np.exp(xb[:, None] + lz0[None, :])
        ws = w[:, None] * S
        surv = ws.sum(axis=0) / W
        u = ws * H                                                  # w S H
        k = self.params.shape[0]
        base = np.arange(k) < sl.start
        # d S_seg / d theta, shape (T, k)
        dS = np.zeros((t.shape[0], k))
        dS[:, base] = -(u.sum(axis=0)[:, None] * jh0[:, base]) / W
        if self.columns:
            dS[:, sl] = -(u.T @ X) / W
        var_s = np.einsum("ij,jk,ik->i", dS, self.cov, dS)
        z = self._z
        with np.errstate(divide="ignore", invalid="ignore"):
            ls = np.log(surv)
            se_ll = np.sqrt(var_s) / np.abs(surv * ls)
            lower = np.where(pos, np.exp(-np.exp(np.log(-ls) + z * se_ll)), 1.0)
            upper = np.where(pos, np.exp(-np.exp(np.log(-ls) - z * se_ll)), 1.0)
        v = ws * hz                                                 # w S h
        N = v.sum(axis=0)
        D = ws.sum(axis=0)
        hbar = N / D
        dN = np.zeros_like(dS)
        dN[:, base] = v.sum(axis=0)[:, None] * jz0[:, base] \
            - (v * H).sum(axis=0)[:, None] * jh0[:, base]
        if self.columns:
            dN[:, sl] = (v * (1.0 - H)).T @ X
        dlog_h = dN / N[:, None] - (dS * W) / D[:, None]
        se_h = np.sqrt(np.einsum("ij,jk,ik->i", dlog_h, self.cov, dlog_h))
        if self.model == "weibull" and not pos.all() and self.shape_value != 1.0:
            hbar[~pos] = 0.0 if self.shape_value > 1 else np.inf   # h(0) of a Weibull
        return RetentionPrediction(
            model=self.model, profile={"segment": label, "spells": int(sub.n_rows)}, filled={},
            times=t, survival=surv, lower=lower, upper=upper, hazard=hbar,
            hazard_lower=hbar * np.exp(-z * se_h), hazard_upper=hbar * np.exp(z * se_h),
            cumulative_hazard=-np.log(surv), level=self.level, follow_up=self.follow_up,
            extrapolated=t > self.follow_up,
            warnings=self.warnings_for(float(t.max()), f"the retention curve of {label}"))

    def expected_events(self, table: StartStop) -> np.ndarray:
        """Expected churns per row of ``table``: w (H(stop|x) - H(start|x)).

        The "expected" of an actual-vs-expected comparison; summed over a
        group it is that group's expected number of churns under the fit.
        """
        if not isinstance(table, StartStop):
            raise DataError("expected events", "expected a StartStop table",
                            "pass the table to compare with")
        X = self.design.rows_for_table(table) if self.columns else np.zeros((table.n_rows, 0))
        sl = self._beta_index
        lin = X @ self.params[sl] if self.columns else np.zeros(table.n_rows)
        if self.model == "piecewise":
            k = len(self.cuts) + 1
            expo, _ = exposure_by_row(table.start, table.stop, K.band_edges(self._cuts))
            h0 = expo @ np.exp(self.params[:k])
        else:
            a = self.shape_value
            h0 = np.exp(self.params[0]) * (table.stop ** a - table.start ** a)
        return table.weight * h0 * np.exp(lin)


def _whole_months(days: float) -> bool:
    m = days / DAYS_PER_MONTH
    return abs(2 * m - round(2 * m)) < 1e-9


def _band_label(lo: float, hi: float) -> str:
    """A band's name: in months when its ends are whole (or half) months, else in days."""
    if all(_whole_months(x) for x in (lo, hi) if math.isfinite(x)):
        if not math.isfinite(hi):
            return f"over {_months(lo):g} months"
        return f"{_months(lo):g} to {_months(hi):g} months"
    if not math.isfinite(hi):
        return f"over {lo:g} days"
    return f"{lo:g} to {hi:g} days"


# --------------------------------------------------------------------------- fitting
@dataclass(frozen=True)
class _Prepared:
    design: Design
    Xc: np.ndarray
    scale: float
    where: str
    table: StartStop  # the rows the model fits (after the missing-value rule)
    missing: MissingCovariates


def _prepare(table: StartStop, covariates: Sequence[str], reference: Mapping[str, str] | None,
             where: str, missing: str = "stop") -> _Prepared:
    table = _check_table(table, where)
    if isinstance(covariates, str):
        covariates = [covariates]
    table, dropped, _ = apply_missing_rule(table, list(covariates), missing, where)
    design = design_matrix(table, list(covariates), reference=reference)
    Xc = design.centred() if design.n_columns else np.zeros((table.n_rows, 0))
    scale = float(np.average(table.stop, weights=table.weight))
    return _Prepared(design, Xc, scale, where, table, dropped)


def _newton(fun: Any, theta0: np.ndarray, where: str, max_iter: int) -> tuple:
    with one_blas_thread():
        res = newton_maximize(hessian_objective(fun), theta0, max_iter=max_iter,
                              max_step=MAX_LOG_STEP)
    history = [h.as_dict() for h in res.history]
    if not res.converged:
        raise ConvergenceError(where, f"Newton's method did not converge in {len(history)} "
                               "iterations", "check for covariate levels with no churns or very "
                               "few rows; the history is attached", history=history)
    return res.params, res.loglik, res.hessian, history


def _n_customers(table: StartStop) -> int:
    codes = table.customer.codes
    if codes.size and codes.min() >= 0:
        return int(np.count_nonzero(np.bincount(codes)))
    return table.n_customers


def _facts(table: StartStop) -> dict[str, Any]:
    return dict(n_rows=table.n_rows, n_customers=_n_customers(table), n_events=table.n_events,
                exposure_days=float(table.weight @ (table.stop - table.start)),
                follow_up=float(table.stop.max()))


def _survival_rows(table: StartStop, prep: _Prepared) -> K.SurvivalRows:
    s = prep.scale
    return K.SurvivalRows.build(prep.Xc, table.start / s, table.stop / s, table.churned,
                                table.weight)


def _fit_exponential_core(rows: K.SurvivalRows, prep: _Prepared, max_iter: int
                          ) -> tuple[np.ndarray, float, np.ndarray, list]:
    """Fit on the internal scale; returns (theta_internal, ll, hess, history)."""
    rate = rows.sum_wd / float(rows.w_exposure.sum())
    theta0 = np.zeros(1 + prep.Xc.shape[1])
    theta0[0] = math.log(rate)

    def fun(th: np.ndarray, derivatives: bool = True) -> tuple:
        return K.exponential_loglik(th, rows, derivatives=derivatives)

    theta, ll, hess, history = _newton(fun, theta0, prep.where, max_iter)
    return theta, ll, hess, history


def fit_exponential(table: StartStop, covariates: Sequence[str] = (), *,
                    reference: Mapping[str, str] | None = None, level: float | None = None,
                    max_iter: int = 100, missing: str = "stop", conf: float | None = None
                    ) -> ParametricFit:
    """Exponential (constant-hazard) proportional-hazards model.

    h(t | x) = exp(b0 + x'b) per day; log-likelihood
    sum_i w_i [d_i (b0 + x_i'b) - exp(b0 + x_i'b)(stop_i - start_i)]
    (Holford 1980: the Poisson likelihood with log-exposure offset).

    Parameters
    ----------
    table : StartStop
    covariates : sequence of str
        Columns of the table (numeric, or categorical coded against a reference level).
    reference : mapping, optional
        Reference level per categorical covariate (default: the most common).
    level : float
        Level of every interval (default 0.95); ``conf=`` is accepted as its older name.
    missing : {"stop", "complete_cases", "missing_level"}
        Rows whose covariates have no value: refuse (default), fit on the
        complete rows, or give a categorical covariate a ``"(missing)"`` level
        (:mod:`retain.models.missing`); the result's ``missing`` counts them.

    Returns
    -------
    ParametricFit with ``model = "exponential"``.
    """
    where = "exponential model"
    level = resolve_level(level, conf, where)
    prep = _prepare(table, covariates, reference, where, missing)
    table = prep.table
    theta_i, ll_i, hess_i, history = _fit_exponential_core(_survival_rows(table, prep), prep,
                                                           max_iter)
    return _finish("exponential", table, prep, theta_i, ll_i, hess_i, history, level,
                   fixed_shape=None, exp_ll=None, cuts=())


def fit_weibull(table: StartStop, covariates: Sequence[str] = (), *,
                reference: Mapping[str, str] | None = None, shape: float | None = None,
                level: float | None = None, max_iter: int = 100, missing: str = "stop",
                conf: float | None = None) -> ParametricFit:
    """Weibull proportional-hazards model on start-stop data.

    h(t | x) = alpha exp(b0 + x'b) t**(alpha - 1), H(t | x) = exp(b0 + x'b) t**alpha
    (Klein & Moeschberger 2003, sec. 12.2; Collett 2015, sec. 5.6), t in days.
    Delayed entry and time-varying covariates enter through
    H(stop) - H(start) per row.

    Parameters
    ----------
    table : StartStop
    covariates : sequence of str
    reference : mapping, optional
    shape : float, optional
        Hold alpha fixed at this value (``shape=1`` is the exponential model);
        default: estimate it.
    level : float
        Level of every interval (default 0.95); ``conf=`` is accepted as its older name.
    missing : {"stop", "complete_cases", "missing_level"}
        Rows whose covariates have no value: refuse (default), fit on the
        complete rows, or give a categorical covariate a ``"(missing)"`` level
        (:mod:`retain.models.missing`); the result's ``missing`` counts them.

    Returns
    -------
    ParametricFit with ``model = "weibull"``; read ``hazard_ratios``,
    ``time_ratios``, ``shape_test`` (interval and LR test of alpha = 1).
    """
    where = "Weibull model"
    level = resolve_level(level, conf, where)
    if shape is not None and not (math.isfinite(shape) and shape > 0):
        raise ModelError(where, f"a fixed shape must be a positive number, got {shape!r}",
                         "leave shape=None to estimate it")
    prep = _prepare(table, covariates, reference, where, missing)
    table = prep.table
    s = prep.scale
    # the exponential fit: starting values and the null model of the shape test
    rows = _survival_rows(table, prep)
    th_e, ll_e, _, _ = _fit_exponential_core(rows, prep, max_iter)
    p = prep.Xc.shape[1]
    if shape is None:
        theta0 = np.concatenate(([th_e[0], 0.0], th_e[1:]))

        def fun(th: np.ndarray, derivatives: bool = True) -> tuple:
            return K.weibull_loglik(th, rows, derivatives=derivatives)

        theta_i, ll_i, hess_i, history = _newton(fun, theta0, where, max_iter)
    else:
        g = math.log(shape)
        keep = np.array([0] + list(range(2, 2 + p)), dtype=np.int64)

        def fun(th: np.ndarray, derivatives: bool = True) -> tuple:
            full = np.concatenate(([th[0], g], th[1:]))
            ll, gr, he = K.weibull_loglik(full, rows, derivatives=derivatives)
            if not derivatives:
                return ll, None, None
            return ll, gr[keep], he[np.ix_(keep, keep)]

        th_f, ll_i, hess_f, history = _newton(fun, th_e.copy(), where, max_iter)
        theta_i = np.concatenate(([th_f[0], g], th_f[1:]))
        hess_i = hess_f
    # log-likelihoods in days: each churn's log h picks up -log(s); the
    # exponential's too -- so the LR statistic is unchanged by the rescaling
    exp_ll_days = ll_e - rows.sum_wd * math.log(s)
    return _finish("weibull", table, prep, theta_i, ll_i, hess_i, history, level,
                   fixed_shape=shape, exp_ll=exp_ll_days, cuts=())


def _finish(model: str, table: StartStop, prep: _Prepared, theta_i: np.ndarray, ll_i: float,
            hess_i: np.ndarray, history: list, level: float, *, fixed_shape: float | None,
            exp_ll: float | None, cuts: Sequence[float]) -> ParametricFit:
    """Move internal estimates to days and uncentred covariates; build the result."""
    design = prep.design
    s = prep.scale
    means = design.means
    p = design.n_columns
    names_b = list(design.columns)
    if model == "exponential":
        names = ["log_rate"] + names_b
        free = np.arange(1 + p)
        k_base = 1
    elif model == "weibull":
        names = ["log_rate", "log_shape"] + names_b
        free = np.arange(2 + p) if fixed_shape is None else \
            np.array([0] + list(range(2, 2 + p)), dtype=np.int64)
        k_base = 1
    else:
        k_base = len(cuts) + 1
        names = [f"log_hazard_band_{i + 1}" for i in range(k_base)] + names_b
        free = np.arange(k_base + p)
    cov_free = _solve_information(hess_i, prep.where, [names[i] for i in free])
    kdim = len(names)
    cov_i = np.zeros((kdim, kdim))
    cov_i[np.ix_(free, free)] = cov_free
    # reparametrisation: internal (centred X, time / s) -> reporting (days, raw X)
    alpha = math.exp(theta_i[1]) if model == "weibull" else 1.0
    theta = theta_i.copy()
    J = np.eye(kdim)
    bidx = slice(kdim - p, kdim)
    beta = theta_i[bidx]
    shift = float(means @ beta) if p else 0.0
    for j in range(k_base):
        theta[j] = theta_i[j] - shift - alpha * math.log(s)
        if p:
            J[j, bidx] = -means
        if model == "weibull":
            J[j, 1] = -alpha * math.log(s) if fixed_shape is None else 0.0
    cov = J @ cov_i @ J.T
    # log-likelihood in days: every churn's log hazard gains -log(s)
    ll = ll_i - table.n_events * math.log(s)
    n_params = len(free)
    warnings: list[str] = [prep.missing.summary()] if prep.missing.any else []
    return ParametricFit(
        model=model, params=theta, cov=cov, param_names=tuple(names),
        columns=design.columns, labels=design.labels, covariates=design.covariates,
        reference=dict(design.reference), cuts=tuple(float(c) for c in cuts),
        fixed_shape=fixed_shape, loglik=float(ll), n_params=int(n_params), **_facts(table),
        level=float(level), converged=True, iterations=len(history), history=tuple(history),
        exponential_loglik=exp_ll, design=_strip(design), warnings=tuple(warnings),
        missing=prep.missing)


def _check_cuts(cuts: Sequence[float] | None, table: StartStop, where: str) -> np.ndarray:
    if isinstance(cuts, (int, float)) and not isinstance(cuts, bool):
        cuts = [cuts]
    if cuts is None:
        c = np.asarray(DEFAULT_BAND_MONTHS) * DAYS_PER_MONTH
        c = c[c < table.stop.max()]
        return c
    c = np.asarray(list(cuts), dtype=np.float64)
    if c.ndim != 1 or np.any(~np.isfinite(c)) or np.any(c <= 0) or np.any(np.diff(c) <= 0):
        raise ModelError(where, f"band cut points must be increasing positive tenures in days, "
                         f"got {list(cuts)!r}", "pass e.g. [30.4375, 91.3125, 365.25]")
    return c


def fit_piecewise(table: StartStop, cuts: Sequence[float] | None = None,
                  covariates: Sequence[str] = (), *,
                  reference: Mapping[str, str] | None = None, level: float | None = None,
                  max_iter: int = 100, missing: str = "stop", conf: float | None = None
                  ) -> ParametricFit:
    """Piecewise-constant hazard model on tenure bands.

    h(t | x) = exp(a_k + x'b) for t in band k = (c_{k-1}, c_k] (Friedman 1982):
    a churn exactly on a cut point c_k belongs to the band that ends there, and
    the row's time at risk (start, stop] is split at the cuts. Without
    covariates the estimate is closed form: churns / exposure in each band
    (Holford 1976); with covariates, Newton on (a, b).

    A band with no churn or no time at risk has no finite estimate; it is
    merged with the band after it (the last band with the one before) until
    every band has both (:func:`retain.kernels.parametric.merge_empty_bands`).
    ``requested_cuts`` keeps the cut points asked for, ``cuts`` those used,
    ``merged_bands`` and ``warnings`` say which bands were merged.

    Parameters
    ----------
    cuts : sequence of float, optional
        Interior cut points in days of tenure, increasing and positive (the
        first band starts at 0, the last is open); the project file's
        ``[model] piecewise_cuts``. Default: 1, 3, 6, 12 and 24 months
        (30.44-day months), those below the longest observed tenure.
    covariates, reference, level, max_iter
        As for :func:`fit_weibull`.
    missing : {"stop", "complete_cases", "missing_level"}
        The missing-value rule (:mod:`retain.models.missing`).
    """
    where = "piecewise-constant hazard model"
    level = resolve_level(level, conf, where)
    prep = _prepare(table, covariates, reference, where, missing)
    table = prep.table
    asked = _check_cuts(cuts, table, where)
    s = prep.scale
    rows = K.PiecewiseRows.build(prep.Xc, table.start / s, table.stop / s, table.churned,
                                 table.weight, asked / s)
    events, exposure = K.piecewise_closed_form(rows)
    kept = K.merge_empty_bands(events, exposure)
    used = asked[kept]
    merged: list[str] = []
    if used.shape[0] < asked.shape[0]:
        lo_a = np.concatenate(([0.0], asked))
        hi_a = np.concatenate((asked, [np.inf]))
        lo_u = np.concatenate(([0.0], used))
        hi_u = np.concatenate((used, [np.inf]))
        for a, b in zip(lo_u, hi_u, strict=True):
            parts = [i for i in range(lo_a.shape[0]) if lo_a[i] >= a and hi_a[i] <= b]
            if len(parts) > 1:
                empty = [_band_label(lo_a[i], hi_a[i]) for i in parts
                         if events[i] <= 0 or exposure[i] <= 0]
                merged.append(f"{' + '.join(_band_label(lo_a[i], hi_a[i]) for i in parts)} "
                              f"-> {_band_label(a, b)} (no churns or no time at risk in "
                              f"{', '.join(empty)})")
        rows = K.PiecewiseRows.build(prep.Xc, table.start / s, table.stop / s, table.churned,
                                     table.weight, used / s)
        events, exposure = K.piecewise_closed_form(rows)
    if np.any(events <= 0) or np.any(exposure <= 0):
        raise ModelError(where, "the table has no churns", "a hazard model needs churn events")
    a0 = np.log(events / exposure)
    if prep.Xc.shape[1] == 0:
        # closed form: the information is diag(events)
        theta_i = a0
        ll_i, _, hess_i = K.piecewise_loglik(theta_i, rows)
        history = [{"iteration": 0, "loglik": ll_i, "note": "closed form"}]
    else:
        theta0 = np.concatenate((a0, np.zeros(prep.Xc.shape[1])))

        def fun(th: np.ndarray, derivatives: bool = True) -> tuple:
            return K.piecewise_loglik(th, rows, derivatives=derivatives)

        theta_i, ll_i, hess_i, history = _newton(fun, theta0, where, max_iter)
    fit = _finish("piecewise", table, prep, theta_i, ll_i, hess_i, history, level,
                  fixed_shape=None, exp_ll=None, cuts=used)
    note = (("bands merged for lack of churns or time at risk: " + "; ".join(merged),)
            if merged else ())
    return dataclasses.replace(fit, requested_cuts=tuple(float(c) for c in asked),
                               merged_bands=tuple(merged), warnings=fit.warnings + note)


# --------------------------------------------------------------------------- comparison
@dataclass(frozen=True, eq=False)
class ModelComparison(Result):
    """Log-likelihood, AIC and BIC of the exponential, Weibull and piecewise fits."""

    fits: dict[str, ParametricFit]
    covariates: tuple[str, ...]
    n_events: float
    shape_test: ShapeTest
    warnings: tuple[str, ...] = ()
    missing: MissingCovariates | None = None  # rows left out (or recoded) for missing values

    def to_frame(self) -> pd.DataFrame:
        rows = []
        for name, fit in self.fits.items():
            rows.append({"model": name, "parameters": fit.n_params, "loglik": fit.loglik,
                         "aic": fit.aic, "bic": fit.bic})
        out = pd.DataFrame(rows)
        out["delta_aic"] = out["aic"] - out["aic"].min()
        out["delta_bic"] = out["bic"] - out["bic"].min()
        return out

    @property
    def best_by_aic(self) -> str:
        f = self.to_frame()
        return str(f.loc[f["aic"].idxmin(), "model"])

    def summary(self) -> str:
        f = self.to_frame()
        lines = [f"{r.model}: log-likelihood {r.loglik:.2f}, AIC {r.aic:.1f}, BIC {r.bic:.1f}"
                 for r in f.itertuples()]
        lines.append(f"lowest AIC: {self.best_by_aic}")
        lines.append(self.shape_test.reading)
        return "\n".join(lines)


def compare_models(table: StartStop, covariates: Sequence[str] = (),
                   cuts: Sequence[float] | None = None, *,
                   reference: Mapping[str, str] | None = None,
                   level: float | None = None, missing: str = "stop",
                   conf: float | None = None) -> ModelComparison:
    """Fit exponential, Weibull and piecewise-constant models with the same covariates.

    The piecewise model nests the exponential (equal band hazards); the
    Weibull nests it too (shape 1). BIC uses the number of churns as n
    (Volinsky & Raftery 2000). ``cuts`` are the piecewise model's cut points in
    days (see :func:`fit_piecewise`; empty bands merge by themselves).
    ``missing`` applies one missing-value rule (:mod:`retain.models.missing`)
    before all three fits, so they share their rows.
    """
    level = resolve_level(level, conf, "model comparison")
    covs = [covariates] if isinstance(covariates, str) else list(covariates)
    table, dropped, _ = apply_missing_rule(_check_table(table, "model comparison"), covs,
                                           missing, "model comparison")
    fits = {
        "exponential": fit_exponential(table, covs, reference=reference, level=level),
        "weibull": fit_weibull(table, covs, reference=reference, level=level),
        "piecewise": fit_piecewise(table, cuts, covs, reference=reference, level=level),
    }
    warnings = [dropped.summary()] if dropped.any else []
    for name, fit in fits.items():
        warnings += [f"{name}: {w}" for w in fit.warnings]
    fits = {k: dataclasses.replace(f, missing=dropped,
                                   warnings=((dropped.summary(),) if dropped.any else ())
                                   + f.warnings) for k, f in fits.items()}
    return ModelComparison(fits=fits, covariates=tuple(covs), n_events=table.n_events,
                           shape_test=fits["weibull"].shape_test, warnings=tuple(warnings),
                           missing=dropped)


# --------------------------------------------------------------------------- diagnostic
@dataclass(frozen=True, eq=False)
class LogLogDiagnostic(Result):
    """log(-log S_KM(t)) against log t by segment, with the fitted Weibull lines.

    Under a Weibull PH model with the segment as covariate each segment's
    points lie on a straight line of slope alpha, and the lines are parallel
    (Collett 2015, sec. 4.4.1). ``points`` holds the Kaplan–Meier values,
    ``lines`` the fitted log H(t) = eta_segment + alpha log t over each
    segment's observed range.
    """

    by: str | None
    points: pd.DataFrame
    lines: pd.DataFrame
    shape: float
    fit: ParametricFit
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        return self.points

    def summary(self) -> str:
        what = f"by {self.by}" if self.by else "all customers"
        return (f"log(-log retention) against log tenure ({what}): straight parallel lines "
                f"support a Weibull PH model; the fitted common slope (shape) is {self.shape:.3f}")


def loglog_diagnostic(table: StartStop, by: str | None = None) -> LogLogDiagnostic:
    """The Weibull diagnostic chart data: log(-log S_KM) vs log t, by segment.

    Each spell belongs to the segment of its first row (as in
    :func:`retain.models.curves.curves_by`); the fitted lines come from one
    Weibull PH fit with that segment as the only covariate, so they share a
    slope (the shape) and differ in intercept.
    """
    from retain.models.curves import curves_by, kaplan_meier, spell_start_codes

    where = "log-log diagnostic"
    table = _check_table(table, where)
    if by is None:
        curves = {"all customers": kaplan_meier(table)}
        fit = fit_weibull(table)
        profiles: dict[str, dict] = {"all customers": {}}
    else:
        codes, levels, _ = spell_start_codes(table, by)
        seg = np.array(list(levels) + [None], dtype=object)[codes]
        ok = codes >= 0
        sub = table.take(ok)
        seg_name = f"{by} at spell start"
        sub = sub.with_columns(**{seg_name: seg[ok].astype(str)})
        curves = dict(curves_by(sub, by).items())
        if len(set(seg[ok])) > 1:
            fit = fit_weibull(sub, [seg_name])
            profiles = {lv: {seg_name: lv} for lv in curves}
        else:
            fit = fit_weibull(sub)
            profiles = {lv: {} for lv in curves}
    pts = []
    lines = []
    for level, curve in curves.items():
        s = np.asarray(curve.survival)
        t = np.asarray(curve.times)
        keep = (s > 0) & (s < 1) & (t > 0) & (np.asarray(curve.events) > 0)
        for ti, si in zip(t[keep], s[keep], strict=True):
            pts.append({"segment": level, "days": ti, "log_days": math.log(ti),
                        "retention": si, "log_minus_log_retention": math.log(-math.log(si))})
        if keep.any():
            grid = np.exp(np.linspace(math.log(t[keep].min()), math.log(t[keep].max()), 50))
            x, _, _ = fit._profile_row(profiles[level])
            lh, _ = K.log_cumulative_hazard("weibull", fit.params, x, grid)
            for ti, li in zip(grid, lh, strict=True):
                lines.append({"segment": level, "days": ti, "log_days": math.log(ti),
                              "fitted_log_cumulative_hazard": li})
    return LogLogDiagnostic(by=by, points=pd.DataFrame(pts), lines=pd.DataFrame(lines),
                            shape=fit.shape_value, fit=fit)
