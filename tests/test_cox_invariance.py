"""Invariances of fit_cox (fixed seeds and hypothesis).

- Splitting every row at random interior times changes nothing: coefficients,
  model and clustered robust SEs, baseline hazard (the (start, stop] rule: a row
  entering at t is not at risk at t, so the two pieces cover the same risk sets).
- Weights equal duplicated rows (the compressed table gives the full table's fit).
- Row order does not matter.
- Scaling a covariate by c scales its coefficient and SE by 1/c.
Tolerance 1e-9 relative: the same sums in a different order, converged to
below 1e-9 SE, differ only by round-off.
"""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from retain import StartStop
from retain.models.cox import fit_cox

TOL = 1e-9


def _customers(seed: int, n_cust: int = 150) -> StartStop:
    """Customers with 1-3 contiguous rows, a time-varying plan and a price, some delayed entry."""
    rng = np.random.default_rng(seed)
    rows = []
    for c in range(n_cust):
        t = float(rng.integers(0, 20)) if rng.uniform() < 0.3 else 0.0
        region = rng.choice(["North", "South", "West"])
        k = int(rng.integers(1, 4))
        for j in range(k):
            stop = t + float(rng.integers(1, 40))
            plan = rng.choice(["Seedling", "Orchard", "Grove"], p=[0.5, 0.3, 0.2])
            price = float(rng.normal(20, 4))
            last = j == k - 1
            churn = int(last and rng.uniform() < 0.6 + 0.2 * (plan == "Grove"))
            rows.append((f"c{c}", t, stop, churn, plan, price, region))
            t = stop
    cols = list(zip(*rows, strict=True))
    return StartStop(cols[1], cols[2], cols[3], customer_id=cols[0],
                     covariates={"plan": np.array(cols[4]), "price": np.array(cols[5]),
                                 "region": np.array(cols[6])})


COV = ["plan", "price", "region"]


def _split_rows(table: StartStop, rng: np.random.Generator, whole_days: bool) -> StartStop:
    idx, starts, stops, churn = [], [], [], []
    for i in range(table.n_rows):
        a, b = table.start[i], table.stop[i]
        if whole_days and b - a >= 2:
            cuts = np.unique(rng.integers(a + 1, b, size=2)).astype(float)
        elif not whole_days:
            cuts = np.sort(rng.uniform(a, b, size=int(rng.integers(0, 3))))
            cuts = cuts[(cuts > a) & (cuts < b)]
        else:
            cuts = np.zeros(0)
        edges = np.concatenate(([a], cuts, [b]))
        for j in range(edges.shape[0] - 1):
            idx.append(i)
            starts.append(edges[j])
            stops.append(edges[j + 1])
            churn.append(table.churned[i] if j == edges.shape[0] - 2 else 0)
    sub = table.take(np.array(idx))
    return StartStop(starts, stops, churn, customer_id=sub.customer.values(),
                     covariates=sub.covariates)


PROFILE = {"plan": "Orchard", "price": 22.0, "region": "West"}
GRID = np.arange(0.0, 130.0, 3.0)


def _same_curve(a, b, stratum=None):
    """Predicted retention for a stated profile (the baseline itself is held at the
    row-weighted column means, which move when rows are split)."""
    prof = {k: v for k, v in PROFILE.items() if k in a.covariates}
    ra = a.predict_retention(prof, GRID, stratum=stratum)["retention"]
    rb = b.predict_retention(prof, GRID, stratum=stratum)["retention"]
    np.testing.assert_allclose(ra, rb, rtol=TOL)


def _same_fit(a, b, rtol=TOL):
    np.testing.assert_allclose(a.coef, b.coef, rtol=rtol, atol=1e-12)
    np.testing.assert_allclose(a.se_model, b.se_model, rtol=rtol)
    np.testing.assert_allclose(a.se_robust, b.se_robust, rtol=rtol)
    assert a.loglik == b.loglik or abs(a.loglik / b.loglik - 1) < rtol


def test_splitting_rows_changes_nothing():
    table = _customers(1)
    rng = np.random.default_rng(5)
    for ties in ("efron", "breslow"):
        base = fit_cox(table, COV, ties=ties)
        for whole in (True, False):
            split = _split_rows(table, rng, whole)
            assert split.n_rows > table.n_rows
            fit = fit_cox(split, COV, ties=ties)
            _same_fit(base, fit)
            _same_curve(base, fit)


def test_splitting_with_strata():
    table = _customers(2)
    split = _split_rows(table, np.random.default_rng(0), True)
    a = fit_cox(table, ["plan", "price"], strata="region")
    b = fit_cox(split, ["plan", "price"], strata="region")
    _same_fit(a, b)
    for s in a.stratum_labels:
        _same_curve(a, b, stratum=s)


@settings(max_examples=15, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_splitting_hypothesis(seed):
    """The reference level is fixed: the default (most common level by weight, i.e. by
    row count) can itself move when rows are split, which changes what is compared."""
    table = _customers(seed, n_cust=60)
    split = _split_rows(table, np.random.default_rng(seed + 1), seed % 2 == 0)
    ref = {"plan": "Seedling"}
    _same_fit(fit_cox(table, ["plan", "price"], reference=ref),
              fit_cox(split, ["plan", "price"], reference=ref), rtol=1e-8)


def test_weights_equal_duplicated_rows():
    """A compressed table (weights, no customer_id) and its expansion give one fit,
    including the by-row robust errors (a weight-w row stands for w independent rows)."""
    table = _customers(3)
    rng = np.random.default_rng(2)
    w = rng.integers(1, 4, table.n_rows).astype(float)
    compressed = StartStop(table.start, table.stop, table.churned, weight=w,
                           covariates=table.covariates)
    full = compressed.expanded()
    for ties in ("efron", "breslow"):
        a = fit_cox(compressed, COV, ties=ties)
        b = fit_cox(full, COV, ties=ties)
        _same_fit(a, b)
        assert a.n_events == b.n_events
        np.testing.assert_allclose(a.baseline()["hazard"], b.baseline()["hazard"], rtol=TOL)
        _same_curve(a, b)
        assert a.robust_clusters == "row"


def test_row_order_does_not_matter():
    table = _customers(4)
    perm = np.random.default_rng(9).permutation(table.n_rows)
    a = fit_cox(table, COV)
    b = fit_cox(table.take(perm), COV)
    _same_fit(a, b)
    np.testing.assert_allclose(b.martingale_residuals(), a.martingale_residuals()[perm],
                               rtol=1e-9, atol=1e-12)


def test_scaling_a_covariate():
    table = _customers(5)
    c = 12.5
    scaled = table.with_columns(price=table.numeric("price") * c)
    a = fit_cox(table, COV)
    b = fit_cox(scaled, COV)
    j = a.columns.index("price")
    assert b.coef[j] == np.float64(b.coef[j])
    np.testing.assert_allclose(b.coef[j], a.coef[j] / c, rtol=TOL)
    np.testing.assert_allclose(b.se_model[j], a.se_model[j] / c, rtol=TOL)
    others = [k for k in range(len(a.coef)) if k != j]
    np.testing.assert_allclose(b.coef[others], a.coef[others], rtol=TOL)
    assert abs(a.loglik - b.loglik) < 1e-9 * abs(a.loglik)
