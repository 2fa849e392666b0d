"""The whole identification job of a pipeline file, into a new run folder.

:func:`run_pipeline` runs the steps of a :class:`~ident.io.pipelinefile.PipelineSpec`:

1. **ingest** every log file (each file, and each segment between timing gaps
   when ``split_at_gaps`` is on, is one experiment);
2. **preprocess, candidates, selection** with :func:`ident.estimate.identify.identify`
   (with ``[log] validate_with``, the whole of those logs is held out instead of
   the tail of every segment);
3. **validation** of the selected model on every held-out part with
   :func:`ident.assess.diagnostics.validate_model`: fit figures from rest, with
   the initial state estimated on a window that is not scored, and continued
   from the estimation data before the part (the figure to believe), the
   in-sample fit beside them, the subspace singular values as evidence for the
   order advice, and for a periodic input (``[log] period``,
   ``signal_description``, or detected) the frequency response at the excited
   lines;
4. **modes and expectations** (:func:`ident.assess.modes.mode_table`,
   :func:`ident.assess.expectations.check_expectations`); an ARX model's poles get
   confidence regions from its parameter covariance
   (:func:`ident.estimate.uncertainty.arx_pole_covariance`), stored in the model file as
   ``provenance["estimation"]["pole_covariance"]``;
5. **drift** against a baseline model file, when one is given
   (:func:`ident.assess.drift.compare_models`; frequency shifts get a z-score when
   both models carry a pole covariance);

then evaluates the gates and writes a NEW folder ``<UTC time>-<hash>`` (under
``runs/`` next to the pipeline file unless told otherwise) holding the model
file, ``summary.json``, the figures as PNG, ``report.html`` and a copy of the
pipeline file. Nothing is written until every step has run, and an existing
folder is never reused, so earlier runs stay byte-identical.

Gates (each listed in ``summary.json`` with its key path, passed or not):

- ``check.min_fit`` and ``check.require_white`` when set in ``[check]``;
  without them the headline still calls the model poor when an output's
  held-out fit is below ``check.fit_warning`` (default 50 %), and it always
  gives the held-out fit per output;
- ``modes.fail_on``: no mode may carry one of these flags;
- one gate per stated expectation (``expect.*``);
- ``drift`` when a baseline is compared: no threshold breached.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import io
import json
import math
import os
import platform
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ._json import json_ready
from ._validate import did_you_mean
from ._version import __version__
from .errors import IdentError, IdentWarning, PipelineError
from .io.pipelinefile import PipelineSpec, load_pipeline

#: Share of the input power that defines the excited band.
BAND_POWER_FRACTION = 0.9

__all__ = [
    "SUMMARY_FORMAT",
    "SUMMARY_SCHEMA_VERSION",
    "SAFETY_CAUTION",
    "Gate",
    "RunResult",
    "Evaluation",
    "run_pipeline",
    "evaluate_pipeline",
]

#: ``format`` field of ``summary.json``.
SUMMARY_FORMAT = "rigfit-run"
#: Version of the ``summary.json`` layout.
SUMMARY_SCHEMA_VERSION = 1
#: Caution printed in every report.
SAFETY_CAUTION = (
    "A model is valid only near the operating point and in the frequency band it was excited in. "
    "Validate any controller safely before running it on hardware; local machinery-safety rules "
    "and qualified engineers have the final say."
)
#: Share of the input power that defines the excited band.
#: At most this many frequency-response comparison figures (channels) are drawn.
MAX_FREQUENCY_FIGURES = 4
#: File names inside a run folder.
MODEL_FILE = "model.json"
SUMMARY_FILE = "summary.json"
REPORT_FILE = "report.html"
PIPELINE_COPY = "pipeline.toml"


@dataclass(frozen=True, slots=True, eq=False)
class Gate:
    """One pass/fail check of a run.

    Attributes
    ----------
    name : str
        Short label, e.g. ``"minimum fit"`` or ``"mode 'belt resonance'"``.
    key_path : str
        The pipeline-file key that set it, e.g. ``"check.min_fit"``.
    passed : bool
    detail : str
        What was measured against what was required.
    """

    name: str
    key_path: str
    passed: bool
    detail: str

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return {"name": self.name, "key_path": self.key_path, "passed": self.passed, "detail": self.detail}


@dataclass(frozen=True, slots=True, eq=False)
class RunResult:
    """What :func:`run_pipeline` did and found.

    Attributes
    ----------
    folder : pathlib.Path
        The new run folder.
    passed : bool
        True when every gate passed.
    gates : tuple of Gate
        Every gate evaluated, in the order of the steps.
    summary : dict
        The content of ``summary.json``.
    spec : PipelineSpec
    identification : ident.estimate.identify.Identification
    validation : tuple of ident.assess.diagnostics.ValidationReport
        One per held-out part long enough to validate on (the longest first).
    modes : ident.assess.modes.ModeTable
    expectations : tuple of ident.assess.expectations.ExpectationResult
    drift : ident.assess.drift.DriftReport or None
        ``None`` without a baseline.
    model_path, summary_path, report_path : pathlib.Path
    figure_paths : tuple of pathlib.Path
    """

    folder: Path
    passed: bool
    gates: tuple[Gate, ...]
    summary: dict[str, Any]
    spec: PipelineSpec
    identification: Any
    validation: tuple[Any, ...]
    modes: Any
    expectations: tuple[Any, ...]
    drift: Any
    model_path: Path
    summary_path: Path
    report_path: Path
    figure_paths: tuple[Path, ...]

    @property
    def failed_gates(self) -> tuple[Gate, ...]:
        """The gates that failed."""
        return tuple(g for g in self.gates if not g.passed)


@dataclass(frozen=True, slots=True, eq=False)
class Evaluation:
    """What :func:`evaluate_pipeline` computed, before anything is written.

    Attributes
    ----------
    passed : bool
        True when every gate passed.
    gates : tuple of Gate
    summary : dict
        The content ``summary.json`` would have, with no figures (``figures`` is
        empty and ``files`` names the usual file names).
    model : ident.lti.models.StateSpaceModel
        The selected model.
    model_provenance : dict
        The ``provenance`` argument for :func:`ident.io.modelfile.save_model`.
    """

    passed: bool
    gates: tuple[Gate, ...]
    summary: dict[str, Any]
    model: Any
    model_provenance: dict[str, Any]


# --------------------------------------------------------------------------- public API


def run_pipeline(
    spec: PipelineSpec | str | os.PathLike,
    *,
    out_dir: str | os.PathLike | None = None,
    baseline: str | os.PathLike | None = None,
    progress: Callable[[str, float], None] | None = None,
    allow_outside: bool = False,
    workers: int = 1,
) -> RunResult:
    """Run a pipeline end to end and write a new run folder.

    Parameters
    ----------
    spec : PipelineSpec or path-like
        The parsed pipeline, or the path of a pipeline file.
    out_dir : path-like, optional
        Folder that receives the run folder (created if missing). Default:
        ``runs/`` beside the pipeline file.
    baseline : path-like, optional
        Model file to compare with; overrides ``[drift] baseline``.
    progress : callable, optional
        Called as ``progress(step, fraction_done)`` between steps.
    allow_outside : bool, default False
        Read log files and a baseline outside the pipeline file's folder tree
        (see :func:`ident.io.pipelinefile.load_pipeline`).
    workers : int, default 1
        Processes for the identification's candidate search (``workers`` of
        :func:`ident.estimate.identify.identify`); the results do not depend on it.

    Returns
    -------
    RunResult
        Gate failures are results, not errors: check ``RunResult.passed``.

    Raises
    ------
    ident.errors.IdentError
        Bad input: an invalid pipeline file, an unreadable log, data that
        cannot support the model asked for, a baseline model of other signals
        or another sample time, an output folder whose paths would be too long.
        Nothing is written then.

    Notes
    -----
    The run folder is written as a hidden temporary folder
    (``.<name>.rigfit-<pid>-<host>.<random>.tmp``) and renamed into place when
    complete: an interrupted run leaves no run folder, and a temporary folder
    left by a killed run is removed by the next run into the same parent.
    """
    from .io.atomic import check_new_folder

    if not isinstance(spec, PipelineSpec):
        spec = load_pipeline(spec, allow_outside=allow_outside)
    check_new_folder(_run_parent(spec, out_dir), longest_name=_LONGEST_RUN_PATH)
    report = progress if progress is not None else (lambda step, fraction: None)
    state = _compute_and_warn(spec, baseline, report, workers)
    report("drawing figures", 0.85)
    figures = _figures(state)
    report("writing the run folder", 0.95)
    result = _write(spec, state, figures, out_dir)
    report("done", 1.0)
    return result


def evaluate_pipeline(
    spec: PipelineSpec | str | os.PathLike,
    *,
    baseline: str | os.PathLike | None = None,
    run_folder: str | None = None,
    progress: Callable[[str, float], None] | None = None,
) -> Evaluation:
    """Run every computation of a pipeline and evaluate its gates, writing nothing.

    The same steps as :func:`run_pipeline` without the figures and the run
    folder, for callers that write their own outputs (``rigfit fleet`` runs this
    once per unit).

    Parameters
    ----------
    spec : PipelineSpec or path-like
        The parsed pipeline, or the path of a pipeline file.
    baseline : path-like, optional
        Model file to compare with; overrides ``[drift] baseline``.
    run_folder : str, optional
        Name recorded as the run folder in the summary and the model provenance.
    progress : callable, optional
        Called as ``progress(step, fraction_done)`` between steps.

    Returns
    -------
    Evaluation
        The summary (as ``summary.json`` would hold it, with no figures), the
        gates, the model and what the model file records about it.

    Raises
    ------
    ident.errors.IdentError
        As :func:`run_pipeline`.

    Warns
    -----
    IdentWarning
        Every warning of the steps, once each (they are also listed in
        ``summary["warnings"]``).
    """
    if not isinstance(spec, PipelineSpec):
        spec = load_pipeline(spec)
    report = progress if progress is not None else (lambda step, fraction: None)
    state = _compute_and_warn(spec, baseline, report)
    created = _dt.datetime.now(_dt.UTC).replace(microsecond=0).isoformat().replace("+00:00", "Z")
    gates = _gates(state)
    summary = _summary(state, gates, created, run_folder, [])
    return Evaluation(
        passed=summary["verdict"]["passed"], gates=tuple(gates), summary=summary,
        model=state["result"].model, model_provenance=_model_provenance(spec, state, summary, run_folder),
    )


# --------------------------------------------------------------------------- steps


def _compute_and_warn(spec: PipelineSpec, baseline: Any, report: Callable[[str, float], None],
                      workers: int = 1) -> dict[str, Any]:
    """:func:`_compute` with its warnings collected in ``state["warnings"]`` and re-issued once each."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        state = _compute(spec, baseline, report, workers)
    texts: list[str] = []
    for w in caught:
        text = str(w.message)
        if text not in texts:
            texts.append(text)
            category = w.category if issubclass(w.category, IdentWarning) else IdentWarning
            warnings.warn(text, category, stacklevel=3)
    state["warnings"] = texts
    return state


def _read_logs(spec: PipelineSpec) -> list[Any]:
    from .io.log import read_log

    ls = spec.log
    logs = []
    for path in ls.files:
        logs.append(
            read_log(path, list(ls.inputs), list(ls.outputs), **ls.read_log_kwargs())
        )
    first = logs[0]
    for log in logs[1:]:
        if [n.lower() for n in (*log.input_names, *log.output_names)] != \
                [n.lower() for n in (*first.input_names, *first.output_names)]:
            raise PipelineError(
                f"the columns chosen in {log.source.file_name} ({', '.join(log.input_names)} -> "
                f"{', '.join(log.output_names)}) differ from those in {first.source.file_name} "
                f"({', '.join(first.input_names)} -> {', '.join(first.output_names)})",
                path=spec.path, key_path="log.inputs",
            )
    known = {n.lower() for n in (*first.input_names, *first.output_names)}
    for key in ls.units:
        if key not in known:
            raise PipelineError("names no input or output column", path=spec.path, key_path=f"log.units.{key}",
                                hint=did_you_mean(key, (*first.input_names, *first.output_names)))
    for log in logs[1:]:
        if abs(log.sample_time - first.sample_time) > 1e-3 * first.sample_time:
            raise PipelineError(
                f"{log.source.file_name} has sample time {log.sample_time:g} s, "
                f"{first.source.file_name} {first.sample_time:g} s; experiments must share one rate",
                path=spec.path, key_path="log.paths",
            )
    return logs


def _units(spec: PipelineSpec, names: Sequence[str], header: Sequence[str], role: str) -> tuple[str, ...]:
    out = []
    for name, unit in zip(names, header, strict=True):
        given = spec.log.units.get(name.lower())
        if given is not None and unit and given != unit:
            raise PipelineError(
                f"the log header gives {role} {name!r} the unit {unit!r}, the pipeline {given!r}",
                path=spec.path, key_path=f"log.units.{name}",
            )
        out.append(unit or given or "")
    return tuple(out)


def _compute(spec: PipelineSpec, baseline_arg: Any, report: Callable[[str, float], None],
             workers: int = 1) -> dict[str, Any]:
    """Run every computation of the pipeline, in order, and return what the outputs are made from."""
    from .assess.expectations import check_expectations
    from .assess.modes import mode_table

    report("reading logs", 0.0)
    logs = _read_logs(spec)
    first = logs[0]
    vlogs = _read_validation_logs(spec, first)
    input_units = _units(spec, first.input_names, first.input_units, "input")
    output_units = _units(spec, first.output_names, first.output_units, "output")

    # baseline first: a missing or unsuitable baseline is bad input, found before the long steps
    baseline_path = Path(baseline_arg).resolve() if baseline_arg is not None else spec.drift.baseline
    baseline = None
    if baseline_path is not None:
        from .io.modelfile import load_model

        baseline = load_model(baseline_path)

    result = _identify_logs(spec, logs, input_units, output_units, report, vlogs, workers)
    model = result.model
    prep = result.prepared
    pole_cov = result.pole_covariance  # first-order, from the parameter covariance, in model.poles() order

    report("periodic input", 0.66)
    periodic = _periodic(spec, first, result)
    report("validating", 0.68)
    parts, validation = _validate_held_out(spec, result, periodic, [*logs, *vlogs])

    report("modes and expectations", 0.75)
    duration = max(
        (b - a - 1) * log.sample_time for log in logs for a, b in log.segments
    ) or None
    table = mode_table(model, thresholds=spec.modes.thresholds, log_duration_s=duration,
                       pole_covariance=pole_cov, parameter_covariance=result.covariance)
    expectations = () if spec.expect.is_empty else check_expectations(model, table, spec.expect)
    band, excitation = _excitation(prep, first.input_names)

    drift = None
    if baseline is not None:
        drift = _compare_with_baseline(spec, baseline, baseline_path, model, prep.validation[parts[0]],
                                       band, pole_cov, report)

    return {
        "spec": spec, "logs": logs, "result": result, "validation": validation, "parts": parts,
        "table": table, "expectations": expectations, "band": band, "excitation": excitation,
        "drift": drift, "baseline": baseline, "log_duration_s": duration, "baseline_path": baseline_path,
        "input_units": input_units, "output_units": output_units, "pole_covariance": pole_cov,
        "validation_logs": vlogs, "periodic": periodic,
    }


def _read_validation_logs(spec: PipelineSpec, first: Any) -> list[Any]:
    """Read the ``[log] validate_with`` logs like the others; same columns and rate as the first log."""
    from .io.log import read_log

    ls = spec.log
    out = []
    for path in ls.validation_files:
        log = read_log(path, list(ls.inputs), list(ls.outputs), **ls.read_log_kwargs())
        if [n.lower() for n in (*log.input_names, *log.output_names)] != \
                [n.lower() for n in (*first.input_names, *first.output_names)]:
            raise PipelineError(f"the columns chosen in {log.source.file_name} differ from those in "
                                f"{first.source.file_name}", path=spec.path, key_path="log.validate_with")
        if abs(log.sample_time - first.sample_time) > 1e-3 * first.sample_time:
            raise PipelineError(f"{log.source.file_name} has sample time {log.sample_time:g} s, "
                                f"{first.source.file_name} {first.sample_time:g} s", path=spec.path,
                                key_path="log.validate_with")
        out.append(log)
    return out


def _periodic(spec: PipelineSpec, first: Any, result: Any) -> Any:
    """Analyse the periods of the first log's longest segment (``None``: not periodic, or decimated)."""
    from .estimate.periodic_check import period_samples, periodic_for_log

    ls = spec.log
    if result.prepared.decimation > 1 or (ls.period == "none" and ls.signal_description is None):
        return None
    arguments = None
    if ls.signal_description is not None:
        from .io.signalfile import read_signal_description

        arguments = read_signal_description(ls.signal_description).periodic_arguments(first.sample_time)
    period = period_samples(ls.period, first.sample_time) if isinstance(ls.period, float) else None
    a, b = max(first.segments, key=lambda seg: seg[1] - seg[0])
    op = result.model.operating_point
    return periodic_for_log(first.u[a:b] - op.inputs, first.y[a:b] - op.outputs, first.sample_time,
                            period=period, arguments=arguments, detect=ls.period == "auto",
                            input_names=first.input_names, output_names=first.output_names)


def _identify_logs(spec: PipelineSpec, logs: Sequence[Any], input_units: tuple[str, ...],
                   output_units: tuple[str, ...], report: Callable[[str, float], None],
                   vlogs: Sequence[Any] = (), workers: int = 1) -> Any:
    """Identify a model from every segment of every log (one experiment each)."""
    from .estimate.identify import identify

    first = logs[0]
    segments, starts, offset = [], [], 0
    for log in logs:
        for a, b in log.segments:
            segments.append((log.u[a:b], log.y[a:b]))
            starts.append(offset + a)
        offset += log.n_samples

    def ident_progress(step: str, fraction: float) -> None:
        if step != "done":
            report(step, 0.05 + 0.6 * min(max(fraction, 0.0), 1.0))

    extra: dict[str, Any] = {}
    if vlogs:
        vsegments, vstarts, offset = [], [], 0
        for log in vlogs:
            for a, b in log.segments:
                vsegments.append((log.u[a:b], log.y[a:b]))
                vstarts.append(offset + a)
            offset += log.n_samples
        extra = {"validation_segments": vsegments, "validation_starts": vstarts}
    return identify(
        segments, first.sample_time, spec.fit,
        input_names=first.input_names, output_names=first.output_names,
        input_units=input_units, output_units=output_units,
        segment_starts=starts, progress=ident_progress, workers=workers, **extra,
    )


def _validate_held_out(spec: PipelineSpec, result: Any, periodic: Any,
                       logs: Sequence[Any]) -> tuple[list[int], tuple[Any, ...]]:
    """Validate the model on every held-out part long enough for the check, longest first."""
    from .assess.diagnostics import MIN_SAMPLES, score_window, validate_model
    from .estimate.validation import continued_fits

    model, prep = result.model, result.prepared
    lag = spec.check.max_lag
    need = MIN_SAMPLES if lag is None else max(MIN_SAMPLES, 4 * lag)
    usable = {k: e.n_samples - score_window(e.n_samples, model.n_states) for k, e in enumerate(prep.validation)}
    parts = sorted((k for k in usable if usable[k] >= need), key=lambda k: -prep.validation[k].n_samples)
    if not parts:
        raise IdentError(
            f"no held-out part has the {need} samples validation needs after its initial-state window"
            + (f" (max_lag {lag})" if lag is not None else ""),
            hint="raise preprocess.holdout" + (" or lower check.max_lag" if lag is not None else ""),
        )
    continued = continued_fits(model, prep)
    filtered = prep.decimation > 1 or any(lg.resampling is not None for lg in logs)
    validation = tuple(
        validate_model(model, prep.validation[k].u, prep.validation[k].y, prep.sample_time, spec.check,
                       continued=continued[k], in_sample_fit=result.estimation_fit,
                       lines=_part_lines(periodic, prep.validation[k], model),
                       singular_values=result.singular_values, zero_phase_filtered=filtered,
                       covariance=result.covariance)
        for k in parts
    )
    return parts, validation


def _part_lines(periodic: Any, part: Any, model: Any) -> Any:
    """Measure the response at the excited lines of a held-out part of a periodic log (``None``: too short)."""
    if periodic is None or periodic.blocks > 1:
        return None
    from .errors import IdentificationError
    from .estimate.periodic_check import line_response, periodic_for_log

    try:
        analysis = periodic_for_log(part.u, part.y, periodic.sample_time, period=periodic.period_samples,
                                    input_names=model.inputs, output_names=model.outputs)
    except IdentificationError:
        return None
    return None if analysis is None or analysis.measured_periods < 2 else line_response(analysis)


def _excitation(prep: Any, input_names: Sequence[str]) -> tuple[Any, Any]:
    """Excited band of the estimation inputs and the per-input excitation report."""
    from .estimate.excitation import excitation_report, excited_band

    est_u = np.vstack([e.u for e in prep.estimation])
    band = excited_band(est_u, prep.sample_time, BAND_POWER_FRACTION)
    excitation = excitation_report(
        est_u[: min(est_u.shape[0], 20_000)], prep.sample_time, names=input_names, max_order=40,
        power_fraction=BAND_POWER_FRACTION,
    )
    return band, excitation


def _compare_with_baseline(spec: PipelineSpec, baseline: Any, baseline_path: Path, model: Any, val: Any,
                           band: Any, pole_cov: Any, report: Callable[[str, float], None]) -> Any:
    """Drift of the new model from the baseline, on the longest held-out part ``val``."""
    from .assess.drift import compare_models

    report("comparing with the baseline", 0.8)
    base_model = baseline.model
    if not base_model.is_discrete or abs(base_model.sample_time - model.sample_time) > 1e-6 * model.sample_time:
        raise IdentError(
            f"{baseline_path.name}: baseline sample time {base_model.sample_time} s differs from the "
            f"new model's {model.sample_time:g} s",
            hint="identify both at the same rate (same [preprocess] decimate)",
        )
    op = model.operating_point
    return compare_models(
        base_model, model, thresholds=spec.drift.thresholds, band_hz=band,
        u=val.u + op.inputs, y=val.y + op.outputs,
        baseline_pole_covariance=baseline.pole_covariance(),
        new_pole_covariance=pole_cov,
    )


def _fmt_fit(x: float) -> str:
    return f"{x:.1f} %" if math.isfinite(x) else "diverged"


def _gates(state: dict[str, Any]) -> list[Gate]:
    spec: PipelineSpec = state["spec"]
    reports = state["validation"]
    gates = []
    outs = reports[0].outputs
    if spec.check.min_fit is not None:
        worst = [min(float(r.simulation_fit[i]) for r in reports) for i in range(len(outs))]
        ok = all(v.passed for r in reports for v in r.verdicts if v.test == "min_fit")
        gates.append(Gate(
            "minimum fit", "check.min_fit", ok,
            ", ".join(f"{n} {_fmt_fit(w)}" for n, w in zip(outs, worst, strict=True))
            + f" (simulation on held-out data, {reports[0].fits[0].label}; required >= {spec.check.min_fit:g} %)",
        ))
    if spec.check.require_white:
        ok = all(w.white for r in reports for w in r.whiteness)
        outside = [sum(len(r.whiteness[i].autocorrelation.significant_lags) for r in reports)
                   for i in range(len(outs))]
        gates.append(Gate(
            "white residuals", "check.require_white", ok,
            ", ".join(f"{n} {k} lag(s) outside" for n, k in zip(outs, outside, strict=True))
            + f" (required: every lag inside the {100 * spec.check.confidence:g} % simultaneous band)",
        ))
    table = state["table"]
    if spec.modes.fail_on:
        bad = []
        for m in table.modes:
            hit = [f for f in m.flags if f in spec.modes.fail_on]
            if hit:
                where = (f"{m.natural_frequency_hz:.4g} Hz" if m.natural_frequency_hz is not None
                         else f"z = {m.z:.4g}")
                bad.append(f"mode at {where}: {', '.join(hit)}")
        gates.append(Gate(
            "mode flags", "modes.fail_on", not bad,
            "; ".join(bad) if bad else f"no mode flagged {', '.join(spec.modes.fail_on)}",
        ))
    for r in state["expectations"]:
        gates.append(Gate(f"expected {r.name}", r.key_path, r.met, f"{r.measured}; expected {r.expected}"))
    drift = state["drift"]
    if drift is not None:
        gates.append(Gate(
            "drift from baseline", "drift", drift.passed,
            "; ".join(drift.breaches) if drift.breaches else "within the drift thresholds",
        ))
    return gates


# --------------------------------------------------------------------------- summary


def _signal_stats(name: str, unit: str, role: str, x: np.ndarray) -> dict[str, Any]:
    return {
        "name": name, "unit": unit, "role": role,
        "min": float(np.min(x)), "max": float(np.max(x)), "mean": float(np.mean(x)), "std": float(np.std(x)),
    }


def _drift_dict(drift: Any, baseline_path: Path, baseline: Any) -> dict[str, Any]:
    from .assess.drift import drift_report_to_dict

    return {
        "baseline": {"path": str(baseline_path), "file_name": baseline_path.name,
                     "sha256": hashlib.sha256(baseline_path.read_bytes()).hexdigest(),
                     "created_utc": baseline.provenance.get("created_utc")},
        **drift_report_to_dict(drift),
    }


def _summary(state: dict[str, Any], gates: list[Gate], stamp: str, folder_name: str | None,
             figures: list[dict[str, str]]) -> dict[str, Any]:
    """Build ``summary.json``: verdict, gates, data, model, validation, modes, drift and provenance."""
    from .assess.modes import mode_table_to_dict

    spec: PipelineSpec = state["spec"]
    result = state["result"]
    failed = [g for g in gates if not g.passed]
    verdict = _verdict(spec, result, gates, failed)
    table = state["table"]
    modes = mode_table_to_dict(table)
    units = {"inputs": list(state["input_units"]), "outputs": list(state["output_units"])}
    summary = {
        "format": SUMMARY_FORMAT,
        "schema_version": SUMMARY_SCHEMA_VERSION,
        "name": spec.name,
        "notes": spec.notes,
        "verdict": verdict,
        "gates": [g.as_dict() for g in gates],
        "run": {"folder": folder_name, "created_utc": stamp},
        "data": _data_summary(state),
        "model": _model_summary(result, units),
        "validation": _validation_summary(state),
        "periodic": _periodic_summary(state),
        "modes": {**modes, "units": units, "fail_on": list(spec.modes.fail_on)},
        "expectations": [
            {"name": r.name, "key_path": r.key_path, "met": r.met, "measured": r.measured,
             "expected": r.expected, "measured_value": r.measured_value}
            for r in state["expectations"]
        ],
        "drift": None if state["drift"] is None
        else _drift_dict(state["drift"], state["baseline_path"], state["baseline"]),
        "figures": figures,
        "warnings": list(state["warnings"]),
        "provenance": _provenance(spec, [*state["logs"], *state["validation_logs"]], state["baseline_path"]),
        "safety": SAFETY_CAUTION,
        "files": {"model": MODEL_FILE, "summary": SUMMARY_FILE, "report": REPORT_FILE},
    }
    return json_ready(summary)


def _verdict(spec: PipelineSpec, result: Any, gates: Sequence[Gate], failed: Sequence[Gate]) -> dict[str, Any]:
    """Write the headline: the gates' result, always with the held-out fit per output, and the poor-model warning."""
    names = result.prepared.output_names
    fits = [float(v) for v in result.validation_fit]
    fit_text = ", ".join(f"{n} {_fmt_fit(v)}" for n, v in zip(names, fits, strict=True))
    if failed:
        head = f"FAILED: {len(failed)} of {len(gates)} gates failed ({', '.join(g.key_path for g in failed)})"
    elif gates:
        head = f"PASSED: all {len(gates)} gates passed"
    else:
        head = "PASSED: no gates set"
    level = spec.check.fit_warning
    poor = [n for n, v in zip(names, fits, strict=True) if level is not None and not (math.isfinite(v) and v >= level)]
    headline = f"{head}; held-out fit {fit_text}"
    if poor:
        headline = (f"POOR MODEL: held-out fit of {', '.join(poor)} below the warning level of {level:g} % "
                    f"({head}); held-out fit {fit_text}")
    return {"passed": not failed, "headline": headline, "failed_gates": [g.key_path for g in failed],
            "poor_outputs": poor, "fit_warning": level, "held_out_fit": dict(zip(names, fits, strict=True))}


def _data_summary(state: dict[str, Any]) -> dict[str, Any]:
    """Build the ``data`` section: logs, signal statistics, excitation, ranges and preparation."""
    logs = state["logs"]
    prep = state["result"].prepared
    first = logs[0]
    signals = []
    for j, name in enumerate(first.input_names):
        signals.append(_signal_stats(name, state["input_units"][j], "input",
                                     np.concatenate([lg.u[:, j] for lg in logs])))
    for i, name in enumerate(first.output_names):
        signals.append(_signal_stats(name, state["output_units"][i], "output",
                                     np.concatenate([lg.y[:, i] for lg in logs])))
    band = state["band"]
    return {
        "logs": [
            {
                "path": lg.source.path, "file_name": lg.source.file_name, "sha256": lg.source.sha256,
                "rows": [lg.source.first_row, lg.source.last_row], "n_samples": lg.n_samples,
                "sample_time": lg.sample_time, "duration_s": lg.duration_s,
                "segments": [list(s) for s in lg.segments], "dropped_rows": lg.dropped_rows,
                "jitter_std_s": lg.timing.jitter_std_s, "jitter_max_s": lg.timing.jitter_max_s,
                "time_basis": lg.timing.basis, "format": lg.source.format,
                "resampling": None if lg.resampling is None else lg.resampling.to_dict(),
                "resampling_text": None if lg.resampling is None else lg.resampling.describe(),
            }
            for lg in logs
        ],
        "signals": signals,
        "excited_band_hz": None if band is None else list(band),
        "excitation": [
            {"input": e.name, "persistent_excitation_order": e.pe_order,
             "order_is_lower_bound": e.pe_order_is_lower_bound, "band_hz": e.band_hz,
             "power_fraction": e.power_fraction}
            for e in state["excitation"]
        ],
        "estimation_ranges": [list(r) for r in prep.estimation_ranges],
        "validation_ranges": [list(r) for r in prep.validation_ranges],
        "frozen_tails": [list(r) for r in prep.frozen_tails],
        "validation_logs": [{"path": lg.source.path, "file_name": lg.source.file_name, "sha256": lg.source.sha256,
                             "n_samples": lg.n_samples, "segments": [list(x) for x in lg.segments]}
                            for lg in state["validation_logs"]],
        "operating_point": {"inputs": list(prep.operating_point.inputs),
                            "outputs": list(prep.operating_point.outputs)},
        "sample_time": prep.sample_time,
        "decimation": prep.decimation,
    }


def _model_summary(result: Any, units: dict[str, list[str]]) -> dict[str, Any]:
    """Build the ``model`` section: the selected model, how it was selected, and the notes."""
    prep = result.prepared
    sel = result.selected
    return {
        "file": MODEL_FILE,
        "method": result.method,
        "order": result.order,
        "n_states": result.model.n_states,
        "structure": sel.structure,
        "n_parameters": sel.n_parameters,
        "sample_time": result.model.sample_time,
        "inputs": list(result.model.inputs),
        "outputs": list(result.model.outputs),
        "units": units,
        "validation_fit": dict(zip(prep.output_names, map(float, result.validation_fit), strict=True)),
        "estimation_fit": dict(zip(prep.output_names, map(float, result.estimation_fit), strict=True)),
        "stage": sel.stage,
        "noise_model": result.noise_model,
        "input_delay": list(result.input_delay),
        "selection": {
            "rule": (
                "the best few direct estimates are refined; the refined model with the best held-out fit "
                "wins unless a simpler one is as accurate on the held-out data (one-sided test at "
                f"{result.options.significance:g}) and the estimation data do not support the extra "
                "parameters (BIC)"
            ),
            "reason": None if result.selection is None else result.selection.reason,
            "record": None if result.selection is None else result.selection.as_dict(),
            "candidates": [c.as_dict() for c in result.candidates],
            "singular_values": None if result.singular_values is None else list(result.singular_values),
            "suggested_order": result.suggested_order,
            "subspace_factorization": result.subspace_factorization,
        },
        "delays": None if result.delay is None else getattr(result.delay, "delays", None),
        "notes": list(result.notes),
        "warnings": list(result.warnings),
    }


def _periodic_summary(state: dict[str, Any]) -> dict[str, Any] | None:
    from .estimate.periodic_check import periodic_summary

    analysis = state["periodic"]
    return None if analysis is None else periodic_summary(analysis, state["result"].model)


def _validation_summary(state: dict[str, Any]) -> list[dict[str, Any]]:
    """One validation report per held-out part used, with its experiment number and range."""
    from .assess.diagnostics import report_to_dict

    prep = state["result"].prepared
    validation = []
    for k, rep in zip(state["parts"], state["validation"], strict=True):
        d = report_to_dict(rep)
        d["experiment"] = k + 1
        d["range"] = list(prep.validation_ranges[k])
        d["separate_log"] = bool(prep.separate_validation)
        validation.append(d)
    return validation


def _provenance(spec: PipelineSpec, logs: Sequence[Any], baseline_path: Path | None) -> dict[str, Any]:
    """Tool versions, input files with their hashes, and the settings used."""
    return {
        "tool": "rigfit",
        "tool_version": __version__,
        "python": platform.python_version(),
        "numpy": np.__version__,
        "pipeline": {"path": None if spec.path is None else str(spec.path),
                     "file_name": None if spec.path is None else spec.path.name,
                     "sha256": spec.sha256, "copy": PIPELINE_COPY if spec.path is not None else None},
        "logs": [{"file_name": lg.source.file_name, "sha256": lg.source.sha256} for lg in logs],
        "baseline": None if baseline_path is None else {
            "file_name": baseline_path.name,
            "sha256": hashlib.sha256(baseline_path.read_bytes()).hexdigest(),
        },
        "settings": spec.to_dict(),
    }


# --------------------------------------------------------------------------- figures


def _png(fig: Any) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, metadata={"Software": None})
    return buf.getvalue()


def _figures(state: dict[str, Any]) -> list[tuple[dict[str, str], bytes]]:
    from .plots.drift import magnitude_overlay
    from .plots.poles import pole_zero_map
    from .plots.signals import plot_log
    from .plots.validation import frequency_comparison, output_comparison, residual_correlations, verdict_grid

    out: list[tuple[dict[str, str], bytes]] = []

    def add(file: str, section: str, caption: str, fig: Any) -> None:
        out.append(({"file": file, "section": section, "caption": caption}, _png(fig)))

    logs = state["logs"]
    for k, log in enumerate(logs):
        name = "data.png" if len(logs) == 1 else f"data_{k + 1}.png"
        add(name, "data", f"Logged signals of {log.source.file_name} (inputs amber, outputs blue).",
            plot_log(log))
    rep = state["validation"][0]
    model = state["result"].model
    exp = state["parts"][0] + 1
    where = f"held-out part of experiment {exp}" if len(state["result"].prepared.validation) > 1 else "held-out data"
    add("validation_outputs.png", "validation",
        f"Measured and simulated outputs on the {where} (deviations from the operating point).",
        output_comparison(rep, model=model))
    add("validation_verdicts.png", "validation",
        "Verdicts per output and test (✓ passed, ✗ failed, ? the data cannot judge); the words are in the table "
        "above.", verdict_grid(rep))
    for i, out_name in enumerate(rep.outputs):
        add(f"validation_residuals_{i + 1}.png", "validation",
            f"Residual analysis of {out_name}: autocorrelation over the model's settling time and cumulative "
            "periodogram, cross-correlation with the prewhitened inputs; bands hold at every lag together; "
            "the verdicts on top.", residual_correlations(rep, output=i))
    count = 0
    for i, out_name in enumerate(rep.outputs):
        for j, in_name in enumerate(rep.inputs):
            if count >= MAX_FREQUENCY_FIGURES:
                break
            count += 1
            add(f"validation_frequency_{i + 1}_{j + 1}.png", "validation",
                f"Frequency response {in_name} → {out_name}: the model against the estimate from the data with "
                "its confidence region, judged where the data are informative (shaded band).",
                frequency_comparison(rep, output=i, input=j, model=model, covariance=state["result"].covariance))
    if state["periodic"] is not None:
        from .estimate.periodic import compare_with_model
        from .plots.excite import periodic_response_figure

        analysis = state["periodic"]
        add("periodic_response.png", "periodic",
            "Frequency response at the excited lines of the periodic input, with error bars from the "
            "period-to-period scatter, the model, and the noise floor.",
            periodic_response_figure(analysis, comparison=compare_with_model(analysis, state["result"].model)))
    add("modes_poles.png", "modes", "Poles (crosses; orange when flagged) and zeros (circles) in the z-plane.",
        pole_zero_map(state["table"]))
    if state["drift"] is not None:
        add("drift_magnitude.png", "drift",
            "Magnitude responses of the baseline and the new model over the excited band.",
            magnitude_overlay(state["drift"], inputs=model.inputs, units=(model.input_units, model.output_units)))
    return out


# --------------------------------------------------------------------------- output


def _write(spec: PipelineSpec, state: dict[str, Any], figures: list[tuple[dict[str, str], bytes]],
           out_dir: Any) -> RunResult:
    """Write the run folder: built as a hidden temporary folder, renamed into place when complete."""
    from .io.atomic import new_folder, write_atomic
    from .io.modelfile import save_model

    now = _dt.datetime.now(_dt.UTC).replace(microsecond=0)
    stamp = now.strftime("%Y%m%dT%H%M%SZ")
    created = now.isoformat().replace("+00:00", "Z")
    h = hashlib.sha256(spec.sha256.encode())
    for lg in [*state["logs"], *state["validation_logs"]]:
        h.update(lg.source.sha256.encode())
    if state["baseline_path"] is not None:
        h.update(hashlib.sha256(state["baseline_path"].read_bytes()).digest())
    digest = h.hexdigest()[:8]
    parent = _run_parent(spec, out_dir)
    gates = _gates(state)
    protected = tuple(lg.source.path for lg in [*state["logs"], *state["validation_logs"]])
    base = f"{stamp}-{digest}"

    with new_folder(parent, lambda k: base if k == 1 else f"{base}-{k}") as (tmp, final_name):
        name = final_name()
        summary = _summary(state, gates, created, name, [meta for meta, _ in figures])
        summary["run"]["inputs_hash"] = digest
        save_model(tmp / MODEL_FILE, state["result"].model, protected=protected,
                   provenance=_model_provenance(spec, state, summary, name))
        for meta, data in figures:
            write_atomic(tmp / meta["file"], data, protected=protected)
        if spec.path is not None and spec.path.is_file():
            write_atomic(tmp / PIPELINE_COPY, spec.path.read_bytes(), protected=protected)
        write_atomic(tmp / SUMMARY_FILE, json.dumps(summary, indent=2, allow_nan=False) + "\n",
                     protected=protected)
        from .report import render_report

        html = render_report(summary, {meta["file"]: data for meta, data in figures})
        write_atomic(tmp / REPORT_FILE, html, protected=protected)
    folder = parent / name
    result = state["result"]
    model_path, summary_path, report_path = folder / MODEL_FILE, folder / SUMMARY_FILE, folder / REPORT_FILE
    figure_paths = [folder / meta["file"] for meta, _ in figures]
    return RunResult(
        folder=folder,
        passed=summary["verdict"]["passed"],
        gates=tuple(gates),
        summary=summary,
        spec=spec,
        identification=result,
        validation=state["validation"],
        modes=state["table"],
        expectations=tuple(state["expectations"]),
        drift=state["drift"],
        model_path=model_path,
        summary_path=summary_path,
        report_path=report_path,
        figure_paths=tuple(figure_paths),
    )


def _run_parent(spec: PipelineSpec, out_dir: Any) -> Path:
    return Path(out_dir) if out_dir is not None else spec.base_dir / "runs"


#: The longest path written below a run folder's parent (the temporary folder's name, then a figure).
_LONGEST_RUN_PATH = ".20261231T235959Z-ffffffff-999.rigfit-4194304-ffffffff.ffffffff.tmp/validation_frequency_9_9.png"


def _model_provenance(spec: PipelineSpec, state: dict[str, Any], summary: dict[str, Any], name: str) -> dict:
    from .io.modelfile import uncertainty_provenance

    result = state["result"]
    prep = result.prepared
    return {
        "log": {"files": [{"file_name": lg.source.file_name, "sha256": lg.source.sha256, "format": lg.source.format,
                           "resampling": None if lg.resampling is None else lg.resampling.to_dict()}
                          for lg in state["logs"]],
                "sample_time": state["logs"][0].sample_time,
                # longest contiguous segment: what `rigfit modes` judges slow time constants against
                "duration_s": state["log_duration_s"]},
        "estimation": {"command": "run", "pipeline": spec.name, "pipeline_sha256": spec.sha256,
                       "method": result.method, "order": result.order, "options": result.options.to_dict(),
                       "ranges": [list(r) for r in prep.estimation_ranges],
                       "frozen_tails": [list(r) for r in prep.frozen_tails],
                       "sample_time": prep.sample_time, "decimation": prep.decimation,
                       "input_delay": list(result.input_delay), "noise_model": result.noise_model,
                       **uncertainty_provenance(state["pole_covariance"], result.covariance)},
        "validation": {"ranges": [list(r) for r in prep.validation_ranges],
                       "fit_percent": summary["model"]["validation_fit"],
                       "estimation_fit_percent": summary["model"]["estimation_fit"],
                       "logs": [{"file_name": lg.source.file_name, "sha256": lg.source.sha256}
                                for lg in state["validation_logs"]]},
        "run": {"folder": name, "passed": summary["verdict"]["passed"]},
    }
