"""What moved between a baseline model and a new one after a hardware change.

Modes of the two models are paired by an optimal assignment on a cost that
combines the relative frequency difference and the damping difference
(:func:`scipy.optimize.linear_sum_assignment`); pairs whose cost exceeds a
limit are reported as a vanished and an appeared mode instead. For every pair
the shift of natural frequency and damping ratio is given (and of the time
constant of a real mode, which real modes are judged by), with a significance
test when both models carry pole uncertainties. DC gains, the largest
frequency-response difference in the excited band, and (when a new log is
given) how well each model explains the new data complete the comparison.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
from scipy.optimize import linear_sum_assignment

from .._validate import as_signal, fraction, positive_float
from ..errors import OptionError
from ..lti.analysis import dc_gain, frequency_response
from ..lti.models import StateSpaceModel
from ..lti.simulate import estimate_initial_state, simulate
from .diagnostics import fit_percent
from .modes import Mode, mode_table

__all__ = [
    "MODE_STATUSES",
    "DriftThresholds",
    "ModeShift",
    "GainChange",
    "ResponseDifference",
    "DriftReport",
    "compare_models",
    "drift_report_to_dict",
    "match_modes",
]

#: How a mode of one model relates to the other model.
MODE_STATUSES = ("matched", "appeared", "vanished")


@dataclass(frozen=True, slots=True, eq=False)
class DriftThresholds:
    """Limits beyond which a change counts as a breach (a failed gate).

    Parameters
    ----------
    frequency_shift_percent : float
        Largest allowed change of a matched mode's natural frequency, in percent of
        the baseline frequency. Default 10.
    damping_shift : float
        Largest allowed absolute change of a matched mode's damping ratio. Default 0.05.
    dc_gain_change_percent : float
        Largest allowed change of any channel's DC gain, in percent. Default 20.
    response_difference_db : float
        Largest allowed difference of the frequency-response magnitudes in the
        excited band, in dB. Default 6.
    new_modes_allowed : bool
        When false, a mode that appears or vanishes is a breach. Default true.
    match_cost_limit : float
        Pairs of modes whose matching cost exceeds this are not paired. The cost is
        ``|ln(f_new / f_base)| + |zeta_new - zeta_base|``; the default 0.7 pairs modes
        within about a factor of two in frequency.
    time_constant_shift_percent : float
        Largest allowed change of a matched real (non-oscillating) mode's time
        constant, in percent of the baseline time constant. Default 10. Real modes
        are judged by their time constant, oscillations by their natural
        frequency (``frequency_shift_percent``) and damping.
    """

    frequency_shift_percent: float = 10.0
    damping_shift: float = 0.05
    dc_gain_change_percent: float = 20.0
    response_difference_db: float = 6.0
    new_modes_allowed: bool = True
    match_cost_limit: float = 0.7
    time_constant_shift_percent: float = 10.0

    def __post_init__(self) -> None:
        for name in ("frequency_shift_percent", "damping_shift", "dc_gain_change_percent",
                     "response_difference_db", "match_cost_limit", "time_constant_shift_percent"):
            object.__setattr__(self, name, positive_float(getattr(self, name), name))
        if not isinstance(self.new_modes_allowed, bool):
            raise OptionError(f"new_modes_allowed must be true or false; got {self.new_modes_allowed!r}")

    @classmethod
    def from_mapping(cls, mapping: dict[str, Any]) -> DriftThresholds:
        """Build from a pipeline-file table; unknown keys are an :class:`OptionError`."""
        allowed = set(cls.__dataclass_fields__)
        unknown = sorted(set(mapping) - allowed)
        if unknown:
            raise OptionError(
                f"unknown drift threshold {unknown[0]!r}; valid: {', '.join(sorted(allowed))}"
            )
        return cls(**mapping)


@dataclass(frozen=True, slots=True, eq=False)
class ModeShift:
    """One mode's change between the baseline and the new model.

    Parameters
    ----------
    status : {"matched", "appeared", "vanished"}
        ``appeared``: only in the new model; ``vanished``: only in the baseline.
    baseline, new : Mode or None
        The mode in each model (``None`` where absent).
    frequency_shift_hz, frequency_shift_percent, damping_shift : float or None
        New minus baseline; ``None`` unless matched.
    z_score : float or None
        Frequency shift divided by its standard uncertainty, when both modes
        carry uncertainties; ``None`` otherwise.
    in_band : bool
        Whether the mode lies in the compared (excited) band in either model.
        A mode outside it is reported but breaches nothing: the data cannot
        pin it down.
    breaches : tuple of str
        Which thresholds this mode exceeds.
    time_constant_shift_s, time_constant_shift_percent : float or None
        New minus baseline time constant of a matched real mode; ``None``
        otherwise.
    """

    status: str
    baseline: Mode | None
    new: Mode | None
    frequency_shift_hz: float | None
    frequency_shift_percent: float | None
    damping_shift: float | None
    z_score: float | None
    in_band: bool
    breaches: tuple[str, ...]
    time_constant_shift_s: float | None = None
    time_constant_shift_percent: float | None = None


@dataclass(frozen=True, slots=True, eq=False)
class GainChange:
    """Change of one channel's DC gain (``inf`` for an integrating channel)."""

    input: str
    output: str
    baseline: float
    new: float
    change_percent: float | None
    breach: bool


@dataclass(frozen=True, slots=True, eq=False)
class ResponseDifference:
    """Largest frequency-response magnitude difference within the band.

    Parameters
    ----------
    band_hz : tuple of float
        The band compared.
    largest_db : float
        Largest ``|20 log10 |G_new| - 20 log10 |G_base||`` over the band and all channels.
    at_frequency_hz : float
        Where it occurs.
    input, output : str
        In which channel.
    frequencies_hz : numpy.ndarray, shape (F,)
    baseline_db, new_db : numpy.ndarray, shape (F, p, m)
        Magnitudes, for plotting.
    """

    band_hz: tuple[float, float]
    largest_db: float
    at_frequency_hz: float
    input: str
    output: str
    frequencies_hz: np.ndarray
    baseline_db: np.ndarray
    new_db: np.ndarray


@dataclass(frozen=True, slots=True, eq=False)
class DriftReport:
    """Everything that moved between two models, with threshold breaches.

    ``old_model_fit`` and ``new_model_fit`` (fit percent per output on the new log)
    are ``None`` when no log was given.
    """

    mode_shifts: tuple[ModeShift, ...]
    gain_changes: tuple[GainChange, ...]
    response: ResponseDifference
    old_model_fit: np.ndarray | None
    new_model_fit: np.ndarray | None
    thresholds: DriftThresholds
    outputs: tuple[str, ...] = field(default=())
    breaches: tuple[str, ...] = field(default=())

    @property
    def passed(self) -> bool:
        """True when no threshold is breached."""
        return not self.breaches


def _log_freq(mode: Any) -> float:
    return math.log(max(mode.natural_frequency_hz or 0.0, 1e-300))


def _damping(mode: Any) -> float:
    # an integrator (z = 1) has no damping ratio; it sits with the non-oscillating modes
    return 1.0 if mode.damping_ratio is None else mode.damping_ratio


def _comparable(modes: tuple[Mode, ...]) -> tuple[Mode, ...]:
    # poles at z = 0 or on (or near) the negative real axis have no continuous-time meaning
    return tuple(m for m in modes if m.natural_frequency_hz is not None and "negative_real" not in m.flags)


#: Added to the matching cost when a complex pair would be paired with a real pole.
_PAIR_MISMATCH_COST = 10.0


def match_modes(base: Sequence[Any], new: Sequence[Any], limit: float) -> list[tuple[int | None, int | None]]:
    """Pair the modes of two models by an optimal assignment on frequency and damping.

    Parameters
    ----------
    base, new : sequence of Mode
        The modes to pair; anything with ``natural_frequency_hz`` (not None),
        ``damping_ratio`` (None for an integrator) and ``is_pair`` attributes.
    limit : float
        Pairs whose cost exceeds this are not paired
        (:attr:`DriftThresholds.match_cost_limit`).

    Returns
    -------
    list of (int or None, int or None)
        Index pairs ``(i, j)`` of paired modes, then ``(i, None)`` for every
        unpaired mode of ``base`` and ``(None, j)`` for every unpaired one of ``new``.

    Notes
    -----
    The cost of pairing is ``|ln(f_new / f_base)| + |zeta_new - zeta_base|`` (a real
    pole counts as damping ratio 1), plus 10 when a complex pair would meet a real
    pole. Leaving a mode unpaired costs ``limit / 2`` (so a pair costing more than
    ``limit`` is never worth making), and the total cost over pairs and unpaired
    modes is minimised exactly by :func:`scipy.optimize.linear_sum_assignment` [1]_
    on the matrix augmented with those options (gated assignment). Without the
    gate, the assignment would pair every mode of the smaller set and could trade
    a close pair for two costly ones that are then dropped: an extra mode in one
    model could unpair a mode both share.

    References
    ----------
    .. [1] H. W. Kuhn, "The Hungarian method for the assignment problem", Naval
       Research Logistics Quarterly 2, 83-97, 1955.
    """
    if not base or not new:
        return [(i, None) for i in range(len(base))] + [(None, j) for j in range(len(new))]
    cost = np.array(
        [
            [
                abs(_log_freq(b) - _log_freq(n))
                + abs(_damping(b) - _damping(n))
                + (_PAIR_MISMATCH_COST if b.is_pair != n.is_pair else 0.0)
                for n in new
            ]
            for b in base
        ]
    )
    nb, nn = cost.shape
    skip = np.full((nb, nb), np.inf)
    np.fill_diagonal(skip, limit / 2)  # base mode i left unpaired
    skip_new = np.full((nn, nn), np.inf)
    np.fill_diagonal(skip_new, limit / 2)  # new mode j left unpaired
    gated = np.block([[np.where(cost <= limit, cost, np.inf), skip], [skip_new, np.zeros((nn, nb))]])
    rows, cols = linear_sum_assignment(np.where(np.isfinite(gated), gated, 1e12))
    pairs: list[tuple[int | None, int | None]] = []
    used_b, used_n = set(), set()
    for i, j in zip(rows, cols, strict=True):
        if i < nb and j < nn and cost[i, j] <= limit:
            pairs.append((int(i), int(j)))
            used_b.add(int(i))
            used_n.add(int(j))
    pairs += [(i, None) for i in range(len(base)) if i not in used_b]
    pairs += [(None, j) for j in range(len(new)) if j not in used_n]
    return pairs


def _breach_text(kind: str, s: ModeShift, th: DriftThresholds) -> str:
    if kind == "frequency shift":
        return (
            f"frequency shift: mode at {s.baseline.natural_frequency_hz:.4g} Hz -> {s.new.natural_frequency_hz:.4g} Hz "
            f"({s.frequency_shift_percent:+.1f} %, limit {th.frequency_shift_percent:g} %)"
        )
    if kind == "damping shift":
        return (
            f"damping shift: mode at {s.baseline.natural_frequency_hz:.4g} Hz, damping ratio "
            f"{_damping(s.baseline):.3g} -> {_damping(s.new):.3g} ({s.damping_shift:+.3g}, "
            f"limit {th.damping_shift:g})"
        )
    if kind == "time-constant shift":
        return (
            f"time-constant shift: real mode with time constant {s.baseline.time_constant_s:.4g} s -> "
            f"{s.new.time_constant_s:.4g} s ({s.time_constant_shift_percent:+.1f} %, "
            f"limit {th.time_constant_shift_percent:g} %)"
        )
    m = s.baseline or s.new
    if not m.is_pair and m.time_constant_s is not None:  # type: ignore[union-attr]
        return f"{kind}: real mode with time constant {m.time_constant_s:.4g} s"  # type: ignore[union-attr]
    return f"{kind}: mode at {m.natural_frequency_hz:.4g} Hz"  # type: ignore[union-attr]


def _frequency_std(mode: Mode) -> float | None:
    std = getattr(mode, "natural_frequency_std_hz", None)
    return None if std is None or not math.isfinite(std) else float(std)


def _mode_shift(b: Mode | None, n: Mode | None, th: DriftThresholds, band_hz: tuple[float, float]) -> ModeShift:
    lo, hi = band_hz
    in_band = any(m is not None and lo <= m.natural_frequency_hz <= hi for m in (b, n))
    if b is None or n is None:
        status = "appeared" if b is None else "vanished"
        breaches = () if th.new_modes_allowed or not in_band else (f"mode {status}",)
        return ModeShift(status, b, n, None, None, None, None, in_band, breaches)
    df = n.natural_frequency_hz - b.natural_frequency_hz
    df_pct = 100.0 * df / b.natural_frequency_hz if b.natural_frequency_hz > 0 else math.inf
    dz = _damping(n) - _damping(b)
    sb, sn = _frequency_std(b), _frequency_std(n)
    z_score = df / math.hypot(sb, sn) if sb is not None and sn is not None and (sb or sn) else None
    breaches = []
    tb, tn = b.time_constant_s, n.time_constant_s
    real = not b.is_pair and not n.is_pair and tb is not None and tn is not None and tb > 0
    dtau = tn - tb if real else None
    dtau_pct = 100.0 * dtau / tb if real else None
    if real:
        if in_band and abs(dtau_pct) > th.time_constant_shift_percent:
            breaches.append("time-constant shift")
    elif in_band and abs(df_pct) > th.frequency_shift_percent:
        breaches.append("frequency shift")
    if in_band and abs(dz) > th.damping_shift:
        breaches.append("damping shift")
    return ModeShift("matched", b, n, df, df_pct, dz, z_score, in_band, tuple(breaches), dtau, dtau_pct)


def _response_difference(
    base: StateSpaceModel, new: StateSpaceModel, band_hz: tuple[float, float], n_points: int
) -> ResponseDifference:
    lo, hi = band_hz
    lo = max(lo, hi * 1e-4)
    freqs = np.geomspace(lo, hi, n_points)
    tiny = np.finfo(float).tiny
    gb = 20 * np.log10(np.maximum(np.abs(frequency_response(base, freqs)), tiny))
    gn = 20 * np.log10(np.maximum(np.abs(frequency_response(new, freqs)), tiny))
    diff = np.abs(gn - gb)
    k, i, j = np.unravel_index(int(np.argmax(diff)), diff.shape)
    return ResponseDifference(
        band_hz=(float(lo), float(hi)),
        largest_db=float(diff[k, i, j]),
        at_frequency_hz=float(freqs[k]),
        input=new.inputs[j],
        output=new.outputs[i],
        frequencies_hz=freqs,
        baseline_db=gb,
        new_db=gn,
    )


def _fit_on(model: StateSpaceModel, u: np.ndarray, y: np.ndarray) -> np.ndarray:
    op = model.operating_point
    du = u - (op.inputs if op is not None else u.mean(axis=0))
    dy = y - (op.outputs if op is not None else y.mean(axis=0))
    x0 = estimate_initial_state(model, du, dy)
    return fit_percent(dy, simulate(model, du, x0))


def compare_models(
    baseline: StateSpaceModel,
    new: StateSpaceModel,
    *,
    thresholds: DriftThresholds | None = None,
    band_hz: tuple[float, float] | None = None,
    u: np.ndarray | None = None,
    y: np.ndarray | None = None,
    n_points: int = 400,
    baseline_pole_covariance: np.ndarray | None = None,
    new_pole_covariance: np.ndarray | None = None,
) -> DriftReport:
    """Compare a new model with a baseline of the same rig.

    Parameters
    ----------
    baseline, new : StateSpaceModel
        Discrete-time models with the same inputs and outputs (by name and order)
        and the same sample time.
    thresholds : DriftThresholds, optional
        Breach limits; defaults as documented in :class:`DriftThresholds`.
    band_hz : (float, float), optional
        The band the excitation covered, in Hz: the frequency responses are
        compared there, and only modes inside it can breach a threshold.
        Default: from 1/1000 of Nyquist to 0.8 Nyquist.
    u, y : array_like, shape (N, m) and (N, p), optional
        A log of the NEW rig in absolute units; each model removes its own
        operating point, and both are scored on it by simulation fit percent.
    n_points : int
        Frequencies (log-spaced) in the band.
    baseline_pole_covariance, new_pole_covariance : array_like, shape (n, 2, 2), optional
        Covariance of ``(Re z, Im z)`` of each pole of each model, in
        ``model.poles()`` order (see :func:`ident.assess.modes.mode_table`; nan blocks
        mean unknown). When both are known, each matched mode gets the
        ``z_score`` of its frequency shift.

    Returns
    -------
    DriftReport
        Mode shifts, DC-gain changes, response difference, fits and breaches.

    Notes
    -----
    Poles at z = 0 or on (or near) the negative real axis have no
    continuous-time meaning and are left out of the mode comparison (the mode
    table flags them). A complex pair is never paired with a real pole.
    Mode matching minimises the total cost ``|ln(f_new/f_base)| + |zeta_new - zeta_base|``
    over one-to-one pairings (the assignment problem, solved exactly by
    :func:`scipy.optimize.linear_sum_assignment`).

    References
    ----------
    .. [1] H. W. Kuhn, "The Hungarian method for the assignment problem", Naval
       Research Logistics Quarterly 2, 83-97, 1955.
    """
    th = thresholds if thresholds is not None else DriftThresholds()
    if not isinstance(baseline, StateSpaceModel) or not isinstance(new, StateSpaceModel):
        raise OptionError("baseline and new must be StateSpaceModel objects")
    if baseline.sample_time is None or new.sample_time is None:
        raise OptionError("drift comparison needs two discrete-time models")
    if baseline.inputs != new.inputs or baseline.outputs != new.outputs:
        raise OptionError(
            f"models do not share signals: baseline {list(baseline.inputs)} -> {list(baseline.outputs)}, "
            f"new {list(new.inputs)} -> {list(new.outputs)}"
        )
    nyquist = 0.5 / new.sample_time
    if band_hz is None:
        band_hz = (nyquist * 1e-3, 0.8 * nyquist)
    else:
        lo, hi = (float(band_hz[0]), positive_float(band_hz[1], "band_hz[1]"))
        if not 0 <= lo < hi:
            raise OptionError(f"band_hz must be (low, high) with 0 <= low < high; got {band_hz}")
        fraction(hi / nyquist, "band_hz[1] / Nyquist", low=0.0, high=1.0, inclusive=True)
        band_hz = (lo, hi)

    base_modes = _comparable(mode_table(baseline, pole_covariance=baseline_pole_covariance).modes)
    new_modes = _comparable(mode_table(new, pole_covariance=new_pole_covariance).modes)
    shifts = tuple(
        _mode_shift(None if i is None else base_modes[i], None if j is None else new_modes[j], th, band_hz)
        for i, j in match_modes(base_modes, new_modes, th.match_cost_limit)
    )
    shifts = tuple(
        sorted(shifts, key=lambda s: (s.baseline or s.new).natural_frequency_hz)  # type: ignore[union-attr]
    )

    g_base, g_new = dc_gain(baseline), dc_gain(new)
    gains = []
    for i, out in enumerate(new.outputs):
        for j, inp in enumerate(new.inputs):
            b, n = float(g_base[i, j]), float(g_new[i, j])
            if math.isfinite(b) and math.isfinite(n) and b != 0:
                pct: float | None = 100.0 * (n - b) / abs(b)
            else:
                pct = None
            breach = pct is not None and abs(pct) > th.dc_gain_change_percent
            gains.append(GainChange(inp, out, b, n, pct, breach))

    response = _response_difference(baseline, new, band_hz, n_points)

    old_fit = new_fit = None
    if (u is None) != (y is None):
        raise OptionError("give both u and y of the new log, or neither")
    if u is not None:
        u = as_signal(u, "u", bounded=True)
        y = as_signal(y, "y", bounded=True)
        old_fit = _fit_on(baseline, u, y)
        new_fit = _fit_on(new, u, y)

    breaches = []
    for s in shifts:
        for b in s.breaches:
            breaches.append(_breach_text(b, s, th))
    for g in gains:
        if g.breach:
            breaches.append(f"DC gain {g.input} -> {g.output} changed by {g.change_percent:+.1f} %")
    if response.largest_db > th.response_difference_db:
        breaches.append(
            f"frequency response differs by {response.largest_db:.1f} dB at {response.at_frequency_hz:.4g} Hz "
            f"({response.input} -> {response.output})"
        )
    return DriftReport(
        mode_shifts=shifts,
        gain_changes=tuple(gains),
        response=response,
        old_model_fit=old_fit,
        new_model_fit=new_fit,
        thresholds=th,
        outputs=new.outputs,
        breaches=tuple(breaches),
    )


def _mode_dict(mode: Mode | None) -> dict | None:
    if mode is None:
        return None
    return {
        "natural_frequency_hz": mode.natural_frequency_hz,
        "damping_ratio": mode.damping_ratio,
        "time_constant_s": mode.time_constant_s,
        "is_pair": mode.is_pair,
        "natural_frequency_std_hz": mode.natural_frequency_std_hz,
        "damping_ratio_std": mode.damping_ratio_std,
    }


def drift_report_to_dict(report: DriftReport) -> dict:
    """Return a JSON-ready dict of a :class:`DriftReport` (None where a figure is absent)."""
    r = report.response
    th = report.thresholds
    return {
        "passed": report.passed,
        "breaches": list(report.breaches),
        "thresholds": {name: getattr(th, name) for name in th.__dataclass_fields__},
        "modes": [
            {
                "status": s.status,
                "baseline": _mode_dict(s.baseline),
                "new": _mode_dict(s.new),
                "frequency_shift_hz": s.frequency_shift_hz,
                "frequency_shift_percent": s.frequency_shift_percent,
                "damping_shift": s.damping_shift,
                "time_constant_shift_s": s.time_constant_shift_s,
                "time_constant_shift_percent": s.time_constant_shift_percent,
                "z_score": s.z_score,
                "in_band": s.in_band,
                "breaches": list(s.breaches),
            }
            for s in report.mode_shifts
        ],
        "dc_gains": [
            {"input": g.input, "output": g.output, "baseline": g.baseline, "new": g.new,
             "change_percent": g.change_percent, "breach": g.breach}
            for g in report.gain_changes
        ],
        "response_difference": {
            "band_hz": list(r.band_hz),
            "largest_db": r.largest_db,
            "at_frequency_hz": r.at_frequency_hz,
            "input": r.input,
            "output": r.output,
        },
        "fit_on_new_log": None
        if report.new_model_fit is None
        else {
            "outputs": list(report.outputs),
            "baseline_model": [float(v) for v in report.old_model_fit],
            "new_model": [float(v) for v in report.new_model_fit],
        },
    }
