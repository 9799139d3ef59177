"""Curves checked against published tables and reference libraries.

Sources:
- Freireich et al. (1963) 6-MP remission data as tabulated by Gehan (1965).
  Kaplan–Meier values and Greenwood SEs as printed in Klein & Moeschberger
  (2003), Table 4.1A (values from memory, 3-4 decimals); log-rank chi-square
  16.79 as printed by R's ``survdiff`` on the ``gehan`` data (from memory).
  Every value is also recomputed with scikit-survival / statsmodels here.
- scikit-survival's bundled ``whas500`` and ``flchain`` data (no download):
  ``sksurv.nonparametric.kaplan_meier_estimator`` (with ``time_enter`` and
  ``conf_type="log-log"``), ``sksurv.compare.compare_survival``.
- statsmodels ``SurvfuncRight`` (with ``entry=``) and ``survdiff`` (with
  ``entry=``, ``strata=``, ``weight_type="fh"``).

Risk-set convention: retain uses (start, stop] (not at risk at the entry time
itself). Both references agree: scikit-survival counts entries strictly before
each time (except at its first time, where it forces zero events) and
statsmodels documents "not in the risk set on or before the entry time". The
whas500 delayed-entry case below has entries (discharge days) that coincide
with death days, so the agreement includes tied entries.

Tolerances: 1e-10 for quantities both sides compute with the same closed
formula in double precision (differences are summation order only);
published 3-4 decimal values are checked to half a unit in the last digit.
"""

from __future__ import annotations

import numpy as np
import pytest
from sksurv.compare import compare_survival
from sksurv.datasets import load_flchain, load_whas500
from sksurv.nonparametric import kaplan_meier_estimator, nelson_aalen_estimator
from statsmodels.duration.survfunc import SurvfuncRight, survdiff

from retain.data.table import StartStop
from retain.models.curves import compare_groups, kaplan_meier, nelson_aalen

TIGHT = 1e-10

# Gehan (1965): weeks of remission; a trailing "+" in the source = censored
SIX_MP = [(6, 1), (6, 1), (6, 1), (6, 0), (7, 1), (9, 0), (10, 1), (10, 0), (11, 0), (13, 1),
          (16, 1), (17, 0), (19, 0), (20, 0), (22, 1), (23, 1), (25, 0), (32, 0), (32, 0),
          (34, 0), (35, 0)]
PLACEBO = [(1, 1), (1, 1), (2, 1), (2, 1), (3, 1), (4, 1), (4, 1), (5, 1), (5, 1), (8, 1),
           (8, 1), (8, 1), (8, 1), (11, 1), (11, 1), (12, 1), (12, 1), (15, 1), (17, 1),
           (22, 1), (23, 1)]


def _gehan() -> StartStop:
    rows = [(t, e, "6-MP") for t, e in SIX_MP] + [(t, e, "placebo") for t, e in PLACEBO]
    t = np.array([r[0] for r in rows], float)
    e = np.array([r[1] for r in rows])
    arm = np.array([r[2] for r in rows], dtype=object)
    return StartStop(np.zeros(len(t)), t, e, covariates={"arm": arm})


def assert_matches_sksurv(curve, tab: StartStop, entry: bool) -> None:
    """Curve and log-log limits equal scikit-survival's kaplan_meier_estimator at its times."""
    t, s, ci = kaplan_meier_estimator(tab.churned.astype(bool), tab.stop,
                                      time_enter=tab.start if entry else None,
                                      conf_type="log-log")
    np.testing.assert_allclose(curve.at(t), s, rtol=0, atol=TIGHT)
    lo, hi = curve.interval_at(t)
    np.testing.assert_allclose(lo, ci[0], rtol=0, atol=TIGHT)
    np.testing.assert_allclose(hi, ci[1], rtol=0, atol=TIGHT)


def test_gehan_km_matches_published_table():
    """6-MP arm: Klein & Moeschberger (2003) Table 4.1A (from memory), 3-4 decimals."""
    tab = _gehan()
    curve = kaplan_meier(tab.take(tab.column("arm").codes == 0), label="6-MP")
    published = {  # time: (S, Greenwood SE)
        6: (0.857, 0.0764), 7: (0.807, 0.0869), 10: (0.753, 0.0963), 13: (0.690, 0.1068),
        16: (0.627, 0.1141), 22: (0.538, 0.1282), 23: (0.448, 0.1346),
    }
    for t, (s, se) in published.items():
        j = int(np.flatnonzero(curve.times == t)[0])
        assert abs(curve.survival[j] - s) <= 0.0005 + 1e-12, t
        assert abs(curve.se[j] - se) <= 0.00005 + 1e-12, t
    assert curve.median().days == 23.0
    # the counts of the published table: at risk 21 at week 6 with 3 relapses, 1 censored
    j6 = int(np.flatnonzero(curve.times == 6)[0])
    assert (curve.at_risk[j6], curve.events[j6], curve.censored[j6]) == (21, 3, 1)


def test_gehan_km_matches_statsmodels_and_sksurv():
    """Both arms against statsmodels SurvfuncRight (Greenwood SE) and scikit-survival."""
    tab = _gehan()
    for code, arm in enumerate(tab.column("arm").levels):
        sub = tab.take(tab.column("arm").codes == code)
        curve = kaplan_meier(sub, label=arm)
        sm = SurvfuncRight(sub.stop, sub.churned)
        ev = curve.events > 0
        np.testing.assert_allclose(curve.times[ev], sm.surv_times, rtol=0, atol=0)
        np.testing.assert_allclose(curve.survival[ev], sm.surv_prob, rtol=0, atol=TIGHT)
        # statsmodels returns NaN SE where S = 0 (placebo's last time); retain returns 0
        fin = np.isfinite(sm.surv_prob_se)
        np.testing.assert_allclose(curve.se[ev][fin], sm.surv_prob_se[fin], rtol=0, atol=TIGHT)
        assert_matches_sksurv(curve, sub, entry=False)


def test_gehan_logrank():
    """Log-rank chi-square 16.79 on 1 df (R survdiff on gehan, from memory), and
    scikit-survival's compare_survival to 1e-10."""
    tab = _gehan()
    res = compare_groups(tab, "arm")
    assert res.df == 1
    assert abs(res.statistic - 16.79) < 0.005
    y = np.array(list(zip(tab.churned.astype(bool), tab.stop, strict=True)),
                 dtype=[("e", bool), ("t", float)])
    chisq, pval = compare_survival(y, tab.column("arm").values())
    assert abs(res.statistic - chisq) < TIGHT
    assert abs(res.p_value - pval) < TIGHT
    # observed relapses per arm: 9 on 6-MP, 21 on placebo
    np.testing.assert_array_equal(res.observed, [9, 21])
    assert abs(res.expected.sum() - 30) < TIGHT


def test_gehan_median_interval_matches_statsmodels():
    """Brookmeyer–Crowley interval for the median: statsmodels quantile_ci, same transform."""
    tab = _gehan()
    for code in range(2):
        sub = tab.take(tab.column("arm").codes == code)
        sm = SurvfuncRight(sub.stop, sub.churned)
        for ci, method in (("log-log", "cloglog"), ("linear", "linear"), ("log", "log")):
            q = kaplan_meier(sub, ci=ci).median()
            lb, ub = sm.quantile_ci(0.5, alpha=0.05, method=method)
            assert q.lower == lb
            assert (q.upper is None and ub == np.inf) or q.upper == ub
            assert q.days == sm.quantile(0.5)


# ------------------------------------------------------------------- whas500
def _whas500_entry() -> tuple[StartStop, np.ndarray]:
    """Delayed entry at hospital discharge (los days) for patients followed past it."""
    x, y = load_whas500()
    los = x["los"].to_numpy(float)
    exit_ = y["lenfol"].astype(float)
    keep = exit_ > los
    gender = x["gender"].astype(str).to_numpy()[keep]
    tab = StartStop(los[keep], exit_[keep], y["fstat"][keep].astype(int),
                    covariates={"gender": gender.astype(object)})
    return tab, keep


def test_whas500_delayed_entry_km_matches_sksurv_and_statsmodels():
    """KM with time_enter and log-log intervals: scikit-survival; SE: statsmodels(entry=)."""
    tab, _ = _whas500_entry()
    entries_on_event_days = np.intersect1d(tab.start, tab.stop[tab.churned == 1]).size
    assert entries_on_event_days > 0  # the tie case is really exercised
    curve = kaplan_meier(tab)
    assert_matches_sksurv(curve, tab, entry=True)
    sm = SurvfuncRight(tab.stop, tab.churned, entry=tab.start)
    ev = curve.events > 0
    np.testing.assert_allclose(curve.survival[ev], sm.surv_prob, rtol=0, atol=TIGHT)
    # statsmodels gives NaN SE once S = 0 (all remaining at risk died); retain gives 0
    fin = np.isfinite(sm.surv_prob_se)
    assert np.all(curve.survival[ev][~fin] == 0)
    np.testing.assert_allclose(curve.se[ev][fin], sm.surv_prob_se[fin], rtol=0, atol=TIGHT)
    np.testing.assert_allclose(curve.at_risk[ev], sm.n_risk, rtol=0, atol=TIGHT)


def test_whas500_logrank_plain_weighted_stratified():
    """Log-rank by gender against scikit-survival (no entry) and statsmodels survdiff
    (with entry, with Fleming–Harrington p = 1, stratified by a BMI split)."""
    x, y = load_whas500()
    tab = StartStop(np.zeros(len(y)), y["lenfol"].astype(float), y["fstat"].astype(int),
                    covariates={"gender": x["gender"].astype(str).to_numpy().astype(object),
                                "heavy": np.where(x["bmi"].to_numpy() > 27, "yes", "no")
                                .astype(object)})
    res = compare_groups(tab, "gender")
    chisq, pval = compare_survival(y, x["gender"].astype(str).to_numpy())
    assert abs(res.statistic - chisq) < TIGHT and abs(res.p_value - pval) < TIGHT
    g = tab.column("gender").codes
    fh = compare_groups(tab, "gender", weighting=("fleming-harrington", 1, 0))
    c2, _ = survdiff(tab.stop, tab.churned, g, weight_type="fh", fh_p=1)
    assert abs(fh.statistic - c2) < TIGHT
    strat = compare_groups(tab, "gender", strata="heavy")
    c3, _ = survdiff(tab.stop, tab.churned, g, strata=tab.column("heavy").codes)
    assert abs(strat.statistic - c3) < TIGHT
    assert strat.n_strata == 2
    etab, keep = _whas500_entry()
    de = compare_groups(etab, "gender")
    c4, _ = survdiff(etab.stop, etab.churned, etab.column("gender").codes, entry=etab.start)
    assert abs(de.statistic - c4) < TIGHT


def test_whas500_nelson_aalen_matches_sksurv():
    """Nelson–Aalen values: scikit-survival nelson_aalen_estimator (right-censored)."""
    _, y = load_whas500()
    tab = StartStop(np.zeros(len(y)), y["lenfol"].astype(float), y["fstat"].astype(int))
    na = nelson_aalen(tab)
    t, h = nelson_aalen_estimator(y["fstat"], y["lenfol"])
    np.testing.assert_allclose(na.at(t), h, rtol=0, atol=TIGHT)


# ------------------------------------------------------------------- flchain
def _flchain_age_scale() -> tuple[StartStop, np.ndarray, np.ndarray]:
    """Age as the time scale: enter at age at sampling, leave at age + follow-up.

    Left truncation by age is the textbook delayed-entry case. The 3 rows with
    futime = 0 (start == stop) are dropped: they never enter the risk set.
    """
    x, y = load_flchain()
    enter = x["age"].to_numpy(float) * 365.25
    fut = y["futime"].astype(float)
    keep = fut > 0
    tab = StartStop(enter[keep], enter[keep] + fut[keep], y["death"][keep].astype(int),
                    covariates={"sex": x["sex"].astype(str).to_numpy()[keep].astype(object)})
    return tab, x["sex"].astype(str).to_numpy()[keep], y[keep]


@pytest.mark.slow
def test_flchain_age_scale_km_matches_sksurv():
    """Delayed entry on the age scale, women only (about 4300 rows): sksurv time_enter."""
    tab, sex, _ = _flchain_age_scale()
    sub = tab.take(sex == "F")
    assert_matches_sksurv(kaplan_meier(sub), sub, entry=True)


def test_flchain_logrank_by_sex():
    """Right-censored log-rank by sex on flchain (futime scale): scikit-survival."""
    x, y = load_flchain()
    tab = StartStop(np.zeros(len(y)), np.maximum(y["futime"].astype(float), 0.5),
                    y["death"].astype(int),
                    covariates={"sex": x["sex"].astype(str).to_numpy().astype(object),
                                "grp": x["flc.grp"].astype(str).to_numpy().astype(object)})
    yy = np.array(list(zip(tab.churned.astype(bool), tab.stop, strict=True)),
                  dtype=[("e", bool), ("t", float)])
    res = compare_groups(tab, "sex")
    chisq, _ = compare_survival(yy, x["sex"].astype(str).to_numpy())
    assert abs(res.statistic - chisq) < TIGHT
    # ten groups (free light chain deciles): k-group statistic on 9 df
    res10 = compare_groups(tab, "grp")
    chisq10, _ = compare_survival(yy, x["flc.grp"].astype(str).to_numpy())
    assert res10.df == 9
    assert abs(res10.statistic - chisq10) < 1e-8 * max(1.0, chisq10)


def test_flchain_age_scale_logrank_with_entry():
    """Delayed-entry log-rank by sex on the age scale: statsmodels survdiff(entry=)."""
    tab, _, _ = _flchain_age_scale()
    res = compare_groups(tab, "sex")
    c, _ = survdiff(tab.stop, tab.churned, tab.column("sex").codes, entry=tab.start)
    assert abs(res.statistic - c) < 1e-8 * max(1.0, c)


@pytest.mark.parametrize("weighting, weight_type", [("gehan-breslow", "gb"),
                                                    ("tarone-ware", "tw")])
def test_veterans_weighted_logrank_matches_survdiff(weighting, weight_type):
    """Gehan–Breslow (w = n at risk) and Tarone–Ware (w = sqrt n) against statsmodels
    ``survdiff(weight_type="gb" / "tw")`` on scikit-survival's bundled Veterans'
    Administration lung cancer trial (``load_veterans_lung_cancer``; Kalbfleisch &
    Prentice 1980): two groups (treatment), four (cell type), and treatment stratified
    by cell type. Statistic and p-value to 1e-9 (both programs sum the same terms;
    the agreement seen is about 1e-14)."""
    from sksurv.datasets import load_veterans_lung_cancer

    x, y = load_veterans_lung_cancer()
    time = y["Survival_in_days"].astype(float)
    status = y["Status"].astype(int)
    tab = StartStop(np.zeros(len(time)), time, status,
                    covariates={"trt": x["Treatment"].astype(str).to_numpy().astype(object),
                                "cell": x["Celltype"].astype(str).to_numpy().astype(object)})
    plain = compare_groups(tab, "trt")
    for by, strata in (("trt", None), ("cell", None), ("trt", "cell")):
        res = compare_groups(tab, by, strata=strata, weighting=weighting)
        kw = {} if strata is None else {"strata": tab.column(strata).codes}
        chisq, pval = survdiff(time, status, tab.column(by).codes, weight_type=weight_type,
                               **kw)
        assert abs(res.statistic - chisq) < 1e-9 and abs(res.p_value - pval) < 1e-9
        assert res.df == (1 if by == "trt" else 3)
    # the weights matter here: the weighted statistic is far from the plain one
    assert abs(compare_groups(tab, "trt", weighting=weighting).statistic
               - plain.statistic) > 0.5
    assert compare_groups(tab, "trt", weighting=weighting).weighting in ("Gehan–Breslow",
                                                                         "Tarone–Ware")


@pytest.mark.parametrize("weighting, weight_type", [("gehan-breslow", "gb"),
                                                    ("tarone-ware", "tw")])
def test_whas500_weighted_logrank_with_entry_matches_survdiff(weighting, weight_type):
    """With delayed entry the number at risk (and so the weight) changes: survdiff(entry=)."""
    etab, _ = _whas500_entry()
    res = compare_groups(etab, "gender", weighting=weighting)
    chisq, pval = survdiff(etab.stop, etab.churned, etab.column("gender").codes,
                           weight_type=weight_type, entry=etab.start)
    assert abs(res.statistic - chisq) < 1e-9 and abs(res.p_value - pval) < 1e-9
