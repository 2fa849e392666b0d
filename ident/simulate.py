"""Time-domain simulation of discrete-time state-space models.

Long logs (millions of samples) are simulated in the model's eigenbasis, where
every mode is a first-order recursion run by :func:`scipy.signal.lfilter` in
compiled code. When the eigenvectors are ill conditioned (repeated or nearly
repeated poles, canonical forms) a plain state recursion is used instead.
"""

from __future__ import annotations

import numpy as np
from scipy import linalg, signal

from ._validate import as_signal
from .errors import ModelError, OptionError
from .models import StateSpaceModel

__all__ = ["simulate", "simulate_states", "estimate_initial_state", "free_response_matrix"]

#: Largest eigenvector condition number for which the modal method is used.
_MODAL_COND_LIMIT = 1e6


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
    return _states(model.A, model.B, u, x0)


def _states(A: np.ndarray, B: np.ndarray, u: np.ndarray, x0: np.ndarray) -> np.ndarray:
    n = A.shape[0]
    N = u.shape[0]
    if n == 0:
        return np.zeros((N, 0))
    w = u @ B.T  # (N, n): B u[k]
    lam, V = linalg.eig(A)
    use_modal = np.all(np.isfinite(lam))
    if use_modal:
        with np.errstate(all="ignore"):
            cond = np.linalg.cond(V)
        use_modal = np.isfinite(cond) and cond < _MODAL_COND_LIMIT
    if use_modal:
        Vinv = linalg.inv(V)
        wm = w @ Vinv.T  # modal inputs
        zm0 = Vinv @ x0
        zm = np.empty((N, n), dtype=complex)
        for i in range(n):
            zm[:, i], _ = signal.lfilter(
                [0.0, 1.0], [1.0, -lam[i]], wm[:, i], zi=np.array([zm0[i]], dtype=complex)
            )
        return np.real(zm @ V.T)
    x = np.empty((N, n))
    xk = x0.copy()
    At = A.T
    for k in range(N):
        x[k] = xk
        xk = xk @ At + w[k]
    return x


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
    x = _states(model.A, model.B, u, x0)
    return x @ model.C.T + u @ model.D.T


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
