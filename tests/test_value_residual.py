"""Residual value of the active base, DERL, and the finance export."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import special

from retain.data.table import StartStop
from retain.decisions.value import (
    CAUTION,
    EXPORT_COLUMNS,
    SegmentValues,
    lifetime_value,
    residual_value,
)
from retain.errors import DataError
from retain.kernels import discount as kd
from retain.models.parametric import fit_weibull
from retain.models.renewal import fit_renewal
from retain.models.value_curves import ConstantRetention, curve_from_model, curve_from_renewal
from retain.publish.finance import finance_export
from retain.units import DAYS_PER_MONTH

#: Fader & Hardie (2007, Journal of Interactive Marketing 21(1), Table 1), "regular"
#: customers alive at the start of years 0..7 of a cohort of 1000 (from memory).
REGULAR = [1000, 631, 468, 382, 326, 289, 262, 241]


def _base(tenures: list[float], churned_too: bool = True) -> StartStop:
    """Active customers at the given tenures (one row each, price 10 or 20), plus two churned
    customers who must not count."""
    n = len(tenures)
    stop = list(tenures) + ([40.0, 90.0] if churned_too else [])
    ch = [0] * n + ([1, 1] if churned_too else [])
    price = [10.0 if i % 2 else 20.0 for i in range(n)] + ([99.0, 99.0] if churned_too else [])
    seg = ["a" if i < n // 2 else "b" for i in range(n)] + (["a", "b"] if churned_too else [])
    return StartStop(np.zeros(len(stop)), stop, ch, customer_id=[f"c{i}" for i in range(len(stop))],
                     covariates={"price": np.array(price), "segment": np.array(seg)})


def test_memoryless_curve_values_every_customer_alike() -> None:
    """Constant retention r is memoryless: S(t+k)/S(t) = r^k for every tenure, so each active
    customer is worth m_i r / (1 + d - r) uncapped (geometric closed form, common practice)."""
    r, annual = 0.9, 0.1
    d = kd.monthly_rate(annual)
    table = _base([10.0, 100.0, 400.0, 1000.0])
    bv = residual_value(table, ConstantRetention(r), margin_rate=0.5, price="price",
                        annual_discount_rate=annual, horizon_months=None, n_draws=20)
    unit = r / (1 + d - r)
    assert len(bv.segments) == 1
    seg = bv.segments[0]
    assert seg.customers == 4
    assert seg.total == pytest.approx(0.5 * (20 + 10 + 20 + 10) * unit, rel=1e-10)
    assert seg.mean_margin_per_month == pytest.approx(7.5)
    by = residual_value(table, ConstantRetention(r), by=["segment"], margin_per_month=3.0,
                        annual_discount_rate=annual, horizon_months=None, n_draws=20)
    assert [s.segment for s in by.segments] == ["a", "b"]
    assert [s.customers for s in by.segments] == [2, 2]
    assert by.total == pytest.approx(4 * 3.0 * unit, rel=1e-10)


def test_residual_at_tenure_zero_is_the_new_customer_value() -> None:
    """A customer observed at tenure ~0 is worth what a new customer is worth."""
    fit = fit_weibull(_sample_table())
    curve = curve_from_model(fit)
    table = StartStop([0.0], [1e-9], [0], customer_id=["x"], covariates={"price": [10.0]})
    bv = residual_value(table, curve, margin_per_month=10.0, annual_discount_rate=0.1,
                        horizon_months=60, n_draws=10)
    lv = lifetime_value(curve, margin_per_month=10.0, annual_discount_rate=0.1,
                        horizon_months=60, n_draws=10)
    assert bv.total == pytest.approx(lv.value, rel=1e-6)


def _sample_table() -> StartStop:
    rng = np.random.default_rng(8)
    t = 400 * rng.weibull(0.8, size=800)
    c = np.minimum(t, 700.0)
    return StartStop(np.zeros(800), np.maximum(c, 0.5), (t < 700).astype(int),
                     customer_id=[f"s{i}" for i in range(800)])


def test_derl_closed_form_equals_direct_summation_of_the_sbg_survivor() -> None:
    """Fader & Hardie (2010, Marketing Science 29(1) 85-93, eq. 6): for a customer who has made
    n renewals, DERL = sum_{t>=n+1} S(t)/S(n) (1+d)^-(t-n-1), S(t) = B(a, b+t)/B(a, b).
    Here with a monthly-period sBG fitted to FH 2007's 'regular' survivors. In retain's
    end-of-month timing the residual value per unit margin is DERL / (1 + d); it must equal
    (i) the closed form through residual_value (no cap), (ii) retain's month-by-month sum
    (1200-month cap: the dropped tail, about S(1200)/S(n) v^1200 / (1 - v), is 5e-7 of the
    total at d = 1 %/month, hence rel 2e-6), (iii) a plain loop over the survivor
    function written here with scipy.special.betaln."""
    fit = fit_renewal(REGULAR, period_days=DAYS_PER_MONTH)
    a, b = fit.alpha, fit.beta
    curve = curve_from_renewal(fit)
    d = 0.01
    annual = (1 + d) ** 12 - 1
    renewals = [0, 1, 4, 11]
    tenures = [n * DAYS_PER_MONTH + 3.0 for n in renewals]  # mid-period: n renewals made
    table = StartStop(np.zeros(4), tenures, np.zeros(4), customer_id=list("wxyz"),
                      covariates={"who": np.array(list("wxyz"))})
    closed = residual_value(table, curve, by=["who"], margin_per_month=1.0,
                            annual_discount_rate=annual, horizon_months=None, n_draws=10)
    summed = residual_value(table, curve, by=["who"], margin_per_month=1.0,
                            annual_discount_rate=annual, horizon_months=1200, n_draws=10)
    assert all("closed form" in s.method for s in closed.segments)
    assert all("sum over months" in s.method for s in summed.segments)
    for n, c_seg, s_seg in zip(renewals, closed.segments, summed.segments, strict=True):
        loop = 0.0
        log_sn = special.betaln(a, b + n) - special.betaln(a, b)
        for t in range(n + 1, n + 5001):
            loop += np.exp(special.betaln(a, b + t) - special.betaln(a, b) - log_sn) \
                / (1 + d) ** (t - n - 1)
        assert fit.derl(d, n) == pytest.approx(loop, rel=1e-8)
        assert c_seg.total == pytest.approx(loop / (1 + d), rel=1e-8)
        assert s_seg.total == pytest.approx(loop / (1 + d), rel=2e-6)


def test_row_order_and_splitting_earlier_rows_change_nothing() -> None:
    """Only the last row of an open spell counts: permuting rows or splitting a customer's
    earlier history at an interior time leaves the base value unchanged."""
    fit = fit_weibull(_sample_table())
    curve = curve_from_model(fit)
    kw = dict(margin_rate=0.35, price="price", annual_discount_rate=0.1, horizon_months=36,
              n_draws=30)
    base = _base([15.0, 80.0, 300.0, 610.0])
    ref = residual_value(base, curve, **kw)
    perm = base.take(np.random.default_rng(2).permutation(base.n_rows))
    assert residual_value(perm, curve, **kw).total == pytest.approx(ref.total, rel=1e-12)
    f = base.to_frame()
    first = f.iloc[[2]].copy()
    first["stop"] = 100.0
    second = f.iloc[[2]].copy()
    second["start"] = 100.0
    split = pd.concat([f.drop(index=2), first, second], ignore_index=True)
    got = residual_value(StartStop.from_frame(split), curve, **kw)
    assert got.total == pytest.approx(ref.total, rel=1e-12)
    assert got.segments[0].lower == pytest.approx(ref.segments[0].lower, rel=1e-12)


def test_residual_errors() -> None:
    curve = ConstantRetention(0.9)
    compressed = StartStop([0.0, 0.0], [5.0, 9.0], [0, 1])
    with pytest.raises(DataError, match="has no customer_id"):
        residual_value(compressed, curve, margin_per_month=1.0)
    gone = StartStop([0.0], [5.0], [1], customer_id=["a"])
    with pytest.raises(DataError, match="no customer is active"):
        residual_value(gone, curve, margin_per_month=1.0)


def test_missing_segment_curve_is_a_warning() -> None:
    table = _base([10.0, 20.0, 30.0, 40.0])
    bv = residual_value(table, {"a": ConstantRetention(0.9)}, by=["segment"],
                        margin_per_month=1.0, n_draws=5)
    assert [s.segment for s in bv.segments] == ["a"]
    assert any("segment 'b': no curve" in w for w in bv.warnings)


def test_finance_export_files(tmp_path) -> None:
    """One CSV and one JSON: a row per figure and segment, every assumption a column, the
    caution on every row and at the top of the JSON; the files agree with each other."""
    c = ConstantRetention(0.9, se=0.01)
    lv = lifetime_value(c, margin_per_month=5.0, annual_discount_rate=0.1, horizon_months=60,
                        segment="all", customers=10, n_draws=50)
    new = SegmentValues(by=(), curve="constant", values=(lv,), as_of="2026-11-30")
    base = residual_value(_base([10.0, 50.0]), c, margin_per_month=5.0, n_draws=50,
                          as_of="2026-11-30")
    out = finance_export(tmp_path / "run", new_customers=new, base=base)
    frame = pd.read_csv(out.csv_path)
    assert list(frame.columns) == list(EXPORT_COLUMNS)
    assert frame["figure"].tolist() == ["new customer", "active base"]
    assert (frame["caution"] == CAUTION).all()
    assert (frame["as_of"] == "2026-11-30").all()
    assert frame.loc[1, "total"] == pytest.approx(base.total)
    assert frame.loc[0, "value_per_customer"] == pytest.approx(lv.value)
    assert frame["annual_discount_rate"].tolist() == [0.1, 0.1]
    doc = json.loads((tmp_path / "run" / "finance_value.json").read_text())
    assert doc["caution"] == CAUTION
    assert "not accounting figures" in doc["caution"] and "actuar" in doc["caution"]
    assert doc["rows"][1]["total"] == pytest.approx(base.total)
    assert doc["rows"][0]["total"] is None
    assert doc["assumptions"]["as_of"] == "2026-11-30"
