"""Damped Gauss-Newton (Levenberg-Marquardt) minimisation of a sum of squares.

The estimators of :mod:`ident.estimate` that minimise a prediction error
(:mod:`ident.estimate.refine` for state-space models, :mod:`ident.estimate.polynomial`
for output-error, ARMAX and Box-Jenkins structures) describe their problem by
two operations and leave the iteration to :func:`minimize`:

- ``loss(point) -> float``: the sum of squared (weighted) errors at a point,
  ``inf`` where the point is not admissible (an unstable predictor);
- ``linearize(point) -> Linearization``: the R factor and the rotated errors
  of the Jacobian at the point, accumulated over the data so that memory does
  not grow with the log length, and ``step(point, h, lin)``: the point moved
  by the increment ``h`` in the local coordinates of that linearisation.

Working on the R factor of ``[J | e]`` instead of ``J`` keeps every step
``O(d^3)`` whatever the number of samples, and solves the damped normal
equations through a QR factorisation (never by forming ``J^T J``).

References
----------
.. [1] D. W. Marquardt, "An algorithm for least-squares estimation of
   nonlinear parameters", *J. SIAM* 11(2), 431-441, 1963.
.. [2] K. Madsen, H. B. Nielsen and O. Tingleff, *Methods for Non-Linear Least
   Squares Problems*, 2nd ed., IMM, Technical University of Denmark, 2004,
   sec. 3.2 (the damping update used here).
.. [3] J. J. Moré, "The Levenberg-Marquardt algorithm: implementation and
   theory", in *Numerical Analysis*, Lecture Notes in Mathematics 630,
   Springer, 1978, 105-116 (scaling by the column norms of J).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = ["Linearization", "Minimization", "minimize", "STOP_REASONS"]

#: Why an iteration stopped: the loss no longer decreases by more than the
#: tolerance (``"converged"``), the step became negligible (``"small_step"``),
#: no admissible step could be found because each one left the admissible set
#: (``"boundary"``, for example the stability boundary of the predictor), the
#: damping grew without finding a decrease (``"no_progress"``) or the
#: iteration limit was reached (``"max_iterations"``).
STOP_REASONS = ("converged", "small_step", "boundary", "no_progress", "max_iterations")

#: Initial damping ([2]_, tau). The damping multiplies ``D^2 = diag(J^T J)``
#: (Marquardt's scaling), so it is a pure number: 1e-3 adds a thousandth to
#: every diagonal entry.
_TAU = 1e-3
#: Damping above this: give up (the step would be a vanishing gradient step).
_MU_MAX = 1e12


@dataclass(frozen=True, slots=True, eq=False)
class Linearization:
    """The least-squares problem ``min ||e + J h||^2`` reduced to ``d`` rows.

    Attributes
    ----------
    R : numpy.ndarray, shape (d, d)
        Upper-triangular factor of ``J`` (``J = Q R``).
    z : numpy.ndarray, shape (d,)
        ``Q^T e``.
    loss : float
        ``||e||^2`` at the point.
    context : object
        Whatever the problem needs to apply a step (the local coordinates).
    """

    R: np.ndarray
    z: np.ndarray
    loss: float
    context: Any = None


@dataclass(frozen=True, slots=True, eq=False)
class Minimization:
    """Result of :func:`minimize`.

    Attributes
    ----------
    point : object
        The final point.
    loss : float
        Its loss.
    initial_loss : float
        The loss at the start.
    iterations : int
        Accepted steps.
    evaluations : int
        Loss evaluations (accepted and rejected trial points).
    stop_reason : str
        One of :data:`STOP_REASONS`.
    history : tuple of float
        The loss after each accepted step (first entry: the start); never increasing.
    rejected_inadmissible : int
        Trial points refused because they were not admissible.
    linearization : Linearization
        The linearisation at the final point (for covariances).
    """

    point: Any
    loss: float
    initial_loss: float
    iterations: int
    evaluations: int
    stop_reason: str
    history: tuple[float, ...]
    rejected_inadmissible: int
    linearization: Linearization

    @property
    def converged(self) -> bool:
        """True when the loss or the step stopped changing (a local minimum)."""
        return self.stop_reason in ("converged", "small_step")


def _damped_step(lin: Linearization, mu: float, scale: np.ndarray) -> tuple[np.ndarray, float]:
    """Solve ``min ||R h + z||^2 + mu ||diag(scale) h||^2``; return ``h`` and the predicted decrease."""
    d = lin.R.shape[0]
    stacked = np.vstack([lin.R, math.sqrt(mu) * np.diag(scale)])
    rhs = np.concatenate([-lin.z, np.zeros(d)])
    q, r = np.linalg.qr(stacked)
    h = np.linalg.lstsq(r, q.T @ rhs, rcond=None)[0]
    resid = lin.R @ h + lin.z
    predicted = float(lin.z @ lin.z - resid @ resid)
    return h, predicted


def minimize(
    point: Any,
    loss: Callable[[Any], float],
    linearize: Callable[[Any], Linearization],
    step: Callable[[Any, np.ndarray, Linearization], Any],
    *,
    max_iterations: int = 50,
    gtol: float = 0.0,
    rtol: float = 1e-10,
    xtol: float = 1e-10,
    relinearize_last: bool = True,
) -> Minimization:
    """Minimise a sum of squares by Levenberg-Marquardt steps from ``point``.

    Parameters
    ----------
    point : object
        Start (must be admissible: ``loss(point)`` finite).
    loss, linearize, step : callable
        The problem (see the module docstring).
    max_iterations : int
        Largest number of accepted steps.
    gtol : float
        Stop when a full Gauss-Newton step would lower the loss by at most
        ``gtol`` times the loss (``||z||^2 <= gtol ||e||^2``). Statistically,
        ``||z||^2 / sigma^2`` is the squared length of the Gauss-Newton step
        measured in standard deviations of the estimate, so ``gtol =
        eps^2 / (number of residuals)`` stops when the remaining step is
        ``eps`` standard deviations long.
    rtol : float
        Stop when an accepted step lowers the loss by less than ``rtol`` times the loss.
    xtol : float
        Stop when the scaled step ``||diag(scale) h||`` is below ``xtol`` times
        ``sqrt(d)`` (the size of the scaled problem).
    relinearize_last : bool
        Linearise again after the last step the iteration limit allows (default
        ``True``). ``False`` saves a pass over the data when the caller needs no
        linearisation at the final point; ``linearization`` is then that of the
        point before the last step.

    Returns
    -------
    Minimization

    Raises
    ------
    ValueError
        The starting point is not admissible.

    Notes
    -----
    Each iteration solves ``(J^T J + mu D^2) h = -J^T e`` with ``D`` the column
    norms of ``J`` (Marquardt's scaling, invariant to the units of the
    parameters [1]_ [3]_) through a QR factorisation of ``[R; sqrt(mu) D]``.
    A trial point is accepted when its loss is lower; the gain ratio
    ``rho = (F - F_new) / (predicted decrease)`` then lowers the damping by
    ``max(1/3, 1 - (2 rho - 1)^3)``, a refused point raises it by a factor
    that doubles each time ([2]_, eq. 3.16). Points where ``loss`` is
    infinite (not admissible) are refused like points that raise the loss, so
    the iteration never leaves the admissible set and the loss never
    increases; when the search ends next to points it had to refuse as
    inadmissible the reason is ``"boundary"``.
    """
    if not math.isfinite(float(loss(point))):
        raise ValueError("the starting point is not admissible")
    state = _Search(point, linearize(point))
    reason = "max_iterations"
    while state.iterations < max_iterations:
        last = state.iterations + 1 >= max_iterations and not relinearize_last
        reason = _iterate(state, loss, linearize, step, gtol, rtol, xtol, relinearize=not last)
        if reason is not None:
            break
        reason = "max_iterations"
    if state.near_boundary and reason != "max_iterations":
        reason = "boundary"
    return Minimization(
        point=state.point,
        loss=state.loss,
        initial_loss=state.history[0],
        iterations=state.iterations,
        evaluations=state.evaluations,
        stop_reason=reason,
        history=tuple(state.history),
        rejected_inadmissible=state.inadmissible,
        linearization=state.lin,
    )


class _Search:
    """The mutable state of one :func:`minimize` run."""

    def __init__(self, point: Any, lin: Linearization) -> None:
        self.point = point
        self.lin = lin
        self.loss = float(lin.loss)
        self.history = [self.loss]
        self.mu = _TAU
        self.nu = 2.0
        self.evaluations = 1
        self.iterations = 0
        self.inadmissible = 0
        self.near_boundary = False  # an inadmissible trial led to the current point
        self.refused_here = False  # an inadmissible trial while looking for the next step


def _iterate(state: _Search, loss, linearize, step, gtol: float, rtol: float, xtol: float, *,
             relinearize: bool = True) -> str | None:
    """Find one accepted step (or a reason to stop); ``None`` to continue."""
    lin = state.lin
    if lin.R.shape[0] == 0 or float(lin.z @ lin.z) <= gtol * state.loss:
        return "converged"
    while True:
        scale = np.sqrt(np.einsum("ij,ij->j", lin.R, lin.R))
        scale = np.maximum(scale, 1e-12 * max(float(np.max(scale)), 1e-300))
        h, predicted = _damped_step(lin, state.mu, scale)
        if float(np.linalg.norm(scale * h)) <= xtol * math.sqrt(scale.size):
            return "small_step"
        if predicted <= 0.0:
            return "converged"
        trial = step(state.point, h, lin)
        f_new = float(loss(trial))
        state.evaluations += 1
        if math.isfinite(f_new) and f_new < state.loss:
            rho = (state.loss - f_new) / predicted
            state.mu *= max(1.0 / 3.0, 1.0 - (2.0 * rho - 1.0) ** 3)
            state.nu = 2.0
            decrease = state.loss - f_new
            state.point, state.loss = trial, f_new
            state.iterations += 1
            state.history.append(f_new)
            state.near_boundary, state.refused_here = state.refused_here, False
            if not relinearize:
                return "max_iterations"
            state.lin = linearize(trial)
            return "converged" if decrease <= rtol * f_new else None
        if not math.isfinite(f_new):
            state.inadmissible += 1
            state.refused_here = state.near_boundary = True
        state.mu *= state.nu
        state.nu *= 2.0
        if state.mu > _MU_MAX:
            return "no_progress"
