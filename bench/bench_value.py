"""Value and experiment kernels at size, side by side with a reference where one exists.

Run (from the repository root)::

    /work/venv/bin/python bench/bench_value.py                  # default sizes
    /work/venv/bin/python bench/bench_value.py --quick --no-write

Data (generated here, seeded, not stored): one row per spell from tenure 0,
Weibull(0.8) tenures with scale 600 days, administrative censoring uniform
over 0-900 days, whole-day tenures, constant price 20.

- Revenue per customer to 365 days (``retain.kernels.discount.revenue_to_horizon``)
  vs the reference: scikit-survival's ``kaplan_meier_estimator`` and the area
  under its step curve to 365 days, times price / 30.4375 (with a constant
  price the two are the same quantity).
- Bootstrap of that revenue: 200 replicates (customer resampling).
- Residual value of an active base of n customers (``residual_value`` with a
  Weibull curve, 60-month horizon, 200 parameter draws): no reference library
  does this; time, peak memory and growth only.

Each call is timed once (shared machine: read the ratios); peak memory comes
from a second, separate pass with ``tracemalloc``. Growth slope = least-squares
slope of log(time) on log(n).
"""

from __future__ import annotations

import argparse
import platform
import sys
import time
import tracemalloc
from pathlib import Path

import numpy as np
from sksurv.nonparametric import kaplan_meier_estimator

from retain.data.table import StartStop
from retain.decisions.experiments import revenue_per_customer
from retain.decisions.value import residual_value
from retain.kernels.discount import revenue_to_horizon
from retain.models.parametric import fit_weibull
from retain.models.value_curves import curve_from_model
from retain.units import DAYS_PER_MONTH

ROOT = Path(__file__).resolve().parent
H = 365.0


def make_spells(n: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    t = np.ceil(600.0 * rng.weibull(0.8, n))
    c = np.ceil(rng.uniform(1, 900, n))
    return np.minimum(t, c), (t <= c).astype(np.int8)


def timed(fn, *args, **kwargs):
    t0 = time.perf_counter()
    out = fn(*args, **kwargs)
    return out, time.perf_counter() - t0


def peak_mb(fn, *args, **kwargs) -> float:
    tracemalloc.start()
    fn(*args, **kwargs)
    _, peak = tracemalloc.get_traced_memory()
    tracemalloc.stop()
    return peak / 1e6


def slope(ns: list[int], ts: list[float]) -> float:
    if len(ns) < 2:
        return float("nan")
    return float(np.polyfit(np.log(ns), np.log(ts), 1)[0])


def reference_revenue(stop: np.ndarray, died: np.ndarray) -> float:
    times, surv = kaplan_meier_estimator(died.astype(bool), stop)
    grid = np.concatenate(([0.0], times[times < H], [H]))
    steps = np.concatenate(([1.0], surv[times < H]))
    return float(np.sum(steps * np.diff(grid)) * 20.0 / DAYS_PER_MONTH)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--quick", action="store_true")
    ap.add_argument("--no-write", action="store_true")
    args = ap.parse_args()
    rev_sizes = [100_000, 300_000] if args.quick else [300_000, 1_000_000, 3_000_000]
    boot_sizes = [20_000] if args.quick else [20_000, 100_000]
    base_sizes = [10_000, 100_000] if args.quick else [10_000, 100_000, 1_000_000]
    lines = ["# Value and experiments benchmark", "",
             "Command: `/work/venv/bin/python bench/bench_value.py"
             f"{' --quick' if args.quick else ''}`",
             "", f"Machine: {platform.machine()}, Python {platform.python_version()}, numpy "
             f"{np.__version__}; shared with other jobs (compare ratios, not seconds). Each call "
             "timed once; peak memory from tracemalloc in a separate pass.", "",
             "Data: seeded synthetic spells from tenure 0 (Weibull 0.8, scale 600 days, uniform "
             "censoring over 900 days, whole days), constant price 20.", "",
             "## Revenue per customer to 365 days", "",
             "Reference: sksurv kaplan_meier_estimator, area under the step curve x price / M.",
             "", "| spells | retain s | reference s | reference / retain | abs diff "
             "| retain peak MB | reference peak MB |", "|---:|---:|---:|---:|---:|---:|---:|"]
    ns, ts, rs = [], [], []
    for n in rev_sizes:
        stop, died = make_spells(n)
        price = np.full(n, 20.0 / DAYS_PER_MONTH)
        zeros, ones = np.zeros(n), np.ones(n)
        ours, t_ours = timed(revenue_to_horizon, zeros, stop, died, price, ones, H)
        ref, t_ref = timed(reference_revenue, stop, died)
        m_ours = peak_mb(revenue_to_horizon, zeros, stop, died, price, ones, H)
        m_ref = peak_mb(reference_revenue, stop, died)
        ns.append(n)
        ts.append(t_ours)
        rs.append(t_ref)
        lines.append(f"| {n:,} | {t_ours:.3f} | {t_ref:.3f} | {t_ref / t_ours:.1f} | "
                     f"{abs(float(ours) - ref):.1e} | {m_ours:.0f} | {m_ref:.0f} |")
        print(lines[-1], flush=True)
    lines += ["", f"Growth slope: retain {slope(ns, ts):.2f}, reference {slope(ns, rs):.2f}.", "",
              "## Bootstrap of revenue per customer (200 replicates over customers)", "",
              "| customers | seconds | peak MB |", "|---:|---:|---:|"]
    for n in boot_sizes:
        stop, died = make_spells(n, seed=1)
        table = StartStop(np.zeros(n), stop, died, customer_id=np.arange(n).astype(str),
                          covariates={"price": np.full(n, 20.0)})
        _, t_b = timed(revenue_per_customer, table, "price", H, n_boot=200)
        m_b = peak_mb(revenue_per_customer, table, "price", H, n_boot=200)
        lines.append(f"| {n:,} | {t_b:.2f} | {m_b:.0f} |")
        print(lines[-1], flush=True)
    stop, died = make_spells(50_000, seed=2)
    fit = fit_weibull(StartStop(np.zeros(50_000), stop, died))
    curve = curve_from_model(fit)
    lines += ["", "## Residual value of the active base (Weibull curve, 60 months, 200 draws)", "",
              "No reference library computes this; time and memory only.", "",
              "| active customers | seconds | peak MB |", "|---:|---:|---:|"]
    ns, ts = [], []
    for n in base_sizes:
        rng = np.random.default_rng(3)
        tenure = np.ceil(rng.uniform(1, 1300, n))
        table = StartStop(np.zeros(n), tenure, np.zeros(n),
                          customer_id=np.arange(n).astype(str),
                          covariates={"price": rng.choice([19.0, 29.0, 45.0], n)})
        _, t_r = timed(residual_value, table, curve, margin_rate=0.35, n_draws=200)
        m_r = peak_mb(residual_value, table, curve, margin_rate=0.35, n_draws=200)
        ns.append(n)
        ts.append(t_r)
        lines.append(f"| {n:,} | {t_r:.2f} | {m_r:.0f} |")
        print(lines[-1], flush=True)
    lines += ["", f"Growth slope: {slope(ns, ts):.2f} (the work depends on distinct tenures, "
              "about 1300 here, not on customers, beyond the table checks).", ""]
    if not args.no_write:
        (ROOT / "results").mkdir(exist_ok=True)
        (ROOT / "results" / "value.md").write_text("\n".join(lines), encoding="utf-8")
    print("\n".join(lines))


if __name__ == "__main__":
    sys.exit(main())
