"""Retention curves for value and planning, and one adapter per fitted model family.

A value or planning figure needs S(t) at tenures in days and, for its
interval, draws of that curve: anything that meets :class:`SurvivalCurve`.
Plain curves (:class:`ConstantRetention`, :class:`FunctionCurve`) and one
adapter per model family live here:

* :func:`curve_from_parametric`: a Weibull, exponential or piecewise fit
  (:class:`~retain.models.parametric.ParametricFit`);
* :func:`curve_from_cox`: a Cox fit's Breslow curve for one profile, with an
  optional parametric tail past the last churn;
* :func:`curve_from_kaplan_meier`: a Kaplan-Meier curve, with an optional tail;
* :func:`curve_from_renewal`: a shifted-beta-geometric renewal fit.

:func:`curve_from_model` takes a Cox or parametric fit and calls its adapter.
Each adapter reads exactly the attributes its result has.

Draws (for intervals) take the model's parameters from the normal
approximation to their sampling distribution (mean = estimate, covariance =
inverse information; Krinsky & Robb 1986, Review of Economics and Statistics
68(4)); for Kaplan-Meier the draws of log S follow a Gaussian random walk
whose variance at ``t`` is Greenwood's sum, the delta-method law of log S
(Greenwood 1926).
"""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any, Protocol, runtime_checkable

import numpy as np

from retain.errors import ModelError
from retain.kernels import discount as kd
from retain.models.cox import CoxFit
from retain.models.curves import RetentionCurve
from retain.models.parametric import ParametricFit
from retain.models.renewal import RenewalFit
from retain.units import DAYS_PER_MONTH

DrawFn = Callable[[np.ndarray], np.ndarray]


@runtime_checkable
class SurvivalCurve(Protocol):
    """What value and planning need from a retention curve.

    ``survival(days)`` gives S at tenure ``days`` (array in, array out).
    ``draws(n, seed)`` gives ``n`` functions of the same kind, each a curve
    with its parameters drawn from their sampling distribution, or ``None``
    when the source has no uncertainty to offer. ``data_horizon_days`` is how
    far the data behind the curve reach (``inf`` when unknown or not
    applicable); value beyond it is an extrapolation and is flagged.
    """

    label: str
    data_horizon_days: float

    def survival(self, days: np.ndarray) -> np.ndarray: ...

    def draws(self, n: int, seed: int) -> Sequence[DrawFn] | None: ...


# ---------------------------------------------------------------- plain curves


@dataclass(frozen=True)
class FunctionCurve:
    """A curve from a function of tenure days, with optional draws."""

    label: str
    function: DrawFn
    draw_function: Callable[[int, int], Sequence[DrawFn]] | None = None
    data_horizon_days: float = math.inf

    def survival(self, days: np.ndarray) -> np.ndarray:
        return np.asarray(self.function(np.asarray(days, dtype=np.float64)), dtype=np.float64)

    def draws(self, n: int, seed: int) -> Sequence[DrawFn] | None:
        return None if self.draw_function is None else self.draw_function(n, seed)


@dataclass(frozen=True)
class ConstantRetention:
    """Geometric retention: a share ``retention_per_month`` stays each month.

    ``S(t) = r ** (t / 30.4375)``. With ``se`` (standard error of ``r``) the
    draws take ``logit r`` normal by the delta method; without, no interval.
    """

    retention_per_month: float
    se: float | None = None
    label: str = "constant monthly retention"
    data_horizon_days: float = math.inf

    def survival(self, days: np.ndarray) -> np.ndarray:
        return self.retention_per_month ** (np.asarray(days, dtype=np.float64) / DAYS_PER_MONTH)

    def draws(self, n: int, seed: int) -> Sequence[DrawFn] | None:
        if self.se is None:
            return None
        r = self.retention_per_month
        rng = np.random.default_rng(seed)
        logit = np.log(r / (1 - r)) + rng.standard_normal(n) * self.se / (r * (1 - r))
        rs = 1.0 / (1.0 + np.exp(-logit))
        return [(lambda d, q=q: q ** (np.asarray(d, dtype=np.float64) / DAYS_PER_MONTH))
                for q in rs]


@dataclass(frozen=True)
class StepCurve:
    """A Kaplan-Meier step curve, optionally joined to a parametric tail.

    ``times`` are the event times (days), ``survival`` S just after each,
    ``greenwood`` the Greenwood sum ``sum d / (n (n - d))`` at each (the
    delta-method variance of log S). Up to ``join_days`` the curve is the
    step function; past it ``S(t) = S_km(join) * T(t) / T(join)`` with ``T``
    the tail curve (conditional survival of the tail model). Without a tail
    the curve is not defined (NaN) past ``join_days``.
    """

    times: np.ndarray
    survival_steps: np.ndarray
    greenwood: np.ndarray
    join_days: float
    tail: SurvivalCurve | None = None
    label: str = "Kaplan-Meier"
    data_horizon_days: float = math.inf

    def _step(self, steps: np.ndarray, days: np.ndarray) -> np.ndarray:
        idx = np.searchsorted(self.times, days, side="right") - 1
        vals = np.where(idx >= 0, steps[np.clip(idx, 0, None)], 1.0)
        return vals

    def _join(self, steps: np.ndarray, tail: DrawFn | None, days: np.ndarray) -> np.ndarray:
        days = np.asarray(days, dtype=np.float64)
        inside = np.minimum(days, self.join_days)
        s = self._step(steps, inside)
        if tail is None and self.tail is None:
            s = np.where(days > self.join_days, np.nan, s)
        if tail is not None:
            past = days > self.join_days
            if past.any():
                t_join = float(np.asarray(tail(np.array([self.join_days])))[0])
                ratio = kd.conditional_survival(np.array([t_join]), np.asarray(tail(days[past])))
                s = s.copy()
                s[past] = s[past] * ratio
        return s

    def survival(self, days: np.ndarray) -> np.ndarray:
        return self._join(self.survival_steps, None if self.tail is None else self.tail.survival,
                          days)

    def draws(self, n: int, seed: int) -> Sequence[DrawFn] | None:
        rng = np.random.default_rng(seed)
        inc = np.diff(np.concatenate(([0.0], self.greenwood)))
        inc = np.clip(np.nan_to_num(inc, nan=0.0, posinf=0.0), 0.0, None)
        walk = np.cumsum(rng.standard_normal((n, inc.shape[0])) * np.sqrt(inc), axis=1)
        with np.errstate(divide="ignore"):
            log_s = np.log(self.survival_steps)
        steps = np.exp(np.minimum(log_s + walk, 0.0))
        steps = np.minimum.accumulate(steps, axis=1)  # a survival curve never rises
        tails: Sequence[DrawFn | None]
        if self.tail is None:
            tails = [None] * n
        else:
            td = self.tail.draws(n, seed + 1)
            tails = list(td) if td is not None else [self.tail.survival] * n
        return [(lambda d, s=steps[i], t=tails[i]: self._join(s, t, d)) for i in range(n)]


# ---------------------------------------------------------------- adapters to fitted models


def _profile_label(profile: Mapping[str, Any] | None) -> str:
    if not profile:
        return ""
    return " (" + ", ".join(f"{k}={v}" for k, v in profile.items()) + ")"


#: above this many distinct tenures a model curve is read off a grid
EXACT_POINTS = 4096

#: S at sorted distinct tenures, from one fit and covariate profile
Predict = Callable[[Any, "Mapping[str, Any] | None", np.ndarray], np.ndarray]
#: ``n`` copies of a fit with parameters drawn (seeded), or None when it has no usable covariance
Redraw = Callable[[Any, int, int], "list[Any] | None"]


def _parametric_retention(fit: ParametricFit, profile: Mapping[str, Any] | None,
                          days: np.ndarray) -> np.ndarray:
    return np.asarray(fit.predict_retention(profile, days).retention, dtype=np.float64)


def _cox_retention(fit: CoxFit, profile: Mapping[str, Any] | None,
                   days: np.ndarray) -> np.ndarray:
    return fit.predict_retention(profile or {}, days)["retention"].to_numpy(dtype=np.float64)


def _normal_draws(estimate: np.ndarray, cov: np.ndarray, n: int, seed: int
                  ) -> np.ndarray | None:
    """``n`` draws from N(estimate, cov); None when the covariance is unusable."""
    params = np.asarray(estimate, dtype=np.float64)
    cov = np.asarray(cov, dtype=np.float64)
    if params.size == 0 or cov.shape != (params.size, params.size) or \
            not np.all(np.isfinite(cov)):
        return None
    rng = np.random.default_rng(seed)
    return rng.multivariate_normal(params, cov, size=n, method="eigh")


def _parametric_draws(fit: ParametricFit, n: int, seed: int) -> list[ParametricFit] | None:
    thetas = _normal_draws(fit.params, fit.cov, n, seed)
    return None if thetas is None else [dataclasses.replace(fit, params=th) for th in thetas]


def _cox_draws(fit: CoxFit, n: int, seed: int) -> list[CoxFit] | None:
    """Coefficients drawn from the covariance the fit reports (robust or model-based); the
    Breslow baseline is held at its estimate."""
    thetas = _normal_draws(fit.coef, fit.cov_robust if fit.robust else fit.cov_model, n, seed)
    return None if thetas is None else [dataclasses.replace(fit, coef=th) for th in thetas]


def _evaluate(predict: Predict, fit: Any, profile: Mapping[str, Any] | None,
              days: np.ndarray, smooth: bool) -> np.ndarray:
    """S(days) from ``predict(fit, profile, times)``.

    Up to :data:`EXACT_POINTS` distinct tenures are predicted exactly; more
    are read off a grid: for a smooth parametric curve, log H linear in log t
    on a geometric grid (exact for Weibull and exponential); for a step
    curve such as Cox-Breslow, whose jumps fall on whole or half days, the
    step value on a half-day grid. This keeps the cost of value intervals
    independent of the size of the base.
    """
    days = np.asarray(days, dtype=np.float64)
    flat = days.ravel()
    if flat.shape[0] > 1 and np.all(flat[1:] > flat[:-1]):  # already sorted and distinct
        uniq, inv = flat, np.arange(flat.shape[0])
    else:
        uniq, inv = np.unique(flat, return_inverse=True)
    if uniq.shape[0] <= EXACT_POINTS:
        s = predict(fit, profile, uniq).ravel()
        return s[inv].reshape(days.shape)
    top = float(uniq[-1])
    if smooth:
        # log H is linear in log t for Weibull and exponential curves: interpolate there
        pos = uniq[uniq > 0]
        grid = np.geomspace(float(pos[0]), top, EXACT_POINTS)
        hg = -np.log(predict(fit, profile, grid).ravel())
        with np.errstate(divide="ignore"):
            lh = np.interp(np.log(np.maximum(flat, pos[0])), np.log(grid),
                           np.log(np.maximum(hg, 1e-300)))
        out = np.where(flat > 0, np.exp(-np.exp(lh)), 1.0)
    else:
        grid = np.arange(0.0, top + 1.0, 0.5)
        sg = predict(fit, profile, grid).ravel()
        out = sg[np.clip(np.searchsorted(grid, flat, side="right") - 1, 0, None)]
    return out.reshape(days.shape)


@dataclass(frozen=True)
class ModelCurve:
    """A fitted model's predicted retention for one covariate profile.

    ``predict`` and ``redraw`` are the model family's adapter functions. Draws
    redraw the model's parameters from N(estimate, covariance) and predict
    again (for Cox, the Breslow baseline is held at its estimate).
    """

    fit: Any
    profile: Mapping[str, Any] | None
    label: str
    predict: Predict
    redraw: Redraw
    data_horizon_days: float = math.inf
    smooth: bool = True
    limit_days: float = math.inf

    def _at(self, fit: Any, days: np.ndarray) -> np.ndarray:
        days = np.asarray(days, dtype=np.float64)
        s = _evaluate(self.predict, fit, self.profile, np.minimum(days, self.limit_days),
                      self.smooth)
        return np.where(days > self.limit_days, np.nan, s)

    def survival(self, days: np.ndarray) -> np.ndarray:
        return self._at(self.fit, days)

    def draws(self, n: int, seed: int) -> Sequence[DrawFn] | None:
        fits = self.redraw(self.fit, n, seed)
        if fits is None:
            return None
        return [(lambda d, f=f: self._at(f, d)) for f in fits]


_PARAMETRIC_NAMES = {"weibull": "Weibull", "exponential": "exponential",
                     "piecewise": "piecewise-constant hazard"}


def curve_from_parametric(fit: ParametricFit, profile: Mapping[str, Any] | None = None, *,
                          label: str | None = None, smooth: bool | None = None) -> ModelCurve:
    """A Weibull, exponential or piecewise fit's retention for ``profile`` as a curve.

    Its data reach to the fit's ``follow_up``; past it the curve is the model's
    extrapolation. ``smooth`` (default: Weibull and exponential) lets many
    tenures be read off a geometric grid of log H.
    """
    if smooth is None:
        smooth = fit.model in ("weibull", "exponential")
    name = label or _PARAMETRIC_NAMES.get(fit.model, fit.model)
    return ModelCurve(fit, dict(profile) if profile else None,
                      f"{name}{_profile_label(profile)}", _parametric_retention,
                      _parametric_draws, float(fit.follow_up), smooth)


def _cox_head(fit: CoxFit, profile: Mapping[str, Any] | None, label: str = "Cox",
              smooth: bool = False) -> ModelCurve:
    """The Breslow curve for ``profile``, refused (NaN) past the last churn, where it is flat
    and not an estimate."""
    times = np.asarray(fit.baseline()["time"], dtype=np.float64)
    last = float(times.max()) if times.size else 0.0
    return ModelCurve(fit, dict(profile) if profile else None,
                      f"{label}{_profile_label(profile)}", _cox_retention, _cox_draws, last,
                      smooth, last)


def curve_from_model(fit: ParametricFit | CoxFit, profile: Mapping[str, Any] | None = None,
                     *, label: str | None = None, smooth: bool | None = None) -> ModelCurve:
    """A parametric fit (:func:`curve_from_parametric`) or a Cox fit (its Breslow step
    curve, to the last churn) as a curve for ``profile``."""
    if isinstance(fit, CoxFit):
        return _cox_head(fit, profile, label or "Cox", bool(smooth))
    if isinstance(fit, ParametricFit):
        return curve_from_parametric(fit, profile, label=label, smooth=smooth)
    raise ModelError(type(fit).__name__, "the fit cannot predict retention",
                     "pass a fitted Weibull, exponential or Cox model")


@dataclass(frozen=True)
class JoinedCurve:
    """``head`` up to ``join_days``, then ``tail``'s conditional survival.

    ``S(t) = S_head(t)`` for ``t <= join``, ``S_head(join) * S_tail(t) / S_tail(join)``
    beyond. Draws pair the two curves' draws.
    """

    head: SurvivalCurve
    tail: SurvivalCurve
    join_days: float
    label: str
    data_horizon_days: float

    def _join(self, h: DrawFn, t: DrawFn, days: np.ndarray) -> np.ndarray:
        days = np.asarray(days, dtype=np.float64)
        s = np.asarray(h(np.minimum(days, self.join_days)), dtype=np.float64)
        past = days > self.join_days
        if past.any():
            t_join = np.asarray(t(np.array([self.join_days])), dtype=np.float64)
            s = s.copy()
            s[past] = s[past] * kd.conditional_survival(t_join, np.asarray(t(days[past])))
        return s

    def survival(self, days: np.ndarray) -> np.ndarray:
        return self._join(self.head.survival, self.tail.survival, days)

    def draws(self, n: int, seed: int) -> Sequence[DrawFn] | None:
        hd = self.head.draws(n, seed)
        td = self.tail.draws(n, seed + 1)
        if hd is None and td is None:
            return None
        hs = list(hd) if hd is not None else [self.head.survival] * n
        ts = list(td) if td is not None else [self.tail.survival] * n
        return [(lambda d, h=h, t=t: self._join(h, t, d)) for h, t in zip(hs, ts, strict=True)]


def curve_from_cox(fit: CoxFit, profile: Mapping[str, Any],
                   tail: SurvivalCurve | None = None) -> SurvivalCurve:
    """A Cox-predicted curve for ``profile``; past the last churn, ``tail`` (if given).

    The Breslow curve is flat after the last churn time, so without a tail
    the curve is refused there (NaN); with a tail (e.g. a Weibull fit with
    the same covariates and profile) it continues by the tail's conditional
    survival.
    """
    head = _cox_head(fit, profile)
    if tail is None:
        return head
    join = head.data_horizon_days
    return JoinedCurve(head, tail, join, f"{head.label} to {join / DAYS_PER_MONTH:.0f} "
                       f"months, then {tail.label}", join)


def curve_from_kaplan_meier(km: RetentionCurve, tail: SurvivalCurve | None = None, *,
                            min_at_risk: float = 30.0, label: str | None = None) -> StepCurve:
    """A Kaplan-Meier curve (``retain.models.curves.RetentionCurve``) as a value curve.

    Without ``tail`` the curve is defined up to the last observed tenure
    (value past it is refused). With ``tail`` (e.g. a Weibull curve) the KM
    curve is used up to the last tenure with at least ``min_at_risk``
    customers at risk and the tail's conditional survival beyond it.
    """
    times = np.asarray(km.times, dtype=np.float64)
    at_risk = np.asarray(km.at_risk, dtype=np.float64)
    follow = float(km.follow_up)
    if tail is None:
        join = follow
    else:
        ok = np.flatnonzero(at_risk >= min_at_risk)
        join = float(times[ok[-1]]) if ok.size else 0.0
    base = label or f"Kaplan-Meier {km.label}"
    name = base if tail is None else f"{base} to {join / DAYS_PER_MONTH:.0f} months, " \
        f"then {tail.label}"
    return StepCurve(times=times, survival_steps=np.asarray(km.survival, dtype=np.float64),
                     greenwood=np.asarray(km.greenwood, dtype=np.float64), join_days=join,
                     tail=tail, label=name, data_horizon_days=follow)


@dataclass(frozen=True)
class RenewalCurve:
    """A shifted-beta-geometric fit (``retain.models.renewal.RenewalFit``) as a value curve.

    ``S(t days) = S_sBG(floor(t / period_days))``: renewals survived by
    tenure ``t``. Draws take (log alpha, log beta) from N(estimate, cov).
    With monthly periods and no horizon cap, the residual value has the
    closed form ``DERL(d, n) / (1 + d)`` per unit margin (Fader & Hardie
    2010, Marketing Science 29(1), eq. 6), with ``n`` the renewals made.
    """

    fit: RenewalFit
    label: str
    data_horizon_days: float

    @property
    def period_days(self) -> float:
        return float(self.fit.period_days or DAYS_PER_MONTH)

    def _periods(self, days: np.ndarray) -> np.ndarray:
        return np.floor(np.asarray(days, dtype=np.float64) / self.period_days + 1e-9)

    def survival(self, days: np.ndarray) -> np.ndarray:
        d = np.asarray(days, dtype=np.float64)
        return np.asarray(self.fit.survival(self._periods(d).ravel()),
                          dtype=np.float64).reshape(d.shape)

    def draws(self, n: int, seed: int) -> Sequence[DrawFn] | None:
        cov = np.asarray(self.fit.cov, dtype=np.float64)
        if cov.shape != (2, 2) or not np.all(np.isfinite(cov)):
            return None
        rng = np.random.default_rng(seed)
        mean = np.log([self.fit.alpha, self.fit.beta])
        with np.errstate(over="ignore"):
            th = np.exp(rng.multivariate_normal(mean, cov, size=n, method="eigh"))
        # a nearly homogeneous base has huge alpha, beta and a flat likelihood: keep usable draws
        th = th[np.all(np.isfinite(th) & (th > 0) & (th < 1e12), axis=1)]
        if th.shape[0] < max(2, n // 2):
            return None
        out = []
        for a, b in th:
            f = dataclasses.replace(self.fit, alpha=float(a), beta=float(b))
            out.append(lambda d, f=f: np.asarray(
                f.survival(self._periods(d).ravel()), dtype=np.float64).reshape(np.shape(d)))
        return out

    def residual_months(self, tenure_days: np.ndarray, monthly_rate: float) -> np.ndarray | None:
        """Closed-form ``sum_{k>=1} S(n + k) / S(n) v^k = DERL(d, n) / (1 + d)``; None if n/a."""
        if abs(self.period_days - DAYS_PER_MONTH) > 1e-9 or monthly_rate <= 0:
            return None
        n = self._periods(tenure_days)
        return np.asarray(self.fit.derl(monthly_rate, n), dtype=np.float64) / (1.0 + monthly_rate)


def curve_from_renewal(fit: RenewalFit, *, label: str | None = None) -> RenewalCurve:
    """Wrap a fitted renewal (sBG) model as a value curve."""
    if not isinstance(fit, RenewalFit):
        raise ModelError(type(fit).__name__, "not a fitted renewal model",
                         "pass the result of fit_renewal")
    period = float(fit.period_days or DAYS_PER_MONTH)
    return RenewalCurve(fit, label or f"shifted-beta-geometric {fit.label}",
                        float(fit.n_periods) * period)
