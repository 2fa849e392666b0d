"""System zeros, channel gains and transfer-function polynomials by orthogonal deflation.

The pencil algebra behind :func:`ident.lti.analysis.transmission_zeros`,
:func:`ident.lti.analysis.channel_zeros` and :func:`ident.lti.analysis.dc_gain`,
the state-space to transfer-function conversion (:func:`ident.lti.convert.ss_to_tf`),
matched discretisation and minimal realisations: the controllability staircase,
the deflation of the Rosenbrock pencil ``[[A - zI, B], [C, D]]`` to its finite
zeros, and per channel its zeros and high-frequency gain, whose product with
the zeros' polynomial is the channel's numerator. Only orthogonal
transformations are used and no polynomial is expanded symbolically. numpy
only at import (scipy is imported inside :func:`channel_polynomials`).
"""

from __future__ import annotations

import numpy as np

from .models import StateSpaceModel

__all__ = [
    "system_tolerance",
    "controllable_staircase",
    "invariant_zeros",
    "siso_zeros_gain",
    "channel_zeros_gains",
    "channel_polynomials",
]

_EPS = np.finfo(float).eps

#: Safety factor on machine precision used in rank decisions.
_RANK_FACTOR = 1e3


def system_tolerance(A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray) -> float:
    """Rank tolerance ``1e3 max(n + p, n + m, 1) eps max(1, ||A||, ||B||, ||C||, ||D||)`` (2-norms)."""
    n = A.shape[0]
    p, m = D.shape
    scale = max(
        1.0,
        np.linalg.norm(A, 2) if A.size else 0.0,
        np.linalg.norm(B, 2) if B.size else 0.0,
        np.linalg.norm(C, 2) if C.size else 0.0,
        np.linalg.norm(D, 2) if D.size else 0.0,
    )
    return _RANK_FACTOR * max(n + p, n + m, 1) * _EPS * scale


def controllable_staircase(
    A: np.ndarray, B: np.ndarray, tol: float
) -> tuple[np.ndarray, int]:
    """Orthogonal controllability staircase.

    Returns ``(Q, nc)`` with ``Q`` orthogonal such that ``Q.T @ A @ Q`` is
    ``[[Ac, *], [0, Au]]`` and ``Q.T @ B`` is ``[[Bc], [0]]``, where ``(Ac, Bc)``
    (``nc`` states) is controllable and ``Au`` holds the uncontrollable modes.
    Ranks are decided by singular values above ``tol``.
    """
    n = A.shape[0]
    Q = np.eye(n)
    Aw = A.copy()
    nc = 0
    Bk = B.copy()
    while nc < n and Bk.size:
        U, s, _ = np.linalg.svd(Bk, full_matrices=True)
        r = int(np.sum(s > tol))
        if r == 0:
            break
        Aw[nc:, :] = U.T @ Aw[nc:, :]
        Aw[:, nc:] = Aw[:, nc:] @ U
        Q[:, nc:] = Q[:, nc:] @ U
        Bk = Aw[nc + r :, nc : nc + r]
        nc += r
    return Q, nc


def _unobservable_eigenvalues(A: np.ndarray, C: np.ndarray, tol: float) -> np.ndarray:
    """Eigenvalues of the unobservable part of ``(A, C)`` (the dual controllability staircase)."""
    Q, no = controllable_staircase(A.T, C.T, tol)
    Au = (Q.T @ A.T @ Q)[no:, no:]
    return np.linalg.eigvals(Au) if Au.size else np.zeros(0, dtype=complex)


def invariant_zeros(
    A: np.ndarray, B: np.ndarray, C: np.ndarray, D: np.ndarray, tol: float
) -> np.ndarray:
    """Zeros of the Rosenbrock pencil by orthogonal deflation of its infinite part.

    Each step removes either the invertible part of the feedthrough (solving for
    those inputs) or, when the feedthrough is zero, one block of states driven
    directly by the inputs (which turn into the inputs of a smaller system).
    What remains is a square pencil with no infinite eigenvalues, whose
    eigenvalues are the finite zeros, so no huge spurious zeros appear.
    """
    p, m = D.shape
    if m > p:  # zeros of the dual system are the same
        A, B, C, D = A.T, C.T, B.T, D.T
        p, m = m, p
    A, B, C, D = (np.array(x, dtype=float) for x in (A, B, C, D))
    while True:
        n = A.shape[0]
        if D.size:
            U, s, Vt = np.linalg.svd(D, full_matrices=True)
            r = int(np.sum(s > tol))
        else:
            r = 0
        if r:
            V = Vt.T
            Ct = U.T @ C
            Bt = B @ V
            A = A - Bt[:, :r] @ (Ct[:r] / s[:r, None])
            B, C = Bt[:, r:], Ct[r:]
            p, m = p - r, m - r
            D = np.zeros((p, m))
        if n == 0:
            return np.zeros(0, dtype=complex)
        if m == 0:
            if p == 0:
                return np.linalg.eigvals(A)
            return _unobservable_eigenvalues(A, C, tol)
        U, s, Vt = np.linalg.svd(B, full_matrices=True)
        k = int(np.sum(s > tol))
        if k == 0:
            return _unobservable_eigenvalues(A, C, tol)
        # inputs in the null space of B act on nothing: drop them (normal rank)
        Q = np.concatenate([U[:, k:], U[:, :k]], axis=1)
        At = Q.T @ A @ Q
        Ct = C @ Q
        A, B = At[: n - k, : n - k], At[: n - k, n - k :]
        C, D = Ct[:, : n - k], Ct[:, n - k :]
        m = k


def siso_zeros_gain(
    A: np.ndarray, b: np.ndarray, c: np.ndarray, d: float, tol: float
) -> tuple[np.ndarray, float]:
    """Finite zeros and high-frequency gain of ``c (sI - A)^-1 b + d``.

    The gain is the leading numerator coefficient (first non-zero Markov
    parameter). It is accumulated through the deflation of
    :func:`invariant_zeros` with Householder reflections; a zero channel gives
    ``(empty, 0.0)``.
    """
    A = np.array(A, dtype=float)
    b = np.array(b, dtype=float).ravel()
    c = np.array(c, dtype=float).ravel()
    d = float(d)
    gain = 1.0
    while True:
        n = A.shape[0]
        if abs(d) > tol:
            if n == 0:
                return np.zeros(0, dtype=complex), gain * d
            return np.linalg.eigvals(A - np.outer(b, c) / d), gain * d
        if n == 0:
            return np.zeros(0, dtype=complex), 0.0
        beta = float(np.linalg.norm(b))
        if beta <= tol:
            return np.zeros(0, dtype=complex), 0.0
        sign = 1.0 if b[-1] >= 0 else -1.0
        sigma = -sign * beta
        v = b.copy()
        v[-1] -= sigma
        v /= np.linalg.norm(v)
        H = np.eye(n) - 2.0 * np.outer(v, v)
        At = H @ A @ H
        ct = c @ H
        gain *= sigma
        A, b = At[:-1, :-1], At[:-1, -1]
        c, d = ct[:-1], float(ct[-1])


def channel_zeros_gains(model: StateSpaceModel) -> list[list[tuple[np.ndarray, float]]]:
    """``(zeros, gain)`` of every channel ``G_ij`` (see :func:`siso_zeros_gain`), as ``[i][j]``.

    Each channel is first scaled to ``b / ||b||``, ``c / ||c||`` (its zeros do not
    change; the gain is scaled back), so the rank decisions of the deflation
    are relative to the channel itself. Without it a channel whose ``b`` or
    ``c`` is tiny next to the rest of the model (a discretisation with a small
    sample time and a high relative degree has numerator coefficients of
    ``T**k``) looks like zero to a tolerance set by the whole model.
    """
    A, B, C, D = model.A, model.B, model.C, model.D
    return [
        [_scaled_channel(A, B[:, j], C[i], float(D[i, j])) for j in range(model.n_inputs)]
        for i in range(model.n_outputs)
    ]


def _scaled_channel(A: np.ndarray, b: np.ndarray, c: np.ndarray, d: float) -> tuple[np.ndarray, float]:
    sb = float(np.linalg.norm(b))
    sc = float(np.linalg.norm(c))
    if sb == 0.0 or sc == 0.0:  # the channel is its feedthrough alone
        return np.zeros(0, dtype=complex), d
    bs, cs, ds = b / sb, c / sc, d / (sb * sc)
    tol = system_tolerance(A, bs[:, None], cs[None, :], np.array([[ds]]))
    zeros, gain = siso_zeros_gain(A, bs, cs, ds, tol)
    return zeros, gain * sb * sc


def _poly_from_roots(roots: np.ndarray) -> np.ndarray:
    """Real monic polynomial with the given (conjugate-closed) roots."""
    if roots.size == 0:
        return np.ones(1)
    return np.real(np.poly(roots))


def channel_polynomials(model: StateSpaceModel) -> tuple[list[list[np.ndarray]], list[list[np.ndarray]]]:
    """Numerator and denominator of every channel ``G_ij = C (zI - A)^-1 B + D``, as ``[i][j]``.

    Every denominator is ``det(zI - A)`` from the eigenvalues of ``A`` (nothing
    cancelled); each numerator is the channel's high-frequency gain times the
    monic polynomial of its zeros (:func:`channel_zeros_gains`), ``[0]`` for a
    channel that is identically zero. Descending powers; see
    :func:`ident.lti.convert.ss_to_tf`, which wraps them in a
    :class:`~ident.lti.models.TransferFunctionModel`.
    """
    from scipy import linalg

    den = _poly_from_roots(linalg.eigvals(model.A)) if model.n_states else np.ones(1)
    nums, dens = [], []
    for channels in channel_zeros_gains(model):
        nrow, drow = [], []
        for zeros, gain in channels:
            if gain == 0.0:
                num = np.zeros(1)
            else:
                num = gain * _poly_from_roots(zeros)
            nrow.append(num)
            drow.append(den)
        nums.append(nrow)
        dens.append(drow)
    return nums, dens
