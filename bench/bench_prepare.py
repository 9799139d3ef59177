"""Event log -> start-stop table: retain's DuckDB preparation vs the same rules in pandas.

Run (from the repository root)::

    /work/venv/bin/python bench/bench_prepare.py                 # 1M, 3M, 10M events
    /work/venv/bin/python bench/bench_prepare.py --events 1e6 --no-write   # quick look

Logs come from the Quillfern demo generator (retain.demo, seeded), written
once to bench/_data/ as Parquet with the demo's own project file pointed at them.
Each side runs in its own fresh process, one after the other in one run, so peak
memory (ru_maxrss) is its own and neither warms the other's caches:

- retain: ``retain.data.prepare.prepare(config)``: read, validate, quarantine with
  reasons, reconcile, the start-stop table as Arrow (what ``retain prepare`` writes).
  Turning it into the StartStop arrays the models read is timed apart.
- pandas: ``bench/prepare_pandas.py``: the same rules with groupby / shift /
  forward-fill, the log loaded whole into pandas.

Before any time is reported, both sides run on the smallest log and must give the
same start-stop table (every column, row for row) and the same quarantine counts.
The growth slope is the least-squares slope of log(time) on log(events).
"""

from __future__ import annotations

import argparse
import json
import math
import platform
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
DATA = ROOT / "bench" / "_data"
RESULTS = ROOT / "bench" / "results" / "prepare.md"
EVENTS_PER_CUSTOMER = 3.29  # the demo generator's log rows per customer (measured)
MEMORY_LIMIT = "12GB"

CHILD = r"""
import json, sys, time
side, toml = sys.argv[1], sys.argv[2]
sys.path.insert(0, sys.argv[3])
from retain.data.config import load_config
cfg = load_config(toml)
steps, arrays = {}, None
t0, c0 = time.perf_counter(), time.process_time()
if side == "retain":
    from retain.data.prepare import prepare
    p = prepare(cfg, progress=lambda s, n, dt: steps.__setitem__(s, dt))
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    rows, quarantined = p.arrow.num_rows, p.reconciliation.quarantined
    t1 = time.perf_counter()
    p.table  # the StartStop arrays the models read, timed apart
    arrays = time.perf_counter() - t1
else:
    from prepare_pandas import prepare_pandas
    r = prepare_pandas(cfg)
    wall, cpu = time.perf_counter() - t0, time.process_time() - c0
    rows, quarantined = len(r["table"]), sum(r["quarantine"].values())
# VmHWM: this process's own peak (ru_maxrss would carry the parent's over exec)
peak = next(int(line.split()[1]) for line in open("/proc/self/status")
            if line.startswith("VmHWM")) / 1024
print(json.dumps({"wall_s": wall, "cpu_s": cpu, "peak_mb": peak, "rows_out": rows,
                  "quarantined": quarantined, "steps": steps, "arrays_s": arrays}))
"""


def _log(n_events: int, memory_limit: str = MEMORY_LIMIT) -> tuple[Path, int, int]:
    """The demo log of about ``n_events`` rows (Parquet) and its project file."""
    from retain.demo import write_log

    n_customers = int(round(n_events / EVENTS_PER_CUSTOMER, -3))
    DATA.mkdir(parents=True, exist_ok=True)
    log = DATA / f"quillfern_{n_customers}.parquet"
    if not log.exists():
        print(f"generating {log.name} ...", flush=True)
        write_log(log, n_customers=n_customers)
    import pyarrow.parquet as pq

    rows = pq.ParquetFile(log).metadata.num_rows
    text = (ROOT / "demo_data" / "retain.toml").read_text(encoding="utf-8")
    text = text.replace('path = "quillfern_events.csv.gz"', f'path = "{log.name}"')
    text = text.replace('memory_limit = "4GB"', f'memory_limit = "{memory_limit}"')
    text = text.replace('temp_directory = ".retain_tmp"', 'temp_directory = "_tmp"')
    suffix = "" if memory_limit == MEMORY_LIMIT else f"_{memory_limit}"
    toml = DATA / f"retain_{n_customers}{suffix}.toml"
    toml.write_text(text, encoding="utf-8")
    return toml, rows, n_customers


def _run(side: str, toml: Path) -> dict:
    res = subprocess.run([sys.executable, "-c", CHILD, side, str(toml), str(ROOT / "bench")],
                         capture_output=True, text=True, cwd=ROOT)
    if res.returncode != 0:
        raise SystemExit(f"{side} failed on {toml.name}:\n{res.stderr[-3000:]}")
    return json.loads(res.stdout.strip().splitlines()[-1])


def check_equal(toml: Path) -> str:
    """Both sides on one log: the same table and quarantine, or SystemExit."""
    import numpy as np
    import pandas as pd
    from prepare_pandas import prepare_pandas

    from retain.data.config import load_config
    from retain.data.prepare import prepare

    cfg = load_config(toml)
    a = prepare_pandas(cfg)
    p = prepare(cfg)
    left = a["table"].sort_values(["customer_id", "spell", "start"]).reset_index(drop=True)
    right = p.arrow.to_pandas()[list(left.columns)].reset_index(drop=True)
    if left.shape != right.shape:
        raise SystemExit(f"row counts differ: pandas {left.shape}, retain {right.shape}")
    for col in left.columns:
        x, y = left[col], right[col]
        if pd.api.types.is_numeric_dtype(x) and pd.api.types.is_numeric_dtype(y):
            same = np.array_equal(x.to_numpy(float), y.to_numpy(float), equal_nan=True)
        else:
            same = (x.astype(object).where(x.notna(), None).tolist()
                    == y.astype(object).where(y.notna(), None).tolist())
        if not same:
            raise SystemExit(f"column {col!r} differs between pandas and retain")
    if a["quarantine"] != p.reconciliation.by_reason:
        raise SystemExit(f"quarantine differs: {a['quarantine']} vs {p.reconciliation.by_reason}")
    return (f"{len(left):,} start-stop rows x {left.shape[1]} columns identical; quarantine "
            f"identical ({sum(a['quarantine'].values())} rows in "
            f"{len(a['quarantine'])} reasons)")


def _slope(xs: list[float], ys: list[float]) -> float:
    lx, ly = [math.log(x) for x in xs], [math.log(y) for y in ys]
    mx, my = sum(lx) / len(lx), sum(ly) / len(ly)
    return (sum((a - mx) * (b - my) for a, b in zip(lx, ly, strict=True))
            / sum((a - mx) ** 2 for a in lx))


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--events", type=float, nargs="+", default=[1e6, 3e6, 1e7])
    ap.add_argument("--no-pandas-above", type=float, default=1e8,
                    help="skip the pandas side above this many events")
    ap.add_argument("--out-of-core", default="2GB",
                    help="also run retain on the largest log with this DuckDB memory limit "
                         "('' to skip): it must spill to disk and still finish")
    ap.add_argument("--no-write", action="store_true")
    args = ap.parse_args()
    logs = [_log(int(n)) for n in args.events]
    print("checking both sides agree on the smallest log ...", flush=True)
    agreement = check_equal(logs[0][0])
    print("  " + agreement, flush=True)
    out = []
    for toml, rows, n_customers in logs:
        r = _run("retain", toml)
        print(f"{rows:>11,} events  retain {r['wall_s']:6.1f} s (cpu {r['cpu_s']:.1f} s, "
              f"{r['peak_mb']:,.0f} MB)", flush=True)
        pd_res = None
        if rows <= args.no_pandas_above:
            pd_res = _run("pandas", toml)
            print(f"{'':>18}pandas {pd_res['wall_s']:6.1f} s (cpu {pd_res['cpu_s']:.1f} s, "
                  f"{pd_res['peak_mb']:,.0f} MB)  ratio {pd_res['wall_s'] / r['wall_s']:.1f}x",
                  flush=True)
        out.append({"events": rows, "customers": n_customers, "retain": r, "pandas": pd_res})
    small = None
    if args.out_of_core:
        toml, rows, _ = _log(int(args.events[-1]), args.out_of_core)
        small = _run("retain", toml)
        small["limit"], small["events"] = args.out_of_core, rows
        print(f"{rows:>11,} events  retain with memory_limit {args.out_of_core}: "
              f"{small['wall_s']:.1f} s, {small['peak_mb']:,.0f} MB", flush=True)
    if not args.no_write:
        write(out, agreement, args, small)


def write(out: list[dict], agreement: str, args: argparse.Namespace,
          small: dict | None) -> None:
    lines = [
        "# Preparation benchmark: event log -> start-stop table (retain DuckDB vs pandas)",
        "",
        "Command (repository root): `/work/venv/bin/python bench/bench_prepare.py"
        + (" --events " + " ".join(f"{e:g}" for e in args.events)
           if args.events != [1e6, 3e6, 1e7] else "") + "`",
        "",
        "Quillfern demo logs (Parquet, from `retain.demo`), the demo's retain.toml "
        f"with `memory_limit = \"{MEMORY_LIMIT}\"`, 2 DuckDB threads. retain = "
        "`prepare(config)`: read, validate, quarantine with reasons, reconcile, start-stop "
        "table as Arrow (the StartStop arrays for the models are timed apart, last column)."
        " pandas = `bench/prepare_pandas.py`, the same rules with "
        "groupby / shift / forward-fill. Each side in its own fresh process, one after the "
        "other in one run; peak = the process's maximum resident memory.",
        "",
        f"Agreement (smallest log): {agreement}.",
        "",
        "| events | customers | start-stop rows | retain s | retain CPU s | pandas s "
        "| pandas CPU s | speed-up | retain peak MB | pandas peak MB | StartStop arrays s |",
        "|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for o in out:
        r, p = o["retain"], o["pandas"]
        ps = (f"{p['wall_s']:.1f} | {p['cpu_s']:.1f} | {p['wall_s'] / r['wall_s']:.1f}x"
              if p else "not run | | ")
        pm = f"{p['peak_mb']:,.0f}" if p else ""
        lines.append(f"| {o['events']:,} | {o['customers']:,} | {r['rows_out']:,} | "
                     f"{r['wall_s']:.1f} | {r['cpu_s']:.1f} | {ps} | {r['peak_mb']:,.0f} | {pm} "
                     f"| {r['arrays_s']:.1f} |")
    if len(out) > 1:
        ev = [o["events"] for o in out]
        lines += ["", f"Growth slope of time over the sizes (log-log least squares, 1 = linear): "
                  f"retain {_slope(ev, [o['retain']['wall_s'] for o in out]):.2f}"
                  + (f", pandas {_slope(ev, [o['pandas']['wall_s'] for o in out]):.2f}"
                     if all(o["pandas"] for o in out) else "")
                  + f"; retain peak memory "
                  f"{_slope(ev, [o['retain']['peak_mb'] for o in out]):.2f}."]
    big = out[-1]["retain"]["steps"]
    if big:
        lines += ["", f"retain's steps at {out[-1]['events']:,} events (wall s): "
                  + ", ".join(f"{k} {v:.1f}" for k, v in big.items()) + "."]
    if small:
        lines += ["", f"Out of core: the {small['events']:,}-event log with DuckDB "
                  f"`memory_limit = \"{small['limit']}\"` (spilling to bench/_data/_tmp) took "
                  f"{small['wall_s']:.1f} s, peak resident memory {small['peak_mb']:,.0f} MB "
                  "(DuckDB's limit covers its own tables and operators; the Arrow table and "
                  "the StartStop arrays come on top)."]
    big_run = out[-1]
    if big_run["pandas"]:
        r, pd_ = big_run["retain"], big_run["pandas"]
        ratio = pd_["wall_s"] / r["wall_s"]
        # the project's rule: where a target gives both a ratio and seconds, the ratio
        # rules (the machine is shared and noisy)
        lines += ["", f"Against the target (10M events at least 4x faster than the pandas "
                  f"version and in under 15 s; the ratio rules): {ratio:.1f}x at "
                  f"{big_run['events']:,} events, {'met' if ratio >= 4 else 'not met'}; "
                  f"{r['wall_s']:.1f} s, {'met' if r['wall_s'] < 15 else 'not met'}."]
    lines += ["", f"Machine: {platform.machine()}, Python {platform.python_version()}, "
              f"measured {time.strftime('%Y-%m-%d')} on a shared 2-core machine (compare "
              "the ratios)."]
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text("\n".join(lines) + "\n", encoding="utf-8")
    print(f"wrote {RESULTS}")


if __name__ == "__main__":
    main()
