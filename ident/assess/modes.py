"""Poles in physical units: the mode table and its plausibility flags.

Every pole ``z`` of a discrete-time model with sample time ``T`` is mapped to
its continuous-time equivalent ``s = ln(z) / T`` (the pole that, sampled with a
zero-order hold, gives ``z``) and described in the quantities an engineer can
check against the hardware: natural frequency, damping ratio, time constant,
and for oscillatory modes the damped frequency and period. Complex-conjugate
pairs are one mode. Each mode carries flags for what is unlikely to be
physical or cannot be trusted; :data:`FLAGS` lists them and
:class:`ModeThresholds` documents the threshold of each.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, fields
from typing import Any

import numpy as np

from .._validate import did_you_mean, fraction, positive_float
from ..choices import FLAGS
from ..errors import ModelError, OptionError
from ..lti.analysis import channel_zeros, dc_gain, transmission_zeros
from ..lti.covariance import ParameterCovariance, dc_gain_std
from ..lti.discretize import poles_to_continuous
from ..lti.models import StateSpaceModel

__all__ = [
    "FLAGS",
    "ModeThresholds",
    "Mode",
    "ModeTable",
    "mode_table",
    "mode_table_to_dict",
    "flag_explanation",
]


#: Poles whose imaginary part is below this fraction of ``max(1, |z|)`` are real.
#: A repeated real pole comes out of the eigenvalue solver split by about the
#: square root of the machine precision times the conditioning (often ~1e-6),
#: frequently as a complex pair; an angle of 1e-5 rad is a period of 6e5
#: samples, far beyond what any log can show, so nothing real is lost.
_REAL_AXIS_RTOL = 1e-5
#: Poles closer than this fraction of ``max(1, |z|)`` are one repeated pole.
_REPEAT_RTOL = 1e-5


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class ModeThresholds:
    """Thresholds of the plausibility flags.

    Parameters
    ----------
    stability_tolerance : float, default 1e-6
        A pole with ``|z| > 1 + stability_tolerance`` is flagged ``unstable``.
        The small margin keeps round-off on an exact integrator from being
        called unstable.
    marginal_tolerance : float, default 1e-3
        A pole with ``1 - marginal_tolerance <= |z| <= 1 + stability_tolerance``
        is flagged ``marginal``; one with ``|z - 1| <= marginal_tolerance`` is
        also flagged ``integrator``. At a sample rate of 1 kHz, 1e-3 is a time
        constant of about one second or more.
    lightly_damped_below : float, default 0.07
        An oscillatory mode (a complex pair) with damping ratio below this is
        flagged ``lightly_damped``. In servo work a damping ratio below about
        0.05-0.1 is commonly called light (common practice, no single source):
        such a resonance (a belt, a coupling, a long shaft) limits the speed
        loop's bandwidth and usually needs a notch filter. A fitted mode this
        lightly damped also needs a log long enough to show many cycles of its
        decay, and it may be a narrow-band disturbance (a mains hum, a rotating
        imbalance) rather than a property of the plant.
    nyquist_fraction : float, default 0.8
        A mode whose natural frequency is at least this fraction of the Nyquist
        frequency ``1 / (2 T)`` is flagged ``near_nyquist``: the sample rate is
        too low for it, or it is an artefact of the fit.
    log_duration_fraction : float, default 0.2
        A mode whose time constant exceeds this fraction of the log duration is
        flagged ``slow_for_log``: the log shows too little of its settling to
        pin it down. Applied only when the log duration is known.
    cancellation_distance : float, default 0.01
        A pole closer than this to a transmission zero, or to a zero of every
        channel that responds at all (so that it cancels everywhere, as in a
        model with more outputs than inputs, which has no transmission zeros),
        relative to the larger of their magnitudes (``|p - q| <= d max(|p|, |q|)``),
        is flagged ``near_cancellation``: the mode hardly shows in the response
        and the order is probably too high. For a discrete model pole and zero
        are compared as ``s = ln(z) / T`` (continuous time), where the distance
        means the same for slow and fast modes.
    negative_real_angle_tolerance_rad : float, default 0.05
        A pole whose angle is within this many radians of pi (about 2.9 degrees
        by default) is flagged ``negative_real``. A real pole on the negative
        axis has no continuous-time equivalent under a zero-order hold; such
        poles usually come from fitting noise or from too high an order.
    negative_real_min_magnitude : float, default 0.05
        Poles nearer ``z = 0`` than this are not flagged ``negative_real``:
        such a pole dies out within a sample whatever its sign (a factor of 20
        and more per sample), a sub-sample effect of the sampling (an averaging
        sensor, a computation delay) rather than an oscillation at Nyquist.
    confidence_level : float, default 0.95
        Probability content of the pole confidence region drawn from a pole
        covariance; the mode is flagged ``uncertain_stability`` when that
        region crosses the unit circle.
    """

    stability_tolerance: float = 1e-6
    marginal_tolerance: float = 1e-3
    lightly_damped_below: float = 0.07
    nyquist_fraction: float = 0.8
    log_duration_fraction: float = 0.2
    cancellation_distance: float = 0.01
    negative_real_angle_tolerance_rad: float = 0.05
    negative_real_min_magnitude: float = 0.05
    confidence_level: float = 0.95

    def __post_init__(self) -> None:
        object.__setattr__(
            self, "stability_tolerance", positive_float(self.stability_tolerance, "stability_tolerance")
        )
        object.__setattr__(
            self, "marginal_tolerance", fraction(self.marginal_tolerance, "marginal_tolerance")
        )
        object.__setattr__(
            self, "lightly_damped_below", fraction(self.lightly_damped_below, "lightly_damped_below")
        )
        object.__setattr__(
            self,
            "nyquist_fraction",
            fraction(self.nyquist_fraction, "nyquist_fraction", high=1.0, inclusive=True),
        )
        if self.nyquist_fraction == 0.0:
            raise OptionError("nyquist_fraction must be a number in (0, 1]; got 0.0")
        object.__setattr__(
            self,
            "log_duration_fraction",
            positive_float(self.log_duration_fraction, "log_duration_fraction"),
        )
        object.__setattr__(
            self,
            "cancellation_distance",
            fraction(self.cancellation_distance, "cancellation_distance"),
        )
        object.__setattr__(
            self,
            "negative_real_angle_tolerance_rad",
            fraction(
                self.negative_real_angle_tolerance_rad,
                "negative_real_angle_tolerance_rad",
                high=math.pi / 2,
            ),
        )
        object.__setattr__(
            self, "negative_real_min_magnitude",
            fraction(self.negative_real_min_magnitude, "negative_real_min_magnitude"),
        )
        object.__setattr__(
            self, "confidence_level", fraction(self.confidence_level, "confidence_level")
        )

    @classmethod
    def from_mapping(
        cls, mapping: Mapping[str, Any], *, source: str | None = None, key_path: str = "modes"
    ) -> ModeThresholds:
        """Build thresholds from a mapping (a TOML table); unknown keys are errors.

        Parameters
        ----------
        mapping : mapping
            Keys are the field names of this class.
        source : str, optional
            File the mapping came from, for error messages.
        key_path : str, default "modes"
            Key path of the table in its file, for error messages.

        Raises
        ------
        ident.errors.PipelineError
            An unknown key (naming the nearest valid one) or a bad value.
        """
        from ..errors import PipelineError

        valid = tuple(f.name for f in fields(cls))
        if not isinstance(mapping, Mapping):
            raise PipelineError("must be a table", path=source, key_path=key_path)
        for key in mapping:
            if key not in valid:
                raise PipelineError(
                    f"unknown key {key!r}; valid keys: {', '.join(valid)}",
                    path=source,
                    key_path=f"{key_path}.{key}",
                    hint=did_you_mean(key, valid),
                )
        for key, value in mapping.items():
            if isinstance(value, bool) or not isinstance(value, (int, float)):
                raise PipelineError(
                    f"must be a number; got {value!r}", path=source, key_path=f"{key_path}.{key}"
                )
        try:
            return cls(**dict(mapping))
        except OptionError as exc:
            raise PipelineError(str(exc), path=source, key_path=key_path) from exc


@dataclass(frozen=True, slots=True, eq=False)
class Mode:
    """One mode: a real pole or a complex-conjugate pair, in physical units.

    Attributes
    ----------
    z : complex
        The pole; for a pair, the member with positive imaginary part.
    s : complex or None
        Continuous-time equivalent ``ln(z) / T`` in rad/s; ``None`` where it
        has no real-system meaning (a pole at 0 or on the negative real axis).
    natural_frequency_rad_s : float or None
        ``|ln(z)| / T``; ``None`` for a pole at 0 (a pure one-sample delay).
    natural_frequency_hz : float or None
        The same in Hz.
    damping_ratio : float or None
        ``-ln|z| / |ln z|``; negative for a growing mode; ``None`` at ``z = 0``
        and ``z = 1`` where it is undefined.
    time_constant_s : float or None
        ``-T / ln|z|``, the time of a decay by the factor e; ``None`` for a
        pole at 0 and for poles on or outside the unit circle (no decay).
    damped_frequency_hz : float or None
        ``|angle(z)| / (2 pi T)`` for a complex pair, else ``None``.
    period_s : float or None
        ``1 / damped_frequency_hz`` for a complex pair, else ``None``.
    multiplicity : int
        How many times this (pair of) pole(s) repeats.
    is_pair : bool
        True for a complex-conjugate pair.
    flags : tuple of str
        Members of :data:`FLAGS`, in that order.
    explanations : tuple of str
        One plain sentence per flag, same order.
    z_std : tuple of float or None
        Standard deviations of ``(Re z, Im z)`` when a pole covariance is known.
    confidence_radius : float or None
        Largest semi-axis of the confidence ellipse of ``z`` at
        ``ModeThresholds.confidence_level``, when a covariance is known.
    z_covariance : tuple of tuple of float or None
        The 2 x 2 covariance of ``(Re z, Im z)`` when known.
    natural_frequency_std_hz, damping_ratio_std : float or None
        Standard deviations of the natural frequency (Hz) and damping ratio,
        propagated from ``z_covariance`` to first order (delta method); ``None``
        when no covariance is known or the quantity is undefined.
    time_constant_std_s : float or None
        Standard deviation of the time constant, the same way.
    """

    z: complex
    s: complex | None
    natural_frequency_rad_s: float | None
    natural_frequency_hz: float | None
    damping_ratio: float | None
    time_constant_s: float | None
    damped_frequency_hz: float | None
    period_s: float | None
    multiplicity: int = 1
    is_pair: bool = False
    flags: tuple[str, ...] = ()
    explanations: tuple[str, ...] = ()
    z_std: tuple[float, float] | None = None
    confidence_radius: float | None = None
    z_covariance: tuple[tuple[float, float], tuple[float, float]] | None = None
    natural_frequency_std_hz: float | None = None
    damping_ratio_std: float | None = None
    time_constant_std_s: float | None = None


@dataclass(frozen=True, slots=True, eq=False)
class ModeTable:
    """The modes of a model and its steady-state facts.

    Attributes
    ----------
    modes : tuple of Mode
        Sorted slowest first (ascending natural frequency; a pole at 0 last).
    dc_gain : numpy.ndarray, shape (p, m)
        Steady-state gain per channel (``+-inf`` for an uncancelled integrator).
    zeros : numpy.ndarray
        Transmission zeros (complex).
    sample_time : float
        Sample time in s.
    inputs, outputs : tuple of str
        Signal names of the model, for labelling ``dc_gain``.
    n_states : int
        Model order.
    warnings : dict
        Flag name -> one plain explanation with its threshold, for every flag
        that occurs in ``modes``.
    thresholds : ModeThresholds
        The thresholds used.
    log_duration_s : float or None
        Log duration the ``slow_for_log`` flag was judged against.
    dc_gain_std : numpy.ndarray or None, shape (p, m)
        Standard deviation of each DC gain (first order, from the parameter
        covariance; ``inf`` for an integrating channel); ``None`` when unknown.
    """

    modes: tuple[Mode, ...]
    dc_gain: np.ndarray
    zeros: np.ndarray
    sample_time: float
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    n_states: int
    warnings: dict[str, str] = field(default_factory=dict)
    thresholds: ModeThresholds = field(default_factory=ModeThresholds)
    log_duration_s: float | None = None
    dc_gain_std: np.ndarray | None = None

    def flags(self) -> tuple[str, ...]:
        """Return the flags present on any mode, in :data:`FLAGS` order."""
        present = {f for m in self.modes for f in m.flags}
        return tuple(f for f in FLAGS if f in present)


def flag_explanation(flag: str, thresholds: ModeThresholds, log_duration_s: float | None = None) -> str:
    """Plain one-line explanation of a flag, naming its threshold.

    Parameters
    ----------
    flag : str
        One of :data:`FLAGS`.
    thresholds : ModeThresholds
        Thresholds to quote.
    log_duration_s : float, optional
        Log duration, quoted for ``slow_for_log``.
    """
    t = thresholds
    if flag == "slow_for_log":
        limit = (
            f"{t.log_duration_fraction:g} of the {log_duration_s:g} s log"
            if log_duration_s is not None
            else f"{t.log_duration_fraction:g} of the log duration"
        )
    else:
        limit = ""
    texts = {
        "unstable": (
            f"pole outside the unit circle (|z| > 1 + {t.stability_tolerance:g}): the model's "
            "response grows without bound; check the fit before using it for anything"
        ),
        "marginal": (
            f"pole on the unit circle (|z| within {t.marginal_tolerance:g} of 1): the mode "
            "does not decay, like an integrator or an undamped oscillator"
        ),
        "integrator": (
            f"pole at z = 1 (within {t.marginal_tolerance:g}): an integrator; expected for a "
            "position output, suspicious for a speed or a temperature"
        ),
        "lightly_damped": (
            f"oscillatory mode with damping ratio below {t.lightly_damped_below:g}: check it "
            "against the hardware; narrow peaks are often disturbances, not plant dynamics"
        ),
        "negative_real": (
            f"pole on or within {t.negative_real_angle_tolerance_rad:g} rad of the negative real "
            f"axis (and at least {t.negative_real_min_magnitude:g} from z = 0): no continuous-time "
            "equivalent under a zero-order hold; usually noise fitting or too high an order"
        ),
        "near_nyquist": (
            f"mode at or above {t.nyquist_fraction:g} of the Nyquist frequency: the sample rate "
            "is too low for it, or it is an artefact of the fit"
        ),
        "slow_for_log": (
            f"time constant longer than {limit}: the log shows too little of the settling to "
            "pin this mode down; record a longer log"
        ),
        "near_cancellation": (
            f"pole within {t.cancellation_distance:g} (relative) of a zero: the two nearly "
            "cancel and the mode hardly shows: a sign of too high an order (the validation's order advice "
            "weighs it with the other evidence)"
        ),
        "uncertain_stability": (
            f"the {100 * t.confidence_level:g} % confidence region of the pole crosses the "
            "unit circle: the data cannot tell whether this mode is stable"
        ),
    }
    if flag not in texts:
        raise OptionError(f"flag must be one of {', '.join(map(repr, FLAGS))}; got {flag!r}")
    return texts[flag]


def _group_poles(
    poles: np.ndarray, cov: np.ndarray | None
) -> list[tuple[complex, int, np.ndarray | None]]:
    """Pair conjugates, merge repeats: (representative z, multiplicity, 2x2 cov or None)."""
    out: list[tuple[complex, int, np.ndarray | None]] = []
    for i, p in enumerate(poles):
        scale = max(1.0, abs(p))
        if abs(p.imag) <= _REAL_AXIS_RTOL * scale:
            p = complex(p.real, 0.0)
        elif p.imag < 0:
            continue  # the conjugate with positive imaginary part represents the pair
        c = None if cov is None or not np.all(np.isfinite(cov[i])) else cov[i]
        for k, (q, mult, qc) in enumerate(out):
            if abs(p - q) <= _REPEAT_RTOL * scale:
                out[k] = (q, mult + 1, qc)
                break
        else:
            out.append((complex(p), 1, c))
    return out


def _ellipse_points(z: complex, cov: np.ndarray, level: float) -> tuple[np.ndarray, float]:
    """Boundary of the confidence ellipse of ``z`` and its largest semi-axis."""
    # For a 2-D Gaussian the chi-square(2) quantile is -2 ln(1 - level) (closed form).
    k2 = -2.0 * math.log1p(-level)
    w, V = np.linalg.eigh(0.5 * (cov + cov.T))
    w = np.clip(w, 0.0, None)
    axes = V * np.sqrt(k2 * w)
    t = np.linspace(0.0, 2.0 * math.pi, 361)
    pts = z + (axes[0, 0] * np.cos(t) + axes[0, 1] * np.sin(t)) + 1j * (
        axes[1, 0] * np.cos(t) + axes[1, 1] * np.sin(t)
    )
    return pts, float(math.sqrt(k2 * w.max()))


def mode_table(
    model: StateSpaceModel,
    *,
    thresholds: ModeThresholds | None = None,
    log_duration_s: float | None = None,
    pole_covariance: np.ndarray | None = None,
    parameter_covariance: ParameterCovariance | None = None,
) -> ModeTable:
    """Tabulate the modes of a discrete-time model in physical units, with flags.

    Parameters
    ----------
    model : StateSpaceModel
        Discrete-time model.
    thresholds : ModeThresholds, optional
        Flag thresholds; ``ModeThresholds()`` by default.
    log_duration_s : float, optional
        Duration of the log the model was fitted on, in s; needed for the
        ``slow_for_log`` flag, which is skipped when it is ``None``.
    pole_covariance : array_like, shape (n, 2, 2), optional
        Covariance of ``(Re z, Im z)`` of each pole, in the order of
        ``model.poles()``; gives each mode a confidence region and the
        ``uncertain_stability`` flag. A block holding nan means "unknown" for
        that pole (its mode gets no uncertainty figures).
    parameter_covariance : ParameterCovariance, optional
        Covariance of the model's parameters (:mod:`ident.lti.covariance`);
        gives the standard deviations of the DC gains (``dc_gain_std``).
        Ignored when it does not match the model.

    Returns
    -------
    ModeTable

    Raises
    ------
    ident.errors.ModelError
        The model is continuous-time.
    ident.errors.OptionError
        A bad option or covariance shape.

    Notes
    -----
    For a pole ``z`` and sample time ``T`` [1]_::

        s      = ln(z) / T
        wn     = sqrt(ln^2|z| + angle(z)^2) / T
        zeta   = -ln|z| / sqrt(ln^2|z| + angle(z)^2)
        tau    = -T / ln|z|
        wd     = |angle(z)| / T

    A pole whose imaginary part is below 1e-5 max(1, |z|) is taken as real,
    and poles within 1e-5 max(1, |z|) of each other as one repeated pole
    (``Mode.multiplicity``): the eigenvalue solver splits a repeated real pole
    by about that much, often into a spurious complex pair. Given a pole
    covariance, the confidence region is the ellipse of the 2-D Gaussian at
    ``thresholds.confidence_level`` (chi-square quantile with 2 degrees of
    freedom, ``-2 ln(1 - level)``) and the standard deviations of natural
    frequency and damping ratio follow to first order (delta method).

    References
    ----------
    .. [1] G. F. Franklin, J. D. Powell, M. L. Workman, *Digital Control of
       Dynamic Systems*, 3rd ed., Addison-Wesley, 1998, sec. 4.3.2 (the
       mapping ``z = exp(sT)`` between the s- and z-planes).

    Examples
    --------
    >>> from ident.lti.models import StateSpaceModel
    >>> m = StateSpaceModel(A=[[0.9]], B=[[1.0]], C=[[0.1]], D=[[0.0]], sample_time=0.01)
    >>> t = mode_table(m)
    >>> round(t.modes[0].time_constant_s, 4), round(float(t.dc_gain[0, 0]), 6)
    (0.0949, 1.0)
    """
    if not isinstance(model, StateSpaceModel):
        raise OptionError(f"model must be a StateSpaceModel; got {type(model).__name__}")
    if not model.is_discrete:
        raise ModelError(
            "the mode table needs a discrete-time model; discretise it first",
            hint="rigfit convert MODEL --to discrete --sample-time T -o DISCRETE.json",
        )
    th = ModeThresholds() if thresholds is None else thresholds
    if not isinstance(th, ModeThresholds):
        raise OptionError(f"thresholds must be a ModeThresholds; got {type(th).__name__}")
    log_duration_s = None if log_duration_s is None else positive_float(log_duration_s, "log_duration_s")
    T = float(model.sample_time)
    gain_std = _dc_gain_std(model, parameter_covariance)
    model = model.without_noise_model() if model.noise_states else model  # noise poles are not plant modes
    poles = model.poles()
    n = poles.size
    cov = None
    if pole_covariance is not None:
        cov = np.asarray(pole_covariance, dtype=float)
        # nan marks a pole whose covariance is unknown (e.g. a repeated root); inf is an error
        if cov.shape != (n, 2, 2) or np.any(np.isinf(cov)):
            raise OptionError(
                f"pole_covariance must be an array of shape ({n}, 2, 2) of finite numbers or nan; "
                f"got shape {cov.shape}"
            )

    zeros = np.asarray(transmission_zeros(model), dtype=complex).ravel()
    gain = np.asarray(dc_gain(model), dtype=float)
    # zeros of every channel that responds at all: a mode cancelled in each of them hardly shows
    live_channels = tuple(z for row in channel_zeros(model) for z in row if z is not None)

    groups = _group_poles(poles, cov)
    s_all = np.asarray(
        poles_to_continuous(np.array([g[0] for g in groups], dtype=complex), T), dtype=complex
    ).reshape(-1)
    modes = [
        _make_mode(z, mult, c, s_all[i], T, zeros, live_channels, th, log_duration_s)
        for i, (z, mult, c) in enumerate(groups)
    ]
    modes.sort(key=lambda m: (m.natural_frequency_rad_s is None, m.natural_frequency_rad_s or 0.0,
                              m.z.real))
    present = {f for m in modes for f in m.flags}
    warnings_ = {f: flag_explanation(f, th, log_duration_s) for f in FLAGS if f in present}
    return ModeTable(
        modes=tuple(modes),
        dc_gain=gain,
        zeros=zeros,
        sample_time=T,
        inputs=model.inputs,
        outputs=model.outputs,
        n_states=model.n_states,
        warnings=warnings_,
        thresholds=th,
        log_duration_s=log_duration_s,
        dc_gain_std=gain_std,
    )


def _dc_gain_std(model: StateSpaceModel, covariance: ParameterCovariance | None) -> np.ndarray | None:
    """Return the standard deviations of the DC gains, or ``None`` without a matching covariance."""
    if covariance is None:
        return None
    if not isinstance(covariance, ParameterCovariance):
        raise OptionError(f"parameter_covariance must be a ParameterCovariance; got {type(covariance).__name__}")
    if not covariance.matches(model):
        return None
    try:
        std = dc_gain_std(model, covariance)
    except (ModelError, np.linalg.LinAlgError):
        return None
    std = np.array(std, dtype=float)
    std.flags.writeable = False
    return std


def _gradients(z: complex, T: float) -> tuple[np.ndarray | None, np.ndarray | None]:
    """Gradients of wn (rad/s) and zeta with respect to ``(Re z, Im z)``.

    With ``L = ln z`` (holomorphic, ``dL = dz / z``), a real function ``f`` with
    ``df = Re(w dz)`` has gradient ``(Re w, -Im w)``. ``|L|`` has
    ``w = conj(L) / (|L| z)``; ``Re L = ln|z|`` has ``w = 1 / z``; and
    ``zeta = -Re L / |L|``.
    """
    L = complex(math.log(abs(z)), math.atan2(z.imag, z.real))
    mag = abs(L)
    if mag == 0.0:
        return None, None
    w_mag = L.conjugate() / (mag * z)
    g_mag = np.array([w_mag.real, -w_mag.imag])
    w_re = 1.0 / z
    g_re = np.array([w_re.real, -w_re.imag])
    g_zeta = -(g_re * mag - L.real * g_mag) / mag**2
    return g_mag / T, g_zeta


def _near_zero(p: complex, zeros: np.ndarray, th: ModeThresholds, T: float | None = None) -> bool:
    """Tell whether pole ``p`` lies within ``cancellation_distance`` (relative) of one of ``zeros``.

    For a discrete model the distance is measured between ``s = ln(z) / T`` of
    pole and zero, relative to the larger ``|s|``: near ``z = 1`` (slow modes)
    the z-plane squeezes distinct dynamics together, and 0.01 there can be a
    factor of two in time constant. Where ``ln z`` means nothing (``z`` at 0 or
    on the negative real axis) the z-plane distance is used.
    """
    if zeros.size == 0:
        return False
    z_near = np.abs(zeros - p) <= th.cancellation_distance * np.maximum(np.abs(zeros), abs(p))
    if T is None or abs(p) == 0 or (p.imag == 0 and p.real < 0):
        return bool(np.any(z_near))
    s_p = np.log(complex(p)) / T
    usable = (np.abs(zeros) > 0) & ~((zeros.imag == 0) & (zeros.real < 0))
    s_z = np.log(np.where(usable, zeros, 1.0).astype(complex)) / T
    s_near = np.abs(s_z - s_p) <= th.cancellation_distance * np.maximum(np.abs(s_z), abs(s_p))
    return bool(np.any(np.where(usable, s_near, z_near)))


def _make_mode(
    z: complex,
    mult: int,
    cov: np.ndarray | None,
    s: complex,
    T: float,
    zeros: np.ndarray,
    live_channels: tuple[np.ndarray, ...],
    th: ModeThresholds,
    log_duration_s: float | None,
) -> Mode:
    r = abs(z)
    ang = abs(math.atan2(z.imag, z.real)) if r > 0 else 0.0
    is_pair = z.imag != 0.0
    if r == 0.0:
        wn = zeta = tau = None
    else:
        lr = math.log(r)
        mag = math.hypot(lr, ang)
        wn = mag / T
        zeta = (-lr / mag) if mag > 0 else None
        tau = (-T / lr) if lr < 0 else None
    s_out = None if (not np.isfinite(s) or r == 0.0 or (not is_pair and z.real < 0)) else complex(s)
    wd_hz = ang / (2 * math.pi * T) if is_pair else None
    period = (1.0 / wd_hz) if wd_hz else None

    flags: list[str] = []
    if r > 1.0 + th.stability_tolerance:
        flags.append("unstable")
    elif r >= 1.0 - th.marginal_tolerance:
        flags.append("marginal")
    if abs(z - 1.0) <= th.marginal_tolerance:
        flags.append("integrator")
    if is_pair and zeta is not None and "unstable" not in flags and zeta < th.lightly_damped_below:
        flags.append("lightly_damped")
    if r >= th.negative_real_min_magnitude and ang >= math.pi - th.negative_real_angle_tolerance_rad:
        flags.append("negative_real")
    if wn is not None and wn >= th.nyquist_fraction * math.pi / T:
        flags.append("near_nyquist")
    if log_duration_s is not None and tau is not None and tau > th.log_duration_fraction * log_duration_s:
        flags.append("slow_for_log")
    members = (z, z.conjugate()) if is_pair else (z,)
    near = any(_near_zero(p, zeros, th, T) for p in members) or (
        bool(live_channels) and all(any(_near_zero(p, zc, th, T) for p in members) for zc in live_channels)
    )
    if near:
        flags.append("near_cancellation")
    z_std = radius = wn_std_hz = zeta_std = tau_std = None
    if cov is not None and r > 0:
        grad_wn, grad_zeta = _gradients(z, T)
        if grad_wn is not None:
            wn_std_hz = math.sqrt(max(float(grad_wn @ cov @ grad_wn), 0.0)) / (2 * math.pi)
        if grad_zeta is not None:
            zeta_std = math.sqrt(max(float(grad_zeta @ cov @ grad_zeta), 0.0))
        if tau is not None:  # tau = -T / ln|z|: d tau = T / ln^2|z| d ln|z|, and d ln|z| = Re(dz / z)
            w = 1.0 / z
            grad_tau = (T / math.log(r) ** 2) * np.array([w.real, -w.imag])
            tau_std = math.sqrt(max(float(grad_tau @ cov @ grad_tau), 0.0))
    if cov is not None:
        z_std = (float(math.sqrt(max(cov[0, 0], 0.0))), float(math.sqrt(max(cov[1, 1], 0.0))))
        pts, radius = _ellipse_points(z, cov, th.confidence_level)
        mags = np.abs(pts)
        inside = bool(np.any(mags < 1.0) or r < 1.0)
        outside = bool(np.any(mags > 1.0) or r > 1.0)
        if inside and outside:
            flags.append("uncertain_stability")
    ordered = tuple(f for f in FLAGS if f in flags)
    return Mode(
        z=complex(z),
        s=s_out,
        natural_frequency_rad_s=wn,
        natural_frequency_hz=None if wn is None else wn / (2 * math.pi),
        damping_ratio=zeta,
        time_constant_s=tau,
        damped_frequency_hz=wd_hz,
        period_s=period,
        multiplicity=mult,
        is_pair=is_pair,
        flags=ordered,
        explanations=tuple(flag_explanation(f, th, log_duration_s) for f in ordered),
        z_std=z_std,
        confidence_radius=radius,
        natural_frequency_std_hz=wn_std_hz,
        damping_ratio_std=zeta_std,
        time_constant_std_s=tau_std,
        z_covariance=None if cov is None else (
            (float(cov[0, 0]), float(cov[0, 1])), (float(cov[1, 0]), float(cov[1, 1]))
        ),
    )


def _cpx(value: complex | None) -> list[float] | None:
    return None if value is None else [float(value.real), float(value.imag)]


def _finite(value: float | None) -> float | None:
    return None if value is None or not math.isfinite(value) else float(value)


def mode_table_to_dict(table: ModeTable) -> dict[str, Any]:
    """Return the mode table as plain JSON-ready data.

    Shape::

        {"sample_time": T, "n_states": n,
         "modes": [{"z": [re, im], "s": [re, im] | null, "natural_frequency_rad_s": f,
                    "natural_frequency_hz": f, "damping_ratio": zeta,
                    "time_constant_s": tau | null, "damped_frequency_hz": f | null,
                    "period_s": p | null, "multiplicity": k, "is_pair": bool,
                    "flags": [...], "explanations": [...],
                    "z_std": [sr, si] | null, "confidence_radius": r | null,
                    "natural_frequency_std_hz": f | null,
                    "damping_ratio_std": f | null, "time_constant_std_s": f | null}, ...],
         "dc_gain": [{"input": name, "output": name, "gain": g | "inf" | "-inf",
                      "std": s | "inf" | null}, ...],
         "dc_gain_matrix": [[...]],      # p x m, "inf"/"-inf" for integrators
         "zeros": [[re, im], ...],
         "warnings": {flag: explanation},
         "thresholds": {...}, "log_duration_s": s | null}

    A complex pair is listed once, by its member with positive imaginary part.
    Infinite gains are written as the strings ``"inf"`` and ``"-inf"``.
    """
    if not isinstance(table, ModeTable):
        raise OptionError(f"table must be a ModeTable; got {type(table).__name__}")

    def gain_value(g: float) -> float | str | None:
        if math.isnan(g):
            return None
        if math.isinf(g):
            return "inf" if g > 0 else "-inf"
        return float(g)

    modes = []
    for m in table.modes:
        modes.append(
            {
                "z": _cpx(m.z),
                "s": _cpx(m.s),
                "natural_frequency_rad_s": _finite(m.natural_frequency_rad_s),
                "natural_frequency_hz": _finite(m.natural_frequency_hz),
                "damping_ratio": _finite(m.damping_ratio),
                "time_constant_s": _finite(m.time_constant_s),
                "damped_frequency_hz": _finite(m.damped_frequency_hz),
                "period_s": _finite(m.period_s),
                "multiplicity": m.multiplicity,
                "is_pair": m.is_pair,
                "flags": list(m.flags),
                "explanations": list(m.explanations),
                "z_std": None if m.z_std is None else list(m.z_std),
                "confidence_radius": _finite(m.confidence_radius),
                "natural_frequency_std_hz": _finite(m.natural_frequency_std_hz),
                "damping_ratio_std": _finite(m.damping_ratio_std),
                "time_constant_std_s": _finite(m.time_constant_std_s),
            }
        )
    std = table.dc_gain_std
    gains = [
        {"input": table.inputs[j], "output": table.outputs[i], "gain": gain_value(table.dc_gain[i, j]),
         "std": None if std is None else gain_value(std[i, j])}
        for i in range(table.dc_gain.shape[0])
        for j in range(table.dc_gain.shape[1])
    ]
    return {
        "sample_time": table.sample_time,
        "n_states": table.n_states,
        "modes": modes,
        "dc_gain": gains,
        "dc_gain_matrix": [[gain_value(g) for g in row] for row in table.dc_gain],
        "zeros": [_cpx(complex(q)) for q in table.zeros],
        "warnings": dict(table.warnings),
        "thresholds": {f.name: getattr(table.thresholds, f.name) for f in fields(ModeThresholds)},
        "log_duration_s": table.log_duration_s,
    }
