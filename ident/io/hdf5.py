"""HDF5 logs, as data-acquisition scripts write them, through ``h5py``.

A channel is a one-dimensional numeric dataset (an ``(n, 1)`` dataset counts
too), addressed by its path (``group/channel``; the bare name is enough when no
other dataset has it). Its time base, in this order:

1. with a sample rate given by the user (``--sample-rate``), that rate for every
   channel, as for a CSV log without a time column;
2. a time dataset of the same length in the channel's group: one named ``time``
   or ``t`` (any case), or the name given with ``--time``; its unit attribute
   (default s) gives the time unit;
3. a sample-rate attribute in Hz (``sample_rate_hz``, ``sample_rate`` or ``fs``) on
   the dataset or the nearest group above it.

Units come from a ``unit`` or ``units`` attribute when present. Channels sharing
a time base form one block. The file is opened read-only and never written.

References
----------
.. [1] The HDF Group, *HDF5 File Format Specification*, version 3.0, 2016
   (superblock signature and its allowed offsets).
"""

from __future__ import annotations

import os
from collections.abc import Sequence

import numpy as np

from ..errors import LogFormatError
from .channels import BlockData, Catalogue, TimeSource
from .columns import Entry

__all__ = ["MAGIC", "INSTALL_HINT", "RATE_ATTRIBUTES", "UNIT_ATTRIBUTES", "is_hdf5", "hdf5_catalogue",
           "read_hdf5"]

#: HDF5 superblock signature; it sits at byte 0, 512, 1024, 2048, ... of the file.
MAGIC = b"\x89HDF\r\n\x1a\n"
#: How to get the reader.
INSTALL_HINT = "install it with: pip install h5py (from a rigfit checkout: pip install '.[hdf5]')"
#: Attributes read as a sample rate in Hz, in order of preference.
RATE_ATTRIBUTES: tuple[str, ...] = ("sample_rate_hz", "sample_rate", "fs")
#: Attributes read as a unit.
UNIT_ATTRIBUTES: tuple[str, ...] = ("unit", "units")
#: Dataset names taken as a group's time when none is named (case-insensitive).
_TIME_NAMES: tuple[str, ...] = ("time", "t")


def is_hdf5(head: bytes) -> bool:
    """Tell whether an HDF5 superblock signature is at one of its allowed offsets in ``head``."""
    offset = 0
    while offset + len(MAGIC) <= len(head):
        if head[offset:offset + len(MAGIC)] == MAGIC:
            return True
        offset = 512 if offset == 0 else 2 * offset
    return False


def _h5py(path: str):
    try:
        import h5py
    except ImportError as exc:
        raise LogFormatError(
            "reading HDF5 files needs the h5py package, which is not installed",
            path=path, hint=INSTALL_HINT,
        ) from exc
    return h5py


def _open(path: str):
    h5py = _h5py(path)
    try:
        return h5py, h5py.File(path, "r")
    except (OSError, ValueError) as exc:  # h5py reports damaged or truncated files as OSError
        text = " ".join(str(exc).split())
        raise LogFormatError(f"cannot read the HDF5 file ({text[:160]})", path=path,
                             hint="the file may be truncated or damaged; record or copy it again") from exc


def _text(value) -> str:
    if isinstance(value, bytes):
        return value.decode("utf-8", errors="replace").strip()
    if isinstance(value, np.ndarray) and value.size == 1:
        return _text(value.reshape(()).item())
    return str(value).strip()


def _unit(attrs) -> str:
    for key in UNIT_ATTRIBUTES:
        if key in attrs:
            return _text(attrs[key])
    return ""


def _rate(attrs) -> float | None:
    for key in RATE_ATTRIBUTES:
        if key in attrs:
            try:
                value = float(np.asarray(attrs[key]).reshape(()))
            except (TypeError, ValueError):
                continue
            if np.isfinite(value) and value > 0:
                return value
    return None


def _datasets(f, h5py) -> list[tuple[str, object]]:
    """Every one-dimensional numeric dataset, by path, in file order."""
    found: list[tuple[str, object]] = []

    def visit(name: str, obj) -> None:
        if isinstance(obj, h5py.Dataset) and obj.dtype.kind in "fiub" and (
            len(obj.shape) == 1 or (len(obj.shape) == 2 and obj.shape[1] == 1)
        ):
            found.append((name, obj))

    f.visititems(visit)
    return found


def hdf5_catalogue(path: str | os.PathLike, *, time: str | None = None,
                   sample_rate: float | None = None) -> Catalogue:
    """List the channels of an HDF5 file and their time bases (no samples are read).

    Parameters
    ----------
    path : path-like
    time : str, optional
        Name of the time dataset in each group (or its path); default ``time`` or ``t``.
    sample_rate : float, optional
        One sample rate for every channel; time datasets are then ordinary channels.

    Raises
    ------
    LogFormatError
        h5py is missing, the file cannot be read, or ``time`` names no dataset.
    """
    path = os.fspath(path)
    h5py, f = _open(path)
    with f:
        datasets = _datasets(f, h5py)
        time_paths = {} if sample_rate is not None else _time_datasets(datasets, time, path)
        keys: dict[tuple, int] = {}
        times: list[TimeSource] = []
        entries, blocks, paths = [], [], []
        for name, ds in datasets:
            if name in time_paths.values():
                continue
            group, _, bare = name.rpartition("/")
            source = _source(f, name, ds, group, time_paths.get(group), sample_rate)
            key = (source.kind, source.name, source.rate_hz, group, source.samples)
            if key not in keys:
                keys[key] = len(times)
                times.append(source)
            entries.append(Entry(bare, _unit(ds.attrs), group))
            blocks.append(keys[key])
            paths.append(name)
        return Catalogue("hdf5", "", tuple(entries), tuple(blocks), tuple(times), tuple(paths))


def _time_datasets(datasets, time: str | None, path: str) -> dict[str, str]:
    """Group path -> path of its time dataset."""
    out: dict[str, str] = {}
    want = None if time is None else time.strip().strip("/").lower()
    for name, _ in datasets:
        group, _, bare = name.rpartition("/")
        if want is None:
            hit = bare.lower() in _TIME_NAMES and (group not in out or bare.lower() == _TIME_NAMES[0])
        else:
            hit = name.lower() == want or ("/" not in want and bare.lower() == want)
        if hit:
            out[group] = name
    if want is not None and not out:
        raise LogFormatError(f"no time dataset named {time!r}", path=path,
                             hint="'rigfit inspect' lists the datasets; or give --sample-rate HZ")
    return out


def _source(f, name: str, ds, group: str, time_path: str | None, sample_rate: float | None) -> TimeSource:
    n = int(ds.shape[0])
    label = group or "/"
    if sample_rate is not None:
        return TimeSource(label, "rate", None, "s", float(sample_rate), n)
    if time_path is not None and int(f[time_path].shape[0]) == n:
        return TimeSource(label, "dataset", time_path, _unit(f[time_path].attrs) or "s", None, n)
    rate = _rate(ds.attrs)
    node = group
    while rate is None:
        rate = _rate(f[node].attrs if node else f.attrs)
        if not node:
            break
        node = node.rpartition("/")[0]
    if rate is not None:
        return TimeSource(label, "rate", None, "s", rate, n)
    note = (f"its length {n} differs from the time dataset {time_path!r} ({f[time_path].shape[0]})"
            if time_path is not None else
            "no time dataset ('time' or 't') in its group and no sample-rate attribute "
            f"({', '.join(RATE_ATTRIBUTES)})")
    return TimeSource(label, "none", None, "s", None, n, note=note)


def read_hdf5(path: str | os.PathLike, catalogue: Catalogue, indices: Sequence[int],
              names: Sequence[str]) -> list[BlockData]:
    """Read the samples of the channels ``indices`` (into ``catalogue.entries``), block by block.

    Returns
    -------
    list of BlockData
        One per block holding a requested channel, in block order; the time is
        the block's time dataset as stored (``None`` for a sample rate).
    """
    path = os.fspath(path)
    by_block: dict[int, list[int]] = {}
    for k in indices:
        by_block.setdefault(catalogue.blocks[k], []).append(k)
    _, f = _open(path)
    out = []
    with f:
        for b in sorted(by_block):
            source = catalogue.times[b]
            time = None
            if source.kind == "dataset":
                time = _read(f, source.name, path)
            values = {k: _read(f, catalogue.keys[k], path) for k in by_block[b]}
            out.append(BlockData(b, time, values))
    return out


def _read(f, name: str, path: str) -> np.ndarray:
    try:
        data = np.asarray(f[name][()], dtype=np.float64)
    except (OSError, ValueError, TypeError) as exc:
        raise LogFormatError(f"cannot read the dataset ({' '.join(str(exc).split())[:160]})", path=path,
                             channel=name) from exc
    return data.reshape(-1)
