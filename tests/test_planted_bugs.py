"""Hand-worked cases that fail on plausible single-line bugs.

Each case is small enough to work by hand; the working is in the docstring or
comments beside the expected values.
"""

from __future__ import annotations

import numpy as np
import pytest

from retain import StartStop
from retain.models.parametric import fit_piecewise


def _exits_on_cuts() -> StartStop:
    """Whole-day exits falling exactly on the cut points 30 and 60.

    customer  (start, stop]  churned   exposure in (0,30] (30,60] (60,inf)
    A         (0, 30]        1                        30      0       0
    B         (0, 60]        1                        30     30       0
    C         (0, 30]        0                        30      0       0
    D         (0, 45]        1                        30     15       0
    E         (0, 90]        1                        30     30      30
    F         (0, 60]        0                        30     30       0
    G         (0, 75]        0                        30     30      15
    H         (30, 60]       1  (delayed entry)        0     30       0
    totals                                           210    165      45
    churns by the band that holds the exit, bands (a, b]:
      (0,30]: A (exit 30 = the cut, so in the band that ends there)     -> 1
      (30,60]: B (exit 60), D (45), H (60)                               -> 3
      (60,inf): E (90)                                                   -> 1
    rates: 1/210, 3/165, 1/45 per day (occurrence / exposure, Holford 1976).
    Taking the exit band with the wrong side of a cut ([a, b)) would move A to
    the second band and B and H to the third: 0/210, 2/165, 3/45.
    """
    return StartStop([0, 0, 0, 0, 0, 0, 0, 30], [30, 60, 30, 45, 90, 60, 75, 60],
                     [1, 1, 0, 1, 1, 0, 0, 1], customer_id=list("ABCDEFGH"))


def test_piecewise_exit_on_a_cut_is_in_the_band_that_ends_there():
    fit = fit_piecewise(_exits_on_cuts(), cuts=[30, 60])
    assert fit.cuts == (30.0, 60.0) and not fit.merged_bands
    np.testing.assert_allclose(np.exp(fit.params), [1 / 210, 3 / 165, 1 / 45], rtol=1e-12)
    # SE of a log rate = 1 / sqrt(churns in the band): 1, 1/sqrt(3), 1
    np.testing.assert_allclose(fit.se, [1.0, 3 ** -0.5, 1.0], rtol=1e-12)
    bands = fit.band_hazards
    assert list(bands["band"]) == ["0 to 30 days", "30 to 60 days", "over 60 days"]


def test_piecewise_exit_on_a_cut_with_a_covariate():
    """With a covariate the exit band enters the likelihood too: the Poisson-regression form.

    The piecewise-exponential likelihood is a Poisson likelihood for the churn
    count of each (row, band) cell with log exposure as offset (Holford 1980;
    Laird & Olivier 1981). statsmodels' GLM Poisson fitted on the cells, with
    each churn placed in its (a, b] band by hand, must give the same estimates.
    """
    import statsmodels.api as sm

    t = _exits_on_cuts()
    x = np.array([0.0, 1.0, 1.0, 0.0, 1.0, 0.0, 1.0, 0.0])
    t = t.with_columns(x=x)
    fit = fit_piecewise(t, cuts=[30, 60], covariates=["x"])
    # cells (row, band) with exposure > 0; the exit band by hand from the table above
    exposure = np.array([[30, 0, 0], [30, 30, 0], [30, 0, 0], [30, 15, 0], [30, 30, 30],
                         [30, 30, 0], [30, 30, 15], [0, 30, 0]], dtype=float)
    exit_band = [0, 1, 0, 1, 2, 1, 2, 1]
    y, X, off = [], [], []
    for i in range(8):
        for k in range(3):
            if exposure[i, k] > 0:
                y.append(float(t.churned[i] and exit_band[i] == k))
                X.append([float(k == 0), float(k == 1), float(k == 2), x[i]])
                off.append(np.log(exposure[i, k]))
    ref = sm.GLM(np.array(y), np.array(X), family=sm.families.Poisson(),
                 offset=np.array(off)).fit(tol=1e-14)
    np.testing.assert_allclose(fit.params, ref.params, rtol=1e-7)


if __name__ == "__main__":  # pragma: no cover
    pytest.main([__file__])


def test_restricted_mean_difference_se_is_root_of_sum_of_squares():
    """Two arms with churns before the horizon (4 days), so both SEs are positive.

    Each arm's restricted mean and SE by hand (Klein & Moeschberger 2003, eq. 4.5.1-2:
    Var = sum_j A_j^2 d_j / (n_j (n_j - d_j)), A_j the area from t_j to the horizon):
    arm a: (0,1] churn, (0,3] churn, (0,5] and (0,6] censored.
      t=1: n 4, d 1, S 3/4;  t=3: n 3, d 1, S 1/2.
      mean = 1 + 2 * 3/4 + 1 * 1/2 = 3;  A_1 = 2, A_3 = 1/2;
      Var = 4 / 12 + 1/4 / 6 = 3/8.
    arm b: (0,2] churn x2, (0,3] censored, (0,7] churn, (0,8] censored.
      t=2: n 5, d 2, S 3/5;  the next churn (7) is past the horizon.
      mean = 2 + 2 * 3/5 = 3.2;  A_2 = 1.2;  Var = 1.44 * 2 / 15 = 0.192.
    difference b - a = 0.2 with SE sqrt(3/8 + 0.192) (independent arms; Royston & Parmar
    2013); a plain sum of the SEs would give 1.0506 instead of 0.7530.
    """
    import math

    from scipy import stats

    from retain.models.curves import kaplan_meier, rmst_difference

    arm = np.array(["a"] * 4 + ["b"] * 5, dtype=object)
    t = StartStop([0.0] * 9, [1, 3, 5, 6, 2, 2, 3, 7, 8], [1, 1, 0, 0, 1, 1, 0, 1, 0],
                  covariates={"arm": arm})
    ra = kaplan_meier(t.take(arm == "a")).restricted_mean(4.0)
    rb = kaplan_meier(t.take(arm == "b")).restricted_mean(4.0)
    assert abs(ra.mean - 3.0) < 1e-12 and abs(ra.se - math.sqrt(3 / 8)) < 1e-12
    assert abs(rb.mean - 3.2) < 1e-12 and abs(rb.se - math.sqrt(0.192)) < 1e-12
    d = rmst_difference(t, "arm", 4.0, levels=("a", "b"))
    se = math.sqrt(3 / 8 + 0.192)
    assert abs(d.difference - 0.2) < 1e-12
    assert abs(d.se - se) < 1e-12
    z = float(stats.norm.isf(0.025))
    assert abs(d.lower - (0.2 - z * se)) < 1e-12 and abs(d.upper - (0.2 + z * se)) < 1e-12
    assert abs(d.p_value - 2 * stats.norm.sf(0.2 / se)) < 1e-12
