"""The helpers every model shares: Newton's method with step halving.

Outside references: scipy.optimize (its Rosenbrock function with the known
maximiser at (1, 1), and a general-purpose minimiser on a Poisson
log-likelihood); small cases worked by hand in the comments.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize

from retain.kernels.newton import RULES, hessian_objective, newton_maximize


def _quadratic(centre: np.ndarray, A: np.ndarray):
    """f(x) = -(x - m)'A(x - m)/2: gradient -A(x - m), information A."""
    def objective(x: np.ndarray, full: bool):
        r = x - centre
        return -0.5 * float(r @ A @ r), -(A @ r), A, None
    return objective


@pytest.mark.parametrize("rule", RULES)
def test_quadratic_converges_after_one_full_step(rule):
    # hand-worked: the Newton step from any x is m - x exactly, so the first step lands
    # on the maximum and the next iteration finds a zero step (decrement 0, 0 SE)
    A = np.array([[2.0, 0.5], [0.5, 1.0]])
    m = np.array([1.0, -3.0])
    res = newton_maximize(_quadratic(m, A), np.zeros(2), rule=rule, tol=1e-12)
    assert res.converged
    assert res.iterations == 2
    assert res.history[0].halvings == 0 and res.history[0].step_length == 1.0
    np.testing.assert_allclose(res.params, m, rtol=0, atol=1e-12)
    assert res.loglik == pytest.approx(0.0, abs=1e-20)
    np.testing.assert_array_equal(res.info, A)
    np.testing.assert_array_equal(res.hessian, -A)
    # the starting point is kept for the likelihood-ratio and score tests
    assert res.start_loglik == pytest.approx(-0.5 * float(m @ A @ m))


def test_a_step_that_overshoots_is_halved():
    # f(x) = -sqrt(1 + x^2): f' = -x/s, information 1/s^3 (s = sqrt(1 + x^2)), so the
    # Newton step from x is -x s^2 and the full step lands on -x^3. From x = 2 that is
    # -8, where f = -sqrt(65) < f(2) = -sqrt(5): halved once, to 2 - 10/2 = -3, still
    # lower (-sqrt(10)); twice, to 2 - 10/4 = -0.5 (f = -sqrt(1.25)), accepted.
    def objective(x: np.ndarray, full: bool):
        s = float(np.sqrt(1.0 + x[0] ** 2))
        return -s, np.array([-x[0] / s]), np.array([[1.0 / s ** 3]]), None

    res = newton_maximize(objective, np.array([2.0]), rule="decrement", tol=1e-14)
    first = res.history[0]
    assert first.halvings == 2 and first.step_length == 0.25
    assert first.as_dict()["step_length"] == 0.25
    assert res.halvings >= 2
    assert res.converged
    assert abs(res.params[0]) < 1e-6  # the maximum is at 0


@pytest.mark.parametrize("rule", RULES)
def test_rosenbrock_maximum_against_scipy(rule):
    # scipy.optimize.rosen has its minimum 0 at (1, 1) (scipy's documentation); it is
    # not concave, so the decrement rule adds a ridge where the Hessian is not definite
    def objective(x: np.ndarray, full: bool):
        return -optimize.rosen(x), -optimize.rosen_der(x), optimize.rosen_hess(x), None

    start = np.array([-1.2, 1.0])   # the classic starting point
    res = newton_maximize(objective, start, rule=rule, tol=1e-14 if rule == "decrement"
                          else 1e-9, max_iter=200)
    ref = optimize.minimize(optimize.rosen, start, jac=optimize.rosen_der,
                            hess=optimize.rosen_hess, method="trust-exact")
    assert res.converged and ref.success
    np.testing.assert_allclose(res.params, ref.x, rtol=0, atol=1e-6)
    np.testing.assert_allclose(res.params, [1.0, 1.0], rtol=0, atol=1e-8)


def test_poisson_loglik_against_scipy_minimize():
    # Poisson regression log-likelihood sum(y * eta - exp(eta)), eta = X b, in the
    # (value, gradient, hessian) form the parametric likelihoods use
    rng = np.random.default_rng(3)
    X = np.column_stack([np.ones(400), rng.normal(size=(400, 2))])
    y = rng.poisson(np.exp(X @ np.array([0.3, -0.5, 0.2])))

    def fun(b: np.ndarray, derivatives: bool = True):
        eta = X @ b
        mu = np.exp(eta)
        ll = float(y @ eta - mu.sum())
        if not derivatives:
            return ll, None, None
        return ll, X.T @ (y - mu), -(X.T * mu) @ X

    res = newton_maximize(hessian_objective(fun), np.zeros(3), max_step=5.0)
    ref = optimize.minimize(lambda b: -fun(b)[0], np.zeros(3), jac=lambda b: -fun(b)[1],
                            method="BFGS", options={"gtol": 1e-10})
    assert res.converged
    np.testing.assert_allclose(res.params, ref.x, rtol=0, atol=1e-6)
    assert res.loglik >= -ref.fun - 1e-9
    assert np.max(np.abs(res.grad)) < 1e-8


def test_non_convergence_is_reported_with_history():
    def objective(x: np.ndarray, full: bool):
        return -optimize.rosen(x), -optimize.rosen_der(x), optimize.rosen_hess(x), None

    res = newton_maximize(objective, np.array([-1.2, 1.0]), max_iter=2)
    assert not res.converged
    assert res.iterations == 2 and len(res.history) == 2
    assert [h.iteration for h in res.history] == [0, 1]
    assert [h.as_row()[0] for h in res.history] == [1, 2]


def test_singular_information_stops_with_a_note():
    # f(x, y) = -(x + y - 1)^2 / 2 has a line of maxima: its information [[1, 1], [1, 1]]
    # cannot be inverted
    def objective(x: np.ndarray, full: bool):
        r = x[0] + x[1] - 1.0
        return -0.5 * r * r, np.array([-r, -r]), np.ones((2, 2)), None

    res = newton_maximize(objective, np.zeros(2), rule="standard_errors")
    assert not res.converged
    assert res.note == "information not invertible"
    assert np.isnan(res.history[-1].as_row()[2])


def test_a_step_that_never_improves_is_reported():
    # the value is NaN everywhere but the start: every trial step fails, 40 halvings
    def objective(x: np.ndarray, full: bool):
        value = 0.0 if not x.any() else float("nan")
        return value, np.array([1.0]), np.array([[1.0]]), None

    res = newton_maximize(objective, np.zeros(1), max_halvings=40)
    assert not res.converged
    assert res.note == "step halving failed"
    assert res.history[-1].halvings == 41
    assert res.history[-1].as_dict()["note"] == "step halving failed"
    np.testing.assert_array_equal(res.params, [0.0])


def test_unknown_rule_is_refused():
    with pytest.raises(ValueError, match="rule"):
        newton_maximize(_quadratic(np.zeros(1), np.eye(1)), np.zeros(1), rule="gradient")


def test_half_day_grid_indices():
    # hand-worked: 0, 0.5 and 3 days are half-day cells 0, 1 and 6; anything else
    # (a third of a day, a negative or missing time) is off the grid
    from retain.kernels.timegrid import half_day_grid, half_days

    np.testing.assert_array_equal(half_days(np.array([0.0, 0.5, 3.0])), [0, 1, 6])
    for bad in ([0.0, 1 / 3], [-0.5, 1.0], [np.nan, 1.0], [np.inf]):
        assert half_days(np.array(bad)) is None
    start, stop = np.array([0.0, 2.0]), np.array([0.5, 7.0])
    i_start, i_stop, top = half_day_grid(start, stop)
    np.testing.assert_array_equal(i_start, [0, 4])
    np.testing.assert_array_equal(i_stop, [1, 14])
    assert top == 14
    assert half_day_grid(start, stop + 0.25) is None
    assert half_day_grid(start + 0.25, stop) is None


def test_exposure_by_row_hand_worked_and_summed_by_band():
    # hand-worked: bands (0, 30], (30, 90], (90, inf); the row (10, 100] spends 20, 60 and
    # 10 days in them and exits in band 2; (30, 30.5] spends 0.5 days in band 1 only
    from retain.kernels.exposure import band_exposure, exposure_by_row

    edges = np.array([0.0, 30.0, 90.0, np.inf])
    expo, exit_band = exposure_by_row(np.array([10.0, 30.0]), np.array([100.0, 30.5]), edges)
    np.testing.assert_array_equal(expo, [[20.0, 60.0, 10.0], [0.0, 0.5, 0.0]])
    np.testing.assert_array_equal(exit_band, [2, 1])
    # summed by group, the per-row split equals the difference-array sum of band_exposure
    rng = np.random.default_rng(4)
    lo = rng.integers(0, 300, 2000) / 2.0
    hi = lo + rng.integers(1, 400, 2000) / 2.0
    w = rng.uniform(0.5, 2.0, 2000)
    group = rng.integers(0, 3, 2000)
    finite = np.array([0.0, 30.0, 90.0, 1000.0])
    total, _ = band_exposure(lo, hi, w, finite, group, 3)
    rows, _ = exposure_by_row(lo, hi, finite)
    for g in range(3):
        np.testing.assert_allclose(total[g], (w[group == g, None] * rows[group == g]).sum(0),
                                   rtol=1e-12)


def test_one_column_labeller_for_segments_curves_and_strata():
    # hand-worked: numbers are coded by their distinct finite values, ascending, written
    # with "g"; a missing value has code -1 (and its own "(missing)" segment)
    from retain.data.table import Categorical
    from retain.models._segments import _labels_of, column_codes

    codes, levels = column_codes(np.array([9.5, 12.0, np.nan, 9.5]))
    np.testing.assert_array_equal(codes, [0, 1, -1, 0])
    assert levels == ("9.5", "12")
    cat = Categorical(np.array([1, -1, 0], dtype=np.int32), ("annual", "monthly"))
    codes, levels = column_codes(cat)
    np.testing.assert_array_equal(codes, [1, -1, 0])
    assert levels == ("annual", "monthly")
    codes, labels = _labels_of(cat)
    np.testing.assert_array_equal(codes, [1, 2, 0])
    assert labels == ["annual", "monthly", "(missing)"]
