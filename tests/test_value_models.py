"""Value from retain's fitted models, on scikit-survival's whas500 (open dataset).

Each check holds the value machinery against an independent path through the
model's own public prediction, or against the delta method / Greenwood.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from sksurv.datasets import load_whas500

from retain.data.table import StartStop
from retain.decisions.value import (
    lifetime_value,
    segment_curves,
    value_by_segment,
)
from retain.errors import ModelError
from retain.kernels import discount as kd
from retain.models.cox import fit_cox
from retain.models.curves import kaplan_meier
from retain.models.parametric import fit_exponential, fit_weibull
from retain.models.value_curves import curve_from_cox, curve_from_kaplan_meier, curve_from_model
from retain.units import DAYS_PER_MONTH


@pytest.fixture(scope="module")
def whas() -> StartStop:
    """whas500 (Hosmer, Lemeshow & May 2008; shipped with scikit-survival): lenfol days,
    fstat = died. 'gender' as text; a made-up constant price column for margins."""
    X, y = load_whas500()
    n = len(y)
    return StartStop(np.zeros(n), y["lenfol"], y["fstat"].astype(int),
                     customer_id=[f"p{i}" for i in range(n)],
                     covariates={"gender": X["gender"].astype(str).to_numpy(),
                                 "price": np.where(X["gender"].astype(str) == "1", 30.0, 20.0)})


def _by_hand(survival: np.ndarray, m: float, annual: float) -> float:
    d = (1 + annual) ** (1 / 12) - 1
    k = np.arange(1, survival.shape[0] + 1)
    return float(np.sum(m * survival / (1 + d) ** k))


def test_weibull_value_equals_its_own_prediction_summed(whas: StartStop) -> None:
    """V = m sum_k S(k months) (1+d)^-k with S from fit.predict_retention, summed in a loop."""
    fit = fit_weibull(whas)
    lv = lifetime_value(curve_from_model(fit), margin_per_month=10.0, annual_discount_rate=0.1,
                        horizon_months=120, n_draws=50)
    s = fit.predict_retention(None, np.arange(1, 121) * DAYS_PER_MONTH).retention
    assert lv.value == pytest.approx(_by_hand(s, 10.0, 0.1), rel=1e-12)
    assert lv.lower < lv.value < lv.upper
    assert lv.extrapolated_months == pytest.approx(120 - fit.follow_up / DAYS_PER_MONTH)
    assert any("extrapolated" in w for w in lv.warnings)


def test_exponential_value_interval_agrees_with_the_delta_method(whas: StartStop) -> None:
    """Exponential fit: V(b0) = m sum_k exp(-exp(b0) k M) v^k. Delta method:
    se(V) = |dV/db0| se(b0). The draws' percentile interval must match V +- 1.96 se(V)
    within 10 % of the half-width (1500 draws: Monte Carlo error ~4 %; V nearly linear
    in b0 over +- 2 se since se(b0) ~ 0.07)."""
    fit = fit_exponential(whas)
    b0, se = float(fit.params[0]), float(math.sqrt(fit.cov[0, 0]))
    d = kd.monthly_rate(0.1)
    k = np.arange(1, 61)

    def value(b: float) -> float:
        return float(np.sum(np.exp(-np.exp(b) * k * DAYS_PER_MONTH) / (1 + d) ** k))

    grad = (value(b0 + 1e-6) - value(b0 - 1e-6)) / 2e-6
    half = 1.959964 * abs(grad) * se
    lv = lifetime_value(curve_from_model(fit), margin_per_month=1.0, annual_discount_rate=0.1,
                        horizon_months=60, n_draws=1500)
    assert lv.value == pytest.approx(value(b0), rel=1e-10)
    assert lv.lower == pytest.approx(lv.value - half, abs=0.1 * half)
    assert lv.upper == pytest.approx(lv.value + half, abs=0.1 * half)


def test_kaplan_meier_curve_and_its_draws(whas: StartStop) -> None:
    """The KM value curve reads the KM steps; the draws' spread of S(t) matches Greenwood's
    standard error within 10 % (2000 draws: Monte Carlo error of an SD ~1.6 %)."""
    km = kaplan_meier(whas)
    curve = curve_from_kaplan_meier(km)
    days = np.array([10.0, 100.0, 365.0, 1000.0, 1800.0])
    np.testing.assert_allclose(curve.survival(days), km.at(days), rtol=1e-14)
    draws = curve.draws(2000, 11)
    assert draws is not None
    at = np.array([f(days) for f in draws])
    se = km.se[np.searchsorted(km.times, days, side="right") - 1]
    np.testing.assert_allclose(at.std(axis=0), se, rtol=0.10)


def test_kaplan_meier_without_tail_refuses_to_extrapolate(whas: StartStop) -> None:
    curve = curve_from_kaplan_meier(kaplan_meier(whas))
    with pytest.raises(ModelError, match="add a parametric tail"):
        lifetime_value(curve, margin_per_month=1.0, annual_discount_rate=0.1,
                       horizon_months=120)


def test_kaplan_meier_with_weibull_tail(whas: StartStop) -> None:
    """Up to the join: KM. Past it: S_km(join) * S_w(t) / S_w(join)."""
    km = kaplan_meier(whas)
    fit = fit_weibull(whas)
    curve = curve_from_kaplan_meier(km, curve_from_model(fit), min_at_risk=30)
    join = curve.join_days
    assert km.at_risk_at(join)[0] >= 30
    before = np.array([50.0, join])
    np.testing.assert_allclose(curve.survival(before), km.at(before), rtol=1e-14)
    t = np.array([join + 400.0, 4000.0])
    sw = fit.predict_retention(None, np.r_[join, t]).retention
    np.testing.assert_allclose(curve.survival(t), km.at(join)[0] * sw[1:] / sw[0], rtol=1e-12)
    lv = lifetime_value(curve, margin_per_month=1.0, annual_discount_rate=0.1,
                        horizon_months=120, n_draws=100)
    assert lv.lower < lv.value < lv.upper


def test_cox_curve_is_its_prediction_and_stops_at_the_last_churn(whas: StartStop) -> None:
    fit = fit_cox(whas, ["gender"])
    head = curve_from_cox(fit, {"gender": "1"})
    days = np.array([30.0, 400.0, 1500.0])
    expect = fit.predict_retention({"gender": "1"}, days)["retention"].to_numpy()
    np.testing.assert_allclose(head.survival(days), expect, rtol=1e-14)
    last = float(fit.baseline()["time"].max())
    assert np.isnan(head.survival(np.array([last + 1.0])))[0]
    tail = curve_from_model(fit_weibull(whas, ["gender"]), {"gender": "1"})
    joined = curve_from_cox(fit, {"gender": "1"}, tail)
    assert np.isfinite(joined.survival(np.array([last + 500.0])))[0]
    lv = lifetime_value(joined, margin_per_month=1.0, annual_discount_rate=0.1,
                        horizon_months=120, n_draws=100)
    assert lv.lower < lv.value < lv.upper


def test_many_points_use_a_grid_without_loss(whas: StartStop) -> None:
    """More than 4096 distinct tenures are read off a geometric grid, log H linear in log t:
    exact for a Weibull up to rounding (1e-10); the step (Cox) path reads a half-day grid and
    is exact for jumps on whole days."""
    fit = fit_weibull(whas)
    curve = curve_from_model(fit)
    days = np.random.default_rng(5).uniform(0, 3000, size=6000)
    exact = fit.predict_retention(None, days).retention
    np.testing.assert_allclose(curve.survival(days), exact, rtol=1e-10)
    cox = fit_cox(whas, ["gender"])
    step = curve_from_cox(cox, {"gender": "0"})
    last = float(cox.baseline()["time"].max())
    d2 = np.round(np.random.default_rng(6).uniform(0, last, size=6000), 1)
    ref = cox.predict_retention({"gender": "0"}, d2)["retention"].to_numpy()
    np.testing.assert_allclose(step.survival(d2), ref, rtol=1e-14)


def test_value_by_segment_is_per_segment_fits(whas: StartStop) -> None:
    """Plumbing: each segment's value is lifetime_value on a Weibull fitted to that segment,
    margin = margin_rate x the segment's time-weighted price."""
    spec = {"curve": "weibull", "margin_rate": 0.35, "price": "price",
            "annual_discount_rate": 0.1, "horizon_months": 36}
    sv = value_by_segment(whas, spec, ["gender"], n_draws=50)
    assert [v.segment for v in sv.values] == ["0", "1"]
    for v, price in zip(sv.values, (20.0, 30.0), strict=True):
        sub = whas.take(whas.column("gender").values() == v.segment)
        ref = lifetime_value(curve_from_model(fit_weibull(sub)), margin_per_month=0.35 * price,
                             annual_discount_rate=0.1, horizon_months=36, n_draws=50)
        assert v.value == pytest.approx(ref.value, rel=1e-12)
        assert v.margin_per_month == pytest.approx(0.35 * price)
        assert v.customers == sub.n_customers
    frame = sv.to_frame()
    assert {"segment", "value", "lower", "upper", "curve", "margin_basis"} <= set(frame.columns)


@pytest.mark.parametrize("kind", ["exponential", "km_weibull_tail", "cox", "renewal"])
def test_every_curve_kind_values_every_segment(whas: StartStop, kind: str) -> None:
    curves, _ = segment_curves(whas, ["gender"], kind)
    assert sorted(curves) == ["0", "1"]
    sv = value_by_segment(whas, {"curve": kind, "margin_per_month": 5.0,
                                 "annual_discount_rate": 0.1, "horizon_months": 24},
                          ["gender"], curves=curves, n_draws=30)
    for v in sv.values:
        assert 0 < v.value < 5.0 * 24


def test_weights_equal_duplicated_customers(whas: StartStop) -> None:
    """Invariance: weight 2 on every row = every customer present twice (new ids); the
    compressed form (no customer ids, weights) gives the same values and counts."""
    spec = {"curve": "weibull", "margin_rate": 0.35, "price": "price",
            "annual_discount_rate": 0.1, "horizon_months": 36}
    f = whas.to_frame()
    twice = f.copy()
    twice["customer_id"] = twice["customer_id"] + "b"
    dup = StartStop.from_frame(pd.concat([f, twice], ignore_index=True))
    weighted = whas.with_weight(np.full(whas.n_rows, 2.0))
    compressed = StartStop(whas.start, whas.stop, whas.churned, weight=np.full(whas.n_rows, 2.0),
                           covariates=whas.covariates)
    ref = value_by_segment(dup, spec, ["gender"], n_draws=40)
    for other in (weighted, compressed):
        got = value_by_segment(other, spec, ["gender"], n_draws=40)
        for a, b in zip(ref.values, got.values, strict=True):
            assert a.value == pytest.approx(b.value, rel=1e-8)
            assert a.lower == pytest.approx(b.lower, rel=1e-6)
            assert a.customers == b.customers


def test_results_serialise(whas: StartStop) -> None:
    """Every value result turns into JSON and a table."""
    import json

    from retain.decisions.planning import plan_experiment
    from retain.decisions.value import base_value_by_segment, value_sensitivity

    spec = {"curve": "weibull", "margin_per_month": 4.0, "annual_discount_rate": 0.1,
            "horizon_months": 24}
    curve = curve_from_model(fit_weibull(whas))
    for result in (value_by_segment(whas, spec, ["gender"], n_draws=20),
                   base_value_by_segment(whas, spec, ["gender"], n_draws=20),
                   value_sensitivity(curve, margin_per_month=4.0, n_draws=20),
                   plan_experiment(curve, 0.8, follow_up_months=12.0)):
        assert isinstance(json.loads(result.to_json()), dict)
        assert len(result.to_frame()) >= 1
        assert isinstance(result.summary(), str)
