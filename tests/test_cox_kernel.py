"""Fast Cox kernels held against deliberately naive implementations (plain loops over
risk sets, one churn time and one Efron step at a time) on fixed seeds, and analytic
derivatives checked numerically (scipy.optimize.check_grad, central differences).

The naive versions follow the textbook formulas directly (Efron 1977; Therneau &
Grambsch 2000, sec. 3.3 for weights and sec. 4.6 for score residuals): risk set
{start < t <= stop} of the stratum, tied churns E, Efron steps j = 0..m-1 with
denominators S0 - (j/m) T0 (m = weighted tie count for whole-number weights, the
row count with mean weight otherwise). Tolerances are round-off level (1e-9
relative): both versions sum the same terms in a different order.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import check_grad

from retain.kernels import cox as K


def _data(seed: int, n: int = 80, p: int = 3, whole: bool = True, strata: int = 1):
    rng = np.random.default_rng(seed)
    start = rng.integers(0, 6, n).astype(float)
    stop = start + rng.integers(1, 12, n)
    churned = (rng.uniform(size=n) < 0.6).astype(float)
    weight = rng.integers(1, 4, n).astype(float) if whole else rng.uniform(0.3, 2.5, n)
    X = rng.normal(size=(n, p))
    X[:, 0] = rng.integers(0, 2, n)  # a binary column, ties in risk score
    stratum = rng.integers(0, strata, n)
    offset = rng.normal(scale=0.3, size=n)
    return start, stop, churned, weight, X, stratum, offset


def _naive(start, stop, churned, weight, X, stratum, beta, offset, efron, whole):
    """Plain loops: log partial likelihood, score, information, score residuals."""
    n, p = X.shape
    eta = X @ beta + offset
    r = weight * np.exp(eta)
    ll, grad, info = 0.0, np.zeros(p), np.zeros((p, p))
    resid = np.zeros((n, p))
    for s in np.unique(stratum):
        ins = stratum == s
        for t in np.unique(stop[ins & (churned == 1)]):
            R = ins & (start < t) & (stop >= t)
            E = ins & (stop == t) & (churned == 1)
            D = weight[E].sum()
            if efron:
                m = int(round(D)) if whole else int(E.sum())
            else:
                m = 1
            omega = D / m
            S0 = r[R].sum()
            T0 = r[E].sum()
            S1 = (r[R, None] * X[R]).sum(0)
            T1 = (r[E, None] * X[E]).sum(0)
            S2 = np.einsum("i,ij,ik->jk", r[R], X[R], X[R])
            T2 = np.einsum("i,ij,ik->jk", r[E], X[E], X[E])
            ll += (weight[E] * eta[E]).sum()
            grad += (weight[E, None] * X[E]).sum(0)
            means = []
            for j in range(m):
                f = j / m if efron else 0.0
                a = S0 - f * T0
                b = S1 - f * T1
                c = S2 - f * T2
                ll -= omega * np.log(a)
                grad -= omega * b / a
                info += omega * (c / a - np.outer(b, b) / a**2)
                means.append(b / a)
                for i in np.flatnonzero(R):
                    g = (1 - f) if E[i] else 1.0
                    resid[i] -= r[i] * omega * g * (X[i] - b / a) / a
            xbarbar = np.mean(means, axis=0)
            for i in np.flatnonzero(E):
                resid[i] += weight[i] * (X[i] - xbarbar)
    return ll, grad, info, resid


@pytest.mark.parametrize("efron", [True, False])
@pytest.mark.parametrize("whole", [True, False])
@pytest.mark.parametrize("strata", [1, 3])
def test_kernel_matches_naive_loops(efron, whole, strata):
    start, stop, churned, weight, X, stratum, offset = _data(1 + strata, whole=whole,
                                                             strata=strata)
    beta = np.array([0.4, -0.3, 0.2])
    index = K.build_risk_index(start, stop, churned, weight, stratum, strata)
    ll, g, H = K.cox_derivatives(index, np.asfortranarray(X), weight, churned, beta, offset,
                                 efron)
    ll0, g0, H0, R0 = _naive(start, stop, churned, weight, X, stratum, beta, offset, efron,
                             whole)
    assert ll == pytest.approx(ll0, rel=1e-10)
    np.testing.assert_allclose(g, g0, rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(H, H0, rtol=1e-9, atol=1e-10)
    R = K.score_residuals(index, X, weight, churned, beta, offset, efron)
    np.testing.assert_allclose(R, R0, rtol=1e-9, atol=1e-10)
    np.testing.assert_allclose(R.sum(0), g, rtol=1e-9, atol=1e-10)
    cl = np.arange(start.shape[0]) // 4
    U = K.score_residuals(index, X, weight, churned, beta, offset, efron, cl, cl.max() + 1)
    np.testing.assert_allclose(U, np.stack([np.bincount(cl, R0[:, j]) for j in range(3)], 1),
                               rtol=1e-9, atol=1e-10)
    # in any row order (for the robust variance): the same sum of outer products
    Ua = K.score_residuals(index, X, weight, churned, beta, offset, efron, cl, cl.max() + 1,
                           any_order=True)
    np.testing.assert_allclose(Ua.T @ Ua, U.T @ U, rtol=1e-9, atol=1e-10)
    # rows not grouped by cluster take the sorting path
    mixed = np.random.default_rng(7).integers(0, 25, start.shape[0])
    U = K.score_residuals(index, X, weight, churned, beta, offset, efron, mixed, 25)
    np.testing.assert_allclose(U, np.stack([np.bincount(mixed, R0[:, j], 25)
                                            for j in range(3)], 1), rtol=1e-9, atol=1e-10)


@pytest.mark.parametrize("efron", [True, False])
def test_gradient_and_hessian_numerically(efron):
    """check_grad on the score; central differences of the score for the information."""
    start, stop, churned, weight, X, stratum, offset = _data(7, n=120, strata=2)
    index = K.build_risk_index(start, stop, churned, weight, stratum, 2)
    Xf = np.asfortranarray(X)

    def f(b):
        return K.cox_derivatives(index, Xf, weight, churned, b, offset, efron, False)[0]

    def g(b):
        return K.cox_derivatives(index, Xf, weight, churned, b, offset, efron, False)[1]

    beta = np.array([0.3, -0.5, 0.1])
    assert check_grad(f, g, beta, epsilon=1e-6) < 1e-4 * np.linalg.norm(g(beta)) + 1e-5
    h = 1e-5
    num = np.column_stack([(g(beta + h * e) - g(beta - h * e)) / (2 * h) for e in np.eye(3)])
    H = K.cox_derivatives(index, Xf, weight, churned, beta, offset, efron)[2]
    np.testing.assert_allclose(-num, H, rtol=1e-6, atol=1e-6)


def test_compressed_equals_full_efron():
    """Whole-number weights count as tied churns: weights == duplicated rows, exactly."""
    start, stop, churned, weight, X, stratum, offset = _data(3)
    rep = np.repeat(np.arange(start.shape[0]), weight.astype(int))
    beta = np.array([0.2, 0.1, -0.4])
    a = K.cox_derivatives(K.build_risk_index(start, stop, churned, weight), np.asfortranarray(X),
                          weight, churned, beta, offset, True)
    ones = np.ones(rep.shape[0])
    b = K.cox_derivatives(K.build_risk_index(start[rep], stop[rep], churned[rep], ones),
                          np.asfortranarray(X[rep]), ones, churned[rep], beta, offset[rep], True)
    assert a[0] == pytest.approx(b[0], rel=1e-12)
    np.testing.assert_allclose(a[1], b[1], rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(a[2], b[2], rtol=1e-10, atol=1e-12)


def _naive_concordance(start, stop, churned, weight, eta, stratum):
    conc = disc = tied = comp = 0.0
    for i in np.flatnonzero(churned == 1):
        t = stop[i]
        for j in range(start.shape[0]):
            if stratum[j] != stratum[i] or not (start[j] < t <= stop[j]):
                continue
            if churned[j] == 1 and stop[j] == t:
                continue  # tied churns are not comparable
            w = weight[i] * weight[j]
            comp += w
            if eta[i] > eta[j]:
                conc += w
            elif eta[i] == eta[j]:
                tied += w
            else:
                disc += w
    return conc, disc, tied, comp


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_concordance_matches_naive_pairs(seed):
    start, stop, churned, weight, X, stratum, _ = _data(seed, n=90, strata=2)
    eta = np.round(X @ np.array([1.0, 0.5, 0.0]), 1)  # rounded: ties in risk score
    index = K.build_risk_index(start, stop, churned, weight, stratum, 2)
    fast = K.concordance_counts(index, eta, churned, weight)
    slow = _naive_concordance(start, stop, churned, weight, eta, stratum)
    np.testing.assert_allclose(fast, slow, rtol=1e-12)
    assert slow[2] > 0  # the case has tied risk scores


def test_schoenfeld_efron_mean_matches_naive():
    """Efron Schoenfeld residuals: x_i minus the average of the Efron-step means."""
    start, stop, churned, weight, X, stratum, offset = _data(5)
    beta = np.array([0.1, 0.2, 0.3])
    index = K.build_risk_index(start, stop, churned, weight)
    S = K.schoenfeld_residuals(index, X, weight, beta, offset, True)
    r = weight * np.exp(X @ beta + offset)
    for row, k, s in zip(index.event_rows, index.event_k, S, strict=True):
        t = index.times[k]
        R = (start < t) & (stop >= t)
        E = (stop == t) & (churned == 1)
        m = int(round(weight[E].sum()))
        means = [((r[R, None] * X[R]).sum(0) - j / m * (r[E, None] * X[E]).sum(0))
                 / (r[R].sum() - j / m * r[E].sum()) for j in range(m)]
        np.testing.assert_allclose(s, X[row] - np.mean(means, axis=0), rtol=1e-9, atol=1e-12)


def test_newton_reports_history_and_converges():
    start, stop, churned, weight, X, stratum, offset = _data(9, n=200)
    index = K.build_risk_index(start, stop, churned, weight)
    res = K.newton_cox(index, np.asfortranarray(X), weight, churned, offset)
    assert res.converged
    assert res.history[-1][2] < 1e-9  # last step below 1e-9 standard errors
    assert np.max(np.abs(res.grad)) < 1e-8 * np.abs(res.loglik)
    short = K.newton_cox(index, np.asfortranarray(X), weight, churned, offset, max_iter=1)
    assert not short.converged and len(short.history) == 1


def test_half_day_lookup_equals_searchsorted():
    rng = np.random.default_rng(0)
    times = np.unique(rng.integers(0, 400, 50) / 2.0)
    values = rng.integers(0, 900, 10_000) / 2.0
    np.testing.assert_array_equal(K.positions_right(times, values),
                                  np.searchsorted(times, values, side="right"))
    frac = values + 0.1
    np.testing.assert_array_equal(K.positions_right(times, frac),
                                  np.searchsorted(times, frac, side="right"))
    # past the grid's last band: one off-grid value late in a long column
    late = values.copy()
    late[-1] = 3.3
    np.testing.assert_array_equal(K.positions_right(times, late),
                                  np.searchsorted(times, late, side="right"))
    many = np.tile(values, 20)  # several bands
    out = np.empty(many.shape[0], dtype=np.int32)
    K.positions_right(times, many, out=out)
    np.testing.assert_array_equal(out, np.searchsorted(times, many, side="right"))


def test_event_order_equals_stable_argsort():
    """The radix path for half-day churn times gives argsort's stable order exactly."""
    rng = np.random.default_rng(1)
    for t in (rng.integers(1, 900, 20_000) / 2.0, rng.uniform(0, 300, 20_000),
              rng.integers(0, 40_000, 20_000) / 1.0):
        np.testing.assert_array_equal(K._event_order(t), np.argsort(t, kind="stable"))


def test_centred_row_ordered_design_equals_default_minus_means():
    """The Cox fit codes its design centred and C-ordered (one copy of X); it must equal
    the default coding minus the weighted means, and raise the same collinearity error."""
    from retain import StartStop
    from retain.errors import DataError
    from retain.models.design import design_matrix

    rng = np.random.default_rng(3)
    n = 70_000  # more than one band of rows
    plan = rng.choice(["Grove", "Orchard", "Seedling"], n)
    price = rng.normal(20, 3, n)
    w = rng.integers(1, 4, n).astype(float)
    table = StartStop(np.zeros(n), rng.integers(1, 50, n), rng.integers(0, 2, n), weight=w,
                      covariates={"plan": plan, "price": price, "twice": 2 * price + 1})
    a = design_matrix(table, ["plan", "price"])
    b = design_matrix(table, ["plan", "price"], centre=True, order="C")
    assert b.X.flags.c_contiguous and b.is_centred and not a.is_centred
    np.testing.assert_allclose(b.means, a.means, rtol=1e-12)
    np.testing.assert_allclose(b.X, a.X - a.means, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(b.centred(), a.centred(), rtol=1e-12, atol=1e-12)
    with pytest.raises(DataError, match="collinear: price, twice"):
        design_matrix(table, ["plan", "price", "twice"], centre=True, order="C")
