"""A public data set in counting-process form, turned into an event log, through prepare
and Cox, against statsmodels PHReg on the same rows.

Source: the Stanford heart transplant data as lifelines ships it,
``lifelines.datasets.load_stanford_heart_transplants()`` (172 rows, 103 patients;
start, stop, event, transplant time-varying, age / year / surgery static; Crowley and
Hu 1977, J. Am. Stat. Assoc. 72:27-36, citation from memory). Reference library:
statsmodels ``PHReg`` (statsmodels.duration.hazard_regression), Efron and Breslow ties.

Whole days: every time is floored to a whole day. Only one time is not whole: patient
38's transplant at 4.5 (death on day 5), which becomes day 4, so no interval empties.
Each patient enters on ``AS_OF - last stop`` (their own calendar), so that a patient
alive at the end is censored by the as-of date at exactly their stop. The log: an
``accepted`` row (start, with age, year, surgery and transplant = 0), a
``transplanted`` row (update, transplant = 1) on the transplant day and a ``died`` row
(end) on the death day. The project has four numeric attributes, one time-varying
without a ratio and three static: the shape that once failed in the intervals step.

PHReg keeps a row at risk at its own entry time (risk set entry <= t <= stop) while the
start-stop contract does not (start < t <= stop), so PHReg gets entry = start + 0.5,
less than the smallest gap between distinct whole-day times.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

lifelines_datasets = pytest.importorskip("lifelines.datasets")
from statsmodels.duration.hazard_regression import PHReg  # noqa: E402
from test_prepare_support import write_log  # noqa: E402

from retain.data.config import load_config  # noqa: E402
from retain.data.prepare import prepare  # noqa: E402
from retain.models.cox import fit_cox  # noqa: E402

AS_OF = dt.date(1975, 1, 1)
COVARIATES = ["age", "year", "surgery", "transplant"]
RTOL = 1e-6  # both solve the same score equations by Newton to round-off

TOML = f"""
[source]
path = "heart.csv"

[columns]
customer_id = "patient"
event_time = "date"
event = "what"

[events]
map = {{ accepted = "start", transplanted = "update", died = "end" }}

[window]
as_of = "{AS_OF}"

[attributes.age]
kind = "numeric"
varies = false

[attributes.year]
kind = "numeric"
varies = false

[attributes.surgery]
kind = "numeric"
varies = false

[attributes.transplant]
kind = "numeric"
varies = true

[engine]
memory_limit = "1GB"
threads = 1

[output]
dir = "out"
"""


@pytest.fixture(scope="module")
def heart():
    """(reference rows as a DataFrame in (patient, start) order, retain's prepared table)."""
    d = lifelines_datasets.load_stanford_heart_transplants()
    d = d.assign(start=np.floor(d.start), stop=np.floor(d.stop)).sort_values(["id", "start"])
    assert (d.stop > d.start).all() and len(d) == 172 and d.id.nunique() == 103
    rows = []
    for pid, g in d.groupby("id", sort=True):
        first = g.iloc[0]
        entered = AS_OF - dt.timedelta(days=int(g.stop.max()))
        rows.append((str(pid), entered.isoformat(), "accepted", repr(float(first.age)),
                     repr(float(first.year)), str(int(first.surgery)), "0"))
        for _, r in g.iloc[1:].iterrows():  # the transplant splits the patient's time
            assert r.transplant == 1
            rows.append((str(pid), (entered + dt.timedelta(days=int(r.start))).isoformat(),
                         "transplanted", None, None, None, "1"))
        if g.event.iloc[-1] == 1:
            rows.append((str(pid), (entered + dt.timedelta(days=int(g.stop.max()))).isoformat(),
                         "died", None, None, None, None))
    return d.reset_index(drop=True), rows


@pytest.fixture(scope="module")
def prepared(heart, tmp_path_factory):
    _, rows = heart
    folder = tmp_path_factory.mktemp("heart")
    write_log(folder / "heart.csv", rows,
              header=("patient", "date", "what", "age", "year", "surgery", "transplant"))
    (folder / "retain.toml").write_text(TOML, encoding="utf-8")
    return prepare(load_config(folder / "retain.toml"))


def test_the_start_stop_rows_are_the_data_sets_rows(heart, prepared):
    ref, rows = heart
    r = prepared.reconciliation
    assert (r.rows_in, r.used, r.quarantined) == (len(rows), len(rows), 0)
    t = prepared.arrow.to_pandas()
    t["id"] = t.customer_id.astype(int)
    t = t.sort_values(["id", "start"]).reset_index(drop=True)
    assert len(t) == len(ref) == 172
    np.testing.assert_array_equal(t[["id", "start", "stop", "churned", "transplant"]]
                                  .to_numpy(float),
                                  ref[["id", "start", "stop", "event", "transplant"]]
                                  .to_numpy(float))
    # the static values travel as text and come back as the same doubles
    np.testing.assert_array_equal(t[["age", "year", "surgery"]].to_numpy(float),
                                  ref[["age", "year", "surgery"]].to_numpy(float))
    assert "transplant_ratio" not in t.columns


@pytest.mark.parametrize("ties", ["efron", "breslow"])
def test_cox_on_the_prepared_table_matches_phreg(heart, prepared, ties):
    ref, _ = heart
    fit = fit_cox(prepared.table, COVARIATES, ties=ties)
    assert fit.labels == tuple(f"{c} (per unit)" for c in COVARIATES)
    assert int(fit.n_events) == int(ref.event.sum()) == 75
    expected = PHReg(ref.stop.to_numpy(float), ref[COVARIATES].to_numpy(float),
                     status=ref.event.to_numpy(float), entry=ref.start.to_numpy(float) + 0.5,
                     ties=ties).fit(method="newton")
    np.testing.assert_allclose(fit.coef, expected.params, rtol=RTOL)
    np.testing.assert_allclose(fit.se_model, expected.bse, rtol=RTOL)


def test_the_log_has_a_row_per_acceptance_transplant_and_death(heart):
    """Guard the guard: 103 patients accepted, 69 transplanted, 75 deaths."""
    _, rows = heart
    kinds = [r[2] for r in rows]
    assert kinds.count("accepted") == 103 and kinds.count("died") == 75
    assert kinds.count("transplanted") == 69
