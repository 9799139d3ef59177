"""From a raw event log to the start-stop table, in DuckDB.

:func:`prepare` runs the SQL steps in ``sql/`` by name (see DEVELOPERS.md,
"Preparation rules"):

``import_*``  the log as text (CSV, Parquet or a DuckDB table) -> ``raw``
``categories`` the categorical values, as ENUM type           -> ``category``
``normalise`` our column names, the day in the configured zone, our events,
              typed attributes, row-level quarantine reasons  -> ``events``
``states``    one window per customer: each event's state, and
              whether it may be out of order or repeated      -> ``first_pass``
``troubled``  the usable rows of customers with such a row    -> ``troubled_events``
``repeats``   their exact repeats                             -> ``troubled_repeats``
``reorder``   the rest in rule order (a same-day cancel, then
              reactivation)                                   -> ``troubled_ordered``
``sequence``  repeats and rows out of order                   -> ``sequence_problems``
``states``    again, on their used rows                       -> ``redo``
``spells``    every used event with its customer's state      -> ``spells`` (view)
``intervals`` the start-stop rows                             -> ``start_stop``
``compress``  optional: identical rows collapsed with a weight
``quarantine``, ``reconcile``, ``unknown_events``: what became of every row.

The log is never loaded into pandas; results come back as Arrow tables.
"""

from __future__ import annotations

import json
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from functools import cached_property
from pathlib import Path
from typing import Any

import duckdb
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pacsv
import pyarrow.parquet as pq

from retain.data.config import Config
from retain.data.contract import (
    COHORT,
    DERIVED,
    KEYS,
    ColumnSchema,
    TableContext,
    placeholders,
    public_name,
    ratio_column,
    with_context,
)
from retain.data.reasons import reason_parameters
from retain.data.source import MALFORMED, import_csv
from retain.data.sqlsteps import run_step
from retain.data.table import StartStop
from retain.data.thresholds import check_thresholds
from retain.errors import ConfigError, DataError, ReconciliationError, RetainError
from retain.results import Result

#: progress(step, rows, seconds): called after each step.
Progress = Callable[[str, int, float], None]


# ---------------------------------------------------------------------- results
@dataclass(frozen=True)
class Reconciliation(Result):
    """What became of every input row; ``rows_in`` = the sum of the lines.

    Lines (``outcome``, ``reason``, ``n_rows``): ``used`` (an event of a spell in
    the window), ``outside window`` (an event of a spell that ended on or before
    the window's first day), ``ignored`` (an event value listed in
    ``[events] ignore``) and ``quarantined`` by reason. ``by_code`` holds the same
    quarantined counts under each reason's stable code (retain/data/reasons.py).
    """

    source: str
    rows_in: int
    used: int
    outside_window: int
    ignored: int
    quarantined: int
    by_reason: dict[str, int]
    n_customers: int
    n_spells: int
    n_intervals: int
    n_churns: int
    churns_by_cause: dict[str, int] = field(default_factory=dict)
    by_code: dict[str, int] = field(default_factory=dict)

    def to_frame(self) -> pd.DataFrame:
        rows = [("rows in", "", self.rows_in), ("used", "", self.used),
                ("outside window", "", self.outside_window), ("ignored", "", self.ignored)]
        rows += [("quarantined", reason, n) for reason, n in sorted(self.by_reason.items())]
        return pd.DataFrame(rows, columns=["outcome", "reason", "n_rows"])

    def summary(self) -> str:
        q = ", ".join(f"{r}: {n}" for r, n in sorted(self.by_reason.items())) or "none"
        return (f"{self.rows_in} rows read from {self.source}: {self.used} used, "
                f"{self.outside_window} outside the window, {self.ignored} ignored, "
                f"{self.quarantined} quarantined ({q}). Start-stop table: {self.n_intervals} "
                f"rows, {self.n_customers} customers, {self.n_spells} spells, "
                f"{self.n_churns} churns.")


@dataclass(frozen=True)
class Prepared:
    """Everything :func:`prepare` produces.

    ``arrow`` is the start-stop table as written to Parquet (its context in the
    schema metadata); ``table`` is the same table as :class:`StartStop` arrays for
    the models, built on first use (the commands that only write files never pay
    for it).
    """

    arrow: pa.Table
    quarantine: pa.Table
    reconciliation: Reconciliation
    unknown_events: dict[str, int]
    config: Config
    compressed: pa.Table | None = None

    @cached_property
    def table(self) -> StartStop:
        return StartStop.from_arrow(self.arrow,
                                    source=f"start-stop table of {_shown_source(self.config)}",
                                    context=self.context)

    @property
    def context(self) -> TableContext:
        """The table's context, from the project's settings (:func:`table_context`)."""
        return table_context(self.config)


def table_context(config: Config) -> TableContext:
    """The start-stop table's context: the as-of date, the window, the time zone and
    the schema of every covariate prepare writes, in the table's column order
    (cohort, static and time-varying attributes, ratios, derived states), with the
    reference level ``[model] reference`` sets."""
    ref = config.model.reference

    def level(name: str) -> str | None:
        return None if ref.get(name) is None else str(ref[name])

    attrs = sorted(config.attributes, key=lambda a: a.varies)  # stable: static first
    columns = [ColumnSchema(COHORT, "categorical", False, reference=level(COHORT), derived=True)]
    columns += [ColumnSchema(a.name, a.kind, a.varies, ratio=a.ratio, reference=level(a.name))
                for a in attrs]
    columns += [ColumnSchema(ratio_column(a.name), "numeric", True, derived=True)
                for a in config.attributes if a.ratio]
    columns += [ColumnSchema(d, "numeric", True, derived=True) for d in DERIVED]
    w = config.window
    return TableContext(as_of=w.as_of, window_start=w.start, timezone=w.timezone,
                        columns=tuple(columns))


# ---------------------------------------------------------------------- helpers
def _ident(name: str) -> str:
    """A column name as a quoted SQL identifier (names cannot be bound parameters)."""
    return '"' + name.replace('"', '""') + '"'


def _literal(text: str) -> str:
    """A validated setting value as an SQL string literal (SET takes no parameters)."""
    return "'" + text.replace("'", "''") + "'"


def connect(config: Config) -> duckdb.DuckDBPyConnection:
    """An in-memory DuckDB connection with the engine settings of ``config``."""
    eng = config.engine
    settings: dict[str, Any] = {"memory_limit": eng.memory_limit, "threads": eng.threads,
                                "preserve_insertion_order": True}
    if eng.temp_directory is not None:
        eng.temp_directory.mkdir(parents=True, exist_ok=True)
        settings["temp_directory"] = str(eng.temp_directory)
    con = duckdb.connect(config=settings)
    # retain reports its own progress, one line per step
    con.execute("set enable_progress_bar = false")
    # the zone was checked against DuckDB's own list when the config was read
    con.execute(f"set TimeZone = {_literal(config.window.timezone)}")
    return con


class _Timer:
    def __init__(self, con: duckdb.DuckDBPyConnection, progress: Progress | None) -> None:
        self.con = con
        self.progress = progress
        self.times: dict[str, float] = {}
        self.outputs: dict[str, Any] = {}
        #: the step running now (named in the message if the engine fails in it)
        self.step = "import"

    def run(self, step: str, fn: Callable[[], Any], table: str | None = None) -> Any:
        self.step = step
        t0 = time.perf_counter()
        out = fn()
        dt = time.perf_counter() - t0
        self.times[step] = dt
        self.outputs[step] = out
        if self.progress is not None:
            if table is not None:
                rows = self.con.execute(f"select count(*) from {table}").fetchall()[0][0]
            else:
                rows = out.num_rows if isinstance(out, pa.Table) else 0
            self.progress(step, int(rows), dt)
        return out


def _import(con: duckdb.DuckDBPyConnection, config: Config) -> None:
    src = config.source
    try:
        if src.format == "duckdb":
            con.execute(f"attach {_literal(str(src.duckdb))} as user_db (read_only)")
            parts = src.table.split(".")
            con.execute("create or replace view source_table as select * from user_db."
                        + ".".join(_ident(p) for p in parts))
            run_step(con, "import_table", create="raw")
        elif src.format == "memory":
            data = src.data
            if isinstance(data, duckdb.DuckDBPyRelation):
                # runs on the relation's own connection, streamed into ours
                data = data.to_arrow_reader()
            con.register("source_table", data)
            try:
                run_step(con, "import_table", create="raw")
            finally:
                con.unregister("source_table")
        elif src.format == "parquet":
            run_step(con, "import_parquet", {"path": str(src.path)}, create="raw")
        else:
            import_csv(con, config)
    except duckdb.OutOfMemoryException:
        raise  # prepare names [engine] memory_limit
    except duckdb.Error as exc:
        first = _first_line(exc)
        if src.format == "memory":
            raise DataError(src.label, f"cannot be read ({first})",
                            "give columns DuckDB can read (text, numbers, times)") from exc
        raise DataError(src.label, f"cannot be read as {src.format} ({first})",
                        "check the file and [source] in retain.toml") from exc


def _first_line(exc: BaseException) -> str:
    """The first line of an engine's message (with its kind, e.g. "Out of Memory Error")."""
    text = (str(exc).strip().splitlines() or [type(exc).__name__])[0]
    return text


def _engine_error(exc: BaseException, step: str, config: Config) -> Exception:
    """A DuckDB or Arrow error in step ``step`` as one line that says what to change."""
    if isinstance(exc, duckdb.OutOfMemoryException):
        return ConfigError(f"{config.path}: [engine] memory_limit",
                           f"{config.engine.memory_limit} is not enough memory for the {step} "
                           f"step ({_first_line(exc)})",
                           'raise memory_limit (e.g. "4GB") or set [engine] temp_directory '
                           "so DuckDB can spill to disk")
    return DataError(f"{config.source.label}: preparation step {step!r}",
                     f"the engine stopped ({type(exc).__name__}: {_first_line(exc)})",
                     f"check the log against [source] and [columns] in {config.path}; if "
                     "they match, this is a bug in retain: rerun with --debug and report it")


def _source_view(con: duckdb.DuckDBPyConnection, config: Config) -> None:
    """Name the user's columns in our words (the only place their names appear)."""
    found = [r[0] for r in con.execute("describe raw").fetchall()]
    cols = config.columns
    wanted = [("customer_id", cols.customer_id, "[columns] customer_id"),
              ("event_time", cols.event_time, "[columns] event_time"),
              ("event", cols.event, "[columns] event")]
    if cols.reason is not None:
        wanted.append(("reason", cols.reason, "[columns] reason"))
    for a in config.attributes:
        wanted.append((a.prefix + a.name, a.column, f"[attributes.{a.name}] column"))
    for _, theirs, key in wanted:
        if theirs not in found:
            hint = ""
            if config.source.format == "csv" and len(found) == 1:
                hint = (f" (one column only: is [source] delimiter "
                        f"{config.source.dialect.delimiter!r} the file's?)")
            raise DataError(f"{config.source.label}", f"has no column {theirs!r} (named by "
                            f"{key} in {config.path})",
                            f"columns found: {', '.join(found)}{hint}")
    select = ["rowid + 1 as source_row"]
    select += [f"{_ident(theirs)} as {_ident(ours)}" for ours, theirs, _ in wanted]
    # a CSV record that did not split into the columns (see retain/data/source.py)
    select.append(f"{_ident(MALFORMED)} is not null as malformed" if MALFORMED in found
                  else "false as malformed")
    if cols.reason is None:
        select.append("cast(null as varchar) as reason")
    select += [f"cast(null as varchar) as {p}" for p in placeholders()]
    con.execute("create or replace view source_events as select " + ", ".join(select)
                + " from raw")


def _params(config: Config) -> dict[str, Any]:
    ev, rs = config.events, config.reasons
    return {
        "timezone": config.window.timezone,
        "time_kind": config.columns.time_kind,
        "time_pattern": (config.columns.time_format if config.columns.time_kind == "pattern"
                         else "%Y-%m-%d"),
        "as_of": config.window.as_of,
        "window_start": config.window.start,
        "event_from": list(ev.map), "event_to": list(ev.map.values()),
        "event_ignore": list(ev.ignore),
        "reason_from": list(rs.map), "reason_to": list(rs.map.values()),
        "reason_ignore": list(rs.ignore),
    }


def _public_names(table: pa.Table) -> pa.Table:
    """Strip the SQL steps' group prefixes; drop the placeholders (retain/data/contract.py)."""
    keep, names = [], []
    for i, name in enumerate(table.column_names):
        public = public_name(name)
        if public is not None:
            names.append(public)
            keep.append(i)
    return table.select(keep).rename_columns(names)


def _ordered_arrow(table: pa.Table) -> pa.Table:
    """The start-stop table with its rows in (customer_id, spell, start) order."""
    return _ordered_and_counted(table)[0]


def _ordered_and_counted(table: pa.Table) -> tuple[pa.Table, int, int]:
    """The ordered start-stop table, its customers and its spells.

    The intervals step emits its rows in order; one pass over the keys checks it and
    counts the customers and spells. Should an engine change ever break the order, the
    rows are sorted on the keys alone (in Arrow, byte order as the check) and counted
    again.
    """
    ordered, customers, spells = _key_runs(table)
    if not ordered:
        position = pc.sort_indices(table, sort_keys=[(k, "ascending") for k in KEYS])
        table = table.take(position)
        _, customers, spells = _key_runs(table)
    return _public_names(table), customers, spells


def _key_runs(table: pa.Table) -> tuple[bool, int, int]:
    """Whether rows are in (customer_id, spell, start) order, and (if so) how many
    customers and spells they hold, from one comparison of each row with the next."""
    n = table.num_rows
    if n < 2:
        return True, n, n
    cid, spell, start = (table.column(c) for c in KEYS)
    head, tail = (lambda c: c.slice(0, n - 1)), (lambda c: c.slice(1))
    new_customer = pc.not_equal(tail(cid), head(cid))
    new_spell = pc.or_(new_customer, pc.not_equal(tail(spell), head(spell)))
    ok = pc.or_(pc.greater(tail(cid), head(cid)),
                pc.and_(pc.invert(new_customer),
                        pc.or_(pc.greater(tail(spell), head(spell)),
                               pc.and_(pc.invert(new_spell),
                                       pc.greater(tail(start), head(start))))))
    return (bool(pc.all(ok).as_py()), 1 + (pc.sum(new_customer).as_py() or 0),
            1 + (pc.sum(new_spell).as_py() or 0))


def _in_order(table: pa.Table) -> bool:
    return _key_runs(table)[0]


def _strict_checks(con: duckdb.DuckDBPyConnection, config: Config) -> None:
    if config.events.strict:
        rows = run_step(con, "unknown_events").fetchall()
        if rows:
            listed = ", ".join(f"{v!r} ({n} rows)" for v, n in rows[:10])
            raise DataError(f"{config.source.label} column {config.columns.event!r}",
                            f"unknown event values: {listed}",
                            f"map them in [events] map or list them in [events] ignore "
                            f"in {config.path}")
    if config.reasons.strict:
        rows = con.execute("select e.source_row from events as e where e.reason = "
                           "'unknown churn reason' limit 1").fetchall()
        if rows:
            vals = con.execute(
                "select distinct s.reason from source_events as s inner join events as e "
                "on s.source_row = e.source_row where e.reason = 'unknown churn reason' "
                "order by 1 limit 10").fetchall()
            raise DataError(f"{config.source.label} column {config.columns.reason!r}",
                            "unknown churn reasons: " + ", ".join(repr(v[0]) for v in vals),
                            f"map them in [reasons] map or list them in [reasons] ignore "
                            f"in {config.path}")


@dataclass(frozen=True)
class _Fates:
    """What became of every input row (the reconciliation before the table exists)."""

    rows_in: int
    counts: dict[str, int]
    by_reason: dict[str, int]
    by_code: dict[str, int]


def _row_fates(con: duckdb.DuckDBPyConnection, config: Config) -> _Fates:
    rows_in = int(con.execute("select count(*) from raw").fetchall()[0][0])
    lines = run_step(con, "reconcile").fetchall()
    by_reason: dict[str, int] = {}
    by_code: dict[str, int] = {}
    counts = {"used": 0, "outside window": 0, "ignored": 0}
    for outcome, reason, code, n in lines:
        if outcome == "quarantined":
            if not code:
                raise ReconciliationError(
                    config.source.label, f"quarantine reason {reason!r} has no code",
                    "this is a bug in retain: add it to retain/data/reasons.py")
            by_reason[reason] = by_reason.get(reason, 0) + int(n)
            by_code[code] = by_code.get(code, 0) + int(n)
        else:
            counts[outcome] += int(n)
    quarantined = sum(by_reason.values())
    total = counts["used"] + counts["outside window"] + counts["ignored"] + quarantined
    if total != rows_in:
        raise ReconciliationError(
            config.source.label,
            f"rows in ({rows_in}) != used ({counts['used']}) + outside window "
            f"({counts['outside window']}) + ignored ({counts['ignored']}) + quarantined "
            f"({quarantined})", "this is a bug in retain: please report it with the log")
    return _Fates(rows_in, counts, by_reason, by_code)


def _shown_source(config: Config) -> str:
    """The log as the project file names it: relative to its folder when inside it, so
    published pages and results do not change when the project folder moves."""
    src = config.source
    base = Path(config.path).resolve().parent
    target = src.duckdb if src.format == "duckdb" else src.path
    try:
        shown = str(Path(target).resolve().relative_to(base))
    except (TypeError, ValueError):
        return src.label
    return f"{shown} table {src.table}" if src.format == "duckdb" else shown


def _reconciliation(config: Config, fates: _Fates, table: pa.Table, customers: int,
                    spells: int) -> Reconciliation:
    churned = pc.equal(table.column("churned"), 1)
    counted = pc.value_counts(pc.filter(table.column("cause"), churned)).to_pylist()
    by_cause = {d["values"]: int(d["counts"]) for d in sorted(counted, key=lambda d: d["values"])}
    counts = fates.counts
    return Reconciliation(source=_shown_source(config), rows_in=fates.rows_in, used=counts["used"],
                          outside_window=counts["outside window"], ignored=counts["ignored"],
                          quarantined=sum(fates.by_reason.values()), by_reason=fates.by_reason,
                          n_customers=int(customers), n_spells=int(spells),
                          n_intervals=table.num_rows, n_churns=sum(by_cause.values()),
                          churns_by_cause=by_cause, by_code=fates.by_code)


# ---------------------------------------------------------------------- entry points
def run_steps(con: duckdb.DuckDBPyConnection, config: Config, *,
              progress: Progress | None = None,
              before_intervals: Callable[[_Timer], None] | None = None,
              timer: _Timer | None = None) -> _Timer:
    """Run the preparation steps on ``con``, leaving their tables on it.

    Tables: ``raw`` (the log as text), ``events`` (normalise),
    ``sequence_problems``, ``spells`` and ``start_stop`` (intervals: an Arrow table,
    also ``timer.outputs["intervals"]``, registered on ``con``; columns still carry
    the SQL steps' group prefixes). Used by :func:`prepare` and by tests that
    inspect one step. ``before_intervals(timer)`` runs once every row's
    fate is known, before the last step (prepare uses it to free memory).
    """
    timer = timer if timer is not None else _Timer(con, progress)
    params = _params(config)
    # the quarantine reasons' codes, for the quarantine and reconcile steps
    run_step(con, "reason_codes", reason_parameters(), create="reason_codes")
    timer.run("import", lambda: _import(con, config), "raw")
    timer.step = "column mapping"
    _source_view(con, config)
    # progress counts the type's members
    timer.run("categories", lambda: run_step(con, "categories", create="category", kind="enum"),
              "(select unnest(enum_range(cast(null as category))))")
    timer.run("normalise", lambda: run_step(con, "normalise", params, create="events"),
              "events")
    timer.step = "strict checks"
    _strict_checks(con, config)
    run_step(con, "state_input_all", create="state_input", kind="view")
    timer.run("states", lambda: run_step(con, "states", params, create="first_pass"),
              "first_pass")
    # customers with a suspect row: checked row by row, then their states again
    timer.run("rows to recheck", lambda: run_step(con, "troubled", create="troubled_events"),
              "troubled_events")
    timer.step = "repeats"
    run_step(con, "repeats", create="troubled_repeats")
    timer.step = "reorder"
    run_step(con, "reorder", create="troubled_ordered")
    timer.run("order checks", lambda: run_step(con, "sequence", create="sequence_problems"),
              "sequence_problems")
    run_step(con, "state_input_redo", create="state_input", kind="view")
    timer.run("states rechecked", lambda: run_step(con, "states", params, create="redo"), "redo")
    run_step(con, "spells", create="spells", kind="view")
    if before_intervals is not None:
        timer.step = "reconciliation"
        before_intervals(timer)
    # straight into Arrow (a table in DuckDB first would cost a second copy of the rows),
    # then registered as ``start_stop`` for the steps that read it
    def intervals() -> pa.Table:
        arrow = run_step(con, "intervals", params).to_arrow_table()
        con.register("start_stop", arrow)
        return arrow

    timer.run("intervals", intervals)
    return timer


def prepare(config: Config, *, progress: Progress | None = None,
            compress: bool | None = None) -> Prepared:
    """Turn the event log that ``config`` describes into the start-stop table.

    Parameters
    ----------
    config : Config
        From :func:`retain.data.config.load_config`.
    progress : callable, optional
        ``progress(step, rows, seconds)`` after each step (the CLI prints it).
    compress : bool, optional
        Also build the compressed table (default: ``[output] compress``).

    Returns
    -------
    Prepared
        The start-stop table (as :class:`StartStop` and Arrow), the quarantine,
        the reconciliation and the unknown event values.

    Raises
    ------
    DataError
        The log cannot be read, a mapped column is missing, strict mode found
        unknown values, or no spell is left.
    ReconciliationError
        Rows in != used + outside window + ignored + quarantined (a bug).
    """
    compress = config.output.compress if compress is None else compress
    try:
        con = connect(config)
    except duckdb.Error as exc:
        raise _engine_error(exc, "connect", config) from exc
    timer = _Timer(con, progress)
    found: dict[str, Any] = {}

    def settle(timer: _Timer) -> None:
        # every row's fate is known: keep what the outputs need, free the log's copies
        found["quarantine"] = timer.run(
            "quarantine", lambda: run_step(con, "quarantine").to_arrow_table())
        found["unknown"] = {v: int(n) for v, n in run_step(con, "unknown_events").fetchall()}
        found["fates"] = _row_fates(con, config)
        if found["fates"].counts["used"] == 0:  # for the message when nothing is left
            found["first_day"] = con.execute(
                "select min(day) from events where not ignored").fetchone()[0]
        for view in ("state_input", "source_events"):
            con.execute(f"drop view if exists {view}")
        for table in ("troubled_ordered", "troubled_events", "events", "raw"):
            con.execute(f"drop table if exists {table}")

    try:
        run_steps(con, config, progress=progress, before_intervals=settle, timer=timer)
        arrow, customers, spells = timer.run(
            "row order", lambda: _ordered_and_counted(timer.outputs["intervals"]), "start_stop")
        quarantine, unknown = found["quarantine"], found["unknown"]
        reconciliation = _reconciliation(config, found["fates"], arrow, customers, spells)
        compressed = None
        if compress:
            compressed = timer.run("compress", lambda: _public_names(
                run_step(con, "compress").to_arrow_table()))
    except RetainError:
        raise
    except duckdb.InterruptException as exc:  # Ctrl-C inside the engine
        raise KeyboardInterrupt from exc
    except (duckdb.Error, pa.ArrowException) as exc:
        # no engine message reaches the user as it is: where, which step, what to do
        raise _engine_error(exc, timer.step, config) from exc
    finally:
        con.close()
    context = table_context(config)
    prepared = Prepared(arrow=with_context(arrow, context), quarantine=quarantine,
                        reconciliation=reconciliation, unknown_events=unknown, config=config,
                        compressed=None if compressed is None else with_context(compressed,
                                                                               context))
    if arrow.num_rows == 0:
        # times in another format or unmapped events are the likely cause: say so first
        check_thresholds(prepared)
        first, as_of = found.get("first_day"), config.window.as_of
        if first is not None and first > as_of:
            raise ConfigError(f"{config.path}: [window] as_of",
                              f"{as_of} is before the log's first event ({first})",
                              f"set as_of on or after {first}")
        raise DataError(config.source.label, "no spell of any customer lies in the window: "
                        + reconciliation.summary(),
                        "check [events] map, [window] and the quarantine reasons")
    return prepared


def compress_table(arrow: pa.Table) -> pa.Table:
    """Collapse identical rows of a start-stop Arrow table into one with a weight.

    ``customer_id``, ``spell`` and ``start_date`` are dropped first. Runs the
    ``compress`` SQL step on an in-memory DuckDB connection. The table's context
    (schema metadata) is kept.
    """
    con = duckdb.connect()
    try:
        con.register("start_stop", arrow)
        out = run_step(con, "compress").to_arrow_table()
    finally:
        con.close()
    context = TableContext.from_metadata(arrow.schema.metadata)
    return with_context(out, context)


def write_outputs(prepared: Prepared, out_dir: str | Path) -> dict[str, Path]:
    """Write the start-stop table, quarantine and reconciliation into ``out_dir``.

    Files: ``start_stop.parquet`` (and ``start_stop_compressed.parquet`` when
    compressed), ``quarantine.parquet`` and ``quarantine.csv``,
    ``reconciliation.csv`` and ``reconciliation.json``.
    """
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    paths = {
        "start_stop": out / "start_stop.parquet",
        "quarantine": out / "quarantine.parquet",
        "quarantine_csv": out / "quarantine.csv",
        "reconciliation_csv": out / "reconciliation.csv",
        "reconciliation_json": out / "reconciliation.json",
    }
    # the table's context goes into the file's schema metadata (retain/data/contract.py)
    context = prepared.context
    pq.write_table(with_context(prepared.arrow, context), paths["start_stop"])
    if prepared.compressed is not None:
        paths["start_stop_compressed"] = out / "start_stop_compressed.parquet"
        pq.write_table(with_context(prepared.compressed, context),
                       paths["start_stop_compressed"])
    pq.write_table(prepared.quarantine, paths["quarantine"])
    pacsv.write_csv(prepared.quarantine, paths["quarantine_csv"])
    prepared.reconciliation.to_csv(paths["reconciliation_csv"])
    doc = prepared.reconciliation.to_dict()
    doc["unknown_events"] = prepared.unknown_events
    paths["reconciliation_json"].write_text(json.dumps(doc, indent=2) + "\n", encoding="utf-8")
    return paths
