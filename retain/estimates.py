r"""What every fitted model shares: its estimates, and its retention predictions.

Two frozen types, the contract between the models and everything that reads
them (pages, value, experiments):

* :class:`Estimates` -- the parameters of a fit on their working scale (the
  unconstrained scale the model was fitted on: log hazard ratio, log time
  ratio, log shape, log scale, log alpha ...), their covariance, and the
  scale a person reads them on. :meth:`Estimates.interval` computes Wald
  intervals at any level on demand: symmetric on the working scale,
  :math:`\hat\theta \pm z_{(1+\ell)/2}\,\mathrm{se}` with :math:`z` the
  standard normal quantile, then mapped to the reading scale (a working scale
  named ``"log X"`` is read as ``X`` through :math:`\exp`; any other is read as
  it is). Wald intervals are the usual ones for these models (Collett 2015,
  *Modelling Survival Data in Medical Research*, 3rd ed., sec. 3.4 and 5.8).
* :class:`RetentionPrediction` -- retention :math:`S(t)` at tenures ``times``
  (days) with pointwise ``lower`` / ``upper`` limits at ``level`` and a flag
  for each time past the data (``extrapolated``). Every model's
  ``predict_retention`` returns it.

One vocabulary: ``level`` (the confidence level, e.g. 0.95), ``lower``,
``upper``. This module is the bottom layer: it imports only numpy, scipy,
pandas and :mod:`retain.results` / :mod:`retain.errors`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy import stats

from retain.errors import ModelError
from retain.results import DEFAULT_LEVEL, Result, resolve_level, to_jsonable
from retain.units import DAYS_PER_MONTH

#: the confidence level used when a caller names none

__all__ = ["DEFAULT_LEVEL", "Estimates", "RetentionPrediction", "check_level", "reading_of",
           "z_value"]


def check_level(level: float, where: str = "interval") -> float:
    """``level`` as a float strictly between 0 and 1, or a one-line error."""
    return resolve_level(level, None, where)


def z_value(level: float) -> float:
    """Two-sided standard normal quantile :math:`z_{(1+\\ell)/2}` (1.959964 for 0.95)."""
    return float(stats.norm.isf((1.0 - check_level(level)) / 2.0))


def reading_of(scale: str) -> str:
    """The scale a person reads a working scale on: ``"log X"`` is read as ``X``."""
    return scale[4:] if scale.startswith("log ") else scale


@dataclass(frozen=True, eq=False)
class Estimates(Result):
    """Point estimates of a fit on their working scale, with covariance and reading scale.

    ``names`` label the parameters (what each compares, e.g. "plan Orchard vs
    Seedling", or "log shape"); ``estimate`` and ``cov`` are on the working
    scale; ``scale[i]`` names parameter i's working scale (``"log hazard
    ratio"``, ``"log time ratio"``, ``"log shape"``, ``"log scale"``,
    ``"log rate"``, ``"log alpha"``...). ``level`` is the level the fit was
    asked for, the default of :meth:`interval`. ``model`` names the fit.
    """

    model: str
    names: tuple[str, ...]
    estimate: np.ndarray
    cov: np.ndarray
    scale: tuple[str, ...]
    level: float = DEFAULT_LEVEL
    covariance: str = "inverse observed information"

    def __post_init__(self) -> None:
        k = len(self.names)
        est = np.asarray(self.estimate, dtype=np.float64).reshape(-1)
        cov = np.asarray(self.cov, dtype=np.float64).reshape(k, k) if k else np.zeros((0, 0))
        if est.shape != (k,) or len(self.scale) != k:
            raise ModelError("estimates", f"{k} names but {est.shape[0]} estimates and "
                             f"{len(self.scale)} scales", "give one of each per parameter")
        object.__setattr__(self, "estimate", est)
        object.__setattr__(self, "cov", cov)
        object.__setattr__(self, "level", check_level(self.level, "estimates"))

    @property
    def se(self) -> np.ndarray:
        """Standard errors on the working scale."""
        return np.sqrt(np.clip(np.diag(self.cov), 0.0, None))

    @property
    def reading(self) -> tuple[str, ...]:
        """The scale each parameter is read on (hazard ratio, time ratio, shape ...)."""
        return tuple(reading_of(s) for s in self.scale)

    @property
    def _log(self) -> np.ndarray:
        return np.array([s.startswith("log ") for s in self.scale], dtype=bool)

    def _read(self, x: np.ndarray) -> np.ndarray:
        return np.where(self._log, np.exp(np.where(self._log, x, 0.0)), x)

    def interval(self, level: float | None = None) -> pd.DataFrame:
        """Wald intervals at ``level`` (default: the fit's) on the reading scale.

        Columns: name, reading, estimate, lower, upper, level.
        """
        lv = self.level if level is None else check_level(level)
        z = z_value(lv)
        se = self.se
        return pd.DataFrame({
            "name": list(self.names), "reading": list(self.reading),
            "estimate": self._read(self.estimate),
            "lower": self._read(self.estimate - z * se),
            "upper": self._read(self.estimate + z * se),
            "level": lv,
        })

    def to_frame(self) -> pd.DataFrame:
        """The intervals at the fit's level, with the working-scale estimate and se."""
        out = self.interval()
        out.insert(2, "scale", list(self.scale))
        out.insert(3, "working_estimate", self.estimate)
        out.insert(4, "se", self.se)
        return out

    def to_dict(self) -> dict[str, Any]:
        return {"model": self.model, "names": list(self.names), "scale": list(self.scale),
                "reading": list(self.reading), "estimate": to_jsonable(self.estimate),
                "se": to_jsonable(self.se), "cov": to_jsonable(self.cov),
                "level": self.level, "covariance": self.covariance}

    def summary(self) -> str:
        iv = self.interval()
        pct = f"{self.level * 100:g} %"
        parts = [f"{r.name}: {r.reading} {r.estimate:.4g} ({pct} interval {r.lower:.4g} to "
                 f"{r.upper:.4g})" for r in iv.itertuples()]
        return f"{self.model}, {len(self.names)} estimates. " + "; ".join(parts)


#: columns of :meth:`RetentionPrediction.to_frame` that are fields as they are
_FIELD_OF_COLUMN = {"time": "times", "days": "times", "retention": "survival",
                    "lower": "lower", "upper": "upper", "extrapolated": "extrapolated",
                    "cumulative_hazard": "cumulative_hazard"}


@dataclass(frozen=True, eq=False)
class RetentionPrediction(Result):
    """Predicted retention S(t) at tenures ``times`` (days) with pointwise limits.

    ``lower`` / ``upper`` are pointwise limits at ``level``; ``interval`` says
    on which scale they are symmetric (``"log-log"``: log(-log S), the usual
    choice that keeps them in (0, 1)). ``extrapolated`` is True at each time
    past the data the model saw (``follow_up`` days for parametric fits; the
    last churn of the stratum for a Cox baseline, which is flat after it).
    The hazard columns are filled by models that have a smooth hazard.

    ``retention`` and ``conf`` are read-only aliases of ``survival`` and
    ``level``; ``prediction["retention"]`` reads a column of :meth:`to_frame`.
    """

    model: str
    times: np.ndarray
    survival: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    level: float
    extrapolated: np.ndarray
    cumulative_hazard: np.ndarray
    follow_up: float
    interval: str = "log-log"
    profile: dict[str, Any] = field(default_factory=dict)
    filled: dict[str, str] = field(default_factory=dict)
    hazard: np.ndarray | None = None
    hazard_lower: np.ndarray | None = None
    hazard_upper: np.ndarray | None = None
    warnings: tuple[str, ...] = ()

    @property
    def retention(self) -> np.ndarray:
        """Alias of :attr:`survival`."""
        return self.survival

    @property
    def conf(self) -> float:
        """Alias of :attr:`level`."""
        return self.level

    def __getitem__(self, column: str) -> pd.Series:
        """One column of :meth:`to_frame` (``prediction["retention"]``), without building it
        whole for the columns that are fields."""
        name = _FIELD_OF_COLUMN.get(column)
        if name is not None:
            return pd.Series(getattr(self, name), name=column)
        return self.to_frame()[column]

    def to_frame(self) -> pd.DataFrame:
        out = pd.DataFrame({
            "time": self.times, "days": self.times, "months": self.times / DAYS_PER_MONTH,
            "cumulative_hazard": self.cumulative_hazard, "retention": self.survival,
            "lower": self.lower, "upper": self.upper, "level": self.level,
            "extrapolated": self.extrapolated,
        })
        if self.hazard is not None:
            out["hazard_per_month"] = self.hazard * DAYS_PER_MONTH
            out["hazard_lower_per_month"] = self.hazard_lower * DAYS_PER_MONTH  # type: ignore
            out["hazard_upper_per_month"] = self.hazard_upper * DAYS_PER_MONTH  # type: ignore
        return out

    def to_dict(self) -> dict[str, Any]:
        out = super().to_dict()
        out["retention"] = out["survival"]  # the names results files have used
        out["conf"] = self.level
        return out

    def summary(self) -> str:
        last = len(self.times) - 1
        if last < 0:
            return f"{self.model} retention: no times"
        text = (f"{self.model} retention at {self.times[last] / DAYS_PER_MONTH:.0f} months: "
                f"{self.survival[last]:.1%} ({self.level:.0%} CI {self.lower[last]:.1%} to "
                f"{self.upper[last]:.1%})")
        return text + ("; " + "; ".join(self.warnings) if self.warnings else "")
