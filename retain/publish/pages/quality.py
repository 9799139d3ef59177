"""The data-quality page: reconciliation of the event log, quarantined rows, the table."""

from __future__ import annotations

from typing import Any

import pandas as pd

from retain.publish.content import Fact, Figure, Page, Section
from retain.publish.pages import prose
from retain.publish.pages.shared import as_frame, num

QUARANTINE_SAMPLE = 5


def quality_page(run: Any) -> Page:
    t = run.table
    sections: list[Section] = []
    prepared = run.prepared  # retain.run.PreparationRecord; None for a table made elsewhere
    if prepared is None:
        sections.append(Section("Reconciliation", intro=prose.NO_RECONCILIATION))
    else:
        sections.append(_reconciliation_section(prepared.reconciliation))
        # the quarantine is kept as the Arrow table prepare wrote
        sections.append(_quarantine_section(prepared.quarantine.to_pandas(),
                                            prepared.unknown_events))
    cause_counts = t.cause.counts(t.weight * t.churned)
    facts = (Fact("Start-stop rows", num(t.n_rows), "", "table-rows", float(t.n_rows)),
             Fact("Customers", num(t.n_customers), "", "table-customers", float(t.n_customers)),
             Fact("Churns", num(t.n_events), ", ".join(f"{k} {num(v)}" for k, v in
                                                       cause_counts.items()),
                  "table-churns", float(t.n_events)))
    sections.append(Section("The start-stop table", intro=prose.TABLE_INTRO, facts=facts))
    return Page("quality", "Data quality", prose.QUALITY_LEAD, tuple(sections),
                nav_label="Data quality")


def _reconciliation_section(rec: Any) -> Section:
    frame = as_frame(rec)
    identity = prose.RECONCILIATION_IDENTITY.format(
        rows_in=num(rec.rows_in), used=num(rec.used), outside=num(rec.outside_window),
        ignored=num(rec.ignored), quarantined=num(rec.quarantined))
    made = prose.RECONCILIATION_TABLE.format(
        rows=num(rec.n_intervals), customers=num(rec.n_customers), spells=num(rec.n_spells),
        churns=num(rec.n_churns))
    return Section("Reconciliation", intro=f"Read from {rec.source}. {identity} {made}",
                   figures=(Figure(key="quality-reconciliation",
                                   title="Rows in, used and set aside",
                                   guide=prose.RECONCILIATION_GUIDE,
                                   table=frame, show_rows=len(frame)),))


def _quarantine_section(frame: pd.DataFrame, unknown: dict[str, int]) -> Section:
    reason = next((c for c in frame.columns if "reason" in str(c) and "quarantine" in str(c)),
                  None)
    if reason is not None:
        frame = frame[[reason] + [c for c in frame.columns if c != reason]]
        frame = frame.sort_values([reason] + [c for c in frame.columns[1:2]], kind="stable")
        sample = frame.groupby(reason, sort=True).head(QUARANTINE_SAMPLE)
    else:
        sample = frame
    bullets = tuple(f"unknown event value {k!r}: {num(float(v))} rows — map it in [events] map "
                    "or list it in [events] ignore" for k, v in sorted(unknown.items()))
    return Section("Quarantined rows (sample)", bullets=bullets, figures=(Figure(
        key="quality-quarantine", title="Rows set aside",
        guide=prose.QUARANTINE_GUIDE.format(sample=QUARANTINE_SAMPLE),
        table=sample.reset_index(drop=True), csv=frame, show_rows=len(sample)),))
