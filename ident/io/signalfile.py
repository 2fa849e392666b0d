"""Files of a designed test signal: the CSV a rig controller replays and its JSON description.

The CSV has a ``time [s]`` column (``k / sample_rate``) and one column per
input, ``name [unit]``, comma separated, newline (LF) line ends. Values are written
with the shortest text that reads back as the same float (Python ``repr``), so
the samples read from the file are bit for bit the designed ones and never
leave the amplitude range or exceed the rate limit.

The description (the "sidecar", schema version 1) lets later commands
recognise the signal in a log::

    {
      "format": "rigfit-excitation",
      "schema_version": 1,
      "kind": "multisine",
      "sample_rate_hz": 1000.0,
      "band_hz": [0.5, 50.0],
      "amplitude_range": [0.0, 10.0],
      "rate_limit": null,                       # units per second
      "seed": 0,
      "period_samples": 2000,
      "periods": 5,                              # per block, transient included
      "transient_periods": 1,
      "blocks": 1,
      "block_signs": [[1.0]],                    # inputs x blocks
      "arrangement": "orthogonal",
      "grid": {"spacing": "linear", "harmonics": "all", "phases": "low-crest"},   # multisine; else null fields
      "prbs": {"bits": 8, "clock_divider": 8} or null,
      "sweep_hz": [0.5, 49.5] or null,
      "n_samples": 10000, "duration_s": 10.0, "resolution_hz": 0.5,
      "inputs": [{"name": "u1", "unit": "V", "lines": [1, 2, ...],
                  "crest_factor": 1.39, "rms": 3.6, "mean": 5.0}],
      "csv": {"file": "test.csv", "sha256": "..."},
      "provenance": {"tool": "rigfit", "tool_version": "...", "created_utc": "..."}
    }

``lines`` are the harmonics ``k`` of ``1 / period`` (frequency ``k *
resolution_hz``) the design puts power on within the band;
:meth:`SignalDescription.periodic_arguments` turns the description into the
arguments of :func:`ident.estimate.periodic.analyse_periodic`.
"""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from .._json import json_ready
from ..errors import OptionError, SignalFileError

__all__ = [
    "FORMAT_NAME",
    "SCHEMA_VERSION",
    "TIME_HEADER",
    "SignalDescription",
    "check_signal_names",
    "signal_csv_text",
    "describe_signal",
    "dumps_description",
    "read_signal_description",
]

FORMAT_NAME = "rigfit-excitation"
SCHEMA_VERSION = 1
#: Header of the time column of a written signal.
TIME_HEADER = "time [s]"
_FORBIDDEN = set(',;"\t\r\n[]()#')


def check_signal_names(names: Any, units: Any, count: int) -> tuple[tuple[str, ...], tuple[str, ...]]:
    """Validate the column names and units of a written signal.

    Parameters
    ----------
    names : sequence of str or None
        One name per input; ``None`` gives ``u1, u2, ...``.
    units : sequence of str or None
        One unit for all inputs, or one per input; ``None`` gives ``-``.
    count : int
        Number of inputs.

    Returns
    -------
    (tuple of str, tuple of str)
        Names and units, one per input.

    Raises
    ------
    OptionError
        Wrong counts, empty or duplicate names, a name ``time``, or characters
        that would break the CSV header (comma, semicolon, quotes, tab,
        brackets, parentheses, ``#``).
    """
    out_names = tuple(f"u{j + 1}" for j in range(count)) if not names else tuple(str(n) for n in names)
    out_units = ("-",) * count if not units else tuple(str(u) for u in units)
    if len(out_units) == 1 and count > 1:
        out_units = out_units * count
    if len(out_names) != count:
        raise OptionError(f"give one name per input: {count} input(s), {len(out_names)} name(s)")
    if len(out_units) != count:
        raise OptionError(f"give one unit for all inputs or one per input: {count} input(s), {len(out_units)} unit(s)")
    for kind, values in (("name", out_names), ("unit", out_units)):
        for value in values:
            if not value.strip() or value != value.strip() or set(value) & _FORBIDDEN:
                raise OptionError(
                    f"{kind} {value!r} cannot be written in a CSV header: it must be non-empty, without "
                    "surrounding spaces and without , ; \" tab [ ] ( ) #"
                )
    lowered = [n.lower() for n in out_names]
    for n in out_names:
        if lowered.count(n.lower()) > 1:
            raise OptionError(f"input name {n!r} is given twice")
        if n.lower() in ("time", "t"):
            raise OptionError(f"input name {n!r} is reserved for the time column")
    return out_names, out_units


def signal_csv_text(signal: Any, names: Any = None, units: Any = None) -> str:
    """Return the CSV text of a designed signal.

    Parameters
    ----------
    signal : ident.estimate.signal_design.DesignedSignal
    names, units : sequence of str, optional
        See :func:`check_signal_names`.

    Returns
    -------
    str
        Header ``time [s],name [unit],...`` then one line per sample.
    """
    names, units = check_signal_names(names, units, signal.n_inputs)
    header = ",".join([TIME_HEADER] + [f"{n} [{u}]" for n, u in zip(names, units, strict=True)])
    fs = signal.sample_rate_hz
    times = (np.arange(signal.n_samples) / fs).tolist()
    columns = [signal.values[:, j].tolist() for j in range(signal.n_inputs)]
    rows = zip(times, *columns, strict=True)
    body = "\n".join(",".join(map(repr, row)) for row in rows)
    return header + "\n" + body + "\n"


def describe_signal(signal: Any, names: Any = None, units: Any = None, *, csv_name: str | None = None,
                    csv_text: str | None = None) -> dict[str, Any]:
    """Return the JSON-ready description of a designed signal (the sidecar content).

    Parameters
    ----------
    signal : ident.estimate.signal_design.DesignedSignal
    names, units : sequence of str, optional
        Column names and units as written in the CSV.
    csv_name : str, optional
        File name of the CSV (no folder).
    csv_text : str, optional
        The CSV text, for its SHA-256.
    """
    from .modelfile import default_provenance

    names, units = check_signal_names(names, units, signal.n_inputs)
    opts = signal.options
    inputs = [
        {"name": n, "unit": u, "lines": [int(k) for k in signal.lines[j]],
         "crest_factor": float(signal.crest_factor[j]), "rms": float(signal.rms[j]),
         "mean": float(signal.mean[j])}
        for j, (n, u) in enumerate(zip(names, units, strict=True))
    ]
    return json_ready({
        "format": FORMAT_NAME, "schema_version": SCHEMA_VERSION, "kind": opts.kind,
        "sample_rate_hz": opts.sample_rate_hz, "band_hz": list(opts.band_hz),
        "amplitude_range": list(opts.amplitude_range), "rate_limit": opts.rate_limit, "seed": opts.seed,
        "period_samples": signal.period_samples, "periods": signal.periods,
        "transient_periods": signal.transient_periods, "blocks": signal.blocks,
        "block_signs": signal.block_signs.tolist(), "arrangement": signal.arrangement,
        "grid": {"spacing": signal.spacing, "harmonics": signal.harmonics, "phases": signal.phases,
                 "lines_per_decade": opts.lines_per_decade},
        "prbs": None if signal.prbs_bits is None
        else {"bits": signal.prbs_bits, "clock_divider": signal.clock_divider},
        "sweep_hz": None if signal.sweep_hz is None else list(signal.sweep_hz),
        "n_samples": signal.n_samples, "duration_s": signal.duration_s, "resolution_hz": signal.resolution_hz,
        "inputs": inputs,
        "csv": None if csv_name is None else {
            "file": csv_name,
            "sha256": None if csv_text is None else hashlib.sha256(csv_text.encode("utf-8")).hexdigest(),
        },
        "provenance": default_provenance(),
    })


def dumps_description(description: dict[str, Any]) -> str:
    """Serialise a description to JSON text."""
    return json.dumps(description, indent=2, allow_nan=False) + "\n"


@dataclass(frozen=True, slots=True, eq=False)
class SignalDescription:
    """A test signal's description read back from its JSON file.

    Attributes
    ----------
    path : str or None
        The file read.
    kind : str
        Signal family.
    sample_rate_hz : float
        Sample rate the signal was designed for, Hz.
    band_hz : (float, float)
        Band of interest, Hz.
    period_samples : int
        Samples per period.
    periods : int
        Periods per block, transient included.
    transient_periods : int
        Leading periods of each block to leave out.
    blocks : int
        Blocks of periods.
    input_names, input_units : tuple of str
        The CSV columns.
    lines : tuple of numpy.ndarray
        Lines each input excites.
    content : dict
        The whole parsed document.
    """

    path: str | None
    kind: str
    sample_rate_hz: float
    band_hz: tuple[float, float]
    period_samples: int
    periods: int
    transient_periods: int
    blocks: int
    input_names: tuple[str, ...]
    input_units: tuple[str, ...]
    lines: tuple[np.ndarray, ...]
    content: dict = field(default_factory=dict)

    @property
    def period_s(self) -> float:
        """Length of one period, s."""
        return self.period_samples / self.sample_rate_hz

    def periodic_arguments(self, sample_time: float | None = None) -> dict[str, Any]:
        """Keyword arguments of :func:`ident.estimate.periodic.analyse_periodic` for a log of this signal.

        Parameters
        ----------
        sample_time : float, optional
            The log's sample time, s; it must match the designed sample rate
            (otherwise the period is not a whole number of log samples).

        Returns
        -------
        dict
            ``period``, ``transient_periods``, ``blocks``, ``periods_per_block``
            and ``excited_lines``.

        Raises
        ------
        SignalFileError
            The log's sample rate differs from the designed one by more than 1 ppm.
        """
        if sample_time is not None and not math.isclose(1.0 / sample_time, self.sample_rate_hz, rel_tol=1e-6):
            raise SignalFileError(
                f"the log is sampled at {1.0 / sample_time:g} Hz; the signal was designed for "
                f"{self.sample_rate_hz:g} Hz", path=self.path,
                hint="log at the rate the controller replays the signal, or give the period in samples",
            )
        return {
            "period": self.period_samples,
            "transient_periods": self.transient_periods,
            "blocks": self.blocks,
            "periods_per_block": self.periods,
            "excited_lines": list(self.lines),
        }


def _field(data: dict, key: str, kind: type | tuple[type, ...], where: str | None) -> Any:
    if key not in data:
        raise SignalFileError(f"missing key {key!r}", path=where)
    value = data[key]
    if isinstance(value, bool) or not isinstance(value, kind):
        raise SignalFileError(f"key {key!r} has the wrong type ({type(value).__name__})", path=where)
    return value


def _positive_int(data: dict, key: str, where: str | None, low: int = 1) -> int:
    value = _field(data, key, int, where)
    if value < low:
        raise SignalFileError(f"key {key!r} must be an integer >= {low}; got {value}", path=where)
    return value


def _inputs(data: dict, period: int, where: str | None):
    entries = _field(data, "inputs", list, where)
    if not entries:
        raise SignalFileError("key 'inputs' lists no input", path=where)
    names, units, lines = [], [], []
    for j, entry in enumerate(entries):
        if not isinstance(entry, dict):
            raise SignalFileError(f"inputs[{j}] must be an object", path=where)
        names.append(str(_field(entry, "name", str, where)))
        units.append(str(_field(entry, "unit", str, where)))
        raw = _field(entry, "lines", list, where)
        if not all(isinstance(k, int) and not isinstance(k, bool) for k in raw):
            raise SignalFileError(f"inputs[{j}].lines must be a list of integers", path=where)
        k = np.array(raw, dtype=np.int64)
        if k.size and (k.min() < 1 or 2 * k.max() >= period):
            raise SignalFileError(f"inputs[{j}].lines must lie in [1, {(period - 1) // 2}]", path=where)
        lines.append(k)
    return tuple(names), tuple(units), tuple(lines)


def _description_from_dict(data: Any, where: str | None) -> SignalDescription:
    if not isinstance(data, dict) or data.get("format") != FORMAT_NAME:
        raise SignalFileError(f"not a rigfit test-signal description (format must be {FORMAT_NAME!r})",
                              path=where)
    if data.get("schema_version") != SCHEMA_VERSION:
        raise SignalFileError(
            f"unsupported schema_version {data.get('schema_version')!r}; this rigfit reads version "
            f"{SCHEMA_VERSION}", path=where, hint="upgrade rigfit to read files written by a newer version",
        )
    rate = float(_field(data, "sample_rate_hz", (int, float), where))
    band = _field(data, "band_hz", list, where)
    if len(band) != 2 or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in band) \
            or not (0 < band[0] < band[1]) or not math.isfinite(rate) or rate <= 0:
        raise SignalFileError("sample_rate_hz must be > 0 and band_hz two numbers 0 < low < high", path=where)
    period = _positive_int(data, "period_samples", where, low=4)
    periods = _positive_int(data, "periods", where)
    transient = _positive_int(data, "transient_periods", where, low=0)
    if transient >= periods:
        raise SignalFileError("transient_periods must be smaller than periods", path=where)
    names, units, lines = _inputs(data, period, where)
    return SignalDescription(
        path=where, kind=str(_field(data, "kind", str, where)), sample_rate_hz=rate,
        band_hz=(float(band[0]), float(band[1])), period_samples=period, periods=periods,
        transient_periods=transient, blocks=_positive_int(data, "blocks", where), input_names=names,
        input_units=units, lines=lines, content=data,
    )


#: Largest signal description rigfit reads, in bytes.
MAX_DESCRIPTION_BYTES = 64 * 2**20


def read_signal_description(path: str | os.PathLike) -> SignalDescription:
    """Read a test signal's JSON description.

    Raises
    ------
    SignalFileError
        The file is missing, not JSON, of another format or version, or a
        field is missing or malformed.
    """
    from .inputs import parse_json, read_input_bytes

    where = os.fspath(path)

    def error(reason: str) -> SignalFileError:
        return SignalFileError(reason, path=where)

    data = parse_json(read_input_bytes(where, error, what="signal description", max_bytes=MAX_DESCRIPTION_BYTES),
                      error)
    return _description_from_dict(data, where)
