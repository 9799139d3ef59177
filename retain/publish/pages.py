"""Turn one run's results into site pages (content only; no statistics computed here).

Each ``*_page`` function reads the outcomes of :class:`retain.run.RunResults`
and returns a :class:`~retain.publish.content.Page`. A failed or missing
outcome becomes a section that shows its message. Numbers are only read from
results and formatted; the one thing done here is to choose which points of a
curve to show.
"""

from __future__ import annotations

import math
import os
import traceback
from collections.abc import Callable, Iterable
from typing import Any

import numpy as np
import pandas as pd

from retain import step_names as step
from retain.errors import RetainError
from retain.publish import charts
from retain.publish.content import Fact, Figure, Page, Section, SiteContent, slug
from retain.units import DAYS_PER_MONTH, DAYS_PER_YEAR

MONEY_CAUTIONS = (
    "These are statistical estimates from past behaviour, shown with their uncertainty; "
    "the future can differ, above all where a figure extrapolates past the observed tenures.",
    "They are inputs to judgement, not accounting entries: the company's actuarial and "
    "accounting standards, and licensed practitioners, decide how they may be used.",
    "Reserving and pricing bases are for qualified actuaries to set under local standards.",
)
AT_RISK_MONTHS = (0, 3, 6, 12, 18, 24, 36)
VIRIDIS = ("#440154", "#482878", "#3e4989", "#31688e", "#26828e", "#1f9e89", "#35b779",
           "#6ece58", "#b5de2b", "#fde725")


# --------------------------------------------------------------------------- formatting
def pct(x: float | None, digits: int = 1) -> str:
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{100.0 * x:.{digits}f} %"


def num(x: float | None, digits: int = 0) -> str:
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{x:,.{digits}f}"


def months_text(days: float | None) -> str:
    if days is None or not math.isfinite(days):
        return "not reached"
    return f"{days / DAYS_PER_MONTH:.1f} months"


def interval_text(lo: float | None, hi: float | None, fmt: Callable[[float | None], str]) -> str:
    return f"95 % interval {fmt(lo)} to {fmt(hi)}"


def _f(x: Any) -> float:
    try:
        v = float(x)
    except (TypeError, ValueError):
        return math.nan
    return v


def failure_section(title: str, outcome: Any, intro: str = "") -> Section:
    """The section of a step that failed, or (said as a note, not an alert) one that the
    project file does not ask for."""
    if getattr(outcome, "kind", "") == "skipped":
        return Section(title=title, intro=f"Not set up: {outcome.error}")
    return Section(title=title, intro=intro, failure=getattr(outcome, "error", None)
                   or "this part was not run")


def _curve_points(curve: Any, label: str | None = None) -> pd.DataFrame:
    """A curve's steps in months, starting at (0, 1)."""
    t = np.concatenate(([0.0], np.asarray(curve.times, dtype=float)))
    s = np.concatenate(([1.0], curve.survival))
    lo = np.concatenate(([1.0], curve.lower))
    hi = np.concatenate(([1.0], curve.upper))
    frame = pd.DataFrame({"month": t / DAYS_PER_MONTH, "retention": s, "lower": lo, "upper": hi})
    if label is not None:
        frame.insert(0, "segment", label)
    return frame


def _curve_download(curve: Any, label: str) -> pd.DataFrame:
    frame = curve.to_frame().rename(columns={"time": "day", "survival": "retention"})
    frame.insert(0, "segment", label)
    frame.insert(2, "month", frame["day"] / DAYS_PER_MONTH)
    return frame


def _at_risk_table(curves: Iterable[tuple[str, Any]]) -> pd.DataFrame:
    rows = []
    for label, c in curves:
        d = np.array(AT_RISK_MONTHS, dtype=float) * DAYS_PER_MONTH
        s = c.at(d)
        lo, hi = c.interval_at(d)
        n = c.at_risk_at(d)
        for m, sv, a, b, k in zip(AT_RISK_MONTHS, s, lo, hi, n, strict=True):
            seen = math.isfinite(sv)
            rows.append({"segment": label, "month": m, "at_risk": float(k) if seen else math.nan,
                         "retention": sv, "lower": a, "upper": b})
    return pd.DataFrame(rows)


def curves_figure(key: str, title: str, guide: str, curves: Iterable[tuple[str, Any]], *,
                  series_title: str | None = None) -> Figure:
    """Kaplan–Meier curves as a figure: step chart with bands, at-risk table, full-curve CSV.

    One curve is drawn in one colour; several get a legend titled ``series_title``.
    """
    items = list(curves)
    name = key.replace("-", "_")
    if len(items) == 1 and series_title is None:
        label, c = items[0]
        chart = charts.survival_chart(_curve_points(c), name)
    else:
        pts = pd.concat([_curve_points(c, k) for k, c in items], ignore_index=True)
        chart = charts.survival_chart(pts, name, series="segment", series_title=series_title)
    return Figure(key=key, title=title, guide=guide, chart=chart, table=_at_risk_table(items),
                  csv=pd.concat([_curve_download(c, k) for k, c in items], ignore_index=True))


def _heat_colours(values: np.ndarray) -> dict[str, Any]:
    colours, inks = [], []
    for row in values:
        c_row, i_row = [""], [""]  # first column is the row label
        for v in row:
            if not math.isfinite(v):
                c_row.append("")
                i_row.append("")
                continue
            k = min(len(VIRIDIS) - 1, max(0, int(v * (len(VIRIDIS) - 1) + 0.5)))
            c_row.append(VIRIDIS[k])
            i_row.append("#ffffff" if k <= 5 else "#1e2a31")
        colours.append(c_row)
        inks.append(i_row)
    return {"colours": colours, "inks": inks}


# --------------------------------------------------------------------------- pages
def overview_page(run: Any) -> Page:
    book = run.get(step.BOOK)
    km = run.get(step.KM)
    facts: list[Fact] = []
    sections: list[Section] = []
    if book.ok:
        b = book.value
        facts += [
            Fact("Customers", num(b.customers), f"{num(b.spells)} subscription spells",
                 "customers", float(b.customers)),
            Fact("Active now", num(b.active),
                 f"open spells on {run.options.as_of or 'the as-of date'}",
                 "active", float(b.active)),
            Fact("Monthly churn", pct(b.monthly_churn_q, 2),
                 f"{num(b.window_churns)} churns over {num(b.window_exposure_months)} "
                 f"customer-months ({b.basis})", "monthly-churn", float(b.monthly_churn_q)),
        ]
    if km.ok:
        c = km.value
        med = c.median()
        facts.append(Fact("Median lifetime", months_text(med.days),
                          f"95 % interval {months_text(med.lower)} to {months_text(med.upper)}",
                          "median-days", med.days))
        s12 = float(c.at(DAYS_PER_YEAR)[0])
        lo, hi = (float(x[0]) for x in c.interval_at(DAYS_PER_YEAR))
        facts.append(Fact("Retained at 12 months", pct(s12),
                          interval_text(lo, hi, pct) if math.isfinite(s12) else
                          "not yet observed", "retention-12m", s12))
    sections.append(Section(
        "The book at a glance", facts=tuple(facts),
        failure=None if (book.ok and km.ok) else (book.error or km.error)))
    sections.append(_hazard_words(run))
    if km.ok:
        c = km.value
        fig = curves_figure(
            "overview-retention", "Retention of all customers",
            "The line is the share of customers still subscribed after each month of "
            "tenure (Kaplan–Meier); the shaded band is its 95 % interval. A steep early "
            "drop means many leave soon after starting.", [("all customers", c)])
        sections.append(Section("Retention curve", figures=(fig,)))
    return Page("overview", "Overview", "How many customers stay, for how long, and what moves "
                "the odds of leaving.", tuple(sections), nav_label="Overview")


def _hazard_words(run: Any) -> Section:
    cox = run.get(step.COX)
    title = "What moves churn most"
    if not cox.ok:
        return failure_section(title, cox)
    words = hazard_sentences(cox.value, 3)
    return Section(title, intro="The three largest effects in the proportional-hazards model, "
                   "each compared with its reference group and holding the others fixed:",
                   bullets=tuple(words))


def hazard_sentences(cox: Any, k: int) -> list[str]:
    """The ``k`` largest Cox effects (by |log hazard ratio|) as plain sentences."""
    frame = hazard_frame(cox)
    if frame.empty:
        return []
    order = np.argsort(-np.abs(np.log(frame["hazard_ratio"].to_numpy(dtype=float))),
                       kind="stable")
    out = []
    for i in order[:k]:
        r = frame.iloc[int(i)]
        hr = float(r["hazard_ratio"])
        if hr >= 2:
            what = f"{hr:.1f} times the churn risk"
        elif hr >= 1:
            what = f"a churn risk {100 * (hr - 1):.0f} % higher"
        else:
            what = f"a churn risk {100 * (1 - hr):.0f} % lower"
        out.append(f"{r['term']}: {what} at any tenure (hazard ratio {hr:.2f}, 95 % interval "
                   f"{float(r['lower']):.2f} to {float(r['upper']):.2f}).")
    return out


def hazard_frame(cox: Any) -> pd.DataFrame:
    """term, hazard_ratio, lower, upper, p_value of a Cox fit, in the model's order."""
    hr = cox.hazard_ratios
    return pd.DataFrame({"term": hr["term"].astype(str), "hazard_ratio": hr["hazard_ratio"],
                         "lower": hr["hr_low"], "upper": hr["hr_high"],
                         "p_value": hr["p_value"]})


def curves_page(run: Any) -> Page:
    sections: list[Section] = []
    km = run.get(step.KM)
    if km.ok:
        c = km.value
        sections.append(Section(
            "All customers",
            intro=c.summary() + ".",
            figures=(curves_figure(
                "curves-all", "Retention of all customers",
                "Share still subscribed by months of tenure, with its 95 % interval "
                "band. The table gives the number still at risk at each tenure: where it "
                "is small, the curve rests on few customers.", [("all customers", c)]),)))
    else:
        sections.append(failure_section("All customers", km))
    for seg in run.options.segments:
        o = run.get(step.curves_by(seg))
        title = f"By {seg}"
        if not o.ok:
            sections.append(failure_section(title, o))
            continue
        sc = o.value
        meds = [f"{k}: median {months_text(c.median().days)}" for k, c in sc.items()]
        sections.append(Section(
            title, intro=f"Each spell is placed by its {seg} at the start of the spell "
            f"({sc.basis}). " + "; ".join(meds) + ".",
            bullets=tuple(sc.warnings),
            figures=(curves_figure(
                f"curves-{slug(seg)}", f"Retention by {seg}",
                f"One line per {seg}; shaded bands are 95 % intervals. Lines that stay "
                "apart with bands that do not overlap point to a real difference. "
                "The table lists the number still at risk at chosen tenures.", sc.items(),
                series_title=seg),)))
    return Page("curves", "Retention curves", "Kaplan–Meier retention: the share of customers "
                "still subscribed after each month of tenure, overall and by segment, with "
                "delayed entry and censoring at the as-of date.", tuple(sections),
                nav_label="Retention curves")


def cohorts_page(run: Any) -> Page:
    o = run.get(step.COHORTS)
    title = "Retention by signup cohort"
    if not o.ok:
        return Page("cohorts", "Cohorts", "Signup cohorts month by month.",
                    (failure_section(title, o),))
    ct = o.value
    long = ct.to_frame()
    wide = ct.retention_frame()
    shown = wide.copy()
    shown.columns = [f"m{c}" for c in shown.columns]
    shown = shown.reset_index()
    heat = _heat_colours(wide.to_numpy(dtype=float))
    cells = np.isfinite(ct.retention)
    fig = Figure(
        key="cohorts-retention", title="Cohort × month retention",
        guide="Each row is a signup month, each column a month of tenure; the colour is the "
              "Kaplan–Meier share still subscribed. Read down a column to compare cohorts at "
              "the same age. Blank cells cannot be observed: the cohort has not reached that "
              "tenure by the as-of date, or (for cohorts that began before the observation "
              "window) its customers were not yet under observation at that tenure.",
        chart=charts.heat_chart(long[["cohort", "month", "retention"]], "cohorts_retention",
                                row="cohort", column="month", value="retention",
                                row_title="", column_title="Months since start",
                                value_title="Retained"),
        table=shown, csv=long, heat=heat, show_rows=len(shown))
    facts = (Fact("Cohorts", num(len(ct.cohorts)), f"{ct.cohorts[0]} to {ct.cohorts[-1]}"
                  if ct.cohorts else "", "cohorts", float(len(ct.cohorts))),
             Fact("Observable cells", num(int(cells.sum())),
                  f"of {cells.size}; the rest are not yet reached", "cohort-cells",
                  float(cells.sum())))
    return Page("cohorts", "Cohorts", "Retention of each signup month's customers by months "
                "since start. Every cell is a Kaplan–Meier estimate, so customers still "
                "subscribed count only for the months they were observed.",
                (Section(title, facts=facts, bullets=tuple(ct.warnings), figures=(fig,)),),
                nav_label="Cohorts")


def quality_page(run: Any) -> Page:
    t = run.table
    sections: list[Section] = []
    prepared = run.prepared
    rec = getattr(prepared, "reconciliation", None) if prepared is not None else None
    if rec is not None:
        sections.append(_reconciliation_section(rec))
    else:
        sections.append(Section("Reconciliation", intro="This run started from a start-stop "
                                "table prepared elsewhere, so there is no event-log "
                                "reconciliation to show."))
    quarantine = getattr(prepared, "quarantine", None) if prepared is not None else None
    if quarantine is not None:
        sections.append(_quarantine_section(quarantine, getattr(prepared, "unknown_events", None)))
    cause_counts = t.cause.counts(t.weight * t.churned)
    facts = (Fact("Start-stop rows", num(t.n_rows), "", "table-rows", float(t.n_rows)),
             Fact("Customers", num(t.n_customers), "", "table-customers", float(t.n_customers)),
             Fact("Churns", num(t.n_events), ", ".join(f"{k} {num(v)}" for k, v in
                                                       cause_counts.items()),
                  "table-churns", float(t.n_events)))
    sections.append(Section("The start-stop table", intro="What the models were fitted on: one "
                            "row per customer, spell and interval with constant attributes.",
                            facts=facts))
    return Page("quality", "Data quality", "Every input row is either used or set aside with a "
                "reason; this page shows the count of each and a sample of the rows set aside.",
                tuple(sections), nav_label="Data quality")


def _as_frame(obj: Any) -> pd.DataFrame:
    if isinstance(obj, pd.DataFrame):
        return obj
    if hasattr(obj, "to_frame"):
        return obj.to_frame()
    if hasattr(obj, "to_pandas"):
        return obj.to_pandas()
    if hasattr(obj, "df"):
        return obj.df()
    return pd.DataFrame(obj)


def _reconciliation_section(rec: Any) -> Section:
    frame = _as_frame(rec)
    return Section("Reconciliation", intro=getattr(rec, "summary", lambda: "")() or "",
                   figures=(Figure(key="quality-reconciliation",
                                   title="Rows in, used and set aside",
                                   guide="Rows read from the event log, by what happened to "
                                         "them. Rows in = rows used + rows quarantined.",
                                   table=frame, show_rows=len(frame)),))


QUARANTINE_SAMPLE = 5


def _quarantine_section(quarantine: Any, unknown: Any = None) -> Section:
    frame = _as_frame(quarantine)
    reason = next((c for c in frame.columns if "reason" in str(c) and "quarantine" in str(c)),
                  None)
    if reason is not None:
        frame = frame[[reason] + [c for c in frame.columns if c != reason]]
        frame = frame.sort_values([reason] + [c for c in frame.columns[1:2]], kind="stable")
        sample = frame.groupby(reason, sort=True).head(QUARANTINE_SAMPLE)
    else:
        sample = frame
    bullets = tuple(f"unknown event value {k!r}: {num(float(v))} rows — map it in [events] map "
                    "or list it in [events] ignore" for k, v in sorted(dict(unknown or {}).items()))
    return Section("Quarantined rows (sample)", bullets=bullets, figures=(Figure(
        key="quality-quarantine", title="Rows set aside",
        guide=f"Up to {QUARANTINE_SAMPLE} rows per reason, with their original values; the CSV "
              "holds every quarantined row. Fix the source or the mapping in retain.toml and "
              "run again.",
        table=sample.reset_index(drop=True), csv=frame, show_rows=len(sample)),))


# --------------------------------------------------------------------------- hazards
def _term_frame(frame: pd.DataFrame, label: str = "label") -> pd.DataFrame:
    out = frame.copy()
    out.insert(0, "term", out.pop(label).astype(str))
    return out


def hazards_page(run: Any) -> Page:
    sections: list[Section] = [_cox_section(run)]
    w = run.get(step.WEIBULL_COVARIATES)
    title = "Weibull model: shape and time ratios"
    if not w.ok:
        sections.append(failure_section(title, w))
    else:
        fit = w.value
        shape = fit.shape_test
        facts = (Fact("Weibull shape", f"{shape.shape:.3f}",
                      f"95 % interval {shape.lower:.3f} to {shape.upper:.3f}", "weibull-shape",
                      shape.shape),
                 Fact("Test of constant risk", f"χ² {shape.statistic:.1f}",
                      "p < 0.001" if shape.p_value < 0.001 else f"p = {shape.p_value:.3f}",
                      "weibull-lr", shape.statistic))
        tr = _term_frame(fit.time_ratios)[["term", "time_ratio", "lower", "upper",
                                           "hazard_ratio"]]
        figs = []
        if len(tr):
            figs.append(Figure(
                key="hazards-weibull-time-ratios", title="Time ratios (Weibull)",
                guide="A time ratio stretches (above 1) or shrinks (below 1) the whole "
                      "lifetime of a customer with that attribute, against the reference "
                      "group: 1.3 means customers stay 30 % longer. Whiskers are 95 % "
                      "intervals; a whisker that crosses the dashed line at 1 is not a clear "
                      "difference.",
                chart=charts.forest_chart(tr, "hazards_weibull_time_ratios",
                                          estimate="time_ratio",
                                          x_title="Time ratio (log scale; 1 = no difference)"),
                table=tr, csv=_term_frame(fit.to_frame())))
        relation = fit.relation[:1].upper() + fit.relation[1:]
        sections.append(Section(title, intro=shape.reading + " " + relation + ".",
                                facts=facts, figures=tuple(figs),
                                bullets=tuple(fit.warnings)))
    return Page("hazards", "Hazards", "What raises or lowers the risk of churn at any tenure, "
                "from the proportional-hazards model and the Weibull model.", tuple(sections),
                nav_label="Hazards")


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
    figs = [Figure(
        key="hazards-cox", title="Hazard ratios (Cox)",
        guide="Each dot is how many times more likely (above 1) or less likely (below 1) "
              "customers with that attribute are to churn at any given tenure than the "
              "reference group, other attributes held fixed; whiskers are 95 % intervals "
              "(robust, clustered by customer). A numeric attribute is read per unit.",
        chart=charts.forest_chart(frame, "hazards_cox"), table=frame,
        csv=cox.hazard_ratios)]
    if ph.ok:
        t = ph.value.table
        glob = t[t["term"] == "GLOBAL"].iloc[0]
        p = float(glob["p_value"])
        facts.append(Fact("Proportional-hazards test", f"χ² {float(glob['chi2']):.1f}",
                          f"{int(glob['df'])} df, " + ("p < 0.001" if p < 0.001 else
                                                       f"p = {p:.3f}"),
                          "ph-global", float(glob["chi2"])))
        figs.append(Figure(
            key="hazards-ph-test", title="Proportional-hazards test by term",
            guide="Grambsch–Therneau test on scaled Schoenfeld residuals: a small p-value "
                  "says that attribute's hazard ratio changes with tenure, so the single "
                  "ratio above is an average over tenure. With many customers small, "
                  "harmless departures also reach small p-values.",
            table=_ph_rows(t), csv=t))
    else:
        bullets.append(f"proportional-hazards test: {ph.error}")
    return Section("Cox model: hazard ratios", intro=f"Cox proportional-hazards model "
                   f"({cox.ties} ties) on {num(cox.n_rows)} rows, {num(cox.n_customers)} "
                   f"customers and {num(cox.n_events)} churns; each attribute is compared with "
                   "its reference level.", facts=tuple(facts), bullets=tuple(bullets),
                   figures=tuple(figs))


# --------------------------------------------------------------------------- model fit
FIT_MONTHS_STEP = 0.5


def fit_page(run: Any) -> Page:
    sections: list[Section] = []
    km = run.get(step.KM)
    curves_title = "Kaplan–Meier against the fitted curves"
    if not km.ok:
        sections.append(failure_section(curves_title, km))
    else:
        c = km.value
        parts = [_curve_points(c).assign(curve="Kaplan–Meier (data)")
                 [["curve", "month", "retention"]]]
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
        cox_curve = _cox_population_curve(run, grid)
        if isinstance(cox_curve, str):
            notes.append(f"Cox: {cox_curve}")
        else:
            parts.append(cox_curve)
            notes.append("The Cox curve averages each customer's predicted retention with the "
                         "attributes held at their values at the start of the spell. States "
                         "that begin later (payment recovery, pauses, price changes) are not "
                         "in it, so where they raise churn this curve lies above the observed "
                         "one: it reads the model for customers who stay in their starting "
                         "state, and is not a test of the model's fit.")
        frame = pd.concat(parts, ignore_index=True)
        dashed = {lv: lv != "Kaplan–Meier (data)" for lv in frame["curve"].unique()}
        wide = _fit_grid_table(frame)
        sections.append(Section(curves_title, bullets=tuple(notes), figures=(Figure(
            key="fit-curves", title="Observed retention and model curves",
            guide="The solid step line is the Kaplan–Meier estimate from the data; dashed lines "
                  "are the models (without covariates, so each describes the whole book). A "
                  "model that follows the step line over the observed tenures is fit to use "
                  "for projections; a gap shows where its shape is wrong.",
            chart=charts.lines_chart(frame, "fit_curves", x="month", y="retention",
                                     series="curve", x_title="Months since start",
                                     y_title="Still subscribed", dashed=dashed,
                                     y_domain=[0, 1]),
            table=wide, csv=frame),)))
    ll = run.get(step.LOGLOG)
    ll_title = "The log(−log) check of the Weibull shape"
    if not ll.ok:
        sections.append(failure_section(ll_title, ll))
    else:
        d = ll.value
        sections.append(Section(ll_title, intro=d.summary() + ".", bullets=tuple(d.warnings),
                                figures=(Figure(
            key="fit-loglog", title="log(−log retention) against log tenure",
            guide="Dots are the Kaplan–Meier estimates; lines are the Weibull model with one "
                  "level per segment. Under a Weibull proportional-hazards model the dots of "
                  "each segment lie on a straight line, and the lines are parallel. Curving "
                  "dots mean the Weibull shape is wrong; crossing lines mean the hazards are "
                  "not proportional.",
            chart=charts.loglog_chart(d.points, d.lines, "fit_loglog"),
            table=d.points, csv=d.points),)))
    cm = run.get(step.COMPARE)
    cm_title = "Information criteria"
    if not cm.ok:
        sections.append(failure_section(cm_title, cm))
    else:
        comp = cm.value
        frame = comp.to_frame()
        best = comp.best_by_aic
        sections.append(Section(cm_title, intro="The same covariates in each model; lower AIC or "
                                "BIC is better, and a difference under about 2 is no real "
                                "difference (common practice).",
                                facts=(Fact("Lowest AIC", best, "", "best-aic", None),),
                                bullets=tuple(comp.warnings),
                                figures=(Figure(
            key="fit-criteria", title="Log-likelihood, AIC and BIC",
            guide="One row per model. delta_aic and delta_bic are the distance to the best "
                  "model; BIC counts the number of churns as the sample size.",
            table=frame),)))
    return Page("fit", "Model fit", "Do the fitted models describe the data? Each is set "
                "against the Kaplan–Meier curve and compared by information criteria.",
                tuple(sections), nav_label="Model fit")


def _cox_population_curve(run: Any, grid: np.ndarray) -> pd.DataFrame | str:
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
    for m in (1, 3, 6, 12, 18, 24, 36):
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


# --------------------------------------------------------------------------- actuarial
ACTUARIAL_CAUTIONS = (
    "Rates are estimates from the observed exposure and churns, with Poisson intervals; "
    "months with little exposure carry wide intervals.",
    "Reserving and pricing bases are for qualified actuaries to set under local standards; "
    "these tables are evidence for that work, not a basis in themselves.",
)


def decrements_page(run: Any) -> Page:
    o = run.get(step.DECREMENTS)
    title = "Decrement table by tenure month"
    if not o.ok:
        return Page("decrements", "Decrement table", "Churn as decrements with exposure.",
                    (failure_section(title, o),), cautions=ACTUARIAL_CAUTIONS,
                    nav_label="Decrement table", group="actuarial")
    dt = o.value
    frame = dt.to_frame()
    seg = frame[frame["segment"] == frame["segment"].iloc[0]]
    grad = run.get(step.GRADUATION)
    chart_parts = [pd.DataFrame({"rate": "crude q", "month": seg["month"] + 1,
                                 "q": seg["q"], "lower": seg["q_lower"], "upper": seg["q_upper"]})]
    notes = []
    if grad.ok:
        g = grad.value.to_frame()
        chart_parts.append(pd.DataFrame({"rate": "graduated q", "month": g["month"] + 1,
                                         "q": g["q_graduated"], "lower": math.nan,
                                         "upper": math.nan}))
    elif grad.kind != "absent":
        notes.append(f"graduation: {grad.error}")
    chart_frame = pd.concat(chart_parts, ignore_index=True)
    shown = seg[["label", "in_force", "exposure", "churns", "churns_voluntary",
                 "churns_involuntary", "m", "q", "q_lower", "q_upper", "survivors"]]
    if grad.ok:
        g = grad.value.to_frame()
        g = g[g["segment"] == seg["segment"].iloc[0]]
        shown = shown.assign(q_graduated=g["q_graduated"].to_numpy()[:len(shown)])
    overall = dt.n_events / dt.total_exposure if dt.total_exposure > 0 else math.nan
    facts = (Fact("Exposure", num(dt.total_exposure), "customer-months (central exposure)",
                  "exposure", dt.total_exposure),
             Fact("Churns", num(dt.n_events), "all causes", "decrement-churns", dt.n_events),
             Fact("Central rate", f"{overall:.4f}", "churns per customer-month", "central-rate",
                  overall))
    fig = Figure(
        key="decrements-q", title="Monthly churn probability q by tenure month",
        guide="Dots are the crude q = 1 − exp(−m) of each tenure month with exact Poisson "
              "95 % intervals (shaded); the line, where shown, is the graduated rate. Early "
              "months often carry the highest churn; wide bands at long tenures reflect "
              "little exposure.",
        chart=charts.lines_chart(chart_frame, "decrements_q", x="month", y="q", series="rate",
                                 x_title="Tenure month", y_title="q (monthly probability)",
                                 lower="lower", upper="upper",
                                 points="crude q", y_format=".1%"),
        table=shown, csv=frame, show_rows=60)
    figs = [fig]
    if grad.ok:
        gr = grad.value
        figs.append(Figure(
            key="decrements-graduation", title="Graduation and its adherence tests",
            guide="Whittaker–Henderson graduation with the smoothing chosen by generalised "
                  "cross-validation. The chi-square, signs and grouping-of-signs tests ask "
                  "whether the crude rates stray from the graduated ones more than chance "
                  "allows; p-values under 0.05 call for a second look.",
            table=gr.tests, note=gr.summary()))
    sections = [Section(title, intro=dt.summary(), facts=facts,
                        bullets=tuple(notes) + tuple(dt.warnings), figures=tuple(figs))]
    bands = run.get(step.DECREMENTS_BANDS)
    if bands.kind != "absent":
        sections.append(_band_decrements_section(bands))
    return Page("decrements", "Decrement table", "Churn read as decrements: exposure in "
                "customer-months, churns by cause, central rates m and monthly probabilities "
                "q by month of tenure, with survivors per 10,000.",
                tuple(sections),
                cautions=ACTUARIAL_CAUTIONS, assumptions=tuple(dt.assumptions),
                nav_label="Decrement table", group="actuarial")


def _band_decrements_section(o: Any) -> Section:
    """The decrement table on the project file's own tenure bands ([model] decrement_edges)."""
    title = "Decrement table on your tenure bands"
    if not o.ok:
        return failure_section(title, o)
    dt = o.value
    frame = dt.to_frame()
    seg = frame[frame["segment"] == frame["segment"].iloc[0]]
    shown = seg[["label", "in_force", "exposure", "churns", "m", "q", "q_lower", "q_upper",
                 "survivors"]]
    return Section(title, intro=dt.summary(), bullets=tuple(dt.assumptions) + tuple(dt.warnings),
                   figures=(Figure(
                       key="decrements-bands", title="Churn by the bands of [model] "
                       "decrement_edges",
                       guide="One row per band (a, b] of tenure in days: a churn on an edge "
                             "counts in the band that ends there. m is churns per "
                             "customer-month; q is the probability of churning within the "
                             "band (1 − exp(−m × the band's width in months)), so bands of "
                             "different widths are not compared by q but by m.",
                       table=shown, csv=frame, show_rows=60),))


def expected_page(run: Any) -> Page:
    o = run.get(step.ACTUAL_VS_EXPECTED)
    title = "Actual against expected by segment"
    if not o.ok:
        return Page("expected", "Actual vs expected", "Observed churns against a basis.",
                    (failure_section(title, o),), cautions=ACTUARIAL_CAUTIONS,
                    nav_label="Actual vs expected", group="actuarial")
    return ae_page(run, o.value)


def ae_page(run: Any, ae: Any) -> Page:
    frame = ae.to_frame()
    book = frame.iloc[0]
    facts = (Fact("Actual churns", num(float(book["actual"])), "whole book", "ae-actual",
                  float(book["actual"])),
             Fact("Expected churns", num(float(book["expected"]), 1), ae.basis, "ae-expected",
                  float(book["expected"])),
             Fact("A/E, whole book", f"{float(book['ratio']):.3f}",
                  interval_text(float(book["lower"]), float(book["upper"]),
                                lambda v: f"{v:.3f}"), "ae-ratio", float(book["ratio"])))
    sections = [Section("The basis", intro=f"Expected churns come from {ae.basis}: for every "
                        "start-stop row the basis's hazard is integrated over the row's "
                        "interval and summed by segment. A/E above 1 means more churn than the "
                        "basis expects. Intervals: " + ae.interval + ".", facts=facts,
                        bullets=tuple(ae.warnings))]
    dims = [d for d in dict.fromkeys(frame["dimension"]) if d != "all"]
    for dim in dims:
        part = frame[frame["dimension"] == dim].reset_index(drop=True)
        shown = part.drop(columns=["dimension"])
        flagged = int((part["flag"] != "").sum())
        label = dim.replace("_", " ")
        chart = None
        chart_name = f"expected_{slug(dim).replace('-', '_')}"
        if dim in ("calendar_month", "cohort", "tenure_month"):
            chart = charts.ratio_series_chart(part, chart_name, x="level", estimate="ratio",
                                              lower="lower", upper="upper", x_title=label,
                                              y_title="A/E (1 = as expected)")
        else:
            chart = charts.interval_bars(
                part, chart_name, label="level",
                estimate="ratio", lower="lower", upper="upper", x_title="A/E (1 = as expected)",
                reference=1.0, x_format=".2f")
        sections.append(Section(f"By {label}", intro=f"{flagged} of {len(part)} levels have an "
                                "interval that excludes 1 (flagged above or below).",
                                figures=(Figure(
            key=f"expected-{slug(dim)}", title=f"A/E by {label}",
            guide="Each bar (or point) is actual ÷ expected churns with its 95 % exact Poisson "
                  "interval; the dashed line at 1 is 'as the basis expects'. Where the "
                  "interval excludes 1 the level is flagged. The credibility column blends a "
                  "small level's experience with the whole book (limited fluctuation, full "
                  f"credibility at {ae.full_credibility:,.0f} expected churns; common practice).",
            chart=chart, table=shown, csv=part, show_rows=60),)))
    return Page("expected", "Actual vs expected", "Is churn what the basis expected? Observed "
                "churns against the churns the basis predicts for the same exposure, by "
                "segment, cohort and calendar month.", tuple(sections),
                cautions=ACTUARIAL_CAUTIONS + (ae.caution,), nav_label="Actual vs expected",
                group="actuarial")


def _cause_cox_section(run: Any) -> Section:
    o = run.get(step.CAUSE_COX)
    title = "What drives each kind of churn"
    if not o.ok:
        return failure_section(title, o)
    cs = o.value
    hr = cs.to_frame()
    frame = pd.DataFrame({"term": [f"{t} · {c}" for t, c in zip(hr["term"], hr["cause"],
                                                               strict=True)],
                          "cause": hr["cause"], "hazard_ratio": hr["hazard_ratio"],
                          "lower": hr["hr_low"], "upper": hr["hr_high"],
                          "p_value": hr["p_value"]})
    # each term's causes side by side, terms in the model's order
    position = frame.groupby("cause", sort=False).cumcount().to_numpy()
    rank = frame["cause"].map({c: i for i, c in enumerate(cs.causes)}).to_numpy()
    frame = frame.iloc[np.lexsort((rank, position))].reset_index(drop=True)
    return Section(title, intro="One Cox model per cause, the other cause treated as "
                   "censored (cause-specific hazards). A hazard ratio compares the rate of "
                   "leaving for that reason among customers still subscribed; it is not a "
                   "ratio of the shares above.", bullets=tuple(cs.warnings), figures=(Figure(
        key="causes-hazard-ratios", title="Hazard ratios by cause",
        guide="Each attribute appears once per cause. An attribute that raises one kind of "
              "churn and not the other points to its cure: pricing and product for voluntary "
              "churn, payment recovery for involuntary churn. Whiskers are 95 % intervals.",
        chart=charts.forest_chart(frame, "causes_hazard_ratios", group="cause"),
        table=frame, csv=hr),))


def causes_page(run: Any) -> Page:
    o = run.get(step.INCIDENCE)
    title = "Cumulative incidence by cause"
    if not o.ok:
        return Page("causes", "Churn by cause", "Voluntary and involuntary churn apart.",
                    (failure_section(title, o),), nav_label="Churn by cause", group="actuarial")
    ci = o.value
    frame = ci.to_frame()
    seg = frame[frame["segment"] == frame["segment"].iloc[0]]
    parts = []
    for cause in ci.causes:
        g = seg[seg["cause"] == cause]
        t0 = pd.DataFrame({"month": [0.0], "cif": [0.0], "lower": [0.0], "upper": [0.0],
                           "naive": [0.0]})
        g = pd.concat([t0, g[["month", "cif", "lower", "upper", "naive"]]], ignore_index=True)
        parts.append(pd.DataFrame({"curve": f"{cause} (Aalen–Johansen)", "month": g["month"],
                                   "probability": g["cif"], "lower": g["lower"],
                                   "upper": g["upper"]}))
        parts.append(pd.DataFrame({"curve": f"{cause}, 1 − KM (overstates)",
                                   "month": g["month"], "probability": g["naive"],
                                   "lower": math.nan, "upper": math.nan}))
    chart_frame = pd.concat(parts, ignore_index=True)
    dashed = {lv: "1 − KM" in lv for lv in chart_frame["curve"].unique()}
    over = ci.overstatement
    facts = []
    for cause in ci.causes:
        rows = over[(over["cause"] == cause) & (over["month"] == 12.0)]
        if len(rows):
            r = rows.iloc[0]
            facts.append(Fact(f"{cause.capitalize()} churn by 12 months", pct(float(r["cif"])),
                              f"1 − KM says {pct(float(r['naive']))}: "
                              f"{100 * float(r['difference']):.1f} points too high",
                              f"cif-12m-{slug(cause)}", float(r["cif"])))
    fig = Figure(
        key="causes-incidence", title="Share churned by each cause, by tenure",
        guide="Solid lines are the probability of having churned from each cause by a given "
              "month, with 95 % bands (Aalen–Johansen: the causes add up to all churn). Dashed "
              "lines are 1 − Kaplan–Meier with the other cause treated as censoring, which "
              "answers 'what if the other cause did not exist' and so overstates each cause.",
        chart=charts.lines_chart(chart_frame, "causes_incidence", x="month", y="probability",
                                 series="curve", x_title="Months since start",
                                 y_title="Churned from this cause", dashed=dashed, step=True,
                                 lower="lower", upper="upper"),
        table=over, csv=frame)
    sections = [Section(title, intro=ci.summary(), facts=tuple(facts), bullets=ci.warnings,
                        figures=(fig,)), _cause_cox_section(run)]
    return Page("causes", "Churn by cause", "Voluntary churn (a customer chose to leave) and "
                "involuntary churn (payment failed) have different causes and cures; here they "
                "are kept apart as competing risks.", tuple(sections),
                cautions=ACTUARIAL_CAUTIONS[:1],
                assumptions=(f"method: {ci.method}", f"intervals: {ci.interval}"),
                nav_label="Churn by cause", group="actuarial")


# --------------------------------------------------------------------------- value
def value_page(run: Any) -> Page:
    spec = run.options.to_dict()["value"]  # the [value] keys as results.json has them
    sections: list[Section] = []
    assumptions: list[str] = []
    if spec:
        margin = (f"margin per month {spec['margin_per_month']:g}"
                  if spec.get("margin_per_month") is not None else
                  f"margin per month = {spec.get('margin_rate')} × the segment's mean monthly "
                  f"{spec.get('price') or 'price'}")
        rate = 100 * float(spec.get("annual_discount_rate", 0))
        assumptions += [margin, f"annual discount rate {rate:g} %",
                        f"horizon {spec.get('horizon_months')} months",
                        f"retention curve: {spec.get('curve')} model fitted per segment"]
    allv = run.get(step.VALUE_ALL)
    if allv.ok and allv.value.values:
        v = allv.value.values[0]
        assumptions += [v.timing, f"interval: {v.interval_method}"]
        facts = (Fact("Value of a new customer", num(v.value, 2),
                      interval_text(v.lower, v.upper, lambda x: num(x, 2)), "ltv-all", v.value),
                 Fact("Expected months kept", num(v.expected_months, 1),
                      f"within {v.horizon_months} months", "ltv-months", v.expected_months))
        sections.append(Section("A new customer", facts=facts, bullets=tuple(v.warnings)))
    else:
        sections.append(failure_section("A new customer", allv))
    seg = run.get(step.VALUE_SEGMENTS)
    if seg.ok:
        sv = seg.value
        frame = sv.to_frame()
        shown = frame[["segment", "customers", "margin_per_month", "value", "lower", "upper",
                       "expected_months", "survival_at_horizon", "extrapolated_months"]]
        by = ", ".join(sv.by) or "all"
        sections.append(Section(f"By {by}", bullets=tuple(sv.warnings) + tuple(
            f"{x.segment}: {w}" for x in sv.values for w in x.warnings), figures=(Figure(
            key="value-segments", title=f"Lifetime value of a new customer by {by}",
            guide="Bars are the expected discounted margin of one new customer over the "
                  "horizon; whiskers are 95 % intervals from the model's parameter "
                  "uncertainty only (not from future changes in price, cost or behaviour). "
                  "Compare segments by whether their whiskers overlap.",
            chart=charts.interval_bars(shown, "value_segments", label="segment",
                                       estimate="value", lower="lower", upper="upper",
                                       x_title="Value of a new customer", x_format=",.0f"),
            table=shown, csv=frame),)))
    else:
        sections.append(failure_section("By segment", seg))
    base = run.get(step.VALUE_BASE)
    if base.ok:
        bv = base.value
        frame = bv.to_frame()
        shown = frame[["segment", "customers", "value_per_customer", "lower", "upper", "total",
                       "total_lower", "total_upper", "extrapolated_months"]]
        sections.append(Section("The active base", intro=bv.summary(),
                                facts=(Fact("Residual value of the base", num(bv.total, 0),
                                            f"{num(sum(x.customers for x in bv.segments))} "
                                            "active customers", "base-total", bv.total),),
                                bullets=tuple(bv.warnings), figures=(Figure(
            key="value-base", title="Residual value of active customers",
            guide="For each customer active on the as-of date: the expected discounted margin "
                  "still to come, given the tenure already reached, summed by segment. "
                  "Intervals cover model uncertainty only.",
            table=shown, csv=frame),)))
    else:
        sections.append(failure_section("The active base", base))
    finance = run.get(step.VALUE_FINANCE)
    if finance.ok:
        fin = finance.value
        sections.append(Section("Finance file", intro="One row per figure and segment, with "
                                "every assumption and the caution on each row, for finance "
                                "systems.", figures=(Figure(
            key="value-finance", title="Finance CSV",
            guide="The same figures as above in one file: 'new customer' rows give the value "
                  "of one new customer, 'active base' rows the residual value of the segment's "
                  "active customers. The CSV also carries the interval method, margin basis, "
                  "timing and the caution on every row.",
            table=fin[["figure", "segment", "customers", "value_per_customer", "lower", "upper",
                       "total", "curve", "annual_discount_rate", "horizon_months", "as_of"]],
            csv=fin, show_rows=20),)))
    from_caution = getattr(seg.value, "caution", "") if seg.ok else ""
    cautions = MONEY_CAUTIONS + ((from_caution,) if from_caution else ())
    return Page("value", "Value", "What a customer is worth in discounted margin, for new "
                "customers by segment and for the active base.", tuple(sections),
                cautions=cautions, assumptions=tuple(assumptions), nav_label="Value")


# --------------------------------------------------------------------------- experiments
def experiments_page(run: Any) -> Page:
    sections: list[Section] = []
    names = list(run.options.experiments)
    if not names:
        sections.append(Section("No experiments declared", intro="Declare a pricing or "
                                "retention experiment in retain.toml under [experiments.NAME] "
                                "to see its verdict here."))
    for name in names:
        o = run.get(step.experiment(name))
        title = f"Experiment {name}"
        if not o.ok:
            sections.append(failure_section(title, o))
            continue
        sections.append(_experiment_section(name, o.value))
    return Page("experiments", "Experiments", "One section per declared experiment: did the "
                "treatment change retention and revenue against the control?", tuple(sections),
                cautions=("Verdicts are statistical: an interval that excludes no effect is "
                          "evidence, not proof, and an interim verdict can change as the "
                          "experiment matures.", MONEY_CAUTIONS[1]),
                nav_label="Experiments")


def experiment_verdict_text(v: Any) -> str:
    """One plain sentence per treatment arm: what happened, and how sure we are."""
    parts = []
    status = "Interim verdict" if v.interim else "Verdict"
    for t in v.treatments:
        adj = next((a for a in v.adjusted if a.treatment == t), None)
        if adj is None:
            parts.append(f"{t}: no adjusted hazard ratio could be computed")
            continue
        if adj.lower > 1:
            what = (f"customers on {t} churned faster than on {v.control} (hazard ratio "
                    f"{adj.hazard_ratio:.2f}, 95 % interval {adj.lower:.2f} to {adj.upper:.2f})")
        elif adj.upper < 1:
            what = (f"customers on {t} churned more slowly than on {v.control} (hazard ratio "
                    f"{adj.hazard_ratio:.2f}, 95 % interval {adj.lower:.2f} to {adj.upper:.2f})")
        else:
            what = (f"no clear difference in churn between {t} and {v.control} (hazard ratio "
                    f"{adj.hazard_ratio:.2f}, 95 % interval {adj.lower:.2f} to {adj.upper:.2f})")
        rv = next((r for r in v.revenue if r.treatment == t), None)
        if rv is not None:
            sign = "more" if rv.difference > 0 else "less"
            clear = "" if (rv.lower > 0 or rv.upper < 0) else ", not a clear difference"
            what += (f"; revenue per assigned customer over {rv.horizon_days:g} days was "
                     f"{num(abs(rv.difference), 2)} {sign} (95 % interval {num(rv.lower, 2)} to "
                     f"{num(rv.upper, 2)}{clear})")
        parts.append(what)
    return f"{status} at {v.analysis_horizon_days:g} days: " + "; ".join(parts) + "."


def _experiment_section(name: str, v: Any) -> Section:
    key = slug(name)
    cmp_frame = v.to_frame()
    facts = []
    for a in v.adjusted:
        facts.append(Fact(f"Hazard ratio, {a.treatment} vs {v.control}", f"{a.hazard_ratio:.2f}",
                          f"95 % interval {a.lower:.2f} to {a.upper:.2f}; adjusted for "
                          f"{', '.join(a.covariates) or 'nothing'}",
                          f"experiment-{key}-hr-{slug(a.treatment)}", a.hazard_ratio))
    for r in v.revenue:
        facts.append(Fact(f"Revenue per customer, {r.treatment} − {r.control}",
                          num(r.difference, 2), f"95 % interval {num(r.lower, 2)} to "
                          f"{num(r.upper, 2)} over {r.horizon_days:g} days",
                          f"experiment-{key}-revenue-{slug(r.treatment)}", r.difference))
    facts.append(Fact("Log-rank test", "p < 0.001" if v.logrank.p_value < 0.001 else
                      f"p = {v.logrank.p_value:.3f}", f"χ² {v.logrank.statistic:.1f} on "
                      f"{v.logrank.df} df", f"experiment-{key}-logrank", v.logrank.p_value))
    power = v.power if isinstance(v.power, dict) else {}
    bullets = [f"Selection: {v.selection}."]
    for t in v.treatments:
        det = power.get(t, {}).get("detectable_hazard_ratio") if isinstance(
            power.get(t), dict) else None
        if det:
            bullets.append(f"With the {num(power.get('events', math.nan))} churns observed, the "
                           f"smallest hazard ratio this experiment could detect for {t} (80 % "
                           f"power, 5 % two-sided) is about {det:.2f}.")
    bullets += list(v.warnings)
    figs = (
        curves_figure(f"experiment-{key}-curves", f"Retention by arm ({name})",
                      "One line per arm, with 95 % bands, up to the analysis horizon. Lines "
                      "that part early and stay apart show an effect on churn.",
                      v.curves.items(), series_title=v.arm),
        Figure(key=f"experiment-{key}-comparison", title="Treatment against control",
               guide="Per treatment arm: the adjusted hazard ratio, the difference in "
                     "restricted mean tenure (days kept within the horizon) and in revenue "
                     "per assigned customer, each with its 95 % interval.",
               table=cmp_frame),
        Figure(key=f"experiment-{key}-arms", title="Arms", guide="Customers, churns and revenue "
               "per arm.", table=v.arms),
        Figure(key=f"experiment-{key}-balance", title="Balance of pre-assignment attributes",
               guide="Share of each attribute level per arm. Large differences (flagged) mean "
                     "the arms were not comparable, and only the adjusted hazard ratio should "
                     "be read.", table=v.balance),
    )
    return Section(f"Experiment {name}" + (" (interim)" if v.interim else ""),
                   verdict=experiment_verdict_text(v), facts=tuple(facts), bullets=tuple(bullets),
                   figures=figs, anchor=f"experiment-{key}")


# --------------------------------------------------------------------------- the site
PAGE_BUILDERS: tuple[Callable[[Any], Page], ...] = (
    overview_page, curves_page, cohorts_page, hazards_page, fit_page, value_page,
    experiments_page, quality_page, decrements_page, expected_page, causes_page,
)


STRICT_ENV = "RETAIN_STRICT_PAGES"  # "1": a page builder's exception raises (tests set it)


def strict_pages() -> bool:
    """Whether the environment asks page builders' exceptions to raise."""
    return os.environ.get(STRICT_ENV, "").strip() not in ("", "0")


def _build_page(builder: Callable[[Any], Page], run: Any, strict: bool) -> Page:
    """A page, or, if assembling it fails, a page that names the cause (the site still
    builds). With ``strict`` the exception is raised instead."""
    try:
        return builder(run)
    except Exception as exc:  # noqa: BLE001 - one broken page must not hide the others
        if strict:
            raise
        return error_page(builder.__name__.removesuffix("_page"), exc)


def error_page(name: str, exc: Exception) -> Page:
    """The page shown in place of page ``name`` when assembling it raised ``exc``.

    A :class:`~retain.errors.RetainError` is a refusal with a reason and is shown as
    its one line; any other exception is a bug, shown with the place it was raised.
    """
    if isinstance(exc, RetainError):
        cause = exc.message
    else:
        tb = traceback.extract_tb(exc.__traceback__)
        at = f" (at {tb[-1].name}, {tb[-1].filename.rsplit('/', 1)[-1]}:{tb[-1].lineno})" \
            if tb else ""
        cause = (f"internal error {type(exc).__name__}: {exc}{at} -- this is a bug in retain; "
                 "please report it")
    return Page(name, name.replace("_", " ").capitalize(), "This page could not be assembled.",
                (Section("Error", failure=cause),))


def site_content(run: Any, *, strict: bool | None = None) -> SiteContent:
    """All pages for one run, in navigation order.

    ``strict`` (default: the environment variable ``RETAIN_STRICT_PAGES``) makes an
    exception inside a page builder raise instead of becoming an error page.
    """
    strict = strict_pages() if strict is None else strict
    pages = tuple(_build_page(builder, run, strict) for builder in PAGE_BUILDERS)
    return SiteContent(title=run.options.title, as_of=run.options.to_dict()["as_of"], pages=pages,
                       results=run.to_dict(), source=run.options.source)
