"""Product-limit, cumulative-hazard, restricted-mean and log-rank kernels.

Every function takes the per-time counts of :func:`retain.kernels.risksets.risk_table`
(weighted numbers at risk ``n_j`` and events ``d_j`` at sorted times ``t_j``)
and returns plain arrays. Pure numpy; no validation.
"""

from __future__ import annotations

import numpy as np


def product_limit(at_risk: np.ndarray, events: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Kaplan–Meier survival and the Greenwood sum at each time.

    .. math::

        \\hat S(t_j) = \\prod_{i \\le j} (1 - d_i / n_i), \\qquad
        G(t_j) = \\sum_{i \\le j} \\frac{d_i}{n_i (n_i - d_i)}

    (Kaplan & Meier 1958; Greenwood 1926). ``Var S = S^2 G``. Terms with
    ``d_i = 0`` contribute nothing; a term with ``d_i = n_i`` drives ``S`` to 0
    and is left out of ``G`` (the variance of an estimate of 0 is taken as 0,
    as in scikit-survival).

    Returns
    -------
    survival, greenwood : (m,) float
    """
    n = at_risk
    d = events
    frac = np.divide(d, n, out=np.zeros_like(d, dtype=np.float64), where=d > 0)
    survival = np.cumprod(1.0 - frac)
    denom = n * (n - d)
    term = np.divide(d, denom, out=np.zeros_like(d, dtype=np.float64),
                     where=(d > 0) & (denom > 0))
    return survival, np.cumsum(term)


def survival_interval(survival: np.ndarray, greenwood: np.ndarray, z: float,
                      kind: str) -> tuple[np.ndarray, np.ndarray]:
    """Pointwise confidence limits for a Kaplan–Meier curve.

    ``kind``:

    - ``"log-log"`` (Kalbfleisch & Prentice 1980; Borgan & Liestøl 1990):
      :math:`S^{\\exp(\\pm z \\sqrt{G} / \\log S)}`; stays inside (0, 1).
    - ``"log"``: :math:`S \\exp(\\pm z \\sqrt{G})`, upper limit clipped at 1.
    - ``"linear"``: :math:`S \\pm z S \\sqrt{G}`, clipped to [0, 1].

    Where ``S = 1`` (before the first event) the limits are (1, 1); where
    ``S = 0`` they are (0, 0).
    """
    s = survival
    sig = np.sqrt(greenwood)
    if kind == "log-log":
        logs = np.log(np.where(s > 0, s, 1.0))
        theta = np.divide(z * sig, logs, out=np.zeros_like(s), where=logs < 0)
        a = np.exp(logs * np.exp(theta))
        b = np.exp(logs * np.exp(-theta))
        lower, upper = np.minimum(a, b), np.maximum(a, b)
    elif kind == "log":
        lower = s * np.exp(-z * sig)
        upper = np.minimum(s * np.exp(z * sig), 1.0)
    elif kind == "linear":
        lower = np.clip(s - z * s * sig, 0.0, 1.0)
        upper = np.clip(s + z * s * sig, 0.0, 1.0)
    else:  # pragma: no cover - checked by the entry point
        raise ValueError(kind)
    zero = s <= 0
    lower = np.where(zero, 0.0, lower)
    upper = np.where(zero, 0.0, upper)
    return lower, upper


def cumulative_hazard(at_risk: np.ndarray, events: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Nelson–Aalen cumulative hazard and its variance.

    .. math::

        \\hat H(t_j) = \\sum_{i \\le j} d_i / n_i, \\qquad
        \\widehat{\\mathrm{Var}}\\, \\hat H(t_j) = \\sum_{i \\le j} d_i / n_i^2

    (Nelson 1972; Aalen 1978; the variance is Aalen's estimator, Klein &
    Moeschberger 2003, eq. 4.2.4).
    """
    n = at_risk
    d = events
    inc = np.divide(d, n, out=np.zeros_like(d, dtype=np.float64), where=d > 0)
    var = np.divide(d, n * n, out=np.zeros_like(d, dtype=np.float64), where=d > 0)
    return np.cumsum(inc), np.cumsum(var)


def restricted_mean(times: np.ndarray, survival: np.ndarray, at_risk: np.ndarray,
                    events: np.ndarray, horizon: float) -> tuple[float, float]:
    """Area under the Kaplan–Meier curve from 0 to ``horizon`` and its standard error.

    .. math::

        \\hat\\mu(\\tau) = \\int_0^\\tau \\hat S(u)\\,du, \\qquad
        \\widehat{\\mathrm{Var}} = \\sum_{t_j \\le \\tau} A_j^2 \\frac{d_j}{n_j(n_j-d_j)},
        \\quad A_j = \\int_{t_j}^{\\tau} \\hat S(u)\\,du

    (Irwin 1949; Klein & Moeschberger 2003, eq. 4.5.1-4.5.2). ``S`` is a
    right-continuous step function equal to 1 before the first time.
    """
    keep = times <= horizon
    t = times[keep]
    s = survival[keep]
    # step edges 0, t_1, ..., t_r, tau with levels 1, S_1, ..., S_r
    edges = np.concatenate(([0.0], t, [horizon]))
    levels = np.concatenate(([1.0], s))
    pieces = levels * np.diff(edges)
    mean = float(pieces.sum())
    # A_j = area from t_j to tau = sum of pieces after the j-th edge
    tail = np.cumsum(pieces[::-1])[::-1]  # tail[i] = sum pieces[i:]
    a = tail[1:]
    n = at_risk[keep]
    d = events[keep]
    denom = n * (n - d)
    term = np.divide(d, denom, out=np.zeros_like(d, dtype=np.float64),
                     where=(d > 0) & (denom > 0))
    return mean, float(np.sqrt(np.sum(a * a * term)))


def rank_scores(at_risk: np.ndarray, events: np.ndarray,
                weights: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Weighted log-rank score vector and its covariance for k groups.

    With ``n_{jg}``, ``d_{jg}`` the counts of group g at event time j,
    ``n_j``, ``d_j`` the pooled counts and ``w_j`` the time weights:

    .. math::

        U_g = \\sum_j w_j \\left(d_{jg} - n_{jg} \\frac{d_j}{n_j}\\right), \\quad
        V_{gh} = \\sum_j w_j^2 \\frac{d_j (n_j - d_j)}{n_j - 1}
                 \\frac{n_{jg}}{n_j}\\left(\\delta_{gh} - \\frac{n_{jh}}{n_j}\\right)

    (Mantel 1966; Peto & Peto 1972; Fleming & Harrington 1991, ch. 7;
    hypergeometric variance with the tie correction). Times with ``n_j <= 1``
    carry no information and are skipped.

    Parameters
    ----------
    at_risk, events : (m, k)
    weights : (m,)

    Returns
    -------
    U : (k,), V : (k, k)
    """
    n = at_risk.sum(axis=1)
    d = events.sum(axis=1)
    use = (n > 1) & (d > 0)
    n, d, w = n[use], d[use], weights[use]
    ng, dg = at_risk[use], events[use]
    share = ng / n[:, None]
    u = (w[:, None] * (dg - share * d[:, None])).sum(axis=0)
    c = w * w * d * (n - d) / (n - 1.0)
    v = np.diag((c[:, None] * share).sum(axis=0)) - (share * c[:, None]).T @ share
    return u, v


def logrank_weights(at_risk: np.ndarray, events: np.ndarray, kind: str, p: float = 0.0,
                    q: float = 0.0) -> np.ndarray:
    """Time weights of a weighted log-rank test from the pooled counts at each churn time.

    ``at_risk`` (n_j) and ``events`` (d_j) are the pooled (weighted) counts at
    the ordered churn times of one stratum.

    * ``"logrank"``: w_j = 1 (Mantel 1966).
    * ``"gehan-breslow"``: w_j = n_j, the number at risk (Gehan 1965; Breslow
      1970: the generalised Wilcoxon test).
    * ``"tarone-ware"``: w_j = sqrt(n_j) (Tarone & Ware 1977).
    * ``"peto-peto"``: w_j = prod_{i <= j} (1 - d_i / (n_i + 1)) (Peto & Peto
      1972; Klein & Moeschberger 2003, sec. 7.3).
    * ``"fleming-harrington"``: w_j = S(t_j-)^p (1 - S(t_j-))^q with the pooled
      Kaplan–Meier left limit (Harrington & Fleming 1982).
    """
    n = np.asarray(at_risk, dtype=np.float64)
    d = np.asarray(events, dtype=np.float64)
    if kind == "logrank":
        return np.ones_like(n)
    if kind == "gehan-breslow":
        return n.copy()
    if kind == "tarone-ware":
        return np.sqrt(n)
    if kind == "peto-peto":
        return np.cumprod(1.0 - d / (n + 1.0))
    if kind == "fleming-harrington":
        if p == 0.0 and q == 0.0:
            return np.ones_like(n)
        s, _ = product_limit(n, d)
        left = np.concatenate(([1.0], s[:-1]))
        return left ** p * (1.0 - left) ** q
    raise ValueError(f"unknown weight kind {kind!r}")


def chi_square(u: np.ndarray, v: np.ndarray) -> tuple[float, int]:
    """Quadratic form ``U' V^- U`` over the first k-1 groups and its degrees of freedom.

    Groups with zero variance (e.g. empty at every event time) are dropped
    before inverting; the degrees of freedom are the rank used.
    """
    keep = np.flatnonzero(np.diag(v) > 1e-12 * max(1.0, float(np.abs(v).max())))
    if keep.shape[0] < 2:
        return 0.0, 0
    keep = keep[:-1]  # the scores sum to zero: drop one group
    uu = u[keep]
    vv = v[np.ix_(keep, keep)]
    stat = float(uu @ np.linalg.solve(vv, uu))
    return stat, int(keep.shape[0])
