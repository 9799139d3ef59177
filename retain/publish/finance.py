"""The finance file pair: one CSV and one JSON with every value figure and its assumptions.

The rows come from :func:`retain.decisions.value.finance_table`; this module
only writes them (dates as "YYYY-MM-DD").
"""

from __future__ import annotations

import datetime as dt
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import pandas as pd

from retain.data.config import as_date
from retain.decisions.value import CAUTION, TIMING, BaseValue, SegmentValues, finance_table
from retain.results import Result, to_jsonable
from retain.units import DAYS_PER_MONTH


@dataclass(frozen=True)
class FinanceExport(Result):
    """The finance file pair of one run: rows, assumptions, caution, paths."""

    csv_path: str
    json_path: str
    table: pd.DataFrame
    assumptions: dict[str, Any] = field(default_factory=dict)
    caution: str = CAUTION

    def to_frame(self) -> pd.DataFrame:
        return self.table.copy()

    def summary(self) -> str:
        return f"Finance export: {len(self.table)} rows written to {self.csv_path}."


def _text(value: Any) -> Any:
    return value.isoformat() if isinstance(value, dt.date) else value


def with_currency(table: pd.DataFrame, currency: str | None) -> pd.DataFrame:
    """The finance rows with a ``currency`` column after ``total_upper`` holding the code
    (the rows as they are when no currency is set: the money is then in the log's price
    units); the money columns stay plain numbers."""
    if not currency:
        return table
    out = table.copy()
    out.insert(out.columns.get_loc("total_upper") + 1, "currency", currency)
    return out


def finance_export(
    out_dir: str | Path,
    *,
    new_customers: SegmentValues | None = None,
    base: BaseValue | None = None,
    as_of: dt.date | str | None = None,
    stem: str = "finance_value",
    currency: str | None = None,
) -> FinanceExport:
    """Write one CSV and one JSON with every value figure and its assumptions.

    One row per (figure, segment), as :func:`retain.decisions.value.finance_table`
    builds them: ``figure`` is ``new customer`` (value of a new customer;
    ``total`` is blank) or ``active base`` (residual value; ``total`` is the
    segment's sum). Every assumption is a column, and the caution text is on
    every row and at the top of the JSON. ``currency`` (the ``[value] currency`` code,
    e.g. "EUR") fills a ``currency`` column after ``total_upper`` and the JSON's
    assumptions; with None there is no such column and the JSON says the money is in the
    log's price units. The numbers stay plain numbers at full precision.
    """
    table = finance_table(new_customers=new_customers, base=base, as_of=as_of)
    table = with_currency(table, currency)
    table["as_of"] = table["as_of"].map(_text)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    csv_path = out / f"{stem}.csv"
    json_path = out / f"{stem}.json"
    table.to_csv(csv_path, index=False, lineterminator="\n")
    warnings = list(new_customers.warnings if new_customers else ()) + \
        list(base.warnings if base else ())
    if new_customers is not None:
        for v in new_customers.values:
            warnings.extend(f"{v.segment}: {w}" for w in v.warnings)
    as_of = as_date(as_of, "finance export: as_of") or \
        (new_customers.as_of if new_customers else None) or (base.as_of if base else None)
    assumptions = {"as_of": _text(as_of), "timing": TIMING,
                   "currency": currency or "in the log's price units",
                   "time_unit": f"month = {DAYS_PER_MONTH} days of tenure"}
    doc = {"caution": CAUTION, "assumptions": assumptions, "warnings": warnings,
           "rows": to_jsonable(table)}
    json_path.write_text(json.dumps(doc, indent=2, allow_nan=False) + "\n", encoding="utf-8")
    return FinanceExport(csv_path=str(csv_path), json_path=str(json_path), table=table,
                         assumptions=assumptions)
