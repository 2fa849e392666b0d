r"""Multisines: frequency grids, Schroeder phases and crest-factor reduction.

A multisine is a sum of cosines on harmonics ("lines") ``k`` of ``1 / period``,

.. math:: x[n] = \sum_{k \in K} a_k \cos(2 \pi k n / N + \phi_k), \quad n = 0 \dots N - 1,

so one period of ``N`` samples holds exactly the chosen lines and nothing else:
its DFT has no leakage. The work here is choosing the lines
(:func:`frequency_lines`: linear or logarithmic grid, all, odd, or odd-random
harmonics) and the phases: Schroeder's closed form [1]_ (:func:`schroeder_phases`),
then a lower crest factor found from it by time/frequency-domain clipping [2]_
followed by minimising an Lp norm of the signal for growing ``p``, an
approximation of the L-infinity (Chebyshev) problem [3]_
(:func:`low_crest_phases`). Pure numpy, plus scipy.optimize inside
:func:`low_crest_phases`.

References
----------
.. [1] M. R. Schroeder, "Synthesis of low-peak-factor signals and binary
   sequences with low autocorrelation", IEEE Trans. Inf. Theory 16(1), 85-89,
   1970.
.. [2] E. Van der Ouderaa, J. Schoukens and J. Renneboog, "Peak factor
   minimization using a time-frequency domain swapping algorithm", IEEE Trans.
   Instrum. Meas. 37(1), 145-147, 1988 (its companion, "Peak factor
   minimization of input and output signals of linear systems", IEEE Trans.
   Instrum. Meas. 37(2), 207-212, 1988, treats the same idea for outputs).
.. [3] P. Guillaume, J. Schoukens, R. Pintelon and I. Kollar, "Crest-factor
   minimization using nonlinear Chebyshev approximation methods", IEEE Trans.
   Instrum. Meas. 40(6), 982-989, 1991.
.. [4] R. Pintelon and J. Schoukens, *System Identification: A Frequency Domain
   Approach*, 2nd ed., Wiley-IEEE Press, 2012 (periodic excitations, odd and
   random-odd multisines and the detection of nonlinear distortions).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .._validate import as_signal, int_in_range, one_of, positive_float
from ..choices import HARMONICS, SPACINGS
from ..errors import OptionError

__all__ = [
    "ODD_RANDOM_GROUP",
    "crest_factor",
    "line_range",
    "frequency_lines",
    "multisine",
    "schroeder_phases",
    "low_crest_phases",
]

#: Odd-random grids leave out one line, chosen at random, in every group of this many
#: consecutive odd lines (common practice; groups of 3 or 4 are usual, see [4]_).
ODD_RANDOM_GROUP = 4

#: Exponents of the Lp norms minimised after clipping (the last approximates L-infinity); two
#: stages of at most 30 L-BFGS iterations gained as much as six longer ones in trials here.
_LP_EXPONENTS = (32, 128)
#: Work budgets (samples x iterations) that cap the clipping and Lp stages for long periods.
_CLIP_BUDGET = 3e7
_LP_BUDGET = 1e7


def crest_factor(x: Any) -> np.ndarray:
    """Crest (peak) factor of each column: largest deviation from the mean over the RMS deviation.

    Parameters
    ----------
    x : array_like, shape (N,) or (N, m)
        Samples; a 1-D array is one column.

    Returns
    -------
    numpy.ndarray, shape (m,)
        ``max |x - mean| / rms(x - mean)``; ``nan`` for a constant column. A
        sine has ``sqrt(2)``, a two-level signal 1.

    Examples
    --------
    >>> import numpy as np
    >>> round(float(crest_factor(np.sin(2 * np.pi * np.arange(64) / 16))[0]), 4)
    1.4142
    """
    arr = as_signal(x, "x", ndim=2)
    dev = arr - arr.mean(axis=0)
    rms = np.sqrt(np.mean(dev * dev, axis=0))
    peak = np.max(np.abs(dev), axis=0)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(rms > 0, peak / np.where(rms > 0, rms, 1.0), np.nan)


def line_range(n_samples: int, sample_rate_hz: float, band_hz: Any) -> tuple[int, int]:
    """First and last line ``k`` of a period of ``n_samples`` inside the band.

    Line ``k`` is the frequency ``k * sample_rate_hz / n_samples``. Lines run from
    1 (no DC) to the last one strictly below the Nyquist frequency.

    Returns
    -------
    (int, int)
        ``(k_low, k_high)``; ``k_low > k_high`` when the band holds no line.
    """
    n = int_in_range(n_samples, "n_samples", 2)
    fs = positive_float(sample_rate_hz, "sample_rate_hz")
    low, high = (float(v) for v in band_hz)
    f0 = fs / n
    k_low = max(1, math.ceil(low / f0 - 1e-9))
    k_high = min((n - 1) // 2, math.floor(high / f0 + 1e-9))
    return k_low, k_high


def frequency_lines(
    n_samples: int,
    sample_rate_hz: float,
    band_hz: Any,
    *,
    spacing: str = "linear",
    harmonics: str = "all",
    lines_per_decade: int = 20,
    rng: np.random.Generator | None = None,
) -> np.ndarray:
    """Lines (harmonics of one period) a multisine excites in a band.

    Parameters
    ----------
    n_samples : int
        Samples per period ``N``; line ``k`` is at ``k * sample_rate_hz / N`` Hz.
    sample_rate_hz : float
        Sample rate in Hz.
    band_hz : (float, float)
        Lowest and highest frequency of interest, in Hz.
    spacing : {"linear", "log"}
        Every allowed line of the band, or about ``lines_per_decade`` lines per
        decade, each the allowed line nearest a logarithmically spaced target.
    harmonics : {"all", "odd", "odd-random"}
        Every harmonic, odd ones only (even nonlinear distortion then falls on
        the unexcited even lines), or odd ones with one line left out at random
        in every group of :data:`ODD_RANDOM_GROUP` (odd distortion then shows on
        the left-out odd lines) [4]_.
    lines_per_decade : int
        Density of the logarithmic grid (default 20).
    rng : numpy.random.Generator, optional
        Chooses the left-out lines of an odd-random grid; default
        ``numpy.random.default_rng(0)``.

    Returns
    -------
    numpy.ndarray of int
        Increasing line numbers ``k >= 1``.

    Raises
    ------
    OptionError
        The band holds no allowed line for this period.
    """
    one_of(spacing, "spacing", SPACINGS)
    one_of(harmonics, "harmonics", HARMONICS)
    per_decade = int_in_range(lines_per_decade, "lines_per_decade", 1, 1000)
    k_low, k_high = line_range(n_samples, sample_rate_hz, band_hz)
    allowed = np.arange(k_low, k_high + 1)
    if harmonics != "all":
        allowed = allowed[allowed % 2 == 1]
    if allowed.size == 0:
        f0 = float(sample_rate_hz) / int(n_samples)
        raise OptionError(
            f"the band {band_hz[0]:g}-{band_hz[1]:g} Hz holds no {'' if harmonics == 'all' else 'odd '}"
            f"harmonic of the period ({int(n_samples)} samples, lines every {f0:.6g} Hz)",
            hint="widen the band or lengthen the period",
        )
    lines = _log_subset(allowed, per_decade) if spacing == "log" else allowed
    if harmonics == "odd-random":
        lines = _drop_one_per_group(lines, rng if rng is not None else np.random.default_rng(0))
    return lines.astype(int)


def _log_subset(allowed: np.ndarray, per_decade: int) -> np.ndarray:
    """Return the allowed lines nearest logarithmically spaced targets (duplicates removed)."""
    first, last = float(allowed[0]), float(allowed[-1])
    if last <= first:
        return allowed.copy()
    count = max(2, math.ceil(per_decade * math.log10(last / first)) + 1)
    targets = np.geomspace(first, last, count)
    idx = np.clip(np.searchsorted(allowed, targets), 1, allowed.size - 1)
    lower, upper = allowed[idx - 1], allowed[idx]
    nearer = np.where(np.log(targets / lower) <= np.log(upper / targets), lower, upper)
    return np.unique(nearer)


def _drop_one_per_group(lines: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    groups = lines.size // ODD_RANDOM_GROUP
    if groups == 0:
        return lines.copy()
    drop = np.arange(groups) * ODD_RANDOM_GROUP + rng.integers(0, ODD_RANDOM_GROUP, groups)
    keep = np.ones(lines.size, dtype=bool)
    keep[drop] = False
    return lines[keep]


def _amplitudes(lines: np.ndarray, amplitudes: Any) -> np.ndarray:
    if amplitudes is None:
        return np.ones(lines.size)
    amp = as_signal(amplitudes, "amplitudes", ndim=1)
    if amp.shape != lines.shape or np.any(amp < 0):
        raise OptionError(f"amplitudes must hold {lines.size} values >= 0; got shape {amp.shape}")
    return amp


def _lines(lines: Any, n_samples: int) -> np.ndarray:
    k = np.asarray(lines)
    if k.ndim != 1 or k.size == 0 or not np.issubdtype(k.dtype, np.integer):
        raise OptionError(f"lines must be a non-empty 1-D array of integers; got {k!r:.60}")
    if np.any(k < 1) or np.any(k > (n_samples - 1) // 2) or np.any(np.diff(k) <= 0):
        raise OptionError(
            f"lines must increase, each in [1, {(n_samples - 1) // 2}] for a period of {n_samples} samples"
        )
    return k.astype(np.int64)


def multisine(n_samples: int, lines: Any, phases: Any, amplitudes: Any = None) -> np.ndarray:
    """One period of a multisine, ``sum_k a_k cos(2 pi k n / N + phi_k)``.

    Parameters
    ----------
    n_samples : int
        Samples per period ``N``.
    lines : array_like of int, shape (K,)
        Increasing harmonics ``k`` in ``[1, (N - 1) // 2]``.
    phases : array_like, shape (K,)
        Phases ``phi_k`` in rad.
    amplitudes : array_like, shape (K,), optional
        ``a_k``; default 1 for every line.

    Returns
    -------
    numpy.ndarray, shape (N,)

    Examples
    --------
    >>> import numpy as np
    >>> x = multisine(8, [1], [0.0])
    >>> np.allclose(x, np.cos(2 * np.pi * np.arange(8) / 8))
    True
    """
    n = int_in_range(n_samples, "n_samples", 3)
    k = _lines(lines, n)
    phi = as_signal(phases, "phases", ndim=1)
    if phi.shape != k.shape:
        raise OptionError(f"phases must hold {k.size} values; got {phi.size}")
    return _synthesise(n, k, _amplitudes(k, amplitudes), phi)


def _synthesise(n: int, k: np.ndarray, amp: np.ndarray, phi: np.ndarray) -> np.ndarray:
    spectrum = np.zeros(n // 2 + 1, dtype=complex)
    spectrum[k] = amp * np.exp(1j * phi) * (n / 2)
    return np.fft.irfft(spectrum, n=n)


def schroeder_phases(lines: Any, amplitudes: Any = None) -> np.ndarray:
    r"""Schroeder's low-peak-factor phases for a multisine on the given lines.

    Parameters
    ----------
    lines : array_like of int, shape (K,)
        Increasing harmonic numbers ``k``.
    amplitudes : array_like, shape (K,), optional
        Line amplitudes; default flat.

    Returns
    -------
    numpy.ndarray, shape (K,)
        Phases in ``[0, 2 pi)``.

    Notes
    -----
    With ``p_l`` the share of the power on harmonic ``l`` (zero on unexcited
    harmonics), Schroeder's formula [1]_ is

    .. math:: \phi_k = -2 \pi \sum_{l < k} (k - l) \, p_l ,

    which for ``K`` consecutive lines of equal power is ``-pi k (k - 1) / K``.

    Examples
    --------
    >>> import numpy as np
    >>> np.allclose(schroeder_phases([1, 2, 3]), np.mod(-np.pi * np.array([0, 2, 6]) / 3, 2 * np.pi))
    True
    """
    k = np.asarray(lines)
    if k.ndim != 1 or k.size == 0 or np.any(np.diff(k) <= 0):
        raise OptionError("lines must be a non-empty increasing 1-D array of integers")
    amp = _amplitudes(k, amplitudes)
    power = amp**2
    total = power.sum()
    if total <= 0:
        raise OptionError("amplitudes must not all be zero")
    p = power / total
    h = k.astype(float)
    before_p = np.cumsum(p) - p
    before_hp = np.cumsum(h * p) - h * p
    return np.mod(-2 * np.pi * (h * before_p - before_hp), 2 * np.pi)


def low_crest_phases(n_samples: int, lines: Any, amplitudes: Any = None, start: Any = None) -> np.ndarray:
    r"""Phases giving a multisine a low crest factor.

    Starts from ``start`` (default Schroeder's phases), runs the
    time/frequency-domain clipping iteration [2]_, then minimises the Lp norm
    of the signal for ``p`` = 32 and then 128 [3]_, and returns the phases of
    the lowest crest factor met on the way (never worse than the start).

    Parameters
    ----------
    n_samples : int
        Samples per period.
    lines : array_like of int, shape (K,)
        Excited harmonics.
    amplitudes : array_like, shape (K,), optional
        Line amplitudes (kept exactly); default flat.
    start : array_like, shape (K,), optional
        Starting phases; default :func:`schroeder_phases`.

    Returns
    -------
    numpy.ndarray, shape (K,)
        Phases in rad.

    Notes
    -----
    Clipping: synthesise, clip the time signal at a fraction ``q`` of its peak,
    take the phases of the clipped signal's spectrum at the excited lines and
    keep the amplitudes; ``q`` rises towards 1 when a step does not help.
    Lp stage: minimise ``log ||x||_p`` over the phases with L-BFGS
    (``scipy.optimize.minimize``) using the exact gradient

    .. math:: \partial \|x\|_p^p / \partial \phi_k = p \, \mathrm{Re}\big(i a_k e^{i \phi_k}
              \overline{W_k}\big), \quad W = \mathrm{DFT}(|x|^{p-1} \mathrm{sign}\, x),

    since ``||x||_2`` is fixed by the amplitudes; as ``p`` grows the Lp norm
    tends to the peak value [3]_. Long periods get fewer iterations (a fixed
    work budget), so the result is available in seconds.
    """
    n = int_in_range(n_samples, "n_samples", 3)
    k = _lines(lines, n)
    amp = _amplitudes(k, amplitudes)
    phi = schroeder_phases(k, amp) if start is None else as_signal(start, "start", ndim=1).copy()
    if phi.shape != k.shape:
        raise OptionError(f"start must hold {k.size} phases; got {phi.size}")
    best = _Best(n, k, amp, phi)
    _clip_iterations(best, int(np.clip(_CLIP_BUDGET / n, 20, 300)))
    _lp_descent(best, int(np.clip(_LP_BUDGET / n, 5, 30)))
    return np.mod(best.phases, 2 * np.pi)


class _Best:
    """The phases with the lowest crest factor seen so far."""

    def __init__(self, n: int, k: np.ndarray, amp: np.ndarray, phi: np.ndarray) -> None:
        self.n, self.k, self.amp = n, k, amp
        self.phases = phi.copy()
        self.crest = self.crest_of(phi)

    def crest_of(self, phi: np.ndarray) -> float:
        x = _synthesise(self.n, self.k, self.amp, phi)
        return float(np.max(np.abs(x)) / math.sqrt(np.mean(x * x)))

    def offer(self, phi: np.ndarray) -> bool:
        value = self.crest_of(phi)
        if value < self.crest - 1e-9:
            self.crest, self.phases = value, phi.copy()
            return True
        return False


def _clip_iterations(best: _Best, iterations: int) -> None:
    phi = best.phases.copy()
    fraction = 0.8
    for _ in range(iterations):
        x = _synthesise(best.n, best.k, best.amp, phi)
        level = fraction * np.max(np.abs(x))
        phi = np.angle(np.fft.rfft(np.clip(x, -level, level))[best.k])
        if not best.offer(phi):
            fraction = min(0.99, fraction + 0.01)


def _lp_descent(best: _Best, max_iter: int) -> None:
    from scipy.optimize import minimize

    n, k, amp = best.n, best.k, best.amp

    def objective(phi: np.ndarray, p: int) -> tuple[float, np.ndarray]:
        x = _synthesise(n, k, amp, phi)
        scale = np.max(np.abs(x))
        xs = x / scale
        power = np.abs(xs) ** p
        mean = power.mean()
        w = power / np.where(xs == 0, 1.0, xs)  # |xs|^(p-1) sign(xs)
        big_w = np.fft.rfft(w)[k]
        grad = np.real(1j * amp * np.exp(1j * phi) * np.conj(big_w)) / (n * mean * scale)
        return math.log(scale) + math.log(mean) / p, grad

    phi = best.phases.copy()
    for p in _LP_EXPONENTS:
        res = minimize(objective, phi, args=(p,), jac=True, method="L-BFGS-B",
                       options={"maxiter": max_iter})
        phi = np.asarray(res.x, dtype=float)
        best.offer(phi)
