"""The start-stop table's contract: its column names and the SQL steps' column prefixes.

The one place these names are written. :mod:`retain.data.table` checks tables
against them, :mod:`retain.data.config` reserves them, :mod:`retain.data.prepare`
orders and renames the SQL steps' output with them. The SQL files in ``sql/``
match the group prefixes with column patterns (``columns('^[sv]c__.*$')``); a
test holds every such pattern to the prefixes defined here, so a change on one
side alone fails.

Columns of the table (ARCHITECTURE.md, "The start-stop table"):

``customer_id``, ``spell``, ``start``, ``stop``, ``churned``, ``cause``,
``weight``, ``start_date``
    the core columns (:data:`CORE_COLUMNS`); ``start``, ``stop`` and
    ``churned`` are required (:data:`REQUIRED`).
``cohort``
    the signup month ``YYYY-MM`` that prepare adds (:data:`COHORT`).
declared attributes
    static first, then time-varying, then ``<name>_ratio`` for each ratio.
``in_recovery``, ``paused``, ``prior_spells``
    the states prepare derives (:data:`DERIVED`).

Group prefixes: inside the SQL steps an attribute's column is named
``<prefix><name>``, the prefix saying which group of columns it travels with:

======  ===========================================================
prefix  group
======  ===========================================================
sc__    static categorical
sn__    static numeric
vc__    time-varying categorical
vn__    time-varying numeric
vr__    time-varying numeric with a ratio to its value on the spell's first day
======  ===========================================================

``ratio__vr__<name>`` holds that ratio (``<name>_ratio`` in the table), and
``<prefix>0`` is a placeholder so that each pattern matches at least one column
(dropped from the table; real names start with a letter).

The table's context (:class:`TableContext`: as-of date, window, time zone and
the schema of its covariates) travels in the Parquet file's schema metadata
under :data:`CONTEXT_KEY`, as JSON.
"""

from __future__ import annotations

import datetime as dt
import json
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from retain.errors import DataError

#: the table's row order
KEYS = ("customer_id", "spell", "start")
#: columns every start-stop table must have
REQUIRED = ("start", "stop", "churned")
#: columns with a fixed meaning; every other column is a covariate
CORE_COLUMNS = ("customer_id", "spell", "start", "stop", "churned", "cause", "weight",
                "start_date")
#: values of ``cause`` on churn rows (empty elsewhere)
CAUSES = ("voluntary", "involuntary")
#: the signup month ('YYYY-MM') prepare adds as a static covariate
COHORT = "cohort"
#: columns prepare writes whatever the attributes: the core columns and the cohort
PREPARED_COLUMNS = (*CORE_COLUMNS, COHORT)
#: time-varying states prepare derives from the events
DERIVED = ("in_recovery", "paused", "prior_spells")
#: a ratio attribute's second column is ``<name>_ratio``
RATIO_SUFFIX = "_ratio"

# ---------------------------------------------------------------------- SQL group prefixes
STATIC_CATEGORICAL = "sc__"
STATIC_NUMERIC = "sn__"
VARYING_CATEGORICAL = "vc__"
VARYING_NUMERIC = "vn__"
VARYING_RATIO = "vr__"
#: every group prefix, in the order of the placeholder columns
GROUP_PREFIXES = (STATIC_CATEGORICAL, STATIC_NUMERIC, VARYING_CATEGORICAL, VARYING_NUMERIC,
                  VARYING_RATIO)
#: the prefix of a ratio column inside the SQL steps (``ratio__vr__price``)
RATIO_PREFIX = "ratio__"
#: the name after a group prefix that marks a placeholder column (``vc__0``)
PLACEHOLDER = "0"


def group_prefix(kind: str, varies: bool, ratio: bool = False) -> str:
    """The group prefix of an attribute (``kind`` "categorical" or "numeric")."""
    if not varies:
        return STATIC_NUMERIC if kind == "numeric" else STATIC_CATEGORICAL
    if kind == "categorical":
        return VARYING_CATEGORICAL
    return VARYING_RATIO if ratio else VARYING_NUMERIC


def placeholders() -> tuple[str, ...]:
    """The placeholder column of each group (``sc__0``, ...)."""
    return tuple(g + PLACEHOLDER for g in GROUP_PREFIXES)


def ratio_column(name: str) -> str:
    """The table's name for the ratio of attribute ``name``."""
    return name + RATIO_SUFFIX


def _strip_group(name: str) -> str | None:
    """``name`` without its group prefix; None for a placeholder."""
    for g in GROUP_PREFIXES:
        if name.startswith(g):
            rest = name[len(g):]
            return None if rest == PLACEHOLDER else rest
    return name


def public_name(sql_name: str) -> str | None:
    """The table's name for a column of the SQL steps' output; None for a placeholder.

    ``vc__plan`` -> ``plan``, ``ratio__vr__price`` -> ``price_ratio``,
    ``vr__0`` -> None; names without a prefix are kept.
    """
    if sql_name.startswith(RATIO_PREFIX):
        base = _strip_group(sql_name[len(RATIO_PREFIX):])
        return None if base is None else ratio_column(base)
    return _strip_group(sql_name)


# ---------------------------------------------------------------------- the table's context
#: the key of the context in an Arrow / Parquet schema's metadata
CONTEXT_KEY = b"retain.context"
#: the version of the context's JSON layout
CONTEXT_VERSION = 1
KINDS = ("categorical", "numeric")


@dataclass(frozen=True)
class ColumnSchema:
    """What a covariate column means.

    ``kind`` is "categorical" or "numeric"; ``varies`` says whether it is
    time-varying (set on start and update events) or static; ``ratio`` that a
    ``<name>_ratio`` column holds its ratio to the spell's first day;
    ``reference`` the reference level the models compare with, if one was set;
    ``derived`` that prepare made the column (cohort, ratios, states) rather
    than the log holding it.
    """

    name: str
    kind: str
    varies: bool
    ratio: bool = False
    reference: str | None = None
    derived: bool = False

    def to_dict(self) -> dict[str, Any]:
        return {"name": self.name, "kind": self.kind, "varies": self.varies,
                "ratio": self.ratio, "reference": self.reference, "derived": self.derived}


@dataclass(frozen=True)
class TableContext:
    """What a start-stop table cannot say by its rows: the as-of date, the window,
    the time zone and the schema of its covariates.

    Every field is optional; a table a user prepared elsewhere may carry none.
    """

    as_of: dt.date | None = None
    window_start: dt.date | None = None
    timezone: str | None = None
    columns: tuple[ColumnSchema, ...] = ()

    def column(self, name: str) -> ColumnSchema | None:
        """The schema of covariate ``name`` (None when the context does not list it)."""
        for c in self.columns:
            if c.name == name:
                return c
        return None

    @property
    def as_of_day(self) -> float | None:
        """The as-of date as a day number (days since 1970-01-01), None when unknown:
        the calendar position at which open spells are censored."""
        if self.as_of is None:
            return None
        return float((self.as_of - dt.date(1970, 1, 1)).days)

    def to_json(self) -> str:
        doc = {"version": CONTEXT_VERSION,
               "as_of": None if self.as_of is None else self.as_of.isoformat(),
               "window_start": (None if self.window_start is None
                                else self.window_start.isoformat()),
               "timezone": self.timezone,
               "columns": [c.to_dict() for c in self.columns]}
        return json.dumps(doc, sort_keys=True)

    @classmethod
    def from_json(cls, text: str | bytes, source: str = "start-stop table") -> TableContext:
        """Read :meth:`to_json`'s text; a malformed context raises :class:`DataError`."""
        try:
            doc = json.loads(text)
            if not isinstance(doc, Mapping):
                raise ValueError("not an object")
            columns = tuple(_column_schema(c) for c in doc.get("columns") or ())
            return cls(as_of=_date(doc.get("as_of")), window_start=_date(doc.get("window_start")),
                       timezone=_text(doc.get("timezone")), columns=columns)
        except (ValueError, TypeError, KeyError) as exc:
            raise DataError(f"{source}: metadata {CONTEXT_KEY.decode()}",
                            f"cannot be read ({exc})",
                            "write the table again with retain, or drop that metadata key"
                            ) from exc

    def metadata(self) -> dict[bytes, bytes]:
        """The schema metadata entry that carries this context."""
        return {CONTEXT_KEY: self.to_json().encode("utf-8")}

    @classmethod
    def from_metadata(cls, metadata: Mapping[bytes, bytes] | None,
                      source: str = "start-stop table") -> TableContext | None:
        """The context in an Arrow schema's metadata; None when there is none."""
        if not metadata or CONTEXT_KEY not in metadata:
            return None
        return cls.from_json(metadata[CONTEXT_KEY], source)


def _date(value: Any) -> dt.date | None:
    if value is None:
        return None
    if not isinstance(value, str):
        raise ValueError(f"a date must be 'YYYY-MM-DD' text, got {value!r}")
    return dt.date.fromisoformat(value)


def _text(value: Any) -> str | None:
    if value is not None and not isinstance(value, str):
        raise ValueError(f"expected text, got {value!r}")
    return value


def _column_schema(doc: Any) -> ColumnSchema:
    if not isinstance(doc, Mapping):
        raise ValueError(f"a column's schema must be an object, got {doc!r}")
    kind = doc["kind"]
    if kind not in KINDS:
        raise ValueError(f"kind must be one of {', '.join(KINDS)}, got {kind!r}")
    flags = {k: doc.get(k, False) for k in ("varies", "ratio", "derived")}
    for k, v in flags.items():
        if not isinstance(v, bool):
            raise ValueError(f"{k} must be true or false, got {v!r}")
    return ColumnSchema(name=str(doc["name"]), kind=kind, varies=flags["varies"],
                        ratio=flags["ratio"], reference=_text(doc.get("reference")),
                        derived=flags["derived"])


def with_context(table: Any, context: TableContext | None) -> Any:
    """An Arrow table with ``context`` in its schema metadata (other keys kept);
    ``table`` unchanged when ``context`` is None."""
    if context is None:
        return table
    metadata = dict(table.schema.metadata or {})
    metadata.update(context.metadata())
    return table.replace_schema_metadata(metadata)
