"""Prediction and residuals, checked by hand-computed identities.

- Breslow baseline: expected churns over the fitting table sum to the observed
  churns (Breslow 1972; exact by construction), so martingale residuals sum to 0.
- Remaining lifetime equals a fine Riemann sum of the step curve (1e-9).
- Segment retention equals the average of the members' own curves.
"""

from __future__ import annotations

import numpy as np

from retain import StartStop
from retain.models.cox import fit_cox


def _table(n=200, seed=3):
    rng = np.random.default_rng(seed)
    return StartStop(np.zeros(n), rng.integers(1, 90, n).astype(float),
                     (rng.uniform(size=n) < 0.6).astype(int),
                     customer_id=[f"c{i}" for i in range(n)],
                     covariates={"plan": rng.choice(["Seedling", "Orchard"], n),
                                 "price": rng.normal(20, 3, n)})


def test_expected_events_sum_to_observed():
    t = _table()
    fit = fit_cox(t, ["plan", "price"])
    assert abs(fit.expected_events().sum() - t.n_events) < 1e-9 * t.n_events
    assert abs(fit.martingale_residuals().sum()) < 1e-8
    np.testing.assert_allclose(fit.expected_events(t), fit.expected_events(), rtol=1e-12)


def test_remaining_lifetime_is_area_under_curve():
    fit = fit_cox(_table(), ["plan", "price"])
    prof = {"plan": "Orchard", "price": 21.0}
    res = fit.remaining_lifetime(prof, horizon=60.0, from_tenure=10.0)
    grid = np.arange(10.0, 60.0, 1e-3) + 5e-4
    s = fit.predict_retention(prof, grid)["retention"].to_numpy()
    s10 = fit.predict_retention(prof, [10.0])["retention"].to_numpy()[0]
    assert abs(res.days - (s / s10).sum() * 1e-3) < 1e-2
    assert not res.extrapolated
    assert fit.remaining_lifetime(prof, horizon=500.0).extrapolated


def test_segment_is_average_of_member_curves():
    t = _table()
    fit = fit_cox(t, ["plan", "price"])
    grid = [5.0, 20.0, 40.0]
    seg = fit.segment_retention(t.take(np.arange(10)), grid)["retention"].to_numpy()
    own = [fit.predict_retention({"plan": t.column("plan").values()[i],
                                  "price": t.numeric("price")[i]}, grid)["retention"]
           for i in range(10)]
    np.testing.assert_allclose(seg, np.mean(own, axis=0), rtol=1e-12)
    assert f"plan {fit.design.levels['plan'][1]} vs {fit.reference['plan']}" in fit.summary()
    assert fit.to_json()
