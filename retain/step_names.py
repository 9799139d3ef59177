"""The names of the run's steps: the keys of ``RunResults.outcomes`` and of results.json.

:mod:`retain.run` records each step's outcome under one of these names and the
site's page builders look them up by the same constants, so a step is renamed
in one place. The values are the keys results.json has always carried; keep
them as they are. This module imports nothing from ``retain``.
"""

from __future__ import annotations

BOOK = "book"  # counts that describe the book (customers, active, recent churn)
KM = "km"  # Kaplan–Meier of every spell
CURVES_PREFIX = "curves:"  # Kaplan–Meier by one segment: see curves_by
COHORTS = "cohorts"  # cohort × month retention table
EXPONENTIAL = "fit:exponential"  # exponential model without covariates
WEIBULL = "fit:weibull"  # Weibull model without covariates
COMPARE = "compare"  # exponential / Weibull / piecewise with covariates, by AIC and BIC
WEIBULL_COVARIATES = "weibull"  # Weibull model with the project's covariates
LOGLOG = "loglog"  # log(−log) check of the Weibull shape
COX = "cox"  # Cox proportional-hazards model
COX_PH = "cox:ph"  # its Schoenfeld-residual test of proportional hazards
COX_TENURE = "cox:tenure"  # hazard ratio by tenure band of each term that fails that test
COX_CONCORDANCE = "cox:concordance"  # its concordance (Harrell's C)
COX_CURVE = "cox:curve"  # its retention averaged over customers
DECREMENTS = "decrements"  # decrement table by tenure month
GRADUATION = "graduation"  # Whittaker–Henderson graduation of that table
ACTUAL_VS_EXPECTED = "ae"  # actual against expected churns by segment
DECREMENTS_BANDS = "decrements:bands"  # decrement table on [model] decrement_edges
INCIDENCE = "incidence"  # cumulative incidence by cause
CAUSE_COX = "cause-cox"  # one Cox model per cause
VALUE_ALL = "value:all"  # lifetime value of a new customer
VALUE_SEGMENTS = "value:segments"  # lifetime value of a new customer by segment
VALUE_BASE = "value:base"  # residual value of the active base
VALUE_FINANCE = "value:finance"  # the finance file's rows
EXPERIMENT_PREFIX = "experiment:"  # one declared experiment: see experiment


def curves_by(segment: str) -> str:
    """The step holding the Kaplan–Meier curves by ``segment``."""
    return f"{CURVES_PREFIX}{segment}"


def experiment(name: str) -> str:
    """The step holding the verdict of the experiment declared as ``name``."""
    return f"{EXPERIMENT_PREFIX}{name}"


ALL = (BOOK, KM, COHORTS, EXPONENTIAL, WEIBULL, COMPARE, WEIBULL_COVARIATES, LOGLOG, COX,
       COX_PH, COX_TENURE, COX_CONCORDANCE, COX_CURVE, DECREMENTS, GRADUATION, ACTUAL_VS_EXPECTED,
       DECREMENTS_BANDS, INCIDENCE, CAUSE_COX, VALUE_ALL, VALUE_SEGMENTS, VALUE_BASE,
       VALUE_FINANCE)
PREFIXES = (CURVES_PREFIX, EXPERIMENT_PREFIX)
