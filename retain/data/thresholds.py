"""When ``retain check`` fails rather than quarantining quietly.

A log whose times are in another format, or whose event names are not mapped,
quarantines most of its rows one by one; the reconciliation then balances and the
mistake is easy to miss. Past ``[check] max_unparseable_share`` (unparseable
times) or ``[check] max_unknown_event_share`` (unknown event values) of the rows
read, :func:`check_thresholds` raises one :class:`DataError` naming the key to
fix and three sample values.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import pyarrow.compute as pc

from retain.data.reasons import REASONS
from retain.errors import DataError

if TYPE_CHECKING:  # pragma: no cover
    from retain.data.prepare import Prepared

UNPARSEABLE = next(r.sentence for r in REASONS if r.code == "unparseable_time")
SAMPLES = 3


def _share(n: int, rows_in: int) -> float:
    return n / rows_in if rows_in else 0.0


def unparseable_samples(prepared: Prepared, k: int = SAMPLES) -> list[str]:
    """Up to ``k`` distinct time texts of rows quarantined as unparseable, in file order."""
    q = prepared.quarantine
    column = prepared.config.columns.event_time
    if column not in q.column_names or q.num_rows == 0:
        return []
    bad = q.filter(pc.equal(q.column("quarantine_reason"), UNPARSEABLE))
    out: list[str] = []
    for value in bad.column(column).to_pylist():
        if value not in out:
            out.append(value)
        if len(out) == k:
            break
    return out


def check_thresholds(prepared: Prepared) -> None:
    """Raise :class:`DataError` when too many rows have unparseable times or unknown events.

    The shares are of the rows read (the reconciliation's ``rows_in``); the limits are
    ``[check] max_unparseable_share`` and ``[check] max_unknown_event_share``.
    """
    config, rec = prepared.config, prepared.reconciliation
    limits = config.check
    n_bad = rec.by_reason.get(UNPARSEABLE, 0)
    share = _share(n_bad, rec.rows_in)
    if share > limits.max_unparseable_share:
        samples = ", ".join(repr(v) for v in unparseable_samples(prepared))
        now = (f"time_format = {config.columns.time_format!r}" if config.columns.time_format
               else "no time_format (ISO 8601)")
        raise DataError(
            f"{rec.source} column {config.columns.event_time!r}",
            f"{n_bad:,} of {rec.rows_in:,} rows ({share:.1%}) have times that cannot be "
            f"parsed with {now}, e.g. {samples}",
            f"set [columns] time_format in {config.path} (a strptime pattern such as "
            f"\"%d/%m/%Y %H:%M\", or epoch_seconds / epoch_milliseconds), or raise "
            f"[check] max_unparseable_share (now {limits.max_unparseable_share:g})")
    n_unknown = sum(prepared.unknown_events.values())
    share = _share(n_unknown, rec.rows_in)
    if share > limits.max_unknown_event_share:
        top = sorted(prepared.unknown_events.items(), key=lambda kv: (-kv[1], kv[0]))[:SAMPLES]
        samples = ", ".join(f"{v!r} ({n:,} rows)" for v, n in top)
        raise DataError(
            f"{rec.source} column {config.columns.event!r}",
            f"{n_unknown:,} of {rec.rows_in:,} rows ({share:.1%}) have unknown event values, "
            f"e.g. {samples}",
            f"map them in [events] map or list them in [events] ignore in {config.path}, or "
            f"raise [check] max_unknown_event_share (now {limits.max_unknown_event_share:g})")
