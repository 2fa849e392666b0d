"""Linear time-invariant model types: state space and transfer function.

Both are frozen dataclasses holding read-only float copies of their arrays.
A ``sample_time`` of ``None`` means continuous time; a positive float is the
sample time of a discrete-time model in seconds.

Conventions
-----------
State space, discrete time::

    x[k+1] = A x[k] + B u[k]
    y[k]   = C x[k] + D u[k]

and ``dx/dt = A x + B u`` in continuous time. Inputs and outputs are
*deviations* from ``operating_point`` (the levels the model was linearised
around); ``operating_point`` is ``None`` when unknown.

Transfer function: ``num[i][j]`` and ``den[i][j]`` are the numerator and
denominator of the channel from input ``j`` to output ``i``, as coefficient
arrays in descending powers of z (or s), as :mod:`scipy.signal` uses.
Denominators are monic.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from typing import Any

import numpy as np

from .._validate import as_matrix, names_tuple, sample_time_value
from ..errors import OptionError

__all__ = ["OperatingPoint", "StateSpaceModel", "TransferFunctionModel"]


def _frozen_copy(x: Any, name: str, ndim: int = 2) -> np.ndarray:
    arr = np.array(x, dtype=float, copy=True)
    if ndim == 2 and arr.ndim < 2:
        arr = arr.reshape((arr.size, 1)) if arr.ndim == 1 else arr.reshape((1, 1))
    if arr.ndim != ndim:
        raise OptionError(f"{name} must be {ndim}-D; got shape {arr.shape}")
    if not np.all(np.isfinite(arr)):
        raise OptionError(f"{name} must be finite")
    arr.flags.writeable = False
    return arr


def _set(obj: Any, name: str, value: Any) -> None:
    object.__setattr__(obj, name, value)


@dataclass(frozen=True, slots=True, eq=False)
class OperatingPoint:
    """Input and output levels a model is linearised around.

    Parameters
    ----------
    inputs : array_like, shape (n_inputs,)
        Input levels, in the inputs' units.
    outputs : array_like, shape (n_outputs,)
        Output levels, in the outputs' units.
    """

    inputs: np.ndarray
    outputs: np.ndarray

    def __post_init__(self) -> None:
        _set(self, "inputs", _frozen_copy(np.ravel(self.inputs), "operating_point.inputs", 1))
        _set(self, "outputs", _frozen_copy(np.ravel(self.outputs), "operating_point.outputs", 1))


@dataclass(frozen=True, slots=True, eq=False)
class StateSpaceModel:
    """A linear state-space model ``(A, B, C, D)``.

    Parameters
    ----------
    A : array_like, shape (n, n)
    B : array_like, shape (n, m)
    C : array_like, shape (p, n)
    D : array_like, shape (p, m)
    sample_time : float or None
        Sample time in seconds; ``None`` for a continuous-time model.
    inputs, outputs : sequence of str, optional
        Signal names; default ``u1, u2, ...`` and ``y1, y2, ...``.
    input_units, output_units : sequence of str, optional
        Units of each signal; default empty strings.
    operating_point : OperatingPoint, optional
        Levels the model is linearised around; ``None`` when unknown.
    noise_gain : array_like, shape (n, p), optional
        Kalman gain ``K`` of the innovation form
        ``x[k+1] = A x + B u + K e``; ``None`` when the model has no noise model.
    noise_states : int
        How many of the last states belong to the noise model only (default 0).
        Such states are driven by the innovations alone (their rows of ``B``
        are zero and ``A`` couples them to no plant state), as in the
        innovations form of a Box-Jenkins model, where the disturbance has
        dynamics of its own. They shape the one-step predictor but not the
        response to the inputs, so :meth:`poles` leaves them out
        (:meth:`noise_poles` lists them). Needs ``noise_gain``.

    Notes
    -----
    A model with zero states (a static gain) has ``A`` of shape ``(0, 0)``.
    """

    A: np.ndarray
    B: np.ndarray
    C: np.ndarray
    D: np.ndarray
    sample_time: float | None = None
    inputs: tuple[str, ...] | None = None
    outputs: tuple[str, ...] | None = None
    input_units: tuple[str, ...] | None = None
    output_units: tuple[str, ...] | None = None
    operating_point: OperatingPoint | None = None
    noise_gain: np.ndarray | None = field(default=None)
    noise_states: int = 0

    def __post_init__(self) -> None:
        A = _frozen_copy(self.A, "A") if np.size(self.A) else np.zeros((0, 0))
        n = A.shape[0]
        if A.shape != (n, n):
            raise OptionError(f"A must be square; got shape {A.shape}")
        D = _frozen_copy(self.D, "D")
        p, m = D.shape
        B = _frozen_copy(self.B, "B") if n else np.zeros((0, m))
        C = _frozen_copy(self.C, "C") if n else np.zeros((p, 0))
        if B.shape != (n, m):
            raise OptionError(f"B must have shape ({n}, {m}) to match A and D; got {B.shape}")
        if C.shape != (p, n):
            raise OptionError(f"C must have shape ({p}, {n}) to match A and D; got {C.shape}")
        for arr in (A, B, C):
            arr.flags.writeable = False
        _set(self, "A", A)
        _set(self, "B", B)
        _set(self, "C", C)
        _set(self, "D", D)
        _set(self, "sample_time", None if self.sample_time is None else sample_time_value(self.sample_time))
        _set(self, "inputs", names_tuple(self.inputs, "inputs", m, "u"))
        _set(self, "outputs", names_tuple(self.outputs, "outputs", p, "y"))
        units_in = ("",) * m if self.input_units is None else self.input_units
        units_out = ("",) * p if self.output_units is None else self.output_units
        _set(self, "input_units", names_tuple(units_in, "input_units", m, ""))
        _set(self, "output_units", names_tuple(units_out, "output_units", p, ""))
        op = self.operating_point
        if op is not None:
            if not isinstance(op, OperatingPoint):
                raise OptionError("operating_point must be an OperatingPoint or None")
            if op.inputs.shape != (m,) or op.outputs.shape != (p,):
                raise OptionError(
                    f"operating_point must hold {m} input and {p} output levels; got "
                    f"{op.inputs.size} and {op.outputs.size}"
                )
        if self.noise_gain is not None:
            _set(self, "noise_gain", as_matrix(self.noise_gain, "noise_gain", (n, p)).copy())
            self.noise_gain.flags.writeable = False
        _check_noise_states(self)

    @property
    def n_states(self) -> int:
        """Number of states ``n``."""
        return self.A.shape[0]

    @property
    def n_inputs(self) -> int:
        """Number of inputs ``m``."""
        return self.D.shape[1]

    @property
    def n_outputs(self) -> int:
        """Number of outputs ``p``."""
        return self.D.shape[0]

    @property
    def is_discrete(self) -> bool:
        """True for a discrete-time model."""
        return self.sample_time is not None

    @property
    def n_plant_states(self) -> int:
        """States that carry the response to the inputs (``n - noise_states``)."""
        return self.n_states - self.noise_states

    def poles(self) -> np.ndarray:
        """Poles of the model: eigenvalues of ``A`` (of its plant block when it has noise states).

        Returns
        -------
        numpy.ndarray of complex, shape (n - noise_states,)
        """
        k = self.n_plant_states
        if k == 0:
            return np.zeros(0, dtype=complex)
        return np.linalg.eigvals(self.A[:k, :k]).astype(complex)

    def noise_poles(self) -> np.ndarray:
        """Eigenvalues of the noise-model block of ``A`` (empty without noise states)."""
        k = self.n_plant_states
        if self.noise_states == 0:
            return np.zeros(0, dtype=complex)
        return np.linalg.eigvals(self.A[k:, k:]).astype(complex)

    def without_noise_model(self) -> StateSpaceModel:
        """Return the same input-output model without noise states and noise gain."""
        k = self.n_plant_states
        return replace(self, A=self.A[:k, :k], B=self.B[:k], C=self.C[:, :k], noise_gain=None,
                       noise_states=0)

    def with_changes(self, **changes: Any) -> StateSpaceModel:
        """Return a copy with some fields replaced (arrays are copied again)."""
        return replace(self, **changes)

    def to_scipy(self) -> Any:
        """Return the equivalent ``scipy.signal.StateSpace`` (discrete with ``dt = sample_time``).

        Names, units and the operating point have no place in scipy's object and stay on this
        model; the scipy system maps deviations from the operating point.
        """
        from scipy import signal

        dt = {} if self.sample_time is None else {"dt": self.sample_time}
        return signal.StateSpace(np.array(self.A), np.array(self.B), np.array(self.C), np.array(self.D), **dt)


@dataclass(frozen=True, slots=True, eq=False)
class TransferFunctionModel:
    """A p x m matrix of rational transfer functions.

    Parameters
    ----------
    num : sequence of sequence of array_like
        ``num[i][j]``: numerator of output ``i`` / input ``j``, descending powers.
    den : sequence of sequence of array_like
        ``den[i][j]``: denominator, descending powers; stored monic.
    sample_time : float or None
        Sample time in seconds; ``None`` for continuous time.
    inputs, outputs, input_units, output_units, operating_point
        As for :class:`StateSpaceModel`.
    """

    num: tuple[tuple[np.ndarray, ...], ...]
    den: tuple[tuple[np.ndarray, ...], ...]
    sample_time: float | None = None
    inputs: tuple[str, ...] | None = None
    outputs: tuple[str, ...] | None = None
    input_units: tuple[str, ...] | None = None
    output_units: tuple[str, ...] | None = None
    operating_point: OperatingPoint | None = None

    def __post_init__(self) -> None:
        num_rows = list(self.num)
        den_rows = list(self.den)
        p = len(num_rows)
        if p == 0 or len(den_rows) != p:
            raise OptionError("num and den must both be non-empty p x m nested sequences")
        m = len(num_rows[0])
        new_num, new_den = [], []
        for i in range(p):
            if len(num_rows[i]) != m or len(den_rows[i]) != m:
                raise OptionError(f"num and den row {i} must both hold {m} polynomials")
            nrow, drow = [], []
            for j in range(m):
                b = np.atleast_1d(np.array(num_rows[i][j], dtype=float))
                a = np.atleast_1d(np.array(den_rows[i][j], dtype=float))
                a = np.trim_zeros(a, "f")
                if a.size == 0:
                    raise OptionError(f"den[{i}][{j}] must not be zero")
                if not (np.all(np.isfinite(a)) and np.all(np.isfinite(b))):
                    raise OptionError(f"num[{i}][{j}] and den[{i}][{j}] must be finite")
                b = b / a[0]
                a = a / a[0]
                b = np.trim_zeros(b, "f")
                if b.size == 0:
                    b = np.zeros(1)
                if b.size > a.size:
                    raise OptionError(
                        f"channel ({i}, {j}) is improper: numerator degree {b.size - 1} > "
                        f"denominator degree {a.size - 1}"
                    )
                b.flags.writeable = False
                a.flags.writeable = False
                nrow.append(b)
                drow.append(a)
            new_num.append(tuple(nrow))
            new_den.append(tuple(drow))
        _set(self, "num", tuple(new_num))
        _set(self, "den", tuple(new_den))
        _set(self, "sample_time", None if self.sample_time is None else sample_time_value(self.sample_time))
        _set(self, "inputs", names_tuple(self.inputs, "inputs", m, "u"))
        _set(self, "outputs", names_tuple(self.outputs, "outputs", p, "y"))
        units_in = ("",) * m if self.input_units is None else self.input_units
        units_out = ("",) * p if self.output_units is None else self.output_units
        _set(self, "input_units", names_tuple(units_in, "input_units", m, ""))
        _set(self, "output_units", names_tuple(units_out, "output_units", p, ""))

    @property
    def n_inputs(self) -> int:
        """Number of inputs ``m``."""
        return len(self.num[0])

    @property
    def n_outputs(self) -> int:
        """Number of outputs ``p``."""
        return len(self.num)

    @property
    def is_discrete(self) -> bool:
        """True for a discrete-time model."""
        return self.sample_time is not None


def _check_noise_states(model: StateSpaceModel) -> None:
    """Validate ``noise_states``: a count of trailing states driven by the innovations only."""
    ns = model.noise_states
    if isinstance(ns, bool) or not isinstance(ns, (int, np.integer)):
        raise OptionError(f"noise_states must be an integer; got {ns!r}")
    n = model.n_states
    if not 0 <= ns <= n:
        raise OptionError(f"noise_states must be in [0, {n}]; got {ns}")
    _set(model, "noise_states", int(ns))
    if ns == 0:
        return
    k = n - ns
    if model.noise_gain is None:
        raise OptionError("a model with noise states needs a noise_gain")
    if np.any(model.B[k:] != 0) or np.any(model.A[k:, :k] != 0) or np.any(model.A[:k, k:] != 0):
        raise OptionError(
            f"the last {ns} states are declared noise states, but B or A couples them to the "
            "inputs or to the plant states"
        )


def require_state_space(model: Any, name: str = "model") -> StateSpaceModel:
    """Return ``model`` if it is a :class:`StateSpaceModel`; raise :class:`OptionError` naming ``name`` if not."""
    if not isinstance(model, StateSpaceModel):
        raise OptionError(f"{name} must be a StateSpaceModel; got {type(model).__name__}")
    return model


def signal_metadata(model: Any) -> dict[str, Any]:
    """Names, units and operating point of a model, to carry over to a result."""
    return {
        "inputs": model.inputs,
        "outputs": model.outputs,
        "input_units": model.input_units,
        "output_units": model.output_units,
        "operating_point": model.operating_point,
    }
