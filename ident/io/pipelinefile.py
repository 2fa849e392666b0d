"""Pipeline files: one rig's identification job as a TOML file kept under version control.

A pipeline file is read with :mod:`tomllib` (data only: nothing in it is ever
executed) and every section is parsed by the ``from_mapping`` of the options
class that owns it, so a pipeline accepts exactly what the library and the
command line accept. Layout (every section but ``[log]`` is optional)::

    name = "belt axis, packaging bench"     # free text (default: the file name)
    notes = "after the belt change"         # free text

    [log]
    paths = ["../sample_data/belt_axis_before.csv"]  # relative to this file; globs allowed;
                                                     # several files = several experiments
    inputs = ["motor_torque_cmd"]           # column names (units in the header are ignored), group/name
                                            # in MDF/HDF5, shell-style patterns ("u*") or positions ("#2")
    outputs = ["motor_speed", "carriage_speed"]
    time = "time"                           # time column; default: auto-detect time/t
    # sample_rate_hz = 1000                 # instead of a time column
    drop_bad_rows = false
    split_at_gaps = false
    jitter_tolerance = 0.1
    units = { motor_torque_cmd = "N m" }    # fill in units the header does not carry
    # resample_hz = 100                     # bring every chosen channel to one rate
    # upsample = "zoh"                      # or "linear": for channels slower than resample_hz
    # validate_with = ["run2.csv"]          # separate validation logs (whole): nothing of paths is held out
    # period = "auto"                       # periodic input: "auto" (detect), "none", or seconds
    # signal_description = "test.json"      # written by rigfit excite --describe

    [preprocess]   # ident.estimate.preprocess.PreprocessOptions: offset, initial_window_s, detrend,
                   # decimate, holdout, drop_frozen_tail
    [fit]          # ident.estimate.identify.IdentifyOptions: method, order ("auto" or N), max_order,
                   # delay, refinement, weighting, horizon, stabilize, significance, per_criterion,
                   # refine_count, screen_samples
    [check]        # ident.assess.diagnostics.CheckOptions: gates min_fit, require_white; fit_warning
                   # (default 50; false: none); prediction_steps, max_lag, confidence, initial_state,
                   # spectral_segment
    [modes]        # ident.assess.modes.ModeThresholds, plus fail_on = ["unstable", ...] (flags
                   # that fail the run; default ["unstable"])
    [expect]       # ident.assess.expectations.Expectations
    [drift]        # baseline = "model.json" (relative to this file) and
                   # ident.assess.drift.DriftThresholds
    [fleet]        # for rigfit fleet only: unit_from (regex), workers, scheduler, reference
                   # (model file), and ident.assess.fleet.OutlierRule

Unknown keys and wrong types raise :class:`ident.errors.PipelineError` naming
the file, the dotted key path (``fit.ordr``) and, for unknown keys, the
nearest valid key.

Pipeline files may come from others (a pull request run in CI), so reading one
is bounded: the file is at most :data:`MAX_PIPELINE_BYTES` and nested at most
:data:`ident.io.inputs.MAX_NESTING` levels; log paths (also ``validate_with``),
the signal description and the baseline are resolved relative to the pipeline file and must lie in its folder or below
(after following links) unless ``allow_outside`` is given (``rigfit run
--allow-outside``); a glob may not start at the file system root and may walk
at most :data:`MAX_GLOB_FOLDERS` folders.
"""

from __future__ import annotations

import dataclasses
import fnmatch
import hashlib
import math
import os
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from .._validate import did_you_mean, sample_rate_value
from ..assess.diagnostics import CheckOptions
from ..assess.drift import DriftThresholds
from ..assess.expectations import Expectations
from ..assess.fleet import OutlierRule
from ..assess.modes import FLAGS, ModeThresholds
from ..choices import UPSAMPLE_METHODS
from ..errors import IdentError, OptionError, PipelineError, printable
from ..estimate.identify import IdentifyOptions
from ..estimate.preprocess import PreprocessOptions
from .columns import is_pattern

__all__ = [
    "SECTIONS",
    "LOG_KEYS",
    "DEFAULT_FAIL_ON",
    "MAX_PIPELINE_BYTES",
    "MAX_GLOB_FOLDERS",
    "bounded_glob",
    "LogSpec",
    "ModesSpec",
    "DriftSpec",
    "FleetSpec",
    "FLEET_KEYS",
    "PipelineSpec",
    "load_pipeline",
    "parse_pipeline",
]

#: Top-level keys of a pipeline file.
SECTIONS: tuple[str, ...] = (
    "name", "notes", "log", "preprocess", "fit", "check", "modes", "expect", "drift", "fleet",
)
#: Keys of the ``[log]`` table.
LOG_KEYS: tuple[str, ...] = (
    "paths", "inputs", "outputs", "time", "sample_rate_hz", "drop_bad_rows", "split_at_gaps",
    "jitter_tolerance", "units", "resample_hz", "upsample", "validate_with", "period", "signal_description",
)
#: Keys of the ``[fleet]`` table besides those of :class:`ident.assess.fleet.OutlierRule`.
FLEET_KEYS: tuple[str, ...] = ("unit_from", "workers", "scheduler", "reference")
#: Mode flags that fail a run when ``[modes] fail_on`` is not given.
DEFAULT_FAIL_ON: tuple[str, ...] = ("unstable",)

_GLOB_CHARS = frozenset("*?[")
#: Largest pipeline file rigfit reads, in bytes.
MAX_PIPELINE_BYTES = 2**20
#: Most folders one glob of ``[log] paths`` may list.
MAX_GLOB_FOLDERS = 10_000
_OUTSIDE_HINT = ("pipeline files may come from others, so rigfit reads files outside the pipeline's folder only "
                 "when asked: rigfit run --allow-outside")


@dataclass(frozen=True, slots=True, eq=False)
class LogSpec:
    """The ``[log]`` section: which files and columns, and how to read them.

    Attributes
    ----------
    patterns : tuple of str
        The paths as written (relative to the pipeline file; may be globs).
    files : tuple of pathlib.Path
        The files they match, absolute, in order (each pattern's matches
        sorted by name; duplicates removed). Each file is one experiment.
    inputs, outputs : tuple of str
        Column selectors: names, ``group/name``, shell-style patterns or
        ``#N`` positions (see :mod:`ident.io.columns`).
    time : str or None
        Time column; ``None`` auto-detects ``time``/``t`` unless
        ``sample_rate_hz`` is given.
    sample_rate_hz : float or None
        Sample rate for logs without a time column.
    drop_bad_rows, split_at_gaps : bool
        As in :func:`ident.io.log.read_log`.
    jitter_tolerance : float
        As in :func:`ident.io.log.read_log`.
    units : dict
        Column name -> unit, used where the header carries no unit.
    resample_hz : float or None
        Bring every chosen channel to this rate (as ``rigfit fit --resample``).
    upsample : str or None
        ``"zoh"`` or ``"linear"`` for channels slower than the common rate
        (as ``rigfit fit --upsample``).
    validation_patterns : tuple of str
        ``validate_with`` as written: separate validation logs.
    validation_files : tuple of pathlib.Path
        The files they match (as ``files``); when any, nothing of ``files`` is
        held out (as ``rigfit fit --validate-with``).
    period : str or float
        ``"auto"`` (detect a periodic input), ``"none"``, or the period in
        seconds (as ``--period``).
    signal_description : pathlib.Path or None
        A test signal's description (as ``--signal-description``).
    """

    patterns: tuple[str, ...]
    files: tuple[Path, ...]
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    time: str | None = None
    sample_rate_hz: float | None = None
    drop_bad_rows: bool = False
    split_at_gaps: bool = False
    jitter_tolerance: float = 0.1
    units: dict[str, str] = field(default_factory=dict)
    resample_hz: float | None = None
    upsample: str | None = None
    validation_patterns: tuple[str, ...] = ()
    validation_files: tuple[Path, ...] = ()
    period: str | float = "auto"
    signal_description: Path | None = None

    def read_log_kwargs(self) -> dict[str, Any]:
        """Keyword arguments of :func:`ident.io.log.read_log` for these settings."""
        return {
            "time": self.time, "sample_rate": self.sample_rate_hz, "drop_bad_rows": self.drop_bad_rows,
            "split_at_gaps": self.split_at_gaps, "jitter_tolerance": self.jitter_tolerance,
            "resample_hz": self.resample_hz, "upsample": self.upsample,
        }


@dataclass(frozen=True, slots=True, eq=False)
class ModesSpec:
    """The ``[modes]`` section: flag thresholds and the flags that fail the run."""

    thresholds: ModeThresholds = field(default_factory=ModeThresholds)
    fail_on: tuple[str, ...] = DEFAULT_FAIL_ON


@dataclass(frozen=True, slots=True, eq=False)
class DriftSpec:
    """The ``[drift]`` section: an optional baseline model file and the breach thresholds."""

    baseline: Path | None = None
    thresholds: DriftThresholds = field(default_factory=DriftThresholds)


@dataclass(frozen=True, slots=True, eq=False)
class FleetSpec:
    """The ``[fleet]`` section, read by ``rigfit fleet`` only (``rigfit run`` ignores it).

    Attributes
    ----------
    unit_from : str or None
        Regular expression that takes a unit's name from its log path (its first
        group, or the whole match without groups).
    workers : int or None
        Worker processes of the embedded cluster (default: one per core).
    scheduler : str or None
        Address of a running ``distributed`` scheduler to send the work to.
    reference : pathlib.Path or None
        Reference model file (absolute) the units' modes are matched against.
    rule : ident.assess.fleet.OutlierRule
        The outlier rule.
    """

    unit_from: str | None = None
    workers: int | None = None
    scheduler: str | None = None
    reference: Path | None = None
    rule: OutlierRule = field(default_factory=OutlierRule)


@dataclass(frozen=True, slots=True, eq=False)
class PipelineSpec:
    """A parsed pipeline file.

    Attributes
    ----------
    name : str
        Free text naming the job (default: the file name without suffix).
    notes : str
        Free text (may be empty).
    path : pathlib.Path or None
        The pipeline file (absolute), ``None`` for a spec built from a mapping.
    sha256 : str
        Hex SHA-256 of the file bytes (``""`` without a file).
    log : LogSpec
    fit : IdentifyOptions
        Candidate structures, orders and selection; its ``preprocess`` field
        holds the ``[preprocess]`` section.
    check : CheckOptions
        Validation settings and gates.
    modes : ModesSpec
    expect : Expectations
    drift : DriftSpec
    fleet : FleetSpec
    """

    name: str
    notes: str
    path: Path | None
    sha256: str
    log: LogSpec
    fit: IdentifyOptions
    check: CheckOptions
    modes: ModesSpec
    expect: Expectations
    drift: DriftSpec
    fleet: FleetSpec = field(default_factory=FleetSpec)

    @property
    def base_dir(self) -> Path:
        """Folder relative paths are resolved against (the pipeline file's folder)."""
        return self.path.parent if self.path is not None else Path.cwd()

    def to_dict(self) -> dict[str, Any]:
        """Return the spec as plain JSON-ready data (for summaries and provenance)."""
        exp = dataclasses.asdict(self.expect)
        return {
            "name": self.name,
            "notes": self.notes,
            "path": None if self.path is None else str(self.path),
            "sha256": self.sha256,
            "log": {
                "paths": list(self.log.patterns),
                "files": [str(f) for f in self.log.files],
                "inputs": list(self.log.inputs),
                "outputs": list(self.log.outputs),
                "time": self.log.time,
                "sample_rate_hz": self.log.sample_rate_hz,
                "drop_bad_rows": self.log.drop_bad_rows,
                "split_at_gaps": self.log.split_at_gaps,
                "jitter_tolerance": self.log.jitter_tolerance,
                "units": dict(self.log.units),
                "resample_hz": self.log.resample_hz,
                "upsample": self.log.upsample,
                "validate_with": list(self.log.validation_patterns),
                "validation_files": [str(f) for f in self.log.validation_files],
                "period": self.log.period,
                "signal_description": None if self.log.signal_description is None
                else str(self.log.signal_description),
            },
            "preprocess": self.fit.preprocess.to_dict(),
            "fit": {k: v for k, v in self.fit.to_dict().items() if k != "preprocess"},
            "check": {f.name: getattr(self.check, f.name) for f in dataclasses.fields(self.check)},
            "modes": {
                **{f.name: getattr(self.modes.thresholds, f.name)
                   for f in dataclasses.fields(self.modes.thresholds)},
                "fail_on": list(self.modes.fail_on),
            },
            "expect": exp,
            "drift": {
                "baseline": None if self.drift.baseline is None else str(self.drift.baseline),
                **{f.name: getattr(self.drift.thresholds, f.name)
                   for f in dataclasses.fields(self.drift.thresholds)},
            },
            "fleet": {
                "unit_from": self.fleet.unit_from,
                "workers": self.fleet.workers,
                "scheduler": self.fleet.scheduler,
                "reference": None if self.fleet.reference is None else str(self.fleet.reference),
                **self.fleet.rule.to_dict(),
            },
        }


# --------------------------------------------------------------------------- public API


def load_pipeline(path: str | os.PathLike, *, expand_logs: bool = True, allow_outside: bool = False) -> PipelineSpec:
    """Read and check a pipeline file.

    Parameters
    ----------
    path : path-like
        The TOML file. Relative paths inside it are relative to its folder.
    expand_logs : bool, default True
        Resolve ``[log] paths`` to files (each must exist). ``False`` keeps the
        patterns only (``LogSpec.files`` empty), for callers that supply the logs
        themselves, as ``rigfit fleet`` does.
    allow_outside : bool, default False
        Read log files and a baseline outside the pipeline file's folder tree.

    Returns
    -------
    PipelineSpec

    Raises
    ------
    PipelineError
        The file cannot be read, is not a regular file, is larger than
        :data:`MAX_PIPELINE_BYTES`, is not valid TOML or is nested too deeply,
        has an unknown key (the message names the key path, the hint the
        nearest valid key), a value of the wrong type or out of range, a log
        path that matches no file, lies outside the folder tree without
        ``allow_outside``, or a glob that starts at the root or walks too many
        folders.
    """
    from .inputs import parse_toml, read_input_bytes

    where = Path(path)

    def error(reason: str) -> PipelineError:
        return PipelineError(reason, path=where)

    data = read_input_bytes(where, error, what="pipeline file", max_bytes=MAX_PIPELINE_BYTES)
    mapping = parse_toml(data, error)
    return parse_pipeline(
        mapping, path=where.resolve(), sha256=hashlib.sha256(data).hexdigest(), expand_logs=expand_logs,
        allow_outside=allow_outside,
    )


def parse_pipeline(
    mapping: Mapping[str, Any], *, path: str | os.PathLike | None = None, sha256: str = "",
    expand_logs: bool = True,
    allow_outside: bool = False,
) -> PipelineSpec:
    """Build a :class:`PipelineSpec` from a parsed TOML document.

    Parameters
    ----------
    mapping : Mapping
        The document, as :func:`tomllib.loads` gives it.
    path : path-like, optional
        The file it came from; relative log and baseline paths are resolved
        against its folder (the current folder without it).
    sha256 : str
        Hash of the file bytes, recorded in the spec.
    expand_logs : bool, default True
        As in :func:`load_pipeline`.
    allow_outside : bool, default False
        With ``path``: read log files and a baseline outside ``path``'s folder
        tree. Without ``path`` (a mapping built by the caller) nothing is
        restricted.

    Returns
    -------
    PipelineSpec

    Raises
    ------
    PipelineError
        As :func:`load_pipeline`.
    """
    src = None if path is None else Path(path)
    base = src.parent if src is not None else Path.cwd()
    tree = None if src is None or allow_outside else base.resolve()
    _check_keys(mapping, "", SECTIONS, src)
    name = _text(mapping, "name", src, default=src.stem if src is not None else "pipeline")
    notes = _text(mapping, "notes", src, default="")
    if "log" not in mapping:
        raise PipelineError("missing section [log] (the log files and their columns)", path=src,
                            key_path="log")
    log = _parse_log(mapping["log"], base, src, tree, expand=expand_logs)

    prep_table = _section(mapping, "preprocess", src)
    _parse_options(PreprocessOptions, prep_table, "preprocess", src,
                   lambda t: PreprocessOptions.from_mapping(t, key_path="preprocess"))
    fit_table = dict(_section(mapping, "fit", src))
    if "preprocess" in fit_table:
        raise PipelineError(
            "unknown key", path=src, key_path="fit.preprocess",
            hint="preprocessing has its own section [preprocess]",
        )
    if fit_table.get("order") == "auto":
        fit_table["order"] = None
    fit = _parse_options(
        IdentifyOptions, fit_table, "fit", src,
        lambda t: IdentifyOptions.from_mapping({**t, "preprocess": prep_table}, key_path="fit"),
        exclude=("preprocess",),
    )
    check = _parse_options(CheckOptions, _section(mapping, "check", src), "check", src,
                           CheckOptions.from_mapping)
    modes = _parse_modes(_section(mapping, "modes", src), src)
    try:
        expect = Expectations.from_mapping(
            _section(mapping, "expect", src), source=None if src is None else str(src), key_path="expect"
        )
    except PipelineError as exc:
        raise _with_path(exc, src) from exc
    drift = _parse_drift(_section(mapping, "drift", src), base, src, tree)
    fleet = _parse_fleet(_section(mapping, "fleet", src), base, src, tree)
    return PipelineSpec(
        name=name, notes=notes, path=src, sha256=sha256, log=log, fit=fit, check=check,
        modes=modes, expect=expect, drift=drift, fleet=fleet,
    )


# --------------------------------------------------------------------------- helpers


def _join(prefix: str, key: str) -> str:
    return f"{prefix}.{key}" if prefix else key


def _check_keys(table: Any, key_path: str, valid: tuple[str, ...], src: Path | None) -> None:
    if not isinstance(table, Mapping):
        raise PipelineError(f"must be a table; got {type(table).__name__}", path=src,
                            key_path=key_path or None)
    for key in table:
        if key not in valid:
            raise PipelineError(
                f"unknown key; valid keys are {', '.join(valid)}",
                path=src, key_path=_join(key_path, str(key)), hint=did_you_mean(str(key), valid),
            )


def _section(mapping: Mapping[str, Any], key: str, src: Path | None) -> Mapping[str, Any]:
    table = mapping.get(key, {})
    if not isinstance(table, Mapping):
        raise PipelineError(f"must be a table [{key}]; got {type(table).__name__}", path=src, key_path=key)
    return table


def _text(mapping: Mapping[str, Any], key: str, src: Path | None, *, default: str) -> str:
    value = mapping.get(key, default)
    if not isinstance(value, str):
        raise PipelineError(f"must be a string; got {value!r}", path=src, key_path=key)
    return value


def _with_path(exc: PipelineError, src: Path | None) -> PipelineError:
    return PipelineError(exc.reason, path=src if src is not None else exc.path,
                         key_path=exc.key_path, hint=exc.hint)


def _parse_options(
    cls: type,
    table: Mapping[str, Any],
    key_path: str,
    src: Path | None,
    build: Callable[[Mapping[str, Any]], Any],
    *,
    exclude: tuple[str, ...] = (),
) -> Any:
    """Check the keys of a section, then build it with the owner's ``from_mapping``.

    On a bad value the offending key is located by building the class from that
    key alone, so the error names ``section.key`` rather than just the section.
    """
    valid = tuple(f.name for f in dataclasses.fields(cls) if f.name not in exclude)
    _check_keys(table, key_path, valid, src)
    try:
        return build(table)
    except (IdentError, TypeError, ValueError) as exc:
        where = key_path
        for key, value in table.items():
            try:
                cls(**{key: value})
            except (IdentError, TypeError, ValueError):
                where = _join(key_path, key)
                break
        reason = exc.reason if isinstance(exc, PipelineError) else str(exc)
        raise PipelineError(reason, path=src, key_path=where, hint=getattr(exc, "hint", None)) from exc


def _names(value: Any, key_path: str, src: Path | None) -> tuple[str, ...]:
    if isinstance(value, str):
        value = [value]
    if not isinstance(value, list) or not value or not all(isinstance(v, str) and v for v in value):
        raise PipelineError(f"must be a non-empty list of column names; got {value!r}", path=src,
                            key_path=key_path)
    return tuple(value)


def _bool(table: Mapping[str, Any], key: str, key_path: str, src: Path | None) -> bool:
    value = table.get(key, False)
    if not isinstance(value, bool):
        raise PipelineError(f"must be true or false; got {value!r}", path=src, key_path=_join(key_path, key))
    return value


def _number(value: Any, key_path: str, src: Path | None, *, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise PipelineError(f"must be {what}; got {value!r}", path=src, key_path=key_path)
    return float(value)


def _inside(path: Path, tree: Path | None) -> bool:
    if tree is None:
        return True
    try:
        path.resolve().relative_to(tree)
    except ValueError:
        return False
    return True


def static_prefix(target: Path) -> tuple[Path, tuple[str, ...]]:
    """Split an absolute pattern into its folder without glob characters and the parts after it."""
    parts = target.parts
    k = 0
    while k < len(parts) and not (_GLOB_CHARS & set(parts[k])):
        k += 1
    return Path(*parts[:k]), tuple(parts[k:])


def bounded_glob(start: Path, parts: tuple[str, ...], limit: int | None = None) -> list[Path] | None:
    """Return the files under ``start`` matching ``parts``, listing at most ``limit`` folders.

    ``parts`` are path components with ``*``, ``?``, ``[...]`` and ``**``.

    Matches as :func:`glob.glob` with ``recursive=True`` does on POSIX (case
    sensitive; names starting with ``.`` only when the pattern part does;
    ``**`` is zero or more folders), files only, sorted. Returns ``None`` when
    the walk would list more than ``limit`` folders (default :data:`MAX_GLOB_FOLDERS`).
    """
    limit = MAX_GLOB_FOLDERS if limit is None else limit
    if parts and parts[-1] == "**":
        parts = (*parts, "*")
    matches: set[Path] = set()
    listed = 0
    stack = [(start, 0)]
    seen: set[tuple[Path, int]] = set()
    while stack:
        folder, i = stack.pop()
        if (folder, i) in seen:
            continue
        seen.add((folder, i))
        part, last = parts[i], i == len(parts) - 1
        if not (_GLOB_CHARS & set(part)):
            nxt = folder / part
            if last and nxt.is_file():
                matches.add(nxt)
            elif not last and nxt.is_dir():
                stack.append((nxt, i + 1))
            continue
        listed += 1
        if listed > limit:
            return None
        try:
            entries = list(os.scandir(folder))
        except OSError:
            continue
        if part == "**":
            stack.append((folder, i + 1))
        for entry in entries:
            if entry.name.startswith(".") and not part.startswith("."):
                continue
            is_dir = entry.is_dir()
            if part == "**":
                if is_dir:
                    stack.append((Path(entry.path), i))
            elif fnmatch.fnmatchcase(entry.name, part):
                if last and entry.is_file():
                    matches.add(Path(entry.path))
                elif not last and is_dir:
                    stack.append((Path(entry.path), i + 1))
    return sorted(matches)


def _expand(patterns: tuple[str, ...], base: Path, src: Path | None, tree: Path | None,
            where: str = "log.paths") -> tuple[Path, ...]:
    files: list[Path] = []
    for k, pattern in enumerate(patterns):
        key = f"{where}[{k + 1}]"
        target = Path(pattern).expanduser()
        target = target if target.is_absolute() else base / target
        if _GLOB_CHARS & set(pattern):
            prefix, parts = static_prefix(Path(os.path.normpath(target)))
            if prefix == Path(prefix.anchor):
                raise PipelineError(f"the glob {printable(pattern)!r} starts at the file system root", path=src,
                                    key_path=key, hint="start the glob in the folder holding the logs")
            if not _inside(prefix, tree):
                raise PipelineError(f"{printable(pattern)!r} reaches outside the pipeline's folder", path=src,
                                    key_path=key, hint=_OUTSIDE_HINT)
            found = bounded_glob(prefix, parts)
            if found is None:
                raise PipelineError(
                    f"the glob {printable(pattern)!r} would list more than {MAX_GLOB_FOLDERS} folders",
                    path=src, key_path=key, hint="narrow the glob to the folder holding the logs",
                )
            if not found:
                raise PipelineError(f"no file matches {printable(pattern)!r} (relative to {printable(base)})",
                                    path=src, key_path=key)
            matches = found
        else:
            if not target.is_file():
                raise PipelineError(f"no such file {printable(pattern)!r} (relative to {printable(base)})",
                                    path=src, key_path=key)
            matches = [target]
        for m in matches:
            if not _inside(m, tree):
                raise PipelineError(f"{printable(pattern)!r} names a file outside the pipeline's folder "
                                    "(after following links)", path=src, key_path=key, hint=_OUTSIDE_HINT)
            m = m.resolve()
            if m not in files:
                files.append(m)
    return tuple(files)


def _parse_log(table: Any, base: Path, src: Path | None, tree: Path | None, *, expand: bool = True) -> LogSpec:
    _check_keys(table, "log", LOG_KEYS, src)
    for key in ("paths", "inputs", "outputs"):
        if key not in table:
            raise PipelineError(f"missing key {key!r}", path=src, key_path=f"log.{key}")
    patterns = _names(table["paths"], "log.paths", src)
    inputs = _names(table["inputs"], "log.inputs", src)
    outputs = _names(table["outputs"], "log.outputs", src)
    lowered = {n.lower() for n in inputs}
    for name in outputs:
        if name.lower() in lowered:
            raise PipelineError(f"column {name!r} is both an input and an output", path=src,
                                key_path="log.outputs")
    time = table.get("time")
    if time is not None and (not isinstance(time, str) or not time):
        raise PipelineError(f"must be a column name; got {time!r}", path=src, key_path="log.time")
    rate = table.get("sample_rate_hz")
    if rate is not None:
        rate = _rate(rate, "log.sample_rate_hz", src)
        if time is not None:
            raise PipelineError("give either 'time' or 'sample_rate_hz', not both", path=src,
                                key_path="log.sample_rate_hz")
    jitter = _number(table.get("jitter_tolerance", 0.1), "log.jitter_tolerance", src,
                     what="a number in (0, 1)")
    if not 0 < jitter < 1:
        raise PipelineError(f"must be a number in (0, 1); got {jitter!r}", path=src,
                            key_path="log.jitter_tolerance")
    units = table.get("units", {})
    if not isinstance(units, Mapping) or not all(
        isinstance(k, str) and isinstance(v, str) for k, v in units.items()
    ):
        raise PipelineError("must be a table of column name = \"unit\" strings", path=src,
                            key_path="log.units")
    known = {n.lower(): n for n in (*inputs, *outputs)}
    selectors = any(is_pattern(n) or n.strip().startswith("#") for n in (*inputs, *outputs))
    for key in units:
        # with patterns the names are known only once a log is read (checked then)
        if key.lower() not in known and not selectors:
            raise PipelineError(
                "names no input or output column", path=src, key_path=f"log.units.{key}",
                hint=did_you_mean(key, tuple(known.values())),
            )
    return LogSpec(
        patterns=patterns,
        files=_expand(patterns, base, src, tree) if expand else (),
        inputs=inputs,
        outputs=outputs,
        time=time,
        sample_rate_hz=rate,
        drop_bad_rows=_bool(table, "drop_bad_rows", "log", src),
        split_at_gaps=_bool(table, "split_at_gaps", "log", src),
        jitter_tolerance=jitter,
        units={k.lower(): v for k, v in units.items()},
        resample_hz=_resample(table, src),
        upsample=_upsample(table, src),
        **_validation_and_period(table, base, src, tree),
    )


def _validation_and_period(table: Mapping[str, Any], base: Path, src: Path | None,
                           tree: Path | None) -> dict[str, Any]:
    """``validate_with``, ``period`` and ``signal_description`` of the ``[log]`` table."""
    out: dict[str, Any] = {}
    if "validate_with" in table:
        patterns = _names(table["validate_with"], "log.validate_with", src)
        out["validation_patterns"] = patterns
        out["validation_files"] = _expand(patterns, base, src, tree, "log.validate_with")
    period = table.get("period", "auto")
    if isinstance(period, str):
        if period not in ("auto", "none"):
            raise PipelineError(f"must be \"auto\", \"none\" or a number of seconds; got {period!r}", path=src,
                                key_path="log.period")
    else:
        period = _number(period, "log.period", src, what="\"auto\", \"none\" or a number of seconds")
        if period <= 0:
            raise PipelineError(f"must be a positive number of seconds; got {period!r}", path=src,
                                key_path="log.period")
    out["period"] = period
    description = table.get("signal_description")
    if description is not None:
        if not isinstance(description, str) or not description:
            raise PipelineError(f"must be the path of a signal description; got {description!r}", path=src,
                                key_path="log.signal_description")
        target = Path(description).expanduser()
        target = target if target.is_absolute() else base / target
        if not _inside(target, tree):
            raise PipelineError("the signal description is outside the pipeline's folder (after following links)",
                                path=src, key_path="log.signal_description", hint=_OUTSIDE_HINT)
        out["signal_description"] = target.resolve()
    return out


def _resample(table: Mapping[str, Any], src: Path | None) -> float | None:
    rate = table.get("resample_hz")
    if rate is None:
        return None
    return _rate(rate, "log.resample_hz", src)


def _rate(value: Any, key_path: str, src: Path | None) -> float:
    rate = _number(value, key_path, src, what="a positive number of samples per second")
    if rate <= 0:
        raise PipelineError(f"must be a positive number; got {value!r}", path=src, key_path=key_path)
    try:
        return sample_rate_value(rate, "the rate")
    except OptionError as exc:
        raise PipelineError(str(exc), path=src, key_path=key_path) from exc


def _upsample(table: Mapping[str, Any], src: Path | None) -> str | None:
    method = table.get("upsample")
    if method is not None and method not in UPSAMPLE_METHODS:
        raise PipelineError(
            f"must be one of {', '.join(UPSAMPLE_METHODS)}; got {method!r}", path=src,
            key_path="log.upsample", hint=did_you_mean(str(method), UPSAMPLE_METHODS),
        )
    return method


def _parse_modes(table: Mapping[str, Any], src: Path | None) -> ModesSpec:
    valid = (*(f.name for f in dataclasses.fields(ModeThresholds)), "fail_on")
    _check_keys(table, "modes", valid, src)
    rest = {k: v for k, v in table.items() if k != "fail_on"}
    try:
        thresholds = ModeThresholds.from_mapping(rest, source=None if src is None else str(src))
    except PipelineError as exc:
        where = exc.key_path
        if where == "modes":
            for key, value in rest.items():
                try:
                    ModeThresholds(**{key: value})
                except (IdentError, TypeError, ValueError):
                    where = f"modes.{key}"
                    break
        raise PipelineError(exc.reason, path=src, key_path=where, hint=exc.hint) from exc
    fail_on = table.get("fail_on", list(DEFAULT_FAIL_ON))
    if not isinstance(fail_on, list) or not all(isinstance(f, str) for f in fail_on):
        raise PipelineError(f"must be a list of flag names; got {fail_on!r}", path=src,
                            key_path="modes.fail_on")
    for flag in fail_on:
        if flag not in FLAGS:
            raise PipelineError(
                f"unknown flag {flag!r}; flags are {', '.join(FLAGS)}", path=src,
                key_path="modes.fail_on", hint=did_you_mean(flag, FLAGS),
            )
    return ModesSpec(thresholds=thresholds, fail_on=tuple(dict.fromkeys(fail_on)))


def _parse_drift(table: Mapping[str, Any], base: Path, src: Path | None, tree: Path | None) -> DriftSpec:
    valid = ("baseline", *(f.name for f in dataclasses.fields(DriftThresholds)))
    _check_keys(table, "drift", valid, src)
    baseline = table.get("baseline")
    if baseline is not None:
        if not isinstance(baseline, str) or not baseline:
            raise PipelineError(f"must be the path of a model file; got {baseline!r}", path=src,
                                key_path="drift.baseline")
        target = Path(baseline).expanduser()
        target = target if target.is_absolute() else base / target
        if not _inside(target, tree):
            raise PipelineError("the baseline is outside the pipeline's folder (after following links)",
                                path=src, key_path="drift.baseline", hint=_OUTSIDE_HINT)
        baseline = target.resolve()
    rest = {k: v for k, v in table.items() if k != "baseline"}
    thresholds = _parse_options(DriftThresholds, rest, "drift", src, DriftThresholds.from_mapping)
    return DriftSpec(baseline=baseline, thresholds=thresholds)


def _parse_fleet(table: Mapping[str, Any], base: Path, src: Path | None, tree: Path | None) -> FleetSpec:
    valid = (*FLEET_KEYS, *(f.name for f in dataclasses.fields(OutlierRule)))
    _check_keys(table, "fleet", valid, src)
    unit_from = table.get("unit_from")
    if unit_from is not None:
        if not isinstance(unit_from, str) or not unit_from:
            raise PipelineError(f"must be a regular expression; got {unit_from!r}", path=src,
                                key_path="fleet.unit_from")
        try:
            re.compile(unit_from)
        except re.error as exc:
            raise PipelineError(f"not a valid regular expression ({exc})", path=src,
                                key_path="fleet.unit_from") from exc
    workers = table.get("workers")
    if workers is not None and (isinstance(workers, bool) or not isinstance(workers, int) or workers < 1):
        raise PipelineError(f"must be a whole number >= 1; got {workers!r}", path=src, key_path="fleet.workers")
    scheduler = table.get("scheduler")
    if scheduler is not None and (not isinstance(scheduler, str) or not scheduler):
        raise PipelineError(f"must be a scheduler address such as 'tcp://host:8786'; got {scheduler!r}",
                            path=src, key_path="fleet.scheduler")
    if scheduler is not None and workers is not None:
        raise PipelineError("give either 'workers' (embedded cluster) or 'scheduler', not both", path=src,
                            key_path="fleet.workers")
    reference = table.get("reference")
    if reference is not None:
        if not isinstance(reference, str) or not reference:
            raise PipelineError(f"must be the path of a model file; got {reference!r}", path=src,
                                key_path="fleet.reference")
        target = Path(reference).expanduser()
        target = target if target.is_absolute() else base / target
        if not _inside(target, tree):
            raise PipelineError("the reference model is outside the pipeline's folder (after following links)",
                                path=src, key_path="fleet.reference", hint=_OUTSIDE_HINT)
        reference = target.resolve()
    rest = {k: v for k, v in table.items() if k not in FLEET_KEYS}
    rule = _parse_options(OutlierRule, rest, "fleet", src, OutlierRule.from_mapping)
    return FleetSpec(unit_from=unit_from, workers=workers, scheduler=scheduler, reference=reference, rule=rule)
