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
    choose_smoothing,
    difference_matrix,
    gcv_score,
    grouping_of_signs_test,
    hat_trace,
    signs_test,
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
    h, g = choose_smoothing(U, W, 2)
    grid = [gcv_score(U, W, 10 ** e, 2) for e in np.linspace(-4, 10, 300)]
    assert g <= min(grid) + 1e-15


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
