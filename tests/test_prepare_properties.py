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
from collections import Counter

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from test_prepare_support import HEADER, run

from retain.errors import DataError

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


def naive_prepare(rows, *, window_start=None):
    """Plain-loop reference: returns (start-stop rows, fates Counter)."""
    fates = Counter()
    seen = set()
    candidates = []
    for i, r in enumerate(rows, 1):
        r = dict(zip(HEADER, r, strict=True))
        raw = _text(r["kind"])
        if raw in IGNORE:
            fates["ignored"] += 1
            continue
        cid = r["account"]
        try:  # a date, or a date and a wall-clock time (no offset: the zone is UTC)
            ts = dt.datetime.fromisoformat(_text(r["occurred_at"]) or "")
            day = ts.date()
        except ValueError:
            ts = day = None
        event = MAP.get(raw)
        price, bad_price = _number(r["monthly_price"])
        reason = _text(r["cancel_reason"])
        if cid is None or cid.strip() == "":
            why = "missing id"
        elif day is None:
            why = "unparseable time"
        elif event is None:
            why = "unknown event"
        elif day > AS_OF:
            why = "time after the as-of date"
        elif bad_price:
            why = "non-numeric value in a numeric attribute"
        elif event == "end" and reason is not None and reason not in REASONS \
                and reason not in REASON_IGNORE:
            why = "unknown churn reason"
        else:
            why = None
        key = (cid, ts, raw, reason, _text(r["plan"]), _text(r["channel"]),
               _text(r["region"]), _text(r["arm"]), price)  # numbers compared as numbers
        if why is None and key in seen:
            why = "exact duplicate"
        seen.add(key)
        if why is not None:
            fates["quarantined: " + why] += 1
            continue
        cause = None if reason in REASON_IGNORE else REASONS.get(reason)
        candidates.append(dict(cid=cid, day=day, ts=ts, event=event, rank=RANK[event], row=i,
                               plan=_text(r["plan"]), price=price, cause=cause,
                               static=(_text(r["channel"]), _text(r["region"]),
                                       _text(r["arm"]))))
    by_customer = {}
    for c in candidates:
        by_customer.setdefault(c["cid"], []).append(c)
    out = []
    for cid in sorted(by_customer):
        evs = by_customer[cid]
        # a day that opens with a spell open and holds an end: its ends come before its
        # starts (a cancel, then a reactivation); "open" counts starts and ends of
        # earlier days
        for e in evs:
            before = [x["event"] for x in evs if x["day"] < e["day"]]
            is_open_then = before.count("start") > before.count("end")
            has_end = any(x["event"] == "end" and x["day"] == e["day"] for x in evs)
            e["order"] = 7 if (e["event"] == "start" and is_open_then and has_end) else e["rank"]
        evs = sorted(evs, key=lambda c: (c["day"], c["order"], c["ts"], c["row"]))
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
        for k in range(3):
            vals = [e["static"][k] for e in used if e["static"][k] is not None]
            static.append(vals[0] if vals else None)
        # walk the used events keeping the customer's state
        plan = price = None
        spells = []
        for e in used:
            if e["event"] == "start":
                spells.append(dict(start_day=e["day"], days={}, end=None, n=0))
                paused = recovery = 0
            if e["event"] in ("start", "update"):
                plan = e["plan"] if e["plan"] is not None else plan
                price = e["price"] if e["price"] is not None else price
            paused = {"pause": 1, "resume": 0}.get(e["event"], paused)
            recovery = {"payment_failed": 1, "payment_recovered": 0}.get(e["event"], recovery)
            sp = spells[-1]
            sp["n"] += 1
            tenure = (e["day"] - sp["start_day"]).days
            sp["days"][tenure] = (plan, price, paused, recovery)
            if e["event"] == "end":
                sp["end"] = (tenure, e["cause"] or ("involuntary" if recovery else "voluntary"))
        for number, sp in enumerate(spells, 1):
            ws = window_start
            end_day = None if sp["end"] is None else sp["start_day"] + dt.timedelta(sp["end"][0])
            if ws is not None and sp["start_day"] < ws and end_day is not None and end_day <= ws:
                fates["outside window"] += sp["n"]
                continue
            fates["used"] += sp["n"]
            exit_t = sp["end"][0] if sp["end"] else (AS_OF - sp["start_day"]).days
            exit_t = max(exit_t, 0.5)
            entry = max((ws - sp["start_day"]).days, 0) if ws is not None else 0
            cuts = []
            last_state = object()
            for t in sorted(sp["days"]):
                state = sp["days"][t]
                if state != last_state and t < exit_t:
                    cuts.append((t, state))
                last_state = state
            base = cuts[0][1][1]
            for k, (t, (pl, pr, pa, rc)) in enumerate(cuts):
                stop = cuts[k + 1][0] if k + 1 < len(cuts) else exit_t
                last = k + 1 == len(cuts)
                if stop <= entry:
                    continue
                churned = int(last and sp["end"] is not None)
                ratio = None if pr is None or not base else pr / base
                out.append((cid, number, float(max(t, entry)), float(stop), churned,
                            sp["end"][1] if churned else "", sp["start_day"],
                            sp["start_day"].strftime("%Y-%m"), *static, pl, pr, ratio,
                            float(rc), float(pa), float(number - 1)))
    return out, fates


COLS = ("customer_id", "spell", "start", "stop", "churned", "cause", "start_date", "cohort",
        "channel", "region", "arm", "plan", "price", "price_ratio", "in_recovery", "paused",
        "prior_spells")

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


@settings(max_examples=60, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow])
@given(rows=st.one_of(event_logs(), st.lists(row_strategy, min_size=1, max_size=30)),
       window=st.sampled_from([None, dt.date(2024, 1, 10)]))
def test_sql_matches_the_naive_implementation(tmp_path, rows, window):
    expected, fates = naive_prepare(rows, window_start=window)
    kw = {"as_of": AS_OF.isoformat(), "reason_ignore": ("other",), "compress": True}
    if window is not None:
        kw["start"] = window.isoformat()
    if not expected:
        with pytest.raises(DataError):
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
