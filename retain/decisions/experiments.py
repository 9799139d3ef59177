"""Verdicts on pricing experiments declared in retain.toml.

From an :class:`~retain.data.config.ExperimentSpec` the experiment's
customers are the spells that began in its cohorts (or signup date range)
with an arm value of the control or a treatment arm, one spell per customer
(the first that qualifies). Follow-up is cut at the planned horizon
(``horizon_days``): rows past it are dropped and a spell still active there
is censored at it. Arms are read from the first row of the spell (the arm is
assigned at signup; pre-assignment covariates are likewise read there).

The verdict holds, for each treatment arm against the control:

* Kaplan-Meier retention per arm with pointwise intervals;
* the log-rank test of equal retention (all arms);
* the hazard ratio adjusted for the pre-assignment covariates (Cox);
* the restricted-mean tenure difference to the horizon, with its interval;
* revenue per assigned customer to the horizon (price x time at risk,
  censoring handled as in :func:`retain.kernels.discount.revenue_to_horizon`),
  with a bootstrap interval over customers;
* a balance table of pre-assignment attributes (standardised differences);
* warnings: unbalanced arms, too few events for the stated power, interim.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa

from retain.data.config import (
    PRICE_COLUMN,
    ExperimentSpec,
    ModelConfig,
    as_date,
    experiment_settings,
)
from retain.data.table import Categorical, StartStop
from retain.decisions.value import percentile_interval
from retain.errors import DataError, ModelError
from retain.kernels import discount as kd
from retain.kernels import power as kp
from retain.kernels.risksets import first_of_spell
from retain.models.cox import fit_cox
from retain.models.curves import (
    GroupTest,
    RestrictedMeanDifference,
    SegmentCurves,
    compare_groups,
    curves_by,
    rmst_difference,
)
from retain.results import Result, resolve_level, to_jsonable
from retain.units import DAYS_PER_MONTH

#: |standardised difference| above this flags an unbalanced attribute (common practice;
#: Austin 2009, Statistics in Medicine 28(25))
BALANCE_LIMIT = 0.1
DEFAULT_BOOT = 400
DEFAULT_SEED = 20261202


# ---------------------------------------------------------------- results


@dataclass(frozen=True)
class RevenueComparison:
    """Revenue per assigned customer to the horizon: one treatment arm against the control."""

    control: str
    treatment: str
    horizon_days: float
    control_revenue: float
    control_lower: float
    control_upper: float
    treatment_revenue: float
    treatment_lower: float
    treatment_upper: float
    difference: float
    lower: float
    upper: float
    se: float
    level: float
    method: str


@dataclass(frozen=True)
class AdjustedHazardRatio:
    """Cox hazard ratio of a treatment arm against the control, adjusted for covariates."""

    treatment: str
    hazard_ratio: float
    lower: float
    upper: float
    p_value: float
    covariates: tuple[str, ...]
    label: str


@dataclass(frozen=True, eq=False)
class ExperimentVerdict(Result):
    """Everything a pricing team needs to read one experiment.

    ``comparisons`` (see :meth:`to_frame`) has one row per treatment arm.
    ``interim`` is True when the as-of date comes before the planned horizon
    has elapsed for every customer of the experiment: the figures are then
    labelled interim and computed at ``analysis_horizon_days``.
    """

    name: str
    arm: str
    control: str
    treatments: tuple[str, ...]
    selection: str
    as_of: dt.date | None
    planned_horizon_days: float
    analysis_horizon_days: float
    interim: bool
    arms: pd.DataFrame
    curves: SegmentCurves
    logrank: GroupTest
    adjusted: tuple[AdjustedHazardRatio, ...]
    rmst: tuple[RestrictedMeanDifference, ...]
    revenue: tuple[RevenueComparison, ...]
    balance: pd.DataFrame
    power: dict[str, Any]
    level: float
    warnings: tuple[str, ...] = ()
    missing: Any = None  # MissingCovariates of the adjusted Cox fit (rows left out)

    def to_dict(self) -> dict[str, Any]:
        out = {k: to_jsonable(getattr(self, k)) for k in (
            "name", "arm", "control", "treatments", "selection", "as_of",
            "planned_horizon_days", "analysis_horizon_days", "interim", "arms", "adjusted",
            "revenue", "balance", "power", "level", "warnings", "missing")}
        out["logrank"] = self.logrank.to_dict()
        out["rmst"] = [to_jsonable({"treatment": r.other.label, "difference": r.difference,
                                    "lower": r.lower, "upper": r.upper, "se": r.se,
                                    "p_value": r.p_value, "horizon": r.horizon})
                       for r in self.rmst]
        out["comparisons"] = to_jsonable(self.to_frame())
        return out

    def to_frame(self) -> pd.DataFrame:
        rows = []
        for i, t in enumerate(self.treatments):
            adj = next((a for a in self.adjusted if a.treatment == t), None)
            rm = self.rmst[i] if i < len(self.rmst) else None
            rv = self.revenue[i] if i < len(self.revenue) else None
            rows.append({
                "treatment": t, "control": self.control,
                "status": "interim" if self.interim else "final",
                "horizon_days": self.analysis_horizon_days,
                "hazard_ratio": adj.hazard_ratio if adj else math.nan,
                "hazard_ratio_lower": adj.lower if adj else math.nan,
                "hazard_ratio_upper": adj.upper if adj else math.nan,
                "hazard_ratio_p_value": adj.p_value if adj else math.nan,
                "logrank_p_value": self.logrank.p_value,
                "rmst_difference_days": rm.difference if rm else math.nan,
                "rmst_lower": rm.lower if rm else math.nan,
                "rmst_upper": rm.upper if rm else math.nan,
                "revenue_difference": rv.difference if rv else math.nan,
                "revenue_lower": rv.lower if rv else math.nan,
                "revenue_upper": rv.upper if rv else math.nan,
            })
        return pd.DataFrame(rows)

    def summary(self) -> str:
        status = "INTERIM" if self.interim else "final"
        parts = [f"Experiment {self.name} ({status}, {self.analysis_horizon_days:g} days): "
                 f"log-rank p = {self.logrank.p_value:.3g}"]
        for i, t in enumerate(self.treatments):
            bits = [f"{t} vs {self.control}:"]
            adj = next((a for a in self.adjusted if a.treatment == t), None)
            if adj:
                bits.append(f"HR {adj.hazard_ratio:.2f} ({adj.lower:.2f} to {adj.upper:.2f})")
            if i < len(self.rmst):
                r = self.rmst[i]
                bits.append(f"RMST {r.difference:+.1f} days ({r.lower:+.1f} to {r.upper:+.1f})")
            if i < len(self.revenue):
                v = self.revenue[i]
                bits.append(f"revenue per customer {v.difference:+.2f} "
                            f"({v.lower:+.2f} to {v.upper:+.2f})")
            parts.append(" ".join(bits))
        parts.extend(f"warning: {w}" for w in self.warnings)
        return "\n".join(parts)


# ---------------------------------------------------------------- selection


def _cohort_of_rows(table: StartStop, where: str) -> np.ndarray:
    """'YYYY-MM' of each row's spell start (from start_date, else the cohort column)."""
    if table.start_date is not None:
        return np.datetime_as_string(table.start_date, unit="M").astype(object)
    if table.has("cohort") and table.is_categorical("cohort"):
        return table.column("cohort").values()
    raise DataError(where, "the table has neither start_date nor a cohort column",
                    "use the start-stop table written by `retain prepare`")


def select_experiment(table: StartStop, spec: ExperimentSpec | Mapping[str, Any]
                      ) -> tuple[StartStop, str]:
    """The experiment's spells, one per customer, with follow-up cut at the horizon.

    ``spec`` is an :class:`~retain.data.config.ExperimentSpec` (or a mapping with
    its keys). Returns the sub-table and a sentence describing the selection.
    """
    spec = experiment_settings(spec)
    where = f"experiment {spec.name!r}"
    arm, control = spec.arm, spec.control
    horizon = float(spec.horizon_days)
    col = table.column(arm)
    if not isinstance(col, Categorical):
        raise DataError(where, f"the arm column {arm!r} is numeric", "declare it categorical")
    if control not in col.levels:
        raise DataError(where, f"control arm {control!r} does not occur in column {arm!r}",
                        f"arms found: {', '.join(col.levels) or '(none)'}")
    treatments = spec.treatment or tuple(lv for lv in col.levels if lv != control)
    missing = [t for t in treatments if t not in col.levels]
    if missing:
        raise DataError(where, f"treatment arm(s) {', '.join(missing)} do not occur in {arm!r}",
                        f"arms found: {', '.join(col.levels)}")
    if not treatments:
        raise DataError(where, f"column {arm!r} has no arm besides the control {control!r}",
                        "check the arm attribute")
    head = first_of_spell(table.customer.codes, table.spell, table.start)
    arms_wanted = np.isin(np.asarray(col.levels, dtype=object), (control, *treatments))
    arm_code = col.codes[head]
    ok = (arm_code >= 0) & arms_wanted[np.clip(arm_code, 0, None)]
    cohorts = spec.cohorts
    lo, hi = spec.signup_from, spec.signup_to
    if cohorts:
        ok &= np.isin(_cohort_of_rows(table, where)[head], list(cohorts))
        selection = f"spells started in cohort(s) {', '.join(cohorts)}"
    elif lo is not None and hi is not None:
        if table.start_date is None:
            raise DataError(where, "signup_from/signup_to need the start_date column",
                            "use the start-stop table written by `retain prepare`")
        sd = table.start_date[head]
        ok &= (sd >= np.datetime64(lo, "D")) & (sd <= np.datetime64(hi, "D"))
        selection = f"spells started from {lo} to {hi}"
    else:
        raise DataError(where, "no cohorts and no signup_from/signup_to",
                        'add cohorts = ["YYYY-MM"] to the experiment')
    # the spell must be observed from its start (the arm is assigned at signup)
    ok &= table.start[head] == 0.0
    # one spell per customer: the first qualifying spell
    idx = np.flatnonzero(ok)
    if idx.size == 0:
        raise DataError(where, f"no spell matches ({selection}, arms {control}, "
                        f"{', '.join(treatments)})", "check cohorts, dates and arm values")
    first_spell = np.full(len(table.customer.levels) + 1, np.iinfo(np.int64).max)
    np.minimum.at(first_spell, table.customer.codes[idx], table.spell[idx])
    ok &= table.spell == first_spell[table.customer.codes]
    ok &= table.start < horizon
    sub = table.take(ok)
    over = sub.stop > horizon
    if over.any():
        stop = sub.stop.copy()
        stop[over] = horizon
        churned = sub.churned.copy()
        churned[over] = 0
        cause = Categorical(np.where(over, -1, sub.cause.codes).astype(np.int32), sub.cause.levels)
        sub.stop = stop
        sub.churned = churned
        sub.cause = cause
    # keep only the experiment's arms as levels (other arm values have no rows here)
    sub = sub.with_columns(**{arm: Categorical.from_values(
        pa.array(sub.column(arm).values().tolist(), type=pa.string()))})
    n_arms = len({*treatments, control})
    return sub, f"{selection}; arms {control} (control) and {', '.join(treatments)}; " \
        f"{sub.n_customers} customers in {n_arms} arms, followed up to {horizon:g} days"


# ---------------------------------------------------------------- pieces


def _planned_end(spec: ExperimentSpec, sub: StartStop | None = None) -> dt.date | None:
    """The day the planned horizon is reached: the last actual sign-up day among the
    experiment's subjects plus ``horizon_days``; without start dates, the last day the
    declared cohorts or ``signup_to`` allow."""
    last: dt.date | None = None
    if sub is not None and sub.start_date is not None and sub.n_rows:
        head = first_of_spell(sub.customer.codes, sub.spell, sub.start)
        days = sub.start_date[head]
        days = days[~np.isnat(days)]
        if days.size:
            last = dt.date.fromisoformat(str(days.max()))
    if last is None and spec.cohorts:
        y, m = max(spec.cohorts).split("-")
        nxt = dt.date(int(y) + (int(m) == 12), int(m) % 12 + 1, 1)
        last = nxt - dt.timedelta(days=1)
    elif last is None and spec.signup_to is not None:
        last = spec.signup_to
    if last is None:
        return None
    return last + dt.timedelta(days=spec.horizon_days)


def balance_table(table: StartStop, arm: str, control: str, treatments: Sequence[str],
                  covariates: Sequence[str]) -> pd.DataFrame:
    """Pre-assignment attributes by arm, read on the first row of each spell.

    One row per numeric attribute (means) or per level of a categorical one
    (shares); ``std_difference`` is each treatment arm against the control
    (Austin 2009). ``unbalanced`` flags ``|std_difference| > 0.1`` (common
    practice).
    """
    head_idx = np.unique(first_of_spell(table.customer.codes, table.spell, table.start))
    heads = table.take(head_idx)
    acol = heads.column(arm)
    assert isinstance(acol, Categorical)
    arm_vals = acol.values()
    w = heads.weight
    rows: list[dict[str, Any]] = []
    for name in covariates:
        col = heads.column(name)
        if isinstance(col, Categorical):
            items = [(f"{name} = {lv}", (col.codes == k).astype(np.float64), True)
                     for k, lv in enumerate(col.levels)]
        else:
            items = [(name, col, False)]
        for label, x, binary in items:
            cm = (arm_vals == control) & np.isfinite(x)
            row: dict[str, Any] = {"attribute": label, "kind": "share" if binary else "mean",
                                   control: float(np.average(x[cm], weights=w[cm]))
                                   if cm.any() else math.nan}
            for t in treatments:
                tm = (arm_vals == t) & np.isfinite(x)
                row[t] = float(np.average(x[tm], weights=w[tm])) if tm.any() else math.nan
                sd = (kp.standardised_difference(x[tm], w[tm], x[cm], w[cm], binary=binary)
                      if tm.any() and cm.any() else math.nan)
                row[f"std_difference {t}"] = sd
            sds = [row[f"std_difference {t}"] for t in treatments]
            row["unbalanced"] = bool(any(abs(s) > BALANCE_LIMIT for s in sds
                                         if math.isfinite(s)))
            rows.append(row)
    return pd.DataFrame(rows)


def _bootstrap_counts(codes: np.ndarray, n_boot: int, rng: np.random.Generator) -> np.ndarray:
    """Multinomial resampling of the customers in ``codes``: (n_boot, n_rows) multipliers."""
    uniq, inv = np.unique(codes, return_inverse=True)
    k = uniq.shape[0]
    counts = rng.multinomial(k, np.full(k, 1.0 / k), size=n_boot).astype(np.float64)
    return counts[:, inv]


def revenue_per_customer(table: StartStop, price: str, horizon_days: float, *,
                         n_boot: int = DEFAULT_BOOT, seed: int = DEFAULT_SEED
                         ) -> tuple[float, np.ndarray]:
    """Expected revenue per customer to ``horizon_days`` and its bootstrap replicates.

    Revenue of a row = monthly ``price`` x months at risk on the row within
    the horizon; the estimate is :func:`retain.kernels.discount.revenue_to_horizon`
    (equal to the plain mean over customers when nobody is censored before the
    horizon). Replicates resample customers with replacement.
    """
    p = table.numeric(price)
    bad = ~np.isfinite(p)
    if bad.any():
        raise DataError(f"{table.source}: column {price!r}", f"{int(bad.sum())} rows of the "
                        "experiment have no price", "fill the price column")
    per_day = p / DAYS_PER_MONTH
    est = float(kd.revenue_to_horizon(table.start, table.stop, table.churned, per_day,
                                      table.weight, horizon_days))
    rng = np.random.default_rng(seed)
    reps = []
    for size in np.diff(np.r_[np.arange(0, n_boot, 25), n_boot]):  # bounded memory
        weights = _bootstrap_counts(table.customer.codes, int(size), rng) * table.weight
        reps.append(kd.revenue_to_horizon(table.start, table.stop, table.churned, per_day,
                                          table.weight, horizon_days,
                                          replicate_weights=weights))
    return est, np.concatenate(reps)


def _adjusted_hazard_ratios(sub: StartStop, arm: str, control: str,
                            treatments: Sequence[str], covariates: Sequence[str], level: float,
                            missing: str = ModelConfig.missing
                            ) -> tuple[tuple[AdjustedHazardRatio, ...], list[str], Any]:
    head = first_of_spell(sub.customer.codes, sub.spell, sub.start)
    # pre-assignment covariates are read at the start of the spell
    fixed = {name: (sub.column(name).take(head) if isinstance(sub.column(name), Categorical)
                    else sub.column(name)[head]) for name in (arm, *covariates)}
    table = sub.with_columns(**fixed)
    try:
        fit = fit_cox(table, [arm, *covariates], reference={arm: control}, level=level,
                      missing=missing)
    except ModelError as exc:
        return (), [f"no adjusted hazard ratio: {exc.message}"], None
    frame = fit.hazard_ratios
    out = []
    for t in treatments:
        label = f"{arm} {t} vs {control}"
        hit = frame[frame["term"] == label]
        if hit.empty:
            continue
        r = hit.iloc[0]
        out.append(AdjustedHazardRatio(t, float(r["hazard_ratio"]), float(r["lower"]),
                                       float(r["upper"]), float(r["p_value"]),
                                       tuple(covariates), label))
    return tuple(out), list(getattr(fit, "warnings", ())), fit.missing


def _horizons(spec: ExperimentSpec, as_of: dt.date | None, sub: StartStop,
              warnings: list[str]) -> tuple[float, float, bool]:
    """(planned horizon, analysis horizon, interim): the analysis stops at the follow-up
    reached; before the planned end (:func:`_planned_end`: last actual sign-up + horizon)
    the verdict is interim."""
    planned = float(spec.horizon_days)
    follow = float(sub.stop.max())
    end = _planned_end(spec, sub)
    interim = bool(as_of is not None and end is not None and as_of < end)
    analysis = min(planned, follow)
    if interim:
        warnings.append(f"interim analysis: the planned {planned:g}-day horizon is reached on "
                        f"{end}, after the as-of date {as_of}; every figure is provisional")
    if analysis < planned:
        warnings.append(f"follow-up reaches only {analysis:g} of the planned {planned:g} days; "
                        "restricted means and revenue are computed to that shorter horizon")
    return planned, analysis, interim


def _treatments_present(sub: StartStop, acol: Categorical, spec: ExperimentSpec, where: str,
                        warnings: list[str]) -> tuple[str, ...]:
    """The treatment arms with customers in the experiment (an empty one is a warning); the
    control arm must have customers."""
    control = spec.control
    present = set(acol.take(np.unique(first_of_spell(sub.customer.codes, sub.spell,
                                                     sub.start))).values())
    treatments = tuple(t for t in (spec.treatment or sorted(present - {control}))
                       if t != control)
    if control not in present:
        raise DataError(where, f"no customer of the experiment is in the control arm {control!r}",
                        "check the arm values and cohorts")
    absent = [t for t in treatments if t not in present]
    if absent:
        warnings.append(f"arm(s) {', '.join(absent)} have no customer in the experiment")
        treatments = tuple(t for t in treatments if t in present)
    if not treatments:
        raise DataError(where, "no treatment arm has customers", "check the arm values")
    return treatments


def _revenue_and_rmst(sub: StartStop, arm: str, arm_of_row: np.ndarray, control: str,
                      treatments: Sequence[str], curves: SegmentCurves, analysis: float, *,
                      price: str, level: float, n_boot: int, seed: int, warnings: list[str]
                      ) -> tuple[list[RestrictedMeanDifference], list[RevenueComparison],
                                 dict[str, tuple[float, np.ndarray]]]:
    """Restricted-mean and revenue differences of each treatment arm against the control,
    and each arm's revenue per customer with its bootstrap replicates."""
    rmst: list[RestrictedMeanDifference] = []
    revenue: list[RevenueComparison] = []
    per_arm: dict[str, tuple[float, np.ndarray]] = {}
    for k, a in enumerate((control, *treatments)):
        part = sub.take(arm_of_row == a)
        per_arm[a] = revenue_per_customer(part, price, analysis, n_boot=n_boot, seed=seed + k)
    for t in treatments:
        pair = sub.take(np.isin(arm_of_row, (control, t)))
        limit = min(curves[control].known_until, curves[t].known_until)
        h = min(analysis, limit)
        try:
            rmst.append(rmst_difference(pair, arm, h, levels=(control, t), level=level))
        except ModelError as exc:
            warnings.append(f"no restricted-mean difference for {t}: {exc.message}")
        c_est, c_rep = per_arm[control]
        t_est, t_rep = per_arm[t]
        diff_rep = t_rep - c_rep
        lo, hi = percentile_interval(diff_rep, level)
        clo, chi = percentile_interval(c_rep, level)
        tlo, thi = percentile_interval(t_rep, level)
        revenue.append(RevenueComparison(
            control=control, treatment=t, horizon_days=analysis, control_revenue=c_est,
            control_lower=clo, control_upper=chi, treatment_revenue=t_est, treatment_lower=tlo,
            treatment_upper=thi, difference=t_est - c_est, lower=lo, upper=hi,
            se=float(np.std(diff_rep, ddof=1)), level=level,
            method=(f"price x months at risk to {analysis:g} days, Kaplan-Meier weighted "
                    f"(Lin et al. 1997); percentile interval over {n_boot} bootstrap "
                    "resamples of customers within each arm")))
    return rmst, revenue, per_arm


def _arm_rows(sub: StartStop, arm_of_row: np.ndarray, control: str, treatments: Sequence[str],
              curves: SegmentCurves, analysis: float,
              per_arm: dict[str, tuple[float, np.ndarray]], level: float) -> pd.DataFrame:
    """One row per arm: customers, churns, retention and revenue per customer at the
    analysis horizon, with intervals."""
    rows = []
    for a in (control, *treatments):
        c = curves[a]
        s_h = float(c.at(analysis)[0]) if analysis <= c.follow_up else math.nan
        lo_h, hi_h = (float(x[0]) for x in c.interval_at(analysis))
        est, rep = per_arm[a]
        rlo, rhi = percentile_interval(rep, level)
        rows.append({"arm": a, "role": "control" if a == control else "treatment",
                     "customers": float(np.sum(sub.weight[(arm_of_row == a) &
                                                          sub.last_of_spell])),
                     "churns": float(np.sum(sub.weight * sub.churned * (arm_of_row == a))),
                     "retained_at_horizon": s_h, "retained_lower": lo_h,
                     "retained_upper": hi_h, "revenue_per_customer": est,
                     "revenue_lower": rlo, "revenue_upper": rhi})
    return pd.DataFrame(rows)


def _power_info(arms: pd.DataFrame, control: str, treatments: Sequence[str], power: float,
                alpha: float, target_hazard_ratio: float | None, warnings: list[str]
                ) -> dict[str, Any]:
    """Events seen, the smallest detectable hazard ratio and, with a target, the events
    needed (Schoenfeld 1983) for each treatment arm against the control."""
    events = float(arms["churns"].sum())
    n_ctrl = float(arms.loc[arms["arm"] == control, "customers"].iloc[0])
    power_info: dict[str, Any] = {"events": events, "power": power, "alpha": alpha}
    for t in treatments:
        n_t = float(arms.loc[arms["arm"] == t, "customers"].iloc[0])
        d_pair = float(arms.loc[arms["arm"].isin([control, t]), "churns"].sum())
        frac = n_t / (n_t + n_ctrl)
        info = {"events": d_pair, "treated_fraction": frac,
                "detectable_hazard_ratio": kp.detectable_hazard_ratio(d_pair, power, alpha, frac)}
        if target_hazard_ratio is not None:
            need = kp.schoenfeld_events(target_hazard_ratio, power, alpha, frac)
            info["target_hazard_ratio"] = target_hazard_ratio
            info["events_needed"] = need
            info["power_at_target"] = kp.schoenfeld_power(d_pair, target_hazard_ratio, alpha,
                                                          frac)
            if d_pair < need:
                warnings.append(f"too few events for {t}: {d_pair:g} churns, {math.ceil(need)} "
                                f"needed to detect a hazard ratio of {target_hazard_ratio:g} "
                                f"with {power:.0%} power at {alpha:g} (Schoenfeld 1983)")
        power_info[t] = info
    return power_info


# ---------------------------------------------------------------- verdict


def _balance(sub: StartStop, arm: str, control: str, treatments: tuple[str, ...],
             covariates: tuple[str, ...], warnings: list[str]) -> pd.DataFrame:
    """The arms' balance on the adjustment covariates (empty without them); warns when an
    attribute's |standardised difference| passes BALANCE_LIMIT."""
    balance = balance_table(sub, arm, control, treatments, covariates) if covariates else \
        pd.DataFrame(columns=["attribute", "kind", control, *treatments, "unbalanced"])
    if not balance.empty and balance["unbalanced"].any():
        bad = ", ".join(balance.loc[balance["unbalanced"], "attribute"])
        warnings.append(f"arms are not balanced on {bad} (|standardised difference| > "
                        f"{BALANCE_LIMIT}); read the adjusted hazard ratio")
    return balance


def experiment_verdict(
    table: StartStop,
    spec: ExperimentSpec | Mapping[str, Any],
    *,
    as_of: dt.date | str | None = None,
    price: str = PRICE_COLUMN,
    level: float | None = None,
    target_hazard_ratio: float | None = None,
    power: float | None = None,
    alpha: float = 0.05,
    n_boot: int = DEFAULT_BOOT,
    seed: int = DEFAULT_SEED,
    missing: str = ModelConfig.missing,
    conf: float | None = None,
) -> ExperimentVerdict:
    """Verdict on one pricing experiment (see the module docstring for what it holds).

    Parameters
    ----------
    table : StartStop
        The prepared start-stop table (with customer ids and spell start dates).
    spec : ExperimentSpec
        From retain.toml ``[experiments.<name>]`` (or a mapping with its keys).
    as_of : date or "YYYY-MM-DD"
        The data's as-of date; before the planned end (the last actual sign-up day among
        the experiment's subjects + horizon) the verdict is interim. None or blank: no as-of
        date (a table prepared elsewhere), nothing is interim.
    price : str
        Numeric column with the monthly price on each row.
    level : float
        Level of every interval, in [0.5, 1) (default 0.95); ``conf=`` is accepted as
        its older name.
    target_hazard_ratio, power, alpha
        The effect the experiment was sized for (default: the spec's
        ``target_hazard_ratio``; ``power`` defaults to the spec's); with a target, a warning is
        raised when the events observed are fewer than Schoenfeld's (1983)
        number. The smallest hazard ratio detectable with the events observed
        is always reported.
    n_boot, seed
        Bootstrap replicates (over customers) for the revenue interval.
    missing : {"stop", "complete_cases", "missing_level"}
        The missing-value rule for the adjusted hazard ratio's covariates
        (:mod:`retain.models.missing`); what it left out is in ``missing`` and
        ``warnings``. Curves, restricted means and revenue use every row.
    """
    spec = experiment_settings(spec)
    as_of_d = as_date(as_of, f"experiment {spec.name!r}: as_of")
    name = spec.name
    where = f"experiment {name!r}"
    if target_hazard_ratio is None:
        target_hazard_ratio = spec.target_hazard_ratio
        power = spec.power
    elif power is None:
        power = spec.power
    if not table.has_customers:
        raise DataError(where, "the table has no customer_id", "use the uncompressed table")
    level = resolve_level(level, conf, where)
    if level < 0.5:
        raise ModelError(where, f"{'conf' if conf is not None else 'level'} must be in [0.5, 1), "
                         f"got {level!r}", "use 0.95")
    arm, control = spec.arm, spec.control
    sub, selection = select_experiment(table, spec)
    acol = sub.column(arm)
    assert isinstance(acol, Categorical)
    warnings: list[str] = []
    treatments = _treatments_present(sub, acol, spec, where, warnings)

    planned, analysis, interim = _horizons(spec, as_of_d, sub, warnings)

    curves = curves_by(sub, arm, level=level)
    warnings.extend(curves.warnings)
    logrank = compare_groups(sub, arm)
    warnings.extend(logrank.warnings)
    covariates = spec.covariates
    adjusted, cox_warn, dropped = _adjusted_hazard_ratios(sub, arm, control, treatments,
                                                          covariates, level, missing)
    warnings.extend(cox_warn)

    # per-arm tables
    head = first_of_spell(sub.customer.codes, sub.spell, sub.start)
    arm_of_row = acol.values()[head]
    rmst, revenue, per_arm = _revenue_and_rmst(sub, arm, arm_of_row, control, treatments,
                                               curves, analysis, price=price, level=level,
                                               n_boot=n_boot, seed=seed, warnings=warnings)
    arms = _arm_rows(sub, arm_of_row, control, treatments, curves, analysis, per_arm, level)

    balance = _balance(sub, arm, control, treatments, covariates, warnings)
    power_info = _power_info(arms, control, treatments, power, alpha, target_hazard_ratio,
                             warnings)

    return ExperimentVerdict(
        name=name, arm=arm, control=control, treatments=treatments, selection=selection,
        as_of=as_of_d, planned_horizon_days=planned,
        analysis_horizon_days=analysis, interim=interim, arms=arms, curves=curves,
        logrank=logrank, adjusted=adjusted, rmst=tuple(rmst), revenue=tuple(revenue),
        balance=balance, power=power_info, level=level, warnings=tuple(warnings),
        missing=dropped)
