"""The demo site in a real browser: Debian's Chromium driven by Playwright, network blocked.

The site is built once per module from the invented demo business (the whole
flow: events -> prepare -> models -> site). Every page must load from disk
with no console error and no request leaving the folder, every chart must
draw marks, every CSV link must resolve, and each page's key figure must be
the number of the model result it comes from. A screenshot of every page is
saved (to $RETAIN_SCREENSHOTS, or a temporary folder) for a person to look at.
"""

from __future__ import annotations

import math
import os
import shutil
from pathlib import Path
from urllib.parse import urlparse

import pytest
from _site_support import CHROMIUM, CHROMIUM_ARGS, EVIL, small_table, strict_pages  # noqa: F401

from retain.data.config import load_config
from retain.paths import DEMO_DIR
from retain.publish.pages import site_content
from retain.publish.site import build_site
from retain.run import RunOptions, build_from_config, run_table
from retain.units import DAYS_PER_YEAR

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not Path(CHROMIUM).exists(), reason="Debian chromium is not installed"),
]

EXPECTED_PAGES = ("index.html", "curves.html", "cohorts.html", "hazards.html", "fit.html",
                  "value.html", "experiments.html", "quality.html", "decrements.html",
                  "expected.html", "causes.html")
MARKS = "path, rect, line, .mark-symbol path, .mark-rect path, .mark-area path"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "site"
    index, run = build_from_config(load_config(DEMO_DIR / "retain.toml"), out)
    return index.parent, run


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as p:
        b = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        yield b
        b.close()


@pytest.fixture(scope="module")
def shots(tmp_path_factory):
    where = os.environ.get("RETAIN_SCREENSHOTS")
    path = Path(where) if where else tmp_path_factory.mktemp("screenshots")
    path.mkdir(parents=True, exist_ok=True)
    return path


class Visit:
    """One page opened with every non-file request blocked and every message kept."""

    def __init__(self, browser, url: str) -> None:
        self.errors: list[str] = []
        self.outside: list[str] = []
        self.dialogs: list[str] = []
        self.page = browser.new_page(viewport={"width": 1366, "height": 900})
        self.page.on("console", lambda m: self.errors.append(m.text) if m.type == "error"
                     else None)
        self.page.on("pageerror", lambda e: self.errors.append(str(e)))
        self.page.on("dialog", lambda d: (self.dialogs.append(d.message), d.dismiss()))
        self.page.route("**/*", self._route)
        self.page.goto(url)
        self.page.wait_for_function(
            "() => Array.from(document.querySelectorAll('[data-chart]'))"
            ".every(e => e.hasAttribute('data-rendered'))", timeout=30_000)

    def _route(self, route) -> None:
        url = route.request.url
        if url.startswith("file://"):
            route.continue_()
        else:
            self.outside.append(url)
            route.abort()

    def close(self) -> None:
        self.page.close()


@pytest.fixture(scope="module")
def visits(demo, browser, shots):
    """Every page of the demo site, opened once (closed at the end of the module)."""
    root, _ = demo
    out = {}
    for name in sorted(p.name for p in root.glob("*.html")):
        v = Visit(browser, (root / name).as_uri())
        v.page.screenshot(path=str(shots / f"{name}.png"), full_page=True)
        out[name] = v
    yield out
    for v in out.values():
        v.close()


def test_every_page_is_there(demo):
    root, _ = demo
    assert sorted(p.name for p in root.glob("*.html")) == sorted(EXPECTED_PAGES)
    assert (root / "assets" / "vega-bundle.js").stat().st_size > 500_000


def test_pages_load_offline_without_errors(visits):
    for name, v in visits.items():
        assert v.errors == [], name
        assert v.outside == [], name
        assert v.dialogs == [], name


def test_every_chart_draws_marks(visits):
    """Each chart holder has an SVG with drawn marks; every page but data quality has one."""
    drawn = 0
    for name, v in visits.items():
        holders = v.page.query_selector_all("[data-chart]")
        for h in holders:
            assert h.get_attribute("data-rendered") == "yes", name
            assert h.query_selector("svg") is not None, name
            n = h.eval_on_selector_all("svg .mark-line path, svg .mark-area path, "
                                       "svg .mark-symbol path, svg .mark-rect path, "
                                       "svg .mark-rule line", "els => els.length")
            assert n > 0, name
            drawn += 1
        if name != "quality.html":
            assert holders, f"{name} has no chart"
    assert drawn >= 18


def test_every_link_resolves(visits, demo):
    """CSV downloads, the results JSON and the navigation all point at files in the folder."""
    root, _ = demo
    seen_csv = 0
    for name, v in visits.items():
        for href in v.page.eval_on_selector_all("a[href]", "els => els.map(e => e.href)"):
            url = urlparse(href)
            assert url.scheme == "file", (name, href)
            target = Path(url.path)
            assert target.is_file() and target.stat().st_size > 0, (name, href)
            assert root in target.parents, (name, href)
            if target.suffix == ".csv":
                seen_csv += 1
                header = target.read_text(encoding="utf-8").splitlines()[0]
                assert header and "," in header or header.isidentifier(), (name, href)
    assert seen_csv >= 25


def _fact(v: Visit, key: str) -> tuple[float, str]:
    el = v.page.query_selector(f'[data-key="{key}"]')
    assert el is not None, key
    text = el.query_selector(".fact-value").inner_text()
    return float(el.get_attribute("data-value")), text


def test_overview_figures_are_the_model_results(visits, demo):
    _, run = demo
    v = visits["index.html"]
    book, km = run.value("book"), run.value("km")
    value, text = _fact(v, "customers")
    assert value == book.customers == run.table.n_customers
    assert text == f"{book.customers:,}"
    value, _ = _fact(v, "active")
    assert value == book.active
    value, text = _fact(v, "retention-12m")
    assert value == float(km.at(DAYS_PER_YEAR)[0])
    assert text == f"{100 * value:.1f} %"
    value, _ = _fact(v, "median-days")
    assert value == km.median().days
    value, text = _fact(v, "monthly-churn")
    assert value == book.monthly_churn_q
    assert text == f"{100 * value:.2f} %"
    words = v.page.inner_text("main")
    top = run.value("cox").hazard_ratios
    biggest = top.iloc[top["coef"].abs().argmax()]
    assert f"hazard ratio {biggest['hazard_ratio']:.2f}" in words


def test_model_pages_show_their_model_results(visits, demo):
    _, run = demo
    checks = {
        ("hazards.html", "weibull-shape"): run.value("weibull").shape_test.shape,
        ("hazards.html", "concordance"): run.value("cox:concordance").c_index,
        ("decrements.html", "exposure"): run.value("decrements").total_exposure,
        ("expected.html", "ae-ratio"): float(run.value("ae").to_frame()["ratio"].iloc[0]),
        ("value.html", "ltv-all"): run.value("value:all").values[0].value,
        ("value.html", "base-total"): run.value("value:base").total,
        ("causes.html", "cif-12m-voluntary"):
            float(run.value("incidence").at(12.0, cause="voluntary")[0]),
        ("cohorts.html", "cohorts"): float(len(run.value("cohorts").cohorts)),
        ("quality.html", "table-rows"): float(run.table.n_rows),
    }
    for (page, key), expected in checks.items():
        value, _ = _fact(visits[page], key)
        assert math.isclose(value, expected, rel_tol=1e-12, abs_tol=0.0), (page, key)


def test_experiment_verdict_matches_the_fit(visits, demo):
    _, run = demo
    v = visits["experiments.html"]
    verdict = run.value("experiment:intro_discount")
    adj = verdict.adjusted[0]
    value, text = _fact(v, f"experiment-intro-discount-hr-{adj.treatment.replace('_', '-')}")
    assert value == adj.hazard_ratio and text == f"{adj.hazard_ratio:.2f}"
    shown = v.page.inner_text(".verdict")
    assert f"{adj.lower:.2f} to {adj.upper:.2f}" in shown


def test_cohort_table_leaves_unobservable_cells_empty(visits, demo):
    """Blank cells in the heat table are exactly the NaN cells of the cohort result (the
    first two columns are the cohort and where its observation began)."""
    _, run = demo
    ct = run.value("cohorts")
    cells = visits["cohorts.html"].page.eval_on_selector_all(
        "#fig-cohorts-retention table tbody tr",
        "rows => rows.map(r => Array.from(r.children).slice(2).map(c => c.textContent))")
    assert len(cells) == len(ct.cohorts)
    blank = [[c == "" for c in row] for row in cells]
    nan = [[not math.isfinite(x) for x in row] for row in ct.retention]
    assert blank == nan


def test_money_pages_carry_cautions(visits):
    for name in ("value.html", "experiments.html", "decrements.html", "expected.html"):
        text = visits[name].page.inner_text(".caution")
        assert "standards" in text, name


def test_script_names_render_as_text_in_the_browser(browser, tmp_path):
    """A plan and a customer id named <script>alert(1)</script> show as text, run nothing."""
    run = run_table(small_table(evil=True), RunOptions(as_of="2026-11-30",
                                                       segments=("plan",)))
    root = build_site(site_content(run), tmp_path / "s").parent
    v = Visit(browser, (root / "curves.html").as_uri())
    try:
        assert v.dialogs == [] and v.errors == []
        assert EVIL in v.page.inner_text("main")
        legend = v.page.eval_on_selector_all("#fig-curves-plan svg text",
                                             "els => els.map(e => e.textContent)")
        assert EVIL in legend
        assert v.page.query_selector_all("script:not([src]):not([type])") == []
    finally:
        v.close()


def test_site_opens_from_a_moved_folder(demo, browser, tmp_path):
    """Nothing refers to the build folder: a copy elsewhere still draws its charts."""
    root, _ = demo
    copy = tmp_path / "moved"
    shutil.copytree(root, copy)
    v = Visit(browser, (copy / "fit.html").as_uri())
    try:
        assert v.errors == [] and v.outside == []
        assert all(h.get_attribute("data-rendered") == "yes"
                   for h in v.page.query_selector_all("[data-chart]"))
    finally:
        v.close()


def test_demo_rebuild_is_byte_identical(demo, tmp_path):
    """The whole flow again (prepare, every model with its seeded draws, the site) into
    another folder gives the same bytes in every file."""
    from _site_support import tree_bytes

    root, _ = demo
    again, _ = build_from_config(load_config(DEMO_DIR / "retain.toml"), tmp_path / "again")
    first, second = tree_bytes(root), tree_bytes(again.parent)
    assert sorted(first) == sorted(second)
    assert [k for k in first if first[k] != second[k]] == []


def test_finance_csv_is_the_value_modules_export(demo):
    """The finance download holds the rows of retain.decisions.value.finance_export."""
    import pandas as pd

    root, run = demo
    shown = pd.read_csv(root / "data" / "value-finance.csv")
    expected = run.value("value:finance")
    columns = list(expected.columns)  # and the demo's currency after total_upper
    columns.insert(columns.index("total_upper") + 1, "currency")
    assert (shown["currency"] == "EUR").all()
    assert list(shown.columns) == columns
    assert len(shown) == len(expected) > 0
    assert (shown["value_per_customer"].to_numpy() ==
            expected["value_per_customer"].to_numpy()).all()
    assert shown["caution"].str.contains("accounting standards").all()
