"""Atomic, non-destructive file output.

Everything rigfit writes goes to a temporary file in the target folder first and
is renamed into place with :func:`os.replace`, so a crash never leaves a half
written file and an existing file is only replaced when the caller allows it.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

from ..errors import IdentError

__all__ = ["OutputExistsError", "write_atomic", "check_output_path"]


class OutputExistsError(IdentError, FileExistsError):
    """The output file exists and overwriting it was not allowed."""

    def __init__(self, path: str | os.PathLike) -> None:
        self.path = os.fspath(path)
        super().__init__(
            f"{self.path}: already exists; not overwritten",
            hint="pass --force to replace it, or choose another path",
        )


def check_output_path(
    path: str | os.PathLike, *, force: bool = False, protected: tuple[str | os.PathLike, ...] = ()
) -> Path:
    """Refuse an output path that exists (unless ``force``) or that is a protected input.

    Parameters
    ----------
    path : path-like
        Where the output will go.
    force : bool
        Allow replacing an existing file.
    protected : tuple of path-like
        Files that must never be written, such as the input log; refused even
        with ``force``.

    Raises
    ------
    OutputExistsError
        ``path`` exists and ``force`` is false.
    IdentError
        ``path`` is one of ``protected``, is a directory, or its folder does not exist.
    """
    target = Path(path)
    for item in protected:
        try:
            same = target.exists() and Path(item).exists() and os.path.samefile(target, item)
        except OSError:
            same = False
        if same or target.resolve() == Path(item).resolve():
            raise IdentError(f"{target}: refusing to write over the input file {item}")
    if target.is_dir():
        raise IdentError(f"{target}: is a directory, not a file")
    folder = target.parent if str(target.parent) else Path(".")
    if not folder.is_dir():
        raise IdentError(f"{target}: folder {folder} does not exist")
    if target.exists() and not force:
        raise OutputExistsError(target)
    return target


def _file_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def write_atomic(
    path: str | os.PathLike,
    data: str | bytes,
    *,
    force: bool = False,
    protected: tuple[str | os.PathLike, ...] = (),
) -> Path:
    """Write ``data`` to ``path`` through a temporary file and a rename.

    Parameters
    ----------
    path : path-like
        Destination file. Its folder must exist.
    data : str or bytes
        Content; ``str`` is written as UTF-8.
    force : bool
        Replace an existing file.
    protected : tuple of path-like
        Files never to be written (see :func:`check_output_path`).

    Returns
    -------
    pathlib.Path
        The destination path.
    """
    target = check_output_path(path, force=force, protected=protected)
    folder = target.parent if str(target.parent) else Path(".")
    payload = data.encode("utf-8") if isinstance(data, str) else data
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".tmp", dir=folder)
    try:
        # mkstemp makes the file private (0600); give it the mode a plain open() would
        os.chmod(tmp, _file_mode())
        with os.fdopen(fd, "wb") as fh:
            fh.write(payload)
            fh.flush()
            os.fsync(fh.fileno())
        if force:
            os.replace(tmp, target)
        else:
            # a hard link never replaces an existing file: the refusal is atomic too
            try:
                os.link(tmp, target)
            except FileExistsError:
                raise OutputExistsError(target) from None
            except OSError:  # a file system without hard links: check, then rename
                if target.exists():
                    raise OutputExistsError(target) from None
                os.replace(tmp, target)
            else:
                os.unlink(tmp)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise
    return target
