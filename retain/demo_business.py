"""Quillfern: an invented monthly gardening-box subscription, simulated from a known truth.

Nothing here is real customer data. The generator writes a raw billing-style event
log (every column text, as an export would give) whose churn is drawn from a
stated model, so that every estimate ``retain`` makes on it can be held against
the truth (``TRUTH``, the same numbers as ``demo_data/truth.json``).

The truth
---------
Time unit: days of tenure since the spell's start day (tenure 0).

Voluntary churn, Weibull proportional hazards with time-varying covariates::

    h_vol(t | x(t)) = (alpha / lam) * (t / lam)**(alpha - 1) * exp(beta . x(t))

with ``beta . x(t)`` = plan effect (reference Seedling) + ``beta_price *
(price_ratio(t) - 1)`` + ``beta_paused * paused(t)`` + ``beta_recovery *
in_recovery(t)`` + ``beta_prior * prior_spells`` + channel effect (reference
search) + region effect (reference south) + arm effect (reference none; every
arm effect is 0: the experiment acts only through the price it charges).
``price_ratio`` is the monthly price divided by the price on the spell's start
row, so the price rise, the end of the introductory discount and plan changes
all move it.

Involuntary churn, its own cause-specific hazard, constant in tenure::

    h_inv(t | x(t)) = mu * exp(gamma . x(t))

whose ``gamma`` has a large ``in_recovery`` term, so involuntary churn comes
mostly (not only: a card can expire silently) while a failed payment is being
recovered.

Exact simulation
----------------
Every covariate is piecewise constant in tenure and changes only at whole tenure
days ``d`` (a change on day ``d`` takes effect just after ``d``, as in the
start-stop contract). Between consecutive change days ``a < b`` the cumulative
hazards are closed-form::

    H_vol(b) - H_vol(a) = exp(beta . x) * ((b / lam)**alpha - (a / lam)**alpha)
    H_inv(b) - H_inv(a) = mu * exp(gamma . x) * (b - a)

For each spell two independent unit exponentials ``E_vol``, ``E_inv`` are drawn
and each latent time is found by inverting its cumulative hazard: locate the
segment where the running sum first reaches ``E`` (one ``searchsorted`` over the
cumulative sums) and solve inside it::

    T_vol = lam * ((a / lam)**alpha + (E_vol - H_vol(a)) / exp(beta . x))**(1 / alpha)
    T_inv = a + (E_inv - H_inv(a)) / (mu * exp(gamma . x))

(the inversion method for time-varying covariates; Bender, Augustin & Blettner
2005, Statistics in Medicine 24:1713; Leemis 1987 for piecewise hazards). The
spell ends at ``T = min(T_vol, T_inv)`` with the cause of the smaller, or is
censored when ``T`` passes the horizon. The covariate processes (plan changes,
the price rise, the discount ending, winter pauses, payment failures and their
recoveries) are drawn first and never look at the latent churn times, so they
are external and the hazards above are exactly the hazards given the recorded
history. The log records the churn on tenure day ``ceil(T)``: then the
start-stop row that ends at that day carries exactly the covariates the
generator used (changes on days ``< T``); the continuous ``T`` lies in
``(stop - 1, stop]``. Events on days ``>= T`` are not logged.

All draws come from one ``numpy.random.Generator(PCG64(seed))`` in a fixed order,
so the same seed gives the same log, byte for byte.
"""

from __future__ import annotations

import gzip
import io
import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path
from types import MappingProxyType
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

__all__ = [
    "TRUTH",
    "generate_log",
    "write_log",
    "true_reference_values",
    "simulate_spells",
    "true_start_stop",
    "churn_times_piecewise",
    "truth_dict",
    "conditional_retention",
    "km_limit",
    "simulated_km_by_plan",
    "RETENTION_DAYS",
    "write_truth",
    "LOG_COLUMNS",
]

DAYS_PER_MONTH = 365.25 / 12.0  # the same as retain.units.DAYS_PER_MONTH

LOG_COLUMNS = ("account", "occurred_at", "kind", "cancel_reason", "plan", "monthly_price",
               "channel", "region", "arm")

KINDS = ("signup", "reactivate", "plan_change", "price_change", "payment_failed",
         "payment_recovered", "pause", "resume", "cancel", "email_opened", "gift_card_redeemed")
REASONS = ("too_expensive", "not_using", "moved", "card_declined", "card_expired")

# --------------------------------------------------------------------------------------
# The truth: every number the generator uses is read from here (one source).
# --------------------------------------------------------------------------------------
_PARAMS: dict[str, Any] = {
    "business": "Quillfern (invented): a monthly gardening-box subscription",
    "time_unit": "day of tenure (tenure 0 = the spell's start day)",
    "dates": {
        "log_start": "2023-06-01",
        "window_start": "2024-01-01",
        "as_of": "2026-11-30",
        "price_rise": "2025-09-01",
    },
    "plans": {
        "levels": ["Seedling", "Bloom", "Orchard"],
        "reference": "Seedling",
        "signup_shares": [0.45, 0.35, 0.20],
        "list_price_before_rise": [19.00, 29.00, 45.00],
        "list_price_from_rise": [21.00, 32.00, 49.00],
    },
    "channels": {
        "levels": ["search", "referral", "podcast_ad", "garden_centre"],
        "reference": "search",
        "shares": [0.40, 0.25, 0.20, 0.15],
    },
    "regions": {
        "levels": ["south", "east", "north", "west"],
        "reference": "south",
        "shares": [0.35, 0.25, 0.20, 0.20],
    },
    "experiment": {
        "name": "intro_discount",
        "cohort": "2025-03",
        "assignment": "each customer whose first signup falls in 2025-03 is assigned "
                      "intro_discount with probability 0.5, else standard (independent "
                      "Bernoulli draws); every other customer has arm 'none'",
        "levels": ["none", "standard", "intro_discount"],
        "reference": "none",
        "p_treatment": 0.5,
        "control": "standard",
        "treatment": "intro_discount",
        "discount_price_factor": 0.75,
        "discount_days": 91,
        "discount_rule": "intro_discount customers pay 0.75 x list price on tenure days "
                         "0..91 of their first spell (a price_change row on tenure day 91 "
                         "moves them to list price); reactivations pay list price",
    },
    "signups": {
        "rule": "daily weight w(d) = (1 + growth * d / D) * (1 + amplitude * cos(2 pi "
                "(doy - peak_doy) / 365.25)), times campaign_multiplier in the campaign "
                "month; d = days since log_start, D = days from log_start to as_of; "
                "signup days run from log_start to the day before as_of",
        "growth": 1.5,
        "seasonal_amplitude": 0.3,
        "seasonal_peak_day_of_year": 100,
        "campaign_month": "2025-03",
        "campaign_multiplier": 4.5,
    },
    "voluntary": {
        "model": "Weibull proportional hazards",
        "hazard": "h(t|x) = (alpha/lam) (t/lam)^(alpha-1) exp(beta.x(t)), t in days",
        "alpha": 0.8,
        "lam_days": 1050.0,
        "price_ratio_form": "beta_price * (price_ratio - 1)",
        "lam_days_if_price_ratio_enters_raw": None,  # filled below: lam * exp(beta_price/alpha)
        "coefficients": {
            "plan": {"Seedling": 0.0, "Bloom": -0.25, "Orchard": -0.45},
            "price_ratio": 0.8,
            "paused": -0.9,
            "in_recovery": 0.5,
            "prior_spells": 0.3,
            "channel": {"search": 0.0, "referral": -0.35, "podcast_ad": 0.25,
                        "garden_centre": -0.15},
            "region": {"south": 0.0, "east": 0.0, "north": 0.15, "west": -0.10},
            "arm": {"none": 0.0, "standard": 0.0, "intro_discount": 0.0},
        },
    },
    "involuntary": {
        "model": "exponential (constant-in-tenure) proportional hazards, cause-specific",
        "hazard": "h(t|x) = mu exp(gamma.x(t)), t in days",
        "mu_per_day": 4.0e-5,
        "coefficients": {
            "plan": {"Seedling": 0.0, "Bloom": -0.10, "Orchard": -0.30},
            "price_ratio": 0.0,
            "paused": 0.0,
            "in_recovery": 6.2,
            "prior_spells": 0.2,
            "channel": {"search": 0.0, "referral": -0.20, "podcast_ad": 0.35,
                        "garden_centre": 0.0},
            "region": {"south": 0.0, "east": 0.25, "north": 0.0, "west": 0.0},
            "arm": {"none": 0.0, "standard": 0.0, "intro_discount": 0.0},
        },
    },
    "processes": {
        "payment_failure": {
            "rule": "alternating renewal: days in good standing ~ Geometric(p_fail) >= 1, "
                    "then days to recovery ~ Geometric(p_recover) >= 1; a failure on a "
                    "paused day is dropped (no billing while paused) with its recovery",
            "p_fail_per_day": 0.001,
            "p_recover_per_day": 0.08,
        },
        "plan_change": {
            "rule": "Poisson number with rate per day over tenure days 1..H-1, days "
                    "uniform (same-day repeats dropped); each moves the plan index by +1 "
                    "or +2 modulo 3 (levels order Seedling, Bloom, Orchard), each with "
                    "probability 0.5; the price follows the new plan's list price",
            "rate_per_day": 0.0008,
        },
        "winter_pause": {
            "rule": "every winter, each spell active on the pause day pauses with the "
                    "region's probability; pause day = 1 December + Uniform{0..20}; "
                    "resume after Uniform{60..100} days; no pause starts on a day in "
                    "payment recovery (failure day..recovery day inclusive); tenure of "
                    "the pause day >= 1",
            "spread_days": 20,
            "duration_days": [60, 100],
            "probability_by_region": {"south": 0.10, "east": 0.15, "north": 0.30,
                                      "west": 0.15},
        },
        "reactivation": {
            "rule": "after a churn, the customer starts a new spell with the cause's "
                    "probability, gap = min_gap + Geometric(1/mean_extra_gap) - 1 days; "
                    "plan = the plan at churn with probability same_plan, else drawn "
                    "from the signup shares; price = that day's list price; "
                    "prior_spells + 1; channel, region and arm carried",
            "probability": {"voluntary": 0.20, "involuntary": 0.30},
            "min_gap_days": 30,
            "mean_extra_gap_days": 120.0,
            "same_plan_probability": 0.6,
        },
    },
    "reasons": {
        "voluntary_if_price_ratio_above_1": {"too_expensive": 0.55, "not_using": 0.30,
                                             "moved": 0.15},
        "voluntary_otherwise": {"too_expensive": 0.25, "not_using": 0.55, "moved": 0.20},
        "involuntary_in_recovery": {"card_declined": 0.70, "card_expired": 0.30},
        "involuntary_not_in_recovery": {"card_expired": 1.0},
        "blank_voluntary_not_in_recovery": 0.08,
        "blank_involuntary_in_recovery": 0.10,
        "blank_rule": "a reason is left empty only where the rule 'no reason -> involuntary "
                      "if in payment recovery, else voluntary' gives the true cause",
    },
    "noise": {
        "email_opened_per_customer": 0.02,
        "gift_card_redeemed_rows": 7,
    },
    "defects": {
        "missing_id": 6,
        "unparseable_time": 5,
        "exact_duplicate": 12,
        "non_numeric_price": 4,
        "after_as_of": 8,
        "end_without_open_spell": 3,
        "before_first_start": 4,
        "rule": "every defective row is an extra row (a copy or an addition); removing "
                "them leaves exactly the simulated log",
    },
    "log": {
        "time_of_day": "uniform whole seconds in [06:00:00, 22:00:00) UTC",
        "row_order": "by occurred_at, then account, then kind order",
        "account_format": "QF + 7 digits, numbered in order of first signup",
    },
}
_v = _PARAMS["voluntary"]
_v["lam_days_if_price_ratio_enters_raw"] = _v["lam_days"] * math.exp(
    _v["coefficients"]["price_ratio"] / _v["alpha"])
del _v


def _freeze(x: Any) -> Any:
    if isinstance(x, dict):
        return MappingProxyType({k: _freeze(v) for k, v in x.items()})
    if isinstance(x, list):
        return tuple(_freeze(v) for v in x)
    return x


def _thaw(x: Any) -> Any:
    if isinstance(x, Mapping):
        return {k: _thaw(v) for k, v in x.items()}
    if isinstance(x, tuple):
        return [_thaw(v) for v in x]
    return x


TRUTH: Mapping[str, Any] = _freeze(_PARAMS)
"""The true parameters, read-only (the same numbers as ``demo_data/truth.json``)."""


def truth_dict() -> dict[str, Any]:
    """A plain, JSON-ready copy of :data:`TRUTH`."""
    return _thaw(TRUTH)


# --------------------------------------------------------------------------------------
# Calendar helpers
# --------------------------------------------------------------------------------------
_EPOCH = np.datetime64("1970-01-01", "D")


def _day(s: str) -> int:
    return int((np.datetime64(s, "D") - _EPOCH).astype(np.int64))


def _levels(name: str) -> list[str]:
    return list(TRUTH[name]["levels"])


def _coef_vec(cause: str, name: str, levels: list[str]) -> np.ndarray:
    c = TRUTH[cause]["coefficients"][name]
    return np.array([float(c[lv]) for lv in levels])


_KEY = np.int64(1 << 22)  # > any tenure day; spell * _KEY + day is a sort key


def _lookup(ev_key: np.ndarray, ev_val: np.ndarray, q_key: np.ndarray,
            q_spell: np.ndarray, default: np.ndarray) -> np.ndarray:
    """Value of the last event at or before each query (same spell), else the default."""
    out = default[q_spell].copy()
    if ev_key.size == 0:
        return out
    idx = np.searchsorted(ev_key, q_key, side="right") - 1
    ok = idx >= 0
    ok[ok] = ev_key[idx[ok]] >= q_spell[ok].astype(np.int64) * _KEY
    out[ok] = ev_val[idx[ok]]
    return out


def _sorted_unique(x: np.ndarray) -> np.ndarray:
    x = np.sort(x)
    return x[np.r_[True, x[1:] != x[:-1]]] if x.size else x


def _group_starts(sorted_ids: np.ndarray, n: int) -> np.ndarray:
    return np.searchsorted(sorted_ids, np.arange(n + 1))


# --------------------------------------------------------------------------------------
# The inversion kernel
# --------------------------------------------------------------------------------------
def churn_times_piecewise(seg_spell: np.ndarray, seg_a: np.ndarray, seg_b: np.ndarray,
                          seg_mult: np.ndarray, n_spells: int, e: np.ndarray, *,
                          alpha: float, lam: float | None) -> tuple[np.ndarray, np.ndarray]:
    """Invert a piecewise proportional-hazards cumulative hazard at unit-exponential draws.

    Segments ``(a, b]`` are sorted by spell and contiguous within a spell; on a
    segment the hazard is ``mult * h0(t)`` with ``h0`` Weibull(alpha, lam)
    (``lam=None``: constant ``h0 = 1``). Returns ``(T, seg)``: the time where the
    cumulative hazard reaches ``e[spell]`` and the segment it falls in; ``T = inf``
    and ``seg = -1`` when the spell's last segment ends first (censored).
    Method: Bender, Augustin & Blettner (2005), inversion of H(t).
    """
    if lam is None:
        dh = seg_mult * (seg_b - seg_a)
    else:
        dh = seg_mult * ((seg_b / lam) ** alpha - (seg_a / lam) ** alpha)
    cum = np.cumsum(dh)
    cum0 = np.concatenate([[0.0], cum])
    first = _group_starts(seg_spell, n_spells)
    target = cum0[first[:-1]] + e
    j = np.searchsorted(cum, target, side="left")
    hit = j < first[1:]
    t = np.full(n_spells, np.inf)
    seg = np.full(n_spells, -1, dtype=np.int64)
    jh = j[hit]
    resid = np.maximum(target[hit] - cum0[jh], 0.0)
    a = seg_a[jh]
    m = seg_mult[jh]
    if lam is None:
        th = a + resid / m
    else:
        th = lam * ((a / lam) ** alpha + resid / m) ** (1.0 / alpha)
    t[hit] = np.clip(th, a, seg_b[jh])
    seg[hit] = jh
    return t, seg


# --------------------------------------------------------------------------------------
# Simulation of spells
# --------------------------------------------------------------------------------------
@dataclass(frozen=True)
class SimSwitches:
    """Which covariate processes run (all on for the demo; off for method checks)."""

    plan_changes: bool = True
    price_rise: bool = True
    intro_discount: bool = True
    pauses: bool = True
    payment_failures: bool = True
    involuntary: bool = True
    reactivations: bool = True


@dataclass(frozen=True)
class SimSpells:
    """Simulated spells (one entry per spell) and their covariate segments."""

    customer: np.ndarray      # int64 customer index
    start_day: np.ndarray     # int64 days since 1970-01-01
    prior: np.ndarray         # int64 earlier spells
    horizon: np.ndarray       # int64 tenure day of censoring
    t: np.ndarray             # float latent churn time (inf if censored)
    cause: np.ndarray         # int8 0 voluntary, 1 involuntary, -1 censored
    churn_seg: np.ndarray     # int64 segment index of the churn, -1 if censored
    seg_spell: np.ndarray
    seg_a: np.ndarray
    seg_b: np.ndarray
    seg_plan: np.ndarray
    seg_cents: np.ndarray     # monthly price in cents
    seg_paused: np.ndarray
    seg_rec: np.ndarray
    seg_ratio: np.ndarray

    @property
    def n(self) -> int:
        return int(self.customer.size)

    @property
    def churned(self) -> np.ndarray:
        return self.cause >= 0

    @property
    def end_tenure(self) -> np.ndarray:
        """Recorded end: tenure day ceil(T) if churned, else the horizon (int64)."""
        return np.where(self.churned, np.ceil(np.where(self.churned, self.t, 0.0)),
                        self.horizon).astype(np.int64)


def _prices_cents() -> np.ndarray:
    p = TRUTH["plans"]
    before = np.rint(np.array(p["list_price_before_rise"]) * 100).astype(np.int64)
    after = np.rint(np.array(p["list_price_from_rise"]) * 100).astype(np.int64)
    return np.stack([before, after])  # [era, plan]


def _linear_predictor(cause: str, plan: np.ndarray, ratio: np.ndarray, paused: np.ndarray,
                      rec: np.ndarray, prior: np.ndarray, channel: np.ndarray,
                      region: np.ndarray, arm: np.ndarray) -> np.ndarray:
    """``beta . x`` of one cause on covariate segments (integer codes, one entry each)."""
    c = TRUTH[cause]["coefficients"]
    return (_coef_vec(cause, "plan", _levels("plans"))[plan]
            + c["price_ratio"] * (ratio - 1.0)
            + c["paused"] * paused + c["in_recovery"] * rec
            + c["prior_spells"] * prior
            + _coef_vec(cause, "channel", _levels("channels"))[channel]
            + _coef_vec(cause, "region", _levels("regions"))[region]
            + _coef_vec(cause, "arm", _levels("experiment"))[arm])


def _simulate_round(rng: np.random.Generator, *, customer: np.ndarray, start_day: np.ndarray,
                    plan0: np.ndarray, prior: np.ndarray, discount: np.ndarray,
                    horizon: np.ndarray, channel: np.ndarray, region: np.ndarray,
                    arm: np.ndarray, sw: SimSwitches) -> SimSpells:
    n = customer.size
    H = horizon.astype(np.int64)
    proc = TRUTH["processes"]
    sid = np.arange(n, dtype=np.int64)

    # plan changes -------------------------------------------------------------------
    if sw.plan_changes:
        span = np.maximum(H - 1, 0)
        k = rng.poisson(proc["plan_change"]["rate_per_day"] * span)
        ps = np.repeat(sid, k)
        pday = 1 + np.floor(rng.random(ps.size) * span[ps]).astype(np.int64)
        pstep = 1 + (rng.random(ps.size) < 0.5).astype(np.int64)
        pkey = ps * _KEY + pday
        o = np.argsort(pkey, kind="stable")
        pkey, ps, pstep = pkey[o], ps[o], pstep[o]
        new = np.r_[True, pkey[1:] != pkey[:-1]][: pkey.size]
        pkey, ps, pstep = pkey[new], ps[new], pstep[new]
        cs = np.cumsum(pstep)
        gst = _group_starts(ps, n)
        base = np.concatenate([[0], cs])[gst[:-1]]
        pval = (plan0[ps] + cs - base[ps]) % 3
    else:
        pkey = np.zeros(0, np.int64)
        pval = np.zeros(0, np.int64)

    # price rise and discount end ------------------------------------------------------
    rise_t = _day(TRUTH["dates"]["price_rise"]) - start_day
    if not sw.price_rise:
        rise_t = np.full(n, np.iinfo(np.int64).max // 4)
    rise_in = (rise_t >= 1) & (rise_t <= H - 1)
    ddays = int(TRUTH["experiment"]["discount_days"])
    disc = discount & sw.intro_discount
    disc_in = disc & (ddays <= H - 1)

    # winter pauses --------------------------------------------------------------------
    wp = proc["winter_pause"]
    if sw.pauses:
        y0 = int(str(np.datetime64(int(start_day.min()), "D"))[:4]) - 1 if n else 2023
        y1 = int(str(np.datetime64(int((start_day + H).max()), "D"))[:4]) if n else 2023
        preg = np.array([wp["probability_by_region"][r] for r in _levels("regions")])
        lo, hi = wp["duration_days"]
        pl_s, pl_tp, pl_tr = [], [], []
        for y in range(y0, y1 + 1):
            dec1 = _day(f"{y}-12-01")
            pday_ = dec1 + rng.integers(0, wp["spread_days"] + 1, n)
            u = rng.random(n)
            dur = rng.integers(lo, hi + 1, n)
            tp = pday_ - start_day
            ok = (tp >= 1) & (tp <= H - 1) & (u < preg[region])
            pl_s.append(sid[ok])
            pl_tp.append(tp[ok])
            pl_tr.append(tp[ok] + dur[ok])
        pz_s = np.concatenate(pl_s)
        pz_tp = np.concatenate(pl_tp)
        pz_tr = np.concatenate(pl_tr)
        o = np.argsort(pz_s * _KEY + pz_tp, kind="stable")
        pz_s, pz_tp, pz_tr = pz_s[o], pz_tp[o], pz_tr[o]
    else:
        pz_s = pz_tp = pz_tr = np.zeros(0, np.int64)

    # payment failures (alternating renewal) -------------------------------------------
    pf = proc["payment_failure"]
    if sw.payment_failures:
        cursor = np.zeros(n, np.int64)
        active = sid.copy()
        fl_s, fl_f, fl_r = [], [], []
        while active.size:
            f = cursor[active] + rng.geometric(pf["p_fail_per_day"], active.size)
            keep = f <= H[active] - 1
            active, f = active[keep], f[keep]
            r = f + rng.geometric(pf["p_recover_per_day"], active.size)
            fl_s.append(active)
            fl_f.append(f)
            fl_r.append(r)
            cursor[active] = r
        fz_s = np.concatenate(fl_s) if fl_s else np.zeros(0, np.int64)
        fz_f = np.concatenate(fl_f) if fl_f else np.zeros(0, np.int64)
        fz_r = np.concatenate(fl_r) if fl_r else np.zeros(0, np.int64)
        o = np.argsort(fz_s * _KEY + fz_f, kind="stable")
        fz_s, fz_f, fz_r = fz_s[o], fz_f[o], fz_r[o]
    else:
        fz_s = fz_f = fz_r = np.zeros(0, np.int64)

    # a pause does not start on a day in recovery; a failure on a paused day is dropped
    if pz_s.size and fz_s.size:
        fkey = fz_s * _KEY + fz_f
        lastf = _lookup(fkey, np.arange(fz_s.size), pz_s * _KEY + pz_tp, pz_s,
                        np.full(n, -1, np.int64))
        inrec = np.zeros(pz_s.size, bool)
        okf = lastf >= 0
        inrec[okf] = pz_tp[okf] <= fz_r[lastf[okf]]
        pz_s, pz_tp, pz_tr = pz_s[~inrec], pz_tp[~inrec], pz_tr[~inrec]
        lastp = _lookup(pz_s * _KEY + pz_tp, np.arange(pz_s.size), fkey, fz_s,
                        np.full(n, -1, np.int64))
        drop = np.zeros(fz_s.size, bool)
        okp = lastp >= 0
        drop[okp] = fz_f[okp] <= pz_tr[lastp[okp]]
        fz_s, fz_f, fz_r = fz_s[~drop], fz_f[~drop], fz_r[~drop]

    # state streams (change on day d holds for tenure > d) -------------------------------
    def stream(s, on, off):
        offok = off <= H[s] - 1
        ks = np.concatenate([s * _KEY + on, s[offok] * _KEY + off[offok]])
        vs = np.concatenate([np.ones(s.size, np.int64), np.zeros(int(offok.sum()), np.int64)])
        o = np.argsort(ks, kind="stable")
        return ks[o], vs[o], s[offok], off[offok]

    pkey2, pval2, rs_s, rs_d = stream(pz_s, pz_tp, pz_tr)
    fkey2, fval2, rc_s, rc_d = stream(fz_s, fz_f, fz_r)

    # grid of change days ----------------------------------------------------------------
    gkeys = _sorted_unique(np.concatenate([
        sid * _KEY,
        pkey,
        sid[rise_in] * _KEY + rise_t[rise_in],
        sid[disc_in] * _KEY + ddays,
        pkey2,
        fkey2,
    ]))
    g_s = gkeys // _KEY
    g_d = gkeys % _KEY
    gst = _group_starts(g_s, n)
    nxt = np.empty_like(g_d)
    nxt[:-1] = g_d[1:]
    last = np.zeros(g_d.size, bool)
    last[gst[1:] - 1] = True
    nxt[last] = H[g_s[last]]

    plan = _lookup(pkey, pval, gkeys, g_s, plan0.astype(np.int64))
    era = (g_d >= rise_t[g_s]).astype(np.int64)
    dact = disc[g_s] & (g_d < ddays)
    cents = _prices_cents()[era, plan]
    factor = float(TRUTH["experiment"]["discount_price_factor"])
    cents = np.where(dact, np.rint(cents * factor).astype(np.int64), cents)
    paused = _lookup(pkey2, pval2, gkeys, g_s, np.zeros(n, np.int64))
    rec = _lookup(fkey2, fval2, gkeys, g_s, np.zeros(n, np.int64))
    ratio = cents / cents[gst[:-1]][g_s]

    # hazards and inversion ----------------------------------------------------------------
    def linpred(cause: str) -> np.ndarray:
        return _linear_predictor(cause, plan, ratio, paused, rec, prior[g_s], channel[g_s],
                                 region[g_s], arm[g_s])

    a = g_d.astype(float)
    b = nxt.astype(float)
    e_vol = rng.exponential(size=n)
    e_inv = rng.exponential(size=n)
    vt = TRUTH["voluntary"]
    t_vol, j_vol = churn_times_piecewise(g_s, a, b, np.exp(linpred("voluntary")), n, e_vol,
                                         alpha=float(vt["alpha"]), lam=float(vt["lam_days"]))
    if sw.involuntary:
        mu = float(TRUTH["involuntary"]["mu_per_day"])
        t_inv, j_inv = churn_times_piecewise(g_s, a, b, mu * np.exp(linpred("involuntary")),
                                             n, e_inv, alpha=1.0, lam=None)
    else:
        t_inv, j_inv = np.full(n, np.inf), np.full(n, -1, np.int64)
    inv_first = t_inv < t_vol
    t = np.where(inv_first, t_inv, t_vol)
    seg = np.where(inv_first, j_inv, j_vol)
    cause = np.where(np.isfinite(t), inv_first.astype(np.int8), np.int8(-1)).astype(np.int8)
    return SimSpells(customer=customer, start_day=start_day, prior=prior, horizon=H, t=t,
                     cause=cause, churn_seg=seg, seg_spell=g_s, seg_a=a, seg_b=b,
                     seg_plan=plan, seg_cents=cents, seg_paused=paused, seg_rec=rec,
                     seg_ratio=ratio)


def _concat_spells(parts: list[SimSpells]) -> SimSpells:
    offs = np.cumsum([0] + [p.n for p in parts])
    soffs = np.cumsum([0] + [p.seg_spell.size for p in parts])
    kw = {}
    for f in ("customer", "start_day", "prior", "horizon", "t", "cause"):
        kw[f] = np.concatenate([getattr(p, f) for p in parts])
    kw["churn_seg"] = np.concatenate([np.where(p.churn_seg >= 0, p.churn_seg + soffs[i], -1)
                                      for i, p in enumerate(parts)])
    kw["seg_spell"] = np.concatenate([p.seg_spell + offs[i] for i, p in enumerate(parts)])
    for f in ("seg_a", "seg_b", "seg_plan", "seg_cents", "seg_paused", "seg_rec", "seg_ratio"):
        kw[f] = np.concatenate([getattr(p, f) for p in parts])
    return SimSpells(**kw)


def simulate_spells(rng: np.random.Generator, signup_day: np.ndarray, plan0: np.ndarray,
                    channel: np.ndarray, region: np.ndarray, arm: np.ndarray, *,
                    as_of_day: int | None, tenure_cap: int | None = None,
                    switches: SimSwitches | None = None,
                    max_spells: int | None = None) -> SimSpells:
    """Simulate every customer's spells (first spell, then reactivations).

    Each spell is followed to the as-of day (``as_of_day``) or for ``tenure_cap``
    days (whichever comes first; ``as_of_day=None`` means no calendar limit).
    Integer-coded inputs: plan, channel, region and arm are indices into the
    levels in :data:`TRUTH`. Returns all spells in rounds (all first spells,
    then all second spells, ...).
    """
    sw = switches or SimSwitches()
    if as_of_day is None and tenure_cap is None:
        raise ValueError("simulate_spells needs as_of_day or tenure_cap")
    n = signup_day.size
    cust = np.arange(n, dtype=np.int64)
    intro = _levels("experiment").index("intro_discount")
    start = signup_day.astype(np.int64)
    p0 = plan0.astype(np.int64)
    prior = np.zeros(n, np.int64)
    disc = arm == intro
    parts: list[SimSpells] = []
    react = TRUTH["processes"]["reactivation"]
    shares = np.array(TRUTH["plans"]["signup_shares"])
    while cust.size:
        H = np.full(cust.size, np.iinfo(np.int32).max, np.int64)
        if as_of_day is not None:
            H = np.minimum(H, as_of_day - start)
        if tenure_cap is not None:
            H = np.minimum(H, tenure_cap)
        sp = _simulate_round(rng, customer=cust, start_day=start, plan0=p0, prior=prior,
                             discount=disc, horizon=H, channel=channel[cust],
                             region=region[cust], arm=arm[cust], sw=sw)
        parts.append(sp)
        if not sw.reactivations or (max_spells is not None and len(parts) >= max_spells):
            break
        ch = sp.churned
        pr = np.where(sp.cause == 1, react["probability"]["involuntary"],
                      react["probability"]["voluntary"])
        u = rng.random(cust.size)
        gap = react["min_gap_days"] - 1 + rng.geometric(1.0 / react["mean_extra_gap_days"],
                                                        cust.size)
        same = rng.random(cust.size) < react["same_plan_probability"]
        newplan = rng.choice(3, size=cust.size, p=shares)
        end_day = start + sp.end_tenure
        nstart = end_day + gap
        go = ch & (u < pr)
        if as_of_day is not None:
            go &= nstart <= as_of_day - 1
        plan_end = sp.seg_plan[np.maximum(sp.churn_seg, 0)]
        p0 = np.where(same, plan_end, newplan)[go]
        cust, start, prior = cust[go], nstart[go], prior[go] + 1
        disc = np.zeros(cust.size, bool)
    return _concat_spells(parts)


# --------------------------------------------------------------------------------------
# Customers
# --------------------------------------------------------------------------------------
def _signup_weights(start: str, as_of: str, month: str | None = None) -> tuple[np.ndarray,
                                                                                  np.ndarray]:
    s = TRUTH["signups"]
    d0, d1 = _day(start), _day(as_of)
    days = np.arange(d0, d1, dtype=np.int64)
    D = max(d1 - d0, 1)
    dates = days.astype("datetime64[D]")
    doy = (dates - dates.astype("datetime64[Y]")).astype(np.int64) + 1
    w = (1.0 + s["growth"] * (days - d0) / D) * (
        1.0 + s["seasonal_amplitude"] * np.cos(2 * np.pi * (doy - s["seasonal_peak_day_of_year"])
                                               / 365.25))
    ym = dates.astype("datetime64[M]").astype(str)
    w = np.where(ym == s["campaign_month"], w * s["campaign_multiplier"], w)
    if month is not None:
        w = np.where(ym == month, w, 0.0)
    return days, w / w.sum()


def _draw_customers(rng: np.random.Generator, n: int, start: str, as_of: str,
                    month: str | None = None) -> dict[str, np.ndarray]:
    days, p = _signup_weights(start, as_of, month)
    cdf = np.cumsum(p)
    signup = np.sort(days[np.minimum(np.searchsorted(cdf, rng.random(n) * cdf[-1]),
                                     days.size - 1)])
    plan = rng.choice(3, size=n, p=np.array(TRUTH["plans"]["signup_shares"]))
    channel = rng.choice(4, size=n, p=np.array(TRUTH["channels"]["shares"]))
    region = rng.choice(4, size=n, p=np.array(TRUTH["regions"]["shares"]))
    ex = TRUTH["experiment"]
    in_exp = signup.astype("datetime64[D]").astype("datetime64[M]").astype(str) == ex["cohort"]
    treat = rng.random(n) < ex["p_treatment"]
    levels = list(ex["levels"])
    arm = np.where(in_exp, np.where(treat, levels.index("intro_discount"),
                                    levels.index("standard")), levels.index("none"))
    return {"signup": signup, "plan": plan, "channel": channel, "region": region,
            "arm": arm.astype(np.int64)}


# --------------------------------------------------------------------------------------
# The log
# --------------------------------------------------------------------------------------
def _pick(rng: np.random.Generator, probs: Mapping[str, float], size: int) -> np.ndarray:
    names = list(probs)
    codes = np.array([REASONS.index(k) for k in names])
    return codes[rng.choice(len(names), size=size, p=np.array([probs[k] for k in names]))]


def _reasons(rng: np.random.Generator, sp: SimSpells, idx: np.ndarray) -> np.ndarray:
    """Cancel reason codes (-1 = blank) for the churned spells ``idx``."""
    rs = TRUTH["reasons"]
    seg = sp.churn_seg[idx]
    inrec = sp.seg_rec[seg] == 1
    dear = sp.seg_ratio[seg] > 1.0 + 1e-9
    inv = sp.cause[idx] == 1
    m = idx.size
    out = np.where(dear, _pick(rng, rs["voluntary_if_price_ratio_above_1"], m),
                   _pick(rng, rs["voluntary_otherwise"], m))
    out = np.where(inv & inrec, _pick(rng, rs["involuntary_in_recovery"], m), out)
    out = np.where(inv & ~inrec, _pick(rng, rs["involuntary_not_in_recovery"], m), out)
    u = rng.random(m)
    blank = (~inv & ~inrec & (u < rs["blank_voluntary_not_in_recovery"])) | (
        inv & inrec & (u < rs["blank_involuntary_in_recovery"]))
    return np.where(blank, -1, out)


@dataclass
class _Rows:
    cust: list
    day: list
    kind: list
    reason: list
    plan: list
    cents: list
    channel: list
    region: list
    arm: list

    def add(self, cust, day, kind, reason=None, plan=None, cents=None, channel=None,
            region=None, arm=None):
        m = np.asarray(cust).size
        neg = np.full(m, -1, np.int64)

        def col(x):
            if x is None:
                return neg
            x = np.asarray(x, dtype=np.int64)
            return np.broadcast_to(x, (m,)) if x.ndim == 0 else x

        self.cust.append(col(cust))
        self.day.append(col(day))
        self.kind.append(col(kind))
        self.reason.append(col(reason))
        self.plan.append(col(plan))
        self.cents.append(col(cents))
        self.channel.append(col(channel))
        self.region.append(col(region))
        self.arm.append(col(arm))

    def arrays(self) -> dict[str, np.ndarray]:
        return {k: np.concatenate(getattr(self, k)).astype(np.int32) for k in
                ("cust", "day", "kind", "reason", "plan", "cents", "channel", "region", "arm")}


def _dict_strings(codes: np.ndarray, levels: list[str]) -> pa.Array:
    """Strings from integer codes (-1 -> null), decoded in C++ via a dictionary."""
    return _decode(codes, pa.array(levels, pa.string()))


def _log_rows(rng: np.random.Generator, cu: dict[str, np.ndarray], sp: SimSpells,
              as_of_day: int) -> _Rows:
    K = {k: i for i, k in enumerate(KINDS)}
    rows = _Rows(*[[] for _ in range(9)])
    gst = _group_starts(sp.seg_spell, sp.n)
    first = gst[:-1]
    # start rows
    kind = np.where(sp.prior == 0, K["signup"], K["reactivate"])
    c = sp.customer
    rows.add(c, sp.start_day, kind, plan=sp.seg_plan[first], cents=sp.seg_cents[first],
             channel=cu["channel"][c], region=cu["region"][c], arm=cu["arm"][c])
    # changes at grid points d > 0 with d < T
    g = np.arange(sp.seg_spell.size)
    s = sp.seg_spell
    chg = (sp.seg_a > 0) & (sp.seg_a < sp.t[s])
    gi = g[chg]
    pi = gi - 1
    sc = s[gi]
    cc = sp.customer[sc]
    day = sp.start_day[sc] + sp.seg_a[gi].astype(np.int64)
    dplan = sp.seg_plan[gi] != sp.seg_plan[pi]
    dprice = sp.seg_cents[gi] != sp.seg_cents[pi]
    rows.add(cc[dplan], day[dplan], K["plan_change"], plan=sp.seg_plan[gi][dplan],
             cents=sp.seg_cents[gi][dplan])
    pc_ = ~dplan & dprice
    rows.add(cc[pc_], day[pc_], K["price_change"], cents=sp.seg_cents[gi][pc_])
    for col, on, off in ((sp.seg_paused, "pause", "resume"),
                         (sp.seg_rec, "payment_failed", "payment_recovered")):
        up = (col[gi] == 1) & (col[pi] == 0)
        dn = (col[gi] == 0) & (col[pi] == 1)
        rows.add(cc[up], day[up], K[on])
        rows.add(cc[dn], day[dn], K[off])
    # cancels
    ci = np.flatnonzero(sp.churned)
    end_day = (sp.start_day + sp.end_tenure)[ci]
    rows.add(sp.customer[ci], end_day, K["cancel"], reason=_reasons(rng, sp, ci))
    # ignored noise: email_opened inside a spell; a few unknown gift_card_redeemed rows
    noise = TRUTH["noise"]
    stop_day = np.where(sp.churned, sp.start_day + sp.end_tenure, as_of_day)
    n_mail = int(round(noise["email_opened_per_customer"] * cu["signup"].size))
    for kname, m in (("email_opened", n_mail), ("gift_card_redeemed",
                                                 int(noise["gift_card_redeemed_rows"]))):
        pick = rng.integers(0, sp.n, m)
        span = stop_day[pick] - sp.start_day[pick]
        d = sp.start_day[pick] + np.floor(rng.random(m) * np.maximum(span, 1)).astype(np.int64)
        rows.add(sp.customer[pick], np.minimum(d, as_of_day), K[kname])
    return rows


def _defect_rows(rng: np.random.Generator, cu: dict[str, np.ndarray], sp: SimSpells,
                 base: dict[str, np.ndarray], as_of_day: int, log_start_day: int
                 ) -> tuple[dict[str, np.ndarray], dict[str, list[int]]]:
    """Extra defective rows: returns their arrays and per-row overrides."""
    K = {k: i for i, k in enumerate(KINDS)}
    dfx = TRUTH["defects"]
    out = _Rows(*[[] for _ in range(9)])
    over: dict[str, list[int]] = {"missing_id": [], "bad_time": [], "bad_price": [],
                                  "source": []}
    n0 = 0

    def copy_of(kinds: tuple[str, ...], m: int) -> np.ndarray:
        cand = np.flatnonzero(np.isin(base["kind"], [K[k] for k in kinds]))
        return np.sort(rng.choice(cand, size=m, replace=False))

    def add_copy(idx: np.ndarray) -> None:
        nonlocal n0
        out.add(*(base[k][idx] for k in ("cust", "day", "kind", "reason", "plan", "cents",
                                         "channel", "region", "arm")))
        over["source"].extend(idx.tolist())
        n0 += idx.size

    def added(m: int) -> None:
        nonlocal n0
        over["source"].extend([-1] * m)
        n0 += m

    # missing id: copies of update rows with the account left empty
    over["missing_id"] = list(range(n0, n0 + dfx["missing_id"]))
    add_copy(copy_of(("plan_change", "price_change", "payment_failed"), dfx["missing_id"]))
    # unparseable time
    over["bad_time"] = list(range(n0, n0 + dfx["unparseable_time"]))
    add_copy(copy_of(("payment_failed", "payment_recovered", "pause"), dfx["unparseable_time"]))
    # exact duplicates (kept in the row set twice)
    add_copy(copy_of(("price_change", "payment_failed", "payment_recovered", "resume"),
                     dfx["exact_duplicate"]))
    # non-numeric price on copies of price changes
    over["bad_price"] = list(range(n0, n0 + dfx["non_numeric_price"]))
    add_copy(copy_of(("price_change",), dfx["non_numeric_price"]))
    # events after the as-of date (the export ran two days later)
    open_sp = np.flatnonzero(~sp.churned)
    m = dfx["after_as_of"]
    pick = np.sort(rng.choice(open_sp, size=m, replace=False))
    kinds = np.where(np.arange(m) % 2 == 0, K["payment_failed"], K["cancel"])
    reason = np.where(kinds == K["cancel"], REASONS.index("not_using"), -1)
    out.add(sp.customer[pick], as_of_day + 1 + (np.arange(m) % 2), kinds, reason=reason)
    added(m)
    # an end without an open spell: a second cancel days after a final cancel
    last_of_cust = np.zeros(sp.n, bool)
    order = np.lexsort((sp.start_day, sp.customer))
    lastpos = np.r_[sp.customer[order][1:] != sp.customer[order][:-1], True]
    last_of_cust[order[lastpos]] = True
    end_day = sp.start_day + sp.end_tenure
    cand = np.flatnonzero(last_of_cust & sp.churned & (end_day + 10 <= as_of_day))
    m = dfx["end_without_open_spell"]
    pick = np.sort(rng.choice(cand, size=m, replace=False))
    out.add(sp.customer[pick], end_day[pick] + rng.integers(3, 11, m), K["cancel"],
            reason=REASONS.index("moved"))
    added(m)
    # an event before the customer's first start
    first = sp.prior == 0
    cand = np.flatnonzero(first & (sp.start_day >= log_start_day + 25))
    m = dfx["before_first_start"]
    pick = np.sort(rng.choice(cand, size=m, replace=False))
    out.add(sp.customer[pick], sp.start_day[pick] - rng.integers(3, 21, m),
            K["payment_failed"])
    added(m)
    return out.arrays(), over


_BAD_TIMES = ("2025-02-30 09:15:00", "31/12/2024 10:00", "unknown", "2025-07-14 25:61:00",
              "")


def _simulate_world(n_customers: int, seed: int, start: str, as_of: str
                    ) -> tuple[np.random.Generator, dict[str, np.ndarray], SimSpells]:
    rng = np.random.Generator(np.random.PCG64(seed))
    cu = _draw_customers(rng, n_customers, start, as_of)
    sp = simulate_spells(rng, cu["signup"], cu["plan"], cu["channel"], cu["region"],
                         cu["arm"], as_of_day=_day(as_of))
    return rng, cu, sp


def true_start_stop(n_customers: int = 20000, *, seed: int = 20261130,
                    start: str = "2023-06-01", as_of: str = "2026-11-30",
                    window_start: str | None = "2024-01-01") -> pa.Table:
    """The start-stop table the log of ``generate_log`` (same arguments) must yield.

    Built straight from the simulation, not from the log: one row per covariate
    segment of each spell, cut at the recorded end day ``ceil(T)`` or the as-of
    date, entering at the window's first day (delayed entry; a spell that ended
    on or before it is left out). Columns and order as in the start-stop
    contract (CONFIG.md), without ``weight``; plus ``latent_time``, the
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


def generate_log(n_customers: int = 20000, *, seed: int = 20261130, start: str = "2023-06-01",
                 as_of: str = "2026-11-30", defects: bool = True) -> pa.Table:
    """Simulate Quillfern's raw event log.

    Parameters
    ----------
    n_customers : number of customers (first signups between ``start`` and the
        day before ``as_of``); about 3.3 log rows each.
    seed : seed of the ``numpy.random.PCG64`` generator; same seed, same table.
    start, as_of : first day of the log and the censoring day (inclusive).
    defects : add the documented defective rows (``TRUTH['defects']``).

    Returns
    -------
    pyarrow.Table with the text columns :data:`LOG_COLUMNS` (nulls for empty).
    """
    rng, cu, sp = _simulate_world(n_customers, seed, start, as_of)
    as_of_day = _day(as_of)
    base = _log_rows(rng, cu, sp, as_of_day).arrays()
    nb = base["cust"].size
    if defects:
        extra, over = _defect_rows(rng, cu, sp, base, as_of_day, _day(start))
        arr = {k: np.concatenate([base[k], extra[k]]) for k in base}
        del base, extra
    else:
        arr, over = base, {"missing_id": [], "bad_time": [], "bad_price": [], "source": []}
    del sp
    tod = rng.integers(6 * 3600, 22 * 3600, nb)
    if over["source"]:
        # a defective copy keeps the time of day of the row it copies
        src = np.array(over["source"], np.int64)
        new = rng.integers(6 * 3600, 22 * 3600, src.size)
        tod = np.concatenate([tod, np.where(src >= 0, tod[np.maximum(src, 0)], new)])
    secs = arr["day"].astype(np.int64) * 86400 + tod
    kind_order = np.array([0, 0, 1, 1, 4, 5, 2, 3, 6, 7, 7])[arr["kind"]]
    s0 = secs - secs.min()
    cbits = max(int(n_customers).bit_length(), 1)
    if int(s0.max()).bit_length() + cbits + 3 <= 63:  # one int64 key sorts fastest
        order = np.argsort((s0 << (cbits + 3)) | (arr["cust"].astype(np.int64) << 3)
                           | kind_order,
                           kind="stable")
    else:
        order = np.lexsort((kind_order, arr["cust"], secs))
    flag = np.zeros(secs.size, np.int8)  # 1 missing id, 2 bad time, 3 bad price
    for code, key in ((1, "missing_id"), (2, "bad_time"), (3, "bad_price")):
        flag[nb + np.array(over[key], np.int64)] = code
    arr = {k: v[order] for k, v in arr.items()}
    secs, flag, day, tod = secs[order], flag[order], arr["day"], tod[order]

    cust = np.where(flag == 1, -1, arr["cust"])
    accounts = _account_ids(n_customers)
    d0 = int(day.min())
    day_str = pa.array(np.arange(d0, int(day.max()) + 1).astype("datetime64[D]").astype(str))
    tod_str = pa.array([f"{h:02d}:{mi:02d}:{se:02d}" for h in range(24) for mi in range(60)
                        for se in range(60)])
    ts = pc.binary_join_element_wise(_decode(day - d0, day_str), _decode(tod, tod_str), " ")
    bad = flag == 2
    if bad.any():
        vals = [_BAD_TIMES[i % len(_BAD_TIMES)] for i in range(int(bad.sum()))]
        ts = pc.replace_with_mask(ts, pa.array(bad), pa.array(vals, pa.string()))
    price_codes, price_levels = _price_strings(arr["cents"])
    price_codes = np.where(flag == 3, len(price_levels), price_codes)
    cols = {
        "account": _decode(cust, accounts),
        "occurred_at": ts,
        "kind": _dict_strings(arr["kind"], list(KINDS)),
        "cancel_reason": _dict_strings(arr["reason"], list(REASONS)),
        "plan": _dict_strings(arr["plan"], _levels("plans")),
        "monthly_price": _dict_strings(price_codes, price_levels + ["N/A"]),
        "channel": _dict_strings(arr["channel"], _levels("channels")),
        "region": _dict_strings(arr["region"], _levels("regions")),
        "arm": _dict_strings(arr["arm"], _levels("experiment")),
    }
    return pa.table(cols)


def _account_ids(n: int) -> pa.Array:
    """QF0000001, QF0000002, ...: customer i (0-based) is entry i."""
    numbers = pc.utf8_lpad(pa.array(np.arange(1, n + 1)).cast(pa.string()), 7, "0")
    return pc.binary_join_element_wise("QF", numbers, "")


def _decode(codes: np.ndarray, levels: pa.Array) -> pa.Array:
    idx = pa.array(codes.astype(np.int32), mask=codes < 0)
    return pa.DictionaryArray.from_arrays(idx, levels).cast(pa.string())


def _price_strings(cents: np.ndarray) -> tuple[np.ndarray, list[str]]:
    uniq, inv = np.unique(cents, return_inverse=True)
    levels = [f"{c // 100}.{c % 100:02d}" for c in uniq.tolist()]
    codes = inv.astype(np.int64)
    if uniq.size and uniq[0] < 0:
        codes = codes - 1  # the -1 level (no price) becomes code -1
        levels = levels[1:]
    return codes, levels


def write_log(path: str | Path, *, compresslevel: int = 6, **kw: Any) -> Path:
    """Generate the log (``generate_log(**kw)``) and write it deterministically.

    ``.csv.gz`` (gzip with mtime 0 and no file name in the header), ``.csv`` or
    ``.parquet``; the same arguments give the same bytes.
    """
    path = Path(path)
    table = generate_log(**kw)
    name = path.name.lower()
    if name.endswith(".parquet"):
        pq.write_table(table, path, compression="zstd")
        return path
    if not (name.endswith(".csv") or name.endswith(".csv.gz")):
        raise ValueError(f"{path}: write_log writes .csv, .csv.gz or .parquet")
    opts = pacsv.WriteOptions(include_header=False, quoting_style="none")
    header = (",".join(table.column_names) + "\n").encode()
    with open(path, "wb") as raw:
        out = (gzip.GzipFile(filename="", mode="wb", fileobj=raw, compresslevel=compresslevel,
                             mtime=0) if name.endswith(".gz") else raw)
        out.write(header)
        for batch in table.to_batches(max_chunksize=1 << 18):
            buf = io.BytesIO()
            pacsv.write_csv(pa.Table.from_batches([batch], table.schema), buf,
                            write_options=opts)
            out.write(buf.getvalue())
        if out is not raw:
            out.close()
    return path


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
    form over the spell's segments (the formulas of the module docstring), so the
    average over spells is ``P(T > d)`` without the noise of the churn draw (a
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

    # experiment
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


def _main() -> None:  # pragma: no cover - regenerates demo_data/
    from retain.paths import DEMO_DIR

    write_log(DEMO_DIR / "quillfern_events.csv.gz")
    write_truth(DEMO_DIR / "truth.json")


if __name__ == "__main__":  # pragma: no cover
    _main()
