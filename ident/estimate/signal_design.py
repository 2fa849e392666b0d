"""Test signals designed before the test: families, limits, several inputs, duration advice.

:func:`design_signal` turns what the engineer knows (sample rate of the rig
controller, band of interest, amplitude range, optional rate limit, number of
inputs, periods or duration) into a periodic test signal ready to replay:

* ``"prbs"``: a maximum-length binary sequence (``scipy.signal.max_len_seq``)
  held for ``clock_divider`` samples per bit, so that its power stays within
  3 dB of the low-frequency level up to the top of the band [1]_;
* ``"binary"``: a random binary signal, the sign of a periodic random-phase
  noise confined to the band (its switching follows the band; the sign spreads
  some power outside it) [2]_;
* ``"noise"``: band-limited random-phase noise, a flat amplitude spectrum on
  every line of the band with independent uniform phases (a periodic noise) [3]_;
* ``"multisine"``: chosen lines (:func:`ident.estimate.multisine.frequency_lines`:
  linear or logarithmic grid; all, odd or odd-random harmonics) with Schroeder
  phases or a lower crest factor found from them
  (:mod:`ident.estimate.multisine`);
* ``"chirp"``: one linear or logarithmic sweep through the band per period
  (``scipy.signal.chirp``), its end frequency nudged so that each period holds
  a whole number of cycles.

Every signal is periodic: a period of ``N`` samples (``N`` from the band's
low edge, so its lines fall every ``sample_rate / N`` Hz) is repeated
``periods`` times, the first ``transient_periods`` of them meant to be
discarded while the plant settles. Several inputs are made distinguishable in
one test by an *arrangement*: ``"orthogonal"`` (blocks of periods in which
each input's signal is multiplied by the signs of a Hadamard matrix, so the
frequency response matrix follows from the blocks at every line [4]_),
``"interleaved"`` (multisines: each input on its own share of the lines),
``"shifted"`` (the same signal circularly shifted by ``N / m`` samples per
input, the classic shifted PRBS) or ``"independent"`` (independent random
realisations).

The signal is centred on the middle of the amplitude range and scaled so its
peak reaches the range; an optional rate limit (units per second) is applied
as a slew limiter on the periodic steady state, its distortion is measured and
a limit that removes more than half of the in-band power is refused. Written
samples never leave the range or exceed the rate limit.

References
----------
.. [1] K. Godfrey (ed.), *Perturbation Signals for System Identification*,
   Prentice Hall, 1993 (maximum-length sequences, their spectrum and clock
   rate).
.. [2] T. Söderström and P. Stoica, *System Identification*, Prentice Hall,
   1989, sec. 5.2 (random binary and pseudo-random binary signals).
.. [3] R. Pintelon and J. Schoukens, *System Identification: A Frequency Domain
   Approach*, 2nd ed., Wiley-IEEE Press, 2012 (periodic noise, multisines,
   measurement time and number of periods).
.. [4] T. Dobrowiecki, J. Schoukens and P. Guillaume, "Optimized excitation
   signals for MIMO frequency response function measurements", IEEE Trans.
   Instrum. Meas. 55(6), 2072-2079, 2006 (orthogonal multisines).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .._validate import (
    int_in_range,
    one_of,
    optional_positive_float,
    options_from_mapping,
    positive_float,
    sample_rate_value,
)
from ..choices import ARRANGEMENTS, HARMONICS, PHASES, SIGNAL_KINDS, SPACINGS
from ..errors import IdentificationError, OptionError, SignalDesignWarning
from .multisine import crest_factor, frequency_lines, line_range, low_crest_phases, multisine, schroeder_phases
from .slew import periodic_rate_limit, rate_limit

__all__ = [
    "PRBS_HALF_POWER",
    "BAND_WARNING_FRACTION",
    "MIN_BAND_POWER_KEPT",
    "DEFAULT_ARRANGEMENT",
    "ALLOWED_ARRANGEMENTS",
    "SignalDesignOptions",
    "DurationAdvice",
    "DesignedSignal",
    "design_signal",
    "duration_advice",
    "prbs_period",
    "swept_sine",
]

#: ``sinc(x)^2 = 1/2`` at ``x = 0.4429`` (closed form, solved numerically): a PRBS clocked at
#: ``fc`` keeps its power within 3 dB of the low-frequency level up to ``0.4429 fc``.
PRBS_HALF_POWER = 0.4429
#: Warn when the band reaches beyond this fraction of the sample rate.
BAND_WARNING_FRACTION = 0.4
#: Refuse a rate limit that keeps less than this share of the in-band power (3 dB).
MIN_BAND_POWER_KEPT = 0.5
#: Warn when the rate limit changes the signal by more than this relative RMS.
RATE_DISTORTION_WARNING = 0.01
#: A first-order plant settles to within e^-5 (0.7 %) in five time constants.
SETTLING_TIME_CONSTANTS = 5.0
#: Measured periods advised without a noise level (common practice: the sample variance of
#: four periods has three degrees of freedom per line, enough to pool over the lines).
DEFAULT_MEASURED_PERIODS = 4
#: Relative standard deviation of the frequency response at a line aimed at by the advice.
TARGET_FRF_STD = 0.05
#: Largest signal written (samples per input).
MAX_SAMPLES = 20_000_000
#: Largest number of inputs designed at once.
MAX_INPUTS = 16
#: scipy.signal.max_len_seq has default taps up to 32 bits.
MAX_PRBS_BITS = 32

#: Arrangement used for several inputs when none is asked for.
DEFAULT_ARRANGEMENT: dict[str, str] = {
    "prbs": "shifted", "binary": "independent", "noise": "independent",
    "multisine": "orthogonal", "chirp": "shifted",
}
#: Arrangements each family supports.
ALLOWED_ARRANGEMENTS: dict[str, tuple[str, ...]] = {
    "prbs": ("shifted", "orthogonal"),
    "binary": ("independent", "shifted", "orthogonal"),
    "noise": ("independent", "shifted", "orthogonal"),
    "multisine": ("orthogonal", "interleaved", "shifted"),
    "chirp": ("shifted", "orthogonal"),
}


def _pair(value: Any, name: str) -> tuple[float, float]:
    try:
        low, high = (float(v) for v in value)
    except (TypeError, ValueError) as exc:
        raise OptionError(f"{name} must be two numbers (low, high); got {value!r}") from exc
    if not (math.isfinite(low) and math.isfinite(high)):
        raise OptionError(f"{name} must be finite; got {value!r}")
    return low, high


def _optional_int(value: Any, name: str, low: int, high: int | None = None) -> int | None:
    return None if value is None else int_in_range(value, name, low, high)


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class SignalDesignOptions:
    """What the engineer asks of a test signal.

    Parameters
    ----------
    kind : {"prbs", "binary", "noise", "multisine", "chirp"}
        Signal family (see the module docstring).
    sample_rate_hz : float
        Sample rate of the rig controller that replays the signal, in Hz.
    band_hz : (float, float)
        Lowest and highest frequency of interest, in Hz, ``0 < low < high <=
        sample_rate_hz / 2``. The low edge sets the period (frequency resolution).
    amplitude_range : (float, float)
        Smallest and largest value the input may take (its units).
    n_inputs : int
        Number of inputs designed together (default 1, at most 16).
    periods : int, optional
        Periods per block, transient periods included. Default: from
        ``duration_s``, else from the advice (transient plus four measured).
    transient_periods : int, optional
        Leading periods of each block meant to be discarded (default: from
        ``time_constant_s`` by the advice, else 1).
    duration_s : float, optional
        Length of the test in s; rounded down to whole periods.
    rate_limit : float, optional
        Largest rate of change of the input, units per second.
    seed : int
        Seed of every random choice (default 0); equal options give equal signals.
    spacing : {"linear", "log"}, optional
        Multisine grid or chirp sweep; default ``"linear"``.
    harmonics : {"all", "odd", "odd-random"}, optional
        Multisine only; default ``"all"``.
    lines_per_decade : int, optional
        Multisine with ``spacing="log"`` only; default 20.
    phases : {"low-crest", "schroeder", "random"}, optional
        Multisine only; default ``"low-crest"``.
    arrangement : {"orthogonal", "interleaved", "shifted", "independent"}, optional
        How several inputs differ; default per family (:data:`DEFAULT_ARRANGEMENT`).
    time_constant_s : float, optional
        Rough slowest time constant of the plant, for the advice.
    noise_ratio : float, optional
        Output noise RMS over output signal RMS, if known, for the advice.
    """

    kind: str
    sample_rate_hz: float
    band_hz: tuple[float, float]
    amplitude_range: tuple[float, float]
    n_inputs: int = 1
    periods: int | None = None
    transient_periods: int | None = None
    duration_s: float | None = None
    rate_limit: float | None = None
    seed: int = 0
    spacing: str | None = None
    harmonics: str | None = None
    lines_per_decade: int | None = None
    phases: str | None = None
    arrangement: str | None = None
    time_constant_s: float | None = None
    noise_ratio: float | None = None

    def __post_init__(self) -> None:
        one_of(self.kind, "kind", SIGNAL_KINDS)
        object.__setattr__(self, "sample_rate_hz", sample_rate_value(self.sample_rate_hz, "sample_rate_hz"))
        object.__setattr__(self, "band_hz", _check_band(self.band_hz, self.sample_rate_hz))
        object.__setattr__(self, "amplitude_range", _check_range(self.amplitude_range))
        object.__setattr__(self, "n_inputs", int_in_range(self.n_inputs, "n_inputs", 1, MAX_INPUTS))
        object.__setattr__(self, "periods", _optional_int(self.periods, "periods", 1, 1_000_000))
        object.__setattr__(self, "transient_periods",
                           _optional_int(self.transient_periods, "transient_periods", 0, 1000))
        if self.periods is not None and self.transient_periods is not None \
                and self.periods <= self.transient_periods:
            raise OptionError(
                f"periods ({self.periods}) must exceed transient_periods ({self.transient_periods}): "
                "at least one period must remain to be measured"
            )
        for name in ("duration_s", "rate_limit", "time_constant_s", "noise_ratio"):
            object.__setattr__(self, name, optional_positive_float(getattr(self, name), name))
        object.__setattr__(self, "seed", int_in_range(self.seed, "seed", 0, 2**63 - 1))
        _check_family_options(self)

    @classmethod
    def from_mapping(cls, mapping: Mapping[str, Any], *, key_path: str = "") -> SignalDesignOptions:
        """Build options from a mapping such as a parsed TOML table (unknown keys refused)."""
        return options_from_mapping(cls, mapping, key_path)

    @property
    def resolved_arrangement(self) -> str:
        """The arrangement used: the one asked for, else the family's default."""
        return self.arrangement if self.arrangement is not None else DEFAULT_ARRANGEMENT[self.kind]


def _check_band(band: Any, fs: float) -> tuple[float, float]:
    low, high = _pair(band, "band_hz")
    nyquist = fs / 2
    if low <= 0:
        raise OptionError(
            f"band low edge must be above 0 Hz; got {low:g} Hz",
            hint="the lowest frequency of interest sets the period and the frequency resolution",
        )
    if high <= low:
        raise OptionError(f"band must run from low to high; got {low:g} Hz to {high:g} Hz")
    if high > nyquist:
        raise OptionError(
            f"band top {high:g} Hz is above the Nyquist frequency {nyquist:g} Hz (half the sample "
            f"rate {fs:g} Hz)", hint="lower the band's top or raise the sample rate",
        )
    return low, high


def _check_range(value: Any) -> tuple[float, float]:
    low, high = _pair(value, "amplitude_range")
    if high <= low:
        raise OptionError(f"amplitude_range must run from min to max with min < max; got {low:g} to {high:g}")
    return low, high


def _check_family_options(opts: SignalDesignOptions) -> None:
    for name, allowed, families in (
        ("spacing", SPACINGS, ("multisine", "chirp")),
        ("harmonics", HARMONICS, ("multisine",)),
        ("phases", PHASES, ("multisine",)),
        ("arrangement", ARRANGEMENTS, SIGNAL_KINDS),
    ):
        value = getattr(opts, name)
        if value is None:
            continue
        one_of(value, name, allowed)
        if opts.kind not in families:
            raise OptionError(f"{name} applies only to kind {' or '.join(map(repr, families))}; "
                              f"got kind {opts.kind!r}")
    if opts.lines_per_decade is not None:
        object.__setattr__(opts, "lines_per_decade",
                           int_in_range(opts.lines_per_decade, "lines_per_decade", 1, 1000))
        if opts.kind != "multisine" or opts.spacing != "log":
            raise OptionError("lines_per_decade applies only to a multisine with spacing 'log'")
    if opts.arrangement is not None and opts.arrangement not in ALLOWED_ARRANGEMENTS[opts.kind]:
        raise OptionError(
            f"arrangement {opts.arrangement!r} does not apply to kind {opts.kind!r}; use one of "
            + ", ".join(map(repr, ALLOWED_ARRANGEMENTS[opts.kind]))
        )


@dataclass(frozen=True, slots=True, eq=False)
class DurationAdvice:
    """How long a periodic test should be, from what is known of the plant and the noise.

    Attributes
    ----------
    resolution_hz : float
        Line spacing ``sample_rate / period`` (the frequency resolution).
    period_s : float
        Length of one period.
    lines_in_band : int
        Excited lines (harmonics of the period) in the band.
    transient_periods : int
        Periods to discard at the start of each block: enough for
        ``SETTLING_TIME_CONSTANTS`` time constants, at least 1.
    measured_periods : int
        Periods to measure after the transient: :data:`DEFAULT_MEASURED_PERIODS`,
        or more when the noise level asks for it.
    blocks : int
        Blocks of periods (several for the orthogonal arrangement).
    duration_s : float
        ``blocks * (transient_periods + measured_periods) * period_s``.
    expected_frf_std : float or None
        Relative standard deviation of the frequency response at a line with
        ``measured_periods`` averaged, when ``noise_ratio`` is known.
    notes : tuple of str
        Remarks (the band against the time constant, a long test).
    """

    resolution_hz: float
    period_s: float
    lines_in_band: int
    transient_periods: int
    measured_periods: int
    blocks: int
    duration_s: float
    expected_frf_std: float | None
    notes: tuple[str, ...] = ()


def duration_advice(
    sample_rate_hz: float,
    band_hz: Any,
    *,
    period_samples: int | None = None,
    lines_in_band: int | None = None,
    blocks: int = 1,
    time_constant_s: float | None = None,
    noise_ratio: float | None = None,
) -> DurationAdvice:
    r"""Advise the period, the number of periods and the test length.

    Parameters
    ----------
    sample_rate_hz : float
        Sample rate of the rig controller, Hz.
    band_hz : (float, float)
        Band of interest, Hz.
    period_samples : int, optional
        Samples per period; default ``floor(sample_rate / low edge)`` (lines
        every ``low edge`` Hz or slightly more).
    lines_in_band : int, optional
        Lines that carry the signal; default every line of the band.
    blocks : int
        Blocks of periods (default 1).
    time_constant_s : float, optional
        Rough slowest time constant of the plant, s.
    noise_ratio : float, optional
        Output noise RMS over output signal RMS.

    Returns
    -------
    DurationAdvice

    Notes
    -----
    The transient lasts about ``5 tau`` (a first-order response is then within
    0.7 % of its steady state). With the output power spread evenly over ``K``
    lines and white noise of relative level ``r``, the amplitude spectrum of
    one period of ``N`` samples has a relative noise at a line of
    ``r sqrt(2 K / N)``; averaging ``P`` periods divides its variance by ``P``
    [3]_, so

    .. math:: P = \lceil 2 K r^2 / (N \varepsilon^2) \rceil

    periods give a relative standard deviation ``epsilon`` (``TARGET_FRF_STD``,
    5 %) of the frequency response at each line.
    """
    fs = positive_float(sample_rate_hz, "sample_rate_hz")
    low, high = _check_band(band_hz, fs)
    n = int_in_range(period_samples, "period_samples", 3) if period_samples is not None \
        else _base_period(fs, low)
    k_low, k_high = line_range(n, fs, (low, high))
    lines = int_in_range(lines_in_band, "lines_in_band", 1) if lines_in_band is not None \
        else max(1, k_high - k_low + 1)
    blocks = int_in_range(blocks, "blocks", 1, 64)
    tau = optional_positive_float(time_constant_s, "time_constant_s")
    ratio = optional_positive_float(noise_ratio, "noise_ratio")
    period_s = n / fs
    notes: list[str] = []
    transient = 1 if tau is None else max(1, math.ceil(SETTLING_TIME_CONSTANTS * tau / period_s - 1e-9))
    measured, expected = DEFAULT_MEASURED_PERIODS, None
    if ratio is not None:
        needed = math.ceil(2 * lines * ratio**2 / (n * TARGET_FRF_STD**2) - 1e-9)
        measured = min(max(measured, needed), 1000)
        if needed > 1000:
            notes.append(f"the noise level asks for {needed} measured periods; advice capped at 1000")
        expected = ratio * math.sqrt(2 * lines / (n * measured))
    if tau is not None:
        notes.extend(_band_against_time_constant(low, high, tau))
    duration = blocks * (transient + measured) * period_s
    return DurationAdvice(
        resolution_hz=fs / n, period_s=period_s, lines_in_band=lines, transient_periods=transient,
        measured_periods=measured, blocks=blocks, duration_s=duration, expected_frf_std=expected,
        notes=tuple(notes),
    )


def _base_period(fs: float, low: float) -> int:
    """Return the samples per period that put the first line at the band's low edge or just above it."""
    return max(3, math.floor(fs / low * (1 + 1e-12)))


def _band_against_time_constant(low: float, high: float, tau: float) -> list[str]:
    corner = 1 / (2 * math.pi * tau)
    if low > corner:
        return [f"the band starts at {low:g} Hz, above the corner frequency {corner:.3g} Hz of "
                f"tau = {tau:g} s: the slow response and the static gain are not measured; a low edge "
                f"near {corner / 10:.3g} Hz (a decade below the corner) would cover them"]
    if high < corner:
        return [f"the band ends at {high:g} Hz, below the corner frequency {corner:.3g} Hz of "
                f"tau = {tau:g} s: the plant's roll-off is not measured"]
    return []


@dataclass(frozen=True, slots=True, eq=False)
class DesignedSignal:
    """A designed periodic test signal and its figures.

    Attributes
    ----------
    options : SignalDesignOptions
        What was asked.
    values : numpy.ndarray, shape (n_samples, n_inputs)
        The samples to replay, one column per input (read-only).
    period_samples : int
        Samples per period ``N``.
    periods : int
        Periods per block, transient periods included.
    transient_periods : int
        Leading periods of each block meant to be discarded.
    blocks : int
        Blocks of periods (``> 1`` only for the orthogonal arrangement).
    block_signs : numpy.ndarray, shape (n_inputs, blocks)
        Sign (+1 or -1) of each input's signal in each block, about the middle
        of the range.
    arrangement : str
        The arrangement used.
    lines : tuple of numpy.ndarray
        Per input, the lines ``k`` (harmonics of ``1 / period``, at ``k *
        resolution_hz``) in the band that the design puts power on.
    spacing, harmonics, phases : str or None
        The multisine grid, harmonics and phases (spacing also for a chirp);
        ``None`` where they do not apply.
    clock_divider : int or None
        PRBS samples per bit.
    prbs_bits : int or None
        PRBS register length ``n`` (period ``2^n - 1`` bits).
    sweep_hz : (float, float) or None
        Start and end frequency of a chirp (the end nudged to whole cycles).
    crest_factor : numpy.ndarray, shape (n_inputs,)
        Peak over RMS deviation from the mean, over one measured period.
    rms : numpy.ndarray, shape (n_inputs,)
        RMS deviation from the mean, over one measured period.
    mean : numpy.ndarray, shape (n_inputs,)
        Mean over one measured period.
    peak_rate : numpy.ndarray, shape (n_inputs,)
        Largest ``|x[k+1] - x[k]| * sample_rate`` in the whole signal, units/s.
    rate_distortion : numpy.ndarray or None
        With a rate limit: RMS of the change the limiter made at the lines of
        the band over the RMS of the unlimited signal there, per input (largest
        over blocks).
    band_power_kept : numpy.ndarray or None
        With a rate limit: in-band power of the limited signal over that of the
        unlimited one, per input (smallest over blocks).
    advice : DurationAdvice
        The duration advice for this band and period.
    warnings : tuple of str
        Compromises of the design (also issued as ``SignalDesignWarning``).
    notes : tuple of str
        Remarks.
    """

    options: SignalDesignOptions
    values: np.ndarray
    period_samples: int
    periods: int
    transient_periods: int
    blocks: int
    block_signs: np.ndarray
    arrangement: str
    lines: tuple[np.ndarray, ...]
    spacing: str | None
    harmonics: str | None
    phases: str | None
    clock_divider: int | None
    prbs_bits: int | None
    sweep_hz: tuple[float, float] | None
    crest_factor: np.ndarray
    rms: np.ndarray
    mean: np.ndarray
    peak_rate: np.ndarray
    rate_distortion: np.ndarray | None
    band_power_kept: np.ndarray | None
    advice: DurationAdvice
    warnings: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()

    def __post_init__(self) -> None:
        for name in ("values", "block_signs", "crest_factor", "rms", "mean", "peak_rate",
                     "rate_distortion", "band_power_kept"):
            value = getattr(self, name)
            if value is not None:
                copy = np.array(value, dtype=float)
                copy.flags.writeable = False
                object.__setattr__(self, name, copy)
        lines = []
        for k in self.lines:
            copy = np.array(k, dtype=np.int64)
            copy.flags.writeable = False
            lines.append(copy)
        object.__setattr__(self, "lines", tuple(lines))

    @property
    def sample_rate_hz(self) -> float:
        """Sample rate, Hz."""
        return self.options.sample_rate_hz

    @property
    def sample_time(self) -> float:
        """Sample time, s."""
        return 1.0 / self.options.sample_rate_hz

    @property
    def n_samples(self) -> int:
        """Samples per input."""
        return int(self.values.shape[0])

    @property
    def n_inputs(self) -> int:
        """Number of inputs."""
        return int(self.values.shape[1])

    @property
    def duration_s(self) -> float:
        """Length of the signal, s (``n_samples / sample_rate``)."""
        return self.n_samples / self.options.sample_rate_hz

    @property
    def period_s(self) -> float:
        """Length of one period, s."""
        return self.period_samples / self.options.sample_rate_hz

    @property
    def resolution_hz(self) -> float:
        """Line spacing ``1 / period``, Hz."""
        return self.options.sample_rate_hz / self.period_samples

    @property
    def measured_periods(self) -> int:
        """Periods per block after the transient."""
        return self.periods - self.transient_periods

    @property
    def time(self) -> np.ndarray:
        """Sample instants ``k / sample_rate``, s, shape (n_samples,)."""
        return np.arange(self.n_samples) / self.options.sample_rate_hz

    def frequencies_hz(self, input_index: int = 0) -> np.ndarray:
        """Frequencies of the lines of one input, Hz."""
        return self.lines[input_index] * self.resolution_hz


@dataclass
class _Plan:
    """The layout of a design, filled in step by step."""

    arrangement: str
    blocks: int
    period: int = 0
    periods: int = 0
    transient: int = 0
    clock_divider: int | None = None
    prbs_bits: int | None = None
    advice: DurationAdvice | None = None
    warnings: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)


def design_signal(options: SignalDesignOptions) -> DesignedSignal:
    """Design a periodic test signal.

    Parameters
    ----------
    options : SignalDesignOptions

    Returns
    -------
    DesignedSignal

    Raises
    ------
    OptionError
        A request that cannot be met: a band without lines for the period,
        periods that do not fit the duration, a PRBS longer than 32 bits, a
        rate limit that removes more than half of the in-band power, a signal
        longer than 20 million samples.

    Warns
    -----
    SignalDesignWarning
        The band reaches beyond 0.4 of the sample rate; a PRBS clock too slow
        for the top of the band; a rate limit that changes the signal by more
        than 1 % RMS; fewer than two measured periods.

    Examples
    --------
    >>> sig = design_signal(SignalDesignOptions(kind="multisine", sample_rate_hz=100.0,
    ...                     band_hz=(1.0, 10.0), amplitude_range=(-1.0, 1.0), periods=3))
    >>> sig.period_samples, sig.n_samples, int(sig.lines[0][0]), int(sig.lines[0][-1])
    (100, 300, 1, 10)
    """
    if not isinstance(options, SignalDesignOptions):
        raise OptionError(f"options must be SignalDesignOptions; got {type(options).__name__}")
    rng = np.random.default_rng(options.seed)
    plan = _plan(options)
    base, lines, extras = _period_signals(options, plan, rng)
    low, high = options.amplitude_range
    mid, half = (low + high) / 2, (high - low) / 2
    signs = _block_signs(options.n_inputs, plan)
    periods = [np.clip(mid + half * base * signs[:, b], low, high) for b in range(plan.blocks)]
    distortion = kept = None
    if options.rate_limit is not None:
        periods, distortion, kept = _limit_periods(periods, options, plan)
    values = _assemble(periods, options, plan)
    _check_limits(values, options)
    return _result(options, plan, values, signs, lines, extras, distortion, kept)


def _plan(options: SignalDesignOptions) -> _Plan:
    fs, high = options.sample_rate_hz, options.band_hz[1]
    m = options.n_inputs
    arrangement = options.resolved_arrangement
    blocks = 1 << (m - 1).bit_length() if arrangement == "orthogonal" and m > 1 else 1
    plan = _Plan(arrangement=arrangement, blocks=blocks)
    if options.kind == "prbs":
        plan.clock_divider = max(1, int(PRBS_HALF_POWER * fs / high))
    plan.period = _period_length(options, plan)
    advice = duration_advice(fs, options.band_hz, period_samples=plan.period,
                             lines_in_band=_line_count(options, plan.period), blocks=blocks,
                             time_constant_s=options.time_constant_s, noise_ratio=options.noise_ratio)
    plan.advice = advice
    plan.notes.extend(advice.notes)
    plan.transient = options.transient_periods if options.transient_periods is not None \
        else advice.transient_periods
    plan.periods = _period_count(options, plan)
    total = plan.periods * plan.period * blocks
    if total > MAX_SAMPLES:
        raise OptionError(
            f"the signal would hold {total} samples per input ({total / fs:.6g} s at {fs:g} Hz); "
            f"at most {MAX_SAMPLES} are written",
            hint="raise the band's low edge (shorter periods), or ask for fewer periods or a shorter duration",
        )
    _plan_warnings(options, plan)
    return plan


def _prbs_bits_for(length: float, clock: int) -> int:
    """Smallest register length whose period (bits * clock) is at least ``length`` samples."""
    return max(2, math.ceil(math.log2(length / clock + 1) - 1e-12))


def _period_length(options: SignalDesignOptions, plan: _Plan) -> int:
    fs, low = options.sample_rate_hz, options.band_hz[0]
    if options.kind == "prbs":
        clock = plan.clock_divider
        bits = _prbs_bits_for(fs / low, clock)
        if options.duration_s is not None and options.periods is not None:
            room = options.duration_s * fs / (options.periods * plan.blocks)
            fit = int(math.floor(math.log2(room / clock + 1) + 1e-12))
            if fit < bits:
                raise _no_fit(options, plan, ((1 << bits) - 1) * clock)
            bits = fit
        if bits > MAX_PRBS_BITS:
            raise OptionError(
                f"a PRBS resolving {low:g} Hz at {fs:g} Hz with {clock} samples per bit needs a "
                f"{bits}-bit register; at most {MAX_PRBS_BITS}",
                hint="raise the band's low edge, or use kind 'multisine' or 'noise'",
            )
        plan.prbs_bits = bits
        return ((1 << bits) - 1) * clock
    base = _base_period(fs, low)
    if options.duration_s is not None and options.periods is not None:
        room = int(options.duration_s * fs // (options.periods * plan.blocks))
        if room < base:
            raise _no_fit(options, plan, base)
        return room
    return base


def _no_fit(options: SignalDesignOptions, plan: _Plan, needed: int) -> OptionError:
    fs = options.sample_rate_hz
    blocks = f" in each of {plan.blocks} blocks" if plan.blocks > 1 else ""
    return OptionError(
        f"{options.periods} periods{blocks} do not fit the duration {options.duration_s:g} s: the band's "
        f"low edge {options.band_hz[0]:g} Hz needs periods of at least {needed / fs:.6g} s "
        f"({needed} samples), {needed * options.periods * plan.blocks / fs:.6g} s in all",
        hint="lengthen the duration, ask for fewer periods, or raise the band's low edge",
    )


def _line_count(options: SignalDesignOptions, period: int) -> int:
    fs, band = options.sample_rate_hz, options.band_hz
    if options.kind == "multisine":
        lines = frequency_lines(period, fs, band, spacing=options.spacing or "linear",
                                harmonics=options.harmonics or "all",
                                lines_per_decade=options.lines_per_decade or 20)
        return int(lines.size)
    k_low, k_high = line_range(period, fs, band)
    if k_high < k_low:
        raise OptionError(
            f"the band {band[0]:g}-{band[1]:g} Hz holds no harmonic of the period "
            f"({period} samples, lines every {fs / period:.6g} Hz)", hint="widen the band",
        )
    return k_high - k_low + 1


def _period_count(options: SignalDesignOptions, plan: _Plan) -> int:
    if options.periods is not None:
        if options.periods <= plan.transient:
            raise OptionError(
                f"periods ({options.periods}) must exceed the transient periods ({plan.transient}): "
                "at least one period must remain to be measured"
            )
        return options.periods
    if options.duration_s is None:
        return plan.transient + plan.advice.measured_periods
    fs = options.sample_rate_hz
    count = int(options.duration_s * fs // (plan.period * plan.blocks))
    if count < plan.transient + 1:
        blocks = f" in each of {plan.blocks} blocks" if plan.blocks > 1 else ""
        raise OptionError(
            f"the duration {options.duration_s:g} s holds {count} period(s) of {plan.period / fs:.6g} s"
            f"{blocks} (the band's low edge {options.band_hz[0]:g} Hz sets the period); "
            f"{plan.transient + 1} are needed ({plan.transient} transient + 1 measured)",
            hint="lengthen the duration or raise the band's low edge",
        )
    return count


def _plan_warnings(options: SignalDesignOptions, plan: _Plan) -> None:
    fs, high = options.sample_rate_hz, options.band_hz[1]
    if high > BAND_WARNING_FRACTION * fs:
        plan.warnings.append(
            f"the band reaches {high:g} Hz, beyond {BAND_WARNING_FRACTION:g} of the sample rate "
            f"({BAND_WARNING_FRACTION * fs:g} Hz): the controller's hold and the anti-alias filters "
            "shape the top of the band"
        )
    if options.kind == "prbs":
        x = high * plan.clock_divider / fs
        droop = -10 * math.log10(np.sinc(x) ** 2)
        if droop > 3.0:
            plan.warnings.append(
                f"the PRBS power at the band's top ({high:g} Hz) is {droop:.1f} dB below its "
                "low-frequency level (one bit per sample is the fastest clock)"
            )
    if plan.periods - plan.transient < 2:
        plan.warnings.append(
            f"{plan.periods - plan.transient} measured period: the noise cannot be estimated from the "
            "period-to-period scatter (two or more are needed)"
        )
    if options.kind == "binary":
        plan.notes.append("a binary signal's spectrum follows the band only roughly: switching spreads "
                          "some power above it")
    if options.duration_s is not None:
        used = plan.periods * plan.period * plan.blocks / fs
        if used < options.duration_s * (1 - 1e-9):
            plan.notes.append(f"duration {used:.6g} s: {options.duration_s:g} s rounded down to whole periods")


def _block_signs(m: int, plan: _Plan) -> np.ndarray:
    if plan.blocks == 1:
        return np.ones((m, 1))
    from scipy.linalg import hadamard

    return hadamard(plan.blocks)[:m].astype(float)


def prbs_period(nbits: int, clock_divider: int = 1, *, shift: int = 0) -> np.ndarray:
    """One period of a maximum-length binary sequence as -1/+1, each bit held ``clock_divider`` samples.

    Parameters
    ----------
    nbits : int
        Register length ``n`` in ``[2, 32]``; the period is ``2^n - 1`` bits.
    clock_divider : int
        Samples per bit (default 1).
    shift : int
        Circular shift of the sequence, in bits (default 0).

    Returns
    -------
    numpy.ndarray, shape ((2^n - 1) * clock_divider,)

    Notes
    -----
    The bits are ``scipy.signal.max_len_seq(nbits)`` (register started with all
    ones, scipy's default taps); 1 becomes +1 and 0 becomes -1. Its periodic
    autocorrelation is ``2^n - 1`` at lag 0 and -1 at every other lag [1]_.
    """
    from scipy.signal import max_len_seq

    n = int_in_range(nbits, "nbits", 2, MAX_PRBS_BITS)
    clock = int_in_range(clock_divider, "clock_divider", 1)
    bits = max_len_seq(n)[0].astype(float) * 2 - 1
    return np.repeat(np.roll(bits, int(shift)), clock)


def swept_sine(
    n_samples: int, sample_rate_hz: float, band_hz: Any, spacing: str = "linear"
) -> tuple[np.ndarray, float]:
    """One period of a sine swept through the band, holding a whole number of cycles.

    Parameters
    ----------
    n_samples : int
        Samples per period (the sweep's length).
    sample_rate_hz : float
        Sample rate, Hz.
    band_hz : (float, float)
        Start and (nominal) end frequency of the sweep, Hz.
    spacing : {"linear", "log"}
        Frequency linear or exponential in time (``scipy.signal.chirp`` methods
        ``"linear"`` and ``"logarithmic"``).

    Returns
    -------
    (numpy.ndarray, float)
        The samples, ``sin`` of the sweep phase (0 at the start), and the end
        frequency used: the largest at most the nominal end that makes the phase
        at the end of the period a whole number of cycles, so that repeated
        periods join without a jump (the nominal end if none exists).
    """
    from scipy.signal import chirp

    n = int_in_range(n_samples, "n_samples", 3)
    fs = positive_float(sample_rate_hz, "sample_rate_hz")
    low, high = _pair(band_hz, "band_hz")
    one_of(spacing, "spacing", SPACINGS)
    length = n / fs
    end = _whole_cycle_end(low, high, length, spacing)
    t = np.arange(n) / fs
    method = "linear" if spacing == "linear" else "logarithmic"
    return chirp(t, f0=low, t1=length, f1=end, method=method, phi=-90.0), end


def _sweep_cycles(low: float, end: float, length: float, spacing: str) -> float:
    if spacing == "linear":
        return length * (low + end) / 2
    return length * (end - low) / math.log(end / low)


def _whole_cycle_end(low: float, high: float, length: float, spacing: str) -> float:
    from scipy.optimize import brentq

    target = math.floor(_sweep_cycles(low, high, length, spacing) + 1e-9)
    floor_cycles = length * low  # the limit of the cycle count as the end approaches the start
    if target <= floor_cycles + 1e-9:
        return high
    if spacing == "linear":
        return 2 * target / length - low
    return brentq(lambda f: _sweep_cycles(low, f, length, spacing) - target, low * (1 + 1e-12), high,
                  xtol=1e-14 * high, rtol=1e-15)


def _period_signals(options: SignalDesignOptions, plan: _Plan, rng: np.random.Generator):
    """Unit-peak period of every input (before the block signs), its lines and family extras."""
    n, m, fs, band = plan.period, options.n_inputs, options.sample_rate_hz, options.band_hz
    k_low, k_high = line_range(n, fs, band)
    band_lines = np.arange(k_low, k_high + 1)
    extras: dict[str, Any] = {}
    kind = options.kind
    if kind == "multisine":
        base, lines = _multisine_inputs(options, plan, rng)
    elif kind == "prbs":
        shift_bits = ((1 << plan.prbs_bits) - 1) // m
        start = int(rng.integers(0, (1 << plan.prbs_bits) - 1))
        columns = [prbs_period(plan.prbs_bits, plan.clock_divider, shift=start + j * shift_bits)
                   for j in range(m)] if plan.arrangement == "shifted" else \
            [prbs_period(plan.prbs_bits, plan.clock_divider, shift=start)] * m
        base, lines = np.column_stack(columns), (band_lines,) * m
    elif kind == "chirp":
        sweep, end = swept_sine(n, fs, band, options.spacing or "linear")
        extras["sweep_hz"] = (band[0], float(end))
        base, lines = _shifted_copies(sweep, m, plan), (band_lines,) * m
    else:
        draws = m if plan.arrangement == "independent" else 1
        columns = [_random_phase(n, band_lines, rng) for _ in range(draws)]
        if kind == "binary":
            columns = [np.where(c >= 0, 1.0, -1.0) for c in columns]
        base = np.column_stack(columns) if draws == m else _shifted_copies(columns[0], m, plan)
        lines = (band_lines,) * m
    base = base / np.max(np.abs(base), axis=0)
    return base, lines, extras


def _random_phase(n: int, lines: np.ndarray, rng: np.random.Generator) -> np.ndarray:
    return multisine(n, lines, rng.uniform(0, 2 * np.pi, lines.size))


def _shifted_copies(x: np.ndarray, m: int, plan: _Plan) -> np.ndarray:
    if plan.arrangement != "shifted":
        return np.column_stack([x] * m)
    step = x.size // m
    return np.column_stack([np.roll(x, j * step) for j in range(m)])


def _multisine_inputs(options: SignalDesignOptions, plan: _Plan, rng: np.random.Generator):
    n, m = plan.period, options.n_inputs
    lines = frequency_lines(n, options.sample_rate_hz, options.band_hz, spacing=options.spacing or "linear",
                            harmonics=options.harmonics or "all",
                            lines_per_decade=options.lines_per_decade or 20, rng=rng)
    if plan.arrangement == "interleaved":
        if lines.size < m:
            raise OptionError(
                f"{lines.size} line(s) in the band cannot be shared by {m} inputs",
                hint="widen the band, lengthen the period, or use the orthogonal arrangement",
            )
        shares = [lines[j::m] for j in range(m)]
        return np.column_stack([_phased(n, k, options, rng) for k in shares]), tuple(shares)
    return _shifted_copies(_phased(n, lines, options, rng), m, plan), (lines,) * m


def _phased(n: int, lines: np.ndarray, options: SignalDesignOptions, rng: np.random.Generator) -> np.ndarray:
    choice = options.phases or "low-crest"
    if choice == "random":
        phi = rng.uniform(0, 2 * np.pi, lines.size)
    elif choice == "schroeder":
        phi = schroeder_phases(lines)
    else:
        phi = low_crest_phases(n, lines)
    return multisine(n, lines, phi)


def _safe_step(options: SignalDesignOptions) -> float:
    """Rate limit per sample, less a margin for the rounding of the written values."""
    step = options.rate_limit / options.sample_rate_hz
    scale = max(abs(v) for v in options.amplitude_range)
    safe = step * (1 - 1e-6) - 8 * np.spacing(scale)
    if safe <= 0:
        raise OptionError(f"rate limit {options.rate_limit:g} per s is below the resolution of the values")
    return safe


def _limit_periods(periods: list[np.ndarray], options: SignalDesignOptions, plan: _Plan):
    step = _safe_step(options)
    k_low, k_high = line_range(plan.period, options.sample_rate_hz, options.band_hz)
    mid = sum(options.amplitude_range) / 2
    m = options.n_inputs
    in_band, overall, kept = np.zeros(m), np.zeros(m), np.ones(m)
    limited = []
    for block in periods:
        out = np.column_stack([periodic_rate_limit(block[:, j], step) for j in range(m)])
        before = np.fft.rfft(block, axis=0)[k_low:k_high + 1]
        after = np.fft.rfft(out, axis=0)[k_low:k_high + 1]
        power = np.sum(np.abs(before) ** 2, axis=0)
        in_band = np.maximum(in_band, np.sqrt(np.sum(np.abs(after - before) ** 2, axis=0) / power))
        kept = np.minimum(kept, np.sum(np.abs(after) ** 2, axis=0) / power)
        change = np.sqrt(np.mean((out - block) ** 2, axis=0))
        overall = np.maximum(overall, change / np.sqrt(np.mean((block - mid) ** 2, axis=0)))
        limited.append(out)
    _judge_rate_limit(options, plan, in_band, overall, kept)
    return limited, in_band, kept


def _judge_rate_limit(options: SignalDesignOptions, plan: _Plan, in_band: np.ndarray, overall: np.ndarray,
                      kept: np.ndarray) -> None:
    low, high = options.amplitude_range
    worst = int(np.argmin(kept))
    if kept[worst] < MIN_BAND_POWER_KEPT:
        needed = math.pi * options.band_hz[1] * (high - low)
        raise OptionError(
            f"rate limit {options.rate_limit:g} per s cannot meet the range {low:g} to {high:g}: limiting "
            f"input {worst + 1} keeps only {100 * kept[worst]:.0f} % of its power in the band (a sine at "
            f"the band's top {options.band_hz[1]:g} Hz spanning the range needs {needed:.4g} per s)",
            hint="raise the rate limit, narrow the range, or lower the band's top",
        )
    for j in np.flatnonzero(in_band > RATE_DISTORTION_WARNING):
        plan.warnings.append(
            f"the rate limit changes input {j + 1} by {100 * in_band[j]:.1f} % within the band "
            f"({100 * overall[j]:.1f} % RMS overall; in-band power {10 * math.log10(kept[j]):+.2f} dB)"
        )


def _assemble(periods: list[np.ndarray], options: SignalDesignOptions, plan: _Plan) -> np.ndarray:
    values = np.concatenate([np.tile(block, (plan.periods, 1)) for block in periods], axis=0)
    if options.rate_limit is None or plan.blocks == 1:
        return values
    # block changes: limit the whole record; within a block the periodic state already complies
    step = _safe_step(options)
    out = np.column_stack([rate_limit(values[:, j], step) for j in range(values.shape[1])])
    per_block = plan.periods * plan.period
    for b, block in enumerate(periods):
        first = b * per_block + plan.transient * plan.period
        last = (b + 1) * per_block
        steady = np.tile(block, (plan.periods - plan.transient, 1))
        # the limiter has joined the periodic state when they agree to rounding; then make it exact
        if np.max(np.abs(out[first:last] - steady)) <= 1e-7 * step:
            out[first:last] = steady
        else:
            plan.warnings.append(
                f"after the change to block {b + 1} the rate limit needs more than {plan.transient} "
                "transient period(s): the first measured period differs from the others"
            )
    return out


def _check_limits(values: np.ndarray, options: SignalDesignOptions) -> None:
    low, high = options.amplitude_range
    if np.any(values < low) or np.any(values > high):
        raise IdentificationError("internal check: a designed sample left the amplitude range")
    if options.rate_limit is not None:
        step = np.max(np.abs(np.diff(values, axis=0)), initial=0.0)
        if step > options.rate_limit / options.sample_rate_hz:
            raise IdentificationError("internal check: a designed step exceeds the rate limit")


def _result(options, plan, values, signs, lines, extras, distortion, kept) -> DesignedSignal:
    n = plan.period
    one = values[plan.transient * n:(plan.transient + 1) * n]
    dev = one - one.mean(axis=0)
    peak_rate = np.max(np.abs(np.diff(values, axis=0)), axis=0, initial=0.0) * options.sample_rate_hz
    for text in plan.warnings:
        warnings.warn(text, SignalDesignWarning, stacklevel=3)
    multisine_only = options.kind == "multisine"
    return DesignedSignal(
        options=options, values=values, period_samples=n, periods=plan.periods,
        transient_periods=plan.transient, blocks=plan.blocks, block_signs=signs,
        arrangement=plan.arrangement, lines=tuple(lines),
        spacing=(options.spacing or "linear") if options.kind in ("multisine", "chirp") else None,
        harmonics=(options.harmonics or "all") if multisine_only else None,
        phases=(options.phases or "low-crest") if multisine_only else None,
        clock_divider=plan.clock_divider, prbs_bits=plan.prbs_bits, sweep_hz=extras.get("sweep_hz"),
        crest_factor=crest_factor(one), rms=np.sqrt(np.mean(dev * dev, axis=0)), mean=one.mean(axis=0),
        peak_rate=peak_rate, rate_distortion=distortion, band_power_kept=kept, advice=plan.advice,
        warnings=tuple(plan.warnings), notes=tuple(plan.notes),
    )
