r"""Periodic test data: period averaging, noise from the period-to-period scatter, FRF at the lines.

When the input of a log repeats with a period of ``N`` samples (a signal from
``rigfit excite``, or any periodic excitation), the steady-state output repeats
too, and whatever changes from one period to the next is noise. After the
transient periods are discarded, :func:`analyse_periodic`

* averages the ``P`` measured periods (the noise variance of the average is the
  noise variance over ``P``);
* estimates the noise variance of every signal from the scatter of the periods
  about their average (``P - 1`` degrees of freedom per sample);
* takes the DFT of each period, which for a periodic signal has no leakage and
  needs no window, and estimates the frequency response at every excited line
  ``k`` (frequency ``k / (N T)``) with its standard deviation;
* gives the noise floor (standard deviation of the averaged output spectrum)
  at every line of the band, and from the lines that no input excites (odd-random
  or odd multisines) the level of nonlinear distortion against that floor [1]_.

Several inputs are separated line by line: at a line excited by one input only
(interleaved lines) its column of the frequency response follows directly; at a
line excited by several inputs, the blocks of an orthogonal design supply as
many independent equations as there are blocks,

.. math:: \bar Y_b(k) = G(k) \bar U_b(k), \quad b = 1 \dots B,

solved by least squares. Spectra are scaled so that a sine of amplitude ``a``
on line ``k`` has ``|X(k)| = a``.

The period comes from the caller (the signal's description written by
``rigfit excite``, or a ``--period`` option) or is detected from the input
(:func:`detect_period`). The module is pure numpy, plus scipy.stats for the
distortion test.

References
----------
.. [1] R. Pintelon and J. Schoukens, *System Identification: A Frequency Domain
   Approach*, 2nd ed., Wiley-IEEE Press, 2012 (measuring frequency response
   functions with periodic excitations: averaging, sample (co)variances,
   nonlinear distortions detected at unexcited lines).
.. [2] J. Schoukens, R. Pintelon and Y. Rolain, *Mastering System
   Identification in 100 Exercises*, Wiley-IEEE Press, 2012 (noise and
   distortion levels from periodic measurements).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._validate import as_signal, int_in_range, names_tuple, positive_float
from ..errors import IdentificationError, OptionError
from ..lti.analysis import frequency_response
from ..lti.models import StateSpaceModel

__all__ = [
    "PERIOD_MATCH",
    "EXCITED_LEVEL_DB",
    "DISTORTION_CONFIDENCE",
    "INPUT_SCATTER_NOTE",
    "DistortionLevel",
    "PeriodicAnalysis",
    "LineComparison",
    "detect_period",
    "analyse_periodic",
    "compare_with_model",
]

#: A lag is a period when the input's normalised autocorrelation there is at least this.
PERIOD_MATCH = 0.9
#: A line counts as excited by an input when its amplitude is within this many dB of
#: the input's strongest line (and 20 dB above the input's own noise on the average).
EXCITED_LEVEL_DB = -30.0
#: Confidence level of the test "the unexcited lines hold more than noise".
DISTORTION_CONFIDENCE = 0.99
#: A note is added when an input's period-to-period variance exceeds this share of its variance.
INPUT_SCATTER_NOTE = 0.01
#: Frequency responses at lines whose block equations are worse conditioned are not given.
_MAX_CONDITION = 1e8


@dataclass(frozen=True, slots=True, eq=False)
class DistortionLevel:
    """Nonlinear distortion of one output seen at the lines no input excites.

    Levels are in dB relative to the mean power per excited line of the
    averaged output spectrum; ``None`` where there are no such lines, or the
    lines hold no more than the noise.

    Attributes
    ----------
    output : str
        Output name.
    odd_lines, even_lines : int
        Unexcited odd and even lines in the band (odd lines show odd
        nonlinearities such as saturation, even lines even ones such as a
        quadratic term, when the excitation uses odd harmonics only).
    odd_db, even_db : float or None
        Distortion power per line (measured power less the noise floor).
    noise_db : float
        Noise floor of the averaged spectrum per line at these lines.
    odd_detected, even_detected : bool
        The lines hold more than noise at :data:`DISTORTION_CONFIDENCE` (an F
        test of their power against the noise variance from the periods).
    """

    output: str
    odd_lines: int
    even_lines: int
    odd_db: float | None
    even_db: float | None
    noise_db: float | None
    odd_detected: bool
    even_detected: bool


def _frozen(x: Any, dtype: Any = float) -> np.ndarray:
    arr = np.array(x, dtype=dtype)
    arr.flags.writeable = False
    return arr


@dataclass(frozen=True, slots=True, eq=False)
class PeriodicAnalysis:
    """What the periods of a periodic log say: averages, noise, frequency response.

    Attributes
    ----------
    sample_time : float
        Sample time, s.
    period_samples : int
        Samples per period ``N``.
    period_source : {"given", "detected"}
        Where the period came from.
    start : int
        First sample used (the start of block 0).
    blocks : int
        Blocks of periods (more than one for an orthogonal multi-input design).
    periods : int
        Periods per block in the record, transient ones included.
    transient_periods : int
        Leading periods of each block left out.
    unused_samples : int
        Samples after the last whole block (not used).
    inputs, outputs : tuple of str
        Signal names.
    u_average : numpy.ndarray, shape (blocks, N, m)
        Average period of the inputs, per block.
    y_average : numpy.ndarray, shape (blocks, N, p)
        Average period of the outputs, per block.
    input_noise_variance : numpy.ndarray, shape (m,), or None
        Variance of the input samples about the average period (``None`` with
        fewer than two measured periods).
    output_noise_variance : numpy.ndarray, shape (p,), or None
        The same for the outputs: the noise variance of each output.
    lines : numpy.ndarray of int, shape (L,)
        Lines excited by at least one input.
    excited : numpy.ndarray of bool, shape (L, m)
        Which inputs excite each line.
    u_spectrum : numpy.ndarray, complex, shape (blocks, L, m)
        Averaged input spectrum at the lines, per block.
    y_spectrum : numpy.ndarray, complex, shape (blocks, L, p)
        Averaged output spectrum at the lines, per block.
    frf : numpy.ndarray, complex, shape (L, p, m)
        Frequency response at the lines; ``nan`` where the line does not
        determine it (input not excited there, or more inputs than blocks).
    frf_std : numpy.ndarray, shape (L, p, m)
        Standard deviation of ``frf`` (of the complex value; ``nan`` when
        unknown or with fewer than two measured periods).
    output_amplitude : numpy.ndarray, shape (L, p)
        RMS over the blocks of the averaged output amplitude at the lines.
    noise_floor : numpy.ndarray, shape (L, p)
        Standard deviation of the averaged output spectrum at the lines (``nan``
        with fewer than two measured periods).
    band_lines : numpy.ndarray of int, shape (Lb,)
        Every line from the lowest to the highest excited one.
    band_output_amplitude, band_noise_floor : numpy.ndarray, shape (Lb, p)
        Output amplitude and noise floor at every band line.
    distortion : tuple of DistortionLevel or None
        One per output, from the unexcited band lines; ``None`` without such
        lines or with fewer than two measured periods.
    notes : tuple of str
        What was assumed or could not be done.
    """

    sample_time: float
    period_samples: int
    period_source: str
    start: int
    blocks: int
    periods: int
    transient_periods: int
    unused_samples: int
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    u_average: np.ndarray
    y_average: np.ndarray
    input_noise_variance: np.ndarray | None
    output_noise_variance: np.ndarray | None
    lines: np.ndarray
    excited: np.ndarray
    u_spectrum: np.ndarray
    y_spectrum: np.ndarray
    frf: np.ndarray
    frf_std: np.ndarray
    output_amplitude: np.ndarray
    noise_floor: np.ndarray
    band_lines: np.ndarray
    band_output_amplitude: np.ndarray
    band_noise_floor: np.ndarray
    distortion: tuple[DistortionLevel, ...] | None
    notes: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        for name, dtype in (("u_average", float), ("y_average", float), ("lines", np.int64),
                            ("excited", bool), ("u_spectrum", complex), ("y_spectrum", complex),
                            ("frf", complex), ("frf_std", float), ("output_amplitude", float),
                            ("noise_floor", float), ("band_lines", np.int64),
                            ("band_output_amplitude", float), ("band_noise_floor", float),
                            ("input_noise_variance", float), ("output_noise_variance", float)):
            value = getattr(self, name)
            if value is not None:
                object.__setattr__(self, name, _frozen(value, dtype))

    @property
    def measured_periods(self) -> int:
        """Periods per block after the transient (the number averaged)."""
        return self.periods - self.transient_periods

    @property
    def resolution_hz(self) -> float:
        """Line spacing ``1 / (N T)``, Hz."""
        return 1.0 / (self.period_samples * self.sample_time)

    @property
    def frequencies_hz(self) -> np.ndarray:
        """Frequencies of :attr:`lines`, Hz."""
        return self.lines * self.resolution_hz

    @property
    def band_frequencies_hz(self) -> np.ndarray:
        """Frequencies of :attr:`band_lines`, Hz."""
        return self.band_lines * self.resolution_hz

    @property
    def average_noise_variance(self) -> np.ndarray | None:
        """Noise variance left on the averaged outputs: ``output_noise_variance / measured_periods``."""
        if self.output_noise_variance is None:
            return None
        return self.output_noise_variance / self.measured_periods


def _autocorrelation(x: np.ndarray, max_lag: int) -> np.ndarray:
    """Autocorrelation summed over the columns, normalised by the energy of the overlapping parts."""
    n = x.shape[0]
    size = 1 << (2 * n - 1).bit_length()
    spectrum = np.fft.rfft(x, n=size, axis=0)
    corr = np.fft.irfft(np.abs(spectrum) ** 2, n=size, axis=0)[: max_lag + 1].sum(axis=1)
    energy = np.concatenate([[0.0], np.cumsum((x * x).sum(axis=1))])
    lags = np.arange(max_lag + 1)
    head = energy[n - lags]  # samples 0 .. n-lag-1
    tail = energy[n] - energy[lags]  # samples lag .. n-1
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(head * tail > 0, corr / np.sqrt(head * tail), 0.0)


def detect_period(u: Any, *, min_periods: int = 2) -> int:
    """Detect the period of a periodic input, in samples.

    Parameters
    ----------
    u : array_like, shape (N,) or (N, m)
        Input samples; all inputs must share the period.
    min_periods : int
        The record must hold at least this many periods (default 2).

    Returns
    -------
    int
        The smallest lag at which the inputs repeat.

    Raises
    ------
    IdentificationError
        The input is constant, or no lag up to ``N / min_periods`` has a
        normalised autocorrelation of at least :data:`PERIOD_MATCH`.

    Notes
    -----
    The normalised autocorrelation ``r(L) = sum_t x_t x_{t+L} / sqrt(sum x_t^2
    sum x_{t+L}^2)`` over the overlapping samples (mean removed, summed over
    the inputs) is 1 at every multiple of the period of a noise-free periodic
    signal. Lags before ``r`` first falls below one half are skipped (a slow
    signal resembles itself at small lags); the period is the best lag of the
    first stretch that comes within 0.01 of the highest value.
    """
    x = as_signal(u, "u", ndim=2, bounded=True)
    periods = int_in_range(min_periods, "min_periods", 2)
    x = x - x.mean(axis=0)
    n = x.shape[0]
    max_lag = n // periods
    if not np.any(x) or max_lag < 2:
        raise IdentificationError("the input is constant or too short to detect a period")
    r = _autocorrelation(x, max_lag)
    below = np.flatnonzero(r[1:] < 0.5)
    if below.size == 0:
        raise IdentificationError(
            f"no period found: the input does not decorrelate within {max_lag} samples",
            hint="give the period explicitly",
        )
    first = int(below[0]) + 1
    best = float(r[first:].max())
    if best < PERIOD_MATCH:
        raise IdentificationError(
            f"the input is not periodic: its normalised autocorrelation stays below {PERIOD_MATCH} for "
            f"lags up to {max_lag} samples (at most {best:.3f})",
            hint=f"the log must hold at least {periods} periods; give the period explicitly if it does",
        )
    near = np.flatnonzero(r[first:] >= best - 0.01) + first
    stretch_end = near[0]
    while stretch_end + 1 <= max_lag and r[stretch_end + 1] >= best - 0.01:
        stretch_end += 1
    return int(near[0] + np.argmax(r[near[0]:stretch_end + 1]))


def analyse_periodic(
    u: Any,
    y: Any,
    sample_time: float,
    *,
    period: int | None = None,
    transient_periods: int = 1,
    blocks: int = 1,
    periods_per_block: int | None = None,
    start: int = 0,
    excited_lines: Any = None,
    input_names: Any = None,
    output_names: Any = None,
) -> PeriodicAnalysis:
    """Average a periodic log over its periods and measure noise, frequency response and distortion.

    Parameters
    ----------
    u : array_like, shape (N_total, m)
        Input samples (a 1-D array is one input).
    y : array_like, shape (N_total, p)
        Output samples.
    sample_time : float
        Sample time, s.
    period : int, optional
        Samples per period; detected from ``u`` when omitted (:func:`detect_period`).
    transient_periods : int
        Leading periods of each block to leave out (default 1).
    blocks : int
        Blocks of periods in the record (an orthogonal design's block count,
        which must be given: the inputs change sign between blocks; default 1).
    periods_per_block : int, optional
        Periods in each block; default: as many whole periods as fit.
    start : int
        First sample of block 0 (default 0).
    excited_lines : array_like of int, or sequence of them, optional
        Lines each input excites (one array for all inputs, or one per
        input), e.g. from the signal's description; default: detected from
        the averaged input spectrum (lines within :data:`EXCITED_LEVEL_DB` of
        the strongest).
    input_names, output_names : sequence of str, optional
        Signal names (default ``u1 ...``, ``y1 ...``).

    Returns
    -------
    PeriodicAnalysis

    Raises
    ------
    IdentificationError
        No period found, or fewer periods than the transient plus one.
    OptionError
        Bad arguments (shapes, a period of fewer than 4 samples).

    Notes
    -----
    With ``x_p`` the ``P`` measured periods of a block and ``x_bar`` their
    average, the noise variance is ``sum_p sum_t (x_p(t) - x_bar(t))^2 /
    (N (P - 1))`` pooled over the blocks, and the average carries ``1 / P`` of
    it [1]_. At line ``k`` with per-period spectra ``U_p, Y_p``, the residual
    ``E_p = Y_p - G U_p`` has sample variance ``s^2`` over the periods; the
    estimate from the block averages has covariance ``s^2 / P (sum_b U_b
    U_b^H)^-1``, whose diagonal gives ``frf_std`` (input noise included to
    first order).
    """
    data = _Inputs.check(u, y, sample_time, period, transient_periods, blocks, periods_per_block, start,
                         input_names, output_names)
    layout = _layout(data)
    u_periods = data.u[layout.first:layout.last].reshape(data.blocks, layout.periods, data.period, -1)
    y_periods = data.y[layout.first:layout.last].reshape(data.blocks, layout.periods, data.period, -1)
    u_periods = u_periods[:, data.transient:]
    y_periods = y_periods[:, data.transient:]
    measured = layout.periods - data.transient
    u_var = _pooled_variance(u_periods) if measured > 1 else None
    y_var = _pooled_variance(y_periods) if measured > 1 else None
    spectra = _Spectra.of(u_periods, y_periods)
    notes = list(layout.notes)
    if u_var is not None:
        notes.extend(_input_scatter(u_var, u_periods.mean(axis=1), data.inputs))
    excited = _excited(spectra, excited_lines, data.m, notes)
    lines = np.flatnonzero(excited.any(axis=1))
    if lines.size == 0:
        raise IdentificationError("no input excites any line below the Nyquist frequency")
    frf, frf_std = _frf(spectra, lines, excited[lines], notes)
    floor_all = spectra.noise_floor()
    amplitude_all = np.sqrt(np.mean(np.abs(spectra.y_mean) ** 2, axis=0))
    band = np.arange(lines[0], lines[-1] + 1)
    distortion = _distortion(spectra, band, excited, data.outputs, notes) if measured > 1 else None
    return PeriodicAnalysis(
        sample_time=data.sample_time, period_samples=data.period, period_source=data.source,
        start=data.start, blocks=data.blocks, periods=layout.periods, transient_periods=data.transient,
        unused_samples=layout.unused, inputs=data.inputs, outputs=data.outputs,
        u_average=u_periods.mean(axis=1), y_average=y_periods.mean(axis=1),
        input_noise_variance=u_var, output_noise_variance=y_var, lines=lines, excited=excited[lines],
        u_spectrum=spectra.u_mean[:, lines], y_spectrum=spectra.y_mean[:, lines], frf=frf, frf_std=frf_std,
        output_amplitude=amplitude_all[lines], noise_floor=floor_all[lines], band_lines=band,
        band_output_amplitude=amplitude_all[band], band_noise_floor=floor_all[band],
        distortion=distortion, notes=tuple(notes),
    )


@dataclass
class _Inputs:
    u: np.ndarray
    y: np.ndarray
    sample_time: float
    period: int
    source: str
    transient: int
    blocks: int
    periods_per_block: int | None
    start: int
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]

    @property
    def m(self) -> int:
        return self.u.shape[1]

    @classmethod
    def check(cls, u, y, sample_time, period, transient, blocks, periods_per_block, start,
              input_names, output_names) -> _Inputs:
        uu = as_signal(u, "u", ndim=2, bounded=True)
        yy = as_signal(y, "y", ndim=2, bounded=True)
        if uu.shape[0] != yy.shape[0]:
            raise OptionError(f"u and y must have the same number of samples; got {uu.shape[0]} and {yy.shape[0]}")
        t = positive_float(sample_time, "sample_time")
        first = int_in_range(start, "start", 0, max(0, uu.shape[0] - 1))
        source = "given"
        if period is None:
            period, source = detect_period(uu[first:]), "detected"
        return cls(
            u=uu, y=yy, sample_time=t, period=int_in_range(period, "period", 4, uu.shape[0]), source=source,
            transient=int_in_range(transient, "transient_periods", 0, 10_000),
            blocks=int_in_range(blocks, "blocks", 1, 64),
            periods_per_block=None if periods_per_block is None
            else int_in_range(periods_per_block, "periods_per_block", 1),
            start=first, inputs=names_tuple(input_names, "input_names", uu.shape[1], "u"),
            outputs=names_tuple(output_names, "output_names", yy.shape[1], "y"),
        )


@dataclass
class _Layout:
    periods: int
    first: int
    last: int
    unused: int
    notes: list[str]


def _layout(data: _Inputs) -> _Layout:
    available = data.u.shape[0] - data.start
    block_room = available // (data.period * data.blocks)
    periods = data.periods_per_block if data.periods_per_block is not None else block_room
    if periods > block_room:
        raise IdentificationError(
            f"the record holds {available} samples from sample {data.start}; {data.blocks} block(s) of "
            f"{periods} periods of {data.period} samples need {data.blocks * periods * data.period}"
        )
    if periods <= data.transient:
        raise IdentificationError(
            f"the record holds {periods} period(s) of {data.period} samples per block; more than the "
            f"{data.transient} transient period(s) are needed",
            hint="record a longer test, or leave out fewer transient periods",
        )
    last = data.start + data.blocks * periods * data.period
    notes = []
    unused = data.u.shape[0] - last
    if unused:
        notes.append(f"{unused} samples after the last whole period are not used")
    if periods - data.transient < 2:
        notes.append("one measured period: no noise estimate, no standard deviations, no distortion level")
    return _Layout(periods=periods, first=data.start, last=last, unused=unused, notes=notes)


def _input_scatter(u_var: np.ndarray, u_average: np.ndarray, names: tuple[str, ...]) -> list[str]:
    """Warn when an input is far from periodic: a wrong period, or blocks not given."""
    power = np.mean(u_average.var(axis=1), axis=0)
    notes = []
    for name, scatter, level in zip(names, u_var, power, strict=True):
        if level > 0 and scatter > INPUT_SCATTER_NOTE * level:
            notes.append(
                f"input {name} changes from period to period by {100 * scatter / level:.0f} % of its "
                "variance: check the period (and give the blocks of an orthogonal design)"
            )
    return notes


def _pooled_variance(periods: np.ndarray) -> np.ndarray:
    """Variance about the block averages, pooled over blocks and samples, per signal (ddof per sample)."""
    dev = periods - periods.mean(axis=1, keepdims=True)
    blocks, count, n, _ = periods.shape
    return np.einsum("bpti,bpti->i", dev, dev) / (blocks * n * (count - 1))


@dataclass
class _Spectra:
    """Per-period spectra (blocks, periods, lines, signals) scaled to amplitudes, their means and variances."""

    n: int
    u: np.ndarray
    y: np.ndarray
    u_mean: np.ndarray
    y_mean: np.ndarray
    y_var: np.ndarray | None
    u_var: np.ndarray | None

    @classmethod
    def of(cls, u_periods: np.ndarray, y_periods: np.ndarray) -> _Spectra:
        n = u_periods.shape[2]
        u = np.fft.rfft(u_periods, axis=2) * (2.0 / n)
        y = np.fft.rfft(y_periods, axis=2) * (2.0 / n)
        count = u.shape[1]
        u_mean, y_mean = u.mean(axis=1), y.mean(axis=1)
        y_var = u_var = None
        if count > 1:
            y_var = np.sum(np.abs(y - y_mean[:, None]) ** 2, axis=1) / (count - 1)
            u_var = np.sum(np.abs(u - u_mean[:, None]) ** 2, axis=1) / (count - 1)
        return cls(n=n, u=u, y=y, u_mean=u_mean, y_mean=y_mean, y_var=y_var, u_var=u_var)

    @property
    def measured(self) -> int:
        return self.u.shape[1]

    def noise_floor(self) -> np.ndarray:
        """Std of the averaged output spectrum per line, RMS over the blocks; nan without a variance."""
        if self.y_var is None:
            return np.full(self.y_mean.shape[1:], np.nan)
        return np.sqrt(self.y_var.mean(axis=0) / self.measured)


def _line_sets(excited_lines: Any, m: int, n_lines: int) -> list[np.ndarray]:
    if isinstance(excited_lines, np.ndarray) and excited_lines.ndim == 1:
        sets = [excited_lines] * m
    else:
        items = list(excited_lines)
        if items and np.ndim(items[0]) == 0:
            sets = [np.asarray(items)] * m
        else:
            sets = [np.asarray(k) for k in items]
    if len(sets) != m:
        raise OptionError(f"excited_lines must hold one array for all inputs or one per input ({m}); got {len(sets)}")
    for k in sets:
        if k.size and (not np.issubdtype(k.dtype, np.integer) or k.min() < 1 or k.max() >= n_lines):
            raise OptionError(f"excited_lines must be integers in [1, {n_lines - 1}] (below the Nyquist line)")
    return sets


def _excited(spectra: _Spectra, excited_lines: Any, m: int, notes: list[str]) -> np.ndarray:
    """Boolean (lines, inputs): which input excites which line (DC and the Nyquist line never)."""
    n_lines = spectra.u_mean.shape[1]
    usable = np.zeros(n_lines, dtype=bool)
    usable[1:] = True
    if spectra.n % 2 == 0:
        usable[-1] = False  # the Nyquist line of an even period carries no phase
    if excited_lines is not None:
        out = np.zeros((n_lines, m), dtype=bool)
        for j, k in enumerate(_line_sets(excited_lines, m, n_lines)):
            out[k, j] = True
        return out & usable[:, None]
    amplitude = np.sqrt(np.mean(np.abs(spectra.u_mean) ** 2, axis=0))  # (lines, m)
    strongest = amplitude[usable].max(axis=0)
    out = usable[:, None] & (amplitude >= strongest * 10 ** (EXCITED_LEVEL_DB / 20)) & (strongest > 0)
    if spectra.u_var is not None:
        noise = np.sqrt(spectra.u_var.mean(axis=0) / spectra.measured)
        out &= amplitude >= 10 * noise
    notes.append(f"excited lines detected from the input spectrum (within {-EXCITED_LEVEL_DB:g} dB of the "
                 "strongest line of each input)")
    return out


def _frf(spectra: _Spectra, lines: np.ndarray, excited: np.ndarray, notes: list[str]):
    """Frequency response and its standard deviation at the lines, solved per pattern of excited inputs."""
    p, m = spectra.y_mean.shape[2], spectra.u_mean.shape[2]
    frf = np.full((lines.size, p, m), np.nan + 0j)
    std = np.full((lines.size, p, m), np.nan)
    blocks = spectra.u_mean.shape[0]
    unresolved = 0
    patterns, index = np.unique(excited, axis=0, return_inverse=True)
    for row, pattern in enumerate(patterns):
        at = np.flatnonzero(index.ravel() == row)
        cols = np.flatnonzero(pattern)
        if cols.size > blocks:
            unresolved += at.size
            continue
        g, s, ok = _solve_lines(spectra, lines[at], cols)
        unresolved += int(np.count_nonzero(~ok))
        frf[np.ix_(at[ok], np.arange(p), cols)] = g[ok]
        std[np.ix_(at[ok], np.arange(p), cols)] = s[ok]
    if unresolved:
        notes.append(
            f"at {unresolved} line(s) more inputs are excited than the blocks can separate: the frequency "
            "response there is not given (use the orthogonal or interleaved arrangement)"
        )
    return frf, std


def _solve_lines(spectra: _Spectra, lines: np.ndarray, cols: np.ndarray):
    """Least squares over the blocks at each line: G (L, p, J), its std and which lines are well posed."""
    u = np.moveaxis(spectra.u_mean[:, lines][:, :, cols], 0, -1)  # (L, J, B)
    y = np.moveaxis(spectra.y_mean[:, lines], 0, -1)  # (L, p, B)
    gram = u @ np.conj(np.swapaxes(u, 1, 2))  # (L, J, J)
    cond = np.linalg.cond(gram)
    ok = np.isfinite(cond) & (cond < _MAX_CONDITION)
    safe = np.where(ok[:, None, None], gram, np.eye(cols.size))
    inverse = np.linalg.inv(safe)
    g = (y @ np.conj(np.swapaxes(u, 1, 2))) @ inverse  # (L, p, J)
    std = np.full(g.shape, np.nan)
    if spectra.measured > 1:
        per_u = spectra.u[:, :, lines][..., cols]  # (B, P, L, J)
        per_y = spectra.y[:, :, lines]  # (B, P, L, p)
        resid = per_y - np.einsum("lpj,bqlj->bqlp", g, per_u)
        resid = resid - resid.mean(axis=1, keepdims=True)
        count = spectra.measured
        s2 = np.sum(np.abs(resid) ** 2, axis=(0, 1)) / (resid.shape[0] * (count - 1))  # (L, p)
        diag = np.real(np.diagonal(inverse, axis1=1, axis2=2))  # (L, J)
        std = np.sqrt(s2[:, :, None] / count * diag[:, None, :])
    return g, std, ok


def _distortion(spectra: _Spectra, band: np.ndarray, excited: np.ndarray, outputs: tuple[str, ...],
                notes: list[str]) -> tuple[DistortionLevel, ...] | None:
    free = band[~excited[band].any(axis=1)]
    if free.size == 0:
        notes.append("every line of the band is excited: no nonlinear-distortion level (use odd or "
                     "odd-random harmonics)")
        return None
    from scipy.stats import f as f_dist

    power = np.mean(np.abs(spectra.y_mean) ** 2, axis=0)  # (lines, p)
    noise = spectra.y_var.mean(axis=0) / spectra.measured  # variance of the averaged spectrum
    lines_exc = band[excited[band].any(axis=1)]
    reference = power[lines_exc].mean(axis=0)
    blocks, count = spectra.u.shape[0], spectra.measured
    out = []
    for i, name in enumerate(outputs):
        levels: dict[str, Any] = {}
        for label, subset in (("odd", free[free % 2 == 1]), ("even", free[free % 2 == 0])):
            levels[f"{label}_lines"] = int(subset.size)
            levels[f"{label}_db"], levels[f"{label}_detected"] = None, False
            if subset.size == 0:
                continue
            measured_power, noise_power = power[subset, i].sum(), noise[subset, i].sum()
            dof = 2 * subset.size * blocks
            critical = f_dist.ppf(DISTORTION_CONFIDENCE, dof, dof * (count - 1))
            levels[f"{label}_detected"] = bool(noise_power > 0 and measured_power / noise_power > critical)
            excess = (measured_power - noise_power) / subset.size
            if excess > 0 and reference[i] > 0:
                levels[f"{label}_db"] = 10 * math.log10(excess / reference[i])
        floor = noise[free, i].mean()
        noise_db = 10 * math.log10(floor / reference[i]) if floor > 0 and reference[i] > 0 else None
        out.append(DistortionLevel(output=name, noise_db=noise_db, **levels))
    return tuple(out)


@dataclass(frozen=True, slots=True, eq=False)
class LineComparison:
    """A model against the periodic measurement, at the excited lines.

    Attributes
    ----------
    frequencies_hz : numpy.ndarray, shape (L,)
    model_frf : numpy.ndarray, complex, shape (L, p, m)
        The model's frequency response at the lines.
    frf_difference : numpy.ndarray, shape (L, p, m)
        ``|G_model - G_measured|`` (``nan`` where the measurement gives none).
    frf_z : numpy.ndarray, shape (L, p, m)
        ``frf_difference / frf_std``: about 1 or less where the model is within
        the measurement's noise.
    output_error : numpy.ndarray, shape (L, p)
        RMS over the blocks of ``|Y_bar(k) - G_model(k) U_bar(k)|``, the model's
        output error at each line (amplitude units).
    noise_floor : numpy.ndarray, shape (L, p)
        The measured noise floor at the same lines (as in :class:`PeriodicAnalysis`).
    error_to_noise_db : numpy.ndarray, shape (p,)
        ``10 log10(sum output_error^2 / sum noise_floor^2)`` per output: near 0 dB
        when the model explains the data down to the noise.
    """

    frequencies_hz: np.ndarray
    model_frf: np.ndarray
    frf_difference: np.ndarray
    frf_z: np.ndarray
    output_error: np.ndarray
    noise_floor: np.ndarray
    error_to_noise_db: np.ndarray

    def __post_init__(self) -> None:
        for name in ("frequencies_hz", "model_frf", "frf_difference", "frf_z", "output_error",
                     "noise_floor", "error_to_noise_db"):
            object.__setattr__(self, name, _frozen(getattr(self, name),
                                                   complex if name == "model_frf" else float))


def compare_with_model(analysis: PeriodicAnalysis, model: StateSpaceModel) -> LineComparison:
    """Compare a model with a periodic measurement at the excited lines.

    Parameters
    ----------
    analysis : PeriodicAnalysis
    model : StateSpaceModel
        Same inputs and outputs, in the same order; discrete at the same
        sample time, or continuous.

    Returns
    -------
    LineComparison

    Raises
    ------
    OptionError
        The model's size or sample time does not match the analysis.
    """
    if not isinstance(analysis, PeriodicAnalysis):
        raise OptionError(f"analysis must be PeriodicAnalysis; got {type(analysis).__name__}")
    m, p = len(analysis.inputs), len(analysis.outputs)
    if (model.n_inputs, model.n_outputs) != (m, p):
        raise OptionError(f"the model has {model.n_inputs} input(s) and {model.n_outputs} output(s); "
                          f"the measurement {m} and {p}")
    if model.is_discrete and not math.isclose(model.sample_time, analysis.sample_time, rel_tol=1e-9):
        raise OptionError(f"the model's sample time {model.sample_time:g} s differs from the log's "
                          f"{analysis.sample_time:g} s")
    g = frequency_response(model, analysis.frequencies_hz)
    difference = np.abs(g - analysis.frf)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = difference / analysis.frf_std
    predicted = np.einsum("lpm,blm->blp", g, analysis.u_spectrum)
    error = np.sqrt(np.mean(np.abs(analysis.y_spectrum - predicted) ** 2, axis=0))
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = 10 * np.log10(np.sum(error**2, axis=0) / np.sum(analysis.noise_floor**2, axis=0))
    return LineComparison(frequencies_hz=analysis.frequencies_hz, model_frf=g, frf_difference=difference,
                          frf_z=z, output_error=error, noise_floor=analysis.noise_floor,
                          error_to_noise_db=ratio)
