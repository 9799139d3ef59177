"""Generated start-stop tables for the actuarial tests (fixed seeds; not demo data)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from retain.data.table import StartStop

CAUSE_NAMES = np.array(["", "voluntary", "involuntary"], dtype=object)


def competing_rows(n: int = 400, seed: int = 0, *, delayed: bool = True, weights: bool = True,
                   half_days: bool = True, split: bool = True) -> StartStop:
    """Spells with two competing causes, delayed entry, plan changes and weights.

    Whole-day stops, some 0.5 (a churn on the start day), some spells split in
    two rows at a plan change; start dates spread over 2024-2025.
    """
    rng = np.random.default_rng(seed)
    t_vol = rng.exponential(300.0, n)
    t_inv = rng.exponential(700.0, n)
    t_cen = rng.uniform(30.0, 900.0, n)
    t = np.minimum(np.minimum(t_vol, t_inv), t_cen)
    stop = np.ceil(t)
    if half_days:
        stop = np.where(t < 1.0, 0.5, stop)
    kind = np.where(t == t_cen, 0, np.where(t == t_vol, 1, 2))
    entry = np.where(rng.random(n) < 0.3, np.floor(rng.uniform(0, 200, n)), 0.0) \
        if delayed else np.zeros(n)
    entry = np.where(entry < stop, entry, 0.0)
    plan = rng.choice(["Seedling", "Sprout", "Orchard"], n)
    channel = rng.choice(["search", "referral"], n)
    score = np.round(rng.normal(0.0, 1.0, n), 3)
    w = rng.integers(1, 4, n).astype(float) if weights else np.ones(n)
    cid = np.array([f"c{i:05d}" for i in range(n)], dtype=object)
    start_date = np.datetime64("2024-01-01") + rng.integers(0, 700, n)
    rows = {"start": [], "stop": [], "kind": [], "plan": [], "w": [], "cid": [], "sd": [],
            "channel": [], "score": []}
    for i in range(n):
        cut = np.floor(rng.uniform(entry[i], stop[i])) if split else entry[i]
        pieces = [(entry[i], stop[i], plan[i])]
        if split and entry[i] < cut < stop[i] and rng.random() < 0.5:
            new = "Orchard" if plan[i] != "Orchard" else "Sprout"
            pieces = [(entry[i], cut, plan[i]), (cut, stop[i], new)]
        for j, (a, b, p) in enumerate(pieces):
            rows["start"].append(a)
            rows["stop"].append(b)
            rows["kind"].append(kind[i] if j == len(pieces) - 1 else 0)
            rows["plan"].append(p)
            rows["w"].append(w[i])
            rows["cid"].append(cid[i])
            rows["sd"].append(start_date[i])
            rows["channel"].append(channel[i])
            rows["score"].append(score[i])
    kind_r = np.array(rows["kind"])
    return StartStop(np.array(rows["start"]), np.array(rows["stop"]), (kind_r > 0).astype(int),
                     weight=np.array(rows["w"]), customer_id=np.array(rows["cid"], dtype=object),
                     cause=CAUSE_NAMES[kind_r], start_date=np.array(rows["sd"]),
                     covariates={"plan": np.array(rows["plan"], dtype=object),
                                 "price": np.where(np.array(rows["plan"]) == "Orchard", 30.0,
                                                   12.5),
                                 "channel": np.array(rows["channel"], dtype=object),
                                 "score": np.array(rows["score"])})


def kinds(table: StartStop) -> np.ndarray:
    """0 censored, 1 voluntary, 2 involuntary."""
    names = np.array(list(table.cause.levels) + [""], dtype=object)[table.cause.codes]
    return np.where(names == "voluntary", 1, np.where(names == "involuntary", 2, 0))


def split_rows(t: StartStop) -> StartStop:
    """Every row with an interior whole day cut in two there (the churn stays on the second)."""
    f = t.to_frame()
    mid = np.floor((t.start + t.stop) / 2)
    ok = (mid > t.start) & (mid < t.stop)
    a = f[ok].copy()
    a["stop"] = mid[ok]
    a["churned"] = 0
    a["cause"] = ""
    b = f[ok].copy()
    b["start"] = mid[ok]
    return StartStop.from_frame(pd.concat([a, b, f[~ok]], ignore_index=True))
