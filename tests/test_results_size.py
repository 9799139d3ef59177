"""results.json holds results; long per-time and per-churn tables go to Parquet beside it.

Checks: the hand-worked split of a small results dict (what leaves, what stays, the
reference written in its place, the way back), and on the demo (demo_data/retain.toml,
all 20,000 customers against its first 5,000): results.json under 2 MB, its size
roughly independent of the number of customers while the Parquet tables grow, every
reference pointing at a file with the stated rows and columns, the tables read back
equal to the results in memory, and two builds giving the same bytes.
"""

from __future__ import annotations

import json

import numpy as np
import pyarrow.parquet as pq
import pytest

from retain.publish.site import (
    RESULTS_TABLES,
    build_site,
    is_reference,
    read_results,
    split_tables,
)


def _references(value, found=None):
    found = [] if found is None else found
    if is_reference(value):
        found.append(value)
    elif isinstance(value, dict):
        for v in value.values():
            _references(v, found)
    elif isinstance(value, list):
        for v in value:
            _references(v, found)
    return found


# ----------------------------------------------------------- hand-worked split


def test_split_takes_out_long_tables_and_keeps_short_ones():
    """Hand-worked: with min_rows=3, the 3-record list and the two 4-long arrays leave
    (the arrays as one file, one column each); the 2-record list, the 2-long array, the
    scalars and the 3-long array that mixes text with numbers stay."""
    results = {"outcomes": {
        "cox:ph": {"value": {"global_p": 0.004,
                             "residuals": [{"time": 1, "x": 0.5}, {"time": 2, "x": -0.25},
                                           {"time": 3, "x": None}]}},
        "km": {"value": {"time": [1.0, 2.0, 3.0, 5.0], "n": 10, "short": [1, 2],
                         "survival": [0.9, 0.8, 0.7, 0.5], "labels": ["a", 1, 2]}},
        "hr": {"value": [{"name": "plan", "hr": 1.5}, {"name": "region", "hr": 0.9}]},
    }}
    small, tables = split_tables(results, min_rows=3)
    ph = small["outcomes"]["cox:ph"]["value"]
    assert ph["global_p"] == 0.004
    assert ph["residuals"] == {"parquet": f"{RESULTS_TABLES}/cox-ph.residuals.parquet",
                               "rows": 3, "columns": ["time", "x"], "as": "records"}
    km = small["outcomes"]["km"]["value"]
    assert list(km) == ["time", "n", "short", "survival", "labels"]  # order kept
    assert km["time"] == {"parquet": f"{RESULTS_TABLES}/km.parquet", "rows": 4,
                          "columns": ["time"], "as": "column"}
    assert km["survival"]["parquet"] == km["time"]["parquet"]
    assert km["short"] == [1, 2] and km["labels"] == ["a", 1, 2] and km["n"] == 10
    assert small["outcomes"]["hr"] == results["outcomes"]["hr"]
    assert sorted(tables) == [f"{RESULTS_TABLES}/cox-ph.residuals.parquet",
                              f"{RESULTS_TABLES}/km.parquet"]
    assert tables[f"{RESULTS_TABLES}/km.parquet"].column_names == ["time", "survival"]
    assert results["outcomes"]["km"]["value"]["time"] == [1.0, 2.0, 3.0, 5.0]  # unchanged


def test_split_then_read_gives_the_results_back(tmp_path):
    """Write the hand-worked dict the way a build does and read it back: equal."""
    from retain.publish.site import write_results

    results = {"outcomes": {"a:b": {"value": {
        "rows": [{"t": float(i), "flag": i % 2 == 0, "who": f"c{i}"} for i in range(250)],
        "time": list(range(300)), "s": [1.0 - i / 300 for i in range(300)]}}}}
    write_results(results, tmp_path)
    assert read_results(tmp_path) == results
    assert len(_references(json.loads((tmp_path / "results.json").read_text()))) == 3


# ------------------------------------------------------------------- the demo


@pytest.fixture(scope="module")
def demo_sites(demo_prepared, tmp_path_factory):
    """The demo site on all customers and on the first 5,000 (same options, same
    preparation record): {customers: (site folder, content)}."""
    from retain.publish.pages import site_content
    from retain.run import options_from_config, run_table

    table = demo_prepared.table
    options = options_from_config(demo_prepared.config)
    codes = table.customer.codes
    first = np.flatnonzero(codes < 5_000)
    sites = {}
    for sub in (table.take(first), table):
        content = site_content(run_table(sub, options, prepared=demo_prepared))
        out = tmp_path_factory.mktemp("site") / "site"
        build_site(content, out)
        sites[sub.n_customers] = (out, content)
    return sites


def test_demo_results_json_is_under_2_mb(demo_sites):
    site, _ = demo_sites[max(demo_sites)]
    assert max(demo_sites) > 19_000  # the whole demo
    assert (site / "results.json").stat().st_size < 2_000_000


def test_results_json_grows_with_segments_not_customers(demo_sites):
    """Four times the customers: a per-customer or per-churn list in results.json would
    make it about 4 times larger. With the long tables in Parquet, what stays has a
    shape fixed by the segments, attributes and months of the window; only the digits
    of the numbers and which tables cross the row line change, so the ratio stays
    within 1 +- 0.25 (a bound of our own; measured 2026-12: see bench/RESULTS.md).
    The Parquet tables, which hold the per-time and per-churn rows, grow."""
    (small, _), (large, _) = (demo_sites[n] for n in sorted(demo_sites))
    json_ratio = (large / "results.json").stat().st_size / (small / "results.json").stat().st_size
    assert 0.75 < json_ratio < 1.25, json_ratio

    def parquet_bytes(root):
        return sum(p.stat().st_size for p in (root / RESULTS_TABLES).glob("*.parquet"))

    assert parquet_bytes(large) > 1.5 * parquet_bytes(small)


def test_every_reference_points_at_its_table(demo_sites):
    for site, content in demo_sites.values():
        written = json.loads((site / "results.json").read_text())
        refs = _references(written)
        assert any(r["parquet"].endswith("cox-ph.residuals.parquet") for r in refs)
        files = {r["parquet"] for r in refs}
        assert files == {f"{RESULTS_TABLES}/{p.name}"
                         for p in (site / RESULTS_TABLES).glob("*.parquet")}
        for ref in refs:
            meta = pq.read_metadata(site / ref["parquet"])
            assert meta.num_rows == ref["rows"]
            assert set(ref["columns"]) <= set(meta.schema.names)
        assert read_results(site) == content.results  # nothing lost on the way


def test_results_files_are_the_same_bytes_on_rebuild(demo_sites, tmp_path):
    site, content = demo_sites[min(demo_sites)]
    again = build_site(content, tmp_path / "again").parent
    names = ["results.json", *(f"{RESULTS_TABLES}/{p.name}"
                               for p in (site / RESULTS_TABLES).glob("*.parquet"))]
    for name in names:
        assert (again / name).read_bytes() == (site / name).read_bytes(), name


def test_file_names_stay_in_their_folder_and_never_collide():
    """Segment names are data: "../up", "a:b" and "a/b" become plain, distinct file names
    inside data/results (hand-worked: "../up" -> "up"; "a:b" and "a/b" both -> "a-b", the
    second gets "-2")."""
    arrays = {"t": list(range(3))}
    results = {"outcomes": {"curves": {"value": {"../up": arrays, "a:b": arrays,
                                                 "a/b": arrays}}}}
    small, tables = split_tables(results, min_rows=3)
    names = [small["outcomes"]["curves"]["value"][k]["t"]["parquet"]
             for k in ("../up", "a:b", "a/b")]
    assert names == [f"{RESULTS_TABLES}/curves.up.parquet",
                     f"{RESULTS_TABLES}/curves.a-b.parquet",
                     f"{RESULTS_TABLES}/curves.a-b-2.parquet"]
    assert sorted(tables) == sorted(names)
