"""The hazard pages: Cox and Weibull effects, and how well the fitted models follow the data."""

from __future__ import annotations

import math
import re
from typing import Any

import numpy as np
import pandas as pd

from retain import step_names as step
from retain.publish import charts
from retain.publish.content import Fact, Figure, Page, Section
from retain.publish.pages import prose
from retain.publish.pages.shared import (
    curve_points,
    failure_section,
    hazard_frame,
    interval_text,
    left_out,
    level_text,
    not_set_up_section,
    num,
    p_text,
    term_frame,
)
from retain.units import DAYS_PER_MONTH

FIT_MONTHS_STEP = 0.5
FIT_TABLE_MONTHS = (1, 3, 6, 12, 18, 24, 36)


# --------------------------------------------------------------------------- hazards
def hazards_page(run: Any) -> Page:
    off = left_out(run).get("hazard-ratios")
    sections: list[Section] = [] if off else [_cox_section(run)]
    tenure = None if off else _tenure_section(run)
    if tenure is not None:
        sections.append(tenure)
    w = run.get(step.WEIBULL_COVARIATES)
    title = "Weibull model: shape and time ratios"
    if not w.ok:
        sections.append(failure_section(title, w))
    else:
        fit = w.value
        shape = fit.shape_test
        facts = (Fact("Weibull shape", f"{shape.shape:.3f}",
                      interval_text(shape.lower, shape.upper, lambda v: f"{v:.3f}",
                                    shape.level), "weibull-shape",
                      shape.shape),
                 Fact("Test of constant risk", f"χ² {shape.statistic:.1f}",
                      p_text(shape.p_value), "weibull-lr", shape.statistic))
        tr = term_frame(fit.time_ratios)[["term", "time_ratio", "lower", "upper",
                                          "hazard_ratio"]]
        figs = []
        if len(tr):
            figs.append(Figure(
                key="hazards-weibull-time-ratios", title="Time ratios (Weibull)",
                guide=prose.WEIBULL_TIME_RATIOS_GUIDE.format(level=level_text(fit.level)),
                chart=charts.forest_chart(tr, "hazards_weibull_time_ratios",
                                          estimate="time_ratio",
                                          x_title="Time ratio (log scale; 1 = no difference)"),
                table=tr, csv=term_frame(fit.to_frame())))
        relation = fit.relation[:1].upper() + fit.relation[1:]
        sections.append(Section(title, intro=shape.reading + " " + relation + ".",
                                facts=facts, figures=tuple(figs),
                                bullets=tuple(fit.warnings)))
    if off:
        sections.append(not_set_up_section([off]))
    return Page("hazards", "Hazards", prose.HAZARDS_LEAD, tuple(sections), nav_label="Hazards")


def _ph_rows(t: pd.DataFrame) -> pd.DataFrame:
    """One row per covariate: a term row where a covariate has several columns, else its column."""
    terms = [str(x) for x in t.loc[t["level"] == "term", "term"]]
    keep = [r.level != "column" or not any(str(r.term).startswith(f"{x} ") for x in terms)
            for r in t.itertuples()]
    return t[keep].reset_index(drop=True)


def _cox_section(run: Any) -> Section:
    o = run.get(step.COX)
    title = "Cox model: hazard ratios"
    if not o.ok:
        return failure_section(title, o)
    return cox_section(run, o.value)


def cox_section(run: Any, cox: Any) -> Section:
    frame = hazard_frame(cox)
    facts: list[Fact] = []
    conc = run.get(step.COX_CONCORDANCE)
    if conc.ok:
        facts.append(Fact("Concordance (Harrell's C)", f"{conc.value.c_index:.3f}",
                          "0.5 = no better than chance, 1 = perfect ranking", "concordance",
                          conc.value.c_index))
    ph = run.get(step.COX_PH)
    bullets = list(cox.warnings)
    figs = [Figure(key="hazards-cox", title="Hazard ratios (Cox)",
                   guide=prose.COX_GUIDE.format(level=level_text(cox.level)),
                   chart=charts.forest_chart(frame, "hazards_cox"), table=frame,
                   csv=cox.hazard_ratios)]
    if ph.ok:
        t = ph.value.table
        glob = t[t["term"] == "GLOBAL"].iloc[0]
        facts.append(Fact("Proportional-hazards test", f"χ² {float(glob['chi2']):.1f}",
                          f"{int(glob['df'])} df, " + p_text(float(glob["p_value"])),
                          "ph-global", float(glob["chi2"])))
        figs.append(Figure(key="hazards-ph-test", title="Proportional-hazards test by term",
                           guide=prose.PH_TEST_GUIDE, table=_ph_rows(t), csv=t))
    else:
        bullets.append(f"proportional-hazards test: {ph.error}")
    intro = prose.COX_INTRO.format(ties=cox.ties, rows=num(cox.n_rows),
                                   customers=num(cox.n_customers), churns=num(cox.n_events))
    return Section("Cox model: hazard ratios", intro=intro, facts=tuple(facts),
                   bullets=tuple(bullets), figures=tuple(figs))


def _tenure_section(run: Any) -> Section | None:
    """Under the proportional-hazards test: which headline ratios hold, and each failing
    term's ratio by tenure band. None when the step did not run or no term fails."""
    o = run.get(step.COX_TENURE)
    if o.skipped or not run.get(step.COX_PH).ok:  # the Cox section already says why
        return None
    if not o.ok:
        return failure_section(prose.TENURE_BANDS_TITLE, o)
    res = o.value
    if not res.averaged:
        return None
    intro = " ".join([prose.TENURE_HELD.format(terms=_and(res.held), alpha=res.alpha)
                      if res.held else prose.TENURE_NONE_HELD,
                      prose.TENURE_AVERAGED.format(terms=_and(res.averaged))])
    figs = []
    for e in res.effects:
        lines = [_tenure_sentence(e, i) for i in range(len(e.labels))]
        figs.append(Figure(
            key="hazards-tenure-" + re.sub(r"[^a-z0-9]+", "-", e.term.lower()).strip("-"),
            title=f"{e.term}: hazard ratio by tenure band",
            guide=" ".join([*lines, prose.TENURE_BANDS_GUIDE.format(level=level_text(e.level))]),
            table=_tenure_table(e), csv=e.to_frame()))
    return Section(prose.TENURE_BANDS_TITLE, intro=intro, figures=tuple(figs))


def _and(names: tuple[str, ...]) -> str:
    return names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]


def _tenure_table(e: Any) -> pd.DataFrame:
    f = e.to_frame()
    return pd.DataFrame({"compares": f["label"], "tenure band": f["band"],
                         "hazard ratio": f["hazard_ratio"].round(3),
                         "lower": f["lower"].round(3), "upper": f["upper"].round(3),
                         "churns in band": f["events"].map(num),
                         "single ratio": f["overall"].round(3)})


def _tenure_sentence(e: Any, i: int) -> str:
    """"plan Orchard vs Seedling: 0.62 in months 0–3, 0.78 in 3–12, 0.91 after 12: the effect
    fades with tenure." """
    months = [f"{d / DAYS_PER_MONTH:.3g}" for d in e.edges[:-1]]
    hr = e.hazard_ratio[i]
    parts = [f"{hr[0]:.2f} in months {months[0]}–{months[1]}" if len(hr) > 1
             else f"{hr[0]:.2f}"]
    parts += [f"{hr[b]:.2f} in {months[b]}–{months[b + 1]}" for b in range(1, len(hr) - 1)]
    if len(hr) > 1:
        parts.append(f"{hr[-1]:.2f} after {months[-1]}")
    return f"{e.labels[i]}: {', '.join(parts)}: {prose.TENURE_TREND[_trend(hr)]}."


def _trend(hr: np.ndarray) -> str:
    """How the log ratio moves from the first band to the last: toward 1 (fades), away
    from it (grows), across it (reverses), or by under 10 % (steady)."""
    first, last = float(np.log(hr[0])), float(np.log(hr[-1]))
    if first * last < 0 and min(abs(first), abs(last)) > 0.05:
        return "reverses"
    if abs(last - first) < 0.1:
        return "steady"
    return "fades" if abs(last) < abs(first) else "grows"


# --------------------------------------------------------------------------- model fit
def fit_page(run: Any) -> Page:
    sections = [_fit_curves_section(run), _loglog_section(run), _criteria_section(run)]
    return Page("fit", "Model fit", prose.FIT_LEAD, tuple(sections), nav_label="Model fit")


def _fit_curves_section(run: Any) -> Section:
    km = run.get(step.KM)
    title = "Kaplan–Meier against the fitted curves"
    if not km.ok:
        return failure_section(title, km)
    c = km.value
    parts = [curve_points(c).assign(curve="Kaplan–Meier (data)")[["curve", "month", "retention"]]]
    top = float(c.follow_up)
    grid = np.arange(0.0, top + 1e-9, FIT_MONTHS_STEP * DAYS_PER_MONTH)
    notes = []
    for name, label in ((step.EXPONENTIAL, "exponential"), (step.WEIBULL, "Weibull")):
        o = run.get(name)
        if not o.ok:
            notes.append(f"{label}: {o.error}")
            continue
        f = o.value.predict_retention(None, grid)
        parts.append(pd.DataFrame({"curve": label, "month": grid / DAYS_PER_MONTH,
                                   "retention": f.retention}))
    cox_curve = _cox_population_curve(run)
    if isinstance(cox_curve, str):
        if not run.get(step.COX_CURVE).skipped:  # no Cox model asked for: no Cox curve
            notes.append(f"Cox: {cox_curve}")
    else:
        parts.append(cox_curve)
        notes.append(prose.COX_CURVE_NOTE)
    frame = pd.concat(parts, ignore_index=True)
    dashed = {lv: lv != "Kaplan–Meier (data)" for lv in frame["curve"].unique()}
    return Section(title, bullets=tuple(notes), figures=(Figure(
        key="fit-curves", title="Observed retention and model curves",
        guide=prose.FIT_CURVES_GUIDE,
        chart=charts.lines_chart(frame, "fit_curves", x="month", y="retention", series="curve",
                                 x_title="Months since start", y_title="Still subscribed",
                                 dashed=dashed, y_domain=[0, 1]),
        table=_fit_grid_table(frame), csv=frame),))


def _loglog_section(run: Any) -> Section:
    ll = run.get(step.LOGLOG)
    title = "The log(−log) check of the Weibull shape"
    if not ll.ok:
        return failure_section(title, ll)
    d = ll.value
    return Section(title, intro=d.summary() + ".", bullets=tuple(d.warnings), figures=(Figure(
        key="fit-loglog", title="log(−log retention) against log tenure",
        guide=prose.LOGLOG_GUIDE, chart=charts.loglog_chart(d.points, d.lines, "fit_loglog"),
        table=d.points, csv=d.points),))


def _criteria_section(run: Any) -> Section:
    cm = run.get(step.COMPARE)
    title = "Information criteria"
    if not cm.ok:
        return failure_section(title, cm)
    comp = cm.value
    return Section(title, intro=prose.CRITERIA_INTRO,
                   facts=(Fact("Lowest AIC", comp.best_by_aic, "", "best-aic", None),),
                   bullets=tuple(comp.warnings), figures=(Figure(
                       key="fit-criteria", title="Log-likelihood, AIC and BIC",
                       guide=prose.CRITERIA_GUIDE, table=comp.to_frame()),))


def _cox_population_curve(run: Any) -> pd.DataFrame | str:
    o = run.get(step.COX_CURVE)
    if not o.ok:
        return o.error or "not run"
    curve = o.value
    return pd.DataFrame({"curve": "Cox (average over customers)",
                         "month": curve["time"].to_numpy(dtype=float) / DAYS_PER_MONTH,
                         "retention": curve["retention"].to_numpy(dtype=float)})


def _fit_grid_table(frame: pd.DataFrame) -> pd.DataFrame:
    """Each curve read at whole-year-ish tenures (step lookup on its own points)."""
    rows = []
    for m in FIT_TABLE_MONTHS:
        row: dict[str, Any] = {"month": m}
        for name, g in frame.groupby("curve", sort=False):
            mm = g["month"].to_numpy(dtype=float)
            if m > mm.max() + 1e-9:
                row[str(name)] = math.nan
                continue
            k = np.searchsorted(mm, m, side="right") - 1
            row[str(name)] = float(g["retention"].to_numpy(dtype=float)[max(k, 0)])
        rows.append(row)
    return pd.DataFrame(rows)
