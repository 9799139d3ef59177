"""The Quillfern demo generator: determinism, vocabulary, shares, causes, arms, and the
inversion method checked against scipy's Weibull distribution.

The shipped log is ``demo_data/quillfern_events.csv.gz`` (``write_log`` defaults). The
Kolmogorov-Smirnov checks use ``scipy.stats.kstest`` against ``scipy.stats.weibull_min``
(an outside reference) at significance level alpha = 0.001 with fixed seeds, so a
correct generator fails with probability 0.1 % per check and a fixed seed makes the
outcome reproducible; each KS check is paired with a deliberately wrong alternative that
the same test must reject, so the check has power.
"""

from __future__ import annotations

import gzip
import io
import json
import math

import numpy as np
import pandas as pd
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pytest
from scipy import stats

from retain import demo as db
from retain.paths import DEMO_DIR

SHIPPED = DEMO_DIR / "quillfern_events.csv.gz"
KS_ALPHA = 0.001


@pytest.fixture(scope="module")
def shipped():
    raw = gzip.decompress(SHIPPED.read_bytes())
    opts = pacsv.ConvertOptions(column_types={c: "string" for c in db.LOG_COLUMNS},
                                strings_can_be_null=True, null_values=[""])
    return pacsv.read_csv(io.BytesIO(raw), convert_options=opts)


@pytest.fixture(scope="module")
def sim():
    """A clean simulation (no log) with the spells' latent times and states."""
    rng = np.random.Generator(np.random.PCG64(11))
    cu = db._draw_customers(rng, 20000, "2023-06-01", "2026-11-30")
    sp = db.simulate_spells(rng, cu["signup"], cu["plan"], cu["channel"], cu["region"],
                            cu["arm"], as_of_day=db._day("2026-11-30"))
    return cu, sp


# ---------------------------------------------------------------- determinism and size
def test_shipped_file_regenerates_byte_for_byte(tmp_path):
    out = db.write_log(tmp_path / "q.csv.gz")
    assert out.read_bytes() == SHIPPED.read_bytes()
    assert SHIPPED.stat().st_size < 5_000_000


def test_same_seed_same_bytes_other_seed_differs(tmp_path):
    a = db.write_log(tmp_path / "a.csv.gz", n_customers=2000, seed=5).read_bytes()
    b = db.write_log(tmp_path / "b.csv.gz", n_customers=2000, seed=5).read_bytes()
    c = db.write_log(tmp_path / "c.csv.gz", n_customers=2000, seed=6).read_bytes()
    assert a == b
    assert a != c
    p1 = db.write_log(tmp_path / "a.parquet", n_customers=2000, seed=5).read_bytes()
    p2 = db.write_log(tmp_path / "b.parquet", n_customers=2000, seed=5).read_bytes()
    assert p1 == p2


def test_truth_json_matches_truth_and_its_call():
    saved = json.loads((DEMO_DIR / "truth.json").read_text())
    ref = saved.pop("reference_values")
    km = saved.pop("km_limit")
    assert saved == db.truth_dict()
    assert ref["call"] == ("true_reference_values(n_customers=1000000, n_experiment=200000, "
                           "seed=7, days=(30, 91, 182, 365, 730), experiment_horizon=365)")
    assert km["call"] == ("km_limit(n_customers=4000000, seed=2, chunk=125000, "
                          "days=(30, 91, 182, 365, 730), start='2023-06-01', "
                          "window_start='2024-01-01', as_of='2026-11-30')")


@pytest.mark.slow
def test_reference_values_rerun_exactly():
    """About 10 s (1M customers for retention, 200k for the experiment)."""
    saved = json.loads((DEMO_DIR / "truth.json").read_text())["reference_values"]
    assert db.true_reference_values() == saved


# ---------------------------------------------------------------- vocabulary and layout
def test_columns_and_vocabulary(shipped):
    assert tuple(shipped.column_names) == db.LOG_COLUMNS
    kinds = set(pc.unique(shipped["kind"]).to_pylist())
    assert kinds == set(db.KINDS)
    reasons = set(pc.unique(shipped["cancel_reason"]).to_pylist()) - {None}
    assert reasons == set(db.REASONS)
    assert set(pc.unique(shipped["plan"]).to_pylist()) - {None} == set(db.TRUTH["plans"]["levels"])
    prices = set(pc.unique(shipped["monthly_price"]).to_pylist()) - {None, "N/A"}
    for p in prices:  # two decimals, a plausible monthly price
        assert p.count(".") == 1 and len(p.split(".")[1]) == 2 and 10 < float(p) < 60


def test_rows_carry_only_their_attributes(shipped):
    t = shipped.to_pandas()
    start = t["kind"].isin(["signup", "reactivate"])
    attrs = ["plan", "monthly_price", "channel", "region", "arm"]
    assert t.loc[start, attrs].notna().all().all()
    other = ~start & ~t["kind"].isin(["plan_change", "price_change"])
    assert t.loc[other, attrs].isna().all().all()
    pcg = t["kind"] == "price_change"
    assert t.loc[pcg, "monthly_price"].notna().all()
    assert t.loc[pcg, ["plan", "channel", "region", "arm"]].isna().all().all()
    assert t.loc[t["kind"] != "cancel", "cancel_reason"].isna().all()


def test_defect_counts(shipped):
    t = shipped.to_pandas()
    d = db.TRUTH["defects"]
    assert t["account"].isna().sum() == d["missing_id"]
    ok_time = t["occurred_at"].str.fullmatch(r"\d{4}-\d{2}-\d{2} \d{2}:\d{2}:\d{2}")
    parsed = pd.to_datetime(t["occurred_at"], format="%Y-%m-%d %H:%M:%S",
                                              errors="coerce")
    assert (parsed.isna()).sum() == d["unparseable_time"]
    assert ok_time.fillna(False).sum() >= len(t) - d["unparseable_time"] - 1
    assert (t["monthly_price"] == "N/A").sum() == d["non_numeric_price"]
    assert t.duplicated(keep="first").sum() == d["exact_duplicate"]
    assert (parsed > "2026-11-30 23:59:59").sum() == d["after_as_of"]
    assert (t["kind"] == "gift_card_redeemed").sum() == db.TRUTH["noise"]["gift_card_redeemed_rows"]
    assert (t["kind"] == "email_opened").sum() == 400


# ---------------------------------------------------------------- shares and arms
@pytest.mark.parametrize("column,block", [("plan", "plans"), ("channel", "channels"),
                                          ("region", "regions")])
def test_signup_shares(shipped, column, block):
    """Each share within 4 binomial standard errors of the documented share."""
    t = shipped.to_pandas()
    s = t.loc[t["kind"] == "signup", column]
    n = len(s)
    key = "signup_shares" if block == "plans" else "shares"
    for level, share in zip(db.TRUTH[block]["levels"], db.TRUTH[block][key], strict=True):
        se = math.sqrt(share * (1 - share) / n)
        assert abs((s == level).mean() - share) < 4 * se, (level, (s == level).mean(), share)


def test_experiment_arms_randomised(shipped):
    """Arms only in the 2025-03 first-signup cohort; balance by a two-sided binomial test
    (scipy.stats.binomtest, alpha 0.001) and no channel imbalance (chi-square, 0.001)."""
    t = shipped.to_pandas()
    s = t[t["kind"] == "signup"]
    in_cohort = s["occurred_at"].str.startswith("2025-03")
    assert (s.loc[~in_cohort, "arm"] == "none").all()
    arms = s.loc[in_cohort, "arm"]
    assert set(arms) == {"standard", "intro_discount"}
    k = int((arms == "intro_discount").sum())
    assert stats.binomtest(k, len(arms), 0.5).pvalue > 0.001
    assert len(arms) > 2000  # the campaign month carries the experiment
    tab = pd.crosstab(s.loc[in_cohort, "arm"], s.loc[in_cohort, "channel"])
    assert stats.chi2_contingency(tab.values).pvalue > 0.001
    # every row of a customer carries the same arm
    st = t[t["kind"].isin(["signup", "reactivate"])]
    assert (st.groupby("account")["arm"].nunique() == 1).all()


# ---------------------------------------------------------------- causes
def test_involuntary_mostly_in_recovery(sim):
    _, sp = sim
    inv = sp.cause == 1
    in_rec = sp.seg_rec[sp.churn_seg[inv]] == 1
    assert 0.70 < in_rec.mean() < 0.95  # documented: about 83 %
    vol_rec = sp.seg_rec[sp.churn_seg[sp.cause == 0]] == 1
    assert vol_rec.mean() < 0.05


def test_reasons_agree_with_state_in_log(shipped):
    """Rebuild in-recovery from the log rows: card_declined only in recovery; an empty
    reason never contradicts the rule 'in recovery -> involuntary'; card_expired outside
    recovery exists (silent expiry) but is a minority of involuntary ends."""
    t = shipped.to_pandas()
    t = t[t["account"].notna() & (t["occurred_at"] <= "2026-11-30 23:59:59")
          & (t["monthly_price"] != "N/A")].drop_duplicates()
    t = t[t["occurred_at"].str.fullmatch(r"\d{4}-\d{2}-\d{2} \d{2}:\d{2}:\d{2}").fillna(False)]
    order = {"signup": 0, "reactivate": 0, "plan_change": 1, "price_change": 1, "pause": 2,
             "resume": 3, "payment_failed": 4, "payment_recovered": 5, "cancel": 6}
    t = t[t["kind"].isin(order)].copy()
    t["day"] = t["occurred_at"].str[:10]
    t["o"] = t["kind"].map(order)
    t = t.sort_values(["account", "day", "o"], kind="stable")
    step = t["kind"].map({"payment_failed": 1.0, "payment_recovered": 0.0, "signup": 0.0,
                          "reactivate": 0.0, "cancel": 0.0})
    t["rec"] = step.groupby(t["account"]).ffill().fillna(0.0)
    t["rec_before"] = t.groupby("account")["rec"].shift(1).fillna(0.0)
    c = t[t["kind"] == "cancel"]
    assert (c.loc[c["cancel_reason"] == "card_declined", "rec_before"] == 1).all()
    inv_out = ((c["cancel_reason"] == "card_expired") & (c["rec_before"] == 0)).sum()
    inv_all = c["cancel_reason"].isin(["card_declined", "card_expired"]).sum()
    assert 0 < inv_out < 0.3 * inv_all
    vol_in = (c["cancel_reason"].isin(["too_expensive", "not_using", "moved"])
              & (c["rec_before"] == 1)).sum()
    assert vol_in < 0.05 * len(c)


def test_blank_reasons_follow_the_rule(sim):
    """Draw the reasons for the simulated ends: a blank reason only where the rule gives
    the true cause (in recovery <=> involuntary)."""
    _, sp = sim
    idx = np.flatnonzero(sp.churned)
    r = db._reasons(np.random.Generator(np.random.PCG64(3)), sp, idx)
    blank = r < 0
    assert blank.sum() > 100
    rule_inv = sp.seg_rec[sp.churn_seg[idx]] == 1
    assert np.array_equal(rule_inv[blank], sp.cause[idx][blank] == 1)
    inv_reason = np.isin(r, [db.REASONS.index("card_declined"), db.REASONS.index("card_expired")])
    assert np.array_equal(inv_reason[~blank], sp.cause[idx][~blank] == 1)


def test_no_event_after_the_end_of_its_spell(sim):
    """Changes on days >= T are not logged; ends are recorded on ceil(T) >= 1."""
    _, sp = sim
    ch = sp.churned
    assert (np.ceil(sp.t[ch]) >= 1).all()
    assert (np.ceil(sp.t[ch]) <= sp.horizon[ch]).all()
    assert np.isinf(sp.t[~ch]).all()


# ---------------------------------------------------------------- the inversion method
def _reference_customers(n, seed, *, involuntary=False):
    rng = np.random.Generator(np.random.PCG64(seed))
    zeros = np.zeros(n, np.int64)
    sw = db.SimSwitches(plan_changes=False, price_rise=False, intro_discount=False,
                        pauses=False, payment_failures=False, involuntary=involuntary,
                        reactivations=False)
    return db.simulate_spells(rng, np.full(n, db._day("2024-01-01")), zeros, zeros, zeros,
                              zeros, as_of_day=None, tenure_cap=50_000, switches=sw)


def test_voluntary_times_are_weibull_ks():
    """Reference customers, every time-varying process off, no involuntary hazard: the
    latent times follow Weibull(shape alpha, scale lam) = scipy.stats.weibull_min(c=alpha,
    scale=lam). KS at alpha 0.001; a 5 % wrong scale must be rejected."""
    v = db.TRUTH["voluntary"]
    sp = _reference_customers(20000, 101)
    t = sp.t[np.isfinite(sp.t)]
    assert t.size > 19_900  # scale 1050 days, cap 50,000 days: almost all end
    t_all = np.where(np.isfinite(sp.t), sp.t, 50_000.0)
    ok = stats.kstest(t, stats.weibull_min(c=v["alpha"], scale=v["lam_days"]).cdf)
    assert ok.pvalue > KS_ALPHA
    bad = stats.kstest(t_all, stats.weibull_min(c=v["alpha"], scale=1.05 * v["lam_days"]).cdf)
    assert bad.pvalue < KS_ALPHA


def test_competing_times_match_the_joint_survival_ks():
    """With the involuntary hazard on (constant mu), T = min(T_vol, T_inv) has survival
    exp(-(t/lam)^alpha - mu t); its cdf is held against the sample by KS (alpha 0.001)."""
    v = db.TRUTH["voluntary"]
    mu = db.TRUTH["involuntary"]["mu_per_day"]
    sp = _reference_customers(20000, 202, involuntary=True)
    t = sp.t

    def cdf(x):
        return 1 - np.exp(-(x / v["lam_days"]) ** v["alpha"] - mu * x)

    assert stats.kstest(t, cdf).pvalue > KS_ALPHA
    # share of involuntary ends = integral of mu S(t) dt (numerical quadrature)
    grid = np.linspace(0, 50_000, 2_000_001)
    share = np.trapezoid(mu * (1 - cdf(grid)), grid)
    p = (sp.cause == 1).mean()
    assert abs(p - share) < 4 * math.sqrt(share * (1 - share) / t.size)


def test_splitting_segments_changes_nothing():
    """Cutting a constant-hazard spell at interior days gives the same inverted times (the
    piecewise inversion is exact; 1e-7 relative allows for the rounding of the running sum
    of hazards over all 35,000 segments, about 1e-12 absolute on a total near 5,000)."""
    rng = np.random.Generator(np.random.PCG64(9))
    n = 5000
    e = rng.exponential(size=n)
    mult = np.exp(rng.normal(0, 0.5, n))
    one = db.churn_times_piecewise(np.arange(n), np.zeros(n), np.full(n, 1e6), mult, n, e,
                                   alpha=0.8, lam=1050.0)[0]
    cuts = np.sort(rng.integers(1, 3000, (n, 6)), axis=1)
    a = np.concatenate([np.zeros((n, 1)), cuts], axis=1)
    b = np.concatenate([cuts, np.full((n, 1), 1e6)], axis=1)
    s = np.repeat(np.arange(n), 7)
    many = db.churn_times_piecewise(s, a.ravel().astype(float), b.ravel().astype(float),
                                    np.repeat(mult, 7), n, e, alpha=0.8, lam=1050.0)[0]
    np.testing.assert_allclose(many, one, rtol=1e-7)


def test_piecewise_hazard_matches_its_survival_ks():
    """A hazard multiplier that steps from 1 to 3 at day 200 (as a price rise would): the
    sample matches S(t) = exp(-H(t)) with the closed-form piecewise H (KS, alpha 0.001),
    and ignoring the step (plain Weibull) is rejected."""
    rng = np.random.Generator(np.random.PCG64(13))
    n, al, lam, cut, m2 = 20000, 0.8, 1050.0, 200.0, 3.0
    s = np.repeat(np.arange(n), 2)
    a = np.tile([0.0, cut], n)
    b = np.tile([cut, 1e7], n)
    mult = np.tile([1.0, m2], n)
    t, _ = db.churn_times_piecewise(s, a, b, mult, n, rng.exponential(size=n), alpha=al,
                                    lam=lam)

    def cdf(x):
        h0 = (np.minimum(x, cut) / lam) ** al
        h1 = m2 * ((np.maximum(x, cut) / lam) ** al - (cut / lam) ** al)
        return 1 - np.exp(-(h0 + h1))

    assert stats.kstest(t, cdf).pvalue > KS_ALPHA
    assert stats.kstest(t, stats.weibull_min(c=al, scale=lam).cdf).pvalue < KS_ALPHA


def test_generator_matches_a_naive_loop():
    """The vectorised kernel against a plain per-spell loop over segments."""
    rng = np.random.Generator(np.random.PCG64(21))
    n = 300
    k = rng.integers(1, 6, n)
    s = np.repeat(np.arange(n), k)
    a, b = [], []
    for ki in k:
        cuts = np.sort(rng.choice(np.arange(1, 900), ki - 1, replace=False)).astype(float)
        a.extend(np.r_[0.0, cuts])
        b.extend(np.r_[cuts, 1000.0])
    a, b = np.array(a), np.array(b)
    mult = np.exp(rng.normal(0, 1, s.size))
    e = rng.exponential(size=n)
    fast, _ = db.churn_times_piecewise(s, a, b, mult, n, e, alpha=1.3, lam=400.0)
    for i in range(n):
        rows = np.flatnonzero(s == i)
        acc, ti = 0.0, math.inf
        for r in rows:
            dh = mult[r] * ((b[r] / 400.0) ** 1.3 - (a[r] / 400.0) ** 1.3)
            if acc + dh >= e[i]:
                ti = 400.0 * ((a[r] / 400.0) ** 1.3 + (e[i] - acc) / mult[r]) ** (1 / 1.3)
                break
            acc += dh
        if math.isinf(ti):
            assert math.isinf(fast[i])
        else:
            assert fast[i] == pytest.approx(ti, rel=1e-10)
