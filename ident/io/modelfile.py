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


def _require(mapping: dict, key: str, path: str | None) -> Any:
    if key not in mapping:
        raise ModelFileError(f"missing key {key!r}", path=path)
    return mapping[key]


def _as_matrix(value: Any, name: str, rows: int | None, cols: int | None, path: str | None) -> np.ndarray:
    try:
        arr = np.array(value, dtype=float)
    except (TypeError, ValueError) as exc:
        raise ModelFileError(f"{name} must be a matrix of numbers", path=path) from exc
    if arr.size == 0:  # a model without states writes A as [] and B as []
        arr = arr.reshape(rows or 0, cols or 0)
    if arr.ndim != 2:
        raise ModelFileError(f"{name} must be a list of rows (2-D); got {arr.ndim}-D", path=path)
    if (rows is not None and arr.shape[0] != rows) or (cols is not None and arr.shape[1] != cols):
        want = f"({'*' if rows is None else rows}, {'*' if cols is None else cols})"
        raise ModelFileError(f"{name} must have shape {want}; got {arr.shape}", path=path)
    if not np.all(np.isfinite(arr)):
        raise ModelFileError(f"{name} holds a value that is not finite", path=path)
    return arr


def model_from_dict(data: Any, *, path: str | os.PathLike | None = None) -> ModelFile:
    """Build a :class:`ModelFile` from parsed model-file JSON, checking every field.

    Raises
    ------
    ModelFileError
        The format name or schema version is unknown, or a field is missing
        or malformed.
    """
    where = None if path is None else os.fspath(path)
    if not isinstance(data, dict):
        raise ModelFileError("not a model file (top level must be a JSON object)", path=where)
    fmt = data.get("format")
    if fmt != FORMAT_NAME:
        raise ModelFileError(f"not a rigfit model file (format is {fmt!r}, expected {FORMAT_NAME!r})", path=where)
    version = data.get("schema_version")
    if version != SCHEMA_VERSION:
        raise ModelFileError(
            f"unsupported schema_version {version!r}; this rigfit reads version {SCHEMA_VERSION}",
            path=where,
            hint="upgrade rigfit to read files written by a newer version",
        )
    ss = _require(data, "state_space", where)
    if not isinstance(ss, dict):
        raise ModelFileError("state_space must be an object with A, B, C, D", path=where)
    inputs = _require(data, "inputs", where)
    outputs = _require(data, "outputs", where)
    if not (isinstance(inputs, list) and all(isinstance(s, str) for s in inputs)):
        raise ModelFileError("inputs must be a list of names", path=where)
    if not (isinstance(outputs, list) and all(isinstance(s, str) for s in outputs)):
        raise ModelFileError("outputs must be a list of names", path=where)
    m, p = len(inputs), len(outputs)
    D_raw = _as_matrix(_require(ss, "D", where), "state_space.D", None, None, where)
    if D_raw.shape != (p, m):
        raise ModelFileError(
            f"inputs lists {m} name(s) and outputs {p}, but state_space.D is {D_raw.shape[0]} x "
            f"{D_raw.shape[1]} (outputs x inputs)",
            path=where,
        )
    A = _as_matrix(_require(ss, "A", where), "state_space.A", None, None, where)
    n = A.shape[0]
    if A.shape != (n, n):
        raise ModelFileError(f"state_space.A must be square; got {A.shape}", path=where)
    B = _as_matrix(_require(ss, "B", where), "state_space.B", n, m, where)
    C = _as_matrix(_require(ss, "C", where), "state_space.C", p, n, where)
    D = _as_matrix(_require(ss, "D", where), "state_space.D", p, m, where)
    sample_time = _require(data, "sample_time", where)
    if sample_time is not None and (
        isinstance(sample_time, bool)
        or not isinstance(sample_time, (int, float))
        or not math.isfinite(sample_time)
        or sample_time <= 0
    ):
        raise ModelFileError(f"sample_time must be a positive number or null; got {sample_time!r}", path=where)
    units = data.get("units") or {}
    if not isinstance(units, dict):
        raise ModelFileError("units must be an object with inputs and outputs", path=where)
    in_units = units.get("inputs", [""] * m)
    out_units = units.get("outputs", [""] * p)
    if len(in_units) != m or len(out_units) != p:
        raise ModelFileError("units must list one unit per input and per output", path=where)
    op_raw = data.get("operating_point")
    op = None
    if op_raw is not None:
        if not isinstance(op_raw, dict):
            raise ModelFileError("operating_point must be an object or null", path=where)
        op_in = _as_matrix([_require(op_raw, "inputs", where)], "operating_point.inputs", 1, m, where)
        op_out = _as_matrix([_require(op_raw, "outputs", where)], "operating_point.outputs", 1, p, where)
        op = OperatingPoint(op_in[0], op_out[0])
    K_raw = data.get("noise_gain")
    K = None if K_raw is None else _as_matrix(K_raw, "noise_gain", n, p, where)
    noise_states = data.get("noise_states", 0)
    if isinstance(noise_states, bool) or not isinstance(noise_states, int) or not 0 <= noise_states <= n:
        raise ModelFileError(f"noise_states must be an integer in [0, {n}]; got {noise_states!r}", path=where)
    provenance = data.get("provenance") or {}
    if not isinstance(provenance, dict):
        raise ModelFileError("provenance must be an object", path=where)
    try:
        model = StateSpaceModel(
            A=A if n else np.zeros((0, 0)),
            B=B,
            C=C,
            D=D,
            sample_time=None if sample_time is None else float(sample_time),
            inputs=tuple(inputs),
            outputs=tuple(outputs),
            input_units=tuple(str(u) for u in in_units),
            output_units=tuple(str(u) for u in out_units),
            operating_point=op,
            noise_gain=K,
            noise_states=noise_states,
        )
    except IdentError as exc:
        raise ModelFileError(str(exc), path=where) from exc
    return ModelFile(model=model, provenance=provenance, path=where)


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
        The file is missing, is not JSON, or is not a valid model file.
    """
    where = os.fspath(path)
    try:
        with open(where, encoding="utf-8") as fh:
            text = fh.read()
    except FileNotFoundError as exc:
        raise ModelFileError("no such file", path=where) from exc
    except (IsADirectoryError, PermissionError, UnicodeDecodeError) as exc:
        raise ModelFileError(f"cannot read ({exc.__class__.__name__})", path=where) from exc
    try:
        data = json.loads(text)
    except json.JSONDecodeError as exc:
        raise ModelFileError(f"not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})", path=where) from exc
    return model_from_dict(data, path=where)


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
