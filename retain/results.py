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


@dataclasses.dataclass(frozen=True)
class Result:
    """Base class of all results (frozen dataclasses)."""

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
