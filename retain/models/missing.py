"""What a model does with rows whose covariates have no value.

Every model that takes covariates (Cox, exponential, Weibull, piecewise, the
model comparison, cause-specific Cox, the experiment's adjusted hazard ratio)
passes its covariates and strata through :func:`apply_missing_rule` first.
The rule is the project file's ``[model] missing``:

``"stop"`` (default)
    Refuse to fit when a covariate has a missing value, naming the column and
    the count (and the two other rules as the way out).
``"complete_cases"``
    Fit on the rows where every covariate and stratum column has a value.
    On start-stop data this drops *rows*, not whole customers: a customer with
    one incomplete interval keeps the others, and the gap it leaves is handled
    like delayed entry (the customer is simply not at risk on the dropped
    interval). This is the complete-case analysis of Little & Rubin (2019,
    sec. 3.2), valid when being missing does not depend on the hazard given
    the covariates.
``"missing_level"``
    A categorical covariate gets an explicit level ``"(missing)"`` for its
    blank values, so those rows stay in the fit and the level gets its own
    hazard ratio (the missing-indicator method; Little & Rubin 2019,
    sec. 3.4). A numeric covariate has no such level: its incomplete rows are
    dropped as under ``"complete_cases"``.

Whatever is dropped is counted (:class:`MissingCovariates`) and carried on the
model's result and onto the site.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from retain.data.completeness import missing_mask
from retain.data.config import MISSING_RULES
from retain.data.table import Categorical, StartStop
from retain.errors import DataError, ModelError
from retain.results import Result

MISSING_LEVEL = "(missing)"


@dataclass(frozen=True, eq=False)
class MissingCovariates(Result):
    """Rows a model left out (or recoded) because a covariate had no value.

    Attributes
    ----------
    rule : str
        One of :data:`MISSING_RULES`.
    columns : tuple of str
        The covariate and stratum columns checked.
    rows_in : int
        Rows of the table before the rule.
    rows : int
        Rows dropped.
    customers : int
        Distinct customers with at least one dropped row (on a table without
        customer ids every row counts as its own customer).
    customers_lost : int
        Customers with no row left at all.
    churns : float
        Churns (weighted) on the dropped rows.
    missing_rows : dict column -> int
        Rows with no value, per column, before the rule.
    levels_added : tuple of str
        Categorical columns that got the ``"(missing)"`` level.
    """

    rule: str
    columns: tuple[str, ...]
    rows_in: int
    rows: int = 0
    customers: int = 0
    customers_lost: int = 0
    churns: float = 0.0
    missing_rows: dict[str, int] = field(default_factory=dict)
    levels_added: tuple[str, ...] = ()

    @property
    def any(self) -> bool:
        """Whether the rule changed anything (rows dropped or a level added)."""
        return bool(self.rows or self.levels_added)

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{"rule": self.rule, "rows_dropped": self.rows,
                              "customers_with_dropped_rows": self.customers,
                              "customers_lost": self.customers_lost,
                              "churns_dropped": self.churns,
                              "levels_added": ", ".join(self.levels_added)}])

    def summary(self) -> str:
        """One sentence for the result's warnings and the site."""
        parts = []
        if self.rows:
            which = ", ".join(f"{c} ({n})" for c, n in self.missing_rows.items()
                              if n and c not in self.levels_added)
            parts.append(f"{self.rows} of {self.rows_in} rows left out for a missing value "
                         f"({self.customers} customers, {self.churns:g} churns; by column: "
                         f"{which})")
        if self.levels_added:
            parts.append("missing values kept as level "
                         f"{MISSING_LEVEL!r} of {', '.join(self.levels_added)}")
        return "; ".join(parts) if parts else "no missing covariate values"


def check_missing_rule(rule: str, where: str = "missing") -> str:
    """Return ``rule`` if it is one of :data:`MISSING_RULES`, else raise ModelError."""
    if rule not in MISSING_RULES:
        raise ModelError(where, f"unknown rule for missing covariate values {rule!r}",
                         f"use one of: {', '.join(MISSING_RULES)}")
    return rule


def apply_missing_rule(table: StartStop, columns: Sequence[str], rule: str = "stop",
                       where: str | None = None) -> tuple[StartStop, MissingCovariates, np.ndarray]:
    """Apply a missing-value rule to the covariate and stratum ``columns`` of ``table``.

    Parameters
    ----------
    table : StartStop
    columns : sequence of str
        Covariates and strata of the model (unknown names are left for the
        model's own check to report).
    rule : {"stop", "complete_cases", "missing_level"}
    where : str, optional
        Where to say the problem is (default: the table's source).

    Returns
    -------
    (table, record, kept)
        The table the model should fit on (``table`` itself when nothing
        changed), what was dropped or recoded, and the indices of the kept rows
        in the original table (to subset arrays given beside it, e.g. an offset).

    Raises
    ------
    DataError
        ``rule="stop"`` and a column has a missing value (names the column,
        the count and the other rules); every row dropped.
    ModelError
        Unknown ``rule``.
    """
    check_missing_rule(rule)
    where = where or table.source
    cols = [c for c in dict.fromkeys(columns) if table.has(c)]
    n = table.n_rows
    masks = {c: missing_mask(table.column(c)) for c in cols}
    counts = {c: int(m.sum()) for c, m in masks.items()}
    everything = np.arange(n)
    if not any(counts.values()):
        return table, MissingCovariates(rule, tuple(cols), n, missing_rows=counts), everything
    if rule == "stop":
        c = next(c for c in cols if counts[c])
        raise DataError(where, f"covariate {c!r} is missing on {counts[c]} of {n} rows",
                        'fill the missing values, or set [model] missing = "complete_cases" '
                        '(or "missing_level" for a categorical covariate) to fit without them')
    recoded: dict[str, Categorical] = {}
    drop = np.zeros(n, dtype=bool)
    for c in cols:
        if not counts[c]:
            continue
        col = table.column(c)
        if rule == "missing_level" and isinstance(col, Categorical):
            # keep the levels sorted, as every Categorical's are
            levels = tuple(sorted(col.levels + (MISSING_LEVEL,)))
            remap = np.array([levels.index(lv) for lv in col.levels]
                             + [levels.index(MISSING_LEVEL)], dtype=np.int32)
            recoded[c] = Categorical(remap[col.codes], levels)
        else:
            drop |= masks[c]
    kept = np.flatnonzero(~drop)
    if kept.size == 0:
        raise DataError(where, f"every one of the {n} rows has a missing value in "
                        f"{', '.join(c for c in cols if counts[c])}",
                        "fill the missing values or leave those covariates out")
    out = table.take(kept) if drop.any() else table
    if recoded:
        out = out.take(np.arange(out.n_rows)) if out is table else out
        for c, cat in recoded.items():
            out.covariates[c] = cat.take(kept) if drop.any() else cat
    codes = table.customer.codes
    n_levels = max(len(table.customer.levels), 1)
    lost_rows = codes[drop]
    before = np.bincount(codes[codes >= 0], minlength=n_levels) > 0
    after = np.bincount(codes[kept][codes[kept] >= 0], minlength=n_levels) > 0
    record = MissingCovariates(
        rule=rule, columns=tuple(cols), rows_in=n, rows=int(drop.sum()),
        customers=int(np.count_nonzero(np.bincount(lost_rows[lost_rows >= 0],
                                                   minlength=n_levels))),
        customers_lost=int(np.count_nonzero(before & ~after)),
        churns=float(table.weight[drop & (table.churned == 1)].sum()),
        missing_rows=counts, levels_added=tuple(recoded))
    return out, record, kept


__all__ = ["MISSING_RULES", "MISSING_LEVEL", "MissingCovariates", "apply_missing_rule",
           "check_missing_rule"]
