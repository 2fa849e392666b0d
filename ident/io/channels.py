"""What a measurement file (ASAM MDF, HDF5) holds: channels grouped by their time base.

The readers in :mod:`ident.io.mdf` and :mod:`ident.io.hdf5` describe a file as a
:class:`Catalogue` (channel names, units and groups, and one :class:`TimeSource`
per block of channels sharing a time base) and return the requested samples as
:class:`BlockData`. :mod:`ident.io.log` turns those into the same ``Table`` and
``Log`` objects a CSV log gives, so every check and message is shared.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from .columns import Entry

__all__ = ["FORMAT_NAMES", "TimeSource", "Catalogue", "BlockData"]

#: Readable names of the log formats (``LogSource.format``).
FORMAT_NAMES: dict[str, str] = {
    "csv": "CSV",
    "parquet": "Parquet",
    "mdf": "ASAM MDF",
    "hdf5": "HDF5",
}


@dataclass(frozen=True, slots=True, eq=False)
class TimeSource:
    """The time base of one block of channels.

    Attributes
    ----------
    label : str
        The block's group label (MDF channel group, HDF5 group path).
    kind : str
        ``"master"`` (an MDF master channel), ``"dataset"`` (an HDF5 time
        dataset), ``"rate"`` (a sample-rate attribute) or ``"none"``.
    name : str or None
        The master channel or the time dataset's path.
    unit : str
        Unit of the time values (``"s"`` when the file gives none).
    rate_hz : float or None
        The sample-rate attribute (kind ``"rate"``).
    samples : int
        Number of records.
    note : str
        Why a block has no time base, when it has none.
    """

    label: str
    kind: str
    name: str | None
    unit: str
    rate_hz: float | None
    samples: int
    note: str = ""


@dataclass(frozen=True, slots=True, eq=False)
class Catalogue:
    """Channels of a measurement file, in listing order, and their blocks.

    Attributes
    ----------
    format : str
        ``"mdf"`` or ``"hdf5"``.
    version : str
        Format version (``"4.10"``; the HDF5 library version for HDF5).
    entries : tuple of Entry
        Selectable channels (time channels excluded).
    blocks : tuple of int
        Block index of each entry.
    times : tuple of TimeSource
        One per block.
    keys : tuple
        Reader-specific address of each entry (MDF ``(group, index)``, HDF5 path).
    """

    format: str
    version: str
    entries: tuple[Entry, ...]
    blocks: tuple[int, ...]
    times: tuple[TimeSource, ...]
    keys: tuple = ()

    def display_name(self, index: int) -> str:
        """Return the bare name when no other channel has it, else ``group/name``."""
        entry = self.entries[index]
        same = sum(1 for e in self.entries if e.name.lower() == entry.name.lower())
        return entry.name if same == 1 else entry.qualified


@dataclass(frozen=True, slots=True, eq=False)
class BlockData:
    """Samples of the requested channels of one block, as stored.

    Attributes
    ----------
    block : int
        Index into ``Catalogue.times``.
    time : numpy.ndarray or None
        Time values in the time source's unit; ``None`` without a time base.
    values : dict
        Entry index -> float64 samples (NaN where the file holds NaN).
    invalid : dict
        Entry index -> boolean mask of samples the file marks invalid (MDF
        invalidation bits); absent when all are valid.
    """

    block: int
    time: np.ndarray | None
    values: dict[int, np.ndarray]
    invalid: dict[int, np.ndarray] = field(default_factory=dict)
