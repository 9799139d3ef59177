"""The start-stop table's contract: its column names and the SQL steps' column prefixes.

The one place these names are written. :mod:`retain.data.table` checks tables
against them, :mod:`retain.data.config` reserves them, :mod:`retain.data.prepare`
orders and renames the SQL steps' output with them. The SQL files in ``sql/``
match the group prefixes with column patterns (``columns('^[sv]c__.*$')``); a
test holds every such pattern to the prefixes defined here, so a change on one
side alone fails.

Columns of the table (DESIGN.md, "The start-stop table"):

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
"""

from __future__ import annotations

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
