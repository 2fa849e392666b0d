"""Reading rig logs (CSV in the usual logger dialects, Parquet, ASAM MDF, HDF5) into a :class:`Log`.

A rig log is a table with one header line naming the columns, optionally with a
unit in brackets or parentheses (``motor_torque_cmd [N m]``, ``temp (degC)``),
preceded by any number of ``#`` comment lines. The reader

* sniffs the dialect: comma; semicolon with a decimal point or a decimal comma;
  tab (also with a decimal comma); a UTF-8 byte-order mark; CRLF line ends;
  trailing empty columns;
* matches the requested columns by their bare name, case-insensitively, and says
  which columns exist (and the nearest name) when one is missing;
* refuses non-numeric cells, NaN and inf with the file, the 1-based line number,
  the column and the offending text, or drops such rows on request;
* builds the time base from a time column (``time``/``t`` or a named one, in
  s, ms, us, min or h) or from a sample rate, estimates the sample time robustly
  (median interval) and refuses non-monotonic stamps and gaps, or splits the log
  into segments at gaps on request.

Speed and memory: with pyarrow installed, a well-formed UTF-8 CSV log is parsed
by ``pyarrow.csv`` in parallel into float64 columns of the requested columns
only, without importing pandas; a background thread hashes the file meanwhile.
Any file that is not clean (a bad or empty cell, a ragged row, a blank line
inside the data, another encoding) goes to the pandas C engine path, which gives
the same values and the precise error; object-dtype text is read only to locate
a bad cell after that parse has failed. Either way the ``u``/``y`` matrices are
the one extra copy of the parsed columns.

Measurement files: ASAM MDF 3/4 (:mod:`ident.io.mdf`, through asammdf) and
HDF5 (:mod:`ident.io.hdf5`, through h5py) hold channels in groups, each group
with its own time base. Each group becomes a :class:`Table` with its time
column, so the checks and messages above are shared (a message names the
channel and the 1-based sample instead of a column and a file line). Channels
chosen from several groups are brought to one grid by
:func:`ident.estimate.resample.resample_channels`: with ``resample_hz`` (anti-alias
decimation going down, an explicit ``upsample`` method going up), or, without
it, only when they share one rate and their samples fall on one grid; mixed
rates without ``resample_hz`` are an error listing the rates. Columns are chosen
by name, shell-style pattern or position (:mod:`ident.io.columns`).
"""

from __future__ import annotations

import csv
import difflib
import hashlib
import io
import math
import os
import re
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from .._validate import MAX_SIGNAL_MAGNITUDE, SAMPLE_TIME_RANGE_S, fraction, one_of, sample_rate_value
from ..choices import UPSAMPLE_METHODS
from ..errors import LogFormatError, OptionError, ResampleError
from .channels import FORMAT_NAMES, BlockData, Catalogue, TimeSource
from .columns import Entry, resolve, resolve_all

__all__ = [
    "TIME_UNITS",
    "TIME_COLUMN_NAMES",
    "TimingStats",
    "LogSource",
    "Column",
    "Table",
    "TimeBase",
    "Log",
    "ResampleRecord",
    "Block",
    "Recording",
    "read_log",
    "read_table",
    "read_recording",
    "log_from_recording",
    "resample_log",
    "read_column_names",
    "read_first_text",
    "time_base",
    "log_from_table",
]

#: Time units understood in a time column's header, with their factor to seconds.
TIME_UNITS: dict[str, float] = {
    "": 1.0,
    "s": 1.0,
    "ms": 1e-3,
    "us": 1e-6,
    "µs": 1e-6,
    "min": 60.0,
    "h": 3600.0,
}
#: Bare column names taken as the time column when none is named (case-insensitive).
TIME_COLUMN_NAMES: tuple[str, ...] = ("time", "t")
#: Timing bases reported in :class:`TimingStats`.
TIMING_BASES: tuple[str, ...] = ("time column", "sample rate", "common grid")

_PARQUET_MAGIC = b"PAR1"
_PREVIEW_BYTES = 1 << 16
#: Most bytes read looking for the end of the header line (comments before it included).
_MAX_HEADER_BYTES = 4 << 20
_SNIFF_ROWS = 50
_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*(?:\[(?P<u1>[^\]]*)\]|\((?P<u2>[^)]*)\))\s*$")
_DECIMAL_COMMA_RE = re.compile(r"^\s*[-+]?\d*,\d+(?:[eE][-+]?\d+)?\s*$")
_INSTALL_PARQUET = "pip install pyarrow (a dependency of rigfit: reinstalling it with pip installs it)"
#: Bytes per pyarrow parse block (the blocks are parsed in parallel threads).
_ARROW_BLOCK = 1 << 20
#: Parse clean UTF-8 CSV logs with ``pyarrow.csv`` when pyarrow is installed (no pandas
#: import); ``False`` forces the pandas path (tests run every file through both).
_FAST_CSV = True


# --------------------------------------------------------------------------- records


@dataclass(frozen=True, slots=True, eq=False)
class TimingStats:
    """Sample time and jitter of a log.

    Attributes
    ----------
    sample_time : float
        Sample time ``T`` in s: the median interval between time stamps, or
        ``1 / sample_rate``.
    jitter_std_s : float
        Standard deviation of ``dt - T`` within segments, in s (0 for a sample rate).
    jitter_max_s : float
        Largest ``|dt - T|`` within segments, in s.
    jitter_relative : float
        ``jitter_max_s / T``.
    basis : str
        ``"time column"``, ``"sample rate"``, or ``"common grid"`` for channels
        brought to one grid from several time bases (the jitter figures are then
        the largest of those time bases').
    """

    sample_time: float
    jitter_std_s: float
    jitter_max_s: float
    jitter_relative: float
    basis: str


@dataclass(frozen=True, slots=True, eq=False)
class LogSource:
    """Where a log came from.

    Attributes
    ----------
    path : str
        The file as given.
    file_name : str
        Its base name.
    sha256 : str
        Hex SHA-256 of the file bytes.
    first_row, last_row : int
        1-based file line numbers of the first and last data row used (for
        Parquet: 1-based row numbers in the table; for MDF and HDF5: 1-based
        sample numbers of the channel group, or of the common grid when the
        channels came from several groups).
    format : str
        ``"csv"``, ``"parquet"``, ``"mdf"`` or ``"hdf5"``.
    """

    path: str
    file_name: str
    sha256: str
    first_row: int
    last_row: int
    format: str = "csv"

    @property
    def format_name(self) -> str:
        """Readable format name (``"ASAM MDF"``)."""
        return FORMAT_NAMES.get(self.format, self.format)

    @property
    def has_lines(self) -> bool:
        """True for a text log, whose rows are file lines."""
        return self.format == "csv"


@dataclass(frozen=True, slots=True, eq=False)
class Column:
    """One column of a log: bare name, unit (``""`` when none) and float64 values."""

    name: str
    unit: str
    values: np.ndarray

    @property
    def label(self) -> str:
        """The name with its unit in brackets, as for a plot axis."""
        return f"{self.name} [{self.unit}]" if self.unit else self.name


@dataclass(frozen=True, slots=True, eq=False)
class Table:
    """Numeric columns of a log, as read (used by ``rigfit inspect``).

    Attributes
    ----------
    columns : tuple of Column
        In file order.
    source : LogSource
        Provenance.
    dropped_rows : int
        Rows dropped because of non-numeric, NaN or inf cells (``drop_bad_rows``).
    line_numbers : numpy.ndarray or None
        1-based file line of each kept row when rows were dropped; ``None`` when
        the rows are contiguous from ``source.first_row``.
    """

    columns: tuple[Column, ...]
    source: LogSource
    dropped_rows: int = 0
    line_numbers: np.ndarray | None = None

    @property
    def n_rows(self) -> int:
        """Number of data rows."""
        return int(self.columns[0].values.shape[0]) if self.columns else 0

    @property
    def names(self) -> tuple[str, ...]:
        """Bare column names in file order."""
        return tuple(c.name for c in self.columns)

    def line_of(self, index: int) -> int:
        """1-based file line (Parquet row, MDF/HDF5 sample) of data row ``index`` (0-based)."""
        if self.line_numbers is not None:
            return int(self.line_numbers[index])
        return self.source.first_row + int(index)

    def location(self, index: int, column: str | None = None) -> dict:
        """Where data row ``index`` is, as :class:`~ident.errors.LogFormatError` keywords.

        Row and column for CSV and Parquet; channel and sample for MDF and HDF5.
        """
        if self.source.format in ("mdf", "hdf5"):
            return {"channel": column, "sample": self.line_of(index)}
        return {"row": self.line_of(index), "column": column}

    def column(self, name: str) -> Column:
        """Return the column whose bare name matches ``name`` case-insensitively.

        Raises
        ------
        LogFormatError
            No such column; the message lists the columns and the nearest name.
        """
        idx = _match_name(name, [c.name for c in self.columns], [c.unit for c in self.columns],
                          self.source.path)
        return self.columns[idx]


@dataclass(frozen=True, slots=True, eq=False)
class TimeBase:
    """Time stamps of a log and what they say about sampling.

    Attributes
    ----------
    time : numpy.ndarray, shape (N,)
        Seconds.
    column : str or None
        Bare name of the time column; ``None`` when built from a sample rate.
    timing : TimingStats
    segments : tuple of (int, int)
        ``[start, stop)`` sample ranges between gaps; ``((0, N),)`` without gaps.
    """

    time: np.ndarray
    column: str | None
    timing: TimingStats
    segments: tuple[tuple[int, int], ...]


@dataclass(frozen=True, slots=True, eq=False)
class ResampleRecord:
    """How the chosen channels of a log were brought to its sample time.

    Attributes
    ----------
    rate_hz : float
        The log's rate after resampling.
    channels : tuple of ident.estimate.resample.ChannelPlan
        Per channel (inputs, then outputs): native rate and what was done
        (``kept``, ``decimated``, ``zoh``, ``linear``).
    edge_samples : int
        Samples dropped at each end (of each segment) after the anti-alias filter.
    requested : bool
        True when a rate was asked for (``resample_hz``); False when channels of
        several groups at one rate were only put on one grid.
    """

    rate_hz: float
    channels: tuple
    edge_samples: int
    requested: bool

    def to_dict(self) -> dict:
        """Plain data for summaries and model-file provenance."""
        return {"rate_hz": self.rate_hz, "requested": self.requested, "edge_samples": self.edge_samples,
                "channels": [p.to_dict() for p in self.channels]}

    def describe(self) -> str:
        """One line: the rate and what was done to each channel."""
        parts = [f"{p.name} {p.native_rate_hz:.6g} Hz {p.action}" for p in self.channels]
        head = (f"resampled to {self.rate_hz:g} Hz" if self.requested
                else f"channels of several groups on one {self.rate_hz:g} Hz grid")
        edge = (f"; {self.edge_samples} samples dropped at each end after the anti-alias filter"
                if self.edge_samples else "")
        return f"{head}: " + ", ".join(parts) + edge


@dataclass(frozen=True, slots=True, eq=False)
class Log:
    """A rig log ready for identification.

    Attributes
    ----------
    time : numpy.ndarray, shape (N,)
        Time stamps in s (converted from the header unit).
    u : numpy.ndarray, shape (N, m)
        Inputs, float64.
    y : numpy.ndarray, shape (N, p)
        Outputs, float64.
    input_names, output_names : tuple of str
        Bare names as written in the header.
    input_units, output_units : tuple of str
        Units from the header, ``""`` when none.
    sample_time : float
        Seconds.
    timing : TimingStats
    source : LogSource
    segments : tuple of (int, int)
        ``[start, stop)`` sample index ranges of contiguous segments; ``((0, N),)``
        unless the log was split at gaps.
    dropped_rows : int
        Rows dropped by ``drop_bad_rows`` (0 otherwise).
    input_rates_hz, output_rates_hz : tuple of float
        Native sample rate of each channel in the file, in Hz (all ``1 /
        sample_time`` unless the log was resampled).
    resampling : ResampleRecord or None
        What was done to bring the channels to ``sample_time``; ``None`` when
        they were read at their own rate from one time base.
    """

    time: np.ndarray
    u: np.ndarray
    y: np.ndarray
    input_names: tuple[str, ...]
    output_names: tuple[str, ...]
    input_units: tuple[str, ...]
    output_units: tuple[str, ...]
    sample_time: float
    timing: TimingStats
    source: LogSource
    segments: tuple[tuple[int, int], ...]
    dropped_rows: int = 0
    input_rates_hz: tuple[float, ...] = ()
    output_rates_hz: tuple[float, ...] = ()
    resampling: ResampleRecord | None = None

    @property
    def n_samples(self) -> int:
        """Number of samples ``N``."""
        return int(self.u.shape[0])

    @property
    def n_inputs(self) -> int:
        """Number of inputs ``m``."""
        return int(self.u.shape[1])

    @property
    def n_outputs(self) -> int:
        """Number of outputs ``p``."""
        return int(self.y.shape[1])

    @property
    def duration_s(self) -> float:
        """Time from the first to the last sample, in s."""
        return float(self.time[-1] - self.time[0]) if self.time.size else 0.0


# --------------------------------------------------------------------------- public API


def read_log(
    path: str | os.PathLike,
    inputs: str | Sequence[str],
    outputs: str | Sequence[str],
    *,
    time: str | None = None,
    sample_rate: float | None = None,
    drop_bad_rows: bool = False,
    split_at_gaps: bool = False,
    jitter_tolerance: float = 0.1,
    resample_hz: float | None = None,
    upsample: str | None = None,
    expand_patterns: bool = True,
) -> Log:
    """Read the chosen input and output columns (channels) of a rig log.

    Parameters
    ----------
    path : path-like
        CSV (comma, semicolon, tab; see the module notes), Parquet, ASAM MDF 3/4
        or HDF5 file (told apart by their first bytes).
    inputs, outputs : str or sequence of str
        Column selectors (:mod:`ident.io.columns`): bare names (units in the
        header are ignored; case-insensitive), ``group/name`` in MDF and HDF5
        files, shell-style patterns (``"u*"``, case-insensitive) or positions
        (``"#2"``). At least one of each; no column in both.
    time : str, optional
        Name of the time column (in HDF5: of the time dataset in each group).
        Default: a column named ``time`` or ``t`` when ``sample_rate`` is not
        given. Not for MDF, whose groups carry their master channel.
    sample_rate : float, optional
        Samples per second, for logs without a time column. Exclusive with ``time``.
    drop_bad_rows : bool, default False
        Drop rows holding a non-numeric, empty, NaN or inf cell (an invalid
        sample in MDF) in a used column (the count is in ``Log.dropped_rows``)
        instead of refusing the log.
    split_at_gaps : bool, default False
        Split the log into ``segments`` at intervals longer than
        ``(1 + jitter_tolerance) * T`` instead of refusing it.
    jitter_tolerance : float, default 0.1
        Largest accepted ``|dt - T| / T``.
    resample_hz : float, optional
        Bring every chosen channel to this rate (anti-alias decimation going
        down; ``upsample`` going up), see :mod:`ident.estimate.resample`.
        Without it, channels at different rates are an error.
    upsample : {"zoh", "linear"}, optional
        How to make up samples for channels slower than ``resample_hz`` (or off
        the common grid); without it such channels are an error.
    expand_patterns : bool, default True
        A pattern may stand for several columns; ``False`` expects one column per
        selector (each names one model signal, as in ``rigfit check``).

    Returns
    -------
    Log

    Raises
    ------
    LogFormatError
        Unreadable file, missing, ambiguous or duplicate column, bad cell, bad
        time stamps, channels at several rates without ``resample_hz``, or
        channels that cannot be resampled as asked.
    OptionError
        Invalid arguments (for example a name both input and output).

    Warns
    -----
    ResamplingWarning
        A channel was brought up to the common rate (or interpolated onto it).
    """
    in_sel = _names_arg(inputs, "inputs")
    out_sel = _names_arg(outputs, "outputs")
    if not in_sel:
        raise OptionError("inputs must name at least one column; got none")
    if not out_sel:
        raise OptionError("outputs must name at least one column; got none")
    _check_time_args(time, sample_rate, jitter_tolerance)
    _check_resample_args(resample_hz, upsample)
    path = os.fspath(path)
    options = _ReadOptions(time, sample_rate, drop_bad_rows, split_at_gaps, jitter_tolerance,
                           resample_hz, upsample, expand_patterns)
    kind = _format_of(path)
    if kind in ("mdf", "hdf5"):
        return _channel_log(path, kind, in_sel, out_sel, options)
    header = _read_header(path)
    entries = [Entry(n, u) for n, u in zip(header.names, header.units, strict=True)]
    time_index = None
    if time is not None:
        time_index = resolve(time, entries, path=path)[0]
    elif sample_rate is None:
        time_index = _auto_time_index(header.names)
    skip = () if time_index is None else (time_index,)
    single = not expand_patterns
    in_idx = resolve_all(in_sel, entries, path=path, single=single, exclude=skip)
    out_idx = resolve_all(out_sel, entries, path=path, single=single, exclude=skip)
    indices = sorted({*in_idx, *out_idx, *skip})
    table = _read_columns(path, header, indices, drop_bad_rows=drop_bad_rows)
    log = log_from_table(
        table, [header.names[k] for k in in_idx], [header.names[k] for k in out_idx],
        time=None if time is None else header.names[time_index], sample_rate=sample_rate,
        split_at_gaps=split_at_gaps, jitter_tolerance=jitter_tolerance,
    )
    if resample_hz is None:
        return log
    return _resampled_log(log, options)


def read_column_names(path: str | os.PathLike) -> tuple[str, ...]:
    """Return the bare column (channel) names of a log without parsing its data.

    MDF and HDF5 channels are named ``group/name`` where the bare name is not unique.

    Raises
    ------
    LogFormatError
        The header (channel list) cannot be read.
    """
    path = os.fspath(path)
    kind = _format_of(path)
    if kind in ("mdf", "hdf5"):
        cat = _catalogue(path, kind, None, None)
        return tuple(cat.display_name(k) for k in range(len(cat.entries)))
    return tuple(_read_header(path).names)


def read_first_text(path: str | os.PathLike, column: str) -> str | None:
    """Return the text of ``column`` in the first data row of a log, or ``None`` without that column.

    For labels logged beside the signals, such as a ``unit`` column holding the
    serial number of the unit under test. Only the header and the first data
    line are read. The column is matched by its bare name, ignoring case.

    Raises
    ------
    LogFormatError
        The header cannot be read, or the log has no data row.
    """
    path = os.fspath(path)
    header = _read_header(path)
    lower = [n.lower() for n in header.names]
    if column.lower() not in lower:
        return None
    k = lower.index(column.lower())
    if header.kind == "parquet":
        pq = _import_parquet(path)
        values = pq.read_table(path, columns=[header.raw[k]]).column(0)
        if len(values) == 0:
            raise LogFormatError("the log has no data rows", path=path)
        value = values[0].as_py()
        return "" if value is None else str(value)
    with open(path, "rb") as fh:
        fh.seek(header.data_offset)
        for number, raw_line in enumerate(fh, start=header.header_line + 1):
            line = raw_line.decode(header.encoding, errors="replace").rstrip("\r\n")
            if line.strip():
                fields = next(csv.reader([line], delimiter=header.sep, quotechar='"'))
                if k >= len(fields):
                    raise LogFormatError(f"the row has {len(fields)} fields, the header {len(header.raw)}",
                                         path=path, row=number, column=header.names[k])
                return fields[k].strip()
    raise LogFormatError("the log has no data rows", path=path)


def read_table(path: str | os.PathLike, *, drop_bad_rows: bool = False) -> Table:
    """Read every column of a rig log as float64 (for summaries such as ``rigfit inspect``).

    Parameters
    ----------
    path : path-like
        CSV or Parquet file, or an MDF or HDF5 file whose channels share one
        time base (see :func:`read_recording` for the general case).
    drop_bad_rows : bool, default False
        Drop rows with a non-numeric, empty, NaN or inf cell instead of refusing.

    Returns
    -------
    Table

    Raises
    ------
    LogFormatError
        As :func:`read_log`; an MDF or HDF5 file with several time bases.
    """
    path = os.fspath(path)
    if _format_of(path) in ("mdf", "hdf5"):
        rec = read_recording(path, drop_bad_rows=drop_bad_rows)
        if len(rec.blocks) != 1:
            raise LogFormatError(
                f"the channels come in {len(rec.blocks)} groups with their own time bases",
                path=path, hint="read it with ident.io.log.read_recording",
            )
        return rec.blocks[0].table
    header = _read_header(path)
    return _read_columns(path, header, list(range(len(header.names))), drop_bad_rows=drop_bad_rows)


def time_base(
    table: Table,
    *,
    time: str | None = None,
    sample_rate: float | None = None,
    split_at_gaps: bool = False,
    jitter_tolerance: float = 0.1,
) -> TimeBase:
    """Build and check the time base of a table.

    Parameters
    ----------
    table : Table
    time, sample_rate, split_at_gaps, jitter_tolerance
        As in :func:`read_log`.

    Returns
    -------
    TimeBase

    Raises
    ------
    LogFormatError
        No time column, an unknown time unit, non-finite, non-monotonic or
        duplicated stamps, intervals off by more than the tolerance, or gaps
        (unless ``split_at_gaps``).

    Notes
    -----
    The sample time is the median of the positive intervals, which a few
    gaps or outliers do not move. An interval ``dt`` is a gap when
    ``dt > (1 + tol) T`` and irregular when ``dt < (1 - tol) T``.
    With a sample rate, rows dropped by ``drop_bad_rows`` are gaps: the kept
    rows' file line numbers show where rows are missing, the stamps count the
    missing rows, and each break starts a segment (an error unless
    ``split_at_gaps``).
    """
    _check_time_args(time, sample_rate, jitter_tolerance)
    n = table.n_rows
    if n < 2:
        raise LogFormatError(
            f"needs at least 2 data rows to establish a sample time; got {n}",
            path=table.source.path,
        )
    if sample_rate is not None:
        rate = float(sample_rate)
        t_s = 1.0 / rate
        stats = TimingStats(t_s, 0.0, 0.0, 0.0, "sample rate")
        if table.line_numbers is None:
            stamps = np.arange(n, dtype=float) * t_s
            return TimeBase(_readonly(stamps), None, stats, ((0, n),))
        return _rate_segments(table, t_s, stats, split_at_gaps)
    if time is None:
        names = [c.name for c in table.columns]
        auto = _auto_time_index(names)
        if auto is None:
            raise LogFormatError(
                "no time column (named 'time' or 't') and no sample rate",
                path=table.source.path,
                hint="name the time column (--time NAME) or give the sample rate (--sample-rate HZ)",
            )
        col = table.columns[auto]
    else:
        col = table.column(time)
    unit_key = col.unit.strip()
    factor = TIME_UNITS.get(unit_key, TIME_UNITS.get(unit_key.lower()))
    if factor is None:
        raise LogFormatError(
            f"unknown time unit {col.unit!r}; expected one of "
            + ", ".join(repr(u) for u in TIME_UNITS if u and u != "µs"),
            path=table.source.path, column=col.name,
        )
    stamps = col.values * factor if factor != 1.0 else col.values
    return _check_stamps(stamps, col.name, table, split_at_gaps, jitter_tolerance)


def log_from_table(
    table: Table,
    inputs: str | Sequence[str],
    outputs: str | Sequence[str],
    *,
    time: str | None = None,
    sample_rate: float | None = None,
    split_at_gaps: bool = False,
    jitter_tolerance: float = 0.1,
) -> Log:
    """Assemble a :class:`Log` from an already read table.

    Parameters are as in :func:`read_log`; the input and output matrices are the
    only copy made of the data.
    """
    in_names = _names_arg(inputs, "inputs")
    out_names = _names_arg(outputs, "outputs")
    in_cols = [table.column(n) for n in in_names]
    out_cols = [table.column(n) for n in out_names]
    _check_roles(in_cols, out_cols)
    base = time_base(table, time=time, sample_rate=sample_rate,
                     split_at_gaps=split_at_gaps, jitter_tolerance=jitter_tolerance)
    if base.column is not None:
        for role, cols in (("input", in_cols), ("output", out_cols)):
            for c in cols:
                if c.name.lower() == base.column.lower():
                    raise OptionError(
                        f"column {c.name!r} is the time column and cannot also be an {role}"
                    )
    for c in (*in_cols, *out_cols):
        _check_magnitude(c, table)
    u = _stack(in_cols, table.n_rows)
    y = _stack(out_cols, table.n_rows)
    return Log(
        time=base.time,
        u=u,
        y=y,
        input_names=tuple(c.name for c in in_cols),
        output_names=tuple(c.name for c in out_cols),
        input_units=tuple(c.unit for c in in_cols),
        output_units=tuple(c.unit for c in out_cols),
        sample_time=base.timing.sample_time,
        timing=base.timing,
        source=table.source,
        segments=base.segments,
        dropped_rows=table.dropped_rows,
        input_rates_hz=(1.0 / base.timing.sample_time,) * len(in_cols),
        output_rates_hz=(1.0 / base.timing.sample_time,) * len(out_cols),
    )


# --------------------------------------------------------------------------- measurement files


@dataclass(frozen=True, slots=True, eq=False)
class Block:
    """Channels of a log that share one time base (an MDF channel group, an HDF5 group).

    Attributes
    ----------
    label : str
        The group's label (``""`` for a CSV or Parquet table).
    table : Table
        Its time column first (when it has one), then its channels.
    time : str or None
        Name of the table's time column; ``None`` for a sample rate or a CSV
        log's automatic time column.
    sample_rate : float or None
        The block's sample rate when it has no time column (HDF5 attribute,
        ``--sample-rate``).
    note : str
        Why the block has no time base, when it has none.
    """

    label: str
    table: Table
    time: str | None
    sample_rate: float | None
    note: str = ""

    @property
    def has_time_base(self) -> bool:
        """True when the block carries a time column or a sample rate."""
        return self.time is not None or self.sample_rate is not None or self.label == ""


@dataclass(frozen=True, slots=True, eq=False)
class Recording:
    """Everything numeric in a log, block by block (for ``rigfit inspect``).

    Attributes
    ----------
    source : LogSource
    blocks : tuple of Block
        One for a CSV or Parquet table; one per channel group in MDF and HDF5.
    version : str
        Format version (MDF), ``""`` otherwise.
    skipped : tuple of str
        Channels that are not numeric (text, byte arrays) and were not read.
    entries : tuple of ident.io.columns.Entry
        Every selectable column in listing order (what ``#N`` counts).
    names : tuple of str
        The name each entry has in the tables (``group/name`` where the bare
        name is not unique).
    """

    source: LogSource
    blocks: tuple[Block, ...]
    version: str = ""
    skipped: tuple[str, ...] = ()
    entries: tuple[Entry, ...] = ()
    names: tuple[str, ...] = ()

    def find(self, name: str) -> tuple[int, Column] | None:
        """Return ``(block index, column)`` of the column named ``name`` (``None`` when not read)."""
        for b, block in enumerate(self.blocks):
            for c in block.table.columns:
                if c.name == name and not (block.label and c.name == block.time):
                    return b, c
        return None


def read_recording(
    path: str | os.PathLike,
    *,
    time: str | None = None,
    sample_rate: float | None = None,
    drop_bad_rows: bool = False,
) -> Recording:
    """Read every numeric column (channel) of a log, grouped by time base.

    Parameters
    ----------
    path : path-like
        CSV, Parquet, MDF or HDF5 file.
    time, sample_rate : optional
        As in :func:`read_log` (they decide what an HDF5 file's time datasets are).
    drop_bad_rows : bool, default False
        As in :func:`read_log`.

    Returns
    -------
    Recording

    Raises
    ------
    LogFormatError
        As :func:`read_log`.
    """
    _check_time_args(time, sample_rate, 0.1)
    path = os.fspath(path)
    kind = _format_of(path)
    if kind not in ("mdf", "hdf5"):
        header = _read_header(path)
        table = _read_columns(path, header, list(range(len(header.names))), drop_bad_rows=drop_bad_rows)
        entries = tuple(Entry(n, u) for n, u in zip(header.names, header.units, strict=True))
        return Recording(table.source, (Block("", table, time, sample_rate),), entries=entries,
                         names=tuple(header.names))
    cat = _catalogue(path, kind, time, sample_rate)
    wanted = list(range(len(cat.entries)))
    names = {k: cat.display_name(k) for k in wanted}
    skipped: list[str] = []
    data = _read_blocks(path, cat, wanted, names, skipped)
    sha = _sha256(path)
    blocks = tuple(_block(path, sha, cat, d, names, drop_bad_rows) for d in data)
    records = max((b.table.n_rows for b in blocks), default=0)
    source = LogSource(path, os.path.basename(path), sha, 1, records, kind)
    return Recording(source, blocks, cat.version, tuple(skipped), cat.entries,
                     tuple(names[k] for k in wanted))


def log_from_recording(rec: Recording, inputs: str | Sequence[str], outputs: str | Sequence[str],
                       **options) -> Log:
    """Build a :class:`Log` from a recording already read, as :func:`read_log` would.

    A CSV or Parquet table is used as read; the chosen channels of an MDF or
    HDF5 file are read again (only those), so bad samples are judged on them
    alone, as :func:`read_log` does. ``options`` are :func:`read_log`'s keywords.
    """
    if rec.source.format in ("mdf", "hdf5"):
        return read_log(rec.source.path, inputs, outputs, **options)
    opt = _ReadOptions(options.get("time"), options.get("sample_rate"), options.get("drop_bad_rows", False),
                       options.get("split_at_gaps", False), options.get("jitter_tolerance", 0.1),
                       options.get("resample_hz"), options.get("upsample"),
                       options.get("expand_patterns", True))
    _check_time_args(opt.time, opt.sample_rate, opt.jitter_tolerance)
    _check_resample_args(opt.resample_hz, opt.upsample)
    path = rec.source.path
    names = [e.name for e in rec.entries]
    time_index = None
    if opt.time is not None:
        time_index = resolve(opt.time, rec.entries, path=path)[0]
    elif opt.sample_rate is None:
        time_index = _auto_time_index(names)
    skip = () if time_index is None else (time_index,)
    single = not opt.expand_patterns
    in_idx = resolve_all(_names_arg(inputs, "inputs"), rec.entries, path=path, single=single, exclude=skip)
    out_idx = resolve_all(_names_arg(outputs, "outputs"), rec.entries, path=path, single=single, exclude=skip)
    log = log_from_table(
        rec.blocks[0].table, [names[k] for k in in_idx], [names[k] for k in out_idx],
        time=None if opt.time is None else names[time_index], sample_rate=opt.sample_rate,
        split_at_gaps=opt.split_at_gaps, jitter_tolerance=opt.jitter_tolerance,
    )
    return log if opt.resample_hz is None else _resampled_log(log, opt)


@dataclass(frozen=True, slots=True, eq=False)
class _ReadOptions:
    time: str | None
    sample_rate: float | None
    drop_bad_rows: bool
    split_at_gaps: bool
    jitter_tolerance: float
    resample_hz: float | None
    upsample: str | None
    expand_patterns: bool


def _check_resample_args(resample_hz: float | None, upsample: str | None) -> None:
    if resample_hz is not None:
        sample_rate_value(resample_hz, "resample_hz")
    if upsample is not None:
        one_of(upsample, "upsample", UPSAMPLE_METHODS)


def _check_log_file(path: str) -> None:
    """Refuse standard input, pipes, devices and folders (a log is read several times)."""
    from .inputs import check_input_file

    check_input_file(path, lambda reason: LogFormatError(reason, path=path), what="log")


def _format_of(path: str) -> str:
    """``"csv"``, ``"parquet"``, ``"mdf"`` or ``"hdf5"``, from the first bytes of the file."""
    from .hdf5 import is_hdf5
    from .mdf import is_mdf

    _check_log_file(path)
    with open(path, "rb") as fh:
        head = fh.read(_PREVIEW_BYTES)
    if head.startswith(_PARQUET_MAGIC):
        return "parquet"
    if is_mdf(head):
        return "mdf"
    if is_hdf5(head):
        return "hdf5"
    return "csv"


def _catalogue(path: str, kind: str, time: str | None, sample_rate: float | None) -> Catalogue:
    if kind == "mdf":
        if time is not None or sample_rate is not None:
            raise LogFormatError(
                f"every channel group of an ASAM MDF file has its own time (its master channel); "
                f"{'a time column' if time is not None else 'a sample rate'} cannot be given",
                path=path, hint="leave out --time/--sample-rate ([log] time, sample_rate_hz)",
            )
        from .mdf import mdf_catalogue

        return mdf_catalogue(path)
    from .hdf5 import hdf5_catalogue

    return hdf5_catalogue(path, time=time, sample_rate=sample_rate)


def _read_blocks(path: str, cat: Catalogue, indices: list[int], names: dict[int, str],
                 skipped: list[str] | None = None) -> list[BlockData]:
    if cat.format == "mdf":
        from .mdf import read_mdf

        return read_mdf(path, cat, indices, [names[k] for k in indices], skipped)
    from .hdf5 import read_hdf5

    return read_hdf5(path, cat, indices, [names[k] for k in indices])


def _block(path: str, sha: str, cat: Catalogue, data: BlockData, names: dict[int, str],
           drop_bad_rows: bool) -> Block:
    """One block of channels as a :class:`Table`, with bad samples refused or dropped."""
    src: TimeSource = cat.times[data.block]
    keys = list(data.values)
    arrays = [data.values[k] for k in keys]
    labels = [names[k] for k in keys]
    masks = [data.invalid.get(k) for k in keys]
    if data.time is not None:
        arrays.insert(0, data.time)
        labels.insert(0, src.name)
        masks.insert(0, None)
    n = arrays[0].shape[0]
    bad = np.zeros(n, dtype=bool)
    for a, mask in zip(arrays, masks, strict=True):
        bad |= ~np.isfinite(a)
        if mask is not None:
            bad |= mask
    lines = None
    dropped = int(bad.sum())
    if dropped and not drop_bad_rows:
        _raise_bad_sample(path, arrays, masks, labels, int(np.argmax(bad)), is_time=data.time is not None)
    if dropped:
        keep = ~bad
        arrays = [a[keep] for a in arrays]
        lines = _readonly(np.flatnonzero(keep) + 1)
    if not arrays[0].size:
        raise LogFormatError("no valid samples", path=path, channel=labels[-1])
    first = 1 if lines is None else int(lines[0])
    last = n if lines is None else int(lines[-1])
    source = LogSource(path, os.path.basename(path), sha, first, last, cat.format)
    units = [cat.entries[k].unit for k in keys]
    if data.time is not None:
        units.insert(0, src.unit)
    columns = tuple(Column(name, unit, _readonly(a)) for name, unit, a in zip(labels, units, arrays, strict=True))
    time = src.name if data.time is not None else None
    return Block(src.label, Table(columns, source, dropped, lines), time, src.rate_hz, src.note)


def _raise_bad_sample(path, arrays, masks, labels, i: int, *, is_time: bool) -> None:
    for j, (a, mask) in enumerate(zip(arrays, masks, strict=True)):
        if mask is not None and mask[i]:
            reason = "invalid sample (the file marks it invalid: its invalidation bit is set)"
        elif not np.isfinite(a[i]):
            reason = ("time stamp is not finite" if is_time and j == 0
                      else _bad_cell_reason(repr(float(a[i])), float(a[i])))
        else:
            continue
        raise LogFormatError(
            reason, path=path, channel=labels[j], sample=i + 1,
            hint="fix the file, or drop such samples (--drop-bad-rows / drop_bad_rows=True)",
        )


def _require_time(block: Block, path: str) -> None:
    if not block.has_time_base:
        raise LogFormatError(
            f"channel group {block.label!r} has no time base: {block.note}", path=path,
            channel=block.table.columns[0].name,
            hint="give the sample rate (--sample-rate HZ / [log] sample_rate_hz)",
        )


def _channel_log(path: str, kind: str, in_sel, out_sel, opt: _ReadOptions) -> Log:
    """:func:`read_log` for MDF and HDF5 files."""
    cat = _catalogue(path, kind, opt.time, opt.sample_rate)
    single = not opt.expand_patterns
    in_idx = resolve_all(in_sel, cat.entries, path=path, single=single, word="channel")
    out_idx = resolve_all(out_sel, cat.entries, path=path, single=single, word="channel")
    names = {k: cat.display_name(k) for k in (*in_idx, *out_idx)}
    in_names = [names[k] for k in in_idx]
    out_names = [names[k] for k in out_idx]
    _check_role_names(in_names, out_names)
    wanted = sorted(names)
    sha = _sha256(path)
    blocks = [_block(path, sha, cat, d, names, opt.drop_bad_rows) for d in _read_blocks(path, cat, wanted, names)]
    if len(blocks) == 1:
        b = blocks[0]
        _require_time(b, path)
        log = log_from_table(b.table, in_names, out_names, time=b.time, sample_rate=b.sample_rate,
                             split_at_gaps=opt.split_at_gaps, jitter_tolerance=opt.jitter_tolerance)
        return log if opt.resample_hz is None else _resampled_log(log, opt)
    return _multi_block_log(path, sha, kind, blocks, in_names, out_names, opt)


def _block_bases(path: str, blocks: list[Block], opt: _ReadOptions) -> list[TimeBase]:
    bases = []
    for b in blocks:
        _require_time(b, path)
        tb = time_base(b.table, time=b.time, sample_rate=b.sample_rate,
                       split_at_gaps=opt.split_at_gaps, jitter_tolerance=opt.jitter_tolerance)
        if len(tb.segments) > 1:
            start = tb.segments[1][0]
            raise LogFormatError(
                f"a gap in channel group {b.label!r} before this sample; channels of several groups "
                "are only combined over a stretch without gaps",
                path=path, **b.table.location(start, b.table.columns[-1].name),
                hint="choose channels of one group, or cut the file at the gap",
            )
        bases.append(tb)
    return bases


def _multi_block_log(path: str, sha: str, kind: str, blocks: list[Block], in_names: list[str],
                     out_names: list[str], opt: _ReadOptions) -> Log:
    """Channels from several time bases on one grid (see :mod:`ident.estimate.resample`)."""
    from ..estimate.resample import Channel, resample_channels

    bases = _block_bases(path, blocks, opt)
    channels, units = [], []
    for name in (*in_names, *out_names):
        b, tb = next((b, tb) for b, tb in zip(blocks, bases, strict=True)
                     if any(c.name == name for c in b.table.columns))
        col = b.table.column(name)
        channels.append(Channel(name, tb.time, col.values, tb.timing.sample_time))
        units.append(col.unit)
    rates = [ch.rate_hz for ch in channels]
    rate = opt.resample_hz
    if rate is None:
        if max(rates) - min(rates) > 1e-3 * min(rates):
            listed = ", ".join(f"{ch.name} {ch.rate_hz:.6g} Hz" for ch in channels)
            raise LogFormatError(
                f"the chosen channels come at several rates ({listed}); they are never interpolated "
                "silently", path=path,
                hint="bring them to one rate with --resample HZ ([log] resample_hz); going up also "
                     "needs --upsample zoh|linear",
            )
        rate = rates[0]
    try:
        res = resample_channels(channels, rate, upsample=opt.upsample, tolerance=opt.jitter_tolerance)
    except ResampleError as exc:
        raise LogFormatError(exc.reason, path=path, channel=exc.channel, hint=exc.hint) from exc
    m = len(in_names)
    worst = max(bases, key=lambda tb: tb.timing.jitter_relative).timing
    t_s = 1.0 / rate
    timing = TimingStats(t_s, worst.jitter_std_s, worst.jitter_max_s, worst.jitter_max_s / t_s, "common grid")
    n = res.time.shape[0]
    return Log(
        time=_readonly(res.time), u=_readonly(np.ascontiguousarray(res.values[:, :m])),
        y=_readonly(np.ascontiguousarray(res.values[:, m:])),
        input_names=tuple(in_names), output_names=tuple(out_names),
        input_units=tuple(units[:m]), output_units=tuple(units[m:]), sample_time=t_s, timing=timing,
        source=LogSource(path, os.path.basename(path), sha, 1, n, kind), segments=((0, n),),
        dropped_rows=sum(b.table.dropped_rows for b in blocks),
        input_rates_hz=tuple(rates[:m]), output_rates_hz=tuple(rates[m:]),
        resampling=ResampleRecord(rate, res.channels, res.edge_samples, opt.resample_hz is not None),
    )


def resample_log(log: Log, resample_hz: float, *, upsample: str | None = None,
                 jitter_tolerance: float = 0.1) -> Log:
    """Bring a log read from one time base to ``resample_hz``, segment by segment.

    As ``read_log(..., resample_hz=..., upsample=...)``, for a log already read
    (see :mod:`ident.estimate.resample` for the methods).

    Raises
    ------
    LogFormatError
        A segment too short for the anti-alias filter, or a rate that needs an
        upsampling method that was not given.
    """
    _check_resample_args(resample_hz, upsample)
    fraction(jitter_tolerance, "jitter_tolerance")
    opt = _ReadOptions(None, None, False, False, jitter_tolerance, float(resample_hz), upsample, True)
    return _resampled_log(log, opt)


def _resampled_log(log: Log, opt: _ReadOptions) -> Log:
    """Bring a log of one time base to ``opt.resample_hz``, segment by segment."""
    from ..estimate.resample import Channel, resample_channels

    m = log.n_inputs
    names = (*log.input_names, *log.output_names)
    pieces = []
    for k, (a, b) in enumerate(log.segments):
        cols = [log.u[a:b, j] for j in range(m)] + [log.y[a:b, j] for j in range(log.n_outputs)]
        try:
            chans = [Channel(name, log.time[a:b], c, log.sample_time) for name, c in zip(names, cols, strict=True)]
            pieces.append(resample_channels(chans, opt.resample_hz, upsample=opt.upsample,
                                            tolerance=opt.jitter_tolerance))
        except (ResampleError, OptionError) as exc:
            where = f" (segment {k + 1} of {len(log.segments)})" if len(log.segments) > 1 else ""
            raise LogFormatError(getattr(exc, "reason", str(exc)) + where, path=log.source.path,
                                 channel=getattr(exc, "channel", None), hint=exc.hint) from exc
    values = np.concatenate([p.values for p in pieces]) if len(pieces) > 1 else pieces[0].values
    time = np.concatenate([p.time for p in pieces]) if len(pieces) > 1 else pieces[0].time
    stops = np.cumsum([p.time.shape[0] for p in pieces])
    segments = tuple((int(s - p.time.shape[0]), int(s)) for s, p in zip(stops, pieces, strict=True))
    t_s = 1.0 / opt.resample_hz
    timing = TimingStats(t_s, log.timing.jitter_std_s, log.timing.jitter_max_s,
                         log.timing.jitter_max_s / t_s, log.timing.basis)
    return Log(
        time=_readonly(time), u=_readonly(np.ascontiguousarray(values[:, :m])),
        y=_readonly(np.ascontiguousarray(values[:, m:])), input_names=log.input_names,
        output_names=log.output_names, input_units=log.input_units, output_units=log.output_units,
        sample_time=t_s, timing=timing, source=log.source, segments=segments,
        dropped_rows=log.dropped_rows, input_rates_hz=log.input_rates_hz,
        output_rates_hz=log.output_rates_hz,
        resampling=ResampleRecord(opt.resample_hz, pieces[0].channels, pieces[0].edge_samples, True),
    )


# --------------------------------------------------------------------------- argument checks


def _names_arg(value: str | Sequence[str] | None, name: str) -> tuple[str, ...]:
    if value is None:
        return ()
    if isinstance(value, str):
        return (value,)
    try:
        out = tuple(value)
    except TypeError as exc:
        raise OptionError(f"{name} must be a column name or a list of names; got {value!r}") from exc
    for item in out:
        if not isinstance(item, str) or not item.strip():
            raise OptionError(f"{name} must hold non-empty column names; got {item!r}")
    return out


def _check_time_args(time: str | None, sample_rate: float | None, jitter_tolerance: float) -> None:
    if time is not None and sample_rate is not None:
        raise OptionError("give either a time column or a sample rate, not both")
    if sample_rate is not None:
        sample_rate_value(sample_rate, "sample_rate")
    fraction(jitter_tolerance, "jitter_tolerance")


def _check_roles(in_cols: list[Column], out_cols: list[Column]) -> None:
    _check_role_names([c.name for c in in_cols], [c.name for c in out_cols])


def _check_role_names(in_names: Sequence[str], out_names: Sequence[str]) -> None:
    seen: dict[str, str] = {}
    for role, names in (("input", in_names), ("output", out_names)):
        for name in names:
            key = name.lower()
            if key in seen:
                other = seen[key]
                if other != role:
                    raise OptionError(
                        f"column {name!r} is named both as an input and as an output"
                    )
                raise OptionError(f"column {name!r} is named twice as an {role}")
            seen[key] = role


def _check_magnitude(col: Column, table: Table) -> None:
    """Refuse values beyond :data:`ident._validate.MAX_SIGNAL_MAGNITUDE` (named by row and column)."""
    v = col.values
    if not v.size or (v.max() <= MAX_SIGNAL_MAGNITUDE and v.min() >= -MAX_SIGNAL_MAGNITUDE):
        return
    i = int(np.argmax(np.abs(v) > MAX_SIGNAL_MAGNITUDE))
    raise LogFormatError(
        f"value {float(v[i]):.3g} is beyond +-{MAX_SIGNAL_MAGNITUDE:g}: the sums of squares and fourth "
        "powers of the signals that rigfit forms would overflow double precision",
        path=table.source.path, **table.location(i, col.name),
        hint="express the column in other units (scale it) before fitting",
    )


def _stack(cols: list[Column], n: int) -> np.ndarray:
    out = np.empty((n, len(cols)), dtype=float)
    for j, c in enumerate(cols):
        out[:, j] = c.values
    out.flags.writeable = False
    return out


def _readonly(a: np.ndarray) -> np.ndarray:
    a.flags.writeable = False
    return a


# --------------------------------------------------------------------------- header


@dataclass(frozen=True, slots=True, eq=False)
class _Header:
    kind: str  # "csv" or "parquet"
    names: list[str]
    units: list[str]
    raw: list[str]
    indices: list[int]  # field index in the file of each named column
    header_line: int  # 1-based line of the header (0 for Parquet)
    sep: str
    decimal: str
    encoding: str
    data_offset: int  # byte offset of the first line after the header


def _split_unit(raw: str) -> tuple[str, str]:
    text = raw.strip().strip('"').strip()
    m = _UNIT_RE.match(text)
    if m and m.group("name").strip():
        unit = m.group("u1") if m.group("u1") is not None else m.group("u2")
        return m.group("name").strip(), unit.strip()
    return text, ""


def _header_end(head: bytes | bytearray) -> int | None:
    """Byte offset just past the header line (the first line that is neither blank nor a comment)."""
    pos = 0
    while True:
        nl = head.find(b"\n", pos)
        if nl < 0:
            return None
        line = bytes(head[pos:nl]).lstrip(b"\xef\xbb\xbf").strip()
        if line and not line.startswith(b"#"):
            return nl + 1
        pos = nl + 1


def _read_head(path: str) -> tuple[bytes, bool]:
    """Read the file's first bytes: through the header line and at least half a preview of data lines.

    Reads at most :data:`_MAX_HEADER_BYTES` looking for the end of the header
    line, so a file without line breaks costs bounded memory.
    """
    with open(path, "rb") as fh:
        head = bytearray(fh.read(_PREVIEW_BYTES))
        complete = False
        while True:
            end = _header_end(head)
            if end is not None and len(head) - end >= _PREVIEW_BYTES // 2:
                break
            if end is None and len(head) >= _MAX_HEADER_BYTES:
                _raise_long_header(path, bytes(head))
            chunk = fh.read(_PREVIEW_BYTES)
            if not chunk:
                complete = True
                break
            head += chunk
        if not complete:
            complete = len(fh.read(1)) == 0
    return bytes(head), complete


def _raise_long_header(path: str, head: bytes) -> None:
    if b"\r" in head:
        raise LogFormatError("lines end in a bare carriage return (CR)", path=path, row=1,
                             hint="save the log with LF or CRLF line ends")
    line = head.count(b"\n") + 1
    raise LogFormatError(
        f"the header line is longer than {_MAX_HEADER_BYTES // 2**20} MiB (no line break in the first "
        f"{_MAX_HEADER_BYTES // 2**20} MiB); a rig log's header names its columns on one line",
        path=path, row=line, hint="check that this is a rig log saved as text with line breaks",
    )


def _text_encoding_error(head: bytes, path: str) -> None:
    """Refuse UTF-16/UTF-32 text and binary content, naming which."""
    boms = ((b"\xff\xfe\x00\x00", "UTF-32"), (b"\x00\x00\xfe\xff", "UTF-32"),
            (b"\xff\xfe", "UTF-16"), (b"\xfe\xff", "UTF-16"))
    name = next((enc for bom, enc in boms if head.startswith(bom)), None)
    if name is None and b"\x00" in head:
        sample = head[: 4096 - 4096 % 4]
        odd, even = sample[1::2], sample[0::2]
        if len(sample) >= 4 and (odd.count(0) >= 0.9 * len(odd) or even.count(0) >= 0.9 * len(even)):
            quad = [sample[k::4].count(0) for k in range(4)]
            name = "UTF-32" if sorted(quad)[1] >= 0.9 * len(sample) / 4 else "UTF-16"
    if name is not None:
        raise LogFormatError(f"{name} text; save the log as UTF-8", path=path,
                             hint="most editors and spreadsheet programs can save CSV as UTF-8")
    if b"\x00" in head:
        raise LogFormatError("not a text file (binary content); expected CSV, Parquet, ASAM MDF or HDF5",
                             path=path)


def _read_header(path: str) -> _Header:
    head, complete = _read_head(path)
    if head.startswith(_PARQUET_MAGIC):
        return _parquet_header(path)
    if not head.strip():
        raise LogFormatError("the file is empty", path=path)
    _text_encoding_error(head, path)
    if head.startswith(b"\xef\xbb\xbf"):
        head_body, bom = head[3:], 3
    else:
        head_body, bom = head, 0
    encoding = "utf-8"
    try:
        head_body.decode("utf-8")
    except UnicodeDecodeError as exc:
        if not (exc.start >= len(head_body) - 4 and not complete):  # not just a cut character
            encoding = "cp1252"
    raw_lines = head_body.split(b"\n")
    if not complete:
        raw_lines = raw_lines[:-1]  # possibly cut
    lines = [ln.rstrip(b"\r").decode(encoding, errors="replace") for ln in raw_lines]
    h = 0
    while h < len(lines) and (not lines[h].strip() or lines[h].lstrip().startswith("#")):
        h += 1
    if h >= len(lines):
        raise LogFormatError("no header line found (only comments or blank lines)", path=path)
    data_offset = bom + sum(len(ln) + 1 for ln in raw_lines[: h + 1])
    header_text = lines[h]
    if "\r" in header_text:
        raise LogFormatError(
            "lines end in a bare carriage return (CR)", path=path, row=h + 1,
            hint="save the log with LF or CRLF line ends",
        )
    data_lines = [ln for ln in lines[h + 1 : h + 1 + _SNIFF_ROWS] if ln.strip()]
    sep = _sniff_separator(header_text, data_lines)
    decimal = "."
    if sep != ",":
        # every complete line of the preview, so integer-only first rows do not hide it
        for ln in lines[h + 1 :]:
            if any(_DECIMAL_COMMA_RE.match(f) for f in ln.split(sep)):
                decimal = ","
                break
    try:
        raw = next(csv.reader([header_text], delimiter=sep, quotechar='"'))
    except csv.Error as exc:  # a single cell beyond the csv module's field limit (128 KiB)
        raise LogFormatError(f"the header line cannot be split into column names ({exc})", path=path, row=h + 1,
                             hint="a rig log's header names its columns; no name is that long") from None
    while raw and not raw[-1].strip():
        raw.pop()  # trailing empty columns
    if not raw:
        raise LogFormatError("the header line names no columns", path=path, row=h + 1)
    names: list[str] = []
    units: list[str] = []
    for k, field in enumerate(raw):
        if not field.strip():
            raise LogFormatError(
                f"header field {k + 1} is empty; every column needs a name",
                path=path, row=h + 1,
            )
        name, unit = _split_unit(field)
        names.append(name)
        units.append(unit)
    _check_is_log(lines[h + 1:], sep, decimal, path, h + 1, complete)
    _check_duplicates(names, raw, path, h + 1)
    return _Header("csv", names, units, raw, list(range(len(raw))), h + 1, sep, decimal, encoding,
                   data_offset)


def _is_number(text: str, decimal: str) -> bool:
    t = text.strip().strip('"').strip()
    if decimal == ",":
        t = t.replace(",", ".")
    try:
        float(t)
    except ValueError:
        return False
    return True


def _check_is_log(data: list[str], sep: str, decimal: str, path: str, header_row: int, complete: bool) -> None:
    """Refuse a text file whose lines after the header hold no numbers, without quoting it.

    A rig log's rows are numbers (a units row, a few bad rows or text columns
    beside the signals aside): one of the first lines after the header must hold
    two numbers, or be at least half numbers. Anything else is something else
    (a key, a configuration file, a list of passwords) and its content must not
    appear in a message.
    """
    rows = [ln for ln in data[:_SNIFF_ROWS] if ln.strip()]
    if not rows:
        if complete:
            raise LogFormatError("no data rows after the header", path=path, row=header_row)
        return
    for ln in rows:
        try:
            fields = [f for f in next(csv.reader([ln], delimiter=sep, quotechar='"'), []) if f.strip()]
        except csv.Error:  # a stray CR: the parse says where
            return
        numbers = sum(_is_number(f, decimal) for f in fields)
        if fields and (numbers >= 2 or 2 * numbers >= len(fields)):  # text columns beside signals are fine
            return
    raise LogFormatError(
        f"does not look like a rig log: none of the first {len(rows)} line(s) after line {header_row} "
        "holds two numbers",
        path=path, hint="give a CSV, Parquet, ASAM MDF or HDF5 log of numeric signals",
    )


def _sniff_separator(header: str, data: list[str]) -> str:
    for sep in ("\t", ";"):
        if sep in header:
            return sep
    if "," in header:
        return ","
    # a single-column header: let the data decide
    for sep in ("\t", ";"):
        if data and all(sep in ln for ln in data):
            return sep
    return ","


def _check_duplicates(names: list[str], raw: list[str], path: str, row: int | None) -> None:
    first: dict[str, int] = {}
    for k, name in enumerate(names):
        key = name.lower()
        if key in first:
            j = first[key]
            raise LogFormatError(
                f"duplicate column name {name!r}: header fields {j + 1} ({raw[j].strip()!r}) "
                f"and {k + 1} ({raw[k].strip()!r})",
                path=path, row=row, hint="rename one of the columns",
            )
        first[key] = k


def _auto_time_index(names: Sequence[str]) -> int | None:
    lower = [n.lower() for n in names]
    for candidate in TIME_COLUMN_NAMES:
        if candidate in lower:
            return lower.index(candidate)
    return None


def _match_name(name: str, names: Sequence[str], units: Sequence[str], path: str) -> int:
    bare, _ = _split_unit(name)
    key = bare.lower()
    lower = [n.lower() for n in names]
    if key in lower:
        return lower.index(key)
    near = difflib.get_close_matches(key, lower, n=1, cutoff=0.6)
    listing = ", ".join(f"{n} [{u}]" if u else n for n, u in zip(names, units, strict=True))
    nearest = f"; nearest: {names[lower.index(near[0])]!r}" if near else ""
    raise LogFormatError(
        f"no column named {bare!r}{nearest}; available: {listing}",
        path=path,
        hint=f"did you mean {names[lower.index(near[0])]!r}?" if near else None,
    )


# --------------------------------------------------------------------------- data


def _sha256(path: str) -> str:
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def _read_columns(path: str, header: _Header, indices: list[int], *, drop_bad_rows: bool) -> Table:
    sha = None
    if header.kind == "parquet":
        arrays, first_line, lines, dropped = _parquet_columns(path, header, indices, drop_bad_rows)
    else:
        # one background pass hashes the file and finds rows too long for a log, so the
        # pandas path (whose peak grows with the longest row) never parses one
        scan = _FileScan(path, row_limit=_row_limit(header))
        arrays, _ = _arrow_csv_columns(path, header, indices, scan)
        if arrays is not None:
            first_line, lines, dropped = header.header_line + 1, None, 0
            sha = scan.sha256()
        else:
            sha = scan.sha256()  # waits for the scan
            scan.raise_long_row()
            arrays, first_line, lines, dropped, _ = _csv_columns(path, header, indices, drop_bad_rows)
    n = arrays[0].shape[0] if arrays else 0
    if n == 0:
        raise LogFormatError("no data rows after the header", path=path,
                             row=header.header_line or None)
    last_line = int(lines[-1]) if lines is not None else first_line + n - 1
    if lines is not None:
        first_line = int(lines[0])
    if sha is None:
        sha = _sha256(path)
    source = LogSource(path, os.path.basename(path), sha, first_line, last_line, header.kind)
    columns = tuple(
        Column(header.names[k], header.units[k], _readonly(a))
        for k, a in zip(indices, arrays, strict=True)
    )
    return Table(columns, source, dropped, None if lines is None else _readonly(lines))


def _row_limit(header: _Header) -> int:
    """Longest accepted line of a CSV log: 1 MiB plus 256 bytes per header field."""
    return _SCAN_CHUNK + 256 * len(header.raw)


#: Bytes per read of the background scan; rows longer than this are measured exactly.
_SCAN_CHUNK = 1 << 20


class _FileScan:
    """SHA-256 of a file, and its first overlong line, computed in a background thread.

    The file is read in 1 MiB chunks; file reads and ``hashlib`` release the GIL
    on such buffers, so the hash runs beside the pyarrow parse (which releases
    it too) at almost no wall-time cost on two cores. A line longer than a chunk
    spans a chunk boundary, so finding the line breaks at the chunk ends
    (``bytes.find``/``rfind``, plus ``count`` for the line numbers) measures
    every such line exactly in bounded memory; ``row_limit`` (at least a chunk)
    is the longest accepted.
    """

    def __init__(self, path: str, row_limit: int | None = None) -> None:
        import threading

        self._path = path
        self._limit = None if row_limit is None else max(int(row_limit), _SCAN_CHUNK)
        self._sha256: str | None = None
        self.long_row: tuple[int, int] | None = None  # (1-based line, bytes) of the first overlong line
        self._thread = threading.Thread(target=self._run, name="rigfit-scan", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            self._sha256 = self._scan()
        except OSError:
            pass  # the result stays None; the caller falls back and reports the error

    def _scan(self) -> str | None:
        digest = hashlib.sha256()
        line, length, start = 1, 0, 1  # current line number, its length so far, where it began
        with open(self._path, "rb") as fh:
            for chunk in iter(lambda: fh.read(_SCAN_CHUNK), b""):
                digest.update(chunk)
                if self._limit is None:
                    continue
                first = chunk.find(b"\n")
                if first < 0:
                    length += len(chunk)
                else:
                    self._measure(start, length + first)
                    if self.long_row is not None:
                        return None
                    line += chunk.count(b"\n")
                    start, length = line, len(chunk) - chunk.rfind(b"\n") - 1
                if length > self._limit:
                    self._measure(start, length)
                    return None  # the file is refused: no need to read (or hash) the rest
            if self._limit is not None and self.long_row is None:
                self._measure(start, length)
        return digest.hexdigest()

    def _measure(self, line: int, length: int) -> None:
        if self.long_row is None and self._limit is not None and length > self._limit:
            self.long_row = (line, length)

    def sha256(self) -> str | None:
        """Wait for the hex SHA-256 of the whole file (``None`` if unreadable)."""
        self._thread.join()
        return self._sha256

    def raise_long_row(self) -> None:
        """Refuse the file when the scan found a line longer than the limit (waits for the scan)."""
        self._thread.join()
        if self.long_row is not None:
            line, _ = self.long_row
            raise LogFormatError(
                f"the line is longer than {self._limit} bytes (1 MiB plus 256 per header field); a rig log's "
                "rows hold a few numbers each",
                path=self._path, row=line, hint="check that the log has a line break after every row",
            )


def _arrow_csv_columns(path: str, header: _Header, indices: list[int], scan: _FileScan | None = None):
    """Parse the used columns with ``pyarrow.csv``; ``(None, scan)`` when not clean.

    Returns ``(arrays, scan)``: the float64 columns (``None`` when this path gives
    up) and the background :class:`_FileScan` that hashes the file: ``scan`` when
    given, else one started here (``None`` when the path gave up before starting
    it: pyarrow missing, ``_FAST_CSV`` off, not UTF-8, not a regular file, a short
    first row).

    The pandas path stays the reference: this path answers only when every used
    cell parsed to a finite number, every row has as many fields as the first
    data row (no more than the header's, apart from empty trailing fields), and
    pyarrow found exactly one row per line of the file (a blank line inside the
    data is a row of nulls to it). Anything else (empty or
    non-numeric cells, NaN, inf, blank lines inside the data, ragged rows, any
    pyarrow error) gives up, and the pandas path produces the values or the
    precise error, so messages and row numbers never depend on pyarrow. Blank
    lines at the end are skipped by both. pyarrow and the pandas C parser both
    round decimal strings correctly, so the values are bit-identical.
    """
    if not _FAST_CSV or header.encoding != "utf-8" or not os.path.isfile(path):
        return None, scan
    try:
        import pyarrow as pa
        import pyarrow.csv as pacsv
    except ImportError:
        return None, scan
    start = header.data_offset
    with open(path, "rb") as fh:
        size = os.fstat(fh.fileno()).st_size
        if size <= start:
            return None, scan  # no data lines: the pandas path says so
        fh.seek(start)
        first = fh.read(_PREVIEW_BYTES)
    line_end = first.find(b"\n")
    if line_end < 0 and size - start > len(first):
        return None, scan  # a first row longer than the preview: not the usual
    try:
        text = (first if line_end < 0 else first[:line_end]).rstrip(b"\r").decode("utf-8")
        n_fields = len(next(csv.reader([text], delimiter=header.sep, quotechar='"'), []))
    except (UnicodeDecodeError, csv.Error):  # a stray CR, a bad byte: the pandas path decides
        return None, scan
    if n_fields < len(header.raw):
        return None, scan
    if scan is None:
        scan = _FileScan(path)
    lines = first.count(b"\n")
    rows_hint = int((size - start) / (len(first) / lines)) + 1 if lines else 1
    try:
        arrays = _arrow_table(pa, pacsv, path, header, indices, n_fields, rows_hint)
    except (pa.ArrowException, OSError, ValueError):
        arrays = None
    if arrays is None or scan.sha256() is None:
        return None, scan
    return arrays, scan


def _arrow_table(pa, pacsv, path, header: _Header, indices, n_fields, rows_hint: int = 1):
    """Parse the data lines batch by batch into float64 columns (``None``: give up).

    ``pyarrow.csv.open_csv`` (pyarrow's streaming reader, which parses on one
    thread whatever ``use_threads`` says) hands over one 1 MiB batch at a time;
    each batch is copied into preallocated numpy
    columns and released, so the peak is the columns plus a few blocks (reading a
    1e7-row log peaks at 2.1x the numeric data with the stacked signals and the
    interpreter, against 3.7x with a whole Arrow table beside the columns, whose
    allocator keeps the freed pages). The
    columns are sized from ``rows_hint`` (the file size over the first lines'
    bytes per row: rows growing longer later only leave pages untouched) and
    grown by a quarter when the rows turn out shorter. Rows at the end whose used cells are all empty (blank
    lines) are dropped, as the pandas path does; an empty cell anywhere else,
    a field beyond the header's, or a value that is not finite gives up.
    """
    width = len(header.raw)
    names = [f"f{k}" for k in range(n_fields)]
    used = [names[k] for k in indices]
    extra = names[width:]  # must be empty on every row, as the pandas path's sentinel
    read_options = pacsv.ReadOptions(column_names=names, use_threads=True, block_size=_ARROW_BLOCK)
    parse_options = pacsv.ParseOptions(
        delimiter=header.sep, quote_char='"', double_quote=True, escape_char=False,
        newlines_in_values=False, ignore_empty_lines=False,  # a blank line is a row of nulls
    )
    convert_options = pacsv.ConvertOptions(
        include_columns=[*used, *extra],
        column_types={name: pa.float64() for name in (*used, *extra)},
        decimal_point=header.decimal,
    )
    pool = _arrow_memory_pool(pa)
    sink = _ColumnSink(len(used), rows_hint)
    with pa.OSFile(path, "r", memory_pool=pool) as fh:
        fh.seek(header.data_offset)
        with pacsv.open_csv(fh, read_options=read_options, parse_options=parse_options,
                            convert_options=convert_options, memory_pool=pool) as reader:
            for batch in reader:
                if not sink.add([batch.column(name) for name in used],
                                [batch.column(name) for name in extra]):
                    return None
                del batch
    pool.release_unused()  # the allocator keeps freed pages until asked; hand them back
    return sink.columns()


class _ColumnSink:
    """Float64 columns filled batch by batch from Arrow arrays (see :func:`_arrow_table`)."""

    def __init__(self, n_columns: int, rows_hint: int) -> None:
        self.n = 0
        self.blank_from: int | None = None  # first row of a run of blank lines (must reach the end)
        self._hint = int(max(rows_hint, 1) * 1.02) + 1024
        self._cols = [np.empty(0) for _ in range(n_columns)]

    def _reserve(self, rows: int) -> None:
        have = self._cols[0].shape[0] if self._cols else rows
        if rows <= have:
            return
        cap = max(rows, self._hint if have == 0 else int(have * 1.25))
        for j, old in enumerate(self._cols):
            new = np.empty(cap)
            new[:self.n] = old[:self.n]
            self._cols[j] = new

    def add(self, cols, extras) -> bool:
        """Append one batch; False when the file is not clean (the pandas path decides)."""
        k = len(cols[0]) if cols else 0
        if any(c.null_count != k for c in extras):
            return False
        nulls = [c.null_count for c in cols]
        if any(nulls):
            if not self._blank_rows(cols, k):
                return False
        elif self.blank_from is not None:
            return False  # a data row after a blank line
        self._reserve(self.n + k)
        for col, out in zip(cols, self._cols, strict=True):
            # the Arrow values buffer, read in place (no to_numpy: it imports pandas)
            part = np.frombuffer(col.buffers()[1], dtype=np.float64, count=k, offset=col.offset * 8)
            if not np.isfinite(part).all() and not self._finite_in_data(part, col):
                return False
            out[self.n:self.n + k] = part
        self.n += k
        return True

    def _blank_rows(self, cols, k: int) -> bool:
        """Accept nulls only as whole blank rows that run to the end of the batch."""
        valid = np.zeros(k, dtype=bool)
        for c in cols:
            valid |= _valid_mask(c, k)
        rows = np.flatnonzero(~valid)
        if rows.size == 0:
            return False  # some but not all used cells of a row empty
        first = int(rows[0])
        if rows.size != k - first or any(c.null_count != k - first for c in cols):
            return False  # a blank line inside the data, or a row partly empty
        if self.blank_from is None:
            self.blank_from = self.n + first
        elif first:
            return False
        return True

    def _finite_in_data(self, part: np.ndarray, col) -> bool:
        # null slots hold arbitrary values: only the rows before a blank run count
        if self.blank_from is None:
            return False
        upto = max(0, self.blank_from - self.n)
        return bool(np.isfinite(part[:upto]).all())

    def columns(self) -> list[np.ndarray]:
        n = self.n if self.blank_from is None else self.blank_from
        return [c[:n] for c in self._cols]


def _valid_mask(col, n: int) -> np.ndarray:
    """Boolean ``not null`` per row of an Arrow array (chunked or not) of length ``n``."""
    out = np.ones(n, dtype=bool)
    pos = 0
    for chunk in getattr(col, "chunks", (col,)):
        k = len(chunk)
        bitmap = chunk.buffers()[0]
        if bitmap is not None:
            bits = np.unpackbits(np.frombuffer(bitmap, dtype=np.uint8), bitorder="little")
            out[pos:pos + k] = bits[chunk.offset:chunk.offset + k].astype(bool)
        pos += k
    return out


def _arrow_memory_pool(pa):
    """Memory pool for the pyarrow parse (tests swap in a proxy pool to measure its peak)."""
    return pa.default_memory_pool()


def _csv_columns(path, header: _Header, indices, drop_bad_rows, digest=None):
    """Parse the used columns; the last item returned says whether ``digest`` saw every byte.

    The fast parse streams the file through ``digest`` (see :func:`_data_stream`),
    so the checksum costs no second pass over the file when that parse succeeds.
    """
    import pandas as pd

    first_line = header.header_line + 1
    width = len(header.raw)
    # One column past the header is read as a sentinel: it is empty on well-formed rows,
    # so a row with more fields than the header (a decimal comma in a comma-separated
    # file, a shifted row) is caught although usecols makes pandas tolerate it.
    # pandas validates usecols against the widest row it has seen, so a synthetic first
    # row of width + 1 zeros is put in front of the data (and dropped after parsing).
    common = dict(
        sep=header.sep, decimal=header.decimal, header=None,
        names=list(range(width + 1)), usecols=[*indices, width], engine="c",
        encoding=header.encoding, index_col=False, skip_blank_lines=False, quotechar='"',
    )
    arrays = None
    hashed = False
    try:
        with _data_stream(path, header, digest) as stream:
            frame = pd.read_csv(stream, dtype=np.float64, **common)
            hashed = digest is not None and stream.raw.at_end
        arrays = [frame[k].to_numpy(dtype=np.float64, copy=False)[1:] for k in indices]
        extra = frame[width].to_numpy(dtype=np.float64, copy=False)[1:]
        del frame
    except (ValueError, pd.errors.ParserError, UnicodeDecodeError):
        arrays = None
    if arrays is not None:
        over = np.flatnonzero(~np.isnan(extra))
        if over.size:
            _raise_structure_error(path, header, first_line + int(over[0]))
        del extra
        n = arrays[0].shape[0]
        end = _trailing_blank_start(arrays, n)
        if end < n:
            arrays = [a[:end] for a in arrays]
        if all(np.isfinite(a).all() for a in arrays):
            return arrays, first_line, None, 0, hashed
    # slow path: read the text of the used columns to find (or drop) the bad cells
    try:
        with _data_stream(path, header) as stream:
            frame = pd.read_csv(stream, dtype=str, na_filter=False, keep_default_na=False,
                                **common)
    except pd.errors.ParserError as exc:
        raise LogFormatError(f"malformed CSV ({str(exc).strip()})", path=path) from exc
    except UnicodeDecodeError as exc:
        raise LogFormatError(f"cannot decode the file as {header.encoding}: {exc.reason}",
                             path=path) from exc
    texts = [frame[k].to_numpy(dtype=object)[1:] for k in indices]
    extra = frame[width].to_numpy(dtype=object)[1:]
    del frame
    over = np.flatnonzero(np.char.strip(extra.astype(str)) != "")
    if over.size:
        _raise_structure_error(path, header, first_line + int(over[0]))
    del extra
    n = texts[0].shape[0]
    blank = np.ones(n, dtype=bool)
    for t in texts:
        blank &= np.char.strip(t.astype(str)) == ""
    end = n
    while end > 0 and blank[end - 1]:
        end -= 1
    texts = [t[:end] for t in texts]
    values = [_to_float(t, header.decimal) for t in texts]
    bad = np.zeros(end, dtype=bool)
    for v in values:
        bad |= ~np.isfinite(v)
    if not bad.any():
        return values, first_line, None, 0, hashed
    if not drop_bad_rows:
        i = int(np.argmax(bad))
        for k, v, t in zip(indices, values, texts, strict=True):
            if not np.isfinite(v[i]):
                raise LogFormatError(
                    _bad_cell_reason(t[i], v[i]), path=path, row=first_line + i,
                    column=header.names[k],
                    hint="fix the cell, or drop such rows (--drop-bad-rows / drop_bad_rows=True)",
                )
    keep = ~bad
    lines = np.flatnonzero(keep) + first_line
    return [v[keep] for v in values], first_line, lines, int(bad.sum()), hashed


class _PrefixedStream(io.RawIOBase):
    """Bytes of ``prefix`` followed by the rest of an open binary file.

    With a ``digest``, every byte read from the file goes through
    ``digest.update`` too; ``at_end`` turns true once the file is exhausted.
    """

    def __init__(self, prefix: bytes, fh, digest=None) -> None:
        super().__init__()
        self._prefix = prefix
        self._fh = fh
        self._digest = digest
        self.at_end = False

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        if self._prefix:
            n = min(len(buffer), len(self._prefix))
            buffer[:n] = self._prefix[:n]
            self._prefix = self._prefix[n:]
            return n
        n = self._fh.readinto(buffer)
        if self._digest is not None:
            if n:
                self._digest.update(memoryview(buffer)[:n])
            else:
                self.at_end = True
        return n

    def close(self) -> None:
        self._fh.close()
        super().close()


def _data_stream(path: str, header: _Header, digest=None) -> io.BufferedReader:
    """Open the data lines of a CSV log behind a synthetic first row (see :func:`_csv_columns`).

    With a ``digest``, the bytes before the data (comments, header) are hashed
    here and the data bytes as they are read, so the digest covers the whole file.
    """
    fh = open(path, "rb")  # closed by the stream
    if digest is None:
        fh.seek(header.data_offset)
    else:
        head = fh.read(header.data_offset)
        digest.update(head)
    prefix = (header.sep.join(["0"] * (len(header.raw) + 1)) + "\n").encode("ascii")
    return io.BufferedReader(_PrefixedStream(prefix, fh, digest), buffer_size=1 << 20)


def _trailing_blank_start(arrays, n: int) -> int:
    end = n
    while end > 0 and all(np.isnan(a[end - 1]) for a in arrays):
        end -= 1
    return end


def _to_float(text: np.ndarray, decimal: str) -> np.ndarray:
    import pandas as pd

    s = pd.Series(text, dtype=object).astype(str).str.strip()
    if decimal == ",":
        # a cell already holding a '.' is not a decimal-comma number: keep it unparseable
        s = s.where(~s.str.contains(".", regex=False), "\x00").str.replace(",", ".", regex=False)
    return pd.to_numeric(s, errors="coerce").to_numpy(dtype=np.float64)


def _bad_cell_reason(text, value: float) -> str:
    raw = str(text)
    stripped = raw.strip()
    if not stripped:
        return "empty cell"
    shown = repr(raw) if len(raw) <= 40 else repr(raw[:37]) + f"... ({len(raw)} characters)"
    if math.isnan(value) and stripped.lower() in {"nan", "-nan", "+nan"}:
        return f"NaN is not allowed ({shown})"
    if math.isinf(value):
        return f"infinite value is not allowed ({shown})"
    return f"not a number ({shown})"


def _raise_structure_error(path: str, header: _Header, line: int) -> None:
    width = len(header.raw)
    fields: list[str] = []
    with open(path, encoding=header.encoding, newline="") as fh:
        for k, text in enumerate(fh, start=1):
            if k == line:
                fields = next(csv.reader([text], delimiter=header.sep, quotechar='"'), [])
                break
    while len(fields) > width and not fields[-1].strip():
        fields.pop()
    hint = f"check the delimiter ({_SEP_NAMES.get(header.sep, header.sep)} was detected)"
    if header.sep == ",":
        hint += "; a decimal comma needs ';' or tab as the delimiter"
    raise LogFormatError(
        f"{len(fields)} fields but the header has {width}", path=path, row=line, hint=hint
    )


_SEP_NAMES = {",": "comma", ";": "semicolon", "\t": "tab"}


# --------------------------------------------------------------------------- Parquet


def _import_parquet(path: str):
    try:
        import pyarrow.parquet as pq
    except ImportError as exc:
        raise LogFormatError(
            "reading Parquet needs the pyarrow package, which is not installed",
            path=path, hint=f"install it with: {_INSTALL_PARQUET}",
        ) from exc
    return pq


def _parquet_header(path: str) -> _Header:
    pq = _import_parquet(path)
    try:
        schema = pq.read_schema(path)
    except Exception as exc:  # pyarrow raises several types for corrupt files
        raise LogFormatError(f"cannot read Parquet file: {exc}", path=path) from exc
    raw = [str(n) for n in schema.names if not str(n).startswith("__index_level_")]
    names, units = zip(*(_split_unit(r) for r in raw), strict=True) if raw else ((), ())
    units = list(units)
    for k, r in enumerate(raw):
        if _temporal_factor(schema.field(r).type) is not None:
            units[k] = "s"  # timestamp, duration, date and time columns are read as seconds
    _check_duplicates(list(names), raw, path, None)
    return _Header("parquet", list(names), units, raw, list(range(len(raw))), 0, "", ".", "",
                   0)


def _temporal_factor(arrow_type) -> tuple[float, bool] | None:
    """Seconds per stored integer and whether values are instants, for Arrow's time types (else None)."""
    import pyarrow.types as pat

    per_unit = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
    if pat.is_timestamp(arrow_type):
        return per_unit[arrow_type.unit], True
    if pat.is_duration(arrow_type) or pat.is_time(arrow_type):
        return per_unit[arrow_type.unit], False
    if pat.is_date32(arrow_type):
        return 86400.0, True
    if pat.is_date64(arrow_type):
        return 1e-3, True
    return None


def _temporal_seconds(col, factor: float, instant: bool) -> np.ndarray:
    """Return a timestamp/duration/date/time column as float seconds (nulls as NaN).

    Instants (timestamps, dates) count from the column's first valid value: the
    difference is taken on the stored integers, exactly, before the conversion to
    float, so nanosecond stamps of today (about 1.7e18) keep their resolution.
    """
    import pyarrow as pa

    ints = col.cast(pa.int64())
    valid = ~col.is_null().to_numpy(zero_copy_only=False)
    values = ints.fill_null(0).to_numpy(zero_copy_only=False).astype(np.int64, copy=False)
    if instant and valid.any():
        values = values - values[np.argmax(valid)]
    out = values.astype(np.float64) * factor
    out[~valid] = np.nan
    return out


def _parquet_columns(path, header: _Header, indices, drop_bad_rows):
    pq = _import_parquet(path)
    wanted = [header.raw[k] for k in indices]
    table = pq.read_table(path, columns=wanted)
    arrays = []
    for k, raw in zip(indices, wanted, strict=True):
        col = table.column(raw)
        temporal = _temporal_factor(col.type)
        try:
            if temporal is not None:
                values = _temporal_seconds(col, *temporal)
            else:
                values = col.to_numpy().astype(np.float64, copy=False)
        except (TypeError, ValueError) as exc:
            raise LogFormatError(
                f"not a numeric column (type {col.type})", path=path, column=header.names[k]
            ) from exc
        arrays.append(values)
    del table
    bad = np.zeros(arrays[0].shape[0] if arrays else 0, dtype=bool)
    for a in arrays:
        bad |= ~np.isfinite(a)
    if not bad.any():
        return arrays, 1, None, 0
    if not drop_bad_rows:
        i = int(np.argmax(bad))
        for k, a in zip(indices, arrays, strict=True):
            if not np.isfinite(a[i]):
                raise LogFormatError(
                    _bad_cell_reason(repr(float(a[i])), float(a[i])), path=path, row=i + 1,
                    column=header.names[k],
                    hint="fix the value, or drop such rows (--drop-bad-rows / drop_bad_rows=True)",
                )
    keep = ~bad
    return [a[keep] for a in arrays], 1, np.flatnonzero(keep) + 1, int(bad.sum())


# --------------------------------------------------------------------------- timing


def _rate_segments(table: Table, t_s: float, stats: TimingStats, split: bool) -> TimeBase:
    """Time base from a sample rate when rows were dropped: a dropped row is a gap.

    The kept rows' file lines say where rows are missing; the stamps count the
    missing rows too, and every break in the line numbers starts a segment
    (or is an error naming the row, without ``split``), as a gap in a time
    column would.
    """
    lines = np.asarray(table.line_numbers, dtype=np.int64)
    steps = np.diff(lines)
    breaks = np.flatnonzero(steps > 1)
    if breaks.size and not split:
        i = int(breaks[0]) + 1
        missing = int(steps[i - 1]) - 1
        raise LogFormatError(
            f"{missing} dropped {_row_word(table)}(s) just before this {_row_word(table)} break the "
            "sample sequence "
            f"(sample rate {_fmt(1.0 / t_s)} Hz)",
            path=table.source.path, **table.location(i),
            hint="split the log at gaps (--split-at-gaps / split_at_gaps=True)",
        )
    stamps = (lines - lines[0]).astype(float) * t_s
    starts = [0, *(int(g) + 1 for g in breaks)]
    stops = [*(int(g) + 1 for g in breaks), lines.shape[0]]
    return TimeBase(_readonly(stamps), None, stats, tuple(zip(starts, stops, strict=True)))


#: Intervals per block in the passes over a time column after its median is known.
_STAMP_BLOCK = 1 << 20


def _check_stamps(stamps: np.ndarray, name: str, table: Table, split: bool, tol: float) -> TimeBase:
    """Check a time column and build its time base.

    The intervals are formed once to find the first that is not positive and,
    partitioned in place, their median (the sample time); the later checks and
    the jitter statistics run block by block, so the temporary memory is one
    column of intervals whatever the log's length.
    """
    path = table.source.path
    dt = np.diff(stamps)
    bad = np.flatnonzero(dt <= 0)
    if bad.size:
        i = int(bad[0]) + 1
        what = "duplicated time stamp" if dt[i - 1] == 0 else "time goes backwards"
        raise LogFormatError(
            f"{what} ({_fmt(stamps[i])} s after {_fmt(stamps[i - 1])} s on the "
            f"{_row_word(table)} before)",
            path=path, **table.location(i, name),
        )
    t_s = _median(dt, overwrite=True)
    del dt
    low, high = SAMPLE_TIME_RANGE_S
    if not low <= t_s <= high:
        raise LogFormatError(
            f"the time stamps give a sample time of {t_s:g} s; rigfit reads logs sampled every {low:g} s "
            f"to {high:g} s (check the time unit in the header)",
            path=path, column=name,
        )
    gaps, (std, mx) = _interval_pass(stamps, name, table, split, tol, t_s)
    starts = [0, *(int(g) + 1 for g in gaps)]
    stops = [*(int(g) + 1 for g in gaps), stamps.shape[0]]
    segments = tuple(zip(starts, stops, strict=True))
    stats = TimingStats(t_s, std, mx, mx / t_s, "time column")
    if not stamps.flags.writeable:
        out = stamps
    else:
        out = _readonly(stamps)
    return TimeBase(out, name, stats, segments)


def _interval_pass(stamps: np.ndarray, name: str, table: Table, split: bool, tol: float,
                   t_s: float) -> tuple[np.ndarray, tuple[float, float]]:
    """Refuse short intervals (and gaps unless ``split``); return the gaps and the jitter (std, max).

    The standard deviation of ``dt - T`` over the intervals that are not gaps
    combines the blocks' means and sums of squared deviations (Chan, Golub and
    LeVeque's pairwise update), so it equals a one-pass ``numpy.std``.
    """
    path = table.source.path
    gaps: list[np.ndarray] = []
    count, mean, m2, mx = 0, 0.0, 0.0, 0.0
    for a in range(0, stamps.shape[0] - 1, _STAMP_BLOCK):
        dt = np.diff(stamps[a:a + _STAMP_BLOCK + 1])
        short = np.flatnonzero(dt < (1.0 - tol) * t_s)
        if short.size:
            i = a + int(short[0]) + 1
            raise LogFormatError(
                f"irregular sampling: interval {_fmt(dt[i - a - 1])} s is more than {tol:.0%} shorter "
                f"than the sample time {_fmt(t_s)} s",
                path=path, **table.location(i, name),
            )
        wide = dt > (1.0 + tol) * t_s
        if wide.any():
            g = np.flatnonzero(wide)
            gaps.append(g + a)
            if not split:
                continue  # refused after the pass: a short interval anywhere is reported first
            dev = dt[~wide] - t_s
        else:
            dev = dt - t_s
        if dev.size:
            k = dev.size
            block_mean = float(dev.mean())
            block_m2 = float(np.dot(dev - block_mean, dev - block_mean))
            delta = block_mean - mean
            total = count + k
            m2 += block_m2 + delta * delta * count * k / total
            mean += delta * k / total
            count = total
            mx = max(mx, float(np.max(np.abs(dev))))
    if gaps and not split:
        i = int(gaps[0][0]) + 1
        step = float(stamps[i] - stamps[i - 1])
        raise LogFormatError(
            f"gap of {_fmt(step)} s ({step / t_s:.3g} sample times) before this "
            f"{_row_word(table)}; "
            f"sample time {_fmt(t_s)} s, tolerance {tol:.0%}",
            path=path, **table.location(i, name),
            hint="split the log at gaps (--split-at-gaps / split_at_gaps=True)"
            + (" or raise the jitter tolerance" if step < 2 * t_s else ""),
        )
    std = math.sqrt(m2 / count) if count else 0.0
    return (np.concatenate(gaps) if gaps else np.zeros(0, dtype=np.int64)), (std, mx)


def _row_word(table: Table) -> str:
    return "sample" if table.source.format in ("mdf", "hdf5") else "row"


def _fmt(x: float) -> str:
    return f"{float(x):.6g}"


def _median(x: np.ndarray, *, overwrite: bool = False) -> float:
    """``numpy.median`` of a non-empty 1-D array (without the masked-array import it triggers).

    Partitions at the two middle positions, as numpy does: with a single position
    the selection is about 30 times slower on time steps taking few distinct values.
    With ``overwrite`` the array itself is partitioned (no copy; its order is lost).
    """
    k = x.size // 2
    kth = (max(k - 1, 0), k)
    if overwrite:
        x.partition(kth)
        part = x
    else:
        part = np.partition(x, kth)
    return float(part[k]) if x.size % 2 else float(0.5 * (part[k - 1] + part[k]))
