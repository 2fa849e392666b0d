"""Engineer-stated expectations about a model, and their checks.

An engineer writes down what the hardware should show; each statement is
checked against a model's :class:`~ident.assess.modes.ModeTable` and reported as met
or not, with the measured value. The statements come from a TOML table
``[expect]`` (in an expectations file or a pipeline file)::

    [expect]
    stable = true              # no pole outside the unit circle
    max_order = 6              # at most this many states
    integrators = 0            # exactly this many poles at z = 1
    no_mode_above_hz = 200     # no mode with a natural frequency above this

    [[expect.mode]]            # a mode in a band (repeat for more modes)
    name = "belt resonance"    # optional label used in the report
    frequency_hz = [25, 45]    # natural frequency band, Hz
    damping_ratio = [0.01, 0.2]  # optional damping-ratio range

    [[expect.mode]]            # a real (non-oscillating) mode, for thermal and process rigs
    name = "platen heating"
    time_constant_s = [300, 500]  # time-constant range, s

A mode expectation gives ``frequency_hz`` (any mode whose natural frequency is
in the band, optionally with ``damping_ratio``) or ``time_constant_s`` (a real
mode whose time constant is in the range), not both.

    [[expect.dc_gain]]         # a steady-state gain (repeat per channel)
    input = "motor_torque_cmd" # may be left out when the model has one input
    output = "motor_speed"     # may be left out when the model has one output
    sign = "positive"          # "positive" or "negative" (optional)
    range = [10, 100]          # output units per input unit (optional)

Every key is optional; ``stable = false`` states nothing. A ``dc_gain`` entry
needs ``sign`` or ``range``. Ranges are closed intervals ``[low, high]``.
Unknown keys and wrong types raise :class:`ident.errors.PipelineError` naming
the key path (``expect.mode[2].frequncy_hz``, entries counted from 1) and the
nearest valid key.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._validate import did_you_mean
from ..errors import OptionError, PipelineError
from ..lti.models import StateSpaceModel
from .modes import ModeTable

__all__ = [
    "SIGNS",
    "ModeExpectation",
    "DcGainExpectation",
    "Expectations",
    "ExpectationResult",
    "check_expectations",
]

#: Allowed values of ``sign`` in a ``dc_gain`` expectation.
SIGNS: tuple[str, ...] = ("positive", "negative")

_TOP_KEYS = ("stable", "max_order", "integrators", "no_mode_above_hz", "mode", "dc_gain")
_MODE_KEYS = ("name", "frequency_hz", "damping_ratio", "time_constant_s")
_GAIN_KEYS = ("input", "output", "sign", "range")


@dataclass(frozen=True, slots=True, eq=False)
class ModeExpectation:
    """A mode expected in a natural-frequency band (with a damping range), or a real mode with a time constant.

    Attributes
    ----------
    name : str
        Label used in the report.
    frequency_hz : tuple of float or None
        Closed band ``(low, high)`` of the natural frequency, Hz; ``None`` for a
        time-constant expectation.
    damping_ratio : tuple of float or None
        Closed range ``(low, high)`` of the damping ratio, or ``None`` for any.
    key_path : str
        Where the expectation was stated, e.g. ``"expect.mode[1]"``.
    time_constant_s : tuple of float or None
        Closed range ``(low, high)`` of the time constant of a real mode, s; when
        given, ``frequency_hz`` is ``None``.
    """

    name: str
    frequency_hz: tuple[float, float] | None
    damping_ratio: tuple[float, float] | None
    key_path: str
    time_constant_s: tuple[float, float] | None = None


@dataclass(frozen=True, slots=True, eq=False)
class DcGainExpectation:
    """An expected sign and/or range of one channel's DC gain.

    Attributes
    ----------
    input, output : str or None
        Signal names; ``None`` means the model's only input (output).
    sign : str or None
        One of :data:`SIGNS`, or ``None``.
    range : tuple of float or None
        Closed range ``(low, high)`` in output units per input unit, or ``None``.
    key_path : str
        Where the expectation was stated, e.g. ``"expect.dc_gain[1]"``.
    """

    input: str | None
    output: str | None
    sign: str | None
    range: tuple[float, float] | None
    key_path: str


@dataclass(frozen=True, slots=True, eq=False, kw_only=True)
class Expectations:
    """What the engineer expects the model to show.

    Parameters
    ----------
    stable : bool, default False
        True: no pole may be flagged ``unstable``. False states nothing.
    max_order : int or None
        Largest acceptable number of states.
    integrators : int or None
        Exact number of poles at ``z = 1`` (flag ``integrator``, counting
        multiplicity).
    no_mode_above_hz : float or None
        No mode may have a natural frequency above this, Hz.
    modes : tuple of ModeExpectation
        Modes expected in frequency bands.
    dc_gains : tuple of DcGainExpectation
        Expected DC-gain signs and ranges.
    source : str or None
        File the expectations came from.
    """

    stable: bool = False
    max_order: int | None = None
    integrators: int | None = None
    no_mode_above_hz: float | None = None
    modes: tuple[ModeExpectation, ...] = ()
    dc_gains: tuple[DcGainExpectation, ...] = ()
    source: str | None = None

    @property
    def is_empty(self) -> bool:
        """True when nothing is stated."""
        return not (
            self.stable
            or self.max_order is not None
            or self.integrators is not None
            or self.no_mode_above_hz is not None
            or self.modes
            or self.dc_gains
        )

    @classmethod
    def from_mapping(
        cls, mapping: Any, *, source: str | None = None, key_path: str = "expect"
    ) -> Expectations:
        """Parse the contents of an ``[expect]`` table.

        Parameters
        ----------
        mapping : mapping
            The table (as :mod:`tomllib` gives it).
        source : str, optional
            File it came from, for error messages.
        key_path : str, default "expect"
            Key path of the table in its file, for error messages.

        Returns
        -------
        Expectations

        Raises
        ------
        ident.errors.PipelineError
            Unknown key (with the nearest valid one as hint), wrong type or an
            empty or reversed range.
        """
        table = _table(mapping, key_path, source, _TOP_KEYS)
        stable = table.get("stable", False)
        if not isinstance(stable, bool):
            _fail("must be true or false", f"{key_path}.stable", source, stable)
        max_order = _count(table, "max_order", key_path, source, low=1)
        integrators = _count(table, "integrators", key_path, source, low=0)
        above = table.get("no_mode_above_hz")
        if above is not None:
            above = _number(above, f"{key_path}.no_mode_above_hz", source)
            if above <= 0:
                _fail("must be a positive number", f"{key_path}.no_mode_above_hz", source, above)
        modes = tuple(
            _parse_mode(item, f"{key_path}.mode[{i}]", source, i)
            for i, item in enumerate(_array(table, "mode", key_path, source), start=1)
        )
        gains = tuple(
            _parse_gain(item, f"{key_path}.dc_gain[{i}]", source)
            for i, item in enumerate(_array(table, "dc_gain", key_path, source), start=1)
        )
        return cls(
            stable=stable,
            max_order=max_order,
            integrators=integrators,
            no_mode_above_hz=above,
            modes=modes,
            dc_gains=gains,
            source=source,
        )


@dataclass(frozen=True, slots=True, eq=False)
class ExpectationResult:
    """Outcome of one expectation.

    Attributes
    ----------
    name : str
        Short label, e.g. ``"stable"`` or ``"mode 'belt resonance'"``.
    key_path : str
        Where it was stated, e.g. ``"expect.mode[1]"``.
    met : bool
        Whether the model meets it.
    measured : str
        What the model shows, in words and numbers.
    expected : str
        What was expected.
    measured_value : float or None
        The main measured number (a frequency in Hz, a gain, an order), when
        there is one.
    """

    name: str
    key_path: str
    met: bool
    measured: str
    expected: str
    measured_value: float | None = None


# --------------------------------------------------------------------------- parsing


def _fail(reason: str, key_path: str, source: str | None, value: Any = None, hint: str | None = None):
    got = "" if value is None else f"; got {value!r}"
    raise PipelineError(f"{reason}{got}", path=source, key_path=key_path, hint=hint)


def _table(mapping: Any, key_path: str, source: str | None, valid: tuple[str, ...]) -> Mapping:
    if not isinstance(mapping, Mapping):
        _fail("must be a table", key_path, source, mapping)
    for key in mapping:
        if key not in valid:
            _fail(
                f"unknown key {key!r} (valid: {', '.join(valid)})",
                f"{key_path}.{key}",
                source,
                hint=did_you_mean(key, valid),
            )
    return mapping


def _number(value: Any, key_path: str, source: str | None) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        _fail("must be a finite number", key_path, source, value)
    return float(value)


def _count(table: Mapping, key: str, key_path: str, source: str | None, *, low: int) -> int | None:
    value = table.get(key)
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, int) or value < low:
        _fail(f"must be an integer >= {low}", f"{key_path}.{key}", source, value)
    return int(value)


def _interval(value: Any, key_path: str, source: str | None) -> tuple[float, float]:
    if not isinstance(value, Sequence) or isinstance(value, str) or len(value) != 2:
        _fail("must be a pair [low, high]", key_path, source, value)
    low = _number(value[0], key_path, source)
    high = _number(value[1], key_path, source)
    if low > high:
        _fail("must have low <= high", key_path, source, list(value))
    return (low, high)


def _array(table: Mapping, key: str, key_path: str, source: str | None) -> list:
    value = table.get(key, [])
    if isinstance(value, Mapping):
        value = [value]  # a single [expect.mode] table instead of [[expect.mode]]
    if not isinstance(value, list):
        _fail(f"must be a list of tables ([[{key_path}.{key}]])", f"{key_path}.{key}", source, value)
    return value


def _parse_mode(item: Any, key_path: str, source: str | None, index: int) -> ModeExpectation:
    table = _table(item, key_path, source, _MODE_KEYS)
    name = table.get("name", f"mode {index}")
    if not isinstance(name, str):
        _fail("must be a string", f"{key_path}.name", source, name)
    if ("frequency_hz" in table) == ("time_constant_s" in table):
        _fail("needs 'frequency_hz' (the natural-frequency band [low, high] in Hz) or 'time_constant_s' "
              "(the time-constant range [low, high] in s of a real mode), one of them", key_path, source)
    if "time_constant_s" in table:
        tau = _interval(table["time_constant_s"], f"{key_path}.time_constant_s", source)
        if tau[0] <= 0:
            _fail("must be positive", f"{key_path}.time_constant_s", source, list(tau))
        if "damping_ratio" in table:
            _fail("applies to frequency_hz expectations only (a real mode has no damping ratio to check)",
                  f"{key_path}.damping_ratio", source)
        return ModeExpectation(name=name, frequency_hz=None, damping_ratio=None, key_path=key_path,
                               time_constant_s=tau)
    band = _interval(table["frequency_hz"], f"{key_path}.frequency_hz", source)
    if band[0] < 0:
        _fail("must not be negative", f"{key_path}.frequency_hz", source, list(band))
    damping = table.get("damping_ratio")
    if damping is not None:
        damping = _interval(damping, f"{key_path}.damping_ratio", source)
    return ModeExpectation(name=name, frequency_hz=band, damping_ratio=damping, key_path=key_path)


def _parse_gain(item: Any, key_path: str, source: str | None) -> DcGainExpectation:
    table = _table(item, key_path, source, _GAIN_KEYS)
    names = {}
    for key in ("input", "output"):
        value = table.get(key)
        if value is not None and not isinstance(value, str):
            _fail("must be a signal name (a string)", f"{key_path}.{key}", source, value)
        names[key] = value
    sign = table.get("sign")
    if sign is not None and sign not in SIGNS:
        _fail(
            f"must be one of {', '.join(map(repr, SIGNS))}",
            f"{key_path}.sign",
            source,
            sign,
            hint=did_you_mean(sign, SIGNS),
        )
    rng = table.get("range")
    if rng is not None:
        rng = _interval(rng, f"{key_path}.range", source)
    if sign is None and rng is None:
        _fail("needs 'sign' or 'range'", key_path, source)
    return DcGainExpectation(
        input=names["input"], output=names["output"], sign=sign, range=rng, key_path=key_path
    )


# --------------------------------------------------------------------------- checking


def _fmt(x: float) -> str:
    return f"{x:.4g}"


def _band(b: tuple[float, float]) -> str:
    return f"[{_fmt(b[0])}, {_fmt(b[1])}]"


def check_expectations(
    model: StateSpaceModel, table: ModeTable, expectations: Expectations
) -> tuple[ExpectationResult, ...]:
    """Check each stated expectation against a model and its mode table.

    Parameters
    ----------
    model : StateSpaceModel
        The model (for its order and signal names).
    table : ModeTable
        Its mode table, from :func:`ident.assess.modes.mode_table`.
    expectations : Expectations
        What is expected.

    Returns
    -------
    tuple of ExpectationResult
        One per statement, in the order: stable, max_order, integrators,
        no_mode_above_hz, each mode, each dc_gain.

    Raises
    ------
    ident.errors.PipelineError
        A ``dc_gain`` expectation names a signal the model does not have, or
        leaves the signal out on a model with several.

    Notes
    -----
    A mode expectation is met when some mode's natural frequency lies in the
    band and (when given) its damping ratio in the range; several expectations
    may be met by the same mode. Poles at ``z = 0`` (pure delays) have no
    frequency and are ignored by the frequency checks.
    """
    if not isinstance(model, StateSpaceModel):
        raise OptionError(f"model must be a StateSpaceModel; got {type(model).__name__}")
    if not isinstance(table, ModeTable):
        raise OptionError(f"table must be a ModeTable; got {type(table).__name__}")
    if not isinstance(expectations, Expectations):
        raise OptionError(f"expectations must be Expectations; got {type(expectations).__name__}")
    e = expectations
    out: list[ExpectationResult] = []
    top = "expect"
    if e.stable:
        mags = [abs(m.z) for m in table.modes]
        worst = max(mags, default=0.0)
        n_bad = sum(m.multiplicity for m in table.modes if "unstable" in m.flags)
        out.append(
            ExpectationResult(
                name="stable",
                key_path=f"{top}.stable",
                met=n_bad == 0,
                measured=f"largest |z| = {worst:.6g}"
                + (f"; {n_bad} unstable pole(s)" if n_bad else ""),
                expected=f"every |z| <= 1 + {table.thresholds.stability_tolerance:g}",
                measured_value=worst,
            )
        )
    if e.max_order is not None:
        n = model.n_states
        out.append(
            ExpectationResult(
                name="max_order",
                key_path=f"{top}.max_order",
                met=n <= e.max_order,
                measured=f"{n} states",
                expected=f"at most {e.max_order} states",
                measured_value=float(n),
            )
        )
    if e.integrators is not None:
        k = sum(m.multiplicity for m in table.modes if "integrator" in m.flags)
        out.append(
            ExpectationResult(
                name="integrators",
                key_path=f"{top}.integrators",
                met=k == e.integrators,
                measured=f"{k} pole(s) at z = 1",
                expected=f"exactly {e.integrators}",
                measured_value=float(k),
            )
        )
    freqs = [m.natural_frequency_hz for m in table.modes if m.natural_frequency_hz is not None]
    if e.no_mode_above_hz is not None:
        fastest = max(freqs, default=0.0)
        out.append(
            ExpectationResult(
                name="no_mode_above_hz",
                key_path=f"{top}.no_mode_above_hz",
                met=fastest <= e.no_mode_above_hz,
                measured=f"fastest mode at {_fmt(fastest)} Hz" if freqs else "no modes",
                expected=f"no mode above {_fmt(e.no_mode_above_hz)} Hz",
                measured_value=fastest if freqs else None,
            )
        )
    for me in e.modes:
        out.append(_check_mode(me, table))
    for ge in e.dc_gains:
        out.append(_check_gain(ge, table, e.source))
    return tuple(out)


def _describe(mode) -> str:
    zeta = "undefined" if mode.damping_ratio is None else f"{mode.damping_ratio:.3g}"
    return f"mode at {_fmt(mode.natural_frequency_hz)} Hz, damping ratio {zeta}"


def _check_time_constant(me: ModeExpectation, table: ModeTable) -> ExpectationResult:
    lo, hi = me.time_constant_s
    expected = f"a real mode with time constant in {_band(me.time_constant_s)} s"
    candidates = [m for m in table.modes if not m.is_pair and m.time_constant_s is not None]
    centre = math.sqrt(lo * hi)  # time constants spread over decades: the geometric centre

    def distance(m) -> float:
        return abs(math.log(m.time_constant_s / centre))

    in_range = [m for m in candidates if lo <= m.time_constant_s <= hi]
    if in_range:
        best = min(in_range, key=distance)
        measured, met = f"real mode with time constant {_fmt(best.time_constant_s)} s", True
    elif candidates:
        best = min(candidates, key=distance)
        measured, met = f"no real mode in the range; nearest: time constant {_fmt(best.time_constant_s)} s", False
    else:
        best, measured, met = None, "the model has no real modes", False
    return ExpectationResult(
        name=f"mode {me.name!r}", key_path=me.key_path, met=met, measured=measured, expected=expected,
        measured_value=None if best is None else best.time_constant_s,
    )


def _check_mode(me: ModeExpectation, table: ModeTable) -> ExpectationResult:
    if me.time_constant_s is not None:
        return _check_time_constant(me, table)
    lo, hi = me.frequency_hz
    expected = f"natural frequency in {_band(me.frequency_hz)} Hz"
    if me.damping_ratio is not None:
        expected += f", damping ratio in {_band(me.damping_ratio)}"
    candidates = [m for m in table.modes if m.natural_frequency_hz is not None]
    in_band = [m for m in candidates if lo <= m.natural_frequency_hz <= hi]

    def damping_ok(m) -> bool:
        if me.damping_ratio is None:
            return True
        return m.damping_ratio is not None and (
            me.damping_ratio[0] <= m.damping_ratio <= me.damping_ratio[1]
        )

    centre = 0.5 * (lo + hi)
    matches = [m for m in in_band if damping_ok(m)]
    if matches:
        best = min(matches, key=lambda m: abs(m.natural_frequency_hz - centre))
        measured, met = _describe(best), True
    elif in_band:
        best = min(in_band, key=lambda m: abs(m.natural_frequency_hz - centre))
        measured, met = _describe(best) + " (damping outside the range)", False
    elif candidates:
        best = min(candidates, key=lambda m: abs(m.natural_frequency_hz - centre))
        measured, met = "no mode in the band; nearest: " + _describe(best), False
    else:
        best, measured, met = None, "the model has no modes", False
    return ExpectationResult(
        name=f"mode {me.name!r}",
        key_path=me.key_path,
        met=met,
        measured=measured,
        expected=expected,
        measured_value=None if best is None else best.natural_frequency_hz,
    )


def _pick(name: str | None, names: tuple[str, ...], what: str, key_path: str, source) -> int:
    if name is None:
        if len(names) != 1:
            _fail(
                f"the model has {len(names)} {what}s ({', '.join(names)}); name one with {what!r}",
                key_path,
                source,
            )
        return 0
    if name not in names:
        _fail(
            f"the model has no {what} {name!r} (it has {', '.join(names)})",
            f"{key_path}.{what}",
            source,
            hint=did_you_mean(name, names),
        )
    return names.index(name)


def _check_gain(ge: DcGainExpectation, table: ModeTable, source) -> ExpectationResult:
    j = _pick(ge.input, table.inputs, "input", ge.key_path, source)
    i = _pick(ge.output, table.outputs, "output", ge.key_path, source)
    g = float(table.dc_gain[i, j])
    parts, met = [], True
    if ge.sign is not None:
        parts.append(ge.sign)
        met &= bool(g > 0) if ge.sign == "positive" else bool(g < 0)
    if ge.range is not None:
        parts.append(f"in {_band(ge.range)}")
        met &= bool(np.isfinite(g) and ge.range[0] <= g <= ge.range[1])
    label = f"{table.inputs[j]} -> {table.outputs[i]}"
    measured = f"{_fmt(g)}" if np.isfinite(g) else f"{g} (integrator)"
    return ExpectationResult(
        name=f"dc_gain {label}",
        key_path=ge.key_path,
        met=bool(met),
        measured=f"DC gain {measured}",
        expected="DC gain " + " and ".join(parts),
        measured_value=g if np.isfinite(g) else None,
    )
