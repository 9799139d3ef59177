"""How complete each attribute of a start-stop table is.

:func:`missing_by_attribute` counts, for every covariate column of the table,
the rows and the customers that carry no value (a blank categorical value, a
NaN or infinite number). It reads the table only; no model is involved, so
``retain check`` can report it before anything is fitted.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from retain.data.table import Categorical, StartStop
from retain.results import Result


def missing_mask(column: np.ndarray | Categorical) -> np.ndarray:
    """True on the rows where a covariate column has no value.

    Categorical: code -1 (a blank or null value). Numeric: NaN or +-infinity
    (a model cannot use either).
    """
    if isinstance(column, Categorical):
        return column.codes < 0
    return ~np.isfinite(column)


@dataclass(frozen=True, eq=False)
class AttributeCompleteness(Result):
    """Missing values per attribute of one table.

    ``rows`` and ``customers`` hold, per attribute (in the table's column
    order), the number of rows with no value and the number of distinct
    customers with at least one such row; ``churn_rows`` the churn rows among
    them (weighted). ``n_rows`` / ``n_customers`` are the table's totals.
    """

    attributes: tuple[str, ...]
    kinds: tuple[str, ...]
    rows: tuple[int, ...]
    customers: tuple[int, ...]
    churn_rows: tuple[float, ...]
    n_rows: int
    n_customers: int
    source: str

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame({
            "attribute": list(self.attributes), "kind": list(self.kinds),
            "rows_missing": list(self.rows),
            "share_of_rows": [r / self.n_rows if self.n_rows else 0.0 for r in self.rows],
            "customers_missing": list(self.customers),
            "churn_rows_missing": list(self.churn_rows)})

    @property
    def incomplete(self) -> tuple[str, ...]:
        """Attributes with at least one missing value."""
        return tuple(a for a, r in zip(self.attributes, self.rows, strict=True) if r)

    def summary(self) -> str:
        if not self.incomplete:
            return f"no missing values in {len(self.attributes)} attribute(s)"
        parts = [f"{a}: {r} of {self.n_rows} rows ({c} customers)"
                 for a, r, c in zip(self.attributes, self.rows, self.customers, strict=True) if r]
        return "missing values -- " + "; ".join(parts)


def missing_by_attribute(table: StartStop) -> AttributeCompleteness:
    """Rows and customers with a missing value, per covariate column of ``table``.

    Parameters
    ----------
    table : StartStop

    Returns
    -------
    AttributeCompleteness
        One entry per covariate column, in the table's order; every column is
        listed, complete ones with zero counts.
    """
    names = tuple(table.covariate_names)
    kinds, rows, customers, churns = [], [], [], []
    codes = table.customer.codes
    n_levels = max(len(table.customer.levels), 1)
    for name in names:
        col = table.column(name)
        kinds.append("categorical" if isinstance(col, Categorical) else "numeric")
        bad = missing_mask(col)
        rows.append(int(bad.sum()))
        who = codes[bad]
        customers.append(int(np.count_nonzero(np.bincount(who[who >= 0], minlength=n_levels))))
        churns.append(float(table.weight[bad & (table.churned == 1)].sum()))
    return AttributeCompleteness(attributes=names, kinds=tuple(kinds), rows=tuple(rows),
                                 customers=tuple(customers), churn_rows=tuple(churns),
                                 n_rows=table.n_rows, n_customers=table.n_customers,
                                 source=table.source)


__all__ = ["AttributeCompleteness", "missing_by_attribute", "missing_mask"]
