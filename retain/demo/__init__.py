"""Quillfern: an invented monthly gardening-box subscription, simulated from a known truth.

Nothing here is real customer data. The generator writes a raw billing-style event
log (every column text, as an export would give) whose churn is drawn from a
stated model, so that every estimate ``retain`` makes on it can be held against
the truth (``TRUTH``, the same numbers as ``demo_data/truth.json``).

The subpackage is split by what each part owns: :mod:`retain.demo.design` (the
true parameters, :data:`TRUTH`), :mod:`retain.demo.simulate` (customers, spells
and the exact inversion of each churn time), :mod:`retain.demo.log` (the raw
event log and its defects) and :mod:`retain.demo.truth` (the reference values
every estimate is held against). ``python -m retain.demo`` regenerates demo_data/.
"""

from __future__ import annotations

from retain.demo.design import (
    DAYS_PER_MONTH as DAYS_PER_MONTH,
)
from retain.demo.design import (
    KINDS as KINDS,
)
from retain.demo.design import (
    LOG_COLUMNS,
    TRUTH,
    truth_dict,
)
from retain.demo.design import (
    REASONS as REASONS,
)
from retain.demo.design import (
    _day as _day,
)
from retain.demo.log import _reasons as _reasons
from retain.demo.log import generate_log, write_log
from retain.demo.simulate import (
    SimSpells as SimSpells,
)
from retain.demo.simulate import (
    SimSwitches as SimSwitches,
)
from retain.demo.simulate import (
    _draw_customers as _draw_customers,
)
from retain.demo.simulate import (
    churn_times_piecewise,
    simulate_spells,
)
from retain.demo.truth import (
    RETENTION_DAYS,
    conditional_retention,
    km_limit,
    simulated_km_by_plan,
    true_reference_values,
    true_start_stop,
    write_truth,
)

__all__ = [
    "TRUTH",
    "generate_log",
    "write_log",
    "true_reference_values",
    "simulate_spells",
    "true_start_stop",
    "churn_times_piecewise",
    "truth_dict",
    "conditional_retention",
    "km_limit",
    "simulated_km_by_plan",
    "RETENTION_DAYS",
    "write_truth",
    "LOG_COLUMNS",
]
