"""Aalen–Johansen cumulative incidence for competing causes on start-stop rows.

Pure numpy: no validation, no pandas. A row is at risk on (start, stop]
(delayed entry: not at risk at or before its start); ``kind`` is 0 for a
censored row and c = 1 .. K for a churn of cause c at ``stop``. Weights are
frequency weights.

At each distinct churn time t_j with n_j at risk and d_jc churns of cause c
(d_j = Σ_c d_jc), the all-cause product-limit survival is
S(t_j) = Π_{i≤j} (1 − d_i / n_i) and the cumulative incidence of cause c is

    F_c(t) = Σ_{t_j ≤ t} S(t_{j−1}) d_jc / n_j            (Aalen and Johansen, 1978)

so that Σ_c F_c(t) = 1 − S(t). Its variance is the delta-method estimate of
Marubini and Valsecchi (1995, sec. 10.2; the formula of Stata's stcompet and
of statsmodels' CumIncidenceRight):

    V_c(t) = Σ_j (F_c(t) − F_c(t_j))² d_j / (n_j (n_j − d_j))
           + Σ_j S(t_{j−1})² d_jc (n_j − d_jc) / n_j³
           − 2 Σ_j (F_c(t) − F_c(t_j)) S(t_{j−1}) d_jc / n_j²,

with terms where n_j = d_j (everyone at risk churns) set to 0 in the first sum.

The "naive" estimate 1 − KM_c treats the other causes as censoring:
1 − Π_{i≤j} (1 − d_ic / n_i). It is never below F_c and overstates the
probability of churning from cause c when other causes compete.
"""

from __future__ import annotations

import numpy as np

from retain.kernels.timegrid import half_day_grid, half_days


def _weights_before(values: np.ndarray, weight: np.ndarray, times: np.ndarray) -> np.ndarray:
    """Σ weight over rows with value < t, for each t in ``times`` (sorted)."""
    scaled = half_days(values)
    if scaled is not None:
        # counting sort: whole or half days (the usual case)
        top = int(scaled.max()) if scaled.size else 0
        counts = np.bincount(scaled, weights=weight, minlength=top + 2)
        cum = np.concatenate([[0.0], np.cumsum(counts)])  # cum[i] = Σ w with scaled < i
        idx = np.ceil(times * 2.0).astype(np.int64)  # value < t  <=>  2 value < ceil(2 t)
        return cum[np.clip(idx, 0, cum.shape[0] - 1)]
    order = np.argsort(values, kind="stable")
    cum = np.concatenate([[0.0], np.cumsum(weight[order])])
    return cum[np.searchsorted(values[order], times, side="left")]


def _on_grid(start: np.ndarray, stop: np.ndarray
             ) -> tuple[np.ndarray, np.ndarray, int] | None:
    """Half-day cells of start and stop, and the cell count, if every time is a whole or
    half day (and the grid is small enough); else None."""
    if start.size == 0:
        return None
    grid = half_day_grid(start, stop)
    return None if grid is None else (grid[0], grid[1], grid[2] + 2)


def _grid_risk_and_events(a2: np.ndarray, s2: np.ndarray, kind: np.ndarray,
                          weight: np.ndarray, n_causes: int, cells: int
                          ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """risk_and_events by counting sort on the half-day grid: O(n + cells), no sort."""
    ev = np.flatnonzero(kind > 0)
    se = s2[ev]
    hits = np.bincount(se, minlength=cells)
    cell = np.flatnonzero(hits)
    events = np.bincount(se * n_causes + (kind[ev].astype(np.int64) - 1),
                         weights=weight[ev], minlength=cells * n_causes
                         ).reshape(cells, n_causes)[cell]
    # at risk at cell c: start < c and stop >= c
    cum_start = np.cumsum(np.bincount(a2, weights=weight, minlength=cells))
    cum_stop = np.cumsum(np.bincount(s2, weights=weight, minlength=cells))
    before = np.maximum(cell - 1, 0)
    at_risk = np.where(cell > 0, cum_start[before] - cum_stop[before], 0.0)
    return cell / 2.0, at_risk, events


def risk_and_events(
    start: np.ndarray,
    stop: np.ndarray,
    kind: np.ndarray,
    weight: np.ndarray,
    n_causes: int,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Distinct churn times, weighted number at risk, and churns by cause.

    Returns ``times`` (J,), ``at_risk`` (J,) = Σ w over rows with start < t ≤ stop,
    and ``events`` (J, n_causes).
    """
    ev = kind > 0
    grid = _on_grid(start, stop)
    if grid is not None:
        return _grid_risk_and_events(*grid[:2], kind, weight, n_causes, grid[2])
    times, inv = np.unique(stop[ev], return_inverse=True)
    j = times.shape[0]
    events = np.bincount(inv * n_causes + (kind[ev].astype(np.int64) - 1), weights=weight[ev],
                         minlength=j * n_causes).reshape(j, n_causes)
    # at risk at t: start < t and stop >= t  =  W(start < t) - W(stop < t)
    at_risk = _weights_before(start, weight, times) - _weights_before(stop, weight, times)
    return times, at_risk, events


def aalen_johansen(
    at_risk: np.ndarray,
    events: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Cumulative incidence per cause from risk-set counts.

    Parameters
    ----------
    at_risk : (J,) float
        n_j at each distinct churn time.
    events : (J, K) float
        d_jc.

    Returns
    -------
    survival : (J,) all-cause product-limit S(t_j).
    cif : (J, K) F_c(t_j).
    variance : (J, K) V_c(t_j) (Marubini and Valsecchi, 1995).
    naive : (J, K) 1 − KM_c(t_j), other causes treated as censoring.
    """
    n = at_risk
    d = events.sum(axis=1)
    surv = np.cumprod(1.0 - d / n)
    before = np.concatenate([[1.0], surv[:-1]])  # S(t_{j-1})
    step = (before / n)[:, None] * events
    cif = np.cumsum(step, axis=0)
    left = n - d
    ra = np.zeros_like(n)
    np.divide(d, n * left, out=ra, where=left > 0)
    var = np.empty_like(cif)
    for c in range(events.shape[1]):
        f = cif[:, c]
        dc = events[:, c]
        v = f ** 2 * np.cumsum(ra) - 2 * f * np.cumsum(f * ra) + np.cumsum(f ** 2 * ra)
        v += np.cumsum(before ** 2 * dc * (n - dc) / n ** 3)
        r2 = before * dc / n ** 2
        v += -2 * f * np.cumsum(r2) + 2 * np.cumsum(f * r2)
        var[:, c] = np.maximum(v, 0.0)
    naive = 1.0 - np.cumprod(1.0 - events / n[:, None], axis=0)
    return surv, cif, var, naive
