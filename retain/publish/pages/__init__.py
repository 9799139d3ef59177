"""Turn one run's results into site pages (content only; no statistics computed here).

Each ``*_page`` function reads the outcomes of :class:`retain.run.RunResults`
(looked up by the names in :mod:`retain.step_names`) and returns a
:class:`~retain.publish.content.Page`. A failed or missing outcome becomes a
section that shows its message. Numbers are only read from results and
formatted; the one thing done here is to choose which points of a curve to show.

One module per page group (:mod:`.overview`, :mod:`.curves`, :mod:`.hazards`,
:mod:`.value`, :mod:`.experiments`, :mod:`.actuarial`, :mod:`.quality`), what
they share in :mod:`.shared`, and the longer wording in :mod:`.prose`. To add a
page, write its builder in its group's module and list it in ``PAGE_BUILDERS``.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from typing import Any

from retain.errors import RetainError, internal_error_text
from retain.publish.content import Page, Section, SiteContent
from retain.publish.pages.actuarial import causes_page, decrements_page, expected_page
from retain.publish.pages.curves import cohorts_page, curves_page
from retain.publish.pages.experiments import experiment_verdict_text, experiments_page
from retain.publish.pages.hazards import fit_page, hazards_page
from retain.publish.pages.overview import hazard_sentences, overview_page
from retain.publish.pages.quality import quality_page
from retain.publish.pages.value import value_page

__all__ = [
    "PAGE_BUILDERS", "STRICT_ENV", "causes_page", "cohorts_page", "curves_page",
    "decrements_page", "error_page", "expected_page", "experiment_verdict_text",
    "experiments_page", "fit_page", "hazard_sentences", "hazards_page", "overview_page",
    "quality_page", "site_content", "strict_pages", "value_page",
]

# A builder returns None for a page the project file does not ask for (value without a
# margin, causes with one cause): the page leaves the navigation and the overview lists
# the one line that says how to turn it on.
PAGE_BUILDERS: tuple[Callable[[Any], Page | None], ...] = (
    overview_page, curves_page, cohorts_page, hazards_page, fit_page, value_page,
    experiments_page, quality_page, decrements_page, expected_page, causes_page,
)
STRICT_ENV = "RETAIN_STRICT_PAGES"  # "1": a page builder's exception raises (tests set it)


def strict_pages() -> bool:
    """Whether the environment asks page builders' exceptions to raise."""
    return os.environ.get(STRICT_ENV, "").strip() not in ("", "0")


def _build_page(builder: Callable[[Any], Page | None], run: Any, strict: bool) -> Page | None:
    """A page (None when left out), or, if assembling it fails, a page that names the cause
    (the site still builds). With ``strict`` the exception is raised instead."""
    try:
        return builder(run)
    except Exception as exc:  # noqa: BLE001 - one broken page must not hide the others
        if strict:
            raise
        return error_page(builder.__name__.removesuffix("_page"), exc)


def error_page(name: str, exc: Exception) -> Page:
    """The page shown in place of page ``name`` when assembling it raised ``exc``.

    A :class:`~retain.errors.RetainError` is a refusal with a reason and is shown as
    its one line; any other exception is a bug, shown with the place it was raised.
    """
    cause = exc.message if isinstance(exc, RetainError) else internal_error_text(exc)
    return Page(name, name.replace("_", " ").capitalize(), "This page could not be assembled.",
                (Section("Error", failure=cause),))


def site_content(run: Any, *, strict: bool | None = None) -> SiteContent:
    """All pages for one run, in navigation order.

    ``strict`` (default: the environment variable ``RETAIN_STRICT_PAGES``) makes an
    exception inside a page builder raise instead of becoming an error page.
    """
    strict = strict_pages() if strict is None else strict
    built = (_build_page(builder, run, strict) for builder in PAGE_BUILDERS)
    pages = tuple(page for page in built if page is not None)
    as_of = run.options.as_of
    return SiteContent(title=run.options.title, as_of=as_of.isoformat() if as_of else "",
                       pages=pages, results=run.to_dict(), source=run.options.source)
