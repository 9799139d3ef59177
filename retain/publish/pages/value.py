"""The value page: lifetime value of a new customer, residual value of the base, finance file."""

from __future__ import annotations

from typing import Any

from retain import step_names as step
from retain.data.config import ValueConfig
from retain.kernels.discount import monthly_rate
from retain.publish import charts
from retain.publish.content import Fact, Figure, Page, Section
from retain.publish.finance import with_currency
from retain.publish.pages import prose
from retain.publish.pages.shared import (
    failure_section,
    interval_text,
    left_out,
    levels_text,
    money,
    money_unit,
    num,
)

MONEY_COLUMNS = ("margin_per_month", "value", "lower", "upper", "value_per_customer")
TOTAL_COLUMNS = ("total", "total_lower", "total_upper")


def value_page(run: Any) -> Page | None:
    """The value page, or None when the project file sets no margin (the page is left
    out and the overview says which key turns it on)."""
    if "lifetime-value" in left_out(run):
        return None
    spec = run.options.value  # ValueConfig, or None without [value]
    sections: list[Section] = []
    assumptions: list[str] = []
    if spec is not None:
        assumptions += [*_margin_text(spec), discount_text(spec.annual_discount_rate),
                        f"horizon {spec.horizon_months} months",
                        f"retention curve: {spec.curve} model fitted per segment"]
    allv = run.get(step.VALUE_ALL)
    if allv.ok and allv.value.values:
        v = allv.value.values[0]
        assumptions += [f"interval: {v.interval_method}"]
        facts = (Fact("Value of a new customer", money(v.value, spec),
                      interval_text(v.lower, v.upper, lambda x: money(x, spec), v.level),
                      "ltv-all", v.value),
                 Fact("Expected months kept", num(v.expected_months, 1),
                      f"within {v.horizon_months} months", "ltv-months", v.expected_months))
        sections.append(Section("A new customer", facts=facts, bullets=tuple(v.warnings)))
    else:
        sections.append(failure_section("A new customer", allv))
    seg = run.get(step.VALUE_SEGMENTS)
    assumptions.append(prose.VALUE_MONEY.format(
        unit=f"in {spec.currency}" if spec is not None and spec.currency else money_unit(spec),
        decimals=spec.decimals if spec is not None else ValueConfig.decimals))
    sections.append(_segments_section(seg.value, spec) if seg.ok else
                    failure_section("By segment", seg))
    base = run.get(step.VALUE_BASE)
    sections.append(_base_section(base.value, spec) if base.ok else
                    failure_section("The active base", base))
    finance = run.get(step.VALUE_FINANCE)
    if finance.ok:
        sections.append(_finance_section(finance.value, spec))
    from_caution = getattr(seg.value, "caution", "") if seg.ok else ""
    cautions = prose.MONEY_CAUTIONS + ((from_caution,) if from_caution else ())
    return Page("value", "Value", prose.VALUE_LEAD, tuple(sections), cautions=cautions,
                assumptions=tuple(assumptions), nav_label="Value")


def _margin_text(spec: ValueConfig) -> list[str]:
    """How the margin is set, as an assumption line (none when no margin is set)."""
    if spec.margin_per_month is not None:
        return [f"margin per month {money(spec.margin_per_month, spec)}"]
    if spec.margin_rate is not None:
        return [f"margin per month = {spec.margin_rate:g} × the segment's mean monthly "
                f"{spec.price or 'price'}"]
    return []


def discount_text(annual: float) -> str:
    """The discounting assumption with its numbers: the annual rate, the monthly rate d
    derived from it, and how month k is discounted."""
    gross = f"{1 + annual:.2f}" if round(annual, 2) == annual else f"{1 + annual:g}"
    return prose.VALUE_DISCOUNT.format(annual=f"{100 * annual:g} %", gross=gross,
                                       monthly=f"{100 * monthly_rate(annual):.3f} %")


def money_table(frame: Any, spec: ValueConfig | None) -> Any:
    """``frame`` as the page's table shows it: money columns as text with the set decimals
    (totals without), so every figure in a column has the same number of decimals."""
    out = frame.copy()
    for col in out.columns:
        if col in MONEY_COLUMNS or col in TOTAL_COLUMNS:
            out[col] = [money(x, spec, total=col in TOTAL_COLUMNS, code=False)
                        for x in out[col]]
    return out


def _segments_section(sv: Any, spec: ValueConfig | None) -> Section:
    frame = sv.to_frame()
    unit = money_unit(spec)
    shown = frame[["segment", "customers", "margin_per_month", "value", "lower", "upper",
                   "expected_months", "survival_at_horizon", "extrapolated_months"]]
    by = ", ".join(sv.by) or "all"
    return Section(f"By {by}", bullets=tuple(sv.warnings) + tuple(
        f"{x.segment}: {w}" for x in sv.values for w in x.warnings), figures=(Figure(
            key="value-segments", title=f"Lifetime value of a new customer by {by}, {unit}",
            guide=prose.VALUE_SEGMENTS_GUIDE.format(level=levels_text(sv.values)),
            chart=charts.interval_bars(shown, "value_segments", label="segment",
                                       estimate="value", lower="lower", upper="upper",
                                       x_title=f"Value of a new customer, {unit}",
                                       x_format=",.0f"),
            table=money_table(shown, spec), csv=frame),))


def _base_section(bv: Any, spec: ValueConfig | None) -> Section:
    frame = bv.to_frame()
    shown = frame[["segment", "customers", "value_per_customer", "lower", "upper", "total",
                   "total_lower", "total_upper", "extrapolated_months"]]
    horizon = "with no horizon cap" if bv.horizon_months is None else \
        f"over the next {bv.horizon_months} months"
    intro = prose.VALUE_BASE_INTRO.format(
        customers=num(sum(x.customers for x in bv.segments)),
        total=money(bv.total, spec, total=True), horizon=horizon)
    return Section("The active base", intro=intro,
                   facts=(Fact("Residual value of the base", money(bv.total, spec, total=True),
                               f"{num(sum(x.customers for x in bv.segments))} active customers",
                               "base-total", bv.total),),
                   bullets=tuple(bv.warnings), figures=(Figure(
                       key="value-base",
                       title=f"Residual value of active customers, {money_unit(spec)}",
                       guide=prose.VALUE_BASE_GUIDE, table=money_table(shown, spec),
                       csv=frame),))


def _finance_section(fin: Any, spec: ValueConfig | None) -> Section:
    fin = with_currency(fin, spec.currency if spec is not None else None)
    return Section("Finance file", intro=prose.FINANCE_INTRO, figures=(Figure(
        key="value-finance", title="Finance CSV", guide=prose.FINANCE_GUIDE,
        table=fin[["figure", "segment", "customers", "value_per_customer", "lower", "upper",
                   "total", *(["currency"] if "currency" in fin else []), "curve",
                   "annual_discount_rate", "horizon_months", "as_of"]],
        csv=fin, show_rows=20),))
