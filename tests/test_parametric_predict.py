"""Predictions, intervals, comparison table and the log-log diagnostic.

References: scipy.stats.weibull_min (sf, median, mean) and scipy.integrate.quad
for closed forms; central differences (scipy.optimize.approx_fprime) for the
delta-method gradients; the likelihood score equations for actual = expected.
"""

import math

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from retain import DataError, StartStop
from retain.kernels import parametric as K
from retain.models.parametric import (
    compare_models,
    fit_exponential,
    fit_piecewise,
    fit_weibull,
    loglog_diagnostic,
)
from retain.units import DAYS_PER_MONTH


def weibull_table(seed=0, n=1500, shape=1.3, scale=400.0, horizon=900.0):
    rng = np.random.default_rng(seed)
    plan = rng.choice(["Seedling", "Orchard"], n)
    sc = scale * np.where(plan == "Orchard", 1.5, 1.0)
    T = stats.weibull_min.rvs(shape, scale=sc, random_state=rng)
    C = rng.uniform(0, horizon, n)
    return StartStop(np.zeros(n), np.minimum(T, C), (T <= C).astype(int),
                     covariates={"plan": plan, "x": rng.normal(size=n)})


@pytest.fixture(scope="module")
def wfit():
    return fit_weibull(weibull_table())


def test_retention_curve_is_the_weibull_survival_function(wfit):
    """S(t) = exp(-(t/scale)**shape) = scipy.stats.weibull_min.sf (to 1e-12)."""
    t = np.array([0.0, 10.0, 100.0, 500.0, 2000.0])
    fc = wfit.predict_retention(times=t)
    ref = stats.weibull_min.sf(t, wfit.shape_value, scale=wfit.baseline_scale_days)
    np.testing.assert_allclose(fc.retention, ref, rtol=1e-12)
    h = wfit.shape_value / wfit.baseline_scale_days * (t[1:] / wfit.baseline_scale_days) ** (
        wfit.shape_value - 1)
    np.testing.assert_allclose(fc.hazard[1:], h, rtol=1e-12)
    assert fc.hazard[0] == 0.0  # shape > 1: the hazard starts at 0
    assert np.all(fc.lower <= fc.retention) and np.all(fc.retention <= fc.upper)


def test_retention_interval_is_the_delta_method_on_log_cumulative_hazard(wfit):
    """se(log H(t)) = sqrt(g' V g) with g from central differences of log H."""
    t = np.array([50.0, 300.0, 1200.0])
    fc = wfit.predict_retention(times=t)
    z = stats.norm.isf(0.025)
    for i, ti in enumerate(t):
        g = optimize.approx_fprime(
            wfit.params, lambda p, ti=ti: math.log(
                -math.log(stats.weibull_min.sf(ti, math.exp(p[1]),
                                               scale=math.exp(-p[0] / math.exp(p[1]))))), 1e-7)
        se = math.sqrt(g @ wfit.cov @ g)
        lh = math.log(fc.cumulative_hazard[i])
        assert fc.lower[i] == pytest.approx(math.exp(-math.exp(lh + z * se)), rel=1e-5)
        assert fc.upper[i] == pytest.approx(math.exp(-math.exp(lh - z * se)), rel=1e-5)


def test_median_and_means_match_scipy_and_quadrature(wfit):
    a, s = wfit.shape_value, wfit.baseline_scale_days
    med = wfit.median_lifetime()
    assert med.days == pytest.approx(stats.weibull_min.median(a, scale=s), rel=1e-12)
    assert med.lower < med.days < med.upper
    mean = wfit.mean_lifetime()
    assert mean.days == pytest.approx(stats.weibull_min.mean(a, scale=s), rel=1e-12)
    assert "infinite tenure" in mean.warnings[0]
    rm = wfit.mean_lifetime(horizon=365.25)
    ref, _ = integrate.quad(lambda t: stats.weibull_min.sf(t, a, scale=s), 0, 365.25,
                            epsabs=1e-12, epsrel=1e-12)
    assert rm.days == pytest.approx(ref, rel=1e-9)
    assert rm.warnings == ()  # within the observed 900 days


def test_median_interval_is_the_delta_method(wfit):
    z = stats.norm.isf(0.025)
    med = wfit.median_lifetime()
    g = optimize.approx_fprime(wfit.params, lambda p: math.log(
        K.quantile_time("weibull", p, np.zeros(0), 0.5)), 1e-7)
    se = math.sqrt(g @ wfit.cov @ g)
    assert med.upper == pytest.approx(med.days * math.exp(z * se), rel=1e-5)


def test_piecewise_predictions_match_quadrature_and_root():
    table = weibull_table(1)
    fit = fit_piecewise(table, [60.0, 200.0, 500.0], ["plan"])
    prof = {"plan": "Orchard"}
    med = fit.median_lifetime(prof)
    assert fit.predict_retention(prof, [med.days]).retention[0] == pytest.approx(0.5, rel=1e-12)

    def surv(t):
        return fit.predict_retention(prof, [t]).retention[0]

    ref, _ = integrate.quad(surv, 0, 700, points=[60, 200, 500], epsabs=1e-10)
    assert fit.mean_lifetime(prof, horizon=700).days == pytest.approx(ref, rel=1e-8)
    last_rate = fit.predict_retention(prof, [600.0]).hazard[0]
    tail = surv(500.0) / last_rate
    ref_full, _ = integrate.quad(surv, 0, 500, points=[60, 200], epsabs=1e-10)
    assert fit.mean_lifetime(prof).days == pytest.approx(ref_full + tail, rel=1e-8)
    # the hazard is the derivative of the cumulative hazard
    fc = fit.predict_retention(prof, [100.0, 100.001])
    dH = (fc.cumulative_hazard[1] - fc.cumulative_hazard[0]) / 0.001
    assert fc.hazard[0] == pytest.approx(dH, rel=1e-6)


def test_extrapolation_warning_says_how_far():
    """Longest observed tenure exactly 35 months, predicted to 59 months."""
    stop = np.array([10.0, 200.0, 35 * DAYS_PER_MONTH, 400.0, 90.0])
    fit = fit_exponential(StartStop(np.zeros(5), stop, [1, 1, 0, 1, 1]))
    fc = fit.predict_retention(times=[0.0, 12 * DAYS_PER_MONTH, 59 * DAYS_PER_MONTH])
    assert fc.warnings == ("the retention curve extrapolates 24 months past the longest "
                           "observed tenure of 35 months",)
    assert list(fc.extrapolated) == [False, False, True]
    assert fit.predict_retention(times=[100.0]).warnings == ()


def test_profile_fills_reference_and_mean_and_rejects_unknowns():
    fit = fit_weibull(weibull_table(2), ["plan", "x"])
    fc = fit.predict_retention({"plan": "Orchard"}, [100.0])
    assert fc.filled == {"x": f"{fit.design.means[1]:.4g} (weighted mean)"}
    ref = fit.reference["plan"]
    assert fit.predict_retention({}, [1.0]).filled["plan"] == f"{ref} (reference level)"
    with pytest.raises(DataError, match="no level 'Meadow'"):
        fit.predict_retention({"plan": "Meadow"}, [1.0])
    with pytest.raises(DataError, match="colour not in the model"):
        fit.predict_retention({"colour": "red"}, [1.0])


@pytest.mark.parametrize("make", [
    lambda t: fit_exponential(t, ["plan", "x"]),
    lambda t: fit_weibull(t, ["plan", "x"]),
    lambda t: fit_piecewise(t, [100.0, 300.0], ["plan", "x"]),
])
def test_expected_churns_equal_actual_at_the_estimate(make):
    """Score equations: at the MLE the intercept (or band) and each indicator's score is
    sum(w d) - sum(w dH), so expected = actual overall and within each plan level."""
    table = weibull_table(3)
    fit = make(table)
    exp_rows = fit.expected_events(table)
    assert exp_rows.sum() == pytest.approx(table.n_events, rel=1e-7)
    orch = table.column("plan").values() == "Orchard"
    assert exp_rows[orch].sum() == pytest.approx(table.churned[orch].sum(), rel=1e-7)


def test_shape_sentence_and_likelihood_ratio_test():
    rising = fit_weibull(weibull_table(4, shape=1.5))
    st = rising.shape_test
    assert st.lower > 1 and "rises with tenure" in st.reading
    e = fit_exponential(weibull_table(4, shape=1.5))
    assert st.statistic == pytest.approx(2 * (rising.loglik - e.loglik), rel=1e-10)
    assert st.p_value == pytest.approx(stats.chi2.sf(st.statistic, 1), rel=1e-12)
    falling = fit_weibull(weibull_table(5, shape=0.7)).shape_test
    assert falling.upper < 1 and "falls with tenure" in falling.reading
    flat = fit_weibull(weibull_table(6, shape=1.0, n=300)).shape_test
    assert flat.lower < 1 < flat.upper and "cannot tell" in flat.reading


def test_comparison_table_uses_the_stated_formulas():
    table = weibull_table(7)
    cmp_ = compare_models(table, ["plan"], [100.0, 300.0])
    f = cmp_.to_frame().set_index("model")
    assert list(f["parameters"]) == [2, 3, 4]
    for name, fit in cmp_.fits.items():
        assert f.loc[name, "aic"] == pytest.approx(-2 * fit.loglik + 2 * fit.n_params)
        assert f.loc[name, "bic"] == pytest.approx(-2 * fit.loglik
                                                   + fit.n_params * math.log(table.n_events))
    assert cmp_.best_by_aic == "weibull"  # the data are Weibull with shape 1.3


def test_piecewise_with_one_band_is_the_exponential():
    table = weibull_table(8)
    a, b = fit_piecewise(table, [], ["plan"]), fit_exponential(table, ["plan"])
    np.testing.assert_allclose(a.params, b.params, rtol=1e-9)
    assert a.loglik == pytest.approx(b.loglik, rel=1e-12)


def test_loglog_diagnostic_lines_are_parallel_with_slope_shape():
    table = weibull_table(10)
    dg = loglog_diagnostic(table, "plan")
    assert set(dg.points["segment"]) == {"Orchard", "Seedling"}
    slopes = []
    for seg, grp in dg.lines.groupby("segment"):
        sl = np.polyfit(grp["log_days"], grp["fitted_log_cumulative_hazard"], 1)[0]
        slopes.append(sl)
        pts = dg.points[dg.points.segment == seg]
        # Kaplan-Meier points of Weibull data lie near a line of the same slope
        # (0.1: ~5 standard errors of a shape estimated from 1500 customers)
        assert np.polyfit(pts["log_days"], pts["log_minus_log_retention"], 1)[0] == \
            pytest.approx(dg.shape, abs=0.1)
    np.testing.assert_allclose(slopes, dg.shape, rtol=1e-10)
    # true shape 1.3; its standard error here is about 0.037 (checked over 30 seeds)
    assert dg.shape == pytest.approx(1.3, abs=0.15)


def test_results_serialise_to_json(wfit):
    import json
    d = json.loads(wfit.to_json())
    assert d["model"] == "weibull" and "design" not in d
    json.loads(wfit.predict_retention(times=[1.0, 2.0]).to_json())
    json.loads(wfit.median_lifetime().to_json())
    assert "shape" in wfit.summary().lower()


def test_segment_retention_of_one_profile_is_that_profile():
    """A segment whose spells all share one covariate profile has that profile's curve,
    intervals and hazard."""
    table = weibull_table(11)
    fit = fit_weibull(table, ["plan"])
    orch = table.take(table.column("plan").values() == "Orchard")
    t = np.array([0.0, 30.0, 200.0, 1500.0])
    seg = fit.segment_retention(orch, t, label="Orchard")
    one = fit.predict_retention({"plan": "Orchard"}, t)
    np.testing.assert_allclose(seg.retention, one.retention, rtol=1e-12)
    np.testing.assert_allclose(seg.lower, one.lower, rtol=1e-9)
    np.testing.assert_allclose(seg.upper, one.upper, rtol=1e-9)
    np.testing.assert_allclose(seg.hazard, one.hazard, rtol=1e-12)
    np.testing.assert_allclose(seg.hazard_upper[1:], one.hazard_upper[1:], rtol=1e-9)
    assert "retention curve of Orchard extrapolates" in seg.warnings[0]


def test_segment_retention_interval_of_a_mixture_is_the_delta_method():
    """Mixed segment: se of the averaged S(t) against central differences of the average."""
    table = weibull_table(12)
    fit = fit_weibull(table, ["plan", "x"])
    sub = table.take(np.arange(300))
    t = 250.0
    seg = fit.segment_retention(sub, [t])
    X = fit.design.rows_for_table(sub)

    def avg(p):
        a = math.exp(p[1])
        return float(np.mean(np.exp(-np.exp(p[0] + X @ p[2:]) * t ** a)))

    assert seg.retention[0] == pytest.approx(avg(fit.params), rel=1e-12)
    g = optimize.approx_fprime(fit.params, avg, 1e-7)
    se = math.sqrt(g @ fit.cov @ g)
    s = seg.retention[0]
    z = stats.norm.isf(0.025)
    se_ll = se / abs(s * math.log(s))
    assert seg.lower[0] == pytest.approx(math.exp(-math.exp(math.log(-math.log(s)) + z * se_ll)),
                                         rel=1e-5)
