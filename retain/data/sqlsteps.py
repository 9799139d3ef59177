"""Run the SQL steps in ``sql/`` by name, with bound parameters.

A step's name is its path under ``sql/`` without ``.sql``: the preparation steps
sit at the top (``"normalise"``), the models' SQL in ``sql/models/``
(``"models/exposure_tenure"``).

Python never formats values into SQL text: a step file uses DuckDB's named
parameters (``$as_of``) and the caller passes them as a dict. A step may name
relations that an earlier step (or the caller) registered on the connection.
"""

from __future__ import annotations

import re
from functools import cache
from pathlib import Path
from typing import Any

import duckdb

from retain.errors import RetainError
from retain.paths import SQL_DIR

#: what ``run_step(create=...)`` makes, by kind
_KINDS = {
    "table": "create or replace table {name} as {sql}",
    "view": "create or replace view {name} as {sql}",
    "enum": "create or replace type {name} as enum ({sql})",
}
_PARAM = re.compile(r"\$([A-Za-z_][A-Za-z0-9_]*)")


def step_path(name: str) -> Path:
    """The file of step ``name``: ``sql/<name>.sql``, or ``sql/NN_<name>.sql`` where the
    preparation steps carry their place in the run order (ARCHITECTURE.md); ``name`` is
    without the number and the extension, its folder included (``models/exposure_tenure``)."""
    path = SQL_DIR / f"{name}.sql"
    if path.exists():
        return path
    numbered = sorted(path.parent.glob(f"[0-9][0-9]_{path.name}"))
    if len(numbered) != 1:
        raise RetainError(str(path), f"SQL step {name!r} does not exist"
                          + (" (more than one numbered file)" if numbered else ""),
                          "this is a bug in retain: the step list names a missing file")
    return numbered[0]


def step_name(path: Path) -> str:
    """The step a file under ``sql/`` holds: its stem without the run-order number."""
    return re.sub(r"^\d\d_", "", Path(path).stem)


@cache
def load_step(name: str) -> str:
    """The text of step ``name`` (see :func:`step_path`)."""
    return step_path(name).read_text(encoding="utf-8")


def step_parameters(name: str) -> set[str]:
    """Names of the ``$parameters`` a step uses (comments stripped first)."""
    text = re.sub(r"--[^\n]*", "", load_step(name))
    return set(_PARAM.findall(text))


def run_step(con: duckdb.DuckDBPyConnection, name: str, params: dict[str, Any] | None = None,
             *, create: str | None = None, kind: str = "table"
             ) -> duckdb.DuckDBPyRelation | None:
    """Run step ``name`` with only the parameters it uses.

    With ``create="t"`` the result is materialised on the connection as ``kind``:
    ``"table"`` (``create or replace table t as ...``), ``"view"`` (for a step
    without parameters) or ``"enum"`` (an ENUM type ``t`` whose members are the
    step's one text column, distinct and not null, also without parameters), and
    None is returned; otherwise the relation is returned for the caller to read.
    """
    params = dict(params or {})
    used = step_parameters(name)
    missing = used - params.keys()
    if missing:
        raise RetainError(f"sql/{name}.sql", f"parameters not given: {', '.join(sorted(missing))}",
                          "this is a bug in retain: pass every parameter the step uses")
    bound = {k: v for k, v in params.items() if k in used}
    sql = load_step(name)
    if create is not None:
        if not re.fullmatch(r"[A-Za-z_][A-Za-z0-9_]*", create):
            raise RetainError("run_step", f"bad table name {create!r}", "use a plain identifier")
        if kind not in _KINDS:
            raise RetainError("run_step", f"unknown kind {kind!r}",
                              f"use one of: {', '.join(_KINDS)}")
        if kind != "table" and bound:
            raise RetainError(f"sql/{name}.sql", f"a {kind} cannot hold bound parameters",
                              "this is a bug in retain: materialise the step as a table")
        con.execute(_KINDS[kind].format(name=create, sql=sql), bound)
        return None
    return con.sql(sql, params=bound) if bound else con.sql(sql)
