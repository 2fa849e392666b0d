"""One unit of a fleet: which log, what it is called, the job a worker runs on it, and its record.

A unit's job is :func:`evaluate_unit`: the pipeline of the fleet with the unit's log
in place of the ``[log] paths`` (:func:`unit_spec`), computed by
:func:`ident.pipeline.evaluate_pipeline` exactly as ``rigfit run`` computes it. The
worker returns the model file and ``summary.json`` as text plus a small
:class:`UnitRecord` holding what the fleet comparison needs; it never writes
anything, so workers only need to read the logs.

A unit that cannot be computed (a log that does not parse, data that cannot support
the model, an internal error) gives a record with ``status = "failed"`` and its
one-line error, never an exception: one bad unit does not stop the others.
"""

from __future__ import annotations

import dataclasses
import hashlib
import json
import os
import re
import time
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .._version import __version__
from ..errors import IdentError
from ..io.pipelinefile import MAX_GLOB_FOLDERS, PipelineSpec, bounded_glob, static_prefix

__all__ = [
    "UNIT_COLUMN",
    "STATUSES",
    "UnitJob",
    "UnitRecord",
    "UnitOutcome",
    "collect_logs",
    "name_units",
    "unit_folders",
    "settings_hash",
    "unit_spec",
    "evaluate_unit",
    "file_sha256",
]

#: Column of a log that names its unit (serial number), read from the first data row.
UNIT_COLUMN = "unit"
#: Status of a unit in the fleet table.
STATUSES = ("ok", "failed")

_GLOB_CHARS = frozenset("*?[")
_SAFE_NAME = re.compile(r"[^A-Za-z0-9._-]")


@dataclass(frozen=True, slots=True, eq=False)
class UnitJob:
    """What a worker needs to compute one unit.

    Attributes
    ----------
    unit : str
        The unit's name.
    log_path : str
        Absolute path of its log (workers must see the same path).
    folder : str
        Name of the unit's folder under ``units/`` of the fleet run folder.
    """

    unit: str
    log_path: str
    folder: str


@dataclass(frozen=True, slots=True, eq=False)
class UnitRecord:
    """What the fleet keeps of one unit (written as ``units/<folder>/unit.json``).

    Attributes
    ----------
    unit, log_path, folder : str
        As in :class:`UnitJob`.
    log_sha256 : str or None
        Hash of the log file (``None`` when it could not be read).
    settings_hash : str
        :func:`settings_hash` of the pipeline the unit was computed with.
    status : {"ok", "failed"}
    error : str
        The one-line error of a failed unit (empty when ok).
    method : str or None
        Chosen model family; ``order`` and ``n_states`` likewise (``None`` when failed).
    order, n_states : int or None
    inputs, outputs, input_units, output_units : tuple of str
        Signal names and units of the unit's model.
    fit_percent : dict
        Validation (simulation) fit per output name, percent (``None`` when diverged).
    modes : tuple of dict
        The unit's modes as ``summary.json`` lists them (natural_frequency_hz,
        damping_ratio, time_constant_s, is_pair, flags, ...).
    dc_gains : tuple of dict
        ``{"input", "output", "gain"}`` per channel.
    gates_passed : bool or None
        Whether every gate of the pipeline passed.
    failed_gates : tuple of str
        Key paths of the failed gates.
    n_warnings : int
        Warnings raised while computing the unit.
    excited_band_hz : tuple of float or None
    compute_s : float
        Seconds the worker spent on the unit.
    """

    unit: str
    log_path: str
    folder: str
    log_sha256: str | None
    settings_hash: str
    status: str
    error: str = ""
    method: str | None = None
    order: int | None = None
    n_states: int | None = None
    inputs: tuple[str, ...] = ()
    outputs: tuple[str, ...] = ()
    input_units: tuple[str, ...] = ()
    output_units: tuple[str, ...] = ()
    fit_percent: dict[str, float | None] = field(default_factory=dict)
    modes: tuple[dict[str, Any], ...] = ()
    dc_gains: tuple[dict[str, Any], ...] = ()
    gates_passed: bool | None = None
    failed_gates: tuple[str, ...] = ()
    n_warnings: int = 0
    excited_band_hz: tuple[float, float] | None = None
    compute_s: float = 0.0

    @property
    def ok(self) -> bool:
        """True when the unit was computed."""
        return self.status == "ok"

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (the content of ``unit.json``)."""
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        for key, value in out.items():
            if isinstance(value, tuple):
                out[key] = list(value)
        return {"format": "rigfit-fleet-unit", "schema_version": 1, "tool_version": __version__, **out}

    @classmethod
    def from_dict(cls, data: dict[str, Any]) -> UnitRecord:
        """Inverse of :meth:`to_dict` (extra keys are ignored)."""
        names = {f.name for f in dataclasses.fields(cls)}
        kwargs = {k: v for k, v in data.items() if k in names}
        for key in ("inputs", "outputs", "input_units", "output_units", "modes", "dc_gains", "failed_gates"):
            kwargs[key] = tuple(kwargs.get(key) or ())
        if kwargs.get("excited_band_hz") is not None:
            kwargs["excited_band_hz"] = tuple(kwargs["excited_band_hz"])
        return cls(**kwargs)


@dataclass(frozen=True, slots=True, eq=False)
class UnitOutcome:
    """A worker's answer for one unit: the record, and for an ok unit its model file and summary as text."""

    record: UnitRecord
    model_text: str | None = None
    summary_text: str | None = None


# --------------------------------------------------------------------------- logs and names


def collect_logs(
    patterns: Sequence[str | os.PathLike], *, list_file: str | os.PathLike | None = None
) -> tuple[Path, ...]:
    """Return the fleet's log files, absolute, duplicates removed, in the order given.

    Parameters
    ----------
    patterns : sequence of path-like
        Log paths or glob patterns (relative to the current folder). A path
        that does not exist is kept: its unit fails with "no such file", as a
        worker would find.
    list_file : path-like, optional
        A text file with one log path (or glob) per line; blank lines and lines
        starting with ``#`` are skipped; relative paths are relative to the list
        file's folder.

    Returns
    -------
    tuple of pathlib.Path

    Raises
    ------
    IdentError
        The list file cannot be read, or a glob matches no file.
    """
    entries: list[tuple[str, Path, str]] = [(os.fspath(p), Path.cwd(), "") for p in patterns]
    if list_file is not None:
        where = Path(list_file)
        try:
            text = where.read_text(encoding="utf-8")
        except (OSError, UnicodeDecodeError) as exc:
            raise IdentError(f"{where}: cannot read the list of logs ({exc})") from exc
        for number, line in enumerate(text.splitlines(), start=1):
            line = line.strip()
            if line and not line.startswith("#"):
                entries.append((line, where.resolve().parent, f"{where.name}, line {number}: "))
    logs: list[Path] = []
    seen: set[Path] = set()
    for text, base, where in entries:
        target = Path(text).expanduser()
        target = target if target.is_absolute() else base / target
        if _GLOB_CHARS & set(text):
            prefix, parts = static_prefix(Path(os.path.normpath(target)))
            if prefix == Path(prefix.anchor):
                raise IdentError(f"{where}the glob {text!r} starts at the file system root",
                                 hint="start the glob in the folder holding the logs")
            found = bounded_glob(prefix, parts)
            if found is None:
                raise IdentError(f"{where}the glob {text!r} would list more than {MAX_GLOB_FOLDERS} folders",
                                 hint="narrow the glob to the folder holding the logs")
            matches = found
            if not matches:
                raise IdentError(f"{where}no log file matches {text!r}", hint="check the pattern and the folder")
        else:
            matches = [target]
        for m in matches:
            m = m.resolve()
            if m not in seen:
                seen.add(m)
                logs.append(m)
    return tuple(logs)


def _name_from_regex(pattern: re.Pattern[str], path: Path) -> str:
    m = pattern.search(path.as_posix())
    if m is None:
        raise IdentError(f"--unit-from {pattern.pattern!r} does not match the log path {path.as_posix()!r}",
                         hint="the expression is searched in the whole path; its first group names the unit")
    name = m.group("unit") if "unit" in pattern.groupindex else (m.group(1) if pattern.groups else m.group(0))
    if not name:
        raise IdentError(f"--unit-from {pattern.pattern!r} gives an empty unit name for {path.as_posix()!r}")
    return name


def _name_from_column(path: Path) -> str | None:
    from ..io.log import read_first_text

    try:
        name = read_first_text(path, UNIT_COLUMN)
    except (IdentError, OSError):
        return None  # an unreadable log is named by its file and fails in its job
    return name or None


def name_units(logs: Sequence[Path], *, unit_from: str | None = None) -> tuple[str, ...]:
    """Name the unit of every log.

    The name is the first group of ``unit_from`` (a regular expression
    searched in the log path; a group named ``unit``, else group 1, else the
    whole match) when given; otherwise the first data value of a ``unit``
    column when the log has one; otherwise the log's file name without suffix.

    Raises
    ------
    IdentError
        ``unit_from`` is not a valid expression or does not match a path, or two
        logs give the same unit name (the message names both).
    """
    pattern = None
    if unit_from is not None:
        try:
            pattern = re.compile(unit_from)
        except re.error as exc:
            raise IdentError(f"--unit-from {unit_from!r} is not a valid regular expression ({exc})") from exc
    names: list[str] = []
    first: dict[str, Path] = {}
    for path in logs:
        name = _name_from_regex(pattern, path) if pattern is not None else (_name_from_column(path) or path.stem)
        if name in first:
            raise IdentError(
                f"logs {first[name]} and {path} both name unit {name!r}",
                hint="name units with --unit-from REGEX (or [fleet] unit_from) so every log has its own unit",
            )
        first[name] = path
        names.append(name)
    return tuple(names)


def unit_folders(units: Sequence[str]) -> tuple[str, ...]:
    """Return a file-system-safe, unique folder name per unit (other characters: ``_`` plus a short hash)."""
    out = []
    for unit in units:
        safe = _SAFE_NAME.sub("_", unit).lstrip(".") or "unit"
        if safe != unit:
            safe = f"{safe[:80]}-{hashlib.sha256(unit.encode('utf-8')).hexdigest()[:8]}"
        out.append(safe)
    return tuple(out)


def file_sha256(path: str | os.PathLike) -> str | None:
    """Hex SHA-256 of a file, or ``None`` when it cannot be read."""
    h = hashlib.sha256()
    try:
        with open(path, "rb") as fh:
            for block in iter(lambda: fh.read(1 << 20), b""):
                h.update(block)
    except OSError:
        return None
    return h.hexdigest()


def settings_hash(spec: PipelineSpec) -> str:
    """Hash of everything that acts on a unit's result.

    Every setting of the pipeline (as :meth:`PipelineSpec.to_dict` gives them)
    except its name, notes, file path, ``[log] paths`` and ``[fleet]`` table; the
    content of a ``[drift] baseline`` model file; and the rigfit version. Two
    fleet runs with the same hash compute a unit's log identically, which is
    what ``--resume`` relies on.
    """
    settings = spec.to_dict()
    for key in ("name", "notes", "path", "sha256", "fleet"):
        settings.pop(key, None)
    settings["log"] = {k: v for k, v in settings["log"].items() if k not in ("paths", "files")}
    baseline = settings["drift"].pop("baseline", None)
    settings["drift"]["baseline_sha256"] = None if baseline is None else file_sha256(baseline)
    settings["tool_version"] = __version__
    text = json.dumps(settings, sort_keys=True, default=str, allow_nan=True)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def unit_spec(spec: PipelineSpec, log_path: str | os.PathLike) -> PipelineSpec:
    """Return the fleet's pipeline with one unit's log in place of its ``[log] paths``."""
    path = Path(log_path)
    return dataclasses.replace(spec, log=dataclasses.replace(spec.log, patterns=(str(path),), files=(path,)))


# --------------------------------------------------------------------------- the job


def _failed(job: UnitJob, digest: str, error: str, start: float) -> UnitOutcome:
    return UnitOutcome(UnitRecord(
        unit=job.unit, log_path=job.log_path, folder=job.folder, log_sha256=file_sha256(job.log_path),
        settings_hash=digest, status="failed", error=error, compute_s=time.perf_counter() - start,
    ))


def _record(job: UnitJob, digest: str, summary: dict[str, Any], start: float) -> UnitRecord:
    """Build the fleet's record of an ok unit from its summary, read by the documented keys."""
    model = summary.get("model", {})
    modes = summary.get("modes", {})
    units = modes.get("units", {})
    logs = summary.get("data", {}).get("logs", [{}])
    band = summary.get("data", {}).get("excited_band_hz")
    return UnitRecord(
        unit=job.unit, log_path=job.log_path, folder=job.folder, log_sha256=logs[0].get("sha256"),
        settings_hash=digest, status="ok", method=model.get("method"), order=model.get("order"),
        n_states=model.get("n_states"), inputs=tuple(model.get("inputs", ())), outputs=tuple(model.get("outputs", ())),
        input_units=tuple(units.get("inputs", ())), output_units=tuple(units.get("outputs", ())),
        fit_percent=dict(model.get("validation_fit", {})),
        modes=tuple({k: m.get(k) for k in ("natural_frequency_hz", "damping_ratio", "time_constant_s", "is_pair",
                                           "flags")} for m in modes.get("modes", [])),
        dc_gains=tuple({k: g.get(k) for k in ("input", "output", "gain")} for g in modes.get("dc_gain", [])),
        gates_passed=summary.get("verdict", {}).get("passed"),
        failed_gates=tuple(summary.get("verdict", {}).get("failed_gates", ())),
        n_warnings=len(summary.get("warnings", ())), excited_band_hz=None if band is None else tuple(band),
        compute_s=time.perf_counter() - start,
    )


def evaluate_unit(spec: PipelineSpec, job: UnitJob, digest: str) -> UnitOutcome:
    """Compute one unit: the job a worker runs.

    Parameters
    ----------
    spec : PipelineSpec
        The fleet's pipeline.
    job : UnitJob
        The unit and its log.
    digest : str
        :func:`settings_hash` of ``spec``, recorded with the result.

    Returns
    -------
    UnitOutcome
        Never raises for a bad unit: a library error gives a failed record with its
        one-line message, any other exception a failed record starting
        ``"internal error"``.

    Notes
    -----
    BLAS runs on one thread here (each worker is one process per core), so a unit's
    result does not depend on where it ran: the same job gives the same numbers
    bit for bit in a worker and in a plain loop.
    """
    from threadpoolctl import threadpool_limits

    from .._json import json_ready
    from ..io.modelfile import dumps_model
    from ..pipeline import evaluate_pipeline

    start = time.perf_counter()
    try:
        with warnings.catch_warnings(), threadpool_limits(limits=1, user_api="blas"):
            warnings.simplefilter("ignore")  # they are listed in the summary; workers must not print
            evaluation = evaluate_pipeline(unit_spec(spec, job.log_path), run_folder=f"units/{job.folder}")
    except IdentError as exc:
        return _failed(job, digest, str(exc), start)
    except OSError as exc:  # a log that is missing or unreadable on the worker
        name = Path(exc.filename).name if exc.filename else Path(job.log_path).name
        return _failed(job, digest, f"{name}: {exc.strerror or exc}", start)
    except Exception as exc:  # one unit must never stop the fleet: recorded with its message
        return _failed(job, digest, f"internal error: {type(exc).__name__}: {exc}", start)
    summary = evaluation.summary
    summary["run"]["unit"] = job.unit
    summary["run"]["settings_hash"] = digest
    summary["files"] = {"model": "model.json", "summary": "summary.json", "report": None}  # no figures per unit
    return UnitOutcome(
        record=_record(job, digest, summary, start),
        model_text=dumps_model(evaluation.model, evaluation.model_provenance),
        summary_text=json.dumps(json_ready(summary), indent=2, allow_nan=False) + "\n",
    )
