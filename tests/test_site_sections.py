"""Every page section of the demo is assembled, and pages name the run's steps by constant.

The page builders look results up by the step names of ``retain.step_names``;
a literal such as ``"cox:ph"`` in a page builder would break silently when the
step is renamed, so the publishing code is scanned for them.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest
from _site_support import small_table, strict_pages  # noqa: F401

from retain import step_names

PUBLISH = Path(__file__).resolve().parents[1] / "retain" / "publish"
LOOKUPS = ("get", "value")  # RunResults.get(name) and RunResults.value(name)


def step_literals(source: str) -> list[tuple[int, str]]:
    """(line, literal) of each step name written as a string in ``source``.

    A lookup ``x.get("km")`` / ``x.value("km")`` of any step name counts, and so
    does any string holding a step name that no other text would (one with a ``:``
    or ``-``, or the start of a formatted step name such as ``f"curves:{seg}"``).
    """
    names = set(step_names.ALL)
    distinct = {n for n in names if ":" in n or "-" in n}
    found = []
    for node in ast.walk(ast.parse(source)):
        if isinstance(node, ast.Constant) and isinstance(node.value, str):
            text = node.value
            if text in distinct or text.startswith(step_names.PREFIXES):
                found.append((node.lineno, text))
        elif (isinstance(node, ast.Call) and isinstance(node.func, ast.Attribute)
              and node.func.attr in LOOKUPS and node.args
              and isinstance(node.args[0], ast.Constant) and node.args[0].value in names):
            found.append((node.lineno, node.args[0].value))
    return sorted(set(found))


def test_the_scan_finds_step_literals():
    """Hand-written snippets: each way of writing a step name by hand is caught; a dict
    lookup of an ordinary key and a page slug equal to a step name are not."""
    planted = ('o = run.get("cox:ph")\n'
               'k = run.value("km")\n'
               'e = run.get(f"experiment:{name}")\n'
               'pairs = (("fit:weibull", "Weibull"),)\n'
               'm = spec.get("margin_per_month")\n'
               'p = Page("cohorts", "Cohorts", "lead")\n')
    assert step_literals(planted) == [(1, "cox:ph"), (2, "km"), (3, "experiment:"),
                                      (4, "fit:weibull")]


def test_publish_and_run_name_steps_by_constant_only():
    files = sorted(PUBLISH.rglob("*.py"))
    assert any(f.name == "__init__.py" for f in files) and len(files) >= 4
    files.append(PUBLISH.parent / "run.py")  # where the steps are recorded
    found = {str(f.relative_to(PUBLISH.parent)): hits for f in files
             if (hits := step_literals(f.read_text(encoding="utf-8")))}
    assert found == {}


def test_step_names_are_the_keys_results_json_has_always_had():
    """The values are a file format (results.json's outcome keys): fixed here by hand."""
    assert (step_names.COX, step_names.COX_PH, step_names.WEIBULL,
            step_names.WEIBULL_COVARIATES, step_names.ACTUAL_VS_EXPECTED,
            step_names.CAUSE_COX) == ("cox", "cox:ph", "fit:weibull", "weibull", "ae",
                                      "cause-cox")
    assert step_names.curves_by("plan") == "curves:plan"
    assert step_names.experiment("intro_discount") == "experiment:intro_discount"
    assert len(set(step_names.ALL)) == len(step_names.ALL)


def test_step_names_imports_nothing_from_retain():
    tree = ast.parse(Path(step_names.__file__).read_text(encoding="utf-8"))
    imported = [a.name for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names]
    imported += [n.module or "" for n in ast.walk(tree) if isinstance(n, ast.ImportFrom)]
    assert [m for m in imported if m.split(".")[0] == "retain"] == []


@pytest.fixture(scope="module")
def demo_run(demo_prepared):
    from retain.data.config import load_config
    from retain.paths import DEMO_DIR
    from retain.run import run_config

    return run_config(load_config(DEMO_DIR / "retain.toml"), prepared=demo_prepared)


@pytest.fixture(scope="module")
def demo_content(demo_run):
    from retain.publish.pages import site_content

    return site_content(demo_run, strict=True)


def test_every_demo_step_is_named_in_step_names(demo_run):
    """results.json's outcome keys are the constants (or a prefix and a name)."""
    keys = set(demo_run.outcomes)
    plain = keys - {k for k in keys if k.startswith(step_names.PREFIXES)}
    assert plain <= set(step_names.ALL) and len(plain) >= 20
    assert step_names.curves_by(demo_run.options.segments[0]) in keys


def test_every_demo_page_and_section_is_assembled(demo_content, demo_run, tmp_path):
    """The demo is set up for every page: no step failed, no section shows a failure, no
    page is the could-not-be-assembled page, and the built HTML names no internal error."""
    from retain.publish.site import build_site

    failed = {k: o.error for k, o in demo_run.outcomes.items() if not o.ok}
    assert failed == {}
    assert len(demo_content.pages) == 11
    broken = [(p.slug, s.title, s.failure) for p in demo_content.pages for s in p.sections
              if s.failure]
    assert broken == []
    assert [p.slug for p in demo_content.pages if "could not be assembled" in p.lead] == []
    index = build_site(demo_content, tmp_path / "site")
    for page in sorted(index.parent.glob("*.html")):
        html = page.read_text(encoding="utf-8")
        for text in ("internal error", "could not be assembled", "could not be computed",
                     "bug in retain"):
            assert text not in html, (page.name, text)


# --------------------------------------------------------------------------- a page that breaks
class _Refuses:
    """A result whose table cannot be made: a refusal with a reason, not a bug."""

    def to_frame(self):
        from retain.errors import ModelError

        raise ModelError("cohort table", "no cohort has a signup month", "add a start_date")


@pytest.fixture(scope="module")
def small_run():
    from retain.run import RunOptions, run_table

    return run_table(small_table(), RunOptions(as_of="2026-11-30", segments=("plan",)))


def _with_cohorts(run, value):
    """``run`` with the cohort step's result replaced by ``value`` (what a renamed
    attribute or a changed result type looks like to the page builder)."""
    import dataclasses

    from retain.run import Outcome

    return dataclasses.replace(run, outcomes={
        **run.outcomes, step_names.COHORTS: Outcome(step_names.COHORTS, value=value)})


def test_a_broken_page_builder_raises_when_strict(small_run, monkeypatch):
    from retain.publish.pages import STRICT_ENV, site_content

    broken = _with_cohorts(small_run, object())  # has no to_frame: cohorts_page fails
    # every page the healthy run has (pages a project does not ask for are left out)
    n_pages = len(site_content(small_run, strict=False).pages)
    with pytest.raises(AttributeError, match="to_frame"):
        site_content(broken, strict=True)
    monkeypatch.setenv(STRICT_ENV, "1")
    with pytest.raises(AttributeError, match="to_frame"):
        site_content(broken)
    assert len(site_content(broken, strict=False).pages) == n_pages  # the argument wins
    monkeypatch.setenv(STRICT_ENV, "0")
    assert len(site_content(broken).pages) == n_pages


def test_a_broken_page_is_shown_with_its_cause_when_not_strict(small_run):
    from retain.publish.pages import site_content

    content = site_content(_with_cohorts(small_run, object()), strict=False)
    pages = {p.slug: p for p in content.pages}
    page = pages["cohorts"]
    assert page.lead == "This page could not be assembled."
    (section,) = page.sections
    assert section.failure.startswith("internal error AttributeError: ")
    assert "(at cohorts_page, " in section.failure and "bug in retain" in section.failure
    assert all(s.failure is None for s in pages["curves"].sections)  # the others still build

    refused = site_content(_with_cohorts(small_run, _Refuses()), strict=False)
    (section,) = {p.slug: p for p in refused.pages}["cohorts"].sections
    assert section.failure == ("cohort table: no cohort has a signup month -- add a "
                               "start_date")


def _page_texts(content):
    """Every piece of wording on the pages (not the charts' specs or the tables)."""
    for p in content.pages:
        yield from (p.title, p.lead, *p.cautions, *p.assumptions)
        for s in p.sections:
            yield from (s.title, s.intro, s.verdict, s.failure or "", *s.bullets)
            for f in s.facts:
                yield from (f.label, f.text, f.detail)
            for g in s.figures:
                yield from (g.title, g.guide, g.note)


def test_page_wording_has_every_field_filled(demo_content, small_run):
    """The longer wording lives in pages/prose.py with {name} fields: each must be filled by
    the page that shows it (the demo and a table without covariates, whose pages take the
    not-set-up paths)."""
    import re

    from retain.publish.pages import site_content

    texts = [*_page_texts(demo_content), *_page_texts(site_content(small_run, strict=True))]
    assert len(texts) > 300
    assert [t for t in texts if re.search(r"\{[a-z_]*(:[^{}]*)?\}", t)] == []
    assert any(t.startswith("Each spell is placed by its plan at the start of the spell (")
               for t in texts)

