"""retain.toml validation: the full text of every message, and a valid file read right."""

from __future__ import annotations

import datetime as dt

import pytest
from test_prepare_support import toml_text, write_log

from retain.data.config import load_config
from retain.errors import ConfigError
from retain.paths import DEMO_DIR

EXTRA = """
[segments]
by = ["plan", "channel"]

[model]
covariates = ["plan", "price_ratio", "in_recovery", "prior_spells"]
reference = { plan = "Seedling" }

[value]
price = "price"
margin_rate = 0.35
horizon_months = 36
curve = "weibull"

[experiments.intro]
arm = "arm"
control = "standard"
cohorts = ["2025-03"]
covariates = ["channel"]
"""


@pytest.fixture()
def folder(tmp_path):
    write_log(tmp_path / "events.csv", [])
    return tmp_path


def load(folder, text):
    path = folder / "retain.toml"
    path.write_text(text, encoding="utf-8")
    return load_config(path)


def message(folder, text):
    with pytest.raises(ConfigError) as err:
        load(folder, text)
    return err.value.message.replace(str(folder / "retain.toml"), "retain.toml") \
        .replace(str(folder), "DIR")


def test_a_valid_file_is_read(folder):
    cfg = load(folder, toml_text(start="2024-01-01", extra=EXTRA))
    assert cfg.source.format == "csv" and cfg.source.path == folder / "events.csv"
    assert cfg.columns.reason == "cancel_reason"
    assert cfg.events.map["cancel"] == "end" and cfg.events.ignore == ("email_opened",)
    assert cfg.window.as_of == dt.date(2024, 12, 31) and cfg.window.start == dt.date(2024, 1, 1)
    assert [(a.name, a.column, a.kind, a.varies, a.ratio) for a in cfg.attributes] == [
        ("plan", "plan", "categorical", True, False),
        ("price", "monthly_price", "numeric", True, True),
        ("channel", "channel", "categorical", False, False),
        ("region", "region", "categorical", False, False),
        ("arm", "arm", "categorical", False, False)]
    assert cfg.model.reference == {"plan": "Seedling"}
    assert cfg.value.margin_rate == 0.35 and cfg.value.horizon_months == 36
    assert cfg.experiments[0].name == "intro" and cfg.experiments[0].treatment is None
    assert cfg.engine.threads == 1 and cfg.output.dir == (folder / "out").resolve()
    assert cfg.output_columns[-6:] == ("plan", "price", "price_ratio", "in_recovery", "paused",
                                       "prior_spells")


def test_an_experiment_can_state_the_effect_it_was_sized_for(folder):
    text = BASE.replace('cohorts = ["2025-03"]',
                        'cohorts = ["2025-03"]\ntarget_hazard_ratio = 0.8\npower = 0.9')
    spec = load(folder, text).experiments[0]
    assert (spec.target_hazard_ratio, spec.power) == (0.8, 0.9)
    assert load(folder, BASE).experiments[0].target_hazard_ratio is None


def test_the_demo_file_is_valid():
    cfg = load_config(DEMO_DIR / "retain.toml")
    assert cfg.window.start == dt.date(2024, 1, 1)


BASE = toml_text(extra=EXTRA)

CASES = [
    ("unknown section",
     BASE + "\n[extras]\nx = 1\n",
     "retain.toml: unknown section [extras] -- allowed sections: project, source, columns, events, "
     "reasons, window, attributes, segments, model, value, experiments, engine, output, "
     "check"),
    ("unknown key",
     BASE.replace('as_of = "2024-12-31"', 'asof = "2024-12-31"'),
     "retain.toml: [window]: unknown key 'asof' -- allowed keys: as_of, start, timezone"),
    ("missing section",
     '[source]\npath = "events.csv"\n',
     "retain.toml: section [columns] is required -- add a [columns] section (see "
     "DEVELOPERS.md)"),
    ("missing required key",
     BASE.replace('as_of = "2024-12-31"\n', ""),
     "retain.toml: [window] as_of: is required -- add as_of = ... to [window]"),
    ("bad date",
     BASE.replace('as_of = "2024-12-31"', 'as_of = "2024-13-01"'),
     "retain.toml: [window] as_of: '2024-13-01' is not a date -- write it as \"YYYY-MM-DD\", "
     "e.g. \"2026-11-30\""),
    ("window start after as_of",
     BASE.replace('as_of = "2024-12-31"', 'as_of = "2024-12-31"\nstart = "2025-01-01"'),
     "retain.toml: [window] start: 2025-01-01 is after as_of 2024-12-31 -- the observation "
     "window must start before as_of"),
    ("window start equal to as_of",
     BASE.replace('as_of = "2024-12-31"', 'as_of = "2024-12-31"\nstart = "2024-12-31"'),
     "retain.toml: [window] start: 2024-12-31 is as_of itself: a window of no days -- set "
     "start before as_of (or remove start to use the whole log)"),
    ("time zone misspelt",
     BASE.replace('timezone = "UTC"', 'timezone = "Europe/Londn"'),
     "retain.toml: [window] timezone: unknown time zone 'Europe/Londn' -- did you mean "
     "Europe/London or Europe/Lisbon or Europe/Oslo?"),
    ("time zone in the wrong case",
     BASE.replace('timezone = "UTC"', 'timezone = "europe/paris"'),
     "retain.toml: [window] timezone: unknown time zone 'europe/paris' -- did you mean "
     "Europe/Paris?"),
    ("one column static and time-varying",
     BASE + '\n[attributes.plan_at_signup]\ncolumn = "plan"\nkind = "categorical"\n'
            'varies = false\n',
     "retain.toml: [attributes.plan_at_signup] column: column 'plan' is already the column of "
     "[attributes.plan] (once static, once time-varying) -- declare each column once: one "
     "attribute per column"),
    ("one column, two static attributes",
     BASE + '\n[attributes.area]\ncolumn = "region"\nkind = "categorical"\nvaries = false\n',
     "retain.toml: [attributes.area] column: column 'region' is already the column of "
     "[attributes.region] -- declare each column once: one attribute per column"),
    ("attribute names differing in case",
     BASE + '\n[attributes.Plan]\ncolumn = "other"\nkind = "categorical"\nvaries = false\n',
     "retain.toml: [attributes.Plan]: 'Plan' differs from [attributes.plan] only in case -- "
     "give the attributes names that differ in more than case"),
    ("bad event vocabulary",
     BASE.replace('cancel = "end"', 'cancel = "stop"'),
     "retain.toml: [events] map.cancel: 'stop' is not an event of ours -- allowed values: "
     "start, update, pause, resume, payment_failed, payment_recovered, end"),
    ("no end event",
     BASE.replace('cancel = "end"', 'cancel = "pause"'),
     "retain.toml: [events] map: no event maps to 'end' -- map the value that marks a spell's "
     "end onto 'end'"),
    ("mapped and ignored",
     BASE.replace('ignore = ["email_opened"]', 'ignore = ["cancel"]'),
     "retain.toml: [events] ignore: 'cancel' is both mapped and ignored -- remove it from one "
     "of map and ignore"),
    ("bad cause",
     BASE.replace('card_declined = "involuntary"', 'card_declined = "forced"'),
     "retain.toml: [reasons] map.card_declined: 'forced' is not a cause -- allowed values: "
     "voluntary, involuntary"),
    ("bad kind",
     BASE.replace('kind = "numeric"', 'kind = "number"'),
     "retain.toml: [attributes.price] kind: 'number' is not allowed -- allowed values: "
     "categorical, numeric"),
    ("varies missing",
     BASE.replace('kind = "numeric"\nvaries = true\n', 'kind = "numeric"\n'),
     "retain.toml: [attributes.price] varies: is required -- true = time-varying (update "
     "events change it); false = static"),
    ("ratio on a category",
     BASE.replace('[attributes.plan]\nkind = "categorical"\nvaries = true',
                  '[attributes.plan]\nkind = "categorical"\nvaries = true\nratio = true'),
     "retain.toml: [attributes.plan] ratio: needs kind = \"numeric\" and varies = true -- a "
     "ratio to the spell's first value only changes if the value does"),
    ("reserved attribute name",
     BASE + '\n[attributes.cohort]\nkind = "categorical"\nvaries = false\n',
     "retain.toml: [attributes.cohort]: 'cohort' is a reserved column -- rename it; reserved: "
     "cause, churned, cohort, customer_id, event, event_time, in_recovery, paused, "
     "prior_spells, reason, source_row, spell, start, start_date, stop, weight"),
    ("not a boolean",
     BASE.replace("strict = false", 'strict = "no"'),
     "retain.toml: [events] strict: must be true or false, got 'no' -- write true or false "
     "without quotes"),
    ("unknown time zone",
     BASE.replace('timezone = "UTC"', 'timezone = "Mars/Olympus"'),
     "retain.toml: [window] timezone: unknown time zone 'Mars/Olympus' -- use an IANA name "
     "such as UTC or Europe/London"),
    ("missing source file",
     BASE.replace('path = "events.csv"', 'path = "nope.csv"'),
     "retain.toml: [source] path: file not found: DIR/nope.csv -- fix the path"),
    ("unknown format",
     BASE.replace('path = "events.csv"', 'path = "events.xlsx"'),
     "retain.toml: [source] path: cannot tell the format of 'events.xlsx' -- add format = one "
     "of: csv, parquet"),
    ("duckdb without table",
     BASE.replace('path = "events.csv"', 'duckdb = "events.csv"'),
     "retain.toml: [source] table: is required with duckdb -- add table = \"the table holding "
     "the events\""),
    ("unknown covariate",
     BASE.replace('covariates = ["plan", "price_ratio"', 'covariates = ["plan", "colour"'),
     "retain.toml: [model] covariates: 'colour' is not a column of the start-stop table -- "
     "allowed values: arm, channel, cohort, in_recovery, paused, plan, price, price_ratio, "
     "prior_spells, region"),
    ("unknown segment",
     BASE.replace('by = ["plan", "channel"]', 'by = ["planet"]'),
     "retain.toml: [segments] by: 'planet' is not a column of the start-stop table -- allowed "
     "values: arm, cause, channel, churned, cohort, customer_id, in_recovery, paused, plan, "
     "price, price_ratio, prior_spells, region, spell, start, start_date, stop, weight"),
    ("bad curve",
     BASE.replace('curve = "weibull"', 'curve = "gompertz"'),
     "retain.toml: [value] curve: 'gompertz' is not allowed -- allowed values: weibull, "
     "exponential, cox, km_weibull_tail, renewal"),
    ("both margins",
     BASE.replace("margin_rate = 0.35", "margin_rate = 0.35\nmargin_per_month = 12.0"),
     "retain.toml: [value] margin_per_month: give margin_rate or margin_per_month, not both -- "
     "remove one of them"),
    ("margin out of range",
     BASE.replace("margin_rate = 0.35", "margin_rate = 35"),
     "retain.toml: [value] margin_rate: must be between 0 and 1, got 35 -- choose a value in "
     "that range"),
    ("price not numeric",
     BASE.replace('price = "price"', 'price = "plan"'),
     "retain.toml: [value] price: 'plan' is not a numeric attribute -- allowed values: price"),
    ("bad cohort",
     BASE.replace('cohorts = ["2025-03"]', 'cohorts = ["March"]'),
     "retain.toml: [experiments.intro] cohorts: 'March' is not a cohort -- write cohorts as "
     "\"YYYY-MM\""),
    ("experiment arm unknown",
     BASE.replace('arm = "arm"\ncontrol', 'arm = "group"\ncontrol'),
     "retain.toml: [experiments.intro] arm: 'group' is not a categorical attribute -- allowed "
     "values: arm, channel, plan, region"),
    ("target hazard ratio of no effect",
     BASE.replace('cohorts = ["2025-03"]', 'cohorts = ["2025-03"]\ntarget_hazard_ratio = 1'),
     "retain.toml: [experiments.intro] target_hazard_ratio: 1 is no effect: no number of churns "
     "can detect it -- give the effect sized for, e.g. 0.8"),
    ("power out of range",
     BASE.replace('cohorts = ["2025-03"]', 'cohorts = ["2025-03"]\npower = 1.5'),
     "retain.toml: [experiments.intro] power: must be between 0.5 and 0.99, got 1.5 -- choose a "
     "value in that range"),
    ("bad memory limit",
     BASE.replace('memory_limit = "1GB"', 'memory_limit = "lots"'),
     "retain.toml: [engine] memory_limit: 'lots' is not a memory size -- write it like \"4GB\" "
     "or \"512MB\""),
    ("threads not whole",
     BASE.replace("threads = 1", "threads = 1.5"),
     "retain.toml: [engine] threads: must be a whole number, got 1.5 -- write it without quotes"),
    ("two columns the same",
     BASE.replace('reason = "cancel_reason"', 'reason = "kind"'),
     "retain.toml: [columns] reason: column 'kind' is already mapped to event -- map each of "
     "our columns to a different column"),
    ("invalid toml",
     BASE + "\nthis is = = wrong\n",
     None),
]


@pytest.mark.parametrize("name,text,expected", CASES, ids=[c[0] for c in CASES])
def test_each_message(folder, name, text, expected):
    got = message(folder, text)
    if expected is None:
        assert got.startswith("retain.toml: is not valid TOML (") and \
            got.endswith(" -- fix the syntax at that line")
    else:
        assert got == expected


def test_a_missing_file(tmp_path):
    with pytest.raises(ConfigError) as err:
        load_config(tmp_path / "missing.toml")
    assert err.value.message == (f"{tmp_path / 'missing.toml'}: file not found -- give the path "
                                 "of your retain.toml")


def test_relative_paths_are_relative_to_the_file(tmp_path):
    sub = tmp_path / "project"
    sub.mkdir()
    write_log(sub / "events.csv", [])
    (sub / "retain.toml").write_text(toml_text(extra='\n'), encoding="utf-8")
    cfg = load_config(sub / "retain.toml")
    assert cfg.source.path == sub / "events.csv"
