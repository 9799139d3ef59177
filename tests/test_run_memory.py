"""A finished run does not pin the start-stop table's rows through its fitted models.

The Cox and cause-specific Cox fits keep their fitting rows (design matrix, risk
index, the table) only until the last step that reads them (the
proportional-hazards test, concordance and averaged curve for ``cox``; none for
``cause-cox``); the run then holds their prediction-only copies. The bounds are
measurements on the shipped demo (55,098 rows, 19,820 customers, 9,351 churns),
pickled with the highest protocol:

    outcome        before    after
    cox            13.25 MB  0.16 MB
    cause-cox      25.75 MB  0.27 MB
    all outcomes   41.29 MB  2.96 MB   (the largest left is cox:ph, 1.1 MB: one
                                        scaled Schoenfeld residual row per churn)
    whole run      49.77 MB  9.22 MB   (the table itself, 6.25 MB, stays: it is the
                                        run's input; the preparation's Arrow copy of
                                        it, 8.45 MB, is no longer kept)
"""

from __future__ import annotations

import io
import pickle

import numpy as np
import pyarrow as pa
import pytest

from retain import step_names
from retain.data.config import load_config
from retain.data.table import StartStop
from retain.errors import ModelError
from retain.paths import DEMO_DIR
from retain.run import options_from_config, run_table

BOUND = 1_000_000  # bytes: ten times the measured light copies, a tenth of the old fits


@pytest.fixture(scope="module")
def demo_run(demo_prepared):
    options = options_from_config(load_config(DEMO_DIR / "retain.toml"))
    return run_table(demo_prepared.table, options, prepared=demo_prepared)


class _RowFinder(pickle.Pickler):
    """Pickles an object and notes every StartStop and every array half as long as the
    table or longer (a model's fitting rows may be fewer than the table's)."""

    def __init__(self, n_rows: int) -> None:
        super().__init__(io.BytesIO(), protocol=pickle.HIGHEST_PROTOCOL)
        self.n_rows = n_rows
        self.found: list[str] = []

    def persistent_id(self, obj):
        if isinstance(obj, StartStop):
            self.found.append("StartStop")
            return "table"
        if isinstance(obj, np.ndarray) and obj.ndim and 2 * obj.shape[0] >= self.n_rows:
            self.found.append(f"array {obj.shape}")
        return None


@pytest.mark.parametrize("name", [step_names.COX, step_names.CAUSE_COX])
def test_cox_outcomes_pickle_small(demo_run, name):
    o = demo_run.get(name)
    assert o.ok, o.error
    size = len(pickle.dumps(o, protocol=pickle.HIGHEST_PROTOCOL))
    assert size < BOUND, f"{name} pickles to {size:,} bytes"


def test_no_outcome_holds_the_tables_rows(demo_run):
    for name, o in demo_run.outcomes.items():
        finder = _RowFinder(demo_run.table.n_rows)
        finder.dump(o)
        assert not finder.found, f"{name} keeps {sorted(set(finder.found))}"


def test_the_steps_that_need_the_rows_ran_before_the_swap(demo_run):
    # the diagnostics were computed on the full fit; the kept copy refuses them in one line
    for name in (step_names.COX_PH, step_names.COX_CONCORDANCE, step_names.COX_CURVE):
        assert demo_run.get(name).ok, demo_run.get(name).error
    cox = demo_run.value(step_names.COX)
    assert not cox.keeps_rows
    with pytest.raises(ModelError):
        cox.concordance()
    # Harrell's C of a model with real covariates lies strictly between chance and perfect
    # (Harrell, Lee & Mark 1996, Stat Med 15:361): a sanity range, common practice
    c = demo_run.value(step_names.COX_CONCORDANCE).c_index
    assert 0.5 < c < 1.0
    # the averaged curve starts at 1 and never rises (a survival function)
    curve = demo_run.value(step_names.COX_CURVE)["retention"].to_numpy(dtype=float)
    assert curve[0] == pytest.approx(1.0) and np.all(np.diff(curve) <= 1e-12)


def test_the_run_keeps_one_copy_of_the_table(demo_run):
    # the run's own table is its input; no second copy (the preparation's Arrow table)
    tables: list[str] = []

    class Finder(pickle.Pickler):
        def persistent_id(self, obj):
            if isinstance(obj, StartStop):
                tables.append("StartStop")
                return "table"
            if isinstance(obj, pa.Table) and obj.num_rows == demo_run.table.n_rows:
                tables.append("Arrow")
                return "arrow"
            return None

    Finder(io.BytesIO(), protocol=pickle.HIGHEST_PROTOCOL).dump(demo_run)
    assert tables == ["StartStop"]
    # what the quality page reads is kept: the quarantined rows, as many as the
    # reconciliation counts by reason
    kept = demo_run.prepared
    assert kept.quarantine.num_rows == sum(kept.reconciliation.by_reason.values()) > 0
