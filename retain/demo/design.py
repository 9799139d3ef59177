"""Quillfern's design: the true parameters every draw of the simulator reads.

The truth
---------
Time unit: days of tenure since the spell's start day (tenure 0).

Voluntary churn, Weibull proportional hazards with time-varying covariates::

    h_vol(t | x(t)) = (alpha / lam) * (t / lam)**(alpha - 1) * exp(beta . x(t))

with ``beta . x(t)`` = plan effect (reference Seedling) + ``beta_price *
(price_ratio(t) - 1)`` + ``beta_paused * paused(t)`` + ``beta_recovery *
in_recovery(t)`` + ``beta_prior * prior_spells`` + channel effect (reference
search) + region effect (reference south) + arm effect (reference none; every
arm effect is 0: the experiment acts only through the price it charges).
``price_ratio`` is the monthly price divided by the price on the spell's start
row, so the price rise, the end of the introductory discount and plan changes
all move it.

Involuntary churn, its own cause-specific hazard, constant in tenure::

    h_inv(t | x(t)) = mu * exp(gamma . x(t))

whose ``gamma`` has a large ``in_recovery`` term, so involuntary churn comes
mostly (not only: a card can expire silently) while a failed payment is being
recovered.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from types import MappingProxyType
from typing import Any

import numpy as np

DAYS_PER_MONTH = 365.25 / 12.0  # the same as retain.units.DAYS_PER_MONTH

LOG_COLUMNS = ("account", "occurred_at", "kind", "cancel_reason", "plan", "monthly_price",
               "channel", "region", "arm")

KINDS = ("signup", "reactivate", "plan_change", "price_change", "payment_failed",
         "payment_recovered", "pause", "resume", "cancel", "email_opened", "gift_card_redeemed")
REASONS = ("too_expensive", "not_using", "moved", "card_declined", "card_expired")


# --------------------------------------------------------------------------------------
# The truth: every number the generator uses is read from here (one source).
# --------------------------------------------------------------------------------------
_PARAMS: dict[str, Any] = {
    "business": "Quillfern (invented): a monthly gardening-box subscription",
    "time_unit": "day of tenure (tenure 0 = the spell's start day)",
    "dates": {
        "log_start": "2023-06-01",
        "window_start": "2024-01-01",
        "as_of": "2026-11-30",
        "price_rise": "2025-09-01",
    },
    "plans": {
        "levels": ["Seedling", "Bloom", "Orchard"],
        "reference": "Seedling",
        "signup_shares": [0.45, 0.35, 0.20],
        "list_price_before_rise": [19.00, 29.00, 45.00],
        "list_price_from_rise": [21.00, 32.00, 49.00],
    },
    "channels": {
        "levels": ["search", "referral", "podcast_ad", "garden_centre"],
        "reference": "search",
        "shares": [0.40, 0.25, 0.20, 0.15],
    },
    "regions": {
        "levels": ["south", "east", "north", "west"],
        "reference": "south",
        "shares": [0.35, 0.25, 0.20, 0.20],
    },
    "experiment": {
        "name": "intro_discount",
        "cohort": "2025-03",
        "assignment": "each customer whose first signup falls in 2025-03 is assigned "
                      "intro_discount with probability 0.5, else standard (independent "
                      "Bernoulli draws); every other customer has arm 'none'",
        "levels": ["none", "standard", "intro_discount"],
        "reference": "none",
        "p_treatment": 0.5,
        "control": "standard",
        "treatment": "intro_discount",
        "discount_price_factor": 0.75,
        "discount_days": 91,
        "discount_rule": "intro_discount customers pay 0.75 x list price on tenure days "
                         "0..91 of their first spell (a price_change row on tenure day 91 "
                         "moves them to list price); reactivations pay list price",
    },
    "signups": {
        "rule": "daily weight w(d) = (1 + growth * d / D) * (1 + amplitude * cos(2 pi "
                "(doy - peak_doy) / 365.25)), times campaign_multiplier in the campaign "
                "month; d = days since log_start, D = days from log_start to as_of; "
                "signup days run from log_start to the day before as_of",
        "growth": 1.5,
        "seasonal_amplitude": 0.3,
        "seasonal_peak_day_of_year": 100,
        "campaign_month": "2025-03",
        "campaign_multiplier": 4.5,
    },
    "voluntary": {
        "model": "Weibull proportional hazards",
        "hazard": "h(t|x) = (alpha/lam) (t/lam)^(alpha-1) exp(beta.x(t)), t in days",
        "alpha": 0.8,
        "lam_days": 1050.0,
        "price_ratio_form": "beta_price * (price_ratio - 1)",
        "lam_days_if_price_ratio_enters_raw": None,  # filled below: lam * exp(beta_price/alpha)
        "coefficients": {
            "plan": {"Seedling": 0.0, "Bloom": -0.25, "Orchard": -0.45},
            "price_ratio": 0.8,
            "paused": -0.9,
            "in_recovery": 0.5,
            "prior_spells": 0.3,
            "channel": {"search": 0.0, "referral": -0.35, "podcast_ad": 0.25,
                        "garden_centre": -0.15},
            "region": {"south": 0.0, "east": 0.0, "north": 0.15, "west": -0.10},
            "arm": {"none": 0.0, "standard": 0.0, "intro_discount": 0.0},
        },
    },
    "involuntary": {
        "model": "exponential (constant-in-tenure) proportional hazards, cause-specific",
        "hazard": "h(t|x) = mu exp(gamma.x(t)), t in days",
        "mu_per_day": 4.0e-5,
        "coefficients": {
            "plan": {"Seedling": 0.0, "Bloom": -0.10, "Orchard": -0.30},
            "price_ratio": 0.0,
            "paused": 0.0,
            "in_recovery": 6.2,
            "prior_spells": 0.2,
            "channel": {"search": 0.0, "referral": -0.20, "podcast_ad": 0.35,
                        "garden_centre": 0.0},
            "region": {"south": 0.0, "east": 0.25, "north": 0.0, "west": 0.0},
            "arm": {"none": 0.0, "standard": 0.0, "intro_discount": 0.0},
        },
    },
    "processes": {
        "payment_failure": {
            "rule": "alternating renewal: days in good standing ~ Geometric(p_fail) >= 1, "
                    "then days to recovery ~ Geometric(p_recover) >= 1; a failure on a "
                    "paused day is dropped (no billing while paused) with its recovery",
            "p_fail_per_day": 0.001,
            "p_recover_per_day": 0.08,
        },
        "plan_change": {
            "rule": "Poisson number with rate per day over tenure days 1..H-1, days "
                    "uniform (same-day repeats dropped); each moves the plan index by +1 "
                    "or +2 modulo 3 (levels order Seedling, Bloom, Orchard), each with "
                    "probability 0.5; the price follows the new plan's list price",
            "rate_per_day": 0.0008,
        },
        "winter_pause": {
            "rule": "every winter, each spell active on the pause day pauses with the "
                    "region's probability; pause day = 1 December + Uniform{0..20}; "
                    "resume after Uniform{60..100} days; no pause starts on a day in "
                    "payment recovery (failure day..recovery day inclusive); tenure of "
                    "the pause day >= 1",
            "spread_days": 20,
            "duration_days": [60, 100],
            "probability_by_region": {"south": 0.10, "east": 0.15, "north": 0.30,
                                      "west": 0.15},
        },
        "reactivation": {
            "rule": "after a churn, the customer starts a new spell with the cause's "
                    "probability, gap = min_gap + Geometric(1/mean_extra_gap) - 1 days; "
                    "plan = the plan at churn with probability same_plan, else drawn "
                    "from the signup shares; price = that day's list price; "
                    "prior_spells + 1; channel, region and arm carried",
            "probability": {"voluntary": 0.20, "involuntary": 0.30},
            "min_gap_days": 30,
            "mean_extra_gap_days": 120.0,
            "same_plan_probability": 0.6,
        },
    },
    "reasons": {
        "voluntary_if_price_ratio_above_1": {"too_expensive": 0.55, "not_using": 0.30,
                                             "moved": 0.15},
        "voluntary_otherwise": {"too_expensive": 0.25, "not_using": 0.55, "moved": 0.20},
        "involuntary_in_recovery": {"card_declined": 0.70, "card_expired": 0.30},
        "involuntary_not_in_recovery": {"card_expired": 1.0},
        "blank_voluntary_not_in_recovery": 0.08,
        "blank_involuntary_in_recovery": 0.10,
        "blank_rule": "a reason is left empty only where the rule 'no reason -> involuntary "
                      "if in payment recovery, else voluntary' gives the true cause",
    },
    "noise": {
        "email_opened_per_customer": 0.02,
        "gift_card_redeemed_rows": 7,
    },
    "defects": {
        "missing_id": 6,
        "unparseable_time": 5,
        "exact_duplicate": 12,
        "non_numeric_price": 4,
        "after_as_of": 8,
        "end_without_open_spell": 3,
        "before_first_start": 4,
        "rule": "every defective row is an extra row (a copy or an addition); removing "
                "them leaves exactly the simulated log",
    },
    "log": {
        "time_of_day": "uniform whole seconds in [06:00:00, 22:00:00) UTC",
        "row_order": "by occurred_at, then account, then kind order",
        "account_format": "QF + 7 digits, numbered in order of first signup",
    },
}
_v = _PARAMS["voluntary"]
_v["lam_days_if_price_ratio_enters_raw"] = _v["lam_days"] * math.exp(
    _v["coefficients"]["price_ratio"] / _v["alpha"])
del _v


def _freeze(x: Any) -> Any:
    if isinstance(x, dict):
        return MappingProxyType({k: _freeze(v) for k, v in x.items()})
    if isinstance(x, list):
        return tuple(_freeze(v) for v in x)
    return x


def _thaw(x: Any) -> Any:
    if isinstance(x, Mapping):
        return {k: _thaw(v) for k, v in x.items()}
    if isinstance(x, tuple):
        return [_thaw(v) for v in x]
    return x


TRUTH: Mapping[str, Any] = _freeze(_PARAMS)
"""The true parameters, read-only (the same numbers as ``demo_data/truth.json``)."""


def truth_dict() -> dict[str, Any]:
    """A plain, JSON-ready copy of :data:`TRUTH`."""
    return _thaw(TRUTH)


# --------------------------------------------------------------------------------------
# Calendar helpers
# --------------------------------------------------------------------------------------
_EPOCH = np.datetime64("1970-01-01", "D")


def _day(s: str) -> int:
    return int((np.datetime64(s, "D") - _EPOCH).astype(np.int64))


def _levels(name: str) -> list[str]:
    return list(TRUTH[name]["levels"])


def _coef_vec(cause: str, name: str, levels: list[str]) -> np.ndarray:
    c = TRUTH[cause]["coefficients"][name]
    return np.array([float(c[lv]) for lv in levels])


def _prices_cents() -> np.ndarray:
    p = TRUTH["plans"]
    before = np.rint(np.array(p["list_price_before_rise"]) * 100).astype(np.int64)
    after = np.rint(np.array(p["list_price_from_rise"]) * 100).astype(np.int64)
    return np.stack([before, after])  # [era, plan]


def _linear_predictor(cause: str, plan: np.ndarray, ratio: np.ndarray, paused: np.ndarray,
                      rec: np.ndarray, prior: np.ndarray, channel: np.ndarray,
                      region: np.ndarray, arm: np.ndarray) -> np.ndarray:
    """``beta . x`` of one cause on covariate segments (integer codes, one entry each)."""
    c = TRUTH[cause]["coefficients"]
    return (_coef_vec(cause, "plan", _levels("plans"))[plan]
            + c["price_ratio"] * (ratio - 1.0)
            + c["paused"] * paused + c["in_recovery"] * rec
            + c["prior_spells"] * prior
            + _coef_vec(cause, "channel", _levels("channels"))[channel]
            + _coef_vec(cause, "region", _levels("regions"))[region]
            + _coef_vec(cause, "arm", _levels("experiment"))[arm])
