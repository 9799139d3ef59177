""""At 12 months" is read on day 365: one month convention (k months = the last whole day
within k × 30.4375 days), so a year of follow-up observes the 12-month figure."""

from __future__ import annotations

import math

import numpy as np
import pytest

from retain.data.table import StartStop
from retain.models.curves import (
    TWELVE_MONTHS_DAYS,
    kaplan_meier,
    reading_day,
    retention_grid,
)
from retain.units import DAYS_PER_MONTH


def test_reading_days_by_hand():
    """k × 30.4375 = 30.4375, 91.3125, 182.625, 365.25, 730.5 -> whole days 30, 91, 182,
    365, 730."""
    assert DAYS_PER_MONTH == 30.4375
    np.testing.assert_array_equal(reading_day([1, 3, 6, 12, 24]), [30, 91, 182, 365, 730])
    assert TWELVE_MONTHS_DAYS == 365.0


def test_a_year_of_follow_up_gives_the_twelve_month_figure():
    """Hand-worked: four customers who signed up on 2025-01-01 and are watched to the as-of
    date 2026-01-01, 365 days; one churned on day 100. Kaplan–Meier: S = 1 - 1/4 = 0.75 from
    day 100 on, so retention at 12 months (day 365) is 0.75 — not "not yet observed"
    (day 365.25 would lie past the 365 days followed)."""
    tab = StartStop(np.zeros(4), [100.0, 365.0, 365.0, 365.0], [1, 0, 0, 0])
    c = kaplan_meier(tab)
    assert c.follow_up == 365.0
    assert c.at_months(12)[0] == pytest.approx(0.75, abs=1e-15)
    lo, hi = c.interval_at_months(12)
    assert lo[0] < 0.75 < hi[0]
    assert math.isnan(c.at(12 * DAYS_PER_MONTH)[0])  # the old reading day: unobserved
    assert "retained at 12 months 75.0%" in c.summary()
    g = retention_grid(c)
    twelve = list(g.months).index(12)
    assert g.days[twelve] == 365 and g.retention[twelve] == pytest.approx(0.75)
    assert g.at_risk[twelve] == 3
    assert math.isnan(g.retention[list(g.months).index(24)])


def test_364_days_do_not_make_a_year():
    """Watched 364 days (as-of date 2025-12-31 for a 2025-01-01 sign-up): day 365 is not
    observed, the figure stays missing and the summary leaves it out."""
    tab = StartStop(np.zeros(3), [50.0, 364.0, 364.0], [1, 0, 0])
    c = kaplan_meier(tab)
    assert math.isnan(c.at_months(12)[0])
    assert "12 months" not in c.summary()
    assert c.at_months(6)[0] == pytest.approx(2 / 3)


def test_twelve_months_matches_lifelines_on_whas500():
    """scikit-survival's whas500 (Hosmer, Lemeshow & May): retention at 12 months equals
    lifelines' Kaplan–Meier read on day 365 (the step function at that day)."""
    sksurv_datasets = pytest.importorskip("sksurv.datasets")
    lifelines = pytest.importorskip("lifelines")
    _, y = sksurv_datasets.load_whas500()
    t, e = y["lenfol"].astype(float), y["fstat"].astype(int)
    c = kaplan_meier(StartStop(np.zeros(len(t)), t, e))
    ref = lifelines.KaplanMeierFitter().fit(t, e)
    assert c.at_months(12)[0] == pytest.approx(float(ref.predict(365.0)), rel=1e-12)
