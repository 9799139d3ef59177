"""Hand-worked small cases, edge cases and the text of every error and warning.

The hand-worked rows are computed on paper from the definitions in
Kaplan & Meier (1958), Greenwood (1926) and the (start, stop] convention of
ARCHITECTURE.md; each expected value is written out as a fraction.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from retain.data.table import StartStop
from retain.errors import DataError, ModelError
from retain.models.curves import (
    cohort_retention,
    compare_groups,
    curves_by,
    kaplan_meier,
    nelson_aalen,
    retention_grid,
    rmst_difference,
)
from retain.units import DAYS_PER_MONTH


def small() -> StartStop:
    """Five spells: (0,2] churn, (0,2] censored, (1,3] churn, (2,4] censored, (0,4] churn."""
    return StartStop([0, 0, 1, 2, 0], [2, 2, 3, 4, 4], [1, 0, 1, 0, 1],
                     covariates={"arm": np.array(list("aabbb"), dtype=object)})


def test_hand_worked_delayed_entry_and_ties():
    """t=2: at risk 4 (the row entering at 2 is not), 1 churn, 1 censored -> S = 3/4.
    t=3: at risk 3 -> S = 3/4 * 2/3 = 1/2.  t=4: at risk 2 -> S = 1/4.
    Greenwood sum at 4: 1/(4*3) + 1/(3*2) + 1/(2*1) = 3/4."""
    c = kaplan_meier(small())
    np.testing.assert_array_equal(c.times, [2, 3, 4])
    np.testing.assert_array_equal(c.at_risk, [4, 3, 2])
    np.testing.assert_array_equal(c.events, [1, 1, 1])
    np.testing.assert_array_equal(c.censored, [1, 0, 1])
    np.testing.assert_allclose(c.survival, [3 / 4, 1 / 2, 1 / 4], rtol=0, atol=1e-15)
    np.testing.assert_allclose(c.greenwood, [1 / 12, 1 / 12 + 1 / 6, 3 / 4], rtol=0, atol=1e-15)
    assert abs(c.se[-1] - 0.25 * math.sqrt(0.75)) < 1e-15
    np.testing.assert_allclose(c.at([0, 1.9, 2, 3.5, 4, 4.1]),
                               [1, 1, 3 / 4, 1 / 2, 1 / 4, np.nan], rtol=0, atol=1e-15)
    # median: first time with S <= 1/2 is 3
    assert c.median().days == 3.0
    # Nelson–Aalen: 1/4 + 1/3 + 1/2 and variance 1/16 + 1/9 + 1/4
    na = nelson_aalen(small())
    assert abs(na.hazard[-1] - (1 / 4 + 1 / 3 + 1 / 2)) < 1e-15
    assert abs(na.variance[-1] - (1 / 16 + 1 / 9 + 1 / 4)) < 1e-15
    # RMST to 4: 1*2 + 3/4*1 + 1/2*1 = 3.25
    assert abs(c.restricted_mean(4.0).mean - 3.25) < 1e-15


def test_interval_types_hand_worked():
    """At t=2 (S=3/4, G=1/12): log-log, log and linear limits from their formulas."""
    z = 1.959963984540054
    s, g = 0.75, 1 / 12
    theta = z * math.sqrt(g) / math.log(s)
    ll = sorted((s ** math.exp(theta), s ** math.exp(-theta)))
    for ci, (lo, hi) in {"log-log": ll,
                         "log": (s * math.exp(-z * math.sqrt(g)),
                                 min(1.0, s * math.exp(z * math.sqrt(g)))),
                         "linear": (s - z * s * math.sqrt(g),
                                    min(1.0, s + z * s * math.sqrt(g)))}.items():
        c = kaplan_meier(small(), ci=ci)
        assert abs(c.lower[0] - lo) < 1e-12 and abs(c.upper[0] - hi) < 1e-12, ci


def test_all_censored_and_no_event_group():
    tab = StartStop([0, 0, 0], [5, 6, 7], [0, 0, 0])
    c = kaplan_meier(tab)
    assert np.all(c.survival == 1) and np.all(c.lower == 1)
    q = c.median()
    assert q.days is None and not q.reached and q.upper is None
    assert "not reached" in q.summary()
    assert c.warnings == ("all customers: no churn observed; the curve stays at 1",)
    tab2 = StartStop([0] * 6, [1, 2, 3, 4, 5, 6], [1, 1, 0, 0, 0, 0],
                     covariates={"g": np.array(list("aabbbb"), dtype=object)})
    sc = curves_by(tab2, "g")
    assert sc["b"].warnings == ("g = b: no churn observed; the curve stays at 1",)
    res = compare_groups(tab2, "g")
    assert "g = b: no churn observed in this group" in res.warnings
    assert res.df == 1 and res.statistic > 0


def test_empty_group_and_single_group_errors():
    with pytest.raises(ModelError, match="has no rows"):
        kaplan_meier(small().take(np.zeros(5, dtype=bool)))
    one = StartStop([0, 0], [1, 2], [1, 0], covariates={"g": np.array(["x", "x"], dtype=object)})
    with pytest.raises(ModelError, match="1 group\\(s\\) with data; a comparison needs two"):
        compare_groups(one, "g")
    with pytest.raises(ModelError, match="no segment 'z'"):
        curves_by(one, "g")["z"]


def test_contract_errors_come_from_the_table():
    """Zero / negative weights and overlapping times are refused by StartStop, naming the row."""
    with pytest.raises(DataError, match="weights must be finite and > 0"):
        StartStop([0, 0], [1, 2], [1, 0], weight=[1, 0])
    with pytest.raises(DataError, match="weights must be finite and > 0"):
        StartStop([0, 0], [1, 2], [1, 0], weight=[1, -2])
    with pytest.raises(DataError, match="customer 'ann' spell 1"):
        StartStop([0, 3], [5, 8], [0, 1], customer_id=["ann", "ann"])
    with pytest.raises(DataError, match="start must be < stop"):
        StartStop([4], [4], [1], customer_id=["bob"])


def test_option_errors():
    tab = small()
    with pytest.raises(ModelError, match="unknown interval type 'logit'"):
        kaplan_meier(tab, ci="logit")
    with pytest.raises(ModelError, match="conf must be between 0 and 1"):
        kaplan_meier(tab, conf=95)
    with pytest.raises(ModelError, match="unknown weighting 'wilcoxon'"):
        compare_groups(tab, "arm", weighting="wilcoxon")
    with pytest.raises(ModelError, match="exponents must be >= 0"):
        compare_groups(tab, "arm", weighting=("fleming-harrington", -1, 0))
    with pytest.raises(ModelError, match="p must be in \\(0, 1\\)"):
        kaplan_meier(tab).quantile(1.5)
    with pytest.raises(DataError, match="expected a StartStop table"):
        kaplan_meier(pd.DataFrame())
    with pytest.raises(ModelError, match="months must be a positive whole number"):
        cohort_retention(tab, months=0)
    with pytest.raises(DataError, match="neither a 'cohort' column nor start_date"):
        cohort_retention(tab)


def test_horizon_past_follow_up_is_refused():
    """Documented choice: RMST refuses a horizon past the last observed tenure."""
    c = kaplan_meier(small())
    with pytest.raises(ModelError, match="horizon 5 days is past the last observed tenure "
                                         "\\(4 days\\) and the curve has not reached 0 -- "
                                         "choose a horizon <= 4 days"):
        c.restricted_mean(5)
    with pytest.raises(ModelError, match="past the last observed tenure of one group"):
        rmst_difference(small(), "arm", 3.5)
    # a horizon after the last churn but within follow-up is allowed, with a warning
    tab = StartStop([0, 0, 0], [1, 5, 9], [1, 0, 0])
    r = kaplan_meier(tab).restricted_mean(8)
    assert abs(r.mean - (1 + 2 / 3 * 7)) < 1e-12
    assert "held flat" in r.warnings[0]


def test_rmst_difference_combines_the_two_groups():
    tab = small()
    d = rmst_difference(tab, "arm", 2.0)
    a = kaplan_meier(tab.take(tab.column("arm").codes == 0)).restricted_mean(2.0)
    b = kaplan_meier(tab.take(tab.column("arm").codes == 1)).restricted_mean(2.0)
    assert abs(d.difference - (b.mean - a.mean)) < 1e-15
    assert abs(d.se - math.hypot(a.se, b.se)) < 1e-15
    # both arms' SEs are 0 here (no area after their churns within 2 days): the interval
    # is the point; tests/test_planted_bugs.py holds a case with positive SEs
    assert a.se == b.se == 0 and d.lower == d.difference == d.upper


def test_restricted_mean_past_the_last_tenure_once_the_curve_is_zero():
    """Uncensored: S reaches 0 at the largest time, and the restricted mean at any horizon
    past it is the sample mean (the area under the empirical survival function is the
    mean: common identity). Its SE is then sqrt(sum (t - mean)^2 / n) / sqrt(n), the
    plug-in standard error of the mean (from memory; ties included, as here)."""
    t = np.array([3.0, 5.0, 5.0, 9.0, 12.0, 12.0, 20.0, 41.0])
    tab = StartStop(np.zeros(8), t, np.ones(8))
    c = kaplan_meier(tab)
    assert c.reached_zero and c.known_until == math.inf
    for horizon in (41.0, 41.5, 100.0, 1e6):
        r = c.restricted_mean(horizon)
        assert abs(r.mean - t.mean()) < 1e-12 * t.mean()
        assert abs(r.se - np.sqrt(np.var(t) / t.size)) < 1e-12
    assert "reached 0" in c.restricted_mean(100.0).warnings[0]
    # one censored row at the end: S stays above 0 and the guard still refuses
    censored = StartStop(np.zeros(8), t, np.r_[np.ones(7), 0.0])
    assert not kaplan_meier(censored).reached_zero
    with pytest.raises(ModelError, match="has not reached 0"):
        kaplan_meier(censored).restricted_mean(50.0)
    # the difference of two uncensored arms past both largest times: difference of means
    arm = np.array(["a"] * 4 + ["b"] * 4, dtype=object)
    d = rmst_difference(tab.with_columns(arm=arm), "arm", 60.0)
    assert abs(d.difference - (t[4:].mean() - t[:4].mean())) < 1e-12


def test_cohort_cells_not_observable_are_empty_and_real_zeros_stay():
    """Cohort 2026-10 (as of 2026-11-30, 60 days) has no month-2 cell; a cohort whose
    every customer churned in month 1 shows 0 from then on (observed, not missing)."""
    sd = np.array(["2026-01-05", "2026-01-05", "2026-10-01", "2026-10-01", "2026-10-02"],
                  dtype="datetime64[D]")
    stop = np.array([10.0, 20.0, 60.0, 60.0, 30.0])
    tab = StartStop(np.zeros(5), stop, [1, 1, 0, 0, 1], start_date=sd,
                    customer_id=list("abcde"),
                    covariates={"cohort": np.array(["2026-01"] * 2 + ["2026-10"] * 3,
                                                   dtype=object)})
    t = cohort_retention(tab, months=6)
    assert t.cohorts == ("2026-01", "2026-10")
    np.testing.assert_array_equal(t.retention[0], [0, 0, 0, 0, 0, 0])
    assert t.retention[1, 0] == pytest.approx(2 / 3)
    # month 2 is 60.875 days of tenure: one day more than the cohort's 60 observable days
    assert np.isnan(t.retention[1, 1:]).all() and np.isnan(t.at_risk[1, 1:]).all()
    np.testing.assert_array_equal(t.started, [2, 3])
    # the churn rate of a partly observed month uses the exposure seen so far
    assert t.churn_rate[1, 1] == 0 and np.isnan(t.churn_rate[1, 2:]).all()
    # month 1 of cohort 2026-10: 1 churn over (30 + 30.4375 + 30.4375) / 30.4375 months
    assert t.churn_rate[1, 0] == pytest.approx(1 / ((30 + 2 * DAYS_PER_MONTH) / DAYS_PER_MONTH))
    # exact Poisson limits for 1 churn (Garwood 1936): 0.0253 and 5.5716 per unit exposure
    # (chi-square quantiles / 2; the classical table values, from memory: 0.025, 5.57)
    e = (30 + 2 * DAYS_PER_MONTH) / DAYS_PER_MONTH
    assert t.churn_rate_lower[1, 0] * e == pytest.approx(0.0253, abs=5e-5)
    assert t.churn_rate_upper[1, 0] * e == pytest.approx(5.5716, abs=5e-5)
    assert t.churn_rate_lower[1, 1] == 0 and np.isnan(t.churn_rate_upper[1, 2])
    frame = t.to_frame()
    assert list(frame.columns[:3]) == ["cohort", "month", "days"]
    assert t.retention_frame().shape == (2, 6)
    json.loads(t.to_json())  # NaN cells become null


def test_retention_grid_and_serialisation():
    tab = StartStop(np.zeros(4), [20, 40, 70, 100], [1, 1, 0, 1])
    c = kaplan_meier(tab)
    g = retention_grid(c, months=(1, 2, 6))
    np.testing.assert_allclose(g.retention[:2], [0.75, 0.5])
    assert np.isnan(g.retention[2])
    # 6 months are read on day floor(6 x 30.4375) = 182
    assert g.warnings == (f"all customers: {math.floor(6 * DAYS_PER_MONTH):g} days is past "
                          "the last observed tenure (100 days)",)
    gd = retention_grid(c, days=[10, 50])
    np.testing.assert_allclose(gd.retention, [1.0, 0.5])
    np.testing.assert_allclose(gd.at_risk, [4, 2])
    for result in (c, g, c.median(), c.restricted_mean(90), nelson_aalen(tab),
                   curves_by(small(), "arm"), compare_groups(small(), "arm"),
                   rmst_difference(small(), "arm", 2.0)):
        json.loads(result.to_json())
        assert isinstance(result.to_frame(), pd.DataFrame)
        assert isinstance(result.summary(), str) and result.summary()


def test_segment_by_value_at_spell_start():
    """A time-varying plan: a spell that starts on A and moves to B stays in A's curve."""
    tab = StartStop([0, 5, 0], [5, 9, 7], [0, 1, 1], customer_id=["x", "x", "y"],
                    covariates={"plan": np.array(["A", "B", "B"], dtype=object)})
    sc = curves_by(tab, "plan")
    assert sc.basis == "spell start"
    np.testing.assert_array_equal(sc["A"].times, [9])  # the 5-day cut is not a censoring
    assert sc["A"].n_rows == 2 and sc["B"].n_rows == 1
    # without customer ids rows keep their own value
    anon = StartStop([0, 5, 0], [5, 9, 7], [0, 1, 1],
                     covariates={"plan": np.array(["A", "B", "B"], dtype=object)})
    assert curves_by(anon, "plan").basis == "row value"


def test_cohort_before_the_window_is_conditional_and_early_cells_empty():
    """Spells that began before the window enter at tenure 100: months 1-3 (30.4, 60.9,
    91.3 days) were never observed for that cohort and stay empty; month 4 is KM
    conditional on being active at day 100 (here 3 of 4 at risk survive: 3/4)."""
    tab = StartStop([100, 100, 100, 100], [110, 200, 200, 200], [1, 0, 0, 0],
                    customer_id=list("abcd"),
                    covariates={"cohort": np.array(["2023-06"] * 4, dtype=object)})
    t = cohort_retention(tab, months=6)
    assert np.isnan(t.retention[0, :3]).all()
    assert t.retention[0, 3] == pytest.approx(3 / 4)
    assert t.entered_at[0] == 100
    assert t.warnings == ("cohort 2023-06 entered observation at tenure 100 days: its cells "
                          "are retention conditional on being active then",)
