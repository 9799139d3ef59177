"""The truth computation: what every estimate on the demo log should find.

The start-stop table the log must yield, retention given each simulated
covariate path, the Kaplan–Meier limit of the demo's design, the experiment's
true effects, and ``truth.json`` that holds them beside :data:`TRUTH`.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from retain.demo.design import DAYS_PER_MONTH, TRUTH, _day, _levels, _linear_predictor, truth_dict
from retain.demo.log import _account_ids, _decode, _dict_strings
from retain.demo.simulate import (
    SimSpells,
    _draw_customers,
    _group_starts,
    _simulate_world,
    simulate_spells,
)


def true_start_stop(n_customers: int = 20000, *, seed: int = 20261130,
                    start: str = "2023-06-01", as_of: str = "2026-11-30",
                    window_start: str | None = "2024-01-01") -> pa.Table:
    """The start-stop table the log of ``generate_log`` (same arguments) must yield.

    Built straight from the simulation, not from the log: one row per covariate
    segment of each spell, cut at the recorded end day ``ceil(T)`` or the as-of
    date, entering at the window's first day (delayed entry; a spell that ended
    on or before it is left out). Columns and order as in the start-stop
    contract (ARCHITECTURE.md), without ``weight``; plus ``latent_time``, the
    continuous churn time of the spell (inf if censored), for checks.
    """
    _, cu, sp = _simulate_world(n_customers, seed, start, as_of)
    s = sp.seg_spell
    end_rec = sp.end_tenure.astype(float)
    entry = np.zeros(sp.n) if window_start is None else np.maximum(
        0.0, float(_day(window_start)) - sp.start_day)
    keep = (sp.seg_a < end_rec[s]) & (sp.seg_b > entry[s]) & (end_rec[s] > entry[s])
    g = np.flatnonzero(keep)
    sg = s[g]
    churned = np.zeros(sp.seg_spell.size, np.int32)
    churned[sp.churn_seg[sp.churned]] = 1
    cause_code = np.full(sp.seg_spell.size, -1, np.int64)
    cause_code[sp.churn_seg[sp.churned]] = sp.cause[sp.churned]
    cust = sp.customer[sg]
    start_date = sp.start_day[sg].astype("datetime64[D]")
    accounts = _account_ids(n_customers)
    cols = {
        "customer_id": _decode(cust, accounts),
        "spell": pa.array(sp.prior[sg] + 1),
        "start": pa.array(np.maximum(sp.seg_a[g], entry[sg])),
        "stop": pa.array(np.minimum(sp.seg_b[g], end_rec[sg])),
        "churned": pa.array(churned[g]),
        "cause": pc.fill_null(_dict_strings(cause_code[g], ["voluntary", "involuntary"]), ""),
        "start_date": pa.array(start_date, pa.date32()),
        "cohort": pa.array(start_date.astype("datetime64[M]").astype(str)),
        "channel": _dict_strings(cu["channel"][cust], _levels("channels")),
        "region": _dict_strings(cu["region"][cust], _levels("regions")),
        "arm": _dict_strings(cu["arm"][cust], _levels("experiment")),
        "plan": _dict_strings(sp.seg_plan[g], _levels("plans")),
        "price": pa.array(sp.seg_cents[g] / 100.0),
        "price_ratio": pa.array(sp.seg_ratio[g]),
        "in_recovery": pa.array(sp.seg_rec[g].astype(float)),
        "paused": pa.array(sp.seg_paused[g].astype(float)),
        "prior_spells": pa.array(sp.prior[sg].astype(float)),
        "latent_time": pa.array(sp.t[sg]),
    }
    table = pa.table(cols)
    return table.sort_by([("customer_id", "ascending"), ("spell", "ascending"),
                          ("start", "ascending")])


# --------------------------------------------------------------------------------------
# Reference values that need simulation
# --------------------------------------------------------------------------------------
def _revenue_to(sp: SimSpells, idx: np.ndarray, horizon: float, *, recorded: bool,
                exclude_paused: bool) -> np.ndarray:
    """Monthly price accrued per day alive on [0, min(T, horizon)] for spells idx."""
    end = np.where(sp.churned, np.ceil(sp.t) if recorded else sp.t, np.inf)
    end = np.minimum(end, horizon)
    s = sp.seg_spell
    lo = sp.seg_a
    hi = np.minimum(sp.seg_b, end[s])
    dur = np.clip(hi - lo, 0.0, None)
    if exclude_paused:
        dur = dur * (sp.seg_paused == 0)
    rev = np.bincount(s, weights=dur * sp.seg_cents / 100.0 / DAYS_PER_MONTH, minlength=sp.n)
    return rev[idx]


RETENTION_DAYS = (30, 91, 182, 365, 730)
"""Tenures (days) at which the truth states retention."""


def conditional_retention(sp: SimSpells, channel: np.ndarray, region: np.ndarray,
                          arm: np.ndarray, days: tuple[int, ...] | np.ndarray) -> np.ndarray:
    """Probability that each spell outlives each day, given its covariate path.

    ``exp(-(H_vol(d) + H_inv(d)))`` with both cumulative hazards summed in closed
    form over the spell's segments (the formulas in :mod:`retain.demo.simulate`), so
    the average over spells is ``P(T > d)`` without the noise of the churn draw (a
    conditional expectation of the indicator ``T > d``: the Rao–Blackwell
    theorem; Casella & Robert 1996, Biometrika 83:81, for its use in simulation).
    ``channel``, ``region`` and ``arm`` are per customer (indexed by
    ``sp.customer``). Every spell must be followed to ``max(days)`` (no censoring
    before it). Returns an array (spells, days).
    """
    days_arr = np.asarray(days, dtype=float)
    if sp.n and int(sp.horizon.min()) < days_arr.max():
        raise ValueError("conditional_retention needs every spell followed to max(days)")
    s = sp.seg_spell
    cust = sp.customer[s]
    args = (sp.seg_plan, sp.seg_ratio, sp.seg_paused, sp.seg_rec, sp.prior[s],
            channel[cust], region[cust], arm[cust])
    vt = TRUTH["voluntary"]
    alpha, lam = float(vt["alpha"]), float(vt["lam_days"])
    m_vol = np.exp(_linear_predictor("voluntary", *args))
    m_inv = float(TRUTH["involuntary"]["mu_per_day"]) * np.exp(
        _linear_predictor("involuntary", *args))
    a = sp.seg_a
    out = np.empty((sp.n, days_arr.size))
    for j, d in enumerate(days_arr):
        live = a < d
        b = np.minimum(sp.seg_b[live], d)
        dh = (m_vol[live] * ((b / lam) ** alpha - (a[live] / lam) ** alpha)
              + m_inv[live] * (b - a[live]))
        out[:, j] = np.exp(-np.bincount(s[live], weights=dh, minlength=sp.n))
    return out


def _km_from_counts(entries: np.ndarray, exits: np.ndarray, churns: np.ndarray,
                    days: tuple[int, ...]) -> tuple[np.ndarray, np.ndarray]:
    """Kaplan–Meier and Greenwood standard error at ``days`` from counts by whole day.

    ``entries[e]`` spells enter at tenure e, ``exits[x]`` leave at x, ``churns[x]``
    of them churned (last cell: exits after the last day). At risk at day k:
    entry < k <= exit (the (start, stop] convention); Greenwood (1926) variance.
    """
    last = int(max(days))
    k = np.arange(1, last + 1)
    at_risk = np.cumsum(entries)[k - 1] - np.cumsum(exits)[k - 1]
    d = churns[k].astype(float)
    n = np.maximum(at_risk, 1).astype(float)
    surv = np.cumprod(1.0 - d / n)
    gw = np.cumsum(np.where(at_risk > d, d / (n * np.maximum(n - d, 1.0)), 0.0))
    j = np.asarray(days) - 1
    return surv[j], surv[j] * np.sqrt(gw[j])


def _first_spell_counts(rng: np.random.Generator, n_customers: int, start: str,
                        window_start: str, as_of: str, last: int
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Draw ``n_customers`` as :func:`generate_log` does and count their first spells'
    entries, exits and churns by whole tenure day (cells 0..last+1; the last cell holds
    everything later), per group: each plan on the spell's first row in the window, then
    all plans. A spell that ended on or before ``window_start`` is not in the log."""
    cu = _draw_customers(rng, n_customers, start, as_of)
    sp = simulate_spells(rng, cu["signup"], cu["plan"], cu["channel"], cu["region"],
                         cu["arm"], as_of_day=_day(as_of), max_spells=1)
    entry = np.maximum(0, _day(window_start) - sp.start_day)
    end = sp.end_tenure
    seen = end > entry
    s = sp.seg_spell
    head = (sp.seg_a <= entry[s]) & (sp.seg_b > entry[s])  # the first row in the window
    plan = np.full(sp.n, -1, np.int64)
    plan[s[head]] = sp.seg_plan[head]
    e = np.minimum(entry, last + 1)
    x = np.minimum(end, last + 1)
    n_plans = len(_levels("plans"))
    shape = (n_plans + 1, last + 2)
    entries, exits, churns = np.zeros(shape), np.zeros(shape), np.zeros(shape)
    for g in range(n_plans + 1):
        m = seen & (plan == g) if g < n_plans else seen
        entries[g] = np.bincount(e[m], minlength=last + 2)
        exits[g] = np.bincount(x[m], minlength=last + 2)
        churns[g] = np.bincount(x[m & sp.churned], minlength=last + 2)
    return entries, exits, churns


def simulated_km_by_plan(n_customers: int = 20000, *, seed: int = 20261130,
                         days: tuple[int, ...] = RETENTION_DAYS, start: str = "2023-06-01",
                         window_start: str = "2024-01-01", as_of: str = "2026-11-30"
                         ) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Kaplan–Meier by plan of the first spells of the log ``generate_log(n_customers,
    seed=seed)`` would write, straight from the simulation (no log, no SQL), with
    Greenwood standard errors: ``{group: (retention, se)}`` at ``days``; groups as in
    :func:`km_limit`. Used to calibrate the demo's tolerance over many seeds."""
    rng = np.random.Generator(np.random.PCG64(seed))
    counts = _first_spell_counts(rng, n_customers, start, window_start, as_of, int(max(days)))
    groups = [*_levels("plans"), "all_plans"]
    return {name: _km_from_counts(counts[0][g], counts[1][g], counts[2][g], days)
            for g, name in enumerate(groups)}


def km_limit(n_customers: int = 4_000_000, *, seed: int = 2, chunk: int = 125_000,
             days: tuple[int, ...] = RETENTION_DAYS, start: str = "2023-06-01",
             window_start: str = "2024-01-01", as_of: str = "2026-11-30") -> dict[str, Any]:
    """What a Kaplan–Meier curve by plan estimates on a log of the demo's design.

    The demo's curves are Kaplan–Meier estimates on first spells, with delayed
    entry at ``window_start`` and censoring at ``as_of``, grouped by the plan on
    the spell's first row in the window (the plan at signup for spells begun
    inside it, the plan held on ``window_start`` for older spells). Because the
    hazard moves with the calendar (the price rise, winter pauses, the
    experiment's cohort) and censoring with the signup day, this limit is not the
    uncensored ``P(T > t)`` of :func:`true_reference_values`: it weighs each
    tenure's hazard by the cohorts still observed at it. It is computed as the
    Kaplan–Meier estimate on ``n_customers`` customers drawn as in
    :func:`generate_log` (first spells only), in chunks of ``chunk`` customers;
    chunk i uses ``PCG64(SeedSequence(seed).spawn(...)[i])``, so a run of
    ``chunk`` customers reproduces the first chunk of a longer run.

    Returns per group (the plans and ``all_plans``) the spells counted and, at
    each day, ``retention``, its Greenwood standard error ``mc_se`` (the Monte
    Carlo error of this truth) and ``mc_se_between_chunks`` (the spread of the
    chunks' own estimates over sqrt(number of chunks), a check on ``mc_se``).
    """
    if n_customers % chunk:
        raise ValueError("km_limit: n_customers must be a multiple of chunk")
    n_chunks = n_customers // chunk
    groups = [*_levels("plans"), "all_plans"]
    last = int(max(days))
    parts = [_first_spell_counts(np.random.Generator(np.random.PCG64(child)), chunk, start,
                                 window_start, as_of, last)
             for child in np.random.SeedSequence(seed).spawn(n_chunks)]
    entries, exits, churns = (np.stack([p[i] for p in parts]) for i in range(3))
    out: dict[str, Any] = {
        "call": f"km_limit(n_customers={n_customers}, seed={seed}, chunk={chunk}, "
                f"days={tuple(days)}, start={start!r}, window_start={window_start!r}, "
                f"as_of={as_of!r})",
        "estimates": "Kaplan–Meier of first spells by plan on the spell's first row in "
                     "the window, delayed entry at window_start, censored at as_of",
    }
    tot = (entries.sum(0), exits.sum(0), churns.sum(0))
    for g, name in enumerate(groups):
        surv, se = _km_from_counts(tot[0][g], tot[1][g], tot[2][g], days)
        between = [None] * len(days)
        if n_chunks > 1:
            per = np.array([_km_from_counts(entries[c, g], exits[c, g], churns[c, g], days)[0]
                            for c in range(n_chunks)])
            between = [round(float(v), 6)
                       for v in per.std(axis=0, ddof=1) / math.sqrt(n_chunks)]
        out[name] = {
            "spells": int(tot[0][g].sum()),
            "by_day": {str(d): {"retention": round(float(surv[i]), 6),
                                "mc_se": round(float(se[i]), 6),
                                "mc_se_between_chunks": between[i]}
                       for i, d in enumerate(days)},
        }
    return out


def _retention_truth(n_customers: int, seed: int, days: tuple[int, ...]
                     ) -> tuple[dict[str, Any], dict[str, Any]]:
    """Retention by plan (first spells and all spells) and the first spells' cumulative
    incidence by cause, uncensored: see :func:`true_reference_values`."""
    rng = np.random.Generator(np.random.PCG64(seed))
    dates = TRUTH["dates"]
    cap = int(max(days)) + 1
    cu = _draw_customers(rng, n_customers, dates["log_start"], dates["as_of"])
    sp = simulate_spells(rng, cu["signup"], cu["plan"], cu["channel"], cu["region"],
                         cu["arm"], as_of_day=None, tenure_cap=cap)
    gst = _group_starts(sp.seg_spell, sp.n)
    plan0 = sp.seg_plan[gst[:-1]]
    plans = _levels("plans")
    alive = conditional_retention(sp, cu["channel"], cu["region"], cu["arm"], days)

    def surv(sel: np.ndarray) -> dict[str, Any]:
        p = alive[sel]
        m = int(sel.sum())
        mean, sd = p.mean(axis=0), p.std(axis=0)
        out = {}
        for j, d in enumerate(days):
            out[str(d)] = {"retention": round(float(mean[j]), 6),
                           "mc_se": round(float(sd[j]) / math.sqrt(m), 6)}
        return {"spells": m, "by_day": out}

    first = sp.prior == 0
    retention = {
        "first_spells": {pl: surv(first & (plan0 == i)) for i, pl in enumerate(plans)},
        "all_spells": {pl: surv(plan0 == i) for i, pl in enumerate(plans)},
    }
    retention["first_spells"]["all_plans"] = surv(first)
    retention["all_spells"]["all_plans"] = surv(np.ones(sp.n, bool))
    cif = {}
    for code, name in ((0, "voluntary"), (1, "involuntary")):
        cif[name] = {str(d): round(float(np.mean((sp.t <= d) & (sp.cause == code) & first)
                                         / np.mean(first)), 5) for d in days}
    return retention, cif


def _experiment_truth(n_experiment: int, seed: int, experiment_horizon: int
                      ) -> dict[str, Any]:
    """The experiment's true lifetimes and revenue by arm: see :func:`true_reference_values`."""
    dates = TRUTH["dates"]
    rng2 = np.random.Generator(np.random.PCG64(seed + 1))
    ex = TRUTH["experiment"]
    ce = _draw_customers(rng2, n_experiment, dates["log_start"], dates["as_of"],
                         month=ex["cohort"])
    se = simulate_spells(rng2, ce["signup"], ce["plan"], ce["channel"], ce["region"],
                         ce["arm"], as_of_day=None, tenure_cap=experiment_horizon,
                         max_spells=1)
    h = float(experiment_horizon)
    levels = list(ex["levels"])
    arms = {}
    for name in (ex["control"], ex["treatment"]):
        idx = np.flatnonzero(ce["arm"][se.customer] == levels.index(name))
        tcont = np.minimum(se.t[idx], h)
        trec = np.minimum(np.ceil(se.t[idx]), h)
        vals = {
            "customers": int(idx.size),
            "retention_at_horizon": float(np.mean(se.t[idx] > h)),
            "rmst_days": float(tcont.mean()),
            "rmst_days_recorded": float(trec.mean()),
            "revenue": float(_revenue_to(se, idx, h, recorded=False,
                                         exclude_paused=False).mean()),
            "revenue_recorded": float(_revenue_to(se, idx, h, recorded=True,
                                                  exclude_paused=False).mean()),
            "revenue_excluding_paused": float(_revenue_to(se, idx, h, recorded=False,
                                                          exclude_paused=True).mean()),
        }
        vals["_sd"] = {"rmst_days": float(tcont.std()),
                       "revenue": float(_revenue_to(se, idx, h, recorded=False,
                                                    exclude_paused=False).std())}
        arms[name] = vals
    c, t = arms[ex["control"]], arms[ex["treatment"]]

    def diff(key: str) -> float:
        return round(t[key] - c[key], 4)

    def se_diff(key: str) -> float:
        return round(math.sqrt(t["_sd"][key] ** 2 / t["customers"]
                               + c["_sd"][key] ** 2 / c["customers"]), 4)

    experiment = {
        "horizon_days": experiment_horizon,
        "arms": arms,
        "rmst_difference_days": diff("rmst_days"),
        "rmst_difference_days_mc_se": se_diff("rmst_days"),
        "rmst_difference_days_recorded": diff("rmst_days_recorded"),
        "revenue_difference": diff("revenue"),
        "revenue_difference_mc_se": se_diff("revenue"),
        "revenue_difference_recorded": diff("revenue_recorded"),
        "revenue_difference_excluding_paused": diff("revenue_excluding_paused"),
        "currency": "price units of the log (monthly_price)",
    }
    for v in arms.values():
        v.pop("_sd")
        for k in list(v):
            if isinstance(v[k], float):
                v[k] = round(v[k], 4)
    return experiment


def true_reference_values(n_customers: int = 1_000_000, n_experiment: int = 200_000, *,
                          seed: int = 7, days: tuple[int, ...] = RETENTION_DAYS,
                          experiment_horizon: int = 365) -> dict[str, Any]:
    """Quantities of the truth that need simulation (large, uncensored runs).

    Retention: ``n_customers`` customers drawn as in :func:`generate_log`, every
    spell followed ``max(days) + 1`` days with no calendar window and no
    censoring; retention ``P(T > t)`` by plan at the spell's start (first spells,
    and all spells): the mean over spells of :func:`conditional_retention` (the
    closed-form survival given each simulated covariate path), with its Monte
    Carlo standard error (standard deviation over spells / sqrt(spells)).
    Cumulative incidence of each cause at the same days (share of spells).
    These are marginal over calendar time; what a Kaplan–Meier curve on a
    windowed, censored log estimates is :func:`km_limit`.

    Experiment: ``n_experiment`` customers whose first signup is drawn from the
    2025-03 signup weights, randomised as in the log; first spells followed
    ``experiment_horizon`` days. Restricted mean lifetime ``E[min(T, h)]`` and
    revenue per assigned customer to ``h`` (sum over days alive of the monthly
    price / 30.4375, pauses included, and pauses excluded), per arm and the
    difference intro_discount - standard; both for the latent continuous ``T``
    and for the recorded churn day ``ceil(T)`` (what the start-stop table holds).
    """
    retention, cif = _retention_truth(n_customers, seed, days)
    experiment = _experiment_truth(n_experiment, seed, experiment_horizon)
    return {
        "call": f"true_reference_values(n_customers={n_customers}, "
                f"n_experiment={n_experiment}, seed={seed}, days={tuple(days)}, "
                f"experiment_horizon={experiment_horizon})",
        "retention": retention,
        "cumulative_incidence_first_spells_all_plans": cif,
        "experiment": experiment,
    }


def write_truth(path: str | Path, *, reference: Mapping[str, Any] | None = None,
                km: Mapping[str, Any] | None = None) -> Path:
    """Write ``truth.json``: :data:`TRUTH`, ``true_reference_values(**reference)`` under
    ``reference_values`` and ``km_limit(**km)`` under ``km_limit``."""
    out = truth_dict()
    out["reference_values"] = true_reference_values(**(reference or {}))
    out["km_limit"] = km_limit(**(km or {}))
    path = Path(path)
    path.write_text(json.dumps(out, indent=2, sort_keys=False) + "\n")
    return path
