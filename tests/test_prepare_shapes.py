"""Every valid project-file shape prepares: property test against the plain loop.

Hypothesis draws a project file (0 to 4 attributes, each static or time-varying,
categorical or numeric, with or without a ratio, named after its column or not; a
reason column or none; a reason mapping or none; events left unmapped; a window
start or none; a time zone) and a small log of that shape, and holds
:func:`retain.data.prepare.prepare` against :func:`naive_prepare`, the plain-loop
second implementation in test_prepare_properties.py, generalised to any attribute
set: the same start-stop rows, and rows in = used + ignored + outside window +
quarantined with the same count on every line. Bounded: about 100 examples
(derandomised when the environment names a CI run).

The hand-worked cases below pin the shapes that once failed outright: no
attribute at all, and one time-varying numeric attribute without a ratio.
"""

from __future__ import annotations

import datetime as dt
import json
import os
from collections import Counter
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_prepare_properties import (
    DAY0,
    MAP,
    REASONS,
    Attr,
    Shape,
    naive_prepare,
)
from test_prepare_support import write_log

from retain.data.config import load_config
from retain.data.prepare import prepare
from retain.errors import ConfigError, DataError

NAMES = ("plan", "price", "seats", "tier", "channel", "region", "score", "tenure")
ZONES = ("UTC", "America/New_York", "Asia/Kolkata", "Pacific/Chatham")
OPTIONAL_EVENTS = ("plan_change", "price_change", "payment_failed", "payment_recovered",
                   "pause", "resume")
CATEGORIES = ("A", "A", "B", " B ", None, " ")
NUMBERS = ("10", "10", "12.5", "0", "20", " 7 ", "1e1", None, "x")
# the times of day: naive (wall clock in the zone), and with an offset, so that a
# time can fall on another local day than its text says
TIMES = ("", " 08:00", " 12:30", " 23:59", "T23:30:00+00:00", " 00:15-05:00")


def toml_for(shape: Shape, window_start: dt.date | None, compress: bool) -> str:
    q = json.dumps
    lines = ["[source]", 'path = "events.csv"', "", "[columns]",
             'customer_id = "account"', 'event_time = "occurred_at"', 'event = "kind"']
    if shape.reason_column is not None:
        lines.append(f"reason = {q(shape.reason_column)}")
    lines += ["", "[events]",
              "map = { " + ", ".join(f"{k} = {q(v)}" for k, v in shape.events.items()) + " }",
              "ignore = [" + ", ".join(q(v) for v in sorted(shape.ignore)) + "]", ""]
    if shape.reasons or shape.reason_ignore:
        lines += ["[reasons]",
                  "map = { " + ", ".join(f"{k} = {q(v)}" for k, v in shape.reasons.items())
                  + " }",
                  "ignore = [" + ", ".join(q(v) for v in sorted(shape.reason_ignore)) + "]",
                  ""]
    lines += ["[window]", f'as_of = "{shape.as_of}"', f"timezone = {q(shape.timezone)}"]
    if window_start is not None:
        lines.append(f'start = "{window_start}"')
    for a in shape.attributes:
        lines += ["", f"[attributes.{a.name}]", f"column = {q(a.column)}",
                  f"kind = {q(a.kind)}", f"varies = {str(a.varies).lower()}"]
        if a.ratio:
            lines.append("ratio = true")
    lines += ["", "[engine]", 'memory_limit = "1GB"', "threads = 1", "", "[output]",
              'dir = "out"', f"compress = {str(compress).lower()}", ""]
    return "\n".join(lines)


def prepare_shape(tmp_path: Path, shape: Shape, rows: list[tuple], *,
                  window_start: dt.date | None = None, compress: bool = False):
    write_log(tmp_path / "events.csv", rows, header=shape.header)
    (tmp_path / "retain.toml").write_text(toml_for(shape, window_start, compress),
                                          encoding="utf-8")
    config = load_config(tmp_path / "retain.toml")
    return config, prepare(config)


def table_rows(arrow, columns):
    return [tuple(v) for v in zip(*(arrow.column(c).to_pylist() for c in columns), strict=True)]


# ---------------------------------------------------------------------- strategies
@st.composite
def shapes(draw):
    attrs = []
    for name in draw(st.lists(st.sampled_from(NAMES), unique=True, max_size=4)):
        kind = draw(st.sampled_from(("categorical", "numeric")))
        varies = draw(st.booleans())
        ratio = kind == "numeric" and varies and draw(st.booleans())
        column = draw(st.sampled_from((name, f"col {name}", f"{name.upper()}_Col")))
        attrs.append(Attr(name, column, kind, varies, ratio))
    dropped = draw(st.lists(st.sampled_from(OPTIONAL_EVENTS), unique=True, max_size=2))
    reason_column = draw(st.sampled_from((None, "cancel_reason")))
    reasons = draw(st.sampled_from(({}, dict(REASONS), {"card_declined": "involuntary"})))
    reason_ignore = draw(st.sampled_from((frozenset(), frozenset({"other"}))))
    return Shape(attributes=tuple(attrs), reason_column=reason_column,
                 events={k: v for k, v in MAP.items() if k not in dropped},
                 reasons=reasons, reason_ignore=reason_ignore,
                 timezone=draw(st.sampled_from(ZONES)))


def _values(draw, shape, *, on_start):
    """{column: text}: a start row fills most attributes, a later row a few."""
    out = {}
    for a in shape.attributes:
        if on_start or draw(st.integers(0, 2)) == 0:
            out[a.column] = draw(st.sampled_from(NUMBERS if a.kind == "numeric"
                                                 else CATEGORIES))
    return out


@st.composite
def customer_rows(draw, shape, cid):
    """A plausible history: a signup, then events on non-decreasing days, some at a time
    of day; a cancel may be followed by a reactivation or a fresh signup on its day."""
    day = draw(st.integers(0, 20))

    def when(d):
        return (DAY0 + dt.timedelta(d)).isoformat() + draw(st.sampled_from(TIMES))

    rows = [dict(account=cid, occurred_at=when(day), kind="signup",
                 **_values(draw, shape, on_start=True))]
    for _ in range(draw(st.integers(0, 7))):
        day += draw(st.sampled_from((0, 0, 1, 3, 7)))
        kind = draw(st.sampled_from((*OPTIONAL_EVENTS, "cancel", "cancel", "reactivate",
                                     "email_opened")))
        row = dict(account=cid, occurred_at=when(day), kind=kind,
                   **_values(draw, shape, on_start=kind == "reactivate"))
        if kind == "cancel":
            row["cancel_reason"] = draw(st.sampled_from((None, None, "too_expensive",
                                                         "card_declined", "other", "bored")))
        rows.append(row)
        if kind == "cancel" and draw(st.booleans()):  # and back on the same day
            rows.append(dict(account=cid, occurred_at=when(day),
                             kind=draw(st.sampled_from(("reactivate", "signup"))),
                             **_values(draw, shape, on_start=True)))
    return rows


@st.composite
def stray_rows(draw, shape):
    """Rows of any kind, malformed ones included."""
    rows = []
    for _ in range(draw(st.integers(0, 6))):
        rows.append(dict(
            account=draw(st.sampled_from(("a", "b", "e", None, " "))),
            occurred_at=draw(st.one_of(
                st.integers(0, 38).map(lambda d: (DAY0 + dt.timedelta(d)).isoformat()),
                st.sampled_from(("bad", None, "2024-02-30", "2024-03-01")))),
            kind=draw(st.sampled_from((*MAP, "cancel", "email_opened", "teleport", None))),
            cancel_reason=draw(st.sampled_from((None, "too_expensive", "bored", "other"))),
            **_values(draw, shape, on_start=draw(st.booleans()))))
    return rows


@st.composite
def logs(draw, shape):
    rows = []
    for cid in ("a", "b", "c", "d")[: draw(st.integers(1, 4))]:
        rows += draw(customer_rows(shape, cid))
    rows += draw(stray_rows(shape))
    if draw(st.booleans()):
        rows = draw(st.permutations(rows))
    return [tuple(r.get(c) for c in shape.header) for r in rows]


@st.composite
def cases(draw):
    shape = draw(shapes())
    return (shape, draw(logs(shape)),
            draw(st.sampled_from((None, dt.date(2024, 1, 10), dt.date(2024, 1, 25)))))


# ---------------------------------------------------------------------- the property
@settings(max_examples=100, deadline=None, derandomize=os.environ.get("CI") is not None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow,
                                 HealthCheck.data_too_large])
@given(case=cases(), compress=st.booleans())
def test_every_project_shape_matches_the_plain_loop(tmp_path_factory, case, compress):
    shape, rows, window_start = case
    tmp_path = tmp_path_factory.mktemp("shape")
    expected, fates = naive_prepare(rows, window_start=window_start, shape=shape)
    if not expected:
        # no spell in the window: one user-facing error (as_of before every event is a
        # project-file error, anything else a data error)
        with pytest.raises((DataError, ConfigError)):
            prepare_shape(tmp_path, shape, rows, window_start=window_start)
        return
    config, p = prepare_shape(tmp_path, shape, rows, window_start=window_start,
                              compress=compress)
    assert set(p.arrow.column_names) == set(shape.columns) | {"weight"} \
        == set(config.output_columns)
    assert table_rows(p.arrow, shape.columns) == expected
    r = p.reconciliation
    assert r.rows_in == len(rows) == r.used + r.ignored + r.outside_window + r.quarantined
    mine = Counter({"used": r.used, "outside window": r.outside_window, "ignored": r.ignored})
    mine.update({"quarantined: " + k: v for k, v in r.by_reason.items()})
    assert +mine == +fates
    assert p.quarantine.num_rows == r.quarantined
    if compress:
        assert sum(p.compressed.column("weight").to_pylist()) == p.arrow.num_rows


# ---------------------------------------------------------------------- hand-worked
def test_a_project_without_attributes(tmp_path):
    """Signup 1 Jan, payment failure 11 Jan, cancel 21 Jan without a reason: rows (0, 10]
    and (10, 20], churned involuntary (in recovery at the end); b is censored on the
    as-of date 5 Feb, 35 days after its 1 Jan signup."""
    shape = Shape(attributes=())
    _, p = prepare_shape(tmp_path, shape, [
        ("a", "2024-01-01", "signup", None), ("a", "2024-01-11", "payment_failed", None),
        ("a", "2024-01-21", "cancel", None), ("b", "2024-01-01", "signup", None)])
    assert p.arrow.column_names == [
        "customer_id", "spell", "start", "stop", "churned", "cause", "weight", "start_date",
        "cohort", "in_recovery", "paused", "prior_spells"]
    assert table_rows(p.arrow, ("customer_id", "start", "stop", "churned", "cause",
                                "in_recovery")) == [
        ("a", 0.0, 10.0, 0, "", 0.0), ("a", 10.0, 20.0, 1, "involuntary", 1.0),
        ("b", 0.0, 35.0, 0, "", 0.0)]


def test_one_varying_number_without_a_ratio_and_no_reason_column(tmp_path):
    """seats 3 from day 0, 5 from day 7 (a change takes effect just after its day), cancel
    on day 12: (0, 7] with 3 and (7, 12] with 5; no seats_ratio column."""
    shape = Shape(attributes=(Attr("seats", "Seat Count", "numeric", True),),
                  reason_column=None, reasons={}, reason_ignore=frozenset())
    _, p = prepare_shape(tmp_path, shape, [
        ("a", "2024-01-01", "signup", "3"), ("a", "2024-01-08", "plan_change", "5"),
        ("a", "2024-01-13", "cancel", None)])
    assert "seats_ratio" not in p.arrow.column_names
    assert table_rows(p.arrow, ("start", "stop", "churned", "cause", "seats")) == [
        (0.0, 7.0, 0, "", 3.0), (7.0, 12.0, 1, "voluntary", 5.0)]


def test_only_static_attributes(tmp_path):
    """A static number and a static category: the customer's first non-empty values."""
    shape = Shape(attributes=(Attr("score", "score", "numeric", False),
                              Attr("region", "region", "categorical", False)))
    _, p = prepare_shape(tmp_path, shape, [
        ("a", "2024-01-01", "signup", None, None, "north"),
        ("a", "2024-01-03", "plan_change", None, "4.5", "south"),
        ("a", "2024-01-05", "cancel", None)])
    assert table_rows(p.arrow, ("start", "stop", "score", "region")) == [
        (0.0, 4.0, 4.5, "north")]
