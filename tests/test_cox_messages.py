"""Every Cox error and warning, matched by its text (hand-built small tables)."""

from __future__ import annotations

import numpy as np
import pytest

from retain import ConvergenceError, DataError, ModelError, StartStop
from retain.models.cox import fit_cox


def _table(n=120, seed=0, **extra):
    rng = np.random.default_rng(seed)
    covs = {"plan": rng.choice(["Seedling", "Orchard", "Grove"], n),
            "price": rng.normal(20, 3, n)}
    covs.update(extra)
    return StartStop(np.zeros(n), rng.integers(1, 50, n).astype(float),
                     (rng.uniform(size=n) < 0.5).astype(int), covariates=covs)


def test_no_churns():
    t = _table()
    t = StartStop(t.start, t.stop, np.zeros(t.n_rows), covariates=t.covariates)
    with pytest.raises(ModelError, match="the table has no churns"):
        fit_cox(t, ["price"])


def test_level_with_no_churns_is_separation_and_penalty_keeps_it_finite():
    t = _table()
    d = t.churned.copy()
    d[t.column("plan").values() == "Grove"] = 0
    t = StartStop(t.start, t.stop, d, covariates=t.covariates)
    with pytest.raises(ModelError, match=r"plan level 'Grove' has no churns.*quasi separation"):
        fit_cox(t, ["plan", "price"])
    fit = fit_cox(t, ["plan", "price"], penalty=1.0)
    assert np.all(np.isfinite(fit.coef))
    assert any("the penalty keeps the estimate finite" in w for w in fit.warnings)


def test_no_convergence_carries_history():
    with pytest.raises(ConvergenceError, match="did not converge in 1 iterations") as err:
        fit_cox(_table(), ["plan", "price"], max_iter=1)
    assert len(err.value.history) == 1


def test_few_events_per_parameter_and_robust_by_row_warn():
    fit = fit_cox(_table(n=30), ["plan", "price"])
    assert any("churns per coefficient" in w and "common practice" in w for w in fit.warnings)
    assert any("no customer_id" in w for w in fit.warnings)


def test_stratum_without_churns_warns():
    t = _table()
    region = np.where(np.arange(t.n_rows) < 10, "East", "West")
    d = t.churned.copy()
    d[:10] = 0
    t = StartStop(t.start, t.stop, d, covariates={**t.covariates, "region": region})
    fit = fit_cox(t, ["price"], strata="region")
    assert any("stratum region=East has no churns" in w for w in fit.warnings)


def test_bad_options_and_columns():
    t = _table()
    with pytest.raises(ModelError, match="unknown tie method 'exact'"):
        fit_cox(t, ["price"], ties="exact")
    with pytest.raises(DataError, match="there is no column 'colour'"):
        fit_cox(t, ["colour"])
    with pytest.raises(DataError, match="'plan' is both a covariate and a stratum"):
        fit_cox(t, ["plan"], strata="plan")
    with pytest.raises(DataError, match="collinear: price, p2"):
        fit_cox(t.with_columns(p2=2 * t.numeric("price")), ["price", "p2"])


def test_collinear_found_from_the_information_at_zero():
    """The fit checks collinearity on its information at beta = 0 (one pass less over the
    design): exact combinations of levels and numbers are named, and a covariate that is
    constant within each stratum (no information in a stratified fit) is named too."""
    t = _table(n=300, seed=4)
    plan = t.column("plan").values()
    grove = (plan == "Grove").astype(float)
    with pytest.raises(DataError, match=r"collinear: plan=Orchard, price, mix .*within the risk"):
        fit_cox(t.with_columns(mix=t.numeric("price") - 3 * (plan == "Orchard")),
                ["plan", "price", "mix"], reference={"plan": "Grove"})
    region = np.where(np.arange(300) % 2 == 0, "north", "south")
    level = np.where(region == "north", 1.0, 2.0)  # constant within each stratum
    strat = t.with_columns(region=region, level=level, grove=grove)
    with pytest.raises(DataError, match=r"level do not vary within the risk sets of each stratum"):
        fit_cox(strat, ["price", "level"], strata="region")
    fit = fit_cox(strat, ["price", "grove"], strata="region")  # varies within strata: fine
    assert np.all(np.isfinite(fit.se_model))
