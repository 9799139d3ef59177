"""What a site page is made of, before it becomes HTML.

:mod:`retain.publish.pages` turns the results of one run into these plain
objects; :mod:`retain.publish.site` renders them with the Jinja2 templates in
``site_templates/``. Nothing here computes a statistic.
"""

from __future__ import annotations

import re
from dataclasses import dataclass, field
from typing import Any

import pandas as pd

_KEY = re.compile(r"^[a-z0-9][a-z0-9-]*$")


def slug(text: str) -> str:
    """A file-safe lower-case name made of letters, digits and hyphens."""
    s = re.sub(r"[^a-z0-9]+", "-", str(text).lower()).strip("-")
    return s or "x"


@dataclass(frozen=True)
class Fact:
    """One headline number: its label, the text shown, and the raw value behind it.

    ``key`` marks the fact in the HTML (``data-key``) with its unrounded
    ``value`` (``data-value``), so a test can compare the page with the model.
    """

    label: str
    text: str
    detail: str = ""
    key: str = ""
    value: float | None = None


@dataclass(frozen=True)
class Figure:
    """A chart with its reading guide, its data table and a CSV of that table.

    ``chart`` is a Vega-Lite spec (a dict) or None for a table without a chart.
    ``table`` is what the reader sees under the chart; ``csv`` (default: the
    table) is what the download holds, usually with more precision.
    """

    key: str
    title: str
    guide: str
    table: pd.DataFrame
    chart: dict[str, Any] | None = None
    csv: pd.DataFrame | None = None
    note: str = ""
    show_rows: int = 40
    heat: dict[str, Any] | None = None  # optional cell colours for a heat table

    def __post_init__(self) -> None:
        if not _KEY.match(self.key):
            raise ValueError(f"figure key {self.key!r} must be lower-case letters, digits, hyphens")

    @property
    def download(self) -> pd.DataFrame:
        return self.table if self.csv is None else self.csv


@dataclass(frozen=True)
class Section:
    """A titled part of a page: prose, facts, figures, plain tables, or a failure."""

    title: str
    intro: str = ""
    facts: tuple[Fact, ...] = ()
    figures: tuple[Figure, ...] = ()
    bullets: tuple[str, ...] = ()
    failure: str | None = None
    verdict: str = ""
    anchor: str = ""


@dataclass(frozen=True)
class Page:
    """One HTML file of the site."""

    slug: str
    title: str
    lead: str
    sections: tuple[Section, ...] = ()
    cautions: tuple[str, ...] = ()
    assumptions: tuple[str, ...] = ()
    nav_label: str = ""
    group: str = "main"

    @property
    def filename(self) -> str:
        return "index.html" if self.slug == "overview" else f"{self.slug}.html"

    @property
    def label(self) -> str:
        return self.nav_label or self.title

    def figures(self) -> list[Figure]:
        return [f for s in self.sections for f in s.figures]


@dataclass(frozen=True)
class SiteContent:
    """Everything the builder writes: pages, the run's JSON, and its as-of date."""

    title: str
    as_of: str
    pages: tuple[Page, ...]
    results: dict[str, Any] = field(default_factory=dict)
    source: str = ""
