"""The shifted-beta-geometric (sBG) model for discrete renewal periods.

Pure numpy / scipy.special: no pandas, no I/O, no validation.

Fader & Hardie (2007), "How to project customer retention", Journal of
Interactive Marketing 21(1): each customer renews at the end of every period
with a constant probability 1 - q; q varies across customers as
Beta(alpha, beta). The number of periods T a customer stays (T = 1 means
they churned at the first renewal) then has

    P(T = t) = B(alpha + 1, beta + t - 1) / B(alpha, beta),      t = 1, 2, ...
    S(t) = P(T > t) = B(alpha, beta + t) / B(alpha, beta),        S(0) = 1,
    r_t = S(t) / S(t - 1) = (beta + t - 1) / (alpha + beta + t - 1)

(FH 2007, eqs. 3, 4 and 8). The log-likelihood of aggregated data is

    LL = sum_t c_t log P(T = t) + sum_t a_t log S(t) - sum_t e_t log S(t),

with c_t the customers lost at renewal t, a_t those still active whose
observation ends after t periods (right-censored, e.g. a cohort observed
for only t periods), and e_t those first observed having already completed
t periods (left-truncated: their likelihood is conditioned on S(t)).
With one fully-observed cohort this is FH 2007, eq. 6.

The discounted expected residual lifetime (Fader & Hardie 2010, "Customer-
base valuation in a contractual setting: the perils of ignoring
heterogeneity", Marketing Science 29(1), eq. 6) of a customer who has made
n renewals, valued just before the next renewal decision, is

    DERL(d | alpha, beta, n) = sum_{k>=0} [S(n + 1 + k) / S(n)] / (1 + d)**k
                             = (beta + n) / (alpha + beta + n)
                               * 2F1(1, beta + n + 1; alpha + beta + n + 1; 1 / (1 + d)).
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = [
    "sbg_churn_probability",
    "sbg_derl",
    "sbg_loglik",
    "sbg_retention_rate",
    "sbg_survival",
]


def sbg_survival(alpha: float, beta: float, t: np.ndarray) -> np.ndarray:
    """S(t) = B(alpha, beta + t) / B(alpha, beta) = prod_{j<=t} r_j (FH 2007, eq. 4).

    ``t`` are whole numbers of periods >= 0; computed as the product of the
    retention rates, exact for any size of alpha and beta.
    """
    t = np.asarray(t, dtype=np.int64)
    top = int(t.max()) if t.size else 0
    j = np.arange(1, top + 1, dtype=np.float64)
    log_r = np.log(beta + j - 1.0) - np.log(alpha + beta + j - 1.0)
    log_s = np.concatenate(([0.0], np.cumsum(log_r)))
    return np.exp(log_s[t])


def sbg_churn_probability(alpha: float, beta: float, t: np.ndarray) -> np.ndarray:
    """P(T = t) = S(t - 1) * alpha / (alpha + beta + t - 1) for t >= 1 (FH 2007, eq. 3)."""
    t = np.asarray(t, dtype=np.int64)
    return sbg_survival(alpha, beta, t - 1) * alpha / (alpha + beta + t - 1.0)


def sbg_retention_rate(alpha: float, beta: float, t: np.ndarray) -> np.ndarray:
    """r_t = (beta + t - 1) / (alpha + beta + t - 1), t >= 1 (FH 2007, eq. 8)."""
    t = np.asarray(t, dtype=np.float64)
    return (beta + t - 1.0) / (alpha + beta + t - 1.0)


def sbg_loglik(theta: np.ndarray, periods: np.ndarray, churned: np.ndarray, active: np.ndarray,
               entered: np.ndarray, *, derivatives: bool = True
               ) -> tuple[float, np.ndarray | None, np.ndarray | None]:
    """sBG log-likelihood of aggregated counts, with gradient and Hessian.

    Parameters
    ----------
    theta : (2,) array
        (u, v) = (log alpha, log beta).
    periods : (T,) array of 1, 2, ..., T
    churned, active, entered : (T,) arrays
        c_t, a_t and e_t of the module docstring (weighted counts).

    Notes
    -----
    Written through the retention rates, which stays exact for any size of
    alpha and beta (a difference of log-beta functions loses every digit when
    both are large): log S(t) = sum_{j<=t} log r_j and
    log P(T = t) = log S(t - 1) + log(alpha / (alpha + beta + t - 1)), so

        LL = sum_j W_j log r_j + sum_t c_t log(alpha / q_t),
        W_j = sum_{t > j} c_t + sum_{t >= j} (a_t - e_t),   q_t = alpha + beta + t - 1.

    On the log scale, with p_j = beta + j - 1:
    d log r_j / du = -alpha/q_j, d log r_j / dv = beta/p_j - beta/q_j,
    d2/du2 = -(alpha/q_j - alpha^2/q_j^2), d2/dudv = alpha beta / q_j^2,
    d2/dv2 = beta (j - 1)/p_j^2 - (beta/q_j - beta^2/q_j^2); and for
    log(alpha/q_t): 1 - alpha/q_t, -beta/q_t and the same second derivatives
    as -log q_t.
    """
    a = float(np.exp(theta[0]))
    b = float(np.exp(theta[1]))
    t = np.asarray(periods, dtype=np.float64)
    c = np.asarray(churned, dtype=np.float64)
    net = np.asarray(active, dtype=np.float64) - np.asarray(entered, dtype=np.float64)
    q = a + b + t - 1.0
    pj = b + t - 1.0
    # W_j = sum_{t > j} c_t + sum_{t >= j} net_t
    c_after = np.concatenate((np.cumsum(c[::-1])[::-1][1:], [0.0]))
    W = c_after + np.cumsum(net[::-1])[::-1]
    log_r = np.log(pj) - np.log(q)
    ll = float(W @ log_r + c @ (np.log(a) - np.log(q)))
    if not derivatives:
        return ll, None, None
    aq = a / q
    bq = b / q
    gu = float(W @ (-aq) + c @ (1.0 - aq))
    gv = float(W @ (b / pj - bq) + c @ (-bq))
    huu = -float((W + c) @ (aq - aq * aq))
    huv = float((W + c) @ (aq * bq))
    hvv = float(W @ (b * (t - 1.0) / (pj * pj))) - float((W + c) @ (bq - bq * bq))
    return ll, np.array([gu, gv]), np.array([[huu, huv], [huv, hvv]])


def sbg_derl(alpha: float, beta: float, discount: float, renewals: np.ndarray | float
             ) -> np.ndarray:
    """Discounted expected residual lifetime (Fader & Hardie 2010, eq. 6).

    Expected number of future payments, each discounted by ``discount`` per
    period, of a customer who has made ``renewals`` renewals, valued just
    before the next renewal decision (so the next payment, if it is made, is
    undiscounted)::

        DERL = (beta + n) / (alpha + beta + n) * 2F1(1, beta + n + 1; alpha + beta + n + 1; 1/(1+d))

    ``renewals`` = 0 is a customer in their first period.
    """
    n = np.asarray(renewals, dtype=np.float64)
    x = 1.0 / (1.0 + discount)
    out = np.asarray((beta + n) / (alpha + beta + n)
                     * special.hyp2f1(1.0, beta + n + 1.0, alpha + beta + n + 1.0, x))
    bad = ~np.isfinite(out)
    if bad.any():   # hyp2f1 fails for very large alpha, beta: sum the series instead
        out = out.copy() if out.ndim else out.reshape(1).copy()
        flat_n = np.atleast_1d(n)
        for i in np.flatnonzero(np.atleast_1d(bad)):
            out.flat[i] = _derl_series(alpha, beta, x, float(flat_n.flat[i]))
        out = out.reshape(np.shape(n))
    return out


def _derl_series(alpha: float, beta: float, x: float, n: float) -> float:
    """sum_k x**k prod_{j=1..k+1} r_{n+j}; each term is at most x times the previous."""
    terms = max(64, int(np.ceil(np.log(1e-17) / np.log(x))) + 1)
    j = np.arange(1, terms + 1, dtype=np.float64)
    log_r = np.log(beta + n + j - 1.0) - np.log(alpha + beta + n + j - 1.0)
    logs = np.cumsum(log_r) + np.log(x) * (j - 1.0)
    return float(np.sum(np.exp(logs)))
