"""Cox PH held against outside references.

Sources:
- statsmodels ``PHReg`` (statsmodels.duration.hazard_regression), ties "efron"
  and "breslow", with ``entry=`` and ``strata=``; fitted with ``method="newton"``.
- scikit-survival's bundled ``whas500`` data (``sksurv.datasets.load_whas500``,
  Worcester Heart Attack Study, Hosmer, Lemeshow & May 2008) and its
  ``CoxPHSurvivalAnalysis`` (Breslow ties) and ``concordance_index_censored``.
- The 6-MP leukaemia remission data (Freireich et al. 1963, Blood 21:699; as
  tabulated by Gehan 1965, Biometrika 52:203), times in weeks, + = censored.

Tolerances: coefficients and standard errors to 1e-6 relative. Both programs
solve the same equations to round-off (our Newton stops below 1e-9 SE, PHReg's
Newton at a gradient of ~1e-8), so 1e-6 leaves margin yet fails on any
formula slip (Breslow instead of Efron moves whas500 coefficients by ~1e-3).

The (start, stop] trap: PHReg counts a row at risk at its entry time itself
(risk set ``entry <= t <= time``), while the start-stop contract does not
(``start < t <= stop``). With whole-day times ``entry = start + 0.5`` gives
PHReg exactly our risk sets. On data split at times that coincide with churn
times, passing ``entry = start`` instead moves the coefficients by far more
than the tolerance; :func:`test_entry_convention_differs_from_phreg` records that.
"""

from __future__ import annotations

import numpy as np
import pytest
from sksurv.datasets import load_whas500
from sksurv.linear_model import CoxPHSurvivalAnalysis
from sksurv.metrics import concordance_index_censored
from statsmodels.duration.hazard_regression import PHReg

from retain import StartStop
from retain.models.cox import fit_cox

RTOL = 1e-6
NUMERIC = ["age", "bmi", "hr", "sysbp", "diasbp"]
BINARY = ["gender", "chf", "afb"]


@pytest.fixture(scope="module")
def whas():
    X, y = load_whas500()
    time = y["lenfol"].astype(float)
    event = y["fstat"].astype(int)
    covs = {c: X[c].astype(float).to_numpy() for c in NUMERIC}
    covs.update({c: X[c].astype(str).to_numpy() for c in BINARY})
    ids = np.array([f"p{i:03d}" for i in range(len(time))])
    table = StartStop(np.zeros(len(time)), time, event, customer_id=ids, covariates=covs)
    return table, time, event


def _split(table: StartStop, seed: int, tv: bool = True) -> StartStop:
    """Split every row at a random whole-day interior time (many at churn times)."""
    rng = np.random.default_rng(seed)
    starts, stops, churn, idx = [], [], [], []
    for i in range(table.n_rows):
        a, b = table.start[i], table.stop[i]
        if b - a >= 2:
            cut = float(rng.integers(a + 1, b))
            starts += [a, cut]
            stops += [cut, b]
            churn += [0, table.churned[i]]
            idx += [i, i]
        else:
            starts.append(a)
            stops.append(b)
            churn.append(table.churned[i])
            idx.append(i)
    idx = np.array(idx)
    sub = table.take(idx)
    covs = dict(sub.covariates)
    if tv:
        # a time-varying covariate: a fresh value on every piece of a row
        covs["later"] = np.round(rng.normal(size=idx.shape[0]), 1)
    return StartStop(starts, stops, churn, customer_id=sub.customer.values(),
                     covariates=covs)


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_whas500_matches_phreg(whas, ties):
    """whas500, 8 covariates: coefficients and model SEs equal PHReg's to 1e-6."""
    table, time, event = whas
    fit = fit_cox(table, NUMERIC + BINARY, ties=ties)
    ref = PHReg(time, fit.design.X, status=event, ties=ties).fit(method="newton")
    np.testing.assert_allclose(fit.coef, ref.params, rtol=RTOL)
    np.testing.assert_allclose(fit.se_model, ref.bse, rtol=RTOL)
    np.testing.assert_allclose(fit.loglik, ref.llf, rtol=1e-10)
    assert fit.labels[-3:] == ("gender 1 vs 0", "chf 1 vs 0", "afb 1 vs 0")


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_whas500_strata_matches_phreg(whas, ties):
    """Stratified by chf (separate baselines): PHReg with strata=, to 1e-6."""
    table, time, event = whas
    fit = fit_cox(table, ["age", "bmi", "hr", "gender"], strata="chf", ties=ties)
    strata = table.column("chf").values()
    ref = PHReg(time, fit.design.X, status=event, strata=strata, ties=ties).fit(method="newton")
    np.testing.assert_allclose(fit.coef, ref.params, rtol=RTOL)
    np.testing.assert_allclose(fit.se_model, ref.bse, rtol=RTOL)
    assert fit.stratum_labels == ("chf=0", "chf=1")


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_split_time_varying_matches_phreg_with_half_day_entry(whas, ties):
    """Start-stop rows with delayed entry and a time-varying covariate vs PHReg(entry=start+0.5)."""
    table, _, _ = whas
    split = _split(table, seed=7)
    cov = ["age", "hr", "gender", "later"]
    fit = fit_cox(split, cov, ties=ties)
    ref = PHReg(split.stop, fit.design.X, status=split.churned, entry=split.start + 0.5,
                ties=ties).fit(method="newton")
    np.testing.assert_allclose(fit.coef, ref.params, rtol=RTOL)
    np.testing.assert_allclose(fit.se_model, ref.bse, rtol=RTOL)


def test_entry_convention_differs_from_phreg(whas):
    """PHReg(entry=start) puts rows in the risk set at their own entry time: a different model.

    On the split table 120 row starts coincide with churn times, and the
    time-varying coefficient moves by about 2e-3 (0.03 SE), over a thousand
    times our 1e-6 tolerance; this is the reason for entry = start + 0.5 above.
    """
    table, _, _ = whas
    split = _split(table, seed=7)
    fit = fit_cox(split, ["age", "hr", "gender", "later"])
    naive = PHReg(split.stop, fit.design.X, status=split.churned, entry=split.start,
                  ties="efron").fit(method="newton")
    assert abs(fit.coef[-1] / naive.params[-1] - 1) > 1e-3
    half = PHReg(split.stop, fit.design.X, status=split.churned, entry=split.start + 0.5,
                 ties="efron").fit(method="newton")
    np.testing.assert_allclose(fit.coef, half.params, rtol=RTOL)


def test_robust_se_clustered_matches_phreg_groups(whas):
    """Breslow ties: the Lin–Wei sandwich clustered by customer equals PHReg(groups=) to 1e-6.

    whas500 patients are put in clusters of three (as if one customer had three
    spells). Compared without delayed entry: statsmodels' score residuals
    leave out entry times (on delayed-entry data they do not sum to the score),
    and it builds them in the Breslow form whatever the tie method; the
    start-stop and Efron robust errors are held against the plain-loop
    implementation in test_cox_kernel.py instead.
    """
    table, time, event = whas
    groups = np.arange(table.n_rows) // 3
    clustered = StartStop(table.start, table.stop, table.churned,
                          customer_id=np.array([f"c{g}" for g in groups]),
                          spell=np.arange(table.n_rows) % 3 + 1, covariates=table.covariates)
    fit = fit_cox(clustered, ["age", "hr", "gender", "bmi"], ties="breslow")
    ref = PHReg(time, fit.design.X, status=event, ties="breslow").fit(method="newton",
                                                                         groups=groups)
    np.testing.assert_allclose(fit.se_robust, ref.bse, rtol=RTOL)
    assert fit.robust_clusters == "customer"
    by_row = fit_cox(table, ["age", "hr", "gender", "bmi"], ties="breslow")
    ref_row = PHReg(time, fit.design.X, status=event, ties="breslow").fit(
        method="newton", groups=np.arange(table.n_rows))
    np.testing.assert_allclose(by_row.se_robust, ref_row.bse, rtol=RTOL)
    # clustering matters: three patients per cluster change the errors
    assert np.max(np.abs(by_row.se_robust / fit.se_robust - 1)) > 1e-3


def test_schoenfeld_residuals_match_phreg_breslow(whas):
    """Breslow ties: Schoenfeld residuals x_i - S1/S0 equal PHReg's (1e-8 absolute)."""
    table, time, event = whas
    fit = fit_cox(table, ["age", "hr", "gender"], ties="breslow")
    ref = PHReg(time, fit.design.X, status=event, ties="breslow").fit(method="newton")
    ours = fit.schoenfeld_residuals()
    theirs = ref.schoenfeld_residuals[ours["row"].to_numpy()]
    np.testing.assert_allclose(ours[list(fit.columns)].to_numpy(), theirs, atol=1e-8)


# 6-MP remission times in weeks (Gehan 1965); + = censored
SIX_MP = "6 6 6 6+ 7 9+ 10 10+ 11+ 13 16 17+ 19+ 20+ 22 23 25+ 32+ 32+ 34+ 35+"
PLACEBO = "1 1 2 2 3 4 4 5 5 8 8 8 8 11 11 12 12 15 17 22 23"


def _six_mp() -> StartStop:
    times, events, arm = [], [], []
    for name, text in (("6-MP", SIX_MP), ("placebo", PLACEBO)):
        for tok in text.split():
            times.append(float(tok.rstrip("+")))
            events.append(0 if tok.endswith("+") else 1)
            arm.append(name)
    return StartStop(np.zeros(len(times)), times, events, covariates={"arm": np.array(arm)})


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_six_mp_matches_phreg(ties):
    table = _six_mp()
    fit = fit_cox(table, ["arm"], ties=ties, reference={"arm": "placebo"})
    ref = PHReg(table.stop, fit.design.X, status=table.churned, ties=ties).fit(method="newton")
    np.testing.assert_allclose(fit.coef, ref.params, rtol=RTOL)
    np.testing.assert_allclose(fit.se_model, ref.bse, rtol=RTOL)


def test_six_mp_textbook_hazard_ratio():
    """Textbook values (from memory): placebo vs 6-MP coefficient 1.572 (SE 0.412) with
    Efron ties, as R's coxph reports, and 1.509 (SE 0.410) with Breslow ties, as in
    Kleinbaum & Klein's *Survival Analysis* (Stata output): HR about 4.8 and 4.5.
    Tolerance 1e-3: the books print three decimals."""
    table = _six_mp()
    efron = fit_cox(table, ["arm"], reference={"arm": "6-MP"}, robust=False)
    breslow = fit_cox(table, ["arm"], reference={"arm": "6-MP"}, ties="breslow", robust=False)
    assert efron.labels == ("arm placebo vs 6-MP",)
    assert efron.coef[0] == pytest.approx(1.572, abs=1e-3)
    assert efron.se_model[0] == pytest.approx(0.412, abs=1e-3)
    assert breslow.coef[0] == pytest.approx(1.509, abs=1e-3)
    assert breslow.se_model[0] == pytest.approx(0.410, abs=1e-3)
    assert np.exp(efron.coef[0]) == pytest.approx(4.82, abs=0.01)


def test_whas500_matches_scikit_survival(whas):
    """scikit-survival CoxPHSurvivalAnalysis (Breslow ties): coefficients to 1e-6 relative
    and predicted survival functions (Breslow baseline) to 1e-8 absolute."""
    table, time, event = whas
    cov = NUMERIC + BINARY
    fit = fit_cox(table, cov, ties="breslow")
    y = np.array(list(zip(event.astype(bool), time, strict=True)),
                 dtype=[("event", "?"), ("time", "<f8")])
    est = CoxPHSurvivalAnalysis(ties="breslow").fit(fit.design.X, y)
    np.testing.assert_allclose(fit.coef, est.coef_, rtol=RTOL)
    grid = np.array([30.0, 100.0, 365.0, 700.0, 1500.0, 2000.0])
    for i in (0, 3, 17, 250):
        profile = {c: (table.column(c).values()[i] if table.is_categorical(c)
                       else table.column(c)[i]) for c in cov}
        ours = fit.predict_retention(profile, grid)["retention"].to_numpy()
        fn = est.predict_survival_function(fit.design.X[i:i + 1])[0]
        np.testing.assert_allclose(ours, fn(grid), atol=1e-8)


def test_concordance_matches_scikit_survival(whas):
    """Static data: Harrell's C and its pair counts equal concordance_index_censored's."""
    table, time, event = whas
    fit = fit_cox(table, ["age", "hr", "gender", "bmi"])
    c = fit.concordance()
    risk = fit.design.centred() @ fit.coef
    ref = concordance_index_censored(event.astype(bool), time, risk)
    assert c.c_index == pytest.approx(ref[0], abs=1e-12)
    assert (c.concordant, c.discordant) == (ref[1], ref[2])


@pytest.mark.parametrize("column", ["Karnofsky_score", "Age_in_years", "Months_from_Diagnosis"])
def test_concordance_of_a_supplied_score_matches_scikit_survival(column):
    """Any score, not a Cox fit's: scikit-survival's concordance_index_censored on its bundled
    Veterans' lung cancer data (right-censored, no delayed entry; Karnofsky scores have many
    ties, so tied pairs count too), C and every pair count to 1e-12."""
    from sksurv.datasets import load_veterans_lung_cancer

    from retain.models.cox import concordance

    x, y = load_veterans_lung_cancer()
    time = y["Survival_in_days"].astype(float)
    event = y["Status"]
    score = x[column].to_numpy(float)
    table = StartStop(np.zeros(len(time)), time, event.astype(int),
                      covariates={column: score})
    ref = concordance_index_censored(event, time, score)
    for c in (concordance(table, score), concordance(table, column)):
        assert abs(c.c_index - ref[0]) < 1e-12
        assert abs(c.concordant - ref[1]) < 1e-12 and abs(c.discordant - ref[2]) < 1e-12
        assert abs(c.tied_risk - ref[3]) < 1e-12
    # a score where higher means staying longer is ranked by its negative
    rev = concordance(table, score, higher="retention")
    assert abs(rev.c_index - concordance_index_censored(event, time, -score)[0]) < 1e-12
    assert concordance(table, column).score == column


def _naive_concordance(t: StartStop, score: np.ndarray) -> tuple[float, float, float]:
    """Plain loops over pairs: i churns at t_i; j at risk at t_i (start_j < t_i <= stop_j)
    and not churning at t_i; weight w_i w_j (the definition in the docstring)."""
    conc = disc = tied = 0.0
    for i in np.flatnonzero(t.churned == 1):
        ti = t.stop[i]
        for j in range(t.n_rows):
            if j == i or not (t.start[j] < ti <= t.stop[j]):
                continue
            if t.churned[j] == 1 and t.stop[j] == ti:
                continue
            w = t.weight[i] * t.weight[j]
            if score[i] > score[j]:
                conc += w
            elif score[i] < score[j]:
                disc += w
            else:
                tied += w
    return conc, disc, tied


def test_concordance_on_start_stop_rows_with_a_time_varying_score(whas):
    """Delayed entry, split rows and a score that changes between a patient's rows: the
    pair counts equal plain loops over the pairs at risk at each churn time."""
    from retain.models.cox import concordance

    table, _, _ = whas
    split = _split(table, seed=3)
    score = split.column("later")
    conc, disc, tied = _naive_concordance(split, score)
    c = concordance(split, "later")
    assert abs(c.concordant - conc) < 1e-9 and abs(c.discordant - disc) < 1e-9
    assert abs(c.tied_risk - tied) < 1e-9 and tied > 0
    assert abs(c.c_index - (conc + tied / 2) / (conc + disc + tied)) < 1e-12


def test_concordance_refuses_bad_scores(whas):
    from retain.errors import DataError, ModelError
    from retain.models.cox import concordance

    table, _, _ = whas
    with pytest.raises(DataError, match="the score has 3 values, the table 500 rows"):
        concordance(table, [1.0, 2.0, 3.0])
    nan = np.where(np.arange(500) % 50 == 0, np.nan, 1.0)
    with pytest.raises(DataError, match="missing or not finite on 10 of 500 rows"):
        concordance(table, nan)
    with pytest.raises(ModelError, match="higher must be 'risk' or 'retention'"):
        concordance(table, "age", higher="up")
