"""Heteroskedasticity and autocorrelation consistent (HAC) covariance of a sum of gradients.

An estimator that minimises a sum of squared errors ``sum_t e_t^2`` has the
gradient ``sum_t g_t`` with per-sample contributions ``g_t = J_t^T e_t``. When
the errors are white the covariance of that sum is ``sigma^2 J^T J``; when they
are coloured (the measurement noise seen by an output-error model) it is
``sum_{|l|} Gamma_l`` over the autocovariances ``Gamma_l`` of ``g_t``. The
Newey-West estimate [1]_ keeps the lags up to a bandwidth with Bartlett
weights ``1 - l / (bandwidth + 1)``, which keeps it positive semi-definite;
the bandwidth follows Andrews' AR(1) plug-in rule [2]_. Several experiments
contribute their own sums; lags never straddle two of them.

References
----------
.. [1] W. K. Newey and K. D. West, "A simple, positive semi-definite,
   heteroskedasticity and autocorrelation consistent covariance matrix",
   *Econometrica* 55(3), 703-708, 1987.
.. [2] D. W. K. Andrews, "Heteroskedasticity and autocorrelation consistent
   covariance matrix estimation", *Econometrica* 59(3), 817-858, 1991,
   eq. 6.2 and 6.4 (Bartlett kernel, AR(1) approximation).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["newey_west", "andrews_bandwidth"]


def newey_west(parts: Sequence[np.ndarray]) -> np.ndarray:
    """Newey-West estimate of ``cov(sum_t g_t)`` from per-sample contributions.

    Parameters
    ----------
    parts : sequence of array_like, shape (N_k, d)
        Per experiment, the rows ``g_t`` (all with the same ``d``).

    Returns
    -------
    numpy.ndarray, shape (d, d)
        ``sum_k [Gamma_0 + sum_{l=1}^{L} (1 - l / (L + 1)) (Gamma_l + Gamma_l^T)]``
        with ``Gamma_l = sum_t g_{t+l} g_t^T`` of experiment ``k`` and ``L`` from
        :func:`andrews_bandwidth` over all experiments.
    """
    bandwidth = andrews_bandwidth(parts)
    width = parts[0].shape[1]
    S = np.zeros((width, width))
    for g in parts:
        S += g.T @ g
        for lag in range(1, min(bandwidth, g.shape[0] - 1) + 1):
            G = g[lag:].T @ g[:-lag]
            S += (1.0 - lag / (bandwidth + 1.0)) * (G + G.T)
    return S


def andrews_bandwidth(parts: Sequence[np.ndarray]) -> int:
    """Bartlett-kernel bandwidth by Andrews' AR(1) plug-in rule (1991, eq. 6.4 with eq. 6.2).

    Parameters
    ----------
    parts : sequence of array_like, shape (N_k, d)
        Per experiment, the per-sample gradient contributions.

    Returns
    -------
    int
        ``1.1447 (alpha N)^(1/3)`` with ``alpha`` from an AR(1) fit to each
        column (coefficient clipped to ``[-0.97, 0.97]``), at most ``N // 4``.
    """
    num = den = 0.0
    N = sum(g.shape[0] for g in parts)
    for col in range(parts[0].shape[1]):
        a = sum(float(g[1:, col] @ g[:-1, col]) for g in parts)
        b = sum(float(g[:-1, col] @ g[:-1, col]) for g in parts)
        if b <= 0:
            continue
        rho = min(max(a / b, -0.97), 0.97)
        s2 = sum(float(np.sum((g[1:, col] - rho * g[:-1, col]) ** 2)) for g in parts) / max(N, 1)
        num += 4.0 * rho**2 * s2**2 / ((1 - rho) ** 6 * (1 + rho) ** 2)
        den += s2**2 / (1 - rho) ** 4
    if den <= 0:
        return 0
    return int(min(1.1447 * (num / den * N) ** (1.0 / 3.0), N // 4))
