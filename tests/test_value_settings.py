"""Typed settings: the config's dataclasses travel as they are; mappings given in Python are
converted once on entry and give the same figures.

Data: scikit-survival's whas500 (Hosmer, Lemeshow & May 2008), an open dataset; the
demo project's retain.toml for the run options.
"""

from __future__ import annotations

import dataclasses
import datetime as dt

import numpy as np
import pytest
from sksurv.datasets import load_whas500

from retain.data.config import ModelConfig, ValueConfig, load_config, value_settings
from retain.data.table import StartStop
from retain.decisions.value import finance_table, residual_value, value_by_segment
from retain.errors import ConfigError
from retain.models.cox import fit_cox
from retain.models.value_curves import ConstantRetention, curve_from_cox
from retain.paths import DEMO_DIR
from retain.publish.finance import finance_export
from retain.results import to_jsonable
from retain.run import RunOptions, options_from_config


@pytest.fixture(scope="module")
def whas() -> StartStop:
    """whas500: lenfol days, fstat = died; gender as text, age and bmi as numbers, a
    made-up price of 20 or 30 by gender for margins."""
    X, y = load_whas500()
    n = len(y)
    g = X["gender"].astype(str).to_numpy()
    return StartStop(np.zeros(n), y["lenfol"], y["fstat"].astype(int),
                     customer_id=[f"p{i}" for i in range(n)],
                     covariates={"gender": g, "age": X["age"].to_numpy(float),
                                 "bmi": X["bmi"].to_numpy(float),
                                 "price": np.where(g == "1", 30.0, 20.0)})


def test_a_mapping_and_the_dataclass_give_the_same_values(whas: StartStop) -> None:
    """Invariance: the [value] keys as a mapping (defaults left out) and as a ValueConfig
    give equal figures; the left-out keys take ValueConfig's defaults."""
    typed = ValueConfig(price="price", margin_rate=0.35, horizon_months=36)
    plain = {"price": "price", "margin_rate": 0.35, "horizon_months": 36}
    a = value_by_segment(whas, typed, ["gender"], n_draws=20)
    b = value_by_segment(whas, plain, ["gender"], n_draws=20)
    assert [(v.value, v.lower, v.upper) for v in a.values] == \
        [(v.value, v.lower, v.upper) for v in b.values]
    assert a.curve == b.curve == ValueConfig.curve
    assert {v.annual_discount_rate for v in b.values} == {ValueConfig.annual_discount_rate}
    assert value_settings(None) == ValueConfig()


def test_an_unknown_value_key_names_the_allowed_keys(whas: StartStop) -> None:
    with pytest.raises(ConfigError, match="unknown key 'horizon'.*allowed keys: price, "
                                          "margin_rate, margin_per_month"):
        value_by_segment(whas, {"margin_per_month": 5.0, "horizon": 12})


def test_run_options_keep_the_results_json_shape() -> None:
    """results.json's options from the demo project: the same keys, order and values as
    the flat mapping the run used to write (worked out here from the config by hand)."""
    config = load_config(DEMO_DIR / "retain.toml")
    options = options_from_config(config)
    assert options.model is config.model and options.value is config.value
    assert options.as_of == config.window.as_of
    src = config.source.path.name
    expected = {
        "title": f"Retention review: {src}", "source": src,
        "as_of": config.window.as_of.isoformat(), "segments": list(config.segments.by),
        "covariates": list(config.model.covariates), "strata": list(config.model.strata),
        "reference": dict(config.model.reference), "missing": config.model.missing,
        "piecewise_cuts": to_jsonable(config.model.piecewise_cuts),
        "decrement_edges": to_jsonable(config.model.decrement_edges),
        "value": to_jsonable(dataclasses.asdict(config.value)),
        "experiments": {e.name: to_jsonable(dataclasses.asdict(e))
                        for e in config.experiments},
        "cohort_months": 24,
    }
    got = options.to_dict()
    assert list(got) == list(expected)
    assert got == expected


def test_run_options_convert_what_python_gives_once() -> None:
    """[model] keys one by one equal a ModelConfig; text as-of dates become dates; an
    empty [value] mapping means no value figures; model and keys together are refused."""
    a = RunOptions(as_of="2026-11-30", covariates=["plan"], piecewise_cuts=[30, 60])
    b = RunOptions(as_of=dt.date(2026, 11, 30),
                   model=ModelConfig(covariates=("plan",), piecewise_cuts=(30, 60)))
    assert a == b and a.as_of == dt.date(2026, 11, 30)
    assert RunOptions().to_dict()["as_of"] == "" and RunOptions().to_dict()["value"] == {}
    assert RunOptions(value={}).value is None
    assert RunOptions(value={"margin_per_month": 4.0}).value == ValueConfig(margin_per_month=4.0)
    with pytest.raises(ConfigError, match="both given"):
        RunOptions(model=ModelConfig(), covariates=("plan",))


def test_finance_table_is_the_exported_rows(tmp_path) -> None:
    """The run keeps finance_table's rows; the export writes the same rows (as-of date as
    "YYYY-MM-DD" text). Hand-worked: one new-customer row and one active-base row."""
    c = ConstantRetention(0.9)
    base = StartStop([0.0, 0.0], [10.0, 50.0], [0, 0], customer_id=["a", "b"])
    bv = residual_value(base, c, margin_per_month=5.0, n_draws=5, as_of="2026-11-30")
    rows = finance_table(base=bv)
    assert rows["as_of"].tolist() == [dt.date(2026, 11, 30)]
    assert rows.loc[0, "total"] == pytest.approx(bv.total)
    out = finance_export(tmp_path, base=bv)
    assert out.table.drop(columns="as_of").equals(rows.drop(columns="as_of"))
    assert out.table["as_of"].tolist() == ["2026-11-30"]


@pytest.mark.parametrize("robust", [True, False])
def test_cox_draws_follow_the_covariance_the_fit_reports(whas: StartStop, robust: bool) -> None:
    """Krinsky & Robb (1986) draws: the coefficients of the redrawn Cox fits have the
    covariance the fit reports, robust (Lin & Wei 1989) or model-based. On whas500 the two
    standard errors of bmi differ by 13 % (0.0175 vs 0.0154); 20,000 draws estimate a
    standard deviation to about 0.5 %, so a 3 % tolerance tells them apart."""
    fit = fit_cox(whas, ["gender", "age", "bmi"], robust=robust)
    curve = curve_from_cox(fit, {"gender": "1", "age": 70.0, "bmi": 26.0})
    drawn = curve.redraw(fit, 20000, 7)
    coefs = np.array([f.coef for f in drawn])
    want = fit.cov_robust if robust else fit.cov_model
    np.testing.assert_allclose(coefs.std(axis=0, ddof=1), np.sqrt(np.diag(want)), rtol=0.03)
    assert np.all(np.abs(coefs.mean(axis=0) - fit.coef) < 0.05 * np.sqrt(np.diag(want)))
