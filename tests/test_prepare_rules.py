"""Hand-worked small logs -> the exact start-stop rows, one case per preparation rule.

Every expected row below is worked out by hand from the rules in DEVELOPERS.md
("Preparation rules"); tenure is in days since the spell's start day.
"""

from __future__ import annotations

import datetime as dt

import pytest
from test_prepare_support import CORE, rows_of, run

S = ("search", "north", "standard")  # channel, region, arm of a signup row


def signup(cid, when, plan="Seedling", price="10", kind="signup"):
    return (cid, when, kind, None, plan, price, *S)


def test_one_spell_churned_and_one_censored(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01"), ("a", "2024-01-31", "cancel"),
                       signup("b", "2024-12-01")])
    assert rows_of(p, CORE) == [("a", 1, 0.0, 30.0, 1, "voluntary"),
                                ("b", 1, 0.0, 30.0, 0, "")]  # as_of 2024-12-31 inclusive


def test_end_on_the_start_day_gets_half_a_day(tmp_path):
    p = run(tmp_path, [signup("a", "2024-03-05 09:00"), ("a", "2024-03-05 17:00", "cancel")])
    assert rows_of(p, CORE) == [("a", 1, 0.0, 0.5, 1, "voluntary")]


def test_censoring_on_the_start_day_gets_half_a_day(tmp_path):
    p = run(tmp_path, [signup("a", "2024-12-31")])
    assert rows_of(p, CORE) == [("a", 1, 0.0, 0.5, 0, "")]


def test_same_day_order_does_not_follow_the_file(tmp_path):
    """The cancel is written before the signup on the same day: start still comes first."""
    p = run(tmp_path, [("a", "2024-03-05 08:00", "cancel"), signup("a", "2024-03-05 09:00")])
    assert rows_of(p, CORE) == [("a", 1, 0.0, 0.5, 1, "voluntary")]
    assert p.reconciliation.quarantined == 0


def test_a_change_on_day_t_takes_effect_just_after_t(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01"),
                       ("a", "2024-01-11", "plan_change", None, "Bloom", "20"),
                       ("a", "2024-01-21", "cancel")])
    assert rows_of(p, (*CORE, "plan", "price", "price_ratio")) == [
        ("a", 1, 0.0, 10.0, 0, "", "Seedling", 10.0, 1.0),
        ("a", 1, 10.0, 20.0, 1, "voluntary", "Bloom", 20.0, 2.0),
    ]


def test_update_with_empty_values_keeps_the_old_ones(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01"),
                       ("a", "2024-01-11", "price_change", None, None, "12.5"),
                       ("a", "2024-01-21", "cancel")])
    assert rows_of(p, ("start", "stop", "plan", "price", "price_ratio")) == [
        (0.0, 10.0, "Seedling", 10.0, 1.0), (10.0, 20.0, "Seedling", 12.5, 1.25)]


def test_a_change_on_the_start_day_shapes_the_first_row_and_its_ratio_base(tmp_path):
    """Ratio base = the value in force on the spell's first day (after its events)."""
    p = run(tmp_path, [signup("a", "2024-01-01"),
                       ("a", "2024-01-01", "price_change", None, None, "8"),
                       ("a", "2024-01-11", "price_change", None, None, "12"),
                       ("a", "2024-01-21", "cancel")])
    assert rows_of(p, ("start", "stop", "price", "price_ratio")) == [
        (0.0, 10.0, 8.0, 1.0), (10.0, 20.0, 12.0, 1.5)]


def test_a_change_that_changes_nothing_is_not_a_cut(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01"),
                       ("a", "2024-01-11", "plan_change", None, "Seedling", "10"),
                       ("a", "2024-01-15", "pause"), ("a", "2024-01-15", "resume"),
                       ("a", "2024-01-21", "cancel")])
    assert rows_of(p, CORE) == [("a", 1, 0.0, 20.0, 1, "voluntary")]


def test_a_change_on_the_exit_day_has_no_row(tmp_path):
    p = run(tmp_path, [signup("a", "2024-12-01"),
                       ("a", "2024-12-31", "plan_change", None, "Bloom", "20")])
    assert rows_of(p, (*CORE, "plan")) == [("a", 1, 0.0, 30.0, 0, "", "Seedling")]


def test_payment_recovery_and_cause_rule(tmp_path):
    """in_recovery between payment_failed and payment_recovered; an end without a
    reason while in recovery is involuntary; a mapped reason wins."""
    p = run(tmp_path, [
        signup("a", "2024-01-01"), ("a", "2024-01-06", "payment_failed"),
        ("a", "2024-01-10", "payment_recovered"), ("a", "2024-01-16", "payment_failed"),
        ("a", "2024-01-21", "cancel"),
        signup("b", "2024-01-01"), ("b", "2024-01-06", "payment_failed"),
        ("b", "2024-01-11", "cancel", "too_expensive"),
        signup("c", "2024-01-01"), ("c", "2024-01-11", "cancel", "card_declined"),
    ])
    assert rows_of(p, (*CORE, "in_recovery")) == [
        ("a", 1, 0.0, 5.0, 0, "", 0.0),
        ("a", 1, 5.0, 9.0, 0, "", 1.0),
        ("a", 1, 9.0, 15.0, 0, "", 0.0),
        ("a", 1, 15.0, 20.0, 1, "involuntary", 1.0),
        ("b", 1, 0.0, 5.0, 0, "", 0.0),
        ("b", 1, 5.0, 10.0, 1, "voluntary", 1.0),
        ("c", 1, 0.0, 10.0, 1, "involuntary", 0.0),
    ]


def test_a_payment_failure_on_the_end_day_makes_it_involuntary_but_not_the_row(tmp_path):
    """Same day: payment_failed applies before end, so the cause is involuntary; the
    change takes effect after the day, so the last row still has in_recovery 0."""
    p = run(tmp_path, [signup("a", "2024-01-01"), ("a", "2024-01-21", "cancel"),
                       ("a", "2024-01-21", "payment_failed")])
    assert rows_of(p, (*CORE, "in_recovery")) == [("a", 1, 0.0, 20.0, 1, "involuntary", 0.0)]


def test_ignored_reason_counts_as_no_reason(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01"), ("a", "2024-01-06", "payment_failed"),
                       ("a", "2024-01-11", "cancel", "other")], reason_ignore=("other",))
    assert rows_of(p, ("cause",)) == [("",), ("involuntary",)]


def test_paused_between_pause_and_resume(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01"), ("a", "2024-02-01", "pause"),
                       ("a", "2024-03-01", "resume"), ("a", "2024-04-01", "cancel")])
    assert rows_of(p, ("start", "stop", "churned", "paused")) == [
        (0.0, 31.0, 0, 0.0), (31.0, 60.0, 0, 1.0), (60.0, 91.0, 1, 0.0)]


def test_reactivation_opens_spell_two_with_prior_spells(tmp_path):
    p = run(tmp_path, [
        signup("a", "2024-01-01"), ("a", "2024-01-06", "payment_failed"),
        ("a", "2024-01-11", "cancel"),
        signup("a", "2024-02-01", plan="Bloom", price="20", kind="reactivate"),
        ("a", "2024-02-11", "cancel", "not_using"),
        ("a", "2024-03-01", "reactivate"),  # no values: keeps the last known plan and price
    ], as_of="2024-03-31")
    cols = (*CORE, "start_date", "cohort", "plan", "price", "price_ratio", "in_recovery",
            "prior_spells")
    assert rows_of(p, cols) == [
        ("a", 1, 0.0, 5.0, 0, "", dt.date(2024, 1, 1), "2024-01", "Seedling", 10.0, 1.0, 0.0, 0.0),
        ("a", 1, 5.0, 10.0, 1, "involuntary", dt.date(2024, 1, 1), "2024-01", "Seedling", 10.0,
         1.0, 1.0, 0.0),
        ("a", 2, 0.0, 10.0, 1, "voluntary", dt.date(2024, 2, 1), "2024-02", "Bloom", 20.0, 1.0,
         0.0, 1.0),
        ("a", 3, 0.0, 30.0, 0, "", dt.date(2024, 3, 1), "2024-03", "Bloom", 20.0, 1.0, 0.0, 2.0),
    ]


def test_static_attributes_come_from_the_first_value(tmp_path):
    p = run(tmp_path, [signup("a", "2024-01-01"),
                       ("a", "2024-01-11", "plan_change", None, "Bloom", "20", "podcast",
                        "south", "intro_discount"),
                       ("a", "2024-01-21", "cancel")])
    assert rows_of(p, ("channel", "region", "arm")) == [S, S]


def test_delayed_entry_at_the_window_start(tmp_path):
    """Window starts 2024-03-01. a began 2024-01-01 (tenure 60 on 2024-03-01) with a
    pre-window plan change on day 31: it enters at 60 with the changed plan. b ended on
    the window's first day: outside the window (both its rows counted as such). c ended
    the day after: it enters at 60 and churns at 61. d starts on the window's first day."""
    p = run(tmp_path, [
        signup("a", "2024-01-01"), ("a", "2024-02-01", "plan_change", None, "Orchard", "30"),
        ("a", "2024-04-01", "cancel"),
        signup("b", "2024-01-01"), ("b", "2024-03-01", "cancel"),
        signup("c", "2024-01-01"), ("c", "2024-03-02", "cancel"),
        signup("d", "2024-03-01"), ("d", "2024-03-11", "cancel"),
        signup("e", "2023-12-01"), ("e", "2023-12-20", "cancel"),
    ], start="2024-03-01")
    assert rows_of(p, (*CORE, "plan", "price_ratio")) == [
        ("a", 1, 60.0, 91.0, 1, "voluntary", "Orchard", 3.0),
        ("c", 1, 60.0, 61.0, 1, "voluntary", "Seedling", 1.0),
        ("d", 1, 0.0, 10.0, 1, "voluntary", "Seedling", 1.0),
    ]
    r = p.reconciliation
    assert (r.rows_in, r.used, r.outside_window, r.quarantined) == (11, 7, 4, 0)


def test_timezone_turns_times_into_local_days(tmp_path):
    """03:00 UTC on 1 Jan is 22:00 on 31 Dec in New York; a time without an offset is
    a New York wall-clock time."""
    p = run(tmp_path, [signup("a", "2024-01-01T03:00:00Z"), ("a", "2024-01-11 03:00:00", "cancel")],
            timezone="America/New_York")
    assert rows_of(p, ("start", "stop", "start_date")) == [(0.0, 11.0, dt.date(2023, 12, 31))]
    p = run(tmp_path, [signup("a", "2024-01-01T03:00:00Z"), ("a", "2024-01-11 03:00:00", "cancel")],
            timezone="UTC")
    assert rows_of(p, ("start", "stop", "start_date")) == [(0.0, 10.0, dt.date(2024, 1, 1))]


def test_utc_days_at_the_day_boundary(tmp_path):
    """In UTC the day comes straight from the instant (no zone conversion): a time
    with an offset counts on its UTC day, a microsecond before midnight on the day
    before."""
    p = run(tmp_path, [signup("a", "2023-12-31T22:30:00-02:00"),
                       ("a", "2024-01-10 23:59:59.999999", "cancel"),
                       signup("b", "2024-01-01T01:00:00+02:00"), ("b", "2024-01-05", "cancel")],
            timezone="UTC")
    assert rows_of(p, ("customer_id", "start", "stop", "start_date")) == [
        ("a", 0.0, 9.0, dt.date(2024, 1, 1)), ("b", 0.0, 5.0, dt.date(2023, 12, 31))]


def test_utc_day_matches_duckdbs_zone_conversion():
    """Reference: DuckDB's own timezone('UTC', t) over instants every 7h 13m from 1900
    to 2100 and around midnights before and after 1970."""
    import duckdb

    con = duckdb.connect()
    con.execute("set TimeZone = 'UTC'")
    rows = con.execute("""
        with t as (
            select unnest(range(timestamptz '1900-01-01 00:00:00+00',
                                timestamptz '2100-01-01 00:00:00+00', interval 433 minute)) as ts
            union all
            select timestamptz '1970-01-01 00:00:00+00' + to_microseconds(d) as ts
            from range(-3, 3) as r(d)
            union all
            select timestamptz '1969-12-31 23:59:59.999999+00'
        )
        select count(*), count(*) filter (
            where cast(make_timestamp(epoch_us(ts)) as date) <> cast(timezone('UTC', ts) as date))
        from t""").fetchall()
    con.close()
    assert rows[0][0] > 200_000 and rows[0][1] == 0


def test_rows_are_sorted_and_typed(tmp_path):
    p = run(tmp_path, [signup("b", "2024-01-01"), signup("a", "2024-02-01"),
                       ("a", "2024-03-01", "cancel"), signup("a", "2024-04-01", kind="reactivate")])
    assert rows_of(p, ("customer_id", "spell", "start")) == [
        ("a", 1, 0.0), ("a", 2, 0.0), ("b", 1, 0.0)]
    assert p.arrow.column_names == [
        "customer_id", "spell", "start", "stop", "churned", "cause", "weight", "start_date",
        "cohort", "channel", "region", "arm", "plan", "price", "price_ratio", "in_recovery",
        "paused", "prior_spells"]
    assert [str(t) for t in p.arrow.schema.types] == [
        "string", "int64", "double", "double", "int32", "string", "double", "date32[day]",
        "string", "string", "string", "string", "string", "double", "double", "double",
        "double", "double"]
    assert p.table.n_rows == 3 and p.table.has_customers


def test_compression_keeps_every_row_as_a_weight(tmp_path):
    rows = []
    for i in range(5):
        rows += [signup(f"c{i}", "2024-01-01"), (f"c{i}", "2024-01-31", "cancel")]
    rows += [signup("z", "2024-01-01", plan="Bloom")]
    p = run(tmp_path, rows, compress=True)
    c = p.compressed
    assert "customer_id" not in c.column_names and "spell" not in c.column_names
    got = sorted(zip(c.column("plan").to_pylist(), c.column("stop").to_pylist(),
                     c.column("weight").to_pylist(), strict=True))
    assert got == [("Bloom", 365.0, 1.0), ("Seedling", 30.0, 5.0)]


@pytest.mark.parametrize("price,ratio", [("0", None), ("", None)])
def test_ratio_is_missing_when_the_base_is_zero_or_missing(tmp_path, price, ratio):
    p = run(tmp_path, [signup("a", "2024-01-01", price=price),
                       ("a", "2024-01-11", "price_change", None, None, "5"),
                       ("a", "2024-01-21", "cancel")])
    assert rows_of(p, ("price_ratio",)) == [(ratio,), (ratio,)]


def test_same_day_same_kind_events_apply_in_time_order(tmp_path):
    """Two price changes on one day: the later time wins, whatever the file order."""
    p = run(tmp_path, [signup("a", "2024-01-01 09:00"),
                       ("a", "2024-01-11 17:00", "price_change", None, None, "14"),
                       ("a", "2024-01-11 08:00", "price_change", None, None, "12"),
                       ("a", "2024-01-21 09:00", "cancel")])
    assert rows_of(p, ("start", "stop", "price")) == [(0.0, 10.0, 10.0), (10.0, 20.0, 14.0)]


def test_events_at_the_same_moment_apply_in_file_order(tmp_path):
    """Same customer, day, kind and time: the later source row wins. Such ties send the
    customer through the row-by-row check; the rows must come out as for any other."""
    p = run(tmp_path, [signup("a", "2024-01-01 09:00"),
                       ("a", "2024-01-11 08:00", "price_change", None, None, "12"),
                       ("a", "2024-01-11 08:00", "price_change", None, None, "14"),
                       ("a", "2024-01-21 09:00", "cancel"),
                       signup("b", "2024-01-01 09:00"), ("b", "2024-01-21 09:00", "cancel")])
    assert rows_of(p, ("customer_id", "start", "stop", "price")) == [
        ("a", 0.0, 10.0, 10.0), ("a", 10.0, 20.0, 14.0), ("b", 0.0, 20.0, 10.0)]


def test_a_customer_with_a_repeat_and_a_stray_start_keeps_the_rest(tmp_path):
    """Exact repeat and a start during an open spell: both quarantined, every other row
    of that customer used as if they were not there."""
    p = run(tmp_path, [signup("a", "2024-01-01"), ("a", "2024-01-05", "pause"),
                       ("a", "2024-01-05", "pause"), signup("a", "2024-01-08"),
                       ("a", "2024-01-09", "resume"), ("a", "2024-01-21", "cancel")])
    assert rows_of(p, ("start", "stop", "churned", "paused")) == [
        (0.0, 4.0, 0, 0.0), (4.0, 8.0, 0, 1.0), (8.0, 20.0, 1, 0.0)]
    assert p.reconciliation.by_reason == {"exact duplicate": 1,
                                          "start during an open spell": 1}


def test_cancel_and_reactivation_on_one_day_end_one_spell_and_open_the_next(tmp_path):
    """A spell is open when the day begins, and the day holds a cancel and a reactivation:
    the cancel applies first, so spell 1 churns on that day and spell 2 starts on it. (A
    signup and a cancel on one day keep the fixed order: start, then end.)"""
    p = run(tmp_path, [signup("a", "2024-01-01"),
                       ("a", "2024-01-11 15:00", "reactivate", None, "Bloom", "20"),
                       ("a", "2024-01-11 10:00", "cancel", "too_expensive"),
                       ("a", "2024-01-21", "cancel"),
                       signup("b", "2024-01-05 09:00"), ("b", "2024-01-05 17:00", "cancel")])
    assert rows_of(p, ("customer_id", "spell", "start", "stop", "churned", "cause", "plan",
                       "prior_spells")) == [
        ("a", 1, 0.0, 10.0, 1, "voluntary", "Seedling", 0.0),
        ("a", 2, 0.0, 10.0, 1, "voluntary", "Bloom", 1.0),
        ("b", 1, 0.0, 0.5, 1, "voluntary", "Seedling", 0.0)]
    assert p.reconciliation.quarantined == 0


def test_signup_cancel_and_signup_again_on_one_day_make_two_spells(tmp_path):
    """Signup 09:00, cancel 17:00, signup again 20:00 on 5 Mar: the day holds two starts,
    so its events apply in time order. Spell 1 starts and ends that day: (0, 0.5],
    churned, voluntary (no reason, not in recovery). Spell 2 starts that day with the
    20:00 values and is still open on the as-of date 31 Mar: (0, 26], censored,
    prior_spells 1. Nothing is quarantined."""
    p = run(tmp_path, [signup("a", "2024-03-05 09:00"), ("a", "2024-03-05 17:00", "cancel"),
                       signup("a", "2024-03-05 20:00", plan="Bloom", price="20")],
            as_of="2024-03-31")
    assert rows_of(p, (*CORE, "start_date", "plan", "price_ratio", "prior_spells")) == [
        ("a", 1, 0.0, 0.5, 1, "voluntary", dt.date(2024, 3, 5), "Seedling", 1.0, 0.0),
        ("a", 2, 0.0, 26.0, 0, "", dt.date(2024, 3, 5), "Bloom", 1.0, 1.0)]
    assert p.reconciliation.quarantined == 0 and p.reconciliation.used == 3


def test_a_day_with_two_ends_takes_its_events_in_time_order(tmp_path):
    """Open since 1 Mar; on 11 Mar: cancel 10:00 (too_expensive), reactivate 12:00, a
    payment failure 15:00, cancel 18:00 (no reason). Spell 1: (0, 10] churned voluntary.
    Spell 2 starts and ends on 11 Mar: (0, 0.5] churned involuntary (in recovery at its
    end); its row carries the state after that day's events (in_recovery 1)."""
    p = run(tmp_path, [signup("a", "2024-03-01"),
                       ("a", "2024-03-11 18:00", "cancel"),
                       ("a", "2024-03-11 10:00", "cancel", "too_expensive"),
                       ("a", "2024-03-11 15:00", "payment_failed"),
                       signup("a", "2024-03-11 12:00", kind="reactivate")],
            as_of="2024-03-31")
    assert rows_of(p, (*CORE, "in_recovery", "prior_spells")) == [
        ("a", 1, 0.0, 10.0, 1, "voluntary", 0.0, 0.0),
        ("a", 2, 0.0, 0.5, 1, "involuntary", 1.0, 1.0)]
    assert p.reconciliation.quarantined == 0


def test_without_times_of_day_two_starts_and_an_end_keep_the_fixed_order(tmp_path):
    """The same signup, cancel, signup with dates only: the three events tie on time, so
    the fixed order decides (start, start, end): the second start meets the open spell
    and is quarantined, the cancel ends the spell on its first day (0, 0.5]."""
    p = run(tmp_path, [signup("a", "2024-03-05"), ("a", "2024-03-05", "cancel"),
                       signup("a", "2024-03-05", plan="Bloom")], as_of="2024-03-31")
    assert rows_of(p, (*CORE, "plan")) == [("a", 1, 0.0, 0.5, 1, "voluntary", "Seedling")]
    assert p.reconciliation.by_reason == {"start during an open spell": 1}


@pytest.mark.parametrize("recovered", [True, False])
def test_payment_failed_then_recovered_on_one_day_is_not_in_recovery(tmp_path, recovered):
    """Same day: payment_failed applies before payment_recovered (the fixed order, here
    against the file order), so with both on 11 Jan the customer is out of recovery when
    the day ends: no cut (the state equals day 0's), one row (0, 11], and the cancel on 12
    Jan without a reason is voluntary. With the failure alone the state changes on day 10:
    (0, 10] in_recovery 0, then (10, 11] in_recovery 1 and the cancel is involuntary."""
    rows = [signup("a", "2024-01-01")]
    if recovered:
        rows.append(("a", "2024-01-11", "payment_recovered"))
    rows += [("a", "2024-01-11", "payment_failed"), ("a", "2024-01-12", "cancel")]
    p = run(tmp_path, rows)
    got = rows_of(p, (*CORE, "in_recovery"))
    if recovered:
        assert got == [("a", 1, 0.0, 11.0, 1, "voluntary", 0.0)]
    else:
        assert got == [("a", 1, 0.0, 10.0, 0, "", 0.0),
                       ("a", 1, 10.0, 11.0, 1, "involuntary", 1.0)]
