"""Held-out scores of candidate models: free-run errors on data the model was not fitted on.

A candidate is judged by how well it simulates held-out data. Its state at the
start of a held-out record is unknown, and how it is found matters:

- **continued from the estimation data** (``warmups``): when the held-out
  record is the tail of a record whose head was used for estimation, the model
  is run through (the end of) that head from an initial state fitted to its
  first samples, and carries its state into the held-out part; every held-out
  sample is scored and none of them informed the state. This is the honest
  score of a model of a slow plant.
- **initial state from a leading window**: otherwise the state is fitted by
  least squares to the first ``window`` samples of the held-out record
  (:func:`ident.lti.simulate.estimate_initial_state`), and those samples are
  *not* scored, so a model cannot earn fit by explaining the stretch its
  initial state was chosen on.

Every candidate of one search is scored the same way on the same samples, so
their errors can be compared sample by sample (:mod:`ident.estimate.selection`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..assess.diagnostics import fit_percent
from ..lti.models import StateSpaceModel
from ..lti.simulate import add_free_response, free_response_matrix, simulate
from .data import Experiment

__all__ = ["HeldOutScore", "score_window", "held_out_score", "warmups_for", "initial_conditions"]

#: Fewest samples (beyond 20 per state) from which a constant output offset is
#: estimated together with the initial state.
_OFFSET_MIN_SAMPLES = 200

#: At most this many leading samples fit the initial conditions of an in-sample score.
IN_SAMPLE_WINDOW = 20_000


@dataclass(frozen=True, slots=True, eq=False)
class HeldOutScore:
    """Free-run errors of one model on held-out records.

    Attributes
    ----------
    errors : tuple of numpy.ndarray
        ``y - yhat`` of each record after the window, shape (N_k - window, p);
        empty tuple when the simulation diverged.
    fit : numpy.ndarray, shape (p,)
        Fit percent per output over the scored samples (all records pooled);
        ``-inf`` when the simulation diverged.
    """

    errors: tuple[np.ndarray, ...]
    fit: np.ndarray

    @property
    def mean_fit(self) -> float:
        """Mean of ``fit`` over the outputs (``-inf`` if any is not finite)."""
        return float(np.mean(self.fit)) if np.all(np.isfinite(self.fit)) else -np.inf

    @property
    def diverged(self) -> bool:
        """True when the simulation blew up."""
        return not self.errors


def score_window(parts: Sequence[Experiment], max_states: int) -> int:
    """Initial-state window: ``max(10 n, 50)`` samples, at most a quarter of the shortest record."""
    shortest = min(e.n_samples for e in parts)
    return int(max(1, min(max(10 * max_states, 50), shortest // 4)))


def held_out_score(model: StateSpaceModel, parts: Sequence[Experiment], window: int,
                   simulator=None, warmups: Sequence[Experiment | None] | None = None, *,
                   in_sample: bool = False) -> HeldOutScore:
    """Simulate ``model`` on each held-out record and collect its errors.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model at the records' sample time.
    parts : sequence of Experiment
        Held-out records (deviations from the operating point).
    window : int
        Leading samples of a record without warm-up used for the initial state and not scored.
    simulator : callable, optional
        ``simulator(u, x0) -> y`` replacing :func:`ident.lti.simulate.simulate`
        (an ARX model's own difference equations).
    warmups : sequence of Experiment or None, optional
        Per record, the estimation samples just before it (see the module
        docstring); ``None`` entries (or no sequence) use the window.
    in_sample : bool
        Score the records the model was fitted on: the initial conditions come
        from the first ``window`` samples and every sample is scored (the
        in-sample fit).

    Returns
    -------
    HeldOutScore
    """
    run = simulator if simulator is not None else (lambda u, x0: simulate(model, u, x0))
    warmups = list(warmups) if warmups is not None else [None] * len(parts)
    errors, ys = [], []
    with np.errstate(all="ignore"):
        for part, warm in zip(parts, warmups, strict=True):
            try:
                e = _record_errors(model, run, part, warm, window, in_sample)
            except (np.linalg.LinAlgError, ValueError, FloatingPointError):
                e = None
            if e is None:
                return HeldOutScore((), np.full(model.n_outputs, -np.inf))
            errors.append(e)
            ys.append(part.y[part.n_samples - e.shape[0]:])
        y = np.vstack(ys)
        fit = fit_percent(y, y - np.vstack(errors))
    fit = np.where(np.isfinite(fit), fit, -np.inf)
    return HeldOutScore(tuple(errors), fit)


def _record_errors(model: StateSpaceModel, run, part: Experiment, warm: Experiment | None,
                   window: int, in_sample: bool = False) -> np.ndarray | None:
    """Errors of one record: continued from its warm-up, or after an initial-state window.

    The constant output offset (the operating point need not be an equilibrium
    of the model over a finite record) is estimated where the initial state is:
    jointly on the leading window, then, with a warm-up, as the mean error over
    the rest of the warm-up.
    """
    if warm is not None and warm.n_samples > 0:
        count = min(warm.n_samples, max(20 * model.n_states, 200))
        u_all = np.vstack([warm.u, part.u])
        forced = run(u_all, None)  # the response from rest; the initial state's enters linearly
        x0, offset = initial_conditions(model, warm.u, warm.y, count, forced=forced[:count])
        y_all = _with_free_response(model, forced, x0)
        if not np.all(np.isfinite(y_all)):
            return None
        if warm.n_samples >= 2 * count:
            offset = np.mean(warm.y[count:] - y_all[count:warm.n_samples], axis=0)
        return part.y - y_all[warm.n_samples:] - offset
    forced = run(part.u, None)
    x0, offset = initial_conditions(model, part.u, part.y, window, forced=forced[:window])
    y_hat = _with_free_response(model, forced, x0)
    if not np.all(np.isfinite(y_hat)):
        return None
    start = 0 if in_sample else window
    return part.y[start:] - y_hat[start:] - offset


def _with_free_response(model: StateSpaceModel, forced: np.ndarray, x0: np.ndarray | None) -> np.ndarray:
    """Add the free response ``C A^k x0`` to ``forced`` (the simulation from ``x0``, by linearity)."""
    if x0 is None or not model.n_states:
        return forced
    out = forced if forced.flags.writeable else forced.copy()
    return add_free_response(model, x0, out)


def initial_conditions(model: StateSpaceModel, u: np.ndarray, y: np.ndarray,
                       count: int, *, forced: np.ndarray | None = None) -> tuple[np.ndarray | None, np.ndarray]:
    """Least-squares initial state and constant output offset from the first ``count`` samples.

    ``y[k] = C A^k x0 + offset + (forced response)[k]``; both enter linearly.
    On fewer than ``200 + 20 n`` samples the offset is left at zero and the
    state alone is fitted: over a short stretch a constant and a slow mode look
    alike. ``forced`` (at least ``count`` rows), when the caller has simulated
    the response from rest already. Returns ``(x0 or None for a static model,
    offset (p,))``; raises :class:`numpy.linalg.LinAlgError` when the model's
    response over the ``count`` samples is not finite (an unstable model).
    """
    n, p = model.n_states, model.n_outputs
    count = int(min(count, u.shape[0]))
    forced = simulate(model, u[:count]) if forced is None else forced[:count]
    if not n:
        return None, (np.mean(y[:count] - forced, axis=0) if count >= _OFFSET_MIN_SAMPLES else np.zeros(p))
    obs = free_response_matrix(model, count)
    if not (np.all(np.isfinite(obs)) and np.all(np.isfinite(forced))):
        # an unstable model's response overflows: no least-squares problem to solve (LAPACK
        # would print its own complaint about the non-finite matrix on standard output)
        raise np.linalg.LinAlgError("the model's response is not finite over the initial-state window")
    if count < _OFFSET_MIN_SAMPLES + 20 * n:
        x0, *_ = np.linalg.lstsq(obs, (y[:count] - forced).reshape(-1), rcond=None)
        return x0, np.zeros(p)
    lhs = np.hstack([obs, np.tile(np.eye(p), (count, 1))])
    sol, *_ = np.linalg.lstsq(lhs, (y[:count] - forced).reshape(-1), rcond=None)
    return sol[:n], sol[n:]


def warmups_for(validation: Sequence[Experiment], estimation: Sequence[Experiment],
                validation_ranges: Sequence[tuple[int, int]], estimation_ranges: Sequence[tuple[int, int]],
                limit: int | None = None) -> list[Experiment | None]:
    """For each held-out record, the estimation record that ends where it starts (its last ``limit`` samples).

    ``None`` for a held-out record no estimation record leads into.
    """
    out: list[Experiment | None] = []
    for (v0, _), _val in zip(validation_ranges, validation, strict=True):
        match = None
        for (_, e1), est in zip(estimation_ranges, estimation, strict=True):
            if e1 == v0 and est.n_samples:
                match = est if limit is None or est.n_samples <= limit else \
                    Experiment(est.u[est.n_samples - limit:], est.y[est.n_samples - limit:])
        out.append(match)
    return out
