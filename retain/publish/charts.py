"""Results tables -> Vega-Lite specs (through Altair). Never fits anything.

Every function takes a tidy ``pandas.DataFrame`` that a page already built
from a model result and returns a plain Vega-Lite dict with an explicit
``name``; data are inlined as rounded values so the spec (and so the page) is
the same bytes on every build. No selections or parameters are used, so
Altair never invents counter-based names.

Colours: the Okabe–Ito colour-blind-safe set (Okabe & Ito, 2008), with the
low-contrast yellow moved to the end.
"""

from __future__ import annotations

import math
from typing import Any

import altair as alt
import numpy as np
import pandas as pd

PALETTE = ("#0072B2", "#E69F00", "#009E73", "#CC79A7", "#56B4E9", "#D55E00", "#000000",
           "#F0E442")
INK = "#1e2a31"
SOFT = "#4a5a63"
GRID = "#e6e3da"
HEIGHT = 300
FIXED_WIDTH = 520  # charts with long labels on the left get a fixed plot width
SIGNIFICANT = 6
SOLID = (1, 0)  # dash patterns of data lines and of model lines
DASHED = (6, 3)
DOTTED = (2, 4)  # legend of a series drawn as dots


def _round(value: Any) -> Any:
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        v = float(value)
        if not math.isfinite(v):
            return None
        if v == 0:
            return 0.0
        digits = SIGNIFICANT - 1 - int(math.floor(math.log10(abs(v))))
        return round(v, max(digits, 0)) if digits > 0 else float(round(v))
    if value is None or value is pd.NA or value is pd.NaT:
        return None
    if hasattr(value, "isoformat"):
        return value.isoformat()[:10]
    return str(value)


def values(frame: pd.DataFrame) -> list[dict[str, Any]]:
    """Rows of ``frame`` as JSON-ready dicts, floats rounded to 6 significant digits."""
    cols = [str(c) for c in frame.columns]
    return [dict(zip(cols, (_round(v) for v in row), strict=True))
            for row in frame.itertuples(index=False, name=None)]


class _Datasets:
    """Named datasets of one chart, attached to the spec after Altair has built it.

    Passing the rows through Altair would validate and deep-copy every record;
    named data keep the spec small to build and the names stable
    (``<chart name>-0``, ``-1``, ...).
    """

    def __init__(self, name: str) -> None:
        self.name = name
        self.sets: dict[str, list[dict[str, Any]]] = {}

    def __call__(self, frame: pd.DataFrame) -> alt.NamedData:
        key = f"{self.name}-{len(self.sets)}"
        self.sets[key] = values(frame)
        return alt.NamedData(name=key)


def _config() -> dict[str, Any]:
    # every family name a plain token: Vega measures labels with a canvas font string,
    # and a name like "Source Sans 3" there would make the string invalid (labels clipped)
    font = "Arial, Helvetica, sans-serif"
    return {
        "font": font,
        "background": "#ffffff",
        "view": {"stroke": None, "continuousHeight": HEIGHT},
        "axis": {"labelColor": SOFT, "titleColor": INK, "gridColor": GRID, "domainColor": SOFT,
                 "tickColor": SOFT, "labelFontSize": 12, "titleFontSize": 12.5,
                 "titleFontWeight": 600},
        "legend": {"labelColor": INK, "titleColor": INK, "labelFontSize": 12, "titleFontSize": 12.5,
                   "orient": "bottom", "columns": 4, "symbolStrokeWidth": 2.5, "labelLimit": 260},
        "range": {"category": list(PALETTE)},
        "title": {"color": INK, "fontSize": 14, "anchor": "start"},
        "line": {"strokeWidth": 2.2},
    }


def finish(chart: alt.TopLevelMixin, name: str, data: _Datasets, *,
           width: Any = "container") -> dict[str, Any]:
    """The chart as a Vega-Lite dict with a fixed name, our look, and no counters."""
    chart = chart.properties(name=name)
    if width is not None:
        chart = chart.properties(width=width)
    spec = chart.to_dict()
    spec["config"] = _config()
    spec["datasets"] = {**spec.get("datasets", {}), **data.sets}
    spec["autosize"] = {"type": "fit-x", "contains": "padding"} if width == "container" \
        else {"type": "pad"}
    return spec


def _series_scale(levels: list[str]) -> alt.Scale:
    return alt.Scale(domain=levels, range=[PALETTE[i % len(PALETTE)] for i in range(len(levels))])


def survival_chart(frame: pd.DataFrame, name: str, *, x: str = "month", y: str = "retention",
                   lower: str | None = "lower", upper: str | None = "upper",
                   series: str | None = None, x_title: str = "Months since start",
                   y_title: str = "Still subscribed", y_zero: bool = True,
                   series_title: str | None = None) -> dict[str, Any]:
    """Step curves (right-continuous, as Kaplan–Meier is) with pointwise interval bands."""
    data = _Datasets(name)
    base = alt.Chart(data(frame))
    enc_x = alt.X(f"{x}:Q", title=x_title)
    scale_y = alt.Scale(domain=[0, 1]) if y_zero else alt.Scale(zero=False)
    enc_y = alt.Y(f"{y}:Q", title=y_title, scale=scale_y, axis=alt.Axis(format="%"))
    band_color: Any = alt.value(PALETTE[0])
    line_color: Any = alt.value(PALETTE[0])
    if series:
        levels = list(dict.fromkeys(frame[series].astype(str)))
        legend = alt.Legend(symbolType="stroke", symbolOpacity=1, symbolStrokeWidth=3)
        line_color = alt.Color(f"{series}:N", scale=_series_scale(levels), title=series_title,
                               legend=legend)
        band_color = alt.Color(f"{series}:N", scale=_series_scale(levels), title=series_title,
                               legend=legend)
    tip = [alt.Tooltip(f"{x}:Q", format=".1f")]
    if series:
        tip.insert(0, alt.Tooltip(f"{series}:N"))
    tip.append(alt.Tooltip(f"{y}:Q", format=".1%"))
    layers = []
    if lower and upper:
        layers.append(base.mark_area(interpolate="step-after", opacity=0.18).encode(
            x=enc_x, y=alt.Y(f"{lower}:Q", scale=scale_y), y2=f"{upper}:Q", color=band_color))
    layers.append(base.mark_line(interpolate="step-after").encode(
        x=enc_x, y=enc_y, color=line_color, tooltip=tip))
    return finish(alt.layer(*layers).properties(height=HEIGHT), name, data)


def lines_chart(frame: pd.DataFrame, name: str, *, x: str, y: str, series: str,
                x_title: str, y_title: str, dashed: dict[str, bool] | None = None,
                y_format: str = "%", step: bool = False, lower: str | None = None,
                upper: str | None = None, points: str | None = None,
                y_domain: list[float] | None = None,
                series_title: str | None = None) -> dict[str, Any]:
    """Several lines on shared axes; ``dashed`` marks model curves against data.

    ``points`` names a series drawn as dots instead of a line (e.g. crude rates
    under a graduated line).
    """
    data = _Datasets(name)
    levels = list(dict.fromkeys(frame[series].astype(str)))
    legend = _line_legend()
    color = alt.Color(f"{series}:N", scale=_series_scale(levels), title=series_title,
                      legend=legend)
    scale_y = alt.Scale(domain=y_domain) if y_domain else alt.Scale(zero=False)
    enc_x = alt.X(f"{x}:Q", title=x_title)
    enc_y = alt.Y(f"{y}:Q", title=y_title, axis=alt.Axis(format=y_format), scale=scale_y)
    tip = [alt.Tooltip(f"{series}:N"), alt.Tooltip(f"{x}:Q", format=".1f"),
           alt.Tooltip(f"{y}:Q", format=".3~g" if y_format != "%" else ".2%")]
    base = alt.Chart(data(frame))
    layers = []
    if lower and upper:
        layers.append(base.mark_area(opacity=0.16, interpolate="step-after" if step else "linear")
                      .encode(x=enc_x, y=alt.Y(f"{lower}:Q", scale=scale_y), y2=f"{upper}:Q",
                              color=color))
    line_data = base
    if points:
        line_data = base.transform_filter(alt.datum[series] != points)
    # one dash pattern per series (solid unless ``dashed``; the dotted series is drawn as
    # dots), on the same field and title as the colour, so Vega-Lite draws one legend
    # whose symbols look like the marks themselves
    stroke = alt.StrokeDash(f"{series}:N", title=series_title, legend=legend, scale=alt.Scale(
        domain=levels, range=[list(_dash(lv, dashed, points)) for lv in levels]))
    if any(lv != points for lv in levels):
        layers.append(line_data.mark_line(interpolate="step-after" if step else "linear")
                      .encode(x=enc_x, y=enc_y, color=color, strokeDash=stroke, tooltip=tip))
    if points:
        layers.append(base.transform_filter(alt.datum[series] == points).mark_point(
            filled=True, size=34).encode(x=enc_x, y=enc_y, color=color, tooltip=tip))
    return finish(alt.layer(*layers).properties(height=HEIGHT), name, data)


def _dash(level: str, dashed: dict[str, bool] | None, points: str | None) -> tuple[int, ...]:
    if level == points:
        return DOTTED
    return DASHED if (dashed or {}).get(level) else SOLID


def _line_legend() -> alt.Legend:
    """A legend whose symbols are short strokes in each series' colour and dash pattern."""
    return alt.Legend(columns=2, symbolType="stroke", symbolOpacity=1, symbolStrokeWidth=2.5,
                      symbolSize=400)


def forest_chart(frame: pd.DataFrame, name: str, *, label: str = "term",
                 estimate: str = "hazard_ratio", lower: str = "lower", upper: str = "upper",
                 x_title: str = "Hazard ratio (log scale; 1 = no difference)",
                 reference: float = 1.0, group: str | None = None) -> dict[str, Any]:
    """Point estimates with interval whiskers on a log axis, one row per term."""
    data = _Datasets(name)
    order = list(dict.fromkeys(frame[label].astype(str)))
    lo = float(np.nanmin(frame[lower].to_numpy(dtype=float)))
    hi = float(np.nanmax(frame[upper].to_numpy(dtype=float)))
    lo, hi = min(lo, reference) * 0.9, max(hi, reference) * 1.1
    xs = alt.Scale(type="log", domain=[lo, hi], nice=False)
    y = alt.Y(f"{label}:N", sort=order, title=None, axis=alt.Axis(labelLimit=340))
    color: Any = alt.value(PALETTE[0])
    if group:
        levels = list(dict.fromkeys(frame[group].astype(str)))
        color = alt.Color(f"{group}:N", scale=_series_scale(levels), title=group)
    base = alt.Chart(data(frame))
    tip = [alt.Tooltip(f"{label}:N"), alt.Tooltip(f"{estimate}:Q", format=".3f"),
           alt.Tooltip(f"{lower}:Q", format=".3f"), alt.Tooltip(f"{upper}:Q", format=".3f")]
    rule = base.mark_rule(strokeWidth=2).encode(
        x=alt.X(f"{lower}:Q", scale=xs, title=x_title), x2=f"{upper}:Q", y=y, color=color)
    dot = base.mark_point(filled=True, size=70).encode(
        x=alt.X(f"{estimate}:Q", scale=xs), y=y, color=color, tooltip=tip)
    ref = alt.Chart(alt.InlineData(values=[{"ref": reference}])).mark_rule(
        color=SOFT, strokeDash=[4, 3]).encode(x=alt.X("ref:Q", scale=xs))
    height = max(80, 26 * len(order))
    return finish(alt.layer(ref, rule, dot).properties(height=height), name, data,
                  width=FIXED_WIDTH)


def interval_bars(frame: pd.DataFrame, name: str, *, label: str, estimate: str,
                  lower: str, upper: str, x_title: str, reference: float | None = None,
                  x_format: str = ",.0f", log: bool = False) -> dict[str, Any]:
    """Horizontal bars with interval whiskers (value by segment, A/E by segment)."""
    data = _Datasets(name)
    order = list(dict.fromkeys(frame[label].astype(str)))
    xs = alt.Scale(type="log") if log else alt.Scale(zero=True)
    y = alt.Y(f"{label}:N", sort=order, title=None, axis=alt.Axis(labelLimit=340))
    base = alt.Chart(data(frame))
    tip = [alt.Tooltip(f"{label}:N"), alt.Tooltip(f"{estimate}:Q", format=x_format),
           alt.Tooltip(f"{lower}:Q", format=x_format), alt.Tooltip(f"{upper}:Q", format=x_format)]
    layers = []
    axis = alt.Axis(format=x_format, tickCount=6)
    if log:
        layers.append(base.mark_point(filled=True, size=70, color=PALETTE[0]).encode(
            x=alt.X(f"{estimate}:Q", scale=xs, title=x_title, axis=axis), y=y, tooltip=tip))
    else:
        layers.append(base.mark_bar(color=PALETTE[4], height={"band": 0.6}).encode(
            x=alt.X(f"{estimate}:Q", scale=xs, title=x_title, axis=axis), y=y, tooltip=tip))
    layers.append(base.mark_rule(color=INK, strokeWidth=1.8).encode(
        x=alt.X(f"{lower}:Q", scale=xs), x2=f"{upper}:Q", y=y))
    if reference is not None:
        layers.append(alt.Chart(alt.InlineData(values=[{"ref": reference}])).mark_rule(
            color=PALETTE[5], strokeDash=[4, 3], strokeWidth=1.5).encode(
            x=alt.X("ref:Q", scale=xs)))
    height = max(80, 28 * len(order))
    return finish(alt.layer(*layers).properties(height=height), name, data, width=FIXED_WIDTH)


def heat_chart(frame: pd.DataFrame, name: str, *, row: str, column: str, value: str,
               row_title: str, column_title: str, value_title: str,
               outlined: str | None = None, rows: list[str] | None = None) -> dict[str, Any]:
    """A cohort x month grid coloured by retention; missing cells stay blank.

    ``rows`` fixes the row order and keeps rows with no observable cell (a cohort
    that has not reached its first month yet) as an empty row; ``outlined`` names a
    true/false column whose true cells get a dark outline (cohorts observed from
    part-way through their life).
    """
    data = _Datasets(name)
    rows = list(rows) if rows is not None else list(dict.fromkeys(frame[row].astype(str)))
    shown = frame[np.isfinite(frame[value].to_numpy(dtype=float))]
    base = alt.Chart(data(shown))
    enc_x = alt.X(f"{column}:O", title=column_title, axis=alt.Axis(labelAngle=0))
    enc_y = alt.Y(f"{row}:O", sort=rows, title=row_title or None, scale=alt.Scale(domain=rows))
    rect = base.mark_rect().encode(
        x=enc_x, y=enc_y,
        color=alt.Color(f"{value}:Q", title=value_title,
                        scale=alt.Scale(scheme="viridis", domain=[0, 1]),
                        legend=alt.Legend(format="%", orient="right", titleLimit=200)),
        tooltip=[alt.Tooltip(f"{row}:O"), alt.Tooltip(f"{column}:O"),
                 alt.Tooltip(f"{value}:Q", format=".1%")])
    layers = [rect]
    if outlined is not None:
        layers.append(base.transform_filter(alt.datum[outlined]).mark_rect(
            filled=False, stroke=INK, strokeWidth=1.6, strokeDash=[3, 2]).encode(
            x=enc_x, y=enc_y))
    height = max(120, 16 * len(rows))
    return finish(alt.layer(*layers).properties(height=height), name, data)


def loglog_chart(points: pd.DataFrame, lines: pd.DataFrame, name: str, *,
                 series: str = "segment") -> dict[str, Any]:
    """log(−log S) against log tenure: Kaplan–Meier dots and fitted Weibull lines."""
    data = _Datasets(name)
    levels = list(dict.fromkeys(list(points[series].astype(str)) +
                                list(lines[series].astype(str))))
    color = alt.Color(f"{series}:N", scale=_series_scale(levels), title=None)
    x = alt.X("log_days:Q", title="log(tenure in days)", scale=alt.Scale(zero=False))
    dots = alt.Chart(data(points)).mark_point(size=14, opacity=0.55, filled=True).encode(
        x=x, y=alt.Y("log_minus_log_retention:Q", title="log(−log retention)",
                     scale=alt.Scale(zero=False)), color=color,
        tooltip=[alt.Tooltip(f"{series}:N"), alt.Tooltip("days:Q", format=".0f"),
                 alt.Tooltip("retention:Q", format=".1%")])
    fitted = alt.Chart(data(lines)).mark_line(strokeWidth=1.8).encode(
        x=x, y=alt.Y("fitted_log_cumulative_hazard:Q"), color=color,
        detail=f"{series}:N")
    return finish(alt.layer(dots, fitted).properties(height=HEIGHT), name, data)


def ratio_series_chart(frame: pd.DataFrame, name: str, *, x: str, estimate: str, lower: str,
                       upper: str, x_title: str, y_title: str,
                       reference: float = 1.0) -> dict[str, Any]:
    """Ratios along an ordered axis (calendar month, cohort) with interval whiskers."""
    data = _Datasets(name)
    order = list(dict.fromkeys(frame[x].astype(str)))
    step = max(1, len(order) // 12)
    ex = alt.X(f"{x}:O", sort=order, title=x_title,
               axis=alt.Axis(labelAngle=-45, values=order[::step]))
    base = alt.Chart(data(frame))
    tip = [alt.Tooltip(f"{x}:O"), alt.Tooltip(f"{estimate}:Q", format=".3f"),
           alt.Tooltip(f"{lower}:Q", format=".3f"), alt.Tooltip(f"{upper}:Q", format=".3f")]
    ys = alt.Scale(zero=False)
    whisk = base.mark_rule(color=PALETTE[4], strokeWidth=2).encode(
        x=ex, y=alt.Y(f"{lower}:Q", scale=ys, title=y_title), y2=f"{upper}:Q")
    dots = base.mark_point(filled=True, size=30, color=PALETTE[0]).encode(
        x=ex, y=alt.Y(f"{estimate}:Q", scale=ys), tooltip=tip)
    ref = alt.Chart(alt.InlineData(values=[{"ref": reference}])).mark_rule(
        color=PALETTE[5], strokeDash=[4, 3]).encode(y=alt.Y("ref:Q", scale=ys))
    return finish(alt.layer(ref, whisk, dots).properties(height=HEIGHT), name, data)
