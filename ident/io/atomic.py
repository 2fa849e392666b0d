"""Atomic, non-destructive file output.

Everything rigfit writes goes to a temporary file in the target folder first and
is renamed into place, so a crash never leaves a half written file, and an
existing file is only replaced when the caller allows it. The rules:

* an output is never one of the command's input files (``protected``), with or
  without ``force``, whatever path (link, ``..``) names it;
* ``force`` replaces regular files only: a folder, a symbolic link, a named
  pipe, a device or a socket at the output path is refused;
* names longer than the file system allows are refused before any work is done;
* several outputs of one call are written all or nothing (:func:`write_many`):
  when one fails, the files already written by that call are removed and the
  files it replaced are put back;
* temporary files and folders are named ``.<name>.rigfit-<pid>-<host>.<random>.tmp``;
  a process that is killed cannot remove its own, so every later write into
  the same folder removes those of processes (on this host) that are gone
  (:func:`remove_stale`);
* a new folder of outputs (a run folder) is built as such a temporary folder
  and renamed into place when complete (:func:`new_folder`), so an interrupted
  run leaves either no folder or a complete one.
"""

from __future__ import annotations

import contextlib
import errno
import hashlib
import os
import re
import secrets
import shutil
import socket
import stat
from collections.abc import Callable, Iterator, Sequence
from pathlib import Path

from ..errors import IdentError, printable

__all__ = [
    "OutputExistsError",
    "write_atomic",
    "write_many",
    "check_output_path",
    "check_output_paths",
    "check_new_folder",
    "new_folder",
    "remove_stale",
    "is_temporary_name",
]

#: Bytes of the target's name kept in a temporary name (the rest is the marker).
_LABEL_BYTES = 60
_TMP_RE = re.compile(r"^\..*\.rigfit-(?P<pid>\d+)-(?P<host>[0-9a-f]{8})\.[A-Za-z0-9_-]+\.tmp$", re.S)


class OutputExistsError(IdentError, FileExistsError):
    """The output file exists and overwriting it was not allowed."""

    def __init__(self, path: str | os.PathLike) -> None:
        self.path = os.fspath(path)
        super().__init__(
            f"{printable(self.path)}: already exists; not overwritten",
            hint="pass --force to replace it, or choose another path",
        )


# --------------------------------------------------------------------------- names


def _host_tag() -> str:
    return hashlib.sha256(socket.gethostname().encode("utf-8", "replace")).hexdigest()[:8]


def _temporary_name(label: str) -> str:
    raw = os.fsencode(label)[:_LABEL_BYTES]
    short = raw.decode("utf-8", "ignore") if raw else "out"
    return f".{short}.rigfit-{os.getpid()}-{_host_tag()}.{secrets.token_hex(4)}.tmp"


def is_temporary_name(name: str) -> bool:
    """Tell whether ``name`` is the name of one of rigfit's temporary files or folders."""
    return _TMP_RE.match(name) is not None


def _process_gone(pid: int) -> bool:
    if pid == os.getpid():
        return False
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except (PermissionError, OSError):
        return False  # it exists (another user's), or we cannot tell: keep the file
    return False


def remove_stale(folder: str | os.PathLike) -> list[str]:
    """Remove rigfit's temporary files and folders in ``folder`` whose process is gone.

    Only names made by rigfit on this host (see the module notes) are touched,
    and only when no process with their process id is running. Returns the
    names removed; errors (a file removed meanwhile, no permission) are ignored.
    """
    removed = []
    host = _host_tag()
    try:
        entries = list(os.scandir(folder))
    except OSError:
        return removed
    for entry in entries:
        m = _TMP_RE.match(entry.name)
        if m is None or m.group("host") != host or not _process_gone(int(m.group("pid"))):
            continue
        try:
            if entry.is_dir(follow_symlinks=False):
                shutil.rmtree(entry.path)
            else:
                os.unlink(entry.path)
            removed.append(entry.name)
        except OSError:
            pass
    return removed


# --------------------------------------------------------------------------- checks


def _kind(mode: int) -> str:
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISLNK(mode):
        return "a symbolic link"
    if stat.S_ISFIFO(mode):
        return "a named pipe"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def _name_max(folder: Path) -> int:
    try:
        return int(os.pathconf(folder, "PC_NAME_MAX"))
    except (OSError, ValueError, AttributeError):
        return 255


def _path_max(folder: Path) -> int:
    try:
        return int(os.pathconf(folder, "PC_PATH_MAX"))
    except (OSError, ValueError, AttributeError):
        return 4096


def _too_long(path: Path) -> bool:
    try:
        os.lstat(path)
    except OSError as exc:
        return exc.errno == errno.ENAMETOOLONG
    return False


def _check_length(target: Path, folder: Path) -> None:
    folder = folder if os.path.isdir(folder) else Path(".")
    name_bytes = len(os.fsencode(target.name))
    limit = _name_max(folder)
    if name_bytes > limit:
        raise IdentError(
            f"{printable(target)}: file name is {name_bytes} bytes long; this file system allows {limit}",
            hint="choose a shorter name",
        )
    full = len(os.fsencode(os.path.abspath(target)))
    plimit = _path_max(folder)
    if full >= plimit:
        raise IdentError(
            f"{printable(target)}: path is {full} bytes long; this file system allows {plimit - 1}",
            hint="choose a shorter path",
        )


def _is_protected(target: Path, protected: Sequence[str | os.PathLike]) -> str | None:
    for item in protected:
        if item is None:
            continue
        try:
            same = os.path.lexists(target) and os.path.exists(item) and os.path.samefile(target, item)
        except OSError:
            same = False
        try:
            same = same or target.resolve() == Path(item).resolve()
        except (OSError, RuntimeError):
            pass
        if same:
            return os.fspath(item)
    return None


def check_output_path(
    path: str | os.PathLike, *, force: bool = False, protected: Sequence[str | os.PathLike] = ()
) -> Path:
    """Refuse an output path that rigfit must not write.

    Parameters
    ----------
    path : path-like
        Where the output will go.
    force : bool
        Allow replacing an existing regular file.
    protected : sequence of path-like
        The command's input files (log, model, expectations, pipeline); they
        are refused as outputs even with ``force``.

    Returns
    -------
    pathlib.Path

    Raises
    ------
    OutputExistsError
        ``path`` exists and ``force`` is false.
    IdentError
        ``path`` is an input file; is a folder, a symbolic link, a named pipe,
        a device or a socket; its folder does not exist; or its name or the
        whole path is longer than the file system allows.
    """
    target = Path(path)
    if not target.name:
        raise IdentError(f"{printable(path)}: names a folder, not a file")
    hit = _is_protected(target, protected)
    if hit is not None:
        raise IdentError(f"{printable(target)}: refusing to write over the input file {printable(hit)}",
                         hint="choose another output path")
    try:
        mode = os.lstat(target).st_mode
    except FileNotFoundError:
        mode = None
    except OSError as exc:
        if exc.errno == errno.ENAMETOOLONG:
            mode = None
        else:
            raise IdentError(f"{printable(target)}: cannot use as an output ({exc.strerror})") from exc
    if mode is not None and not stat.S_ISREG(mode):
        raise IdentError(
            f"{printable(target)}: is {_kind(mode)}; rigfit replaces only regular files, even with --force",
            hint="choose another output path",
        )
    folder = target.parent if str(target.parent) else Path(".")
    if not os.path.isdir(folder):
        if _too_long(folder):
            _check_length(folder, folder.parent)
        raise IdentError(f"{printable(target)}: folder {printable(folder)} does not exist")
    _check_length(target, folder)
    if mode is not None and not force:
        raise OutputExistsError(target)
    return target


def check_output_paths(
    paths: Sequence[str | os.PathLike], *, force: bool = False, protected: Sequence[str | os.PathLike] = ()
) -> list[Path]:
    """:func:`check_output_path` for several outputs of one call, which must all differ."""
    targets = [check_output_path(p, force=force, protected=protected) for p in paths]
    seen: dict[str, Path] = {}
    for t in targets:
        key = os.path.normcase(os.path.abspath(t))
        if key in seen:
            raise IdentError(f"{printable(t)}: given for two outputs of the same command",
                             hint="give each output its own path")
        seen[key] = t
    return targets


def check_new_folder(path: str | os.PathLike, *, longest_name: str = "") -> Path:
    """Refuse a folder that cannot receive outputs: not a folder, or names too long.

    ``longest_name`` is the longest relative path that will be written inside it
    (``"sub/file.png"``), so a folder path that is fine by itself but too long
    for what goes into it is refused before any work is done.
    """
    target = Path(path)
    if os.path.lexists(target) and not os.path.isdir(target):
        raise IdentError(f"{printable(target)}: exists and is not a folder", hint="give a folder")
    existing = next((p for p in (target, *target.parents) if os.path.isdir(p)), Path("."))
    limit = _name_max(existing)
    new_parts = [p.name for p in (target, *target.parents) if p != existing and not os.path.isdir(p) and p.name]
    for part in (*new_parts, *Path(longest_name).parts):
        if len(os.fsencode(part)) > limit:
            raise IdentError(f"{printable(target)}: the name {printable(part)!r} is longer than this file "
                             f"system allows ({limit} bytes)", hint="choose a shorter name")
    full = len(os.fsencode(os.path.abspath(target / longest_name)))
    if full >= _path_max(existing):
        raise IdentError(f"{printable(target)}: path too long for this file system (the files written in it "
                         f"would have {full} bytes)", hint="choose a shorter path")
    return target


# --------------------------------------------------------------------------- writing


def _file_mode() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return 0o666 & ~mask


def _write_temporary(folder: Path, label: str, payload: bytes) -> Path:
    fd, tmp = _open_temporary(folder, label)
    try:
        # a new file gets the mode a plain open() would give it
        os.fchmod(fd, _file_mode())
        with os.fdopen(fd, "wb") as fh:
            fh.write(payload)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        with contextlib.suppress(OSError):
            os.unlink(tmp)
        raise
    return tmp


def _open_temporary(folder: Path, label: str) -> tuple[int, Path]:
    for _ in range(100):
        tmp = folder / _temporary_name(label)
        try:
            return os.open(tmp, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600), tmp
        except FileExistsError:
            continue
    raise IdentError(f"{printable(folder)}: cannot create a temporary file")


def _commit(tmp: Path, target: Path, force: bool) -> Path | None:
    """Move ``tmp`` to ``target``; return a backup link of the file it replaced (or None)."""
    backup = None
    if force and os.path.lexists(target):
        backup = target.parent / _temporary_name(target.name)
        try:
            os.link(target, backup)
        except OSError:
            backup = None  # no hard links here: the old file cannot be put back on failure
        os.replace(tmp, target)
        return backup
    try:
        # a hard link never replaces an existing file: the refusal is atomic too
        os.link(tmp, target)
    except FileExistsError:
        if not force:
            raise OutputExistsError(target) from None
        os.replace(tmp, target)
        return None
    except OSError:  # a file system without hard links: check, then rename
        if os.path.lexists(target) and not force:
            raise OutputExistsError(target) from None
        os.replace(tmp, target)
        return None
    os.unlink(tmp)
    return None


def write_many(
    items: Sequence[tuple[str | os.PathLike, str | bytes]],
    *,
    force: bool = False,
    protected: Sequence[str | os.PathLike] = (),
) -> list[Path]:
    """Write several files all or nothing.

    Every target is checked first (:func:`check_output_paths`), every content
    is written to a temporary file beside its target, and only then are they
    moved into place. When anything fails (or the process is interrupted)
    before the last move, the files this call created are removed, the files
    it replaced are restored (where the file system has hard links), and no
    temporary file is left.

    Parameters
    ----------
    items : sequence of (path, data)
        Destinations and contents (``str`` is written as UTF-8).
    force : bool
        Replace existing regular files.
    protected : sequence of path-like
        The command's input files, never written.

    Returns
    -------
    list of pathlib.Path
        The destinations, in order.
    """
    targets = check_output_paths([p for p, _ in items], force=force, protected=protected)
    for folder in {t.parent if str(t.parent) else Path(".") for t in targets}:
        remove_stale(folder)
    temps: list[Path] = []
    done: list[tuple[Path, Path | None, bool]] = []  # (target, backup, existed)
    try:
        for target, (_, data) in zip(targets, items, strict=True):
            payload = data.encode("utf-8") if isinstance(data, str) else data
            folder = target.parent if str(target.parent) else Path(".")
            temps.append(_write_temporary(folder, target.name, payload))
        for target, tmp in zip(targets, temps, strict=True):
            existed = os.path.lexists(target)
            backup = _commit(tmp, target, force)
            done.append((target, backup, existed))
    except BaseException:
        _roll_back(done, temps)
        raise
    for _, backup, _ in done:
        if backup is not None:
            with contextlib.suppress(OSError):
                os.unlink(backup)
    return targets


def _roll_back(done: list[tuple[Path, Path | None, bool]], temps: list[Path]) -> None:
    for target, backup, existed in reversed(done):
        with contextlib.suppress(OSError):
            if backup is not None:
                os.replace(backup, target)
            elif not existed:
                os.unlink(target)
    for tmp in temps:
        with contextlib.suppress(OSError):
            os.unlink(tmp)


def write_atomic(
    path: str | os.PathLike,
    data: str | bytes,
    *,
    force: bool = False,
    protected: Sequence[str | os.PathLike] = (),
) -> Path:
    """Write ``data`` to ``path`` through a temporary file and a rename.

    Parameters
    ----------
    path : path-like
        Destination file. Its folder must exist.
    data : str or bytes
        Content; ``str`` is written as UTF-8.
    force : bool
        Replace an existing regular file.
    protected : sequence of path-like
        Files never to be written (see :func:`check_output_path`).

    Returns
    -------
    pathlib.Path
        The destination path.
    """
    return write_many([(path, data)], force=force, protected=protected)[0]


@contextlib.contextmanager
def new_folder(parent: str | os.PathLike, name: Callable[[int], str]) -> Iterator[tuple[Path, Callable[[], str]]]:
    """Build a new folder of outputs in a temporary folder and rename it into place.

    Parameters
    ----------
    parent : path-like
        Where the folder goes (created if missing).
    name : callable
        ``name(k)`` gives the ``k``-th candidate name (``k = 1, 2, ...``); the
        first that does not exist is used.

    Yields
    ------
    (pathlib.Path, callable)
        The temporary folder to write into, and a function giving the final
        name the folder will get (for files that mention it).

    Notes
    -----
    On leaving the block without an error the temporary folder is renamed to
    ``parent / final name``; on an error or an interrupt it is removed. A
    process killed in between leaves it behind under its temporary name, and
    the next folder or file written into ``parent`` removes it.
    """
    base = Path(parent)
    base.mkdir(parents=True, exist_ok=True)
    remove_stale(base)
    chosen = _free_name(base, name)
    tmp = base / _temporary_name(chosen)
    os.mkdir(tmp)
    try:
        yield tmp, lambda: chosen
        final = base / chosen
        try:
            os.rename(tmp, final)
        except OSError as exc:  # created meanwhile by another process
            raise IdentError(f"{printable(final)}: created by another process while this run was "
                             "being written; run again") from exc
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise


def _free_name(base: Path, name: Callable[[int], str]) -> str:
    for k in range(1, 1000):
        candidate = name(k)
        if not os.path.lexists(base / candidate):
            return candidate
    raise IdentError(f"{printable(base)}: cannot find a free name for a new folder")
