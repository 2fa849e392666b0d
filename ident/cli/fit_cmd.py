"""``rigfit fit``: identify a linear model from a rig log."""

from __future__ import annotations

import os
from typing import Any

import click

from ..choices import METHODS, OFFSET_METHODS, REFINEMENTS, WEIGHTINGS
from ._common import echo_json, log_options, progress_enabled, read_log_kwargs
from ._periodic import analyse_log_periods, periodic_lines, periodic_options

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
              help="Use this column as an input. Give a name, group/name, a pattern such as 'u*' (every "
                   "match, in file order) or a position such as '#2'; repeat the option for more "
                   "inputs, whose order is kept.")
@click.option("--output", "outputs", multiple=True, required=True, metavar="NAME",
              help="Use this column as an output. It is chosen as --input is, and the option can be repeated.")
@log_options
@click.option("--method", type=click.Choice(METHODS), default="auto", show_default=True,
              help="Choose the model family. 'auto' fits ARX and subspace candidates and refines the best; "
                   "'arx' keeps least-squares ARX models; 'subspace' starts from subspace estimates only; "
                   "'oe', 'armax' and 'bj' fit that polynomial structure (every polynomial of one order, "
                   "--order or each order up to --max-order) by prediction error.")
@click.option("--order", "order_text", default="auto", show_default=True, metavar="N|auto",
              help="Fit this model order (ARX: na = nb = N; otherwise N states), or select it with 'auto'. "
                   "A fixed order is always fitted; weak excitation only gives a warning.")
@click.option("--max-order", type=int, default=10, show_default=True, metavar="N",
              help="Try orders up to this one when the order is selected automatically.")
@click.option("--delay", type=int, default=None, metavar="SAMPLES",
              help="Use this input delay in samples for every input. By default the delays estimated "
                   "from the data are tried together with 0 and 1 sample.")
@click.option("--refine", "refinement", type=click.Choice(REFINEMENTS), default="auto", show_default=True,
              help="Choose what the refinement of the best candidates minimises: the simulation error "
                   "('output_error', what 'auto' does), the one-step prediction error with a noise "
                   "model ('innovations', for logs taken in closed loop), or nothing ('none').")
@click.option("--weighting", type=click.Choice(WEIGHTINGS), default=None,
              help="Use only this subspace weighting. By default all three are tried.")
@click.option("--horizon", type=int, default=None, metavar="N",
              help="Use this past and future horizon for the subspace estimates. By default the horizon "
                   "for --max-order and twice it are tried.")
@click.option("--stabilize", is_flag=True,
              help="Reflect unstable poles of the direct subspace estimates into the unit circle.")
@click.option("--reference", "references", multiple=True, metavar="NAME",
              help="Fit through this column, the set point a controller acted on (repeatable): the "
                   "plant is then estimated from the part of the input the reference explains (the "
                   "two-stage method for logs taken in closed loop).")
@click.option("--holdout", type=float, default=0.3, show_default=True, metavar="FRACTION",
              help="Hold out this fraction at the end of the log (of each segment) for validation.")
@click.option("--keep-frozen-tail", is_flag=True,
              help="Keep samples at the end of the log that repeat one value in every channel (by default "
                   "such a padded or stopped stretch is left out before the hold-out is taken).")
@click.option("--validate-with", "validation_path", type=click.Path(dir_okay=False), default=None, metavar="LOG",
              help="Hold out this whole separate log (same columns, read the same way) instead of the tail "
                   "of LOG: LOG is used whole for estimation.")
@periodic_options
@click.option("--offset", type=click.Choice(OFFSET_METHODS), default="mean", show_default=True,
              help="Take the operating point as the mean of the estimation part ('mean') or as the "
                   "level at its start ('initial', averaged over --initial-window).")
@click.option("--initial-window", "initial_window_s", type=float, default=None, metavar="S",
              help="Average the first S seconds for --offset initial. By default a short window "
                   "is chosen from the data.")
@click.option("--significance", type=float, default=0.05, show_default=True, metavar="P",
              help="Use this level for the held-out test that decides whether a simpler model is "
                   "as accurate as the best one.")
@click.option("--refine-count", type=int, default=4, show_default=True, metavar="N",
              help="Refine this many of the best candidates.")
@click.option("--per-criterion", type=int, default=3, show_default=True, metavar="N",
              help="Shortlist this many ARX structures by each of AIC, BIC and FPE.")
@click.option("--screen-samples", type=int, default=10_000, show_default=True, metavar="N",
              help="Fit and score the candidates on at most this many estimation and validation "
                   "samples each; the chosen model is then polished on all the data.")
@click.option("--workers", type=click.IntRange(min=1), default=None, metavar="N",
              help="Processes for the candidate search (default: the cores this process may use, at most "
                   "8; 1 keeps it in this process). The model does not depend on it.")
@click.option("--detrend", is_flag=True, help="Remove a straight line fitted to the estimation part from every signal.")
@click.option("--decimate", type=int, default=1, show_default=True, metavar="Q",
              help="Low-pass filter the signals and keep every Q-th sample before fitting.")
@click.option("-o", "--model-out", "model_out", type=click.Path(dir_okay=False), default=None,
              metavar="PATH", help="Write the selected model to this model file.")
@click.option("--force", is_flag=True, help="Replace an existing --model-out file.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary as JSON on stdout.")
@click.option("--quiet", is_flag=True, help="Show no progress display.")
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
    refinement: str,
    weighting: str | None,
    horizon: int | None,
    stabilize: bool,
    references: tuple[str, ...],
    holdout: float,
    keep_frozen_tail: bool,
    validation_path: str | None,
    period_text: str,
    description_path: str | None,
    offset: str,
    initial_window_s: float | None,
    significance: float,
    refine_count: int,
    per_criterion: int,
    screen_samples: int,
    workers: int | None,
    detrend: bool,
    decimate: int,
    model_out: str | None,
    force: bool,
    as_json: bool,
    quiet: bool,
) -> None:
    """Identify a linear model of the OUTPUTs driven by the INPUTs in LOG.

    The last --holdout fraction of the log (of each segment) is held out. ARX
    structures and subspace models of every order up to --max-order (three
    weightings, a few horizons, the estimated input delays and no delay) are
    fitted and scored on the held-out part; the best few are refined by
    minimising their simulation error, and the refined model with the best
    held-out fit is kept unless a simpler one is statistically as accurate
    there and the estimation data do not support the extra parameters. The
    model gets a one-step predictor and a parameter covariance.

    Exit status: 0 ok; 2 bad input (unreadable log, missing column, a gap or
    dropped row without --split-at-gaps, output equal to an input, collinear
    or constant inputs, an order too high for the log).
    """
    import warnings

    log_kwargs = read_log_kwargs(locals())
    _single_blas_thread()
    from ..estimate.identify import IdentifyOptions, identify
    from ..estimate.jobs import workers_for
    from ..estimate.preprocess import PreprocessOptions
    from ..io.atomic import check_output_path
    from ..io.log import read_log

    order = _parse_order(order_text)
    workers = workers_for(workers)
    names_in = [n.lower() for n in inputs]
    for name in outputs:
        if name.lower() in names_in:
            raise click.BadParameter(
                f"{name!r} is given as both an input and an output", param_hint="--output"
            )
    if references and validation_path is not None:
        raise click.BadParameter("--reference fits through a part of LOG held out of LOG itself; it cannot be "
                                 "combined with a separate --validate-with log", param_hint="--validate-with")
    if model_out is not None:
        check_output_path(model_out, force=force, protected=(log_path,) + _paths(validation_path))
    options = IdentifyOptions(
        method=method,
        order=order,
        max_order=max_order,
        delay=delay,
        refinement=refinement,
        weighting=weighting,
        horizon=horizon,
        stabilize=stabilize,
        significance=significance,
        refine_count=refine_count,
        per_criterion=per_criterion,
        screen_samples=screen_samples,
        preprocess=PreprocessOptions(holdout=holdout, detrend=detrend, decimate=decimate, offset=offset,
                                     initial_window_s=initial_window_s, drop_frozen_tail=not keep_frozen_tail),
    )
    show_progress = progress_enabled(quiet)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        if show_progress:
            click.echo(f"reading {os.path.basename(log_path)} ...", err=True)
        log = _without_time_stamps(read_log(log_path, list(inputs), list(outputs), **log_kwargs))
        # the log's values are not needed raw after the fit: let the preprocessing make the
        # deviations from the operating point in place rather than in a copy of the log
        consumed = (not references and decimate == 1 and not detrend
                    and _writeable(log.u) and _writeable(log.y))
        segments = [(log.u[a:b], log.y[a:b]) for a, b in log.segments]
        starts = [a for a, _ in log.segments]
        kwargs: dict[str, Any] = {
            "input_names": log.input_names, "output_names": log.output_names,
            "input_units": log.input_units, "output_units": log.output_units,
            "segment_starts": starts,
        }
        vlog = _validation_log(validation_path, inputs, outputs, log_kwargs, log)
        if vlog is not None:
            kwargs["validation_segments"] = [(vlog.u[a:b], vlog.y[a:b]) for a, b in vlog.segments]
            kwargs["validation_starts"] = [a for a, _ in vlog.segments]
        if references:  # the set points, read as columns of the same log (same rows, same segments)
            ref_log = read_log(log_path, list(references), list(outputs)[:1], **log_kwargs)
            kwargs["references"] = [ref_log.u[a:b] for a, b in log.segments]
        if show_progress:
            with click.progressbar(length=1000, label="identifying", file=click.get_text_stream("stderr")) as bar:
                done = [0]

                def progress(step: str, fraction: float) -> None:
                    bar.label = f"{step:<22}"
                    target = int(round(1000 * min(max(fraction, 0.0), 1.0)))
                    if target > done[0]:
                        bar.update(target - done[0])
                        done[0] = target

                result = identify(segments, log.sample_time, options, progress=progress,
                                  overwrite_data=consumed, workers=workers, **kwargs)
        else:
            result = identify(segments, log.sample_time, options, overwrite_data=consumed, workers=workers, **kwargs)
        del segments
    messages = []
    for w in caught:
        text = str(w.message)
        if text not in messages:
            messages.append(text)

    from ..assess.modes import mode_table

    table = mode_table(result.model, log_duration_s=log.duration_s or None,
                       pole_covariance=result.pole_covariance, parameter_covariance=result.covariance)
    periodic = _periodic_block(log, result, period_text, description_path, deviations=consumed)
    written = None
    if model_out is not None:
        from ..io.modelfile import save_model

        provenance = _provenance(log, result)
        if vlog is not None:
            provenance["validation"]["log"] = {"file_name": vlog.source.file_name, "sha256": vlog.source.sha256,
                                               "n_samples": vlog.n_samples}
        written = save_model(
            model_out, result.model, provenance=provenance,
            force=force, protected=(log_path,) + _paths(validation_path),
        )
    for text in messages:
        click.echo(f"warning: {text}", err=True)
    if log.resampling is not None:
        click.echo(f"note: {log.resampling.describe()}", err=True)
    if as_json:
        payload = _summary(log, result, table, messages, written)
        payload["validation_log"] = None if vlog is None else {"file_name": vlog.source.file_name,
                                                               "sha256": vlog.source.sha256}
        payload["periodic"] = periodic
        echo_json(payload)
    else:
        click.echo(_text(log, result, table, written, vlog))
        for line in periodic_lines(periodic):
            click.echo(line)


def _paths(path: str | None) -> tuple[str, ...]:
    return () if path is None else (path,)


def _validation_log(path: str | None, inputs: tuple[str, ...], outputs: tuple[str, ...],
                    log_kwargs: dict[str, Any], log: Any) -> Any:
    """Read the --validate-with log with the same columns and options; its sample time must match."""
    if path is None:
        return None
    from ..errors import IdentError
    from ..io.log import read_log

    vlog = read_log(path, list(inputs), list(outputs), **log_kwargs)
    if [n.lower() for n in (*vlog.input_names, *vlog.output_names)] != \
            [n.lower() for n in (*log.input_names, *log.output_names)]:
        raise IdentError(f"{path}: the columns chosen ({', '.join((*vlog.input_names, *vlog.output_names))}) "
                         f"differ from those in {log.source.file_name}")
    if abs(vlog.sample_time - log.sample_time) > 1e-3 * log.sample_time:
        raise IdentError(f"{path}: sample time {vlog.sample_time:g} s differs from {log.source.file_name}'s "
                         f"{log.sample_time:g} s", hint="bring both logs to one rate with --resample")
    return vlog


def _without_time_stamps(log: Any) -> Any:
    """Keep only the first and last time stamps of ``log`` (all ``fit`` needs is the duration)."""
    import dataclasses

    return dataclasses.replace(log, time=log.time[[0, -1]]) if log.time.size > 2 else log


def _writeable(a: Any) -> bool:
    """Make the array ``a`` writeable where numpy allows (it owns its data); tell whether it is."""
    if not a.flags.writeable:
        try:
            a.flags.writeable = True
        except ValueError:
            return False
    return True


def _periodic_block(log: Any, result: Any, period_text: str, description_path: str | None, *,
                    deviations: bool = False) -> Any:
    """Analyse the periods of the longest segment of LOG, with the model against them (same rate only).

    ``deviations``: the log's arrays already hold the deviations from the operating point.
    """
    from ..estimate.periodic_check import periodic_summary

    a, b = max(log.segments, key=lambda seg: seg[1] - seg[0])
    op = result.model.operating_point
    u, y = (log.u[a:b], log.y[a:b]) if deviations else (log.u[a:b] - op.inputs, log.y[a:b] - op.outputs)
    analysis = analyse_log_periods(u, y, log.sample_time, period_text,
                                   description_path, {"input_names": log.input_names,
                                                      "output_names": log.output_names})
    if analysis is None:
        return None
    same_rate = result.prepared.decimation == 1
    return periodic_summary(analysis, result.model if same_rate else None)


def _short(values) -> str:
    """Format a per-input list: the single value when all are equal."""
    vals = [int(v) for v in values]
    return str(vals[0]) if len(set(vals)) == 1 else ",".join(map(str, vals))


def _fit_dict(names, values) -> dict[str, float]:
    return {name: float(v) for name, v in zip(names, values, strict=True)}


def _provenance(log, result) -> dict[str, Any]:
    from ..io.modelfile import uncertainty_provenance

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
            "frozen_tails": [list(r) for r in prep.frozen_tails],
            "n_samples": prep.n_estimation_samples,
            "sample_time": prep.sample_time,
            "decimation": prep.decimation,
            "input_delay": list(result.input_delay),
            "noise_model": result.noise_model,
            "selection": [c.as_dict() for c in result.candidates],
            "selection_rule": None if result.selection is None else result.selection.as_dict(),
            **uncertainty_provenance(result.pole_covariance, result.covariance),
        },
        "validation": {
            "ranges": [list(r) for r in prep.validation_ranges],
            "n_samples": prep.n_validation_samples,
            "fit_percent": _fit_dict(prep.output_names, result.validation_fit),
            "estimation_fit_percent": _fit_dict(prep.output_names, result.estimation_fit),
        },
    }
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
        "stage": result.selected.stage,
        "noise_model": result.noise_model,
        "order": result.order,
        "n_states": result.model.n_states,
        "input_delay": list(result.input_delay),
        "structure": result.selected.structure,
        "sample_time": prep.sample_time,
        "validation_fit": _fit_dict(prep.output_names, result.validation_fit),
        "mean_validation_fit": float(sum(result.validation_fit) / len(result.validation_fit)),
        "estimation_fit": _fit_dict(prep.output_names, result.estimation_fit),
        "selection": None if result.selection is None else result.selection.as_dict(),
        "refinement": _refinement_summary(result.refinement),
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
        "excitation": result.excitation,
        "delays": None if result.delay is None else result.delay.delays,
        "delay_evidence": _delay_evidence(result.delay, prep.input_names, prep.output_names),
        "operating_point": {
            "inputs": prep.operating_point.inputs,
            "outputs": prep.operating_point.outputs,
        },
        "ranges": {
            "estimation": [list(r) for r in prep.estimation_ranges],
            "validation": [list(r) for r in prep.validation_ranges],
            "frozen_tails": [list(r) for r in prep.frozen_tails],
        },
        "modes": mode_table_to_dict(table),
        "flags": flags,
        "warnings": messages,
        "notes": list(result.notes),
        "model_file": None if written is None else str(written),
    }


def _refinement_summary(res) -> dict[str, Any] | None:
    """Return the final refinement's record (``None`` for a direct estimate)."""
    if res is None:
        return None
    return {
        "noise_model": res.options.noise_model,
        "iterations": res.iterations,
        "stop_reason": res.stop_reason,
        "loss": res.loss,
        "initial_loss": res.initial_loss,
        "error_variance": res.error_variance,
        "n_parameters": res.n_parameters,
        "n_samples": res.n_samples,
        "covariance_method": None if res.covariance is None else res.covariance.method,
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


def _fit_cell(value: float) -> str:
    """Format a candidate's held-out fit for a table cell: ``diverged`` for a simulation that ran away."""
    return f"{value:7.2f}" if value > -1e6 else "diverged"


def _candidate_lines(result) -> list[str]:
    """List the refined candidates with their starts, after a count of the direct estimates."""
    cands = list(result.candidates)
    direct = [c for c in cands if c.stage == "estimated"]
    refined = [c for c in cands if c.stage == "refined"]
    kinds = ", ".join(f"{sum(c.method == k for c in direct)} {k}" for k in dict.fromkeys(c.method for c in direct))
    lines = [f"candidates: {len(direct)} direct estimates ({kinds}) scored on the held-out data"]
    if refined:
        reduced = sum("reduced_from" in c.structure for c in refined)
        tried = f", {reduced} of them by reducing the chosen model" if reduced else ""
        lines.append(f"  {len(refined)} refined{tried} (held-out fit %, start -> refined):")
        rows = refined
    else:
        lines.append("  the best by held-out fit:")
        rows = sorted(direct, key=lambda c: -c.mean_fit if c.mean_fit > -1e6 else 1e9)[:8]
        if not any(c.selected for c in rows):
            rows.append(next(c for c in direct if c.selected))
    with_criteria = not refined and any(c.criteria is not None for c in rows)
    wide = max([48, *(len(_describe(c)) + 2 for c in rows)])
    if with_criteria:
        lines.append(f"  {'#':>4}  {'structure':<{wide}}{'states':>6} {'params':>6}"
                     f"{'AIC':>11}{'BIC':>11}{'FPE':>12}  fit %")
    for c in rows:
        k = cands.index(c)
        start = cands[c.structure["refined_from"]] if c.stage == "refined" else None
        before = f"{_fit_cell(start.mean_fit)} -> " if start is not None else ""
        mark = "  <- selected" if c.selected else ""
        crit = ""
        if with_criteria:
            crit = (f"{c.criteria.aic:>11.5g}{c.criteria.bic:>11.5g}{c.criteria.fpe:>12.5g}  "
                    if c.criteria is not None else f"{'-':>11}{'-':>11}{'-':>12}  ")
            lines.append(f"  {k:>4}  {_describe(c):<{wide}}{c.n_states:>6} {c.n_parameters:>6}{crit}"
                         f"{_fit_cell(c.mean_fit)}{mark}")
            continue
        lines.append(f"  {k:>4}  {_describe(c):<{wide}}{c.n_states:>3} states {c.n_parameters:>4} params  "
                     f"{before}{_fit_cell(c.mean_fit)}{mark}")
    if result.best_by:
        chosen = next(k for k, c in enumerate(cands) if c.selected)
        prefs = ", ".join(f"{name.upper()} -> #{k}" for name, k in result.best_by.items())
        lines.append(f"  preferred: {prefs}, held-out test -> #{chosen}")
    if result.selection is not None and result.selection.tied:
        tied = ", ".join(f"#{cands.index(refined[k]) if refined else k}" for k in result.selection.tied)
        lines.append(f"  statistically as accurate as the best on the held-out data: {tied}")
    grid = result.arx_sweep
    if grid is not None:
        lines.append(f"  ({len(grid.rows)} ARX structures ranked by AIC, BIC and FPE on {grid.n_samples} rows; "
                     "--json lists every candidate and structure)")
    return lines


def _describe(c) -> str:
    """Describe a candidate's start in one phrase: ARX orders and delays, or subspace order and settings."""
    st = c.structure
    if c.method == "arx":
        text = f"ARX na = {st['na']}, nb = {_short(st['nb'])}, nk = {_short(st['nk'])}"
    else:
        text = f"subspace n = {st['n']} ({st['weighting']}, horizon {st['horizon']})"
    if "reduced_from" in st:
        text += f", reduced to {c.order} states"
    if c.stage == "refined" and any(c.input_delay):
        text += f", input delay {_short(c.input_delay)}"
    return text


def _text(log, result, table, written, vlog=None) -> str:
    prep = result.prepared
    seg = f", {len(log.segments)} segments" if len(log.segments) > 1 else ""
    lines = [
        f"{log.source.file_name}: {log.n_samples} samples{seg}, T = {log.sample_time:g} s"
        + (f", decimated by {prep.decimation} to T = {prep.sample_time:g} s" if prep.decimation > 1 else "")
        + (f", {log.dropped_rows} bad rows dropped" if log.dropped_rows else "")
        + (f", {sum(b - a for a, b in prep.frozen_tails)} frozen samples at the end left out"
           if prep.frozen_tails else "")
    ]
    sel = result.selected
    how = {"output_error": "refined by output error", "innovations": "refined in innovations form"}
    extra = f" + {sum(result.input_delay)} input-delay" if any(result.input_delay) else ""
    lines.append(f"model: {_describe(sel)}, {how.get(sel.noise_model, 'as estimated')}; "
                 f"{result.model.n_states - sum(result.input_delay)}{extra} states, {sel.n_parameters} parameters")
    if result.selection is not None:
        lines.append(f"why: {result.selection.reason}")
    lines.append("")
    held = prep.options.holdout
    where = f"last {100 * held:g} %" if vlog is None else vlog.source.file_name
    lines.append(f"fit percent     held-out ({where})   in-sample")
    for k, name in enumerate(prep.output_names):
        unit = prep.output_units[k]
        label = f"{name} [{unit}]" if unit else name
        lines.append(f"  {label:<16}{_fmt_fit(result.validation_fit[k]):>12}{_fmt_fit(result.estimation_fit[k]):>20}")
    lines.append("")
    lines += _candidate_lines(result)
    ref = result.refinement
    if ref is not None:
        stop = {"converged": "converged", "small_step": "converged", "boundary": "stopped at the stability boundary",
                "max_iterations": "stopped at the step limit", "no_progress": "no further progress"}
        lines.append(f"refinement: {ref.iterations} steps in all, last on {ref.n_samples} estimation samples "
                     f"({stop.get(ref.stop_reason, ref.stop_reason)}); parameter covariance: "
                     f"{'none' if ref.covariance is None else ref.covariance.method}")
    if result.singular_values is not None:
        sv = ", ".join(f"{v:.3g}" for v in result.singular_values[: result.options.max_order + 1])
        lines.append(f"subspace singular values: {sv} (largest gap after {result.suggested_order})")
        fact = result.subspace_factorization
        if fact is not None:
            way = "data covariance + Cholesky" if fact["path"] == "gram" else "block Householder QR"
            lines.append(f"  projection by {way} (scaled data covariance condition {fact['gram_condition']:.2g})")
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
