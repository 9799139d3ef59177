"""Decrement table, actual-vs-expected and Aalen–Johansen on 1M, 3M, 10M start-stop rows.

Run (from the repository root)::

    /work/venv/bin/python bench/bench_actuarial.py                  # sizes 1e6 3e6 1e7
    /work/venv/bin/python bench/bench_actuarial.py --sizes 200000 --no-write   # quick look

Data (generated here with a fixed seed, written to bench/_data/ as Parquet):
independent start-stop rows, half entering late (delayed entry, start up to
~3 years), whole-day tenures (ties), 30 % churned (80 % voluntary, 20 %
involuntary), a few churns on the start day (stop 0.5), three plans, start
dates over 2023-2026, unit weights.

Side by side in one run, each call in its own fresh process (so DuckDB's
memory, which Python cannot see, is counted; peak = the process's peak
resident memory during the call, VmHWM after resetting it, minus the
resident memory just before):

- decrement table by plan and tenure month from the Parquet file:
  ``retain.models.decrements.decrement_table(path, by="plan")`` (DuckDB,
  sql/models/exposure_tenure.sql) vs the same difference-array aggregation written
  in pandas (read_parquet + groupby), results compared;
- actual vs expected by plan and tenure month against a decrement-table basis
  (built from another 1M-row sample): ``actual_vs_expected(path, basis,
  by=["plan", "tenure_month"])`` (DuckDB) vs pandas (the same aggregation and a
  merge with the rates);
- Aalen–Johansen (``cumulative_incidence``) vs Kaplan–Meier on the same
  StartStop rows: ``retain.models.curves.kaplan_meier`` and
  ``sksurv.nonparametric.kaplan_meier_estimator(event, stop,
  time_enter=start)``. Building the StartStop from arrays is not timed.

Each call is timed once (the machine is shared: read the ratios). The growth
slope is the least-squares slope of log(time) on log(n) over the sizes.
"""

from __future__ import annotations

import argparse
import gc
import json
import math
import os
import platform
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

DATA = ROOT / "bench" / "_data"
RESULTS = ROOT / "bench" / "results" / "actuarial.md"
D = 365.25 / 12.0
PLANS = np.array(["Seedling", "Bloom", "Orchard"])
CAUSES = np.array(["", "voluntary", "involuntary"])


def make_rows(n: int, seed: int = 20261202) -> dict[str, np.ndarray]:
    rng = np.random.default_rng(seed)
    start = np.where(rng.random(n) < 0.5, 0.0, np.floor(rng.exponential(300.0, n)))
    stop = start + np.ceil(rng.exponential(150.0, n))
    churned = (rng.random(n) < 0.3).astype(np.int32)
    same_day = (churned == 1) & (start == 0) & (rng.random(n) < 0.02)
    stop = np.where(same_day, 0.5, stop)
    kind = np.where(churned == 1, np.where(rng.random(n) < 0.8, 1, 2), 0)
    plan = rng.integers(0, 3, n)
    start_date = np.datetime64("2023-06-01") + rng.integers(0, 1200, n)
    return {"start": start, "stop": stop, "churned": churned, "kind": kind, "plan": plan,
            "start_date": start_date}


def write_parquet(n: int, seed: int = 20261202) -> Path:
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = DATA / f"actuarial_{n}_{seed}.parquet"
    if path.exists():
        return path
    DATA.mkdir(parents=True, exist_ok=True)
    r = make_rows(n, seed)
    table = pa.table({
        "start": r["start"], "stop": r["stop"], "churned": r["churned"],
        "cause": pa.DictionaryArray.from_arrays(pa.array(r["kind"], pa.int32()),
                                                pa.array(CAUSES)).cast(pa.string()),
        "weight": np.ones(n),
        "start_date": pa.array(r["start_date"], pa.date32()),
        "plan": pa.DictionaryArray.from_arrays(pa.array(r["plan"], pa.int32()),
                                               pa.array(PLANS)).cast(pa.string()),
    })
    pq.write_table(table, path, row_group_size=1_000_000)
    return path


# ---------------------------------------------------------------- pandas versions
def pandas_decrements(path: Path):
    """The same difference-array aggregation as sql/models/exposure_tenure.sql, in pandas."""
    import pandas as pd

    df = pd.read_parquet(path, columns=["plan", "start", "stop", "churned", "cause", "weight"])
    a = df["start"].to_numpy() / D
    b = df["stop"].to_numpy() / D
    w = df["weight"].to_numpy()
    ka = np.floor(a).astype(np.int64)
    kb = (np.ceil(b) - 1).astype(np.int64)
    kin = np.ceil(a).astype(np.int64)
    spans = kb > ka
    plan = df["plan"]
    churn = df["churned"].to_numpy() * w
    vol = churn * (df["cause"] == "voluntary").to_numpy()
    first = pd.DataFrame({"plan": plan, "band": ka,
                          "exposure": w * (np.where(spans, ka + 1, b) - a),
                          "full": np.where(spans, w, 0.0)})
    g1 = first.groupby(["plan", "band"], observed=True).sum()
    last = pd.DataFrame({"plan": plan, "band": kb,
                         "exposure": np.where(spans, w * (b - kb), 0.0),
                         "full": -np.where(spans, w, 0.0), "churns": churn,
                         "voluntary": vol})
    g2 = last.groupby(["plan", "band"], observed=True).sum()
    ok = kin <= kb
    ent = pd.DataFrame({"plan": plan[ok], "band": kin[ok], "force": w[ok]})
    g3 = ent.groupby(["plan", "band"], observed=True).sum()
    out = pd.DataFrame({"plan": plan[ok], "band": kb[ok] + 1, "force": -w[ok]})
    g4 = out.groupby(["plan", "band"], observed=True).sum()
    shifted = g1[["full"]].reset_index()
    shifted["band"] += 1
    parts = pd.concat([g1[["exposure"]].reset_index(), shifted, g2.reset_index(),
                       g3.reset_index(), g4.reset_index()], ignore_index=True)
    s = parts.groupby(["plan", "band"]).sum()
    bands = np.arange(int(kb.max()) + 1)
    grid = pd.MultiIndex.from_product([sorted(plan.unique()), bands], names=["plan", "band"])
    s = s.reindex(grid, fill_value=0.0)
    full = s["full"].groupby(level="plan").cumsum()
    s["exposure"] = s["exposure"] + full  # in months already
    s["in_force"] = s["force"].groupby(level="plan").cumsum()
    s["m"] = s["churns"] / s["exposure"]
    return s[["exposure", "in_force", "churns", "voluntary", "m"]].reset_index()


def pandas_actual_expected(path: Path, rates: np.ndarray):
    import pandas as pd

    s = pandas_decrements(path)
    s["expected"] = s["exposure"] * rates[np.minimum(s["band"].to_numpy(), rates.shape[0] - 1)]
    by_plan = s.groupby("plan")[["churns", "expected"]].sum()
    by_month = s.groupby("band")[["churns", "expected"]].sum()
    book = pd.DataFrame({"churns": [s["churns"].sum()], "expected": [s["expected"].sum()]})
    out = pd.concat([book, by_plan, by_month])
    out["ratio"] = out["churns"] / out["expected"]
    return out


# ---------------------------------------------------------------- one call per process
def _rss_kb(field: str) -> int:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(field):
                return int(line.split()[1])
    return 0


def _reset_peak() -> None:
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
    except OSError:  # pragma: no cover - not Linux
        pass


def run_one(step: str, n: int) -> dict:
    """Run one timed call in this process; return seconds, peak MB and a check value."""
    import duckdb

    from retain.models.competing import cumulative_incidence
    from retain.models.decrements import decrement_table
    from retain.models.expected import actual_vs_expected

    path = write_parquet(n)
    prep = None
    basis = None
    if step.startswith("ae"):
        basis = decrement_table(write_parquet(1_000_000, seed=7), months=36)
    if step in ("aj", "km", "sksurv"):
        from retain.data.table import Categorical, StartStop

        r = make_rows(n)
        codes = np.where(r["kind"] == 1, 0, np.where(r["kind"] == 2, 1, -1)).astype(np.int32)
        prep = StartStop(r["start"], r["stop"], r["churned"],
                         customer_id=Categorical(np.zeros(n, dtype=np.int32), ("all",)),
                         spell=np.arange(n), cause=Categorical(codes, ("voluntary",
                                                                       "involuntary")))
        del r
    gc.collect()
    before = _rss_kb("VmRSS")
    _reset_peak()
    t0 = time.perf_counter()
    if step == "dec_duckdb":
        con = duckdb.connect(config={"threads": 2, "memory_limit": "4GB"})
        res = decrement_table(str(path), by="plan", con=con)
        check = float(res.frame["exposure"].sum())
    elif step == "dec_pandas":
        res = pandas_decrements(path)
        check = float(res["exposure"].sum())
    elif step == "ae_duckdb":
        con = duckdb.connect(config={"threads": 2, "memory_limit": "4GB"})
        res = actual_vs_expected(str(path), basis, by=["plan", "tenure_month"], con=con)
        check = float(res.frame["expected"].iloc[0])
    elif step == "ae_pandas":
        res = pandas_actual_expected(path, basis.monthly_rates())
        check = float(res["expected"].iloc[0])
    elif step == "aj":
        res = cumulative_incidence(prep, horizons=(12,))
        check = float(res.frame.groupby("cause")["cif"].last().sum())
    elif step == "km":
        from retain.models.curves import kaplan_meier

        res = kaplan_meier(prep)
        check = float(1 - res.survival[-1])
    elif step == "sksurv":
        from sksurv.nonparametric import kaplan_meier_estimator

        x, y = kaplan_meier_estimator(prep.churned.astype(bool), prep.stop,
                                      time_enter=prep.start)
        check = float(1 - y[-1])
    else:
        raise SystemExit(f"unknown step {step}")
    seconds = time.perf_counter() - t0
    peak = _rss_kb("VmHWM")
    return {"step": step, "n": n, "seconds": seconds, "peak_mb": (peak - before) / 1024,
            "rss_mb": peak / 1024, "check": check}


def child(step: str, n: int) -> dict:
    out = subprocess.run([sys.executable, __file__, "--one", step, str(n)], capture_output=True,
                         text=True, cwd=ROOT, env={**os.environ, "OMP_NUM_THREADS": "2"})
    if out.returncode != 0:
        return {"step": step, "n": n, "seconds": float("nan"), "peak_mb": float("nan"),
                "rss_mb": float("nan"), "check": float("nan"),
                "error": out.stderr.strip().splitlines()[-1] if out.stderr else "failed"}
    return json.loads(out.stdout.strip().splitlines()[-1])


def slope(ns: list[int], ts: list[float]) -> float:
    if len(ns) < 2 or any(not math.isfinite(t) or t <= 0 for t in ts):
        return float("nan")
    return float(np.polyfit(np.log(ns), np.log(ts), 1)[0])


def compare_results(n: int) -> dict:
    """Decrement table in DuckDB vs pandas on the same file: largest differences."""
    from retain.models.decrements import decrement_table

    path = write_parquet(n)
    a = decrement_table(str(path), by="plan").frame
    b = pandas_decrements(path)
    b = b.rename(columns={"plan": "segment", "band": "month"})
    m = a.merge(b, on=["segment", "month"], suffixes=("", "_pd"))
    return {"rows_compared": len(m), "same_grid": len(m) == len(a) == len(b),
            "exposure": float(np.max(np.abs(m["exposure"] - m["exposure_pd"]))),
            "churns": float(np.max(np.abs(m["churns"] - m["churns_pd"]))),
            "in_force": float(np.max(np.abs(m["in_force"] - m["in_force_pd"])))}


SKSURV_MAX = 1_000_000  # its time_enter path grows faster than n; larger sizes are skipped
STEPS = [("dec_duckdb", "decrement table, DuckDB (retain)"),
         ("dec_pandas", "decrement table, pandas (same algorithm)"),
         ("ae_duckdb", "A/E by plan and month, DuckDB (retain)"),
         ("ae_pandas", "A/E by plan and month, pandas"),
         ("aj", "Aalen-Johansen, 2 causes (retain)"),
         ("km", "Kaplan-Meier (retain.models.curves)"),
         ("sksurv", "Kaplan-Meier (scikit-survival, time_enter)")]


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", type=int, nargs="*", default=[1_000_000, 3_000_000, 10_000_000])
    ap.add_argument("--no-write", action="store_true")
    ap.add_argument("--one", nargs=2, metavar=("STEP", "N"))
    args = ap.parse_args()
    if args.one:
        print(json.dumps(run_one(args.one[0], int(args.one[1]))))
        return
    write_parquet(1_000_000, seed=7)
    rows = []
    for n in args.sizes:
        write_parquet(n)
        for step, _ in STEPS:
            if step == "sksurv" and n > SKSURV_MAX:
                rows.append({"step": step, "n": n, "seconds": float("nan"),
                             "peak_mb": float("nan"), "rss_mb": float("nan"),
                             "check": float("nan")})
                continue
            r = child(step, n)
            rows.append(r)
            print(f"{n:>10,} {step:<11} {r['seconds']:8.2f} s  peak +{r['peak_mb']:8.0f} MB  "
                  f"check {r['check']:.6g} {r.get('error', '')}", flush=True)
    agree = compare_results(args.sizes[0])
    print("DuckDB vs pandas, largest differences:", agree)
    if args.no_write:
        return
    write_report(rows, args.sizes, agree)


def write_report(rows: list[dict], sizes: list[int], agree: dict) -> None:
    by = {(r["step"], r["n"]): r for r in rows}
    lines = [
        "# Actuarial benchmark: decrement table, A/E, Aalen–Johansen",
        "",
        "Command (from the repository root):",
        "",
        "    /work/venv/bin/python bench/bench_actuarial.py",
        "",
        f"Machine: {platform.machine()}, {os.cpu_count()} cores, shared with other engineers "
        "while it ran (read the ratios, not the seconds). Python "
        f"{platform.python_version()}. Each call ran once, in its own process; DuckDB with "
        "threads = 2, memory_limit = 4GB. Peak = the process's peak resident memory during "
        "the call minus its resident memory just before (DuckDB's memory included).",
        "",
        "Data: generated start-stop rows (see the script's docstring), Parquet under "
        "bench/_data/ (git-ignored).",
        "",
        "| rows | call | seconds | peak MB |",
        "|---:|---|---:|---:|",
    ]
    for n in sizes:
        for step, label in STEPS:
            r = by[(step, n)]
            lines.append(f"| {n:,} | {label} | {r['seconds']:.2f} | {r['peak_mb']:.0f} |")
    lines += ["", "Growth slope of log(time) on log(rows) (1.0 = linear):", "",
              "| call | slope |", "|---|---:|"]
    for step, label in STEPS:
        ns = [n for n in sizes if math.isfinite(by[(step, n)]["seconds"])]
        ts = [by[(step, n)]["seconds"] for n in ns]
        lines.append(f"| {label} | {slope(ns, ts):.2f} |")
    big = sizes[-1]
    ratio = [("decrement table: pandas / DuckDB", "dec_pandas", "dec_duckdb"),
             ("A/E: pandas / DuckDB", "ae_pandas", "ae_duckdb"),
             ("Kaplan-Meier (retain) / Aalen-Johansen", "km", "aj"),
             ("Kaplan-Meier (scikit-survival) / Aalen-Johansen", "sksurv", "aj")]
    lines += ["", f"Ratios at {big:,} rows (> 1: the second is faster):", "",
              "| ratio | value |", "|---|---:|"]
    for label, a, b in ratio:
        at = max(n for n in sizes if math.isfinite(by[(a, n)]["seconds"]))
        value = by[(a, at)]["seconds"] / by[(b, at)]["seconds"]
        lines.append(f"| {label}" + (f" (at {at:,} rows)" if at != big else "")
                     + f" | {value:.2f} |")
    lines += ["", f"Targets at {big:,} rows: decrement table in DuckDB under 5 s: "
              f"{by[('dec_duckdb', big)]['seconds']:.2f} s; A/E in DuckDB under 5 s: "
              f"{by[('ae_duckdb', big)]['seconds']:.2f} s; Aalen–Johansen at least as fast as "
              f"the Kaplan–Meier: {by[('aj', big)]['seconds']:.2f} s vs "
              f"{by[('km', big)]['seconds']:.2f} s (retain) and "
              f"{by[('sksurv', min(big, SKSURV_MAX))]['seconds']:.2f} s (scikit-survival, "
              f"at {min(big, SKSURV_MAX):,} rows: its time_enter path was not run on more).",
              "",
              f"Agreement on {sizes[0]:,} rows, DuckDB vs pandas decrement table by plan and "
              f"month ({agree['rows_compared']} cells, same grid: {agree['same_grid']}): largest "
              f"absolute difference in exposure {agree['exposure']:.2e} customer-months, churns "
              f"{agree['churns']:.2e}, in force {agree['in_force']:.2e}.",
              "",
              "Check values (same in both columns of a pair): total exposure, book expected "
              "churns, 1 - S at the last time (for AJ: the sum of the causes' incidence, "
              "which equals the KM's 1 - S).", "",
              "| rows | call | check |", "|---:|---|---:|"]
    for n in sizes:
        for step, label in STEPS:
            lines.append(f"| {n:,} | {label} | {by[(step, n)]['check']:.10g} |")
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text("\n".join(lines) + "\n", encoding="utf-8")
    print(f"wrote {RESULTS}")


if __name__ == "__main__":
    main()
