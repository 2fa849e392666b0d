"""Judging the units of a fleet against each other: modes matched across units and a robust outlier rule.

Many units of one design (produced drives, valves, or the rigs of a lab) are
identified by the same pipeline. To say that "mode 2" of one unit is the same
physical mode as "mode 2" of another, every unit's modes are paired with one
reference set (a reference model, or the fleet's median unit) by the optimal
assignment of :func:`ident.assess.drift.match_modes`; a mode that pairs with
no reference mode starts a new fleet mode, which later units can pair with.

Each figure of merit (a mode's natural frequency, damping ratio or time
constant, a fit, a DC gain) is then screened with a robust z-score: its
distance from the fleet median in units of the scaled median absolute
deviation, ``z = (x - median) / (1.4826 MAD)``. The scale factor makes the
MAD estimate the standard deviation of normally distributed values, and
median and MAD are not moved by the outliers they are meant to find
(breakdown point 50 %), unlike mean and standard deviation.

Only numpy and scipy (through the drift module's matching) are used.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from .._validate import fraction, int_in_range, positive_float
from ..errors import OptionError
from .drift import match_modes

__all__ = [
    "MAD_SCALE",
    "SIDES",
    "OutlierRule",
    "ModePoint",
    "FleetModes",
    "Quantity",
    "RobustScreen",
    "match_fleet_modes",
    "median_unit",
    "robust_screen",
    "screen_reasons",
    "presence_reasons",
    "chance_flags",
]

#: Factor that turns the median absolute deviation into a standard-deviation estimate
#: for normal data, 1 / Phi^-1(3/4) (as ``scipy.stats.median_abs_deviation(scale="normal")``).
MAD_SCALE = 1.482602218505602
#: Which deviations of a quantity count: both directions, only low values, only high values.
SIDES = ("both", "low", "high")


@dataclass(frozen=True, slots=True, eq=False)
class OutlierRule:
    """The robust rule that marks a unit as an outlier (the ``[fleet]`` table of a pipeline).

    Parameters
    ----------
    threshold : float
        A value is an outlier when its robust z-score ``(x - median) / scale``
        exceeds this in magnitude. Default 3.5, the limit Iglewicz and Hoaglin
        recommend for the modified z-score [1]_.
    min_units : int
        A quantity is screened only when at least this many units have a value
        for it; presence of modes likewise. Default 5.
    min_relative_spread : float
        Floor of the scale as a fraction of ``|median|``, so a fleet whose units
        agree almost exactly (quantised or simulated data, MAD near 0) does not
        flag differences of no practical size. Default 0.005 (0.5 %).
    rare_mode_fraction : float
        A fleet mode present in fewer than this fraction of the units is rare:
        a unit that has it is an outlier ("extra mode"), and a unit that lacks a
        mode present in at least this fraction is one too ("lacks mode").
        Default 0.5.
    match_cost_limit : float
        Largest cost ``|ln(f / f_ref)| + |zeta - zeta_ref|`` at which a unit's mode
        is paired with a fleet mode. Default 0.7 (as
        :class:`ident.assess.drift.DriftThresholds`).

    References
    ----------
    .. [1] B. Iglewicz and D. C. Hoaglin, "How to Detect and Handle Outliers",
       ASQC Basic References in Quality Control vol. 16, ASQC Quality Press, 1993,
       section 3.3.
    """

    threshold: float = 3.5
    min_units: int = 5
    min_relative_spread: float = 0.005
    rare_mode_fraction: float = 0.5
    match_cost_limit: float = 0.7

    def __post_init__(self) -> None:
        object.__setattr__(self, "threshold", positive_float(self.threshold, "threshold"))
        object.__setattr__(self, "min_units", int_in_range(self.min_units, "min_units", 3))
        object.__setattr__(self, "min_relative_spread",
                           fraction(self.min_relative_spread, "min_relative_spread", low=0.0, high=1.0,
                                    inclusive=True))
        object.__setattr__(self, "rare_mode_fraction",
                           fraction(self.rare_mode_fraction, "rare_mode_fraction", low=0.0, high=1.0))
        object.__setattr__(self, "match_cost_limit", positive_float(self.match_cost_limit, "match_cost_limit"))

    @classmethod
    def from_mapping(cls, mapping: dict[str, Any]) -> OutlierRule:
        """Build from a pipeline-file table; unknown keys are an :class:`OptionError`."""
        allowed = set(cls.__dataclass_fields__)
        unknown = sorted(set(mapping) - allowed)
        if unknown:
            raise OptionError(f"unknown outlier rule key {unknown[0]!r}; valid: {', '.join(sorted(allowed))}")
        return cls(**mapping)

    def to_dict(self) -> dict[str, Any]:
        """Return the rule as plain data."""
        return {name: getattr(self, name) for name in self.__dataclass_fields__}

    def statement(self) -> str:
        """Return the rule in one sentence, as the reports state it."""
        return (
            f"a value is an outlier when |x - median| > {self.threshold:g} x scale, where scale = "
            f"{MAD_SCALE:.4f} x MAD (median absolute deviation from the fleet median), but at least "
            f"{100 * self.min_relative_spread:g} % of |median|; fits are screened on the low side only; "
            f"a quantity is screened when at least {self.min_units} units have it; a mode present in fewer "
            f"than {100 * self.rare_mode_fraction:g} % of the units is rare (a unit with it has an extra "
            "mode, unless the unit's data do not pin that mode down: its confidence region crosses the unit "
            "circle or its pole nearly cancels a zero), and a unit without a mode the others have lacks it"
        )


@dataclass(frozen=True, slots=True, eq=False)
class ModePoint:
    """One mode of one unit, as the fleet comparison needs it.

    Parameters
    ----------
    natural_frequency_hz : float
    damping_ratio : float or None
        ``None`` for an integrator.
    time_constant_s : float or None
    is_pair : bool
        A complex-conjugate pair (oscillating mode) rather than a real pole.
    identified : bool
        The unit's data pin the mode down: its 95 % confidence region does not
        cross the unit circle (no ``uncertain_stability`` flag) and the pole does
        not nearly cancel a zero (no ``near_cancellation`` flag). A mode the data
        cannot even call stable or unstable, or one that hardly enters the unit's
        response, is no evidence that a unit is odd.
    """

    natural_frequency_hz: float
    damping_ratio: float | None
    time_constant_s: float | None
    is_pair: bool
    identified: bool = True


@dataclass(frozen=True, slots=True, eq=False)
class FleetModes:
    """Every unit's modes under one numbering.

    Attributes
    ----------
    reference : tuple of ModePoint
        One per fleet mode, in the order of the numbering (by median natural
        frequency over the units that have it): the reference's mode, or for a
        mode the reference lacks, the first unit's mode that started it.
    from_reference : tuple of bool
        Whether each fleet mode is a mode of the reference.
    assignment : numpy.ndarray of int, shape (n_units, n_fleet_modes)
        Index of the unit's mode paired with each fleet mode; -1 where the unit
        has none.
    counts : numpy.ndarray of int, shape (n_fleet_modes,)
        How many units have each fleet mode.
    """

    reference: tuple[ModePoint, ...]
    from_reference: tuple[bool, ...]
    assignment: np.ndarray
    counts: np.ndarray


@dataclass(frozen=True, slots=True, eq=False)
class Quantity:
    """A figure of merit screened across the fleet (one column of the fleet table).

    Parameters
    ----------
    name : str
        Column name, e.g. ``"mode_2_natural_frequency_hz"``.
    label : str
        Words for reports, e.g. ``"mode 2 natural frequency"``.
    unit : str
        Unit of measure (may be empty).
    side : {"both", "low", "high"}
        Which deviations count.
    """

    name: str
    label: str
    unit: str
    side: str = "both"

    def __post_init__(self) -> None:
        if self.side not in SIDES:
            raise OptionError(f"side must be one of {', '.join(SIDES)}; got {self.side!r}")


@dataclass(frozen=True, slots=True, eq=False)
class RobustScreen:
    """Robust z-scores of every unit for every quantity.

    Attributes
    ----------
    quantities : tuple of Quantity
    values : numpy.ndarray, shape (n_units, n_quantities)
        The values screened (nan where a unit has none).
    median, mad, scale : numpy.ndarray, shape (n_quantities,)
        Fleet median, median absolute deviation, and the scale used
        (``max(MAD_SCALE * mad, min_relative_spread * |median|)``); nan for a
        quantity with fewer than ``min_units`` values.
    n_values : numpy.ndarray of int, shape (n_quantities,)
    z : numpy.ndarray, shape (n_units, n_quantities)
        ``(x - median) / scale``; nan where not screened.
    flagged : numpy.ndarray of bool, shape (n_units, n_quantities)
    rule : OutlierRule
    """

    quantities: tuple[Quantity, ...]
    values: np.ndarray
    median: np.ndarray
    mad: np.ndarray
    scale: np.ndarray
    n_values: np.ndarray
    z: np.ndarray
    flagged: np.ndarray
    rule: OutlierRule


# --------------------------------------------------------------------------- modes


def _cost_vector(modes: Sequence[ModePoint]) -> np.ndarray:
    """(log frequency, damping) per mode, a real pole counting as damping 1 (as the drift matching)."""
    return np.array([[math.log(max(m.natural_frequency_hz, 1e-300)),
                      1.0 if m.damping_ratio is None else m.damping_ratio] for m in modes]).reshape(-1, 2)


def median_unit(units: Sequence[Sequence[ModePoint]]) -> int | None:
    """Index of the fleet's median unit: the most typical set of modes.

    Among the units with the most common number of modes (ties: the larger
    number), the one whose modes, sorted by frequency, lie closest to the
    element-wise median of log frequency and damping ratio (distance
    ``sum |ln f - median| + |zeta - median|``, the matching cost). Ties go to
    the first unit.

    Parameters
    ----------
    units : sequence of sequence of ModePoint
        Each unit's modes.

    Returns
    -------
    int or None
        ``None`` when there are no units.
    """
    if not units:
        return None
    counts = [len(m) for m in units]
    tally: dict[int, int] = {}
    for c in counts:
        tally[c] = tally.get(c, 0) + 1
    common = max(tally, key=lambda c: (tally[c], c))
    members = [k for k, c in enumerate(counts) if c == common]
    if common == 0:
        return members[0]
    stacks = np.stack([_cost_vector(sorted(units[k], key=lambda m: m.natural_frequency_hz)) for k in members])
    centre = np.median(stacks, axis=0)
    distance = np.abs(stacks - centre).sum(axis=(1, 2))
    return members[int(np.argmin(distance))]


def match_fleet_modes(
    units: Sequence[Sequence[ModePoint]], reference: Sequence[ModePoint], *, limit: float = 0.7
) -> FleetModes:
    """Assign fleet mode numbers to every unit's modes, one number per physical mode.

    Parameters
    ----------
    units : sequence of sequence of ModePoint
        Each unit's modes, in any order; units are taken in the order given.
    reference : sequence of ModePoint
        The reference modes (a reference model's, or the median unit's).
    limit : float
        Largest matching cost of a pair (see :func:`ident.assess.drift.match_modes`).

    Returns
    -------
    FleetModes

    Notes
    -----
    Each unit's modes are paired with the fleet modes known so far (the
    reference's, then any started by earlier units) by one optimal assignment
    (:func:`ident.assess.drift.match_modes`); an unpaired mode of the unit starts a
    new fleet mode. Fleet modes are then numbered by their median natural
    frequency over the units that have them (the reference's own frequency for a
    mode no unit has).
    """
    limit = positive_float(limit, "limit")
    fleet: list[ModePoint] = list(reference)
    rows: list[dict[int, int]] = []
    for modes in units:
        row: dict[int, int] = {}
        for i, j in match_modes(tuple(fleet), tuple(modes), limit):
            if j is None:
                continue
            if i is None:
                fleet.append(modes[j])
                i = len(fleet) - 1
            row[i] = j
        rows.append(row)
    assignment = np.full((len(units), len(fleet)), -1, dtype=int)
    for u, row in enumerate(rows):
        for i, j in row.items():
            assignment[u, i] = j
    centre = []
    for i, mode in enumerate(fleet):
        have = [units[u][assignment[u, i]].natural_frequency_hz for u in range(len(units)) if assignment[u, i] >= 0]
        centre.append(float(np.median(have)) if have else mode.natural_frequency_hz)
    order = sorted(range(len(fleet)), key=lambda i: (centre[i], i))
    assignment = assignment[:, order]
    return FleetModes(
        reference=tuple(fleet[i] for i in order),
        from_reference=tuple(i < len(reference) for i in order),
        assignment=assignment,
        counts=(assignment >= 0).sum(axis=0),
    )


# --------------------------------------------------------------------------- screening


def robust_screen(values: Any, quantities: Sequence[Quantity], rule: OutlierRule | None = None) -> RobustScreen:
    """Robust z-score of every value against the fleet median and MAD.

    Parameters
    ----------
    values : array_like, shape (n_units, n_quantities)
        One row per unit; nan where a unit has no value (a mode it lacks, a
        failed unit). Infinite values (an integrating channel's DC gain) are
        treated as missing.
    quantities : sequence of Quantity
        What each column is.
    rule : OutlierRule, optional
        Threshold, minimum count and spread floor; default :class:`OutlierRule`.

    Returns
    -------
    RobustScreen

    Notes
    -----
    For each column with at least ``rule.min_units`` finite values ``x``:
    ``m = median(x)``, ``MAD = median(|x - m|)``, ``scale = max(1.4826 MAD,
    min_relative_spread |m|)`` and ``z = (x - m) / scale``; a value is flagged when
    ``|z| > threshold`` (``z < -threshold`` for a low-side quantity,
    ``z > threshold`` for a high-side one) [1]_ [2]_. A column whose scale is 0
    (all values equal to a zero median) flags nothing.

    References
    ----------
    .. [1] B. Iglewicz and D. C. Hoaglin, "How to Detect and Handle Outliers",
       ASQC Quality Press, 1993, section 3.3.
    .. [2] P. J. Rousseeuw and C. Croux, "Alternatives to the median absolute
       deviation", Journal of the American Statistical Association 88(424),
       1273-1283, 1993.
    """
    rule = rule if rule is not None else OutlierRule()
    x = np.array(values, dtype=float, copy=True).reshape(-1, len(quantities))
    x[~np.isfinite(x)] = np.nan
    n_q = len(quantities)
    median = np.full(n_q, np.nan)
    mad = np.full(n_q, np.nan)
    scale = np.full(n_q, np.nan)
    n_values = np.sum(np.isfinite(x), axis=0).astype(int)
    z = np.full(x.shape, np.nan)
    for q in range(n_q):
        col = x[:, q]
        have = np.isfinite(col)
        if n_values[q] < rule.min_units:
            continue
        median[q] = np.median(col[have])
        mad[q] = np.median(np.abs(col[have] - median[q]))
        scale[q] = max(MAD_SCALE * mad[q], rule.min_relative_spread * abs(median[q]))
        if scale[q] > 0:
            z[have, q] = (col[have] - median[q]) / scale[q]
    flagged = np.zeros(x.shape, dtype=bool)
    with np.errstate(invalid="ignore"):
        for q, quantity in enumerate(quantities):
            if quantity.side == "both":
                flagged[:, q] = np.abs(z[:, q]) > rule.threshold
            elif quantity.side == "low":
                flagged[:, q] = z[:, q] < -rule.threshold
            else:
                flagged[:, q] = z[:, q] > rule.threshold
    return RobustScreen(tuple(quantities), x, median, mad, scale, n_values, z, flagged, rule)


def _value_text(value: float, unit: str) -> str:
    return f"{value:.4g} {unit}".rstrip()


def screen_reasons(screen: RobustScreen, unit: int) -> list[str]:
    """Why unit number ``unit`` is an outlier, one sentence per flagged quantity (empty when it is none).

    Example: ``"mode 2 natural frequency 28.95 Hz is 8.0 % below the fleet median
    31.47 Hz (robust z -5.9, limit 3.5)"``.
    """
    reasons = []
    for q in np.flatnonzero(screen.flagged[unit]):
        quantity = screen.quantities[q]
        x, m, z = screen.values[unit, q], screen.median[q], screen.z[unit, q]
        where = "above" if x > m else "below"
        if m != 0:
            size = f"{abs(100 * (x - m) / m):.1f} % {where}"
        else:
            size = f"{_value_text(abs(x - m), quantity.unit)} {where}"
        reasons.append(
            f"{quantity.label} {_value_text(x, quantity.unit)} is {size} the fleet median "
            f"{_value_text(m, quantity.unit)} (robust z {z:+.1f}, limit {screen.rule.threshold:g})"
        )
    return reasons


def _mode_words(mode: ModePoint) -> str:
    if mode.is_pair and mode.damping_ratio is not None:
        return f"{mode.natural_frequency_hz:.4g} Hz, damping ratio {mode.damping_ratio:.3g}"
    if mode.time_constant_s is not None and math.isfinite(mode.time_constant_s):
        return f"real, time constant {mode.time_constant_s:.4g} s"
    return f"real, {mode.natural_frequency_hz:.4g} Hz"


def presence_reasons(modes: FleetModes, unit: int, unit_modes: Sequence[ModePoint],
                     rule: OutlierRule | None = None, *, band_hz: Sequence[float] | None = None) -> list[str]:
    """Extra and missing modes of unit number ``unit`` under the rule's rare-mode fraction.

    Only modes inside the band the unit's input excited count: outside it the data
    cannot pin a mode down (a fit may add or drop one there by chance), as in the
    drift comparison. For the same reason an extra mode that the unit's own data
    leave unidentified (``ModePoint.identified`` false: its confidence region
    crosses the unit circle, or it nearly cancels a zero) does not count.

    Parameters
    ----------
    modes : FleetModes
        The fleet's numbering (:func:`match_fleet_modes`).
    unit : int
        Row of the unit in ``modes.assignment``.
    unit_modes : sequence of ModePoint
        That unit's modes (as given to :func:`match_fleet_modes`).
    rule : OutlierRule, optional
    band_hz : (float, float), optional
        The unit's excited band; default: every frequency counts.

    Returns
    -------
    list of str
        One sentence per extra or missing mode; empty with fewer than
        ``rule.min_units`` units.
    """
    rule = rule if rule is not None else OutlierRule()
    n_units = modes.assignment.shape[0]
    if n_units < rule.min_units:
        return []
    lo, hi = (0.0, math.inf) if band_hz is None else (float(band_hz[0]), float(band_hz[1]))
    reasons = []
    for k, count in enumerate(modes.counts):
        common = count >= rule.rare_mode_fraction * n_units
        j = modes.assignment[unit, k]
        mode = unit_modes[j] if j >= 0 else modes.reference[k]
        if not lo <= mode.natural_frequency_hz <= hi:
            continue
        if j >= 0 and not common and unit_modes[j].identified:
            reasons.append(f"extra mode {k + 1} ({_mode_words(unit_modes[j])}), present in {count} of "
                           f"{n_units} units")
        elif j < 0 and common:
            reasons.append(f"lacks mode {k + 1} ({_mode_words(modes.reference[k])}), present in {count} of "
                           f"{n_units} units")
    return reasons


def chance_flags(screen: RobustScreen) -> float:
    """Return the expected number of values the rule flags by chance alone in a fleet of normal units.

    ``sum over screened quantities of n_values * P(flag | x normal)``, where the
    probability is ``2 Q(threshold)`` for a two-sided quantity and ``Q(threshold)`` for
    a one-sided one (``Q`` the upper tail of the standard normal distribution,
    :func:`scipy.stats.norm.sf`), taking the robust scale as the standard
    deviation. A number near or above 1 says that in a fleet this large the
    threshold flags healthy units now and then; raising it (e.g. to the
    ``t`` with ``chance_flags < 0.05``) keeps the false alarms rare.
    """
    from scipy.stats import norm

    tail = float(norm.sf(screen.rule.threshold))
    total = 0.0
    for q, quantity in enumerate(screen.quantities):
        if np.isfinite(screen.scale[q]):
            total += int(screen.n_values[q]) * (2 * tail if quantity.side == "both" else tail)
    return total
