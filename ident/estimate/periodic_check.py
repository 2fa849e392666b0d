"""Periodic logs in ``fit``, ``check`` and the report: which analysis, its line response, its summary.

When the input of a log is periodic (declared by the signal's description or a
period, or detected from the input), :func:`periodic_for_log` runs
:func:`ident.estimate.periodic.analyse_periodic` on it: averages over the
periods after the transient, the noise variance of every output from the
period-to-period scatter, the frequency response at the excited lines with its
standard deviation (no leakage, no window), the noise floor, and the
nonlinear-distortion level at the unexcited lines. :func:`line_response` hands
the frequency response to the validation (:mod:`ident.assess.spectral`), and
:func:`periodic_summary` gives the JSON-ready record that ``fit --json``,
``check --json`` and the run summary carry (the report is drawn from it).

References
----------
.. [1] R. Pintelon and J. Schoukens, *System Identification: A Frequency Domain
   Approach*, 2nd ed., Wiley-IEEE Press, 2012 (periodic excitation: averaging,
   noise and distortion levels).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import replace
from typing import Any

import numpy as np

from .._json import json_ready
from ..assess.spectral import LineResponse
from ..errors import IdentificationError, OptionError
from ..lti.models import StateSpaceModel
from .periodic import LineComparison, PeriodicAnalysis, analyse_periodic, compare_with_model, detect_period

__all__ = [
    "MIN_DETECTED_PERIODS",
    "DETECT_SAMPLES",
    "period_samples",
    "periodic_for_log",
    "line_response",
    "periodic_summary",
]

#: A period detected from the data is used only when the log holds this many periods
#: (one transient period and at least two measured ones).
MIN_DETECTED_PERIODS = 3
#: The period is detected on at most this many leading samples (a longer period must be
#: given); detection is then a few hundredths of a second on any log.
DETECT_SAMPLES = 1 << 18


def period_samples(period_s: float, sample_time: float) -> int:
    """Count the samples of a period given in seconds; it must be a whole number of samples (to 1e-6)."""
    if not (isinstance(period_s, (int, float)) and math.isfinite(period_s) and period_s > 0):
        raise OptionError(f"the period must be a positive number of seconds; got {period_s!r}")
    count = period_s / sample_time
    whole = int(round(count))
    if whole < 2 or abs(count - whole) > 1e-6 * max(count, 1.0):
        raise OptionError(
            f"a period of {period_s:g} s is {count:.6g} samples at T = {sample_time:g} s; it must be a whole "
            "number of at least 2 samples",
            hint="give the period the signal was designed with (rigfit excite prints it)",
        )
    return whole


def periodic_for_log(u: np.ndarray, y: np.ndarray, sample_time: float, *, period: int | None = None,
                     arguments: Mapping[str, Any] | None = None, detect: bool = True,
                     input_names: Sequence[str] | None = None,
                     output_names: Sequence[str] | None = None) -> PeriodicAnalysis | None:
    """Analyse the periods of a log, or return ``None`` when its input is not periodic.

    Parameters
    ----------
    u, y : numpy.ndarray, shape (N, m) and (N, p)
        Inputs and outputs (deviations or raw levels alike).
    sample_time : float
        Sample time, s.
    period : int, optional
        Samples per period (a ``--period`` option).
    arguments : mapping, optional
        Arguments from a signal description
        (:meth:`ident.io.signalfile.SignalDescription.periodic_arguments`);
        they win over ``period``.
    detect : bool
        Without ``period`` or ``arguments``, detect the period from the input
        (:func:`ident.estimate.periodic.detect_period`, on the first
        :data:`DETECT_SAMPLES` samples) and use it when the log holds at least
        :data:`MIN_DETECTED_PERIODS` periods and the analysis finds excited
        lines; ``None`` otherwise.

    Returns
    -------
    PeriodicAnalysis or None

    Raises
    ------
    IdentificationError
        A declared period (or description) does not fit the log.
    """
    names = {"input_names": input_names, "output_names": output_names}
    if arguments is not None:
        return analyse_periodic(u, y, sample_time, **dict(arguments), **names)
    if period is not None:
        return analyse_periodic(u, y, sample_time, period=period, **names)
    if not detect:
        return None
    try:
        found = detect_period(np.asarray(u)[:DETECT_SAMPLES], min_periods=MIN_DETECTED_PERIODS)
        if found * MIN_DETECTED_PERIODS > np.asarray(u).shape[0]:
            return None
        return replace(analyse_periodic(u, y, sample_time, period=found, **names), period_source="detected")
    except (IdentificationError, OptionError):  # a detected period the data do not bear out: not periodic
        return None


def line_response(analysis: PeriodicAnalysis) -> LineResponse:
    """Return the frequency response measured at the excited lines (for the validation)."""
    return LineResponse(analysis.frequencies_hz, analysis.frf, analysis.frf_std, analysis.measured_periods)


def periodic_summary(analysis: PeriodicAnalysis, model: StateSpaceModel | None = None) -> dict[str, Any]:
    """JSON-ready record of a periodic log (and of a model against it, when given).

    Returns
    -------
    dict
        ``period_samples, period_s, period_source, periods, transient_periods,
        measured_periods, blocks, resolution_hz, lines, band_hz,
        noise_std (per output), average_noise_std, response (frequencies_hz,
        magnitude, phase_deg, std, per channel), distortion, model (or None:
        error_to_noise_db, model_magnitude, output_error, noise_floor), notes``.
    """
    a = analysis
    noise = None if a.output_noise_variance is None else dict(zip(a.outputs, np.sqrt(a.output_noise_variance),
                                                                  strict=True))
    avg = a.average_noise_variance
    f = a.frequencies_hz
    out: dict[str, Any] = {
        "period_samples": a.period_samples, "period_s": a.period_samples * a.sample_time,
        "period_source": a.period_source, "periods": a.periods, "transient_periods": a.transient_periods,
        "measured_periods": a.measured_periods, "blocks": a.blocks, "resolution_hz": a.resolution_hz,
        "lines": int(a.lines.size), "band_hz": [float(f.min()), float(f.max())] if f.size else None,
        "noise_std": noise,
        "average_noise_std": None if avg is None else dict(zip(a.outputs, np.sqrt(avg), strict=True)),
        "response": _channels(a),
        "distortion": None if a.distortion is None else [
            {"output": d.output, "odd_lines": d.odd_lines, "even_lines": d.even_lines, "odd_db": d.odd_db,
             "even_db": d.even_db, "noise_db": d.noise_db, "odd_detected": d.odd_detected,
             "even_detected": d.even_detected} for d in a.distortion],
        "model": None,
        "notes": list(a.notes),
    }
    if model is not None:
        out["model"] = _comparison(a, compare_with_model(a, model))
    return json_ready(out)


def _channels(a: PeriodicAnalysis) -> list[dict[str, Any]]:
    rows = []
    for i, oname in enumerate(a.outputs):
        for j, iname in enumerate(a.inputs):
            g = a.frf[:, i, j]
            rows.append({"input": iname, "output": oname, "frequencies_hz": a.frequencies_hz,
                         "magnitude": np.abs(g), "phase_deg": np.degrees(np.angle(g)), "std": a.frf_std[:, i, j]})
    return rows


def _comparison(a: PeriodicAnalysis, c: LineComparison) -> dict[str, Any]:
    return {
        "error_to_noise_db": dict(zip(a.outputs, c.error_to_noise_db, strict=True)),
        "model_magnitude": [{"input": iname, "output": oname, "values": np.abs(c.model_frf[:, i, j]),
                             "z": c.frf_z[:, i, j]}
                            for i, oname in enumerate(a.outputs) for j, iname in enumerate(a.inputs)],
        "output_error": {o: c.output_error[:, i] for i, o in enumerate(a.outputs)},
        "noise_floor": {o: c.noise_floor[:, i] for i, o in enumerate(a.outputs)},
    }
