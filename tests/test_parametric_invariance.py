"""Invariances of the parametric fits, naive second implementations, numerical derivatives.

Splitting a row at an interior time, weights versus duplicated rows, row order
and a change of time unit must leave every estimate unchanged (to 1e-8
relative: the fits converge to a Newton decrement below 1e-10, so estimates
agree to ~1e-9). Each kernel is held against a plain-loop version of its
formula; analytic gradients and Hessians against central differences
(scipy.optimize.approx_fprime, step 1e-6: error ~1e-6 relative).
"""

import math

import numpy as np
import pytest
from scipy import optimize

from retain import StartStop
from retain.kernels import parametric as K
from retain.models.parametric import fit_exponential, fit_piecewise, fit_weibull


def base_table(seed=0, n=400):
    rng = np.random.default_rng(seed)
    plan = rng.choice(["Seedling", "Orchard", "Meadow"], n)
    x = rng.normal(size=n)
    eta = -5.0 + 0.5 * (plan == "Orchard") + 0.3 * x
    T = (rng.exponential(size=n) / np.exp(eta)) ** (1 / 1.3)
    entry = rng.uniform(0, 30, n)
    keep = T > entry
    T, entry, plan, x = T[keep], entry[keep], plan[keep], x[keep]
    C = entry + rng.uniform(5, 400, T.shape[0])
    stop = np.minimum(T, C)
    d = (T <= C).astype(int)
    w = rng.integers(1, 4, T.shape[0]).astype(float)
    return StartStop(entry, stop, d, weight=w, customer_id=[f"c{i}" for i in range(len(T))],
                     covariates={"plan": plan, "x": x})


def split_rows(table, seed=1):
    """Split every row at a random interior time; the churn stays on the later part."""
    rng = np.random.default_rng(seed)
    u = rng.uniform(0.1, 0.9, table.n_rows)
    mid = table.start + u * (table.stop - table.start)
    idx = np.concatenate((np.arange(table.n_rows), np.arange(table.n_rows)))
    new = table.take(idx)
    n = table.n_rows
    start = np.concatenate((table.start, mid))
    stop = np.concatenate((mid, table.stop))
    churned = np.concatenate((np.zeros(n), table.churned))
    return StartStop(start, stop, churned, weight=new.weight,
                     customer_id=new.customer.values(), covariates=new.covariates)


FITS = {
    "exponential": lambda t: fit_exponential(t, ["plan", "x"]),
    "weibull": lambda t: fit_weibull(t, ["plan", "x"]),
    "piecewise": lambda t: fit_piecewise(t, [60.0, 150.0], ["plan", "x"]),
    "piecewise-closed": lambda t: fit_piecewise(t, [60.0, 150.0]),
}


@pytest.mark.parametrize("kind", sorted(FITS))
def test_splitting_rows_changes_nothing(kind):
    table = base_table()
    a, b = FITS[kind](table), FITS[kind](split_rows(table))
    np.testing.assert_allclose(b.params, a.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(b.cov, a.cov, rtol=1e-6, atol=1e-12)
    assert b.loglik == pytest.approx(a.loglik, rel=1e-10)
    assert b.bic == pytest.approx(a.bic, rel=1e-10)


@pytest.mark.parametrize("kind", sorted(FITS))
def test_weights_equal_duplicated_rows(kind):
    table = base_table(2)
    a, b = FITS[kind](table), FITS[kind](table.expanded())
    np.testing.assert_allclose(b.params, a.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(b.cov, a.cov, rtol=1e-6, atol=1e-12)
    assert b.loglik == pytest.approx(a.loglik, rel=1e-10)


@pytest.mark.parametrize("kind", sorted(FITS))
def test_row_order_does_not_matter(kind):
    table = base_table(3)
    perm = np.random.default_rng(9).permutation(table.n_rows)
    a, b = FITS[kind](table), FITS[kind](table.take(perm))
    np.testing.assert_allclose(b.params, a.params, rtol=1e-8, atol=1e-10)


def test_time_unit_changes_only_the_scale():
    """Tenure in days x 7 (weeks -> days): shape and hazard ratios unchanged, scale x 7."""
    table = base_table(4)
    scaled = StartStop(table.start * 7, table.stop * 7, table.churned, weight=table.weight,
                       covariates=table.covariates)
    a, b = fit_weibull(table, ["plan", "x"]), fit_weibull(scaled, ["plan", "x"])
    assert b.shape_value == pytest.approx(a.shape_value, rel=1e-8)
    np.testing.assert_allclose(b.params[2:], a.params[2:], rtol=1e-8)
    assert b.baseline_scale_days == pytest.approx(7 * a.baseline_scale_days, rel=1e-8)


# ------------------------------------------------------------------ naive versions
def naive_weibull_loglik(alpha, b0, beta, X, t1, t2, d, w):
    total = 0.0
    for i in range(len(t1)):
        eta = b0 + sum(beta[j] * X[i][j] for j in range(len(beta)))
        H = math.exp(eta) * (t2[i] ** alpha - t1[i] ** alpha)
        logh = math.log(alpha) + eta + (alpha - 1) * math.log(t2[i])
        total += w[i] * (d[i] * logh - H)
    return total


def naive_piecewise_loglik(a, beta, X, t1, t2, d, w, cuts):
    edges = [0.0] + list(cuts) + [math.inf]
    total = 0.0
    for i in range(len(t1)):
        lin = sum(beta[j] * X[i][j] for j in range(len(beta)))
        for k in range(len(edges) - 1):
            lo, hi = edges[k], edges[k + 1]
            expo = max(0.0, min(t2[i], hi) - max(t1[i], lo))
            total -= w[i] * math.exp(a[k] + lin) * expo
            if d[i] and lo < t2[i] <= hi:
                total += w[i] * (a[k] + lin)
    return total


def rows_sample(seed=5, n=300, p=3):
    rng = np.random.default_rng(seed)
    X = rng.normal(size=(n, p))
    t1 = np.where(rng.uniform(size=n) < 0.5, 0.0, rng.uniform(0, 1, n))
    t2 = t1 + rng.uniform(0.05, 2, n)
    d = (rng.uniform(size=n) < 0.4).astype(float)
    w = rng.uniform(0.5, 2, n)
    return X, t1, t2, d, w


def test_weibull_kernel_equals_naive_loop():
    X, t1, t2, d, w = rows_sample()
    rows = K.SurvivalRows.build(X, t1, t2, d, w)
    theta = np.array([-0.4, 0.3, 0.2, -0.1, 0.5])
    ll, _, _ = K.weibull_loglik(theta, rows)
    ref = naive_weibull_loglik(math.exp(0.3), -0.4, [0.2, -0.1, 0.5], X.tolist(), t1, t2, d, w)
    assert ll == pytest.approx(ref, rel=1e-12)
    ll_e, _, _ = K.exponential_loglik(theta[[0, 2, 3, 4]], rows)
    ref_e = naive_weibull_loglik(1.0, -0.4, [0.2, -0.1, 0.5], X.tolist(), t1, t2, d, w)
    assert ll_e == pytest.approx(ref_e, rel=1e-12)


def test_piecewise_kernel_equals_naive_loop():
    X, t1, t2, d, w = rows_sample(6)
    cuts = np.array([0.5, 1.2])
    rows = K.PiecewiseRows.build(X, t1, t2, d, w, cuts)
    theta = np.array([-0.2, 0.1, 0.4, 0.3, -0.2, 0.1])
    ll, _, _ = K.piecewise_loglik(theta, rows)
    ref = naive_piecewise_loglik(theta[:3], theta[3:], X.tolist(), t1, t2, d, w, cuts)
    assert ll == pytest.approx(ref, rel=1e-12)


def test_weibull_fit_equals_generic_optimiser_on_naive_likelihood():
    """The Newton fit against BFGS on the plain-loop likelihood (no derivatives given)."""
    table = base_table(7, n=150)
    fit = fit_weibull(table, ["x"])
    t1, t2, d, w, x = table.start, table.stop, table.churned, table.weight, table.numeric("x")
    X = x.reshape(-1, 1).tolist()

    def neg(p):
        return -naive_weibull_loglik(math.exp(p[1]), p[0], [p[2]], X, t1, t2, d, w)

    res = optimize.minimize(neg, fit.params + np.array([0.3, -0.1, 0.1]), method="BFGS",
                            options={"gtol": 1e-7})
    np.testing.assert_allclose(res.x, fit.params, rtol=2e-5, atol=2e-5)
    assert -res.fun == pytest.approx(fit.loglik, rel=1e-10)


# ------------------------------------------------------------------ derivatives
def numeric_check(fun, theta):
    _, g, h = fun(theta)
    ng = optimize.approx_fprime(theta, lambda z: fun(z)[0], 1e-6)
    nh = np.array([optimize.approx_fprime(theta, lambda z, i=i: fun(z)[1][i], 1e-6)
                   for i in range(theta.shape[0])])
    np.testing.assert_allclose(g, ng, rtol=1e-4, atol=1e-4 * np.max(np.abs(g)))
    np.testing.assert_allclose(h, nh, rtol=1e-4, atol=1e-4 * np.max(np.abs(h)))
    np.testing.assert_allclose(h, h.T, rtol=1e-12)


def test_weibull_gradient_and_hessian_numerically():
    X, t1, t2, d, w = rows_sample(8)
    rows = K.SurvivalRows.build(X, t1, t2, d, w)
    numeric_check(lambda th: K.weibull_loglik(th, rows), np.array([-0.3, 0.2, 0.1, -0.2, 0.3]))
    numeric_check(lambda th: K.weibull_loglik(th, rows), np.array([0.5, -0.6, 0.0, 0.4, -0.3]))


def test_exponential_gradient_and_hessian_numerically():
    X, t1, t2, d, w = rows_sample(9)
    rows = K.SurvivalRows.build(X, t1, t2, d, w)
    numeric_check(lambda th: K.exponential_loglik(th, rows), np.array([-0.3, 0.1, -0.2, 0.3]))


def test_piecewise_gradient_and_hessian_numerically():
    X, t1, t2, d, w = rows_sample(10)
    rows = K.PiecewiseRows.build(X, t1, t2, d, w, np.array([0.4, 1.0]))
    numeric_check(lambda th: K.piecewise_loglik(th, rows),
                  np.array([-0.2, 0.1, 0.3, 0.2, -0.1, 0.2]))


def test_no_covariate_weibull_kernel_has_two_parameters():
    _, t1, t2, d, w = rows_sample(11)
    rows = K.SurvivalRows.build(np.zeros((len(t1), 0)), t1, t2, d, w)
    numeric_check(lambda th: K.weibull_loglik(th, rows), np.array([-0.3, 0.2]))
