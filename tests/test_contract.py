"""The start-stop contract (retain/data/contract.py) against the SQL steps that use it.

The SQL files find an attribute's columns by patterns on the group prefixes
(``columns('^[sv]c__.*$')``). Each pattern is listed below with the group it
is meant to select, written in the contract's terms (static / time-varying,
categorical / numeric, ratio); the test applies the pattern, as written in the
file, to a column of every prefix contract.py defines. A prefix renamed on one
side only, a new pattern nobody classified, or a pattern that selects the wrong
group fails here.
"""

from __future__ import annotations

import re
from collections.abc import Callable

import pytest

from retain.data import contract
from retain.data.config import CORE_OUTPUT, DERIVED
from retain.data.sqlsteps import step_name, step_path
from retain.data.table import CAUSES, CORE_COLUMNS
from retain.paths import SQL_DIR

# (kind, varies, ratio) of every attribute the project file can declare
_KINDS = [("categorical", False, False), ("numeric", False, False),
          ("categorical", True, False), ("numeric", True, False), ("numeric", True, True)]

Group = Callable[[str, bool, bool], bool]
CATEGORICAL: Group = lambda kind, varies, ratio: kind == "categorical"  # noqa: E731
NUMERIC: Group = lambda kind, varies, ratio: kind == "numeric"  # noqa: E731
STATIC: Group = lambda kind, varies, ratio: not varies  # noqa: E731
VARYING: Group = lambda kind, varies, ratio: varies  # noqa: E731
RATIO: Group = lambda kind, varies, ratio: ratio  # noqa: E731
ANY: Group = lambda kind, varies, ratio: True  # noqa: E731
NONE: Group = lambda kind, varies, ratio: False  # noqa: E731

#: every column pattern of the SQL steps and the attributes it must select
PATTERNS: dict[tuple[str, str], Group] = {
    ("categories.sql", "^[sv]c__.*$"): CATEGORICAL,
    ("normalise.sql", "^([sv]c__.*)$"): CATEGORICAL,
    ("normalise.sql", "^([sv][nr]__.*)$"): NUMERIC,
    ("normalise.sql", "^[sv][nr]__.*$"): NUMERIC,
    ("normalise.sql", "^text__(.*)$"): NONE,  # the step's own text__ copies
    ("normalise.sql", "^bad__"): NONE,
    ("repeats.sql", "^[sv][cnr]__"): ANY,
    ("states.sql", "^(v[cnr]__.*)$"): VARYING,
    ("states.sql", "^(s[cn]__.*)$"): STATIC,
    ("states.sql", "^set__(paused|in_recovery|v[cnr]__[A-Za-z].*)$"): VARYING,
    ("states.sql", "^(customer_id|s[cn]__[A-Za-z].*)$"): STATIC,
    ("states.sql", "^(v[cnr]__[A-Za-z].*|paused|in_recovery)$"): VARYING,
    ("states.sql", "^before__.*$"): NONE,
    ("states.sql", "^v[cnr]__.*$"): VARYING,
    ("states.sql", "^first__(s[cn]__.*)$"): STATIC,
    ("intervals.sql", "^(vr__[A-Za-z].*|spell)$"): RATIO,
    ("intervals.sql", "^(sc__.*)$"): lambda k, v, r: k == "categorical" and not v,
    ("intervals.sql", "^(sn__.*)$"): lambda k, v, r: k == "numeric" and not v,
    ("intervals.sql", "^(vc__.*)$"): lambda k, v, r: k == "categorical" and v,
    ("intervals.sql", "^(v[nr]__.*)$"): lambda k, v, r: k == "numeric" and v,
    ("intervals.sql", "^(ratio__vr__.*)$"): RATIO,
}

#: names the steps wrap around a group column (set__vc__plan, first__sc__channel, ...)
_WRAPPERS = ("", "set__", "first__", contract.RATIO_PREFIX)


def _sql_patterns() -> set[tuple[str, str]]:
    found = set()
    for path in sorted(SQL_DIR.glob("*.sql")):
        for pattern in re.findall(r"columns\('([^']*)'\)", path.read_text(encoding="utf-8")):
            found.add((f"{step_name(path)}.sql", pattern))
    return found


def _selected(pattern: str, prefixes: list[str]) -> set[str]:
    # DuckDB's columns() keeps a column when the pattern matches part of its name
    rx = re.compile(pattern)
    return {p for p in prefixes for w in _WRAPPERS if rx.search(w + p + "plan")}


def test_every_sql_pattern_is_classified() -> None:
    found = _sql_patterns()
    assert found, "no column patterns found in sql/"
    assert found == set(PATTERNS), (
        f"unclassified: {sorted(found - set(PATTERNS))}; gone: {sorted(set(PATTERNS) - found)}")


def test_group_prefixes_are_the_attribute_kinds() -> None:
    # one prefix per kind of attribute, all distinct, each ending in the separator
    made = [contract.group_prefix(k, v, r) for k, v, r in _KINDS]
    assert sorted(made) == sorted(contract.GROUP_PREFIXES)
    assert len(set(made)) == len(_KINDS)
    assert all(p.endswith("__") for p in made)


@pytest.mark.parametrize(("file", "pattern"), sorted(PATTERNS))
def test_sql_pattern_selects_its_group(file: str, pattern: str) -> None:
    group = PATTERNS[file, pattern]
    wanted = {contract.group_prefix(k, v, r) for k, v, r in _KINDS if group(k, v, r)}
    assert _selected(pattern, list(contract.GROUP_PREFIXES)) == wanted, (file, pattern)


def test_sql_placeholders_are_the_contract_ones() -> None:
    # every placeholder column written out in SQL (vc__0, ratio__vr__0, first__sc__0)
    text = "\n".join(p.read_text(encoding="utf-8") for p in SQL_DIR.glob("*.sql"))
    written = set(re.findall(r"\b(?:set__|first__|before__)?((?:ratio__)?[a-z]{2}__0)\b", text))
    allowed = set(contract.placeholders()) | {contract.RATIO_PREFIX + contract.VARYING_RATIO
                                               + contract.PLACEHOLDER}
    assert written and written <= allowed, written - allowed
    # intervals drops every placeholder before its window
    exclude = re.search(r"exclude \(([^)]*)\)", step_path("intervals").read_text())
    assert exclude is not None
    assert {c.strip() for c in exclude.group(1).split(",")} == set(contract.placeholders())


def test_public_names() -> None:
    # hand-worked: the SQL names of the demo's attributes and what the table calls them
    assert contract.public_name("vc__plan") == "plan"
    assert contract.public_name("sc__channel") == "channel"
    assert contract.public_name("vr__price") == "price"
    assert contract.public_name("ratio__vr__price") == "price_ratio"
    assert contract.public_name("ratio__vr__0") is None
    assert [contract.public_name(p) for p in contract.placeholders()] == [None] * 5
    assert contract.public_name("customer_id") == "customer_id"
    assert contract.public_name("in_recovery") == "in_recovery"


def test_one_list_of_core_columns() -> None:
    # the names other modules use are the contract's own objects
    assert CORE_COLUMNS is contract.CORE_COLUMNS
    assert CAUSES is contract.CAUSES
    assert DERIVED is contract.DERIVED
    assert CORE_OUTPUT == (*contract.CORE_COLUMNS, contract.COHORT)
    assert contract.KEYS == CORE_COLUMNS[:2] + ("start",)
    assert set(contract.REQUIRED) <= set(CORE_COLUMNS)
