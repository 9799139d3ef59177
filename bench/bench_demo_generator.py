"""Speed and memory of the Quillfern demo generator (retain.demo).

Each size runs in a fresh subprocess so its peak resident memory is its own:
``generate_log(n)`` (simulation + text columns) and ``write_log`` to Parquet under
bench/_data/. No reference library does this job, so the figures stand alone; the
growth slope (log time / log size) shows the work is linear in customers.

The truth file's two simulations (``true_reference_values`` and ``km_limit`` at the
shipped settings, each in its own subprocess) are timed with ``--truth``.

Run:  /work/venv/bin/python bench/bench_demo_generator.py [sizes...]
      /work/venv/bin/python bench/bench_demo_generator.py --truth
"""

from __future__ import annotations

import json
import math
import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
CHILD = r"""
import json, resource, sys, time
from retain.demo import generate_log, write_log
n = int(sys.argv[1]); out = sys.argv[2]
t = time.perf_counter(); tb = generate_log(n); t_gen = time.perf_counter() - t
rows = tb.num_rows; del tb
t = time.perf_counter(); write_log(out, n_customers=n); t_write = time.perf_counter() - t
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps({"customers": n, "rows": rows, "generate_s": t_gen,
                  "write_parquet_s": t_write, "peak_mb": peak}))
"""
TRUTH_CHILD = r"""
import json, resource, sys, time
from retain import demo as db
fn = getattr(db, sys.argv[1])
t = time.perf_counter(); fn(); s = time.perf_counter() - t
peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
print(json.dumps({"step": sys.argv[1], "seconds": s, "peak_mb": peak}))
"""


def truth() -> list[dict]:
    """Time the truth file's simulations at their shipped settings."""
    out = []
    for step in ("true_reference_values", "km_limit"):
        res = subprocess.run([sys.executable, "-c", TRUTH_CHILD, step], check=True,
                             capture_output=True, text=True)
        rec = json.loads(res.stdout.strip().splitlines()[-1])
        out.append(rec)
        print(f"{step:<22} {rec['seconds']:6.1f} s  peak {rec['peak_mb']:,.0f} MB", flush=True)
    return out


def main(sizes: list[int]) -> list[dict]:
    out = []
    for n in sizes:
        path = ROOT / "bench" / "_data" / f"quillfern_{n}.parquet"
        res = subprocess.run([sys.executable, "-c", CHILD, str(n), str(path)], check=True,
                             capture_output=True, text=True)
        rec = json.loads(res.stdout.strip().splitlines()[-1])
        rec["rows_per_s"] = rec["rows"] / rec["generate_s"]
        out.append(rec)
        print(f"{n:>9,} customers {rec['rows']:>11,} rows  generate {rec['generate_s']:6.1f} s"
              f" ({rec['rows_per_s'] / 1e6:.2f} M rows/s)  write parquet "
              f"{rec['write_parquet_s']:6.1f} s  peak {rec['peak_mb']:,.0f} MB", flush=True)
    if len(out) > 1:
        a, b = out[0], out[-1]
        slope = math.log(b["generate_s"] / a["generate_s"]) / math.log(b["customers"]
                                                                       / a["customers"])
        mslope = math.log(b["peak_mb"] / a["peak_mb"]) / math.log(b["customers"] / a["customers"])
        print(f"growth slope: time {slope:.2f}, peak memory {mslope:.2f} (1 = linear)")
    return out


if __name__ == "__main__":
    if sys.argv[1:] == ["--truth"]:
        truth()
    else:
        main([int(x) for x in sys.argv[1:]] or [100_000, 300_000, 1_000_000, 3_000_000])
