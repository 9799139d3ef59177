"""One run of the whole flow: prepare -> models -> decisions -> a results bundle.

:func:`run_config` takes a loaded ``retain.toml`` (``retain.data.config``),
prepares the start-stop table and runs every model and decision the config
asks for; :func:`run_table` does the same from a start-stop table prepared
elsewhere. Each model runs inside :func:`attempt`: a model that fails records
its message in the bundle (and so on its site page) instead of stopping the
run. The site builder reads the bundle and never fits anything itself.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import math
import time
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from retain import step_names
from retain.data.config import (
    Config,
    ExperimentSpec,
    ModelConfig,
    ValueConfig,
    as_date,
    experiment_settings,
    model_settings,
    value_settings,
)
from retain.data.table import StartStop
from retain.errors import ConfigError, ModelError, RetainError, internal_error_text
from retain.results import OneRowFrame, Result, to_jsonable
from retain.units import DAYS_PER_MONTH, DAYS_PER_YEAR

BASE_VALUE_DRAWS = 200  # parameter draws for the base's interval (the residual sum is the cost)


class NotSetUp(RetainError):
    """A step the project file does not ask for (no covariates, no margin): recorded as
    skipped with the key that would turn it on, never as a failure. A step that needs a
    skipped one raises the same refusal again (:meth:`Outcome.refusal`)."""


@dataclass(frozen=True)
class Outcome:
    """What one step of the run produced: a value, or the message of its failure."""

    name: str
    value: Any = None
    error: str | None = None
    # "retain" for a RetainError, "internal" for any other exception, "skipped" for a
    # step the project file does not ask for
    kind: str = ""
    # a skipped step's refusal in its parts (where, rule, fix), for the pages' one line
    refused: tuple[str, str, str] | None = None

    @property
    def ok(self) -> bool:
        return self.error is None

    @property
    def skipped(self) -> bool:
        return self.kind == "skipped"

    def refusal(self) -> NotSetUp:
        """The refusal of a skipped step, to raise again word for word."""
        where, rule, fix = self.refused or (self.name, "not set up", self.error or "")
        return NotSetUp(where, rule, fix)

    def to_dict(self) -> dict[str, Any]:
        if not self.ok:
            return {"error": self.error, "kind": self.kind}
        return {"value": to_jsonable(self.value)}


def attempt(name: str, step: Callable[[], Any]) -> Outcome:
    """Run ``step``; a failure becomes an :class:`Outcome` carrying its message.

    A :class:`~retain.errors.RetainError` is a model refusing with a reason (no
    events, separation, no convergence): its one-line message is kept as is.
    Any other exception is a bug; it is recorded as an internal error with the
    last frame of its traceback so the page still builds and says so.
    """
    try:
        return Outcome(name, step())
    except NotSetUp as exc:
        return Outcome(name, error=exc.message, kind="skipped",
                       refused=(exc.where, exc.rule, exc.fix))
    except RetainError as exc:
        return Outcome(name, error=exc.message, kind="retain")
    except Exception as exc:  # noqa: BLE001 - a bug must not take the site down
        return Outcome(name, error=internal_error_text(exc), kind="internal")


@dataclass(frozen=True, init=False)
class RunOptions:
    """What to run: the project file's typed sections as they are, and what to show.

    ``model``, ``value`` and ``experiments`` hold the config's own
    :class:`~retain.data.config.ModelConfig`, :class:`~retain.data.config.ValueConfig`
    and :class:`~retain.data.config.ExperimentSpec` objects (their defaults live
    there); ``value`` None means no value figures. A run set up in Python may
    give the ``[model]`` keys one by one (``RunOptions(covariates=("plan",))``),
    ``value`` and each experiment as a mapping with their keys, and ``as_of`` as
    "YYYY-MM-DD" text: each is converted here, once.
    """

    title: str
    source: str
    as_of: dt.date | None
    segments: tuple[str, ...]
    model: ModelConfig
    value: ValueConfig | None
    experiments: Mapping[str, ExperimentSpec]
    cohort_months: int

    def __init__(self, title: str = "Retention review", source: str = "start-stop table",
                 as_of: dt.date | str | None = None, segments: Sequence[str] = (),
                 model: ModelConfig | None = None,
                 value: ValueConfig | Mapping[str, Any] | None = None,
                 experiments: Mapping[str, ExperimentSpec | Mapping[str, Any]] | None = None,
                 cohort_months: int = 24, **model_keys: Any) -> None:
        if model is not None and model_keys:
            raise ConfigError("run options", "model and single [model] keys are both given",
                              "pass model=ModelConfig(...) or the keys, not both")
        exps = {name: experiment_settings(
            spec if isinstance(spec, ExperimentSpec) else {"name": name, **spec})
            for name, spec in (experiments or {}).items()}
        for name, setting in (
                ("title", title), ("source", source),
                ("as_of", as_date(as_of, "run options: as_of")),
                ("segments", tuple(segments)),
                ("model", model_settings(model if model is not None else model_keys)),
                ("value", value_settings(value) if value else None),
                ("experiments", exps), ("cohort_months", int(cohort_months))):
            object.__setattr__(self, name, setting)

    def to_dict(self) -> dict[str, Any]:
        """The options as results.json carries them: the ``[model]`` keys at the top level,
        ``as_of`` as "YYYY-MM-DD" (blank when unknown), ``value`` {} when not set."""
        out: dict[str, Any] = {}
        for f in dataclasses.fields(self):
            v = getattr(self, f.name)
            if f.name == "model":
                out.update(to_jsonable(v))
            elif f.name == "as_of":
                out[f.name] = "" if v is None else v.isoformat()
            elif f.name == "value":
                out[f.name] = {} if v is None else to_jsonable(v)
            else:
                out[f.name] = to_jsonable(v)
        return out


@dataclass(frozen=True)
class PreparationRecord:
    """What a run keeps of the preparation (:class:`retain.data.prepare.Prepared`): the
    data-quality page's inputs, not the preparation's second (Arrow) copy of the table."""

    reconciliation: Any  # retain.data.prepare.Reconciliation
    quarantine: Any  # pyarrow.Table of the rows set aside, with the reason of each
    unknown_events: dict[str, int]

    @classmethod
    def of(cls, prepared: Any) -> PreparationRecord | None:
        """The record of ``prepared`` (None stays None; a record is kept as it is)."""
        if prepared is None or isinstance(prepared, cls):
            return prepared
        return cls(prepared.reconciliation, prepared.quarantine, dict(prepared.unknown_events))


@dataclass(frozen=True, eq=False)
class RunResults(Result):
    """The bundle one run produces: the table, its data-quality record, every outcome."""

    options: RunOptions
    table: StartStop
    outcomes: dict[str, Outcome]
    prepared: PreparationRecord | None = None

    def get(self, name: str) -> Outcome:
        return self.outcomes.get(name, Outcome(name, error="this step was not run", kind="absent"))

    def value(self, name: str) -> Any:
        o = self.outcomes.get(name)
        return None if o is None or not o.ok else o.value

    def to_dict(self) -> dict[str, Any]:
        return {"options": self.options.to_dict(),
                "table": {"rows": self.table.n_rows, "customers": self.table.n_customers,
                          "churns": self.table.n_events},
                "outcomes": {k: o.to_dict() for k, o in self.outcomes.items()}}

    def to_frame(self) -> pd.DataFrame:
        return pd.DataFrame([{"step": k, "ok": o.ok, "error": o.error or ""}
                             for k, o in self.outcomes.items()])

    def summary(self) -> str:
        bad = [k for k, o in self.outcomes.items() if not o.ok]
        return (f"run on {self.table.n_rows} rows: {len(self.outcomes)} steps, "
                f"{len(bad)} failed" + (f" ({', '.join(bad)})" if bad else ""))


# --------------------------------------------------------------------------- book facts
@dataclass(frozen=True, eq=False)
class BookSummary(OneRowFrame, Result):
    """Counts that describe the book of customers (no model involved).

    ``monthly_churn_rate`` is the crude central rate over the last
    ``window_days`` of calendar time before the as-of date: churns in that
    window divided by the customer-months of exposure in it; ``monthly_churn_q``
    is the matching monthly probability 1 − exp(−m).
    """

    customers: int
    spells: int
    rows: int
    churns: float
    active: float
    exposure_months: float
    window_days: float
    window_churns: float
    window_exposure_months: float
    monthly_churn_rate: float
    monthly_churn_q: float
    basis: str

    def summary(self) -> str:
        return (f"{self.customers} customers, {self.active:g} active, monthly churn "
                f"{self.monthly_churn_q:.2%}")


def book_summary(table: StartStop, window_days: float = DAYS_PER_YEAR) -> BookSummary:
    """Customers, active spells and the recent monthly churn rate of ``table``."""
    last = table.last_of_spell
    w = table.weight
    active = float(w[last & (table.churned == 0)].sum())
    spells = int(last.sum()) if table.has_customers else table.n_rows
    exposure = float(np.dot(w, table.stop - table.start)) / DAYS_PER_MONTH
    if table.start_date is not None:
        day0 = table.start_date.astype("datetime64[D]").astype(np.int64).astype(np.float64)
        a, b = day0 + table.start, day0 + table.stop
        end = table.last_day  # the as-of date (context), else the data's last day
        lo = end - window_days
        overlap = np.clip(np.minimum(b, end) - np.maximum(a, lo), 0.0, None)
        w_exp = float(np.dot(w, overlap)) / DAYS_PER_MONTH
        w_ch = float(w[(table.churned == 1) & (b > lo)].sum())
        basis = ("last 12 months" if window_days == DAYS_PER_YEAR
                 else f"last {window_days:g} days")
    else:
        w_exp, w_ch = exposure, table.n_events
        window_days = math.nan
        basis = "whole table (no start dates)"
    rate = w_ch / w_exp if w_exp > 0 else math.nan
    return BookSummary(
        customers=table.n_customers, spells=spells, rows=table.n_rows, churns=table.n_events,
        active=active, exposure_months=exposure, window_days=float(window_days),
        window_churns=w_ch, window_exposure_months=w_exp, monthly_churn_rate=rate,
        monthly_churn_q=1.0 - math.exp(-rate) if math.isfinite(rate) else math.nan, basis=basis)


# --------------------------------------------------------------------------- the run
#: a progress callback: the step's name, what it counted ("12,040 rows", "3 segments" or
#: ""), and the seconds it took; called once each step has finished
Progress = Callable[[str, str, float], None]


def _quiet(_step: str, _count: str, _seconds: float) -> None:
    return None


def step_count(value: Any) -> str:
    """What a finished step's progress line counts: the rows a fit or table read, the
    segments of a split, the bands of a decrement table; blank where no count fits."""
    def count(n: int, unit: str) -> str:
        return f"{n:,} {unit if n != 1 else unit.removesuffix('s')}"

    kind = type(value).__name__
    if isinstance(value, BookSummary):
        return count(value.rows, "rows")
    if kind == "DecrementTable":
        return count(int(value.frame["label"].nunique()), "bands")
    if kind == "SegmentCurves":
        return count(len(value), "segments")
    for attr in ("values", "segments"):  # value by segment, value of the base
        part = getattr(value, attr, None)
        if isinstance(part, (list, tuple)):
            return count(len(part), "segments")
    n = getattr(value, "n_rows", None)
    if isinstance(n, (int, np.integer)):
        return count(int(n), "rows")
    if isinstance(value, pd.DataFrame):
        return count(len(value), "rows")
    return ""


def run_table(table: StartStop, options: RunOptions, *, prepared: Any = None,
              progress: Progress | None = None) -> RunResults:
    """Run every model and decision on a prepared start-stop table.

    Steps that need a module not present in this installation, or a column the
    table lacks, record why in their outcome; the rest still run. ``progress`` hears
    of each step once it has finished (:data:`Progress`).
    """
    say = progress or _quiet
    out: dict[str, Outcome] = {}

    def step(name: str, fn: Callable[[], Any]) -> Outcome:
        t0 = time.perf_counter()
        out[name] = attempt(name, fn)
        o = out[name]
        say(name, step_count(o.value) if o.ok else ("not set up" if o.skipped else "failed"),
            time.perf_counter() - t0)
        _drop_rows(out, ran=name)
        return out[name]

    step(step_names.BOOK, lambda: book_summary(table))
    for name, fn in _model_steps(table, options, out):
        step(name, fn)
    return RunResults(options=options, table=table, outcomes=out,
                      prepared=PreparationRecord.of(prepared))


# A fit that keeps its table's rows for diagnostics -> the last step that reads them.
# Once that step has run, the fit's outcome holds only its prediction-only copy
# (``without_rows()``: estimates, baseline, what codes a profile), so a finished run
# does not pin the rows through it; the pages read only estimates and the outcomes of
# the steps that needed the rows (cox:ph, cox:concordance, cox:curve).
ROWS_READ_UNTIL = {
    step_names.COX: step_names.COX_CURVE,
    step_names.CAUSE_COX: step_names.CAUSE_COX,
}


def _drop_rows(out: dict[str, Outcome], ran: str) -> None:
    """After step ``ran``, swap every fit whose last row reader it was for that fit's
    prediction-only copy."""
    for fit_step, last in ROWS_READ_UNTIL.items():
        o = out.get(fit_step)
        if last == ran and o is not None and o.ok and hasattr(o.value, "without_rows"):
            out[fit_step] = dataclasses.replace(o, value=o.value.without_rows())


def options_from_config(config: Config) -> RunOptions:
    """The parts of a loaded ``retain.toml`` that say what to run and show."""
    src = config.source
    name = (src.path.name if src.path is not None else
            f"{src.duckdb}:{src.table}" if src.duckdb is not None else "table in memory")
    return RunOptions(
        title=config.project.name or f"Retention review: {name}", source=str(name),
        as_of=config.window.as_of, segments=config.segments.by, model=config.model,
        value=config.value, experiments={e.name: e for e in config.experiments})


def run_config(config: Any, *, prepared: Any = None,
               progress: Progress | None = None) -> RunResults:
    """Prepare the event log that ``config`` describes, then run every model on it.

    A failure to prepare the data raises (there is nothing to publish without
    a table); a model that fails is recorded in the bundle. Pass ``prepared``
    (from :func:`retain.data.prepare.prepare`) to skip the preparation.
    """
    if prepared is None:
        from retain.data.prepare import prepare

        t0 = time.perf_counter()
        prepared = prepare(config)
        (progress or _quiet)("prepare", f"{prepared.table.n_rows:,} rows",
                             time.perf_counter() - t0)
    return run_table(prepared.table, options_from_config(config), prepared=prepared,
                     progress=progress)


def build_from_config(config: Any, out_dir: Any, *, prepared: Any = None,
                      progress: Progress | None = None) -> tuple[Any, RunResults]:
    """One run of the whole flow, published: returns (path of index.html, the run)."""
    from pathlib import Path

    from retain.publish.pages import site_content
    from retain.publish.site import build_site, check_target

    check_target(Path(out_dir).resolve())  # refuse a wrong --out before the models run
    run = run_config(config, prepared=prepared, progress=progress)
    t0 = time.perf_counter()
    content = site_content(run)
    index = build_site(content, out_dir)
    (progress or _quiet)("site", f"{len(content.pages):,} pages", time.perf_counter() - t0)
    return index, run


def _model_steps(table: StartStop, options: RunOptions,
                 done: dict[str, Outcome]) -> list[tuple[str, Callable[[], Any]]]:
    from retain.models import competing, cox, curves, decrements, parametric, tenure_effects

    model = options.model
    cov = list(model.covariates)
    ref = dict(model.reference) or None
    strata = list(model.strata) or None
    first_segment = options.segments[0] if options.segments else None
    grid = np.arange(0.0, float(table.stop.max()) + 1e-9, DAYS_PER_MONTH / 2)

    miss = model.missing
    cuts = model.piecewise_cuts

    def cox_fit() -> Any:
        _need_covariates(cov)
        return cox.fit_cox(table, cov, strata=strata, reference=ref, missing=miss)

    def after(name: str, what: Callable[[Any], Any]) -> Callable[[], Any]:
        def run() -> Any:
            first = done[name]
            if first.skipped:
                raise first.refusal()
            if not first.ok:
                raise ModelError(name, "the step this one needs failed", first.error or "")
            return what(first.value)
        return run

    def from_cox(what: Callable[[Any], Any]) -> Callable[[], Any]:
        return after(step_names.COX, what)

    steps: list[tuple[str, Callable[[], Any]]] = [
        (step_names.KM, lambda: curves.kaplan_meier(table)),
    ]
    for seg in options.segments:
        steps.append((step_names.curves_by(seg),
                      lambda seg=seg: curves.curves_by(table, seg)))
    steps += [
        (step_names.COHORTS,
         lambda: curves.cohort_retention(table, months=options.cohort_months)),
        (step_names.EXPONENTIAL, lambda: parametric.fit_exponential(table)),
        (step_names.WEIBULL, lambda: parametric.fit_weibull(table)),
        (step_names.COMPARE, lambda: parametric.compare_models(table, cov, cuts, reference=ref,
                                                               missing=miss)),
        (step_names.WEIBULL_COVARIATES, lambda: done[step_names.COMPARE].value.fits["weibull"]
         if done[step_names.COMPARE].ok
         else parametric.fit_weibull(table, cov, reference=ref, missing=miss)),
        (step_names.LOGLOG, lambda: parametric.loglog_diagnostic(table, first_segment)),
        (step_names.COX, cox_fit),
        (step_names.COX_PH, from_cox(lambda f: f.proportional_hazards_test())),
        (step_names.COX_TENURE, after(step_names.COX_PH, lambda ph: tenure_effects.tenure_effects(
            done[step_names.COX].value, ph.table, cuts))),
        (step_names.COX_CONCORDANCE, from_cox(lambda f: f.concordance())),
        (step_names.COX_CURVE, from_cox(lambda f: f.segment_retention(f.fitted_table, grid))),
        (step_names.DECREMENTS, lambda: decrements.decrement_table(table)),
        (step_names.GRADUATION, after(step_names.DECREMENTS, lambda d: decrements.graduate(d))),
        (step_names.ACTUAL_VS_EXPECTED,
         after(step_names.DECREMENTS, lambda d: _actual_vs_expected(table, d, options))),
        *([(step_names.DECREMENTS_BANDS, lambda: decrements.decrement_table(
            table, band_edges=model.decrement_edges))] if model.decrement_edges else []),
        (step_names.INCIDENCE,
         lambda: _need_two_causes(table) or competing.cumulative_incidence(table)),
        (step_names.CAUSE_COX, lambda: _need_two_causes(table) or _need_covariates(cov)
         or competing.cause_specific_cox(table, cov, strata=strata, reference=ref,
                                         missing=miss)),
    ]
    steps += _decision_steps(table, options, done)
    return steps


def _need_covariates(cov: list[str]) -> None:
    if not cov:
        raise NotSetUp("[model] covariates", "no covariates are named, so there is no "
                       "hazard-ratio model", 'add covariates = ["plan", ...] to [model] in the '
                       "project file")


def _need_two_causes(table: StartStop) -> None:
    """Refuse the split by cause when every churn has the same cause (or none churned).

    The table's ``cause`` comes from ``[columns] reason`` and, without it, from payment
    trouble (a churn while a payment has failed is involuntary, else voluntary): with
    neither, every churn is voluntary and there is nothing to split.
    """
    codes = table.cause.codes[table.churned == 1]
    if np.unique(codes).size < 2:
        raise NotSetUp("[columns] reason", "every churn has the same cause, so there is no "
                       "split by cause", "name the cancellation-reason column as reason in "
                       "[columns], or map the log's payment events (payment_failed, "
                       "payment_recovered) in [events]")


def _need_margin(spec: ValueConfig) -> None:
    if spec.margin_rate is None and spec.margin_per_month is None:
        raise NotSetUp("[value]", "no margin is set, so no lifetime value is computed",
                       "set margin_rate (with price) or margin_per_month in [value]")


def _actual_vs_expected(table: StartStop, basis: Any, options: RunOptions) -> Any:
    """A/E of each segment (and calendar month) against the book's tenure-month rates."""
    from retain.models import expected

    by = [s for s in options.segments if table.has(s)]
    if table.has("cohort"):
        by.append("cohort")
    by.append("calendar_month")
    return expected.actual_vs_expected(table, basis, by=by, credibility=True)


def _finance_table(done: dict[str, Outcome]) -> pd.DataFrame:
    """The finance rows (:func:`retain.decisions.value.finance_table`); the site writes
    them as a CSV beside its other downloads."""
    from retain.decisions import value

    new, base = done[step_names.VALUE_SEGMENTS], done[step_names.VALUE_BASE]
    if new.skipped:
        raise new.refusal()
    if not (new.ok or base.ok):
        raise ModelError("finance file", "neither value figure could be computed",
                         new.error or base.error or "")
    return value.finance_table(new_customers=new.value if new.ok else None,
                               base=base.value if base.ok else None)


def _decision_steps(table: StartStop, options: RunOptions,
                    done: dict[str, Outcome]) -> list[tuple[str, Callable[[], Any]]]:
    from retain.decisions import experiments, value

    spec = options.value
    by = tuple(options.segments[:1])
    steps: list[tuple[str, Callable[[], Any]]] = []
    if spec is not None:
        steps += [
            (step_names.VALUE_ALL, lambda: _need_margin(spec) or value.value_by_segment(
                table, spec, (), as_of=options.as_of)),
            (step_names.VALUE_SEGMENTS, lambda: _need_margin(spec) or value.value_by_segment(
                table, spec, by, as_of=options.as_of)),
            (step_names.VALUE_BASE, lambda: _need_margin(spec) or value.base_value_by_segment(
                table, spec, by, as_of=options.as_of, n_draws=BASE_VALUE_DRAWS)),
            (step_names.VALUE_FINANCE, lambda: _finance_table(done)),
        ]
    else:  # recorded as not set up, so the site says which key turns value on
        steps.append((step_names.VALUE_ALL, lambda: _need_margin(ValueConfig())))
    price = (spec or ValueConfig()).price_column
    for name, exp in options.experiments.items():
        steps.append((step_names.experiment(name), lambda exp=exp: experiments.experiment_verdict(
            table, exp, as_of=options.as_of, price=price, missing=options.model.missing)))
    return steps
