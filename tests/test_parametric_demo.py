"""Recovery of the demo generator's voluntary-churn Weibull (demo_data/truth.json).

The invented Quillfern business simulates voluntary churn as a Weibull PH
model, h(t|x) = (alpha/lam)(t/lam)^(alpha-1) exp(beta.x(t)), with
time-varying plan, price_ratio, paused, in_recovery and prior_spells and
static channel and region (truth.json, ``voluntary``). The demo log is
prepared with ``retain.data.prepare`` and the Weibull is fitted to the
cause-specific table ``table.for_cause("voluntary")`` (involuntary churn
censored), with the generator's reference levels.

Tolerance: each estimate (12 coefficients, the log shape, the log scale)
within 4 standard errors of the truth. The truth is the generator's exact
parameters (no Monte Carlo error), so the band is retain's own standard error
alone (on the shipped log every |z| < 1.7). With 14 looks a 4-sigma band keeps the
false-alarm rate near 1e-3 (Bonferroni; common practice for a consistency
check). The scale is the truth's ``lam_days_if_price_ratio_enters_raw`` since
the fit uses price_ratio itself, not price_ratio - 1. The band is narrow
enough to fail: e.g. fitting all churn (both causes) moves in_recovery far
outside it, which is checked.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from retain.paths import DEMO_DIR

TOML = DEMO_DIR / "retain.toml"
TRUTH = DEMO_DIR / "truth.json"
COVARIATES = ["plan", "price_ratio", "paused", "in_recovery", "prior_spells", "channel",
              "region"]

pytestmark = pytest.mark.skipif(not (TOML.exists() and TRUTH.exists()),
                                reason="demo log or truth.json not generated yet")


@pytest.fixture(scope="module")
def demo(demo_prepared, demo_truth):
    return demo_prepared.table, demo_truth["voluntary"]


def _fit(table, truth):
    from retain.models.parametric import fit_weibull

    # the generator's reference levels (coefficient 0 in truth.json)
    return fit_weibull(table, COVARIATES,
                       reference={"plan": "Seedling", "channel": "search", "region": "south"})


def _z_scores(fit, truth):
    coef = truth["coefficients"]
    z = {}
    for j, col in enumerate(fit.columns):
        name, _, level = col.partition("=")
        true = coef[name][level] if level else coef[name]
        est = fit.params[2 + j]
        z[col] = (est - true) / fit.se[2 + j]
    z["log shape"] = (fit.params[1] - math.log(truth["alpha"])) / fit.se[1]
    # log scale = -b0 / alpha: gradient (-1/alpha, b0/alpha) in (b0, g)
    a = fit.shape_value
    g = np.zeros(fit.params.shape[0])
    g[0], g[1] = -1.0 / a, fit.params[0] / a
    se = math.sqrt(g @ fit.cov @ g)
    z["log scale"] = (math.log(fit.baseline_scale_days)
                      - math.log(truth["lam_days_if_price_ratio_enters_raw"])) / se
    return z


def test_weibull_recovers_the_voluntary_churn_truth(demo):
    table, truth = demo
    fit = _fit(table.for_cause("voluntary"), truth)
    z = _z_scores(fit, truth)
    assert len(z) == 14
    worst = max(z, key=lambda k: abs(z[k]))
    assert abs(z[worst]) < 4.0, f"{worst}: {z[worst]:.2f} standard errors from the truth"
    assert fit.shape_test.upper < 1.0 and "falls with tenure" in fit.shape_test.reading


def test_mixing_both_causes_breaks_the_band(demo):
    """Involuntary churn rides on in_recovery (coefficient 6.2): fitting all churn must
    put the voluntary in_recovery effect far outside the band."""
    table, truth = demo
    z = _z_scores(_fit(table, truth), truth)
    assert abs(z["in_recovery"]) > 10
