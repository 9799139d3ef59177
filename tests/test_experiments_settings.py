"""An experiment's settings given as a mapping with text dates, or as the config's
ExperimentSpec with dates, select the same customers and give the same verdict; the as-of
date travels as a date and becomes text only in the JSON.

Data: scikit-survival's whas500 (Hosmer, Lemeshow & May 2008) dressed as an experiment,
arm = gender.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from sksurv.datasets import load_whas500

from retain.data.config import ExperimentSpec, experiment_settings
from retain.data.table import StartStop
from retain.decisions.experiments import experiment_verdict, select_experiment
from retain.errors import ConfigError


@pytest.fixture(scope="module")
def trial() -> StartStop:
    """whas500 with every patient signed up on 2025-03-10; arm 0 control, 1 treatment."""
    X, y = load_whas500()
    n = len(y)
    return StartStop(np.zeros(n), y["lenfol"], y["fstat"].astype(int),
                     customer_id=[f"p{i}" for i in range(n)],
                     start_date=np.full(n, np.datetime64("2025-03-10")),
                     covariates={"arm": X["gender"].astype(str).to_numpy(),
                                 "age": X["age"].to_numpy(float),
                                 "price": np.full(n, 20.0)})


def test_mapping_with_text_dates_equals_the_spec(trial: StartStop) -> None:
    typed = ExperimentSpec(name="t", arm="arm", control="0", signup_from=dt.date(2025, 3, 1),
                           signup_to=dt.date(2025, 3, 31), covariates=("age",))
    plain = {"name": "t", "arm": "arm", "control": "0", "signup_from": "2025-03-01",
             "signup_to": "2025-03-31", "covariates": ["age"]}
    assert experiment_settings(plain) == typed
    a, b = select_experiment(trial, typed), select_experiment(trial, plain)
    assert a[1] == b[1] and np.array_equal(a[0].stop, b[0].stop)
    va = experiment_verdict(trial, typed, as_of=dt.date(2026, 3, 1), n_boot=20)
    vb = experiment_verdict(trial, plain, as_of="2026-03-01", n_boot=20)
    assert va.to_dict() == vb.to_dict()


def test_interim_is_decided_on_dates(trial: StartStop) -> None:
    """Hand-worked: the last actual signup day is 2025-03-10 (every patient; the declared
    window runs to 2025-03-31) + 365 days = 2026-03-10. An as-of date one day earlier is
    interim, that day itself is not; the verdict keeps a date and its JSON the
    "YYYY-MM-DD" text."""
    spec = ExperimentSpec(name="t", arm="arm", control="0", signup_from=dt.date(2025, 3, 1),
                          signup_to=dt.date(2025, 3, 31))
    early = experiment_verdict(trial, spec, as_of=dt.date(2026, 3, 9), n_boot=20)
    on_time = experiment_verdict(trial, spec, as_of=dt.date(2026, 3, 10), n_boot=20)
    assert early.interim and not on_time.interim
    assert early.as_of == dt.date(2026, 3, 9)
    assert early.to_dict()["as_of"] == "2026-03-09"
    assert any("reached on 2026-03-10" in w for w in early.warnings)


def test_settings_errors_name_the_key() -> None:
    with pytest.raises(ConfigError, match="unknown key 'horizon'.*allowed keys: name, arm"):
        experiment_settings({"arm": "arm", "control": "0", "horizon": 30})
    with pytest.raises(ConfigError, match=r"\[experiments.x\] control: is required"):
        experiment_settings({"name": "x", "arm": "arm"})
    with pytest.raises(ConfigError, match="'March' is not a date"):
        experiment_settings({"arm": "arm", "control": "0", "signup_from": "March"})
