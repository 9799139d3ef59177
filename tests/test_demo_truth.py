"""The demo truth is what the generator does: the start-stop table built straight from
the simulation equals what the DuckDB preparation makes of the shipped log, and
reference libraries recover the documented parameters from it.

Reference libraries: statsmodels ``PHReg`` (Cox, Breslow ties) for the voluntary cause,
statsmodels ``GLM`` Poisson with a log-exposure offset for the involuntary cause (the
exact likelihood of a constant-hazard proportional-hazards model; Holford 1980,
Laird & Olivier 1981). Tolerance: every coefficient within 4 of its standard errors
(a two-sided 4-sigma band, about 6e-5 per coefficient for a correct generator; 24
coefficients, fixed seed), which a sign error or a wrong coding of any level would break.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.duration.hazard_regression import PHReg

from retain import demo as db


@pytest.fixture(scope="module")
def truth_table():
    return db.true_start_stop().to_pandas()


def test_prepared_log_equals_the_simulated_start_stop(truth_table, demo_prepared):
    """Every row, value for value (floats to 1e-12 relative): the log carries exactly the
    covariate paths and ends the generator drew, and the defects are all quarantined."""
    prep = demo_prepared
    got = prep.arrow.drop_columns(["weight"]).to_pandas().reset_index(drop=True)
    want = truth_table.drop(columns=["latent_time"]).reset_index(drop=True)
    assert list(got.columns) == list(want.columns)
    assert len(got) == len(want)
    for c in got.columns:
        if got[c].dtype.kind == "f":
            np.testing.assert_allclose(got[c].to_numpy(), want[c].to_numpy(), rtol=1e-12,
                                       err_msg=c)
        else:
            assert (got[c].astype(str).to_numpy() == want[c].astype(str).to_numpy()).all(), c
    d = db.TRUTH["defects"]
    expected = sum(v for k, v in d.items() if k != "rule") + db.TRUTH["noise"][
        "gift_card_redeemed_rows"]
    assert prep.reconciliation.quarantined == expected


def test_latent_time_lies_in_the_recorded_day(truth_table):
    ch = truth_table[truth_table["churned"] == 1]
    assert ((ch["latent_time"] > ch["stop"] - 1) & (ch["latent_time"] <= ch["stop"])).all()
    assert (truth_table["start"] < truth_table["stop"]).all()


def _design(d):
    cols = {
        "plan=Bloom": (d.plan == "Bloom"), "plan=Orchard": (d.plan == "Orchard"),
        "price_ratio": d.price_ratio, "paused": d.paused, "in_recovery": d.in_recovery,
        "prior_spells": d.prior_spells,
        "channel=referral": d.channel == "referral",
        "channel=podcast_ad": d.channel == "podcast_ad",
        "channel=garden_centre": d.channel == "garden_centre",
        "region=east": d.region == "east", "region=north": d.region == "north",
        "region=west": d.region == "west",
    }
    return list(cols), np.column_stack([np.asarray(v, float) for v in cols.values()])


def _true(cause, names):
    c = db.TRUTH[cause]["coefficients"]
    out = []
    for nm in names:
        if "=" in nm:
            k, lv = nm.split("=")
            out.append(c[k][lv])
        else:
            out.append(c[nm])
    return np.array(out)


@pytest.mark.slow
def test_voluntary_effects_recovered_by_cox(truth_table):
    """statsmodels PHReg on the recorded (day) times with delayed entry. PHReg counts a
    row as at risk at its entry time itself (entry <= t), so on day-valued data a change
    day would hold the customer twice; entries are nudged by 1e-6 day to give the (start,
    stop] convention of the start-stop contract."""
    d = truth_table
    names, x = _design(d)
    status = ((d.churned == 1) & (d.cause == "voluntary")).to_numpy().astype(int)
    fit = PHReg(d.stop.to_numpy(), x, status=status, entry=d.start.to_numpy() + 1e-6,
                ties="breslow").fit()
    z = (fit.params - _true("voluntary", names)) / fit.bse
    assert np.all(np.abs(z) < 4), dict(zip(names, np.round(z, 2), strict=True))


def test_involuntary_effects_recovered_by_poisson(truth_table):
    """Constant cause-specific hazard: Poisson GLM of involuntary ends on the covariates
    with offset log(exposure), exposure to the latent time on churn rows."""
    d = truth_table
    names, x = _design(d)
    stop = np.where(d.churned == 1, d.latent_time, d.stop)
    y = ((d.churned == 1) & (d.cause == "involuntary")).to_numpy().astype(float)
    fit = sm.GLM(y, sm.add_constant(x), family=sm.families.Poisson(),
                 offset=np.log(stop - d.start.to_numpy())).fit()
    want = np.r_[np.log(db.TRUTH["involuntary"]["mu_per_day"]), _true("involuntary", names)]
    z = (fit.params - want) / fit.bse
    assert np.all(np.abs(z) < 4), dict(zip(["log_mu", *names], np.round(z, 2), strict=True))
    # mostly after payment failures, as documented
    assert fit.params[1 + names.index("in_recovery")] > 5


def test_price_ratio_levels_are_the_documented_prices(truth_table):
    """Every price in the table is a list price or 0.75 x a list price."""
    p = db.TRUTH["plans"]
    lists = set(p["list_price_before_rise"]) | set(p["list_price_from_rise"])
    allowed = {round(v, 2) for v in lists} | {round(0.75 * v, 2) for v in lists}
    assert set(np.round(truth_table["price"].unique(), 2)) <= allowed
    # a spell that starts inside the window starts at ratio 1
    inside = truth_table[truth_table["start"] == 0]
    assert (inside["price_ratio"] == 1.0).all()


def test_outputs_name_the_log_as_the_project_file_does(demo_prepared):
    """Relative to the project folder, so pages and results do not change when it moves."""
    assert demo_prepared.reconciliation.source == "quillfern_events.csv.gz"
    assert demo_prepared.table.source == "start-stop table of quillfern_events.csv.gz"


# ------------------------------------------------------------------ the truth's computation
DAYS = db.RETENTION_DAYS
GROUPS = ("Seedling", "Bloom", "Orchard", "all_plans")


def _limit_arrays(limit, group, key):
    return np.array([limit[group]["by_day"][str(d)][key] for d in DAYS], float)


def test_km_limit_first_chunk_reproduces_the_stored_limit(demo_truth):
    """Fast path of the truth's check: ``km_limit`` with one chunk (125 000 customers)
    reruns the first chunk of the stored 4 000 000-customer run (same seed sequence). The
    stored limit is the mean over 32 chunks, so chunk - limit has variance
    se_chunk^2 - se_limit^2 (the limit shares the chunk's draws); every one of the 20
    points must lie within 4 such standard errors (Bonferroni over 20 looks: false alarm
    < 1.3e-3; common practice). A generator change that moves a curve by more than about
    0.003 at 30 days or 0.008 at 730 days breaks it; the slow test below is exact."""
    stored = demo_truth["km_limit"]
    assert stored["call"].startswith("km_limit(n_customers=4000000, seed=2, chunk=125000,")
    one = db.km_limit(125_000, chunk=125_000)
    worst = {}
    for g in GROUPS:
        a, b = _limit_arrays(one, g, "retention"), _limit_arrays(stored, g, "retention")
        sa, sb = _limit_arrays(one, g, "mc_se"), _limit_arrays(stored, g, "mc_se")
        z = (a - b) / np.sqrt(sa**2 - sb**2)
        worst[g] = float(np.abs(z).max())
        # 32 chunks of the same size: counts add up to 32 times one chunk, roughly
        assert 28 * one[g]["spells"] < stored[g]["spells"] < 36 * one[g]["spells"], g
    assert max(worst.values()) < 4, worst


def test_km_limit_error_estimates_agree(demo_truth):
    """The truth's Monte Carlo error, two ways: Greenwood's formula on the whole run, and
    the spread of the 32 chunks' own curves / sqrt(32). With 31 degrees of freedom the
    spread's relative error is about 1 / sqrt(62) = 13 %, so the ratio must lie in
    [0.55, 1.6] (beyond 3.4 of those errors either side) at each of the 20 points."""
    stored = demo_truth["km_limit"]
    for g in GROUPS:
        ratio = (_limit_arrays(stored, g, "mc_se_between_chunks")
                 / _limit_arrays(stored, g, "mc_se"))
        assert np.all((ratio > 0.55) & (ratio < 1.6)), (g, np.round(ratio, 2))


@pytest.mark.slow
def test_km_limit_reruns_exactly(demo_truth):
    """The full truth computation (4 000 000 customers in 32 chunks, about 11 s on this
    machine) gives the stored numbers exactly."""
    assert db.km_limit() == demo_truth["km_limit"]


def _paths(n, seed, cap=731, switches=None):
    rng = np.random.Generator(np.random.PCG64(seed))
    cu = db._draw_customers(rng, n, "2023-06-01", "2026-11-30")
    sp = db.simulate_spells(rng, cu["signup"], cu["plan"], cu["channel"], cu["region"],
                            cu["arm"], as_of_day=None, tenure_cap=cap, switches=switches)
    return cu, sp


def test_conditional_retention_is_the_closed_form_survival():
    """Hand-worked closed form (every covariate process off, so each spell keeps its
    signup covariates): S(t) = exp(-exp(b.x) (t/lam)^alpha - mu exp(g.x) t). For the
    reference profile (Seedling, search, south) that is scipy.stats.weibull_min(c=alpha,
    scale=lam).sf(t) * scipy.stats.expon(scale=1/mu).sf(t) (outside reference); for an
    Orchard / referral / north customer b.x = -0.45 - 0.35 + 0.15 = -0.65 and
    g.x = -0.30 - 0.20 + 0 = -0.50 (truth tables in demo_data/README.md)."""
    from scipy import stats

    sw = db.SimSwitches(plan_changes=False, price_rise=False, intro_discount=False,
                        pauses=False, payment_failures=False, involuntary=True,
                        reactivations=False)
    rng = np.random.Generator(np.random.PCG64(3))
    n = 4
    zeros = np.zeros(n, np.int64)
    plan = np.array([0, 2, 0, 2])
    channel = np.array([0, 1, 0, 1])
    region = np.array([0, 2, 0, 2])
    sp = db.simulate_spells(rng, np.full(n, db._day("2024-01-01")), plan, channel, region,
                            zeros, as_of_day=None, tenure_cap=731, switches=sw)
    got = db.conditional_retention(sp, channel, region, zeros, DAYS)
    v, mu = db.TRUTH["voluntary"], db.TRUTH["involuntary"]["mu_per_day"]
    t = np.array(DAYS, float)
    ref = (stats.weibull_min(c=v["alpha"], scale=v["lam_days"]).sf(t)
           * stats.expon(scale=1 / mu).sf(t))
    other = np.exp(-np.exp(-0.65) * (t / v["lam_days"]) ** v["alpha"]
                   - mu * np.exp(-0.50) * t)
    for i in range(n):
        np.testing.assert_allclose(got[i], ref if plan[i] == 0 else other, rtol=1e-12)


def test_conditional_retention_matches_the_drawn_times():
    """On the full generator (every process on), the mean of exp(-H(t | path)) over spells
    and the share of the same spells whose drawn T exceeds t estimate the same P(T > t):
    the difference has variance var(indicator) - var(exp(-H)) <= var(indicator), so
    |difference| < 4 binomial standard errors at each of 5 days (false alarm < 1e-3).
    Dropping the involuntary hazard from H (0.005 at 30 days, 0.1 at 730) or reading
    the price step a day late would break it at 50 000 customers."""
    cu, sp = _paths(50_000, 17)
    p = db.conditional_retention(sp, cu["channel"], cu["region"], cu["arm"], DAYS)
    first = sp.prior == 0
    m = int(first.sum())
    for j, d in enumerate(DAYS):
        share = float(np.mean(sp.t[first] > d))
        assert abs(p[first, j].mean() - share) < 4 * math.sqrt(share * (1 - share) / m), d
    with pytest.raises(ValueError, match="followed to max"):
        db.conditional_retention(_paths(10, 1, cap=100)[1], cu["channel"], cu["region"],
                                 cu["arm"], DAYS)


def test_uncensored_retention_is_not_what_the_demo_curve_estimates(demo_truth):
    """Why the demo's curves are held against ``km_limit`` and not against the
    uncensored P(T > t): at 730 days the two differ by far more than their Monte Carlo
    errors for every plan (the later cohorts, which never saw the price rise, are
    censored before 730 days)."""
    limit = demo_truth["km_limit"]
    marginal = demo_truth["reference_values"]["retention"]["first_spells"]
    for g in GROUPS:
        a, b = limit[g]["by_day"]["730"], marginal[g]["by_day"]["730"]
        gap = b["retention"] - a["retention"]
        assert gap > 8 * math.hypot(a["mc_se"], b["mc_se"]), g
