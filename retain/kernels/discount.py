"""Discounting, value sums and revenue to a horizon.

Sample sizes, power and balance between arms live in :mod:`retain.kernels.power`.

Pure numpy functions: no pandas, no I/O, no validation. Entry points in
:mod:`retain.decisions` validate their inputs and build results.

Timing convention (used everywhere in retain's value figures)
-------------------------------------------------------------
Month ``k = 1, 2, ..., H`` after the valuation point contributes its margin
``m`` **at its end**, and only if the customer is still active then:

    V = sum_{k=1}^{H} m * S(k) * v^k,     v = 1 / (1 + d),

with ``S(k)`` the probability of being active ``k`` months after the
valuation point and ``d`` the effective monthly discount rate
``(1 + annual)^(1/12) - 1``. For a constant retention ``r`` per month and
``H = inf`` this is the geometric closed form ``m r / (1 + d - r)``
(common practice); at ``d = 0`` and ``H = inf`` it is ``m`` times the
expected number of whole months survived.
"""

from __future__ import annotations

import numpy as np

# ---------------------------------------------------------------- discounting


def monthly_rate(annual_rate: float) -> float:
    """Effective monthly rate ``d`` with ``(1 + d)^12 = 1 + annual_rate``."""
    return float((1.0 + annual_rate) ** (1.0 / 12.0) - 1.0)


def discount_factors(rate_per_period: float, n_periods: int) -> np.ndarray:
    """``v^k`` for ``k = 1..n_periods`` with ``v = 1 / (1 + rate_per_period)``."""
    k = np.arange(1, n_periods + 1, dtype=np.float64)
    return (1.0 + rate_per_period) ** (-k)


def discounted_value(survival: np.ndarray, margin: np.ndarray | float,
                     factors: np.ndarray) -> np.ndarray:
    """``sum_k margin_k * S_k * v^k`` over the last axis.

    ``survival`` has shape ``(..., K)`` (S at the end of months 1..K);
    ``margin`` is a scalar, shape ``(K,)`` or broadcastable to ``survival``;
    ``factors`` has shape ``(K,)``.
    """
    return np.sum(np.asarray(survival) * margin * factors, axis=-1)


def cumulative_value(survival: np.ndarray, margin: np.ndarray | float,
                     factors: np.ndarray) -> np.ndarray:
    """Running sums of :func:`discounted_value`: entry ``h - 1`` is the value to horizon ``h``."""
    return np.cumsum(np.asarray(survival) * margin * factors, axis=-1)


def conditional_survival(s_now: np.ndarray, s_later: np.ndarray) -> np.ndarray:
    """``S(t + u) / S(t)``: probability of lasting ``u`` more given ``t`` survived.

    ``s_now`` broadcasts against ``s_later`` (e.g. shape ``(n, 1)`` against
    ``(n, K)``). Where ``S(t) = 0`` the result is 0 (nobody is left to keep).
    """
    s_now = np.asarray(s_now, dtype=np.float64)
    s_later = np.asarray(s_later, dtype=np.float64)
    with np.errstate(divide="ignore", invalid="ignore"):
        out = np.where(s_now > 0, s_later / np.where(s_now > 0, s_now, 1.0),
                       np.where(s_now == 0, 0.0, np.nan))
    return np.clip(out, 0.0, 1.0)


# ---------------------------------------------------------------- revenue to a horizon


def revenue_to_horizon(start: np.ndarray, stop: np.ndarray, churned: np.ndarray,
                       price: np.ndarray, weight: np.ndarray, horizon: float,
                       replicate_weights: np.ndarray | None = None) -> np.ndarray:
    """Expected revenue per customer from tenure 0 to ``horizon``, under censoring.

    ``R(h) = integral_0^h S(t-) * rbar(t) dt``, with ``S`` the Kaplan-Meier
    curve and ``rbar(t)`` the weighted mean price (per day) of the rows at
    risk at ``t``: the partitioned mean-cost estimator of Lin, Feuer, Etzioni
    & Wax (1997, "Estimating medical costs from incomplete follow-up data",
    Biometrics 53(2) 419-434), taken to the limit of elementary intervals.
    With no censoring before ``h`` it equals the plain mean over customers of
    ``sum over rows of price * (time at risk within [0, h])``.

    Rows are (start, stop] in the time unit of ``horizon``; ``price`` is per
    unit of time on that row. ``replicate_weights`` (shape ``(B, n)``)
    evaluates the estimator under ``B`` alternative weightings of the rows
    (bootstrap); the result then has shape ``(B,)``, else it is a scalar array.
    """
    start = np.asarray(start, dtype=np.float64)
    stop = np.asarray(stop, dtype=np.float64)
    keep = start < horizon
    died = (np.asarray(churned)[keep] == 1) & (stop[keep] <= horizon)
    start, stop = start[keep], np.minimum(stop[keep], horizon)
    price = np.asarray(price, dtype=np.float64)[keep]
    w = np.atleast_2d(weight if replicate_weights is None else replicate_weights)[:, keep]
    grid = np.unique(np.concatenate(([0.0, horizon], start, stop)))
    nb = grid.shape[0]
    i0 = np.searchsorted(grid, start)
    i1 = np.searchsorted(grid, stop)
    width = np.diff(grid)
    out = np.empty(w.shape[0])
    for b in range(w.shape[0]):
        wb = w[b]
        # rows at risk on segment j = (grid[j], grid[j+1]] are those with i0 <= j < i1
        n_seg = np.cumsum(np.bincount(i0, wb, nb) - np.bincount(i1, wb, nb))[:-1]
        p_seg = np.cumsum(np.bincount(i0, wb * price, nb) - np.bincount(i1, wb * price, nb))[:-1]
        # churns at grid[j] (j >= 1) face the risk set of segment j - 1
        d = np.bincount(i1[died], wb[died], nb)[1:]
        with np.errstate(divide="ignore", invalid="ignore"):
            q = np.where(n_seg > 0, 1.0 - d / np.where(n_seg > 0, n_seg, 1.0), 1.0)
            rate = np.where(n_seg > 0, p_seg / np.where(n_seg > 0, n_seg, 1.0), 0.0)
        # S(t-) on segment j is S(grid[j]): the product over churn times <= grid[j]
        surv = np.concatenate(([1.0], np.cumprod(q)[:-1]))
        out[b] = np.sum(surv * rate * width)
    return out if replicate_weights is not None else out[:1].reshape(())
