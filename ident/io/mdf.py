"""ASAM MDF measurement files (versions 3 and 4) through ``asammdf``.

ASAM MDF (Measurement Data Format) is the open standard of the Association for
Standardization of Automation and Measuring Systems that vehicle and test-bench
measurement systems write. A file holds channel groups; each group is one
record layout with its own master channel, normally the time in s, so every
group has its own time base (a 1 kHz encoder group beside a 10 Hz temperature
group). Here a channel group is a block of channels sharing a time base; its
label is the group's acquisition name when that is unique (and holds no ``/``),
else ``group<N>`` (1-based, in file order). Physical values are read (the
file's conversions applied); samples whose invalidation bit is set (MDF 4) are
reported as invalid. The file is opened read-only and never written.

References
----------
.. [1] ASAM e.V., *ASAM MDF: Measurement Data Format*, version 4.2.0, 2019
   (channel groups, master channels, invalidation bits).
"""

from __future__ import annotations

import contextlib
import gc
import os
import sys
from collections.abc import Iterator, Sequence

import numpy as np

from ..errors import LogFormatError
from .channels import BlockData, Catalogue, TimeSource
from .columns import Entry

__all__ = ["MAGICS", "INSTALL_HINT", "is_mdf", "mdf_catalogue", "read_mdf"]

#: First eight bytes of a finalised and of an unfinalised MDF file.
MAGICS: tuple[bytes, ...] = (b"MDF     ", b"UnFinMF ")
#: How to get the reader.
INSTALL_HINT = "install it with: pip install asammdf (from a rigfit checkout: pip install '.[mdf]')"
#: MDF 4 master-channel synchronisation types (``cn_sync_type``) other than time.
_SYNC_NAMES = {2: "angle", 3: "distance", 4: "index"}


def is_mdf(head: bytes) -> bool:
    """Tell whether the first bytes of a file are an MDF identification block."""
    return head[:8] in MAGICS


def _asammdf(path: str):
    try:
        import asammdf
    except ImportError as exc:
        raise LogFormatError(
            "reading ASAM MDF files needs the asammdf package, which is not installed",
            path=path, hint=INSTALL_HINT,
        ) from exc
    return asammdf


@contextlib.contextmanager
def _opened(path: str) -> Iterator[object]:
    """Open the file with asammdf; any failure of the reader becomes one LogFormatError."""
    asammdf = _asammdf(path)
    mdf = None
    reason = None
    # a reader that fails half-way through its constructor complains again from __del__;
    # collect it while unraisable errors are silenced, so the user sees one line
    hook = sys.unraisablehook
    sys.unraisablehook = lambda unraisable: None
    try:
        try:
            mdf = asammdf.MDF(path)
        except Exception as exc:  # asammdf raises many types for truncated or damaged files
            reason = _reason(exc)
        gc.collect()
    finally:
        sys.unraisablehook = hook
    if mdf is None:
        raise LogFormatError(f"cannot read the ASAM MDF file ({reason})", path=path,
                             hint="the file may be truncated or damaged; record or copy it again")
    try:
        yield mdf
    finally:
        mdf.close()


def _get(mdf, g: int, j: int, path: str):
    """One channel's signal with every record and its invalidation bits."""
    try:
        return mdf.get(group=g, index=j, ignore_invalidation_bits=True)
    except Exception as exc:  # damaged data blocks show up only when read
        raise LogFormatError(f"cannot read the ASAM MDF file ({_reason(exc)})", path=path,
                             hint="the file may be truncated or damaged; record or copy it again") from exc


def _reason(exc: Exception) -> str:
    text = " ".join(str(exc).split()) or type(exc).__name__
    return text if len(text) <= 160 else text[:157] + "..."


def mdf_catalogue(path: str | os.PathLike) -> Catalogue:
    """List the channel groups and channels of an MDF file (no samples are read).

    Raises
    ------
    LogFormatError
        asammdf is missing, or the file cannot be read.
    """
    path = os.fspath(path)
    with _opened(path) as mdf:
        labels = _labels(mdf)
        entries, blocks, keys, times = [], [], [], []
        for g, group in enumerate(mdf.groups):
            master = mdf.masters_db.get(g)
            for j, ch in enumerate(group.channels):
                if j == master:
                    continue
                entries.append(Entry(str(ch.name), _unit(mdf, g, j, ch), labels[g]))
                blocks.append(g)
                keys.append((g, j))
            times.append(_time_source(mdf, g, master, labels[g]))
        return Catalogue("mdf", str(mdf.version), tuple(entries), tuple(blocks), tuple(times),
                         tuple(keys))


def _labels(mdf) -> list[str]:
    names = []
    for group in mdf.groups:
        acq = getattr(group.channel_group, "acq_name", "") or ""
        names.append(str(acq).strip())
    out = []
    for g, name in enumerate(names):
        usable = name and "/" not in name and names.count(name) == 1 and not name.startswith("group")
        out.append(name if usable else f"group{g + 1}")
    return out


def _unit(mdf, g: int, j: int, ch) -> str:
    """Return the channel's unit (MDF 3 keeps it in the conversion block; asammdf finds it)."""
    try:
        unit = mdf.get_channel_unit(group=g, index=j)
    except Exception:  # a damaged or unusual conversion block: fall back to the channel's own field
        unit = getattr(ch, "unit", "")
    return str(unit or "").strip()


def _time_source(mdf, g: int, master: int | None, label: str) -> TimeSource:
    group = mdf.groups[g]
    n = int(group.channel_group.cycles_nr)
    if master is None:
        return TimeSource(label, "none", None, "s", None, n, note="the group has no master channel")
    ch = group.channels[master]
    sync = getattr(ch, "sync_type", 1)
    if sync in _SYNC_NAMES:
        return TimeSource(label, "none", str(ch.name), _unit(mdf, g, master, ch), None, n,
                          note=f"its master channel {str(ch.name)!r} is {_SYNC_NAMES[sync]}, not time")
    return TimeSource(label, "master", str(ch.name), _unit(mdf, g, master, ch) or "s", None, n)


def read_mdf(path: str | os.PathLike, catalogue: Catalogue, indices: Sequence[int],
             names: Sequence[str], skipped: list[str] | None = None) -> list[BlockData]:
    """Read the samples of the channels ``indices`` (into ``catalogue.entries``), block by block.

    Parameters
    ----------
    path : path-like
    catalogue : Catalogue
        From :func:`mdf_catalogue` on the same file.
    indices : sequence of int
        Channels to read.
    names : sequence of str
        Their names as the log shows them, for messages.
    skipped : list, optional
        When given, channels that are not numeric are appended to it (by name)
        and left out instead of refused.

    Returns
    -------
    list of BlockData
        One per block holding a requested channel, in block order.

    Raises
    ------
    LogFormatError
        A channel that is not numeric (text, bytes, arrays), or a damaged file.
    """
    path = os.fspath(path)
    by_block: dict[int, list[tuple[int, str]]] = {}
    for k, name in zip(indices, names, strict=True):
        by_block.setdefault(catalogue.blocks[k], []).append((k, name))
    out = []
    with _opened(path) as mdf:
        for b in sorted(by_block):
            time = None
            values: dict[int, np.ndarray] = {}
            invalid: dict[int, np.ndarray] = {}
            for k, name in by_block[b]:
                g, j = catalogue.keys[k]
                sig = _get(mdf, g, j, path)
                if skipped is not None and not _is_numeric(sig.samples):
                    skipped.append(name)
                    continue
                values[k] = _numeric(sig.samples, path, name)
                bits = sig.invalidation_bits
                if bits is not None and np.any(bits):
                    invalid[k] = np.asarray(bits, dtype=bool)
                if time is None and catalogue.times[b].kind == "master":
                    time = np.asarray(sig.timestamps, dtype=np.float64)
            if values:
                out.append(BlockData(b, time, values, invalid))
    return out


def _is_numeric(samples) -> bool:
    a = np.asarray(samples)
    return a.ndim == 1 and a.dtype.kind in "fiub"


def _numeric(samples, path: str, name: str) -> np.ndarray:
    a = np.asarray(samples)
    if a.ndim != 1 or a.dtype.kind not in "fiub":
        what = "text" if a.dtype.kind in "OSU" else f"{a.dtype} of shape {a.shape[1:]}" if a.ndim > 1 else str(a.dtype)
        raise LogFormatError(f"not a numeric channel ({what})", path=path, channel=name)
    return a.astype(np.float64, copy=False)
