"""Design-matrix coding shared by every regression model (Cox, exponential, Weibull).

The user names covariates; nothing is written as a formula. A numeric covariate
enters as one column, as is. A categorical covariate enters as indicator
columns, one per level other than its *reference* level, so every coefficient
compares one level with the reference ("plan Orchard vs Seedling").

Default reference level: the most common level by total weight (so a
compressed table and the full table choose the same one); ties go to the first
level in sort order. Levels that do not occur in the table get no column.

Checks (each raises :class:`~retain.errors.DataError` naming the column):
covariate not in the table, missing values, no variation, a reference level
that does not occur, and exactly collinear columns (found from the
eigen-decomposition of the weighted correlation matrix of the columns; the
columns loading on a near-null direction are named).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from retain.data.table import Categorical, StartStop
from retain.errors import DataError

#: a column whose weighted correlation matrix has an eigenvalue below this is
#: treated as an exact linear combination of others (double precision leaves
#: about 1e-12 of noise on a well-posed problem)
COLLINEAR_TOL = 1e-9


@dataclass(frozen=True, eq=False)
class Design:
    """A coded design matrix and everything needed to code new rows the same way.

    Attributes
    ----------
    X : ndarray (n, p) float64
        One row per table row, one column per coefficient: not centred (the
        default) or, when ``is_centred``, already ``X - means`` (a model that
        fits on centred columns asks for that and so keeps one copy, not two).
        Fortran order unless built with ``order="C"``.
    columns : tuple of str
        Short column names: ``"plan=Orchard"``, ``"price_ratio"``.
    labels : tuple of str
        Readable names: ``"plan Orchard vs Seedling"``, ``"price_ratio (per unit)"``.
    covariates : tuple of str
        The covariates as the user named them, in order.
    terms : dict covariate -> slice
        Which columns of ``X`` belong to each covariate.
    reference : dict covariate -> level
        Reference level of each categorical covariate.
    levels : dict covariate -> tuple of str
        Levels (in column order after the reference) of each categorical covariate;
        the reference comes first.
    means : ndarray (p,)
        Weighted column means (for centring; compressed == full table).
    is_centred : bool
        Whether ``X`` holds the centred columns.
    """

    X: np.ndarray
    columns: tuple[str, ...]
    labels: tuple[str, ...]
    covariates: tuple[str, ...]
    terms: dict[str, slice]
    reference: dict[str, str]
    levels: dict[str, tuple[str, ...]]
    means: np.ndarray
    source: str = field(default="start-stop table")
    is_centred: bool = False

    @property
    def n_columns(self) -> int:
        return len(self.columns)

    def is_categorical(self, covariate: str) -> bool:
        return covariate in self.reference

    def centred(self) -> np.ndarray:
        """``X - means`` (a new array)."""
        return self.X.copy() if self.is_centred else self.X - self.means

    # ------------------------------------------------------------ new rows
    def rows_for(self, profile: Mapping[str, object]) -> np.ndarray:
        """Design rows for a covariate profile.

        Parameters
        ----------
        profile : mapping covariate -> value
            Every covariate of the model must be given. Values may be scalars
            (one row) or equal-length sequences (one row per element).
            Categorical values must be known levels.

        Returns
        -------
        ndarray (m, p) float64, not centred.
        """
        missing = [c for c in self.covariates if c not in profile]
        if missing:
            raise DataError("covariate profile", f"no value for {', '.join(missing)}",
                            "give a value for every covariate in the model")
        extra = [c for c in profile if c not in self.terms]
        if extra:
            raise DataError("covariate profile", f"{', '.join(map(str, extra))} not in the model",
                            f"the model's covariates are: {', '.join(self.covariates)}")
        values = {c: np.atleast_1d(np.asarray(profile[c], dtype=object)) for c in self.covariates}
        sizes = {len(v) for v in values.values()}
        sizes.discard(1)
        if len(sizes) > 1:
            raise DataError("covariate profile", "values have different lengths",
                            "give scalars or sequences of one length")
        m = sizes.pop() if sizes else 1
        out = np.zeros((m, self.n_columns))
        for c in self.covariates:
            v = values[c]
            if len(v) == 1 and m > 1:
                v = np.repeat(v, m)
            sl = self.terms[c]
            if c in self.reference:
                lv = self.levels[c]
                for k, val in enumerate(v):
                    s = str(val)
                    if s not in lv:
                        raise DataError("covariate profile", f"{c} has no level {s!r}",
                                        f"known levels: {', '.join(lv)}")
                    j = lv.index(s)
                    if j > 0:
                        out[k, sl.start + j - 1] = 1.0
            else:
                try:
                    out[:, sl.start] = v.astype(np.float64)
                except (TypeError, ValueError) as exc:
                    raise DataError("covariate profile", f"{c} must be a number, got {v[0]!r}",
                                    "give a numeric value") from exc
                if not np.all(np.isfinite(out[:, sl.start])):
                    raise DataError("covariate profile", f"{c} is not finite",
                                    "give a finite numeric value")
        return out

    def rows_for_table(self, table: StartStop) -> np.ndarray:
        """Code another table's rows with this design's levels and references.

        A level unknown to the design raises :class:`DataError` naming it.
        """
        out = np.zeros((table.n_rows, self.n_columns))
        for c in self.covariates:
            if not table.has(c):
                raise DataError(table.source, f"there is no column {c!r}",
                                f"choose one of: {', '.join(table.covariate_names) or '(none)'}")
            col = table.column(c)
            sl = self.terms[c]
            if c in self.reference:
                if not isinstance(col, Categorical):
                    raise DataError(table.source, f"column {c!r} is numeric, the model coded "
                                    "it as categorical", "use the same table layout")
                _check_missing(table.source, c, col.codes < 0)
                lv = self.levels[c]
                present = np.unique(col.codes)
                unknown = [col.levels[i] for i in present if col.levels[i] not in lv]
                if unknown:
                    raise DataError(table.source, f"{c} has level(s) the model has not seen: "
                                    f"{', '.join(map(repr, unknown))}",
                                    f"known levels: {', '.join(lv)}")
                pos = np.array([lv.index(x) if x in lv else -1 for x in col.levels], dtype=np.int64)
                j = pos[col.codes]
                for k in range(1, len(lv)):
                    out[:, sl.start + k - 1] = j == k
            else:
                if isinstance(col, Categorical):
                    raise DataError(table.source, f"column {c!r} is text, the model coded it "
                                    "as numeric", "use the same table layout")
                _check_missing(table.source, c, ~np.isfinite(col))
                out[:, sl.start] = col
        return out


def _check_missing(where: str, name: str, bad: np.ndarray) -> None:
    n_bad = int(bad.sum())
    if n_bad:
        raise DataError(where, f"covariate {name!r} is missing on {n_bad} of {bad.shape[0]} rows",
                        "fill the missing values or drop those rows before fitting")


def design_matrix(
    table: StartStop,
    covariates: Sequence[str],
    *,
    reference: Mapping[str, str] | None = None,
    centre: bool = False,
    order: str = "F",
    check_collinear: bool = True,
) -> Design:
    """Code covariates of a start-stop table as a design matrix.

    Parameters
    ----------
    table : StartStop
    covariates : sequence of str
        Covariate names (columns of ``table``), in the order wanted.
    reference : mapping covariate -> level, optional
        Reference level for categorical covariates. Default: the most common
        level by weight (ties: first in sort order).
    centre : bool
        Store the centred columns ``X - means`` (``is_centred``) instead of the raw ones.
    order : {"F", "C"}
        Memory order of ``X``: Fortran (column at a time) or C (row at a time).
    check_collinear : bool
        Check here for collinear columns (default). A model that checks its own
        information matrix instead (with :func:`check_collinear_matrix`) may skip
        this pass over ``X``.

    Returns
    -------
    Design

    Raises
    ------
    DataError
        Unknown covariate (lists the available ones), repeated covariate, missing
        values (names the column and count), a covariate with no variation, an
        unknown reference level, a reference given for a numeric covariate, or
        collinear columns (names them).
    """
    where = table.source
    covariates = [covariates] if isinstance(covariates, str) else list(covariates)
    reference = dict(reference or {})
    _check_covariate_names(table, covariates, reference)
    w = table.weight
    coded = _code_covariates(table, covariates, reference, w)
    gram = None
    if order == "F":
        X, means = _fill_columns(coded.blocks, w, table.n_rows, centre)
    elif order == "C":
        X, means, gram = _fill_row_bands(coded.blocks, w, table.n_rows, centre, check_collinear)
    else:
        raise ValueError(f"order must be 'F' or 'C', got {order!r}")
    coded.blocks.clear()  # the indicator columns are in X now
    design = Design(X=X, columns=tuple(coded.columns), labels=tuple(coded.labels),
                    covariates=tuple(covariates), terms=coded.terms, reference=coded.refs,
                    levels=coded.levels, means=means, source=where, is_centred=bool(centre))
    if check_collinear:
        _check_collinear(design, w, gram)
    return design


def _check_covariate_names(table: StartStop, covariates: list[str],
                           reference: Mapping[str, str]) -> None:
    """Each covariate named once and present; references only for covariates."""
    where = table.source
    seen: set[str] = set()
    for c in covariates:
        if c in seen:
            raise DataError(where, f"covariate {c!r} is named twice", "name each covariate once")
        seen.add(c)
        if not table.has(c):
            raise DataError(where, f"there is no column {c!r}",
                            "choose covariates from: "
                            f"{', '.join(table.covariate_names) or '(none)'}")
    for c in reference:
        if c not in covariates:
            raise DataError(where, f"a reference level is given for {c!r}, "
                            "which is not a covariate",
                            f"covariates are: {', '.join(covariates) or '(none)'}")


@dataclass
class _CodedColumns:
    """The columns of a design before they are laid out in ``X``."""

    blocks: list[np.ndarray] = field(default_factory=list)
    columns: list[str] = field(default_factory=list)
    labels: list[str] = field(default_factory=list)
    terms: dict[str, slice] = field(default_factory=dict)
    refs: dict[str, str] = field(default_factory=dict)
    levels: dict[str, tuple[str, ...]] = field(default_factory=dict)


def _code_covariates(table: StartStop, covariates: list[str], reference: Mapping[str, str],
                     w: np.ndarray) -> _CodedColumns:
    """One block (column source) per coefficient, with its names, in covariate order."""
    out = _CodedColumns()
    for c in covariates:
        col = table.column(c)
        start = len(out.columns)
        if isinstance(col, Categorical):
            _code_categorical(table.source, c, col, reference, w, out)
        else:
            _code_numeric(table.source, c, col, reference, out)
        out.terms[c] = slice(start, len(out.columns))
    return out


def _code_categorical(where: str, c: str, col: Categorical, reference: Mapping[str, str],
                      w: np.ndarray, out: _CodedColumns) -> None:
    """Indicator blocks for every present level but the reference."""
    _check_missing(where, c, col.codes < 0)
    counts = np.bincount(col.codes, weights=w, minlength=len(col.levels))
    present = [i for i in range(len(col.levels)) if counts[i] > 0]
    if len(present) < 2:
        only = col.levels[present[0]] if present else "(none)"
        raise DataError(where, f"covariate {c!r} has no variation (every row is {only!r})",
                        f"drop {c!r} from the covariates or fit within one level")
    if c in reference:
        ref = str(reference[c])
        if ref not in col.levels or counts[col.levels.index(ref)] == 0:
            have = ", ".join(col.levels[i] for i in present)
            raise DataError(where, f"reference level {ref!r} of {c!r} does not occur",
                            f"choose one of: {have}")
        ref_code = col.levels.index(ref)
    else:
        # most common by weight; np.argmax returns the first maximum = first in sort order
        ref_code = int(np.argmax(counts))
        ref = col.levels[ref_code]
    others = [i for i in present if i != ref_code]
    out.refs[c] = ref
    out.levels[c] = (ref,) + tuple(col.levels[i] for i in others)
    for i in others:
        out.blocks.append(col.codes == i)
        out.columns.append(f"{c}={col.levels[i]}")
        out.labels.append(f"{c} {col.levels[i]} vs {ref}")


def _code_numeric(where: str, c: str, col: np.ndarray, reference: Mapping[str, str],
                  out: _CodedColumns) -> None:
    """A numeric covariate as one block, as is."""
    if c in reference:
        raise DataError(where, f"a reference level is given for numeric covariate {c!r}",
                        "reference levels apply to categorical covariates only")
    lowest, highest = float(col.min()), float(col.max())  # NaN/inf show up here
    if not (np.isfinite(lowest) and np.isfinite(highest)):
        _check_missing(where, c, ~np.isfinite(col))
    if lowest == highest:
        raise DataError(where, f"covariate {c!r} has no variation "
                        f"(every row is {col[0]:g})",
                        f"drop {c!r} from the covariates")
    out.blocks.append(col)
    out.columns.append(c)
    out.labels.append(f"{c} (per unit)")


def _fill_columns(blocks: list[np.ndarray], w: np.ndarray, n: int,
                  centre: bool) -> tuple[np.ndarray, np.ndarray]:
    """``X`` in Fortran order, a column at a time, and the weighted column means."""
    p = len(blocks)
    wsum = float(w.sum())
    X = np.empty((n, p), dtype=np.float64, order="F")
    for j, block in enumerate(blocks):
        X[:, j] = block
    means = (w @ X) / wsum if p else np.zeros(0)
    if centre:
        X -= means
    return X, means


def _fill_row_bands(blocks: list[np.ndarray], w: np.ndarray, n: int, centre: bool,
                    check_collinear: bool) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    """``X`` in C order, the weighted column means and (when ``check_collinear``) the
    weighted cross-product of the centred columns, summed band by band."""
    p = len(blocks)
    wsum = float(w.sum())
    means = np.array([w[b].sum() if b.dtype == bool else np.dot(w, b) for b in blocks]) \
        / wsum if p else np.zeros(0)
    shift = means if centre else np.zeros(p)
    # a band of rows at a time, so each band stays in cache while its columns land
    # and while it adds to the weighted cross-product for the collinearity check
    X = np.empty((n, p), dtype=np.float64, order="C")
    gram = np.zeros((p, p)) if check_collinear else None
    band = 1 << 14
    Y = np.empty((min(band, n), p))
    sw = np.sqrt(w) if check_collinear else w
    for a in range(0, n, band):
        Xb = X[a:a + band]
        for j, block in enumerate(blocks):
            np.subtract(block[a:a + band], shift[j], out=Xb[:, j])
        if gram is not None:
            Yb = Y[:Xb.shape[0]]
            np.multiply(Xb, sw[a:a + band, None], out=Yb)
            if not centre:
                Yb -= means * sw[a:a + band, None]
            gram += Yb.T @ Yb
    return X, means, gram


def weighted_correlation(X: np.ndarray, w: np.ndarray, means: np.ndarray | float,
                         chunk: int = 1 << 16) -> np.ndarray:
    """Weighted correlation matrix of the columns of ``X`` about ``means``, in row chunks."""
    p = X.shape[1]
    G = np.zeros((p, p))
    for a in range(0, X.shape[0], chunk):
        Xc = X[a:a + chunk] - means
        G += (Xc * w[a:a + chunk, None]).T @ Xc
    sd = np.sqrt(np.diag(G))
    return G / np.outer(sd, sd)


def _check_collinear(design: Design, w: np.ndarray, gram: np.ndarray | None = None) -> None:
    """``gram``: the weighted cross-product of the centred columns, if already summed."""
    if design.n_columns < 2:
        return
    if gram is None:
        gram = weighted_correlation(design.X, w, 0.0 if design.is_centred else design.means)
    check_collinear_matrix(design, gram)


def check_collinear_matrix(design: Design, gram: np.ndarray, within: str = "") -> None:
    """Raise :class:`DataError` naming the columns if the p x p positive semi-definite
    ``gram`` (a weighted cross-product or an information matrix of the columns) is
    singular: an eigenvalue of its correlation form below ``COLLINEAR_TOL * p``.
    ``within`` qualifies the message (e.g. "within the risk sets").
    """
    p = design.n_columns
    if p < 2 and not within:
        return
    sd = np.sqrt(np.maximum(np.diag(gram), 0.0))
    flat = sd <= 1e-12 * max(float(sd.max()), 1e-300)
    if flat.any():
        names = [design.columns[i] for i in np.flatnonzero(flat)]
        raise DataError(design.source, f"covariate column(s) {', '.join(names)} do not vary "
                        f"{within or 'at all'}", "drop them or fit within one level")
    R = gram / np.outer(sd, sd)
    vals, vecs = np.linalg.eigh(R)
    null = vals < COLLINEAR_TOL * p
    if not null.any():
        return
    v = vecs[:, null]
    involved = np.flatnonzero(np.max(np.abs(v), axis=1) > 1e-6)
    names = [design.columns[i] for i in involved]
    raise DataError(design.source,
                    f"covariates are collinear: {', '.join(names)} (one is a linear "
                    f"combination of the others{' ' + within if within else ''}, or a level "
                    "always coincides with another covariate's level)",
                    "drop one of them or merge levels")


__all__ = ["Design", "design_matrix", "weighted_correlation", "check_collinear_matrix",
           "COLLINEAR_TOL"]
