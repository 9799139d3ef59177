"""The start-stop table: one validated container that every model reads.

Contract (ARCHITECTURE.md): one row per customer, per spell, per interval in which
every covariate is constant. Intervals are (start, stop] in days of tenure: at
risk just after ``start`` through ``stop`` inclusive.

Required columns: ``start``, ``stop``, ``churned``. Recognised optional
columns: ``customer_id`` (defaults to one customer per row), ``spell``
(default 1), ``cause`` (``voluntary`` / ``involuntary`` on churn rows, empty
otherwise), ``weight`` (default 1.0; the count of identical rows after
compression), ``start_date`` (calendar day the spell began, tenure 0). Every
other column is a covariate: numeric columns are kept as float64, text columns
as :class:`Categorical` (integer codes and sorted levels).

The column names and the context's layout live in :mod:`retain.data.contract`. A
table may carry a :class:`~retain.data.contract.TableContext` (the as-of date,
window, time zone and covariate schema it was prepared with), read from and
written to the Parquet file's schema metadata; a table made elsewhere may have
none.

The contract is checked once, here; kernels receive plain numpy arrays.
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from retain.data.contract import CAUSES, CORE_COLUMNS, REQUIRED, TableContext, with_context
from retain.errors import DataError

__all__ = ["CAUSES", "CORE_COLUMNS", "Categorical", "StartStop", "TableContext"]


@dataclass(frozen=True)
class Categorical:
    """A column as integer codes into sorted ``levels`` (code -1 = missing).

    Levels are text, except for customer ids given as integers, which stay
    numbers (sorted numerically).
    """

    codes: np.ndarray
    levels: tuple[Any, ...]

    def __len__(self) -> int:
        return len(self.codes)

    def values(self) -> np.ndarray:
        """Decoded values as an object array (missing -> None)."""
        lv = np.empty(len(self.levels) + 1, dtype=object)
        lv[:-1] = self.levels
        return lv[self.codes]

    def take(self, index: np.ndarray) -> Categorical:
        return Categorical(self.codes[index], self.levels)

    def counts(self, weight: np.ndarray | None = None) -> dict[str, float]:
        ok = self.codes >= 0
        c = np.bincount(self.codes[ok], weights=None if weight is None else weight[ok],
                        minlength=len(self.levels))
        return {lv: float(c[i]) for i, lv in enumerate(self.levels)}

    @property
    def numeric(self) -> bool:
        """Whether the levels are numbers (integer customer ids)."""
        return bool(self.levels) and not isinstance(self.levels[0], str)

    @classmethod
    def from_values(cls, values: Any) -> Categorical:
        arr = pa.array(values) if not isinstance(values, (pa.Array, pa.ChunkedArray)) else values
        if isinstance(arr, pa.ChunkedArray):
            arr = arr.combine_chunks()
        if pa.types.is_dictionary(arr.type):
            arr = arr.cast(arr.type.value_type)
        if pa.types.is_integer(arr.type):
            return cls.from_numbers(arr.to_numpy(zero_copy_only=False) if arr.null_count == 0
                                    else pc.cast(arr, pa.float64()).fill_null(np.nan).to_numpy())
        if not (pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type)):
            arr = pc.cast(arr, pa.string())
        # distinct values in Arrow (no Python-level sort): sorted by UTF-8 bytes, which
        # is code-point order, the order Python's sorted() gives
        encoded = pc.dictionary_encode(arr)
        dictionary = encoded.dictionary
        if len(dictionary) == 0:
            return cls(np.full(len(arr), -1, dtype=np.int32), ())
        raw = encoded.indices.fill_null(-1).to_numpy(zero_copy_only=False)
        if len(dictionary) < 2 or pc.all(pc.less(dictionary[:-1], dictionary[1:])).as_py():
            # first-seen order is already sorted (a table ordered by customer): no sort
            return cls(raw.astype(np.int32, copy=False), tuple(dictionary.to_pylist()))
        order = pc.sort_indices(dictionary).to_numpy()
        levels = tuple(dictionary.take(pa.array(order)).to_pylist())
        return cls(_ranked_codes(raw, order), levels)

    @classmethod
    def from_numbers(cls, values: np.ndarray) -> Categorical:
        """Codes for numbers (ids): one hash pass, levels sorted numerically; NaN is missing."""
        codes, uniques = pd.factorize(np.asarray(values), sort=True, use_na_sentinel=True)
        if uniques.dtype.kind == "f" and np.all(uniques == np.rint(uniques)) \
                and (len(uniques) == 0 or np.abs(uniques).max() < 2**53):
            uniques = uniques.astype(np.int64)  # float ids that are whole numbers (NaN made float)
        return cls(codes.astype(np.int32, copy=False), tuple(uniques.tolist()))

    @classmethod
    def from_sorted(cls, values: np.ndarray) -> Categorical | None:
        """Codes by runs, when equal values sit together and the runs ascend.

        A table ordered by customer (as prepare writes it) needs no hashing of its
        ids: one comparison of neighbours finds the runs. None when the values are
        not so ordered, or any is missing.
        """
        values = np.asarray(values)
        if len(values) < 2:
            return None
        change = values[1:] != values[:-1]
        starts = np.flatnonzero(np.r_[True, change])
        levels = values[starts]
        if values.dtype == object:  # text only: None or NaN makes it "mixed"
            if pd.api.types.infer_dtype(levels, skipna=False) != "string":
                return None
        elif levels.dtype.kind == "f" and np.isnan(levels).any():
            return None
        if not bool(np.all(levels[1:] > levels[:-1])):
            return None
        codes = np.empty(len(values), dtype=np.int32)
        codes[0] = 0
        np.cumsum(change, out=codes[1:])
        return cls(codes, tuple(levels.tolist()))

    @classmethod
    def from_series(cls, series: pd.Series) -> Categorical:
        """Codes for a pandas column of text: factorised once, the distinct values sorted.

        Arrow-backed strings are encoded in Arrow; a pandas categorical keeps its
        codes (unused categories dropped); other text is hashed once by
        :func:`pandas.factorize` and only the distinct values are sorted.
        """
        dtype = series.dtype
        if isinstance(dtype, pd.CategoricalDtype):
            cats = np.asarray(dtype.categories, dtype=object)
            if not all(type(c) is str for c in cats):
                return cls.from_values(pa.array(series.to_numpy(dtype=object), from_pandas=True))
            raw = series.cat.codes.to_numpy().astype(np.int64)
            used = np.flatnonzero(np.bincount(raw[raw >= 0], minlength=len(cats)))
            order = used[sorted(range(len(used)), key=lambda i: cats[used[i]])]
            return cls(_ranked_codes(raw, order, len(cats)), tuple(cats[order].tolist()))
        if isinstance(dtype, pd.StringDtype) and dtype.storage.startswith("pyarrow"):
            return cls.from_values(pa.array(series.array))
        if series.dtype == object:
            raw, uniques = _factorize_objects(series.to_numpy())
        else:
            raw, uniques = pd.factorize(series, sort=False, use_na_sentinel=True)
        return cls.from_factorized(raw, uniques, series)

    @classmethod
    def from_factorized(cls, raw: np.ndarray, uniques: Any, series: pd.Series) -> Categorical:
        """Codes from :func:`pandas.factorize`'s ``(raw, uniques)`` of ``series``: the
        distinct values sorted once (the rows are not hashed again)."""
        uniques = np.asarray(uniques, dtype=object)
        if len(uniques) and pd.api.types.infer_dtype(uniques, skipna=False) != "string":
            # mixed or non-text values (dates, numbers in an object column): Arrow's rule
            return cls.from_values(pa.array(series.to_numpy(dtype=object), from_pandas=True))
        if len(uniques) < 2 or bool(np.all(uniques[:-1] < uniques[1:])):
            order = np.arange(len(uniques))  # already in order (a table sorted by customer)
        elif len(uniques) > 256:
            order = pc.sort_indices(pa.array(uniques, type=pa.string())).to_numpy()
        else:
            order = np.array(sorted(range(len(uniques)), key=uniques.__getitem__), dtype=np.int64)
        return cls(_ranked_codes(raw, order), tuple(uniques[order].tolist()))


def _ranked_codes(raw: np.ndarray, order: np.ndarray, n_values: int | None = None
                  ) -> np.ndarray:
    """Codes into sorted levels, by one lookup.

    ``raw`` holds codes into ``n_values`` distinct values in any order (-1 missing);
    ``order`` lists the values kept, in level order (default: all of them).
    """
    n_values = len(order) if n_values is None else n_values
    rank = np.full(n_values + 1, -1, dtype=np.int32)  # the last entry answers raw == -1
    rank[np.asarray(order, dtype=np.int64)] = np.arange(len(order), dtype=np.int32)
    return rank[raw]


Column = "np.ndarray | Categorical"


def _row_order(customer: np.ndarray, spell: np.ndarray, start: np.ndarray) -> np.ndarray | None:
    """Row order by (customer, spell, start); None when the rows are in it already
    (tables from prepare are)."""
    dc, ds = np.diff(customer), np.diff(spell)
    ordered = (dc > 0) | ((dc == 0) & ((ds > 0) | ((ds == 0) & (np.diff(start) >= 0))))
    if ordered.all():
        return None
    return np.lexsort((start, spell, customer))


def _as_float(name: str, values: Any) -> np.ndarray:
    try:
        arr = np.asarray(values, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise DataError(f"column {name!r}", "must be numeric",
                        "check the start-stop table") from exc
    return arr


class StartStop:
    """A start-stop survival table that meets the contract in ARCHITECTURE.md.

    Build it with :meth:`from_frame`, :meth:`from_arrow`, :meth:`from_parquet`
    or :meth:`from_duckdb`; the constructor takes plain arrays.

    Parameters
    ----------
    start, stop : array of float
        Tenure in days; ``start < stop``; at risk on (start, stop].
    churned : array of 0/1
        1 only on the last row of a spell that ended.
    weight : array of float, optional
        Case weights, finite and > 0 (default 1).
    customer_id : array of str, optional
        Identifies the customer (cluster for robust errors). Default: one per row.
    spell : array of int, optional
        Spell number within customer (default 1).
    cause : array of str, optional
        ``voluntary`` / ``involuntary`` on churn rows, empty elsewhere.
    start_date : array of datetime64[D], optional
        Calendar day each row's spell began (tenure 0).
    covariates : mapping name -> array
        Numeric arrays are stored as float64, text arrays as :class:`Categorical`.
    source : str
        Where the table came from, for messages.
    context : TableContext, optional
        The as-of date, window, time zone and covariate schema the table was
        prepared with (:mod:`retain.data.contract`); None for a table that
        carries none. Kept by slicing, stored in the Parquet file's metadata.
    validate : bool
        Check the contract (default True). Only internal callers that slice an
        already-valid table pass False.
    """

    def __init__(
        self,
        start: Any,
        stop: Any,
        churned: Any,
        *,
        weight: Any = None,
        customer_id: Any = None,
        spell: Any = None,
        cause: Any = None,
        start_date: Any = None,
        covariates: Mapping[str, Any] | None = None,
        source: str = "start-stop table",
        context: TableContext | None = None,
        validate: bool = True,
    ) -> None:
        self.source = source
        self._context = context
        self.start = _as_float("start", start)
        self.stop = _as_float("stop", stop)
        n = self.start.shape[0]
        churned_f = _as_float("churned", churned)
        self.weight = np.ones(n) if weight is None else _as_float("weight", weight)
        self.has_customers = customer_id is not None
        if customer_id is None:
            self.customer = Categorical(np.arange(n, dtype=np.int32),
                                        tuple(str(i) for i in range(n)))
        elif isinstance(customer_id, Categorical):
            self.customer = customer_id
        else:
            self.customer = Categorical.from_values(customer_id)
        self.spell = (np.ones(n, dtype=np.int64) if spell is None
                      else np.asarray(spell, dtype=np.int64))
        if cause is None:
            cause = Categorical(np.full(n, -1, dtype=np.int32), ())
        elif not isinstance(cause, Categorical):
            cause = Categorical.from_values(cause)
        # empty string counts as "no cause"
        if "" in cause.levels:
            empty = cause.levels.index("")
            levels = tuple(lv for lv in cause.levels if lv != "")
            remap = np.array([levels.index(lv) if lv != "" else -1 for lv in cause.levels] + [-1],
                             dtype=np.int32)
            cause = Categorical(remap[cause.codes], levels)
            del empty
        self.cause = cause
        self.start_date = (None if start_date is None
                           else np.asarray(start_date, dtype="datetime64[D]"))
        self.covariates: dict[str, np.ndarray | Categorical] = {}
        for name, values in (covariates or {}).items():
            self.covariates[name] = _coerce_covariate(name, values)
        if validate:
            self._check(churned_f, n)
        self.churned = churned_f.astype(np.int8)

    # ------------------------------------------------------------------ checks
    def _check(self, churned: np.ndarray, n: int) -> None:
        where = self.source
        for name, arr in (("stop", self.stop), ("churned", churned), ("weight", self.weight),
                          ("spell", self.spell), ("customer_id", self.customer.codes),
                          ("cause", self.cause.codes)):
            if arr.shape != (n,):
                raise DataError(where, f"column {name!r} has {arr.shape[0]} rows, start has {n}",
                                "pass columns of equal length")
        for name, col in self.covariates.items():
            if len(col) != n:
                raise DataError(where, f"covariate {name!r} has {len(col)} rows, start has {n}",
                                "pass columns of equal length")
        if self.start_date is not None and self.start_date.shape != (n,):
            raise DataError(where, "column 'start_date' has the wrong length", "pass equal lengths")
        if n == 0:
            raise DataError(where, "the table has no rows", "check the filter or the input file")
        for name, arr in (("start", self.start), ("stop", self.stop)):
            bad = ~np.isfinite(arr)
            if bad.any():
                raise DataError(where, f"column {name!r} is missing or not finite on "
                                f"{int(bad.sum())} rows "
                                f"(first: {self._who(np.flatnonzero(bad)[0])})",
                                "every row needs a finite start and stop")
        bad = self.start >= self.stop
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise DataError(where, f"start must be < stop; {self._who(i)} has start "
                            f"{self.start[i]:g} and stop {self.stop[i]:g} "
                            f"({int(bad.sum())} such rows)", "fix or drop those rows")
        bad = self.start < 0
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise DataError(where, f"start must be >= 0 (tenure in days); {self._who(i)} has "
                            f"start {self.start[i]:g}", "tenure counts from the spell's start day")
        bad = (churned != 0.0) & (churned != 1.0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise DataError(where, f"churned must be 0 or 1; {self._who(i)} has {churned[i]!r}",
                            "code churn as 1 and censoring as 0")
        bad = ~(np.isfinite(self.weight) & (self.weight > 0))
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise DataError(where, f"weights must be finite and > 0; {self._who(i)} has weight "
                            f"{self.weight[i]!r} ({int(bad.sum())} such rows)",
                            "drop zero-weight rows; negative weights have no meaning")
        unknown = [lv for lv in self.cause.levels if lv not in CAUSES]
        if unknown:
            raise DataError(where, f"cause must be one of {', '.join(CAUSES)} or empty; found "
                            f"{unknown[0]!r}", "map reasons onto voluntary / involuntary")
        bad = (self.cause.codes >= 0) & (churned == 0)
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise DataError(where, f"a cause is set on a row that did not churn ({self._who(i)})",
                            "cause belongs on churn rows only")
        # within (customer, spell): ordered, non-overlapping, churn only on the last row
        order = _row_order(self.customer.codes, self.spell, self.start)
        in_order = order is None  # tables from prepare: no gathers below
        if in_order:
            order = np.arange(n)
        c = self.customer.codes if in_order else self.customer.codes[order]
        s = self.spell if in_order else self.spell[order]
        same = (c[1:] == c[:-1]) & (s[1:] == s[:-1])
        if same.any():
            start = self.start if in_order else self.start[order]
            stop = self.stop if in_order else self.stop[order]
            overlap = same & (start[1:] < stop[:-1])
            if overlap.any():
                i = int(order[1:][np.flatnonzero(overlap)[0]])
                raise DataError(where, f"intervals overlap within a spell: {self._who(i)} has a "
                                f"row starting at {self.start[i]:g} before the previous row stops",
                                "times must increase within a spell; rebuild the intervals")
            early = same & ((churned if in_order else churned[order])[:-1] == 1)
            if early.any():
                i = int(order[:-1][np.flatnonzero(early)[0]])
                raise DataError(where, f"churned = 1 on a row that is not the last of its spell "
                                f"({self._who(i)})", "churn ends a spell")

    def _who(self, i: int) -> str:
        cid = self.customer.levels[self.customer.codes[i]] if self.customer.codes[i] >= 0 else "?"
        return f"customer {cid!r} spell {int(self.spell[i])} (row {i})"

    # ------------------------------------------------------------------ facts
    @property
    def context(self) -> TableContext | None:
        """The as-of date, window, time zone and covariate schema the table was
        prepared with; None when it carries none (a table made elsewhere)."""
        return self._context

    @property
    def last_day(self) -> float | None:
        """The as-of date as a calendar day number (days since 1970-01-01, the scale
        of ``start_date``): the day open spells are censored on, where a censored
        row's ``start_date + stop`` lies.

        From the context when it holds the as-of date; else the last day in the
        data, ``max(start_date + stop)``; None when the table has neither. A
        spell's tenure on that day is ``last_day - start_day``.
        """
        if self._context is not None and self._context.as_of_day is not None:
            return self._context.as_of_day
        if self.start_date is None:
            return None
        return float(np.max(self.start_date.astype(np.int64) + self.stop))

    @property
    def last_day_basis(self) -> str:
        """Where :attr:`last_day` comes from, in words (for results and pages)."""
        if self._context is not None and self._context.as_of is not None:
            return f"as-of date {self._context.as_of.isoformat()} (the table's context)"
        if self.start_date is None:
            return "none (no as-of date and no start_date)"
        return "last day in the data (start_date + stop)"

    @property
    def n_rows(self) -> int:
        return int(self.start.shape[0])

    @property
    def n_customers(self) -> int:
        codes = self.customer.codes
        if codes.size == 0:
            return 0
        seen = np.bincount(codes[codes >= 0], minlength=len(self.customer.levels))
        return int(np.count_nonzero(seen))

    @property
    def n_events(self) -> float:
        """Weighted number of churns."""
        return float(np.dot(self.weight, self.churned))

    @property
    def covariate_names(self) -> list[str]:
        return list(self.covariates)

    def __len__(self) -> int:
        return self.n_rows

    def __repr__(self) -> str:
        return (f"StartStop({self.n_rows} rows, {self.n_customers} customers, "
                f"{self.n_events:g} churns, covariates={self.covariate_names})")

    def has(self, name: str) -> bool:
        return name in self.covariates

    def column(self, name: str) -> np.ndarray | Categorical:
        """A covariate: float64 array for numeric, :class:`Categorical` for text."""
        if name not in self.covariates:
            raise DataError(self.source, f"there is no column {name!r}",
                            f"choose one of: {', '.join(self.covariate_names) or '(none)'}")
        return self.covariates[name]

    def is_categorical(self, name: str) -> bool:
        return isinstance(self.column(name), Categorical)

    def numeric(self, name: str) -> np.ndarray:
        col = self.column(name)
        if isinstance(col, Categorical):
            raise DataError(self.source, f"column {name!r} is text, a number is needed",
                            "declare it numeric or pick a numeric column")
        return col

    @property
    def cluster(self) -> np.ndarray:
        """Integer customer codes (clusters for robust errors).

        When the table has no ``customer_id`` (e.g. a compressed table) every row
        is its own cluster and :attr:`has_customers` is False: robust errors
        clustered by customer are then not available.
        """
        return self.customer.codes

    @property
    def last_of_spell(self) -> np.ndarray:
        """Boolean mask: the row is the last (largest stop) of its (customer, spell)."""
        order = np.lexsort((self.stop, self.spell, self.customer.codes))
        c = self.customer.codes[order]
        s = self.spell[order]
        last_sorted = np.ones(self.n_rows, dtype=bool)
        last_sorted[:-1] = (c[1:] != c[:-1]) | (s[1:] != s[:-1])
        out = np.empty(self.n_rows, dtype=bool)
        out[order] = last_sorted
        return out

    # ------------------------------------------------------------------ slicing
    def take(self, index: np.ndarray) -> StartStop:
        """Rows by integer index or boolean mask (no re-validation needed)."""
        index = np.asarray(index)
        if index.dtype == bool:
            index = np.flatnonzero(index)
        new = object.__new__(StartStop)
        new.source = self.source
        new._context = self._context
        new.has_customers = self.has_customers
        new.start = self.start[index]
        new.stop = self.stop[index]
        new.churned = self.churned[index]
        new.weight = self.weight[index]
        new.customer = self.customer.take(index)
        new.spell = self.spell[index]
        new.cause = self.cause.take(index)
        new.start_date = None if self.start_date is None else self.start_date[index]
        new.covariates = {k: (v.take(index) if isinstance(v, Categorical) else v[index])
                          for k, v in self.covariates.items()}
        return new

    def groups(self, by: str) -> Iterator[tuple[str, StartStop]]:
        """(level, sub-table) for each level of a categorical column, in level order.

        Numeric columns are grouped by their distinct values (formatted with ``g``).
        Rows with a missing value are left out.
        """
        col = self.column(by)
        if isinstance(col, Categorical):
            for code, level in enumerate(col.levels):
                mask = col.codes == code
                if mask.any():
                    yield level, self.take(mask)
        else:
            for value in np.unique(col[np.isfinite(col)]):
                yield f"{value:g}", self.take(col == value)

    def with_context(self, context: TableContext | None) -> StartStop:
        """A copy that carries ``context`` (None: no context)."""
        new = self.take(np.arange(self.n_rows))
        new._context = context
        return new

    def with_columns(self, **columns: Any) -> StartStop:
        """A copy with covariates added or replaced."""
        new = self.take(np.arange(self.n_rows))
        for name, values in columns.items():
            new.covariates[name] = _coerce_covariate(name, values)
        return new

    def with_weight(self, weight: Any) -> StartStop:
        new = self.take(np.arange(self.n_rows))
        new.weight = _as_float("weight", weight)
        return new

    def for_cause(self, cause: str) -> StartStop:
        """A copy in which only churns of ``cause`` count; other causes are censored.

        The table for a cause-specific hazard model (competing risks).
        """
        if cause not in CAUSES:
            raise DataError(self.source, f"unknown cause {cause!r}",
                            f"choose one of: {', '.join(CAUSES)}")
        new = self.take(np.arange(self.n_rows))
        code = self.cause.levels.index(cause) if cause in self.cause.levels else -2
        hit = (self.cause.codes == code) & (self.churned == 1)
        new.churned = hit.astype(np.int8)
        new.cause = Categorical(np.where(hit, 0, -1).astype(np.int32), (cause,))
        return new

    def expanded(self) -> StartStop:
        """Rows repeated by their (whole-number) weight, each with weight 1.

        The inverse of compression; used to check that compressed and full
        tables give the same results.
        """
        w = np.rint(self.weight)
        if not np.allclose(w, self.weight):
            raise DataError(self.source, "weights are not whole numbers", "cannot expand")
        new = self.take(np.repeat(np.arange(self.n_rows), w.astype(np.int64)))
        new.weight = np.ones(new.n_rows)
        return new

    # ------------------------------------------------------------------ conversion
    def to_arrow(self) -> pa.Table:
        if self.customer.numeric:
            ids = np.asarray(self.customer.levels)[np.maximum(self.customer.codes, 0)]
            customer_id = pa.array(ids, mask=self.customer.codes < 0)
        else:
            customer_id = pa.array(self.customer.values(), type=pa.string())
        cols: dict[str, Any] = {
            "customer_id": customer_id,
            "spell": pa.array(self.spell, type=pa.int64()),
            "start": pa.array(self.start, type=pa.float64()),
            "stop": pa.array(self.stop, type=pa.float64()),
            "churned": pa.array(self.churned.astype(np.int32), type=pa.int32()),
            "cause": pa.array(np.where(self.cause.codes >= 0, self.cause.values(), ""),
                              type=pa.string()),
            "weight": pa.array(self.weight, type=pa.float64()),
        }
        if self.start_date is not None:
            cols["start_date"] = pa.array(self.start_date, type=pa.date32())
        for name, col in self.covariates.items():
            if isinstance(col, Categorical):
                cols[name] = pa.array(col.values(), type=pa.string())
            else:
                cols[name] = pa.array(col, type=pa.float64())
        return with_context(pa.table(cols), self._context)

    def to_frame(self) -> pd.DataFrame:
        return self.to_arrow().to_pandas()

    def to_parquet(self, path: str | Path) -> Path:
        path = Path(path)
        pq.write_table(self.to_arrow(), path)
        return path

    @classmethod
    def from_arrow(cls, table: pa.Table, source: str = "start-stop table",
                   context: TableContext | None = None) -> StartStop:
        """From an Arrow table; the context is ``context`` if given, else the one in
        the schema's metadata (:data:`retain.data.contract.CONTEXT_KEY`), else None."""
        names = table.column_names
        if context is None:
            context = TableContext.from_metadata(table.schema.metadata, source)
        for req in REQUIRED:
            if req not in names:
                raise DataError(source, f"required column {req!r} is missing",
                                "a start-stop table needs start, stop and churned "
                                f"(found: {', '.join(names)})")

        def num(name: str) -> np.ndarray:
            col = table.column(name)
            if col.null_count:
                col = pc.cast(col, pa.float64()).fill_null(np.nan)
            try:
                arr = col.to_numpy().astype(np.float64, copy=False)
                # an Arrow buffer seen through numpy is read-only: models may write
                return arr if arr.flags.writeable else arr.copy()
            except (pa.ArrowInvalid, ValueError) as exc:
                raise DataError(source, f"column {name!r} must be numeric",
                                "check its type") from exc

        kwargs: dict[str, Any] = {
            "start": num("start"), "stop": num("stop"), "churned": num("churned"),
        }
        if "weight" in names:
            kwargs["weight"] = num("weight")
        if "customer_id" in names:
            kwargs["customer_id"] = Categorical.from_values(table.column("customer_id"))
        if "spell" in names:
            kwargs["spell"] = num("spell").astype(np.int64)
        if "cause" in names:
            kwargs["cause"] = Categorical.from_values(pc.fill_null(
                pc.cast(table.column("cause"), pa.string()), ""))
        if "start_date" in names:
            kwargs["start_date"] = pc.cast(table.column("start_date"), pa.date32()).to_numpy()
        covs: dict[str, Any] = {}
        for name in names:
            if name in CORE_COLUMNS:
                continue
            col = table.column(name)
            t = col.type
            if pa.types.is_dictionary(t):
                t = t.value_type
            if pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_boolean(t) \
                    or pa.types.is_decimal(t):
                covs[name] = num(name) if not pa.types.is_boolean(t) else \
                    pc.cast(col, pa.float64()).fill_null(np.nan).to_numpy()
            else:
                covs[name] = Categorical.from_values(col)
        return cls(**kwargs, covariates=covs, source=source, context=context)

    @classmethod
    def from_frame(cls, frame: pd.DataFrame, source: str = "start-stop table",
                   context: TableContext | None = None) -> StartStop:
        """From a pandas DataFrame, column by column (no detour through an Arrow table).

        Numbers (numpy or nullable dtypes, booleans) are copied once as float64;
        text is factorised once (:meth:`Categorical.from_series`); integer customer
        ids stay numbers. Same columns and rules as :meth:`from_arrow`.
        """
        names = [str(c) for c in frame.columns]
        if len(set(names)) != len(names):
            dup = sorted({n for n in names if names.count(n) > 1})
            raise DataError(source, f"column names repeat: {', '.join(dup)}",
                            "give every column its own name")
        for req in REQUIRED:
            if req not in names:
                raise DataError(source, f"required column {req!r} is missing",
                                "a start-stop table needs start, stop and churned "
                                f"(found: {', '.join(names)})")
        columns = {name: frame.iloc[:, i] for i, name in enumerate(names)}

        def num(name: str) -> np.ndarray:
            return _frame_numbers(columns[name], name, source)

        kwargs: dict[str, Any] = {
            "start": num("start"), "stop": num("stop"), "churned": num("churned"),
        }
        if "weight" in names:
            kwargs["weight"] = num("weight")
        if "customer_id" in names:
            ids = columns["customer_id"]
            numeric = _is_number_column(ids) and ids.dtype.kind != "b"
            if numeric and ids.dtype.kind in "iu":
                by_runs = Categorical.from_sorted(ids.to_numpy())
            elif ids.dtype == object:
                by_runs = Categorical.from_sorted(ids.to_numpy())
            else:
                by_runs = None
            if by_runs is None:
                by_runs = (Categorical.from_numbers(num("customer_id")) if numeric
                           else _frame_column(ids, "customer_id", source, numbers=False))
            kwargs["customer_id"] = by_runs
        if "spell" in names:
            kwargs["spell"] = num("spell").astype(np.int64)
        if "cause" in names:
            kwargs["cause"] = _frame_column(columns["cause"], "cause", source, numbers=False)
        if "start_date" in names:
            kwargs["start_date"] = pc.cast(pa.array(columns["start_date"], from_pandas=True),
                                           pa.date32()).to_numpy(zero_copy_only=False)
        covs: dict[str, Any] = {}
        for name in names:
            if name in CORE_COLUMNS:
                continue
            covs[name] = _frame_column(columns[name], name, source)
        return cls(**kwargs, covariates=covs, source=source, context=context)

    @classmethod
    def from_parquet(cls, path: str | Path) -> StartStop:
        path = Path(path)
        if not path.exists():
            raise DataError(str(path), "file not found",
                            "run `retain prepare` first or fix the path")
        return cls.from_arrow(pq.read_table(path), source=str(path))

    @classmethod
    def from_duckdb(cls, relation: Any, source: str = "DuckDB relation") -> StartStop:
        """From a DuckDB relation (``con.sql(...)`` or ``con.table(...)``)."""
        return cls.from_arrow(relation.to_arrow_table() if hasattr(relation, "to_arrow_table")
                              else relation.arrow(), source=source)


def _is_number_column(series: pd.Series) -> bool:
    """Numbers or booleans (numpy or nullable pandas dtypes, numeric categoricals)."""
    dtype = series.dtype
    if isinstance(dtype, pd.CategoricalDtype):
        return pd.api.types.is_numeric_dtype(dtype.categories.dtype)
    return pd.api.types.is_numeric_dtype(dtype) or pd.api.types.is_bool_dtype(dtype)


#: rows looked at to decide whether a column shares one object per distinct value
_SAMPLE = 4096


def _factorize_objects(values: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``pandas.factorize(values)`` for an object array, hashing object identities first.

    The same object is the same value, so rows are first coded by the address of
    their object (one machine word, read from the array's buffer; no text is
    hashed) and only the distinct objects are then coded by value. Text that
    pandas or Arrow read shares one object per distinct value, so a million rows
    of a few levels come down to a few objects. When a sample shows many objects
    (an id column) or many more objects than values (text built row by row), the
    values are hashed directly.
    Same codes and uniques as :func:`pandas.factorize` (missing -> -1).
    """
    values = np.ascontiguousarray(values, dtype=object)  # holds every object while we work
    n = len(values)
    if n > _SAMPLE:
        try:
            address = np.frombuffer(values, dtype=np.intp)
        except (TypeError, ValueError, BufferError):  # no buffer of addresses here
            address = None
        if address is not None and address.shape == (n,):
            head = slice(0, _SAMPLE)
            objects = len(pd.unique(address[head]))
            if objects <= min(_SAMPLE // 8, 64 + 2 * len(pd.unique(values[head]))):
                by_object, _ = pd.factorize(address, sort=False)
                one_row = np.empty(int(by_object.max()) + 1, dtype=np.intp)
                one_row[by_object] = np.arange(n)  # any row of each object will do
                codes, uniques = pd.factorize(values[one_row], sort=False,
                                              use_na_sentinel=True)
                return codes[by_object], uniques
    return pd.factorize(values, sort=False, use_na_sentinel=True)


def _frame_column(series: pd.Series, name: str, source: str, *, numbers: bool = True
                  ) -> np.ndarray | Categorical:
    """One column of a DataFrame: float64 for numbers, else a :class:`Categorical`.

    The Arrow route's rule: an object column whose values are all numbers or
    booleans is numeric (with ``numbers=True``); text is factorised once.
    """
    if numbers and _is_number_column(series):
        return _frame_numbers(series, name, source)
    try:
        if series.dtype != object:
            return Categorical.from_series(series)
        raw, uniques = _factorize_objects(series.to_numpy())
        kind = pd.api.types.infer_dtype(uniques, skipna=True) if len(uniques) else "string"
        if numbers and kind in ("integer", "floating", "mixed-integer-float", "boolean",
                                "decimal"):
            return np.append(np.asarray(uniques, dtype=np.float64), np.nan)[raw]
        return Categorical.from_factorized(raw, uniques, series)
    except (pa.ArrowInvalid, pa.ArrowTypeError) as exc:
        raise DataError(source, f"column {name!r} mixes kinds of values (text and numbers)",
                        "give every value of the column the same kind") from exc


def _frame_numbers(series: pd.Series, name: str, source: str) -> np.ndarray:
    """A column as a new float64 array (missing -> NaN): models may write to it."""
    try:
        if isinstance(series.dtype, pd.CategoricalDtype):
            series = series.astype(series.dtype.categories.dtype if not
                                   series.isna().any() else "float64")
        return series.to_numpy(dtype=np.float64, na_value=np.nan, copy=True)
    except (TypeError, ValueError) as exc:
        raise DataError(source, f"column {name!r} must be numeric", "check its type") from exc


def _coerce_covariate(name: str, values: Any) -> np.ndarray | Categorical:
    if isinstance(values, Categorical):
        return values
    if isinstance(values, (pa.Array, pa.ChunkedArray)):
        t = values.type
        if pa.types.is_integer(t) or pa.types.is_floating(t):
            return pc.cast(values, pa.float64()).fill_null(np.nan).to_numpy()
        return Categorical.from_values(values)
    arr = np.asarray(values)
    if arr.dtype.kind in "biuf":
        return arr.astype(np.float64, copy=False)
    return Categorical.from_values(pa.array(arr.tolist(), type=pa.string()) if arr.dtype.kind == "O"
                                   else pa.array(arr.astype(str)))
