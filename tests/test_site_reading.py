"""The demo site read in a real browser at a desktop width (1400 px): legends, tables, sums.

Debian's Chromium driven by Playwright, every request outside the folder blocked.
Each check is about whether a reader can read what the page draws: a legend
symbol is the series' own line (colour and dash pattern), no table runs past
its card, the data-quality sentence adds up, the cohorts card counts the rows
of its heatmap. Outside references are the demo's own event log (read here
with Python's csv module) and its project file, not retain's results.
"""

from __future__ import annotations

import csv
import gzip
import re
from pathlib import Path

import pytest
import tomllib
from _site_support import CHROMIUM, CHROMIUM_ARGS, strict_pages  # noqa: F401

from retain.data.config import load_config
from retain.paths import DEMO_DIR
from retain.run import build_from_config

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not Path(CHROMIUM).exists(), reason="Debian chromium is not installed"),
]

WIDTH = 1400
WIDE_COLUMNS = 20  # the template lets only tables with more columns scroll (parts.html)
PROJECT = tomllib.loads((DEMO_DIR / "retain.toml").read_text(encoding="utf-8"))


@pytest.fixture(scope="module")
def site(tmp_path_factory):
    index, run = build_from_config(load_config(DEMO_DIR / "retain.toml"),
                                   tmp_path_factory.mktemp("reading") / "site")
    return index.parent, run


@pytest.fixture(scope="module")
def opened(site):
    """open(name) -> the page at 1400 px with every chart drawn (pages kept for the module)."""
    from playwright.sync_api import sync_playwright

    root, _ = site
    pages = {}
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)

        def open_page(name: str):
            if name not in pages:
                page = browser.new_page(viewport={"width": WIDTH, "height": 900})
                page.route("**/*", lambda r: r.continue_() if r.request.url.startswith(
                    "file://") else r.abort())
                page.goto((root / name).as_uri())
                page.wait_for_function(
                    "() => Array.from(document.querySelectorAll('[data-chart]'))"
                    ".every(e => e.getAttribute('data-rendered') === 'yes')", timeout=30_000)
                pages[name] = page
            return pages[name]

        yield open_page
        browser.close()


# ------------------------------------------------------------------------------- legends
LEGEND = """el => Array.from(el.querySelectorAll('.role-legend-entry .role-scope > g')).map(g => {
  const s = g.querySelector('.role-legend-symbol path');
  const t = g.querySelector('.role-legend-label text');
  return {label: t.textContent, d: s.getAttribute('d'), stroke: s.getAttribute('stroke'),
          dash: s.getAttribute('stroke-dasharray')}; })"""
DRAWN = """(el, sel) => Array.from(el.querySelectorAll(sel)).map(p => ({
  aria: p.getAttribute('aria-label') || '', stroke: p.getAttribute('stroke'),
  fill: p.getAttribute('fill'), dash: p.getAttribute('stroke-dasharray')}))"""
HORIZONTAL_STROKE = re.compile(r"^M-?\d+(\.\d+)?,0L\d+(\.\d+)?,0$")


def _legend_and_marks(page, figure: str, series: str):
    chart = page.query_selector(f"#fig-{figure} .chart")
    legend = {e["label"]: e for e in chart.evaluate(LEGEND)}
    of = re.compile(rf"(?:^|; ){re.escape(series)}: (.*?)(?:;|$)")

    def drawn(selector: str) -> dict[str, set[tuple]]:
        out: dict[str, set[tuple]] = {}
        for m in chart.evaluate(DRAWN, selector):
            name = of.search(m["aria"])
            assert name, m["aria"]
            out.setdefault(name.group(1), set()).add((m["stroke"] or m["fill"], m["dash"]))
        return out

    return legend, drawn(".mark-line.role-mark path"), drawn(".mark-symbol.role-mark path")


@pytest.mark.parametrize("page_name, figure, series, expected_dashed", [
    # the page's rule: Aalen–Johansen solid, 1 − KM (the naive complement) dashed
    ("causes.html", "causes-incidence", "curve", {"voluntary, 1 − KM (overstates)",
                                                  "involuntary, 1 − KM (overstates)"}),
    ("fit.html", "fit-curves", "curve", {"exponential", "Weibull",
                                         "Cox (average over customers)"}),
    ("decrements.html", "decrements-q", "rate", set()),
])
def test_legend_symbols_are_the_series_lines(opened, page_name, figure, series, expected_dashed):
    """Every legend symbol is a short horizontal stroke in the colour and dash pattern of
    the line it names; a series drawn as dots gets a dotted stroke of the dots' colour."""
    legend, lines, dots = _legend_and_marks(opened(page_name), figure, series)
    assert set(legend) == set(lines) | set(dots) and len(legend) >= 2
    for label, entry in legend.items():
        assert HORIZONTAL_STROKE.match(entry["d"]), (label, entry["d"])  # a line, not a dot
        if label in lines:
            ((colour, dash),) = lines[label]  # one colour and one dash per drawn series
            assert (entry["stroke"], entry["dash"]) == (colour, dash), label
            assert (dash not in (None, "1,0")) == (label in expected_dashed), (label, dash)
        else:
            (colour,) = {c for c, _ in dots[label]}
            on, off = (float(x) for x in entry["dash"].split(","))
            assert entry["stroke"] == colour and on < off, (label, entry)  # dotted
    pairs = [(e["stroke"], e["dash"]) for e in legend.values()]
    assert len(set(pairs)) == len(pairs)  # no two entries look the same


# -------------------------------------------------------------------------------- tables
PAGES = ("index.html", "curves.html", "cohorts.html", "hazards.html", "fit.html", "value.html",
         "experiments.html", "quality.html", "decrements.html", "expected.html", "causes.html")
TABLES = """() => { document.querySelectorAll('details.data').forEach(d => d.open = true);
  return Array.from(document.querySelectorAll('main table')).map(t => {
    const card = t.closest('.figure'), wrap = t.closest('.table-wrap');
    const note = wrap.previousElementSibling;
    return {card: card.id, table: t.scrollWidth, room: card.clientWidth,
            columns: t.rows[0].cells.length, scroller: wrap.classList.contains('scroller'),
            note: note && note.classList.contains('scroll-note') && note.offsetHeight > 0
                  ? note.textContent : ''}; }); }"""


def test_no_table_runs_past_its_card_at_1400px(opened):
    """At 1400 px every table fits inside its card, except a table of more than 20 columns,
    which sits in a sideways scroller the page announces above it."""
    seen = []
    for name in PAGES:
        for t in opened(name).evaluate(TABLES):
            seen.append(t)
            if t["scroller"]:
                assert t["columns"] > WIDE_COLUMNS, (name, t)
                assert "scrolls sideways" in t["note"], (name, t)
            else:
                assert t["table"] <= t["room"], (name, t)
    assert len(seen) >= 20
    # the experiment comparison (15 columns) is read whole, without scrolling
    comparison = [t for t in seen if t["card"].endswith("-comparison")]
    assert comparison and all(not t["scroller"] and t["columns"] >= 15 for t in comparison)


# ------------------------------------------------------------------------- data quality
def _number(text: str) -> int:
    return int(text.replace(",", ""))


def test_data_quality_sentence_adds_up(opened):
    """'Rows in (a) = rows used (b) + outside the window (c) + ignored (d) + quarantined (e)'
    holds as written, and its numbers are the log's: rows in is the number of data rows
    of the demo event log and ignored the rows whose event is in [events] ignore (both
    counted here with Python's csv module)."""
    intro = opened("quality.html").inner_text("#fig-quality-reconciliation >> xpath=..")
    found = re.search(r"Rows in \(([\d,]+)\) = rows used \(([\d,]+)\) \+ outside the window "
                      r"\(([\d,]+)\) \+ ignored \(([\d,]+)\) \+ quarantined \(([\d,]+)\)\.",
                      intro)
    assert found, intro
    texts = found.groups()
    rows_in, used, outside, ignored, quarantined = (_number(t) for t in texts)
    assert rows_in == used + outside + ignored + quarantined
    assert all(re.fullmatch(r"\d{1,3}(,\d{3})*", t) for t in texts)  # thousands separators
    log = DEMO_DIR / PROJECT["source"]["path"]
    with gzip.open(log, "rt", encoding="utf-8", newline="") as f:
        rows = list(csv.DictReader(f))
    assert rows_in == len(rows)
    event = PROJECT["columns"]["event"]
    assert ignored == sum(r[event] in PROJECT["events"]["ignore"] for r in rows) > 0
    assert used > 0 and outside > 0 and quarantined > 0  # the demo has all four outcomes


# ------------------------------------------------------------------------------ cohorts
AXIS = """el => Array.from(el.querySelectorAll('.role-axis')).filter(a =>
  (a.getAttribute('aria-label') || '').startsWith('Y-axis'))
  .map(a => Array.from(a.querySelectorAll('.role-axis-label text')).map(t => t.textContent))"""
OUTLINED = """el => Array.from(el.querySelectorAll('.mark-rect path'))
  .filter(p => p.getAttribute('stroke-dasharray')).map(p => p.getAttribute('aria-label'))"""


def test_cohorts_card_counts_the_heatmap_rows(opened, site):
    """The 'Cohorts' card, the heatmap's rows and the data table's rows are the same list,
    ending at the as-of month (a cohort too young for its first month keeps an empty row)."""
    page = opened("cohorts.html")
    card = page.query_selector('[data-key="cohorts"]')
    count = _number(card.query_selector(".fact-value").inner_text())
    first, last = card.query_selector(".fact-detail").inner_text().split(" to ")
    chart = page.query_selector("#fig-cohorts-retention .chart")
    (rows,) = chart.evaluate(AXIS)
    table = page.eval_on_selector_all("#fig-cohorts-retention table tbody th",
                                      "els => els.map(e => e.textContent)")
    assert count == len(rows) == len(table)
    assert rows == table and (rows[0], rows[-1]) == (first, last)
    assert last == PROJECT["window"]["as_of"][:7]  # signups up to the as-of month


def test_cohorts_that_began_before_the_window_are_outlined(opened):
    """Exactly the cohorts that signed up before [window] start are outlined in the heatmap,
    marked in the table, and explained in one sentence with singular/plural right."""
    page = opened("cohorts.html")
    window_start = PROJECT["window"]["start"][:7]
    rows = page.query_selector("#fig-cohorts-retention .chart").evaluate(AXIS)[0]
    before = [c for c in rows if c < window_start]
    assert before  # the demo's log starts months before its window
    labels = page.query_selector("#fig-cohorts-retention .chart").evaluate(OUTLINED)
    outlined = {re.search(r"cohort: (\d{4}-\d{2})", a).group(1) for a in labels}
    assert outlined == set(before)
    marks = dict(page.eval_on_selector_all(
        "#fig-cohorts-retention table tbody tr",
        "rows => rows.map(r => [r.children[0].textContent, r.children[1].textContent])"))
    assert {c for c, m in marks.items() if m != "signup"} == set(before)
    words = page.inner_text("main")
    sentence = f"{len(before)} cohorts ({before[0]} to {before[-1]}) signed up before"
    assert sentence in words
    assert not re.search(r"\b1 days\b|\b1 cohorts\b", words)
