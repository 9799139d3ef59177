"""The experiments page: one section per declared experiment, with its verdict."""

from __future__ import annotations

import math
from typing import Any

from retain import step_names as step
from retain.publish.content import Fact, Figure, Page, Section, slug
from retain.publish.pages import prose
from retain.publish.pages.shared import (
    PRICE_UNITS,
    curves_figure,
    failure_section,
    interval_text,
    level_text,
    money,
    money_unit,
    num,
    p_text,
)


def _two(x: float | None) -> str:
    return f"{x:.2f}"


def experiments_page(run: Any) -> Page:
    sections: list[Section] = []
    names = list(run.options.experiments)
    if not names:
        sections.append(Section("No experiments declared", intro=prose.NO_EXPERIMENTS))
    for name in names:
        o = run.get(step.experiment(name))
        title = f"Experiment {name}"
        if not o.ok:
            sections.append(failure_section(title, o))
            continue
        sections.append(_experiment_section(name, o.value, run.options.value))
    return Page("experiments", "Experiments", prose.EXPERIMENTS_LEAD, tuple(sections),
                cautions=(prose.VERDICT_CAUTION, prose.MONEY_CAUTIONS[1]),
                nav_label="Experiments")


def experiment_verdict_text(v: Any, fmt: Any = None) -> str:
    """One plain sentence per treatment arm: what happened, and how sure we are (money
    as :func:`retain.publish.pages.shared.money` prints it by ``fmt``, the [value] keys)."""

    def _money(x: float | None) -> str:
        return money(x, fmt)

    parts = []
    status = "Interim verdict" if v.interim else "Verdict"
    for t in v.treatments:
        adj = next((a for a in v.adjusted if a.treatment == t), None)
        if adj is None:
            parts.append(f"{t}: no adjusted hazard ratio could be computed")
            continue
        ratio = (f"(hazard ratio {adj.hazard_ratio:.2f}, "
                 f"{interval_text(adj.lower, adj.upper, _two, v.level)})")
        if adj.lower > 1:
            what = f"customers on {t} churned faster than on {v.control} {ratio}"
        elif adj.upper < 1:
            what = f"customers on {t} churned more slowly than on {v.control} {ratio}"
        else:
            what = f"no clear difference in churn between {t} and {v.control} {ratio}"
        rv = next((r for r in v.revenue if r.treatment == t), None)
        if rv is not None:
            sign = "more" if rv.difference > 0 else "less"
            clear = "" if (rv.lower > 0 or rv.upper < 0) else ", not a clear difference"
            what += (f"; revenue per assigned customer over {rv.horizon_days:g} days was "
                     f"{_money(abs(rv.difference))} {sign} "
                     f"({interval_text(rv.lower, rv.upper, _money, rv.level)}{clear})")
        parts.append(what)
    return f"{status} at {v.analysis_horizon_days:g} days: " + "; ".join(parts) + "."


def _experiment_facts(key: str, v: Any, fmt: Any = None) -> list[Fact]:
    def _money(x: float | None) -> str:
        return money(x, fmt)

    facts = []
    for a in v.adjusted:
        facts.append(Fact(f"Hazard ratio, {a.treatment} vs {v.control}", f"{a.hazard_ratio:.2f}",
                          f"{interval_text(a.lower, a.upper, _two, v.level)}; adjusted for "
                          f"{', '.join(a.covariates) or 'nothing'}",
                          f"experiment-{key}-hr-{slug(a.treatment)}", a.hazard_ratio))
    for r in v.revenue:
        facts.append(Fact(f"Revenue per customer, {r.treatment} − {r.control}",
                          _money(r.difference),
                          f"{interval_text(r.lower, r.upper, _money, r.level)}"
                          f" over {r.horizon_days:g} days"
                          + (f", {PRICE_UNITS}" if money_unit(fmt) == PRICE_UNITS else ""),
                          f"experiment-{key}-revenue-{slug(r.treatment)}", r.difference))
    facts.append(Fact("Log-rank test", p_text(v.logrank.p_value), f"χ² {v.logrank.statistic:.1f} "
                      f"on {v.logrank.df} df", f"experiment-{key}-logrank", v.logrank.p_value))
    return facts


REVENUE_COLUMNS = ("revenue_difference", "revenue_per_customer", "revenue_lower",
                   "revenue_upper")


def _unit(fmt: Any) -> str:
    unit = money_unit(fmt)
    return unit if unit == PRICE_UNITS else f"in {unit}"


def _revenue_table(frame: Any, fmt: Any) -> Any:
    """A comparison or arms table as the page shows it: revenue columns as money text with
    the set decimals (the CSV keeps the numbers)."""
    out = frame.copy()
    for col in REVENUE_COLUMNS:
        if col in out:
            out[col] = [money(x, fmt, code=False) for x in out[col]]
    return out


def _experiment_section(name: str, v: Any, fmt: Any = None) -> Section:
    key = slug(name)
    power = v.power if isinstance(v.power, dict) else {}
    bullets = [f"Selection: {v.selection}."]
    for t in v.treatments:
        det = power.get(t, {}).get("detectable_hazard_ratio") if isinstance(
            power.get(t), dict) else None
        if det:
            bullets.append(prose.DETECTABLE_EFFECT.format(
                events=num(power.get("events", math.nan)), treatment=t, ratio=det))
    bullets += list(v.warnings)
    figs = (
        curves_figure(f"experiment-{key}-curves", f"Retention by arm ({name})",
                      prose.EXPERIMENT_CURVES_GUIDE.format(level=level_text(v.level)),
                      v.curves.items(), series_title=v.arm),
        Figure(key=f"experiment-{key}-comparison",
               title=f"Treatment against control (revenue {_unit(fmt)})",
               guide=prose.EXPERIMENT_COMPARISON_GUIDE.format(level=level_text(v.level)),
               table=_revenue_table(v.to_frame(), fmt), csv=v.to_frame()),
        Figure(key=f"experiment-{key}-arms", title=f"Arms (revenue {_unit(fmt)})",
               guide=prose.EXPERIMENT_ARMS_GUIDE, table=_revenue_table(v.arms, fmt),
               csv=v.arms),
        Figure(key=f"experiment-{key}-balance", title="Balance of pre-assignment attributes",
               guide=prose.EXPERIMENT_BALANCE_GUIDE, table=v.balance),
    )
    return Section(f"Experiment {name}" + (" (interim)" if v.interim else ""),
                   verdict=experiment_verdict_text(v, fmt),
                   facts=tuple(_experiment_facts(key, v, fmt)),
                   bullets=tuple(bullets), figures=figs, anchor=f"experiment-{key}")
