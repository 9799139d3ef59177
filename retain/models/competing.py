"""Competing risks: cumulative incidence by cause, and cause-specific hazard models.

Voluntary and involuntary churn compete: a customer who leaves by choice can
no longer fail a payment. The probability of having churned from cause c by
tenure t is the cumulative incidence F_c(t), estimated by Aalen–Johansen
(Aalen and Johansen, 1978; see :mod:`retain.kernels.incidence`), with
delayed entry and frequency weights, and a pointwise interval from the
delta-method variance of Marubini and Valsecchi (1995) on the log(−log)
scale: F^{exp(±z·se / (F |log F|))} (Choudhury, 2002, recommends this transform).

The naive estimate 1 − KM_c, which treats the other cause as censoring, is
reported beside it: it answers "what if no other cause existed" and so
overstates the cause's actual share of churn; :attr:`CumulativeIncidence.overstatement`
says by how much at chosen tenures.

Cause-specific Cox models (one per cause, the other cause censored: the
cause-specific hazard of Prentice et al., 1978) use ``retain.models.cox.fit_cox``
on ``StartStop.for_cause``.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from retain.data.table import CAUSES, Categorical, StartStop
from retain.errors import DataError, ModelError
from retain.estimates import Estimates
from retain.kernels.incidence import aalen_johansen, risk_and_events
from retain.models._segments import by_names, segment_codes
from retain.results import DEFAULT_LEVEL, Result, resolve_level
from retain.units import DAYS_PER_MONTH

UNSPECIFIED = "unspecified"
DEFAULT_HORIZONS = (3, 6, 12, 24, 36)


@dataclass(frozen=True)
class CumulativeIncidence(Result):
    """Aalen–Johansen cumulative incidence by cause (and segment).

    ``frame``: one row per (segment, cause, distinct churn time) with columns
    segment, cause, time (days of tenure), month (time / 30.4375), at_risk,
    events (churns of this cause at that time), churns_all (of every cause),
    cif, se, lower, upper, naive (1 − KM with the other causes censored),
    survival (all-cause Kaplan–Meier). Each is a right-continuous step function
    of tenure.

    ``overstatement``: per segment, cause and tenure month in ``horizons``
    (those inside the data), cif, naive, difference = naive − cif and
    ratio = naive / cif.
    """

    frame: pd.DataFrame
    overstatement: pd.DataFrame
    causes: tuple[str, ...]
    by: tuple[str, ...]
    level: float
    n_rows: int
    n_events: float
    method: str = "Aalen-Johansen; delayed entry and frequency weights"
    interval: str = ("pointwise, delta-method variance (Marubini and Valsecchi 1995), "
                     "log(-log) transform")
    warnings: tuple[str, ...] = field(default_factory=tuple)

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def at(self, months: float | Sequence[float], *, cause: str,
           segment: str | None = None) -> np.ndarray:
        """F_cause at tenures given in months (step function; 0 before the first churn)."""
        seg = self.frame[self.frame["cause"] == cause]
        if segment is not None:
            seg = seg[seg["segment"] == segment]
        elif self.by:
            raise DataError("cumulative incidence", "the result has segments",
                            "name the segment")
        if seg.empty:
            raise DataError("cumulative incidence", f"no rows for cause {cause!r}"
                            + (f" in segment {segment!r}" if segment else ""),
                            f"causes: {', '.join(self.causes)}")
        t = np.atleast_1d(np.asarray(months, dtype=float)) * DAYS_PER_MONTH
        times = seg["time"].to_numpy()
        idx = np.searchsorted(times, t, side="right") - 1
        vals = seg["cif"].to_numpy()
        return np.where(idx >= 0, vals[np.maximum(idx, 0)], 0.0)

    def summary(self) -> str:
        parts = []
        seg = self.overstatement
        if not seg.empty:
            last = seg.groupby(["segment", "cause"], sort=False).tail(1)
            for row in last.itertuples():
                label = f"{row.cause}" + (f" ({row.segment})" if self.by else "")
                parts.append(f"{label}: {100 * row.cif:.1f}% by month {row.month:g}, "
                             f"1 - KM says {100 * row.naive:.1f}% "
                             f"(+{100 * row.difference:.1f} points)")
        return ("Cumulative incidence by cause (Aalen-Johansen). " + "; ".join(parts)
                + ("." if parts else ""))


def _kinds(table: StartStop) -> tuple[np.ndarray, tuple[str, ...], list[str]]:
    """Per row: 0 censored, 1.. cause index; the causes present; warnings."""
    kind = np.zeros(table.n_rows, dtype=np.int8)
    churn = table.churned == 1
    causes: list[str] = []
    for cause in CAUSES:
        if cause in table.cause.levels:
            code = table.cause.levels.index(cause)
            hit = churn & (table.cause.codes == code)
            if hit.any():
                causes.append(cause)
                kind[hit] = len(causes)
    warnings: list[str] = []
    missing = churn & (table.cause.codes < 0)
    if missing.any():
        causes.append(UNSPECIFIED)
        kind[missing] = len(causes)
        warnings.append(f"{int(missing.sum())} churn rows carry no cause; they are shown as "
                        f"cause {UNSPECIFIED!r} so that the causes still add up to 1 - KM")
    return kind, tuple(causes), warnings


def cumulative_incidence(
    table: StartStop,
    *,
    by: str | Sequence[str] | None = None,
    level: float = DEFAULT_LEVEL,
    horizons: Sequence[float] = DEFAULT_HORIZONS,
) -> CumulativeIncidence:
    """Aalen–Johansen cumulative incidence of each churn cause, optionally by segment.

    Parameters
    ----------
    table : StartStop
        Start-stop rows with ``cause`` on churn rows; (start, stop] convention,
        delayed entry respected, weights as frequency weights.
    by : column name or names, optional
        One curve set per segment (value in force on each row).
    level : float
        Pointwise interval level.
    horizons : tenure months at which the overstatement of 1 − KM is reported
        (those past the last churn time of a segment are skipped).

    Returns
    -------
    CumulativeIncidence
    """
    if not isinstance(table, StartStop):
        raise DataError("cumulative_incidence", f"needs a StartStop, not {type(table).__name__}",
                        "build one with StartStop.from_parquet / from_frame")
    level = resolve_level(level, None, "cumulative_incidence", error=DataError)
    kind, causes, warnings = _kinds(table)
    if not causes:
        raise ModelError(table.source, "there are no churns", "cumulative incidence needs churns")
    names = by_names(by)
    codes, labels = segment_codes(table, names)
    z = stats.norm.ppf(0.5 + level / 2)
    frames, overs = [], []
    for g, label in enumerate(labels):
        if len(labels) == 1:  # the whole book: no copies
            rows = slice(None)
        else:
            rows = np.flatnonzero(codes == g)
        k = kind[rows]
        if not (k > 0).any():
            warnings.append(f"segment {label!r} has no churns; left out")
            continue
        times, n, d = risk_and_events(table.start[rows], table.stop[rows], k,
                                      table.weight[rows], len(causes))
        surv, cif, var, naive = aalen_johansen(n, d)
        se = np.sqrt(var)
        lower, upper = _loglog_interval(cif, se, z)
        for c, cause in enumerate(causes):
            frames.append(pd.DataFrame({
                "segment": label, "cause": cause, "time": times, "month": times / DAYS_PER_MONTH,
                "at_risk": n, "events": d[:, c], "churns_all": d.sum(axis=1), "cif": cif[:, c],
                "se": se[:, c], "lower": lower[:, c], "upper": upper[:, c],
                "naive": naive[:, c], "survival": surv,
            }))
            for h in horizons:
                t = h * DAYS_PER_MONTH
                if t > times[-1]:
                    continue
                j = np.searchsorted(times, t, side="right") - 1
                f = cif[j, c] if j >= 0 else 0.0
                nv = naive[j, c] if j >= 0 else 0.0
                overs.append({"segment": label, "cause": cause, "month": float(h), "cif": f,
                              "naive": nv, "difference": nv - f,
                              "ratio": nv / f if f > 0 else np.nan})
    frame = pd.concat(frames, ignore_index=True)
    over = pd.DataFrame(overs, columns=["segment", "cause", "month", "cif", "naive",
                                        "difference", "ratio"])
    return CumulativeIncidence(frame=frame, overstatement=over, causes=causes, by=names,
                               level=level, n_rows=table.n_rows, n_events=table.n_events,
                               warnings=tuple(warnings))


def _loglog_interval(f: np.ndarray, se: np.ndarray, z: float) -> tuple[np.ndarray, np.ndarray]:
    """F^{exp(±z se / (F |log F|))}; where F is 0 or 1 the bounds equal F."""
    # a tiny F with a large se gives exp(z s) = inf: F ** inf = 0 is the right limit
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        ok = (f > 0) & (f < 1) & (se > 0)
        s = np.where(ok, se / (f * np.abs(np.log(np.where(ok, f, 0.5)))), 0.0)
        lower = np.where(ok, f ** np.exp(z * s), f)
        upper = np.where(ok, f ** np.exp(-z * s), f)
    return lower, upper



# ---------------------------------------------------------------- cause-specific Cox
@dataclass(frozen=True)
class CauseSpecificCox(Result):
    """One Cox model per churn cause, the other causes censored (Prentice et al., 1978).

    ``fits`` maps cause -> :class:`retain.models.cox.CoxFit`; ``frame`` stacks their
    hazard-ratio tables with a ``cause`` column. A hazard ratio here compares the
    rate of churning *from that cause* among customers still subscribed; it is not a
    ratio of cumulative incidences (see :func:`cumulative_incidence` for those).
    """

    fits: dict
    frame: pd.DataFrame
    causes: tuple[str, ...]
    covariates: tuple[str, ...]
    n_rows: int
    events: dict
    method: str = "cause-specific hazards: Cox PH per cause, other causes treated as censored"
    warnings: tuple[str, ...] = field(default_factory=tuple)
    missing: Any = None  # MissingCovariates: rows left out (or recoded) for missing values

    @property
    def level(self) -> float:
        """The confidence level of the causes' intervals."""
        return float(self.fits[self.causes[0]].level) if self.causes else DEFAULT_LEVEL

    def without_rows(self) -> CauseSpecificCox:
        """A copy whose cause models keep only what prediction needs
        (:meth:`retain.models.cox.CoxFit.without_rows`)."""
        return replace(self, fits={c: f.without_rows() for c, f in self.fits.items()})

    def estimates(self) -> Estimates:
        """Every cause's coefficients (log hazard ratios), named "cause: term".

        The covariance is block-diagonal, one block per cause: the partial
        likelihood factors over causes, so the model-based information has no
        cross-cause terms; robust cross-cause covariances are not estimated.
        """
        parts = [self.fits[c].estimates() for c in self.causes]
        names = tuple(f"{c}: {n}" for c, e in zip(self.causes, parts, strict=True)
                      for n in e.names)
        k = len(names)
        cov = np.zeros((k, k))
        at = 0
        for e in parts:
            m = len(e.names)
            cov[at:at + m, at:at + m] = e.cov
            at += m
        return Estimates(
            model="cause-specific Cox", names=names,
            estimate=np.concatenate([e.estimate for e in parts]) if parts else np.zeros(0),
            cov=cov, scale=("log hazard ratio",) * k, level=self.level,
            covariance=(parts[0].covariance if parts else "none")
            + " within each cause; none across causes")

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def summary(self) -> str:
        parts = []
        for cause in self.causes:
            rows = self.frame[self.frame["cause"] == cause]
            terms = "; ".join(f"{r.term} HR {r.hazard_ratio:.2f} ({r.lower:.2f} to "
                              f"{r.upper:.2f})" for r in rows.itertuples())
            parts.append(f"{cause} ({self.events[cause]:,.0f} churns): {terms}")
        return "Cause-specific Cox models. " + " | ".join(parts)


def cause_specific_cox(
    table: StartStop,
    covariates: Sequence[str],
    *,
    causes: Sequence[str] | None = None,
    missing: str = "stop",
    **options: object,
) -> CauseSpecificCox:
    """Fit a Cox model for each churn cause with the other causes censored.

    Parameters
    ----------
    table : StartStop
        Start-stop rows with ``cause`` on churn rows.
    covariates : column names
        The same covariates for every cause.
    causes : optional
        Which causes (default: every cause present).
    missing : {"stop", "complete_cases", "missing_level"}
        The missing-value rule (:mod:`retain.models.missing`), applied once to
        the covariates and strata so every cause's model fits the same rows.
    **options
        Passed to :func:`retain.models.cox.fit_cox` (strata, ties, reference,
        penalty, robust, level, ...).
    """
    from retain.models.cox import fit_cox
    from retain.models.missing import apply_missing_rule

    if not isinstance(table, StartStop):
        raise DataError("cause_specific_cox", f"needs a StartStop, not {type(table).__name__}",
                        "build one with StartStop.from_parquet / from_frame")
    covariates = [covariates] if isinstance(covariates, str) else list(covariates)
    strata = options.get("strata")
    strata_cols = [] if strata is None else ([strata] if isinstance(strata, str) else
                                             list(strata))  # type: ignore[arg-type]
    table, dropped, _ = apply_missing_rule(table, covariates + strata_cols, missing,
                                           f"cause-specific Cox on {table.source}")
    present = [c for c in CAUSES if c in table.cause.levels
               and bool(np.any((table.cause.codes == table.cause.levels.index(c))
                               & (table.churned == 1)))]
    chosen = list(present if causes is None else causes)
    for c in chosen:
        if c not in CAUSES:
            raise DataError("cause_specific_cox", f"unknown cause {c!r}",
                            f"choose from: {', '.join(CAUSES)}")
        if c not in present:
            raise ModelError(table.source, f"there are no {c} churns",
                             f"causes with churns: {', '.join(present) or '(none)'}")
    if not chosen:
        raise ModelError(table.source, "there are no churns with a cause",
                         "cause-specific models need the cause column")
    fits, frames, events = {}, [], {}
    warnings = [dropped.summary()] if dropped.any else []
    no_cause = int(np.sum((table.churned == 1) & (table.cause.codes < 0)))
    if no_cause:
        warnings.append(f"{no_cause} churn rows carry no cause; every cause's model treats them "
                        "as censored")
    for c in chosen:
        sub = table.for_cause(c)
        fit = fit_cox(sub, covariates, **options)
        fits[c] = fit
        events[c] = sub.n_events
        hr = fit.hazard_ratios
        hr.insert(0, "cause", c)
        frames.append(hr)
        warnings.extend(f"{c}: {w}" for w in fit.warnings)
    return CauseSpecificCox(fits=fits, frame=pd.concat(frames, ignore_index=True),
                            causes=tuple(chosen), covariates=tuple(covariates),
                            n_rows=table.n_rows, events=events, warnings=tuple(warnings),
                            missing=dropped)


# ---------------------------------------------------------------- Fine–Gray
@dataclass(frozen=True)
class SubdistributionCox(Result):
    """Fine–Gray proportional subdistribution hazards for one cause.

    ``fit`` is the weighted Cox fit on the expanded rows (see
    :func:`fine_gray`); ``frame`` its hazard-ratio table. A subdistribution
    hazard ratio compares the cumulative incidence of the cause (through
    log(1 − F)), not the rate among customers still subscribed.
    """

    fit: Any
    frame: pd.DataFrame
    cause: str
    covariates: tuple[str, ...]
    n_spells: int
    n_events: float
    n_competing: float
    n_rows_expanded: int
    method: str = ("Fine and Gray (1999) by inverse-probability-of-censoring weights on start-stop "
                   "rows (Geskus 2011); Breslow ties; robust errors clustered by spell ignore the "
                   "estimation of the censoring curve")
    warnings: tuple[str, ...] = field(default_factory=tuple)

    def to_frame(self) -> pd.DataFrame:
        return self.frame.copy()

    def summary(self) -> str:
        terms = "; ".join(f"{r.term} subdistribution HR {r.hazard_ratio:.2f} ({r.lower:.2f} to "
                          f"{r.upper:.2f})" for r in self.frame.itertuples())
        return (f"Fine-Gray model for {self.cause} churn ({self.n_events:,.0f} churns, "
                f"{self.n_competing:,.0f} competing): {terms}.")


def censoring_weights(time: np.ndarray, status: np.ndarray, weight: np.ndarray
                      ) -> tuple[np.ndarray, np.ndarray]:
    """Kaplan–Meier of the censoring times, G(t) = P(C > t): jump times and values.

    Censorings at a churn time count after the churns (the usual tie rule), so the
    number at risk for censoring at t is every spell with time >= t.
    """
    order = np.argsort(time, kind="stable")
    t, s, w = time[order], status[order], weight[order]
    cens_times, inv = np.unique(t[s == 0], return_inverse=True)
    c = np.bincount(inv, weights=w[s == 0], minlength=cens_times.shape[0])
    at_risk = np.cumsum(w[::-1])[::-1]
    n = at_risk[np.searchsorted(t, cens_times, side="left")]
    return cens_times, np.cumprod(1.0 - c / n)


def fine_gray(
    table: StartStop,
    covariates: Sequence[str],
    *,
    cause: str = "voluntary",
    **options: object,
) -> SubdistributionCox:
    """Fine–Gray subdistribution hazards model for one churn cause.

    Each spell is one subject: (0, T] with its cause at T. A spell that ends
    from a competing cause stays in the risk set after T with weight
    Ĝ(t−) / Ĝ(T−), Ĝ the Kaplan–Meier of the censoring times: its rows run on
    (T, c₁], (c₁, c₂], ... between the censoring curve's jumps c_k, up to the
    last churn time of the cause. A Breslow-ties weighted Cox fit on these rows
    maximises the Fine and Gray (1999) partial likelihood (Geskus, 2011).

    Limits (checked): no delayed entry (every spell starts at tenure 0) and
    covariates constant within a spell (the covariate path after a competing
    churn is not observed). Robust errors clustered by spell are reported; they
    ignore the variability of Ĝ (common practice).
    """
    from retain.models.cox import fit_cox

    where = f"Fine-Gray model on {table.source}"
    if not isinstance(table, StartStop):
        raise DataError("fine_gray", f"needs a StartStop, not {type(table).__name__}",
                        "build one with StartStop.from_parquet / from_frame")
    if cause not in CAUSES:
        raise DataError(where, f"unknown cause {cause!r}", f"choose from: {', '.join(CAUSES)}")
    if options.get("ties", "breslow") != "breslow":
        raise ModelError(where, "the weighted risk sets need Breslow ties", "leave ties out")
    options = {k: v for k, v in options.items() if k != "ties"}
    kind, causes, _ = _kinds(table)
    if cause not in causes:
        raise ModelError(where, f"there are no {cause} churns", "choose a cause with churns")
    target = causes.index(cause) + 1
    rows = _spell_last_rows(table, covariates, where)
    m = rows.shape[0]
    base = table.take(rows)
    status = np.where(base.churned == 1, kind[rows], 0)
    w = base.weight
    expanded = _weighted_risk_rows(base, status, target)
    expanded.source = f"{table.source} (Fine-Gray rows for {cause})"
    fit = fit_cox(expanded, covariates, ties="breslow", **options)
    hr = fit.hazard_ratios
    return SubdistributionCox(fit=fit, frame=hr, cause=cause, covariates=tuple(covariates),
                              n_spells=m, n_events=float(np.sum(w[status == target])),
                              n_competing=float(np.sum(w[(status > 0) & (status != target)])),
                              n_rows_expanded=expanded.n_rows, warnings=tuple(fit.warnings))


def _spell_last_rows(table: StartStop, covariates: Sequence[str], where: str) -> np.ndarray:
    """The last row of each spell (one subject per customer and spell), in spell order;
    checks that every spell starts at tenure 0 and covariates stay fixed within it."""
    key = table.customer.codes.astype(np.int64) * (int(table.spell.max()) + 1) + table.spell
    spells, spell_of = np.unique(key, return_inverse=True)
    m = spells.shape[0]
    entry = np.full(m, np.inf)
    np.minimum.at(entry, spell_of, table.start)
    if (entry > 0).any():
        raise DataError(where, f"{int((entry > 0).sum())} spells enter after tenure 0 (delayed "
                        "entry)", "the Fine-Gray weights here need every spell from its start; "
                        "use cause-specific Cox or restrict to spells that began in the window")
    last = np.flatnonzero(table.last_of_spell)
    rows = last[np.argsort(spell_of[last])]
    for name in covariates:
        col = table.column(name)
        vals = col.codes if hasattr(col, "codes") else col
        if not np.array_equal(vals, vals[rows][spell_of], equal_nan=vals.dtype.kind == "f"):
            raise DataError(where, f"covariate {name!r} changes within a spell",
                            "Fine-Gray needs time-fixed covariates; use cause-specific Cox")
    return rows


def _weighted_risk_rows(base: StartStop, status: np.ndarray, target: int) -> StartStop:
    """One row (0, T] per subject of ``base``, plus, for a subject ended by a competing
    cause before the last target churn, weighted rows between the censoring curve's
    jumps after T (weight G(low) / G(T-)) up to that churn."""
    T = base.stop
    w = base.weight
    m = T.shape[0]
    c_times, g = censoring_weights(T, status, w)

    def g_at(t: np.ndarray) -> np.ndarray:  # right-continuous G(t)
        i = np.searchsorted(c_times, t, side="right") - 1
        return np.where(i >= 0, g[np.maximum(i, 0)], 1.0)

    def g_before(t: np.ndarray) -> np.ndarray:  # G(t-)
        i = np.searchsorted(c_times, t, side="left") - 1
        return np.where(i >= 0, g[np.maximum(i, 0)], 1.0)

    horizon = float(T[status == target].max())
    comp = np.flatnonzero((status > 0) & (status != target) & (T < horizon))
    # breakpoints after T_i: censoring jumps in (T_i, horizon), then the horizon
    cuts = c_times[(c_times < horizon)]
    lo_idx = np.searchsorted(cuts, T[comp], side="right")
    count = cuts.shape[0] - lo_idx + 1
    rep = np.repeat(comp, count)
    first = np.cumsum(count) - count
    k = np.arange(rep.shape[0]) - np.repeat(first, count)  # piece number within subject
    ci = np.repeat(lo_idx, count) + k  # index of the piece's upper cut (== len: horizon)
    ext = np.concatenate([cuts, [horizon]])
    up = ext[ci]
    low = np.where(k == 0, T[rep], ext[np.maximum(ci - 1, 0)])
    wt = w[rep] * g_at(low) / g_before(T[rep])
    keep = wt > 0
    rep, low, up, wt = rep[keep], low[keep], up[keep], wt[keep]
    subject = np.concatenate([np.arange(m), rep])
    expanded = base.take(subject)
    expanded.start = np.concatenate([np.zeros(m), low])
    expanded.stop = np.concatenate([T, up])
    expanded.churned = np.concatenate([(status == target), np.zeros(rep.shape[0], bool)]
                                      ).astype(np.int8)
    expanded.weight = np.concatenate([w, wt])
    expanded.customer = Categorical(subject.astype(np.int32), tuple(str(i) for i in range(m)))
    expanded.has_customers = True
    expanded.spell = np.ones(subject.shape[0], dtype=np.int64)
    return expanded
