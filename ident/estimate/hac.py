"""Long-run (autocorrelation-consistent) covariances of averaged series.

Several steps of an identification average a per-sample quantity that is
correlated in time: the gradient contributions ``psi(t) e(t)`` of an
output-error estimate (its covariance), or the loss differential of two
models on held-out data (whether one predicts better). Their variance is the
long-run variance ``sum_k Gamma(k)``, estimated here with Bartlett weights
(always positive semi-definite, [1]_) and a bandwidth from Andrews' AR(1)
plug-in rule [2]_.

References
----------
.. [1] W. K. Newey and K. D. West, "A simple, positive semi-definite,
   heteroskedasticity and autocorrelation consistent covariance matrix",
   *Econometrica* 55(3), 703-708, 1987.
.. [2] D. W. K. Andrews, "Heteroskedasticity and autocorrelation consistent
   covariance matrix estimation", *Econometrica* 59(3), 817-858, 1991,
   eq. (6.2) and (6.4).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["andrews_bandwidth", "long_run_covariance"]


def andrews_bandwidth(parts: Sequence[np.ndarray]) -> int:
    """Bartlett-kernel bandwidth (lags) by Andrews' AR(1) plug-in rule.

    Parameters
    ----------
    parts : sequence of numpy.ndarray, each (N_k,) or (N_k, c)
        The series, one piece per experiment (pieces are not joined).

    Returns
    -------
    int
        ``1.1447 (alpha N)^(1/3)`` with ``alpha`` from AR(1) fits of each
        column scaled to unit RMS (coefficients clipped to +-0.97), at most
        ``N / 4``.
    """
    cols = [np.asarray(g, dtype=float).reshape(len(g), -1) for g in parts]
    num = den = 0.0
    N = sum(g.shape[0] for g in cols)
    for c in range(cols[0].shape[1]):
        peak = max(float(np.max(np.abs(g[:, c]))) if g.shape[0] else 0.0 for g in cols)
        if not (peak > 0 and np.isfinite(peak)):
            continue
        col = [g[:, c] / peak for g in cols]  # scaled before squaring: no overflow
        rms = float(np.sqrt(sum(float(x @ x) for x in col) / max(N, 1)))
        col = [x / rms for x in col]  # each column at unit RMS: the rule weighs them alike
        a = sum(float(x[1:] @ x[:-1]) for x in col)
        b = sum(float(x[:-1] @ x[:-1]) for x in col)
        if b <= 0:
            continue
        rho = min(max(a / b, -0.97), 0.97)
        s2 = sum(float(np.sum((x[1:] - rho * x[:-1]) ** 2)) for x in col) / max(N, 1)
        num += 4.0 * rho**2 * s2**2 / ((1 - rho) ** 6 * (1 + rho) ** 2)
        den += s2**2 / (1 - rho) ** 4
    if den <= 0:
        return 0
    return int(min(1.1447 * (num / den * N) ** (1.0 / 3.0), N // 4))


def long_run_covariance(parts: Sequence[np.ndarray], bandwidth: int | None = None, *,
                        demean: bool = False) -> np.ndarray:
    """Sum of the Bartlett-weighted autocovariance sums ``sum_t g(t) g(t+k)^T`` over the pieces.

    Parameters
    ----------
    parts : sequence of numpy.ndarray, each (N_k, c)
        The series (one piece per experiment).
    bandwidth : int, optional
        Largest lag; default :func:`andrews_bandwidth`.
    demean : bool
        Subtract the overall mean first (for testing a mean; the gradient at a
        minimum has mean zero already).

    Returns
    -------
    numpy.ndarray, shape (c, c)
        ``S = sum_pieces [G(0) + sum_{k=1}^{L} (1 - k/(L+1)) (G(k) + G(k)^T)]``
        with ``G(k) = sum_t g(t+k) g(t)^T``; divide by ``N`` for the long-run
        covariance per sample.
    """
    cols = [np.asarray(g, dtype=float).reshape(len(g), -1) for g in parts]
    if demean:
        mean = sum(g.sum(axis=0) for g in cols) / max(sum(g.shape[0] for g in cols), 1)
        cols = [g - mean for g in cols]
    L = andrews_bandwidth(cols) if bandwidth is None else int(bandwidth)
    S = np.zeros((cols[0].shape[1], cols[0].shape[1]))
    for g in cols:
        S += g.T @ g
        for lag in range(1, min(L, g.shape[0] - 1) + 1):
            G = g[lag:].T @ g[:-lag]
            S += (1.0 - lag / (L + 1.0)) * (G + G.T)
    return S
