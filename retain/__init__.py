"""retain: survival analysis of a subscription business's event log.

The public names live here; everything else is private by default.
"""

from retain.data.table import Categorical, StartStop
from retain.errors import (
    BuildError,
    ConfigError,
    ConvergenceError,
    DataError,
    ModelError,
    ReconciliationError,
    RetainError,
)

__version__ = "0.1.0"

__all__ = [
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
