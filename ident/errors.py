"""Errors and warnings raised by rigfit.

Every error a user can cause derives from :class:`IdentError`. The command-line
layer catches it, prints its one-line message (and its ``hint`` when set) and
exits with status 2. Errors are plain data: their fields are kept so tools can
read them, the message is built in ``__str__``, and they pickle.
"""

from __future__ import annotations

import os

__all__ = [
    "IdentError",
    "OptionError",
    "LogFormatError",
    "ResampleError",
    "ModelFileError",
    "ModelError",
    "PipelineError",
    "SignalFileError",
    "IdentificationError",
    "IdentWarning",
    "PoorExcitationWarning",
    "IllConditionedWarning",
    "FrozenDataWarning",
    "UnstableModelWarning",
    "ResamplingWarning",
    "SignalDesignWarning",
    "printable",
]


def printable(text: object) -> str:
    r"""Return ``text`` with control characters shown as escapes (``\n``, ``\x1b``), so it stays on one line.

    File names and column names come from the user's files and may hold
    newlines, tabs or terminal escape sequences; every message that shows one
    passes it through here. Printable text (any script) is unchanged.

    Examples
    --------
    >>> printable("run\n2.csv")
    'run\\n2.csv'
    """
    s = os.fspath(text) if isinstance(text, os.PathLike) else str(text)
    if isinstance(s, bytes):
        s = os.fsdecode(s)
    if s.isprintable():
        return s
    return "".join(c if c.isprintable() else c.encode("unicode_escape", "backslashreplace").decode("ascii")
                   for c in s)


class IdentError(Exception):
    """Base class of every error a user of rigfit can cause.

    Parameters
    ----------
    message : str
        One-line description of what is wrong.
    hint : str, optional
        One line telling the user what to do about it.
    """

    def __init__(self, message: str = "", *, hint: str | None = None) -> None:
        super().__init__(message)
        self.message = message
        self.hint = hint

    def __str__(self) -> str:
        return self.message

    def __reduce__(self):
        return (_rebuild, (type(self), self.__dict__.copy()))


def _rebuild(cls, state):
    obj = cls.__new__(cls)
    Exception.__init__(obj, state.get("message", ""))
    obj.__dict__.update(state)
    return obj


def _quoted(name: str, limit: int = 80) -> str:
    """``repr`` of a column or channel name, cut to ``limit`` characters (a header field may be huge)."""
    text = repr(name)
    return text if len(text) <= limit else text[: limit - 4] + "...'"


class OptionError(IdentError, ValueError):
    """An option or argument has a value that is not allowed."""


class LogFormatError(IdentError, ValueError):
    """A rig log cannot be read as asked.

    Parameters
    ----------
    reason : str
        What is wrong, in one line.
    path : str or os.PathLike, optional
        The log file.
    row : int, optional
        1-based line number in the file (the header is the first line that is
        not a ``#`` comment, counted like any other line).
    column : str, optional
        Column name as written in the header.
    hint : str, optional
        What the user can do about it.
    channel : str, optional
        Channel of a measurement file (ASAM MDF, HDF5), as the log lists it
        (``group/name`` when the bare name is not unique); said instead of a column.
    sample : int, optional
        1-based sample (record) number within that channel, for files without lines.
    """

    def __init__(
        self,
        reason: str,
        *,
        path: str | os.PathLike | None = None,
        row: int | None = None,
        column: str | None = None,
        hint: str | None = None,
        channel: str | None = None,
        sample: int | None = None,
    ) -> None:
        self.reason = reason
        self.path = None if path is None else os.fspath(path)
        self.row = row
        self.column = column
        self.channel = channel
        self.sample = sample
        super().__init__(self._compose(), hint=hint)

    def _compose(self) -> str:
        where = []
        if self.path is not None:
            where.append(printable(os.path.basename(self.path)))
        if self.row is not None:
            where.append(f"row {self.row}")
        if self.column is not None:
            where.append(f"column {_quoted(self.column)}")
        if self.channel is not None:
            where.append(f"channel {_quoted(self.channel)}")
        if self.sample is not None:
            where.append(f"sample {self.sample}")
        return ", ".join(where) + ": " + self.reason if where else self.reason


class ResampleError(IdentError, ValueError):
    """Channels cannot be brought to one sample rate as asked.

    Parameters
    ----------
    reason : str
        What is wrong, in one line.
    channel : str, optional
        The channel concerned.
    hint : str, optional
        What the user can do about it.
    """

    def __init__(self, reason: str, *, channel: str | None = None, hint: str | None = None) -> None:
        self.reason = reason
        self.channel = channel
        message = f"channel {channel!r}: {reason}" if channel is not None else reason
        super().__init__(message, hint=hint)


class ModelFileError(IdentError, ValueError):
    """A model file is missing, malformed, or of an unknown format version."""

    def __init__(
        self, reason: str, *, path: str | os.PathLike | None = None, hint: str | None = None
    ) -> None:
        self.reason = reason
        self.path = None if path is None else os.fspath(path)
        message = f"{printable(os.path.basename(self.path))}: {reason}" if self.path else reason
        super().__init__(message, hint=hint)


class ModelError(IdentError, ValueError):
    """A model cannot be used or converted as asked.

    For example, no real continuous-time equivalent exists.
    """


class PipelineError(IdentError, ValueError):
    """A pipeline file is invalid.

    Parameters
    ----------
    reason : str
        What is wrong.
    path : str or os.PathLike, optional
        The pipeline file.
    key_path : str, optional
        Dotted key of the offending entry, e.g. ``"fit.order"``.
    hint : str, optional
        What the user can do, e.g. the nearest valid key.
    """

    def __init__(
        self,
        reason: str,
        *,
        path: str | os.PathLike | None = None,
        key_path: str | None = None,
        hint: str | None = None,
    ) -> None:
        self.reason = reason
        self.path = None if path is None else os.fspath(path)
        self.key_path = key_path
        where = []
        if self.path is not None:
            where.append(printable(os.path.basename(self.path)))
        if key_path is not None:
            where.append(f"key {key_path!r}")
        message = ", ".join(where) + ": " + reason if where else reason
        super().__init__(message, hint=hint)


class SignalFileError(IdentError, ValueError):
    """A test-signal description (the JSON written by ``rigfit excite``) is missing or malformed."""

    def __init__(
        self, reason: str, *, path: str | os.PathLike | None = None, hint: str | None = None
    ) -> None:
        self.reason = reason
        self.path = None if path is None else os.fspath(path)
        message = f"{printable(os.path.basename(self.path))}: {reason}" if self.path else reason
        super().__init__(message, hint=hint)


class IdentificationError(IdentError, RuntimeError):
    """An estimate failed numerically or the data cannot support it."""


class IdentWarning(UserWarning):
    """Base class of rigfit's warnings."""


class PoorExcitationWarning(IdentWarning):
    """The input does not excite the system enough for the requested model."""


class IllConditionedWarning(IdentWarning):
    """A least-squares problem or a conversion is numerically ill conditioned."""


class UnstableModelWarning(IdentWarning):
    """An estimated model has a pole outside the unit circle."""


class FrozenDataWarning(IdentWarning):
    """A record ends in samples that repeat one value in every channel (padding or a stopped logger)."""


class ResamplingWarning(IdentWarning):
    """A channel was brought to a higher rate (zero-order hold or linear interpolation).

    Samples made up between the recorded ones carry no information above the
    channel's own Nyquist frequency, and the method leaves its mark on the
    identified dynamics (a hold adds delay, interpolation looks ahead).
    """


class SignalDesignWarning(IdentWarning):
    """A designed test signal works but is compromised (band near the sample rate, rate-limit distortion)."""
