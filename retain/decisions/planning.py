"""Planning a retention experiment: events, customers and months needed.

Events needed for a log-rank / Cox comparison of two arms (Schoenfeld 1983,
Biometrics 39(2) 499-503, eq. 1):

    D = (z_{1 - alpha/2} + z_{power})^2 / (p (1 - p) (log HR)^2),

with ``p`` the share of customers in the treatment arm (allocation ratio
``k`` = treatment : control gives ``p = k / (1 + k)``).

Customers needed = D / P(churn observed), with P from the baseline
retention curve S (control) and S^HR (treatment, proportional hazards):

* fixed follow-up: every customer is followed ``follow_up_months``:
  ``P_arm = 1 - S_arm(f)``;
* uniform signup over ``accrual_months`` then ``follow_up_months`` more:
  Schoenfeld's (1983, p. 503) Simpson rule
  ``P_arm = 1 - (S(f) + 4 S(f + a/2) + S(f + a)) / 6``.

Months needed = accrual months (customers / signups per month, when that
rate is given) + follow-up months.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from retain.decisions.value import one_row_frame
from retain.errors import ConfigError, ModelError
from retain.kernels import power as kp
from retain.models.value_curves import SurvivalCurve
from retain.results import Result
from retain.units import DAYS_PER_MONTH


def _check(hazard_ratio: float, power: float, alpha: float, allocation: float) -> float:
    where = "experiment planning"
    if not (math.isfinite(hazard_ratio) and hazard_ratio > 0 and hazard_ratio != 1.0):
        raise ConfigError(f"{where}: hazard_ratio", f"must be > 0 and not 1, got {hazard_ratio!r}",
                          "e.g. 0.8 for a 20 % lower churn hazard")
    if not 0.0 < power < 1.0:
        raise ConfigError(f"{where}: power", f"must be in (0, 1), got {power!r}", "e.g. 0.8")
    if not 0.0 < alpha < 1.0:
        raise ConfigError(f"{where}: alpha", f"must be in (0, 1), got {alpha!r}", "e.g. 0.05")
    if not (math.isfinite(allocation) and allocation > 0):
        raise ConfigError(f"{where}: allocation", f"treatment : control ratio must be > 0, got "
                          f"{allocation!r}", "1.0 for equal arms")
    return allocation / (1.0 + allocation)


def events_needed(hazard_ratio: float, power: float = 0.8, alpha: float = 0.05,
                  allocation: float = 1.0, *, sides: int = 2) -> float:
    """Churns needed to detect ``hazard_ratio`` (Schoenfeld 1983, eq. 1).

    ``allocation`` is the treatment : control ratio (1.0 = equal arms);
    ``sides`` = 2 for a two-sided test at level ``alpha``. Not rounded.
    """
    if sides not in (1, 2):
        raise ConfigError("experiment planning: sides", f"must be 1 or 2, got {sides!r}",
                          "use 2 for a two-sided test")
    p = _check(hazard_ratio, power, alpha, allocation)
    return kp.schoenfeld_events(hazard_ratio, power, alpha, p, sides)


@dataclass(frozen=True)
class ExperimentPlan(Result):
    """Events, customers and months an experiment needs."""

    hazard_ratio: float
    power: float
    alpha: float
    allocation: float
    treated_fraction: float
    events: int
    baseline: str
    follow_up_months: float
    accrual_months: float | None
    churn_probability_control: float
    churn_probability_treatment: float
    churn_probability: float
    customers: int
    customers_control: int
    customers_treatment: int
    signups_per_month: float | None
    months_to_enrol: float | None
    months_total: float | None
    method: str
    warnings: tuple[str, ...] = ()

    def to_frame(self) -> pd.DataFrame:
        return one_row_frame(self)

    def summary(self) -> str:
        text = (f"To detect a hazard ratio of {self.hazard_ratio:g} with {self.power:.0%} power "
                f"at alpha {self.alpha:g}: {self.events} churns, so about {self.customers:,} "
                f"customers ({self.customers_control:,} control, {self.customers_treatment:,} "
                f"treatment) followed {self.follow_up_months:g} months")
        if self.months_total is not None:
            text += f"; about {self.months_total:.1f} months in all"
        return text + "."


def plan_experiment(
    baseline: SurvivalCurve,
    hazard_ratio: float,
    *,
    power: float = 0.8,
    alpha: float = 0.05,
    allocation: float = 1.0,
    follow_up_months: float = 12.0,
    accrual_months: float | None = None,
    signups_per_month: float | None = None,
) -> ExperimentPlan:
    """Customers and months needed to detect ``hazard_ratio`` given a baseline curve.

    Parameters
    ----------
    baseline : SurvivalCurve
        Retention of the control arm (e.g. the Kaplan-Meier or Weibull curve
        of recent signups).
    hazard_ratio : float
        Target effect (treatment vs control), e.g. 0.8.
    follow_up_months : float
        Follow-up of each customer (fixed follow-up), or follow-up after the
        last signup when ``accrual_months`` is given.
    accrual_months : float, optional
        Length of uniform signup into the experiment (Simpson's rule).
    signups_per_month : float, optional
        New customers entering the experiment per month (both arms).
    """
    p = _check(hazard_ratio, power, alpha, allocation)
    where = "experiment planning"
    if not isinstance(baseline, SurvivalCurve):
        raise ModelError(where, f"{type(baseline).__name__} is not a retention curve",
                         "pass e.g. curve_from_kaplan_meier(kaplan_meier(table))")
    if not (math.isfinite(follow_up_months) and follow_up_months > 0):
        raise ConfigError(f"{where}: follow_up_months", f"must be > 0, got {follow_up_months!r}",
                          "e.g. 12")
    if accrual_months is not None and not accrual_months > 0:
        raise ConfigError(f"{where}: accrual_months", f"must be > 0, got {accrual_months!r}",
                          "leave it out for a fixed follow-up")
    if signups_per_month is not None and not signups_per_month > 0:
        raise ConfigError(f"{where}: signups_per_month", f"must be > 0, got "
                          f"{signups_per_month!r}", "e.g. 2000")
    d = math.ceil(kp.schoenfeld_events(hazard_ratio, power, alpha, p) - 1e-9)
    f = follow_up_months * DAYS_PER_MONTH
    if accrual_months is None:
        s = np.asarray(baseline.survival(np.array([f])), dtype=np.float64)
        pc = float(1.0 - s[0])
        pt = float(1.0 - s[0] ** hazard_ratio)
        method = f"fixed follow-up of {follow_up_months:g} months; P(churn) = 1 - S(f)"
        reach = f
    else:
        a = accrual_months * DAYS_PER_MONTH
        s = np.asarray(baseline.survival(np.array([f, f + a / 2.0, f + a])), dtype=np.float64)
        pc = kp.simpson_event_probability(*s)
        pt = kp.simpson_event_probability(*(s ** hazard_ratio))
        method = (f"uniform signup over {accrual_months:g} months, then {follow_up_months:g} "
                  "months; P(churn) by Simpson's rule (Schoenfeld 1983)")
        reach = f + a
    warnings: list[str] = []
    if not (np.all(np.isfinite(s))):
        raise ModelError(where, f"the baseline {baseline.label} curve is not defined at "
                         f"{reach / DAYS_PER_MONTH:.1f} months", "use a shorter follow-up or a "
                         "parametric baseline curve")
    horizon = float(getattr(baseline, "data_horizon_days", math.inf))
    if reach > horizon:
        warnings.append(f"the baseline {baseline.label} curve is extrapolated to "
                        f"{reach / DAYS_PER_MONTH:.1f} months (data reach "
                        f"{horizon / DAYS_PER_MONTH:.1f})")
    prob = (1.0 - p) * pc + p * pt
    if prob <= 0:
        raise ModelError(where, "no churn is expected within the follow-up",
                         "lengthen the follow-up")
    n = math.ceil(d / prob - 1e-9)
    n_t = math.ceil(n * p - 1e-9)
    n_c = n - n_t
    months_enrol = None if signups_per_month is None else n / signups_per_month
    total = None
    if months_enrol is not None:
        total = months_enrol + follow_up_months if accrual_months is None else \
            max(months_enrol, accrual_months) + follow_up_months
        if accrual_months is not None and months_enrol > accrual_months:
            warnings.append(f"{months_enrol:.1f} months of signups are needed, more than the "
                            f"planned accrual of {accrual_months:g} months")
    return ExperimentPlan(
        hazard_ratio=float(hazard_ratio), power=float(power), alpha=float(alpha),
        allocation=float(allocation), treated_fraction=p, events=d, baseline=baseline.label,
        follow_up_months=float(follow_up_months), accrual_months=accrual_months,
        churn_probability_control=pc, churn_probability_treatment=pt, churn_probability=prob,
        customers=n, customers_control=n_c, customers_treatment=n_t,
        signups_per_month=signups_per_month, months_to_enrol=months_enrol, months_total=total,
        method=method, warnings=tuple(warnings))
