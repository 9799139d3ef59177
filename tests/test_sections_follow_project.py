"""The site shows what the project file asks for: a part it does not ask for is left out,
with one line saying which key turns it on; ``[project] name`` titles the site; a build
reports each step with a count and its seconds.

Source of the data: scikit-survival's copy of the Veterans' Administration lung cancer
trial (``sksurv.datasets.load_veterans_lung_cancer``; Kalbfleisch & Prentice 1980, 137
patients), turned into an event log as in tests/test_run_not_set_up.py: every patient
enrols once and, if the death was seen, ends ``time`` days later. The log has no reason
column; one variant adds a failed payment the day before each death of a patient with
the "large" cell type, so that those deaths (and only those) are involuntary churn.
"""

from __future__ import annotations

import argparse
import datetime as dt
import re

import numpy as np
import pandas as pd
import pytest

sksurv_datasets = pytest.importorskip("sksurv.datasets")

from retain import project  # noqa: E402
from retain.data.prepare import prepare  # noqa: E402
from retain.errors import ConfigError  # noqa: E402
from retain.publish.pages import site_content  # noqa: E402
from retain.publish.site import build_site  # noqa: E402
from retain.run import options_from_config, run_table  # noqa: E402

AS_OF = dt.date(2024, 12, 31)
N_PATIENTS = 137  # Kalbfleisch & Prentice 1980, the Veterans' lung cancer trial


def _log(payment_trouble: bool) -> pd.DataFrame:
    x, y = sksurv_datasets.load_veterans_lung_cancer()
    rows = []
    for i, (died, t, cell) in enumerate(zip(y["Status"].astype(bool),
                                            y["Survival_in_days"].astype(int), x["Celltype"],
                                            strict=True)):
        start = AS_OF - dt.timedelta(days=1000 if died else int(t))
        rows.append((f"v{i}", f"{start} 08:00", "enrolled", str(cell)))
        if died:
            end = start + dt.timedelta(days=int(t))
            if payment_trouble and str(cell) == "large" and t > 1:
                rows.append((f"v{i}", f"{end - dt.timedelta(days=1)} 09:00", "card declined",
                             ""))
            rows.append((f"v{i}", f"{end} 09:00", "died", ""))
    return pd.DataFrame(rows, columns=["patient", "at", "what", "cell"])


def _config(frame: pd.DataFrame, **sections):
    return project(frame, columns={"customer_id": "patient", "event_time": "at",
                                   "event": "what"},
                   events={"map": {"enrolled": "start", "died": "end",
                                   "card declined": "payment_failed"}},
                   window={"as_of": AS_OF.isoformat()},
                   attributes={"cell": {"kind": "categorical", "varies": False}}, **sections)


def _site(config):
    prepared = prepare(config)
    run = run_table(prepared.table, options_from_config(config), prepared=prepared)
    return run, site_content(run, strict=True)


def _pages(content) -> dict:
    return {p.slug: p for p in content.pages}


def _titles(page) -> list[str]:
    return [s.title for s in page.sections]


def _not_set_up(page) -> tuple[str, ...]:
    found = [s for s in page.sections if s.title == "Not set up in the project file"]
    assert len(found) <= 1
    return found[0].bullets if found else ()


@pytest.fixture(scope="module")
def bare():
    """No covariates, no [value], no reason column, no payment events."""
    return _site(_config(_log(payment_trouble=False)))


@pytest.fixture(scope="module")
def with_causes():
    """Covariates and a margin, payment trouble before some deaths (two causes)."""
    return _site(_config(_log(payment_trouble=True), model={"covariates": ["cell"]},
                         value={"margin_per_month": 10.0}))


def test_bare_project_leaves_out_value_causes_and_cox(bare, tmp_path) -> None:
    run, content = bare
    pages = _pages(content)
    # pages with nothing left leave the navigation; the overview says how to turn them on
    assert "value" not in pages and "causes" not in pages
    lines = _not_set_up(pages["overview"])
    assert len(lines) == 3
    cox_line, value_line, causes_line = lines
    assert cox_line.startswith("The Cox model of hazard ratios is not set up")
    assert "covariates" in cox_line and "[model]" in cox_line
    assert value_line.startswith("Lifetime value is not set up")
    assert "margin_rate" in value_line and "[value]" in value_line
    assert causes_line.startswith("Churn by cause is not set up")
    assert "reason" in causes_line and "[columns]" in causes_line
    # the Cox-based sections are absent, with the one line on the hazards page
    assert "What moves churn most" not in _titles(pages["overview"])
    assert "Cox model: hazard ratios" not in _titles(pages["hazards"])
    assert _not_set_up(pages["hazards"]) == (cox_line,)
    fit_notes = [b for s in pages["fit"].sections for b in s.bullets]
    assert not any(b.startswith("Cox:") for b in fit_notes)
    # no page claims a split by cause: the decrement table shows all churns only
    shown = pages["decrements"].figures()[0].table
    assert "churns_involuntary" not in shown.columns and "churns" in shown.columns
    # the rendered site never prints a margin of None, nor an empty "not set up" section
    index = build_site(content, tmp_path / "site")
    html = " ".join(p.read_text(encoding="utf-8") for p in index.parent.glob("*.html"))
    assert "None ×" not in html and "None" not in re.sub(r"<[^>]+>", "", html).split()
    assert "Not set up: " not in html
    assert not (index.parent / "value.html").exists()
    assert not (index.parent / "causes.html").exists()
    assert "value.html" not in html and "causes.html" not in html
    overview = index.read_text(encoding="utf-8")
    assert overview.count("Lifetime value is not set up") == 1
    assert overview.count("Churn by cause is not set up") == 1


def test_without_reason_column_every_churn_has_one_cause(bare) -> None:
    run, _ = bare
    t = run.table
    churn = t.churned == 1
    # every death of the trial is a churn, all voluntary (the default cause without a
    # reason column and without payment trouble)
    assert int(churn.sum()) == 128  # deaths seen in the trial (scikit-survival's copy: 128)
    assert np.unique(t.cause.codes[churn]).size == 1
    assert run.get("incidence").skipped and run.get("cause-cox").skipped


def test_payment_trouble_gives_two_causes_and_the_page(with_causes) -> None:
    run, content = with_causes
    pages = _pages(content)
    t = run.table
    churn = t.churned == 1
    x, y = sksurv_datasets.load_veterans_lung_cancer()
    large_deaths = int(((x["Celltype"] == "large").to_numpy()
                        & y["Status"].astype(bool) & (y["Survival_in_days"] > 1)).sum())
    involuntary = t.cause.levels.index("involuntary")
    # the deaths after a declined card, and only those, are involuntary
    assert int((t.cause.codes[churn] == involuntary).sum()) == large_deaths > 0
    assert "causes" in pages and "value" in pages
    assert run.get("incidence").value.causes == ("voluntary", "involuntary")
    assert "What drives each kind of churn" in _titles(pages["causes"])
    assert _not_set_up(pages["causes"]) == ()
    assert _not_set_up(pages["overview"]) == ()
    assert "What moves churn most" in _titles(pages["overview"])
    assert "Cox model: hazard ratios" in _titles(pages["hazards"])
    shown = pages["decrements"].figures()[0].table
    assert "churns_involuntary" in shown.columns
    # margin per month given directly: the assumption says so, with no "None"
    assert "margin per month 10.00" in pages["value"].assumptions
    assert not any("None" in a for a in pages["value"].assumptions)


def test_causes_without_covariates_leave_out_the_cause_cox_section() -> None:
    run, content = _site(_config(_log(payment_trouble=True)))
    pages = _pages(content)
    assert "causes" in pages
    assert "What drives each kind of churn" not in _titles(pages["causes"])
    (line,) = _not_set_up(pages["causes"])
    assert line.startswith("The Cox model of each cause is not set up") and "covariates" in line


def test_project_name_titles_the_site(tmp_path) -> None:
    frame = _log(payment_trouble=False)
    named = _config(frame, project={"name": "Lung trial review"})
    assert named.project.name == "Lung trial review"
    assert options_from_config(named).title == "Lung trial review"
    # without the key the title stays "Retention review: <source>"
    assert options_from_config(_config(frame)).title == "Retention review: table in memory"
    frame.to_csv(tmp_path / "trial.csv", index=False)
    (tmp_path / "retain.toml").write_text(
        '[project]\nname = "From the file"\n[source]\npath = "trial.csv"\n'
        '[columns]\ncustomer_id = "patient"\nevent_time = "at"\nevent = "what"\n'
        '[events]\nmap = {enrolled = "start", died = "end"}\n'
        f'[window]\nas_of = "{AS_OF}"\n', encoding="utf-8")
    from retain.data.config import load_config

    loaded = load_config(tmp_path / "retain.toml")
    assert options_from_config(loaded).title == "From the file"
    (tmp_path / "retain.toml").write_text(
        (tmp_path / "retain.toml").read_text(encoding="utf-8").replace(
            '[project]\nname = "From the file"', '[project]\nnam = "typo"'), encoding="utf-8")
    with pytest.raises(ConfigError, match=r"project"):
        load_config(tmp_path / "retain.toml")
    with pytest.raises(ConfigError):
        _config(frame, project={"name": ""})
    run, content = _site(named)
    assert content.title == "Lung trial review"
    index = build_site(content, tmp_path / "site")
    assert "<title>" in index.read_text(encoding="utf-8")
    assert "Lung trial review" in index.read_text(encoding="utf-8")


def test_run_reports_each_step_with_a_count_and_seconds() -> None:
    config = _config(_log(payment_trouble=False), model={"covariates": ["cell"]},
                     segments={"by": ["cell"]})
    prepared = prepare(config)
    heard: list[tuple[str, str, float]] = []
    run = run_table(prepared.table, options_from_config(config),
                    progress=lambda *line: heard.append(line))
    assert [name for name, _, _ in heard] == list(run.outcomes)
    said = {name: count for name, count, _ in heard}
    assert said["book"] == f"{N_PATIENTS} rows"  # one enrolment per patient, no updates
    assert said["curves:cell"] == "4 segments"  # four cell types in the trial
    assert said["cox"] == f"{N_PATIENTS} rows"
    assert said["compare"] == ""  # no count fits a comparison of models
    assert all(seconds >= 0 for _, _, seconds in heard)


def test_build_prints_progress_lines_like_prepare(tmp_path, capsys) -> None:
    from retain.cli import _build_site

    prepared = prepare(_config(_log(payment_trouble=False)))
    _build_site(argparse.Namespace(quiet=False), prepared, tmp_path / "site")
    err = capsys.readouterr().err
    line = re.compile(r"^  (\S+) +(\d[\d,]* \w+|not set up|failed)? +\d+\.\d\d s$")
    steps = [m.group(1) for m in map(line.match, err.splitlines()) if m]
    assert steps[0] == "book" and steps[-1] == "site" and "cox" in steps
    assert re.search(rf"^  book +{N_PATIENTS} rows +\d+\.\d\d s$", err, re.M)
    assert re.search(r"^  site +\d+ pages +\d+\.\d\d s$", err, re.M)
    assert re.search(r"^  cox +not set up +\d+\.\d\d s$", err, re.M)


def test_a_run_set_up_in_python_without_value_says_how_to_turn_it_on(bare) -> None:
    from retain.run import RunOptions

    run, _ = bare
    plain = run_table(run.table, RunOptions())  # no value mapping at all
    assert plain.get("value:all").skipped
    assert "margin_per_month" in plain.get("value:all").error
    assert [k for k in plain.outcomes if k.startswith("value")] == ["value:all"]
    content = site_content(plain, strict=True)
    assert "value" not in _pages(content)
    assert any(line.startswith("Lifetime value is not set up")
               for line in _not_set_up(_pages(content)["overview"]))
