"""Why a row of the log was set aside: the one table of quarantine reasons.

Each reason has a short stable code (what downstream checks and dashboards key
on: it never changes with the wording), the sentence the SQL steps write into
``quarantine_reason`` and the reconciliation, and what to do about it. The table
is in the order the rules are tried (DEVELOPERS.md, "Preparation rules"): the
first reason that applies to a row is its reason.

:func:`prepare` loads it onto the DuckDB connection (``sql/01_reason_codes.sql``)
so the quarantine table carries ``quarantine_code`` beside ``quarantine_reason``
and the reconciliation counts rows by code as well as by sentence.
"""

from __future__ import annotations

from dataclasses import dataclass


@dataclass(frozen=True)
class QuarantineReason:
    """One reason a row is quarantined."""

    code: str
    sentence: str
    fix: str


REASONS: tuple[QuarantineReason, ...] = (
    QuarantineReason("malformed_record", "malformed CSV record",
                     "the record does not split into the header's fields: check its quotes "
                     "and delimiters, or [source] delimiter / quote / escape"),
    QuarantineReason("missing_id", "missing id",
                     "fill the customer id at the source (an empty or blank id cannot be "
                     "attached to a customer)"),
    QuarantineReason("non_finite_time", "non-finite time",
                     "replace infinity / -infinity times at the source with real times"),
    QuarantineReason("time_out_of_range", "time out of range",
                     "times must lie in 1900-01-01 .. 2199-12-31: check the time column and "
                     "[columns] time_format (seconds versus milliseconds)"),
    QuarantineReason("unparseable_time", "unparseable time",
                     "set [columns] time_format to the log's format, or fix the value"),
    QuarantineReason("unknown_event", "unknown event",
                     "map the value in [events] map or list it in [events] ignore"),
    QuarantineReason("after_as_of", "time after the as-of date",
                     "move [window] as_of later, or leave these rows for a later run"),
    QuarantineReason("non_numeric_attribute", "non-numeric value in a numeric attribute",
                     "fix the value, or declare the attribute kind = \"categorical\""),
    QuarantineReason("unknown_reason", "unknown churn reason",
                     "map the reason in [reasons] map or list it in [reasons] ignore"),
    QuarantineReason("exact_duplicate", "exact duplicate",
                     "nothing to do: the first copy (lowest source row) is used"),
    QuarantineReason("before_first_start", "event before the customer's first start",
                     "check that the customer's signup is in the log and mapped to start"),
    QuarantineReason("start_in_open_spell", "start during an open spell",
                     "check for a missing end before it, or a start event mapped twice"),
    QuarantineReason("end_without_spell", "end without an open spell",
                     "check for a missing start (reactivation) before it, or a repeated end"),
    QuarantineReason("outside_spell", "event outside an open spell",
                     "check for a missing reactivation before it, or an event sent after the "
                     "cancel"),
)

#: sentence -> code
CODES: dict[str, str] = {r.sentence: r.code for r in REASONS}


def code_of(sentence: str) -> str:
    """The stable code of a quarantine sentence (``KeyError`` if it has none)."""
    return CODES[sentence]


def reason_parameters() -> dict[str, list[str]]:
    """The bound parameters of ``sql/01_reason_codes.sql``."""
    return {"reason_sentences": [r.sentence for r in REASONS],
            "reason_codes": [r.code for r in REASONS]}
