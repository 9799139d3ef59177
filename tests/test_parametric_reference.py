"""Parametric models checked against outside references (scipy, statsmodels).

Each test names its reference. Tolerances: the reference optimisers stop at
about 1e-8 relative in the estimates (scipy's ``weibull_min.fit`` uses
Nelder-Mead / a root finder; statsmodels' IRLS is run here with tol 1e-12),
so 1e-5 (scipy) and 1e-6 (statsmodels) are far above their noise and far
below any plausible bug (a wrong sign or a dropped term moves estimates by
percent).
"""

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from retain import StartStop
from retain.models.parametric import fit_exponential, fit_piecewise, fit_weibull


def censored_weibull_sample(seed, n=800, shape=1.4, scale=300.0):
    rng = np.random.default_rng(seed)
    T = stats.weibull_min.rvs(shape, scale=scale, size=n, random_state=rng)
    C = rng.uniform(0, 2.0 * scale, n)
    return np.minimum(T, C), (T <= C).astype(int)


@pytest.mark.parametrize("seed, shape", [(1, 1.4), (2, 0.7), (3, 2.5)])
def test_weibull_matches_scipy_censored_fit(seed, shape):
    """scipy.stats.weibull_min.fit(CensoredData(...), floc=0): shape and scale to 1e-5 relative.

    Reference call: ``stats.weibull_min.fit(stats.CensoredData(uncensored=t[d == 1],
    right=t[d == 0]), floc=0)``; S(t) = exp(-(t/scale)**shape) in both.
    """
    t, d = censored_weibull_sample(seed, shape=shape)
    ref_shape, _, ref_scale = stats.weibull_min.fit(
        stats.CensoredData(uncensored=t[d == 1], right=t[d == 0]), floc=0)
    fit = fit_weibull(StartStop(np.zeros_like(t), t, d))
    assert fit.shape_value == pytest.approx(ref_shape, rel=1e-5)
    assert fit.baseline_scale_days == pytest.approx(ref_scale, rel=1e-5)


def test_exponential_matches_scipy_censored_fit():
    """scipy.stats.expon.fit(CensoredData(...), floc=0): the scale is exposure / churns."""
    t, d = censored_weibull_sample(4, shape=1.0)
    _, ref_scale = stats.expon.fit(stats.CensoredData(uncensored=t[d == 1], right=t[d == 0]),
                                   floc=0)
    fit = fit_exponential(StartStop(np.zeros_like(t), t, d))
    assert fit.baseline_scale_days == pytest.approx(ref_scale, rel=1e-5)
    assert np.exp(-fit.params[0]) == pytest.approx(t.sum() / d.sum(), rel=1e-12)


def start_stop_sample(seed, n=1500):
    """Delayed entry, a time-varying numeric covariate, a categorical covariate, weights."""
    rng = np.random.default_rng(seed)
    plan = rng.choice(["Seedling", "Orchard", "Meadow"], n, p=[0.5, 0.3, 0.2])
    entry = rng.uniform(0, 60, n)
    rows = []
    for i in range(n):
        t = entry[i]
        price = rng.normal(1.0, 0.2)
        while True:
            length = rng.uniform(20, 200)
            eta = -5.5 + 0.4 * (plan[i] == "Orchard") - 0.3 * (plan[i] == "Meadow") \
                + 0.7 * (price - 1.0)
            # exponential within the row (constant covariates) -> exact simulation
            ev = rng.exponential() / np.exp(eta)
            censor = rng.uniform() < 0.15
            if ev < length:
                rows.append((i, t, t + ev, 1, plan[i], price))
                break
            rows.append((i, t, t + length, 0, plan[i], price))
            if censor:
                break
            t += length
            price = price * rng.choice([1.0, 1.1])
    df = pd.DataFrame(rows, columns=["customer_id", "start", "stop", "churned", "plan", "price"])
    df["customer_id"] = "c" + df["customer_id"].astype(str)
    df["weight"] = rng.integers(1, 4, len(df)).astype(float)
    return df


def test_exponential_rate_ratios_equal_poisson_glm():
    """statsmodels GLM(Poisson, offset=log exposure) gives the exponential MLE (Holford 1980).

    Reference call: ``sm.GLM(d, X, family=Poisson(), offset=log(stop - start),
    freq_weights=w).fit(tol=1e-12)``; coefficients and model-based SEs to 1e-6.
    """
    df = start_stop_sample(11)
    table = StartStop.from_frame(df)
    fit = fit_exponential(table, ["plan", "price"], reference={"plan": "Seedling"})
    X = pd.DataFrame({"const": 1.0, "plan=Meadow": (df.plan == "Meadow").astype(float),
                      "plan=Orchard": (df.plan == "Orchard").astype(float), "price": df.price})
    glm = sm.GLM(df.churned.to_numpy(), X, family=sm.families.Poisson(),
                 offset=np.log(df.stop - df.start).to_numpy(),
                 freq_weights=df.weight.to_numpy()).fit(tol=1e-12)
    assert list(fit.columns) == ["plan=Meadow", "plan=Orchard", "price"]
    np.testing.assert_allclose(fit.params, glm.params.to_numpy(), rtol=1e-6, atol=1e-9)
    np.testing.assert_allclose(fit.hazard_ratios["hazard_ratio"], np.exp(glm.params[1:]),
                               rtol=1e-6)
    np.testing.assert_allclose(fit.se, glm.bse.to_numpy(), rtol=1e-6)


def test_weibull_with_shape_fixed_at_one_is_the_exponential_fit():
    """Weibull with alpha = 1 is the exponential model (Collett 2015, sec. 5.6): same
    estimates, SEs and log-likelihood, through a different kernel."""
    table = StartStop.from_frame(start_stop_sample(12))
    e = fit_exponential(table, ["plan", "price"])
    w = fit_weibull(table, ["plan", "price"], shape=1.0)
    keep = [0, 2, 3, 4]
    np.testing.assert_allclose(w.params[keep], e.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(w.se[keep], e.se, rtol=1e-7)
    assert w.loglik == pytest.approx(e.loglik, rel=1e-12)
    assert w.se[1] == 0.0 and w.n_params == e.n_params


def test_weibull_ph_and_aft_readings_satisfy_the_exact_relation():
    """TR = exp(-b/alpha) = HR**(-1/alpha) (Collett 2015, sec. 6.4), checked against an
    independent AFT fit: scipy's weibull_min with log scale linear in x, by ML."""
    rng = np.random.default_rng(5)
    n = 600
    x = rng.normal(size=n)
    T = stats.weibull_min.rvs(1.6, scale=200 * np.exp(0.3 * x), random_state=rng)
    C = rng.uniform(0, 500, n)
    t, d = np.minimum(T, C), (T <= C).astype(int)
    fit = fit_weibull(StartStop(np.zeros(n), t, d, covariates={"x": x}), ["x"])
    hr = fit.hazard_ratios["hazard_ratio"].iloc[0]
    tr = fit.time_ratios
    assert tr["time_ratio"].iloc[0] == pytest.approx(hr ** (-1.0 / fit.shape_value), rel=1e-12)
    assert tr["hr_to_the_minus_1_over_shape"].iloc[0] == pytest.approx(tr["time_ratio"].iloc[0])

    # the AFT model fitted directly: log sigma_i = m + c x_i, same shape
    def negll(p):
        k, m, c = np.exp(p[0]), p[1], p[2]
        sc = np.exp(m + c * x)
        return -(np.sum(stats.weibull_min.logpdf(t[d == 1], k, scale=sc[d == 1]))
                 + np.sum(stats.weibull_min.logsf(t[d == 0], k, scale=sc[d == 0])))

    from scipy import optimize
    res = optimize.minimize(negll, [0.0, np.log(t.mean()), 0.0], method="BFGS",
                            options={"gtol": 1e-9})
    assert np.exp(res.x[0]) == pytest.approx(fit.shape_value, rel=1e-5)
    assert np.exp(res.x[2]) == pytest.approx(tr["time_ratio"].iloc[0], rel=1e-5)
    assert -res.fun == pytest.approx(fit.loglik, rel=1e-9)


def test_piecewise_band_without_churn_is_merged_and_named():
    """Three rows: (0,10] churn, (5,25] censored, (0,40] churn; cut points 20, 30 leave the
    band 20-30 days with exposure 15 and no churn: its hazard MLE is 0 (log -inf), so it
    merges with the band after it, giving the bands of cut point 20 alone (hand-worked
    below: exposure 45 and 25, churns 1 and 1)."""
    table = StartStop([0.0, 5.0, 0.0], [10.0, 25.0, 40.0], [1, 0, 1])
    fit = fit_piecewise(table, [20.0, 30.0])
    assert fit.cuts == (20.0,) and fit.requested_cuts == (20.0, 30.0)
    np.testing.assert_allclose(np.exp(fit.params), [1 / 45, 1 / 25], rtol=1e-12)
    assert fit.merged_bands == ("20 to 30 days + over 30 days -> over 20 days (no churns or "
                                "no time at risk in 20 to 30 days)",)
    assert any("bands merged" in w for w in fit.warnings)


def test_piecewise_hand_worked():
    """As above with cut points at 20 only: exposure 45 and 25, churns 1 and 1."""
    table = StartStop([0.0, 5.0, 0.0], [10.0, 25.0, 40.0], [1, 0, 1])
    fit = fit_piecewise(table, [20.0])
    np.testing.assert_allclose(np.exp(fit.params), [1 / 45, 1 / 25], rtol=1e-12)
    np.testing.assert_allclose(fit.se, [1.0, 1.0], rtol=1e-12)  # 1 / sqrt(churns)
    assert fit.loglik == pytest.approx(np.log(1 / 45) + np.log(1 / 25) - 2.0, rel=1e-12)
