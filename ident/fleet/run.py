"""A fleet run: the same pipeline on every unit's log, on Dask, into one fleet run folder.

:func:`run_fleet` names the units, creates (or, with ``resume``, reopens) a run
folder ``fleet-<UTC time>-<hash>/`` and sends one job per unit to the engine
(:mod:`ident.fleet.engine`). As each unit arrives its files are written
atomically, the record last::

    units/<unit>/model.json     the unit's model file (ok units)
    units/<unit>/summary.json   as rigfit run writes it, without figures (ok units)
    units/<unit>/unit.json      what the fleet keeps of the unit (ok or failed)

so a run killed halfway keeps every unit it finished. With ``resume`` a unit whose
``unit.json`` says ok for the same log hash and the same settings hash
(:func:`ident.fleet.units.settings_hash`) is reused instead of computed; failed
units are tried again. At the end the units are compared
(:func:`ident.fleet.aggregate.analyse_fleet`) and the fleet files are (re)written:
``fleet.parquet``, ``fleet.csv``, ``fleet.json`` (the summary the report is made
from), the strip figures and ``fleet.html``, plus a copy of the pipeline file.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import io
import json
import math
import os
import platform
import threading
import time
from collections.abc import Callable, Sequence
from concurrent.futures import Future, ThreadPoolExecutor
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from .._json import json_ready
from .._version import __version__
from ..assess.fleet import chance_flags
from ..errors import IdentError
from ..io.pipelinefile import PipelineSpec, load_pipeline
from .aggregate import FleetAnalysis, analyse_fleet, reference_of_model
from .units import (
    UnitJob,
    UnitOutcome,
    UnitRecord,
    collect_logs,
    file_sha256,
    name_units,
    settings_hash,
    unit_folders,
)

__all__ = [
    "FLEET_FORMAT",
    "FLEET_SUMMARY_FILE",
    "FLEET_CSV_FILE",
    "FLEET_PARQUET_FILE",
    "FLEET_REPORT_FILE",
    "FleetResult",
    "run_fleet",
]

#: ``format`` of ``fleet.json``.
FLEET_FORMAT = "rigfit-fleet"
#: File names in a fleet run folder.
FLEET_SUMMARY_FILE = "fleet.json"
FLEET_CSV_FILE = "fleet.csv"
FLEET_PARQUET_FILE = "fleet.parquet"
FLEET_REPORT_FILE = "fleet.html"
RUN_MARKER = "fleet-run.json"
UNITS_FOLDER = "units"
UNIT_RECORD = "unit.json"
#: Progress callback: ``progress(done, total, failed)``.
Progress = Callable[[int, int, int], None]


@dataclass(frozen=True, slots=True, eq=False)
class FleetResult:
    """What :func:`run_fleet` did and found.

    Attributes
    ----------
    folder : pathlib.Path
        The fleet run folder.
    passed : bool
        True when no unit failed, is an outlier or failed its gates.
    summary : dict
        The content of ``fleet.json``.
    analysis : FleetAnalysis
        Records, table rows, mode matching and robust screen.
    csv_path, parquet_path, summary_path, report_path : pathlib.Path
    computed, reused : int
        Units computed in this run, and reused from an earlier one (``resume``).
    """

    folder: Path
    passed: bool
    summary: dict[str, Any]
    analysis: FleetAnalysis
    csv_path: Path
    parquet_path: Path
    summary_path: Path
    report_path: Path
    computed: int
    reused: int


def _now() -> _dt.datetime:
    return _dt.datetime.now(_dt.UTC).replace(microsecond=0)


def _open_folder(spec: PipelineSpec, digest: str, logs: Sequence[Path], out_dir: Any, resume: Any) -> Path:
    """Create a new fleet run folder, or check the one to resume."""
    if resume is not None:
        folder = Path(resume)
        if not (folder / RUN_MARKER).is_file():
            raise IdentError(f"{folder}: not a fleet run folder (no {RUN_MARKER})",
                             hint="give the folder an earlier 'rigfit fleet' run created")
        try:
            made_with = json.loads((folder / RUN_MARKER).read_text(encoding="utf-8")).get("settings_hash")
        except (OSError, ValueError, AttributeError):
            made_with = None
        if made_with != digest:  # resuming would recompute every unit and replace the folder's results
            raise IdentError(f"{folder}: this fleet run was made with other pipeline settings; resuming it with "
                             "these would replace every unit's results",
                             hint="start a new run (--out), or resume with the pipeline file the run used "
                                  f"(a copy is in {folder / 'pipeline.toml'})")
        return folder
    parent = Path(out_dir) if out_dir is not None else spec.base_dir / "runs"
    if parent.exists() and not parent.is_dir():
        raise IdentError(f"{parent}: exists and is not a folder", hint="give a folder for the run folders")
    parent.mkdir(parents=True, exist_ok=True)
    h = hashlib.sha256(digest.encode())
    for log in logs:
        h.update(str(log).encode("utf-8"))
    base = f"fleet-{_now().strftime('%Y%m%dT%H%M%SZ')}-{h.hexdigest()[:8]}"
    for k in range(1, 1000):
        folder = parent / (base if k == 1 else f"{base}-{k}")
        try:
            folder.mkdir()
        except FileExistsError:
            continue
        return folder
    raise IdentError(f"{parent}: cannot create a new fleet run folder named {base}")


def _reusable(folder: Path, job: UnitJob, digest: str) -> UnitRecord | None:
    """Return the unit's earlier ok record when it was computed from the same log and settings."""
    path = folder / UNITS_FOLDER / job.folder / UNIT_RECORD
    try:
        record = UnitRecord.from_dict(json.loads(path.read_text(encoding="utf-8")))
    except (OSError, ValueError, TypeError):
        return None
    if not record.ok or record.settings_hash != digest or record.unit != job.unit:
        return None
    if not (path.parent / "model.json").is_file() or not (path.parent / "summary.json").is_file():
        return None
    digest_now = file_sha256(job.log_path)
    return record if digest_now is not None and digest_now == record.log_sha256 else None


def _writer(folder: Path) -> Callable[[UnitOutcome], UnitRecord]:
    """Return the function that writes one unit's files (the unit's own log is never written)."""
    from ..io.atomic import write_atomic

    def write(outcome: UnitOutcome) -> UnitRecord:
        record = outcome.record
        protected = (Path(record.log_path),)
        where = folder / UNITS_FOLDER / record.folder
        where.mkdir(parents=True, exist_ok=True)
        if outcome.model_text is not None:
            write_atomic(where / "model.json", outcome.model_text, force=True, protected=protected)
        if outcome.summary_text is not None:
            write_atomic(where / "summary.json", outcome.summary_text, force=True, protected=protected)
        text = json.dumps(json_ready(record.to_dict()), indent=2, allow_nan=False) + "\n"
        write_atomic(where / UNIT_RECORD, text, force=True, protected=protected)  # last: marks the unit done
        return record

    return write


def _engine_description(scheduler: str | None, workers: int | None) -> str:
    if scheduler is not None:
        return f"Dask scheduler at {scheduler}"
    n = workers or os.cpu_count() or 1
    return f"embedded Dask cluster, {n} worker process" + ("" if n == 1 else "es")


def _compute(spec: PipelineSpec, jobs: list[UnitJob], digest: str, start_folder: Callable[[], Path],
             scheduler: str | None, workers: int | None, records: list[UnitRecord],
             progress: Progress) -> tuple[Path, dict[str, float]]:
    """Run the jobs on the engine, writing each unit as it arrives; return the folder and the engine's timing.

    ``start_folder`` is called once the engine is up and gives the run folder.

    The files of a unit are written by a writer thread (each ``write_atomic`` waits for its
    ``fsync``), so collecting results and sending new jobs never waits for the disk.
    """
    from .engine import open_client, require_dask, run_jobs

    require_dask()
    total = len(records) + len(jobs)
    failed = [sum(1 for r in records if not r.ok)]
    lock = threading.Lock()

    def written(future: Future) -> None:
        if future.exception() is not None:
            return  # raised after the engine is done
        with lock:
            records.append(future.result())
            failed[0] += 0 if records[-1].ok else 1
            progress(len(records), total, failed[0])

    pending: list[Future] = []
    start = time.perf_counter()
    with ThreadPoolExecutor(max_workers=1, thread_name_prefix="rigfit-fleet-writer") as writer:
        with open_client(scheduler, workers) as client:
            ready = time.perf_counter()
            folder = start_folder()
            write = _writer(folder)

            def arrived(outcome: UnitOutcome) -> None:
                future = writer.submit(write, outcome)
                future.add_done_callback(written)
                pending.append(future)

            busy = run_jobs(client, spec, jobs, digest, arrived)
    for future in pending:
        future.result()  # a unit that could not be written (disk full, permissions) stops the run here
    return folder, {"engine_start_s": ready - start, "units_s": busy,
                    "engine_total_s": time.perf_counter() - start}


def run_fleet(
    spec: PipelineSpec | str | os.PathLike,
    logs: Sequence[str | os.PathLike] = (),
    *,
    list_file: str | os.PathLike | None = None,
    out_dir: str | os.PathLike | None = None,
    resume: str | os.PathLike | None = None,
    scheduler: str | None = None,
    workers: int | None = None,
    reference: str | os.PathLike | None = None,
    unit_from: str | None = None,
    progress: Progress | None = None,
    allow_outside: bool = False,
) -> FleetResult:
    """Identify every unit of a fleet with one pipeline and compare the units.

    Parameters
    ----------
    spec : PipelineSpec or path-like
        The pipeline (file). Its ``[log]`` table says how to read each log; its
        ``paths`` are the fleet's logs when neither ``logs`` nor ``list_file`` is
        given. Its ``[fleet]`` table gives defaults for the options below.
    logs : sequence of path-like
        Log paths or globs, one unit per log.
    list_file : path-like, optional
        A file with one log path per line (see :func:`ident.fleet.units.collect_logs`).
    out_dir : path-like, optional
        Folder for the new fleet run folder (default ``runs/`` beside the pipeline).
    resume : path-like, optional
        An earlier fleet run folder to complete: its finished units are reused
        when their log and settings are unchanged; the rest are computed.
    scheduler : str, optional
        Address of a running ``distributed`` scheduler (default: an embedded
        local cluster).
    workers : int, optional
        Worker processes of the embedded cluster (default: one per core).
    reference : path-like, optional
        Reference model file (e.g. a golden unit) for matching modes; without it
        the fleet's median unit is the reference.
    unit_from : str, optional
        Regular expression naming units from their log paths.
    progress : callable, optional
        ``progress(done, total, failed)`` after every unit.
    allow_outside : bool
        Let the pipeline file name logs and a reference model outside its
        folder tree (as ``rigfit run --allow-outside``); logs given here are
        never restricted.

    Returns
    -------
    FleetResult
        Failed and outlier units are results, not errors: check ``passed``.

    Raises
    ------
    ident.errors.IdentError
        Bad input: the pipeline, the options, no logs, two logs naming one unit,
        an unreadable reference model, a folder that is not a fleet run, Dask
        not installed or the scheduler not reachable.
    """
    if not isinstance(spec, PipelineSpec):
        spec = load_pipeline(spec, expand_logs=not (logs or list_file), allow_outside=allow_outside)
    fleet = spec.fleet
    if scheduler is not None and workers is not None:
        raise IdentError("give either --workers (embedded cluster) or --scheduler, not both")
    if scheduler is None and workers is None:
        scheduler, workers = fleet.scheduler, fleet.workers
    if out_dir is not None and resume is not None:
        raise IdentError("give either --out (a new run folder) or --resume (an earlier one), not both")
    paths = collect_logs(logs, list_file=list_file) if (logs or list_file) else tuple(spec.log.files)
    if not paths:
        raise IdentError("no logs given", hint="give LOG paths or globs, --list FILE, or [log] paths in the pipeline")
    names = name_units(paths, unit_from=unit_from if unit_from is not None else fleet.unit_from)
    jobs_all = [UnitJob(n, str(p), f) for n, p, f in zip(names, paths, unit_folders(names), strict=True)]
    ref_path = Path(reference) if reference is not None else fleet.reference
    ref_model = None
    if ref_path is not None:
        from ..io.modelfile import load_model

        ref_model = load_model(ref_path)
    digest = settings_hash(spec)
    stamp = _now()
    records: list[UnitRecord] = []
    if resume is not None:
        folder = _open_folder(spec, digest, paths, None, resume)
        records = [r for r in (_reusable(folder, j, digest) for j in jobs_all) if r is not None]
    done = {r.unit for r in records}
    jobs = [j for j in jobs_all if j.unit not in done]
    report = progress if progress is not None else (lambda done, total, failed: None)

    def start() -> Path:
        # called once the engine is up: bad input and an unreachable engine leave no folder behind
        where = folder if resume is not None else _open_folder(spec, digest, paths, out_dir, None)
        _write_marker(spec, where, digest, stamp, resume is not None)
        report(len(records), len(jobs_all), 0)
        return where

    timing: dict[str, float] = {}
    if jobs:
        folder, timing = _compute(spec, jobs, digest, start, scheduler, workers, records, report)
    else:
        folder = start()
    return _finish(spec, folder, records, digest, stamp, ref_model, ref_path, timing,
                   computed=len(jobs), reused=len(jobs_all) - len(jobs),
                   engine=_engine_description(scheduler, workers))


def _write_marker(spec: PipelineSpec, folder: Path, digest: str, stamp: _dt.datetime, resumed: bool) -> None:
    from ..io.atomic import write_atomic

    marker = folder / RUN_MARKER
    if not resumed:
        data = {"format": "rigfit-fleet-run", "schema_version": 1, "tool_version": __version__,
                "created_utc": stamp.isoformat().replace("+00:00", "Z"), "settings_hash": digest,
                "pipeline": None if spec.path is None else spec.path.name}
        write_atomic(marker, json.dumps(data, indent=2) + "\n")
    if spec.path is not None and spec.path.is_file():
        write_atomic(folder / "pipeline.toml", spec.path.read_bytes(), force=True)


# --------------------------------------------------------------------------- the fleet files


def _finish(spec: PipelineSpec, folder: Path, records: list[UnitRecord], digest: str, stamp: _dt.datetime,
            ref_model: Any, ref_path: Path | None, timing: dict[str, float], *, computed: int, reused: int,
            engine: str) -> FleetResult:
    from ..fleet_report import render_fleet_report
    from ..io.atomic import write_atomic
    from ..io.fleettable import write_fleet_table

    ref_modes = ref_gains = None
    if ref_model is not None:
        ref_modes, ref_gains = reference_of_model(ref_model.model)
    analysis = analyse_fleet(records, spec.fleet.rule, reference_modes=ref_modes, reference_gains=ref_gains,
                             reference_name=None if ref_path is None else ref_path.name,
                             drift_thresholds=spec.drift.thresholds)
    summary = _fleet_summary(spec, folder, analysis, digest, stamp, ref_path, timing, computed, reused, engine)
    protected = tuple(Path(r.log_path) for r in records)
    figures = _figures(analysis, spec.fleet.rule)
    summary["figures"] = [meta for meta, _ in figures]
    csv_path, parquet_path = write_fleet_table(
        analysis.rows, analysis.columns, folder / FLEET_CSV_FILE, folder / FLEET_PARQUET_FILE,
        metadata={"rule": spec.fleet.rule.to_dict(), "reference": summary["reference"],
                  "settings_hash": digest, "tool_version": __version__},
        protected=protected,
    )
    for meta, data in figures:
        write_atomic(folder / meta["file"], data, force=True, protected=protected)
    summary_path = write_atomic(folder / FLEET_SUMMARY_FILE,
                                json.dumps(json_ready(summary), indent=2, allow_nan=False) + "\n",
                                force=True, protected=protected)
    report_path = write_atomic(folder / FLEET_REPORT_FILE,
                               render_fleet_report(json_ready(summary), {m["file"]: d for m, d in figures}),
                               force=True, protected=protected)
    return FleetResult(folder=folder, passed=summary["passed"], summary=summary, analysis=analysis,
                       csv_path=csv_path, parquet_path=parquet_path, summary_path=summary_path,
                       report_path=report_path, computed=computed, reused=reused)


def _fleet_summary(spec: PipelineSpec, folder: Path, a: FleetAnalysis, digest: str, stamp: _dt.datetime,
                   ref_path: Path | None, timing: dict[str, float], computed: int, reused: int,
                   engine: str) -> dict[str, Any]:
    from ..pipeline import SAFETY_CAUTION

    rows = {row["unit"]: row for row in a.rows}
    failed = [r for r in a.records if not r.ok]
    gates = [r for r in a.records if r.ok and r.gates_passed is False]
    counts = {"units": len(a.records), "ok": len(a.records) - len(failed), "failed": len(failed),
              "outliers": len(a.outliers), "gates_failed": len(gates), "computed": computed, "reused": reused}
    passed = not (failed or a.outliers or gates)
    headline = ("every unit computed, none stands out, every gate passed" if passed else
                f"{counts['failed']} failed, {counts['outliers']} outliers, {counts['gates_failed']} failed "
                f"their gates, of {counts['units']} units")
    reference = dict(a.reference)
    if ref_path is not None:
        reference.update({"file": str(ref_path), "sha256": file_sha256(ref_path)})
    return {
        "format": FLEET_FORMAT, "schema_version": 1, "name": spec.name, "notes": spec.notes,
        "run": {"folder": folder.name, "created_utc": stamp.isoformat().replace("+00:00", "Z")},
        "passed": passed, "headline": headline, "counts": counts,
        "rule": {**spec.fleet.rule.to_dict(), "statement": spec.fleet.rule.statement(),
                 "chance_flags": None if a.screen is None else chance_flags(a.screen)},
        "reference": reference, "modes": a.modes_summary, "quantities": a.quantities_summary,
        "outliers": [{"unit": u, "reasons": rows[u]["reason"].split("; "),
                      "largest_robust_z": rows[u]["largest_robust_z"]} for u in a.outliers],
        "failed": [{"unit": r.unit, "log": Path(r.log_path).name, "error": r.error} for r in failed],
        "gates_failed": [{"unit": r.unit, "failed_gates": ", ".join(r.failed_gates)} for r in gates],
        "units": [{"unit": r.unit, "status": r.status, "outlier": rows[r.unit]["outlier"], "method": r.method,
                   "order": r.order, "fit": dict(r.fit_percent), "gates_passed": r.gates_passed}
                  for r in a.records],
        "engine": {"description": engine, **timing},
        "provenance": {"tool": "rigfit", "tool_version": __version__, "python": platform.python_version(),
                       "pipeline": {"file_name": None if spec.path is None else spec.path.name,
                                    "sha256": spec.sha256},
                       "settings_hash": digest},
        "files": {"csv": FLEET_CSV_FILE, "parquet": FLEET_PARQUET_FILE, "report": FLEET_REPORT_FILE,
                  "units": UNITS_FOLDER},
        "safety": SAFETY_CAUTION,
    }


def _png(fig: Any) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100, metadata={"Software": None})
    return buf.getvalue()


def _panels(a: FleetAnalysis, names: Sequence[str], rule: Any) -> dict[str, Any]:
    """One strip panel per screened quantity, by column name."""
    from ..plots.fleet import StripPanel

    screen = a.screen
    out = {}
    for i, q in enumerate(screen.quantities):
        median = None if not _is_finite(screen.median[i]) else float(screen.median[i])
        scale = None if not _is_finite(screen.scale[i]) else float(screen.scale[i])
        out[q.name] = StripPanel(q.label, q.unit, screen.values[:, i], names, screen.flagged[:, i], median, scale,
                                 rule.threshold, q.side)
    return out


def _is_finite(x: Any) -> bool:
    return x is not None and math.isfinite(float(x))


def _figures(a: FleetAnalysis, rule: Any) -> list[tuple[dict[str, str], bytes]]:
    """Strip figures: one per fleet mode, one of the fits, one of the DC gains."""
    if a.screen is None or not a.screen.quantities:
        return []
    from ..plots.fleet import strip_figure

    names = [r.unit for r in a.records if r.ok]
    panels = _panels(a, names, rule)
    out = []
    for m in a.modes_summary:
        n = m["number"]
        wanted = [f"mode_{n}_natural_frequency_hz", f"mode_{n}_damping_ratio", f"mode_{n}_time_constant_s"]
        chosen = [panels[w] for w in wanted if w in panels]
        word = "oscillating" if m["kind"] == "pair" else "real"
        caption = (f"Mode {n} ({word}; {m['count']} units have it" + (", rare" if m["rare"] else "") +
                   "): each dot is a unit; the line is the fleet median, the shaded band what the rule accepts; "
                   "orange diamonds are outside it.")
        out.append(({"file": f"fleet_mode_{n}.png", "section": "modes", "caption": caption},
                    _png(strip_figure(chosen, title=f"Mode {n}"))))
    fits = [p for name, p in panels.items() if name.startswith("fit_")]
    if fits:
        out.append(({"file": "fleet_fit.png", "section": "fits",
                     "caption": "Validation fit of every unit per output (only the low side counts)."},
                    _png(strip_figure(fits, title="Validation fit per unit"))))
    gains = [p for name, p in panels.items() if name.startswith("dc_gain_")]
    if gains:
        out.append(({"file": "fleet_dc_gain.png", "section": "gains",
                     "caption": "DC gain of every unit per channel."},
                    _png(strip_figure(gains, title="DC gain per unit"))))
    return out
