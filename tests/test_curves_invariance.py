"""Invariances of the curves and the fast kernels held against naive loops.

- Weights are frequency weights: a weighted table equals the table with rows
  duplicated (StartStop.expanded).
- (start, stop] splitting: cutting a row at an interior time (the two pieces
  keep the customer and spell) changes no output array.
- Row order does not matter.
- Curves lie in [0, 1], never increase, and the interval brackets the curve.
- The risk-set index, KM, Greenwood, Nelson–Aalen, RMST and the weighted
  log-rank are recomputed by deliberately naive loops over risk sets (plain
  Python, one time at a time) on fixed seeds; agreement to 1e-10 (double
  precision summation order only).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from retain.data.table import StartStop
from retain.models.curves import (
    cohort_retention,
    compare_groups,
    curves_by,
    kaplan_meier,
    nelson_aalen,
)
from retain.units import DAYS_PER_MONTH

TIGHT = 1e-10
SEEDS = [0, 1, 2, 3, 4, 5]


def random_table(seed: int, n: int = 300, entry: bool = True, weights: bool = False,
                 groups: int = 3) -> StartStop:
    """Customers with one spell, a few covariate changes, delayed entry, ties."""
    rng = np.random.default_rng(seed)
    starts, stops, churned, cust, grp, w = [], [], [], [], [], []
    for i in range(n):
        t0 = float(rng.integers(0, 40)) if entry and rng.random() < 0.4 else 0.0
        life = float(rng.integers(1, 200))
        cuts = np.sort(rng.choice(np.arange(1, int(life)), size=min(int(life) - 1,
                                                                      rng.integers(0, 3)),
                                  replace=False)) if life > 1 else np.array([])
        edges = [0.0] + [float(c) for c in cuts] + [life]
        edges = [t0 + e for e in edges]
        ev = int(rng.random() < 0.6)
        wi = float(rng.integers(1, 4)) if weights else 1.0
        g = f"g{rng.integers(0, groups)}"
        for a, b in zip(edges[:-1], edges[1:], strict=True):
            starts.append(a)
            stops.append(b)
            churned.append(ev if b == edges[-1] else 0)
            cust.append(f"c{i:04d}")
            grp.append(g)
            w.append(wi)
    return StartStop(np.array(starts), np.array(stops), np.array(churned), weight=np.array(w),
                     customer_id=np.array(cust, dtype=object),
                     covariates={"segment": np.array(grp, dtype=object)})


# ------------------------------------------------------------------ naive versions
def naive_km(start, stop, churned, weight, exits):
    """Plain loops: risk set at each time, product-limit, Greenwood sum."""
    times = sorted({float(b) for b, c, x in zip(stop, churned, exits, strict=True) if c or x})
    s, g = 1.0, 0.0
    out = []
    for t in times:
        n = sum(w for a, b, w in zip(start, stop, weight, strict=True) if a < t <= b)
        d = sum(w for b, c, w in zip(stop, churned, weight, strict=True) if b == t and c)
        cens = sum(w for b, c, x, w in zip(stop, churned, exits, weight, strict=True)
                   if b == t and not c and x)
        if d > 0:
            s *= 1 - d / n
            if n > d:
                g += d / (n * (n - d))
        out.append((t, n, d, cens, s, g))
    return np.array(out)


def naive_exits(tab: StartStop) -> np.ndarray:
    """A row is an exit unless another row of the same customer/spell starts at its stop."""
    keys = {(int(c), int(s), float(a)) for c, s, a in
            zip(tab.customer.codes, tab.spell, tab.start, strict=True)}
    return np.array([(int(c), int(s), float(b)) not in keys for c, s, b in
                     zip(tab.customer.codes, tab.spell, tab.stop, strict=True)])


def naive_logrank(start, stop, churned, weight, group, k, kind):
    """Loops over event times: U, V of the weighted log-rank (Fleming & Harrington 1991)."""
    times = sorted({float(b) for b, c in zip(stop, churned, strict=True) if c})
    u = np.zeros(k)
    v = np.zeros((k, k))
    s_left, s_tilde = 1.0, 1.0
    for t in times:
        ng = np.zeros(k)
        dg = np.zeros(k)
        for a, b, c, w, g in zip(start, stop, churned, weight, group, strict=True):
            if a < t <= b:
                ng[g] += w
                if b == t and c:
                    dg[g] += w
        n, d = ng.sum(), dg.sum()
        if kind == "logrank":
            wt = 1.0
        elif kind == "fh11":
            wt = s_left * (1 - s_left)
        else:  # peto-peto
            s_tilde *= 1 - d / (n + 1)
            wt = s_tilde
        if n > 1:
            for g in range(k):
                u[g] += wt * (dg[g] - ng[g] * d / n)
                for h in range(k):
                    delta = 1.0 if g == h else 0.0
                    v[g, h] += wt * wt * d * (n - d) / (n - 1) * ng[g] / n * (delta - ng[h] / n)
        s_left *= 1 - d / n
    uu = u[:-1]
    return float(uu @ np.linalg.solve(v[:-1, :-1], uu))


# ------------------------------------------------------------------ kernel vs naive
@pytest.mark.parametrize("seed", SEEDS)
def test_km_matches_naive_loops(seed):
    tab = random_table(seed, n=120, weights=seed % 2 == 1)
    curve = kaplan_meier(tab)
    ex = naive_exits(tab)
    ref = naive_km(tab.start, tab.stop, tab.churned, tab.weight, ex)
    np.testing.assert_array_equal(curve.times, ref[:, 0])
    for j, name in enumerate(("at_risk", "events", "censored", "survival", "greenwood"), 1):
        np.testing.assert_allclose(getattr(curve, name), ref[:, j], rtol=0, atol=TIGHT,
                                   err_msg=name)
    na = nelson_aalen(tab)
    h = np.cumsum(np.where(ref[:, 2] > 0, ref[:, 2] / ref[:, 1], 0.0))
    np.testing.assert_allclose(na.hazard, h, rtol=0, atol=TIGHT)


@pytest.mark.parametrize("seed", SEEDS[:4])
@pytest.mark.parametrize("kind", ["logrank", "fh11", "peto"])
def test_logrank_matches_naive_loops(seed, kind):
    tab = random_table(seed, n=90, weights=True)
    weighting = {"logrank": "logrank", "fh11": ("fleming-harrington", 1, 1),
                 "peto": "peto-peto"}[kind]
    res = compare_groups(tab, "segment", weighting=weighting)
    ref = naive_logrank(tab.start, tab.stop, tab.churned, tab.weight,
                        tab.column("segment").codes, 3, kind)
    assert res.df == 2
    assert abs(res.statistic - ref) < TIGHT * max(1.0, ref)


@pytest.mark.parametrize("seed", SEEDS[:3])
def test_restricted_mean_matches_naive_integral(seed):
    """RMST by loops: area of the step function and K&M (2003) eq. 4.5.2 variance."""
    tab = random_table(seed, n=150)
    curve = kaplan_meier(tab)
    tau = 120.0
    ev = [(t, n, d, s) for t, n, d, s in zip(curve.times, curve.at_risk, curve.events,
                                             curve.survival, strict=True) if d > 0 and t <= tau]
    pts = [(0.0, 1.0)] + [(t, s) for t, _, _, s in ev]

    def area(a):
        tot = 0.0
        for i, (t, s) in enumerate(pts):
            nxt = pts[i + 1][0] if i + 1 < len(pts) else tau
            lo, hi = max(t, a), min(nxt, tau)
            if hi > lo:
                tot += s * (hi - lo)
        return tot

    var = sum(area(t) ** 2 * d / (n * (n - d)) for t, n, d, _ in ev if n > d)
    r = curve.restricted_mean(tau)
    assert abs(r.mean - area(0.0)) < TIGHT
    assert abs(r.se - math.sqrt(var)) < TIGHT


def test_restricted_mean_without_censoring_is_sample_mean():
    """No censoring: KM is the empirical distribution (Kaplan & Meier 1958), so the
    restricted mean is mean(min(T, tau)) and the variance formula reduces to the
    plug-in variance of min(T, tau) divided by n (exact identity)."""
    rng = np.random.default_rng(7)
    x = np.ceil(rng.exponential(100, 80))
    r = kaplan_meier(StartStop(np.zeros(80), x, np.ones(80))).restricted_mean(90.0)
    m = np.minimum(x, 90.0)
    assert abs(r.mean - m.mean()) < TIGHT
    assert abs(r.se ** 2 - m.var() / 80) < TIGHT


# ------------------------------------------------------------------ invariances
FIELDS = ("times", "at_risk", "events", "censored", "survival", "se", "lower", "upper")


def _same_curve(a, b, atol=TIGHT):
    for f in FIELDS:
        np.testing.assert_allclose(getattr(a, f), getattr(b, f), rtol=0, atol=atol, err_msg=f)


@pytest.mark.parametrize("seed", SEEDS[:3])
def test_weights_equal_duplicated_rows(seed):
    tab = random_table(seed, weights=True)
    _same_curve(kaplan_meier(tab), kaplan_meier(tab.expanded()))
    for w in ("logrank", "gehan-breslow", "tarone-ware"):
        # the number at risk in the weights is the weighted count: equal to the expanded one
        a = compare_groups(tab, "segment", weighting=w)
        b = compare_groups(tab.expanded(), "segment", weighting=w)
        assert abs(a.statistic - b.statistic) < TIGHT * max(1.0, a.statistic)
    for p in (0.25, 0.5):
        qa, qb = kaplan_meier(tab).quantile(p), kaplan_meier(tab.expanded()).quantile(p)
        assert (qa.days, qa.lower, qa.upper) == (qb.days, qb.lower, qb.upper)


def _split_all(tab: StartStop, seed: int) -> StartStop:
    """Cut every row with room at a random interior time (same customer, spell)."""
    rng = np.random.default_rng(seed)
    idx, starts, stops, churned = [], [], [], []
    for i in range(tab.n_rows):
        a, b = tab.start[i], tab.stop[i]
        if b - a > 1 and rng.random() < 0.7:
            c = a + rng.uniform(0.1, b - a - 0.1)
            idx += [i, i]
            starts += [a, c]
            stops += [c, b]
            churned += [0, tab.churned[i]]
        else:
            idx.append(i)
            starts.append(a)
            stops.append(b)
            churned.append(tab.churned[i])
    new = tab.take(np.array(idx))
    return StartStop(np.array(starts), np.array(stops), np.array(churned), weight=new.weight,
                     customer_id=new.customer, spell=new.spell,
                     covariates={"segment": new.column("segment")})


@pytest.mark.parametrize("seed", SEEDS[:3])
def test_splitting_rows_changes_nothing(seed):
    tab = random_table(seed, weights=True)
    split = _split_all(tab, seed + 100)
    assert split.n_rows > tab.n_rows + 50
    _same_curve(kaplan_meier(tab), kaplan_meier(split))
    a, b = nelson_aalen(tab), nelson_aalen(split)
    np.testing.assert_allclose(a.hazard, b.hazard, rtol=0, atol=TIGHT)
    for w in ("logrank", "peto-peto", ("fleming-harrington", 0.5, 2), "gehan-breslow",
              "tarone-ware"):
        s1 = compare_groups(tab, "segment", weighting=w).statistic
        s2 = compare_groups(split, "segment", weighting=w).statistic
        assert abs(s1 - s2) < TIGHT * max(1, s1)


@pytest.mark.parametrize("seed", SEEDS[:3])
def test_row_order_does_not_matter(seed):
    tab = random_table(seed, weights=True)
    perm = np.random.default_rng(seed).permutation(tab.n_rows)
    shuffled = tab.take(perm)
    _same_curve(kaplan_meier(tab), kaplan_meier(shuffled))
    a, b = curves_by(tab, "segment"), curves_by(shuffled, "segment")
    assert a.keys() == b.keys()
    for k in a:
        _same_curve(a[k], b[k])
    ca = cohort_retention(tab.with_columns(cohort=np.where(tab.customer.codes % 2, "2025-01",
                                                           "2025-02").astype(object)), months=6)
    cb = cohort_retention(shuffled.with_columns(
        cohort=np.where(shuffled.customer.codes % 2, "2025-01", "2025-02").astype(object)),
        months=6)
    np.testing.assert_allclose(ca.retention, cb.retention, rtol=0, atol=TIGHT)
    np.testing.assert_allclose(ca.churn_rate, cb.churn_rate, rtol=0, atol=TIGHT)


@st.composite
def small_tables(draw):
    n = draw(st.integers(1, 25))
    rows = draw(st.lists(st.tuples(st.integers(0, 10), st.integers(1, 15), st.booleans(),
                                   st.integers(1, 3)), min_size=n, max_size=n))
    start = np.array([float(r[0]) for r in rows])
    stop = start + np.array([float(r[1]) for r in rows])
    return StartStop(start, stop, np.array([int(r[2]) for r in rows]),
                     weight=np.array([float(r[3]) for r in rows]))


@settings(max_examples=150, deadline=None)
@given(small_tables(), st.sampled_from(["log-log", "log", "linear"]))
def test_curve_bounds_and_naive_agreement(tab, ci):
    c = kaplan_meier(tab, ci=ci)
    assert np.all((c.survival >= 0) & (c.survival <= 1))
    assert np.all(np.diff(c.survival) <= 1e-15)
    assert np.all(c.lower <= c.survival + 1e-12) and np.all(c.survival <= c.upper + 1e-12)
    assert np.all((c.lower >= 0) & (c.upper <= 1))
    ref = naive_km(tab.start, tab.stop, tab.churned, tab.weight, np.ones(tab.n_rows, bool))
    np.testing.assert_allclose(c.survival, ref[:, 4], rtol=0, atol=TIGHT)
    np.testing.assert_allclose(c.at_risk, ref[:, 1], rtol=0, atol=TIGHT)


@pytest.mark.parametrize("seed", SEEDS[:3])
def test_cohort_first_month_equals_cohort_km(seed):
    tab = random_table(seed, weights=True)
    coh = np.array([f"2025-0{1 + c % 3}" for c in tab.customer.codes], dtype=object)
    tab = tab.with_columns(cohort=coh)
    table = cohort_retention(tab, months=5)
    for i, name in enumerate(table.cohorts):
        sub = tab.take(tab.column("cohort").codes == tab.column("cohort").levels.index(name))
        km = kaplan_meier(sub)
        for m in range(1, 6):
            expect = km.at(m * DAYS_PER_MONTH)[0]
            got = table.retention[i, m - 1]
            assert (math.isnan(expect) and math.isnan(got)) or abs(got - expect) < TIGHT
        # churn-rate cells: churns and exposure recomputed by loops for month 1
        e0, e1 = 0.0, DAYS_PER_MONTH
        expo = sum(w * max(0.0, min(b, e1) - max(a, e0)) for a, b, w in
                   zip(sub.start, sub.stop, sub.weight, strict=True)) / DAYS_PER_MONTH
        churns = sum(w for b, c, w in zip(sub.stop, sub.churned, sub.weight, strict=True)
                     if c and e0 < b <= e1)
        assert abs(table.exposure[i, 0] - expo) < TIGHT
        assert abs(table.churn_rate[i, 0] - churns / expo) < TIGHT


@pytest.mark.parametrize("seed", SEEDS[:3])
def test_grid_and_binary_search_paths_agree(seed):
    """Half-day times use the lookup-table path; shifting every time by 1/3 day forces
    the searchsorted path. The counts must be identical."""
    from retain.kernels.risksets import half_day_grid, risk_table

    tab = random_table(seed, weights=True)
    assert half_day_grid(tab.start, tab.stop) is not None
    assert half_day_grid(tab.start + 1 / 3, tab.stop + 1 / 3) is None
    codes = tab.column("segment").codes
    for group, k in ((None, 1), (codes, 3)):
        a = risk_table(tab.start, tab.stop, tab.churned, tab.weight, group=group, n_groups=k)
        b = risk_table(tab.start + 1 / 3, tab.stop + 1 / 3, tab.churned, tab.weight,
                       group=group, n_groups=k)
        np.testing.assert_allclose(a.times + 1 / 3, b.times, rtol=0, atol=1e-12)
        for f in ("at_risk", "events", "censored"):
            np.testing.assert_array_equal(getattr(a, f), getattr(b, f))
