"""Projects that look nothing like the demo's go through the whole flow.

Source of the data: scikit-survival's copy of the Veterans' Administration lung
cancer trial (``sksurv.datasets.load_veterans_lung_cancer``; Kalbfleisch &
Prentice 1980), turned into an event log: every patient starts on the same day
1000 days before the as-of date and, if the death was seen, ends ``time`` days
later; a censored patient starts ``time`` days before the as-of date instead, so
the as-of date censors them at their own time. The Kaplan–Meier curve of the
prepared table must then equal scikit-survival's ``kaplan_meier_estimator``.

Steps the project file does not ask for (no covariates, no margin, no second churn
cause) are recorded as "not set up" with the key that turns them on, never as failures.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest

sksurv_datasets = pytest.importorskip("sksurv.datasets")
from sksurv.nonparametric import kaplan_meier_estimator  # noqa: E402

from retain import project  # noqa: E402
from retain.data.prepare import prepare  # noqa: E402
from retain.models.curves import kaplan_meier  # noqa: E402
from retain.run import options_from_config, run_table  # noqa: E402

AS_OF = dt.date(2024, 12, 31)


@pytest.fixture(scope="module")
def veterans_log() -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    x, y = sksurv_datasets.load_veterans_lung_cancer()
    died = y["Status"].astype(bool)
    days = y["Survival_in_days"].astype(int)
    rows = []
    for i, (d, t, cell, karno) in enumerate(zip(died, days, x["Celltype"],
                                                 x["Karnofsky_score"], strict=True)):
        start = AS_OF - dt.timedelta(days=1000 if d else int(t))
        rows.append((f"v{i}", f"{start} 08:00", "enrolled", str(cell), f"{karno:g}"))
        if d:
            rows.append((f"v{i}", f"{start + dt.timedelta(days=int(t))} 09:00", "died", "", ""))
    frame = pd.DataFrame(rows, columns=["patient", "at", "what", "cell", "karnofsky"])
    return frame, days.astype(float), died


def _project(frame: pd.DataFrame, attributes: dict | None = None, **sections):
    return project(frame, columns={"customer_id": "patient", "event_time": "at",
                                   "event": "what"},
                   events={"map": {"enrolled": "start", "died": "end"}},
                   window={"as_of": AS_OF.isoformat()}, attributes=attributes, **sections)


def test_no_attributes_matches_reference_km(veterans_log) -> None:
    frame, days, died = veterans_log
    prepared = prepare(_project(frame))
    assert prepared.reconciliation.rows_in == len(frame)
    assert prepared.reconciliation.used == len(frame)
    # reference: scikit-survival's product-limit estimate on the same times
    t_ref, s_ref = kaplan_meier_estimator(died, days)
    curve = kaplan_meier(prepared.table)
    ours = np.interp(t_ref, curve.times, curve.survival)  # both step at the same times
    np.testing.assert_allclose(ours, s_ref, atol=1e-12)


def test_steps_not_asked_for_are_skipped_not_failed(veterans_log) -> None:
    frame, _, _ = veterans_log
    config = _project(frame)
    prepared = prepare(config)
    run = run_table(prepared.table, options_from_config(config), prepared=prepared)
    for name in ("cox", "cox:ph"):
        outcome = run.get(name)
        assert outcome.skipped, (name, outcome)
        assert outcome.error.startswith("[model] covariates: ")  # the same line, word for word
    # no reason column and no payment events: every death is one cause, so no split by cause
    for name in ("incidence", "cause-cox"):
        outcome = run.get(name)
        assert outcome.skipped, (name, outcome)
        assert outcome.error.startswith("[columns] reason: ")
    # no [value] margin: lifetime value is not set up, with the keys that turn it on
    assert run.get("value:all").skipped and "margin_rate" in run.get("value:all").error
    assert run.get("km").ok and run.get("fit:weibull").ok
    failed = [k for k, o in run.outcomes.items() if not o.ok and not o.skipped]
    assert failed == []


def test_numeric_time_varying_attribute_without_ratio_fits(veterans_log) -> None:
    frame, _, _ = veterans_log
    config = _project(frame, attributes={"karnofsky": {"kind": "numeric", "varies": True},
                                         "cell": {"kind": "categorical", "varies": False}},
                      model={"covariates": ["karnofsky", "cell"]})
    prepared = prepare(config)
    run = run_table(prepared.table, options_from_config(config), prepared=prepared)
    assert run.get("cox").ok, run.get("cox").error
    # a higher Karnofsky score (better performance status) lowers the hazard in this
    # trial (Kalbfleisch & Prentice 1980, Table 5.2: coefficient about -0.033, from memory)
    coef = dict(zip(run.get("cox").value.hazard_ratios["term"],
                    np.log(run.get("cox").value.hazard_ratios["hazard_ratio"]), strict=True))
    key = next(k for k in coef if k.startswith("karnofsky"))
    assert -0.045 < coef[key] < -0.02


def test_check_reports_missing_values_per_attribute(veterans_log, tmp_path, capsys) -> None:
    """`retain check` names the attribute with blanks and the key that fits without them;
    with [model] missing = "complete_cases" the Cox fit drops exactly those customers."""
    from retain.cli import print_completeness

    frame, _, _ = veterans_log
    frame = frame.copy()
    starts = frame.index[frame["what"] == "enrolled"][:10]
    frame.loc[starts, "karnofsky"] = ""  # ten patients without a score
    attrs = {"karnofsky": {"kind": "numeric", "varies": True}}
    prepared = prepare(_project(frame, attributes=attrs, model={"covariates": ["karnofsky"]}))
    print_completeness(prepared)
    out = capsys.readouterr().out
    assert "karnofsky" in out and "10 customers" in out
    assert "[model] missing" in out
    config = _project(frame, attributes=attrs,
                      model={"covariates": ["karnofsky"], "missing": "complete_cases"})
    run = run_table(prepared.table, options_from_config(config), prepared=prepared)
    fit = run.get("cox")
    assert fit.ok, fit.error
    assert fit.value.n_customers == 137 - 10
