"""The actuarial pages: decrement table, actual against expected, churn by cause."""

from __future__ import annotations

import math
from typing import Any

import numpy as np
import pandas as pd

from retain import step_names as step
from retain.publish import charts
from retain.publish.content import Fact, Figure, Page, Section, slug
from retain.publish.pages import prose
from retain.publish.pages.shared import (
    failure_section,
    interval_text,
    left_out,
    level_text,
    not_set_up_section,
    num,
    pct,
)

RATE_SERIES = ("calendar_month", "cohort", "tenure_month")  # A/E drawn as a series, not bars


# --------------------------------------------------------------------------- decrements
def decrements_page(run: Any) -> Page:
    o = run.get(step.DECREMENTS)
    title = "Decrement table by tenure month"
    if not o.ok:
        return Page("decrements", "Decrement table", "Churn as decrements with exposure.",
                    (failure_section(title, o),), cautions=prose.ACTUARIAL_CAUTIONS,
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
    by_cause = (["churns_voluntary", "churns_involuntary"]
                if "cause-split" not in left_out(run) else [])
    shown = seg[["label", "in_force", "exposure", "churns", *by_cause, "m", "q", "q_lower",
                 "q_upper", "survivors"]]
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
    figs = [Figure(
        key="decrements-q", title="Monthly churn probability q by tenure month",
        guide=prose.DECREMENTS_GUIDE.format(level=level_text(dt.level)),
        chart=charts.lines_chart(chart_frame, "decrements_q", x="month", y="q", series="rate",
                                 x_title="Tenure month", y_title="q (monthly probability)",
                                 lower="lower", upper="upper",
                                 points="crude q", y_format=".1%"),
        table=shown, csv=frame, show_rows=60)]
    if grad.ok:
        gr = grad.value
        figs.append(Figure(key="decrements-graduation",
                           title="Graduation and its adherence tests",
                           guide=prose.GRADUATION_GUIDE, table=gr.tests, note=gr.summary()))
    sections = [Section(title, intro=dt.summary(), facts=facts,
                        bullets=tuple(notes) + tuple(dt.warnings), figures=tuple(figs))]
    bands = run.get(step.DECREMENTS_BANDS)
    if bands.kind != "absent":
        sections.append(_band_decrements_section(bands))
    return Page("decrements", "Decrement table", prose.DECREMENTS_LEAD, tuple(sections),
                cautions=prose.ACTUARIAL_CAUTIONS, assumptions=tuple(dt.assumptions),
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
                       "decrement_edges", guide=prose.BANDS_GUIDE, table=shown, csv=frame,
                       show_rows=60),))


# --------------------------------------------------------------------------- actual vs expected
def expected_page(run: Any) -> Page:
    o = run.get(step.ACTUAL_VS_EXPECTED)
    title = "Actual against expected by segment"
    if not o.ok:
        return Page("expected", "Actual vs expected", "Observed churns against a basis.",
                    (failure_section(title, o),), cautions=prose.ACTUARIAL_CAUTIONS,
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
                                lambda v: f"{v:.3f}", ae.level), "ae-ratio", float(book["ratio"])))
    sections = [Section("The basis", intro=prose.AE_BASIS_INTRO.format(basis=ae.basis,
                                                                      interval=ae.interval),
                        facts=facts, bullets=tuple(ae.warnings))]
    dims = [d for d in dict.fromkeys(frame["dimension"]) if d != "all"]
    for dim in dims:
        part = frame[frame["dimension"] == dim].reset_index(drop=True)
        sections.append(_ae_dimension_section(dim, part, ae.full_credibility, ae.level))
    return Page("expected", "Actual vs expected", prose.EXPECTED_LEAD, tuple(sections),
                cautions=prose.ACTUARIAL_CAUTIONS + (ae.caution,),
                nav_label="Actual vs expected", group="actuarial")


def _ae_dimension_section(dim: str, part: pd.DataFrame, full_credibility: float,
                          level: float) -> Section:
    """A/E by the levels of one dimension (a segment, the cohort or the calendar month)."""
    shown = part.drop(columns=["dimension"])
    flagged = int((part["flag"] != "").sum())
    label = dim.replace("_", " ")
    chart_name = f"expected_{slug(dim).replace('-', '_')}"
    if dim in RATE_SERIES:
        chart = charts.ratio_series_chart(part, chart_name, x="level", estimate="ratio",
                                          lower="lower", upper="upper", x_title=label,
                                          y_title="A/E (1 = as expected)")
    else:
        chart = charts.interval_bars(
            part, chart_name, label="level",
            estimate="ratio", lower="lower", upper="upper", x_title="A/E (1 = as expected)",
            reference=1.0, x_format=".2f")
    return Section(f"By {label}", intro=f"{flagged} of {len(part)} levels have an interval "
                   "that excludes 1 (flagged above or below).", figures=(Figure(
                       key=f"expected-{slug(dim)}", title=f"A/E by {label}",
                       guide=prose.AE_GUIDE.format(full_credibility=full_credibility,
                                                    level=level_text(level)),
                       chart=chart, table=shown, csv=part, show_rows=60),))


# --------------------------------------------------------------------------- causes
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
                          "lower": hr["lower"], "upper": hr["upper"],
                          "p_value": hr["p_value"]})
    # each term's causes side by side, terms in the model's order
    position = frame.groupby("cause", sort=False).cumcount().to_numpy()
    rank = frame["cause"].map({c: i for i, c in enumerate(cs.causes)}).to_numpy()
    frame = frame.iloc[np.lexsort((rank, position))].reset_index(drop=True)
    return Section(title, intro=prose.CAUSE_COX_INTRO, bullets=tuple(cs.warnings),
                   figures=(Figure(
                       key="causes-hazard-ratios", title="Hazard ratios by cause",
                       guide=prose.CAUSE_COX_GUIDE.format(level=level_text(cs.level)),
                       chart=charts.forest_chart(frame, "causes_hazard_ratios", group="cause"),
                       table=frame, csv=hr),))


def causes_page(run: Any) -> Page | None:
    """The page of churn by cause, or None when every churn has the same cause (the page
    is left out and the overview says how to record a second cause)."""
    off = left_out(run)
    if "cause-split" in off:
        return None
    o = run.get(step.INCIDENCE)
    title = "Cumulative incidence by cause"
    if not o.ok:
        return Page("causes", "Churn by cause", "Voluntary and involuntary churn apart.",
                    (failure_section(title, o),), nav_label="Churn by cause", group="actuarial")
    ci = o.value
    frame = ci.to_frame()
    chart_frame = _incidence_curves(ci, frame[frame["segment"] == frame["segment"].iloc[0]])
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
        guide=prose.INCIDENCE_GUIDE.format(level=level_text(ci.level)),
        chart=charts.lines_chart(chart_frame, "causes_incidence", x="month", y="probability",
                                 series="curve", x_title="Months since start",
                                 y_title="Churned from this cause", dashed=dashed, step=True,
                                 lower="lower", upper="upper"),
        table=over, csv=frame)
    sections = [Section(title, intro=ci.summary(), facts=tuple(facts), bullets=ci.warnings,
                        figures=(fig,))]
    if "cause-hazard-ratios" in off:
        sections.append(not_set_up_section([off["cause-hazard-ratios"]]))
    else:
        sections.append(_cause_cox_section(run))
    return Page("causes", "Churn by cause", prose.CAUSES_LEAD, tuple(sections),
                cautions=prose.ACTUARIAL_CAUTIONS[:1],
                assumptions=(f"method: {ci.method}", f"intervals: {ci.interval}"),
                nav_label="Churn by cause", group="actuarial")


def _incidence_curves(ci: Any, seg: pd.DataFrame) -> pd.DataFrame:
    """Per cause, the Aalen–Johansen curve and the 1 − KM curve, each from (0, 0)."""
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
    return pd.concat(parts, ignore_index=True)
