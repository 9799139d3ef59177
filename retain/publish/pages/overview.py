"""The overview page: the book in a few numbers, what moves churn most, the retention curve."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from retain import step_names as step
from retain.publish.content import Fact, Page, Section
from retain.publish.pages import prose
from retain.publish.pages.shared import (
    curves_figure,
    failure_section,
    hazard_frame,
    interval_text,
    left_out,
    level_text,
    months_text,
    not_set_up_section,
    num,
    pct,
)


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
                          interval_text(med.lower, med.upper, months_text, med.level),
                          "median-days", med.days))
        s12 = float(c.at_months(12)[0])
        lo, hi = (float(x[0]) for x in c.interval_at_months(12))
        facts.append(Fact("Retained at 12 months", pct(s12),
                          interval_text(lo, hi, pct, c.level) if math.isfinite(s12) else
                          "not yet observed", "retention-12m", s12))
    sections.append(Section(
        "The book at a glance", facts=tuple(facts),
        failure=None if (book.ok and km.ok) else (book.error or km.error)))
    off = left_out(run)
    if "hazard-ratios" not in off:
        sections.append(_hazard_words(run))
    if km.ok:
        fig = curves_figure("overview-retention", "Retention of all customers",
                            prose.OVERVIEW_RETENTION_GUIDE.format(
                                level=level_text(km.value.level)),
                            [("all customers", km.value)])
        sections.append(Section("Retention curve", figures=(fig,)))
    # what the project file leaves out here and the pages it leaves out (value, causes)
    lines = not_set_up_section(off[k] for k in ("hazard-ratios", "lifetime-value", "cause-split")
                               if k in off)
    if lines is not None:
        sections.append(lines)
    return Page("overview", "Overview", prose.OVERVIEW_LEAD, tuple(sections),
                nav_label="Overview")


def _hazard_words(run: Any) -> Section:
    cox = run.get(step.COX)
    title = "What moves churn most"
    if not cox.ok:
        return failure_section(title, cox)
    words = hazard_sentences(cox.value, 3)
    return Section(title, intro=prose.HAZARD_WORDS_INTRO, bullets=tuple(words))


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
        ci = interval_text(float(r["lower"]), float(r["upper"]), lambda v: f"{v:.2f}", cox.level)
        out.append(f"{r['term']}: {what} at any tenure (hazard ratio {hr:.2f}, {ci}).")
    return out
