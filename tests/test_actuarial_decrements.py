"""Decrement tables: hand-worked rows, a naive loop implementation, identities,
invariances, DuckDB = numpy, and the exact Poisson interval against statsmodels."""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pandas as pd
import pytest
from _actuarial_data import competing_rows, split_rows
from statsmodels.stats.rates import confint_poisson

from retain.data.table import StartStop
from retain.errors import DataError, ModelError
from retain.kernels.exposure import band_exposure, piecewise_cumulative
from retain.models.decrements import decrement_table, poisson_interval
from retain.units import DAYS_PER_MONTH

D = DAYS_PER_MONTH
NUMERIC = ["exposure", "in_force", "churns", "churns_voluntary", "churns_involuntary", "m",
           "m_lower", "m_upper", "q", "q_voluntary", "q_involuntary"]


def hand_table() -> StartStop:
    return StartStop([0.0, 20.0, 0.0], [40.0, 70.0, 0.5], [1, 0, 1],
                     cause=["voluntary", "", "involuntary"],
                     start_date=np.array(["2024-01-20", "2024-03-01", "2024-02-29"],
                                         dtype="datetime64[D]"))


def test_hand_worked_tenure_months():
    """Rows (0, 40] churn, (20, 70] censored (delayed entry), (0, 0.5] churn, worked by hand:
    month 1 holds 30.4375 + 10.4375 + 0.5 days, month 2 holds 9.5625 + 30.4375, month 3
    holds 70 - 60.875 = 9.125 days."""
    f = decrement_table(hand_table()).frame
    assert list(f["month"]) == [0, 1, 2]
    np.testing.assert_allclose(f["exposure"], np.array([41.375, 40.0, 9.125]) / D, rtol=1e-14)
    assert list(f["in_force"]) == [2.0, 2.0, 1.0]
    assert list(f["churns"]) == [1.0, 1.0, 0.0]
    assert list(f["churns_voluntary"]) == [0.0, 1.0, 0.0]
    assert list(f["churns_involuntary"]) == [1.0, 0.0, 0.0]
    m = 1.0 / (41.375 / D)
    assert f["m"][0] == pytest.approx(m, rel=1e-14)
    assert f["q"][0] == pytest.approx(1 - math.exp(-m), rel=1e-14)
    assert f["survivors"][1] == pytest.approx(10_000 * math.exp(-m), rel=1e-14)


def test_hand_worked_calendar_months():
    """(0, 40] from 2024-01-20: 12 days in January, 28 in February, churn on 2024-02-29;
    (20, 70] from 2024-03-01: March 21..31 (11 days), April (30), May 1..10 (9 days);
    (0, 0.5] from 2024-02-29: half a day in February, churn that day."""
    f = decrement_table(hand_table(), axis="calendar").frame
    assert list(f["label"]) == ["2024-01", "2024-02", "2024-03", "2024-04", "2024-05"]
    np.testing.assert_allclose(f["exposure"] * D, [12.0, 28.5, 11.0, 30.0, 9.0], rtol=1e-13)
    assert list(f["churns"]) == [0.0, 2.0, 0.0, 0.0, 0.0]
    dd = decrement_table(hand_table(), axis="calendar", engine="duckdb").frame
    np.testing.assert_allclose(dd["exposure"], f["exposure"], rtol=1e-13)
    assert list(dd["churns"]) == list(f["churns"])


def naive_tenure(table: StartStop, n_bands: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Plain loops over rows and months: overlap, churn month, in force at the month start."""
    expo = np.zeros(n_bands)
    churn = np.zeros(n_bands)
    force = np.zeros(n_bands)
    for a, b, c, w in zip(table.start, table.stop, table.churned, table.weight, strict=True):
        for k in range(n_bands):
            lo, hi = k * D, (k + 1) * D
            expo[k] += w * max(0.0, min(b, hi) - max(a, lo))
            if c and lo < b <= hi:
                churn[k] += w
            if a <= lo < b:
                force[k] += w
    return expo / D, churn, force


def naive_calendar(table: StartStop) -> dict[str, list[float]]:
    """Plain loops: walk calendar months with datetime for every row."""
    out: dict[str, list[float]] = {}
    for a, b, c, w, sd in zip(table.start, table.stop, table.churned, table.weight,
                              table.start_date, strict=True):
        d0 = dt.date.fromisoformat(str(sd)).toordinal()
        lo, hi = d0 + a, d0 + b
        day = dt.date.fromordinal(int(math.floor(lo)))
        first = dt.date(day.year, day.month, 1)
        while first.toordinal() < hi:
            nxt = dt.date(first.year + first.month // 12, first.month % 12 + 1, 1)
            ov = max(0.0, min(hi, nxt.toordinal()) - max(lo, first.toordinal()))
            out.setdefault(f"{first:%Y-%m}", [0.0, 0.0])[0] += w * ov / D
            first = nxt
        if c:
            cday = dt.date.fromordinal(d0 + int(math.floor(b)))
            out.setdefault(f"{cday:%Y-%m}", [0.0, 0.0])[1] += w
    return out


@pytest.mark.parametrize("seed", [0, 1])
def test_kernel_matches_naive_loops(seed):
    t = competing_rows(150, seed)
    n_bands = int(np.ceil(t.stop.max() / D))
    expo, churn, force = naive_tenure(t, n_bands)
    for engine in ("numpy", "duckdb"):
        f = decrement_table(t, engine=engine).frame
        np.testing.assert_allclose(f["exposure"], expo, rtol=1e-11, atol=1e-11)
        np.testing.assert_allclose(f["churns"], churn, rtol=0, atol=1e-12)
        np.testing.assert_allclose(f["in_force"], force, rtol=0, atol=1e-9)


def test_calendar_matches_naive_loops():
    t = competing_rows(150, 3)
    want = naive_calendar(t)
    for engine in ("numpy", "duckdb"):
        f = decrement_table(t, axis="calendar", engine=engine).frame
        got = {r.label: (r.exposure, r.churns) for r in f.itertuples()}
        for label, (e, c) in want.items():
            assert got[label][0] == pytest.approx(e, rel=1e-10, abs=1e-10), label
            assert got[label][1] == pytest.approx(c, abs=1e-12), label
        assert sum(v[0] for v in got.values()) == pytest.approx(sum(v[0] for v in want.values()))


def test_identities_exposure_churns_and_survivors():
    """Σ exposure = Σ w (stop - start) / D; Σ churns = weighted churns; survivors at the
    start of month k = 10,000 Π_{j<k} (1 - q_j); the causes' q add up to q."""
    t = competing_rows(400, 5)
    dec = decrement_table(t)
    f = dec.frame
    assert f["exposure"].sum() == pytest.approx(np.sum(t.weight * (t.stop - t.start)) / D,
                                                rel=1e-12)
    assert f["churns"].sum() == pytest.approx(t.n_events, abs=1e-9)
    q = f["q"].to_numpy()
    want = 10_000 * np.concatenate([[1.0], np.cumprod(1 - q)[:-1]])
    np.testing.assert_allclose(f["survivors"], want, rtol=1e-11)
    both = f["q_voluntary"] + f["q_involuntary"]
    np.testing.assert_allclose(both[f["churns"] > 0], f["q"][f["churns"] > 0], rtol=1e-12)
    assert (f["survivors_lower"] <= f["survivors"]).all()
    assert (f["survivors"] <= f["survivors_upper"]).all()


def test_duckdb_from_parquet_equals_numpy_from_startstop(tmp_path):
    """The same table read from Parquet by DuckDB and held as a StartStop in numpy."""
    t = competing_rows(300, 7)
    path = t.to_parquet(tmp_path / "ss.parquet")
    for kw in ({}, {"by": "plan"}, {"by": ["plan", "price"]}, {"months": 12},
               {"axis": "calendar", "by": "plan"}):
        a = decrement_table(t, **kw).frame
        b = decrement_table(path, **kw).frame
        c = decrement_table(t.to_arrow(), **kw).frame
        assert list(a["segment"]) == list(b["segment"]) == list(c["segment"]), kw
        assert list(a["month"]) == list(b["month"]), kw
        for col in NUMERIC:
            np.testing.assert_allclose(a[col], b[col], rtol=1e-10, atol=1e-10, err_msg=str(kw))
            np.testing.assert_allclose(c[col], b[col], rtol=1e-10, atol=1e-10, err_msg=str(kw))


def test_split_weights_and_order_change_nothing():
    """Invariances: split every row at an interior whole day, duplicate rows instead of
    weights, shuffle the rows."""
    t = competing_rows(200, 11, split=False)
    base = decrement_table(t).frame
    split = split_rows(t)
    for other in (split, t.expanded(), t.take(np.random.default_rng(0).permutation(t.n_rows))):
        f = decrement_table(other).frame
        for col in NUMERIC + ["survivors"]:
            np.testing.assert_allclose(f[col], base[col], rtol=1e-10, atol=1e-10, err_msg=col)


def test_exact_poisson_interval_matches_statsmodels():
    """Garwood (1936) exact interval == statsmodels.stats.rates.confint_poisson 'exact-c';
    also the values 10 -> (4.7954, 18.3904) and 0 -> (0, 3.6889) of published tables
    (from memory)."""
    counts = np.array([0, 1, 2, 5, 10, 37, 250])
    lo, hi = poisson_interval(counts, 0.95)
    for c, a, b in zip(counts, lo, hi, strict=True):
        ref = confint_poisson(int(c), 1.0, method="exact-c", alpha=0.05)
        assert a == pytest.approx(ref[0], rel=1e-10, abs=1e-12)
        assert b == pytest.approx(ref[1], rel=1e-10)
    assert lo[4] == pytest.approx(4.7954, abs=1e-4) and hi[4] == pytest.approx(18.3904, abs=1e-4)
    assert hi[0] == pytest.approx(3.6889, abs=1e-4)


def test_months_limit_and_basis_rates():
    t = competing_rows(300, 2)
    f = decrement_table(t, months=6).frame
    assert list(f["month"]) == list(range(6))
    full = decrement_table(t).frame
    np.testing.assert_allclose(f["exposure"], full["exposure"][:6], rtol=1e-12)
    # as a basis: a row's expected churns are the integral of the piecewise rate
    dec = decrement_table(t)
    e = dec.expected_events(t)
    assert e.sum() == pytest.approx(t.n_events, rel=1e-9)  # rates from the same data


def test_piecewise_cumulative_by_quadrature():
    edges = np.array([0.0, 10.0, 25.0, 40.0])
    rate = np.array([0.1, 0.02, 0.05])
    x = np.array([0.0, 5.0, 10.0, 24.0, 39.0, 50.0])
    want = [0.0, 0.5, 1.0, 1.0 + 14 * 0.02, 1.3 + 14 * 0.05, 1.3 + 0.75 + 10 * 0.05]
    np.testing.assert_allclose(piecewise_cumulative(edges, rate, x), want, rtol=1e-14)


def test_band_exposure_ignores_time_outside_edges():
    expo, force = band_exposure(np.array([0.0, 5.0]), np.array([30.0, 8.0]), np.ones(2),
                                np.array([10.0, 20.0]), np.zeros(2, dtype=np.int64), 1)
    assert expo.tolist() == [[10.0]] and force.tolist() == [[1.0]]


@pytest.mark.parametrize("kw, text", [
    (dict(axis="policy"), "axis must be one of tenure, calendar"),
    (dict(months=0), "months must be a whole number >= 1"),
    (dict(level=1.5), "level must be between 0 and 1"),
    (dict(engine="spark"), "engine must be auto, duckdb or numpy"),
    (dict(by="colour"), "there is no column 'colour'"),
])
def test_errors_name_the_rule(kw, text):
    with pytest.raises(DataError, match=text):
        decrement_table(competing_rows(20, 0), **kw)


def test_duckdb_input_checks_the_contract(tmp_path):
    bad = pd.DataFrame({"start": [0.0, 5.0], "stop": [3.0, 5.0], "churned": [0, 1]})
    with pytest.raises(DataError, match=r"start must be < stop \(1 rows\)"):
        decrement_table(bad)
    with pytest.raises(DataError, match="calendar months need the column 'start_date'"):
        decrement_table(bad.iloc[:1], axis="calendar")
    with pytest.raises(DataError, match="file not found"):
        decrement_table(tmp_path / "none.parquet")
    calendar = decrement_table(hand_table(), axis="calendar")
    with pytest.raises(ModelError, match="only a tenure-month table can serve as a basis"):
        calendar.expected_events(hand_table())


def test_result_round_trips_to_json_and_csv():
    dec = decrement_table(competing_rows(100, 4), by="plan")
    d = dec.to_dict()
    assert d["by"] == ["plan"] and d["axis"] == "tenure"
    assert dec.to_csv().splitlines()[0].startswith("segment,month,label,exposure")
    assert "churns per customer-month" in dec.summary()
    assert dec.segment("Orchard")["segment"].eq("Orchard").all()


# ---------------------------------------------------------------- user tenure bands
EDGES = [7.0, 14.0, D, 2 * D]  # a week, a week, the rest of month 1, month 2


def edge_table() -> StartStop:
    """Rows with churns exactly on band edges, worked by hand below."""
    return StartStop([0.0, 0.0, 3.0, 0.0, 10.0, 0.0], [7.0, 14.0, 20.0, 45.0, 100.0, 70.0],
                     [1, 1, 0, 1, 0, 1], weight=[1, 1, 1, 2, 1, 1],
                     cause=["voluntary", "involuntary", "", "voluntary", "", "voluntary"])


def test_user_bands_hand_worked_with_a_churn_on_an_edge():
    """Bands (0,7] (7,14] (14,30.4375] (30.4375,60.875] days; rows (weight):
    A (0,7] churn   B (0,14] churn   C (3,20] censored   D (0,45] churn (2)
    E (10,100] censored   F (0,70] churn (after the last edge: left out).

    exposure, days:
      (0,7]:    A 7 + B 7 + C 4 + D 2x7 + F 7                         = 39
      (7,14]:   B 7 + C 7 + D 2x7 + E 4 + F 7                         = 39
      (14,D]:   C 6 + D 2x16.4375 + E 16.4375 + F 16.4375             = 71.75
      (D,2D]:   D 2x14.5625 + E 30.4375 + F 30.4375                   = 90
    churns, (a, b] bands: A's exit at 7 is on an edge and counts in (0,7]; B's at 14 in
      (7,14]; D's at 45 in (D,2D] with weight 2; F's at 70 is past 2D: 1, 1, 0, 2.
    in force at each band's lower edge (lo <= e < hi, weighted):
      0: A B D(2) F = 5;  7: B C D(2) F = 5;  14: C D(2) E F = 5;  D: D(2) E F = 4.
    q = 1 - exp(-m W), W the width in months; survivors l_{k+1} = l_k (1 - q_k).
    """
    for engine in ("numpy", "duckdb"):
        dec = decrement_table(edge_table(), band_edges=EDGES, engine=engine)
        f = dec.frame
        assert list(f["label"]) == ["0 to 7 days", "7 to 14 days", "14 to 30.4375 days",
                                    "30.4375 to 60.875 days"], engine
        np.testing.assert_allclose(f["exposure"] * D, [39.0, 39.0, 71.75, 90.0], rtol=1e-13)
        assert list(f["churns"]) == [1.0, 1.0, 0.0, 2.0], engine
        assert list(f["churns_voluntary"]) == [1.0, 0.0, 0.0, 2.0], engine
        assert list(f["churns_involuntary"]) == [0.0, 1.0, 0.0, 0.0], engine
        assert list(f["in_force"]) == [5.0, 5.0, 5.0, 4.0], engine
        width = np.array([7.0, 7.0, D - 14.0, D]) / D
        m = np.array([1 / 39, 1 / 39, 0.0, 2 / 90]) * D
        np.testing.assert_allclose(f["m"], m, rtol=1e-13)
        np.testing.assert_allclose(f["q"], 1 - np.exp(-m * width), rtol=1e-13)
        np.testing.assert_allclose(f["survivors"], 10_000 * np.concatenate(
            [[1.0], np.cumprod(np.exp(-m * width))[:-1]]), rtol=1e-13)
        assert dec.band_edges == (0.0, *EDGES)
        assert dec.n_events == 4.0  # F's churn after the last edge is not in the table


def _naive_bands(t: StartStop, edges: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Plain loops: overlap of (start, stop] with each band; churn when e_k < stop <= e_k+1."""
    k = len(edges) - 1
    expo, churn = np.zeros(k), np.zeros(k)
    for a, b, d, w in zip(t.start, t.stop, t.churned, t.weight, strict=True):
        for j in range(k):
            expo[j] += w * max(0.0, min(b, edges[j + 1]) - max(a, edges[j]))
            if d and edges[j] < b <= edges[j + 1]:
                churn[j] += w
    return expo, churn


@pytest.mark.parametrize("seed", [0, 1])
def test_user_bands_numpy_and_duckdb_agree_with_loops(seed, tmp_path):
    """Whole-day rows (many exits on the edges 7, 14, 28, 60, 91) in both engines and loops."""
    t = competing_rows(200, seed)
    edges = [7.0, 14.0, 28.0, 60.0, 91.0, 182.0, 365.0]
    # rows that start or stop on an edge (seed 0 also has 3 churns on one)
    assert np.isin(t.stop, edges).sum() >= 4 and np.isin(t.start, edges).sum() >= 4
    full = np.array([0.0] + edges)
    expo, churn = _naive_bands(t, full)
    a = decrement_table(t, band_edges=edges, engine="numpy").frame
    b = decrement_table(t.to_parquet(tmp_path / "t.parquet"), band_edges=edges).frame
    for f in (a, b):
        np.testing.assert_allclose(f["exposure"] * D, expo, rtol=1e-11, atol=1e-9)
        np.testing.assert_allclose(f["churns"], churn, rtol=0, atol=1e-12)
    for col in NUMERIC + ["survivors"]:
        np.testing.assert_allclose(a[col], b[col], rtol=1e-10, atol=1e-10, err_msg=col)
    # by segment: the same in both engines, and the segments add up to the whole
    a = decrement_table(t, band_edges=edges, by="plan", engine="numpy").frame
    b = decrement_table(t.to_arrow(), band_edges=edges, by="plan").frame
    assert list(a["segment"]) == list(b["segment"]) and list(a["month"]) == list(b["month"])
    for col in NUMERIC + ["survivors", "survivors_lower"]:
        np.testing.assert_allclose(a[col], b[col], rtol=1e-10, atol=1e-10, err_msg=col)
    np.testing.assert_allclose(a.groupby("month")["exposure"].sum() * D, expo, rtol=1e-11)


@pytest.mark.parametrize("kw, text", [
    (dict(band_edges=[30, 7]), "must be increasing positive tenures in days"),
    (dict(band_edges=[0, 7]), "must be increasing positive tenures in days"),
    (dict(band_edges=["a"]), "must be numbers of days"),
    (dict(band_edges=[7], months=3), "user bands are tenure bands and replace months"),
    (dict(band_edges=[7], axis="calendar"), "user bands are tenure bands and replace months"),
])
def test_user_band_errors(kw, text):
    with pytest.raises(DataError, match=text):
        decrement_table(competing_rows(20, 0), **kw)


def test_user_bands_are_not_a_monthly_basis():
    dec = decrement_table(edge_table(), band_edges=EDGES)
    with pytest.raises(ModelError, match="only a tenure-month table can serve as a basis"):
        dec.expected_events(edge_table())
    from retain.models.decrements import graduate
    with pytest.raises(ModelError, match="user bands of unequal width"):
        graduate(dec)


def test_monthly_churn_exactly_on_a_month_edge():
    """487 days = 16 x 30.4375 exactly, so a whole-day exit falls on the edge between tenure
    months 15 and 16. Bands are (a, b]: the churn belongs to month 15, the band that ends
    there. Rows (0, 487] churn and (0, 500] censored, worked by hand:
      month 15 = (456.5625, 487]: exposure 30.4375 + 30.4375 days = 2 months, 1 churn;
      month 16 = (487, 517.4375]: exposure 500 - 487 = 13 days, no churn.
    Both engines; a band taken as [a, b) moves the churn to month 16 and fails."""
    t = StartStop([0.0, 0.0], [487.0, 500.0], [1, 0], cause=["voluntary", ""],
                  start_date=np.array(["2023-01-01", "2023-01-01"], dtype="datetime64[D]"))
    for engine in ("numpy", "duckdb"):
        f = decrement_table(t, engine=engine).frame.set_index("month")
        assert f.loc[15, "churns"] == 1.0, engine
        assert f.loc[15, "exposure"] == pytest.approx(2.0, rel=1e-13), engine
        assert f.loc[16, "churns"] == 0.0, engine
        assert f.loc[16, "exposure"] == pytest.approx(13.0 / D, rel=1e-13), engine
        assert float(f["churns"].sum()) == 1.0, engine
