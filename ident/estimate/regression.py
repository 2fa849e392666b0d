"""Lagged least-squares regression from one accumulated R factor.

The shared machinery of :mod:`ident.estimate.arx` and
:mod:`ident.estimate.delay`: both regress each output on lagged inputs and
outputs, and both read the data only once.

How the numbers are obtained
----------------------------
The regression columns are described by :class:`RegressorBlock` layouts (a
signal, a channel and a range of lags; targets ``y_i[k]`` are extra columns).
:func:`accumulate_r` writes the rows of every experiment (rows never straddle
two experiments), block by block, into one float64 buffer from
:func:`numpy.lib.stride_tricks.sliding_window_view` views of the signals; each
block is stacked under the R factor so far and re-factorised
(:func:`numpy.linalg.qr`, R only), so memory stays bounded on long logs.
:func:`solve_subset` then solves ``min ||R[:, t] - R[:, S] theta||`` for any
column subset ``S`` by a second, tiny QR; its residual vector in the R
coordinates has the same inner products as the full residual, so residual
norms and cross-output covariances are exact. No normal equations are formed.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.lib.stride_tricks import sliding_window_view

from ..lti._linalg import solve_upper
from .data import Experiment

__all__ = [
    "RANK_TOL",
    "RegressorBlock",
    "SubsetSolution",
    "accumulate_r",
    "column_index",
    "fill_rows",
    "lag_blocks",
    "largest_lag",
    "r_factor",
    "rows_available",
    "solve_subset",
]

#: Below this sine of the angle between a regressor column and the span of the
#: columns before it, the regression is rank deficient (an error in fit_arx).
RANK_TOL = 1e-10
#: Target number of float64 values in one block of regression rows (1 MiB: a
#: block stays in a core's L2 cache while LAPACK factorises it).
_BLOCK_VALUES = 1 << 17


# --------------------------------------------------------------------------- column layout


@dataclass(frozen=True, slots=True)
class RegressorBlock:
    """Columns ``sign * x[k - lag]`` for lag = lo..hi of signal ``kind``/``channel``."""

    kind: str  # "u", "y" (a regressor, stored negated) or "t" (a target y[k])
    channel: int
    lo: int
    hi: int

    @property
    def width(self) -> int:
        """Number of columns, ``hi - lo + 1``."""
        return self.hi - self.lo + 1


def column_index(blocks: Sequence[RegressorBlock]) -> dict[tuple[str, int, int], int]:
    """Map ``(kind, channel, lag)`` to its column in the layout of ``blocks``."""
    index: dict[tuple[str, int, int], int] = {}
    col = 0
    for blk in blocks:
        for lag in range(blk.lo, blk.hi + 1):
            index[(blk.kind, blk.channel, lag)] = col
            col += 1
    return index


def lag_blocks(na: int, nb: Sequence[int], nk: Sequence[int], outputs: Sequence[int],
               *, u_first: bool = True) -> list[RegressorBlock]:
    """Column layout of ARX regressors: input lags ``nk_j .. nk_j + nb_j - 1``, output lags ``1 .. na``, targets.

    Input blocks come first unless ``u_first`` is false; the target columns of
    ``outputs`` always come last.
    """
    ublocks = [RegressorBlock("u", j, nk[j], nk[j] + nb[j] - 1) for j in range(len(nb)) if nb[j] > 0]
    yblocks = [RegressorBlock("y", i, 1, na) for i in outputs] if na > 0 else []
    tblocks = [RegressorBlock("t", i, 0, 0) for i in outputs]
    return (ublocks + yblocks if u_first else yblocks + ublocks) + tblocks


def largest_lag(na: int, nb: Sequence[int], nk: Sequence[int]) -> int:
    """Largest lag of an ARX structure, ``max(na, max_j(nk_j + nb_j - 1))``: the first usable row."""
    lags = [na] + [nk[j] + nb[j] - 1 for j in range(len(nb)) if nb[j] > 0]
    return max(lags)


def rows_available(experiments: Sequence[Experiment], max_lag: int) -> int:
    """Regression rows the experiments give when each starts at sample ``max_lag``."""
    return sum(max(0, e.n_samples - max_lag) for e in experiments)


# --------------------------------------------------------------------------- accumulation


def fill_rows(out: np.ndarray, exp: Experiment, blocks: Sequence[RegressorBlock], max_lag: int,
              k0: int, k1: int) -> None:
    """Write regression rows for samples k0..k1-1 of ``exp`` into ``out``."""
    col = 0
    for blk in blocks:
        x = exp.u[:, blk.channel] if blk.kind == "u" else exp.y[:, blk.channel]
        w = blk.width
        win = sliding_window_view(x, w)  # win[t] = x[t .. t+w-1]
        view = win[k0 - blk.hi:k1 - blk.hi, ::-1]  # row k: x[k-lo], ..., x[k-hi]
        dest = out[:, col:col + w]
        if blk.kind == "y":
            np.negative(view, out=dest)
        else:
            dest[...] = view
        col += w


def accumulate_r(experiments: Sequence[Experiment], blocks: Sequence[RegressorBlock],
                 max_lag: int, max_rows: int | None = None) -> tuple[np.ndarray, int]:
    """R factor (c x c) of the regression rows with targets; and the row count.

    With ``max_rows``, only the first ``max_rows`` rows (in experiment order) are used.
    Each block of rows is written under the R factor so far into one buffer,
    which is factorised (Householder QR, R only); the working memory is one
    block whatever the length of the log.
    """
    c = sum(b.width for b in blocks)
    chunk = _rows_per_block(c)
    tasks: list[tuple[Experiment, int, int]] = []
    total = 0
    for exp in experiments:
        for k0 in range(max_lag, exp.n_samples, chunk):
            k1 = min(exp.n_samples, k0 + chunk)
            if max_rows is not None:
                k1 = min(k1, k0 + max_rows - total)
                if k1 <= k0:
                    break
            tasks.append((exp, k0, k1))
            total += k1 - k0
    R = _absorb_rows(tasks, blocks, max_lag, c)
    out = np.zeros((c, c))
    out[:R.shape[0]] = R
    return out, total


def _absorb_rows(tasks: Sequence[tuple[Experiment, int, int]], blocks: Sequence[RegressorBlock],
                 max_lag: int, c: int) -> np.ndarray:
    """R factor (at most c x c) of the rows of ``tasks`` (experiment, first row, end row)."""
    R = np.zeros((0, c))
    buf = np.empty((0, c))
    for exp, k0, k1 in tasks:
        have = R.shape[0]
        if buf.shape[0] != have + k1 - k0:
            buf = np.empty((have + k1 - k0, c))
        buf[:have] = R
        fill_rows(buf[have:], exp, blocks, max_lag, k0, k1)
        R = np.linalg.qr(buf, mode="r")  # min(c, rows so far) x c, upper triangular
    return R


def _rows_per_block(c: int) -> int:
    """Rows of ``c`` columns factorised at a time: about :data:`_BLOCK_VALUES` values, at least ``8 c`` rows."""
    return max(8 * c, _BLOCK_VALUES // max(c, 1))


def r_factor(matrix: np.ndarray) -> np.ndarray:
    """R factor (``c x c``, upper triangular) of a tall matrix, by Householder QR one block of rows at a time.

    The same numbers as ``numpy.linalg.qr(matrix, mode="r")`` up to rounding,
    several times faster on long matrices: each block (about 1 MiB) is stacked
    under the R so far and factorised while it sits in cache.
    """
    matrix = np.asarray(matrix, dtype=float)
    n, c = matrix.shape
    chunk = _rows_per_block(c)
    R = np.zeros((0, c))
    for k0 in range(0, n, chunk):
        R = np.linalg.qr(np.vstack([R, matrix[k0:k0 + chunk]]), mode="r")
    out = np.zeros((c, c))
    out[:R.shape[0]] = R
    return out


# --------------------------------------------------------------------------- solving


@dataclass(frozen=True, slots=True, eq=False)
class SubsetSolution:
    """Least-squares solution on a column subset of an R factor (see :func:`solve_subset`)."""

    theta: np.ndarray  # in column order of the subset
    residual: np.ndarray  # residual in R coordinates (length c)
    rinv: np.ndarray | None  # inverse of the small R factor (None when deficient)
    sines: np.ndarray  # per column: sine of angle to the span of the earlier columns


def solve_subset(R: np.ndarray, cols: Sequence[int], target: int, *,
                 covariance: bool = True) -> SubsetSolution:
    """Solve ``min ||R[:, target] - R[:, cols] theta||`` by a small QR.

    When a column's sine to the span of the earlier ones is below
    :data:`RANK_TOL` the minimum-norm solution is returned with ``rinv=None``.
    Without ``covariance`` a full-rank solution carries an empty ``rinv``.
    """
    M = R[:, cols]
    r = R[:, target]
    if M.shape[1] == 0:
        return SubsetSolution(np.zeros(0), r.copy(), np.zeros((0, 0)), np.ones(0))
    Qs, Rs = np.linalg.qr(M, mode="reduced")
    norms = np.linalg.norm(M, axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        sines = np.where(norms > 0, np.abs(np.diag(Rs)) / norms, 0.0)
    if np.min(sines) < RANK_TOL:
        theta, *_ = np.linalg.lstsq(M, r, rcond=None)  # LAPACK gelsd, minimum norm
        rinv = None
    else:
        if covariance:
            rinv = solve_upper(Rs, np.eye(Rs.shape[0]))
            theta = solve_upper(Rs, Qs.T @ r)
        else:
            rinv = np.zeros((0, 0))  # not asked for; not None means "full rank"
            theta = solve_upper(Rs, Qs.T @ r)
    return SubsetSolution(theta, r - M @ theta, rinv, sines)
