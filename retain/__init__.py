"""retain: survival analysis of a subscription business's event log.

The public names live here; everything else is private by default. They are
imported on first use (PEP 562), so ``import retain`` and the command line start
without loading scipy, pandas or DuckDB until a name that needs them is used.
"""

from __future__ import annotations

from importlib import import_module
from typing import TYPE_CHECKING, Any

__version__ = "0.1.0"

#: public name -> the module that defines it
_WHERE: dict[str, str] = {
    "load_config": "retain.data.config",
    "prepare": "retain.data.prepare",
    "project": "retain.data.project",
    "write_outputs": "retain.data.prepare",
    "Categorical": "retain.data.table",
    "StartStop": "retain.data.table",
    "experiment_verdict": "retain.decisions.experiments",
    "events_needed": "retain.decisions.planning",
    "plan_experiment": "retain.decisions.planning",
    "finance_export": "retain.publish.finance",
    "lifetime_value": "retain.decisions.value",
    "residual_value": "retain.decisions.value",
    "BuildError": "retain.errors",
    "ConfigError": "retain.errors",
    "ConvergenceError": "retain.errors",
    "DataError": "retain.errors",
    "ModelError": "retain.errors",
    "ReconciliationError": "retain.errors",
    "RetainError": "retain.errors",
    "Estimates": "retain.estimates",
    "RetentionPrediction": "retain.estimates",
    "cause_specific_cox": "retain.models.competing",
    "cumulative_incidence": "retain.models.competing",
    "fit_cox": "retain.models.cox",
    "concordance": "retain.models.cox",
    "missing_by_attribute": "retain.data.completeness",
    "cohort_retention": "retain.models.curves",
    "compare_groups": "retain.models.curves",
    "curves_by": "retain.models.curves",
    "kaplan_meier": "retain.models.curves",
    "nelson_aalen": "retain.models.curves",
    "retention_grid": "retain.models.curves",
    "rmst_difference": "retain.models.curves",
    "decrement_table": "retain.models.decrements",
    "graduate": "retain.models.decrements",
    "actual_vs_expected": "retain.models.expected",
    "compare_models": "retain.models.parametric",
    "fit_exponential": "retain.models.parametric",
    "fit_piecewise": "retain.models.parametric",
    "fit_weibull": "retain.models.parametric",
    "backtest_renewal": "retain.models.renewal",
    "fit_renewal": "retain.models.renewal",
}

# a literal list, so tools can read it; tests/test_startup.py checks it against _WHERE
__all__ = [
    "actual_vs_expected",
    "backtest_renewal",
    "cause_specific_cox",
    "cohort_retention",
    "compare_groups",
    "compare_models",
    "concordance",
    "cumulative_incidence",
    "curves_by",
    "decrement_table",
    "events_needed",
    "experiment_verdict",
    "finance_export",
    "fit_cox",
    "fit_exponential",
    "fit_piecewise",
    "fit_renewal",
    "fit_weibull",
    "graduate",
    "kaplan_meier",
    "lifetime_value",
    "missing_by_attribute",
    "load_config",
    "nelson_aalen",
    "plan_experiment",
    "prepare",
    "project",
    "residual_value",
    "retention_grid",
    "rmst_difference",
    "write_outputs",
    "BuildError",
    "Categorical",
    "ConfigError",
    "ConvergenceError",
    "DataError",
    "Estimates",
    "ModelError",
    "ReconciliationError",
    "RetainError",
    "RetentionPrediction",
    "StartStop",
]


def __getattr__(name: str) -> Any:
    module = _WHERE.get(name)
    if module is None:
        raise AttributeError(f"module 'retain' has no attribute {name!r}")
    value = getattr(import_module(module), name)
    globals()[name] = value  # later look-ups skip this function
    return value


def __dir__() -> list[str]:
    return sorted(set(globals()) | set(__all__))


if TYPE_CHECKING:  # pragma: no cover - for type checkers and editors only
    from retain.data.config import load_config
    from retain.data.prepare import prepare, write_outputs
    from retain.data.project import project
    from retain.data.table import Categorical, StartStop
    from retain.decisions.experiments import experiment_verdict
    from retain.decisions.planning import events_needed, plan_experiment
    from retain.decisions.value import lifetime_value, residual_value
    from retain.errors import (
        BuildError,
        ConfigError,
        ConvergenceError,
        DataError,
        ModelError,
        ReconciliationError,
        RetainError,
    )
    from retain.estimates import Estimates, RetentionPrediction
    from retain.models.competing import cause_specific_cox, cumulative_incidence
    from retain.models.cox import fit_cox
    from retain.models.curves import (
        cohort_retention,
        compare_groups,
        curves_by,
        kaplan_meier,
        nelson_aalen,
        retention_grid,
        rmst_difference,
    )
    from retain.models.decrements import decrement_table, graduate
    from retain.models.expected import actual_vs_expected
    from retain.models.parametric import (
        compare_models,
        fit_exponential,
        fit_piecewise,
        fit_weibull,
    )
    from retain.models.renewal import backtest_renewal, fit_renewal
    from retain.publish.finance import finance_export
