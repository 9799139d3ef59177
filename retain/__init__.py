"""retain: survival analysis of a subscription business's event log.

The public names live here; everything else is private by default.
"""

from retain.data.config import load_config
from retain.data.prepare import prepare, write_outputs
from retain.data.table import Categorical, StartStop
from retain.decisions.experiments import experiment_verdict
from retain.decisions.planning import events_needed, plan_experiment
from retain.decisions.value import finance_export, lifetime_value, residual_value
from retain.errors import (
    BuildError,
    ConfigError,
    ConvergenceError,
    DataError,
    ModelError,
    ReconciliationError,
    RetainError,
)
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
from retain.models.parametric import compare_models, fit_exponential, fit_piecewise, fit_weibull
from retain.models.renewal import backtest_renewal, fit_renewal

__version__ = "0.1.0"

__all__ = [
    "actual_vs_expected",
    "backtest_renewal",
    "cause_specific_cox",
    "cohort_retention",
    "compare_groups",
    "compare_models",
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
    "load_config",
    "nelson_aalen",
    "plan_experiment",
    "prepare",
    "residual_value",
    "retention_grid",
    "rmst_difference",
    "write_outputs",
    "BuildError",
    "Categorical",
    "ConfigError",
    "ConvergenceError",
    "DataError",
    "ModelError",
    "ReconciliationError",
    "RetainError",
    "StartStop",
]
