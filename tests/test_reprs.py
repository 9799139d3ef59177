"""Results print short: one-line ``repr`` (what, how many, key figures), a small
``_repr_html_`` table, and a Cox fit's ``to_frame()`` that fits pandas' default width.

The results come from one run of every model on the site tests' small invented table.
"""

from __future__ import annotations

import dataclasses
import importlib
import pkgutil
import re
import subprocess
import sys

import pandas as pd
import pytest
from _site_support import EVIL, small_table

import retain
from retain.results import REPR_WIDTH, Result
from retain.run import RunOptions, run_table

OPTIONS = RunOptions(title="Repr test", as_of="2026-11-30", segments=("plan", "channel"),
                     covariates=("plan", "channel"), source="an invented start-stop table")


def _all_result_classes() -> set[type]:
    for info in pkgutil.walk_packages(retain.__path__, "retain."):
        if not info.name.startswith(("retain._", "retain.cli")):
            importlib.import_module(info.name)
    found, todo = set(), [Result]
    while todo:
        for sub in todo.pop().__subclasses__():
            if sub not in found:
                found.add(sub)
                todo.append(sub)
    return found


def _results(value, seen=None):
    """Every Result inside a value (nested results, dicts, lists), each once."""
    seen = set() if seen is None else seen
    if id(value) in seen:
        return
    seen.add(id(value))
    if isinstance(value, Result):
        yield value
        for f in dataclasses.fields(value):
            if not f.name.startswith("_"):
                yield from _results(getattr(value, f.name), seen)
    elif isinstance(value, dict):
        for v in value.values():
            yield from _results(v, seen)
    elif isinstance(value, (list, tuple)):
        for v in value:
            yield from _results(v, seen)


@pytest.fixture(scope="module")
def results():
    run = run_table(small_table(evil=True), OPTIONS)
    found = [r for o in run.outcomes.values() if o.ok for r in _results(o.value)]
    found += list(_results(run))
    assert len({type(r) for r in found}) >= 15  # the run reaches most result types
    return found


def test_no_result_class_keeps_the_dataclass_repr():
    classes = _all_result_classes()
    assert len(classes) >= 30
    generated = sorted(c.__qualname__ for c in classes if c.__repr__ is not Result.__repr__
                       and "__create_fn__" in getattr(c.__repr__, "__qualname__", ""))
    assert generated == []
    assert all(c.__repr__ is Result.__repr__ for c in classes)  # none defines its own yet


def test_repr_is_one_short_line_with_no_arrays(results):
    for r in results:
        text = repr(r)
        name = type(r).__name__
        assert text.startswith(f"<{name}: ") and text.endswith(">"), text
        assert "\n" not in text and len(text) <= REPR_WIDTH, text
        assert "array(" not in text and "[[" not in text and "dtype" not in text, text
        assert len(text) > len(name) + 5, text  # says something beyond the class name


def test_repr_says_what_and_how_many():
    from retain.models.cox import fit_cox
    from retain.models.curves import kaplan_meier

    table = small_table()
    km = kaplan_meier(table)
    # counts from the table itself (400 invented customers, one row each)
    assert re.fullmatch(rf"<RetentionCurve: Kaplan–Meier retention, .*{table.n_customers} "
                        rf"customers, {table.n_events:g} churns.*>", repr(km)), repr(km)
    fit = fit_cox(table, ["plan"])
    assert repr(fit) == (f"<CoxFit: Cox proportional hazards (efron ties) on {table.n_rows} "
                         f"rows, {table.n_customers} customers, {table.n_events:g} churns.>")


def test_repr_html_is_a_small_escaped_table(results):
    tables = 0
    for r in results:
        html = r._repr_html_()
        assert html.startswith(f"<p><b>{type(r).__name__}</b>: ")
        assert EVIL not in html  # data strings are escaped
        if "<table" in html:
            tables += 1
            assert html.count("<tr") <= 1 + 12  # header + at most 12 rows
    assert tables >= 10


def test_repr_html_says_when_rows_are_left_out():
    from retain.models.curves import kaplan_meier

    km = kaplan_meier(small_table())
    n = len(km.to_frame())
    assert n > 12
    html = km._repr_html_()
    assert f"{n:,} rows" in html and "<code>to_frame()</code> has them all" in html


def test_repr_falls_back_to_the_scalar_fields():
    @dataclasses.dataclass(frozen=True)
    class Bare(Result):
        n_rows: int
        rate: float
        weights: tuple

    assert repr(Bare(1234, 0.123456, (1, 2))) == "<Bare: n_rows=1,234, rate=0.1235>"


def test_cox_to_frame_fits_the_default_width():
    """In a terminal pandas fits a frame to 80 columns by dropping middle columns ("...")."""
    code = (
        "import pandas as pd\n"
        "pd.set_option('display.max_columns', 0)  # a terminal's setting: fit the width\n"
        "from _site_support import small_table\n"
        "from retain.models.cox import fit_cox\n"
        "print(fit_cox(small_table(), ['plan', 'channel']).to_frame())\n")
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=120, env={"COLUMNS": "80", "PATH": "/usr/bin:/bin"},
                          cwd=str(__import__("pathlib").Path(__file__).parent))
    assert proc.returncode == 0, proc.stderr
    header = proc.stdout.splitlines()[0].split()
    assert header[:5] == ["term", "hazard_ratio", "lower", "upper", "p_value"], proc.stdout
    assert "..." not in proc.stdout


def test_cox_hazard_ratios_keep_every_column():
    from retain.models.cox import fit_cox

    fit = fit_cox(small_table(), ["plan"])
    full = fit.hazard_ratios
    assert {"coef", "se", "se_model", "se_robust", "z", "column"} <= set(full.columns)
    pd.testing.assert_frame_equal(fit.to_frame(), full[list(fit.to_frame().columns)])
