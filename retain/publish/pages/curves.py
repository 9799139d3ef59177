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
    cohorts = [str(c) for c in ct.cohorts]
    entry = dict(zip(cohorts, np.asarray(ct.entered_at, dtype=float), strict=True))
    # a cohort whose KM starts after tenure 0 signed up before the window's first day:
    # its customers are seen only from part-way through their life (left truncation)
    late = [c for c in cohorts if entry[c] > 0]
    long = long.assign(left_truncated=long["cohort"].astype(str).map(entry).gt(0).to_numpy())
    wide = ct.retention_frame()
    shown = wide.copy()
    shown.columns = [f"m{c}" for c in shown.columns]
    shown = shown.reset_index()
    shown.insert(1, "observed from", [_observed_from(entry[str(c)]) for c in shown.iloc[:, 0]])
    heat = heat_colours(wide.to_numpy(dtype=float))
    for part in (heat["colours"], heat["inks"]):
        for cells in part:
            cells.insert(1, "")
    cells = np.isfinite(ct.retention)
    guide = prose.COHORTS_GUIDE + (" " + prose.COHORTS_OUTLINE_GUIDE if late else "")
    fig = Figure(
        key="cohorts-retention", title="Cohort × month retention", guide=guide,
        chart=charts.heat_chart(long[["cohort", "month", "retention", "left_truncated"]],
                                "cohorts_retention", row="cohort", column="month",
                                value="retention", row_title="",
                                column_title="Months since start", value_title="Retained",
                                outlined="left_truncated", rows=cohorts),
        table=shown, csv=long, heat=heat, show_rows=len(shown))
    n = len(cohorts)
    facts = (Fact("Cohorts", num(n), f"{cohorts[0]} to {cohorts[-1]}" if cohorts else "",
                  "cohorts", float(n)),
             Fact("Observable cells", num(int(cells.sum())),
                  f"of {num(cells.size)}; the rest are not yet reached", "cohort-cells",
                  float(cells.sum())))
    bullets = [w for w in ct.warnings if not any(
        w.startswith(f"cohort {c} entered observation") for c in late)]
    if late:
        bullets.insert(0, prose.COHORTS_TRUNCATED.format(
            count=_count(len(late), "cohort"), first=late[0], last=late[-1],
            days=_count(int(max(entry[c] for c in late)), "day")))
    return Page("cohorts", "Cohorts", prose.COHORTS_LEAD,
                (Section(title, facts=facts, bullets=tuple(bullets), figures=(fig,)),),
                nav_label="Cohorts")


def _count(n: int, noun: str) -> str:
    """'1 day', '7 cohorts': the number with thousands separators and the right plural."""
    return f"{n:,} {noun}" if n == 1 else f"{n:,} {noun}s"


def _observed_from(days: float) -> str:
    """The table's 'observed from' cell: signup, or the tenure at which observation began."""
    return f"day {days:,.0f}" if days > 0 else "signup"
