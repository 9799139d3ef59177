"""Aalen–Johansen cumulative incidence: statsmodels CumIncidenceRight and SurvfuncRight as
outside references, a naive loop implementation for delayed entry, and invariances."""

from __future__ import annotations

import numpy as np
import pytest
from _actuarial_data import competing_rows, kinds, split_rows
from statsmodels.duration.survfunc import CumIncidenceRight, SurvfuncRight

from retain.data.table import StartStop
from retain.errors import DataError, ModelError
from retain.kernels.incidence import _weights_before, aalen_johansen, risk_and_events
from retain.models.competing import cumulative_incidence


def right_censored(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    """Whole-day times with many ties; status 0 censored, 1 voluntary, 2 involuntary."""
    rng = np.random.default_rng(seed)
    time = np.ceil(rng.exponential(120.0, n))
    status = rng.choice([0, 1, 2], n, p=[0.35, 0.45, 0.2])
    # one censored row past the end, so no risk set is emptied by its churns (where the
    # variance's d / (n (n - d)) term is undefined and statsmodels returns nan)
    return np.append(time, time.max() + 10), np.append(status, 0)


def as_table(time, status, entry=None, weight=None):
    cause = np.array(["", "voluntary", "involuntary"], dtype=object)[status]
    return StartStop(np.zeros_like(time) if entry is None else entry, time,
                     (status > 0).astype(int), cause=cause, weight=weight)


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_matches_statsmodels_cumincidence_right(seed):
    """statsmodels.duration.survfunc.CumIncidenceRight (Marubini-Valsecchi variance, as in
    Stata's stcompet): cumulative incidence and its standard error per cause to 1e-10,
    at every distinct churn time (no delayed entry, unit weights)."""
    time, status = right_censored(300, seed)
    res = cumulative_incidence(as_table(time, status))
    ref = CumIncidenceRight(time, status)
    for c, cause in enumerate(("voluntary", "involuntary")):
        f = res.frame[res.frame["cause"] == cause]
        idx = np.searchsorted(ref.times, f["time"].to_numpy())
        assert np.array_equal(ref.times[idx], f["time"].to_numpy())
        np.testing.assert_allclose(f["cif"], ref.cinc[c][idx], rtol=0, atol=1e-10)
        np.testing.assert_allclose(f["se"], ref.cinc_se[c][idx], rtol=0, atol=1e-10)


def test_weights_match_statsmodels_freq_weights():
    """CumIncidenceRight with freq_weights (point estimate only) == our weighted estimate."""
    time, status = right_censored(200, 4)
    w = np.random.default_rng(4).integers(1, 5, time.shape[0]).astype(float)
    res = cumulative_incidence(as_table(time, status, weight=w))
    ref = CumIncidenceRight(time, status, freq_weights=w)
    for c, cause in enumerate(("voluntary", "involuntary")):
        f = res.frame[res.frame["cause"] == cause]
        idx = np.searchsorted(ref.times, f["time"].to_numpy())
        np.testing.assert_allclose(f["cif"], ref.cinc[c][idx], rtol=0, atol=1e-10)


def test_causes_add_up_to_one_minus_km_with_delayed_entry():
    """Σ_c F_c(t) = 1 - S(t) at every time, S the all-cause Kaplan-Meier with delayed entry
    from statsmodels SurvfuncRight(entry=...) (not at risk on or before entry, the same
    convention as (start, stop])."""
    rng = np.random.default_rng(8)
    time, status = right_censored(400, 8)
    entry = np.where(rng.random(time.shape[0]) < 0.3,
                     np.floor(time * rng.random(time.shape[0])), 0.0)
    entry = np.where(entry < time, entry, 0.0)
    res = cumulative_incidence(as_table(time, status, entry=entry))
    km = SurvfuncRight(time, (status > 0).astype(float), entry=entry)
    f = res.frame
    total = f.groupby("time")["cif"].sum()
    idx = np.searchsorted(km.surv_times, total.index.to_numpy())
    np.testing.assert_allclose(total.to_numpy(), 1 - km.surv_prob[idx], rtol=0, atol=1e-12)
    np.testing.assert_allclose(f["survival"], 1 - f.groupby("time")["cif"].transform("sum"),
                               atol=1e-12)


def naive_aalen_johansen(start, stop, kind, weight):
    """Plain loops over distinct churn times and rows: risk set start < t <= stop."""
    times = sorted(set(stop[kind > 0].tolist()))
    s = 1.0
    f = np.zeros(2)
    out = []
    for t in times:
        n = sum(w for a, b, w in zip(start, stop, weight, strict=True) if a < t <= b)
        d = np.zeros(2)
        for b, k, w in zip(stop, kind, weight, strict=True):
            if b == t and k > 0:
                d[k - 1] += w
        f = f + s * d / n
        s = s * (1 - d.sum() / n)
        out.append((t, n, f.copy(), s))
    return out


@pytest.mark.parametrize("shift", [0.0, 0.1])
def test_kernel_matches_naive_loops_with_delayed_entry_and_splits(shift):
    """shift 0: times on the half-day grid (counting path); 0.1: off it (sorting path)."""
    t = competing_rows(120, 9)
    k = kinds(t)
    start, stop = t.start + shift, t.stop + shift
    want = naive_aalen_johansen(start, stop, k, t.weight)
    times, n, d = risk_and_events(start, stop, k, t.weight, 2)
    surv, cif, _, naive = aalen_johansen(n, d)
    assert times.tolist() == [w[0] for w in want]
    np.testing.assert_allclose(n, [w[1] for w in want], rtol=1e-14)
    np.testing.assert_allclose(cif, [w[2] for w in want], rtol=1e-12, atol=1e-15)
    np.testing.assert_allclose(surv, [w[3] for w in want], rtol=1e-12, atol=1e-15)
    assert (naive >= cif - 1e-15).all()


def test_fast_counting_path_equals_sorted_path():
    """Half-day grid (bincount) and arbitrary times (argsort) give the same risk sums."""
    rng = np.random.default_rng(1)
    v = np.floor(rng.uniform(0, 400, 1000)) / 2
    w = rng.uniform(0.5, 2, 1000)
    t = np.unique(np.floor(rng.uniform(0, 410, 50)) / 2)
    grid = _weights_before(v, w, t)
    shifted = _weights_before(v + 1e-7, w, t + 1e-7)  # off the grid: sorted path
    brute = np.array([w[v < x].sum() for x in t])
    np.testing.assert_allclose(grid, brute, rtol=1e-12)
    np.testing.assert_allclose(shifted, brute, rtol=1e-12)


def test_split_weights_order_invariance():
    t = competing_rows(250, 12, split=False)
    base = cumulative_incidence(t).frame
    for other in (split_rows(t), t.expanded(), t.take(np.random.default_rng(3).permutation(
            t.n_rows))):
        f = cumulative_incidence(other).frame
        for col in ("time", "at_risk", "events", "cif", "se", "naive", "survival"):
            np.testing.assert_allclose(f[col], base[col], rtol=1e-11, atol=1e-13, err_msg=col)


def test_naive_one_minus_km_overstates_and_intervals_bracket():
    t = competing_rows(600, 13)
    res = cumulative_incidence(t, by="plan", horizons=(3, 6, 12))
    f = res.frame
    assert (f["naive"] >= f["cif"] - 1e-15).all()
    assert (f["lower"] <= f["cif"] + 1e-15).all() and (f["cif"] <= f["upper"] + 1e-15).all()
    o = res.overstatement
    assert not o.empty and (o["difference"] > 0).all()
    assert set(o["segment"]) == {"Orchard", "Seedling", "Sprout"}
    # by segment equals the estimate on that segment's rows alone
    alone = cumulative_incidence(t.take(np.flatnonzero(
        t.column("plan").codes == t.column("plan").levels.index("Sprout")))).frame
    seg = f[f["segment"] == "Sprout"].reset_index(drop=True)
    np.testing.assert_allclose(seg["cif"], alone["cif"], rtol=1e-13)
    assert "1 - KM says" in res.summary()
    v = res.at([0.0, 1e6], cause="voluntary", segment="Sprout")
    assert v[0] == 0.0 and v[1] == pytest.approx(seg[seg["cause"] == "voluntary"]["cif"].iloc[-1])


def test_errors_and_unspecified_cause():
    time, status = right_censored(50, 0)
    with pytest.raises(DataError, match="needs a StartStop"):
        cumulative_incidence(None)
    with pytest.raises(ModelError, match="there are no churns"):
        cumulative_incidence(as_table(time, np.zeros(time.shape[0], dtype=int)))
    t = StartStop(np.zeros(time.shape[0]), time, (status > 0).astype(int))
    res = cumulative_incidence(t)
    assert res.causes == ("unspecified",) and "carry no cause" in res.warnings[0]
