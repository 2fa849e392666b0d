"""``rigfit fleet``: one pipeline on the log of every unit of a fleet, on Dask, with a fleet report."""

from __future__ import annotations

import sys
import time
from typing import Any

import click

from ._common import GateFailed, echo_json, progress_enabled


class _ProgressLine:
    """One self-rewriting line on stderr: units done / total, failures so far, estimated time left."""

    WIDTH = 28

    def __init__(self) -> None:
        self.start = time.monotonic()
        self.first: int | None = None

    def __call__(self, done: int, total: int, failed: int) -> None:
        now = time.monotonic()
        if self.first is None:
            self.first = done  # units reused by --resume do not count towards the rate
            self.start = now
        computed = done - self.first
        eta = "--:--"
        if computed > 0 and done < total:
            left = (now - self.start) / computed * (total - done)
            eta = f"{int(left // 60):02d}:{int(left % 60):02d}"
        elif done >= total:
            eta = "00:00"
        filled = int(self.WIDTH * done / total) if total else self.WIDTH
        bar = "#" * filled + "-" * (self.WIDTH - filled)
        end = "\n" if done >= total else ""
        click.echo(f"\r[{bar}] {done}/{total} units, {failed} failed, about {eta} left ", err=True, nl=False)
        if end:
            click.echo("", err=True)
        sys.stderr.flush()


def fleet_text(result: Any) -> str:
    """Readable summary of a :class:`ident.fleet.run.FleetResult`."""
    s = result.summary
    c = s["counts"]
    lines = [f"{s['name']}: fleet of {c['units']} units: {c['ok']} ok, {c['failed']} failed, "
             f"{c['outliers']} outliers, {c['gates_failed']} failed their gates"]
    if c["reused"]:
        lines.append(f"  ({c['reused']} units reused from the earlier run, {c['computed']} computed)")
    ref = s["reference"]
    if ref.get("kind"):
        lines.append(f"modes matched against the {ref['kind']} {ref['name']}")
    for m in s["modes"]:
        rare = ", rare" if m["rare"] else ""
        if m["kind"] == "pair":
            what = (f"{m['median_natural_frequency_hz']:.4g} Hz, damping ratio {m['median_damping_ratio']:.3g}"
                    if m.get("median_natural_frequency_hz") is not None and m.get("median_damping_ratio") is not None
                    else f"{m['reference']['natural_frequency_hz']:.4g} Hz")
        else:
            tau = m.get("median_time_constant_s") or m["reference"]["time_constant_s"]
            what = f"real, time constant {tau:.4g} s" if tau is not None else "real"
        lines.append(f"  mode {m['number']}: {what} (median; in {m['count']} of {c['ok']} units{rare})")
    if s["outliers"]:
        lines.append("outliers:")
        for o in s["outliers"]:
            lines.append(f"  {o['unit']}: " + "; ".join(o["reasons"]))
    if s["failed"]:
        lines.append("failed:")
        for f in s["failed"]:
            lines.append(f"  {f['unit']}: {f['error']}")
    if s["gates_failed"]:
        lines.append("failed gates:")
        for g in s["gates_failed"]:
            lines.append(f"  {g['unit']}: {g['failed_gates']}")
    lines.append(f"run folder: {result.folder}")
    lines.append(f"table: {result.csv_path.name}, {result.parquet_path.name}; report: {result.report_path}")
    return "\n".join(lines)


@click.command()
@click.argument("pipeline_path", metavar="PIPELINE", type=click.Path(dir_okay=False))
@click.argument("logs", metavar="LOG...", nargs=-1)
@click.option("--list", "list_file", type=click.Path(dir_okay=False), default=None, metavar="FILE",
              help="Read log paths from FILE, one per line (relative to FILE's folder; # comments).")
@click.option("--unit-from", "unit_from", default=None, metavar="REGEX",
              help="Name each unit by the first group of REGEX searched in its log path "
                   "(default: a 'unit' column, else the file name).")
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Put the new fleet run folder in DIR (default: runs/ next to the pipeline file).")
@click.option("--scheduler", default=None, metavar="ADDRESS",
              help="Send the work to a running Dask scheduler (e.g. tcp://host:8786); default: an embedded cluster.")
@click.option("--workers", type=click.IntRange(min=1), default=None, metavar="N",
              help="Worker processes of the embedded cluster (default: one per core).")
@click.option("--reference", type=click.Path(dir_okay=False), default=None, metavar="MODEL",
              help="Match modes against this model file (e.g. a golden unit) instead of the fleet's median unit.")
@click.option("--resume", type=click.Path(file_okay=False), default=None, metavar="RUNFOLDER",
              help="Complete an earlier fleet run: reuse its units whose log and settings are unchanged.")
@click.option("--allow-outside", is_flag=True,
              help="Let the pipeline file name logs and a [fleet] reference outside its folder tree "
                   "(refused by default: pipeline files may come from others).")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary on stdout.")
@click.option("--quiet", is_flag=True, help="No progress bar on stderr.")
def fleet(pipeline_path: str, logs: tuple[str, ...], list_file: str | None, unit_from: str | None,
          out_dir: str | None, scheduler: str | None, workers: int | None, reference: str | None,
          resume: str | None, allow_outside: bool, as_json: bool, quiet: bool) -> None:
    """Run the pipeline PIPELINE on the log of every unit of a fleet and compare the units.

    Every LOG (globs allowed) is one unit, computed exactly as 'rigfit run' computes
    its log, on Dask (an embedded cluster of one worker per core, or --scheduler).
    Writes a fleet run folder: units/<unit>/ (model.json, summary.json), fleet.csv,
    fleet.parquet and fleet.html with the units that stand out from the fleet.

    Exit status: 0 no unit failed or stands out; 2 bad input (nothing computed);
    3 a unit failed, is an outlier, or failed its pipeline gates.
    """
    from ..fleet.run import run_fleet

    result = run_fleet(
        pipeline_path, logs, list_file=list_file, out_dir=out_dir, resume=resume, scheduler=scheduler,
        workers=workers, reference=reference, unit_from=unit_from, allow_outside=allow_outside,
        progress=_ProgressLine() if progress_enabled(quiet) else None,
    )
    s = result.summary
    if as_json:
        echo_json({
            "name": s["name"], "passed": result.passed, "headline": s["headline"], "counts": s["counts"],
            "folder": str(result.folder), "csv": str(result.csv_path), "parquet": str(result.parquet_path),
            "report": str(result.report_path), "summary": str(result.summary_path),
            "reference": s["reference"], "rule": s["rule"], "modes": s["modes"], "outliers": s["outliers"],
            "failed": s["failed"], "gates_failed": s["gates_failed"], "engine": s["engine"],
        })
    else:
        click.echo(fleet_text(result))
    if not result.passed:
        c = s["counts"]
        raise GateFailed(f"{c['failed']} failed, {c['outliers']} outliers, {c['gates_failed']} failed their gates "
                         f"(of {c['units']} units)")
