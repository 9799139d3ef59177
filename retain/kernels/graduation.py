"""Whittaker–Henderson graduation and the usual adherence tests.

Pure numpy / scipy: no validation, no pandas.

Whittaker (1923), Henderson (1924): the graduated values v minimise

    Σ_i w_i (v_i − u_i)² + h Σ_i (Δ^z v_i)²

for crude values u, weights w ≥ 0, smoothing parameter h ≥ 0 and difference
order z; the solution solves the normal equations (W + h KᵀK) v = W u, K the
(n − z) × n matrix of z-th differences. h = 0 returns u (where w > 0); as
h → ∞, v tends to the weighted least-squares polynomial of degree z − 1.

Generalised cross-validation (Craven and Wahba, 1979) picks h by minimising
GCV(h) = m Σ w (u − v)² / (m − tr A(h))², A(h) = (W + h KᵀK)⁻¹ W, m the number
of points with w > 0.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, optimize, special, stats


def difference_matrix(n: int, order: int) -> np.ndarray:
    """K with (K v)_i = Δ^order v_i, shape (n − order, n)."""
    return np.diff(np.eye(n), n=order, axis=0)


def _banded_system(w: np.ndarray, h: float, order: int) -> np.ndarray:
    """W + h KᵀK in the upper banded form scipy.linalg.solveh_banded expects."""
    n = w.shape[0]
    k = difference_matrix(n, order)
    full = h * (k.T @ k)
    full[np.diag_indices(n)] += w
    ab = np.zeros((order + 1, n))
    for d in range(order + 1):
        ab[order - d, d:] = np.diagonal(full, offset=d)
    return ab


def whittaker_henderson(u: np.ndarray, w: np.ndarray, h: float, order: int) -> np.ndarray:
    """Graduated values v = (W + h KᵀK)⁻¹ W u (Whittaker 1923, Henderson 1924)."""
    if h == 0:
        return np.where(w > 0, u, np.nan)
    ab = _banded_system(w, h, order)
    return linalg.solveh_banded(ab, w * u)


def hat_trace(w: np.ndarray, h: float, order: int) -> float:
    """tr A(h), A(h) = (W + h KᵀK)⁻¹ W: the effective number of parameters."""
    if h == 0:
        return float((w > 0).sum())
    n = w.shape[0]
    ab = _banded_system(w, h, order)
    inv = linalg.solveh_banded(ab, np.eye(n))
    return float(np.dot(np.diagonal(inv), w))


def gcv_score(u: np.ndarray, w: np.ndarray, h: float, order: int) -> float:
    """GCV(h) = m Σ w (u − v)² / (m − tr A)² (Craven and Wahba, 1979)."""
    v = whittaker_henderson(u, w, h, order)
    pos = w > 0
    m = float(pos.sum())
    rss = float(np.sum(w[pos] * (u[pos] - v[pos]) ** 2))
    edf = hat_trace(w, h, order)
    return m * rss / max(m - edf, 1e-12) ** 2


def choose_smoothing(u: np.ndarray, w: np.ndarray, order: int,
                     log10_range: tuple[float, float] = (-4.0, 10.0)) -> tuple[float, float]:
    """h minimising GCV: a grid over log10 h, then a bounded refinement. Returns (h, GCV)."""
    grid = np.linspace(*log10_range, 57)
    scores = np.array([gcv_score(u, w, 10.0 ** g, order) for g in grid])
    i = int(np.argmin(scores))
    lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.shape[0] - 1)]
    if hi > lo:
        res = optimize.minimize_scalar(lambda g: gcv_score(u, w, 10.0 ** g, order),
                                       bounds=(lo, hi), method="bounded",
                                       options={"xatol": 1e-4})
        if res.fun <= scores[i]:
            return float(10.0 ** res.x), float(res.fun)
    return float(10.0 ** grid[i]), float(scores[i])


# ---------------------------------------------------------------- adherence tests
def chi_square_test(actual: np.ndarray, expected: np.ndarray, dof: float) -> tuple[float, float]:
    """X² = Σ (A − E)² / E over points with E > 0; p = P(χ²_dof > X²)."""
    ok = expected > 0
    x2 = float(np.sum((actual[ok] - expected[ok]) ** 2 / expected[ok]))
    return x2, float(stats.chi2.sf(x2, max(dof, 1e-9)))


def signs_test(deviation: np.ndarray) -> tuple[int, int, float]:
    """Number of positive deviations P among the n non-zero ones, P ~ Binomial(n, ½) under
    a good graduation; two-sided p-value. Returns (P, n, p)."""
    nz = deviation[deviation != 0]
    n = int(nz.shape[0])
    pos = int((nz > 0).sum())
    if n == 0:
        return 0, 0, 1.0
    p = 2 * min(stats.binom.cdf(pos, n, 0.5), stats.binom.sf(pos - 1, n, 0.5))
    return pos, n, float(min(1.0, p))


def grouping_of_signs_test(deviation: np.ndarray) -> tuple[int, int, int, float]:
    """Stevens' (1939) test on the number G of groups (runs) of positive deviations.

    With n₁ positive and n₂ negative signs in random order,
    P(G = t) = C(n₁ − 1, t − 1) C(n₂ + 1, t) / C(n₁ + n₂, n₁); too few groups mean
    the graduation sits on one side for long stretches. One-sided p = P(G ≤ g).
    Returns (G, n₁, n₂, p).
    """
    nz = deviation[deviation != 0]
    sign = nz > 0
    n1 = int(sign.sum())
    n2 = int(nz.shape[0]) - n1
    if n1 == 0 or n2 == 0:
        return int(n1 > 0), n1, n2, 1.0
    groups = int(sign[0]) + int(np.sum(sign[1:] & ~sign[:-1]))
    t = np.arange(1, groups + 1)
    log_p = (special.gammaln(n1) - special.gammaln(t) - special.gammaln(n1 - t + 1)
             + special.gammaln(n2 + 2) - special.gammaln(t + 1) - special.gammaln(n2 + 2 - t)
             - (special.gammaln(n1 + n2 + 1) - special.gammaln(n1 + 1) - special.gammaln(n2 + 1)))
    valid = t <= min(n1, n2 + 1)
    p = float(np.exp(log_p[valid]).sum())
    return groups, n1, n2, min(1.0, p)
