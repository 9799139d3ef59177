"""Parametric proportional-hazards likelihoods on (start, stop] data.

Pure numpy: no pandas, no I/O, no validation. Entry points in
:mod:`retain.models.parametric` check the inputs, centre the covariates,
rescale time and turn the estimates into results.

Every likelihood is the left-truncated, right-censored log-likelihood of a
counting-process table (Andersen & Gill 1982; Klein & Moeschberger 2003,
sec. 3.4): row i is at risk on (t1_i, t2_i], carries weight w_i and event
indicator d_i, and contributes

    l_i = w_i * [ d_i * log h(t2_i | x_i) - (H(t2_i | x_i) - H(t1_i | x_i)) ].

Delayed entry and time-varying covariates need nothing else: a row that
enters late contributes only the cumulative hazard after its entry, and a
customer whose covariates change is several rows.

Models (eta = b0 + x'b is the log-linear predictor)

* exponential:  H(t|x) = exp(eta) * t
* Weibull (PH): H(t|x) = exp(eta) * t**alpha, alpha = exp(g) > 0
* piecewise-constant: h(t|x) = exp(a_k + x'b) for t in band k = (c_k, c_{k+1}]

Each kernel returns ``(loglik, gradient, hessian)`` in closed form so that
Newton's method with step halving (:func:`retain.kernels.newton.newton_maximize`)
converges in a handful of passes over the rows.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import special

from retain.kernels.exposure import exposure_by_row

__all__ = [
    "PiecewiseRows",
    "SurvivalRows",
    "band_edges",
    "exponential_loglik",
    "piecewise_closed_form",
    "piecewise_loglik",
    "weibull_loglik",
]


@dataclass(frozen=True)
class SurvivalRows:
    """Arrays the exponential and Weibull kernels read (built once per fit).

    Attributes
    ----------
    X : (n, p) float array
        Covariates (already centred by the caller); p may be 0.
    t1, t2 : (n,) float arrays
        Entry and exit times (already rescaled), 0 <= t1 < t2.
    d, w : (n,) float arrays
        Event indicator (0/1) and case weight.
    log_t1, log_t2 : (n,) float arrays
        log t1 (0 where t1 == 0) and log t2.
    entered : (n,) int array
        Indices of rows with t1 > 0 (delayed entry or a later row of a spell).
    wd : (n,) float array
        w * d.
    unit_weight : bool
        Every weight is 1 (the multiplications by w are skipped).
    sum_wd, wd_log_t2 : float
        sum(w d) and sum(w d log t2): constants of the likelihood.
    wd_X : (p,) float array
        X'(w d), the constant part of the covariate score.
    w_exposure : (n,) float array
        w (t2 - t1), the exponential model's exposure.
    """

    X: np.ndarray
    t1: np.ndarray
    t2: np.ndarray
    d: np.ndarray
    w: np.ndarray
    log_t1: np.ndarray
    log_t2: np.ndarray
    entered: np.ndarray
    wd: np.ndarray
    unit_weight: bool
    sum_wd: float
    wd_log_t2: float
    wd_X: np.ndarray
    w_exposure: np.ndarray

    @classmethod
    def build(cls, X: np.ndarray, t1: np.ndarray, t2: np.ndarray, d: np.ndarray,
              w: np.ndarray) -> SurvivalRows:
        t1 = np.asarray(t1, dtype=np.float64)
        t2 = np.asarray(t2, dtype=np.float64)
        pos = t1 > 0
        log_t1 = np.log(np.where(pos, t1, 1.0))
        d = np.asarray(d, dtype=np.float64)
        w = np.asarray(w, dtype=np.float64)
        X = np.ascontiguousarray(np.asarray(X, dtype=np.float64).reshape(t1.shape[0], -1))
        wd = w * d
        log_t2 = np.log(t2)
        wd_X = wd @ X if X.shape[1] else np.zeros(0)
        return cls(X, t1, t2, d, w, log_t1, log_t2, np.flatnonzero(pos), wd,
                   bool(np.all(w == 1.0)), float(wd.sum()), float(wd @ log_t2), wd_X,
                   w * (t2 - t1))

    @property
    def total_exposure(self) -> float:
        return float(self.w_exposure.sum())

    @property
    def all_entered(self) -> bool:
        return self.entered.shape[0] == self.t1.shape[0]


_CHUNK = 65_536


def _eta(theta_b0: float, beta: np.ndarray, X: np.ndarray) -> np.ndarray:
    if X.shape[1] == 0:
        return np.full(X.shape[0], theta_b0)
    eta = X @ beta
    eta += theta_b0
    return eta


def _weighted_gram(X: np.ndarray, curv: np.ndarray) -> np.ndarray:
    """X' diag(curv) X for curv >= 0, as (X sqrt(curv))'(X sqrt(curv)) in row chunks.

    The product of a matrix with its own transpose goes to BLAS syrk (half the
    work of a general product) and each chunk's temporary stays in cache.
    """
    p = X.shape[1]
    out = np.zeros((p, p))
    root = np.sqrt(curv)
    for lo in range(0, X.shape[0], _CHUNK):
        xs = X[lo:lo + _CHUNK] * root[lo:lo + _CHUNK, None]
        out += xs.T @ xs
    return out


def _linear_blocks(X: np.ndarray, first: np.ndarray, second: np.ndarray | None,
                   curv: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """X' first, X' second and X' diag(curv) X (curv >= 0)."""
    p = X.shape[1]
    if p == 0:
        z = np.zeros(0)
        return z, z, np.zeros((0, 0))
    gx = first @ X
    sx = second @ X if second is not None else np.zeros(p)
    return gx, sx, _weighted_gram(X, curv)


def exponential_loglik(theta: np.ndarray, rows: SurvivalRows, *, derivatives: bool = True
                       ) -> tuple[float, np.ndarray | None, np.ndarray | None]:
    """Exponential PH log-likelihood, gradient and Hessian.

    With ``theta = (b0, b)`` and eta_i = b0 + x_i'b, the row contribution is
    (Klein & Moeschberger 2003, eq. 3.5.1 with left truncation)

        l_i = w_i * [ d_i * eta_i - exp(eta_i) * (t2_i - t1_i) ],

    so  dl/deta_i = w_i d_i - m_i  and  d2l/deta_i^2 = -m_i  with
    m_i = w_i exp(eta_i) (t2_i - t1_i). This is the Poisson log-likelihood
    with log-exposure offset up to a constant (Holford 1980). The sums
    sum(w d eta) = b0 sum(w d) + (X' w d)'b use constants precomputed once.

    Returns
    -------
    (loglik, gradient (p+1,), hessian (p+1, p+1)); the last two are None when
    ``derivatives`` is False.
    """
    X = rows.X
    p = X.shape[1]
    b0 = float(theta[0])
    beta = np.asarray(theta[1:], dtype=np.float64)
    if p:
        m = _eta(b0, beta, X)
        np.exp(m, out=m)
        m *= rows.w_exposure
        sum_m = float(m.sum())
    else:
        sum_m = float(np.exp(b0)) * rows.total_exposure
    lin_d = b0 * rows.sum_wd + (float(rows.wd_X @ beta) if p else 0.0)
    ll = lin_d - sum_m
    if not derivatives:
        return ll, None, None
    k = 1 + p
    grad = np.empty(k)
    grad[0] = rows.sum_wd - sum_m
    hess = np.empty((k, k))
    hess[0, 0] = -sum_m
    if p:
        mx = m @ X
        grad[1:] = rows.wd_X - mx
        hess[0, 1:] = -mx
        hess[1:, 0] = -mx
        hess[1:, 1:] = -_weighted_gram(X, m)
    return ll, grad, hess


def weibull_loglik(theta: np.ndarray, rows: SurvivalRows, *, derivatives: bool = True
                   ) -> tuple[float, np.ndarray | None, np.ndarray | None]:
    """Weibull PH log-likelihood, gradient and Hessian on (start, stop] rows.

    Parameters ``theta = (b0, g, b)``: alpha = exp(g) is the shape,
    eta_i = b0 + x_i'b, and (Klein & Moeschberger 2003, sec. 12.2;
    Collett 2015, sec. 5.6)

        h(t|x) = alpha * exp(eta) * t**(alpha - 1),  H(t|x) = exp(eta) * t**alpha,
        l_i = w_i * [ d_i * (eta_i + g + (alpha - 1) log t2_i) - exp(eta_i) * A_i ],
        A_i = t2_i**alpha - t1_i**alpha.

    With e_j = t_j**alpha, L_j = log t_j (and 0 * log 0 = 0 at t1 = 0),
    B_i = dA_i/dg = alpha (e2 L2 - e1 L1) and
    dB_i/dg = B_i + C_i with C_i = alpha**2 (e2 L2**2 - e1 L1**2):

        dl/deta = w d - m A,          dl/dg = w d (1 + alpha L2) - m B,
        d2l/deta2 = -m A,             d2l/deta dg = -m B,
        d2l/dg2 = w d alpha L2 - m (B + C),        m = w exp(eta).

    The event part, sum w d (eta + g + (alpha - 1) L2), is a combination of
    constants computed once (sum w d, sum w d L2, X' w d); only the
    cumulative-hazard part needs a pass over the rows.

    Returns
    -------
    (loglik, gradient (p+2,), hessian (p+2, p+2)) in the order (b0, g, b);
    gradient and Hessian are None when ``derivatives`` is False.
    """
    X = rows.X
    p = X.shape[1]
    b0 = float(theta[0])
    g = float(theta[1])
    alpha = float(np.exp(g))
    beta = np.asarray(theta[2:], dtype=np.float64)
    if p:
        m = _eta(b0, beta, X)
        np.exp(m, out=m)
        if not rows.unit_weight:
            m *= rows.w

        def msum(v: np.ndarray) -> float:
            return float(m @ v)
    else:
        # no covariates: exp(eta) is one number, so no per-row exponential
        scale = float(np.exp(b0))

        def msum(v: np.ndarray) -> float:
            return scale * (float(v.sum()) if rows.unit_weight else float(rows.w @ v))

    no_entry = rows.entered.shape[0] == 0
    e2 = np.exp(alpha * rows.log_t2)
    if no_entry:
        A = e2
        e1 = None
    elif rows.all_entered:
        e1 = np.exp(alpha * rows.log_t1)
        A = e2 - e1
    else:
        e1 = np.zeros_like(e2)
        idx = rows.entered
        e1[idx] = np.exp(alpha * rows.log_t1[idx])
        A = e2 - e1
    sum_mA = msum(A)
    lin_d = b0 * rows.sum_wd + (float(rows.wd_X @ beta) if p else 0.0)
    ll = lin_d + g * rows.sum_wd + (alpha - 1.0) * rows.wd_log_t2 - sum_mA
    if not derivatives:
        return ll, None, None
    mA = m * A if p else None
    B = e2 * rows.log_t2         # e2 L2
    e2L2 = B * rows.log_t2       # e2 L2^2
    if e1 is not None:
        e1L = e1 * rows.log_t1
        B -= e1L
        e1L *= rows.log_t1
        e2L2 -= e1L
    B *= alpha
    sum_mB = msum(B)
    sum_mC = alpha * alpha * msum(e2L2)
    k = 2 + p
    grad = np.empty(k)
    grad[0] = rows.sum_wd - sum_mA
    grad[1] = rows.sum_wd + alpha * rows.wd_log_t2 - sum_mB
    hess = np.empty((k, k))
    hess[0, 0] = -sum_mA
    hess[0, 1] = hess[1, 0] = -sum_mB
    hess[1, 1] = alpha * rows.wd_log_t2 - sum_mB - sum_mC
    if p:
        both = np.empty((X.shape[0], 2))
        both[:, 0] = mA
        np.multiply(m, B, out=both[:, 1])
        xs = X.T @ both              # one pass over X for both scores
        grad[2:] = rows.wd_X - xs[:, 0]
        hess[0, 2:] = hess[2:, 0] = -xs[:, 0]
        hess[1, 2:] = hess[2:, 1] = -xs[:, 1]
        hess[2:, 2:] = -_weighted_gram(X, mA)
    return ll, grad, hess


# --------------------------------------------------------------------- piecewise
def band_edges(cuts: np.ndarray) -> np.ndarray:
    """Edges of the tenure bands (c_0, c_1], (c_1, c_2], ..., (c_{K-1}, inf), c_0 = 0,
    from the increasing ``cuts`` (c_1, ..., c_{K-1})."""
    return np.concatenate(([0.0], np.asarray(cuts, dtype=np.float64), [np.inf]))


@dataclass(frozen=True)
class PiecewiseRows:
    """Arrays the piecewise-constant kernel reads: X (n, p), exposure (n, K),
    exit band (n,), w and w*d."""

    X: np.ndarray
    exposure: np.ndarray
    exit_band: np.ndarray
    w: np.ndarray
    wd: np.ndarray

    @classmethod
    def build(cls, X: np.ndarray, t1: np.ndarray, t2: np.ndarray, d: np.ndarray, w: np.ndarray,
              cuts: np.ndarray) -> PiecewiseRows:
        exposure, band = exposure_by_row(np.asarray(t1, float), np.asarray(t2, float),
                                         band_edges(cuts))
        w = np.asarray(w, dtype=np.float64)
        X = np.asarray(X, dtype=np.float64).reshape(exposure.shape[0], -1)
        return cls(X, exposure, band, w, w * np.asarray(d, dtype=np.float64))

    @property
    def n_bands(self) -> int:
        return self.exposure.shape[1]


def piecewise_closed_form(rows: PiecewiseRows) -> tuple[np.ndarray, np.ndarray]:
    """Band hazards without covariates: events / exposure per band.

    The maximum-likelihood estimate of a piecewise-constant hazard is the
    occurrence / exposure rate in each band (Holford 1976; Friedman 1982).

    Returns
    -------
    events (K,), exposure (K,) -- weighted sums; rate = events / exposure.
    """
    K = rows.n_bands
    events = np.bincount(rows.exit_band, weights=rows.wd, minlength=K)
    exposure = rows.w @ rows.exposure
    return events, exposure


def merge_empty_bands(events: np.ndarray, exposure: np.ndarray) -> np.ndarray:
    """Which interior cut points to keep so that every band has churns and time at risk.

    Band k lies between cut k-1 and cut k (cut j separates bands j and j+1).
    While some band has ``events <= 0`` or ``exposure <= 0``, the first such
    band is merged with the band after it (the last band with the one before
    it) by removing the cut between them; sums of events and exposure over
    merged bands are sums over their parts, so no row is read again. The
    piecewise-constant MLE exists exactly when every band has events > 0 and
    exposure > 0 (Holford 1976: rate = events / exposure, log rate finite).

    Returns
    -------
    kept : int array, the indices (into the interior cuts) of the cuts kept,
    increasing. When one band is left it may still have no events; the caller
    decides what that means.
    """
    ev = [float(x) for x in events]
    ex = [float(x) for x in exposure]
    kept = list(range(len(ev) - 1))
    while len(ev) > 1:
        empty = [k for k in range(len(ev)) if ev[k] <= 0 or ex[k] <= 0]
        if not empty:
            break
        k = empty[0]
        j = k if k < len(ev) - 1 else k - 1  # merge bands j and j + 1: drop cut j
        ev[j] += ev.pop(j + 1)
        ex[j] += ex.pop(j + 1)
        del kept[j]
    return np.asarray(kept, dtype=np.int64)


def piecewise_loglik(theta: np.ndarray, rows: PiecewiseRows, *, derivatives: bool = True
                     ) -> tuple[float, np.ndarray | None, np.ndarray | None]:
    """Piecewise-constant PH log-likelihood with covariates.

    ``theta = (a_1..a_K, b)``; h(t|x) = exp(a_k + x'b) on band k, so with
    E_ik the exposure of row i in band k and k(i) its exit band
    (Friedman 1982)

        l = sum_i w_i [ d_i (a_k(i) + x_i'b) - exp(x_i'b) sum_k exp(a_k) E_ik ].

    Gradient: dl/da_k = sum_i w_i (d_i [k(i)=k] - mu_ik), dl/db = X'(w d - mu_i.)
    with mu_ik = exp(a_k + x_i'b) E_ik; Hessian: -diag(sum_i w mu_ik) for the
    band block, -X' (w mu_.k) for the cross block and -X' diag(w mu_i.) X.
    """
    K = rows.n_bands
    a = np.asarray(theta[:K], dtype=np.float64)
    beta = np.asarray(theta[K:], dtype=np.float64)
    X = rows.X
    p = X.shape[1]
    lin = X @ beta if p else np.zeros(X.shape[0])
    ex = rows.w * np.exp(lin)
    mu = rows.exposure * np.exp(a)[None, :] * ex[:, None]   # (n, K) weighted
    mu_row = mu.sum(axis=1)
    ll = float(rows.wd @ (a[rows.exit_band] + lin) - mu_row.sum())
    if not derivatives:
        return ll, None, None
    d_band = np.bincount(rows.exit_band, weights=rows.wd, minlength=K)
    mu_band = mu.sum(axis=0)
    grad = np.empty(K + p)
    grad[:K] = d_band - mu_band
    hess = np.zeros((K + p, K + p))
    hess[np.arange(K), np.arange(K)] = -mu_band
    if p:
        gx, _, hxx = _linear_blocks(X, rows.wd - mu_row, None, mu_row)
        grad[K:] = gx
        cross = -(mu.T @ X)                                  # (K, p)
        hess[:K, K:] = cross
        hess[K:, :K] = cross.T
        hess[K:, K:] = -hxx
    return ll, grad, hess


# --------------------------------------------------------------------- prediction
# theta in the reporting coordinates: exponential (b0, b), Weibull (b0, g, b),
# piecewise (a_1..a_K, b); x is one design row (p,), t an array of times > 0.
def _split(kind: str, theta: np.ndarray, n_bands: int) -> tuple[np.ndarray, float, np.ndarray]:
    """(baseline parameters, alpha, beta) of a parameter vector."""
    if kind == "weibull":
        return theta[:1], float(np.exp(theta[1])), theta[2:]
    if kind == "exponential":
        return theta[:1], 1.0, theta[1:]
    return theta[:n_bands], 1.0, theta[n_bands:]


def band_hazard_integral(cuts: np.ndarray, t: np.ndarray) -> np.ndarray:
    """E_k(t): time spent in each band by tenure t, shape (m, K)."""
    exposure, _ = exposure_by_row(np.zeros_like(t), t, band_edges(cuts))
    return exposure


def _prologue(kind: str, theta: np.ndarray, x: np.ndarray, t: np.ndarray,
              cuts: np.ndarray | None) -> tuple:
    """Shared set-up of the prediction functions: (t, cuts, K, base, alpha, x'b)."""
    t = np.asarray(t, dtype=np.float64)
    cuts = np.zeros(0) if cuts is None else np.asarray(cuts, dtype=np.float64)
    K = cuts.shape[0] + 1
    base, alpha, beta = _split(kind, theta, K)
    xb = float(x @ beta) if beta.shape[0] else 0.0
    return t, cuts, K, base, alpha, xb


def log_cumulative_hazard(kind: str, theta: np.ndarray, x: np.ndarray, t: np.ndarray,
                          cuts: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """log H(t | x) and its Jacobian in theta, for t > 0.

    Weibull: log H = eta + alpha log t, d/d(b0, g, b) = (1, alpha log t, x).
    Exponential: log H = eta + log t, d/d(b0, b) = (1, x).
    Piecewise: log H = log sum_k exp(a_k) E_k(t) + x'b,
    d/da_k = exp(a_k) E_k(t) / H_0(t), d/db = x.
    """
    t, cuts, K, base, alpha, xb = _prologue(kind, theta, x, t, cuts)
    m = t.shape[0]
    jac = np.empty((m, theta.shape[0]))
    if kind == "piecewise":
        parts = band_hazard_integral(cuts, t) * np.exp(base)[None, :]
        h0 = parts.sum(axis=1)
        val = np.log(h0) + xb
        jac[:, :K] = parts / h0[:, None]
        jac[:, K:] = x[None, :]
        return val, jac
    lt = np.log(t)
    val = base[0] + xb + alpha * lt
    jac[:, 0] = 1.0
    if kind == "weibull":
        jac[:, 1] = alpha * lt
        jac[:, 2:] = x[None, :]
    else:
        jac[:, 1:] = x[None, :]
    return val, jac


def log_hazard(kind: str, theta: np.ndarray, x: np.ndarray, t: np.ndarray,
               cuts: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """log h(t | x) and its Jacobian in theta, for t > 0.

    Weibull: log h = g + eta + (alpha - 1) log t, d/d(b0, g, b) = (1, 1 + alpha log t, x).
    Exponential: log h = eta. Piecewise: log h = a_k(t) + x'b.
    """
    t, cuts, K, base, alpha, xb = _prologue(kind, theta, x, t, cuts)
    m = t.shape[0]
    jac = np.zeros((m, theta.shape[0]))
    if kind == "piecewise":
        band = np.clip(np.searchsorted(cuts, t, side="left"), 0, K - 1)
        val = base[band] + xb
        jac[np.arange(m), band] = 1.0
        jac[:, K:] = x[None, :]
        return val, jac
    if kind == "weibull":
        lt = np.log(t)
        val = theta[1] + base[0] + xb + (alpha - 1.0) * lt
        jac[:, 0] = 1.0
        jac[:, 1] = 1.0 + alpha * lt
        jac[:, 2:] = x[None, :]
        return val, jac
    val = np.full(m, base[0] + xb)
    jac[:, 0] = 1.0
    jac[:, 1:] = x[None, :]
    return val, jac


def quantile_time(kind: str, theta: np.ndarray, x: np.ndarray, p: float,
                  cuts: np.ndarray | None = None) -> float:
    """Tenure t with S(t | x) = 1 - p, i.e. H(t | x) = -log(1 - p).

    Weibull: t = (-log(1-p) exp(-eta))**(1/alpha); exponential: alpha = 1;
    piecewise: H_0 is piecewise linear and is inverted band by band. Returns
    inf when the hazard beyond the last cut is zero and H never reaches it.
    """
    target = -np.log1p(-p)
    _, cuts, K, base, alpha, xb = _prologue(kind, theta, x, np.zeros(0), cuts)
    if kind != "piecewise":
        return float(np.exp((np.log(target) - base[0] - xb) / alpha))
    rate = np.exp(base + xb)
    edges = np.concatenate(([0.0], cuts))
    widths = np.diff(np.concatenate((edges, [np.inf])))
    h_at = 0.0
    for k in range(K):
        full = rate[k] * widths[k]
        if h_at + full >= target:
            return float(edges[k] + (target - h_at) / rate[k]) if rate[k] > 0 else float("inf")
        h_at += full
    return float("inf")


def mean_time(kind: str, theta: np.ndarray, x: np.ndarray, horizon: float | None,
              cuts: np.ndarray | None = None) -> float:
    """Mean lifetime int_0^tau S(t|x) dt; tau = ``horizon`` or infinity.

    Weibull with sigma = exp(-eta/alpha) (Klein & Moeschberger 2003, sec. 2.5):
    unrestricted sigma Gamma(1 + 1/alpha); restricted
    sigma Gamma(1 + 1/alpha) P(1/alpha, (tau/sigma)**alpha) with P the
    regularised lower incomplete gamma function. Exponential: 1/lambda and
    (1 - exp(-lambda tau))/lambda. Piecewise: sum over bands of
    S(c_k) (1 - exp(-r_k w_k)) / r_k.
    """
    _, cuts, K, base, alpha, xb = _prologue(kind, theta, x, np.zeros(0), cuts)
    eta = float(base[0]) + xb if kind != "piecewise" else 0.0
    if kind in ("weibull", "exponential"):
        sigma = np.exp(-eta / alpha)
        full = sigma * special.gamma(1.0 + 1.0 / alpha)
        if horizon is None:
            return float(full)
        z = (horizon / sigma) ** alpha
        return float(full * special.gammainc(1.0 / alpha, z))
    rate = np.exp(base + xb)
    edges = np.concatenate(([0.0], cuts))
    ends = np.concatenate((cuts, [np.inf]))
    total = 0.0
    surv = 1.0
    tau = np.inf if horizon is None else float(horizon)
    for k in range(K):
        lo = edges[k]
        if lo >= tau:
            break
        hi = min(ends[k], tau)
        width = hi - lo
        r = rate[k]
        if not np.isfinite(width):
            if r <= 0:
                return float("inf")
            total += surv / r
            break
        total += surv * (-np.expm1(-r * width)) / r if r > 0 else surv * width
        surv *= np.exp(-r * width)
    return float(total)
