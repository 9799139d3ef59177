"""Benchmark: retain's fit_cox against statsmodels PHReg on start-stop tables.

Run from the repository root::

    /work/venv/bin/python bench/bench_cox.py            # 100k, 1M, 3M rows
    /work/venv/bin/python bench/bench_cox.py --sizes 100000 --reference-max 100000

Each table has 10 covariates (5 static per customer, 5 time-varying per row),
whole-day times, delayed entry for about 30% of customers, and churns drawn
from a proportional-hazards model, so coefficients are not all zero. Every fit
runs in its own fresh process (so peak memory is that fit's own), one after
the other in this one run; the machine is shared, so compare ratios.

statsmodels PHReg is given ``entry = start + 0.5``: with whole-day times that
reproduces the (start, stop] rule (PHReg counts a row at risk at its entry
time). PHReg runs at sizes up to ``--reference-max`` (default 1M rows): at 3M
rows its Python-level index lists make it too slow for a shared machine.

Timed: the whole fit from a StartStop table (design matrix, index, Newton,
robust errors, baseline) for retain; ``PHReg(...).fit()`` for statsmodels.
Peak memory: the child process's maximum resident set size (ru_maxrss), and
that minus the resident size after the data were loaded.
"""

from __future__ import annotations

import argparse
import json
import resource
import subprocess
import sys
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
DATA = ROOT / "bench" / "_data"
RESULTS = ROOT / "bench" / "results" / "cox.md"
P_STATIC = 5
P_VARY = 5
TRUE_BETA = np.array([0.3, -0.2, 0.1, 0.25, -0.15, 0.2, -0.3, 0.15, -0.1, 0.05])


def make_table(n_target: int, seed: int = 2026) -> dict[str, np.ndarray]:
    """Start-stop rows with 5 static and 5 time-varying covariates and PH churns."""
    rng = np.random.default_rng(seed)
    rows_per = 6
    n_cust = int(n_target / 4.2) + 1
    L = rng.integers(5, 61, size=(n_cust, rows_per)).astype(float)
    start = np.concatenate([np.zeros((n_cust, 1)), np.cumsum(L, axis=1)[:, :-1]], axis=1)
    stat = np.column_stack([rng.normal(size=n_cust), rng.integers(0, 2, n_cust),
                            rng.normal(size=n_cust), rng.integers(0, 3, n_cust),
                            rng.uniform(-1, 1, n_cust)])
    vary = np.stack([rng.normal(size=(n_cust, rows_per)), rng.integers(0, 2, (n_cust, rows_per)),
                     rng.normal(size=(n_cust, rows_per)) * 0.5,
                     rng.integers(0, 2, (n_cust, rows_per)),
                     rng.uniform(0, 2, (n_cust, rows_per))], axis=2).astype(float)
    eta = (stat @ TRUE_BETA[:P_STATIC])[:, None] + vary @ TRUE_BETA[P_STATIC:]
    lam = 0.004 * np.exp(eta)
    T = np.ceil(rng.exponential(size=(n_cust, rows_per)) / lam)
    hit = T <= L
    first = np.where(hit.any(axis=1), np.argmax(hit, axis=1), rows_per)
    r = np.arange(rows_per)[None, :]
    keep = r <= np.minimum(first, rows_per - 1)[:, None]
    churn_row = (r == first[:, None]) & hit
    stop = np.where(churn_row, start + T, start + L)
    # delayed entry: about 30% of customers enter part-way through their first row
    delayed = rng.uniform(size=n_cust) < 0.3
    enter = np.floor(L[:, 0] * rng.uniform(0.1, 0.9, n_cust))
    start0 = start.copy()
    start0[:, 0] = np.where(delayed, np.minimum(enter, stop[:, 0] - 1), 0.0)
    cust = np.repeat(np.arange(n_cust), rows_per).reshape(n_cust, rows_per)
    m = keep
    out = {
        "customer": cust[m], "start": start0[m], "stop": stop[m],
        "churned": churn_row[m].astype(np.int8),
    }
    for j in range(P_STATIC):
        out[f"s{j}"] = np.repeat(stat[:, j:j + 1], rows_per, axis=1)[m]
    for j in range(P_VARY):
        out[f"v{j}"] = vary[:, :, j][m]
    n = out["start"].shape[0]
    if n > n_target:
        for k in out:
            out[k] = out[k][:n_target]
        # the cut may split a customer: make its last kept row censored is fine (still valid)
    return out


def data_path(n: int) -> Path:
    return DATA / f"cox_{n}.npz"


def ensure_data(n: int) -> Path:
    DATA.mkdir(parents=True, exist_ok=True)
    path = data_path(n)
    if not path.exists():
        np.savez(path, **make_table(n))
    return path


def rss_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def current_rss_mb() -> float:
    with open("/proc/self/statm") as fh:
        return int(fh.read().split()[1]) * resource.getpagesize() / 2**20


def child(which: str, n: int) -> None:
    data = dict(np.load(data_path(n)))
    cov = [f"s{j}" for j in range(P_STATIC)] + [f"v{j}" for j in range(P_VARY)]
    if which == "retain":
        from retain import StartStop
        from retain.models.cox import fit_cox
        table = StartStop(data["start"], data["stop"], data["churned"],
                          customer_id=data["customer"].astype(np.int64),
                          covariates={c: data[c] for c in cov})
        del data
        base = current_rss_mb()
        t0 = time.perf_counter()
        fit = fit_cox(table, cov, ties="efron")
        sec = time.perf_counter() - t0
        coef = fit.coef.tolist()
        se = fit.se_model.tolist()
        iters = fit.iterations
    else:
        import warnings

        from statsmodels.duration.hazard_regression import PHReg
        X = np.column_stack([data[c] for c in cov])
        start, stop, d = data["start"], data["stop"], data["churned"].astype(float)
        del data
        base = current_rss_mb()
        t0 = time.perf_counter()
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            res = PHReg(stop, X, status=d, entry=start + 0.5, ties="efron").fit()
        sec = time.perf_counter() - t0
        coef = res.params.tolist()
        se = res.bse.tolist()
        iters = None
    print(json.dumps({"which": which, "n": n, "seconds": sec, "peak_mb": rss_mb(),
                      "extra_mb": rss_mb() - base, "coef": coef, "se": se,
                      "iterations": iters}))


def run_child(which: str, n: int) -> dict:
    out = subprocess.run([sys.executable, __file__, "--child", which, str(n)],
                         capture_output=True, text=True, check=True)
    return json.loads(out.stdout.strip().splitlines()[-1])


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", type=int, nargs="*", default=[100_000, 1_000_000, 3_000_000])
    ap.add_argument("--reference-max", type=int, default=1_000_000)
    ap.add_argument("--child", nargs=2)
    ap.add_argument("--no-write", action="store_true")
    args = ap.parse_args()
    if args.child:
        child(args.child[0], int(args.child[1]))
        return
    rows = []
    for n in args.sizes:
        ensure_data(n)
        d = np.load(data_path(n))
        n_rows, n_events = d["start"].shape[0], int(d["churned"].sum())
        n_cust = int(np.unique(d["customer"]).shape[0])
        r = run_child("retain", n)
        ref = run_child("statsmodels", n) if n <= args.reference_max else None
        row = {"n": n_rows, "customers": n_cust, "events": n_events, "retain": r, "phreg": ref}
        if ref is not None:
            c1, c2 = np.array(r["coef"]), np.array(ref["coef"])
            s1, s2 = np.array(r["se"]), np.array(ref["se"])
            row["coef_rel"] = float(np.max(np.abs(c1 - c2) / np.abs(c2)))
            row["coef_se"] = float(np.max(np.abs(c1 - c2) / s2))
            row["se_rel"] = float(np.max(np.abs(s1 - s2) / s2))
            row["speedup"] = ref["seconds"] / r["seconds"]
        rows.append(row)
        print(json.dumps(row), flush=True)
    if not args.no_write:
        write_md(rows)


def write_md(rows: list[dict]) -> None:
    cmd = "/work/venv/bin/python bench/bench_cox.py"
    lines = [
        "# Cox PH benchmark: retain `fit_cox` vs statsmodels `PHReg`",
        "",
        f"Command (repository root): `{cmd}`",
        "",
        "Start-stop tables with 10 covariates (5 static, 5 time-varying), whole-day times, "
        "delayed entry for ~30% of customers, Efron ties. Each fit in its own fresh process, "
        "one after another in one run, on a shared 2-core machine (compare ratios). PHReg is "
        "given `entry = start + 0.5` (the (start, stop] rule with whole days); it runs up to "
        "1M rows only (at 3M its Python index lists are too slow for a shared machine).",
        "",
        "| rows | customers | churns | retain s | PHReg s | speed-up | retain peak MB "
        "(+ over data) | PHReg peak MB (+ over data) | max rel. coef diff | max coef diff / SE "
        "| max rel. SE diff |",
        "|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|---:|",
    ]
    for row in rows:
        r, ref = row["retain"], row["phreg"]
        if ref is None:
            lines.append(f"| {row['n']:,} | {row['customers']:,} | {row['events']:,} | "
                         f"{r['seconds']:.2f} | - | - | {r['peak_mb']:.0f} "
                         f"(+{r['extra_mb']:.0f}) | - | - | - | - |")
            continue
        lines.append(
            f"| {row['n']:,} | {row['customers']:,} | {row['events']:,} | {r['seconds']:.2f} | "
            f"{ref['seconds']:.2f} | {row['speedup']:.0f}x | {r['peak_mb']:.0f} "
            f"(+{r['extra_mb']:.0f}) | {ref['peak_mb']:.0f} (+{ref['extra_mb']:.0f}) | "
            f"{row['coef_rel']:.1e} | {row['coef_se']:.1e} | {row['se_rel']:.1e} |")
    if len(rows) >= 2:
        ns = np.array([row["n"] for row in rows], float)
        ts = np.array([row["retain"]["seconds"] for row in rows])
        slope = np.polyfit(np.log(ns), np.log(ts), 1)[0]
        lines += ["", f"Growth slope of retain's time (log-log fit over the sizes): {slope:.2f} "
                  "(1.0 = linear)."]
        refs = [row for row in rows if row["phreg"] is not None]
        if len(refs) >= 2:
            ns2 = np.array([row["n"] for row in refs], float)
            ts2 = np.array([row["phreg"]["seconds"] for row in refs])
            lines.append(f"Growth slope of PHReg's time: "
                         f"{np.polyfit(np.log(ns2), np.log(ts2), 1)[0]:.2f}.")
    lines.append("")
    RESULTS.parent.mkdir(parents=True, exist_ok=True)
    RESULTS.write_text("\n".join(lines) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
