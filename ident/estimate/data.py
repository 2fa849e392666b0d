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

__all__ = ["Experiment", "as_experiments"]


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
