"""Small dense linear-algebra helpers that numpy lacks, so the fit path needs no scipy.

``rigfit fit`` imports numpy only (importing :mod:`scipy.linalg` costs about a
quarter of a second, a large share of a whole fit of a million samples). The
helpers here are the few pieces of :mod:`scipy.linalg` the fit path used;
``tests/test_linalg_helpers.py`` checks them against scipy.

It also holds per-column reductions of long, narrow sample arrays: numpy
reduces ``x.sum(axis=0)`` of an ``(N, 2)`` array with an inner loop of length
2, some 25 times slower than summing each column as a strided 1-D array (which
keeps numpy's pairwise summation).
"""

from __future__ import annotations

import contextlib
from collections.abc import Sequence
from typing import Any

import numpy as np

__all__ = ["solve_upper", "block_diag", "column_sums", "column_norms", "column_stds", "one_blas_thread"]


def solve_upper(R: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve ``R x = b`` for upper-triangular ``R`` by back substitution.

    Parameters
    ----------
    R : numpy.ndarray, shape (k, k)
        Upper triangular, non-singular (only the upper triangle is read).
    b : numpy.ndarray, shape (k,) or (k, c)

    Returns
    -------
    numpy.ndarray
        ``x``, shape of ``b``.

    Notes
    -----
    Row-oriented back substitution, as :func:`scipy.linalg.solve_triangular`
    (LAPACK ``trtrs``) computes it; backward stable (Higham, *Accuracy and
    Stability of Numerical Algorithms*, 2nd ed., sec. 8.1).
    """
    R = np.asarray(R)
    x = np.array(b, dtype=np.result_type(R, b, np.float64), copy=True)
    k = R.shape[0]
    for i in range(k - 1, -1, -1):
        if i + 1 < k:
            x[i] -= R[i, i + 1:] @ x[i + 1:]
        x[i] /= R[i, i]
    return x


def block_diag(blocks: Sequence[np.ndarray]) -> np.ndarray:
    """Block-diagonal matrix of 2-D ``blocks`` (blocks with a zero dimension allowed).

    Same result as :func:`scipy.linalg.block_diag` for 2-D blocks.
    """
    blocks = [np.atleast_2d(np.asarray(b, dtype=float)) for b in blocks]
    rows = sum(b.shape[0] for b in blocks)
    cols = sum(b.shape[1] for b in blocks)
    out = np.zeros((rows, cols))
    r = c = 0
    for b in blocks:
        out[r:r + b.shape[0], c:c + b.shape[1]] = b
        r += b.shape[0]
        c += b.shape[1]
    return out


def column_sums(x: np.ndarray) -> np.ndarray:
    """``x.sum(axis=0)`` of a 2-D array, column by column (same pairwise summation, faster)."""
    x = np.asarray(x)
    return np.array([col.sum() for col in x.T], dtype=np.result_type(x, np.float64))


def column_norms(x: np.ndarray) -> np.ndarray:
    """Euclidean norm of each column of a 2-D array (``numpy.linalg.norm(x, axis=0)``)."""
    x = np.asarray(x, dtype=float)
    return np.sqrt(np.array([col @ col for col in x.T], dtype=float))


def column_stds(x: np.ndarray) -> np.ndarray:
    """Return the population standard deviation of each column (``x.std(axis=0)``); rows > 0."""
    x = np.asarray(x, dtype=float)
    return column_norms(x - column_sums(x) / x.shape[0]) / np.sqrt(x.shape[0])


_BLAS_CONTROLLER: Any = None


def one_blas_thread() -> contextlib.AbstractContextManager:
    """Limit BLAS/LAPACK to one thread for loops of small factorisations and products.

    A multi-threaded OpenBLAS spends more time synchronising than computing on
    matrices this narrow (tens of columns), and on a busy machine it was 5-20x
    slower here. Uses ``threadpoolctl`` when it is installed; else does nothing.
    """
    global _BLAS_CONTROLLER
    if _BLAS_CONTROLLER is None:
        try:
            from threadpoolctl import ThreadpoolController
        except ImportError:  # pragma: no cover - optional dependency
            return contextlib.nullcontext()
        _BLAS_CONTROLLER = ThreadpoolController()  # finds the loaded BLAS libraries once
    return _BLAS_CONTROLLER.limit(limits=1, user_api="blas")
