"""Is an input rich enough to identify a model? Persistence of excitation and power band.

Two checks per input signal:

* the order of persistent excitation: the largest ``n`` for which the sample
  covariance matrix of ``n`` consecutive (mean-removed) input samples is well
  conditioned, see :func:`persistent_excitation_order`;
* the power band: the frequency below which a given fraction (90 %) of the
  input power lies, from a Welch spectrum, as a fraction of the Nyquist
  frequency, see :func:`power_band`.

An ARX model with ``nb`` input coefficients (or a state-space model of order
``n`` fitted by a subspace method) needs an input that is persistently
exciting of order at least ``nb`` (about ``2 n``) [1]_.

References
----------
.. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, Section 13.2 (informative experiments, persistence of
   excitation).
.. [2] T. Söderström and P. Stoica, *System Identification*, Prentice Hall,
   1989, Section 5.4 (persistent excitation; sinusoids and PRBS).
.. [3] P. D. Welch, "The use of fast Fourier transform for the estimation of
   power spectra", IEEE Trans. Audio Electroacoust. 15(2), 70-73, 1967.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .._validate import as_signal, fraction, int_in_range, names_tuple, positive_float
from ..errors import OptionError

__all__ = [
    "DEFAULT_RCOND",
    "ExcitationReport",
    "excitation_covariance",
    "persistent_excitation_order",
    "power_band",
    "excited_band",
    "excitation_report",
]

#: Default conditioning threshold: ``lambda_min / lambda_max`` of the covariance
#: matrix must exceed this (a 60 dB spread of the eigenvalues, which are close to
#: samples of the input power spectrum).
DEFAULT_RCOND = 1e-6


@dataclass(frozen=True, slots=True, eq=False)
class ExcitationReport:
    """Excitation of one input signal.

    Attributes
    ----------
    name : str
        Signal name.
    pe_order : int
        Order of persistent excitation found (0 for a constant).
    max_order_tested : int
        Largest order examined; ``pe_order == max_order_tested`` means "at least".
    pe_order_is_lower_bound : bool
        True when the signal was still exciting at ``max_order_tested``.
    rcond : float
        Conditioning threshold used.
    band_fraction : float or None
        Frequency below which ``power_fraction`` of the power lies, divided by
        the Nyquist frequency; ``None`` for a signal without variance.
    band_hz : float or None
        The same in Hz.
    power_fraction : float
        Share of the power the band holds (default 0.9).
    std : float
        Standard deviation of the signal.
    """

    name: str
    pe_order: int
    max_order_tested: int
    pe_order_is_lower_bound: bool
    rcond: float
    band_fraction: float | None
    band_hz: float | None
    power_fraction: float
    std: float


def _one_signal(u, name: str) -> np.ndarray:
    arr = as_signal(u, name, ndim=2, bounded=True)
    if arr.shape[1] != 1:
        raise OptionError(
            f"{name} must be one signal, shape (N,) or (N, 1); got {arr.shape}; "
            "use excitation_report for several inputs"
        )
    return arr[:, 0]


def excitation_covariance(u, order: int) -> np.ndarray:
    """Sample covariance matrix of ``order`` consecutive mean-removed samples.

    Parameters
    ----------
    u : array_like, shape (N,) or (N, 1)
        One signal.
    order : int
        Size ``n`` of the matrix, ``1 <= n < N``.

    Returns
    -------
    numpy.ndarray, shape (n, n)
        ``R[i, j] = 1/L * sum_t x[t - i] x[t - j]`` over ``t = n-1 .. N-1``
        (``L = N - n + 1``), ``x = u - mean(u)``.

    Notes
    -----
    This is the covariance of the regressor vector ``[x(t), ..., x(t-n+1)]``
    that a least-squares fit with ``n`` input coefficients sees. Its entries
    are sample autocovariances over a common window, so it is Toeplitz up to
    end effects of order ``n / N``; unlike the Toeplitz matrix built from the
    biased autocovariance estimate, it is exactly singular for a signal that
    satisfies a linear recursion of order below ``n`` (a sinusoid: order 2),
    which makes the order test exact for such signals.

    The first row is ``order`` dot products; every further diagonal follows
    from ``R[i+1, j+1] = R[i, j] + x[n-2-i] x[n-2-j] - x[N-1-i] x[N-1-j]``,
    so the cost is ``O(N n + n^2)``.
    """
    x = _one_signal(u, "u")
    n_samples = x.shape[0]
    n = int_in_range(order, "order", 1, max(1, n_samples - 1))
    x = x - x.mean()
    length = n_samples - n + 1
    head = x[n - 1 :]
    first = np.array([head @ x[n - 1 - d : n_samples - d] for d in range(n)])
    R = np.empty((n, n))
    for d in range(n):
        m = n - d  # entries on diagonal d
        i = np.arange(m - 1)
        add = x[n - 2 - i] * x[n - 2 - i - d]
        sub = x[n_samples - 1 - i] * x[n_samples - 1 - i - d]
        diag = first[d] + np.concatenate(([0.0], np.cumsum(add - sub)))
        idx = np.arange(m)
        R[idx, idx + d] = diag
        R[idx + d, idx] = diag
    return R / length


def _conditioning(R: np.ndarray) -> np.ndarray:
    """``lambda_min / lambda_max`` of every leading principal submatrix of ``R``."""
    out = np.empty(R.shape[0])
    for k in range(1, R.shape[0] + 1):
        ev = np.linalg.eigvalsh(R[:k, :k])
        out[k - 1] = ev[0] / ev[-1] if ev[-1] > 0 else 0.0
    return out


def persistent_excitation_order(u, max_order: int = 50, rcond: float = DEFAULT_RCOND) -> int:
    """Order up to which a signal is persistently exciting.

    Parameters
    ----------
    u : array_like, shape (N,) or (N, 1)
        One input signal.
    max_order : int, default 50
        Largest order examined (at most 1000). It is reduced to ``N // 2`` for
        short signals.
    rcond : float, default ``DEFAULT_RCOND`` (1e-6)
        Threshold on ``lambda_min / lambda_max``, in (0, 1).

    Returns
    -------
    int
        The largest ``n <= max_order`` for which the ``n x n`` covariance matrix
        of ``n`` consecutive mean-removed samples
        (:func:`excitation_covariance`) has ``lambda_min / lambda_max > rcond``;
        0 when even ``n = 1`` fails (a constant signal).

    Notes
    -----
    A signal is persistently exciting of order ``n`` when the covariance matrix
    ``R_n`` of ``[x(t), ..., x(t-n+1)]`` is positive definite [1]_, [2]_.
    Finite data and noise make ``R_n`` numerically non-singular always, so the
    test here is on its conditioning. The leading ``k x k`` submatrices of one
    matrix are used, so by eigenvalue interlacing ``lambda_min / lambda_max``
    can only fall as ``k`` grows, and the order is well defined.

    The mean is removed first, because identification works on deviations from
    the operating point. This is why a constant gives 0, not the textbook 1
    (a nonzero constant is exciting of order 1 only through its mean), and a
    periodic binary sequence of period ``P`` gives ``P - 1`` rather than ``P``
    (its mean line at zero frequency is removed). A single sinusoid gives 2.

    References
    ----------
    .. [1] L. Ljung, *System Identification: Theory for the User*, 2nd ed.,
       Prentice Hall, 1999, Section 13.2.
    .. [2] T. Söderström and P. Stoica, *System Identification*, Prentice Hall,
       1989, Section 5.4.
    """
    x = _one_signal(u, "u")
    max_order = int_in_range(max_order, "max_order", 1, 1000)
    rcond = fraction(rcond, "rcond")
    if x.shape[0] < 2:
        raise OptionError(f"u must hold at least 2 samples; got {x.shape[0]}")
    n = max(1, min(max_order, x.shape[0] // 2))
    ratios = _conditioning(excitation_covariance(x, n))
    # monotone by interlacing; the first failure decides (safe against rounding)
    fails = np.flatnonzero(~(ratios > rcond))
    return int(fails[0]) if fails.size else n


def power_band(u, sample_time: float, fraction: float = 0.9) -> float | None:
    """Frequency below which a fraction of the signal power lies, relative to Nyquist.

    Parameters
    ----------
    u : array_like, shape (N,) or (N, 1)
        One signal.
    sample_time : float
        Sample time in s.
    fraction : float, default 0.9
        Share of the (mean-removed) power, in (0, 1).

    Returns
    -------
    float or None
        ``f / f_Nyquist`` in [0, 1], where ``f`` is the smallest frequency with
        ``integral_0^f S(f') df' >= fraction * integral_0^{f_N} S(f') df'``
        (linear interpolation of the cumulative trapezoidal integral of the
        Welch spectrum ``S`` [3]_); ``None`` when the signal has no variance.

    Notes
    -----
    Welch segments of up to 1024 samples, Hann window, 50 % overlap, mean
    removed per segment (``scipy.signal.welch`` defaults otherwise). White
    noise gives ``fraction`` itself (0.9) up to estimation error.

    References
    ----------
    .. [3] P. D. Welch, IEEE Trans. Audio Electroacoust. 15(2), 70-73, 1967.
    """
    x = _one_signal(u, "u")
    sample_time = positive_float(sample_time, "sample_time")
    share = _fraction_arg(fraction)
    band = _band_hz(x, sample_time, share)
    return None if band is None else band * 2.0 * sample_time


def _fraction_arg(value) -> float:
    return fraction(value, "fraction")


def _band_hz(x: np.ndarray, sample_time: float, share: float) -> float | None:
    if x.shape[0] < 4 or not np.ptp(x) > 0:
        return None
    from scipy.integrate import cumulative_trapezoid
    from scipy.signal import welch

    f, pxx = welch(x, fs=1.0 / sample_time, nperseg=min(1024, x.shape[0]))
    cum = cumulative_trapezoid(pxx, f, initial=0.0)
    total = cum[-1]
    if not total > 0:
        return None
    return float(np.interp(share * total, cum, f))


def excitation_report(
    u,
    sample_time: float,
    *,
    names=None,
    max_order: int = 50,
    rcond: float = DEFAULT_RCOND,
    power_fraction: float = 0.9,
) -> tuple[ExcitationReport, ...]:
    """Excitation check of every input column.

    Parameters
    ----------
    u : array_like, shape (N, m)
        Inputs.
    sample_time : float
        Sample time in s.
    names : sequence of str, optional
        Input names; default ``u1, u2, ...``.
    max_order : int, default 50
        See :func:`persistent_excitation_order`.
    rcond : float, default 1e-6
        See :func:`persistent_excitation_order`.
    power_fraction : float, default 0.9
        See :func:`power_band`.

    Returns
    -------
    tuple of ExcitationReport
        One per input column.
    """
    arr = as_signal(u, "u", ndim=2, bounded=True)
    sample_time = positive_float(sample_time, "sample_time")
    max_order = int_in_range(max_order, "max_order", 1, 1000)
    rcond = fraction(rcond, "rcond")
    share = fraction(power_fraction, "power_fraction")
    labels = names_tuple(names, "names", arr.shape[1], "u")
    if arr.shape[0] < 2:
        raise OptionError(f"u must hold at least 2 samples; got {arr.shape[0]}")
    tested = max(1, min(max_order, arr.shape[0] // 2))
    out = []
    for j in range(arr.shape[1]):
        col = arr[:, j]
        order = persistent_excitation_order(col, max_order=max_order, rcond=rcond)
        band = _band_hz(col, sample_time, share)
        out.append(
            ExcitationReport(
                name=labels[j],
                pe_order=order,
                max_order_tested=tested,
                pe_order_is_lower_bound=order >= tested,
                rcond=rcond,
                band_fraction=None if band is None else band * 2.0 * sample_time,
                band_hz=band,
                power_fraction=share,
                std=float(np.std(col)),
            )
        )
    return tuple(out)


def excited_band(u: np.ndarray, sample_time: float, power_fraction: float = 0.9) -> tuple[float, float] | None:
    """Return the band the inputs excited: up to the widest power band over the inputs.

    Parameters
    ----------
    u : array_like, shape (N, m)
        Inputs.
    sample_time : float
        Seconds.
    power_fraction : float, default 0.9
        Share of each input's power that defines its band (:func:`power_band`).

    Returns
    -------
    (float, float) or None
        ``(0.001 f_N, f_high)`` in Hz, where ``f_high`` is the largest over the
        inputs of the frequency below which ``power_fraction`` of the input power lies;
        ``None`` when no input varies.
    """
    u = as_signal(u, "u", ndim=2, bounded=True)
    nyquist = 0.5 / positive_float(sample_time, "sample_time")
    highs = []
    for j in range(u.shape[1]):
        band = power_band(u[:, j], sample_time, power_fraction)
        if band is not None:
            highs.append(band * nyquist)
    low = 1e-3 * nyquist
    high = max(highs, default=0.0)
    return (low, high) if high > low else None
