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
of points with w > 0, over the range of h in which the fit still changes (tr A from
m − ½ down to order + 0.01). When GCV has no interior minimum on that range and the
error variance is known, the unbiased risk estimate (UBRE) is used instead.
"""

from __future__ import annotations

from dataclasses import dataclass

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


def ubre_score(u: np.ndarray, w: np.ndarray, h: float, order: int, scale: float) -> float:
    """Unbiased risk estimate for a known error variance σ² = ``scale`` per unit weight
    (Craven and Wahba, 1979; Wahba 1990, §4.7), divided by σ²:
    U(h) / σ² = Σ w (u − v)² / (m σ²) − 1 + 2 tr A(h) / m."""
    v = whittaker_henderson(u, w, h, order)
    pos = w > 0
    m = float(pos.sum())
    rss = float(np.sum(w[pos] * (u[pos] - v[pos]) ** 2))
    return rss / (m * scale) - 1.0 + 2.0 * hat_trace(w, h, order) / m


def _log10_h_for_edf(w: np.ndarray, order: int, target: float) -> float:
    """log10 h at which tr A(h) = target (tr A falls monotonically from m to order);
    bisection on log10 h between −12 and 16."""
    lo, hi = -12.0, 16.0
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        if hat_trace(w, 10.0 ** mid, order) > target:
            lo = mid
        else:
            hi = mid
        if hi - lo < 1e-3:
            break
    return 0.5 * (lo + hi)


def smoothing_range(w: np.ndarray, order: int) -> tuple[float, float]:
    """The search range of log10 h taken from the data: from the h that leaves half a
    parameter of smoothing (tr A = m − ½, almost the crude rates) to the h within 0.01 of
    the polynomial limit (tr A = order + 0.01). Outside it the fit no longer changes."""
    m = float((w > 0).sum())
    return _log10_h_for_edf(w, order, m - 0.5), _log10_h_for_edf(w, order, order + 0.01)


@dataclass(frozen=True)
class SmoothingChoice:
    """The chosen h, its criterion value, which criterion (``"GCV"`` or ``"UBRE"``), the
    log10 h search range, and where the optimum lies: ``"interior"``, ``"crude"`` (the
    lower end: no smoothing) or ``"polynomial"`` (the upper end: degree order − 1)."""

    h: float
    score: float
    criterion: str
    log10_range: tuple[float, float]
    position: str


def _minimise_on(score, lo: float, hi: float) -> tuple[float, float, str]:
    """A grid in log10 h on [lo, hi] (both ends and the quarter-decades between them), then
    a bounded refinement between the neighbours of the best grid point. Returns
    (log10 h, score, position)."""
    steps = np.linspace(-12.0, 16.0, 113)
    grid = np.concatenate(([lo], steps[(steps > lo) & (steps < hi)], [hi]))
    scores = np.array([score(g) for g in grid])
    i = int(np.argmin(scores))
    if i == 0:
        return float(grid[0]), float(scores[0]), "crude"
    if i == grid.shape[0] - 1:
        return float(grid[-1]), float(scores[-1]), "polynomial"
    res = optimize.minimize_scalar(score, bounds=(grid[i - 1], grid[i + 1]), method="bounded",
                                   options={"xatol": 1e-4})
    if res.fun <= scores[i]:
        return float(res.x), float(res.fun), "interior"
    return float(grid[i]), float(scores[i]), "interior"


def choose_smoothing(u: np.ndarray, w: np.ndarray, order: int,
                     scale: float | None = None, criterion: str = "auto") -> SmoothingChoice:
    """h minimising GCV over the data's range of h (``smoothing_range``).

    GCV estimates the error variance from the fit itself; when it keeps falling towards
    the crude rates (no interior minimum: it would interpolate) and the variance per unit
    weight is known (``scale``, e.g. Poisson: the overall rate over the mean exposure),
    the unbiased risk estimate with that variance is minimised instead. The result says
    whether the optimum is interior or at an end of the range. ``criterion="UBRE"``
    (with ``scale``) skips GCV."""
    lo, hi = smoothing_range(w, order)
    g, val, position = lo, gcv_score(u, w, 10.0 ** lo, order), "crude"
    if criterion != "UBRE":
        g, val, position = _minimise_on(lambda x: gcv_score(u, w, 10.0 ** x, order), lo, hi)
        criterion = "GCV"
    if position == "crude" and scale is not None and scale > 0:
        g, val, position = _minimise_on(lambda x: ubre_score(u, w, 10.0 ** x, order, scale),
                                        lo, hi)
        criterion = "UBRE"
    return SmoothingChoice(float(10.0 ** g), val, criterion, (lo, hi), position)


# ---------------------------------------------------------------- adherence tests
def chi_square_test(actual: np.ndarray, expected: np.ndarray, dof: float) -> tuple[float, float]:
    """X² = Σ (A − E)² / E over points with E > 0; p = P(χ²_dof > X²), NaN when dof ≤ 0
    (the graduation used as many parameters as there are points: nothing left to test)."""
    ok = expected > 0
    x2 = float(np.sum((actual[ok] - expected[ok]) ** 2 / expected[ok]))
    return x2, float(stats.chi2.sf(x2, dof)) if dof > 0 else float("nan")


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
