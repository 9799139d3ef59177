"""Each SQL step's output columns and types (DESCRIBE on a real DuckDB connection)."""

from __future__ import annotations

import pytest
from test_prepare_support import project

from retain.data.prepare import compress_table, connect, run_steps
from retain.data.sqlsteps import run_step, step_parameters

S = ("search", "north", "standard")
LOG = [("a", "2024-01-01", "signup", None, "Seedling", "10", *S),
       ("a", "2024-01-11", "price_change", None, None, "12"),
       ("a", "2024-01-21", "cancel", "too_expensive"),
       ("b", "2024-01-05", "pause"),
       ("c", "2024-01-05", "teleport")]


@pytest.fixture(scope="module")
def con(tmp_path_factory):
    cfg = project(tmp_path_factory.mktemp("sql"), LOG)
    con = connect(cfg)
    run_steps(con, cfg)
    yield con
    con.close()


def schema(con, relation):
    return [(r[0], r[1]) for r in con.execute(f"describe {relation}").fetchall()]


def category(con):
    """The DESCRIBE text of the ENUM type ``category`` (categories.sql)."""
    return con.execute("select typeof(cast(null as category))").fetchall()[0][0]


def attrs(con):
    cat = category(con)
    return [("vc__plan", cat), ("sc__channel", cat), ("sc__region", cat), ("sc__arm", cat),
            ("sc__0", cat), ("vc__0", cat)]


NUMS = [("vr__price", "DOUBLE"), ("sn__0", "DOUBLE"), ("vn__0", "DOUBLE"), ("vr__0", "DOUBLE")]


def test_categories_are_the_distinct_trimmed_categorical_values(con):
    members = con.execute("select unnest(enum_range(cast(null as category)))").fetchall()
    assert sorted(m[0] for m in members) == sorted(["Seedling", *S])
    assert schema(con, "(" + run_step(con, "categories").sql_query() + ")") == [
        ("value", "VARCHAR")]


def test_normalise_columns(con):
    assert schema(con, "events") == [
        ("source_row", "BIGINT"), ("customer_id", "VARCHAR"), ("day", "DATE"),
        ("event_ts", "TIMESTAMP WITH TIME ZONE"), ("event_raw", "VARCHAR"),
        ("reason_raw", "VARCHAR"), ("event", "VARCHAR"), ("event_rank", "INTEGER"),
        ("cause_given", "VARCHAR"), ("ignored", "BOOLEAN"), ("reason", "VARCHAR"),
        ("ord", "HUGEINT"), ("day_ord", "HUGEINT"), *attrs(con), *NUMS]


def test_ord_orders_a_customers_events_by_day_rank_time_and_row(con):
    rows = con.execute("select source_row from events where customer_id = 'a' order by ord"
                       ).fetchall()
    assert [r[0] for r in rows] == [1, 2, 3]
    same = con.execute("select count(distinct day_ord) from events where customer_id = 'b'"
                       ).fetchall()
    assert same == [(1,)]


def test_sequence_columns(con):
    assert schema(con, "sequence_problems") == [("source_row", "BIGINT"), ("reason", "VARCHAR")]
    assert con.execute("select * from sequence_problems").fetchall() == [
        (4, "event before the customer's first start")]


def state_columns(con):
    cat = category(con)
    return [
        ("customer_id", "VARCHAR"), ("source_row", "BIGINT"), ("spell", "BIGINT"),
        ("start_day", "DATE"), ("day", "DATE"), ("tenure", "INTEGER"), ("event_rank", "INTEGER"),
        ("cause", "VARCHAR"), ("last_of_day", "BOOLEAN"), ("changed", "BOOLEAN"),
        ("end_day", "DATE"), ("outside_window", "BOOLEAN"), ("paused", "INTEGER"),
        ("in_recovery", "INTEGER"), ("vc__plan", cat), ("vr__price", "DOUBLE"),
        ("vc__0", cat), ("vn__0", "DOUBLE"), ("vr__0", "DOUBLE"), ("sc__channel", cat),
        ("sc__region", cat), ("sc__arm", cat), ("sc__0", cat), ("sn__0", "DOUBLE")]


def test_states_troubled_and_spells_columns(con):
    cols = state_columns(con)
    assert schema(con, "first_pass") == cols + [("suspect", "BOOLEAN")]
    assert schema(con, "redo") == cols + [("suspect", "BOOLEAN")]
    assert schema(con, "troubled_events") == schema(con, "events")
    assert schema(con, "troubled_repeats") == [("source_row", "BIGINT"), ("reason", "VARCHAR")]
    # the reorder step keeps every column; only `ord` may move (to the end of the list)
    assert schema(con, "troubled_ordered") == [c for c in schema(con, "events")
                                               if c[0] != "ord"] + [("ord", "HUGEINT")]
    assert schema(con, "spells") == cols + [("event", "VARCHAR")]
    # customer b's only row (a pause before any start) is suspect; a and c are not
    assert con.execute("select distinct customer_id from troubled_events").fetchall() == [("b",)]
    assert con.execute("select customer_id, count(*) from spells group by all").fetchall() == [
        ("a", 3)]


CORE = [("customer_id", "VARCHAR"), ("spell", "BIGINT"), ("start", "DOUBLE"), ("stop", "DOUBLE"),
        ("churned", "INTEGER"), ("cause", "VARCHAR"), ("weight", "DOUBLE"),
        ("start_date", "DATE"), ("cohort", "VARCHAR")]
TAIL = [("sc__channel", "VARCHAR"), ("sc__region", "VARCHAR"), ("sc__arm", "VARCHAR"),
        ("sc__0", "VARCHAR"), ("sn__0", "DOUBLE"), ("vc__plan", "VARCHAR"), ("vc__0", "VARCHAR"),
        ("vr__price", "DOUBLE"), ("vn__0", "DOUBLE"), ("vr__0", "DOUBLE"),
        ("ratio__vr__price", "DOUBLE"), ("ratio__vr__0", "DOUBLE"), ("in_recovery", "DOUBLE"),
        ("paused", "DOUBLE"), ("prior_spells", "DOUBLE")]


def test_intervals_columns(con):
    assert schema(con, "start_stop") == CORE + TAIL


def test_quarantine_reconcile_and_unknown_event_columns(con):
    q = run_step(con, "quarantine")
    assert list(zip(q.columns, map(str, q.types), strict=True)) == [
        ("source_row", "BIGINT"), ("account", "VARCHAR"), ("occurred_at", "VARCHAR"),
        ("kind", "VARCHAR"), ("cancel_reason", "VARCHAR"), ("plan", "VARCHAR"),
        ("monthly_price", "VARCHAR"), ("channel", "VARCHAR"), ("region", "VARCHAR"),
        ("arm", "VARCHAR"), ("quarantine_reason", "VARCHAR"), ("quarantine_code", "VARCHAR")]
    r = run_step(con, "reconcile")
    assert list(zip(r.columns, map(str, r.types), strict=True)) == [
        ("outcome", "VARCHAR"), ("reason", "VARCHAR"), ("code", "VARCHAR"),
        ("n_rows", "BIGINT")]
    assert r.fetchall() == [
        ("ignored", "", "", 0),
        ("quarantined", "event before the customer's first start", "before_first_start", 1),
        ("quarantined", "unknown event", "unknown_event", 1), ("used", "", "", 3)]
    assert schema(con, "reason_codes") == [("reason", "VARCHAR"), ("code", "VARCHAR")]
    u = run_step(con, "unknown_events")
    assert list(zip(u.columns, map(str, u.types), strict=True)) == [
        ("value", "VARCHAR"), ("n_rows", "BIGINT")]
    assert u.fetchall() == [("teleport", 1)]


def test_compress_columns(con):
    c = run_step(con, "compress")
    assert list(zip(c.columns, map(str, c.types), strict=True)) == [
        ("start", "DOUBLE"), ("stop", "DOUBLE"), ("churned", "INTEGER"), ("cause", "VARCHAR"),
        ("weight", "DOUBLE"), ("cohort", "VARCHAR"), *TAIL]


def test_compress_table_on_any_arrow_start_stop_table(con):
    arrow = con.table("start_stop").to_arrow_table()
    out = compress_table(arrow)
    assert out.num_rows == 2 and sum(out.column("weight").to_pylist()) == 2.0


@pytest.mark.parametrize("step,params", [
    ("normalise", {"timezone", "time_kind", "time_pattern", "as_of", "event_from", "event_to",
                   "event_ignore", "reason_from", "reason_to", "reason_ignore"}),
    ("states", {"window_start"}), ("troubled", set()), ("sequence", set()), ("spells", set()),
    ("state_input_all", set()), ("state_input_redo", set()),
    ("models/exposure_running", set()), ("repeats", set()), ("reorder", set()),
    ("intervals", {"as_of", "window_start"}),
    ("compress", set()), ("quarantine", set()), ("reconcile", set()),
    ("reason_codes", {"reason_sentences", "reason_codes"}),
    ("import_csv", {"path", "delimiter", "quote", "escape", "header", "encoding", "columns"}),
    ("import_parquet", {"path"}), ("import_table", set()),
])
def test_each_step_binds_exactly_its_parameters(step, params):
    assert step_parameters(step) == params


def test_rows_come_out_ordered_and_the_fallback_sort_restores_the_order():
    import duckdb

    from retain.data.prepare import _in_order, _ordered_arrow

    con = duckdb.connect()
    con.execute("create table start_stop as select * from (values ('b', 1, 0.0), "
                "('a', 2, 5.0), ('a', 1, 3.0), ('a', 1, 0.0)) t(customer_id, spell, start)")
    table = con.table("start_stop").to_arrow_table()
    assert not _in_order(table)
    out = _ordered_arrow(table)
    assert list(zip(*(out.column(c).to_pylist() for c in ("customer_id", "spell", "start")),
                    strict=True)) == [("a", 1, 0.0), ("a", 1, 3.0), ("a", 2, 5.0), ("b", 1, 0.0)]
    assert _in_order(out)
