"""Balanced truncation of stable discrete-time models, with numpy only.

:func:`ident.lti.realization.balanced_realization` balances through scipy's
Lyapunov solvers; the identification search, which must not load scipy,
reduces its refined models here instead: the Gramians come from Smith's
doubling iteration, and the square-root method keeps the ``r`` states with the
largest Hankel singular values.

References
----------
.. [1] B. C. Moore, "Principal component analysis in linear systems:
   controllability, observability, and model reduction", IEEE Trans.
   Automatic Control 26(1), 17-32, 1981.
.. [2] A. J. Laub, M. T. Heath, C. C. Paige and R. C. Ward, "Computation of
   system balancing transformations and other applications of simultaneous
   diagonalization algorithms", IEEE Trans. Automatic Control 32(2),
   115-122, 1987.
.. [3] R. A. Smith, "Matrix equation XA + BX = C", SIAM J. Applied
   Mathematics 16(1), 198-201, 1968.
"""

from __future__ import annotations

import numpy as np

from ..errors import ModelError, OptionError
from .models import StateSpaceModel

__all__ = ["balanced_truncation", "stein_gramian"]


def stein_gramian(A: np.ndarray, Q: np.ndarray, *, max_doublings: int = 64) -> np.ndarray | None:
    """Solve ``P = A P A^T + Q`` for a stable ``A`` by doubling (Smith's iteration [3]_).

    Parameters
    ----------
    A : numpy.ndarray, shape (n, n)
        Spectral radius below 1.
    Q : numpy.ndarray, shape (n, n)
        Symmetric.
    max_doublings : int
        Each doubling squares ``A``; 64 cover a spectral radius up to
        ``1 - 1e-17`` in principle.

    Returns
    -------
    numpy.ndarray or None
        ``P = sum_k A^k Q (A^T)^k``; ``None`` when the sum overflows.
    """
    P, Ak = np.array(Q, dtype=float), np.array(A, dtype=float)
    for _ in range(max_doublings):
        P_next = P + Ak @ P @ Ak.T
        Ak = Ak @ Ak
        if not np.all(np.isfinite(P_next)):
            return None
        if np.max(np.abs(P_next - P)) <= 1e-14 * np.max(np.abs(P_next)):
            return P_next
        P = P_next
    return P


def _psd_factor(W: np.ndarray) -> np.ndarray:
    """``L`` with ``W = L L^T`` for a symmetric positive semi-definite ``W``."""
    w, V = np.linalg.eigh((W + W.T) / 2)
    return V * np.sqrt(np.clip(w, 0.0, None))


def balanced_truncation(model: StateSpaceModel, n_states: int) -> StateSpaceModel:
    """Keep the ``n_states`` states of largest Hankel singular value of a stable discrete model.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time, poles strictly inside the unit circle.
    n_states : int
        States to keep, ``1 <= n_states <= model.n_states``.

    Returns
    -------
    StateSpaceModel
        The balanced, truncated model (same ``D``, sample time and names; no
        noise gain). When fewer Hankel singular values than ``n_states`` are
        non-zero (to ``1e-12`` of the largest), only those states are kept.
        The error bound is ``2 sum`` of the dropped Hankel singular values
        (in the H-infinity norm, [1]_).

    Raises
    ------
    ModelError
        A continuous-time or unstable model, or Gramians that overflow.
    OptionError
        ``n_states`` out of range.

    Notes
    -----
    With ``Wc = Lc Lc^T``, ``Wo = Lo Lo^T`` and ``Lo^T Lc = U S V^T`` the
    square-root method [2]_ projects with ``T = Lc V_r S_r^{-1/2}`` and
    ``T_l = S_r^{-1/2} U_r^T Lo^T`` (``T_l T = I``). With nothing dropped
    both Gramians of the result are ``S``; a truncated discrete model is
    stable but its Gramians are no longer exactly ``S_r``.
    """
    n = model.n_states
    if not model.is_discrete:
        raise ModelError("balanced truncation here is for discrete-time models")
    if not 1 <= n_states <= n:
        raise OptionError(f"n_states must be between 1 and {n}; got {n_states}")
    A, B, C = model.A, model.B, model.C
    if float(np.max(np.abs(np.linalg.eigvals(A)))) >= 1.0:
        raise ModelError("balanced truncation needs a stable model (every pole inside the unit circle)")
    Wc, Wo = stein_gramian(A, B @ B.T), stein_gramian(A.T, C.T @ C)
    if Wc is None or Wo is None:
        raise ModelError("the Gramians of the model overflow; it is too close to instability to balance")
    Lc, Lo = _psd_factor(Wc), _psd_factor(Wo)
    U, s, Vt = np.linalg.svd(Lo.T @ Lc)
    r = int(min(n_states, np.count_nonzero(s > 1e-12 * s[0]))) if s[0] > 0 else 0
    if r == 0:
        raise ModelError("the model has no controllable and observable state to keep")
    root = 1.0 / np.sqrt(s[:r])
    T = (Lc @ Vt[:r].T) * root
    Tl = (U[:, :r].T @ Lo.T) * root[:, None]
    return model.with_changes(A=Tl @ A @ T, B=Tl @ B, C=C @ T, noise_gain=None, noise_states=0)
