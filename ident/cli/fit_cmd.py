"""``rigfit fit``: identify a linear model from a rig log."""

from __future__ import annotations

import os
from typing import Any

import click

from ..choices import METHODS
from ._common import echo_json, log_options, progress_enabled, read_log_kwargs

#: Environment variables through which a user chooses the BLAS thread count.
_THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "GOTO_NUM_THREADS", "OMP_NUM_THREADS",
                     "MKL_NUM_THREADS")


def _single_blas_thread() -> None:
    """Ask for one BLAS thread, unless numpy is loaded already or the user chose a count.

    The fit's numerical work is QR factorisations of tall, narrow blocks and
    first-order recursions: memory-bound work split into many small BLAS
    calls. Threaded OpenBLAS gains little there on an idle machine and, when
    other processes share the cores, its spinning threads made ``rigfit fit``
    two to three times slower end to end (measured on the 2-core benchmark
    machine; see benchmarks/README.md). The variable must be set before numpy
    loads, so it only applies to a fresh ``rigfit`` process.
    """
    import sys

    if "numpy" not in sys.modules and not any(v in os.environ for v in _THREAD_VARIABLES):
        os.environ["OPENBLAS_NUM_THREADS"] = "1"


def _parse_order(value: str) -> int | None:
    if value == "auto":
        return None
    try:
        order = int(value)
    except ValueError:
        raise click.BadParameter(f"must be a positive integer or 'auto'; got {value!r}") from None
    if order < 1:
        raise click.BadParameter(f"must be a positive integer or 'auto'; got {value!r}")
    return order


@click.command()
@click.argument("log_path", metavar="LOG", type=click.Path(dir_okay=False))
@click.option("--input", "inputs", multiple=True, required=True, metavar="NAME",
              help="Input column (repeatable; the order is kept): a name, group/name, a pattern "
                   "such as 'u*' (every match, in file order) or a position such as '#2'.")
@click.option("--output", "outputs", multiple=True, required=True, metavar="NAME",
              help="Output column (repeatable; the order is kept), chosen as --input.")
@log_options
@click.option("--method", type=click.Choice(METHODS), default="auto", show_default=True,
              help="Model family; 'auto' fits both and keeps the best on validation data.")
@click.option("--order", "order_text", default="auto", show_default=True, metavar="N|auto",
              help="Model order (ARX: na = nb = N; subspace: N states), or 'auto' to select.")
@click.option("--max-order", type=int, default=10, show_default=True, metavar="N",
              help="Largest order tried with --order auto.")
@click.option("--delay", type=int, default=None, metavar="SAMPLES",
              help="ARX input delay in samples (default: estimated from the data).")
@click.option("--holdout", type=float, default=0.3, show_default=True, metavar="FRACTION",
              help="Fraction at the end of the log (of each segment) held out for validation.")
@click.option("--detrend", is_flag=True, help="Remove a straight line fitted to the estimation part.")
@click.option("--decimate", type=int, default=1, show_default=True, metavar="Q",
              help="Low-pass filter and keep every Q-th sample before fitting.")
@click.option("-o", "--model-out", "model_out", type=click.Path(dir_okay=False), default=None,
              metavar="PATH", help="Write the selected model to this model file.")
@click.option("--force", is_flag=True, help="Replace an existing --model-out file.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary on stdout.")
@click.option("--quiet", is_flag=True, help="No progress display.")
def fit(
    log_path: str,
    inputs: tuple[str, ...],
    outputs: tuple[str, ...],
    time_column: str | None,
    sample_rate: float | None,
    drop_bad_rows: bool,
    split_at_gaps: bool,
    jitter_tolerance: float,
    resample_hz: float | None,
    upsample: str | None,
    method: str,
    order_text: str,
    max_order: int,
    delay: int | None,
    holdout: float,
    detrend: bool,
    decimate: int,
    model_out: str | None,
    force: bool,
    as_json: bool,
    quiet: bool,
) -> None:
    """Identify a linear model of the OUTPUTs driven by the INPUTs in LOG.

    The last --holdout fraction of the log is held out. ARX structures (na and
    nb in 1 .. --max-order, delays estimated and their neighbours) are ranked
    by AIC, BIC and FPE from one factorisation; the best 3 by each, and the
    BIC-best of each order, are validated with subspace models (1 .. --max-order states); the candidate
    with the best fit on the held-out part is kept (within 0.5 points, the
    simpler model wins).

    Exit status: 0 ok; 2 bad input (unreadable log, missing column, a gap or
    dropped row without --split-at-gaps, output equal to an input, collinear
    or non-exciting inputs, order too high).
    """
    import warnings

    log_kwargs = read_log_kwargs(locals())
    _single_blas_thread()
    from ..estimate.identify import IdentifyOptions, identify
    from ..estimate.preprocess import PreprocessOptions
    from ..io.atomic import check_output_path
    from ..io.log import read_log

    order = _parse_order(order_text)
    names_in = [n.lower() for n in inputs]
    for name in outputs:
        if name.lower() in names_in:
            raise click.BadParameter(
                f"{name!r} is given as both an input and an output", param_hint="--output"
            )
    if model_out is not None:
        check_output_path(model_out, force=force, protected=(log_path,))
    options = IdentifyOptions(
        method=method,
        order=order,
        max_order=max_order,
        delay=delay,
        preprocess=PreprocessOptions(holdout=holdout, detrend=detrend, decimate=decimate),
    )
    show_progress = progress_enabled(quiet)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if show_progress:
            click.echo(f"reading {os.path.basename(log_path)} ...", err=True)
        log = read_log(log_path, list(inputs), list(outputs), **log_kwargs)
        segments = [(log.u[a:b], log.y[a:b]) for a, b in log.segments]
        starts = [a for a, _ in log.segments]
        kwargs: dict[str, Any] = {
            "input_names": log.input_names, "output_names": log.output_names,
            "input_units": log.input_units, "output_units": log.output_units,
            "segment_starts": starts,
        }
        if show_progress:
            with click.progressbar(length=1000, label="identifying", file=click.get_text_stream("stderr")) as bar:
                done = [0]

                def progress(step: str, fraction: float) -> None:
                    bar.label = f"{step:<22}"
                    target = int(round(1000 * min(max(fraction, 0.0), 1.0)))
                    if target > done[0]:
                        bar.update(target - done[0])
                        done[0] = target

                result = identify(segments, log.sample_time, options, progress=progress, **kwargs)
        else:
            result = identify(segments, log.sample_time, options, **kwargs)
    messages = []
    for w in caught:
        text = str(w.message)
        if text not in messages:
            messages.append(text)

    from ..assess.modes import mode_table

    pole_cov = None
    if result.arx is not None:
        from ..estimate.uncertainty import arx_pole_covariance

        pole_cov = arx_pole_covariance(result.arx, model=result.model)
    table = mode_table(result.model, log_duration_s=log.duration_s or None, pole_covariance=pole_cov)
    written = None
    if model_out is not None:
        from ..io.modelfile import save_model

        written = save_model(
            model_out, result.model, provenance=_provenance(log, result, pole_cov),
            force=force, protected=(log_path,),
        )
    for text in messages:
        click.echo(f"warning: {text}", err=True)
    if log.resampling is not None:
        click.echo(f"note: {log.resampling.describe()}", err=True)
    if as_json:
        echo_json(_summary(log, result, table, messages, written))
    else:
        click.echo(_text(log, result, table, written))


def _short(values) -> str:
    """Format a per-input list: the single value when all are equal."""
    vals = [int(v) for v in values]
    return str(vals[0]) if len(set(vals)) == 1 else ",".join(map(str, vals))


def _fit_dict(names, values) -> dict[str, float]:
    return {name: float(v) for name, v in zip(names, values, strict=True)}


def _provenance(log, result, pole_cov=None) -> dict[str, Any]:
    prep = result.prepared
    prov = {
        "log": {
            "file_name": log.source.file_name,
            "sha256": log.source.sha256,
            "first_row": log.source.first_row,
            "last_row": log.source.last_row,
            "n_samples": log.n_samples,
            "duration_s": log.duration_s,
            "sample_time": log.sample_time,
            "segments": [list(s) for s in log.segments],
            "dropped_rows": log.dropped_rows,
            "format": log.source.format,
            "resampling": None if log.resampling is None else log.resampling.to_dict(),
        },
        "estimation": {
            "command": "fit",
            "method": result.method,
            "order": result.order,
            "structure": result.selected.structure,
            "options": result.options.to_dict(),
            "ranges": [list(r) for r in prep.estimation_ranges],
            "n_samples": prep.n_estimation_samples,
            "sample_time": prep.sample_time,
            "decimation": prep.decimation,
            "selection": [c.as_dict() for c in result.candidates],
        },
        "validation": {
            "ranges": [list(r) for r in prep.validation_ranges],
            "n_samples": prep.n_validation_samples,
            "fit_percent": _fit_dict(prep.output_names, result.validation_fit),
            "estimation_fit_percent": _fit_dict(prep.output_names, result.estimation_fit),
        },
    }
    if pole_cov is not None:
        from ..estimate.uncertainty import pole_covariance_to_list

        prov["estimation"]["pole_covariance"] = pole_covariance_to_list(pole_cov)
    return prov


def _summary(log, result, table, messages, written) -> dict[str, Any]:
    from ..assess.modes import mode_table_to_dict

    prep = result.prepared
    flags = sorted({flag for mode in table.modes for flag in mode.flags})
    return {
        "log": {
            "file_name": log.source.file_name,
            "sha256": log.source.sha256,
            "n_samples": log.n_samples,
            "sample_time": log.sample_time,
            "segments": [list(s) for s in log.segments],
            "dropped_rows": log.dropped_rows,
            "format": log.source.format,
            "resampling": None if log.resampling is None else log.resampling.to_dict(),
        },
        "inputs": list(prep.input_names),
        "outputs": list(prep.output_names),
        "method": result.method,
        "order": result.order,
        "n_states": result.model.n_states,
        "structure": result.selected.structure,
        "sample_time": prep.sample_time,
        "validation_fit": _fit_dict(prep.output_names, result.validation_fit),
        "mean_validation_fit": float(result.selected.mean_fit),
        "estimation_fit": _fit_dict(prep.output_names, result.estimation_fit),
        "candidates": [c.as_dict() for c in result.candidates],
        "best_by": dict(result.best_by),
        "arx_grid": None if result.arx_sweep is None else {
            "n_structures": len(result.arx_sweep.rows),
            "n_samples": result.arx_sweep.n_samples,
            "best": dict(result.arx_sweep.best),
            "rows": result.arx_sweep.as_records(),
        },
        "singular_values": None if result.singular_values is None else result.singular_values,
        "suggested_subspace_order": result.suggested_order,
        "subspace_factorization": result.subspace_factorization,
        "delays": None if result.delay is None else result.delay.delays,
        "delay_evidence": _delay_evidence(result.delay, prep.input_names, prep.output_names),
        "operating_point": {
            "inputs": prep.operating_point.inputs,
            "outputs": prep.operating_point.outputs,
        },
        "ranges": {
            "estimation": [list(r) for r in prep.estimation_ranges],
            "validation": [list(r) for r in prep.validation_ranges],
        },
        "modes": mode_table_to_dict(table),
        "flags": flags,
        "warnings": messages,
        "notes": list(result.notes),
        "model_file": None if written is None else str(written),
    }


def _delay_evidence(delay, input_names, output_names) -> dict[str, Any] | None:
    """Return the delay estimate and its evidence per channel (None without one)."""
    if delay is None:
        return None
    channels = []
    for i, out in enumerate(output_names):
        for j, inp in enumerate(input_names):
            channels.append({
                "input": inp,
                "output": out,
                "delay": int(delay.delays[i, j]),
                "detected": bool(delay.detected[i, j]),
                "coefficients": [float(v) for v in delay.coefficients[i, j]],
                "std_errors": [float(v) for v in delay.std_errors[i, j]],
                "t_ratios": [float(v) for v in delay.t_ratios[i, j]],
            })
    return {
        "method": delay.method,
        "threshold": float(delay.threshold),
        "ar_order": int(delay.ar_order),
        "fir_order": int(delay.fir_order),
        "channels": channels,
    }


def _delay_lines(result) -> list[str]:
    """One readable line per input/output channel: the delay and its t-ratios."""
    prep = result.prepared
    delay = result.delay
    if delay is None:
        if result.options.delay is not None and any(c.method == "arx" for c in result.candidates):
            d = result.options.delay
            return [f"delays: fixed at {d} sample{'' if d == 1 else 's'} (--delay)"]
        return []
    lines = [f"delays ({delay.method}; a lag counts when |t| > {delay.threshold:g}):"]
    for i, out in enumerate(prep.output_names):
        for j, inp in enumerate(prep.input_names):
            d = int(delay.delays[i, j])
            shown = delay.t_ratios[i, j][: max(d + 3, 4)]
            ratios = ", ".join(f"{v:.1f}" for v in shown)
            verdict = "" if delay.detected[i, j] else " (no lag significant: largest t-ratio)"
            unit = "sample" if d == 1 else "samples"
            lines.append(f"  {inp} -> {out}: {d} {unit}{verdict}; t-ratios at lags "
                         f"0..{len(shown) - 1}: {ratios}")
    return lines


def _fmt_fit(value: float) -> str:
    return f"{value:7.2f} %" if value > -1e6 else "   diverged"


def _text(log, result, table, written) -> str:
    prep = result.prepared
    lines = []
    seg = f", {len(log.segments)} segments" if len(log.segments) > 1 else ""
    lines.append(
        f"{log.source.file_name}: {log.n_samples} samples{seg}, T = {log.sample_time:g} s"
        + (f", decimated by {prep.decimation} to T = {prep.sample_time:g} s"
           if prep.decimation > 1 else "")
        + (f", {log.dropped_rows} bad rows dropped" if log.dropped_rows else "")
    )
    sel = result.selected
    if result.method == "arx":
        what = (f"ARX na = {sel.structure['na']}, nb = {sel.structure['nb']}, "
                f"nk = {sel.structure['nk']}")
    else:
        what = f"subspace ({sel.structure['weighting']}), horizon {sel.structure['horizon']}"
    lines.append(
        f"model: {what}; {result.model.n_states} states, {sel.n_parameters} parameters "
        f"(chosen from {len(result.candidates)} candidates by validation fit)"
    )
    lines.append("")
    held = prep.options.holdout
    lines.append(f"fit percent     validation (last {100 * held:g} %)   estimation")
    for k, name in enumerate(prep.output_names):
        unit = prep.output_units[k]
        label = f"{name} [{unit}]" if unit else name
        lines.append(f"  {label:<16}{_fmt_fit(result.validation_fit[k]):>12}"
                     f"{_fmt_fit(result.estimation_fit[k]):>20}")
    lines.append("")
    lines.append("candidates (criteria on the estimation data, smaller is better; fit on the "
                 "validation data):")
    lines.append(f"  {'#':>3}  {'method':<9}{'na':>4}{'nb':>4}{'nk':>4}{'':6}{'states':>7}"
                 f"{'params':>8}{'AIC':>12}{'BIC':>12}{'FPE':>13}{'fit %':>9}")
    for k, c in enumerate(result.candidates):
        mark = "  <- selected" if c.selected else ""
        fit_text = f"{c.mean_fit:7.2f}" if c.mean_fit > -1e6 else "diverged"
        if c.method == "arx":
            st = c.structure
            shape = f"{st['na']:>4}{_short(st['nb']):>4}{_short(st['nk']):>4}      "
        else:
            shape = f"{'n = ' + str(c.order):>18}"
        if c.criteria is not None:
            crit = (f"{c.criteria.aic:>12.5g}{c.criteria.bic:>12.5g}"
                    f"{c.criteria.fpe:>13.5g}")
        else:
            crit = f"{'-':>12}{'-':>12}{'-':>13}"
        lines.append(f"  {k:>3}  {c.method:<9}{shape}{c.n_states:>7}{c.n_parameters:>8}"
                     f"{crit}{fit_text:>9}{mark}")
    chosen = next(k for k, c in enumerate(result.candidates) if c.selected)
    if result.best_by:
        prefs = ", ".join(f"{name.upper()} -> #{k}" for name, k in result.best_by.items())
        lines.append(f"  preferred: {prefs}, validation fit -> #{chosen}")
    grid = result.arx_sweep
    if grid is not None:
        lines.append(f"  ({len(grid.rows)} ARX structures ranked on {grid.n_samples} rows; the "
                     f"best {result.options.per_criterion} by each criterion and the BIC-best of each order validated; "
                     "--json lists them all)")
    if result.singular_values is not None:
        sv = ", ".join(f"{v:.3g}" for v in result.singular_values[: result.options.max_order + 1])
        lines.append(f"subspace singular values: {sv} (largest gap after "
                     f"{result.suggested_order})")
        fact = result.subspace_factorization
        if fact is not None:
            how = ("data covariance + Cholesky" if fact["path"] == "gram"
                   else "block Householder QR")
            lines.append(f"  projection by {how} (scaled data covariance condition "
                         f"{fact['gram_condition']:.2g})")
    delay_lines = _delay_lines(result)
    if delay_lines:
        lines.append("")
        lines += delay_lines
    lines.append("")
    lines.append("modes:")
    try:
        from .modes_cmd import modes_text

        lines.append(modes_text(table, units=(prep.input_units, prep.output_units)))
    except ImportError:  # pragma: no cover - modes_cmd ships with the package
        for mode in table.modes:
            lines.append(f"  z = {mode.z:.5g}  f_n = {mode.natural_frequency_hz} Hz  "
                         f"zeta = {mode.damping_ratio}  tau = {mode.time_constant_s} s")
    for note in result.notes:
        lines.append(f"note: {note}")
    if written is not None:
        lines.append(f"model written to {written}")
    return "\n".join(lines)
