"""What every result shares: conversion to plain dicts, JSON and CSV.

A result is a frozen dataclass that inherits :class:`Result`. Fields may hold
numpy arrays, pandas frames, nested results, tuples and plain scalars;
:meth:`Result.to_dict` turns all of them into JSON-ready Python values.
Subclasses implement :meth:`to_frame` (their main table) and may override
:meth:`summary` (a sentence a person can read).
"""

from __future__ import annotations

import dataclasses
import json
import math
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from retain.errors import ModelError, RetainError

#: the confidence level of intervals when a call names none
DEFAULT_LEVEL = 0.95


def to_jsonable(value: Any) -> Any:
    """Convert numpy / pandas / dataclass values to plain JSON-ready Python values.

    Non-finite floats become ``None`` (JSON has no NaN or infinity).
    """
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        if isinstance(value, Result):
            return value.to_dict()
        return {f.name: to_jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, dict):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [to_jsonable(v) for v in value]
    if isinstance(value, pd.DataFrame):
        return [to_jsonable(r) for r in value.to_dict(orient="records")]
    if isinstance(value, pd.Series):
        return to_jsonable(value.tolist())
    if isinstance(value, np.ndarray):
        return [to_jsonable(v) for v in value.tolist()]
    if isinstance(value, (np.bool_, bool)):
        return bool(value)
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        f = float(value)
        return f if math.isfinite(f) else None
    if isinstance(value, (pd.Timestamp,)):
        return value.isoformat()
    if hasattr(value, "isoformat"):
        return value.isoformat()
    if value is pd.NA or value is pd.NaT:
        return None
    return value


#: the longest one-line repr (characters); a longer summary line is cut with "…"
REPR_WIDTH = 160
#: rows and columns of ``to_frame()`` that ``_repr_html_`` shows
HTML_ROWS, HTML_COLUMNS = 12, 8


def _scalar_text(value: Any) -> str | None:
    """A short text for a scalar field, None for arrays, frames and long values."""
    if isinstance(value, (bool, np.bool_)):
        return str(bool(value))
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,}"
    if isinstance(value, (float, np.floating)):
        return f"{float(value):.4g}"
    if isinstance(value, str) and len(value) <= 40 and "\n" not in value:
        return repr(value)
    return None


@dataclasses.dataclass(frozen=True)
class Result:
    """Base class of all results (frozen dataclasses).

    ``repr()`` is one line (what, how many, key figures: the first line of
    :meth:`summary`), never a dump of arrays or covariance matrices; in a
    notebook ``_repr_html_`` shows that line over the head of :meth:`to_frame`.
    Each subclass gets this ``__repr__`` unless it defines its own (the dataclass
    decorator does not replace a ``__repr__`` already in the class).
    """

    def __init_subclass__(cls, **kwargs: Any) -> None:
        super().__init_subclass__(**kwargs)
        if "__repr__" not in cls.__dict__:
            inherited = next(k.__dict__["__repr__"] for k in cls.__mro__[1:]
                             if "__repr__" in k.__dict__)
            cls.__repr__ = inherited  # type: ignore[method-assign]

    def _repr_line(self) -> str:
        """What, how many and the key figures, in one line (no class name)."""
        try:
            text = self.summary().strip()
        except Exception:  # noqa: BLE001 - a repr must not fail
            text = ""
        first = text.splitlines()[0].strip() if text else ""
        if first and first != type(self).__name__:
            return first
        parts = []
        for f in dataclasses.fields(self):
            if f.name.startswith("_") or not f.repr:
                continue
            shown = _scalar_text(getattr(self, f.name, None))
            if shown is not None:
                parts.append(f"{f.name}={shown}")
            if len(parts) == 6:
                break
        return ", ".join(parts)

    def __repr__(self) -> str:
        line = f"<{type(self).__name__}: {self._repr_line()}>"
        if len(line) > REPR_WIDTH:
            line = line[:REPR_WIDTH - 2] + "…>"
        return line

    def _repr_html_(self) -> str:
        import html

        head = (f"<p><b>{html.escape(type(self).__name__)}</b>: "
                f"{html.escape(self._repr_line())}</p>")
        try:
            frame = self.to_frame()
        except Exception:  # noqa: BLE001 - no table form: the line alone
            return head
        if not isinstance(frame, pd.DataFrame):
            return head
        more = (f"<p>{len(frame):,} rows × {frame.shape[1]} columns; "
                "<code>to_frame()</code> has them all</p>"
                if len(frame) > HTML_ROWS or frame.shape[1] > HTML_COLUMNS else "")
        table = frame.iloc[:HTML_ROWS, :HTML_COLUMNS].to_html(
            index=False, escape=True, float_format=lambda v: f"{v:.4g}", border=0)
        return head + table + more

    def to_dict(self) -> dict[str, Any]:
        return {f.name: to_jsonable(getattr(self, f.name)) for f in dataclasses.fields(self)}

    def to_json(self, path: str | Path | None = None, indent: int = 2) -> str:
        text = json.dumps(self.to_dict(), indent=indent, sort_keys=False, allow_nan=False)
        if path is not None:
            Path(path).write_text(text + "\n", encoding="utf-8")
        return text

    def to_frame(self) -> pd.DataFrame:  # pragma: no cover - overridden
        raise NotImplementedError(f"{type(self).__name__} has no table form")

    def to_csv(self, path: str | Path | None = None) -> str:
        text = self.to_frame().to_csv(index=False, lineterminator="\n")
        if path is not None:
            Path(path).write_text(text, encoding="utf-8")
        return text

    def summary(self) -> str:
        return type(self).__name__


class OneRowFrame:
    """Mixin for a result that is one record: its table form is that record as one row.

    List it before :class:`Result` (``class X(OneRowFrame, Result)``).
    """

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([self.to_dict()])  # type: ignore[attr-defined]


def resolve_level(level: float | None, conf: float | None, where: str,
                  default: float = DEFAULT_LEVEL,
                  error: type[RetainError] = ModelError) -> float:
    """The confidence level of a call that takes ``level=`` and its older alias ``conf=``.

    Gives ``default`` when neither is given; a one-line error when both are given
    or the value is not strictly between 0 and 1 (the message names the argument
    used); ``error`` is the :class:`RetainError` subclass raised.
    """
    if level is not None and conf is not None:
        raise error(where, f"both level={level!r} and conf={conf!r} given",
                    "give only level= (conf= is its older name)")
    name, value = ("conf", conf) if conf is not None else ("level", level)
    if value is None:
        return float(default)
    if isinstance(value, bool) or not isinstance(value, (int, float, np.floating)) \
            or not 0.0 < float(value) < 1.0:
        raise error(where, f"{name} must be between 0 and 1, got {value!r}",
                    f"use e.g. {name}=0.95")
    return float(value)
