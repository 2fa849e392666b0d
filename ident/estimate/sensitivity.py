"""The prediction-error problem of a state-space model: predictor, local coordinates, Jacobian.

The one-step predictor of the innovations form ``x[k+1] = A x + B u + K e``,
``y = C x + D u + e`` is

    x[k+1] = Abar x[k] + Bbar u[k] + K y[k],   yhat[k] = C x[k] + D u[k],

with ``Abar = A - K C`` and ``Bbar = B - K D``; with ``K = 0`` it is the
free-run simulation (output error). :class:`PredictionProblem` evaluates the
weighted sum of squared prediction errors over a set of experiments (each
with its own initial state) and linearises it for
:func:`ident.estimate.gauss_newton.minimize`.

Local coordinates
-----------------
``theta = [vec A, vec B, vec C, vec D, vec K]`` (row-major,
:func:`ident.lti.covariance.theta_layout`). A similarity ``T = I + dT``
changes ``theta`` along ``(dT A - A dT, dT B, -C dT, 0, dT K)`` without
changing the predictor; :func:`local_coordinates` returns an orthonormal
basis of the free entries orthogonal to these ``n^2`` directions, the
data-driven local coordinates of [1]_.

Sensitivities
-------------
The derivative of ``yhat`` along a direction ``(dA, dB, dC, dD, dK)`` is
``C dx + dC x + dD u``, where ``dx`` follows the predictor's dynamics driven
by ``Gamma phi``, ``phi = [x, u, y]`` and
``Gamma = [dA - dK C - K dC, dB - dK D - K dD, dK]`` ([2]_, sec. 10.3). In
the eigenbasis ``Abar = V diag(lambda) V^-1`` every direction is a fixed
combination of the same filtered signals ``phi_j / (q - lambda_i)``, so all
directions together cost one first-order filtering of ``phi`` per mode
(conjugate modes share one) and one matrix product. When ``V`` is ill
conditioned (``cond(V) >`` :data:`MODAL_CONDITION`, a nearly defective
``Abar``) each direction is simulated on its own instead. The initial state
enters through ``C Abar^k``.

References
----------
.. [1] T. McKelvey, A. Helmersson and T. Ribarits, "Data driven local
   coordinates for multivariable linear systems and their application to
   system identification", *Automatica* 40(9), 1629-1635, 2004.
.. [2] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, sec. 10.3 (gradients of the prediction error).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterator, Sequence
from dataclasses import dataclass

import numpy as np

from ..lti.covariance import theta_layout
from ..lti.simulate import first_order_recursion, state_chunks
from .gauss_newton import Linearization

__all__ = [
    "MODAL_CONDITION",
    "STABLE_RADIUS",
    "pack_theta",
    "unpack_theta",
    "local_coordinates",
    "Point",
    "PredictionProblem",
]

#: Largest eigenvector condition number of ``Abar`` for which the
#: sensitivities are computed in its eigenbasis.
MODAL_CONDITION = 1e6

#: A predictor whose spectral radius is at least this is refused (unstable).
STABLE_RADIUS = 1.0 - 1e-9

#: Largest condition number of the unit-diagonal Gram matrix of the Jacobian for
#: which its R factor comes from a Cholesky factorisation (else Householder QR).
_GRAM_MAX_CONDITION = 1e10

#: Points whose prediction errors :meth:`PredictionProblem.all_errors` keeps.
_RECENT = 2

#: Samples of ``[u, y]`` stacked at a time to drive an innovations predictor.
_DRIVE_BLOCK = 1 << 16


def pack_theta(A, B, C, D, K) -> np.ndarray:
    """``theta`` from the five matrices (row-major, in the order of ``THETA_BLOCKS``)."""
    return np.concatenate([np.ravel(np.asarray(M, dtype=float)) for M in (A, B, C, D, K)])


def unpack_theta(theta: np.ndarray, n: int, m: int, p: int):
    """Return ``(A, B, C, D, K)`` as views of ``theta``."""
    lay = theta_layout(n, m, p)
    return (theta[lay["A"]].reshape(n, n), theta[lay["B"]].reshape(n, m),
            theta[lay["C"]].reshape(p, n), theta[lay["D"]].reshape(p, m),
            theta[lay["K"]].reshape(n, p))


def _gauge_tangent(theta: np.ndarray, n: int, m: int, p: int) -> np.ndarray:
    """``d theta`` of the similarities ``I + E_ij``, one column each: shape (q, n^2)."""
    A, B, C, _, K = unpack_theta(theta, n, m, p)
    lay = theta_layout(n, m, p)
    M = np.zeros((theta.size, n, n))
    eye = np.eye(n)
    # E_ij A has row i = A[j]; A E_ij has column j = A[:, i]; E_ij B has row i = B[j]; C E_ij column j = C[:, i]
    dA = np.einsum("ri,jc->ijrc", eye, A) - np.einsum("ri,cj->ijrc", A, eye)
    M[lay["A"]] = dA.transpose(2, 3, 0, 1).reshape(n * n, n, n)
    M[lay["B"]] = np.einsum("ri,jc->rcij", eye, B).reshape(n * m, n, n)
    M[lay["C"]] = -np.einsum("ri,cj->rcij", C, eye).reshape(p * n, n, n)
    M[lay["K"]] = np.einsum("ri,jc->rcij", eye, K).reshape(n * p, n, n)
    return M.reshape(theta.size, n * n)


def local_coordinates(theta: np.ndarray, n: int, m: int, p: int, free: np.ndarray,
                      *, gauge: bool = True) -> np.ndarray:
    """Orthonormal basis of the free directions of ``theta``, orthogonal to the similarity orbit.

    Parameters
    ----------
    theta : numpy.ndarray, shape (q,)
        The current point.
    n, m, p : int
        States, inputs, outputs.
    free : numpy.ndarray of bool, shape (q,)
        Free entries of ``theta``.
    gauge : bool
        Remove the similarity directions (default). ``False`` when the fixed
        entries already pin the coordinates (for example ``A, B, C`` fixed and
        only ``K`` free).

    Returns
    -------
    numpy.ndarray, shape (q, d)
        ``d = (free entries) - rank`` of the similarity tangent restricted to them.
    """
    idx = np.flatnonzero(free)
    Q = np.zeros((theta.size, idx.size))
    if not gauge or n == 0:
        Q[idx, np.arange(idx.size)] = 1.0
        return Q
    M = _gauge_tangent(theta, n, m, p)[idx]
    Q_full, R = np.linalg.qr(M, mode="complete")
    diag = np.abs(np.diag(R))
    if diag.size and np.min(diag) > M.shape[0] * np.finfo(float).eps * np.max(diag) * 1e3:
        return _embed(Q_full[:, M.shape[1]:], idx, theta.size)
    U, s, _ = np.linalg.svd(M, full_matrices=True)  # rank deficient (a non-minimal point): the SVD decides
    tol = max(M.shape) * np.finfo(float).eps * (float(s[0]) if s.size else 0.0)
    rank = int(np.sum(s > tol))
    return _embed(U[:, rank:], idx, theta.size)


def _embed(basis: np.ndarray, idx: np.ndarray, q: int) -> np.ndarray:
    out = np.zeros((q, basis.shape[1]))
    out[idx] = basis
    return out


@dataclass(slots=True)
class Point:
    """A point of the search: ``theta`` and the nuisance parameters of each experiment.

    ``x0[k]`` holds experiment ``k``'s initial state and, for a problem with
    output offsets, its constant output offsets after it (``n + p`` values).
    """

    theta: np.ndarray
    x0: list[np.ndarray]


class PredictionProblem:
    """Weighted prediction-error criterion of a state-space model on a set of experiments.

    Parameters
    ----------
    parts : sequence of (u, y)
        Experiments, ``(N_k, m)`` and ``(N_k, p)`` arrays.
    dims : (n, m, p)
        States, inputs, outputs.
    free : numpy.ndarray of bool
        Free entries of ``theta``.
    innovations : bool
        Predict one step ahead with ``K`` (else: simulate, ``K = 0``).
    weight : numpy.ndarray, shape (p, p)
        ``W``: the criterion is ``sum_k ||W e[k]||^2``.
    gauge : bool
        Remove similarity directions from the local coordinates (see :func:`local_coordinates`).
    offsets : bool
        Estimate a constant output offset per experiment with its initial state
        (output error only): the levels subtracted as the operating point need
        not be an equilibrium of the model over a finite record, and a constant
        left over must not be fitted as a slow mode.
    """

    def __init__(self, parts: Sequence[tuple[np.ndarray, np.ndarray]], dims: tuple[int, int, int],
                 free: np.ndarray, innovations: bool, weight: np.ndarray, *, gauge: bool = True,
                 offsets: bool = False) -> None:
        self.parts = tuple(parts)
        self.n, self.m, self.p = dims
        self.free = free
        self.innovations = innovations
        self.weight = weight
        self.gauge = gauge
        self.offsets = bool(offsets) and not innovations
        self.nuisance = self.n + (self.p if self.offsets else 0)
        self.n_samples = sum(u.shape[0] for u, _ in self.parts)
        self._recent: list[tuple[bytes, list[np.ndarray]]] = []  # errors of the last points evaluated

    def _like(self, parts, weight) -> PredictionProblem:
        like = PredictionProblem(parts, (self.n, self.m, self.p), self.free, self.innovations, weight,
                                 gauge=self.gauge, offsets=self.offsets)
        if parts is self.parts:  # the errors do not depend on the weighting
            like._recent = self._recent
        return like

    def with_parts(self, parts) -> PredictionProblem:
        """Return the same criterion on other experiments."""
        return self._like(parts, self.weight)

    def with_weight(self, weight: np.ndarray) -> PredictionProblem:
        """Return the same criterion with another output weighting."""
        return self._like(self.parts, weight)

    # ------------------------------------------------------------------ predictor

    def predictor(self, theta: np.ndarray):
        """``(Abar, [Bbar K] or B, C, D)`` of the predictor at ``theta``."""
        A, B, C, D, K = unpack_theta(theta, self.n, self.m, self.p)
        if self.innovations:
            return A - K @ C, np.hstack([B - K @ D, K]), C, D
        return A, B, C, D

    def drive(self, u: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Return the predictor's input: ``[u, y]`` (innovations) or ``u``."""
        return np.hstack([u, y]) if self.innovations else u

    def predictor_states(self, Ab: np.ndarray, Bb: np.ndarray, u: np.ndarray, y: np.ndarray,
                         x0: np.ndarray) -> Iterator[tuple[int, int, np.ndarray]]:
        """Yield ``(k0, k1, states)`` of the predictor, chunk by chunk (:func:`ident.lti.simulate.state_chunks`).

        The innovations predictor is driven by ``[u, y]``; that input is
        stacked one block of :data:`_DRIVE_BLOCK` samples at a time, so a long
        record is never copied whole.
        """
        if not self.innovations:
            yield from state_chunks(Ab, Bb, u, x0)
            return
        x = np.asarray(x0, dtype=float)
        for b0 in range(0, u.shape[0], _DRIVE_BLOCK):
            b1 = min(u.shape[0], b0 + _DRIVE_BLOCK)
            v = np.hstack([u[b0:b1], y[b0:b1]])
            last = x
            for k0, k1, states in state_chunks(Ab, Bb, v, x):
                last = states[-1]
                yield b0 + k0, b0 + k1, states
            x = Ab @ last + Bb @ v[-1]

    def admissible(self, theta: np.ndarray) -> bool:
        """Tell whether ``theta`` is finite and its predictor stable (spectral radius below :data:`STABLE_RADIUS`)."""
        Ab = self.predictor(theta)[0]
        if not np.all(np.isfinite(theta)):
            return False
        return self.n == 0 or float(np.max(np.abs(np.linalg.eigvals(Ab)))) < STABLE_RADIUS

    def errors(self, theta: np.ndarray, x0: np.ndarray, u: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Prediction errors ``y - yhat`` (unweighted) of one experiment (``x0``: its nuisance vector)."""
        Ab, Bb, C, D = self.predictor(theta)
        e = np.empty_like(y)
        for k0, k1, x in self.predictor_states(Ab, Bb, u, y, x0[:self.n]):
            e[k0:k1] = y[k0:k1] - x @ C.T - u[k0:k1] @ D.T
        if self.offsets:
            e -= x0[self.n:][None, :]
        return e

    def all_errors(self, point: Point) -> list[np.ndarray]:
        """Unweighted prediction errors of every experiment (read-only arrays).

        The errors of the last :data:`_RECENT` points are kept: a search asks
        for the loss, the error covariance and the weighting at the same point
        (each a pass over all the data).
        """
        key = b"".join([np.ascontiguousarray(point.theta).tobytes(),
                        *(np.ascontiguousarray(x).tobytes() for x in point.x0)])
        for seen, errors in self._recent:
            if seen == key:
                return errors
        errors = [self.errors(point.theta, x0, u, y) for (u, y), x0 in zip(self.parts, point.x0, strict=True)]
        for e in errors:
            e.setflags(write=False)
        self._recent[:] = [(key, errors), *self._recent[:_RECENT - 1]]
        return errors

    def loss(self, point: Point) -> float:
        """``sum ||W e||^2`` over all experiments; ``inf`` when not admissible or not finite."""
        if not self.admissible(point.theta):
            return math.inf
        total = 0.0
        with np.errstate(all="ignore"):
            for e in self.all_errors(point):
                ew = e @ self.weight.T
                total += float(np.einsum("ij,ij->", ew, ew))
        return total if math.isfinite(total) else math.inf

    def step(self, point: Point, h: np.ndarray, lin: Linearization) -> Point:
        """Return ``point`` moved by ``h`` in the local coordinates of ``lin`` (then the nuisance parameters)."""
        Q = lin.context
        d, w = Q.shape[1], self.nuisance
        x0 = [x + h[d + k * w: d + (k + 1) * w] for k, x in enumerate(point.x0)]
        return Point(point.theta + Q @ h[:d], x0)

    # ------------------------------------------------------------------ linearisation

    def coordinates(self, theta: np.ndarray) -> np.ndarray:
        """Local coordinates at ``theta`` (see :func:`local_coordinates`)."""
        return local_coordinates(theta, self.n, self.m, self.p, self.free, gauge=self.gauge)

    def linearize(self, point: Point) -> Linearization:
        """R factor and rotated errors of the weighted Jacobian at ``point`` (context: the coordinates)."""
        Q = self.coordinates(point.theta)
        R, loss = _r_factor(lambda: self.row_blocks(point, Q))
        return Linearization(R=R[:-1, :-1], z=R[:-1, -1], loss=loss, context=Q)

    def row_blocks(self, point: Point, Q: np.ndarray) -> Iterator[np.ndarray]:
        """Rows ``[-W dyhat/dbeta, -W dyhat/dnuisance (all experiments), W e]``, chunk by chunk."""
        d, w, p = Q.shape[1], self.nuisance, self.p
        width = d + w * len(self.parts) + 1
        for k, (_, J, Jx, e) in self.jacobian_chunks(point, Q):
            rows = e.shape[0] * p
            block = np.zeros((rows, width))
            block[:, :d] = -self._weighted(J).reshape(rows, d)
            block[:, d + k * w:d + (k + 1) * w] = -self._weighted(Jx).reshape(rows, w)
            block[:, -1] = (e @ self.weight.T).reshape(rows)
            yield block

    def _weighted(self, J: np.ndarray) -> np.ndarray:
        """``W J[t]`` for every sample ``t`` of ``J`` (T, p, k); a stacked product, several times faster than einsum."""
        if self.p == 1:
            return J * float(self.weight[0, 0])
        return np.matmul(self.weight, J)

    def jacobian_chunks(self, point: Point, Q: np.ndarray):
        """Yield ``(experiment, (t0, dyhat/dbeta (T, p, d), dyhat/dnuisance (T, p, n [+ p]), e (T, p)))``."""
        gamma, direct = self.directions(point.theta, Q)
        n, p = self.n, self.p
        for k, ((u, y), x0) in enumerate(zip(self.parts, point.x0, strict=True)):
            for t0, J, Jx, e in self._chunks(point.theta, x0[:n], u, y, gamma, direct):
                if self.offsets:
                    e = e - x0[n:][None, :]
                    Jx = np.concatenate([Jx, np.broadcast_to(np.eye(p), (e.shape[0], p, p))], axis=2)
                yield k, (t0, J, Jx, e)

    def directions(self, theta: np.ndarray, Q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per coordinate: ``Gamma_k`` (n, width) driving ``dx`` and ``[dC dD]_k`` (p, n + m)."""
        n, m, p = self.n, self.m, self.p
        _, _, C, D, K = unpack_theta(theta, n, m, p)
        lay = theta_layout(n, m, p)
        d = Q.shape[1]
        dA = Q[lay["A"]].T.reshape(d, n, n)
        dB = Q[lay["B"]].T.reshape(d, n, m)
        dC = Q[lay["C"]].T.reshape(d, p, n)
        dD = Q[lay["D"]].T.reshape(d, p, m)
        if self.innovations:
            dK = Q[lay["K"]].T.reshape(d, n, p)
            gamma = np.concatenate([dA - dK @ C - K @ dC, dB - dK @ D - K @ dD, dK], axis=2)
        else:
            gamma = np.concatenate([dA, dB], axis=2)
        return gamma, np.concatenate([dC, dD], axis=2)

    def _chunks(self, theta, x0, u, y, gamma, direct):
        Ab, Bb, C, D = self.predictor(theta)
        if self.n:
            lam, V = np.linalg.eig(Ab)
            if np.linalg.cond(V) < MODAL_CONDITION:
                yield from self._modal_chunks(lam, V, (Ab, Bb, C, D), x0, u, y, gamma, direct)
                return
        yield from self._plain_chunks((Ab, Bb, C, D), x0, u, y, gamma, direct)

    def _modal_maps(self, lam, V, C, gamma, direct):
        """Constant matrices mapping the chunk features to ``dyhat`` and ``C Abar^k``."""
        n, m, p = self.n, self.m, self.p
        d, width = gamma.shape[0], gamma.shape[2]
        Vinv = np.linalg.inv(V)
        CV = C @ V
        reps = [i for i in range(n) if lam[i].imag >= 0]  # a complex mode stands for its conjugate pair
        W = np.empty((len(reps), width, p, d), dtype=complex)
        for r, i in enumerate(reps):
            weight = 1.0 if lam[i].imag == 0 else 2.0
            H = np.einsum("j,kjw->wk", Vinv[i], gamma)  # (width, d): (V^-1 Gamma_k)[i, :]
            W[r] = weight * H[:, None, :] * CV[None, :, i, None]
        W = W.reshape(len(reps) * width, p * d)
        to_output = np.vstack([direct.transpose(2, 1, 0).reshape(n + m, p * d), W.real, -W.imag])
        x0_map = (CV[:, :, None] * Vinv[None, :, :]).transpose(1, 0, 2).reshape(n, p * n)
        return reps, to_output, x0_map

    def _modal_chunks(self, lam, V, pred, x0, u, y, gamma, direct):
        Ab, Bb, C, D = pred
        n, m, p = self.n, self.m, self.p
        d, width = gamma.shape[0], gamma.shape[2]
        reps, to_output, x0_map = self._modal_maps(lam, V, C, gamma, direct)
        carry = np.zeros((len(reps), width), dtype=complex)
        powers = _Powers(lam)
        split = n + m + len(reps) * width
        for k0, k1, x in self.predictor_states(Ab, Bb, u, y, x0):
            T, us = k1 - k0, u[k0:k1]
            phi = np.hstack([x, us, y[k0:k1]]) if self.innovations else np.hstack([x, us])
            features = np.empty((T, n + m + 2 * len(reps) * width))
            features[:, :n + m] = phi[:, :n + m]
            for r, i in enumerate(reps):
                F, carry[r] = first_order_recursion(lam[i], phi, carry[r])
                features[:, n + m + r * width:n + m + (r + 1) * width] = F.real
                features[:, split + r * width:split + (r + 1) * width] = F.imag
            J = (features @ to_output).reshape(T, p, d)
            pw = powers.block(k0, T)
            Jx = np.zeros((T, p, n)) if pw is None else np.real(pw @ x0_map).reshape(T, p, n)
            yield k0, J, Jx, y[k0:k1] - x @ C.T - us @ D.T

    def _plain_chunks(self, pred, x0, u, y, gamma, direct):
        Ab, Bb, C, D = pred
        n, p = self.n, self.p
        sens = np.zeros((gamma.shape[0], n))
        free = np.eye(n)
        for k0, k1, x in self.predictor_states(Ab, Bb, u, y, x0):
            T, us = k1 - k0, u[k0:k1]
            phi = np.hstack([x, us, y[k0:k1]]) if self.innovations else np.hstack([x, us])
            J = np.einsum("tq,kpq->tpk", phi[:, :n + self.m], direct)
            for k in range(gamma.shape[0]):
                states = _states(Ab, gamma[k], phi, sens[k])
                J[:, :, k] += states @ C.T
                sens[k] = Ab @ states[-1] + gamma[k] @ phi[-1]
            Jx = np.empty((T, p, n))
            for i in range(n):
                states = _states(Ab, np.zeros((n, 1)), np.zeros((T, 1)), free[:, i])
                Jx[:, :, i] = states @ C.T
                free[:, i] = Ab @ states[-1]
            yield k0, J, Jx, y[k0:k1] - x @ C.T - us @ D.T


def _states(A: np.ndarray, B: np.ndarray, u: np.ndarray, x0: np.ndarray) -> np.ndarray:
    out = np.empty((u.shape[0], A.shape[0]))
    for k0, k1, x in state_chunks(A, B, u, x0):
        out[k0:k1] = x
    return out


class _Powers:
    """``lambda_i^t`` for blocks of consecutive ``t`` (``None`` once every power has underflowed)."""

    def __init__(self, lam: np.ndarray) -> None:
        self.zero = lam == 0
        self.log = np.log(np.where(self.zero, 1.0, lam).astype(complex))
        live = self.log.real[~self.zero]
        self.rate = float(np.max(live)) if live.size else -np.inf

    def block(self, t0: int, count: int) -> np.ndarray | None:
        if self.zero.size == 0:
            return np.zeros((count, 0), dtype=complex)
        last = count if self.rate >= 0 else min(count, max(int(745.0 / -self.rate) - t0 + 1, 0))
        if last <= 0 and t0 > 0:
            return None
        out = np.zeros((count, self.zero.size), dtype=complex)
        steps = np.arange(t0, t0 + last, dtype=float)
        with np.errstate(under="ignore"):
            out[:last] = np.exp(steps[:, None] * self.log[None, :])
        out[:, self.zero] = 0.0
        if t0 == 0:
            out[0, self.zero] = 1.0
        return out


def _r_factor(blocks: Callable[[], Iterator[np.ndarray]]) -> tuple[np.ndarray, float]:
    """R factor of the tall matrix whose row blocks ``blocks()`` yields, and its last column's squared norm.

    The Gram matrix is accumulated in one pass and factorised by Cholesky after
    scaling to a unit diagonal; when its condition is above
    :data:`_GRAM_MAX_CONDITION` (the factor would lose more than about six
    digits) a second pass factorises the blocks by Householder QR.
    """
    G = None
    total = 0.0
    for block in blocks():
        G = block.T @ block if G is None else G + block.T @ block
        total += float(block[:, -1] @ block[:, -1])
    w = G.shape[0]
    scale = np.sqrt(np.diag(G))
    scale = np.where(scale > 0, scale, 1.0)
    Gs = G / scale[:, None] / scale[None, :]
    eig = np.linalg.eigvalsh(Gs[:-1, :-1]) if w > 1 else np.ones(1)
    if eig[0] > eig[-1] / _GRAM_MAX_CONDITION:
        try:
            return np.linalg.cholesky(Gs).T * scale[None, :], total
        except np.linalg.LinAlgError:
            pass
    R = np.zeros((0, w))
    for block in blocks():
        R = np.linalg.qr(np.vstack([R, block]), mode="r")
    if R.shape[0] < w:
        R = np.vstack([R, np.zeros((w - R.shape[0], w))])
    return R, total
