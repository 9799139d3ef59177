"""The text of every error and warning the parametric and renewal entry points raise."""

import numpy as np
import pytest

from retain import ConvergenceError, DataError, ModelError, StartStop
from retain.models.parametric import fit_exponential, fit_piecewise, fit_weibull
from retain.models.renewal import backtest_renewal, fit_renewal


def small():
    rng = np.random.default_rng(0)
    n = 200
    stop = rng.uniform(1, 300, n)
    return StartStop(np.zeros(n), stop, (rng.uniform(size=n) < 0.6).astype(int),
                     covariates={"plan": rng.choice(["a", "b"], n), "x": rng.normal(size=n)})


@pytest.mark.parametrize("call, error, text", [
    (lambda t: fit_weibull(t.with_columns(), conf=1.5), ModelError,
     "conf must be between 0 and 1, got 1.5"),
    (lambda t: fit_weibull(t, shape=-1.0), ModelError, "a fixed shape must be a positive number"),
    (lambda t: fit_piecewise(t, [30.0, 10.0]), ModelError,
     "band cut points must be increasing positive tenures in days"),
    (lambda t: fit_exponential(t, ["colour"]), DataError, "there is no column 'colour'"),
    (lambda t: fit_piecewise(t).time_ratios, ModelError,
     "the piecewise-constant model has no accelerated-failure-time reading"),
    (lambda t: fit_exponential(t).shape_test, ModelError,
     "the exponential fit has no free Weibull shape"),
    (lambda t: fit_weibull(t).predict_retention(times=[-1.0]), DataError,
     "times must be finite tenures >= 0"),
    (lambda t: fit_weibull(t).mean_lifetime(horizon=0.0), DataError,
     "horizon must be a positive number of days"),
    (lambda t: fit_weibull(t, max_iter=1), ConvergenceError,
     "Newton's method did not converge in 1 iterations"),
    (lambda t: fit_weibull("table"), DataError, "expected a StartStop table, got str"),
])
def test_error_texts(call, error, text):
    with pytest.raises(error, match=text.replace("(", r"\(").replace(")", r"\)")):
        call(small())


def test_no_churn_is_refused():
    t = StartStop([0.0, 0.0], [5.0, 6.0], [0, 0])
    with pytest.raises(ModelError, match="the table has no churns"):
        fit_weibull(t)


def test_convergence_error_carries_the_history():
    with pytest.raises(ConvergenceError) as info:
        fit_weibull(small(), ["x"], max_iter=1)
    assert info.value.history and "loglik" in info.value.history[0]


def test_renewal_error_and_warning_texts():
    with pytest.raises(DataError, match="need at least two counts"):
        fit_renewal([1000])
    with pytest.raises(DataError, match="counts must be finite, >= 0, with n_0 > 0"):
        fit_renewal([0, 0])
    with pytest.raises(ModelError, match="period_days must be a positive number"):
        fit_renewal(small(), period_days=0.0)
    fit = fit_renewal([1000, 631, 468, 382])
    with pytest.raises(DataError, match="renewals_made must be >= 0"):
        fit.derl(0.1, -1)
    with pytest.raises(DataError, match="renewal periods start at 1"):
        fit.retention_rates([0])
    assert fit.project(5).warnings == ("projects 2 periods past the 3 observed",)
    with pytest.raises(ModelError, match="train_periods must be between 1 and 2"):
        backtest_renewal([1000, 631, 468, 382], 0)
    # a constant retention rate: alpha and beta run off together
    with pytest.raises(ModelError, match="a constant retention rate of 80.0% per period"):
        fit_renewal([1000 * 0.8 ** k for k in range(12)])
