"""From the units' records to the fleet table: modes matched across units, outliers and their reasons.

:func:`analyse_fleet` takes every unit's :class:`~ident.fleet.units.UnitRecord` and
returns the fleet table (one row per unit, columns documented in ``FIXED_COLUMNS``
and built per fleet mode, output and channel) with the reasons that make a unit an
outlier:

- a figure of merit far from the fleet (robust rule of
  :func:`ident.assess.fleet.robust_screen`): each mode's natural frequency and
  damping ratio (oscillating modes) or time constant (real modes), each output's
  validation fit (low side only), each channel's DC gain;
- an extra mode, or a missing one, inside the unit's excited band
  (:func:`ident.assess.fleet.presence_reasons`);
- with a reference model: a matched mode or DC gain that differs from the
  reference's by more than the pipeline's ``[drift]`` thresholds.

A unit whose pipeline gates failed is listed with the gates in its reason too.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..assess.drift import DriftThresholds
from ..assess.fleet import (
    FleetModes,
    ModePoint,
    OutlierRule,
    Quantity,
    RobustScreen,
    match_fleet_modes,
    median_unit,
    presence_reasons,
    robust_screen,
    screen_reasons,
)
from .units import UnitRecord

__all__ = ["FIXED_COLUMNS", "FleetAnalysis", "mode_points", "reference_of_model", "analyse_fleet"]

#: Columns every fleet table starts with: (name, unit of measure, meaning).
FIXED_COLUMNS: tuple[tuple[str, str, str], ...] = (
    ("unit", "", "unit name (serial number)"),
    ("status", "", "ok, or failed (no result; the error is in reason)"),
    ("outlier", "", "true when the unit differs from the fleet (reason says how)"),
    ("reason", "", "why the unit is an outlier, failed, or failed its gates; empty otherwise"),
    ("gates_passed", "", "every gate of the pipeline passed (empty when failed)"),
    ("failed_gates", "", "key paths of the failed gates, comma separated"),
    ("log", "", "log file name"),
    ("log_sha256", "", "SHA-256 of the log file"),
    ("method", "", "chosen model family"),
    ("order", "", "chosen order"),
    ("n_states", "", "states of the model"),
    ("largest_robust_z", "", "largest |robust z| over the screened quantities"),
    ("n_warnings", "", "warnings while computing the unit"),
    ("model_file", "", "the unit's model file, relative to the run folder"),
    ("log_path", "", "absolute path of the log"),
)


@dataclass(frozen=True, slots=True, eq=False)
class FleetAnalysis:
    """The fleet compared with itself.

    Attributes
    ----------
    records : tuple of UnitRecord
        Every unit, sorted by name.
    rows : list of dict
        The fleet table, one dict per unit (column name -> value; None where empty).
    columns : tuple of (str, str)
        Every column name with its unit of measure, in order.
    outliers : tuple of str
        Names of the outlier units.
    modes : FleetModes or None
        The fleet's mode numbering (``None`` with no ok unit).
    screen : RobustScreen or None
    quantities_summary : list of dict
        Per screened quantity: name, label, unit, side, median, mad, scale, count.
    modes_summary : list of dict
        Per fleet mode: number, kind, count, rare, reference values, medians.
    reference : dict
        ``{"kind": "model" | "median unit" | None, "name": ...}``.
    """

    records: tuple[UnitRecord, ...]
    rows: list[dict[str, Any]]
    columns: tuple[tuple[str, str], ...]
    outliers: tuple[str, ...]
    modes: FleetModes | None
    screen: RobustScreen | None
    quantities_summary: list[dict[str, Any]]
    modes_summary: list[dict[str, Any]]
    reference: dict[str, Any]


def _finite(x: Any) -> float | None:
    if x is None:
        return None
    v = float(x)
    return v if math.isfinite(v) else None


#: Mode flags that say the unit's data do not show the mode: its 95 % confidence region
#: crosses the unit circle, or the pole nearly cancels a zero (it hardly enters the response).
_UNIDENTIFIED_FLAGS = frozenset({"uncertain_stability", "near_cancellation"})


def mode_points(modes: Sequence[dict[str, Any]]) -> tuple[ModePoint, ...]:
    """Return the comparable modes of a summary's mode list.

    Poles at z = 0 or on (or near) the negative real axis have no continuous-time
    meaning and are left out, as in the drift comparison.
    """
    out = []
    for m in modes:
        f = _finite(m.get("natural_frequency_hz"))
        if f is None or f <= 0 or "negative_real" in (m.get("flags") or ()):
            continue
        out.append(ModePoint(f, _finite(m.get("damping_ratio")), _finite(m.get("time_constant_s")),
                             bool(m.get("is_pair")),
                             identified=not _UNIDENTIFIED_FLAGS & set(m.get("flags") or ())))
    return tuple(out)


def reference_of_model(model: Any) -> tuple[tuple[ModePoint, ...], dict[tuple[str, str], float]]:
    """Modes and DC gains of a reference model (a :class:`~ident.lti.models.StateSpaceModel`)."""
    from ..assess.modes import mode_table, mode_table_to_dict

    table = mode_table_to_dict(mode_table(model))
    gains = {(g["input"], g["output"]): g["gain"] for g in table["dc_gain"]}
    return mode_points(table["modes"]), gains


def _quantities(records: Sequence[UnitRecord], modes: FleetModes | None) -> tuple[list[Quantity], list[Quantity]]:
    """(screened quantities, every per-unit column) from the first ok unit's signals and the fleet modes."""
    first = records[0]
    screened: list[Quantity] = []
    columns: list[Quantity] = []
    for out in first.outputs:
        q = Quantity(f"fit_{out}_percent", f"validation fit of {out}", "%", "low")
        screened.append(q)
        columns.append(q)
    for k, ref in enumerate(modes.reference if modes is not None else ()):
        n = k + 1
        f = Quantity(f"mode_{n}_natural_frequency_hz", f"mode {n} natural frequency", "Hz")
        z = Quantity(f"mode_{n}_damping_ratio", f"mode {n} damping ratio", "")
        t = Quantity(f"mode_{n}_time_constant_s", f"mode {n} time constant", "s")
        columns += [f, z, t]
        screened += [f, z] if ref.is_pair else [t]
    for j, inp in enumerate(first.inputs):
        for i, out in enumerate(first.outputs):
            iu = first.input_units[j] if j < len(first.input_units) else ""
            ou = first.output_units[i] if i < len(first.output_units) else ""
            unit = f"{ou} per {iu}".strip() if (iu or ou) else ""
            q = Quantity(f"dc_gain_{inp}_to_{out}", f"DC gain {inp} -> {out}", unit)
            screened.append(q)
            columns.append(q)
    return screened, columns


def _unit_values(record: UnitRecord, points: tuple[ModePoint, ...], row: np.ndarray | None) -> dict[str, Any]:
    """Column values of one ok unit: fits, matched modes (by fleet number) and DC gains."""
    values: dict[str, Any] = {}
    for out in record.outputs:
        values[f"fit_{out}_percent"] = _finite(record.fit_percent.get(out))
    for k, j in enumerate(row if row is not None else ()):
        n = k + 1
        m = points[j] if j >= 0 else None
        values[f"mode_{n}_natural_frequency_hz"] = None if m is None else m.natural_frequency_hz
        values[f"mode_{n}_damping_ratio"] = None if m is None else m.damping_ratio
        values[f"mode_{n}_time_constant_s"] = None if m is None else m.time_constant_s
    for g in record.dc_gains:
        values[f"dc_gain_{g['input']}_to_{g['output']}"] = _finite(g.get("gain"))
    return values


def _reference_reasons(fleet: FleetModes, unit: int, points: tuple[ModePoint, ...], record: UnitRecord,
                       gains: dict[tuple[str, str], float], th: DriftThresholds) -> list[str]:
    """How a unit differs from the reference model beyond the ``[drift]`` thresholds."""
    reasons = []
    for k, (ref, own) in enumerate(zip(fleet.reference, fleet.from_reference, strict=True)):
        j = fleet.assignment[unit, k]
        if not own or j < 0:
            continue
        m = points[j]
        shift = 100.0 * (m.natural_frequency_hz - ref.natural_frequency_hz) / ref.natural_frequency_hz
        if abs(shift) > th.frequency_shift_percent:
            reasons.append(f"mode {k + 1} natural frequency {m.natural_frequency_hz:.4g} Hz differs from the "
                           f"reference's {ref.natural_frequency_hz:.4g} Hz by {shift:+.1f} % "
                           f"(limit {th.frequency_shift_percent:g} %)")
        if ref.is_pair and m.damping_ratio is not None and ref.damping_ratio is not None:
            dz = m.damping_ratio - ref.damping_ratio
            if abs(dz) > th.damping_shift:
                reasons.append(f"mode {k + 1} damping ratio {m.damping_ratio:.3g} differs from the reference's "
                               f"{ref.damping_ratio:.3g} by {dz:+.3g} (limit {th.damping_shift:g})")
    for g in record.dc_gains:
        base, new = gains.get((g["input"], g["output"])), _finite(g.get("gain"))
        if base is None or new is None or not math.isfinite(base) or base == 0:
            continue
        change = 100.0 * (new - base) / abs(base)
        if abs(change) > th.dc_gain_change_percent:
            reasons.append(f"DC gain {g['input']} -> {g['output']} {new:.4g} differs from the reference's "
                           f"{base:.4g} by {change:+.1f} % (limit {th.dc_gain_change_percent:g} %)")
    return reasons


def _base_row(record: UnitRecord) -> dict[str, Any]:
    return {
        "unit": record.unit, "status": record.status, "outlier": False, "reason": record.error,
        "gates_passed": record.gates_passed, "failed_gates": ", ".join(record.failed_gates),
        "log": record.log_path.replace("\\", "/").rsplit("/", 1)[-1], "log_sha256": record.log_sha256,
        "method": record.method, "order": record.order, "n_states": record.n_states,
        "largest_robust_z": None, "n_warnings": record.n_warnings,
        "model_file": f"units/{record.folder}/model.json" if record.ok else None, "log_path": record.log_path,
    }


def _modes_summary(fleet: FleetModes | None, screen: RobustScreen | None, n_ok: int,
                   rule: OutlierRule) -> list[dict[str, Any]]:
    """Per fleet mode: kind, how many units have it, the reference, and median and scale of every figure."""
    if fleet is None or screen is None:
        return []
    index = {q.name: i for i, q in enumerate(screen.quantities)}
    out = []
    for k, ref in enumerate(fleet.reference):
        n = k + 1
        entry: dict[str, Any] = {
            "number": n, "kind": "pair" if ref.is_pair else "real", "count": int(fleet.counts[k]),
            "rare": bool(fleet.counts[k] < rule.rare_mode_fraction * n_ok), "from_reference": fleet.from_reference[k],
            "reference": {"natural_frequency_hz": ref.natural_frequency_hz, "damping_ratio": ref.damping_ratio,
                          "time_constant_s": ref.time_constant_s},
        }
        for name in ("natural_frequency_hz", "damping_ratio", "time_constant_s"):
            i = index.get(f"mode_{n}_{name}")
            entry[f"median_{name}"] = None if i is None else _finite(screen.median[i])
            entry[f"scale_{name}"] = None if i is None else _finite(screen.scale[i])
        out.append(entry)
    return out


def analyse_fleet(
    records: Sequence[UnitRecord],
    rule: OutlierRule | None = None,
    *,
    reference_modes: Sequence[ModePoint] | None = None,
    reference_gains: dict[tuple[str, str], float] | None = None,
    reference_name: str | None = None,
    drift_thresholds: DriftThresholds | None = None,
) -> FleetAnalysis:
    """Match modes across the units, screen them, and build the fleet table.

    Parameters
    ----------
    records : sequence of UnitRecord
        Every unit (ok and failed), in any order.
    rule : OutlierRule, optional
    reference_modes, reference_gains : optional
        A reference model's modes and DC gains (:func:`reference_of_model`);
        without them the fleet's median unit is the reference for matching.
    reference_name : str, optional
        The reference model's file name, for the report.
    drift_thresholds : DriftThresholds, optional
        Limits of the comparison with a reference model (default thresholds).

    Returns
    -------
    FleetAnalysis
    """
    rule = rule if rule is not None else OutlierRule()
    records = tuple(sorted(records, key=lambda r: r.unit))
    ok = [r for r in records if r.ok]
    points = [mode_points(r.modes) for r in ok]
    if reference_modes is not None:
        reference, ref_info = tuple(reference_modes), {"kind": "model", "name": reference_name}
    elif ok:
        k = median_unit(points)
        reference, ref_info = points[k], {"kind": "median unit", "name": ok[k].unit}
    else:
        reference, ref_info = (), {"kind": None, "name": None}
    fleet = match_fleet_modes(points, reference, limit=rule.match_cost_limit) if ok else None
    screened, value_columns = _quantities(ok, fleet) if ok else ([], [])
    values = [_unit_values(r, points[u], None if fleet is None else fleet.assignment[u]) for u, r in enumerate(ok)]
    matrix = np.array([[np.nan if v.get(q.name) is None else v[q.name] for q in screened] for v in values],
                      dtype=float).reshape(len(ok), len(screened))
    screen = robust_screen(matrix, screened, rule) if ok else None
    rows, outliers, by_unit = [], [], {r.unit: u for u, r in enumerate(ok)}
    for record in records:
        row = _base_row(record)
        u = by_unit.get(record.unit)
        if u is not None:
            reasons = screen_reasons(screen, u) + presence_reasons(fleet, u, points[u], rule,
                                                                       band_hz=record.excited_band_hz)
            if reference_modes is not None:
                reasons += _reference_reasons(fleet, u, points[u], record, reference_gains or {},
                                              drift_thresholds or DriftThresholds())
            z = screen.z[u][np.isfinite(screen.z[u])]
            row["largest_robust_z"] = float(np.max(np.abs(z))) if z.size else None
            row["outlier"] = bool(reasons)
            if record.gates_passed is False:
                reasons.append("failed gates: " + ", ".join(record.failed_gates))
            row["reason"] = "; ".join(reasons)
            row.update({q.name: values[u].get(q.name) for q in value_columns})
            if row["outlier"]:
                outliers.append(record.unit)
        rows.append(row)
    columns = tuple((name, unit) for name, unit, _ in FIXED_COLUMNS) + tuple((q.name, q.unit) for q in value_columns)
    for row in rows:
        for name, _ in columns:
            row.setdefault(name, None)
    # medians of every column (also those not screened, such as a real mode's frequency) for the summary
    every = None if not ok else robust_screen(
        [[np.nan if v.get(q.name) is None else v[q.name] for q in value_columns] for v in values], value_columns, rule)
    quantities_summary = [] if screen is None else [
        {"name": q.name, "label": q.label, "unit": q.unit, "side": q.side, "median": _finite(screen.median[i]),
         "mad": _finite(screen.mad[i]), "scale": _finite(screen.scale[i]), "count": int(screen.n_values[i])}
        for i, q in enumerate(screen.quantities)
    ]
    return FleetAnalysis(
        records=records, rows=rows, columns=columns, outliers=tuple(outliers), modes=fleet, screen=screen,
        quantities_summary=quantities_summary, modes_summary=_modes_summary(fleet, every, len(ok), rule),
        reference=ref_info,
    )
