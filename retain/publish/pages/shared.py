"""What several page groups share: number formatting, failure sections, curve figures."""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from typing import Any

import numpy as np
import pandas as pd

from retain.estimates import DEFAULT_LEVEL
from retain.publish import charts
from retain.publish.content import Figure, Section
from retain.units import DAYS_PER_MONTH

AT_RISK_MONTHS = (0, 3, 6, 12, 18, 24, 36)
VIRIDIS = ("#440154", "#482878", "#3e4989", "#31688e", "#26828e", "#1f9e89", "#35b779",
           "#6ece58", "#b5de2b", "#fde725")


# --------------------------------------------------------------------------- formatting
def pct(x: float | None, digits: int = 1) -> str:
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{100.0 * x:.{digits}f} %"


def num(x: float | None, digits: int = 0) -> str:
    if x is None or not math.isfinite(x):
        return "n/a"
    return f"{x:,.{digits}f}"


PRICE_UNITS = "in the log's price units"  # what money is in when no currency is set


def money(x: float | None, fmt: Any = None, *, total: bool = False,
          code: bool = True) -> str:
    """A money figure as every page prints it, by the ``[value]`` keys ``currency``,
    ``decimals`` and ``thousands`` (``fmt``: a mapping with them, or an object with them as
    attributes; None or missing keys: "," and 2 decimals, no currency). ``total``: a sum
    over many customers, shown without decimals. ``code``: put the currency after the
    number ("225.43 EUR"); "," becomes the decimal mark when "." separates thousands."""
    if x is None or not math.isfinite(x):
        return "n/a"
    get = fmt.get if hasattr(fmt, "get") else (lambda k, d=None: getattr(fmt, k, d))
    digits = 0 if total else int(get("decimals", 2) if fmt is not None else 2)
    sep = get("thousands", ",") if fmt is not None else ","
    currency = get("currency", None) if fmt is not None else None
    text = f"{x:,.{digits}f}".replace(",", "\0").replace(".", "," if sep == "." else ".")
    text = text.replace("\0", sep)
    return f"{text} {currency}" if code and currency else text


def money_unit(fmt: Any = None) -> str:
    """What the money figures are in: "EUR", or "in the log's price units"."""
    currency = (fmt.get("currency") if hasattr(fmt, "get") else getattr(fmt, "currency", None)
                ) if fmt is not None else None
    return currency or PRICE_UNITS


def months_text(days: float | None) -> str:
    if days is None or not math.isfinite(days):
        return "not reached"
    return f"{days / DAYS_PER_MONTH:.1f} months"


def level_text(level: float) -> str:
    """A confidence level as the pages print it: 0.95 -> "95 %", 0.9 -> "90 %"."""
    return f"{100.0 * float(level):g} %"


def levels_text(results: Iterable[Any]) -> str:
    """The level of several results' intervals ("95 %"; "90 % / 95 %" if they differ)."""
    levels = sorted({float(r.level) for r in results}) or [DEFAULT_LEVEL]
    return " / ".join(level_text(v) for v in levels)


def interval_text(lo: float | None, hi: float | None, fmt: Callable[[float | None], str],
                  level: float = DEFAULT_LEVEL) -> str:
    """"95 % interval lo to hi", at the level the result carries."""
    return f"{level_text(level)} interval {fmt(lo)} to {fmt(hi)}"


def p_text(p: float) -> str:
    """A p-value as the pages print it."""
    return "p < 0.001" if p < 0.001 else f"p = {p:.3f}"


def failure_section(title: str, outcome: Any, intro: str = "") -> Section:
    """The section of a step that failed (a :class:`retain.run.Outcome`), or (one line,
    not an alert) one that the project file does not ask for."""
    if outcome.skipped:
        return Section(title=title, intro=not_set_up_line(title, outcome))
    return Section(title=title, intro=intro, failure=outcome.error or "this part was not run")


# What a page leaves out when the project file does not ask for it, and how each is named
# in the one line that says how to turn it on.
LEFT_OUT = {
    "hazard-ratios": "The Cox model of hazard ratios",
    "lifetime-value": "Lifetime value",
    "cause-split": "Churn by cause",
    "cause-hazard-ratios": "The Cox model of each cause",
}
NOT_SET_UP_TITLE = "Not set up in the project file"


def not_set_up_line(topic: str, outcome: Any) -> str:
    """One line: ``topic`` is not set up, why, and the key that turns it on (the parts of
    the step's :class:`retain.run.NotSetUp` refusal)."""
    _, reason, fix = outcome.refused or ("", "", outcome.error or "")
    text = f"{topic} is not set up" + (f" ({reason})" if reason else "")
    return f"{text}: {fix or outcome.error or ''}".rstrip(".") + "."


def left_out(run: Any) -> dict[str, str]:
    """What the site leaves out because the project file does not ask for it: key of
    :data:`LEFT_OUT` -> the one line saying how to turn it on."""
    from retain import step_names as step

    outcomes = {"hazard-ratios": step.COX, "lifetime-value": step.VALUE_ALL,
                "cause-split": step.INCIDENCE, "cause-hazard-ratios": step.CAUSE_COX}
    out = {}
    for key, name in outcomes.items():
        o = run.get(name)
        if o.skipped:
            out[key] = not_set_up_line(LEFT_OUT[key], o)
    return out


def not_set_up_section(lines: Iterable[str]) -> Section | None:
    """The one section that lists what a page leaves out (None when nothing is)."""
    lines = tuple(lines)
    return Section(NOT_SET_UP_TITLE, bullets=lines, anchor="not-set-up") if lines else None


def as_frame(result: Any) -> pd.DataFrame:
    """The table a page shows for ``result``: every result exposes ``to_frame()``; a
    plain DataFrame passes through as it is."""
    return result if isinstance(result, pd.DataFrame) else result.to_frame()


def term_frame(frame: pd.DataFrame, label: str = "label") -> pd.DataFrame:
    """``frame`` with its ``label`` column first, renamed ``term``."""
    out = frame.copy()
    out.insert(0, "term", out.pop(label).astype(str))
    return out


def hazard_frame(cox: Any) -> pd.DataFrame:
    """term, hazard_ratio, lower, upper, p_value of a Cox fit, in the model's order."""
    hr = cox.hazard_ratios
    return pd.DataFrame({"term": hr["term"].astype(str), "hazard_ratio": hr["hazard_ratio"],
                         "lower": hr["lower"], "upper": hr["upper"],
                         "p_value": hr["p_value"]})


# --------------------------------------------------------------------------- curves
def curve_points(curve: Any, label: str | None = None) -> pd.DataFrame:
    """A curve's steps in months, starting at (0, 1)."""
    t = np.concatenate(([0.0], np.asarray(curve.times, dtype=float)))
    s = np.concatenate(([1.0], curve.survival))
    lo = np.concatenate(([1.0], curve.lower))
    hi = np.concatenate(([1.0], curve.upper))
    frame = pd.DataFrame({"month": t / DAYS_PER_MONTH, "retention": s, "lower": lo, "upper": hi})
    if label is not None:
        frame.insert(0, "segment", label)
    return frame


def _curve_download(curve: Any, label: str) -> pd.DataFrame:
    frame = curve.to_frame().rename(columns={"time": "day", "survival": "retention"})
    frame.insert(0, "segment", label)
    frame.insert(2, "month", frame["day"] / DAYS_PER_MONTH)
    return frame


def _at_risk_table(curves: Iterable[tuple[str, Any]]) -> pd.DataFrame:
    rows = []
    for label, c in curves:
        d = np.array(AT_RISK_MONTHS, dtype=float) * DAYS_PER_MONTH
        s = c.at(d)
        lo, hi = c.interval_at(d)
        n = c.at_risk_at(d)
        for m, sv, a, b, k in zip(AT_RISK_MONTHS, s, lo, hi, n, strict=True):
            seen = math.isfinite(sv)
            rows.append({"segment": label, "month": m, "at_risk": float(k) if seen else math.nan,
                         "retention": sv, "lower": a, "upper": b})
    return pd.DataFrame(rows)


def curves_figure(key: str, title: str, guide: str, curves: Iterable[tuple[str, Any]], *,
                  series_title: str | None = None) -> Figure:
    """Kaplan–Meier curves as a figure: step chart with bands, at-risk table, full-curve CSV.

    One curve is drawn in one colour; several get a legend titled ``series_title``.
    """
    items = list(curves)
    name = key.replace("-", "_")
    if len(items) == 1 and series_title is None:
        label, c = items[0]
        chart = charts.survival_chart(curve_points(c), name)
    else:
        pts = pd.concat([curve_points(c, k) for k, c in items], ignore_index=True)
        chart = charts.survival_chart(pts, name, series="segment", series_title=series_title)
    return Figure(key=key, title=title, guide=guide, chart=chart, table=_at_risk_table(items),
                  csv=pd.concat([_curve_download(c, k) for k, c in items], ignore_index=True))


def heat_colours(values: np.ndarray) -> dict[str, Any]:
    """Viridis cell colours and a readable ink for each cell of a 0–1 table (blank: none)."""
    colours, inks = [], []
    for row in values:
        c_row, i_row = [""], [""]  # first column is the row label
        for v in row:
            if not math.isfinite(v):
                c_row.append("")
                i_row.append("")
                continue
            k = min(len(VIRIDIS) - 1, max(0, int(v * (len(VIRIDIS) - 1) + 0.5)))
            c_row.append(VIRIDIS[k])
            i_row.append("#ffffff" if k <= 5 else "#1e2a31")
        colours.append(c_row)
        inks.append(i_row)
    return {"colours": colours, "inks": inks}
