"""Time-domain simulation of discrete-time state-space models.

Long logs (millions of samples) are simulated in the complex Schur basis of
``A`` (``A = Z T Z^H``, ``T`` upper triangular): the last coordinate is a
first-order recursion driven by the input, and each earlier one is a
first-order recursion driven by the input and the coordinates after it. Every
recursion runs in compiled code (a banded triangular solve, LAPACK ``tbtrs``,
see :func:`all_pole_filter`), and the unitary
change of basis keeps the computation backward stable whatever the poles are,
repeated or defective included. The samples are processed in chunks, so the
working memory does not grow with the log.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg

from ._validate import as_signal
from .errors import IdentificationError, ModelError, OptionError
from .models import StateSpaceModel

__all__ = [
    "simulate",
    "simulate_states",
    "estimate_initial_state",
    "free_response_matrix",
    "all_pole_filter",
    "first_order_recursion",
    "state_chunks",
]

#: Samples simulated per chunk (bounds the working memory to a few MB per state).
_CHUNK = 1 << 16


def _check(model: StateSpaceModel, u: np.ndarray, x0: np.ndarray | None) -> tuple[np.ndarray, np.ndarray]:
    if not isinstance(model, StateSpaceModel):
        raise OptionError(f"model must be a StateSpaceModel; got {type(model).__name__}")
    if not model.is_discrete:
        raise ModelError("simulate needs a discrete-time model; discretise it first")
    u = as_signal(u, "u", ndim=2)
    if u.shape[1] != model.n_inputs:
        raise OptionError(
            f"u must have {model.n_inputs} column(s) to match the model's inputs; got {u.shape[1]}"
        )
    n = model.n_states
    if x0 is None:
        x0 = np.zeros(n)
    else:
        x0 = np.asarray(x0, dtype=float).ravel()
        if x0.shape != (n,):
            raise OptionError(f"x0 must have {n} entries; got {x0.size}")
    return u, x0


#: Samples per block in :func:`all_pole_filter` (bounds the band matrix to a few MB).
_POLE_BLOCK = 1 << 14


def all_pole_filter(a: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Solve ``y[k] + a_1 y[k-1] + ... + a_na y[k-na] = r[k]`` from rest (``a[0] = 1``).

    Parameters
    ----------
    a : array_like, shape (na + 1,)
        Recursion coefficients, ``a[0] = 1``; real or complex.
    r : array_like, shape (N,)
        Right-hand side; real or complex.

    Returns
    -------
    numpy.ndarray, shape (N,)
        ``y``, of the common dtype of ``a`` and ``r``.

    Notes
    -----
    The recursion is a unit lower-triangular banded Toeplitz system, solved
    block by block with LAPACK ``tbtrs`` (forward substitution in compiled
    code); it gives the same numbers as running the recursion sample by sample
    and equals :func:`scipy.signal.lfilter` ``([1], a, r)``.
    """
    dtype = np.result_type(np.asarray(a), np.asarray(r), np.float64)
    a = np.asarray(a, dtype=dtype)
    r = np.asarray(r, dtype=dtype)
    na = a.size - 1
    if na == 0:
        return r.copy()
    N = r.size
    y = np.empty(N, dtype=dtype)
    if N == 0:
        return y
    block = min(N, max(_POLE_BLOCK, 4 * na))
    (tbtrs,) = linalg.get_lapack_funcs(("tbtrs",), (r,))
    band = np.asfortranarray(np.repeat(a[:, None], block, axis=1))  # band[l, k] = a_l
    for k0 in range(0, N, block):
        k1 = min(N, k0 + block)
        rhs = r[k0:k1].copy()
        for lag in range(1, min(na, k0) + 1):  # terms of the previous block's outputs
            w = min(lag, k1 - k0)
            rhs[:w] -= a[lag] * y[k0 - lag:k0 - lag + w]
        x, info = tbtrs(band[:, :k1 - k0], rhs[:, None], uplo="L", trans="N", diag="U")
        if info != 0:  # pragma: no cover - a unit diagonal is never singular
            raise IdentificationError(f"recursion failed (LAPACK tbtrs info {info})")
        y[k0:k1] = x[:, 0]
    return y


def first_order_recursion(pole: complex, drive: np.ndarray, start: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Run ``x[k+1] = pole x[k] + drive[k]`` from ``x[0] = start``, column by column.

    Parameters
    ----------
    pole : complex or float
        The recursion's pole.
    drive : array_like, shape (L,) or (L, c)
        Driving signal(s).
    start : array_like, shape () or (c,)
        ``x[0]`` of each column.

    Returns
    -------
    x : numpy.ndarray, shape of ``drive``
        ``x[0] .. x[L-1]``.
    next_start : numpy.ndarray, shape of ``start``
        ``x[L]``, to continue with the next chunk.

    Notes
    -----
    The same numbers as :func:`scipy.signal.lfilter` ``([0, 1], [1, -pole], drive, zi=start)``,
    computed with :func:`all_pole_filter` on ``[start, drive[:-1]]``.
    """
    drive = np.asarray(drive)
    dtype = np.result_type(drive, np.asarray(start), np.asarray(pole), np.float64)
    cols = drive.reshape(drive.shape[0], -1)
    starts = np.asarray(start, dtype=dtype).reshape(-1)
    a = np.array([1.0, -pole], dtype=dtype)
    out = np.empty(cols.shape, dtype=dtype)
    for j in range(cols.shape[1]):
        out[:, j] = all_pole_filter(a, np.concatenate(([starts[j]], cols[:-1, j])))
    nxt = pole * out[-1] + cols[-1] if cols.shape[0] else starts
    return out.reshape(drive.shape), np.asarray(nxt, dtype=dtype).reshape(np.shape(start))


def simulate_states(model: StateSpaceModel, u: np.ndarray, x0: np.ndarray | None = None) -> np.ndarray:
    """State trajectory ``x[k]`` for k = 0 .. N-1 of a discrete-time model.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model.
    u : array_like, shape (N, m)
        Input deviations from the operating point.
    x0 : array_like, shape (n,), optional
        Initial state; zero by default.

    Returns
    -------
    numpy.ndarray, shape (N, n)
        States, ``x[0] = x0``.
    """
    u, x0 = _check(model, u, x0)
    out = np.empty((u.shape[0], model.n_states))
    for k0, k1, x in state_chunks(model.A, model.B, u, x0):
        out[k0:k1] = x
    return out


def state_chunks(A: np.ndarray, B: np.ndarray, u: np.ndarray, x0: np.ndarray):
    """Yield ``(k0, k1, states[k0:k1])`` of ``x[k+1] = A x[k] + B u[k]``, chunk by chunk.

    Parameters
    ----------
    A : numpy.ndarray, shape (n, n)
    B : numpy.ndarray, shape (n, m)
    u : numpy.ndarray, shape (N, m)
    x0 : numpy.ndarray, shape (n,)

    Yields
    ------
    (int, int, numpy.ndarray)
        Sample range and the states over it, ``(k1 - k0, n)``; the working memory
        is bounded by the chunk length whatever ``N`` is.
    """
    n = A.shape[0]
    N = u.shape[0]
    if n == 0:
        for k0 in range(0, max(N, 1), _CHUNK):
            k1 = min(N, k0 + _CHUNK)
            yield k0, k1, np.zeros((k1 - k0, 0))
        return
    T, Z = linalg.schur(A, output="complex")  # A = Z T Z^H
    Bz = Z.conj().T @ B  # inputs in the Schur basis
    diag = np.diag(T)
    z = Z.conj().T @ x0.astype(complex)
    for k0 in range(0, N, _CHUNK):
        k1 = min(N, k0 + _CHUNK)
        drive = u[k0:k1] @ Bz.T  # (L, n) complex
        zs = np.empty((k1 - k0, n), dtype=complex, order="F")  # columns contiguous
        for i in range(n - 1, -1, -1):
            d = drive[:, i]
            if i < n - 1:
                d = d + zs[:, i + 1:] @ T[i, i + 1:]
            zs[:, i], _ = first_order_recursion(diag[i], d, z[i])
        z = T @ zs[-1] + Bz @ u[k1 - 1]
        yield k0, k1, np.real(zs @ Z.T)


def simulate(model: StateSpaceModel, u: np.ndarray, x0: np.ndarray | None = None) -> np.ndarray:
    """Free-run output of a discrete-time model driven by ``u``.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model ``x[k+1] = A x + B u``, ``y = C x + D u``.
    u : array_like, shape (N, m)
        Input deviations from the operating point.
    x0 : array_like, shape (n,), optional
        Initial state; zero by default.

    Returns
    -------
    numpy.ndarray, shape (N, p)
        Output deviations from the operating point.

    Examples
    --------
    >>> from ident.models import StateSpaceModel
    >>> m = StateSpaceModel(A=[[0.5]], B=[[1.0]], C=[[1.0]], D=[[0.0]], sample_time=0.1)
    >>> simulate(m, [[1.0], [0.0], [0.0]]).ravel().tolist()
    [0.0, 1.0, 0.5]
    """
    u, x0 = _check(model, u, x0)
    y = np.empty((u.shape[0], model.n_outputs))
    for k0, k1, x in state_chunks(model.A, model.B, u, x0):
        y[k0:k1] = x @ model.C.T + u[k0:k1] @ model.D.T
    return y


def free_response_matrix(model: StateSpaceModel, n_samples: int) -> np.ndarray:
    """Stacked ``C A^k`` for k = 0 .. n_samples-1, shape ``(n_samples * p, n)``.

    Row block ``k`` maps an initial state to the output at sample ``k`` when the
    input is zero.
    """
    p, n = model.C.shape
    out = np.empty((n_samples, p, n))
    M = model.C.copy()
    for k in range(n_samples):
        out[k] = M
        M = M @ model.A
    return out.reshape(n_samples * p, n)


def estimate_initial_state(
    model: StateSpaceModel, u: np.ndarray, y: np.ndarray, n_samples: int | None = None
) -> np.ndarray:
    """Least-squares initial state that best explains the first samples of ``y``.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model.
    u : array_like, shape (N, m)
        Input deviations.
    y : array_like, shape (N, p)
        Measured output deviations.
    n_samples : int, optional
        How many leading samples to use; default ``min(N, max(10 n, 100))``.

    Returns
    -------
    numpy.ndarray, shape (n,)
        The initial state minimising ``sum_k ||y[k] - yhat[k]||^2`` over the
        leading window, where ``yhat`` is the model's free-run output.

    Notes
    -----
    ``y[k] = C A^k x0 + (forced response)[k]``; the forced response is simulated
    from zero, and ``x0`` solves the stacked least-squares problem.
    """
    u, _ = _check(model, u, None)
    y = as_signal(y, "y", ndim=2)
    if y.shape != (u.shape[0], model.n_outputs):
        raise OptionError(f"y must have shape ({u.shape[0]}, {model.n_outputs}); got {y.shape}")
    n = model.n_states
    if n == 0:
        return np.zeros(0)
    N = u.shape[0]
    count = min(N, max(10 * n, 100)) if n_samples is None else min(N, int(n_samples))
    forced = simulate(model, u[:count])
    obs = free_response_matrix(model, count)
    rhs = (y[:count] - forced).reshape(-1)
    x0, *_ = linalg.lstsq(obs, rhs, lapack_driver="gelsy")
    return x0
