"""Discounting identities and the value kernel.

Timing convention under test: the margin of month k is received at the end
of month k if the customer is still active then, discounted by (1 + d)^-k,
with d the effective monthly rate (1 + annual)^(1/12) - 1.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import special

from retain.decisions.value import (
    NO_CAP_MONTHS,
    lifetime_value,
    value_sensitivity,
)
from retain.errors import ConfigError, ModelError
from retain.kernels import discount as kd
from retain.models.value_curves import ConstantRetention, FunctionCurve
from retain.units import DAYS_PER_MONTH


def test_monthly_rate_compounds_to_the_annual_rate() -> None:
    """(1 + d)^12 = 1 + annual: the definition of an effective monthly rate."""
    for annual in (0.0, 0.05, 0.10, 0.25):
        d = kd.monthly_rate(annual)
        assert (1 + d) ** 12 == pytest.approx(1 + annual, rel=1e-14)


@pytest.mark.parametrize("r", [0.5, 0.9, 0.97])
@pytest.mark.parametrize("annual", [0.0, 0.10, 0.30])
def test_geometric_closed_form(r: float, annual: float) -> None:
    """Constant retention r, margin m at the end of each period survived, per-period rate d:
    V = sum_k m r^k (1+d)^-k = m r / (1 + d - r)  (common practice; geometric series).

    Uncapped here means 1200 months, where r^1200 < 1e-15 for r <= 0.97, so the
    truncation error is below 1e-12 relative.
    """
    m = 12.5
    d = kd.monthly_rate(annual)
    lv = lifetime_value(ConstantRetention(r), margin_per_month=m, annual_discount_rate=annual,
                        horizon_months=None)
    assert lv.value == pytest.approx(m * r / (1 + d - r), rel=1e-10)
    assert lv.monthly_discount_rate == pytest.approx(d, rel=1e-15)


def test_geometric_closed_form_with_a_horizon_cap() -> None:
    """Finite geometric series: m r (1 - (r v)^H) / (1 + d - r) with v = 1/(1+d)."""
    r, m, annual, h = 0.92, 10.0, 0.10, 36
    d = kd.monthly_rate(annual)
    v = 1 / (1 + d)
    expected = m * r * (1 - (r * v) ** h) / (1 + d - r)
    lv = lifetime_value(ConstantRetention(r), margin_per_month=m, annual_discount_rate=annual,
                        horizon_months=h)
    assert lv.value == pytest.approx(expected, rel=1e-12)
    assert lv.survival_at_horizon == pytest.approx(r ** h, rel=1e-12)


def test_zero_discount_uncapped_is_margin_times_mean_months_kept_geometric() -> None:
    """At d = 0 and no cap, V = m E[N], N = whole months kept. For constant retention r,
    N is geometric with E[N] = r / (1 - r) (common practice)."""
    r, m = 0.85, 7.0
    lv = lifetime_value(ConstantRetention(r), margin_per_month=m, annual_discount_rate=0.0,
                        horizon_months=None)
    assert lv.value == pytest.approx(m * r / (1 - r), rel=1e-12)
    assert lv.expected_months == pytest.approx(r / (1 - r), rel=1e-12)


def test_zero_discount_uncapped_is_margin_times_mean_months_kept_sbg() -> None:
    """Shifted-beta-geometric: months kept N = T - 1 with E[T] = E[1/q] = (a + b - 1)/(a - 1)
    for q ~ Beta(a, b), a > 1 (Beta moment; Fader & Hardie 2007 model). So with d = 0 the
    uncapped value is m b / (a - 1). The 1200-month cut leaves a tail of about
    sum_{t>1200} S(t) ~ 1e-5 of the total at a = 3 (S(t) ~ t^-a), hence rel 1e-4."""
    a, b, m = 3.0, 4.0, 10.0

    def surv(days: np.ndarray) -> np.ndarray:
        t = np.floor(np.asarray(days) / DAYS_PER_MONTH + 1e-9)
        return np.exp(special.betaln(a, b + t) - special.betaln(a, b))

    lv = lifetime_value(FunctionCurve("sBG", surv), margin_per_month=m,
                        annual_discount_rate=0.0, horizon_months=None)
    assert lv.value == pytest.approx(m * b / (a - 1), rel=1e-4)


def test_exponential_curve_matches_geometric_with_q() -> None:
    """An exponential curve S(t) = exp(-lam t) read at month ends is geometric with
    r = exp(-lam * 30.4375)."""
    lam = 1 / 400.0
    r = math.exp(-lam * DAYS_PER_MONTH)
    d = kd.monthly_rate(0.08)
    lv = lifetime_value(FunctionCurve("exp", lambda t: np.exp(-lam * t)), margin_per_month=1.0,
                        annual_discount_rate=0.08, horizon_months=None)
    assert lv.value == pytest.approx(r / (1 + d - r), rel=1e-10)


def test_discounted_value_against_plain_loops() -> None:
    """Kernel vs a deliberately naive double loop (fixed seed)."""
    rng = np.random.default_rng(3)
    s = np.sort(rng.uniform(size=(5, 40)), axis=1)[:, ::-1]
    margin = rng.uniform(5, 20, size=40)
    f = kd.discount_factors(0.01, 40)
    got = kd.discounted_value(s, margin, f)
    cum = kd.cumulative_value(s, margin, f)
    for i in range(5):
        total = 0.0
        for k in range(40):
            total += s[i, k] * margin[k] / (1.01 ** (k + 1))
            assert cum[i, k] == pytest.approx(total, rel=1e-12)
        assert got[i] == pytest.approx(total, rel=1e-12)


def test_conditional_survival_edges() -> None:
    """S(t+u)/S(t); 0 where nobody is left; NaN stays NaN (an undefined curve is not 0)."""
    out = kd.conditional_survival(np.array([[0.5], [0.0], [np.nan]]),
                                  np.array([[0.25, 0.1], [0.0, 0.0], [0.1, 0.1]]))
    assert out[0].tolist() == [0.5, pytest.approx(0.2)]
    assert out[1].tolist() == [0.0, 0.0]
    assert np.isnan(out[2]).all()


def test_interval_from_draws_covers_the_delta_method() -> None:
    """ConstantRetention draws take logit r normal with se(logit r) = se / (r (1 - r)).
    The percentile interval of V(r) = m r / (1 + d - r) must agree with the delta-method
    interval V +- 1.96 |dV/dr| se within 10 % of its width at se = 0.002 (where V is
    close to linear in r); 2000 draws give a Monte Carlo error near 3 %."""
    r, se, m, annual = 0.9, 0.002, 10.0, 0.10
    d = kd.monthly_rate(annual)
    lv = lifetime_value(ConstantRetention(r, se=se), margin_per_month=m,
                        annual_discount_rate=annual, horizon_months=None, n_draws=2000)
    dv = m * (1 + d) / (1 + d - r) ** 2
    half = 1.959964 * dv * se
    assert lv.lower == pytest.approx(lv.value - half, abs=0.1 * half)
    assert lv.upper == pytest.approx(lv.value + half, abs=0.1 * half)
    assert lv.n_draws == 2000


def test_no_draws_means_no_interval_and_a_warning() -> None:
    lv = lifetime_value(ConstantRetention(0.9), margin_per_month=1.0, annual_discount_rate=0.1)
    assert math.isnan(lv.lower) and math.isnan(lv.upper)
    assert any("no interval" in w for w in lv.warnings)
    assert lv.interval_method.startswith("none")


def test_sensitivity_cells_equal_single_values() -> None:
    """Every cell of the grid equals lifetime_value with those inputs; value rises with the
    horizon and falls with the discount rate."""
    c = ConstantRetention(0.93, se=0.01)
    sens = value_sensitivity(c, margin_per_month=9.0, annual_discount_rates=(0.0, 0.1, 0.2),
                             horizons_months=(12, 60), n_draws=100)
    for _, row in sens.table.iterrows():
        one = lifetime_value(c, margin_per_month=9.0,
                             annual_discount_rate=row["annual_discount_rate"],
                             horizon_months=int(row["horizon_months"]), n_draws=100)
        assert row["value"] == pytest.approx(one.value, rel=1e-12)
        assert row["lower"] == pytest.approx(one.lower, rel=1e-12)
    piv = sens.pivot()
    assert (np.diff(piv.to_numpy(), axis=0) < 0).all()
    assert (np.diff(piv.to_numpy(), axis=1) > 0).all()


def test_uncapped_warns_when_survival_is_not_negligible() -> None:
    lv = lifetime_value(ConstantRetention(0.9999), margin_per_month=1.0,
                        annual_discount_rate=0.1, horizon_months=None)
    assert any(f"after {NO_CAP_MONTHS} months" in w for w in lv.warnings)


def test_error_texts() -> None:
    c = ConstantRetention(0.9)
    with pytest.raises(ConfigError, match="margin_per_month: must be a finite number >= 0"):
        lifetime_value(c, margin_per_month=-1.0, annual_discount_rate=0.1)
    with pytest.raises(ConfigError, match="horizon_months: must be a whole number >= 1"):
        lifetime_value(c, margin_per_month=1.0, annual_discount_rate=0.1, horizon_months=0)
    with pytest.raises(ConfigError, match="annual_discount_rate: must be above -1"):
        lifetime_value(c, margin_per_month=1.0, annual_discount_rate=-2.0)
    with pytest.raises(ModelError, match="is not a retention curve"):
        lifetime_value(object(), margin_per_month=1.0, annual_discount_rate=0.1)  # type: ignore[arg-type]
    undefined = FunctionCurve("short", lambda t: np.where(np.asarray(t) > 100, np.nan, 0.9))
    with pytest.raises(ModelError, match="is not defined at month 4 of the 12-month horizon"):
        lifetime_value(undefined, margin_per_month=1.0, annual_discount_rate=0.1,
                       horizon_months=12)
