"""Model analysis: transmission zeros, DC gain, frequency, step and impulse responses.

All functions take a :class:`~ident.lti.models.StateSpaceModel`, continuous
(``sample_time is None``) or discrete, and return plain arrays or frozen result
dataclasses. Nothing here changes the model. The orthogonal deflations behind
the zeros and gains live in :mod:`ident.lti.zeros`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._validate import as_signal, int_in_range, optional_positive_float
from ..errors import OptionError
from .models import StateSpaceModel, require_state_space
from .zeros import channel_zeros_gains, invariant_zeros, siso_zeros_gain, system_tolerance

__all__ = [
    "TimeResponse",
    "transmission_zeros",
    "channel_zeros",
    "dc_gain",
    "frequency_response",
    "step_response",
    "impulse_response",
]

#: Default number of grid points for continuous-time responses.
_CONTINUOUS_GRID = 1000

#: Bounds on the automatically chosen number of samples of a discrete response.
_AUTO_SAMPLES = (20, 10000)


def transmission_zeros(model: StateSpaceModel) -> np.ndarray:
    """Transmission (invariant) zeros of a state-space model.

    Parameters
    ----------
    model : StateSpaceModel
        Continuous or discrete model, square or not.

    Returns
    -------
    numpy.ndarray, shape (n_zeros,), complex
        The finite values ``z`` at which the Rosenbrock system matrix
        ``[[A - zI, B], [C, D]]`` loses rank below its normal rank, sorted by
        real part then imaginary part.

    Notes
    -----
    The zeros are the finite generalised eigenvalues of the pencil
    ``([[A, B], [C, D]], [[I, 0], [0, 0]])``. Computing them with the QZ
    algorithm directly turns the infinite eigenvalues (relative degree > 0)
    into large spurious finite ones, so the pencil is first deflated with
    orthogonal transformations in the spirit of [1]_: the invertible part of
    ``D`` is solved for, and when ``D`` vanishes the states driven directly by
    the inputs become the inputs of a smaller system. The remaining square
    pencil has only finite eigenvalues. Non-square systems are handled through
    the dual for more inputs than outputs; input (or output) directions that
    act on nothing are dropped, i.e. zeros are relative to the normal rank.
    For a non-minimal model the result includes the decoupling zeros (the
    uncontrollable or unobservable modes), which cancel poles.

    Rank decisions use the tolerance ``1e3 * max(n + p, n + m) * eps *
    max(1, ||A||, ||B||, ||C||, ||D||)``.

    References
    ----------
    .. [1] A. Emami-Naeini and P. Van Dooren, "Computation of zeros of linear
       multivariable systems", Automatica 18(4), 415-430, 1982.

    Examples
    --------
    >>> from ident.lti.models import StateSpaceModel
    >>> m = StateSpaceModel(A=[[-1.0, 0.0], [0.0, -2.0]], B=[[1.0], [1.0]],
    ...                     C=[[1.0, 1.0]], D=[[0.0]])
    >>> transmission_zeros(m).real.round(6).tolist()   # (2s + 3)/((s+1)(s+2))
    [-1.5]
    """
    require_state_space(model)
    tol = system_tolerance(model.A, model.B, model.C, model.D)
    z = invariant_zeros(model.A, model.B, model.C, model.D, tol)
    z = np.asarray(z, dtype=complex)
    return z[np.lexsort((z.imag, z.real))]


def _evaluation_point(model: StateSpaceModel) -> complex:
    return 1.0 + 0.0j if model.is_discrete else 0.0j


def dc_gain(model: StateSpaceModel) -> np.ndarray:
    """Steady-state gain ``G(1)`` (discrete) or ``G(0)`` (continuous).

    Parameters
    ----------
    model : StateSpaceModel
        Continuous or discrete model.

    Returns
    -------
    numpy.ndarray, shape (p, m), float
        Gain of each channel, output ``i`` per input ``j``. A channel with an
        integrating pole (``z = 1`` or ``s = 0``) that its own zeros do not
        cancel has an unbounded gain, reported as ``+inf`` or ``-inf`` with the
        sign of the leading coefficient of ``G`` around that pole (the sign the
        ramp of its step response takes). Channels without such a pole get
        their finite gain even when another channel integrates.

    Notes
    -----
    ``G(z0) = C (z0 I - A)^-1 B + D``. A pole counts as integrating when it is
    within ``1e-10 * max(1, ||A||)`` of ``z0``; each channel is then examined
    through its zeros and poles: a pole cancelled by a zero (uncontrollable or
    unobservable from that channel) does not make it unbounded.

    Examples
    --------
    >>> from ident.lti.models import StateSpaceModel
    >>> integ = StateSpaceModel(A=[[0.0]], B=[[1.0]], C=[[-2.0]], D=[[0.0]])  # -2/s
    >>> dc_gain(integ).tolist()
    [[-inf]]
    """
    require_state_space(model)
    z0 = _evaluation_point(model)
    A, B, C, D = model.A, model.B, model.C, model.D
    n = model.n_states
    if n == 0:
        return D.copy()
    poles = np.linalg.eigvals(A)
    near = 1e-10 * max(1.0, float(np.linalg.norm(A, 2)))
    if not np.any(np.abs(poles - z0) <= near):
        return (C @ np.linalg.solve(z0.real * np.eye(n) - A, B) + D).real
    tol = system_tolerance(A, B, C, D)
    out = np.empty(D.shape)
    for i in range(model.n_outputs):
        for j in range(model.n_inputs):
            out[i, j] = _channel_dc_gain(poles, A, B[:, j], C[i], D[i, j], z0, near, tol)
    return out


def channel_zeros(model: StateSpaceModel) -> tuple[tuple[np.ndarray | None, ...], ...]:
    """Finite zeros of every single channel ``G_ij``, as ``zeros[i][j]`` (complex arrays).

    Parameters
    ----------
    model : StateSpaceModel
        Discrete or continuous model.

    Returns
    -------
    tuple of tuple of (numpy.ndarray or None)
        ``p x m`` nested tuples; ``None`` for a channel that is identically zero
        (its zeros are undefined).

    Notes
    -----
    Unlike the transmission zeros of a non-square system (which are usually
    none), channel zeros show a mode that one channel does not see: a zero of
    ``G_ij`` on top of a pole cancels it in that channel. Computed with the same
    orthogonal deflation as :func:`transmission_zeros`, never by expanding
    polynomials.
    """
    if not isinstance(model, StateSpaceModel):
        raise OptionError(f"model must be a StateSpaceModel; got {type(model).__name__}")
    return tuple(
        tuple(np.asarray(zeros, dtype=complex) if gain != 0.0 else None for zeros, gain in row)
        for row in channel_zeros_gains(model)
    )


def _channel_dc_gain(poles, A, b, c, d, z0, near, tol) -> float:
    zeros, gain = siso_zeros_gain(A, b, c, d, tol)
    if gain == 0.0:
        return 0.0
    poles = list(poles)
    # cancel each zero against the nearest remaining pole when they coincide
    free_zeros = []
    for zr in zeros:
        k = int(np.argmin(np.abs(np.asarray(poles) - zr))) if poles else -1
        if k >= 0 and abs(poles[k] - zr) <= 1e-6 * max(1.0, abs(zr)):
            poles.pop(k)
        else:
            free_zeros.append(zr)
    poles = np.asarray(poles, dtype=complex)
    free_zeros = np.asarray(free_zeros, dtype=complex)
    at_z0 = np.abs(poles - z0) <= near
    value = gain * np.prod(z0 - free_zeros) / np.prod(z0 - poles[~at_z0])
    if np.any(at_z0):
        return math.copysign(math.inf, value.real)
    return float(value.real)


def _hessenberg_solve(h: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Solve ``h[:, :, f] x[:, :, f] = rhs[:, :, f]`` for a batch of upper Hessenberg matrices.

    ``h`` has shape ``(n, n, F)`` and ``rhs`` ``(n, m, F)`` (batch last, so every
    row operation is contiguous); both are overwritten. Gaussian elimination
    with partial pivoting between neighbouring rows, then back substitution:
    O(n^2) per matrix, vectorised over the batch.
    """
    n = h.shape[0]
    for k in range(n - 1):
        swap = np.abs(h[k + 1, k]) > np.abs(h[k, k])
        if np.any(swap):
            upper = np.where(swap, h[k + 1, k:], h[k, k:])
            lower = np.where(swap, h[k, k:], h[k + 1, k:])
            h[k, k:], h[k + 1, k:] = upper, lower
            upper = np.where(swap, rhs[k + 1], rhs[k])
            lower = np.where(swap, rhs[k], rhs[k + 1])
            rhs[k], rhs[k + 1] = upper, lower
        with np.errstate(divide="ignore", invalid="ignore"):
            factor = h[k + 1, k] / h[k, k]
        factor = np.where(np.isfinite(factor), factor, 0.0)
        h[k + 1, k:] -= factor * h[k, k:]
        rhs[k + 1] -= factor * rhs[k]
    x = np.empty_like(rhs)
    with np.errstate(divide="ignore", invalid="ignore"):
        for i in range(n - 1, -1, -1):
            acc = rhs[i] - np.einsum("jf,jmf->mf", h[i, i + 1 :], x[i + 1 :])
            x[i] = acc / h[i, i]
    return x


def frequency_response(model: StateSpaceModel, frequencies_hz: Any) -> np.ndarray:
    """Complex frequency response at the given frequencies.

    Parameters
    ----------
    model : StateSpaceModel
        Continuous or discrete model.
    frequencies_hz : array_like, shape (F,)
        Frequencies in Hz (finite, >= 0). For a discrete model they are
        usually at most the Nyquist frequency ``1 / (2 T)``.

    Returns
    -------
    numpy.ndarray, shape (F, p, m), complex
        ``G(exp(j 2 pi f T))`` for a discrete model, ``G(j 2 pi f)`` for a
        continuous one. A frequency that falls exactly on a pole gives
        non-finite entries.

    Notes
    -----
    ``A`` is reduced once to upper Hessenberg form ``H = Q^T A Q``
    (:func:`scipy.linalg.hessenberg`); then ``(zI - H) X = Q^T B`` is solved for
    all frequencies at once by Hessenberg elimination, O(n^2) per frequency
    instead of O(n^3) [1]_, and ``G = C Q X + D``.

    References
    ----------
    .. [1] A. J. Laub, "Efficient multivariable frequency response
       computations", IEEE Trans. Automatic Control 26(2), 407-408, 1981.
    """
    require_state_space(model)
    f = as_signal(np.atleast_1d(frequencies_hz), "frequencies_hz", ndim=1)
    if np.any(f < 0):
        raise OptionError("frequencies_hz must be >= 0; got a negative frequency")
    omega = 2 * np.pi * f
    if model.is_discrete:
        points = np.exp(1j * omega * model.sample_time)
    else:
        points = 1j * omega
    n, p, m = model.n_states, model.n_outputs, model.n_inputs
    out = np.empty((f.size, p, m), dtype=complex)
    out[:] = model.D
    if n == 0 or f.size == 0:
        return out
    from scipy import linalg  # the mode table and fit path need no scipy; imported here only

    H, Q = linalg.hessenberg(model.A, calc_q=True)
    H = np.triu(H, -1)
    Bq = Q.T @ model.B
    Cq = model.C @ Q
    chunk = max(1, 2_000_000 // (n * n))
    for start in range(0, f.size, chunk):
        zs = points[start : start + chunk]
        mat = np.empty((n, n, zs.size), dtype=complex)
        mat[:] = -H[:, :, None]
        idx = np.arange(n)
        mat[idx, idx] += zs
        rhs = np.empty((n, m, zs.size), dtype=complex)
        rhs[:] = Bq[:, :, None]
        x = _hessenberg_solve(mat, rhs)
        out[start : start + chunk] += np.einsum("pn,nmf->fpm", Cq, x)
    return out


@dataclass(frozen=True, slots=True, eq=False)
class TimeResponse:
    """Step or impulse response of every channel.

    Attributes
    ----------
    time : numpy.ndarray, shape (N,)
        Sample instants in seconds, starting at 0.
    values : numpy.ndarray, shape (N, p, m)
        ``values[k, i, j]``: output ``i`` at ``time[k]`` for the test signal on
        input ``j`` (deviation from the operating point).
    """

    time: np.ndarray
    values: np.ndarray


def _auto_duration(model: StateSpaceModel) -> float:
    """About seven of the slowest time constants (or periods), in seconds."""
    poles = model.poles()
    T = model.sample_time
    if model.is_discrete:
        mag = np.abs(poles)
        with np.errstate(divide="ignore"):
            s = np.where(mag > 0, np.log(np.where(mag > 0, poles, 1.0)) / T, -np.inf)
    else:
        s = poles
    s = s[np.isfinite(s)]
    stable = s[s.real < -1e-12]
    if stable.size:
        slow = np.max(1.0 / np.abs(stable.real))
        periods = [2 * np.pi / abs(x.imag) for x in stable if abs(x.imag) > 0]
        return float(max(7.0 * slow, 3.0 * max(periods, default=0.0)))
    moving = s[np.abs(s) > 0]
    if moving.size:
        return float(10.0 / np.min(np.abs(moving)))
    return 100.0 * T if T is not None else 10.0


def _grid(model: StateSpaceModel, n_samples: Any, duration_s: Any) -> tuple[np.ndarray, float]:
    duration_s = optional_positive_float(duration_s, "duration_s")
    if n_samples is not None:
        n_samples = int_in_range(n_samples, "n_samples", 2)
    if model.is_discrete:
        T = model.sample_time
        if n_samples is not None and duration_s is not None:
            raise OptionError(
                "give n_samples or duration_s for a discrete-time model, not both"
            )
        if n_samples is None:
            duration = duration_s if duration_s is not None else _auto_duration(model)
            n_samples = int(math.floor(duration / T + 1e-9)) + 1
            if duration_s is None:
                n_samples = min(max(n_samples, _AUTO_SAMPLES[0]), _AUTO_SAMPLES[1])
            n_samples = max(n_samples, 2)
        return np.arange(n_samples) * T, T
    n = _CONTINUOUS_GRID if n_samples is None else n_samples
    duration = duration_s if duration_s is not None else _auto_duration(model)
    dt = duration / (n - 1)
    return np.arange(n) * dt, dt


def _sampled(model: StateSpaceModel, dt: float) -> StateSpaceModel:
    if model.is_discrete:
        return model
    n, m = model.n_states, model.n_inputs
    M = np.zeros((n + m, n + m))
    M[:n, :n] = model.A
    M[:n, n:] = model.B
    from scipy import linalg

    E = linalg.expm(M * dt)
    return StateSpaceModel(A=E[:n, :n], B=E[:n, n:], C=model.C, D=model.D, sample_time=dt)


def step_response(
    model: StateSpaceModel, *, n_samples: int | None = None, duration_s: float | None = None
) -> TimeResponse:
    """Response of every channel to a unit step applied at ``t = 0``.

    Parameters
    ----------
    model : StateSpaceModel
        Continuous or discrete model, started from zero state.
    n_samples : int, optional
        Number of samples (>= 2). Discrete default: enough to cover about
        seven of the slowest time constants (20 .. 10000 samples). Continuous
        default: 1000 grid points.
    duration_s : float, optional
        Length in seconds. Discrete: an alternative to ``n_samples`` (not both).
        Continuous: the end of the grid; default about seven of the slowest
        time constants.

    Returns
    -------
    TimeResponse
        ``values[0] = D`` and ``values[k] -> dc_gain`` for a stable model.

    Notes
    -----
    Discrete models are run with :func:`ident.lti.simulate.simulate`. A continuous
    model is sampled exactly by its zero-order-hold equivalent on the grid: a
    step is constant between grid points, so the values are exact samples of
    the continuous response.
    """
    from .simulate import simulate

    require_state_space(model)
    time, dt = _grid(model, n_samples, duration_s)
    dm = _sampled(model, dt)
    N, p, m = time.size, model.n_outputs, model.n_inputs
    values = np.empty((N, p, m))
    for j in range(m):
        u = np.zeros((N, m))
        u[:, j] = 1.0
        values[:, :, j] = simulate(dm, u)
    return TimeResponse(time=time, values=values)


def impulse_response(
    model: StateSpaceModel, *, n_samples: int | None = None, duration_s: float | None = None
) -> TimeResponse:
    """Impulse response of every channel.

    Parameters
    ----------
    model : StateSpaceModel
        Continuous or discrete model, started from zero state.
    n_samples, duration_s
        As for :func:`step_response`.

    Returns
    -------
    TimeResponse
        Discrete: the response to a unit pulse ``u[0] = 1`` (the Markov
        parameters ``D, CB, CAB, ...``). Continuous: ``C exp(A t) B``, the
        response to a Dirac impulse without the ``D delta(t)`` term.

    Notes
    -----
    A continuous model is evaluated exactly on the grid through
    ``x(t + dt) = exp(A dt) x(t)`` from ``x(0) = B``.
    """
    from .simulate import simulate

    require_state_space(model)
    time, dt = _grid(model, n_samples, duration_s)
    N, p, m = time.size, model.n_outputs, model.n_inputs
    values = np.empty((N, p, m))
    if model.is_discrete:
        for j in range(m):
            u = np.zeros((N, m))
            u[0, j] = 1.0
            values[:, :, j] = simulate(model, u)
        return TimeResponse(time=time, values=values)
    n = model.n_states
    if n == 0:
        values[:] = 0.0
        return TimeResponse(time=time, values=values)
    from scipy import linalg

    Phi = linalg.expm(model.A * dt)
    X = model.B.copy()
    for k in range(N):
        values[k] = model.C @ X
        X = Phi @ X
    return TimeResponse(time=time, values=values)
