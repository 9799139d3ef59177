r"""A Cox term's hazard ratio by tenure band: what a failed proportional-hazards test means.

When the Schoenfeld-residual test rejects proportional hazards for a term, its
single hazard ratio is an average over tenure. :func:`hazard_ratio_by_tenure`
shows how it moves: the fitted rows are cut at the band edges (a cut piece
keeps its row's covariates, customer and weight; only the last piece keeps the
churn), so the other terms' likelihood is unchanged, and the Cox model is
refitted with the term's columns multiplied by one indicator per band
(term × band, no main effect), so each band gets its own log hazard ratio
:math:`\beta_b` with the other terms, strata, ties and errors as in the fit.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd

from retain.data.table import StartStop
from retain.errors import ModelError
from retain.kernels.exposure import split_at_edges
from retain.models.cox import CoxFit, fit_cox
from retain.models.design import design_matrix
from retain.results import Result
from retain.units import DAYS_PER_MONTH

#: default band edges in days of tenure: months 0–3, 3–12 and after 12
DEFAULT_CUTS = (3 * DAYS_PER_MONTH, 12 * DAYS_PER_MONTH)


def _months(days: float) -> str:
    return f"{days / DAYS_PER_MONTH:.3g}"


def band_labels(edges: Sequence[float]) -> tuple[str, ...]:
    """"months 0–3", "months 3–12", "months 12+" for edges in days (the last band is open)."""
    out = [f"months {_months(a)}–{_months(b)}"
           for a, b in zip(edges[:-2], edges[1:-1], strict=True)]
    out.append(f"months {_months(edges[-2])}+" if len(edges) > 2 else "all tenures")
    return tuple(out)


@dataclass(frozen=True, eq=False)
class TenureEffect(Result):
    """One Cox term's hazard ratio in each tenure band (``labels`` × ``bands`` arrays).

    ``overall`` is the proportional-hazards fit's single ratio per column;
    ``events`` the weighted churns in each band; ``edges`` in days (last one is
    past the longest tenure).
    """

    term: str
    labels: tuple[str, ...]
    bands: tuple[str, ...]
    edges: tuple[float, ...]
    hazard_ratio: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    level: float
    events: np.ndarray
    overall: np.ndarray

    def to_frame(self) -> pd.DataFrame:
        rows = [(self.term, lab, band, self.hazard_ratio[i, b], self.lower[i, b],
                 self.upper[i, b], self.events[b], self.overall[i])
                for i, lab in enumerate(self.labels) for b, band in enumerate(self.bands)]
        return pd.DataFrame(rows, columns=["term", "label", "band", "hazard_ratio", "lower",
                                           "upper", "events", "overall"])

    def summary(self) -> str:
        parts = [f"{lab}: " + ", ".join(f"{self.hazard_ratio[i, b]:.2f} in {band}"
                                       for b, band in enumerate(self.bands))
                 for i, lab in enumerate(self.labels)]
        return f"Hazard ratio by tenure band for {self.term}: " + "; ".join(parts) + "."


@dataclass(frozen=True, eq=False)
class TenureEffects(Result):
    """The tenure-band ratios of every term that failed the test, and which terms held.

    ``held``: terms whose proportional-hazards p is at least ``alpha`` (their
    headline ratio stands); ``averaged``: the others (their headline ratio is an
    average over tenure, shown band by band in ``effects``).
    """

    effects: tuple[TenureEffect, ...]
    held: tuple[str, ...]
    averaged: tuple[str, ...]
    alpha: float

    def to_frame(self) -> pd.DataFrame:
        cols = ["term", "label", "band", "hazard_ratio", "lower", "upper", "events", "overall"]
        frames = [e.to_frame() for e in self.effects]
        return pd.concat(frames, ignore_index=True) if frames else pd.DataFrame(columns=cols)

    def summary(self) -> str:
        head = (f"Proportional hazards hold (p >= {self.alpha:g}) for "
                f"{', '.join(self.held) or 'no term'}; averaged over tenure: "
                f"{', '.join(self.averaged) or 'no term'}.")
        return "\n".join([head, *(e.summary() for e in self.effects)])


def _edges(table: StartStop, cuts: Sequence[float] | None) -> np.ndarray:
    """Band edges in days: 0, the cuts below the last churn whose band has churns, an end."""
    end = float(table.stop.max()) + 1.0
    churn_t = table.stop[table.churned == 1]
    last = float(churn_t.max())
    chosen = [0.0]
    for c in sorted(float(c) for c in (DEFAULT_CUTS if cuts is None else cuts)):
        if chosen[-1] < c < last and ((churn_t > chosen[-1]) & (churn_t <= c)).any():
            chosen.append(c)
    if len(chosen) > 1 and not (churn_t > chosen[-1]).any():
        chosen.pop()
    return np.array([*chosen, end])


def split_by_tenure(table: StartStop, edges: np.ndarray) -> tuple[StartStop, np.ndarray,
                                                                    np.ndarray]:
    """Rows cut at ``edges`` (days): the pieces, each piece's band and source row.

    A churn stays on its row's last piece; covariates, customer and weight are the row's.
    """
    row, lo, hi, band, last_piece = split_at_edges(table.start, table.stop, edges)
    pieces = table.take(row)
    pieces.start = lo
    pieces.stop = hi
    pieces.churned = (last_piece & (pieces.churned == 1)).astype(np.int8)
    pieces.cause = type(table.cause)(np.where(last_piece, pieces.cause.codes, -1
                                              ).astype(np.int32), table.cause.levels)
    return pieces, band, row


def hazard_ratio_by_tenure(fit: CoxFit, term: str, cuts: Sequence[float] | None = None
                           ) -> TenureEffect:
    """``term``'s hazard ratio in each tenure band, the rest of ``fit`` as it was.

    ``cuts`` are band edges in days (default 3 and 12 months); a cut past the
    last churn, or whose band would hold no churn, is dropped. Needs the fit
    with its rows (not :meth:`CoxFit.without_rows`).
    """
    where = f"hazard ratio of {term} by tenure"
    if term not in fit.design.terms:
        raise ModelError(where, f"{term!r} is not a covariate of this Cox model",
                         f"choose one of {', '.join(fit.covariates)}")
    if fit.penalty or fit._offset is not None:
        raise ModelError(where, "the fit has a penalty or an offset",
                         "refit without them to split its ratio by tenure")
    table = fit.fitted_table
    edges = _edges(table, cuts)
    pieces, band, _ = split_by_tenure(table, edges)
    ref = {term: fit.reference[term]} if term in fit.reference else None
    coded = design_matrix(pieces, [term], reference=ref)
    n_bands = edges.shape[0] - 1
    new: dict[str, np.ndarray] = {}
    for j in range(coded.n_columns):
        for b in range(n_bands):
            new[f"{term} column {j} band {b}"] = coded.X[:, j] * (band == b)
    others = [c for c in fit.covariates if c != term]
    refit = fit_cox(pieces.with_columns(**new), [*others, *new], strata=list(fit.strata) or None,
                    ties=fit.ties, reference={k: v for k, v in fit.reference.items()
                                              if k != term} or None,
                    robust=fit.robust, level=fit.level)
    at = [refit.columns.index(c) for c in new]
    shape = (coded.n_columns, n_bands)
    w_churn = pieces.weight * pieces.churned
    events = np.array([float(w_churn[band == b].sum()) for b in range(n_bands)])
    return TenureEffect(
        term=term, labels=tuple(fit.labels[fit.design.terms[term]]), bands=band_labels(edges),
        edges=tuple(float(e) for e in edges),
        hazard_ratio=np.exp(refit.coef[at]).reshape(shape),
        lower=np.exp(refit.lower[at]).reshape(shape),
        upper=np.exp(refit.upper[at]).reshape(shape),
        level=refit.level, events=events,
        overall=np.exp(fit.coef[fit.design.terms[term]]))


def tenure_effects(fit: CoxFit, ph_table: pd.DataFrame, cuts: Sequence[float] | None = None,
                   alpha: float = 0.05) -> TenureEffects:
    """Band-by-band ratios of each term whose proportional-hazards p is below ``alpha``.

    ``ph_table`` is :attr:`ProportionalHazardsTest.table`: a term's p is its
    ``term`` row (several columns) or its one column's row.
    """
    p = {}
    for term, sl in fit.design.terms.items():
        key = term if sl.stop - sl.start > 1 else fit.labels[sl.start]
        hit = ph_table[ph_table["term"] == key]["p_value"]
        p[term] = float(hit.iloc[0]) if len(hit) else float("nan")
    averaged = tuple(t for t in fit.covariates if p[t] < alpha)
    held = tuple(t for t in fit.covariates if not p[t] < alpha)
    effects = tuple(hazard_ratio_by_tenure(fit, t, cuts) for t in averaged)
    return TenureEffects(effects, held, averaged, alpha)
