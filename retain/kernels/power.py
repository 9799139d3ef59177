"""Planning and checking a comparison of two arms: events needed, power, balance.

Pure numpy (and ``scipy.special``) functions: no pandas, no I/O, no
validation. Entry points in :mod:`retain.decisions` (experiment plans and
verdicts) validate their inputs and build results.
"""

from __future__ import annotations

import numpy as np
from scipy import special

__all__ = [
    "detectable_hazard_ratio",
    "schoenfeld_events",
    "schoenfeld_power",
    "simpson_event_probability",
    "standardised_difference",
]


# ---------------------------------------------------------------- planning


def schoenfeld_events(hazard_ratio: float, power: float, alpha: float,
                      treated_fraction: float, sides: int = 2) -> float:
    """Events needed to detect ``hazard_ratio`` with a log-rank / Cox test.

    Schoenfeld (1983), "Sample-size formula for the proportional-hazards
    regression model", Biometrics 39(2) 499-503, eq. (1):

        D = (z_{1 - alpha/sides} + z_{power})^2 / (p (1 - p) (log HR)^2),

    with ``p`` the fraction allocated to treatment.
    """
    za = special.ndtri(1.0 - alpha / sides)
    zb = special.ndtri(power)
    p = treated_fraction
    return float((za + zb) ** 2 / (p * (1.0 - p) * np.log(hazard_ratio) ** 2))


def schoenfeld_power(events: float, hazard_ratio: float, alpha: float,
                     treated_fraction: float, sides: int = 2) -> float:
    """Power reached with ``events`` events: the inverse of :func:`schoenfeld_events`."""
    za = special.ndtri(1.0 - alpha / sides)
    p = treated_fraction
    z = np.sqrt(events * p * (1.0 - p)) * abs(np.log(hazard_ratio)) - za
    return float(special.ndtr(z))


def detectable_hazard_ratio(events: float, power: float, alpha: float,
                            treated_fraction: float, sides: int = 2) -> float:
    """Smallest effect (HR < 1) detectable with ``events`` events (Schoenfeld, 1983)."""
    za = special.ndtri(1.0 - alpha / sides)
    zb = special.ndtri(power)
    p = treated_fraction
    if events <= 0:
        return float("nan")
    return float(np.exp(-(za + zb) / np.sqrt(events * p * (1.0 - p))))


def simpson_event_probability(s_follow: float, s_mid: float, s_end: float) -> float:
    """Probability of an event under uniform accrual, by Simpson's rule.

    Schoenfeld (1983), Biometrics 39(2), p. 503: with accrual over ``a`` and
    further follow-up ``f``, ``P(event) = 1 - (S(f) + 4 S(f + a/2) + S(f + a)) / 6``.
    """
    return float(1.0 - (s_follow + 4.0 * s_mid + s_end) / 6.0)



# ---------------------------------------------------------------- balance


def standardised_difference(x_treat: np.ndarray, w_treat: np.ndarray,
                            x_ctrl: np.ndarray, w_ctrl: np.ndarray,
                            binary: bool = False) -> float:
    """Standardised mean difference between two arms.

    Austin (2009), "Balance diagnostics for comparing the distribution of
    baseline covariates between treatment groups in propensity-score matched
    samples", Statistics in Medicine 28(25) 3083-3107: continuous
    ``(m_t - m_c) / sqrt((s_t^2 + s_c^2) / 2)``; binary (a level indicator)
    ``(p_t - p_c) / sqrt((p_t (1 - p_t) + p_c (1 - p_c)) / 2)``.
    """
    mt = np.average(x_treat, weights=w_treat)
    mc = np.average(x_ctrl, weights=w_ctrl)
    if binary:
        vt, vc = mt * (1 - mt), mc * (1 - mc)
    else:
        vt = np.average((x_treat - mt) ** 2, weights=w_treat)
        vc = np.average((x_ctrl - mc) ** 2, weights=w_ctrl)
    pooled = np.sqrt((vt + vc) / 2.0)
    if pooled == 0:
        return 0.0 if mt == mc else float("inf")
    return float((mt - mc) / pooled)
