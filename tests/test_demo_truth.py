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

import numpy as np
import pytest
import statsmodels.api as sm
from statsmodels.duration.hazard_regression import PHReg

from retain import demo_business as db


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
