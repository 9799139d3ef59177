"""The simulation: customers, their spells and each spell's churn time.

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

from dataclasses import dataclass

import numpy as np

from retain.demo.design import TRUTH, _day, _levels, _linear_predictor, _prices_cents

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


def _plan_changes(rng: np.random.Generator, sid: np.ndarray, H: np.ndarray,
                  plan0: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Plan changes: their sort keys ``spell * _KEY + day`` and the plan each moves to."""
    span = np.maximum(H - 1, 0)
    k = rng.poisson(TRUTH["processes"]["plan_change"]["rate_per_day"] * span)
    ps = np.repeat(sid, k)
    pday = 1 + np.floor(rng.random(ps.size) * span[ps]).astype(np.int64)
    pstep = 1 + (rng.random(ps.size) < 0.5).astype(np.int64)
    pkey = ps * _KEY + pday
    o = np.argsort(pkey, kind="stable")
    pkey, ps, pstep = pkey[o], ps[o], pstep[o]
    new = np.r_[True, pkey[1:] != pkey[:-1]][: pkey.size]
    pkey, ps, pstep = pkey[new], ps[new], pstep[new]
    cs = np.cumsum(pstep)
    gst = _group_starts(ps, sid.size)
    base = np.concatenate([[0], cs])[gst[:-1]]
    return pkey, (plan0[ps] + cs - base[ps]) % 3


def _winter_pauses(rng: np.random.Generator, sid: np.ndarray, start_day: np.ndarray,
                   H: np.ndarray, region: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Winter pauses: (spell, tenure day of the pause, tenure day of the resume), sorted."""
    n = sid.size
    wp = TRUTH["processes"]["winter_pause"]
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
    return pz_s[o], pz_tp[o], pz_tr[o]


def _payment_failures(rng: np.random.Generator, sid: np.ndarray, H: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Payment failures as an alternating renewal: (spell, failure day, recovery day)."""
    pf = TRUTH["processes"]["payment_failure"]
    cursor = np.zeros(sid.size, np.int64)
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
    return fz_s[o], fz_f[o], fz_r[o]


def _apart(pauses: tuple[np.ndarray, np.ndarray, np.ndarray],
           failures: tuple[np.ndarray, np.ndarray, np.ndarray], n: int
           ) -> tuple[tuple[np.ndarray, ...], tuple[np.ndarray, ...]]:
    """A pause does not start on a day in recovery; a failure on a paused day is dropped."""
    pz_s, pz_tp, pz_tr = pauses
    fz_s, fz_f, fz_r = failures
    if not (pz_s.size and fz_s.size):
        return pauses, failures
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
    return (pz_s, pz_tp, pz_tr), (fz_s[~drop], fz_f[~drop], fz_r[~drop])


def _state_stream(H: np.ndarray, s: np.ndarray, on: np.ndarray, off: np.ndarray
                  ) -> tuple[np.ndarray, np.ndarray]:
    """A 0/1 state's changes as sorted keys and values (a change on day d holds for
    tenure > d); an end on or after the horizon is left out."""
    offok = off <= H[s] - 1
    ks = np.concatenate([s * _KEY + on, s[offok] * _KEY + off[offok]])
    vs = np.concatenate([np.ones(s.size, np.int64), np.zeros(int(offok.sum()), np.int64)])
    o = np.argsort(ks, kind="stable")
    return ks[o], vs[o]


def _simulate_round(rng: np.random.Generator, *, customer: np.ndarray, start_day: np.ndarray,
                    plan0: np.ndarray, prior: np.ndarray, discount: np.ndarray,
                    horizon: np.ndarray, channel: np.ndarray, region: np.ndarray,
                    arm: np.ndarray, sw: SimSwitches) -> SimSpells:
    n = customer.size
    H = horizon.astype(np.int64)
    sid = np.arange(n, dtype=np.int64)

    none = np.zeros(0, np.int64)
    if sw.plan_changes:
        pkey, pval = _plan_changes(rng, sid, H, plan0)
    else:
        pkey, pval = none, none

    # price rise and discount end ------------------------------------------------------
    rise_t = _day(TRUTH["dates"]["price_rise"]) - start_day
    if not sw.price_rise:
        rise_t = np.full(n, np.iinfo(np.int64).max // 4)
    rise_in = (rise_t >= 1) & (rise_t <= H - 1)
    ddays = int(TRUTH["experiment"]["discount_days"])
    disc = discount & sw.intro_discount
    disc_in = disc & (ddays <= H - 1)

    pauses = _winter_pauses(rng, sid, start_day, H, region) if sw.pauses else (none,) * 3
    failures = _payment_failures(rng, sid, H) if sw.payment_failures else (none,) * 3
    pauses, failures = _apart(pauses, failures, n)
    pkey2, pval2 = _state_stream(H, *pauses)
    fkey2, fval2 = _state_stream(H, *failures)

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


def _simulate_world(n_customers: int, seed: int, start: str, as_of: str
                    ) -> tuple[np.random.Generator, dict[str, np.ndarray], SimSpells]:
    rng = np.random.Generator(np.random.PCG64(seed))
    cu = _draw_customers(rng, n_customers, start, as_of)
    sp = simulate_spells(rng, cu["signup"], cu["plan"], cu["channel"], cu["region"],
                         cu["arm"], as_of_day=_day(as_of))
    return rng, cu, sp
