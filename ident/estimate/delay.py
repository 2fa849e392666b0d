"""Input-delay estimation from the significance of a prewhitened high-order ARX impulse response.

The inputs are first prewhitened: an autoregressive model of the inputs is
fitted by least squares (order by AIC) and inputs and outputs are both passed
through its inverse filter, which leaves every transfer function unchanged
but makes the input nearly white, so neighbouring lags of the response are no
longer confounded (the prewhitening of Box and Jenkins [2]_). Smooth, swept or
band-limited test signals otherwise make the early impulse-response
coefficients so uncertain that a delay looks much longer than it is.

For each output a high-order ARX model with input lags starting at 0 is then
fitted by least squares (:mod:`ident.estimate.regression`). Because the
denominator is monic, the first non-zero input coefficient of ``B(q)/A(q)``
equals the first non-zero impulse-response coefficient, so the delay of a
channel is the first lag whose input coefficient is significantly different
from zero. The autoregressive part whitens coloured disturbances, which keeps
the ordinary least-squares standard errors meaningful.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .._validate import int_in_range, positive_float
from ..errors import IdentificationError, OptionError
from .data import Experiment, as_experiments
from .regression import accumulate_r, column_index, lag_blocks, largest_lag, r_factor, rows_available, solve_subset

__all__ = ["DELAY_METHOD", "PREWHITENING_MAX_ORDER", "DelayEstimate", "estimate_delay", "prewhiten"]

#: Name of the method recorded in :attr:`DelayEstimate.method`.
DELAY_METHOD = "arx-impulse-significance"

#: A coefficient smaller than this fraction of the largest coefficient of its
#: channel is a numerical zero even when its t-ratio is large (noise-free data,
#: where coefficient and standard error are both rounding noise).
_NUMERICAL_ZERO = 1e-8


@dataclass(frozen=True, slots=True, eq=False)
class DelayEstimate:
    """Estimated input delays with the evidence behind them.

    Attributes
    ----------
    delays : numpy.ndarray of int, shape (p, m)
        Delay in samples from input ``j`` to output ``i``.
    coefficients : numpy.ndarray, shape (p, m, max_delay + 1)
        Input coefficients (first impulse-response samples) at lags 0..max_delay.
    std_errors : numpy.ndarray, shape (p, m, max_delay + 1)
        Their standard errors.
    t_ratios : numpy.ndarray, shape (p, m, max_delay + 1)
        ``|coefficient| / std_error``.
    detected : numpy.ndarray of bool, shape (p, m)
        True where some lag passed the test; where False, ``delays`` holds the
        lag of the largest t-ratio (no significant response was found).
    threshold : float
        The t-ratio a coefficient had to exceed.
    ar_order : int
        Output lags of the high-order ARX model actually used.
    fir_order : int
        Input coefficients per input (lags 0..fir_order-1).
    prewhitening_order : int
        Order of the autoregressive input model the data were filtered with (0: none).
    residual_variance, output_variance : numpy.ndarray, shape (p,)
        Residual variance of each output's high-order model and the variance of
        that output, both on the prewhitened data (their ratio is a
        signal-to-noise ratio).
    method : str
        :data:`DELAY_METHOD`.
    """

    delays: np.ndarray
    coefficients: np.ndarray
    std_errors: np.ndarray
    t_ratios: np.ndarray
    detected: np.ndarray
    threshold: float
    ar_order: int
    fir_order: int
    prewhitening_order: int = 0
    residual_variance: np.ndarray | None = None
    output_variance: np.ndarray | None = None
    method: str = DELAY_METHOD


def estimate_delay(data: Experiment | Sequence[Experiment], *, max_delay: int = 20,
                   fir_order: int | None = None, ar_order: int = 10,
                   threshold: float = 3.0, max_rows: int | None = 100_000,
                   whiten: bool = True) -> DelayEstimate:
    """Estimate the input delay of every input/output channel.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
        Input and output deviations from the operating point.
    max_delay : int, default 20
        Largest delay considered (samples).
    fir_order : int, optional
        Input coefficients per input in the high-order model, lags
        ``0..fir_order-1``; default ``max_delay + 10``. Must exceed ``max_delay``.
    ar_order : int, default 10
        Output lags of the high-order model. When the regression is rank
        deficient (typically noise-free data of a lower-order system) it is
        halved until it is not (down to 0, a pure FIR model).
    threshold : float, default 3.0
        A lag is significant when ``|b_l| > threshold * se(b_l)``; with Gaussian
        errors a zero coefficient passes with probability about 0.27 % per lag.
    max_rows : int or None, default 100000
        Use at most this many regression rows (the first ones, in experiment
        order); ``None`` uses all. t-ratios of real responses grow like
        ``sqrt(rows)``, so long logs gain nothing but time beyond this.
    whiten : bool, default True
        Prewhiten the inputs first (:func:`prewhiten`).

    Returns
    -------
    DelayEstimate

    Raises
    ------
    OptionError
        Bad options or too few samples for the high-order model.
    IdentificationError
        The inputs are collinear or not exciting even for a pure FIR model.

    Notes
    -----
    Per output ``i``, the model ``A(q) y_i = sum_j B_ij(q) u_j + e`` with
    ``B_ij(q) = sum_{l=0}^{fir_order-1} b_{ij,l} q^-l`` is fitted by QR least
    squares. Since ``B/A = b_0 + (b_1 - a_1 b_0) q^-1 + ...``, the leading
    non-zero ``b`` is the leading non-zero impulse-response sample. The delay is
    the first lag ``l <= max_delay`` with ``|b_l| > threshold * se(b_l)`` and
    ``|b_l| > 1e-8 max_l |b_l|`` (the second test ignores rounding noise on
    noise-free data).

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 6.1 (impulse-response estimation by
       high-order models) and sec. 16.4 (delay and order selection).
    """
    experiments = as_experiments(data)
    experiments, white_order = prewhiten(experiments) if whiten else (experiments, 0)
    max_delay = int_in_range(max_delay, "max_delay", 0)
    fir = max_delay + 10 if fir_order is None else int_in_range(
        fir_order, "fir_order", max_delay + 1)
    ar = int_in_range(ar_order, "ar_order", 0)
    threshold = positive_float(threshold, "threshold")
    if max_rows is not None:
        max_rows = int_in_range(max_rows, "max_rows", 1)
    m, p = experiments[0].n_inputs, experiments[0].n_outputs
    nb = (fir,) * m
    nk = (0,) * m

    while True:
        d_out = ar + m * fir
        L = largest_lag(ar, nb, nk)
        rows = rows_available(experiments, L)
        if max_rows is not None:
            rows = min(rows, max_rows)
        if rows <= d_out:
            if ar > 0:
                ar //= 2
                continue
            raise OptionError(
                f"delay estimation needs more than {d_out} regression rows (fir_order={fir} "
                f"coefficients for each of {m} input(s)); the data give {rows}",
                hint="lower max_delay/fir_order or use a longer log",
            )
        blocks = lag_blocks(ar, nb, nk, range(p), u_first=True)
        index = column_index(blocks)
        R, rows = accumulate_r(experiments, blocks, L, max_rows)
        sols = []
        for i in range(p):
            keys = [("u", j, lag) for j in range(m) for lag in range(fir)]
            keys += [("y", i, lag) for lag in range(1, ar + 1)]
            sols.append(solve_subset(R, [index[k] for k in keys], index[("t", i, 0)]))
        if all(s.rinv is not None for s in sols):
            break
        if ar == 0:
            raise IdentificationError(
                "delay estimation: the input regressors are linearly dependent (collinear "
                "inputs or an input that is not persistently exciting)",
                hint="check the inputs, or give the delays (nk) explicitly",
            )
        ar //= 2

    width = max_delay + 1
    coef = np.empty((p, m, width))
    se = np.empty((p, m, width))
    resid_var = np.empty(p)
    for i, sol in enumerate(sols):
        s2 = float(sol.residual @ sol.residual) / (rows - d_out)
        resid_var[i] = s2
        var = s2 * np.sum(sol.rinv**2, axis=1)  # diag of Rinv Rinv^T
        for j in range(m):
            sl = slice(j * fir, j * fir + width)
            coef[i, j] = sol.theta[sl]
            se[i, j] = np.sqrt(var[sl])
    with np.errstate(divide="ignore", invalid="ignore"):
        t = np.where(se > 0, np.abs(coef) / se, np.where(coef != 0, np.inf, 0.0))
    scale = np.max(np.abs(coef), axis=2, keepdims=True)
    significant = (t > threshold) & (np.abs(coef) > _NUMERICAL_ZERO * scale)
    detected = significant.any(axis=2)
    delays = np.where(detected, np.argmax(significant, axis=2), np.argmax(t, axis=2)).astype(int)
    for arr in (coef, se, t, detected, delays):
        arr.flags.writeable = False
    y_var = np.array([np.var(np.concatenate([e.y[:, i] for e in experiments])) for i in range(p)])
    return DelayEstimate(delays=delays, coefficients=coef, std_errors=se,
                         t_ratios=t, detected=detected, threshold=threshold,
                         ar_order=ar, fir_order=fir, prewhitening_order=white_order,
                         residual_variance=resid_var, output_variance=y_var)


#: Largest order of the autoregressive input model used for prewhitening.
PREWHITENING_MAX_ORDER = 20

#: At most this many samples (from the start of each experiment) fit the input model.
_PREWHITEN_FIT_SAMPLES = 100_000


def prewhiten(data: Experiment | Sequence[Experiment], max_order: int = PREWHITENING_MAX_ORDER
              ) -> tuple[tuple[Experiment, ...], int]:
    """Filter inputs and outputs by the inverse of an autoregressive model of the inputs.

    Parameters
    ----------
    data : Experiment or sequence of Experiment
    max_order : int
        Largest order of the input model; the order is chosen by AIC.

    Returns
    -------
    (tuple of Experiment, int)
        The filtered experiments (each shortened by the order) and the order
        (0 when no filtering helps or an experiment is too short).

    Notes
    -----
    One scalar model ``L(q) u_j = w_j`` is fitted to all inputs together (each
    scaled to unit variance) by least squares; inputs and outputs are filtered
    by ``L(q)``. A common filter applied to every signal leaves every transfer
    function ``y_i / u_j`` unchanged.

    References
    ----------
    .. [1] G. E. P. Box and G. M. Jenkins, *Time Series Analysis: Forecasting
       and Control*, Holden-Day, 1970, sec. 11.2 (prewhitening the input).
    """
    items = as_experiments(data)
    k, coeffs = _input_ar_model(items, max_order)
    if k == 0 or any(e.n_samples <= 4 * k for e in items):
        return items, 0
    filt = np.concatenate([[1.0], coeffs])
    out = []
    for e in items:
        u = np.column_stack([np.convolve(e.u[:, j], filt, mode="valid") for j in range(e.n_inputs)])
        y = np.column_stack([np.convolve(e.y[:, i], filt, mode="valid") for i in range(e.n_outputs)])
        out.append(Experiment(u, y))
    return tuple(out), k


def _input_ar_model(items: Sequence[Experiment], max_order: int) -> tuple[int, np.ndarray]:
    """AIC-best order and coefficients ``[l_1 .. l_k]`` of ``u[t] + sum l_i u[t-i] = w[t]`` for the pooled inputs."""
    cols = []
    for e in items:
        u = e.u[:_PREWHITEN_FIT_SAMPLES]
        std = u.std(axis=0)
        cols.extend(u[:, j] / std[j] for j in range(u.shape[1]) if std[j] > 0)
    cols = [c for c in cols if c.size > 4 * max_order + 10]
    if not cols:
        return 0, np.zeros(0)
    # columns: lags 1 .. max_order, then the current sample (the target last)
    lags = list(range(1, max_order + 1)) + [0]
    rows = np.vstack([np.column_stack([c[max_order - i:c.size - i] for i in lags]) for c in cols])
    R = r_factor(rows)
    N = rows.shape[0]
    best, best_coef = 0, np.zeros(0)
    best_aic = N * np.log(max(float(rows[:, -1] @ rows[:, -1]) / N, 1e-300))
    for k in range(1, max_order + 1):
        sub = np.linalg.qr(R[:, list(range(k)) + [max_order]], mode="r")
        aic = N * np.log(max(float(sub[k, k] ** 2) / N, 1e-300)) + 2 * k
        if aic < best_aic - 1e-9:
            beta = np.linalg.lstsq(sub[:k, :k], sub[:k, k], rcond=None)[0]
            best, best_aic, best_coef = k, aic, -beta
    return best, best_coef
