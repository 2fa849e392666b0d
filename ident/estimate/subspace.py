"""Subspace identification (N4SID with N4SID, MOESP and CVA weightings).

The data enter once, through the R factor of the transposed block-Hankel
matrix (the "LQ" of the subspace literature), obtained in one pass whose
memory does not grow with the log length. Everything after that works on
matrices whose size depends only on the horizon and the signal counts, so
models of every order up to the maximum come cheaply from one
:class:`SubspaceProjection`.

Pipeline
--------
1. :func:`project`: block-Hankel data ``H = [U_0..U_{2i-1}; Y_0..Y_{2i-1}]``
   (``2i`` block rows, one column per time shift, each experiment adding its
   own columns), ``H^T = Q R``; rows scaled to unit RMS per signal; oblique
   projection ``O_i = Y_f /_{U_f} W_p``, weighted SVD ``W1 O_i W2``.
2. :func:`suggest_order`: largest gap of the singular values on a log scale.
3. :func:`model_of_order`: ``A, C`` from the shift invariance of the extended
   observability matrix; ``B, D`` and the initial state of every experiment
   by least squares on the simulated output (linear in them given ``A, C``);
   innovation-form Kalman gain from the state-sequence residuals through the
   discrete Riccati equation (solved by structured doubling, numpy only).

The R factor: Gram path and Householder path
--------------------------------------------
``R`` is computed in one of two ways, recorded in
:attr:`SubspaceProjection.factorization`:

- ``"gram"``: ``G = H H^T`` from the lagged products of the signals,
  ``sum_t z_c[t] z_d[t + tau]`` for ``tau < 2i``, less the few products
  outside the Hankel columns at both ends (block-Hankel structure: every
  entry of ``G`` is such a lagged sum), then ``R^T`` as the Cholesky factor
  of ``G``. This is the covariance ("fast") implementation of [2]_, ch. 6:
  ``O(N (m+p)^2 i)`` flops instead of ``O(N (m+p)^2 i^2)``, no Hankel copies.
- ``"householder"``: ``R`` updated as ``qr([R; H_chunk^T])`` for chunks of
  2000 Hankel columns (backward stable whatever the data).

Forming ``G`` squares the condition number, so the Gram path is taken only
when it is numerically safe: when the condition number of ``G`` scaled to a
unit diagonal (the square of that of the row-equilibrated ``H``) is at most
``1e8``. Then the relative error of the factor is about
``1e8 * 2.2e-16 ~ 2e-8`` at worst, far below the statistical error of any
noisy log. Noise-free or very smooth data, rank-deficient inputs or a failed
Cholesky factorisation take the Householder path, exactly as before. Both
paths give ``R`` with a non-negative diagonal, so they agree entry by entry
(to rounding, on data where both apply). The least-squares problem for
``B, D, x0`` uses the same idea: the Gram matrix of its features in one pass,
Cholesky when the features (not the outputs, whose block does not enter the
solution) have a unit-diagonal condition number of at most ``1e6`` (results
within about ``1e-10`` of a QR), else a second pass by Householder QR.

Performance
-----------
Measured with one BLAS thread on the 2-core development machine, 2 inputs,
2 outputs, ``max_order=10`` (horizon 7), 70 % of a 1e5 / 1e6 sample log:
:func:`project` 0.01 s / 0.06-0.1 s on the Gram path (Householder path
0.08 s / 0.6 s); :func:`model_of_order` for orders 1..10 in total 0.3 s /
0.35 s, most of it the first-order recursions of the ``B, D`` features
(:func:`ident.lti.simulate.first_order_recursion`, one per real pole or complex
pair, all inputs at once). Working memory beyond the log: a few MB for
:func:`project` and about 15-30 MB for :func:`model_of_order`, whatever N.
All these products are narrow (tens of columns): a multi-threaded OpenBLAS
spends more time synchronising than computing on them, and on a busy machine
was 5-20x slower; the loops therefore run with one BLAS thread (through
``threadpoolctl``).

References
----------
.. [1] P. Van Overschee and B. De Moor, "N4SID: Subspace algorithms for the
   identification of combined deterministic-stochastic systems",
   *Automatica* 30(1), 75-93, 1994.
.. [2] P. Van Overschee and B. De Moor, *Subspace Identification for Linear
   Systems: Theory, Implementation, Applications*, Kluwer, 1996, ch. 6
   (implementation: the R factor of the block-Hankel data, and its fast
   computation from the output and input covariances).
.. [3] G. H. Golub and C. F. Van Loan, *Matrix Computations*, 4th ed., Johns
   Hopkins University Press, 2013, sec. 5.3 (normal equations versus QR:
   the squared condition number).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any, Literal

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from .._validate import int_in_range, one_of, positive_float
from ..choices import WEIGHTINGS
from ..errors import (
    IdentificationError,
    IllConditionedWarning,
    OptionError,
    PoorExcitationWarning,
    UnstableModelWarning,
)
from ..lti._linalg import one_blas_thread
from ..lti.models import StateSpaceModel
from ..lti.simulate import first_order_recursion, state_chunks
from .data import Experiment, as_experiments

__all__ = [
    "WEIGHTINGS",
    "INPUT_MATRIX_METHODS",
    "FACTORIZATIONS",
    "SubspaceOptions",
    "SubspaceProjection",
    "OrderSuggestion",
    "SubspaceResult",
    "project",
    "project_weightings",
    "suggest_order",
    "model_of_order",
    "fit_subspace",
    "default_horizon",
]

#: Weightings of the oblique projection before the SVD.
Weighting = Literal["n4sid", "moesp", "cva"]

#: How ``B`` and ``D`` were estimated: least squares on the simulated output
#: (stable ``A``), or on the state sequence (``A`` with a pole on or outside the
#: unit circle, where a free-run simulation would diverge).
INPUT_MATRIX_METHODS = ("simulation", "state_sequence")

#: Largest model order accepted anywhere in this module.
MAX_ORDER_LIMIT = 200

#: Block-Hankel columns per QR update (memory per update ~ chunk * rows * 8 bytes).
_CHUNK_COLUMNS = 20_000

#: Samples per chunk of the least-squares problem for B, D and the initial states.
_BD_CHUNK = 1 << 15

#: Largest condition number of the eigenvector matrix of ``A`` for which B, D
#: are fitted in the eigenbasis (fewer features); above it, in the Schur basis.
_MODAL_COND = 1e6

#: Level (relative to 1 at the start) below which a free modal response is
#: treated as zero in the B, D fit.
_FREE_FLOOR = 1e-30

#: Rows absorbed per Householder QR update (small enough to stay in cache).
_QR_STEP = 2_000

#: Iteration cap and relative stopping level of the Riccati doubling
#: (quadratic convergence: 60 steps cover a closed-loop radius of 1 - 1e-15).
_SDA_MAX_STEPS = 60
_SDA_TOL = 1e-15

#: Relative singular-value cutoff of the minimum-norm least-squares solves.
_EPS = float(np.finfo(float).eps)

#: Names of the two ways the R factor of the data is obtained (see :func:`project`).
FACTORIZATIONS = ("gram", "householder")

#: Largest condition number of the unit-diagonal Gram matrix ``H H^T`` for which
#: :func:`project` takes R from its Cholesky factor (``cond(H) <= 1e4``); above
#: it, or when Cholesky fails, the block-accumulated Householder QR is used.
_GRAM_MAX_CONDITION = 1e8

#: Largest condition number of the unit-diagonal Gram matrix of the B, D
#: features for which their R factor is taken from its Cholesky factor (one
#: pass); above it a second pass computes it by Householder QR.
_BD_GRAM_MAX_CONDITION = 1e6

#: Rows absorbed per Householder update of the (narrow) B, D features.
_BD_QR_STEP = 500

#: Rows of the inner table of :func:`_mode_powers`.
_POWER_STEP = 256

#: Samples per block of the lagged products of :func:`_lag_products`.
_GRAM_BLOCK = 1 << 16

#: Smallest horizon chosen automatically (longer horizons give better noise models).
_MIN_AUTO_HORIZON = 6

#: Relative singular-value level below which the input block-Hankel matrix is
#: treated as rank deficient (input not persistently exciting).
_PE_RCOND = 1e-8

#: Relative floor for eigenvalues of the CVA output covariance (noise-free data
#: make it singular).
_CVA_FLOOR = 1e-12


# --------------------------------------------------------------------------- options


@dataclass(frozen=True, slots=True, eq=False)
class SubspaceOptions:
    """What to ask of the subspace estimator.

    Parameters
    ----------
    order : int or None, default None
        Number of states. ``None``: chosen by :func:`suggest_order` from the
        largest gap in the singular values, at most ``max_order``.
    weighting : {"n4sid", "moesp", "cva"}, default "n4sid"
        Weighting of the oblique projection before the SVD (see
        :func:`project`).
    horizon : int or None, default None
        Number of block rows ``i`` of the past and of the future.
        ``None``: :func:`default_horizon`.
    max_order : int, default 12
        Largest order considered when ``order`` is ``None``.
    noise_gain : bool, default True
        Estimate the innovation-form Kalman gain ``K``.
    stabilize : bool, default False
        Reflect estimated poles outside the unit circle to ``1/conj(z)``.
        The result's ``stabilized`` field says whether this happened; the
        poles as estimated are always kept in ``unstable_poles``.
    """

    order: int | None = None
    weighting: Weighting = "n4sid"
    horizon: int | None = None
    max_order: int = 12
    noise_gain: bool = True
    stabilize: bool = False

    def __post_init__(self) -> None:
        if self.order is not None:
            object.__setattr__(
                self, "order", int_in_range(self.order, "order", 1, MAX_ORDER_LIMIT)
            )
        object.__setattr__(self, "weighting", one_of(self.weighting, "weighting", WEIGHTINGS))
        if self.horizon is not None:
            object.__setattr__(self, "horizon", int_in_range(self.horizon, "horizon", 2))
        object.__setattr__(
            self, "max_order", int_in_range(self.max_order, "max_order", 1, MAX_ORDER_LIMIT)
        )
        for name in ("noise_gain", "stabilize"):
            value = getattr(self, name)
            if not isinstance(value, (bool, np.bool_)):
                raise OptionError(f"{name} must be true or false; got {value!r}")
            object.__setattr__(self, name, bool(value))

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any]) -> SubspaceOptions:
        """Build options from a mapping (e.g. a table of a pipeline file).

        Raises
        ------
        OptionError
            On an unknown key (the message lists the valid keys) or a bad value.
        """
        valid = [f.name for f in fields(cls)]
        unknown = [k for k in mapping if k not in valid]
        if unknown:
            raise OptionError(
                f"unknown subspace option {unknown[0]!r}; valid keys: {', '.join(valid)}"
            )
        return cls(**dict(mapping))


# --------------------------------------------------------------------------- results


@dataclass(frozen=True, slots=True, eq=False)
class SubspaceProjection:
    """The reusable, order-independent part of a subspace estimate.

    Attributes
    ----------
    singular_values : numpy.ndarray, shape (p * horizon,)
        Singular values of the weighted oblique projection, descending. For
        ``"cva"`` they are canonical correlations (at most 1).
    horizon : int
        Block rows ``i`` of the past and of the future.
    weighting : str
        One of :data:`WEIGHTINGS`.
    n_samples : int
        Total samples over all experiments.
    n_columns : int
        Block-Hankel columns ``j`` (sum over experiments of ``N_e - 2i + 1``).
    max_order : int
        Largest order a model can be built for from this projection
        (at most ``p * (horizon - 1)``).
    n_inputs, n_outputs : int
        ``m`` and ``p``.
    r_factor : numpy.ndarray, shape (2i(m+p), 2i(m+p))
        Upper-triangular R of ``H^T = Q R`` for the unscaled data, rows of
        ``H`` ordered as input blocks ``0..2i-1`` (channel fastest) then output
        blocks ``0..2i-1``. ``R^T R = H H^T``.
    input_scale, output_scale : numpy.ndarray
        RMS of each input and output over the Hankel columns (1 for a
        channel that is identically zero); the factorisation is scaled by
        these before the projections.
    observability_basis : numpy.ndarray, shape (p * horizon, p * horizon)
        ``W1^{-1} U`` from the weighted SVD ``W1 O_i W2 = U S V^T``; the
        extended observability matrix of order ``n`` is
        ``observability_basis[:, :n] * sqrt(singular_values[:n])`` (scaled outputs).
    oblique_current, oblique_next : numpy.ndarray
        ``O_i = Y_f /_{U_f} W_p`` and ``O_{i-1} = Y_f^- /_{U_f^-} W_p^+`` in the
        row coordinates of the scaled factor (used for the state sequences).
    factorization : str
        How ``r_factor`` was obtained, one of :data:`FACTORIZATIONS`:
        ``"gram"`` (Cholesky factor of ``H H^T``, taken when
        ``gram_condition <= 1e8``) or ``"householder"`` (block-accumulated
        QR of ``H^T``).
    gram_condition : float
        Condition number of ``H H^T`` scaled to a unit diagonal, i.e. the
        square of that of ``H`` with its rows equilibrated (``inf`` when it is
        singular).
    """

    singular_values: np.ndarray
    horizon: int
    weighting: str
    n_samples: int
    n_columns: int
    max_order: int
    n_inputs: int
    n_outputs: int
    r_factor: np.ndarray
    input_scale: np.ndarray
    output_scale: np.ndarray
    observability_basis: np.ndarray
    oblique_current: np.ndarray
    oblique_next: np.ndarray
    factorization: str
    gram_condition: float

    def __post_init__(self) -> None:
        for name in (
            "singular_values",
            "r_factor",
            "input_scale",
            "output_scale",
            "observability_basis",
            "oblique_current",
            "oblique_next",
        ):
            arr = np.array(getattr(self, name), dtype=float, copy=True)
            arr.flags.writeable = False
            object.__setattr__(self, name, arr)
        object.__setattr__(self, "gram_condition", float(self.gram_condition))

    def scaled_factor(self) -> np.ndarray:
        """Lower-triangular ``L`` with ``L L^T = S^{-1} H H^T S^{-1} / j`` (``S``: row scales)."""
        return _scaled_factor(self.r_factor, self.row_scale(), self.n_columns)

    def row_scale(self) -> np.ndarray:
        """Scale of every row of ``H`` (input rows then output rows)."""
        two_i = 2 * self.horizon
        return np.concatenate([np.tile(self.input_scale, two_i), np.tile(self.output_scale, two_i)])


@dataclass(frozen=True, slots=True, eq=False)
class OrderSuggestion:
    """Order read from the singular values.

    Attributes
    ----------
    order : int
        The order ``n`` after which the singular values drop most on a log
        scale, among ``1 .. max_order``.
    singular_values : numpy.ndarray
        The singular values ``s_1 .. s_{max_order+1}`` considered.
    gap_ratio : float
        ``s_n / s_{n+1}`` at the chosen order (``inf`` when ``s_{n+1}`` is 0).
    """

    order: int
    singular_values: np.ndarray
    gap_ratio: float

    def __post_init__(self) -> None:
        arr = np.array(self.singular_values, dtype=float, copy=True)
        arr.flags.writeable = False
        object.__setattr__(self, "singular_values", arr)


@dataclass(frozen=True, slots=True, eq=False)
class SubspaceResult:
    """A subspace estimate and how it was obtained.

    Attributes
    ----------
    model : StateSpaceModel
        Discrete-time model; ``noise_gain`` is set when requested (else
        ``None``); ``operating_point`` is ``None`` (the caller sets it).
    options : SubspaceOptions
        The options used (``order`` is the order asked, possibly ``None``).
    order : int
        The order of ``model``.
    projection : SubspaceProjection
        Singular values, horizon and the reusable factorisation.
    unstable_poles : numpy.ndarray, complex
        Poles with ``|z| > 1`` as estimated, before any stabilisation
        (empty when there are none).
    stabilized : bool
        True when unstable poles were reflected into the unit circle.
    initial_states : tuple of numpy.ndarray
        Least-squares initial state of each experiment (shape (n,)).
    innovation_covariance : numpy.ndarray or None
        Estimated covariance of the innovations ``e`` (shape (p, p)) when a
        noise gain was estimated, else ``None``.
    input_matrix_method : str
        One of :data:`INPUT_MATRIX_METHODS`.
    """

    model: StateSpaceModel
    options: SubspaceOptions
    order: int
    projection: SubspaceProjection
    unstable_poles: np.ndarray
    stabilized: bool
    initial_states: tuple[np.ndarray, ...]
    innovation_covariance: np.ndarray | None
    input_matrix_method: str

    @property
    def singular_values(self) -> np.ndarray:
        """Singular values of the projection (shortcut)."""
        return self.projection.singular_values

    @property
    def horizon(self) -> int:
        """Horizon used (shortcut)."""
        return self.projection.horizon


# --------------------------------------------------------------------------- helpers


def default_horizon(order: int, n_outputs: int) -> int:
    """Horizon chosen when none is given.

    ``i = max(ceil(order / p) + 2, 6)``: the future must hold at least
    ``order / p + 1`` block rows for the shifted observability matrix to have
    rank ``order``; two extra rows and a floor of 6 give the state and noise
    estimates a longer memory. :func:`project` lowers it, down to
    ``ceil(order / p) + 1``, while the block-Hankel matrix has fewer than four
    times as many columns as rows (``2i(m+p)``), so short logs still fit.

    Examples
    --------
    >>> default_horizon(12, 2), default_horizon(12, 1), default_horizon(2, 1)
    (8, 14, 6)
    """
    return max(math.ceil(order / n_outputs) + 2, _MIN_AUTO_HORIZON)


def _min_horizon(order: int, n_outputs: int) -> int:
    return math.ceil(order / n_outputs) + 1


def _columns(experiments: Sequence[Experiment], horizon: int) -> int:
    return sum(max(e.n_samples - 2 * horizon + 1, 0) for e in experiments)


def _hankel_rows(u: np.ndarray, y: np.ndarray, two_i: int, k0: int, k1: int) -> np.ndarray:
    """Columns ``k0..k1-1`` of the block-Hankel matrix, transposed: shape (k1-k0, 2i(m+p))."""
    m, p = u.shape[1], y.shape[1]
    wu = sliding_window_view(u, two_i, axis=0)[k0:k1]  # (k, m, 2i): wu[k, c, b] = u[k+b, c]
    wy = sliding_window_view(y, two_i, axis=0)[k0:k1]
    out = np.empty((k1 - k0, two_i * (m + p)))
    out[:, : two_i * m] = wu.transpose(0, 2, 1).reshape(k1 - k0, two_i * m)
    out[:, two_i * m :] = wy.transpose(0, 2, 1).reshape(k1 - k0, two_i * p)
    return out


def _qr_absorb(R: np.ndarray, block: np.ndarray, step: int = _QR_STEP) -> np.ndarray:
    """Upper-triangular R of ``[R; block]`` (equal to a one-shot QR up to row signs).

    The rows of ``block`` are taken ``step`` at a time so each Householder
    sweep stays in cache.
    """
    for k0 in range(0, block.shape[0], step):
        R = np.linalg.qr(np.vstack([R, block[k0 : k0 + step]]), mode="r")
    return R


def _accumulate_r(
    experiments: Sequence[Experiment], horizon: int, chunk_columns: int
) -> np.ndarray:
    """R factor of the transposed block-Hankel data by Householder QR, chunk by chunk.

    Rows are normalised to a non-negative diagonal (the Cholesky convention),
    so this R and the one of :func:`_gram_factor` agree entry by entry.
    """
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    two_i = 2 * horizon
    width = two_i * (m + p)
    R = np.zeros((width, width))
    step = min(_QR_STEP, chunk_columns)  # small blocks stay in cache
    for exp in experiments:
        cols = exp.n_samples - two_i + 1
        for k0 in range(0, cols, step):
            k1 = min(cols, k0 + step)
            R = np.linalg.qr(np.vstack([R, _hankel_rows(exp.u, exp.y, two_i, k0, k1)]), mode="r")
    return _positive_diagonal(R)


def _positive_diagonal(R: np.ndarray) -> np.ndarray:
    """Flip rows of an upper-triangular ``R`` so its diagonal is non-negative."""
    return R * np.where(np.diag(R) < 0, -1.0, 1.0)[:, None]


def _lag_products(u: np.ndarray, y: np.ndarray, two_i: int) -> np.ndarray:
    """``F[tau, c, d] = sum_t z_c[t] z_d[t + tau]`` over all ``t`` (``z = [u, y]``), ``tau < 2i``.

    One pass over the samples in blocks of :data:`_GRAM_BLOCK` (plus ``2i - 1``
    overlap): per block and lag one ``(m+p) x L`` by ``L x (m+p)`` product.
    """
    N = u.shape[0]
    width = u.shape[1] + y.shape[1]
    F = np.zeros((two_i, width, width))
    for t0 in range(0, N, _GRAM_BLOCK):
        t1 = min(N, t0 + _GRAM_BLOCK)
        end = min(N, t1 + two_i - 1)
        Z = np.concatenate([u[t0:end], y[t0:end]], axis=1)
        for tau in range(two_i):
            count = min(t1, N - tau) - t0
            if count > 0:
                F[tau] += Z[:count].T @ Z[tau : tau + count]
    return F


def _hankel_gram(experiments: Sequence[Experiment], horizon: int) -> np.ndarray:
    """``H H^T`` of the block-Hankel data from lagged products of the signals.

    Entry ``((b, c), (b', d))``, ``b <= b'``, is
    ``sum_{k<j} z_c[k+b] z_d[k+b'] = F[b'-b, c, d] - head - tail``: the full
    lagged product of :func:`_lag_products` less the ``b`` products before
    the first column and the ``2i-1-b'`` after the last (``j = N - 2i + 1``).
    Rows and columns in the order of :func:`_hankel_rows`.
    """
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    two_i = 2 * horizon
    s = m + p
    G4 = np.zeros((two_i, s, two_i, s))  # (block, signal, block, signal)
    for exp in experiments:
        N = exp.n_samples
        F = _lag_products(exp.u, exp.y, two_i)
        head = np.concatenate([exp.u[:two_i], exp.y[:two_i]], axis=1)
        tail = np.concatenate([exp.u[N - two_i :], exp.y[N - two_i :]], axis=1)
        for b in range(two_i):
            for b2 in range(b, two_i):
                tau = b2 - b
                blk = F[tau] - head[:b].T @ head[tau:b2]
                blk -= tail[b + 1 : two_i - tau].T @ tail[b2 + 1 :]
                G4[b, :, b2, :] += blk
                if b2 != b:
                    G4[b2, :, b, :] += blk.T
    order = np.concatenate(
        [
            (np.arange(two_i)[:, None] * s + np.arange(m)[None, :]).ravel(),
            (np.arange(two_i)[:, None] * s + m + np.arange(p)[None, :]).ravel(),
        ]
    )
    G = G4.reshape(two_i * s, two_i * s)[np.ix_(order, order)]
    return 0.5 * (G + G.T)


def _gram_factor(G: np.ndarray, max_condition: float) -> tuple[np.ndarray | None, float]:
    """Upper-triangular ``R`` with ``R^T R = G`` by Cholesky, if ``G`` is well conditioned.

    Returns ``(R, condition)``: ``condition`` is that of ``D^{-1} G D^{-1}``
    (``D^2 = diag G``, unit diagonal; ``inf`` when singular or indefinite),
    and ``R`` is ``None`` when it exceeds ``max_condition`` or the Cholesky
    factorisation fails. The diagonal of ``R`` is positive.
    """
    d = np.sqrt(np.diag(G))
    if not np.all(d > 0) or not np.all(np.isfinite(G)):
        return None, math.inf
    Gs = G / d[:, None] / d[None, :]
    Gs = 0.5 * (Gs + Gs.T)
    ev = np.linalg.eigvalsh(Gs)
    condition = float(ev[-1] / ev[0]) if ev[0] > 0 else math.inf
    if not condition <= max_condition:
        return None, condition
    try:
        Ls = np.linalg.cholesky(Gs)
    except np.linalg.LinAlgError:
        return None, condition
    return Ls.T * d[None, :], condition


def _scaled_factor(R: np.ndarray, row_scale: np.ndarray, n_columns: int) -> np.ndarray:
    return (R.T / row_scale[:, None]) / math.sqrt(n_columns)


def _row_space_basis(rows: np.ndarray) -> np.ndarray:
    """Orthonormal basis (columns) of the row space of ``rows``."""
    if rows.shape[0] == 0:
        return np.zeros((rows.shape[1], 0))
    U, s, _ = np.linalg.svd(rows.T, full_matrices=False)
    if s.size == 0 or s[0] == 0:
        return np.zeros((rows.shape[1], 0))
    keep = s > s[0] * max(rows.shape) * np.finfo(float).eps
    return U[:, keep]


def _regress(target: np.ndarray, regressors: np.ndarray) -> np.ndarray:
    """Coefficients ``T`` minimising ``||target - T regressors||`` (row vectors, min-norm)."""
    coef, *_ = np.linalg.lstsq(regressors.T, target.T, rcond=_EPS)
    return coef.T


def _oblique(target: np.ndarray, along: np.ndarray, onto: np.ndarray) -> np.ndarray:
    """Oblique projection of the rows of ``target`` along ``along`` onto ``onto``."""
    coef = _regress(target, np.vstack([onto, along]))
    return coef[:, : onto.shape[0]] @ onto


def _index(m: int, p: int, horizon: int) -> dict[str, np.ndarray]:
    """Row indices of the block-Hankel matrix for past/future partitions."""
    two_i = 2 * horizon

    def u_rows(b0: int, b1: int) -> np.ndarray:
        return np.arange(b0 * m, b1 * m)

    def y_rows(b0: int, b1: int) -> np.ndarray:
        return two_i * m + np.arange(b0 * p, b1 * p)

    i = horizon
    return {
        "Up": u_rows(0, i),
        "Uf": u_rows(i, two_i),
        "Yp": y_rows(0, i),
        "Yf": y_rows(i, two_i),
        "Up+": u_rows(0, i + 1),
        "Uf-": u_rows(i + 1, two_i),
        "Yp+": y_rows(0, i + 1),
        "Yf-": y_rows(i + 1, two_i),
        "Ui": u_rows(i, i + 1),
        "Yi": y_rows(i, i + 1),
        "U": u_rows(0, two_i),
    }


# --------------------------------------------------------------------------- projection


def project(
    data: Experiment | Sequence[Experiment],
    *,
    horizon: int | None = None,
    weighting: Weighting = "n4sid",
    max_order: int = 12,
    chunk_columns: int = _CHUNK_COLUMNS,
) -> SubspaceProjection:
    """Factorise the data and compute the weighted oblique projection.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Input/output deviations from the operating point. Several experiments
        each contribute their own block-Hankel columns; their ends are never
        joined.
    horizon : int, optional
        Block rows ``i`` of the past and of the future. Default
        :func:`default_horizon` of ``max_order``, lowered for short data.
    weighting : {"n4sid", "moesp", "cva"}, default "n4sid"
        ``W1 O_i W2`` with ``(W1, W2)`` = ``(I, I)`` for N4SID,
        ``(I, Pi_{U_f^perp})`` for MOESP and
        ``((Y_f Pi_{U_f^perp} Y_f^T)^{-1/2}, Pi_{U_f^perp})`` for CVA [2]_.
    max_order : int, default 12
        Largest order the projection must support.
    chunk_columns : int, default 20000
        Largest number of block-Hankel columns per update of the Householder
        path (which uses at most 2000); memory per update is about
        ``min(chunk_columns, 2000) * 2i(m+p) * 8`` bytes.

    Returns
    -------
    SubspaceProjection

    Raises
    ------
    OptionError
        Bad options, an order too high for the horizon, or data too short for
        the horizon (the message gives the numbers).
    IdentificationError
        All inputs are identically zero.

    Warns
    -----
    PoorExcitationWarning
        The input block-Hankel matrix (``2i`` block rows) is rank deficient:
        the inputs are not persistently exciting of order ``2i``.

    Notes
    -----
    With ``H^T = Q R`` every row-space operation on ``H`` becomes the same
    operation on the rows of ``L = R^T`` (``Q`` has orthonormal columns), so
    after the single pass over the data all work is on ``2i(m+p)``-square
    matrices. ``R`` is the Cholesky factor of ``H H^T`` (computed from lagged
    products of the signals) when the unit-diagonal ``H H^T`` has a condition
    number of at most ``1e8``, and otherwise is updated as
    ``qr([R; H_chunk^T])`` (Householder); both equal a one-shot QR of ``H^T``
    with its rows signed to a non-negative diagonal (see the module notes and
    ``factorization``, ``gram_condition`` of the result) [2]_. The oblique
    projection is ``O_i = Y_f /_{U_f} W_p`` with ``W_p = [U_p; Y_p]`` [1]_.

    References
    ----------
    .. [1] P. Van Overschee and B. De Moor, "N4SID: Subspace algorithms for the
       identification of combined deterministic-stochastic systems",
       *Automatica* 30(1), 75-93, 1994.
    .. [2] P. Van Overschee and B. De Moor, *Subspace Identification for Linear
       Systems: Theory, Implementation, Applications*, Kluwer, 1996, ch. 4
       (sec. 4.3, the unifying theorem and its weightings) and ch. 6.
    .. [3] M. Verhaegen, "Identification of the deterministic part of MIMO state
       space models given in innovations form from input-output data",
       *Automatica* 30(1), 61-74, 1994.
    .. [4] W. E. Larimore, "Canonical variate analysis in identification,
       filtering, and adaptive control", *Proc. 29th IEEE Conference on
       Decision and Control*, 596-604, 1990.
    """
    weighting = one_of(weighting, "weighting", WEIGHTINGS)
    return project_weightings(data, (weighting,), horizon=horizon, max_order=max_order,
                              chunk_columns=chunk_columns)[0]


def project_weightings(
    data: Experiment | Sequence[Experiment],
    weightings: Sequence[str] = WEIGHTINGS,
    *,
    horizon: int | None = None,
    max_order: int = 12,
    chunk_columns: int = _CHUNK_COLUMNS,
) -> tuple[SubspaceProjection, ...]:
    """One :class:`SubspaceProjection` per weighting from a single pass over the data.

    The R factor, the scales and the oblique projections do not depend on the
    weighting; only the weighted SVD does. Parameters and errors as
    :func:`project` (``weightings`` instead of one ``weighting``).

    Returns
    -------
    tuple of SubspaceProjection
        In the order of ``weightings``.
    """
    experiments = as_experiments(data)
    weightings = tuple(one_of(w, "weighting", WEIGHTINGS) for w in weightings)
    if not weightings:
        raise OptionError("weightings must name at least one weighting")
    max_order = int_in_range(max_order, "max_order", 1, MAX_ORDER_LIMIT)
    chunk_columns = int_in_range(chunk_columns, "chunk_columns", 1)
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    if m == 0 or p == 0:
        raise OptionError(f"subspace needs at least one input and one output; got {m} and {p}")
    n_samples = sum(e.n_samples for e in experiments)
    i = _choose_horizon(experiments, horizon, max_order, m, p)
    n_columns = _checked_columns(experiments, i, max_order, m, p, n_samples)
    with one_blas_thread():
        gram = _hankel_gram(experiments, i)
        R, condition = _gram_factor(gram, _GRAM_MAX_CONDITION)
        factorization = "gram"
        if R is None:
            R = _accumulate_r(experiments, i, chunk_columns)
            factorization = "householder"
    idx = _index(m, p, i)
    input_scale, output_scale = _signal_scales(gram, idx, n_columns, i, m, p)
    row_scale = np.concatenate([np.tile(input_scale, 2 * i), np.tile(output_scale, 2 * i)])
    L = _scaled_factor(R, row_scale, n_columns)
    _warn_if_inputs_not_exciting(L, idx, i)
    Wp = np.vstack([L[idx["Up"]], L[idx["Yp"]]])
    Wp_plus = np.vstack([L[idx["Up+"]], L[idx["Yp+"]]])
    O_i = _oblique(L[idx["Yf"]], L[idx["Uf"]], Wp)
    O_next = _oblique(L[idx["Yf-"]], L[idx["Uf-"]], Wp_plus)
    common = dict(horizon=i, n_samples=n_samples, n_columns=n_columns,
                  max_order=min(max_order, p * (i - 1)), n_inputs=m, n_outputs=p, r_factor=R,
                  input_scale=input_scale, output_scale=output_scale, oblique_current=O_i,
                  oblique_next=O_next, factorization=factorization, gram_condition=condition)
    out = []
    for w in weightings:
        s_w, basis = _weighted_basis(L, idx, O_i, w)
        out.append(SubspaceProjection(singular_values=s_w, weighting=w, observability_basis=basis, **common))
    return tuple(out)


def _choose_horizon(experiments: Sequence[Experiment], horizon: int | None, max_order: int,
                    m: int, p: int) -> int:
    """Check the given horizon, or lower :func:`default_horizon` while the data are short."""
    i_min = _min_horizon(max_order, p)
    if horizon is None:
        i = default_horizon(max_order, p)
        while i > i_min and _columns(experiments, i) < 4 * 2 * i * (m + p):
            i -= 1
    else:
        i = int_in_range(horizon, "horizon", 2)
        if i < i_min:
            raise OptionError(
                f"order {max_order} needs a horizon of at least {i_min} with {p} output(s) "
                f"(order <= p * (horizon - 1)); got horizon {i}",
                hint=f"raise the horizon to {i_min} or lower the order",
            )
    return i


def _checked_columns(experiments: Sequence[Experiment], i: int, max_order: int, m: int, p: int,
                     n_samples: int) -> int:
    """Count the block-Hankel columns; refuse data too short for horizon ``i``."""
    rows = 2 * i * (m + p)
    for k, exp in enumerate(experiments):
        if exp.n_samples < 2 * i:
            raise OptionError(
                f"experiment {k} has {exp.n_samples} samples; horizon {i} needs at least "
                f"{2 * i} per experiment (and {rows} block-Hankel columns in total)",
                hint="lower the order or the horizon, or drop the short experiment",
            )
    n_columns = _columns(experiments, i)
    if n_columns < rows:
        raise OptionError(
            f"order {max_order} with horizon {i} needs at least {rows} block-Hankel columns "
            f"(about {rows + 2 * i - 1} samples); got {n_columns} from {n_samples} samples",
            hint="lower the order, or use a longer log",
        )
    return n_columns


def _signal_scales(gram: np.ndarray, idx: dict[str, np.ndarray], n_columns: int, i: int,
                   m: int, p: int) -> tuple[np.ndarray, np.ndarray]:
    """Per-signal RMS of the inputs and outputs from the diagonal of ``H H^T`` (1 for a zero signal)."""
    energy = np.diag(gram) / n_columns
    e_u = energy[idx["U"]].reshape(2 * i, m).mean(axis=0)
    e_y = energy[2 * i * m :].reshape(2 * i, p).mean(axis=0)
    input_scale = np.where(e_u > 0, np.sqrt(e_u), 1.0)
    output_scale = np.where(e_y > 0, np.sqrt(e_y), 1.0)
    if not np.any(e_u > 0):
        raise IdentificationError(
            "all inputs are identically zero; a model from inputs to outputs cannot be estimated"
        )
    return input_scale, output_scale


def _warn_if_inputs_not_exciting(L: np.ndarray, idx: dict[str, np.ndarray], i: int) -> None:
    """Warn when the input block-Hankel rows of ``L`` are rank deficient (called from :func:`project`)."""
    s_u = np.linalg.svd(L[idx["U"]], compute_uv=False)
    rank_u = int(np.sum(s_u > s_u[0] * _PE_RCOND))
    if rank_u < s_u.size:
        warnings.warn(
            f"the inputs are not persistently exciting of order {2 * i} (horizon {i}): the input "
            f"block-Hankel matrix has numerical rank {rank_u} of {s_u.size}; "
            "the estimate may be unreliable",
            PoorExcitationWarning,
            stacklevel=3,
        )


def _weighted_basis(L: np.ndarray, idx: dict[str, np.ndarray], O_i: np.ndarray,
                    weighting: str) -> tuple[np.ndarray, np.ndarray]:
    """Singular values of ``W1 O_i W2`` and the observability basis (``W1^-1 U``) for the weighting."""
    if weighting == "n4sid":
        weighted = O_i
        w1_inv = None
    else:
        Qu = _row_space_basis(L[idx["Uf"]])
        weighted = O_i - (O_i @ Qu) @ Qu.T
        w1_inv = None
        if weighting == "cva":
            Yf = L[idx["Yf"]]
            Yf_perp = Yf - (Yf @ Qu) @ Qu.T
            cov = Yf_perp @ Yf_perp.T
            ev, V = np.linalg.eigh(cov)
            ev = np.maximum(ev, max(ev.max(), np.finfo(float).tiny) * _CVA_FLOOR)
            w1 = (V / np.sqrt(ev)) @ V.T
            w1_inv = (V * np.sqrt(ev)) @ V.T
            weighted = w1 @ weighted
    U, s, _ = np.linalg.svd(weighted, full_matrices=False)
    basis = U if w1_inv is None else w1_inv @ U
    return s, basis


def suggest_order(projection: SubspaceProjection) -> OrderSuggestion:
    """Order at the largest drop of the singular values on a log scale.

    Parameters
    ----------
    projection : SubspaceProjection
        From :func:`project`.

    Returns
    -------
    OrderSuggestion
        ``order = argmax_n log(s_n / s_{n+1})`` over ``n = 1 .. max_order``.

    Notes
    -----
    Noise-free data of order ``n`` give ``s_{n+1}`` at rounding level, so the
    gap is unmistakable; with noise the gap shrinks and the suggestion should
    be confirmed on validation data (the top-level identification does).

    References
    ----------
    .. [1] P. Van Overschee and B. De Moor, *Subspace Identification for Linear
       Systems*, Kluwer, 1996, sec. 4.3.
    """
    if not isinstance(projection, SubspaceProjection):
        raise OptionError(
            f"projection must be a SubspaceProjection; got {type(projection).__name__}"
        )
    s = projection.singular_values[: projection.max_order + 1]
    floor = max(s[0], np.finfo(float).tiny) * np.finfo(float).eps
    logs = np.log(np.maximum(s, floor))
    gaps = logs[:-1] - logs[1:]
    if gaps.size == 0:
        return OrderSuggestion(order=1, singular_values=s, gap_ratio=math.inf)
    n = int(np.argmax(gaps)) + 1
    ratio = math.inf if s[n] == 0 else float(s[n - 1] / s[n])
    return OrderSuggestion(order=n, singular_values=s, gap_ratio=ratio)


# --------------------------------------------------------------------------- models


def _reflect_unstable(A: np.ndarray) -> np.ndarray:
    lam, V = _eig(A)
    out = np.where(np.abs(lam) > 1.0, 1.0 / np.conj(lam), lam)
    return np.real(V @ np.diag(out) @ np.linalg.inv(V))


def _fit_bd_simulation(
    A: np.ndarray,
    C: np.ndarray,
    experiments: Sequence[Experiment],
    output_weight: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, tuple[np.ndarray, ...]]:
    """B, D and initial states minimising the weighted free-run output error.

    ``y[k] = C A^k x0 + sum_t C A^{k-1-t} B u[t] + D u[k]`` is linear in
    ``(B, D, x0)``. Every regressor of every output is a fixed linear
    combination of a few *features* ``Psi`` (the inputs filtered through the
    dynamics of ``A``, the inputs themselves, the free responses and the
    outputs). One pass over the data accumulates ``Psi^T Psi`` (``N`` rows,
    ``q`` columns) block by block and :func:`_regressor_factor` turns it into
    the rows of the R factor that the solution needs (Cholesky, when the
    features are well conditioned; else a second pass by chunked Householder
    QR); since ``||Psi v|| = ||R v||``, the stacked least-squares problem over
    all outputs then shrinks to ``p q`` rows with the same solution.
    """
    n, p, m, E = A.shape[0], C.shape[0], experiments[0].n_inputs, len(experiments)
    lam, V = _eig(A)
    with np.errstate(all="ignore"):
        cond = np.linalg.cond(V)
    if bool(np.isfinite(cond) and cond < _MODAL_COND and _conjugate_pairs_adjacent(lam)):
        map_b, map_x0, chunks = _features_modal(lam, V, C, m)
    else:
        map_b, map_x0, chunks = _features_schur(A, C, m)
    # columns of Psi: [filtered inputs, input-major (nf) | u (m) | free (nx0 per experiment) | y (p)]
    per_input, nx0 = map_b.shape[1], map_x0.shape[1]
    nf = per_input * m
    q = nf + m + nx0 * E + p

    # Gram matrix of Psi in one pass, chunk by chunk (the block of the inputs and
    # outputs needs no features: one product per experiment); upper triangle only
    cols_u, cols_y = slice(nf, nf + m), slice(q - p, q)
    gram = np.zeros((q, q))
    with one_blas_thread():
        for e, exp in enumerate(experiments):
            cols_x0 = slice(nf + m + e * nx0, nf + m + (e + 1) * nx0)
            gram[cols_u, cols_u] += exp.u.T @ exp.u
            gram[cols_u, cols_y] += exp.u.T @ exp.y
            gram[cols_y, cols_y] += exp.y.T @ exp.y
            for k0, k1, filtered, free in chunks(exp):
                u, y = exp.u[k0:k1], exp.y[k0:k1]
                gram[:nf, :nf] += filtered.T @ filtered
                gram[:nf, cols_u] += filtered.T @ u
                gram[:nf, cols_y] += filtered.T @ y
                if free is not None:
                    gram[:nf, cols_x0] += filtered.T @ free
                    gram[cols_u, cols_x0] += u.T @ free
                    gram[cols_x0, cols_x0] += free.T @ free
                    gram[cols_x0, cols_y] += free.T @ y
        gram = np.triu(gram) + np.triu(gram, 1).T
        R = _regressor_factor(gram, q - p)
        if R is None:  # ill-conditioned features: a second pass, by Householder QR
            R = np.zeros((q, q))
            for e, exp in enumerate(experiments):
                c0 = nf + m + e * nx0
                for k0, k1, filtered, free in chunks(exp):
                    psi = np.zeros((k1 - k0, q))
                    psi[:, :nf] = filtered
                    psi[:, cols_u] = exp.u[k0:k1]
                    if free is not None:
                        psi[:, c0 : c0 + nx0] = free
                    psi[:, cols_y] = exp.y[k0:k1]
                    R = _qr_absorb(R, psi, _BD_QR_STEP)
    # the rows of output i in the reduced problem: w_i R (P_i theta - e_{y_i})
    nb, nd = n * m, p * m
    width = nb + nd + n * E
    big = np.zeros((p, q, width))
    rhs = np.zeros((p, q))
    for i in range(p):
        P = np.zeros((q, width))
        for l_ in range(m):
            # theta[j * m + l] = B[j, l] (row-major B)
            P[l_ * per_input : (l_ + 1) * per_input, l_:nb:m] = map_b[i]
            P[nf + l_, nb + i * m + l_] = 1.0
        for e in range(E):
            P[nf + m + e * nx0 : nf + m + (e + 1) * nx0, nb + nd + e * n : nb + nd + (e + 1) * n] = (
                map_x0[i]
            )
        big[i] = output_weight[i] * (R @ P)
        rhs[i] = output_weight[i] * R[:, q - p + i]
    theta, *_ = np.linalg.lstsq(big.reshape(p * q, width), rhs.reshape(-1), rcond=_EPS)
    B = theta[:nb].reshape(n, m)
    D = theta[nb : nb + nd].reshape(p, m)
    x0 = tuple(theta[nb + nd + e * n : nb + nd + (e + 1) * n].copy() for e in range(E))
    return B, D, x0


def _eig(A: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Eigenvalues and eigenvectors of a real ``A``, always complex (LAPACK ``geev`` order)."""
    lam, V = np.linalg.eig(A)
    return lam.astype(complex), V.astype(complex)


def _regressor_factor(gram: np.ndarray, k: int) -> np.ndarray | None:
    """First ``k`` rows ``[R11, R12]`` of the R factor of a Gram matrix, by Cholesky.

    ``gram`` is ``Psi^T Psi`` with the regressors in the first ``k`` columns
    and the targets after them. A least-squares solution for the regressors
    depends only on ``R11`` (``R11^T R11 = G11``) and ``R12 = R11^{-T} G12``,
    so the targets may lie in the span of the regressors (noise-free data)
    without harm; the target block ``R22`` is returned as zeros. ``None`` when
    the unit-diagonal ``G11`` has a condition number above
    :data:`_BD_GRAM_MAX_CONDITION` or Cholesky fails.
    """
    R11, _ = _gram_factor(gram[:k, :k], _BD_GRAM_MAX_CONDITION)
    if R11 is None:
        return None
    R = np.zeros_like(gram)
    R[:k, :k] = R11
    R[:k, k:] = np.linalg.solve(R11.T, gram[:k, k:])
    return R


def _conjugate_pairs_adjacent(lam: np.ndarray) -> bool:
    """Check that every complex eigenvalue is followed by its exact conjugate (LAPACK order)."""
    if not np.all(np.isfinite(lam)):
        return False
    s = 0
    while s < lam.size:
        if lam[s].imag == 0.0:
            s += 1
        elif s + 1 < lam.size and lam[s].imag > 0 and lam[s + 1] == np.conj(lam[s]):
            s += 2
        else:
            return False
    return True


def _features_modal(lam: np.ndarray, V: np.ndarray, C: np.ndarray, m: int):
    """Features of :func:`_fit_bd_simulation` in the eigenbasis of ``A`` (well conditioned).

    With ``A = V diag(lam) V^{-1}`` and ``f_{l,s}[k+1] = lam_s f_{l,s}[k] + u_l[k]``,
    the regressor of ``B[j, l]`` for output ``i`` is
    ``Re sum_s f_{l,s}[k] M_i[s, j]`` with ``M_i[s, j] = (C V)[i, s] V^{-1}[s, j]``,
    and that of ``x0[j]`` is ``Re sum_s lam_s^k M_i[s, j]``. A conjugate pair
    needs one complex filter, whose real and imaginary parts are two real
    features (``f_{s+1} = conj(f_s)``). So there are ``n`` real features per
    input and ``n`` per experiment, whatever ``p``; each chunk costs one
    :func:`ident.lti.simulate.first_order_recursion` call per real pole or pair (all inputs at once).

    Returns ``(map_b, map_x0, chunks)``: ``map_b[i]`` (shape (n, n)) maps the
    features of one input to the regressors of ``B[:, l]`` for output ``i``;
    ``chunks(exp)`` yields ``(k0, k1, filtered, free)``.
    """
    n = lam.size
    CV = C @ V
    Vinv = np.linalg.inv(V)
    # f_s = sum_r T[s, r] g_r with g the real features
    T = np.zeros((n, n), dtype=complex)
    reps: list[tuple[int, bool]] = []  # (mode, complex pair?)
    s = 0
    while s < n:
        if lam[s].imag == 0.0:
            T[s, s] = 1.0
            reps.append((s, False))
            s += 1
        else:  # a pair, adjacent, positive imaginary part first (checked by the caller)
            T[s, s], T[s, s + 1] = 1.0, 1j
            T[s + 1, s], T[s + 1, s + 1] = 1.0, -1j
            reps.append((s, True))
            s += 2
    maps = np.stack([np.real(T.T @ (CV[i][:, None] * Vinv)) for i in range(C.shape[0])])

    def chunks(exp: Experiment):
        N = exp.n_samples
        state = [np.zeros((1, m), dtype=complex if pair else float) for _, pair in reps]
        base = _mode_powers(lam, min(N, _BD_CHUNK))
        decayed = False
        for k0 in range(0, N, _BD_CHUNK):
            k1 = min(N, k0 + _BD_CHUNK)
            filtered = np.empty((k1 - k0, m * n), order="F")  # column l * n + s
            free = None
            if not decayed:
                with np.errstate(under="ignore"):
                    powers = base[: k1 - k0] * lam[None, :] ** k0  # lam^k, 2 roundings
                free = np.empty((k1 - k0, n))
                # below 1e-30 of its start the free response adds nothing to R (its
                # squares are far below rounding): treat it as zero from here on
                decayed = bool(np.all(np.abs(powers[-1]) < _FREE_FLOOR))
            for (s, pair), zi in zip(reps, state, strict=True):
                pole = lam[s] if pair else lam[s].real
                out, zi[...] = first_order_recursion(pole, exp.u[k0:k1], zi[0])
                for l_ in range(m):
                    filtered[:, l_ * n + s] = out[:, l_].real
                    if pair:
                        filtered[:, l_ * n + s + 1] = out[:, l_].imag
                if free is not None:
                    free[:, s] = powers[:, s].real
                    if pair:
                        free[:, s + 1] = powers[:, s].imag
            yield k0, k1, filtered, free

    return maps, maps, chunks


def _mode_powers(lam: np.ndarray, count: int) -> np.ndarray:
    """``lam_s^k`` for ``k < count`` (rows) and every mode ``s`` (columns), ``|lam| < 1``.

    ``lam^(a B + b) = exp(a B log lam) exp(b log lam)`` from two tables of
    ``B = 256`` and ``count / B`` rows: ``count / B + B`` complex exponentials
    per mode instead of ``count``, three roundings. A zero pole gives
    ``log 0 = -inf`` and ``exp(-inf) = 0`` for ``k >= 1``.
    """
    step = _POWER_STEP
    with np.errstate(under="ignore", divide="ignore", invalid="ignore"):
        log_lam = np.log(lam)
        inner = np.exp(np.arange(step)[:, None] * log_lam[None, :])
        outer = np.exp(np.arange(0, count, step)[:, None] * log_lam[None, :])
        inner[0] = 1.0  # 0 * log 0 is nan: lam^0 = 1
        outer[0] = 1.0
        out = (outer[:, None, :] * inner[None, :, :]).reshape(-1, lam.size)[:count]
    return out


def _features_schur(A: np.ndarray, C: np.ndarray, m: int):
    """Features of :func:`_fit_bd_simulation` for any ``A`` (defective or nearly so).

    The regressor of ``B[j, l]`` for output ``i`` is state ``j`` of
    ``z[k+1] = A^T z[k] + C_i^T u_l[k]`` and that of ``x0[j]`` state ``j`` of
    ``z[k+1] = A^T z[k]``, ``z[0] = C_i^T``. All outputs are simulated at once
    (``p`` copies of ``A^T`` on the diagonal) by :mod:`ident.lti.simulate`, whose
    complex Schur basis is stable for repeated poles: ``m + 1`` runs of ``p n``
    states, ``p n`` features per input and per experiment (not shared by the
    outputs, unlike the modal features).
    """
    n, p = A.shape[0], C.shape[0]
    big_a = np.kron(np.eye(p), A.T)
    drive = C.reshape(p * n, 1)  # stacked C_i^T
    map_ = np.zeros((p, p * n, n))
    for i in range(p):
        map_[i, i * n : (i + 1) * n] = np.eye(n)

    def chunks(exp: Experiment):
        N = exp.n_samples
        runs = [
            state_chunks(big_a, drive, exp.u[:, l_ : l_ + 1], np.zeros(p * n))
            for l_ in range(m)
        ]
        runs.append(state_chunks(big_a, drive, np.zeros((N, 1)), drive[:, 0]))
        for parts in zip(*runs, strict=True):
            k0, k1 = parts[0][0], parts[0][1]
            yield k0, k1, np.concatenate([x for _, _, x in parts[:m]], axis=1), parts[m][2]

    return map_, map_, chunks


def _state_sequences(
    projection: SubspaceProjection, gamma: np.ndarray, p: int
) -> tuple[np.ndarray, np.ndarray]:
    X_i = _regress_left(gamma, projection.oblique_current)
    X_next = _regress_left(gamma[:-p], projection.oblique_next)
    return X_i, X_next


def _regress_left(G: np.ndarray, rhs: np.ndarray) -> np.ndarray:
    """Return ``G^+ rhs`` (minimum-norm least squares)."""
    sol, *_ = np.linalg.lstsq(G, rhs, rcond=_EPS)
    return sol


def _filter_riccati(
    A: np.ndarray, C: np.ndarray, Q: np.ndarray, R: np.ndarray, S: np.ndarray
) -> np.ndarray:
    """Stabilising solution of the filter Riccati equation, by structured doubling.

    Solves ``P = A P A^T - (A P C^T + S)(C P C^T + R)^{-1}(A P C^T + S)^T + Q``
    (the equation :func:`scipy.linalg.solve_discrete_are` solves for
    ``(A^T, C^T, Q, R, s=S)``) for the ``P`` that makes ``A - K C`` stable.

    Raises
    ------
    numpy.linalg.LinAlgError
        ``R`` is singular, or the iteration does not converge (no stabilising
        solution: a closed-loop pole on the unit circle) or overflows.

    Notes
    -----
    The cross term is removed with ``A_s = A - S R^{-1} C`` and
    ``H = Q - S R^{-1} S^T``, which leaves
    ``P = F^T P (I + G P)^{-1} F + H`` with ``F = A_s^T`` and
    ``G = C^T R^{-1} C``. The structured doubling algorithm iterates, with
    ``W = I + G_k H_k``,

    ``F_{k+1} = F_k W^{-1} F_k``,
    ``G_{k+1} = G_k + F_k W^{-1} G_k F_k^T``,
    ``H_{k+1} = H_k + F_k^T H_k W^{-1} F_k``,

    from ``(F, G, H)``; ``H_k`` converges quadratically to ``P`` (the error
    falls like ``rho^(2^k)``, ``rho`` the spectral radius of the closed
    loop) [1]_ [2]_.

    References
    ----------
    .. [1] E. K.-W. Chu, H.-Y. Fan, W.-W. Lin and C.-S. Wang,
       "Structure-preserving algorithms for periodic discrete-time algebraic
       Riccati equations", *Int. J. Control* 77(8), 767-788, 2004.
    .. [2] W.-W. Lin and S.-F. Xu, "Convergence analysis of
       structure-preserving doubling algorithms for Riccati-type matrix
       equations", *SIAM J. Matrix Anal. Appl.* 28(1), 26-39, 2006.
    """
    n = A.shape[0]
    eye = np.eye(n)
    Rinv_C = np.linalg.solve(R, C)
    Rinv_St = np.linalg.solve(R, S.T)
    # doubling for X = F^T X (I + G X)^{-1} F + H with F = (A - S R^-1 C)^T
    F = (A - S @ Rinv_C).T
    G = C.T @ Rinv_C
    H = Q - S @ Rinv_St
    G, H = 0.5 * (G + G.T), 0.5 * (H + H.T)
    for _ in range(_SDA_MAX_STEPS):
        W = eye + G @ H
        with np.errstate(over="ignore", invalid="ignore"):  # divergence is checked below
            F_W = np.linalg.solve(W.T, F.T).T  # F (I + G H)^{-1}
            H_next = H + F.T @ np.linalg.solve(W.T, H.T).T @ F  # H (I + G H)^{-1} F
            G = G + F_W @ G @ F.T
            F = F_W @ F
        G = 0.5 * (G + G.T)
        H_next = 0.5 * (H_next + H_next.T)
        if not np.all(np.isfinite(H_next)):
            raise np.linalg.LinAlgError("Riccati doubling overflowed")
        change = np.abs(H_next - H).max()
        H = H_next
        if change <= _SDA_TOL * np.abs(H).max():
            return H
    raise np.linalg.LinAlgError("Riccati doubling did not converge")


def _kalman_gain(
    A: np.ndarray, C: np.ndarray, W: np.ndarray, V: np.ndarray, output_energy: float
) -> tuple[np.ndarray, np.ndarray]:
    """Innovation-form gain from process residuals ``W`` and output residuals ``V``."""
    n, p = A.shape[0], C.shape[0]
    Q = W @ W.T
    S = W @ V.T
    Rn = V @ V.T
    if np.trace(Rn) <= 1e-20 * max(output_energy, np.finfo(float).tiny):
        # noise-free data: the predictor is the simulator
        return np.zeros((n, p)), Rn
    try:
        P = _filter_riccati(A, C, Q, Rn, S)
        Re = C @ P @ C.T + Rn
        K = np.linalg.solve(Re.T, (A @ P @ C.T + S).T).T
        if not np.all(np.isfinite(K)):
            raise np.linalg.LinAlgError("non-finite gain")
        return K, Re
    except (np.linalg.LinAlgError, ValueError):
        warnings.warn(
            "the Riccati equation for the noise gain has no stabilising solution; "
            "using K = S R^-1 from the residual covariances",
            IllConditionedWarning,
            stacklevel=3,
        )
        K = np.linalg.lstsq(Rn.T, S.T, rcond=_EPS)[0].T
        return K, Rn


def model_of_order(
    projection: SubspaceProjection,
    data: Experiment | Sequence[Experiment],
    order: int,
    sample_time: float,
    *,
    options: SubspaceOptions | None = None,
    input_names: Sequence[str] | None = None,
    output_names: Sequence[str] | None = None,
) -> SubspaceResult:
    """Build the model of one order from a projection (one data pass for ``B, D``).

    Parameters
    ----------
    projection : SubspaceProjection
        From :func:`project` on the same ``data``.
    data : Experiment or sequence of Experiment
        The data the projection was computed from (used for ``B, D, x0``).
    order : int
        Number of states, ``1 .. projection.max_order``.
    sample_time : float
        Sample time in seconds.
    options : SubspaceOptions, optional
        ``noise_gain`` and ``stabilize`` are used from here; recorded in the
        result. Default ``SubspaceOptions(order=order)`` with the projection's
        weighting and horizon.
    input_names, output_names : sequence of str, optional
        Signal names for the model.

    Returns
    -------
    SubspaceResult

    Raises
    ------
    OptionError
        ``order`` above what the projection supports (the message gives the
        limit and the horizon it would need).

    Warns
    -----
    UnstableModelWarning
        An estimated pole lies outside the unit circle (reported in
        ``unstable_poles`` whether or not it is reflected).
    IllConditionedWarning
        The ``order``-th singular value is at rounding level (order above what
        the data support), or the Riccati equation has no stabilising solution
        (the gain then falls back to ``K = S R^{-1}``).

    Notes
    -----
    With ``Gamma_i = observability_basis[:, :n] diag(sqrt(s_1..s_n))``:
    ``C`` is its first block row and ``A`` solves
    ``Gamma_i[p:] = Gamma_i[:-p] A`` in least squares (shift invariance).
    ``B``, ``D`` and one initial state per experiment minimise the
    free-run output error, each output weighted by the inverse of its RMS.
    This problem is linear in them: every regressor is a fixed combination of
    features shared by all outputs (the inputs filtered through the ``n``
    modes of ``A``, the inputs, the free modal responses; for a defective or
    nearly defective ``A`` the Schur-basis simulations of
    :mod:`ident.lti.simulate`), whose Gram matrix is accumulated in one pass
    (Cholesky when well conditioned, else a second pass by Householder QR);
    the reduced problem has ``p q`` rows for ``q`` features. The cost is this
    one pass, about ``N q^2`` flops plus ``n`` filters of the inputs
    (0.03-0.1 s per order for 7e5 samples, 2 inputs and outputs, orders
    1-5); the rest is independent of ``N``. When
    ``A`` has a pole on or outside the unit circle (and is not stabilised),
    ``B`` and ``D`` come instead from the state-sequence regression
    ``[X_{i+1}; Y_i] - [A; C] X_i = [B; D] U_i`` [1]_.

    The noise gain uses the state sequences ``X_i = Gamma_i^+ O_i`` and
    ``X_{i+1} = Gamma_{i-1}^+ O_{i-1}``: the residuals ``w, v`` of the
    regression above give ``Q, S, R``, and ``K = (A P C^T + S)(C P C^T + R)^{-1}``
    with ``P`` the stabilising solution of the filter Riccati equation
    (structured doubling, :func:`_filter_riccati`; the same equation as
    :func:`scipy.linalg.solve_discrete_are` ``(A^T, C^T, Q, R, s=S)``) [1]_. For noise-free data the
    residuals vanish and ``K = 0``.

    References
    ----------
    .. [1] P. Van Overschee and B. De Moor, *Subspace Identification for Linear
       Systems*, Kluwer, 1996, sec. 4.3.2 and 4.4 (combined algorithms).
    .. [2] M. Verhaegen, "Identification of the deterministic part of MIMO state
       space models given in innovations form from input-output data",
       *Automatica* 30(1), 61-74, 1994.
    """
    if not isinstance(projection, SubspaceProjection):
        raise OptionError(
            f"projection must be a SubspaceProjection; got {type(projection).__name__}"
        )
    experiments = as_experiments(data)
    sample_time = positive_float(sample_time, "sample_time")
    n = _checked_order(projection, experiments, order)
    if options is None:
        options = SubspaceOptions(order=n, weighting=projection.weighting, horizon=projection.horizon)
    elif not isinstance(options, SubspaceOptions):
        raise OptionError(f"options must be SubspaceOptions; got {type(options).__name__}")
    p = projection.n_outputs
    gamma_s = _scaled_observability(projection, n)
    A, unstable, stabilized = _state_matrix(gamma_s, p, n, options.stabilize)
    C_s = gamma_s[:p]
    C = C_s * projection.output_scale[:, None]
    U_i, Y_i, resid_x, resid_y, BD_s = _state_regression(projection, gamma_s, A, C_s)
    B, D, x0, method = _input_matrices(projection, experiments, A, C, BD_s, n)

    K = None
    innovation = None
    if options.noise_gain:
        W = resid_x - BD_s[:n] @ U_i
        V = resid_y - BD_s[n:] @ U_i
        K_s, Re_s = _kalman_gain(A, C_s, W, V, float(np.sum(Y_i * Y_i)))
        K = K_s / projection.output_scale[None, :]
        innovation = projection.output_scale[:, None] * Re_s * projection.output_scale[None, :]

    model = StateSpaceModel(
        A=A,
        B=B,
        C=C,
        D=D,
        sample_time=sample_time,
        inputs=input_names,
        outputs=output_names,
        noise_gain=K,
    )
    return SubspaceResult(
        model=model,
        options=options,
        order=n,
        projection=projection,
        unstable_poles=unstable.astype(complex),
        stabilized=stabilized,
        initial_states=x0,
        innovation_covariance=innovation,
        input_matrix_method=method,
    )


def _checked_order(projection: SubspaceProjection, experiments: Sequence[Experiment], order: int) -> int:
    """Check that the data match the projection and that it supports ``order`` states."""
    m, p, i = projection.n_inputs, projection.n_outputs, projection.horizon
    if (experiments[0].n_inputs, experiments[0].n_outputs) != (m, p):
        raise OptionError(
            f"data have {experiments[0].n_inputs} inputs and {experiments[0].n_outputs} outputs; "
            f"the projection was computed for {m} and {p}"
        )
    order = int_in_range(order, "order", 1, MAX_ORDER_LIMIT)
    if order > projection.max_order:
        need = _min_horizon(order, p)
        raise OptionError(
            f"order {order} is too high for horizon {i} with {p} output(s): at most "
            f"{projection.max_order} states can be estimated",
            hint=f"use a horizon of at least {need} (and enough samples), or a lower order",
        )
    return order


def _scaled_observability(projection: SubspaceProjection, n: int) -> np.ndarray:
    """``Gamma_i = observability_basis[:, :n] diag(sqrt(s_1..s_n))``; warns when ``s_n`` is rounding noise.

    Called from :func:`model_of_order` (the warning names its caller).
    """
    s = projection.singular_values
    gamma_s = projection.observability_basis[:, :n] * np.sqrt(s[:n])
    if s[n - 1] <= s[0] * 1e-13:
        warnings.warn(
            f"singular value {n} is at rounding level ({s[n - 1]:.3g} of {s[0]:.3g}); "
            f"order {n} is more than the data support",
            IllConditionedWarning,
            stacklevel=3,
        )
    return gamma_s


def _state_matrix(gamma_s: np.ndarray, p: int, n: int, stabilize: bool) -> tuple[np.ndarray, np.ndarray, bool]:
    """Estimate ``A`` from the shift invariance of ``Gamma_i``; also its unstable poles and whether they were reflected.

    Called from :func:`model_of_order` (the warning names its caller).
    """
    A = _regress_left(gamma_s[:-p], gamma_s[p:])
    poles = np.linalg.eigvals(A).astype(complex)
    unstable = poles[np.abs(poles) > 1.0]
    stabilized = False
    if unstable.size:
        if stabilize:
            A = _reflect_unstable(A)
            stabilized = True
            what = "reflected inside the unit circle (stabilize=True)"
        else:
            what = "kept as estimated; stabilize=True reflects them"
        warnings.warn(
            f"the order-{n} model has {unstable.size} pole(s) outside the unit circle "
            f"(largest |z| = {np.abs(unstable).max():.6g}); {what}",
            UnstableModelWarning,
            stacklevel=3,
        )
    return A, unstable, stabilized


def _state_regression(projection: SubspaceProjection, gamma_s: np.ndarray, A: np.ndarray,
                      C_s: np.ndarray) -> tuple[np.ndarray, ...]:
    """Regress ``[X_{i+1}; Y_i] - [A; C] X_i`` on ``U_i`` (scaled coordinates).

    Returns ``U_i, Y_i``, the residuals ``X_{i+1} - A X_i`` and ``Y_i - C X_i``,
    and the coefficients ``[B; D]`` of the regression.
    """
    m, p, i = projection.n_inputs, projection.n_outputs, projection.horizon
    L = projection.scaled_factor()
    idx = _index(m, p, i)
    U_i, Y_i = L[idx["Ui"]], L[idx["Yi"]]
    X_i, X_next = _state_sequences(projection, gamma_s, p)
    resid_x = X_next - A @ X_i
    resid_y = Y_i - C_s @ X_i
    BD_s = _regress(np.vstack([resid_x, resid_y]), U_i)
    return U_i, Y_i, resid_x, resid_y, BD_s


def _input_matrices(projection: SubspaceProjection, experiments: Sequence[Experiment], A: np.ndarray,
                    C: np.ndarray, BD_s: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray, tuple, str]:
    """``B``, ``D``, initial states and the method: free-run fit when ``A`` is stable, else the state regression."""
    radius = float(np.abs(np.linalg.eigvals(A)).max())
    if radius < 1.0:
        B, D, x0 = _fit_bd_simulation(A, C, experiments, 1.0 / projection.output_scale)
        method = "simulation"
    else:
        B = BD_s[:n] / projection.input_scale[None, :]
        D = (
            projection.output_scale[:, None]
            * BD_s[n:]
            / projection.input_scale[None, :]
        )
        x0 = tuple(np.zeros(n) for _ in experiments)
        method = "state_sequence"
    return B, D, x0, method


def fit_subspace(
    data: Experiment | Sequence[Experiment],
    sample_time: float,
    options: SubspaceOptions | None = None,
    *,
    input_names: Sequence[str] | None = None,
    output_names: Sequence[str] | None = None,
) -> SubspaceResult:
    """Estimate a discrete-time state-space model by subspace identification.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Input/output deviations from the operating point, shapes (N, m) and
        (N, p). Experiments are combined without being joined end to end.
    sample_time : float
        Sample time in seconds.
    options : SubspaceOptions, optional
        Default ``SubspaceOptions()`` (order from the singular values, N4SID
        weighting, automatic horizon, noise gain estimated).
    input_names, output_names : sequence of str, optional
        Signal names for the model.

    Returns
    -------
    SubspaceResult

    Raises
    ------
    OptionError
        Bad options, an order too high for the horizon or the data length.
    IdentificationError
        All inputs identically zero.

    Warns
    -----
    PoorExcitationWarning
        Inputs not persistently exciting of order ``2 * horizon``.
    UnstableModelWarning
        A pole outside the unit circle (see ``unstable_poles``).

    See Also
    --------
    project, suggest_order, model_of_order : the steps, for order sweeps.

    References
    ----------
    .. [1] P. Van Overschee and B. De Moor, "N4SID: Subspace algorithms for the
       identification of combined deterministic-stochastic systems",
       *Automatica* 30(1), 75-93, 1994.
    .. [2] P. Van Overschee and B. De Moor, *Subspace Identification for Linear
       Systems*, Kluwer, 1996.
    .. [3] M. Verhaegen, *Automatica* 30(1), 61-74, 1994.
    .. [4] W. E. Larimore, *Proc. 29th IEEE CDC*, 596-604, 1990.

    Examples
    --------
    >>> import numpy as np
    >>> from scipy import signal
    >>> from ident.estimate.data import Experiment
    >>> u = np.random.default_rng(0).standard_normal((400, 1))
    >>> _, y, _ = signal.dlsim(([[0.5, 0.3], [0.0, 0.2]], [[1.0], [1.0]],
    ...                          [[1.0, 0.0]], [[0.0]], 0.1), u)
    >>> res = fit_subspace(Experiment(u, y), 0.1)
    >>> res.order, np.round(np.sort(res.model.poles().real), 6).tolist()
    (2, [0.2, 0.5])
    """
    experiments = as_experiments(data)
    sample_time = positive_float(sample_time, "sample_time")
    if options is None:
        options = SubspaceOptions()
    elif not isinstance(options, SubspaceOptions):
        raise OptionError(f"options must be SubspaceOptions; got {type(options).__name__}")
    needed = options.order if options.order is not None else options.max_order
    projection = project(
        experiments,
        horizon=options.horizon,
        weighting=options.weighting,
        max_order=needed,
    )
    order = options.order if options.order is not None else suggest_order(projection).order
    return model_of_order(
        projection,
        experiments,
        order,
        sample_time,
        options=options,
        input_names=input_names,
        output_names=output_names,
    )
