"""The retention-curve pages: Kaplan–Meier overall and by segment, and the cohort table."""

from __future__ import annotations

from typing import Any

import numpy as np

from retain import step_names as step
from retain.publish import charts
from retain.publish.content import Fact, Figure, Page, Section, slug
from retain.publish.pages import prose
from retain.publish.pages.shared import (
    curves_figure,
    failure_section,
    heat_colours,
    level_text,
    levels_text,
    months_text,
    num,
)


def curves_page(run: Any) -> Page:
    sections: list[Section] = []
    km = run.get(step.KM)
    if km.ok:
        c = km.value
        sections.append(Section(
            "All customers",
            intro=c.summary() + ".",
            figures=(curves_figure("curves-all", "Retention of all customers",
                                   prose.CURVES_ALL_GUIDE.format(level=level_text(c.level)),
                                   [("all customers", c)]),)))
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
            title, intro=prose.CURVES_SEGMENT_INTRO.format(segment=seg, basis=sc.basis)
            + "; ".join(meds) + ".",
            bullets=tuple(sc.warnings),
            figures=(curves_figure(
                f"curves-{slug(seg)}", f"Retention by {seg}",
                prose.CURVES_SEGMENT_GUIDE.format(
                    segment=seg, level=levels_text(c for _, c in sc.items())), sc.items(),
                series_title=seg),)))
    return Page("curves", "Retention curves", prose.CURVES_LEAD, tuple(sections),
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
    heat = heat_colours(wide.to_numpy(dtype=float))
    cells = np.isfinite(ct.retention)
    fig = Figure(
        key="cohorts-retention", title="Cohort × month retention", guide=prose.COHORTS_GUIDE,
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
    return Page("cohorts", "Cohorts", prose.COHORTS_LEAD,
                (Section(title, facts=facts, bullets=tuple(ct.warnings), figures=(fig,)),),
                nav_label="Cohorts")
