"""Model validation figures: fit percent and residual diagnostics."""

from __future__ import annotations

import numpy as np

from ._validate import as_signal
from .errors import OptionError

__all__ = ["fit_percent"]


def fit_percent(y: np.ndarray, y_hat: np.ndarray) -> np.ndarray:
    """Normalised fit of a model output to a measured output, per output channel.

    Parameters
    ----------
    y : array_like, shape (N, p)
        Measured output.
    y_hat : array_like, shape (N, p)
        Model output (simulated or predicted).

    Returns
    -------
    numpy.ndarray, shape (p,)
        ``100 (1 - ||y - y_hat|| / ||y - mean(y)||)`` per column; 100 is a
        perfect fit, 0 is no better than the mean, and it can be negative.
        A constant measured output gives ``-inf`` unless matched exactly (100).

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, sec. 16.6 (model validation, comparing outputs).

    Examples
    --------
    >>> fit_percent([[1.0], [2.0], [3.0]], [[1.0], [2.0], [3.0]]).tolist()
    [100.0]
    """
    y = as_signal(y, "y", ndim=2)
    y_hat = as_signal(y_hat, "y_hat", ndim=2)
    if y.shape != y_hat.shape:
        raise OptionError(f"y_hat must have the shape of y {y.shape}; got {y_hat.shape}")
    err = np.linalg.norm(y - y_hat, axis=0)
    spread = np.linalg.norm(y - y.mean(axis=0), axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        fit = 100.0 * (1.0 - err / spread)
    fit = np.where(spread == 0, np.where(err == 0, 100.0, -np.inf), fit)
    return fit
