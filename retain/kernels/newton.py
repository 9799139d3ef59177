r"""Newton's method with step halving: the one solver every iterating model uses.

Pure numpy, no validation. The caller supplies the objective as
``objective(theta, full) -> (value, gradient, information, state)``: the
function to *maximise*, its gradient and its information matrix
:math:`\mathcal I = -\nabla^2` (positive definite near a maximum), plus any
state the caller wants back at the solution (Cox keeps its risk scores).
With ``full=False`` only the value is needed (gradient, information and
state may be ``None``): shortened steps are judged on the value alone.

One iteration (Nocedal & Wright 2006, *Numerical Optimization*, sec. 3.1 and
3.5):

1. Solve :math:`\mathcal I s = U` for the Newton step :math:`s`.
2. Try :math:`\theta + t s` for :math:`t = 1, 1/2, 1/4, \dots` (at most
   ``max_halvings`` halvings) until the value does not fall:
   :math:`\ell_{new} \ge \ell - 10^{-12}(1 + |\ell|)` and finite. The full step
   is evaluated with every derivative (it is nearly always taken: one pass);
   shorter ones on the value alone, and the accepted point is then evaluated
   in full.

Two convergence rules, each with its own way of solving for the step:

``"standard_errors"`` (the Cox partial likelihood)
    :math:`s = \mathcal I^{-1} U` by inversion; converged when every component
    of the step is below ``tol`` standard errors,
    :math:`\max_j |s_j| / \sqrt{[\mathcal I^{-1}]_{jj}} < \text{tol}`, or when a
    full step changes the value by less than :math:`10^{-14}(1 + |\ell|)` while
    the step is below :math:`10^{-4}` standard errors (the round-off floor).
``"decrement"`` (parametric and renewal likelihoods on log scales)
    Cholesky factor of :math:`\mathcal I`, with a Levenberg ridge added when it
    is not positive definite; steps longer than ``max_step`` in any coordinate
    are shortened first; converged when the Newton decrement
    :math:`U^\top s / 2` falls below ``tol`` with no ridge (Boyd & Vandenberghe
    2004, *Convex Optimization*, sec. 9.5.1).

The result is a frozen :class:`NewtonSolution`; every iteration leaves one
:class:`NewtonStep` in its history, which each model turns into the form it
publishes (:meth:`NewtonStep.as_row`, :meth:`NewtonStep.as_dict`).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, NamedTuple

import numpy as np

__all__ = ["MAX_LOG_STEP", "RULES", "NewtonSolution", "NewtonStep", "hessian_objective",
           "newton_maximize"]

#: the convergence rules :func:`newton_maximize` knows
RULES = ("standard_errors", "decrement")
#: the longest step component for parameters on log scales (a factor of about 150):
#: caps wild first steps of the parametric and renewal fits
MAX_LOG_STEP = 5.0

Objective = Callable[[np.ndarray, bool], tuple[float, Any, Any, Any]]


class NewtonStep(NamedTuple):
    """One iteration: where it started and what the step did.

    ``iteration`` counts from 0. ``step_se`` is the largest step component in
    standard errors (rule ``"standard_errors"``; NaN when none was computed),
    ``decrement`` the Newton decrement and ``ridge`` the Levenberg ridge
    (rule ``"decrement"``; ``None`` when the iteration stopped before a step),
    ``halvings`` how often the step was halved and ``step_length`` the
    fraction taken (``None`` when no step was taken), ``note`` why the solver
    stopped here, if it stopped for a reason other than convergence.
    """

    iteration: int
    loglik: float
    step_se: float
    halvings: int = 0
    decrement: float | None = None
    max_gradient: float | None = None
    ridge: float | None = None
    step_length: float | None = None
    note: str | None = None

    def as_row(self) -> tuple:
        """``(iteration from 1, objective, max |step| in SE, halvings)``."""
        return (self.iteration + 1, self.loglik, self.step_se, self.halvings)

    def as_dict(self) -> dict[str, Any]:
        """``iteration`` (from 0), ``loglik`` and whichever step figures exist."""
        out: dict[str, Any] = {"iteration": self.iteration, "loglik": self.loglik}
        if self.decrement is not None:
            out.update(decrement=self.decrement, max_gradient=self.max_gradient,
                       ridge=self.ridge)
        if self.step_length is not None:
            out["step_length"] = self.step_length
        if self.note is not None:
            out["note"] = self.note
        return out


@dataclass(frozen=True)
class NewtonSolution:
    """Where Newton's method stopped.

    ``params``, ``loglik``, ``grad`` and ``info`` (the information, minus the
    Hessian) at the last accepted point; ``start_loglik``, ``start_grad``,
    ``start_info`` at the starting point (likelihood-ratio and score tests);
    ``iterations`` the iterations begun, ``halvings`` the step halvings over all
    of them, ``history`` one :class:`NewtonStep` per iteration (the round-off
    floor of rule ``"standard_errors"`` adds one more), ``state`` the
    objective's state at ``params``.
    """

    params: np.ndarray
    loglik: float
    grad: np.ndarray
    info: np.ndarray
    converged: bool
    iterations: int
    halvings: int
    history: tuple[NewtonStep, ...]
    start_loglik: float
    start_grad: np.ndarray
    start_info: np.ndarray
    state: Any = None

    @property
    def hessian(self) -> np.ndarray:
        """Minus the information: the Hessian of the maximised function."""
        return -self.info

    @property
    def note(self) -> str | None:
        """Why the solver stopped, when it was not convergence."""
        return self.history[-1].note if self.history else None


def hessian_objective(fun: Callable[..., tuple]) -> Objective:
    """The solver's objective from ``fun(theta, derivatives=...) -> (value, gradient,
    hessian)``, the form the parametric and renewal likelihoods take (no state)."""
    def objective(theta: np.ndarray, full: bool) -> tuple:
        value, grad, hess = fun(theta, derivatives=full)
        return value, grad, None if hess is None else -hess, None
    return objective


def _accept(value: float, current: float) -> bool:
    return bool(np.isfinite(value) and value >= current - 1e-12 * (1.0 + abs(current)))


def _step_by_inverse(info: np.ndarray, grad: np.ndarray) -> tuple[np.ndarray, float]:
    """Newton step and its largest component in standard errors (may raise LinAlgError)."""
    inverse = np.linalg.inv(info)
    step = inverse @ grad
    if not step.size:
        return step, 0.0
    sd = np.sqrt(np.abs(np.diag(inverse)))
    return step, float(np.max(np.abs(step) / np.where(sd > 0, sd, 1.0)))


def _step_by_cholesky(info: np.ndarray, grad: np.ndarray) -> tuple[np.ndarray, float] | None:
    """Newton step from a Cholesky factor, with the smallest Levenberg ridge that
    makes the information positive definite (None if none of 60 does)."""
    k = info.shape[0]
    ridge = 0.0
    scale = float(np.max(np.abs(np.diag(info)))) if k else 1.0
    scale = scale if scale > 0 else 1.0
    for _ in range(60):
        try:
            chol = np.linalg.cholesky(info + ridge * np.eye(k))
            break
        except np.linalg.LinAlgError:
            ridge = max(ridge * 10.0, 1e-10 * scale)
    else:
        return None
    return np.linalg.solve(chol.T, np.linalg.solve(chol, grad)), ridge


def _all_finite(value: float, grad: np.ndarray, info: np.ndarray) -> bool:
    return bool(np.isfinite(value) and np.all(np.isfinite(grad)) and np.all(np.isfinite(info)))


def newton_maximize(objective: Objective, theta0: np.ndarray, *, rule: str = "decrement",
                    tol: float = 1e-14, max_iter: int = 100, max_halvings: int = 40,
                    max_step: float | None = None,
                    check_start: Callable[[np.ndarray], None] | None = None
                    ) -> NewtonSolution:
    """Maximise ``objective`` from ``theta0`` by Newton's method with step halving.

    ``rule`` is one of :data:`RULES` (see the module's docstring);
    ``max_step`` caps the longest step component (``None``: no cap);
    ``check_start``, if given, is called with the information at ``theta0``
    before the first step (a caller's check for collinear columns; it may raise).
    """
    if rule not in RULES:
        raise ValueError(f"rule must be one of {RULES}, got {rule!r}")
    by_se = rule == "standard_errors"
    theta = np.array(theta0, dtype=np.float64)
    ll, grad, info, state = objective(theta, True)
    start = (ll, grad, info)
    if check_start is not None:
        check_start(info)
    history: list[NewtonStep] = []
    converged = False
    iterations = halvings_total = 0
    for it in range(max_iter):
        iterations = it + 1
        if not _all_finite(ll, grad, info):
            history.append(NewtonStep(it, ll, float("nan"), note="non-finite value"))
            break
        ridge = 0.0
        if by_se:
            try:
                step, size = _step_by_inverse(info, grad)
            except np.linalg.LinAlgError:
                history.append(NewtonStep(it, ll, float("nan"),
                                          note="information not invertible"))
                break
            if not np.isfinite(size):
                history.append(NewtonStep(it, ll, size, note="non-finite step"))
                break
            stop = size < tol
        else:
            solved = _step_by_cholesky(info, grad)
            if solved is None:
                history.append(NewtonStep(it, ll, float("nan"),
                                          note="information not invertible"))
                break
            step, ridge = solved
            size = float("nan")
        decrement = float(grad @ step) / 2.0
        biggest = float(np.max(np.abs(step))) if step.size else 0.0
        if max_step is not None and biggest > max_step:
            step = step * (max_step / biggest)
        record = NewtonStep(it, ll, size, decrement=decrement,
                            max_gradient=float(np.max(np.abs(grad))) if grad.size else 0.0,
                            ridge=ridge)
        if not by_se:
            stop = decrement < tol and ridge == 0.0
        if stop:
            history.append(record)
            converged = True
            break
        # the full step is nearly always taken: evaluate everything at once
        t = 1.0
        cand = theta + step
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            ll_c, grad_c, info_c, state_c = objective(cand, True)
            halvings = 0
            ok = _accept(ll_c, ll)
            while not ok and halvings < max_halvings:
                halvings += 1
                t *= 0.5
                cand = theta + t * step
                ll_c = objective(cand, False)[0]
                ok = _accept(ll_c, ll)
        if not ok:
            history.append(record._replace(halvings=halvings + 1,
                                           note="step halving failed"))
            break
        history.append(record._replace(halvings=halvings, step_length=t))
        halvings_total += halvings
        theta = cand
        previous = ll
        if halvings == 0:
            ll, grad, info, state = ll_c, grad_c, info_c, state_c
        else:
            del state_c
            ll, grad, info, state = objective(theta, True)
        if (by_se and halvings == 0 and abs(ll - previous) < 1e-14 * (1 + abs(ll))
                and size < 1e-4):
            history.append(NewtonStep(it + 1, ll, float("nan")))
            converged = True
            break
    return NewtonSolution(params=theta, loglik=ll, grad=grad, info=info, converged=converged,
                          iterations=iterations, halvings=halvings_total,
                          history=tuple(history), start_loglik=start[0],
                          start_grad=start[1], start_info=start[2], state=state)
