"""Conformance: every fitted model family keeps the same result protocol.

Each family (Cox, cause-specific Cox, exponential, Weibull, piecewise, renewal /
shifted-beta-geometric) is fitted on scikit-survival's bundled whas500 data
(Worcester Heart Attack Study; Hosmer, Lemeshow & May 2008, *Applied Survival
Analysis*, 2nd ed.) through ``StartStop`` and run through the same checks:

- ``estimates()`` is an :class:`Estimates` whose names match the covariance's shape;
- its intervals at 90 % and 99 % nest around the 95 % one and are, on the working
  scale, estimate +- z se with z from ``scipy.stats.norm`` and se from the covariance;
- at the fit's own level they equal the intervals the fit already reports
  (hazard-ratio table, renewal parameter table), so the one protocol and the old
  readers agree;
- ``predict_retention`` returns the one :class:`RetentionPrediction`, with
  non-increasing survival and lower <= survival <= upper, at the fit's level;
- ``to_dict()`` survives a JSON round trip, and the fit survives pickling with the
  same estimates and predictions.

An outside reference for the interval arithmetic: lifelines' CoxPHFitter with
``alpha=0.10`` (Efron ties, model-based errors) gives the same 90 % hazard-ratio
limits as ``estimates().interval(0.90)`` of the model-based Cox fit.
"""

from __future__ import annotations

import json
import pickle

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sksurv.datasets import load_whas500

from retain import StartStop
from retain.estimates import Estimates, RetentionPrediction
from retain.models.competing import cause_specific_cox
from retain.models.cox import fit_cox
from retain.models.curves import curves_by, kaplan_meier, nelson_aalen
from retain.models.parametric import fit_exponential, fit_piecewise, fit_weibull
from retain.models.renewal import fit_renewal

COV = ["age", "hr", "gender"]
PROFILE = {"age": 70.0, "hr": 90.0, "gender": "1"}
TIMES = np.array([0.0, 1.0, 30.0, 100.0, 365.0, 700.0, 1500.0, 2500.0, 4000.0])
LEVELS = (0.90, 0.95, 0.99)


@pytest.fixture(scope="module")
def whas() -> StartStop:
    X, y = load_whas500()
    time = y["lenfol"].astype(float)
    event = y["fstat"].astype(int)
    gender = X["gender"].astype(str).to_numpy()
    # two cause labels made from a data column, only to give the cause-specific model two
    # causes to fit (a protocol check, not a reference value)
    chf = X["chf"].astype(str).to_numpy()  # congestive heart complications: a column not fitted
    cause = np.where(event == 1, np.where(chf == "1", "involuntary", "voluntary"), "")
    covs = {"age": X["age"].astype(float).to_numpy(), "hr": X["hr"].astype(float).to_numpy(),
            "gender": gender}
    ids = np.array([f"p{i:03d}" for i in range(len(time))])
    return StartStop(np.zeros(len(time)), time, event, customer_id=ids, cause=cause,
                     covariates=covs, source="whas500")


FAMILIES = {
    "cox": lambda t: fit_cox(t, COV),
    "cause-specific cox": lambda t: cause_specific_cox(t, COV),
    "exponential": lambda t: fit_exponential(t, COV),
    "weibull": lambda t: fit_weibull(t, COV),
    "piecewise": lambda t: fit_piecewise(t, [180.0, 730.0], COV),
    "renewal": lambda t: fit_renewal(t, period_days=91.3125),
}
#: families with a retention prediction (cause-specific models predict per cause)
PREDICTS = ("cox", "exponential", "weibull", "piecewise", "renewal")


@pytest.fixture(scope="module")
def fits(whas):
    return {name: make(whas) for name, make in FAMILIES.items()}


def _predict(name, fit):
    if name == "renewal":
        return fit.predict_retention(TIMES)
    return fit.predict_retention(PROFILE, TIMES)


@pytest.mark.parametrize("name", list(FAMILIES))
def test_estimates_names_match_the_covariance(fits, name):
    est = fits[name].estimates()
    assert isinstance(est, Estimates)
    k = len(est.names)
    assert k >= 2 and len(set(est.names)) == k
    assert est.estimate.shape == (k,) and est.cov.shape == (k, k) and len(est.scale) == k
    np.testing.assert_allclose(est.cov, est.cov.T, rtol=1e-10, atol=1e-14)
    assert np.all(np.diag(est.cov) > 0)
    assert est.level == fits[name].level == 0.95


@pytest.mark.parametrize("name", list(FAMILIES))
def test_intervals_nest_and_are_wald_on_the_working_scale(fits, name):
    est = fits[name].estimates()
    se = np.sqrt(np.diag(est.cov))
    logs = np.array([s.startswith("log ") for s in est.scale])
    assert logs.all()  # every family here works on log scales
    frames = {lv: est.interval(lv) for lv in LEVELS}
    for lv, fr in frames.items():
        z = stats.norm.ppf(0.5 + lv / 2)  # two-sided normal quantile
        np.testing.assert_allclose(np.log(fr["lower"]), est.estimate - z * se, rtol=1e-10,
                                   atol=1e-12)
        np.testing.assert_allclose(np.log(fr["upper"]), est.estimate + z * se, rtol=1e-10,
                                   atol=1e-12)
        np.testing.assert_allclose(np.log(fr["estimate"]), est.estimate, rtol=1e-12)
        assert (fr["level"] == lv).all()
        assert list(fr["name"]) == list(est.names)
    lo = [frames[lv]["lower"].to_numpy() for lv in LEVELS]
    hi = [frames[lv]["upper"].to_numpy() for lv in LEVELS]
    mid = frames[0.95]["estimate"].to_numpy()
    assert np.all(lo[2] < lo[1]) and np.all(lo[1] < lo[0]) and np.all(lo[0] < mid)
    assert np.all(mid < hi[0]) and np.all(hi[0] < hi[1]) and np.all(hi[1] < hi[2])


def test_estimates_agree_with_the_tables_each_fit_reports(fits):
    """At the fit's level the protocol gives the limits the old readers print."""
    cox = fits["cox"]
    iv = cox.estimates().interval()
    np.testing.assert_allclose(iv["lower"], cox.hazard_ratios["lower"], rtol=1e-12)
    np.testing.assert_allclose(iv["upper"], cox.hazard_ratios["upper"], rtol=1e-12)
    for name in ("exponential", "weibull", "piecewise"):
        fit = fits[name]
        iv = fit.estimates().interval()
        hr = fit.hazard_ratios
        tail = iv.iloc[-len(hr):]
        assert list(tail["name"]) == list(hr["label"])
        np.testing.assert_allclose(tail["lower"], hr["lower"], rtol=1e-12)
        np.testing.assert_allclose(tail["upper"], hr["upper"], rtol=1e-12)
    shape = fits["weibull"].shape_test
    row = fits["weibull"].estimates().interval().iloc[1]
    assert row["reading"] == "shape"
    assert (row["lower"], row["upper"]) == pytest.approx((shape.lower, shape.upper), rel=1e-12)
    ren = fits["renewal"]
    np.testing.assert_allclose(ren.estimates().interval()[["lower", "upper"]],
                               ren.intervals[["lower", "upper"]], rtol=1e-12)
    cs = fits["cause-specific cox"]
    iv = cs.estimates().interval()
    np.testing.assert_allclose(iv["lower"], cs.frame["lower"], rtol=1e-12)
    np.testing.assert_allclose(iv["upper"], cs.frame["upper"], rtol=1e-12)


def test_interval_matches_lifelines_at_90_percent(whas):
    """lifelines CoxPHFitter(alpha=0.10): Efron ties, model-based covariance."""
    lifelines = pytest.importorskip("lifelines")
    fit = fit_cox(whas, COV, robust=False, reference={"gender": "0"})
    X, y = load_whas500()
    df = pd.DataFrame({"T": y["lenfol"].astype(float), "E": y["fstat"].astype(int),
                       "age": X["age"].astype(float), "hr": X["hr"].astype(float),
                       "gender": (X["gender"].astype(str) == "1").astype(float)})
    ref = lifelines.CoxPHFitter(alpha=0.10).fit(df, "T", "E")
    iv = fit.estimates().interval(0.90)
    ci = np.exp(ref.confidence_intervals_.loc[["age", "hr", "gender"]].to_numpy())
    np.testing.assert_allclose(iv[["lower", "upper"]].to_numpy(), ci, rtol=1e-5)


@pytest.mark.parametrize("name", PREDICTS)
def test_prediction_is_the_one_type(fits, name):
    fit = fits[name]
    pred = _predict(name, fit)
    assert type(pred) is RetentionPrediction
    s, lo, hi = pred.survival, pred.lower, pred.upper
    assert s.shape == lo.shape == hi.shape == pred.times.shape == pred.extrapolated.shape
    assert s[0] == 1.0 and np.all(np.diff(s) <= 1e-15)
    assert np.all(lo <= s + 1e-15) and np.all(s <= hi + 1e-15)
    assert np.all((lo >= 0) & (hi <= 1))
    assert pred.level == fit.level
    assert pred.extrapolated.dtype == bool
    assert pred.extrapolated[-1] and not pred.extrapolated[1]  # 4000 days is past whas500's
    frame = pred.to_frame()
    assert {"time", "retention", "lower", "upper", "level", "extrapolated"} <= set(frame)
    np.testing.assert_array_equal(pred["retention"].to_numpy(), s)


@pytest.mark.parametrize("name", list(FAMILIES))
def test_to_dict_json_round_trip(fits, name):
    fit = fits[name]
    est = fit.estimates()
    d = est.to_dict()
    back = json.loads(json.dumps(d, allow_nan=False))
    assert back == d
    again = Estimates(model=back["model"], names=tuple(back["names"]),
                      estimate=np.array(back["estimate"]), cov=np.array(back["cov"]),
                      scale=tuple(back["scale"]), level=back["level"])
    pd.testing.assert_frame_equal(again.interval(0.99), est.interval(0.99))
    assert json.loads(fit.to_json()) == json.loads(json.dumps(fit.to_dict(), allow_nan=False))
    if name in PREDICTS:
        p = _predict(name, fit).to_dict()
        assert json.loads(json.dumps(p, allow_nan=False)) == p
        assert p["level"] == p["conf"] == 0.95 and p["survival"] == p["retention"]


@pytest.mark.parametrize("name", list(FAMILIES))
def test_pickle_round_trip(fits, name):
    fit = fits[name]
    back = pickle.loads(pickle.dumps(fit))
    pd.testing.assert_frame_equal(back.estimates().interval(0.9), fit.estimates().interval(0.9))
    if name in PREDICTS:
        a, b = _predict(name, fit), _predict(name, back)
        np.testing.assert_array_equal(a.survival, b.survival)
        np.testing.assert_array_equal(a.lower, b.lower)
        np.testing.assert_array_equal(a.upper, b.upper)


def test_cox_without_rows_predicts_the_same_and_drops_the_table(fits, whas):
    """The prediction-only copy keeps every prediction and drops the row-level state."""
    from retain.errors import ModelError

    fit = fits["cox"]
    light = fit.without_rows()
    assert fit.keeps_rows and not light.keeps_rows
    a, b = fit.predict_retention(PROFILE, TIMES), light.predict_retention(PROFILE, TIMES)
    for name in ("survival", "lower", "upper", "extrapolated"):
        np.testing.assert_array_equal(getattr(a, name), getattr(b, name))
    pd.testing.assert_frame_equal(fit.retention_interval(PROFILE, TIMES, conf=0.9),
                                  light.retention_interval(PROFILE, TIMES, conf=0.9))
    pd.testing.assert_frame_equal(fit.segment_retention(whas, TIMES),
                                  light.segment_retention(whas, TIMES))
    np.testing.assert_array_equal(fit.expected_events(whas), light.expected_events(whas))
    assert light.to_dict() == fit.to_dict()
    # the whas500 table (500 rows) and its design no longer travel with the result
    assert len(pickle.dumps(light)) < len(pickle.dumps(fit)) / 2
    for diagnose in (lambda f: f.concordance(), lambda f: f.martingale_residuals(),
                     lambda f: f.proportional_hazards_test(), lambda f: f.fitted_table):
        diagnose(fit)
        with pytest.raises(ModelError, match="without its rows"):
            diagnose(light)


@pytest.mark.parametrize("name", ["exponential", "weibull"])
def test_time_ratio_estimates_agree_with_the_time_ratio_table(fits, name):
    """AFT reading: TR = exp(-b/shape) (Collett 2015, sec. 6.4); the protocol's Wald limits
    on log TR equal the table's delta-method limits, and nest at 90/95/99 %."""
    fit = fits[name]
    est = fit.time_ratio_estimates()
    assert set(est.scale) == {"log time ratio"} and est.reading[0] == "time ratio"
    tr = fit.time_ratios
    iv = est.interval()
    np.testing.assert_allclose(iv["estimate"], tr["time_ratio"], rtol=1e-12)
    np.testing.assert_allclose(iv["lower"], tr["lower"], rtol=1e-10)
    np.testing.assert_allclose(iv["upper"], tr["upper"], rtol=1e-10)
    if name == "exponential":  # shape 1: the time ratio is 1 / hazard ratio, limits swapped
        hr = fit.hazard_ratios
        np.testing.assert_allclose(iv["upper"], 1 / hr["lower"], rtol=1e-10)
    lo90, lo99 = est.interval(0.9)["lower"], est.interval(0.99)["lower"]
    assert np.all(lo99 < iv["lower"]) and np.all(iv["lower"] < lo90)


def test_cause_specific_without_rows_keeps_the_estimates(fits):
    cs = fits["cause-specific cox"]
    light = cs.without_rows()
    assert all(not f.keeps_rows for f in light.fits.values())
    pd.testing.assert_frame_equal(light.estimates().interval(0.9), cs.estimates().interval(0.9))
    assert len(pickle.dumps(light)) < len(pickle.dumps(cs)) / 2


def test_pages_print_the_level_the_result_carries(whas):
    """A fit asked for 90 % intervals is printed as "90 % interval", with its own limits."""
    from retain.publish.pages import hazard_sentences
    from retain.publish.pages.shared import interval_text, level_text, levels_text

    fit = fit_cox(whas, COV, conf=0.90)
    iv = fit.estimates().interval()
    assert (iv["level"] == 0.90).all()
    words = hazard_sentences(fit, 3)
    assert len(words) == 3 and all("90 % interval" in w and "95 %" not in w for w in words)
    row = iv.iloc[int(np.argmax(np.abs(fit.estimates().estimate)))]
    assert f"90 % interval {row['lower']:.2f} to {row['upper']:.2f}" in words[0]
    assert interval_text(0.1, 0.2, lambda v: f"{v:.1f}") == "95 % interval 0.1 to 0.2"
    assert level_text(0.999) == "99.9 %"
    assert levels_text([fit, fit_exponential(whas, COV)]) == "90 % / 95 %"


@pytest.mark.parametrize("name", PREDICTS)
def test_prediction_limits_at_any_level_nest(fits, name):
    """predict_retention(level=...) computes the limits on demand: 90 % inside 95 % inside 99 %."""
    fit = fits[name]
    call = (lambda lv: fit.predict_retention(TIMES, level=lv)) if name == "renewal" else \
        (lambda lv: fit.predict_retention(PROFILE, TIMES, level=lv))
    p90, p95, p99 = (call(lv) for lv in LEVELS)
    assert (p90.level, p95.level, p99.level) == LEVELS
    np.testing.assert_array_equal(p95.lower, _predict(name, fit).lower)  # default: the fit's
    inner = p95.survival < 1  # at tenure 0 (before any churn) the limits are the point 1
    assert inner.sum() >= 5
    for a, b in ((p99, p95), (p95, p90)):
        np.testing.assert_array_equal(a.survival, b.survival)
        assert np.all(a.lower[inner] < b.lower[inner]) and np.all(b.upper[inner] < a.upper[inner])
    if name == "cox":
        ref = fit.retention_interval(PROFILE, TIMES, conf=0.90)
        np.testing.assert_allclose(p90.lower, ref["lower"], rtol=1e-14)
        np.testing.assert_allclose(p90.upper, ref["upper"], rtol=1e-14)


def test_resolve_level_takes_level_or_its_older_name_conf():
    from retain.errors import DataError, ModelError
    from retain.results import DEFAULT_LEVEL, resolve_level

    assert resolve_level(None, None, "x") == DEFAULT_LEVEL == 0.95
    assert resolve_level(0.9, None, "x") == resolve_level(None, 0.9, "x") == 0.9
    with pytest.raises(ModelError, match="both level=0.9 and conf=0.9 given"):
        resolve_level(0.9, 0.9, "x")
    for bad in (0, 1, 1.5, -0.1, True, "0.95"):
        with pytest.raises(ModelError, match="level must be between 0 and 1"):
            resolve_level(bad, None, "x")
    with pytest.raises(DataError, match="conf must be between 0 and 1, got 95"):
        resolve_level(None, 95, "x", error=DataError)


@pytest.mark.parametrize("fit_fn", [
    lambda t, **k: fit_cox(t, COV, robust=False, **k),
    lambda t, **k: fit_exponential(t, COV, **k),
    lambda t, **k: fit_weibull(t, COV, **k),
    lambda t, **k: fit_piecewise(t, [365.0], COV, **k),
])
def test_level_and_conf_give_the_same_fit(whas, fit_fn):
    from retain.errors import ModelError

    a, b = fit_fn(whas, level=0.9), fit_fn(whas, conf=0.9)
    assert a.level == b.level == 0.9
    np.testing.assert_array_equal(a.estimates().interval(0.9)["lower"],
                                  b.estimates().interval(0.9)["lower"])
    assert fit_fn(whas).level == 0.95
    with pytest.raises(ModelError, match="both level"):
        fit_fn(whas, level=0.9, conf=0.9)


@pytest.mark.parametrize("curve_fn", [
    lambda t, **k: kaplan_meier(t, **k),
    lambda t, **k: nelson_aalen(t, **k),
    lambda t, **k: curves_by(t, "gender", **k)["1"],
])
def test_curves_take_level_and_conf_alike(whas, curve_fn):
    from retain.errors import ModelError

    a, b = curve_fn(whas, level=0.9), curve_fn(whas, conf=0.9)
    assert a.level == b.level == 0.9 and curve_fn(whas).level == 0.95
    np.testing.assert_array_equal(a.lower, b.lower)
    np.testing.assert_array_equal(a.upper, b.upper)
    with pytest.raises(ModelError, match="both level"):
        curve_fn(whas, level=0.9, conf=0.9)


def test_renewal_takes_level_and_conf_alike(whas):
    from retain.errors import ModelError

    a, b = fit_renewal(whas, level=0.9), fit_renewal(whas, conf=0.9)
    assert a.level == b.level == 0.9 and fit_renewal(whas).level == 0.95
    np.testing.assert_array_equal(a.project(6).lower, b.project(6).lower)
    with pytest.raises(ModelError, match="conf must be between 0 and 1, got 1.5"):
        fit_renewal(whas, conf=1.5)
