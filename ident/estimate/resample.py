"""Bringing channels recorded at different rates to one sample rate.

Measurement systems record each channel group on its own clock (a 1 kHz encoder
beside a 10 Hz temperature). Identification needs one sample time, so every
chosen channel is brought to a common grid ``t0 + k T`` (``T = 1 / rate_hz``),
each by the method that is right for its direction, and nothing is ever
interpolated unless the caller asked for it:

* **same rate** (``kept``): the samples are copied when they fall on the grid;
* **going down** (``decimated``): an anti-alias filter and decimation by the
  rational factor ``up / down = rate_hz / native_rate`` in one step
  (:func:`scipy.signal.resample_poly`, a linear-phase FIR low-pass of
  ``20 max(up, down) + 1`` taps designed with a Kaiser window, beta = 5, cutoff at
  the new Nyquist frequency, applied with its delay removed, i.e. zero phase).
  The filter reaches 10 new samples either side of each output sample, so the
  first and last :data:`EDGE_SAMPLES` grid samples, partly computed from padding,
  are dropped;
* **going up** (``zoh`` or ``linear``): only with an explicit method, zero-order
  hold (each recorded value held until the next) or linear interpolation
  between recorded samples, and always with a :class:`ResamplingWarning`: the
  made-up samples carry nothing above the channel's own Nyquist frequency, a
  hold adds on average half the channel's sample time of delay, and linear
  interpolation looks ahead (each value depends on the next recorded sample).

A channel at the grid rate (or decimated to it) whose samples fall between the
grid times (another clock, an offset start) needs interpolation too: it is
refused unless an upsampling method is given, and then interpolated with it
(with the warning). The grid follows the first channel that is kept or
decimated; it starts at the latest channel start and ends at the earliest end.

References
----------
.. [1] Crochiere, R. E. and Rabiner, L. R., *Multirate Digital Signal
   Processing*, Prentice-Hall, 1983, ch. 2 (sampling-rate conversion by a
   rational factor) and ch. 4 (polyphase FIR structures).
.. [2] Oppenheim, A. V. and Schafer, R. W., *Discrete-Time Signal Processing*,
   3rd ed., Pearson, 2010, sec. 4.6 (changing the sampling rate) and sec. 7.6
   (Kaiser window filter design).
.. [3] Ljung, L., *System Identification: Theory for the User*, 2nd ed.,
   Prentice Hall, 1999, sec. 13.3 (prefiltering and the choice of sampling
   interval) and sec. 13.7 (intersample behaviour: zero-order hold versus
   first-order hold).
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction

import numpy as np

from .._validate import fraction, one_of, positive_float
from ..choices import UPSAMPLE_METHODS
from ..errors import OptionError, ResampleError, ResamplingWarning

__all__ = [
    "EDGE_SAMPLES",
    "MAX_FACTOR",
    "Channel",
    "ChannelPlan",
    "Resampled",
    "rate_factor",
    "decimate",
    "zero_order_hold",
    "linear_interpolation",
    "resample_channels",
]

#: Grid samples dropped at each end after an anti-alias decimation (the filter's reach).
EDGE_SAMPLES = 10
#: Largest numerator or denominator of a rate ratio (``resample_poly`` factors).
MAX_FACTOR = 1000
#: Relative tolerance of a rate ratio against its small fraction (the time stamps' own
#: resolution limits the measured rates; drift is caught by the grid check at both ends).
_RATIO_RTOL = 1e-3
#: Kaiser window of the anti-alias filter (``scipy.signal.resample_poly``'s default).
_WINDOW = ("kaiser", 5.0)


@dataclass(frozen=True, slots=True, eq=False)
class Channel:
    """One recorded channel: its samples and their time stamps.

    Attributes
    ----------
    name : str
        Name used in messages and plans.
    time : numpy.ndarray, shape (n,)
        Increasing time stamps in s.
    values : numpy.ndarray, shape (n,)
        Samples, finite.
    sample_time : float
        Native sample time in s (the median interval of ``time``).
    """

    name: str
    time: np.ndarray
    values: np.ndarray
    sample_time: float

    def __post_init__(self) -> None:
        time = np.asarray(self.time, dtype=float).view()
        values = np.asarray(self.values, dtype=float).view()
        if time.ndim != 1 or values.shape != time.shape or time.size < 2:
            raise OptionError(
                f"channel {self.name!r} needs matching 1-D time and values of at least 2 samples; "
                f"got shapes {time.shape} and {values.shape}"
            )
        time.flags.writeable = False  # read-only views: the caller's arrays are not copied
        values.flags.writeable = False
        object.__setattr__(self, "time", time)
        object.__setattr__(self, "values", values)
        object.__setattr__(self, "sample_time", positive_float(self.sample_time, "sample_time"))

    @property
    def rate_hz(self) -> float:
        """Native sample rate in Hz."""
        return 1.0 / self.sample_time


@dataclass(frozen=True, slots=True, eq=False)
class ChannelPlan:
    """How one channel reaches the grid.

    Attributes
    ----------
    name : str
    native_rate_hz : float
    up, down : int
        Rational factor of an anti-alias decimation (``1, 1`` when not decimated).
    interpolation : str or None
        ``"zoh"`` or ``"linear"`` when samples were made up between recorded ones
        (going up, or a channel off the grid); ``None`` otherwise.
    """

    name: str
    native_rate_hz: float
    up: int
    down: int
    interpolation: str | None

    @property
    def decimated(self) -> bool:
        """True when the channel was anti-alias filtered and decimated."""
        return self.down != self.up

    @property
    def action(self) -> str:
        """``"kept"``, ``"decimated"``, ``"zoh"``, ``"linear"`` or ``"decimated+zoh"`` etc."""
        parts = (["decimated"] if self.decimated else []) + (
            [self.interpolation] if self.interpolation else [])
        return "+".join(parts) or "kept"

    def to_dict(self) -> dict:
        """Plain data for summaries and provenance."""
        return {"channel": self.name, "native_rate_hz": self.native_rate_hz, "action": self.action,
                "up": self.up, "down": self.down}


@dataclass(frozen=True, slots=True, eq=False)
class Resampled:
    """Channels on one grid.

    Attributes
    ----------
    time : numpy.ndarray, shape (N,)
        Grid times ``t0 + k / rate_hz`` in s.
    values : numpy.ndarray, shape (N, k)
        One column per channel, in the order given.
    rate_hz : float
        The common rate.
    channels : tuple of ChannelPlan
        What was done to each channel.
    edge_samples : int
        Grid samples dropped at each end for the anti-alias filter (0 when no
        channel was decimated).
    """

    time: np.ndarray
    values: np.ndarray
    rate_hz: float
    channels: tuple[ChannelPlan, ...]
    edge_samples: int


# --------------------------------------------------------------------------- building blocks


def rate_factor(native_rate_hz: float, rate_hz: float) -> tuple[int, int] | None:
    """Return ``(up, down)`` with ``up / down = rate_hz / native_rate_hz`` in lowest terms.

    Parameters
    ----------
    native_rate_hz, rate_hz : float
        Rates in Hz.

    Returns
    -------
    tuple of int or None
        ``None`` when no fraction with terms up to :data:`MAX_FACTOR` is within
        a relative 1e-3 of the ratio.

    Examples
    --------
    >>> rate_factor(1000.0, 300.0)
    (3, 10)
    """
    ratio = positive_float(rate_hz, "rate_hz") / positive_float(native_rate_hz, "native_rate_hz")
    frac = Fraction(ratio).limit_denominator(MAX_FACTOR)
    if frac.numerator == 0 or frac.numerator > MAX_FACTOR:
        return None
    if abs(float(frac) - ratio) > _RATIO_RTOL * ratio:
        return None
    return frac.numerator, frac.denominator


def decimate(values: np.ndarray, up: int, down: int) -> np.ndarray:
    """Anti-alias filter and change the rate by ``up / down`` (zero phase).

    Parameters
    ----------
    values : numpy.ndarray, shape (n,) or (n, k)
        Samples at the native rate (along axis 0).
    up, down : int
        Rational factor, ``up <= down`` to go down.

    Returns
    -------
    numpy.ndarray, shape (ceil(n up / down), ...)
        Output sample ``m`` is at native time ``m down / up`` samples.

    Notes
    -----
    :func:`scipy.signal.resample_poly` with a Kaiser window (beta = 5) FIR of
    ``20 max(up, down) + 1`` taps, cutoff at ``1 / max(up, down)`` of the
    native Nyquist frequency; the ends are padded with the line through the
    first and last samples. See [1]_, ch. 2.

    References
    ----------
    .. [1] Crochiere, R. E. and Rabiner, L. R., *Multirate Digital Signal
       Processing*, Prentice-Hall, 1983.
    """
    from scipy import signal

    x = np.asarray(values, dtype=float)
    return signal.resample_poly(x, int(up), int(down), axis=0, window=_WINDOW, padtype="line")


def zero_order_hold(time: np.ndarray, values: np.ndarray, at: np.ndarray) -> np.ndarray:
    """Hold each recorded value until the next: the value of the last sample at or before ``at``.

    A grid time within a millionth of a sample time before a stamp counts as on it
    (rounding of the grid times). Times before the first stamp take the first value.
    """
    time = np.asarray(time, dtype=float)
    slack = 1e-6 * float(np.median(np.diff(time))) if time.size > 1 else 0.0
    idx = np.searchsorted(time, np.asarray(at, dtype=float) + slack, side="right") - 1
    return np.asarray(values, dtype=float)[np.clip(idx, 0, time.size - 1)]


def linear_interpolation(time: np.ndarray, values: np.ndarray, at: np.ndarray) -> np.ndarray:
    """Straight lines between recorded samples (:func:`numpy.interp`)."""
    return np.interp(np.asarray(at, dtype=float), np.asarray(time, dtype=float),
                     np.asarray(values, dtype=float))


# --------------------------------------------------------------------------- the job


def resample_channels(
    channels: Sequence[Channel],
    rate_hz: float,
    *,
    upsample: str | None = None,
    tolerance: float = 0.1,
) -> Resampled:
    """Bring every channel to one grid at ``rate_hz`` (see the module notes).

    Parameters
    ----------
    channels : sequence of Channel
        At least one.
    rate_hz : float
        The common rate in Hz.
    upsample : {"zoh", "linear"} or None
        How to make up samples for channels slower than ``rate_hz`` or off the
        grid; ``None`` refuses such channels.
    tolerance : float, default 0.1
        Largest accepted distance of a sample from a grid time, as a fraction of
        the channel's sample time (the log's jitter tolerance).

    Returns
    -------
    Resampled

    Raises
    ------
    ResampleError
        A channel slower than ``rate_hz`` or off the grid without ``upsample``;
        a rate ratio that is no simple fraction; channels that do not overlap
        in time for at least two grid samples (after the edge samples).

    Warns
    -----
    ResamplingWarning
        For each channel whose samples were made up by interpolation.
    """
    rate = positive_float(rate_hz, "rate_hz")
    if upsample is not None:
        one_of(upsample, "upsample", UPSAMPLE_METHODS)
    tol = fraction(tolerance, "tolerance")
    chans = list(channels)
    if not chans:
        raise OptionError("channels must hold at least one channel; got none")
    plans = [_plan(ch, rate, upsample) for ch in chans]
    t0, n = _grid(chans, plans, rate, tol)
    columns, final = [], []
    for ch, plan in zip(chans, plans, strict=True):
        column, plan = _on_grid(ch, plan, t0, n, rate, tol, upsample)
        columns.append(column)
        final.append(plan)
    n = min(c.shape[0] for c in columns)
    edge = EDGE_SAMPLES if any(p.decimated for p in final) else 0
    if n - 2 * edge < 2:
        raise ResampleError(
            f"the channels overlap for {n} sample(s) at {rate:g} Hz; at least {2 * edge + 2} are "
            "needed" + (f" ({edge} at each end are dropped after the anti-alias filter)" if edge else ""),
        )
    values = np.empty((n - 2 * edge, len(columns)))
    for j, c in enumerate(columns):
        values[:, j] = c[edge:n - edge]
    time = t0 + np.arange(edge, n - edge, dtype=float) / rate
    for ch, plan in zip(chans, final, strict=True):
        if plan.interpolation is not None:
            warnings.warn(_interpolation_warning(ch, plan, rate), ResamplingWarning, stacklevel=2)
    return Resampled(time, values, rate, tuple(final), edge)


def _plan(ch: Channel, rate: float, upsample: str | None) -> ChannelPlan:
    """Choose the method for one channel's direction (the grid check may add interpolation)."""
    native = ch.rate_hz
    if abs(native - rate) <= _RATIO_RTOL * rate:
        return ChannelPlan(ch.name, native, 1, 1, None)
    if native > rate:
        factor = rate_factor(native, rate)
        if factor is None:
            raise ResampleError(
                f"native rate {native:.6g} Hz is no simple fraction of {rate:g} Hz "
                f"(terms up to {MAX_FACTOR}), so it cannot be decimated to it",
                channel=ch.name, hint=f"choose a rate that divides {native:.6g} Hz",
            )
        return ChannelPlan(ch.name, native, factor[0], factor[1], None)
    if upsample is None:
        raise ResampleError(
            f"native rate {native:.6g} Hz is below the common rate {rate:g} Hz; bringing it up "
            "makes up samples between the recorded ones",
            channel=ch.name,
            hint="choose the method: --upsample zoh|linear ([log] upsample), or a common rate "
                 f"of at most {native:.6g} Hz",
        )
    return ChannelPlan(ch.name, native, 1, 1, upsample)


def _grid(chans: list[Channel], plans: list[ChannelPlan], rate: float, tol: float) -> tuple[float, int]:
    """Return the grid's start and length: latest start to earliest end, on the reference lattice."""
    start = max(float(ch.time[0]) for ch in chans)
    end = min(float(ch.time[-1]) for ch in chans)
    step = 1.0 / rate
    ref = next((ch for ch, p in zip(chans, plans, strict=True) if p.interpolation is None), None)
    if ref is None:
        t0 = start
    else:
        k0 = math.ceil((start - float(ref.time[0])) * rate - tol * ref.sample_time * rate)
        t0 = float(ref.time[0]) + max(k0, 0) * step
    if end < t0:
        names = ", ".join(repr(ch.name) for ch in chans)
        raise ResampleError(f"the channels {names} do not overlap in time (latest start {start:g} s, "
                            f"earliest end {end:g} s)")
    # a grid time may pass a channel's last stamp by the jitter tolerance of the finer of the two steps
    n = min(int(math.floor((float(ch.time[-1]) + tol * min(ch.sample_time, step) - t0) * rate)) + 1
            for ch in chans)
    return t0, n


def _on_grid(ch: Channel, plan: ChannelPlan, t0: float, n: int, rate: float, tol: float,
             upsample: str | None) -> tuple[np.ndarray, ChannelPlan]:
    """Return the channel's values at the ``n`` grid times from ``t0`` and the plan carried out."""
    grid = t0 + np.arange(n, dtype=float) / rate
    if plan.interpolation is not None:
        return _interpolate(ch.time, ch.values, grid, plan.interpolation), plan
    offset = (t0 - float(ch.time[0])) / ch.sample_time
    j = int(round(offset))
    stride = plan.down / plan.up  # native samples per grid step
    last = j + (n - 1) * stride
    aligned = (abs(offset - j) <= tol and last <= ch.time.size - 1 + tol
               and abs(float(ch.time[min(int(round(last)), ch.time.size - 1)]) - grid[-1])
               <= tol * ch.sample_time)
    if aligned and not plan.decimated:
        return np.array(ch.values[j:j + n]), plan
    if aligned:
        return decimate(ch.values[j:], plan.up, plan.down)[:n], plan
    if upsample is None:
        raise ResampleError(
            f"its samples fall {abs(offset - j):.3g} of a sample time off the common grid "
            f"(from {t0:.6g} s at {rate:g} Hz) or drift from it: it was recorded on another "
            "clock or with an offset start",
            channel=ch.name,
            hint="interpolate it onto the grid with --upsample zoh|linear ([log] upsample)",
        )
    plan = ChannelPlan(plan.name, plan.native_rate_hz, plan.up, plan.down, upsample)
    if not plan.decimated:
        return _interpolate(ch.time, ch.values, grid, upsample), plan
    coarse = decimate(ch.values, plan.up, plan.down)
    coarse_time = float(ch.time[0]) + np.arange(coarse.shape[0], dtype=float) * stride * ch.sample_time
    return _interpolate(coarse_time, coarse, grid, upsample), plan


def _interpolate(time: np.ndarray, values: np.ndarray, at: np.ndarray, method: str) -> np.ndarray:
    if method == "zoh":
        return zero_order_hold(time, values, at)
    return linear_interpolation(time, values, at)


def _interpolation_warning(ch: Channel, plan: ChannelPlan, rate: float) -> str:
    native = plan.native_rate_hz
    source = native * plan.up / plan.down
    what = (f"brought from {native:.6g} Hz up to {rate:g} Hz" if source < rate * (1 - _RATIO_RTOL)
            else f"interpolated onto the {rate:g} Hz grid (its samples fall between the grid times)")
    if plan.interpolation == "zoh":
        effect = (f"zero-order hold repeats each value until the next, which delays the channel by "
                  f"{0.5 / source:.3g} s on average and adds steps at multiples of {source:.6g} Hz")
    else:
        effect = ("linear interpolation draws lines to the next recorded value, so the channel looks "
                  f"ahead by up to {1 / source:.3g} s and is smoothed")
    return (f"channel {ch.name!r} {what}: {effect}; it carries nothing above {source / 2:.6g} Hz, "
            "so the identified dynamics there are not supported by this channel")
