"""Time-domain simulation of discrete-time state-space models (numpy; scipy only in fallbacks).

Long logs (millions of samples) are simulated with a blocked ("lifted")
recursion. For ``x[k+1] = A x[k] + B u[k]`` the samples are cut into blocks of
``L``; pass 1 runs the recursion inside every block at once from a zero state
(each step is one matrix product over all blocks); the block-start states
obey the same kind of recursion with ``A^L``, solved the same way, level by
level, down to a short plain loop; pass 2 reruns the plain recursion in every
block from its true start. The cost is ``O(N n^2)`` in a few hundred BLAS
calls per chunk of samples, and the working memory is bounded by the chunk
length.

Rounding in the block-start recursion is amplified by the growth of the
lifted powers ``A^L, A^(L^2), ...`` beyond the spectral radius; for most
models it is small and one run is as accurate as the plain recursion. A
strongly non-normal ``A`` (the companion matrix of clustered poles near 1, as
an ARX model in observer form has) is repaired by refinement: pass 2 leaves
an error only at the block starts, so the mismatch between each block's end
and the next block's start is fed back through the block-start recursion
until it reaches rounding level. If that does not converge, the chunk is
simulated in the complex Schur basis (``A = Z T Z^H``, from
:func:`scipy.linalg.schur`, imported only then), each coordinate a scalar
first-order recursion, which lifts without growth.
:func:`all_pole_filter` follows the same plan with a block Toeplitz solve,
and falls back on a cascade of first-order sections.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from .._validate import as_signal
from ..errors import ModelError, OptionError
from .models import StateSpaceModel

__all__ = [
    "simulate",
    "simulate_states",
    "estimate_initial_state",
    "free_response_matrix",
    "add_free_response",
    "all_pole_filter",
    "first_order_recursion",
    "state_chunks",
]

#: Samples simulated per chunk (bounds the working memory to a few MB per state).
_CHUNK = 1 << 16

#: Block length of each lifting level.
_BLOCK = 8

#: Recursions up to this length run sample by sample.
_PLAIN = 8

#: Samples per block in :func:`all_pole_filter` (at least the filter order).
_POLE_BLOCK = 32

#: Recursions up to this length run sample by sample in :func:`all_pole_filter`
#: when the block solve would need repair.
_SHORT = 2048

#: Growth of a lifted power of ``A`` beyond its spectral radius above which
#: the result is refined (rounding in the block-start recursion is amplified
#: by about this factor).
_GROWTH_OK = 1e3

#: A refinement is done when the mismatch at the block starts is below this
#: fraction of the largest value (measured floors are 1e-13 to 1e-11; the
#: results then agree with the plain recursion as well as it agrees with an
#: extended-precision one).
_DONE = 1e-11

#: A refinement that stops converging is accepted only when the mismatch at
#: the block starts is below this fraction of the largest value.
_STALL = 1e-10

#: Most refinement steps.
_MAX_REFINE = 6


def simulation_inputs(
    model: StateSpaceModel, u: np.ndarray, x0: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray]:
    """Validate the inputs of a simulation: ``u`` as (N, m) float samples, ``x0`` (zeros by default)."""
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


class _Recursion:
    """``x[k+1] = x[k] @ at + v[k] @ bt`` (row vectors), solved by lifting.

    The rows ``[x[k], v[k]]`` sit side by side in one work buffer ``W`` of
    shape ``(M, n + q)``, so each step is a single matrix product with
    ``aug = [at; bt]``. Lifted levels (``at^L`` with the identity as input
    matrix) are built once and reused by every chunk.
    """

    __slots__ = ("at", "n", "q", "aug", "_children", "_growth")

    def __init__(self, at: np.ndarray, bt: np.ndarray) -> None:
        self.at = at
        self.n = at.shape[0]
        self.q = bt.shape[0]
        self.aug = np.concatenate([at, bt], axis=0)
        self._children: dict[int, _Recursion] = {}
        self._growth = 1.0  # growth of this level's own power (1 at the top)

    def buffer(self, N: int, dtype: np.dtype) -> np.ndarray:
        """Return a zeroed work buffer for ``N`` samples (inputs go in columns ``n:``)."""
        M = max(N, 1) if N <= _PLAIN else -(-N // _BLOCK) * _BLOCK
        return np.zeros((M, self.n + self.q), dtype=np.result_type(self.aug, dtype))

    def _child(self, L: int) -> _Recursion | None:
        # None when A^L overflows: a plain loop then keeps an unexcited unstable
        # mode at exactly zero instead of multiplying zero by infinity
        if L not in self._children:
            with np.errstate(over="ignore", invalid="ignore"):
                power = np.linalg.matrix_power(self.at, L)
            child = None
            if np.all(np.isfinite(power)):
                size = float(np.max(np.abs(power).sum(axis=1)))
                if size > _GROWTH_OK:  # compare with the spectral radius only when it matters
                    size /= max(1.0, float(np.max(np.abs(np.linalg.eigvals(power)))))
                child = _Recursion(power, np.eye(self.n, dtype=power.dtype))
                child._growth = size
            self._children[L] = child
        return self._children[L]

    def growth(self) -> float:
        """Largest growth of the lifted powers used so far (1 when none)."""
        out = self._growth
        for child in self._children.values():
            if child is not None:
                out = max(out, child.growth())
        return out

    def _plain(self, W: np.ndarray, N: int, x0: np.ndarray) -> np.ndarray:
        n, aug = self.n, self.aug
        W[0, :n] = x0
        for k in range(N - 1):
            np.matmul(W[k], aug, out=W[k + 1, :n])
        return W[N - 1] @ aug if N else W[0, :n].copy()

    def run(self, W: np.ndarray, N: int, x0: np.ndarray) -> np.ndarray:
        """Fill ``W[:N, :n]`` with ``x[0] .. x[N-1]`` from ``x[0] = x0``; return ``x[N]``."""
        n, aug = self.n, self.aug
        if N <= _PLAIN:
            return self._plain(W, N, x0)
        L = _BLOCK
        child = self._child(L)
        if child is None:
            return self._plain(W, N, x0)
        M = W.shape[0]
        nb = M // L
        V = W.reshape(nb, L, n + self.q)  # V[b, j] = sample b L + j
        V[:, 0, :n] = 0.0
        for j in range(L - 1):  # pass 1: every block from a zero state
            np.matmul(V[:, j], aug, out=V[:, j + 1, :n])
        W2 = child.buffer(nb, W.dtype)
        np.matmul(V[:, L - 1], aug, out=W2[:nb, n:])  # block-end states from zero
        end = child.run(W2, nb, x0)  # block-start states
        V[:, 0, :n] = W2[:nb, :n]
        for j in range(L - 1):  # pass 2: every block from its true start
            np.matmul(V[:, j], aug, out=V[:, j + 1, :n])
        return end if M == N else W[N, :n].copy()

    def solve(self, W: np.ndarray, N: int, x0: np.ndarray) -> np.ndarray | None:
        """:meth:`run`, refined when lifting amplified rounding; None if that fails.

        Pass 2 of :meth:`run` is the plain recursion inside every block, so
        the only error left is at the block starts: the mismatch between
        each block's computed end and the next block's start. It is fed back
        through the lifted block recursion until it reaches rounding level
        (each step costs one more pass 2). ``None`` when it stops converging.
        """
        end = self.run(W, N, x0)
        if N <= _PLAIN or self._child(_BLOCK) is None or self.growth() <= _GROWTH_OK:
            return end
        n, aug, L = self.n, self.aug, _BLOCK
        child = self._children[L]
        M = W.shape[0]
        nb = M // L
        V = W.reshape(nb, L, n + self.q)
        scale = float(np.max(np.abs(W[:N, :n]), initial=0.0))
        last = np.inf
        for step in range(_MAX_REFINE + 1):
            ends = V[:, L - 1] @ aug  # each block's end, from its start
            mismatch = ends[:-1] - V[1:, 0, :n]
            size = float(np.max(np.abs(mismatch), initial=0.0))
            verdict = _refinement(size, scale, last, step)
            if verdict is None:
                return None
            if verdict:
                break
            W2 = child.buffer(nb, W.dtype)
            W2[: nb - 1, n:] = mismatch
            child.run(W2, nb, np.zeros(n, dtype=W.dtype))
            V[:, 0, :n] += W2[:nb, :n]
            for j in range(L - 1):  # pass 2 again from the corrected starts
                np.matmul(V[:, j], aug, out=V[:, j + 1, :n])
            last = size
        return V[nb - 1, L - 1] @ aug if M == N else W[N, :n].copy()

    def prepare(self, N: int) -> float:
        """Build the lifted levels a recursion of ``N`` samples uses; return their growth."""
        level, length = self, N
        while level is not None and length > _PLAIN:
            level = level._child(_BLOCK)
            length = -(-length // _BLOCK)
        return self.growth()


def _refinement(size: float, scale: float, last: float, step: int) -> bool | None:
    """Control of a block-start refinement: ``True`` stop (converged), ``None`` give up, ``False`` go on.

    ``size`` is the largest block-start mismatch now, ``last`` the one before,
    ``scale`` the size of the solution.
    """
    if not np.isfinite(size + scale):
        return None
    if size <= _DONE * scale:
        return True
    if size > 0.5 * last:  # no longer converging: accept rounding-level noise only
        return None if size > _STALL * scale else True
    if step == _MAX_REFINE:
        return None
    return False


def _copy_columns(dst: np.ndarray, src: np.ndarray) -> None:
    """``dst[...] = src``; a strided copy of a few columns is much faster one at a time."""
    if src.shape[1] <= 4:
        for j in range(src.shape[1]):
            dst[:, j] = src[:, j]
    else:
        dst[...] = src


def _fill_inputs(W: np.ndarray, n: int, v: np.ndarray) -> None:
    """Copy the inputs ``v`` into columns ``n:`` of the work buffer ``W``."""
    if np.iscomplexobj(W) and not np.iscomplexobj(v):
        W = W.real  # a float view: no casting in the copy (the imaginary parts stay zero)
    _copy_columns(W[: v.shape[0], n : n + v.shape[1]], v)


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
    The samples are cut into blocks of ``L >= na``. Inside a block,
    ``y = T r + F^T s`` where ``T`` is the lower-triangular Toeplitz matrix of
    the impulse response, ``s = (y[-1], ..., y[-na])`` the block's past
    outputs and ``F`` their free responses: one matrix product for all
    blocks. The past outputs of the next block follow from ``s_{b+1} = Phi^T
    s_b + (zero-state tail of block b)``, solved by the lifted recursion of
    :mod:`ident.lti.simulate`.

    When the free responses grow large (poles clustered near 1, where the
    past-output basis is ill-conditioned) that loses accuracy. Then short
    signals run the plain recursion; longer ones carry the past outputs in
    the Schur basis of ``Phi``, rerun the recursion itself in every block
    (all blocks at once) and feed the mismatch at the block starts back until
    it reaches rounding level. Should that fail, the filter runs as a cascade
    of first-order sections ``1 / (1 - p_i q^-1)`` over the roots of ``a``
    (:func:`numpy.roots`), refined with the residual ``r - a * y``. Each way
    the result equals :func:`scipy.signal.lfilter` ``([1], a, r)`` up to the
    filter's own sensitivity to rounding.
    """
    dtype = np.result_type(np.asarray(a), np.asarray(r), np.float64)
    a = np.asarray(a, dtype=dtype).ravel()
    r = np.asarray(r, dtype=dtype).ravel()
    na = a.size - 1
    if na == 0:
        return r.copy()
    N = r.size
    if N == 0:
        return np.empty(0, dtype=dtype)
    solver = _PoleSolver(a, _POLE_BLOCK)
    if solver.growth(N) <= _GROWTH_OK:
        return solver.solve(r)
    if N <= _SHORT:  # the plain recursion is quicker than any repair
        y = np.zeros(na + N, dtype=dtype)
        back = a[:0:-1]
        for k in range(N):
            y[na + k] = r[k] - back @ y[k : na + k]
        return y[na:]
    solver.use_schur()
    with np.errstate(over="ignore", invalid="ignore"):  # a failed attempt is redone
        y = solver.solve_refined(r)
    if y is None:
        # rounding in the past outputs was amplified beyond repair: first-order
        # sections, refined with the residual of the recursion itself
        poles = np.roots(a)
        real = not np.iscomplexobj(a) and not np.iscomplexobj(r)
        y = _refine(lambda rhs: _cascade(poles, rhs, real), a, r, _cascade(poles, r, real))
    return y.astype(dtype, copy=False)


def _refine(solve, a: np.ndarray, r: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Refine ``a * y = r`` by ``y += solve(r - a * y)`` while the corrections shrink."""
    N = r.size
    last = np.inf
    for _ in range(_MAX_REFINE):
        d = solve(r - np.convolve(y, a)[:N])
        size = float(np.max(np.abs(d)))
        if not np.isfinite(size) or size > 0.5 * last:  # at the rounding floor (or diverging)
            break
        y = y + d
        last = size
        if size <= 4 * np.finfo(float).eps * float(np.max(np.abs(y))):
            break
    return y


def _cascade(poles: np.ndarray, r: np.ndarray, real: bool) -> np.ndarray:
    """``r / prod(1 - p_i q^-1)`` as first-order sections, one pole at a time."""
    y = r.astype(complex)
    for pole in poles:  # y <- y / (1 - pole q^-1)
        x, _ = first_order_recursion(pole, y, 0.0)  # x[k] = previous output of the section
        y += pole * x
    return y.real if real else y


class _PoleSolver:
    """Block Toeplitz solver of :func:`all_pole_filter` for fixed coefficients."""

    __slots__ = ("a", "L", "T", "F", "tail", "phi", "rec", "_free_growth", "_schur")

    def __init__(self, a: np.ndarray, block: int) -> None:
        na = a.size - 1
        L = max(block, na)
        # plain recursion over one block: columns 0..na-1 start from a unit past
        # output y[-1-l], column na is the impulse response
        Z = np.zeros((na + L, na + 1), dtype=a.dtype)
        Z[na - 1 - np.arange(na), np.arange(na)] = 1.0
        back = a[:0:-1]  # a_na .. a_1
        for j in range(L):
            Z[na + j] = -(back @ Z[j : na + j])
            if j == 0:
                Z[na, na] += 1.0
        self.a, self.L = a, L
        self.F = np.ascontiguousarray(Z[na:, :na].T)  # (na, L)
        h = Z[na:, na]
        lag = np.arange(L)[None, :] - np.arange(L)[:, None]
        self.T = np.where(lag >= 0, h[np.clip(lag, 0, None)], 0)  # row convention: y = r @ T
        self.tail = L - 1 - np.arange(na)  # y[L-1], ..., y[L-na] of a block
        self.phi = np.ascontiguousarray(self.F[:, self.tail])  # s_{b+1} = s_b phi + tail_b
        self.rec = _Recursion(self.phi, np.eye(na, dtype=a.dtype))
        self._free_growth = float(np.max(np.abs(self.F).sum(axis=0)))
        self._schur: tuple[np.ndarray, np.ndarray] | None = None

    def growth(self, N: int) -> float:
        """Amplification of rounding for ``N`` samples.

        Past outputs that grow under lifting are carried in the Schur basis of
        ``phi`` instead (see :meth:`solve`); what remains is the growth of the
        free responses inside one block.
        """
        if self._schur is None and self.rec.prepare(-(-N // self.L)) > _GROWTH_OK:
            self.use_schur()
        return self._free_growth

    def use_schur(self) -> None:
        """Carry the past outputs in the Schur basis of ``phi`` (no growth under lifting)."""
        if self._schur is None:
            self._schur = _schur(self.phi.T)

    def _past(self, H: np.ndarray) -> np.ndarray:
        """Past outputs of every block: ``s_{b+1} = s_b phi + H_b`` from ``s_0 = 0``."""
        nb, na = H.shape
        if self._schur is None:
            W = self.rec.buffer(nb, H.dtype)
            W[:nb, na:] = H
            self.rec.run(W, nb, np.zeros(na, dtype=W.dtype))
            return W[:nb, :na]
        T, Z = self._schur  # phi^T = Z T Z^H: z = Z^H s, row by row
        zs, _ = _triangular(T, H @ Z.conj(), np.zeros(na))
        past = zs @ Z.T
        return past if np.iscomplexobj(H) else past.real

    def _blocks(self, r: np.ndarray) -> np.ndarray:
        N, L = r.size, self.L
        nb = -(-N // L)
        if nb * L == N:
            return r.reshape(nb, L)
        R = np.zeros(nb * L, dtype=np.result_type(r, self.T))
        R[:N] = r
        return R.reshape(nb, L)

    def solve(self, r: np.ndarray) -> np.ndarray:
        """``y`` with ``a * y = r``: products for the zero-state and the free parts.

        The zero-state tails of all blocks come first (a narrow product); the
        block outputs are then formed a group of blocks at a time, so the
        temporaries stay small.
        """
        R = self._blocks(r)
        nb = R.shape[0]
        S = self._past(R @ self.T[:, self.tail])
        Y = np.empty(R.shape, dtype=np.result_type(R, self.T))
        step = max(1, _CHUNK // self.L)
        for b0 in range(0, nb, step):
            b1 = min(nb, b0 + step)
            np.matmul(R[b0:b1], self.T, out=Y[b0:b1])
            Y[b0:b1] += S[b0:b1] @ self.F
        return Y.reshape(-1)[: r.size]

    def solve_refined(self, r: np.ndarray) -> np.ndarray | None:
        """``y`` with ``a * y = r`` as accurate as the plain recursion; None if that fails.

        The block-start past outputs come from :meth:`_past`; every block then
        reruns the recursion itself from them (all blocks at once, one
        product per sample of a block), and the mismatch between each block's
        computed tail and the next block's start is fed back through
        :meth:`_past` until it reaches rounding level. ``None`` when it does
        not converge (rounding amplified beyond repair).
        """
        R = self._blocks(r)
        nb, L = R.shape
        na = self.a.size - 1
        S = self._past(R @ self.T[:, self.tail])
        RT = np.ascontiguousarray(R.T)  # sample-of-block major: contiguous rows
        E = np.empty((na + L, nb), dtype=np.result_type(R, self.T))  # [past outputs; block]
        back = np.ascontiguousarray(self.a[:0:-1])  # a_na .. a_1
        tail = na + self.tail
        last, scale = np.inf, None
        for step in range(_MAX_REFINE + 1):
            E[:na] = S[:, ::-1].T
            for j in range(L):  # the recursion itself, every block at once
                np.subtract(RT[j], back @ E[j : na + j], out=E[na + j])
            mismatch = E[tail, :-1].T - S[1:]
            size = float(np.max(np.abs(mismatch), initial=0.0))
            if scale is None:
                scale = float(np.max(np.abs(E[na:])))
            verdict = _refinement(size, scale, last, step)
            if verdict is None:
                return None
            if verdict:
                break
            drive = np.zeros_like(S)
            drive[:-1] = mismatch
            S = S + self._past(drive)
            last = size
        return E[na:].T.reshape(-1)[: r.size]


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
    computed by the lifted recursion of :mod:`ident.lti.simulate` with all columns
    at once (``|pole|^L`` never grows beyond the spectral radius, so no
    refinement is needed).
    """
    drive = np.asarray(drive)
    dtype = np.result_type(drive, np.asarray(start), np.asarray(pole), np.float64)
    cols = drive.reshape(drive.shape[0], int(np.prod(drive.shape[1:])))
    N, c = cols.shape
    x = np.asarray(start, dtype=dtype).reshape(-1)
    x = np.broadcast_to(x, (c,)) if x.size == 1 else x
    eye = np.eye(c)
    if np.iscomplexobj(x):
        # complex numbers as (real, imaginary) pairs: real products are about
        # twice as fast as complex ones; the pole acts as a scaled rotation
        p = complex(pole)
        at = np.block([[p.real * eye, p.imag * eye], [-p.imag * eye, p.real * eye]])
        parts = [cols.real] + ([cols.imag] if np.iscomplexobj(cols) else [])
        bt = np.eye(len(parts) * c, 2 * c)
        x = np.concatenate([x.real, x.imag])
    else:
        at, bt, parts = eye * float(np.real(pole)), eye, [cols]
    rec = _Recursion(at, bt)
    out = np.empty((N, c), dtype=dtype)
    for k0 in range(0, max(N, 1), _CHUNK):
        k1 = min(N, k0 + _CHUNK)
        W = rec.buffer(k1 - k0, np.float64)
        for i, part in enumerate(parts):
            _fill_inputs(W, at.shape[0] + i * c, part[k0:k1])
        x = rec.run(W, k1 - k0, x)
        if np.iscomplexobj(out):
            _copy_columns(out.real[k0:k1], W[: k1 - k0, :c])
            _copy_columns(out.imag[k0:k1], W[: k1 - k0, c : 2 * c])
        else:
            _copy_columns(out[k0:k1], W[: k1 - k0, :c])
    if np.iscomplexobj(out):
        x = x[:c] + 1j * x[c:]
    return out.reshape(drive.shape), x.reshape(np.shape(start))


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
    u, x0 = simulation_inputs(model, u, x0)
    out = np.empty((u.shape[0], model.n_states))
    for k0, k1, x in state_chunks(model.A, model.B, u, x0):
        out[k0:k1] = x
    return out


def _schur(A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Complex Schur form ``A = Z T Z^H`` (:func:`scipy.linalg.schur`).

    Only the fallbacks need it (lifted powers that grow far beyond the spectral
    radius), so scipy is imported here and the usual path stays numpy-only.
    """
    from scipy import linalg

    T, Z = linalg.schur(np.asarray(A, dtype=complex), output="complex")
    return T, Z


def _work_chunks(
    A: np.ndarray, B: np.ndarray, u: np.ndarray, x0: np.ndarray, *, reuse: bool = False
) -> Iterator[tuple[int, int, np.ndarray]]:
    """Yield ``(k0, k1, W)`` with ``W[:k1-k0] = [x[k], u[k]]`` rows.

    Each chunk gets a fresh buffer unless ``reuse`` (for callers that are done
    with a chunk before asking for the next).
    """
    n, N = A.shape[0], u.shape[0]
    dtype = np.result_type(A, B, u, x0, np.float64)
    rec = _Recursion(np.ascontiguousarray(A.T, dtype=dtype), np.ascontiguousarray(B.T, dtype=dtype))
    schur = None
    x = np.asarray(x0, dtype=dtype)
    W = None
    for k0 in range(0, N, _CHUNK):
        k1 = min(N, k0 + _CHUNK)
        if not (reuse and W is not None and k1 - k0 == _CHUNK):
            W = rec.buffer(k1 - k0, dtype)
        _fill_inputs(W, n, u[k0:k1])
        if schur is None:
            with np.errstate(over="ignore", invalid="ignore"):  # a failed attempt is redone
                end = rec.solve(W, k1 - k0, x)
        if schur is not None or end is None:  # lifting cannot be repaired: the Schur basis, for good
            schur = _schur(A) if schur is None else schur
            end = _schur_states(schur, B, W, k1 - k0, x)
        x = end
        yield k0, k1, W


def _triangular(T: np.ndarray, drive: np.ndarray, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """States of ``z[k+1] = T z[k] + drive[k]`` (``T`` upper triangular), coordinate by coordinate.

    The last coordinate is a scalar first-order recursion driven by its input;
    each earlier one is driven by its input and the coordinates after it.
    Returns the states ``(N, n)`` from ``z[0] = z`` and ``z[N]``.
    """
    N, n = drive.shape
    zs = np.empty((N, n), dtype=complex, order="F")  # columns contiguous
    z = np.array(z, dtype=complex)
    for i in range(n - 1, -1, -1):
        d = drive[:, i]
        if i < n - 1:
            d = d + zs[:, i + 1 :] @ T[i, i + 1 :]
        zs[:, i], z[i] = first_order_recursion(T[i, i], d, z[i])
    return zs, z


def _schur_states(
    schur: tuple[np.ndarray, np.ndarray], B: np.ndarray, W: np.ndarray, N: int, x: np.ndarray
) -> np.ndarray:
    """Fill ``W[:N, :n]`` with the states from ``x`` in the complex Schur basis; return ``x[N]``."""
    T, Z = schur
    n = T.shape[0]
    u = W[:N, n:]
    zs, z = _triangular(T, u @ (Z.conj().T @ B).T, Z.conj().T @ x.astype(complex))
    W[:N, :n] = np.real(zs @ Z.T)
    return np.real(Z @ z)


def state_chunks(A: np.ndarray, B: np.ndarray, u: np.ndarray, x0: np.ndarray) -> Iterator[tuple[int, int, np.ndarray]]:
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
        Sample range and the states over it, ``(k1 - k0, n)`` (a view into a
        buffer of its own, not reused); the working memory is bounded by the
        chunk length whatever ``N`` is.
    """
    n, N = A.shape[0], u.shape[0]
    if n == 0:
        for k0 in range(0, max(N, 1), _CHUNK):
            k1 = min(N, k0 + _CHUNK)
            yield k0, k1, np.zeros((k1 - k0, 0))
        return
    for k0, k1, W in _work_chunks(A, B, u, x0):
        yield k0, k1, W[: k1 - k0, :n]


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

    Notes
    -----
    The states are computed chunk by chunk by the lifted recursion described
    in :mod:`ident.lti.simulate`; each chunk's outputs are one product of the
    rows ``[x[k], u[k]]`` with ``[C D]^T``.

    Examples
    --------
    >>> from ident.lti.models import StateSpaceModel
    >>> m = StateSpaceModel(A=[[0.5]], B=[[1.0]], C=[[1.0]], D=[[0.0]], sample_time=0.1)
    >>> simulate(m, [[1.0], [0.0], [0.0]]).ravel().tolist()
    [0.0, 1.0, 0.5]
    """
    u, x0 = simulation_inputs(model, u, x0)
    N = u.shape[0]
    y = np.empty((N, model.n_outputs))
    if model.n_states == 0:
        return np.matmul(u, model.D.T, out=y)
    out = np.concatenate([model.C.T, model.D.T], axis=0)
    for k0, k1, W in _work_chunks(model.A, model.B, u, x0, reuse=True):
        np.matmul(W[: k1 - k0], out, out=y[k0:k1])
    return y


def free_response_matrix(model: StateSpaceModel, n_samples: int) -> np.ndarray:
    """Stacked ``C A^k`` for k = 0 .. n_samples-1, shape ``(n_samples * p, n)``.

    Row block ``k`` maps an initial state to the output at sample ``k`` when the
    input is zero.
    """
    p, n = model.C.shape
    out = np.empty((max(n_samples, 0), p, n))
    if n_samples <= 0:
        return out.reshape(0, n)
    out[0] = model.C
    power, filled = model.A, 1  # power = A^filled
    while filled < n_samples:  # doubling: rows filled..2 filled-1 are rows 0..filled-1 times A^filled
        step = min(filled, n_samples - filled)
        np.matmul(out[:step], power, out=out[filled:filled + step])
        filled += step
        if filled < n_samples:
            power = power @ power
    return out.reshape(n_samples * p, n)


#: Samples per block of :func:`add_free_response` (its working memory is this many rows of ``C A^k``).
_FREE_BLOCK = 4096


def add_free_response(model: StateSpaceModel, x0: np.ndarray, out: np.ndarray) -> np.ndarray:
    """Add the free response ``C A^k x0`` (k = 0 .. N-1) to ``out`` (N, p) in place, and return it.

    Block by block: one :func:`free_response_matrix` of :data:`_FREE_BLOCK`
    samples maps the state at each block's start to the block's outputs, and
    ``A^block`` carries the state to the next block, so the memory is that of
    one block whatever ``N`` (the state reaching exactly zero ends the loop).
    """
    N, p = out.shape
    if N == 0 or model.n_states == 0:
        return out
    block = min(N, _FREE_BLOCK)
    rows = free_response_matrix(model, block)
    step = np.linalg.matrix_power(model.A, block)
    x = np.asarray(x0, dtype=float).reshape(-1)
    for start in range(0, N, block):
        stop = min(N, start + block)
        out[start:stop] += (rows[: (stop - start) * p] @ x).reshape(stop - start, p)
        x = step @ x
        if not np.any(x):
            break
    return out


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
    from zero, and ``x0`` solves the stacked least-squares problem (minimum
    norm when some states are not observable, :func:`numpy.linalg.lstsq`).
    """
    u, _ = simulation_inputs(model, u, None)
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
    x0, *_ = np.linalg.lstsq(obs, rhs, rcond=None)
    return x0
