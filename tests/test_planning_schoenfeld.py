"""Events, customers and months for an experiment (Schoenfeld 1983, Biometrics 39(2))."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate
from statsmodels.stats.power import NormalIndPower

from retain.decisions.planning import events_needed, plan_experiment
from retain.errors import ConfigError, ModelError
from retain.kernels import power as kd
from retain.models.value_curves import ConstantRetention, FunctionCurve
from retain.units import DAYS_PER_MONTH


def test_schoenfeld_worked_value_hr_07() -> None:
    """HR 0.7, 80 % power, two-sided 5 %, 1:1 -> about 247 events.

    By hand: z_0.975 = 1.959964, z_0.80 = 0.841621, sum 2.801585, squared 7.848878;
    log(0.7) = -0.356675, squared 0.127217; p(1-p) = 0.25;
    D = 7.848878 / (0.25 * 0.127217) = 246.79 -> 247.
    """
    d = events_needed(0.7, 0.8, 0.05, 1.0)
    by_hand = 7.848878 / (0.25 * 0.356675 ** 2)
    assert d == pytest.approx(by_hand, rel=1e-5)
    assert math.ceil(d) == 247


def test_schoenfeld_allocation_two_to_one() -> None:
    """2:1 allocation: p = 2/3, p(1-p) = 2/9, D = 7.848878 / (2/9 * 0.127217) = 277.6."""
    d = events_needed(0.7, 0.8, 0.05, 2.0)
    assert d == pytest.approx(7.848878 / (2 / 9 * 0.356675 ** 2), rel=1e-5)
    assert d > events_needed(0.7, 0.8, 0.05, 1.0)


@pytest.mark.parametrize("hr,power,alpha,alloc", [(0.7, 0.8, 0.05, 1.0), (0.85, 0.9, 0.05, 1.0),
                                                  (1.25, 0.8, 0.01, 0.5)])
def test_schoenfeld_matches_statsmodels_normal_power(hr: float, power: float, alpha: float,
                                                     alloc: float) -> None:
    """Schoenfeld's D is the size of a one-sample two-sided z test with effect
    |log HR| sqrt(p(1-p)); statsmodels' NormalIndPower(ratio=0) solves that test. It also
    counts the far tail (power ~1e-7 here), hence rel 1e-4."""
    p = alloc / (1 + alloc)
    effect = abs(math.log(hr)) * math.sqrt(p * (1 - p))
    ref = NormalIndPower().solve_power(effect_size=effect, alpha=alpha, power=power, ratio=0)
    assert events_needed(hr, power, alpha, alloc) == pytest.approx(ref, rel=1e-4)


def test_power_and_detectable_hr_invert_the_events() -> None:
    d = events_needed(0.8, 0.85, 0.05, 1.0)
    assert kd.schoenfeld_power(d, 0.8, 0.05, 0.5) == pytest.approx(0.85, abs=1e-9)
    assert kd.detectable_hazard_ratio(d, 0.85, 0.05, 0.5) == pytest.approx(0.8, rel=1e-9)


def test_plan_fixed_follow_up_by_hand() -> None:
    """Constant retention 0.95 a month, 12 months: P_c = 1 - 0.95^12, P_t = 1 - 0.95^(12 HR);
    customers = ceil(D / ((P_c + P_t) / 2))."""
    plan = plan_experiment(ConstantRetention(0.95), 0.8, follow_up_months=12.0,
                           signups_per_month=500.0)
    d = math.ceil(events_needed(0.8))
    pc = 1 - 0.95 ** 12
    pt = 1 - 0.95 ** (12 * 0.8)
    assert plan.events == d == 631
    assert plan.churn_probability_control == pytest.approx(pc, rel=1e-12)
    assert plan.churn_probability_treatment == pytest.approx(pt, rel=1e-12)
    assert plan.customers == math.ceil(d / ((pc + pt) / 2))
    assert plan.customers_control + plan.customers_treatment == plan.customers
    assert plan.months_to_enrol == pytest.approx(plan.customers / 500.0)
    assert plan.months_total == pytest.approx(plan.customers / 500.0 + 12.0)


def test_simpson_rule_close_to_the_exact_accrual_integral() -> None:
    """Uniform accrual over a, then f more: exact P = 1 - (1/a) int_f^{f+a} S(u) du.
    Schoenfeld's Simpson rule is exact for quadratics; for an exponential with
    a = 12, f = 6 months and a 2 %/month hazard the error is below 1e-5."""
    lam = 0.02 / DAYS_PER_MONTH
    curve = FunctionCurve("exp", lambda t: np.exp(-lam * np.asarray(t)))
    plan = plan_experiment(curve, 0.75, follow_up_months=6.0, accrual_months=12.0)
    f, a = 6 * DAYS_PER_MONTH, 12 * DAYS_PER_MONTH
    exact = 1 - integrate.quad(lambda u: math.exp(-lam * u), f, f + a)[0] / a
    assert plan.churn_probability_control == pytest.approx(exact, abs=1e-5)


def test_planning_errors_and_warnings() -> None:
    with pytest.raises(ConfigError, match="hazard_ratio: must be > 0 and not 1"):
        events_needed(1.0)
    with pytest.raises(ConfigError, match="power: must be in"):
        events_needed(0.8, power=1.2)
    with pytest.raises(ConfigError, match="treatment : control ratio must be > 0"):
        events_needed(0.8, allocation=0.0)
    with pytest.raises(ModelError, match="is not a retention curve"):
        plan_experiment("curve", 0.8)  # type: ignore[arg-type]
    short = FunctionCurve("KM", lambda t: np.where(np.asarray(t) > 200, np.nan, 0.8),
                          data_horizon_days=200.0)
    with pytest.raises(ModelError, match="is not defined at 12.0 months"):
        plan_experiment(short, 0.8, follow_up_months=12.0)
    far = ConstantRetention(0.95, data_horizon_days=100.0)
    plan = plan_experiment(far, 0.8, follow_up_months=12.0)
    assert any("extrapolated to 12.0 months" in w for w in plan.warnings)
    slow = plan_experiment(ConstantRetention(0.95), 0.8, accrual_months=3.0,
                           signups_per_month=10.0)
    assert any("more than the planned accrual" in w for w in slow.warnings)
