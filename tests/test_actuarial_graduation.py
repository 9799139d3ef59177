"""Whittaker–Henderson graduation: the normal equations solved directly, the limits h = 0
and h -> infinity, GCV from its definition, and the adherence tests against scipy and
brute-force enumeration."""

from __future__ import annotations

import itertools
import math

import numpy as np
import pytest
from _actuarial_data import competing_rows
from scipy import stats

from retain.data.table import StartStop
from retain.errors import DataError
from retain.kernels.graduation import (
    chi_square_test,
    choose_smoothing,
    difference_matrix,
    gcv_score,
    grouping_of_signs_test,
    hat_trace,
    signs_test,
    smoothing_range,
    ubre_score,
    whittaker_henderson,
)
from retain.models.decrements import decrement_table, graduate

U = np.array([0.12, 0.09, 0.085, 0.071, 0.078, 0.066, 0.07, 0.061, 0.058, 0.063, 0.055, 0.06])
W = np.array([9.0, 8.0, 7.5, 6.0, 5.5, 5.0, 4.0, 3.5, 3.0, 2.0, 1.5, 1.0])


@pytest.mark.parametrize("order", [2, 3])
@pytest.mark.parametrize("h", [0.01, 1.0, 250.0])
def test_banded_solve_equals_dense_normal_equations(order, h):
    """(W + h K'K) v = W u solved densely with numpy.linalg.solve, K built by hand."""
    n = U.shape[0]
    k = np.zeros((n - order, n))
    coef = [1, -2, 1] if order == 2 else [-1, 3, -3, 1]
    for i in range(n - order):
        k[i, i:i + order + 1] = coef
    assert np.array_equal(difference_matrix(n, order), k)
    want = np.linalg.solve(np.diag(W) + h * k.T @ k, W * U)
    np.testing.assert_allclose(whittaker_henderson(U, W, h, order), want, rtol=1e-11)


def test_zero_smoothing_returns_crude_rates():
    np.testing.assert_array_equal(whittaker_henderson(U, W, 0.0, 2), U)
    assert hat_trace(W, 0.0, 2) == U.shape[0]


@pytest.mark.parametrize("order", [2, 3])
def test_large_smoothing_tends_to_weighted_polynomial(order):
    """As h grows, v tends to the weighted least-squares polynomial of degree order - 1
    (common property: K v = 0 exactly for such polynomials). At h = 1e9 the distance is
    O(1/h) relative; tolerance 1e-6."""
    x = np.arange(U.shape[0], dtype=float)
    coef = np.polyfit(x, U, order - 1, w=np.sqrt(W))
    poly = np.polyval(coef, x)
    v = whittaker_henderson(U, W, 1e9, order)
    np.testing.assert_allclose(v, poly, rtol=1e-6)
    assert hat_trace(W, 1e9, order) == pytest.approx(order, abs=1e-4)
    # and not yet at moderate h (the check can fail)
    assert np.max(np.abs(whittaker_henderson(U, W, 1.0, order) - poly)) > 1e-3


def test_gcv_from_its_definition():
    """GCV(h) = m Σ w (u - v)^2 / (m - tr A)^2 with A = (W + h K'K)^-1 W formed densely
    (Craven and Wahba, 1979)."""
    k = difference_matrix(U.shape[0], 2)
    for h in (0.05, 3.0, 80.0):
        a = np.linalg.solve(np.diag(W) + h * k.T @ k, np.diag(W))
        v = a @ U
        m = U.shape[0]
        want = m * np.sum(W * (U - v) ** 2) / (m - np.trace(a)) ** 2
        assert gcv_score(U, W, h, 2) == pytest.approx(want, rel=1e-10)
        assert hat_trace(W, h, 2) == pytest.approx(np.trace(a), rel=1e-10)
    c = choose_smoothing(U, W, 2)
    lo, hi = c.log10_range
    grid = [gcv_score(U, W, 10 ** e, 2) for e in np.linspace(lo, hi, 300)]
    assert c.criterion == "GCV" and c.position == "interior"
    assert c.score <= min(grid) + 1e-15
    assert lo < math.log10(c.h) < hi


def test_signs_test_matches_scipy_binomtest():
    dev = np.array([0.5, -0.2, 0.1, 0.3, 0.0, 0.7, 0.2, -0.1, 0.4, 0.6, 0.9])
    pos, n, p = signs_test(dev)
    assert (pos, n) == (8, 10)
    assert p == pytest.approx(stats.binomtest(8, 10, 0.5).pvalue, rel=1e-12)


@pytest.mark.parametrize("signs", ["++--+-++---+", "+++++------", "+-+-+-+-", "--++++--"])
def test_grouping_of_signs_by_enumeration(signs):
    """Stevens (1939) distribution checked by enumerating every arrangement of the signs."""
    dev = np.array([1.0 if s == "+" else -1.0 for s in signs])
    g, n1, n2, p = grouping_of_signs_test(dev)
    n = n1 + n2

    def groups(arr):
        return sum(1 for i, s in enumerate(arr) if s and (i == 0 or not arr[i - 1]))

    assert g == groups([s == "+" for s in signs])
    count = 0
    for pos in itertools.combinations(range(n), n1):
        arr = [False] * n
        for i in pos:
            arr[i] = True
        count += groups(arr) <= g
    assert p == pytest.approx(count / math.comb(n, n1), rel=1e-12)


def rows_from_rates(q: np.ndarray, n: int, seed: int) -> StartStop:
    """Customers followed month by month under monthly churn probabilities q."""
    rng = np.random.default_rng(seed)
    d = 30.4375
    u = rng.random((n, q.shape[0]))
    first = np.argmax(u < q, axis=1)
    churned = (u < q).any(axis=1)
    # within the month of churn the time is uniform (close to constant force for small q)
    stop = np.where(churned, (first + 1 - rng.random(n)) * d, q.shape[0] * d)
    return StartStop(np.zeros(n), stop, churned.astype(int))


def test_graduate_entry_point_recovers_smooth_rates():
    """Data drawn from a smooth q curve: GCV graduation is closer to the truth than the
    crude rates, and the adherence tests do not reject (fixed seed)."""
    truth = 0.03 + 0.06 * np.exp(-np.arange(24) / 5.0)
    dec = decrement_table(rows_from_rates(truth, 4000, 1), months=24)
    g = graduate(dec, order=2)
    f = g.frame
    crude_err = np.sqrt(np.mean((f["q_crude"] - truth) ** 2))
    grad_err = np.sqrt(np.mean((f["q_graduated"] - truth) ** 2))
    assert grad_err < crude_err
    t = g.tests.iloc[0]
    assert t["chi_square_p"] > 0.01 and t["signs_p"] > 0.01 and t["groups_p"] > 0.01
    assert np.allclose(f["expected"], f["exposure"] * f["m_graduated"])
    assert "Whittaker-Henderson" in g.summary()
    fixed = graduate(dec, order=3, smoothing=0.0)
    np.testing.assert_allclose(fixed.frame["q_graduated"], dec.frame["q"], rtol=1e-14)


def test_graduate_by_segment_and_errors():
    dec = decrement_table(competing_rows(800, 1), by="plan", months=12)
    g = graduate(dec, smoothing=5.0)
    assert set(g.frame["segment"]) == {"Orchard", "Seedling", "Sprout"}
    with pytest.raises(DataError, match="order must be 2 or 3"):
        graduate(dec, order=4)
    with pytest.raises(DataError, match="smoothing must be a number >= 0"):
        graduate(dec, smoothing=-1.0)
    with pytest.raises(DataError, match="needs a DecrementTable"):
        graduate(dec.frame)


# ---------------------------------------------------------------- choice of h, degrees of freedom
def test_three_points_hand_worked():
    """Three points, order 2: K = k' with k = (1, -2, 1), so by Sherman–Morrison
    (W + h k k')^-1 = W^-1 - h W^-1 k k' W^-1 / (1 + h s), s = k' W^-1 k, and
        tr A = 3 - h s / (1 + h s),   u - v = h W^-1 k (k'u) / (1 + h s),
        Σ w (u - v)^2 = h^2 (k'u)^2 s / (1 + h s)^2.
    With t = h s / (1 + h s): GCV = 3 (k'u)^2 / s whatever h (one residual direction),
    and UBRE / σ² = t^2 (k'u)^2 / (3 s σ²) + 1 - 2 t / 3, lowest at t = s σ² / (k'u)^2.
    w = (1, 2, 4): s = 1 + 4/2 + 1/4 = 3.25; u = (0.1, 0.3, 0.2): k'u = -0.3.
    σ² = 0.75 (k'u)^2 / s = 0.0675 / 3.25 puts the optimum at t = 3/4, h = 3/s = 0.9231,
    tr A = 2.25 (inside the range t = 1/2 .. 0.99 below)."""
    w = np.array([1.0, 2.0, 4.0])
    u = np.array([0.1, 0.3, 0.2])
    s, ku = 3.25, -0.3
    sigma2 = 0.75 * ku ** 2 / s
    for h in (0.1, 1.0, 7.0):
        t = h * s / (1 + h * s)
        assert hat_trace(w, h, 2) == pytest.approx(3 - t, rel=1e-12)
        assert gcv_score(u, w, h, 2) == pytest.approx(3 * ku ** 2 / s, rel=1e-9)
        assert ubre_score(u, w, h, 2, sigma2) == pytest.approx(
            t ** 2 * ku ** 2 / (3 * s * sigma2) + 1 - 2 * t / 3, rel=1e-12)
    c = choose_smoothing(u, w, 2, scale=sigma2, criterion="UBRE")
    assert c.criterion == "UBRE" and c.position == "interior"
    assert c.h == pytest.approx(3 / s, rel=1e-3)
    assert hat_trace(w, c.h, 2) == pytest.approx(2.25, abs=1e-3)
    # the range runs from tr A = m - 1/2 to tr A = order + 0.01: t = 1/2 and t = 0.99
    lo, hi = smoothing_range(w, 2)
    assert 10 ** lo == pytest.approx(1 / s, rel=1e-2)
    assert 10 ** hi == pytest.approx(99 / s, rel=1e-2)


def test_chi_square_without_degrees_of_freedom_has_no_p():
    """dof <= 0: nothing left to test, p is NaN (not 0 or 1); dof > 0: scipy's chi2.sf."""
    a, e = np.array([3.0, 5.0, 2.0]), np.array([2.5, 4.0, 3.0])
    x2 = 0.25 / 2.5 + 1 / 4 + 1 / 3
    assert chi_square_test(a, e, 0.0)[0] == pytest.approx(x2)
    assert math.isnan(chi_square_test(a, e, 0.0)[1])
    assert math.isnan(chi_square_test(a, e, -5.9)[1])
    assert chi_square_test(a, e, 1.5)[1] == pytest.approx(stats.chi2.sf(x2, 1.5), rel=1e-12)


def test_no_smoothing_reports_no_chi_square_test():
    """h = 0 keeps the crude rates: tr A = m (hand: A = I), so months - tr A = 0 and the
    chi-square p is not given; the summary says why."""
    dec = decrement_table(rows_from_rates(np.full(6, 0.1), 500, 3), months=6)
    g = graduate(dec, smoothing=0.0)
    t = g.tests.iloc[0]
    assert t["effective_parameters"] == 6 and t["chi_square_dof"] == 0
    assert math.isnan(t["chi_square_p"])
    assert "chi-square test not shown" in g.summary()
    assert any("not positive" in w for w in g.warnings)


def test_already_smooth_rates_get_heavy_smoothing():
    """Constant monthly q = 0.04 and 20,000 customers: the crude rates scatter only by
    Poisson noise around a straight line, so the choice sits at or near the polynomial end
    (few effective parameters), the chi-square test has positive degrees of freedom and does
    not reject (fixed seed)."""
    dec = decrement_table(rows_from_rates(np.full(24, 0.04), 20000, 5), months=24)
    g = graduate(dec, order=2)
    t = g.tests.iloc[0]
    assert t["effective_parameters"] < 4
    assert t["chi_square_dof"] > 18 and 0.01 < t["chi_square_p"] < 1
    assert t["smoothing"] > 100


def _open_data_table(loader):
    sksurv_datasets = pytest.importorskip("sksurv.datasets")
    _, y = getattr(sksurv_datasets, loader)()
    event, time = y.dtype.names
    return decrement_table(StartStop(np.zeros(len(y)), y[time].astype(float),
                                     y[event].astype(int)))


def test_veterans_no_longer_interpolates():
    """Veterans' lung cancer trial (Kalbfleisch and Prentice; as shipped by
    scikit-survival), 137 patients by month of follow-up: GCV keeps falling towards the
    crude rates (h at the bottom of any range, 32.9 effective parameters for 27 months
    with expected deaths, a negative chi-square df). The choice now falls back to the
    Poisson UBRE, which is lowest at the straight-line end: the graduation is then the
    weighted least-squares line (numpy.polyfit as the reference), with positive df."""
    dec = _open_data_table("load_veterans_lung_cancer")
    g = graduate(dec, order=2)
    t = g.tests.iloc[0]
    assert t["criterion"] == "UBRE" and t["optimum"] == "polynomial"
    assert t["effective_parameters"] < 2.1 and t["chi_square_dof"] > 25
    assert 0 <= t["chi_square_p"] <= 1
    f = g.frame
    pos = f["exposure"] > 0
    x = f["month"][pos].to_numpy(float)
    w = f["exposure"][pos].to_numpy(float)
    line = np.polyval(np.polyfit(x, f["q_crude"][pos], 1, w=np.sqrt(w / w.mean())), x)
    np.testing.assert_allclose(f["q_graduated"][pos].clip(lower=1e-12),
                               np.clip(line, 1e-12, None), atol=2e-3)
    assert any("smooth end" in w for w in g.warnings)
    assert f"effective parameters 2.0 of {t['months']} months, chi-square p = " in g.summary()


def test_whas500_choice_is_interior():
    """Worcester heart attack study (Hosmer, Lemeshow and May; scikit-survival's whas500),
    500 patients: GCV has an interior minimum (checked on a fine grid over the range), the
    effective parameters are well below the months and the chi-square p is reported."""
    dec = _open_data_table("load_whas500")
    g = graduate(dec, order=2)
    t = g.tests.iloc[0]
    assert t["criterion"] == "GCV" and t["optimum"] == "interior"
    seg = dec.segment(dec.segments[0])
    e = seg["exposure"].to_numpy(float)
    pos = e > 0
    w = np.where(pos, e / e[pos].mean(), 0.0)
    u0 = np.where(pos, seg["q"].to_numpy(float), 0.0)
    lo, hi = smoothing_range(w, 2)
    assert lo < math.log10(t["smoothing"]) < hi
    grid = [gcv_score(u0, w, 10 ** x, 2) for x in np.linspace(lo, hi, 200)]
    assert t["gcv"] <= min(grid) + 1e-15
    assert t["effective_parameters"] < 0.5 * t["months"]
    assert 0 < t["chi_square_p"] < 1
