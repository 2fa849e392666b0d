r"""The fleet table as Parquet and CSV files.

One row per unit; the columns and their units of measure come from
:mod:`ident.fleet.aggregate`. Column types: text for names, statuses and
reasons; ``outlier`` boolean; ``gates_passed`` boolean with nulls (failed
units); ``order``, ``n_states`` and ``n_warnings`` integers with nulls; every
figure a float64 (null where a unit has none).

- Parquet (pyarrow): every field carries its unit of measure in the field
  metadata key ``unit``; the schema metadata key ``rigfit`` holds a JSON object
  with the table's format name and version and whatever the caller adds (the
  outlier rule, the reference).
- CSV: comma separated, UTF-8, ``\n`` line ends, a header of column names;
  booleans are ``true``/``false``, nulls are empty, floats are written with full
  precision (they read back bit for bit). A text cell that starts with ``=``,
  ``+``, ``-``, ``@``, a tab or a carriage return is prefixed with ``'`` so a
  spreadsheet shows it as text instead of running it as a formula.

Both are written through :func:`ident.io.atomic.write_atomic`.
"""

from __future__ import annotations

import io
import json
import os
from collections.abc import Mapping, Sequence
from pathlib import Path
from typing import Any

from .atomic import write_atomic

__all__ = ["TABLE_FORMAT", "TEXT_COLUMNS", "spreadsheet_safe", "fleet_frame", "write_fleet_table"]

#: ``format`` in the Parquet schema metadata.
TABLE_FORMAT = "rigfit-fleet-table"
#: Columns holding text; every other column is a number or a boolean.
TEXT_COLUMNS = ("unit", "status", "reason", "failed_gates", "log", "log_sha256", "method", "model_file", "log_path")
_BOOL_COLUMNS = ("outlier", "gates_passed")
_INT_COLUMNS = ("order", "n_states", "n_warnings")
_FORMULA_START = ("=", "+", "-", "@", "\t", "\r")


def spreadsheet_safe(text: Any) -> Any:
    """Prefix ``'`` to a text that a spreadsheet would run as a formula (starts with = + - @ tab CR)."""
    if isinstance(text, str) and text.startswith(_FORMULA_START):
        return "'" + text
    return text


def fleet_frame(rows: Sequence[Mapping[str, Any]], columns: Sequence[tuple[str, str]]) -> Any:
    """Return the fleet table as a :class:`pandas.DataFrame` with the documented column types."""
    import pandas as pd

    names = [name for name, _ in columns]
    data = {}
    for name in names:
        values = [row.get(name) for row in rows]
        if name in TEXT_COLUMNS:
            data[name] = pd.array(values, dtype="string")
        elif name in _BOOL_COLUMNS:
            data[name] = pd.array(values, dtype="boolean")
        elif name in _INT_COLUMNS:
            data[name] = pd.array(values, dtype="Int64")
        else:
            data[name] = pd.array([float("nan") if v is None else float(v) for v in values], dtype="float64")
    return pd.DataFrame(data, columns=names)


def _csv_text(frame: Any) -> str:
    out = frame.copy()
    for name in out.columns:
        if name in TEXT_COLUMNS:
            out[name] = out[name].map(spreadsheet_safe, na_action="ignore")
        elif name in _BOOL_COLUMNS:
            out[name] = out[name].map(lambda v: "true" if v else "false", na_action="ignore").astype("string")
    return out.to_csv(index=False, lineterminator="\n", float_format=None, na_rep="")


def _parquet_bytes(frame: Any, columns: Sequence[tuple[str, str]], metadata: Mapping[str, Any]) -> bytes:
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.Table.from_pandas(frame, preserve_index=False)
    units = dict(columns)
    fields = [f.with_metadata({"unit": units.get(f.name, "")}) for f in table.schema]
    meta = dict(table.schema.metadata or {})
    meta[b"rigfit"] = json.dumps({"format": TABLE_FORMAT, "schema_version": 1, **metadata},
                                 allow_nan=False, default=str).encode("utf-8")
    table = table.cast(pa.schema(fields, metadata=meta))
    buf = io.BytesIO()
    pq.write_table(table, buf)
    return buf.getvalue()


def write_fleet_table(
    rows: Sequence[Mapping[str, Any]],
    columns: Sequence[tuple[str, str]],
    csv_path: str | os.PathLike,
    parquet_path: str | os.PathLike,
    *,
    metadata: Mapping[str, Any] | None = None,
    protected: tuple[str | os.PathLike, ...] = (),
) -> tuple[Path, Path]:
    """Write the fleet table as CSV and Parquet (replacing earlier versions of the same run).

    Parameters
    ----------
    rows : sequence of mapping
        One mapping per unit, column name -> value (``None`` for empty).
    columns : sequence of (str, str)
        Column names in order with their units of measure.
    csv_path, parquet_path : path-like
        Destinations.
    metadata : mapping, optional
        JSON-ready data stored in the Parquet schema metadata under ``rigfit``.
    protected : tuple of path-like
        Files never to be written (the logs).

    Returns
    -------
    (pathlib.Path, pathlib.Path)
        The CSV and Parquet paths.

    Raises
    ------
    ident.errors.IdentError
        pyarrow is not installed (Parquet needs it).
    """
    from ..errors import IdentError

    frame = fleet_frame(rows, columns)
    try:
        parquet = _parquet_bytes(frame, columns, metadata or {})
    except ImportError as exc:
        raise IdentError("writing the fleet table as Parquet needs the pyarrow package, which is not installed",
                         hint="install it with: pip install 'rigfit[fleet]'") from exc
    csv = write_atomic(csv_path, _csv_text(frame), force=True, protected=protected)
    pq_path = write_atomic(parquet_path, parquet, force=True, protected=protected)
    return csv, pq_path
