"""``rigfit check``: validate a model file on a rig log it was not fitted on."""

from __future__ import annotations

import os
import re
from typing import Any

import click

from ._common import GateFailed, echo_json, log_options, read_log_kwargs


@click.command()
@click.argument("log_path", metavar="LOG", type=click.Path(dir_okay=False))
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("--input", "input_columns", multiple=True, metavar="NAME",
              help="Log column for each model input, in the model's input order "
                   "(repeatable; default: the model's input names); a name, group/name, a "
                   "pattern matching one column, or a position such as '#2'.")
@click.option("--output", "output_columns", multiple=True, metavar="NAME",
              help="Log column for each model output, in the model's output order "
                   "(repeatable; default: the model's output names).")
@log_options
@click.option("--min-fit", type=float, default=None, metavar="PCT",
              help="Gate: every output's simulation fit must reach PCT percent (exit 3 if not).")
@click.option("--require-white", is_flag=True,
              help="Gate: every output's residuals must pass the Ljung-Box test (exit 3 if not).")
@click.option("--prediction-steps", type=int, default=1, show_default=True, metavar="K",
              help="Horizon of the k-step-ahead prediction whose fit is reported.")
@click.option("--max-lag", type=int, default=25, show_default=True, metavar="L",
              help="Largest lag of the residual correlations and the Ljung-Box test.")
@click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON on stdout.")
@click.option("--plot", "plot_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Write PNG figures into DIR (created if missing).")
@click.option("--force", is_flag=True, help="Replace existing figure files in DIR.")
def check(
    log_path: str,
    model_path: str,
    input_columns: tuple[str, ...],
    output_columns: tuple[str, ...],
    time_column: str | None,
    sample_rate: float | None,
    drop_bad_rows: bool,
    split_at_gaps: bool,
    jitter_tolerance: float,
    resample_hz: float | None,
    upsample: str | None,
    min_fit: float | None,
    require_white: bool,
    prediction_steps: int,
    max_lag: int,
    as_json: bool,
    plot_dir: str | None,
    force: bool,
) -> None:
    """Validate MODEL (a model file) on LOG, a rig log it was not fitted on.

    Reports fit percent of simulation and k-step prediction, residual whiteness
    (autocorrelation, Ljung-Box), independence of the residuals from the inputs
    (cross-correlation; negative lags reveal feedback), normality, and the
    model's frequency response against an estimate from the data with its
    coherence, each with a verdict in plain words. The log's columns are
    matched to the model's signal names and the model's operating point is
    subtracted.

    Exit status: 0 ok; 2 bad input; 3 a gate (--min-fit, --require-white) failed.
    """
    import warnings

    import numpy as np

    from ..assess.diagnostics import CheckOptions, report_to_dict, validate_model
    from ..errors import IdentError, IdentWarning
    from ..io.modelfile import load_model

    options = CheckOptions(
        prediction_steps=prediction_steps, max_lag=max_lag, min_fit=min_fit,
        require_white=require_white,
    )
    loaded = load_model(model_path)
    model = loaded.model
    if not model.is_discrete:
        raise IdentError(
            f"{model_path}: the model is continuous-time; check needs a discrete-time model",
            hint="discretise it first with 'rigfit convert --discrete'",
        )
    inputs = _columns(input_columns, model.inputs, "--input", "inputs")
    outputs = _columns(output_columns, model.outputs, "--output", "outputs")
    log, time_note = _read_with_model_rate(log_path, inputs, outputs, read_log_kwargs(locals()), model.sample_time)
    _check_sample_time(log.sample_time, model.sample_time, log_path, model_path)
    if plot_dir is not None:
        _check_plot_dir(plot_dir, _figure_names(model.inputs, model.outputs), force=force,
                        protected=(log_path, model_path))

    # with --split-at-gaps the model is validated on the longest segment (a
    # simulation cannot run across a gap)
    start, stop = max(log.segments, key=lambda seg: seg[1] - seg[0])
    segment_note = None
    if len(log.segments) > 1:
        segment_note = (
            f"validated on the longest of {len(log.segments)} segments: samples "
            f"{start}..{stop - 1} ({stop - start} of {log.n_samples})"
        )
    u = np.array(log.u[start:stop], dtype=float)
    y = np.array(log.y[start:stop], dtype=float)
    op = model.operating_point
    if op is None:
        warnings.warn(
            f"{model_path} records no operating point; the log's mean levels are used",
            IdentWarning, stacklevel=1,
        )
        u -= u.mean(axis=0)
        y -= y.mean(axis=0)
    else:
        u -= op.inputs
        y -= op.outputs
    report = validate_model(model, u, y, log.sample_time, options)

    written: list[str] = []
    if plot_dir is not None:
        written = _write_plots(report, plot_dir, force=force, protected=(log_path, model_path), model=model)

    if as_json:
        payload = report_to_dict(report)
        payload["log"] = log_path
        payload["model"] = model_path
        payload["columns"] = {"inputs": list(log.input_names), "outputs": list(log.output_names)}
        payload["sample_time_from_model"] = time_note is not None
        payload["figures"] = written
        payload["segment"] = {"start": start, "stop": stop, "n_segments": len(log.segments),
                              "dropped_rows": log.dropped_rows}
        echo_json(payload)
    else:
        import dataclasses

        shown = dataclasses.replace(report, inputs=tuple(log.input_names), outputs=tuple(log.output_names))
        click.echo(report_text(shown, log_path=log_path, model_path=model_path,
                               mapping=_mapping_line(model, log), time_note=time_note))
        if segment_note is not None:
            click.echo(f"note: {segment_note}")
        if log.dropped_rows:
            click.echo(f"note: {log.dropped_rows} bad rows dropped")
        for path in written:
            click.echo(f"wrote {path}", err=True)
    failures = report.gate_failures
    if failures:
        raise GateFailed("; ".join(v.message.split(";")[0] for v in failures))


def _read_with_model_rate(path: str, inputs: tuple, outputs: tuple, log_kwargs: dict[str, Any],
                          model_T: float) -> tuple[Any, str | None]:
    """Read the log; without a time column (and no --time/--sample-rate) use the model's sample time."""
    from ..errors import LogFormatError

    try:
        return _read(path, inputs, outputs, log_kwargs), None
    except LogFormatError as exc:
        if not exc.reason.startswith("no time column") or log_kwargs.get("sample_rate") or log_kwargs.get("time"):
            raise
    log = _read(path, inputs, outputs, {**log_kwargs, "sample_rate": 1.0 / model_T})
    return log, f"the log has no time column: sample time {model_T:g} s ({1 / model_T:g} Hz) from the model file"


def _mapping_line(model: Any, log: Any) -> str:
    """``model signal <- log column`` for every signal, units as the log gives them."""
    def pairs(names, columns, units):
        return ", ".join(f"{c}{f' [{u}]' if u else ''}" + (f" (model {n})" if n != c else "")
                         for n, c, u in zip(names, columns, units, strict=True))

    return (f"log columns: inputs {pairs(model.inputs, log.input_names, log.input_units)}; "
            f"outputs {pairs(model.outputs, log.output_names, log.output_units)}")


def _columns(given: tuple[str, ...], names: tuple[str, ...], option: str, what: str) -> tuple:
    from ..errors import OptionError

    if not given:
        return tuple(names)
    if len(given) != len(names):
        raise OptionError(
            f"{option} was given {len(given)} time(s) but the model has {len(names)} {what} "
            f"({', '.join(names)}); give one column per model {what[:-1]}, in that order"
        )
    return tuple(given)


def _read(path: str, inputs: tuple, outputs: tuple, log_kwargs: dict[str, Any]) -> Any:
    from ..errors import LogFormatError
    from ..io.log import read_log

    try:
        return read_log(path, inputs, outputs, **log_kwargs, expand_patterns=False)
    except LogFormatError as exc:
        if not exc.reason.startswith(("no column named", "no channel named")):
            raise
        columns = _log_columns(path)
        if columns is None:
            raise
        lower = {c.lower() for c in columns}
        from ..io.columns import is_pattern

        missing = [n for n in (*inputs, *outputs)
                   if n.lower() not in lower and not is_pattern(n) and not n.strip().startswith("#")]
        if not missing:
            raise
        raise LogFormatError(
            f"the log has no column for the model's signal(s) {', '.join(map(repr, missing))}; "
            f"log columns: {', '.join(columns)}",
            path=path,
            hint="name the log columns with --input/--output (one per model signal, in order)",
        ) from exc


def _log_columns(path: str) -> list[str] | None:
    """Bare column names of a log, or None when they cannot be read."""
    from ..errors import IdentError
    from ..io.log import read_column_names  # header only; the data are not parsed

    try:
        return list(read_column_names(path))
    except (IdentError, OSError):  # only used to enrich an error message
        return None


def _check_sample_time(log_T: float, model_T: float, log_path: str, model_path: str) -> None:
    from ..assess.diagnostics import SAMPLE_TIME_RTOL
    from ..errors import IdentError

    if abs(log_T - model_T) > SAMPLE_TIME_RTOL * model_T:
        raise IdentError(
            f"{log_path}: sample time {log_T:g} s ({1 / log_T:g} Hz) differs from the model's "
            f"{model_T:g} s ({1 / model_T:g} Hz) in {model_path}",
            hint=f"resample the log to the model's rate (--resample {1 / model_T:g}), or refit at this rate",
        )


def report_text(report: Any, *, log_path: str = "", model_path: str = "", mapping: str | None = None,
                time_note: str | None = None) -> str:
    """Human-readable summary of a validation report (signal names as the report holds them)."""
    outs, ins = report.outputs, report.inputs
    k = report.prediction_steps
    T = report.sample_time
    lines = []
    if log_path or model_path:
        lines.append(f"check of {model_path} on {log_path}")
    x0 = "estimated from the first samples" if report.initial_state == "estimate" else "zero"
    lines.append(f"  {report.n_samples} samples at {1 / T:g} Hz; initial state {x0}")
    if mapping:
        lines.append(f"  {mapping}")
    if time_note:
        lines.append(f"  note: {time_note}")
    lines.append("")
    w = max(12, *(len(n) for n in outs))
    lines.append(f"{'fit [%]':<{w}}  {'simulation':>10}  {f'{k}-step prediction':>18}")
    for i, name in enumerate(outs):
        lines.append(f"{name:<{w}}  {report.simulation_fit[i]:>10.1f}  "
                     f"{report.prediction_fit[i]:>18.1f}")
    lines.append("")
    L = report.options.max_lag
    band = report.whiteness[0].autocorrelation.band
    conf = 100 * report.options.confidence
    lines.append(f"residuals: one-step prediction errors; lags up to {L}, "
                 f"{conf:g} % band +-{band:.3f}")
    lines.append(f"{'output':<{w}}  {'Ljung-Box p':>11}  {'white':>5}  {'JB p':>7}  "
                 "lags outside the band")
    for i, wr in enumerate(report.whiteness):
        sig = ", ".join(map(str, wr.autocorrelation.significant_lags[:8])) or "-"
        lines.append(f"{outs[i]:<{w}}  {wr.ljung_box_pvalue:>11.3g}  "
                     f"{'yes' if wr.white else 'no':>5}  {report.normality.pvalue[i]:>7.3g}  {sig}")
    lines.append("cross-correlation with the inputs (lag > 0: input leads; lag < 0: feedback)")
    for i, row in enumerate(report.cross_correlation):
        for j, c in enumerate(row):
            sig = ", ".join(map(str, c.significant_lags[:10])) or "-"
            lines.append(f"  {outs[i]} / {ins[j]}: lags outside the band: {sig}")
    sp = report.spectral
    lines.append(f"spectra: Welch segment {sp.segment_length} samples ({sp.n_segments} averages), "
                 f"{sp.frequencies_hz[0]:.4g} to {sp.frequencies_hz[-1]:.4g} Hz; "
                 "normality (JB) reported, not gated")
    lines.append("")
    lines.append("verdicts")
    from ..assess.diagnostics import DATA_TESTS

    for v in report.verdicts:
        mark = "ok  " if v.passed else ("note" if v.test in DATA_TESTS else "FAIL")
        lines.append(f"  {mark}  {v.test:<18}  {v.message}")
    lines.append("")
    if report.passed:
        lines.append("result: passed" + ("" if _gated(report) else " (no gate set)"))
    else:
        lines.append("result: FAILED " + ", ".join(sorted({v.test for v in report.gate_failures})))
    return "\n".join(lines)


def _gated(report: Any) -> bool:
    return report.options.min_fit is not None or report.options.require_white


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("._") or "signal"


def _figure_names(inputs: tuple[str, ...], outputs: tuple[str, ...]) -> dict[tuple, str]:
    """File name of every figure, unique even where signal names map to the same text.

    Keys: ``("outputs",)``, ``("verdicts",)``, ``("residuals", i)`` and
    ``("response", i, j)``. ``y a`` and ``y_a`` both become ``y_a``, and ``Y``
    and ``y`` collide on case-insensitive file systems: later ones get ``-2``,
    ``-3``, ...; a long name is cut and given a hash of the full name.
    """
    import hashlib

    def short(name: str) -> str:
        safe = _safe(name)
        if len(safe) > 60:
            safe = safe[:50] + "-" + hashlib.sha256(name.encode("utf-8", "replace")).hexdigest()[:8]
        return safe

    wanted: list[tuple[tuple, str]] = [(("outputs",), "outputs"), (("verdicts",), "verdicts")]
    for i, oname in enumerate(outputs):
        wanted.append((("residuals", i), f"residuals_{short(oname)}"))
        for j, iname in enumerate(inputs):
            wanted.append((("response", i, j), f"response_{short(iname)}_to_{short(oname)}"))
    names: dict[tuple, str] = {}
    taken: set[str] = set()
    for key, stem in wanted:
        candidate, k = stem, 1
        while candidate.lower() in taken:
            k += 1
            candidate = f"{stem}-{k}"
        taken.add(candidate.lower())
        names[key] = candidate + ".png"
    return names


def _check_plot_dir(folder: str, names: dict[tuple, str], *, force: bool, protected: tuple) -> None:
    """Refuse the figure folder before any work: not a folder, existing files, names too long."""
    from pathlib import Path

    from ..io.atomic import check_new_folder, check_output_paths

    target = Path(folder)
    check_new_folder(target, longest_name=max(names.values(), key=len))
    if os.path.isdir(target):
        check_output_paths([target / n for n in names.values()], force=force, protected=protected)


def _write_plots(report: Any, folder: str, *, force: bool, protected: tuple, model: Any = None) -> list[str]:
    """Draw every figure, then write them all or none (a folder created here goes again on failure)."""
    import io
    import shutil
    from pathlib import Path

    import matplotlib

    matplotlib.use("Agg")
    from ..io.atomic import write_many
    from ..plots import validation as vplots

    target = Path(folder)
    names = _figure_names(tuple(report.inputs), tuple(report.outputs))
    jobs: list[tuple[str, Any]] = [
        (names[("outputs",)], lambda: vplots.output_comparison(report, model=model)),
        (names[("verdicts",)], lambda: vplots.verdict_grid(report)),
    ]
    for i in range(len(report.outputs)):
        jobs.append((names[("residuals", i)], lambda i=i: vplots.residual_correlations(report, output=i)))
        for j in range(len(report.inputs)):
            jobs.append((names[("response", i, j)],
                         lambda i=i, j=j: vplots.frequency_comparison(report, output=i, input=j, model=model)))
    images = []
    for name, make in jobs:
        buffer = io.BytesIO()
        make().savefig(buffer, format="png", dpi=110)
        images.append((target / name, buffer.getvalue()))
    created = next((p for p in reversed((target, *target.parents)) if not p.exists()), None)
    target.mkdir(parents=True, exist_ok=True)
    try:
        written = write_many(images, force=force, protected=protected)
    except BaseException:
        if created is not None:
            shutil.rmtree(created, ignore_errors=True)
        raise
    return [str(p) for p in written]
