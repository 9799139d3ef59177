"""Actual versus expected: the Breslow identity with a Cox basis, a constant-hazard basis
worked by hand, DuckDB = numpy, the exact interval and the credibility standard."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _actuarial_data import competing_rows
from scipy import stats
from statsmodels.stats.rates import confint_poisson

from retain.errors import DataError, ModelError
from retain.models.cox import fit_cox
from retain.models.decrements import decrement_table
from retain.models.expected import (
    actual_vs_expected,
    decrement_basis,
    full_credibility_standard,
)
from retain.units import DAYS_PER_MONTH


class ConstantHazard:
    """A basis worked by hand: hazard `rate` per day for everyone."""

    description = "constant hazard"

    def __init__(self, rate: float) -> None:
        self.rate = rate

    def expected_events(self, table):
        return table.weight * self.rate * (table.stop - table.start)


def test_cox_basis_total_expected_equals_observed():
    """Breslow baseline: Σ_i w_i exp(eta_i) [H0(stop_i) - H0(start_i)] = Σ churns exactly
    (martingale residuals sum to zero), on the whole book and after cutting rows at tenure-
    and calendar-month edges (the basis hazard is additive over time)."""
    t = competing_rows(600, 31)
    fit = fit_cox(t, ["plan", "channel", "score"])
    ae = actual_vs_expected(t, fit, by=["plan", "tenure_month", "calendar_month"])
    f = ae.frame
    assert ae.total_expected == pytest.approx(t.n_events, rel=1e-10)
    for dim in ("plan", "tenure_month", "calendar_month"):
        block = ae.dimension(dim)
        assert block["expected"].sum() == pytest.approx(t.n_events, rel=1e-10), dim
        assert block["actual"].sum() == pytest.approx(t.n_events, abs=1e-9), dim
    assert not ae.warnings
    assert f.iloc[0]["ratio"] == pytest.approx(1.0, rel=1e-10)


def test_constant_hazard_by_hand_and_by_month():
    """Expected = rate x weighted days at risk; per tenure month it equals rate x the
    decrement table's exposure (two modules checked against each other)."""
    t = competing_rows(300, 32)
    rate = 0.002
    ae = actual_vs_expected(t, ConstantHazard(rate), by=["tenure_month", "calendar_month"])
    assert ae.total_expected == pytest.approx(rate * np.sum(t.weight * (t.stop - t.start)),
                                              rel=1e-12)
    dec = decrement_table(t).frame
    month = ae.dimension("tenure_month")
    np.testing.assert_allclose(month["expected"], rate * DAYS_PER_MONTH * dec["exposure"],
                               rtol=1e-10)
    np.testing.assert_allclose(month["actual"], dec["churns"], atol=1e-12)
    cal = ae.dimension("calendar_month")
    dcal = decrement_table(t, axis="calendar").frame
    np.testing.assert_allclose(cal["expected"], rate * DAYS_PER_MONTH * dcal["exposure"],
                               rtol=1e-10)
    np.testing.assert_allclose(cal["actual"], dcal["churns"], atol=1e-12)
    assert list(cal["level"]) == list(dcal["label"])


def test_interval_and_flag_match_statsmodels_exact_poisson():
    """A/E interval = statsmodels confint_poisson(A, E, 'exact-c'); the flag says 'above'
    exactly when the lower bound exceeds 1."""
    t = competing_rows(500, 33)
    ae = actual_vs_expected(t, ConstantHazard(0.0015), by=["plan"], level=0.90)
    for row in ae.frame.itertuples():
        lo, hi = confint_poisson(int(round(row.actual)), row.expected, method="exact-c",
                                 alpha=0.10)
        assert row.lower == pytest.approx(lo, rel=1e-10)
        assert row.upper == pytest.approx(hi, rel=1e-10)
        assert row.flag == ("above" if lo > 1 else "below" if hi < 1 else "")
    assert (ae.frame["flag"] != "").any()  # the check can fail: some level is flagged


def test_credibility_standard_and_blending():
    """Full credibility: (z_0.95 / 0.05)^2 = 1082.2 expected claims for +-5 % at 90 %
    (common practice), quoted as 1,082; Z = min(1, sqrt(E / 1082))."""
    z = stats.norm.ppf(0.95)
    assert full_credibility_standard() == pytest.approx((z / 0.05) ** 2, rel=1e-12)
    assert round(full_credibility_standard()) == 1082
    t = competing_rows(500, 34)
    ae = actual_vs_expected(t, ConstantHazard(0.0015), by=["plan"], credibility=True)
    f = ae.frame
    assert ae.full_credibility == 1082.0
    np.testing.assert_allclose(f["credibility"], np.minimum(1, np.sqrt(f["expected"] / 1082)))
    book = f["ratio"].iloc[0]
    np.testing.assert_allclose(f["blended"], f["credibility"] * f["ratio"]
                               + (1 - f["credibility"]) * book)
    small = actual_vs_expected(t, ConstantHazard(0.0015), by=["plan"], credibility=True,
                               full_credibility=1e9).frame
    np.testing.assert_allclose(small["blended"][1:], book, rtol=1e-4)


def test_duckdb_and_numpy_agree_with_a_decrement_basis(tmp_path):
    """A stored decrement table as basis: E = Σ_k exposure_k m_k in DuckDB, and the
    per-row integral of the piecewise rate in numpy; same numbers. The basis built on the
    same rows gives A = E in total exactly. Its CSV read back gives the same basis."""
    t = competing_rows(800, 35)
    path = t.to_parquet(tmp_path / "exp.parquet")
    basis = decrement_table(competing_rows(800, 36), months=18)
    a = actual_vs_expected(t, basis, by=["plan", "tenure_month"])
    b = actual_vs_expected(path, basis, by=["plan", "tenure_month"])
    assert a.engine == "numpy" and b.engine == "duckdb"
    assert list(a.frame["level"]) == list(b.frame["level"])
    for col in ("actual", "expected", "ratio", "lower", "upper"):
        np.testing.assert_allclose(a.frame[col], b.frame[col], rtol=1e-10, err_msg=col)
    assert any("basis's last rate" in w for w in a.warnings)
    own = actual_vs_expected(t, decrement_table(t))
    assert own.total_expected == pytest.approx(own.total_actual, rel=1e-10)
    basis.to_csv(tmp_path / "basis.csv")
    stored = decrement_basis(tmp_path / "basis.csv")
    c = actual_vs_expected(t, stored, by=["plan"])
    np.testing.assert_allclose(c.frame["expected"], a.frame["expected"][:4], rtol=1e-12)
    q_only = decrement_basis(pd.DataFrame({"month": [0, 1], "q": [0.1, 0.05]}))
    assert q_only.monthly_rates()[0] == pytest.approx(-np.log(0.9))


def test_segmented_basis_uses_each_segments_rates():
    t = competing_rows(900, 37)
    basis = decrement_table(t, by="plan")
    ae = actual_vs_expected(t, basis, by=["plan"])
    block = ae.dimension("plan")
    np.testing.assert_allclose(block["expected"], block["actual"], rtol=1e-10)


def test_errors_name_the_rule():
    t = competing_rows(50, 1)
    with pytest.raises(ModelError, match="cannot serve as a basis"):
        actual_vs_expected(t, object())
    with pytest.raises(DataError, match="level must be between 0 and 1"):
        actual_vs_expected(t, ConstantHazard(0.01), level=95)
    with pytest.raises(DataError, match="the DuckDB engine takes a decrement-table basis"):
        actual_vs_expected(t, ConstantHazard(0.01), engine="duckdb")
    with pytest.raises(DataError, match="needs columns 'month' and 'm'"):
        decrement_basis(pd.DataFrame({"month": [0]}))
    with pytest.raises(DataError, match="months must run 0, 1, 2"):
        decrement_basis(pd.DataFrame({"month": [0, 2], "m": [0.1, 0.1]}))

    class Bad:
        def expected_events(self, table):
            return -np.ones(table.n_rows)

    with pytest.raises(ModelError, match="negative or non-finite"):
        actual_vs_expected(t, Bad())
    ae = actual_vs_expected(t, ConstantHazard(0.01), by=["plan"])
    assert "Actual vs expected against constant hazard" in ae.summary()
    assert "qualified actuaries" in ae.caution
    with pytest.raises(DataError, match="there is no dimension 'region'"):
        ae.dimension("region")
