"""The rigfit model file: a JSON document holding one state-space model.

Layout (schema version 1)::

    {
      "format": "rigfit-model",
      "schema_version": 1,
      "sample_time": 0.001,                 # seconds; null for continuous time
      "inputs": ["motor_torque_cmd"],       # model order of the inputs
      "outputs": ["motor_speed", "carriage_speed"],
      "units": {"inputs": ["N m"], "outputs": ["rad/s", "m/s"]},
      "operating_point": {"inputs": [...], "outputs": [...]},   # or null
      "state_space": {"A": [[...]], "B": [[...]], "C": [[...]], "D": [[...]]},
      "noise_gain": [[...]] or null,        # innovation-form Kalman gain K (n x p)
      "noise_states": 0,                    # trailing states of the noise model only (optional)
      "provenance": {"tool": "rigfit", "tool_version": ..., "created_utc": ..., "log": {...},
                     "estimation": {...}, "validation": {...}}
    }

Discrete time means ``x[k+1] = A x + B u``, ``y = C x + D u``; the model maps
deviations from the operating point. Floats are written with ``repr``
precision, so a save/load round trip is exact.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import os
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from .._json import json_ready
from .._version import __version__
from ..errors import IdentError, ModelFileError
from ..lti.covariance import ParameterCovariance
from ..lti.models import OperatingPoint, StateSpaceModel
from .atomic import write_atomic

__all__ = [
    "FORMAT_NAME",
    "SCHEMA_VERSION",
    "ModelFile",
    "model_to_dict",
    "model_from_dict",
    "save_model",
    "load_model",
    "dumps_model",
    "uncertainty_provenance",
    "log_duration_from_provenance",
]

FORMAT_NAME = "rigfit-model"
SCHEMA_VERSION = 1


@dataclass(frozen=True, slots=True, eq=False)
class ModelFile:
    """A model read from a model file, with the file's provenance record.

    Parameters
    ----------
    model : StateSpaceModel
        The model.
    provenance : dict
        Tool version, creation time, log identity, estimation settings and
        validation figures, as written (empty when the file has none).
    path : str or None
        The file it was read from.
    """

    model: StateSpaceModel
    provenance: dict = field(default_factory=dict)
    path: str | None = None

    def pole_covariance(self) -> np.ndarray | None:
        """Return the stored pole covariance ``(n, 2, 2)`` (``provenance.estimation.pole_covariance``).

        A nan block means the uncertainty of that pole is unknown; ``None`` means
        the file holds no usable covariance (see
        :func:`ident.estimate.uncertainty.pole_covariance_from_list`).
        """
        from ..estimate.uncertainty import pole_covariance_from_list

        block = self.provenance.get("estimation") if isinstance(self.provenance, dict) else None
        raw = block.get("pole_covariance") if isinstance(block, dict) else None
        return pole_covariance_from_list(raw, len(self.model.poles()))

    def parameter_covariance(self) -> ParameterCovariance | None:
        """Return the stored parameter covariance (``provenance.estimation.parameter_covariance``), if usable.

        ``None`` when the file holds none, or one that does not match the model's
        dimensions or is not finite.
        """
        block = self.provenance.get("estimation") if isinstance(self.provenance, dict) else None
        raw = block.get("parameter_covariance") if isinstance(block, dict) else None
        if not isinstance(raw, dict):
            return None
        m = self.model
        try:
            return ParameterCovariance(np.array(raw.get("factor"), dtype=float), str(raw.get("method")),
                                       m.n_states, m.n_inputs, m.n_outputs)
        except (IdentError, TypeError, ValueError):
            return None


def uncertainty_provenance(pole_covariance: np.ndarray | None,
                           covariance: ParameterCovariance | None) -> dict[str, Any]:
    """Entries for ``provenance["estimation"]``: the pole covariance and the parameter covariance factor.

    ``{"pole_covariance": [[[...]]], "parameter_covariance": {"method": ..., "layout": ...,
    "factor": [[...]]}}``, each only when known.
    """
    from ..estimate.uncertainty import pole_covariance_to_list

    out: dict[str, Any] = {}
    if pole_covariance is not None:
        out["pole_covariance"] = pole_covariance_to_list(pole_covariance)
    if covariance is not None:
        out["parameter_covariance"] = {
            "method": covariance.method,
            "layout": "theta = [vec A, vec B, vec C, vec D, vec K], row-major; cov(theta) = factor factor^T",
            "factor": _matrix(covariance.factor),
        }
    return out


def _matrix(arr: np.ndarray) -> list[list[float]]:
    return [[float(v) for v in row] for row in np.asarray(arr, dtype=float)]


def default_provenance() -> dict:
    """Tool name, version and the current UTC time, the base of every provenance record."""
    now = _dt.datetime.now(_dt.UTC).replace(microsecond=0)
    return {
        "tool": "rigfit",
        "tool_version": __version__,
        "created_utc": now.isoformat().replace("+00:00", "Z"),
    }


def model_to_dict(model: StateSpaceModel, provenance: dict | None = None) -> dict:
    """Return the model file content for ``model`` as a JSON-ready dict.

    Parameters
    ----------
    model : StateSpaceModel
        Model to store (discrete or continuous time).
    provenance : dict, optional
        Extra provenance entries (``log``, ``estimation``, ``validation``, ...);
        merged over :func:`default_provenance`.
    """
    if not isinstance(model, StateSpaceModel):
        raise IdentError(f"model must be a StateSpaceModel; got {type(model).__name__}")
    prov = default_provenance()
    if provenance:
        prov.update(json_ready(provenance))
    op = model.operating_point
    return {
        "format": FORMAT_NAME,
        "schema_version": SCHEMA_VERSION,
        "sample_time": model.sample_time,
        "inputs": list(model.inputs),
        "outputs": list(model.outputs),
        "units": {"inputs": list(model.input_units), "outputs": list(model.output_units)},
        "operating_point": None
        if op is None
        else {"inputs": [float(v) for v in op.inputs], "outputs": [float(v) for v in op.outputs]},
        "state_space": {
            "A": _matrix(model.A),
            "B": _matrix(model.B),
            "C": _matrix(model.C),
            "D": _matrix(model.D),
        },
        "noise_gain": None if model.noise_gain is None else _matrix(model.noise_gain),
        "noise_states": model.noise_states,
        "provenance": prov,
    }


def dumps_model(model: StateSpaceModel, provenance: dict | None = None) -> str:
    """Serialise ``model`` to the model-file JSON text (exact float round trip)."""
    return json.dumps(model_to_dict(model, provenance), indent=2, allow_nan=False) + "\n"


#: Largest model file rigfit reads, in bytes.
MAX_MODEL_FILE_BYTES = 128 * 2**20
#: Most states a model file may hold.
MAX_STATES = 1000
#: Most inputs, and most outputs, a model file may hold.
MAX_SIGNALS = 100
#: Longest signal name or unit, in characters.
MAX_NAME_LENGTH = 256
#: Top-level keys of a model file (every other key is refused).
TOP_KEYS = ("format", "schema_version", "sample_time", "inputs", "outputs", "units", "operating_point",
            "state_space", "noise_gain", "noise_states", "provenance")


class _Schema:
    """Checks of one model-file document; every failure is a :class:`ModelFileError` naming the key."""

    def __init__(self, path: str | None) -> None:
        self.path = path

    def fail(self, reason: str) -> ModelFileError:
        return ModelFileError(reason, path=self.path)

    def require(self, mapping: dict, key: str, where: str = "") -> Any:
        if key not in mapping:
            raise self.fail(f"missing key {key!r}" + (f" in {where}" if where else ""))
        return mapping[key]

    def table(self, value: Any, key: str) -> dict:
        if not isinstance(value, dict):
            raise self.fail(f"{key} must be an object; got {_type_name(value)}")
        return value

    def names(self, value: Any, key: str, count: int | None = None) -> list[str]:
        if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
            raise self.fail(f"{key} must be a list of names (strings)")
        if count is None and not 1 <= len(value) <= MAX_SIGNALS:
            raise self.fail(f"{key} must list 1 to {MAX_SIGNALS} names; got {len(value)}")
        if count is not None and len(value) != count:
            raise self.fail(f"{key} must list {count} entries; got {len(value)}")
        if any(len(v) > MAX_NAME_LENGTH for v in value):
            raise self.fail(f"{key} holds a name longer than {MAX_NAME_LENGTH} characters")
        return value

    def number(self, value: Any, key: str, *, positive: bool = False) -> float:
        if not _is_number(value) or not math.isfinite(value) or (positive and value <= 0):
            what = "a positive number" if positive else "a finite number"
            raise self.fail(f"{key} must be {what}; got {_type_name(value)}")
        return float(value)

    def integer(self, value: Any, key: str, low: int, high: int) -> int:
        if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
            raise self.fail(f"{key} must be an integer in [{low}, {high}]; got {_shown(value)}")
        return value

    def matrix(self, value: Any, key: str, rows: int | None, cols: int | None) -> np.ndarray:
        """Check a list of rows of numbers (``[]`` for no rows) element by element; text is never converted."""
        if not isinstance(value, list) or not all(isinstance(r, list) for r in value):
            raise self.fail(f"{key} must be a matrix of numbers (a list of rows)")
        if value and not all(len(r) == len(value[0]) for r in value):
            raise self.fail(f"{key} must be a matrix of numbers: its rows differ in length")
        shape = (len(value), len(value[0]) if value else (cols or 0))
        if (rows is not None and shape[0] != rows) or (cols is not None and value and shape[1] != cols):
            want = f"({'*' if rows is None else rows}, {'*' if cols is None else cols})"
            raise self.fail(f"{key} must have shape {want}; got {shape}")
        for i, row in enumerate(value):
            for j, v in enumerate(row):
                if not _is_number(v):
                    raise self.fail(f"{key} must be a matrix of numbers; row {i + 1}, column {j + 1} "
                                    f"is {_type_name(v)}")
        arr = np.array(value, dtype=float).reshape(shape)
        if not np.all(np.isfinite(arr)):
            i, j = (int(k) for k in np.argwhere(~np.isfinite(arr))[0])
            raise self.fail(f"{key} holds a value that is not finite (row {i + 1}, column {j + 1}; "
                            "an integer too large for a float is infinite)")
        return arr

    def vector(self, value: Any, key: str, length: int) -> np.ndarray:
        if not isinstance(value, list):
            raise self.fail(f"{key} must be a list of {length} numbers")
        return self.matrix([value], key, 1, length)[0]


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _type_name(value: Any) -> str:
    if isinstance(value, str):
        return "a string" + (f" ({_shown(value)})" if len(value) <= 24 else "")
    if isinstance(value, bool):
        return "a boolean"
    if value is None:
        return "null"
    if isinstance(value, (int, float)):
        return _shown(value)
    return {"dict": "an object", "list": "a list"}.get(type(value).__name__, type(value).__name__)


def _shown(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 40 else text[:37] + "..."


def _check_top(schema: _Schema, data: Any) -> None:
    if not isinstance(data, dict):
        raise schema.fail("not a model file (top level must be a JSON object)")
    if data.get("format") != FORMAT_NAME:
        # the file may be anything: its content is never echoed
        raise schema.fail(f'not a rigfit model file (no "format": "{FORMAT_NAME}" entry)')
    version = data.get("schema_version")
    if version != SCHEMA_VERSION or isinstance(version, bool):
        raise ModelFileError(
            f"unsupported schema_version {_shown(version)}; this rigfit reads version {SCHEMA_VERSION}",
            path=schema.path, hint="upgrade rigfit to read files written by a newer version",
        )
    for key in data:
        if key not in TOP_KEYS:
            from .._validate import did_you_mean

            raise ModelFileError(f"unknown key {_shown(key)}; a model file holds {', '.join(TOP_KEYS)}",
                                 path=schema.path, hint=did_you_mean(str(key), TOP_KEYS))


def _state_space(schema: _Schema, data: dict, m: int, p: int) -> tuple[np.ndarray, ...]:
    ss = schema.table(schema.require(data, "state_space"), "state_space")
    for key in ss:
        if key not in ("A", "B", "C", "D"):
            raise schema.fail(f"unknown key state_space.{_shown(key)}; state_space holds A, B, C, D")
    D = schema.matrix(schema.require(ss, "D", "state_space"), "state_space.D", None, None)
    if D.shape != (p, m):
        raise schema.fail(f"inputs lists {m} name(s) and outputs {p}, but state_space.D is {D.shape[0]} x "
                          f"{D.shape[1]} (outputs x inputs)")
    A_raw = schema.require(ss, "A", "state_space")
    n = len(A_raw) if isinstance(A_raw, list) else -1
    if n > MAX_STATES:
        raise ModelFileError(f"the model has {n} states; rigfit reads models of at most {MAX_STATES}",
                             path=schema.path, hint="reduce the model (a balanced realisation drops weak states)")
    A = schema.matrix(A_raw, "state_space.A", None, None)
    n = A.shape[0]
    if A.shape != (n, n) and n:
        raise schema.fail(f"state_space.A must be square; got {A.shape}")
    B = schema.matrix(schema.require(ss, "B", "state_space"), "state_space.B", n, m)
    C = schema.matrix(schema.require(ss, "C", "state_space"), "state_space.C", p, n)
    return A.reshape(n, n), B.reshape(n, m), C.reshape(p, n), D


def _units(schema: _Schema, data: dict, m: int, p: int) -> tuple[list[str], list[str]]:
    units = data.get("units")
    if units is None:
        return [""] * m, [""] * p
    units = schema.table(units, "units")
    for key in units:
        if key not in ("inputs", "outputs"):
            raise schema.fail(f"unknown key units.{_shown(key)}; units holds inputs and outputs")
    ins = schema.names(units.get("inputs", [""] * m), "units.inputs", m)
    outs = schema.names(units.get("outputs", [""] * p), "units.outputs", p)
    return ins, outs


def _operating_point(schema: _Schema, data: dict, m: int, p: int) -> OperatingPoint | None:
    raw = data.get("operating_point")
    if raw is None:
        return None
    raw = schema.table(raw, "operating_point")
    op_in = schema.vector(schema.require(raw, "inputs", "operating_point"), "operating_point.inputs", m)
    op_out = schema.vector(schema.require(raw, "outputs", "operating_point"), "operating_point.outputs", p)
    return OperatingPoint(op_in, op_out)


def _sample_time(schema: _Schema, data: dict) -> float | None:
    from .._validate import SAMPLE_TIME_RANGE_S

    value = schema.require(data, "sample_time")
    if value is None:
        return None
    low, high = SAMPLE_TIME_RANGE_S
    if not _is_number(value) or not math.isfinite(value) or value <= 0:
        raise schema.fail(f"sample_time must be a positive number or null; got {_type_name(value)}")
    if not low <= value <= high:
        raise schema.fail(f"sample_time must be between {low:g} s and {high:g} s; got {value:g}")
    return float(value)


def _provenance(schema: _Schema, data: dict, n: int, m: int, p: int) -> dict:
    """Check the provenance entries rigfit reads back; the rest is kept as written."""
    prov = data.get("provenance")
    if prov is None:
        return {}
    prov = schema.table(prov, "provenance")
    for key in ("tool", "tool_version", "created_utc"):
        if key in prov and not isinstance(prov[key], str):
            raise schema.fail(f"provenance.{key} must be a string; got {_type_name(prov[key])}")
    if prov.get("log_duration_s") is not None:
        schema.number(prov["log_duration_s"], "provenance.log_duration_s")
    for section in ("log", "estimation", "validation"):
        block = prov.get(section)
        if block is None:
            continue
        block = schema.table(block, f"provenance.{section}")
        for key in ("duration_s", "log_duration_s", "sample_time"):
            if block.get(key) is not None:
                schema.number(block[key], f"provenance.{section}.{key}")
        if block.get("n_samples") is not None:
            schema.integer(block["n_samples"], f"provenance.{section}.n_samples", 0, 2**62)
    est = prov.get("estimation") or {}
    if est.get("pole_covariance") is not None:
        _pole_covariance(schema, est["pole_covariance"], n)
    if est.get("parameter_covariance") is not None:
        _parameter_covariance(schema, est["parameter_covariance"], n, m, p)
    return prov


def _pole_covariance(schema: _Schema, raw: Any, n: int) -> None:
    key = "provenance.estimation.pole_covariance"
    if not isinstance(raw, list) or len(raw) > n:
        raise schema.fail(f"{key} must be a list of at most {n} 2 x 2 blocks (one per pole)")
    for k, block in enumerate(raw):
        if not (isinstance(block, list) and len(block) == 2
                and all(isinstance(r, list) and len(r) == 2 for r in block)):
            raise schema.fail(f"{key}: block {k + 1} must be 2 x 2")
        for row in block:
            for v in row:
                if v is not None and (not _is_number(v) or not math.isfinite(v)):
                    raise schema.fail(f"{key}: block {k + 1} must hold finite numbers or null; got {_type_name(v)}")


def _parameter_covariance(schema: _Schema, raw: Any, n: int, m: int, p: int) -> None:
    from ..lti.covariance import COVARIANCE_METHODS, theta_layout

    key = "provenance.estimation.parameter_covariance"
    raw = schema.table(raw, key)
    method = raw.get("method")
    if method not in COVARIANCE_METHODS:
        raise schema.fail(f"{key}.method must be one of {', '.join(COVARIANCE_METHODS)}; got {_type_name(method)}")
    if "layout" in raw and not isinstance(raw["layout"], str):
        raise schema.fail(f"{key}.layout must be a string")
    q = theta_layout(n, m, p)["K"].stop
    factor = schema.require(raw, "factor", key)
    if isinstance(factor, list) and factor and isinstance(factor[0], list) and len(factor[0]) > q:
        raise schema.fail(f"{key}.factor has {len(factor[0])} columns; at most {q} (the entries of theta)")
    schema.matrix(factor, f"{key}.factor", q, None)


def model_from_dict(data: Any, *, path: str | os.PathLike | None = None) -> ModelFile:
    """Build a :class:`ModelFile` from parsed model-file JSON, checking the whole document first.

    Every key is checked against the schema (README, "Model files") before any
    of it is used: types (numbers are JSON numbers, never text), shapes,
    finiteness, the sizes (:data:`MAX_STATES`, :data:`MAX_SIGNALS`), the
    sample time's range, and the provenance entries rigfit reads back
    (durations, sample counts, pole and parameter covariances).

    Raises
    ------
    ModelFileError
        The format name or schema version is unknown, or a key is missing,
        unknown or malformed (the message names it).
    """
    schema = _Schema(None if path is None else os.fspath(path))
    _check_top(schema, data)
    inputs = schema.names(schema.require(data, "inputs"), "inputs")
    outputs = schema.names(schema.require(data, "outputs"), "outputs")
    m, p = len(inputs), len(outputs)
    A, B, C, D = _state_space(schema, data, m, p)
    n = A.shape[0]
    sample_time = _sample_time(schema, data)
    in_units, out_units = _units(schema, data, m, p)
    op = _operating_point(schema, data, m, p)
    K_raw = data.get("noise_gain")
    K = None if K_raw is None else schema.matrix(K_raw, "noise_gain", n, p)
    noise_states = schema.integer(data.get("noise_states", 0), "noise_states", 0, n)
    provenance = _provenance(schema, data, n, m, p)
    try:
        model = StateSpaceModel(
            A=A if n else np.zeros((0, 0)), B=B, C=C, D=D, sample_time=sample_time,
            inputs=tuple(inputs), outputs=tuple(outputs),
            input_units=tuple(in_units), output_units=tuple(out_units),
            operating_point=op, noise_gain=K, noise_states=noise_states,
        )
    except IdentError as exc:
        raise ModelFileError(str(exc), path=schema.path) from exc
    return ModelFile(model=model, provenance=provenance, path=schema.path)


def save_model(
    path: str | os.PathLike,
    model: StateSpaceModel,
    *,
    provenance: dict | None = None,
    force: bool = False,
    protected: tuple[str | os.PathLike, ...] = (),
) -> Path:
    """Write ``model`` to a model file atomically.

    Parameters
    ----------
    path : path-like
        Destination.
    model : StateSpaceModel
        Model to write.
    provenance : dict, optional
        Extra provenance (see :func:`model_to_dict`).
    force : bool
        Replace an existing file; without it an existing file is an error.
    protected : tuple of path-like
        Files never to be written (the input log).

    Returns
    -------
    pathlib.Path
        The written path.
    """
    return write_atomic(path, dumps_model(model, provenance), force=force, protected=protected)


def load_model(path: str | os.PathLike) -> ModelFile:
    """Read a model file.

    Raises
    ------
    ModelFileError
        The file is missing, is not a regular file (a pipe, a device, standard
        input), is larger than :data:`MAX_MODEL_FILE_BYTES`, is not JSON (or is
        nested too deeply, or holds NaN), or is not a valid model file.
    """
    from .inputs import parse_json, read_input_bytes

    where = os.fspath(path)

    def error(reason: str) -> ModelFileError:
        return ModelFileError(reason, path=where)

    data = read_input_bytes(where, error, what="model file", max_bytes=MAX_MODEL_FILE_BYTES)
    return model_from_dict(parse_json(data, error), path=where)


def log_duration_from_provenance(provenance: dict, sample_time: float | None) -> float | None:
    """Log duration in s recorded in a model file's provenance, if any.

    Looks at ``log_duration_s``, then ``log.duration_s``, then
    ``log.n_samples`` (or ``estimation.n_samples``) times the sample time.
    """
    def number(value: Any) -> float | None:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            return None
        return float(value) if value > 0 else None

    if not isinstance(provenance, dict):
        return None
    direct = number(provenance.get("log_duration_s"))
    if direct is not None:
        return direct
    for section in ("log", "estimation"):
        block = provenance.get(section)
        if not isinstance(block, dict):
            continue
        for key in ("duration_s", "log_duration_s"):
            value = number(block.get(key))
            if value is not None:
                return value
        n = number(block.get("n_samples"))
        if n is not None and sample_time:
            return n * sample_time
    return None
