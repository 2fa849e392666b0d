"""``rigfit check``: validate a model file on a rig log it was not fitted on."""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from typing import Any

import click

from ._common import GateFailed, echo_json, log_options, read_log_kwargs
from ._periodic import analyse_log_periods, periodic_lines, periodic_options


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
@click.option("--from", "range_from", default=None, metavar="T",
              help="Validate from this point of the log: seconds on its time axis (12.5), or a data row "
                   "counted from 1 with the suffix 'rows' (1200rows). The samples before it serve as warm-up "
                   "for the 'continued' fit figure.")
@click.option("--to", "range_to", default=None, metavar="T",
              help="Validate up to this point of the log (included): seconds, or a data row with 'rows'.")
@periodic_options
@click.option("--min-fit", type=float, default=None, metavar="PCT",
              help="Gate: every output's held-out fit must reach PCT percent (exit 3 if not).")
@click.option("--require-white", is_flag=True,
              help="Gate: every output's residual autocorrelation must stay inside its band (exit 3 if not).")
@click.option("--fit-warning", "fit_warning", type=float, default=50.0, show_default=True, metavar="PCT",
              help="Headline warning level: below this held-out fit the model is called poor, gate or no gate.")
@click.option("--no-fit-warning", is_flag=True, help="No headline warning level.")
@click.option("--prediction-steps", type=int, default=1, show_default=True, metavar="K",
              help="Horizon of the k-step-ahead prediction whose fit is reported.")
@click.option("--max-lag", type=int, default=None, metavar="L",
              help="Largest lag of the residual correlations (default: the model's settling time in samples, "
                   "20 to 250).")
@click.option("--confidence", type=float, default=0.95, show_default=True, metavar="P",
              help="Level of the residual bands (simultaneous over the lags shown) and of the "
                   "frequency-response confidence region.")
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
    range_from: str | None,
    range_to: str | None,
    period_text: str,
    description_path: str | None,
    min_fit: float | None,
    require_white: bool,
    fit_warning: float,
    no_fit_warning: bool,
    prediction_steps: int,
    max_lag: int | None,
    confidence: float,
    as_json: bool,
    plot_dir: str | None,
    force: bool,
) -> None:
    """Validate MODEL (a model file) on LOG, a rig log it was not fitted on.

    Reports the fit percent from rest, with the initial state estimated on a
    leading window (not scored) and, with --from, continued from the log
    before; residual whiteness (autocorrelation over the model's settling
    time with a simultaneous band, cumulative periodogram, Ljung-Box);
    independence of the residuals from the prewhitened inputs (negative lags
    reveal feedback); normality; the model's frequency response against an
    estimate from the data with its confidence region, judged only where the
    data are informative; level dependence (a possible nonlinearity); one
    piece of advice about the order; each with a verdict in plain words. The
    log's columns are matched to the model's signal names and the model's
    operating point is subtracted.

    Exit status: 0 ok; 2 bad input; 3 a gate (--min-fit, --require-white) failed.
    """
    from ..assess.diagnostics import CheckOptions, report_to_dict
    from ..io.modelfile import load_model

    options = CheckOptions(
        prediction_steps=prediction_steps, max_lag=max_lag, min_fit=min_fit, confidence=confidence,
        require_white=require_white, fit_warning=None if no_fit_warning else fit_warning,
    )
    loaded = load_model(model_path)
    model = loaded.model
    if not model.is_discrete:
        from ..errors import IdentError

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
    where = _record(log, range_from, range_to, log_path)
    overlap = _fitted_rows(loaded.provenance, log, where)
    data = _deviations(log, model, model_path, where)
    periodic = analyse_log_periods(data["u"], data["y"], log.sample_time, period_text, description_path,
                                   {"input_names": model.inputs, "output_names": model.outputs})
    covariance = loaded.parameter_covariance()  # read from the model file once: the verdict and the figures
    report = _validate(model, loaded, options, data, periodic, log.resampling is not None, covariance)

    written: list[str] = []
    if plot_dir is not None:
        written = _write_plots(report, plot_dir, force=force, protected=(log_path, model_path), model=model,
                               covariance=covariance)
    periodic_record = None
    if periodic is not None:
        from ..estimate.periodic_check import periodic_summary

        periodic_record = periodic_summary(periodic, model)
    if as_json:
        payload = report_to_dict(report)
        payload.update({"log": log_path, "model": model_path, "figures": written, "periodic": periodic_record,
                        "columns": {"inputs": list(log.input_names), "outputs": list(log.output_names)},
                        "sample_time_from_model": time_note is not None,
                        "fitted_rows_checked": None if overlap is None else list(overlap),
                        "segment": {"start": where.start, "stop": where.stop, "n_segments": len(log.segments),
                                    "dropped_rows": log.dropped_rows, "warmup": where.start - where.segment_start,
                                    "time_s": [float(log.time[where.start]), float(log.time[where.stop - 1])]}})
        echo_json(payload)
    else:
        import dataclasses

        shown = dataclasses.replace(report, inputs=tuple(log.input_names), outputs=tuple(log.output_names))
        click.echo(report_text(shown, log_path=log_path, model_path=model_path, where=where.text,
                               periodic=periodic_record, mapping=_mapping_line(model, log), time_note=time_note))
        if where.note is not None:
            click.echo(f"note: {where.note}")
        if overlap is not None:
            click.echo(f"note: rows {overlap[0] + 1}..{overlap[1]} of this log were used to fit the model (the "
                       "model file records the log's fingerprint and its estimation rows): the figures above are "
                       "not held-out figures there; check the rows held out (--from/--to) or another log")
        if log.dropped_rows:
            click.echo(f"note: {log.dropped_rows} bad rows dropped")
        for path in written:
            click.echo(f"wrote {path}", err=True)
    failures = report.gate_failures
    if failures:
        raise GateFailed("; ".join(v.message.split(";")[0] for v in failures))


@dataclass(frozen=True)
class _Where:
    """The samples validated on: ``[start, stop)`` inside the segment starting at ``segment_start``."""

    start: int
    stop: int
    segment_start: int
    text: str
    note: str | None


def _position(text: str, log: Any, option: str, path: str, *, end: bool) -> int:
    """Turn a ``--from``/``--to`` value into a sample index (``--to`` exclusive)."""
    import math

    import numpy as np

    from ..errors import OptionError

    raw = text.strip().lower()
    rows = raw.endswith("rows")
    try:
        value = float(raw[:-4].strip()) if rows else float(raw[:-1] if raw.endswith("s") else raw)
    except ValueError:
        value = math.nan
    if not math.isfinite(value) or (rows and value != int(value)):
        raise OptionError(f"{option} must be seconds such as 12.5 or a data row such as 1200rows; got {text!r}")
    if rows:
        row = int(value)
        if not 1 <= row <= log.n_samples:
            raise OptionError(f"{path}: {option} {text!r}: the log has data rows 1 to {log.n_samples}")
        return row if end else row - 1
    seconds = value
    t = log.time
    if not t[0] - 1e-9 <= seconds <= t[-1] + 1e-9:
        raise OptionError(f"{path}: {option} {seconds:g} s lies outside the log's time axis "
                          f"({t[0]:g} to {t[-1]:g} s)")
    tol = 1e-6 * log.sample_time
    return int(np.searchsorted(t, seconds + tol, side="right")) if end else \
        int(np.searchsorted(t, seconds - tol, side="left"))


def _fitted_rows(provenance: Any, log: Any, where: _Where) -> tuple[int, int] | None:
    """Rows ``[a, b)`` of the stretch checked that the model was fitted on, by the model file's record (or None).

    The model file names the log it was fitted on by its SHA-256 (``provenance.log``: one file for
    ``rigfit fit``, ``files`` for ``rigfit run``) and the estimation rows
    (``provenance.estimation.ranges``, one per log, in samples after decimation).
    """
    if not isinstance(provenance, dict) or not log.source.sha256:
        return None
    block = provenance.get("log")
    files = block.get("files", [block]) if isinstance(block, dict) else []
    hashes = [f.get("sha256") for f in files if isinstance(f, dict)]
    if log.source.sha256 not in hashes:
        return None
    estimation = provenance.get("estimation") if isinstance(provenance.get("estimation"), dict) else {}
    ranges, q = estimation.get("ranges"), estimation.get("decimation", 1)
    k = hashes.index(log.source.sha256)
    try:
        a, b = (int(v) * int(q) for v in ranges[k]) if len(ranges) == len(hashes) else (0, log.n_samples)
    except (TypeError, ValueError, IndexError):
        a, b = 0, log.n_samples
    lo, hi = max(a, where.start), min(b, where.stop)
    return (lo, hi) if hi > lo else None


def _record(log: Any, range_from: str | None, range_to: str | None, path: str) -> _Where:
    """Choose the stretch to validate on: ``--from``/``--to`` inside one segment, else the longest segment."""
    from ..errors import OptionError

    segments = log.segments
    if range_from is None and range_to is None:
        a, b = max(segments, key=lambda seg: seg[1] - seg[0])
        note = None
        if len(segments) > 1:
            note = (f"validated on the longest of {len(segments)} segments: samples {a}..{b - 1} "
                    f"({b - a} of {log.n_samples})")
        return _Where(a, b, a, f"rows {a + 1}..{b}", note)
    a = _position(range_from, log, "--from", path, end=False) if range_from is not None else 0
    b = _position(range_to, log, "--to", path, end=True) if range_to is not None else log.n_samples
    if b <= a:
        raise OptionError(f"{path}: --from ({range_from}) must come before --to ({range_to})")
    seg = next(((s0, s1) for s0, s1 in segments if s0 <= a < s1), None)
    if seg is None or b > seg[1]:
        raise OptionError(f"{path}: the range {a + 1}..{b} (rows) crosses a gap in the log",
                          hint="choose a range inside one segment (see 'rigfit inspect')")
    text = (f"rows {a + 1}..{b} (t = {log.time[a]:.6g} to {log.time[b - 1]:.6g} s)"
            + (f", after {a - seg[0]} rows of warm-up" if a > seg[0] else ""))
    return _Where(a, b, seg[0], text, None)


def _deviations(log: Any, model: Any, model_path: str, where: _Where) -> dict[str, Any]:
    """Return the record and its warm-up as deviations from the model's operating point."""
    import warnings

    import numpy as np

    from ..errors import IdentWarning

    u = np.array(log.u[where.segment_start:where.stop], dtype=float)
    y = np.array(log.y[where.segment_start:where.stop], dtype=float)
    op = model.operating_point
    if op is None:
        warnings.warn(f"{model_path} records no operating point; the log's mean levels are used",
                      IdentWarning, stacklevel=1)
        k = where.start - where.segment_start
        level_u, level_y = u[k:].mean(axis=0), y[k:].mean(axis=0)
    else:
        level_u, level_y = op.inputs, op.outputs
    u -= level_u
    y -= level_y
    k = where.start - where.segment_start
    return {"u": u[k:], "y": y[k:], "warm_u": u[:k], "warm_y": y[:k], "sample_time": log.sample_time}


def _in_sample_fit(loaded: Any, model: Any) -> list[float] | None:
    """Return the model file's in-sample fit per output (written by fit and run), or None."""
    block = loaded.provenance.get("validation") if isinstance(loaded.provenance, dict) else None
    fits = block.get("estimation_fit_percent") if isinstance(block, dict) else None
    if not isinstance(fits, dict) or set(fits) != set(model.outputs):
        return None
    values = [fits[o] for o in model.outputs]
    return values if all(isinstance(v, (int, float)) for v in values) else None


def _validate(model: Any, loaded: Any, options: Any, data: dict[str, Any], periodic: Any, resampled: bool,
              covariance: Any) -> Any:
    from ..assess.diagnostics import validate_model
    from ..estimate.validation import continued_fit

    continued = continued_fit(model, data["u"], data["y"], data["warm_u"], data["warm_y"])
    lines = None
    if periodic is not None:
        from ..estimate.periodic_check import line_response

        lines = line_response(periodic)
    return validate_model(model, data["u"], data["y"], data["sample_time"], options, continued=continued,
                          in_sample_fit=_in_sample_fit(loaded, model), lines=lines, zero_phase_filtered=resampled,
                          covariance=covariance)


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


def report_text(report: Any, *, log_path: str = "", model_path: str = "", where: str = "",
                periodic: dict[str, Any] | None = None, mapping: str | None = None,
                time_note: str | None = None) -> str:
    """Human-readable summary of a validation report (signal names as the report holds them)."""
    T = report.sample_time
    lines = []
    if log_path or model_path:
        lines.append(f"check of {model_path} on {log_path}")
    lines.append(f"  {report.n_samples} samples at {1 / T:g} Hz" + (f": {where}" if where else ""))
    lines.append(f"  {report.headline}")
    if mapping:
        lines.append(f"  {mapping}")
    if time_note:
        lines.append(f"  note: {time_note}")
    lines.append("")
    lines += _fit_lines(report)
    lines.append("")
    lines += _residual_lines(report)
    lines.append("")
    lines += _spectral_lines(report)
    if periodic is not None:
        lines += periodic_lines(periodic)
    lines.append("")
    lines.append("verdicts")
    marks = {"pass": "ok  ", "fail": "FAIL", "note": "note", "cannot_judge": "?   "}
    for v in report.verdicts:
        lines.append(f"  {marks[v.outcome]}  {v.test:<18}  {v.message}")
    lines.append("")
    lines.append("result: " + report.headline)
    return "\n".join(lines)


def _fit_lines(report: Any) -> list[str]:
    """Format the fit table (a column per figure, then the prediction) and which figure to believe."""
    outs, k = report.outputs, report.prediction_steps
    short = {"continued": "continued", "initial_state": "initial state est.", "from_rest": "from rest"}
    heads = [short[f.kind] for f in report.fits] + [f"{k}-step prediction"]
    w = max(12, *(len(n) for n in outs))
    lines = [f"{'fit [%]':<{w}}  " + "  ".join(f"{h:>18}" for h in heads)]
    for i, name in enumerate(outs):
        values = [f.fit[i] for f in report.fits] + [report.prediction_fit[i]]
        lines.append(f"{name:<{w}}  " + "  ".join(f"{_pct(v):>18}" for v in values))
    for f in report.fits:
        if f.kind != "from_rest":
            lines.append(f"  {short[f.kind]}: {f.label}")
    lines.append(f"  which to believe: {report.fit_note}")
    for g in report.gaps:
        if g.kind != "none":
            lines.append(f"  note: {g.message}")
    return lines


def _pct(value: float) -> str:
    import math

    return f"{value:.1f}" if math.isfinite(value) else "diverged"


def _residual_lines(report: Any) -> list[str]:
    """Whiteness and cross-correlation tables, from the same numbers as the verdicts."""
    outs, ins = report.outputs, report.inputs
    T = report.sample_time
    span = report.lag_span
    L = span.lags
    lines = [f"residuals: one-step prediction errors from sample {report.scored_from + 1}; lags up to "
             f"{L * T:.4g} s ({L} samples): {span.reason}"]
    w = max(12, *(len(n) for n in outs))
    lines.append(f"{'output':<{w}}  {'white':>5}  {'Ljung-Box p':>11}  {'periodogram':>11}  {'JB p':>7}  "
                 "lags outside the band")
    for i, wr in enumerate(report.whiteness):
        acf = wr.autocorrelation
        cp = "-" if wr.periodogram is None else ("inside" if wr.periodogram.white else "outside")
        sig = ", ".join(map(str, acf.significant_lags[:8])) or "none"
        lines.append(f"{outs[i]:<{w}}  {'yes' if wr.white else 'no':>5}  {wr.ljung_box_pvalue:>11.3g}  "
                     f"{cp:>11}  {report.normality.pvalue[i]:>7.3g}  {sig} ({acf.band_text})")
    lines.append("cross-correlation with the prewhitened inputs (lag > 0: input leads, the model misses "
                 "dynamics; lag < 0, of the residual less what past inputs explain: feedback)")
    for i, row in enumerate(report.cross_correlation):
        for j, c in enumerate(row):
            order = report.whiteners[j].order
            fb = report.feedback_correlation[i][j]
            pos = c.outside(range(0, L + 1))
            neg = fb.outside(range(-L, 0))
            lines.append(
                f"  {outs[i]} / {ins[j]} (AR({order}) prewhitening): "
                f"lags 0..{L} ({c.band_text}): {_outside(pos, 'independent', 'depends on the input')}; "
                f"lags -{L}..-1 ({fb.band_text}): {_outside(neg, 'no feedback', 'feedback')}")
    return lines


def _outside(lags: tuple[int, ...], good: str, bad: str) -> str:
    if not lags:
        return f"none outside -> {good}"
    shown = ", ".join(map(str, lags[:8])) + (", ..." if len(lags) > 8 else "")
    return f"{len(lags)} outside ({shown}) -> {bad}"


def _spectral_lines(report: Any) -> list[str]:
    sp = report.spectral
    if sp.source == "periodic":
        head = (f"frequency response: measured at {sp.frequencies_hz.size} excited lines of the periodic input "
                f"({sp.n_segments} periods averaged; {100 * sp.confidence:g} % region from the period scatter)")
    else:
        head = (f"frequency response: {sp.segment.describe()}; {sp.n_segments} segments "
                f"({sp.effective_averages:.1f} independent averages); {100 * sp.confidence:g} % region after "
                "Bendat and Piersol")
    lines = [head]
    for j in sp.judgements:
        band = f"{j.low_hz:.4g}-{j.high_hz:.4g} Hz" if j.informative else "nothing"
        lines.append(f"  {j.input} -> {j.output}: {j.status.replace('_', ' ')}; judged over {band} "
                     f"({100 * j.informative_share:.0f} % of the excited band informative)")
    return lines


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


def _write_plots(report: Any, folder: str, *, force: bool, protected: tuple, model: Any = None,
                 covariance: Any = None) -> list[str]:
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
                         lambda i=i, j=j: vplots.frequency_comparison(report, output=i, input=j, model=model,
                                                                   covariance=covariance)))
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
