"""Input/output records handed to the estimators.

An :class:`Experiment` is one contiguous stretch of samples: the estimators never
treat the end of one experiment and the start of the next as neighbours.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .._validate import as_signal
from ..errors import OptionError

__all__ = ["Experiment", "as_experiments", "shift_inputs", "working_stretches"]


@dataclass(frozen=True, slots=True, eq=False)
class Experiment:
    """One contiguous record of inputs and outputs (usually deviations from the operating point).

    Parameters
    ----------
    u : array_like, shape (N, m)
        Inputs.
    y : array_like, shape (N, p)
        Outputs.
    """

    u: np.ndarray
    y: np.ndarray

    def __post_init__(self) -> None:
        u = np.array(as_signal(self.u, "u", ndim=2), dtype=float, copy=True)
        y = np.array(as_signal(self.y, "y", ndim=2), dtype=float, copy=True)
        if u.shape[0] != y.shape[0]:
            raise OptionError(
                f"u and y must have the same number of samples; got {u.shape[0]} and {y.shape[0]}"
            )
        u.flags.writeable = False
        y.flags.writeable = False
        object.__setattr__(self, "u", u)
        object.__setattr__(self, "y", y)

    @classmethod
    def _owned(cls, u: np.ndarray, y: np.ndarray) -> Experiment:
        """Wrap float64 arrays made for this record without copying them (marked read-only).

        For :func:`ident.estimate.preprocess.prepare`, whose deviation arrays
        nobody else holds: a 1e7-sample log is then held once, not twice.
        """
        if u.dtype != np.float64 or y.dtype != np.float64 or u.ndim != 2 or y.ndim != 2 \
                or u.shape[0] != y.shape[0]:
            return cls(u, y)
        u.flags.writeable = False
        y.flags.writeable = False
        obj = object.__new__(cls)
        object.__setattr__(obj, "u", u)
        object.__setattr__(obj, "y", y)
        return obj

    @property
    def n_samples(self) -> int:
        """Number of samples ``N``."""
        return self.u.shape[0]

    @property
    def n_inputs(self) -> int:
        """Number of inputs ``m``."""
        return self.u.shape[1]

    @property
    def n_outputs(self) -> int:
        """Number of outputs ``p``."""
        return self.y.shape[1]


def as_experiments(data: Experiment | Sequence[Experiment]) -> tuple[Experiment, ...]:
    """Return a non-empty tuple of experiments with matching signal counts."""
    items = (data,) if isinstance(data, Experiment) else tuple(data)
    if not items:
        raise OptionError("at least one experiment is needed; got none")
    for k, item in enumerate(items):
        if not isinstance(item, Experiment):
            raise OptionError(f"experiment {k} must be an Experiment; got {type(item).__name__}")
    m, p = items[0].n_inputs, items[0].n_outputs
    for k, item in enumerate(items[1:], start=1):
        if (item.n_inputs, item.n_outputs) != (m, p):
            raise OptionError(
                f"experiment {k} has {item.n_inputs} inputs and {item.n_outputs} outputs; "
                f"experiment 0 has {m} and {p}"
            )
    return items


def shift_inputs(data: Experiment | Sequence[Experiment], shifts: Sequence[int]) -> tuple[Experiment, ...]:
    """Experiments whose input ``j`` is delayed by ``shifts[j]`` samples.

    Each experiment loses its first ``max(shifts)`` samples (where some shifted
    input would reach before the record starts); input ``j`` at sample ``k`` is
    then the recorded ``u_j[k - shifts[j]]``. A model fitted to the result,
    put behind :func:`ident.lti.input_delay.with_input_delays` with the same
    shifts, explains the original record.
    """
    items = as_experiments(data)
    shifts = tuple(int(s) for s in shifts)
    if len(shifts) != items[0].n_inputs or any(s < 0 for s in shifts):
        raise OptionError(f"shifts must hold {items[0].n_inputs} non-negative sample counts; got {list(shifts)!r}")
    top = max(shifts)
    if top == 0:
        return items
    out = []
    for e in items:
        N = e.n_samples
        if N <= top + 1:
            raise OptionError(f"an experiment of {N} samples is too short for an input delay of {top} samples")
        u = np.column_stack([e.u[top - s:N - s, j] for j, s in enumerate(shifts)])
        out.append(Experiment(u, e.y[top:]))
    return tuple(out)


def working_stretches(data: Experiment | Sequence[Experiment], limit: int, *,
                      stretches: int = 4, min_length: int = 2000) -> tuple[Experiment, ...]:
    """At most ``limit`` samples of the data as up to ``stretches`` evenly spread pieces per experiment.

    The data themselves when they hold at most ``limit`` samples. Otherwise each
    experiment contributes its share of ``limit`` as contiguous stretches of at
    least ``min_length`` samples (fewer stretches when the share is small), spread
    evenly from its start to its end, so slow drifts and changes along the record
    are represented. The stretches are separate experiments.
    """
    items = as_experiments(data)
    total = sum(e.n_samples for e in items)
    if total <= limit:
        return items
    out = []
    for e in items:
        take = int(e.n_samples * limit / total)
        if take < 50:
            continue
        count = max(1, min(stretches, take // max(min_length, 1)))
        length = take // count
        starts = np.linspace(0, e.n_samples - length, count).astype(int)
        out.extend(Experiment(e.u[s:s + length], e.y[s:s + length]) for s in starts)
    return tuple(out) if out else items
