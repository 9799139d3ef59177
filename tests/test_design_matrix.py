"""Design-matrix coding: hand-worked small cases, the checks' messages, invariances."""

from __future__ import annotations

import numpy as np
import pytest

from retain import DataError, StartStop
from retain.models.design import design_matrix


def _table(n: int = 60, seed: int = 0, **extra) -> StartStop:
    rng = np.random.default_rng(seed)
    covs = {
        "plan": rng.choice(["Seedling", "Orchard", "Grove"], n, p=[0.5, 0.3, 0.2]),
        "price": rng.normal(20, 3, n),
    }
    covs.update(extra)
    return StartStop(np.zeros(n), rng.uniform(1, 10, n), rng.integers(0, 2, n), covariates=covs)


def test_hand_worked_coding():
    """Four rows written out: indicators against the most common level, numeric as is."""
    t = StartStop([0, 0, 0, 0], [1, 2, 3, 4], [1, 0, 1, 0],
                  covariates={"plan": ["Orchard", "Seedling", "Seedling", "Grove"],
                              "price": [10.0, 12.0, 14.0, 16.0]})
    d = design_matrix(t, ["plan", "price"])
    assert d.reference == {"plan": "Seedling"}
    assert d.columns == ("plan=Grove", "plan=Orchard", "price")
    assert d.labels == ("plan Grove vs Seedling", "plan Orchard vs Seedling", "price (per unit)")
    expected = np.array([[0, 1, 10], [0, 0, 12], [0, 0, 14], [1, 0, 16]], dtype=float)
    np.testing.assert_array_equal(d.X, expected)
    np.testing.assert_allclose(d.means, [0.25, 0.25, 13.0])
    assert d.terms == {"plan": slice(0, 2), "price": slice(2, 3)}
    assert d.levels["plan"] == ("Seedling", "Grove", "Orchard")
    np.testing.assert_array_equal(d.rows_for({"plan": "Grove", "price": 11}), [[1, 0, 11]])
    np.testing.assert_array_equal(d.rows_for({"plan": ["Seedling", "Orchard"], "price": 1}),
                                  [[0, 0, 1], [0, 1, 1]])


def test_reference_by_weight_and_ties_first_in_sort_order():
    """Most common by weight (so compressed == full); a tie goes to the first level."""
    t = StartStop([0, 0, 0], [1, 2, 3], [1, 0, 1], weight=[1, 1, 5],
                  covariates={"plan": ["Orchard", "Orchard", "Seedling"]})
    assert design_matrix(t, ["plan"]).reference == {"plan": "Seedling"}
    t2 = StartStop([0, 0], [1, 2], [1, 0], covariates={"plan": ["Seedling", "Orchard"]})
    assert design_matrix(t2, ["plan"]).reference == {"plan": "Orchard"}
    d = design_matrix(t2, ["plan"], reference={"plan": "Seedling"})
    assert d.labels == ("plan Orchard vs Seedling",)


def test_compressed_equals_full():
    t = _table(40)
    w = np.arange(1, 41) % 3 + 1.0
    tw = t.with_weight(w)
    d_full = design_matrix(tw.expanded(), ["plan", "price"])
    d_comp = design_matrix(tw, ["plan", "price"])
    assert d_full.columns == d_comp.columns
    np.testing.assert_allclose(d_full.means, d_comp.means, rtol=1e-12)


def test_row_order_does_not_matter():
    t = _table(50, seed=3)
    perm = np.random.default_rng(1).permutation(50)
    a = design_matrix(t, ["plan", "price"])
    b = design_matrix(t.take(perm), ["plan", "price"])
    assert a.columns == b.columns
    np.testing.assert_array_equal(a.X[perm], b.X)


def test_rows_for_table_matches_fit_coding():
    t = _table(30, seed=5)
    d = design_matrix(t, ["plan", "price"])
    np.testing.assert_array_equal(d.rows_for_table(t), d.X)
    sub = t.take(t.column("plan").codes == t.column("plan").levels.index("Grove"))
    np.testing.assert_array_equal(d.rows_for_table(sub)[:, :2],
                                  np.tile(d.rows_for({"plan": "Grove", "price": 0})[0, :2],
                                          (sub.n_rows, 1)))


def test_error_missing_covariate_lists_available():
    with pytest.raises(DataError, match=r"there is no column 'colour'.*plan, price"):
        design_matrix(_table(), ["colour"])


def test_error_no_variation():
    t = _table(20, flat=np.ones(20))
    with pytest.raises(DataError, match=r"covariate 'flat' has no variation \(every row is 1\)"):
        design_matrix(t, ["flat"])
    t2 = _table(20, region=np.array(["North"] * 20))
    with pytest.raises(DataError, match=r"'region' has no variation \(every row is 'North'\)"):
        design_matrix(t2, ["region"])


def test_error_missing_values_named_with_count():
    price = np.r_[np.nan, np.nan, np.ones(18)]
    price[5] = 3.0
    with pytest.raises(DataError, match=r"covariate 'gap' is missing on 2 of 20 rows"):
        design_matrix(_table(20, gap=price), ["gap"])
    region = np.array([None, "North"] + ["South"] * 18, dtype=object)
    with pytest.raises(DataError, match=r"covariate 'region' is missing on 1 of 20 rows"):
        design_matrix(_table(20, region=region), ["region"])


def test_error_collinear_names_columns():
    t = _table(40)
    t = t.with_columns(price_eur=0.9 * t.numeric("price") + 1.0)
    with pytest.raises(DataError, match=r"collinear: price, price_eur"):
        design_matrix(t, ["plan", "price", "price_eur"])
    # a second categorical that is a relabelling of plan
    mapping = {"Seedling": "a", "Orchard": "b", "Grove": "c"}
    box = np.array([mapping[v] for v in t.column("plan").values()])
    t2 = t.with_columns(box=box)
    with pytest.raises(DataError, match=r"collinear: plan=Grove, plan=Orchard, box=b, box=c"):
        design_matrix(t2, ["plan", "box"])


def test_error_unknown_level_in_profile_and_reference():
    d = design_matrix(_table(), ["plan", "price"])
    with pytest.raises(DataError, match=r"plan has no level 'Forest'"):
        d.rows_for({"plan": "Forest", "price": 1.0})
    with pytest.raises(DataError, match=r"no value for price"):
        d.rows_for({"plan": "Grove"})
    with pytest.raises(DataError, match=r"reference level 'Forest' of 'plan' does not occur"):
        design_matrix(_table(), ["plan"], reference={"plan": "Forest"})
