"""Money figures: the [value] keys currency, decimals and thousands, on the value page, the
experiments page and the finance export, and the discounting assumption with its numbers.

Outside reference for the discount rate: the equivalent effective rate of compound
interest, (1 + i)^(1/12) - 1 per month for an annual effective rate i (any theory-of-
interest text, e.g. Kellison, The Theory of Interest, ch. 1; from memory). Worked by
hand for i = 10 %: ln 1.10 = 0.0953102, / 12 = 0.0079425, exp(.) - 1 = 0.0079741, so
d = 0.797 % (three decimals of a percent).
"""

from __future__ import annotations

import json
import math
import re
from html import unescape
from pathlib import Path

import pandas as pd
import pytest
import tomllib
from _site_support import CHROMIUM, CHROMIUM_ARGS, small_table, strict_pages  # noqa: F401
from test_prepare_support import toml_text, write_log

from retain import step_names as step
from retain.data.config import load_config
from retain.errors import ConfigError
from retain.paths import DEMO_DIR
from retain.publish.finance import finance_export
from retain.publish.pages import site_content
from retain.publish.pages.shared import PRICE_UNITS, money
from retain.publish.pages.value import discount_text
from retain.publish.site import build_site
from retain.run import RunOptions, build_from_config, run_table

VALUE = {"price": "price", "margin_rate": 0.35, "currency": "EUR"}
FACT = re.compile(r'<div class="fact" data-key="([^"]+)"[^>]*>\s*<p class="fact-label">'
                  r'(.*?)</p>\s*<p class="fact-value">(.*?)</p>\s*'
                  r'(?:<p class="fact-detail">(.*?)</p>)?', re.S)
NUMBER = r"-?\d{1,3}(?:,\d{3})*(?:\.\d+)?"


@pytest.fixture(scope="module")
def run():
    return run_table(small_table(), RunOptions(as_of="2026-11-30", segments=("plan",),
                                               value=VALUE))


@pytest.fixture(scope="module")
def value_html(run, tmp_path_factory):
    index = build_site(site_content(run), tmp_path_factory.mktemp("money") / "site")
    return unescape((index.parent / "value.html").read_text(encoding="utf-8"))


def test_money_formatter_by_hand():
    """Hand-worked: 3,229,780.4 as a total (no decimals), 225.432 with 2 decimals, and
    "." as thousands separator making "," the decimal mark."""
    assert money(3229780.4, {"currency": "EUR"}, total=True) == "3,229,780 EUR"
    assert money(225.432, {"currency": "EUR"}) == "225.43 EUR"
    assert money(1234.5, {"thousands": ".", "decimals": 1}) == "1.234,5"
    assert money(1234.5, {"thousands": " "}) == "1 234.50"
    assert money(400.1, None) == "400.10" and money(math.nan, None) == "n/a"


def test_every_money_fact_on_the_value_page_carries_the_code(value_html):
    facts = {m.group(1): m.groups()[1:] for m in FACT.finditer(value_html)}
    money_facts = {k: v for k, v in facts.items() if k in ("ltv-all", "base-total")}
    assert set(money_facts) == {"ltv-all", "base-total"}
    for key, (_label, text, detail) in money_facts.items():
        assert re.fullmatch(NUMBER + " EUR", text), (key, text)
        if "interval" in (detail or ""):  # the interval's ends carry the code too
            numbers = re.findall(NUMBER + r"(?: EUR)?", detail.split("interval", 1)[1])
            assert len(numbers) == 2 and all(n.endswith(" EUR") for n in numbers), detail
    assert "interval" in money_facts["ltv-all"][2]
    # per-customer values with 2 decimals, the base total with none
    assert re.fullmatch(r"[\d,]+\.\d{2} EUR", money_facts["ltv-all"][1])
    assert re.fullmatch(r"[\d,]+ EUR", money_facts["base-total"][1])
    assert "money figures in EUR" in value_html


def test_value_tables_show_every_money_figure_with_the_same_decimals(run):
    page = next(p for p in site_content(run).pages if p.slug == "value")
    tables = {f.key: f.table for s in page.sections for f in s.figures}
    for key, per_customer, totals in (
            ("value-segments", ("margin_per_month", "value", "lower", "upper"), ()),
            ("value-base", ("value_per_customer", "lower", "upper"),
             ("total", "total_lower", "total_upper"))):
        frame = tables[key]
        for col in per_customer:
            assert all(re.fullmatch(r"[\d,]+\.\d{2}", x) for x in frame[col]), (key, col)
        for col in totals:
            assert all(re.fullmatch(r"[\d,]+", x) for x in frame[col]), (key, col)


@pytest.mark.parametrize("annual", [0.10, 0.06, 0.125])
def test_discount_sentence_states_the_monthly_rate(annual):
    text = discount_text(annual)
    monthly = (1 + annual) ** (1 / 12) - 1  # effective-rate equivalence (module docstring)
    m = re.search(r"monthly rate d = \(([\d.]+)\)\^\(1/12\) − 1 = ([\d.]+) %", text)
    assert m, text
    assert float(m.group(1)) == pytest.approx(1 + annual)
    assert float(m.group(2)) == pytest.approx(100 * monthly, abs=0.0005)
    assert f"annual discount rate {100 * annual:g} %" in text and "(1 + d)^−k" in text


def test_value_page_states_the_discount_with_its_numbers(value_html):
    # hand-worked in the module docstring: 10 % a year is 0.797 % a month
    assert "annual discount rate 10 % → monthly rate d = (1.10)^(1/12) − 1 = 0.797 %" \
        in value_html


def test_finance_export_carries_the_currency(run, tmp_path):
    out = finance_export(tmp_path, new_customers=run.value(step.VALUE_SEGMENTS),
                         base=run.value(step.VALUE_BASE), currency="EUR")
    csv = pd.read_csv(out.csv_path)
    assert (csv["currency"] == "EUR").all() and len(csv) > 0
    assert list(csv.columns).index("currency") == list(csv.columns).index("total_upper") + 1
    assert pd.api.types.is_float_dtype(csv["value_per_customer"])  # still plain numbers
    doc = json.loads(open(out.json_path, encoding="utf-8").read())
    assert doc["assumptions"]["currency"] == "EUR"
    plain = finance_export(tmp_path / "plain", base=run.value(step.VALUE_BASE))
    assert "currency" not in pd.read_csv(plain.csv_path).columns  # the file as before
    assert json.loads(open(plain.json_path).read())["assumptions"]["currency"] == PRICE_UNITS


def test_experiment_revenue_carries_the_code():
    from retain.publish.pages.experiments import experiment_verdict_text

    class Rev:
        treatment, control, difference, lower, upper, level, horizon_days = \
            "b", "a", 12.5, 2.0, 23.0, 0.95, 365.0

    class Adj:
        treatment, hazard_ratio, lower, upper, covariates = "b", 0.8, 0.7, 0.9, ()

    class V:
        interim, treatments, adjusted, revenue = False, ("b",), (Adj,), (Rev,)
        control, level, analysis_horizon_days = "a", 0.95, 365.0

    text = experiment_verdict_text(V, {"currency": "EUR"})
    assert "12.50 EUR more (95 % interval 2.00 EUR to 23.00 EUR" in text


def test_config_keys_are_read_and_checked(tmp_path):
    write_log(tmp_path / "events.csv", [])
    path = tmp_path / "retain.toml"

    def load(keys: str):
        path.write_text(toml_text(start="2024-01-01", extra='\n[value]\nprice = "price"\n'
                                  'margin_rate = 0.35\n' + keys), encoding="utf-8")
        return load_config(path).value

    v = load('currency = "EUR"\ndecimals = 1\nthousands = "."\n')
    assert (v.currency, v.decimals, v.thousands) == ("EUR", 1, ".")
    v = load("")
    assert (v.currency, v.decimals, v.thousands) == (None, 2, ",")
    for bad in ('currency = "E U R"\n', 'thousands = ";"\n', "decimals = 9\n"):
        with pytest.raises(ConfigError):
            load(bad)


# ------------------------------------------------------------------ the demo in a browser
@pytest.mark.browser
@pytest.mark.skipif(not Path(CHROMIUM).exists(), reason="Debian chromium is not installed")
def test_demo_value_page_shows_the_currency_beside_every_money_figure(tmp_path):
    """The demo's project file sets currency = "EUR": read in Chromium, every money
    fact, both ends of its interval, and each money table's title carry the code."""
    from playwright.sync_api import sync_playwright

    project = tomllib.loads((DEMO_DIR / "retain.toml").read_text(encoding="utf-8"))
    assert project["value"]["currency"] == "EUR"
    index, _ = build_from_config(load_config(DEMO_DIR / "retain.toml"), tmp_path / "site")
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=CHROMIUM, args=CHROMIUM_ARGS)
        page = browser.new_page(viewport={"width": 1400, "height": 900})
        page.route("**/*", lambda r: r.continue_() if r.request.url.startswith(
            "file://") else r.abort())
        page.goto((index.parent / "value.html").as_uri())
        facts = page.eval_on_selector_all(
            ".fact[data-key]", "els => els.map(e => [e.dataset.key, "
            "e.querySelector('.fact-value').innerText, "
            "(e.querySelector('.fact-detail') || {innerText: ''}).innerText])")
        titles = page.eval_on_selector_all("figure figcaption h3",
                                           "els => els.map(e => e.innerText)")
        browser.close()
    money_facts = [f for f in facts if f[0] in ("ltv-all", "base-total")]
    assert len(money_facts) == 2
    for key, text, detail in money_facts:
        assert re.fullmatch(NUMBER + " EUR", text.strip()), (key, text)
        if "interval" in detail:
            ends = re.findall(NUMBER + r"(?: EUR)?", detail.split("interval", 1)[1])
            assert len(ends) == 2 and all(e.endswith(" EUR") for e in ends), detail
    for title in ("Lifetime value of a new customer by", "Residual value of active customers"):
        assert any(t.startswith(title) and "EUR" in t for t in titles), (title, titles)


def test_without_a_currency_the_pages_say_the_price_units():
    run = run_table(small_table(), RunOptions(as_of="2026-11-30", segments=("plan",),
                                              value={"price": "price", "margin_rate": 0.35}))
    page = next(p for p in site_content(run).pages if p.slug == "value")
    assert any(a.startswith(f"money figures {PRICE_UNITS}") for a in page.assumptions)
    titles = [f.title for s in page.sections for f in s.figures]
    assert sum(t.endswith(PRICE_UNITS) for t in titles) == 2, titles
    facts = {f.key: f.text for s in page.sections for f in s.facts}
    assert re.fullmatch(r"[\d,]+\.\d{2}", facts["ltv-all"])  # 2 decimals, no code
    assert re.fullmatch(r"[\d,]+", facts["base-total"])


def test_experiment_revenue_figures_on_the_page_carry_the_code():
    run = run_table(small_table(), RunOptions(
        as_of="2026-11-30", segments=("plan",), value=VALUE,
        experiments={"channels": {"arm": "channel", "control": "web",
                                  "signup_from": "2024-01-01", "signup_to": "2025-12-31"}}))
    page = next(p for p in site_content(run).pages if p.slug == "experiments")
    facts = {f.key: f for s in page.sections for f in s.facts}
    revenue = [f for k, f in facts.items() if "-revenue-" in k]
    assert revenue, list(facts)
    for f in revenue:
        assert re.fullmatch(r"-?[\d,]+\.\d{2} EUR", f.text), f.text
        ends = re.findall(r"-?[\d,]+\.\d+(?: EUR)?", f.detail.split("interval", 1)[1])
        assert len(ends) == 2 and all(e.endswith(" EUR") for e in ends), f.detail
    (table,) = [f for s in page.sections for f in s.figures if f.key.endswith("-comparison")]
    assert table.title.endswith("(revenue in EUR)")
    for col in ("revenue_difference", "revenue_lower", "revenue_upper"):
        assert all(re.fullmatch(r"-?[\d,]+\.\d{2}", x) for x in table.table[col]), col
    assert pd.api.types.is_float_dtype(table.csv["revenue_difference"])
    (arms,) = [f for s in page.sections for f in s.figures if f.key.endswith("-arms")]
    assert arms.title.endswith("(revenue in EUR)")
    for col in ("revenue_per_customer", "revenue_lower", "revenue_upper"):
        assert all(re.fullmatch(r"-?[\d,]+\.\d{2}", x) for x in arms.table[col]), col
