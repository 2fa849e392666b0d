"""``rigfit run``: run a pipeline file end to end into a new run folder with a report."""

from __future__ import annotations

from typing import Any

import click

from ._common import GateFailed, echo_json, progress_enabled


def progress_printer(quiet: bool, prefix: str = "") -> Any:
    """Return a ``progress(step, fraction)`` callback printing each new step on stderr.

    ``None`` (no progress) with ``quiet`` or when stderr is not a terminal, as for every command.
    """
    if not progress_enabled(quiet):
        return None
    last = [""]

    def progress(step: str, fraction: float) -> None:
        if step != last[0]:
            last[0] = step
            click.echo(f"{prefix}[{100 * fraction:3.0f} %] {step}", err=True)

    return progress


def _mode_text(mode: dict) -> str:
    """One mode as the summary line gives it: an oscillation by frequency and damping, a real mode by time constant."""
    f, zeta, tau = mode["natural_frequency_hz"], mode["damping_ratio"], mode["time_constant_s"]
    if "integrator" in mode["flags"]:
        text = "integrator"
    elif mode["is_pair"] and f is not None:
        text = f"{f:.4g} Hz" + (f" (zeta {zeta:.3g})" if zeta is not None else "")
    elif mode["s"] is None:  # on the negative real axis (or at 0): no continuous-time equivalent
        z = mode["z"][0] if isinstance(mode["z"], list) else mode["z"]
        text = f"real pole at z = {z:.3g}"
    elif tau is not None:
        text = f"time constant {tau:.4g} s"
    else:
        return ""
    flags = [flag for flag in mode["flags"] if flag != "integrator"]
    return text + (" [" + ", ".join(flags) + "]" if flags else "")


def run_text(result: Any) -> str:
    """Readable summary of a :class:`ident.pipeline.RunResult`."""
    s = result.summary
    m = s["model"]
    fits = ", ".join(f"{k} {v:.1f} %" if v is not None else f"{k} diverged"
                     for k, v in m["validation_fit"].items())
    lines = [s["name"], s["verdict"]["headline"],
             f"model: {m['method']} order {m['order']} ({m['n_states']} states); held-out fit {fits}"]
    modes = [text for text in map(_mode_text, s["modes"]["modes"]) if text]
    if modes:
        lines.append("modes: " + "; ".join(modes))
    drift = s.get("drift")
    if drift is not None:
        for shift in drift["modes"]:
            if shift["status"] == "matched" and shift["baseline"]["is_pair"]:
                lines.append(
                    f"drift: mode {shift['baseline']['natural_frequency_hz']:.4g} Hz -> "
                    f"{shift['new']['natural_frequency_hz']:.4g} Hz "
                    f"({shift['frequency_shift_hz']:+.3g} Hz, {shift['frequency_shift_percent']:+.1f} %)"
                )
    for gate in result.gates:
        if not gate.passed:
            lines.append(f"  FAILED {gate.key_path}: {gate.detail}")
    lines.append(f"run folder: {result.folder}")
    lines.append(f"report: {result.report_path}")
    return "\n".join(lines)


@click.command()
@click.argument("pipeline_path", metavar="PIPELINE", type=click.Path(dir_okay=False))
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Put the new run folder in DIR (default: runs/ next to the pipeline file).")
@click.option("--baseline", "baseline", type=click.Path(dir_okay=False), default=None, metavar="MODEL",
              help="Model file to compare with (overrides [drift] baseline in the pipeline file).")
@click.option("--allow-outside", is_flag=True,
              help="Read log files and a [drift] baseline outside the pipeline file's folder tree "
                   "(refused by default: pipeline files may come from others).")
@click.option("--workers", type=click.IntRange(min=1), default=None, metavar="N",
              help="Processes for the identification's candidate search (default: the cores this process "
                   "may use, at most 8; 1 keeps it in this process). The results do not depend on it.")
@click.option("--quiet", is_flag=True, help="No progress messages on stderr.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary on stdout.")
def run(pipeline_path: str, out_dir: str | None, baseline: str | None, allow_outside: bool, workers: int | None,
        quiet: bool, as_json: bool) -> None:
    """Run the pipeline file PIPELINE end to end into a new run folder.

    Ingest, preprocess, fit candidates, select, validate, check modes and
    expectations, compare with a baseline, and write a NEW run folder (model.json,
    summary.json, figures, report.html). Earlier runs are never touched.

    Log paths are relative to the pipeline file and must lie in its folder or
    below unless --allow-outside is given; the run folder appears only when
    complete.

    Exit status: 0 all gates passed; 2 bad input (nothing written); 3 a gate,
    expectation or drift threshold failed (the summary and the report say which);
    130 interrupted (no run folder written).
    """
    from ..estimate.jobs import workers_for
    from ..pipeline import run_pipeline

    result = run_pipeline(pipeline_path, out_dir=out_dir, baseline=baseline,
                          progress=progress_printer(quiet), allow_outside=allow_outside,
                          workers=workers_for(workers))
    if as_json:
        s = result.summary
        echo_json({
            "name": s["name"],
            "passed": result.passed,
            "headline": s["verdict"]["headline"],
            "gates": s["gates"],
            "folder": str(result.folder),
            "report": str(result.report_path),
            "summary": str(result.summary_path),
            "model": str(result.model_path),
            "figures": [str(p) for p in result.figure_paths],
            "method": s["model"]["method"],
            "order": s["model"]["order"],
            "validation_fit": s["model"]["validation_fit"],
            "modes": s["modes"]["modes"],
            "drift": s["drift"],
            "warnings": s["warnings"],
        })
    else:
        click.echo(run_text(result))
    if not result.passed:
        failed = result.failed_gates
        raise GateFailed(f"{len(failed)} gate(s) failed: " + ", ".join(g.key_path for g in failed))
