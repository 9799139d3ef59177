"""Property tests on random and malformed logs (hypothesis).

The SQL preparation is held against :func:`naive_prepare`, a deliberately plain
second implementation of the rules in DEVELOPERS.md ("Preparation rules"):
Python loops over each customer's events, no windows, no DuckDB. On every
generated log the two must give the same start-stop rows and the same
reconciliation. Further properties: rows in = used + outside window + ignored +
quarantined; within a spell the intervals are contiguous, non-overlapping and
start < stop; no time-varying value appears before the event that set it;
compression is lossless (expanding the weights gives back the table without
customer_id, spell and start_date).
"""

from __future__ import annotations

import datetime as dt
import os
from collections import Counter
from dataclasses import dataclass, field
from zoneinfo import ZoneInfo

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_prepare_support import run

from retain.errors import ConfigError, DataError

MAP = {"signup": "start", "reactivate": "start", "plan_change": "update",
       "price_change": "update", "payment_failed": "payment_failed",
       "payment_recovered": "payment_recovered", "pause": "pause", "resume": "resume",
       "cancel": "end"}
IGNORE = {"email_opened"}
REASONS = {"too_expensive": "voluntary", "not_using": "voluntary",
           "card_declined": "involuntary"}
REASON_IGNORE = {"other"}
RANK = {e: i for i, e in enumerate(("start", "update", "pause", "resume", "payment_failed",
                                    "payment_recovered", "end"))}
DAY0 = dt.date(2024, 1, 1)
AS_OF = dt.date(2024, 2, 5)
CORE_COLS = ("customer_id", "spell", "start", "stop", "churned", "cause", "start_date",
             "cohort")


@dataclass(frozen=True)
class Attr:
    """One [attributes.<name>] table of the project file."""

    name: str
    column: str
    kind: str  # "categorical" | "numeric"
    varies: bool
    ratio: bool = False


@dataclass(frozen=True)
class Shape:
    """What a project file says about the log: its columns and how they map."""

    attributes: tuple[Attr, ...]
    reason_column: str | None = "cancel_reason"
    events: dict = field(default_factory=lambda: dict(MAP))
    ignore: frozenset = frozenset(IGNORE)
    reasons: dict = field(default_factory=lambda: dict(REASONS))
    reason_ignore: frozenset = frozenset(REASON_IGNORE)
    timezone: str = "UTC"
    as_of: dt.date = AS_OF

    @property
    def header(self) -> tuple[str, ...]:
        cols = ["account", "occurred_at", "kind"]
        if self.reason_column is not None:
            cols.append(self.reason_column)
        for a in self.attributes:
            if a.column not in cols:
                cols.append(a.column)
        return tuple(cols)

    @property
    def static(self) -> tuple[Attr, ...]:
        return tuple(a for a in self.attributes if not a.varies)

    @property
    def varying(self) -> tuple[Attr, ...]:
        return tuple(a for a in self.attributes if a.varies)

    @property
    def columns(self) -> tuple[str, ...]:
        """The start-stop columns :func:`naive_prepare` returns, in its tuple order."""
        return (*CORE_COLS, *(a.name for a in self.static), *(a.name for a in self.varying),
                *(a.name + "_ratio" for a in self.varying if a.ratio),
                "in_recovery", "paused", "prior_spells")


#: the shape of test_prepare_support's project file
DEMO = Shape(attributes=(Attr("plan", "plan", "categorical", True),
                         Attr("price", "monthly_price", "numeric", True, ratio=True),
                         Attr("channel", "channel", "categorical", False),
                         Attr("region", "region", "categorical", False),
                         Attr("arm", "arm", "categorical", False)))


def _text(v):
    return None if v is None or v.strip() == "" else v.strip()


def _number(v):
    """(value, bad): the text as a float, or bad when it is not a finite number."""
    t = _text(v)
    if t is None:
        return None, False
    try:
        x = float(t)
    except ValueError:
        return None, True
    return (x, False) if abs(x) != float("inf") and x == x else (None, True)


def _instant(text, zone):
    """(instant, local day) of an ISO time; a time without an offset is a wall-clock
    time in ``zone``. (None, None) when it does not parse."""
    try:
        ts = dt.datetime.fromisoformat(_text(text) or "")
    except ValueError:
        return None, None
    if ts.tzinfo is None:
        return ts.replace(tzinfo=zone), ts.date()
    return ts, ts.astimezone(zone).date()


def _apply_order(evs):
    """Each event's sort key by the same-day rules: a day holding more than one start or
    more than one end takes its events in time order (then the fixed order, then source
    row); otherwise the fixed order, except that on a day that begins with a spell open
    (starts of earlier days outnumber their ends) and holds an end, the day's starts come
    after its events."""
    for e in evs:
        before = [x["event"] for x in evs if x["day"] < e["day"]]
        is_open_then = before.count("start") > before.count("end")
        today = [x["event"] for x in evs if x["day"] == e["day"]]
        if today.count("start") > 1 or today.count("end") > 1:
            e["key"] = (e["day"], e["ts"], e["rank"], e["row"])
            continue
        order = 7 if (e["event"] == "start" and is_open_then and "end" in today) else e["rank"]
        e["key"] = (e["day"], order, e["ts"], e["row"])


def naive_prepare(rows, *, window_start=None, shape=DEMO):
    """Plain-loop reference: returns (start-stop rows as tuples in ``shape.columns``
    order, fates Counter)."""
    zone = ZoneInfo(shape.timezone)
    fates = Counter()
    seen = set()
    candidates = []
    for i, r in enumerate(rows, 1):
        r = dict(zip(shape.header, r, strict=True))
        raw = _text(r["kind"])
        if raw in shape.ignore:
            fates["ignored"] += 1
            continue
        cid = r["account"]
        ts, day = _instant(r["occurred_at"], zone)
        event = shape.events.get(raw)
        values, bad_number = [], False
        for a in shape.attributes:
            if a.kind == "numeric":
                x, bad = _number(r[a.column])
                values.append(x)
                bad_number |= bad
            else:
                values.append(_text(r[a.column]))
        reason = None if shape.reason_column is None else _text(r[shape.reason_column])
        if cid is None or cid.strip() == "":
            why = "missing id"
        elif day is None:
            why = "unparseable time"
        elif event is None:
            why = "unknown event"
        elif day > shape.as_of:
            why = "time after the as-of date"
        elif bad_number:
            why = "non-numeric value in a numeric attribute"
        elif event == "end" and reason is not None and reason not in shape.reasons \
                and reason not in shape.reason_ignore:
            why = "unknown churn reason"
        else:
            why = None
        # numbers compared as numbers, times as instants
        key = (cid, ts, raw, reason, *values)
        if why is None and key in seen:
            why = "exact duplicate"
        if why is not None:
            fates["quarantined: " + why] += 1
            continue
        seen.add(key)
        cause = None if reason in shape.reason_ignore else shape.reasons.get(reason)
        candidates.append(dict(cid=cid, day=day, ts=ts, event=event, rank=RANK[event], row=i,
                               values=dict(zip((a.name for a in shape.attributes), values,
                                               strict=True)), cause=cause))
    by_customer = {}
    for c in candidates:
        by_customer.setdefault(c["cid"], []).append(c)
    out = []
    for cid in sorted(by_customer):
        evs = by_customer[cid]
        _apply_order(evs)
        evs = sorted(evs, key=lambda c: c["key"])
        used = []
        is_open = started = False
        for e in evs:
            if e["event"] == "start":
                if is_open:
                    fates["quarantined: start during an open spell"] += 1
                    continue
                is_open = started = True
            elif not started:
                fates["quarantined: event before the customer's first start"] += 1
                continue
            elif not is_open:
                fates["quarantined: " + ("end without an open spell" if e["event"] == "end"
                                         else "event outside an open spell")] += 1
                continue
            elif e["event"] == "end":
                is_open = False
            used.append(e)
        if not used:
            continue
        static = []
        for a in shape.static:
            vals = [e["values"][a.name] for e in used if e["values"][a.name] is not None]
            static.append(vals[0] if vals else None)
        # walk the used events keeping the customer's state
        varying = {a.name: None for a in shape.varying}
        spells = []
        for e in used:
            if e["event"] == "start":
                spells.append(dict(start_day=e["day"], days={}, end=None, n=0))
                paused = recovery = 0
            if e["event"] in ("start", "update"):
                for name in varying:
                    if e["values"][name] is not None:
                        varying[name] = e["values"][name]
            paused = {"pause": 1, "resume": 0}.get(e["event"], paused)
            recovery = {"payment_failed": 1, "payment_recovered": 0}.get(e["event"], recovery)
            sp = spells[-1]
            sp["n"] += 1
            tenure = (e["day"] - sp["start_day"]).days
            sp["days"][tenure] = (*varying.values(), paused, recovery)
            if e["event"] == "end":
                sp["end"] = (tenure, e["cause"] or ("involuntary" if recovery else "voluntary"))
        ratios = [k for k, a in enumerate(shape.varying) if a.ratio]
        for number, sp in enumerate(spells, 1):
            ws = window_start
            end_day = None if sp["end"] is None else sp["start_day"] + dt.timedelta(sp["end"][0])
            if ws is not None and sp["start_day"] < ws and end_day is not None and end_day <= ws:
                fates["outside window"] += sp["n"]
                continue
            fates["used"] += sp["n"]
            exit_t = sp["end"][0] if sp["end"] else (shape.as_of - sp["start_day"]).days
            exit_t = max(exit_t, 0.5)
            entry = max((ws - sp["start_day"]).days, 0) if ws is not None else 0
            cuts = []
            last_state = object()
            for t in sorted(sp["days"]):
                state = sp["days"][t]
                if state != last_state and t < exit_t:
                    cuts.append((t, state))
                last_state = state
            base = cuts[0][1]
            for k, (t, state) in enumerate(cuts):
                stop = cuts[k + 1][0] if k + 1 < len(cuts) else exit_t
                last = k + 1 == len(cuts)
                if stop <= entry:
                    continue
                churned = int(last and sp["end"] is not None)
                ratio = [None if state[j] is None or not base[j] else state[j] / base[j]
                         for j in ratios]
                *values, pa, rc = state
                out.append((cid, number, float(max(t, entry)), float(stop), churned,
                            sp["end"][1] if churned else "", sp["start_day"],
                            sp["start_day"].strftime("%Y-%m"), *static, *values, *ratio,
                            float(rc), float(pa), float(number - 1)))
    return out, fates


COLS = DEMO.columns

row_strategy = st.tuples(
    st.sampled_from(["a", "b", "c", "d", None, " "]),
    st.one_of(st.integers(0, 38).map(lambda d: (DAY0 + dt.timedelta(d)).isoformat()),
              st.sampled_from(["bad", None, "2024-02-30"])),
    st.sampled_from(list(MAP) * 2 + ["signup"] * 3 + ["cancel"] * 2
                    + ["email_opened", "teleport", None]),
    st.sampled_from([None, None, "too_expensive", "card_declined", "bored", "other"]),
    st.sampled_from([None, None, "Seedling", "Bloom"]),
    st.sampled_from([None, None, "10", "12.5", "20", "0", "x"]),
    st.sampled_from([None, "search", "podcast"]),
    st.sampled_from([None, "north"]),
    st.sampled_from([None, "standard", "intro"]),
)


TIMES = st.sampled_from(["", " 08:00", " 12:30", " 12:30", " 23:59"])
KINDS = ["plan_change", "price_change", "payment_failed", "payment_recovered", "pause",
         "resume", "cancel", "reactivate", "email_opened"]


@st.composite
def customer_history(draw, cid):
    """A plausible history: signup, then events on non-decreasing days, some at a time of
    day (same-day events then keep their order by time; equal times are ties)."""
    day = draw(st.integers(0, 20))
    rows = [(cid, (DAY0 + dt.timedelta(day)).isoformat() + draw(TIMES), "signup", None,
             draw(st.sampled_from(["Seedling", "Bloom"])), draw(st.sampled_from(["10", "20"])),
             "search", "north", "standard")]
    for _ in range(draw(st.integers(0, 8))):
        day += draw(st.sampled_from([0, 0, 1, 3, 7]))
        kind = draw(st.sampled_from(KINDS))
        reason = draw(st.sampled_from([None, None, "too_expensive", "card_declined"])) \
            if kind == "cancel" else None
        plan = draw(st.sampled_from([None, "Bloom", "Orchard"])) \
            if kind in ("plan_change", "reactivate") else None
        price = draw(st.sampled_from([None, "12.5", "30"])) \
            if kind in ("price_change", "plan_change", "reactivate") else None
        rows.append((cid, (DAY0 + dt.timedelta(day)).isoformat() + draw(TIMES), kind, reason,
                     plan, price, None, None, None))
        if kind == "cancel" and draw(st.booleans()):  # and a reactivation on the same day
            rows.append((cid, (DAY0 + dt.timedelta(day)).isoformat() + draw(TIMES),
                         "reactivate", None, draw(st.sampled_from([None, "Orchard"])), None,
                         None, None, None))
    return rows


@st.composite
def event_logs(draw):
    rows = []
    for cid in ("a", "b", "c")[: draw(st.integers(1, 3))]:
        rows += draw(customer_history(cid))
    rows += draw(st.lists(row_strategy, max_size=8))
    return draw(st.permutations(rows)) if draw(st.booleans()) else rows


@settings(max_examples=60, deadline=None, derandomize=os.environ.get("CI") is not None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(rows=st.one_of(event_logs(), st.lists(row_strategy, min_size=1, max_size=30)),
       window=st.sampled_from([None, dt.date(2024, 1, 10)]))
def test_sql_matches_the_naive_implementation(tmp_path, rows, window):
    expected, fates = naive_prepare(rows, window_start=window)
    kw = {"as_of": AS_OF.isoformat(), "reason_ignore": ("other",), "compress": True}
    if window is not None:
        kw["start"] = window.isoformat()
    if not expected:
        # no spell in the window: one user-facing error (as_of before every event is a
        # project-file error, anything else a data error)
        with pytest.raises((DataError, ConfigError)):
            run(tmp_path, rows, **kw)
        return
    p = run(tmp_path, rows, **kw)
    t = p.arrow
    got = [tuple(v) for v in zip(*(t.column(c).to_pylist() for c in COLS), strict=True)]
    assert got == expected
    r = p.reconciliation
    assert r.rows_in == len(rows) == r.used + r.outside_window + r.ignored + r.quarantined
    mine = Counter({"used": r.used, "outside window": r.outside_window, "ignored": r.ignored})
    mine.update({"quarantined: " + k: v for k, v in r.by_reason.items()})
    assert +mine == +fates
    assert p.quarantine.num_rows == r.quarantined
    _check_intervals(got)
    _check_no_value_before_its_event(got, rows)
    _check_compression(p)


def _check_intervals(rows):
    by_spell = {}
    for r in rows:
        by_spell.setdefault((r[0], r[1]), []).append(r)
    for spell_rows in by_spell.values():
        for a, b in zip(spell_rows, spell_rows[1:], strict=False):
            assert a[3] == b[2]  # contiguous, so never overlapping
            assert a[4] == 0  # churn only on the last row
        assert all(r[2] < r[3] for r in spell_rows)


def _check_no_value_before_its_event(rows, log):
    """Each plan value on a row was written on a start/update row of that customer on or
    before the row's start day."""
    for r in rows:
        if r[11] is None:
            continue
        row_day = r[6] + dt.timedelta(days=int(r[2]))
        assert any(lr[0] == r[0] and lr[4] is not None and lr[4].strip() == r[11]
                   and MAP.get(lr[2]) in ("start", "update")
                   and lr[1] not in (None, "bad", "2024-02-30")
                   and dt.date.fromisoformat(lr[1][:10]) <= row_day for lr in log)


def _check_compression(p):
    full = p.arrow.drop_columns(["customer_id", "spell", "start_date", "weight"])
    comp = p.compressed
    names = full.column_names
    assert sorted(comp.column_names) == sorted(names + ["weight"])
    expanded = Counter()
    for row, w in zip(comp.select(names).to_pylist(), comp.column("weight").to_pylist(),
                      strict=True):
        expanded[tuple(row.items())] += int(w)
    assert expanded == Counter(tuple(r.items()) for r in full.to_pylist())


def test_naive_reference_agrees_with_a_hand_worked_case():
    """Guard the guard: the naive implementation on a case worked out by hand."""
    S = ("search", "north", "standard")
    rows = [("a", "2024-01-01", "signup", None, "Seedling", "10", *S),
            ("a", "2024-01-11", "price_change", None, None, "20", None, None, None),
            ("a", "2024-01-21", "cancel", None, None, None, None, None, None)]
    out, fates = naive_prepare(rows)
    assert [r[:6] + r[11:14] for r in out] == [
        ("a", 1, 0.0, 10.0, 0, "", "Seedling", 10.0, 1.0),
        ("a", 1, 10.0, 20.0, 1, "voluntary", "Seedling", 20.0, 2.0)]
    assert fates == Counter({"used": 3})
