"""Revenue per assigned customer to a horizon, under censoring.

R(h) = int_0^h S(t-) rbar(t) dt (Lin, Feuer, Etzioni & Wax 1997, Biometrics 53(2), in the
limit of elementary intervals): with a constant price p it is p times the Kaplan-Meier
restricted mean, which the curves module computes independently.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sksurv.datasets import load_whas500

from retain.data.table import StartStop
from retain.decisions.experiments import revenue_per_customer
from retain.kernels.discount import revenue_to_horizon
from retain.models.curves import kaplan_meier
from retain.units import DAYS_PER_MONTH


def test_hand_worked_three_rows() -> None:
    """Rows (0,10] churn price 1; (0,30] censored price 1; (10,20] churn price 2 (enters at
    10). Horizon 25. Segments: (0,10]: 2 at risk, mean price 1, S=1 -> 10;
    churn at 10 with 2 at risk -> S=0.5; (10,20]: mean price 1.5 -> 0.5*1.5*10 = 7.5;
    churn at 20 with 2 at risk -> S=0.25; (20,25]: price 1 -> 0.25*5 = 1.25. Total 18.75."""
    got = revenue_to_horizon(np.array([0, 0, 10.0]), np.array([10, 30, 20.0]),
                             np.array([1, 0, 1]), np.array([1, 1, 2.0]), np.ones(3), 25.0)
    assert float(got) == pytest.approx(18.75, abs=1e-12)


def _naive(start, stop, churned, price, weight, h):
    """Plain loops: Kaplan-Meier over the distinct times, mean price of the rows at risk on
    each elementary interval."""
    times = sorted({0.0, h, *[min(x, h) for x in start], *[min(x, h) for x in stop]})
    times = [t for t in times if t <= h]
    total, surv = 0.0, 1.0
    for j in range(len(times) - 1):
        a, b = times[j], times[j + 1]
        if j > 0:  # churns at a, against the rows at risk just before a
            n_at = sum(w for s, e, w in zip(start, stop, weight, strict=True) if s < a <= e)
            d_at = sum(w for e, c, w in zip(stop, churned, weight, strict=True)
                       if e == a and c == 1)
            if n_at > 0:
                surv *= 1 - d_at / n_at
        rows = [i for i in range(len(start)) if start[i] <= a and stop[i] >= b]
        n = sum(weight[i] for i in rows)
        if n > 0:
            total += surv * sum(weight[i] * price[i] for i in rows) / n * (b - a)
    return total


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_kernel_against_plain_loops(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 60
    start = np.where(rng.uniform(size=n) < 0.3, rng.integers(1, 50, n), 0).astype(float)
    stop = start + rng.integers(1, 200, n)
    churned = (rng.uniform(size=n) < 0.6).astype(int)
    price = rng.choice([10.0, 15.0, 20.0], n)
    weight = rng.choice([1.0, 2.0, 3.0], n)
    got = float(revenue_to_horizon(start, stop, churned, price, weight, 150.0))
    assert got == pytest.approx(_naive(start, stop, churned, price, weight, 150.0), rel=1e-12)


def test_no_censoring_gives_the_plain_mean() -> None:
    """Nobody censored before h: the estimate is the average of sum(price x time within h)."""
    rng = np.random.default_rng(4)
    stop = rng.integers(1, 400, 300).astype(float)
    price = rng.choice([9.0, 12.0], 300)
    got = float(revenue_to_horizon(np.zeros(300), stop, np.ones(300), price, np.ones(300), 365.0))
    assert got == pytest.approx(np.mean(price * np.minimum(stop, 365.0)), rel=1e-12)


def test_invariances() -> None:
    """Splitting a row at an interior time (same price) changes nothing; integer weights equal
    duplicated rows; row order does not matter."""
    rng = np.random.default_rng(9)
    n = 80
    start = np.zeros(n)
    stop = rng.integers(2, 300, n).astype(float)
    ch = (rng.uniform(size=n) < 0.5).astype(int)
    price = rng.choice([5.0, 8.0], n)
    w = rng.choice([1.0, 2.0], n)
    ref = float(revenue_to_horizon(start, stop, ch, price, w, 200.0))
    cut = np.floor(stop / 2)
    s2 = np.r_[start, cut]
    e2 = np.r_[cut, stop]
    c2 = np.r_[np.zeros(n, int), ch]
    assert float(revenue_to_horizon(s2, e2, c2, np.r_[price, price], np.r_[w, w], 200.0)) == \
        pytest.approx(ref, rel=1e-12)
    rep = np.repeat(np.arange(n), w.astype(int))
    assert float(revenue_to_horizon(start[rep], stop[rep], ch[rep], price[rep], np.ones(rep.size),
                                    200.0)) == pytest.approx(ref, rel=1e-12)
    p = rng.permutation(n)
    assert float(revenue_to_horizon(start[p], stop[p], ch[p], price[p], w[p], 200.0)) == \
        pytest.approx(ref, rel=1e-12)
    reps = revenue_to_horizon(start, stop, ch, price, w, 200.0, replicate_weights=np.vstack([w, w]))
    np.testing.assert_allclose(reps, [ref, ref], rtol=1e-12)


@pytest.fixture(scope="module")
def whas() -> StartStop:
    """whas500 (shipped with scikit-survival), censored: lenfol days, fstat = died."""
    _, y = load_whas500()
    n = len(y)
    return StartStop(np.zeros(n), y["lenfol"], y["fstat"].astype(int),
                     customer_id=[f"p{i}" for i in range(n)],
                     covariates={"price": np.full(n, 24.0)})


def test_constant_price_is_price_times_the_km_restricted_mean(whas: StartStop) -> None:
    """R(h) = p / M x RMST(h) with RMST from the curves module's Kaplan-Meier (an independent
    computation); whas500 is censored before h = 1000 days. The bootstrap SE over customers
    must match p / M x the KM RMST standard error within 15 % (400 replicates: Monte Carlo
    error of an SD ~3.5 %)."""
    est, reps = revenue_per_customer(whas, "price", 1000.0, n_boot=400, seed=3)
    rm = kaplan_meier(whas).restricted_mean(1000.0)
    assert est == pytest.approx(24.0 / DAYS_PER_MONTH * rm.mean, rel=1e-10)
    assert np.std(reps, ddof=1) == pytest.approx(24.0 / DAYS_PER_MONTH * rm.se, rel=0.15)


def test_price_path_splits_the_restricted_mean(whas: StartStop) -> None:
    """Price 0.75 p up to day 91, p after (rows split at 91): R = p / M x (0.75 RMST(91) +
    RMST(h) - RMST(91))."""
    f = whas.to_frame()
    long = f[f["stop"] > 91].copy()
    early = long.copy()
    early["stop"] = 91.0
    early["churned"] = 0
    early["price"] = 0.75 * 24.0
    late = long.copy()
    late["start"] = 91.0
    short = f[f["stop"] <= 91].copy()
    short["price"] = 0.75 * 24.0
    table = StartStop.from_frame(pd.concat([short, early, late], ignore_index=True))
    est, _ = revenue_per_customer(table, "price", 700.0, n_boot=10)
    km = kaplan_meier(whas)
    r91, r700 = km.restricted_mean(91.0).mean, km.restricted_mean(700.0).mean
    assert est == pytest.approx(24.0 / DAYS_PER_MONTH * (0.75 * r91 + r700 - r91), rel=1e-10)

