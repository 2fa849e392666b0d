"""Opening the files a command is given: regular files only, bounded sizes and nesting.

Every input (log, model file, pipeline file, expectations file, signal
description) goes through :func:`check_input_file` before it is opened:

* standard input (``-``), a named pipe, a device, a socket or a folder is
  refused with a message saying what it is: rigfit reads a log several times
  (format, header, data, checksum), and a pipe read twice would wait forever;
* a file larger than the limit for its kind is refused before it is read.

JSON and TOML documents are parsed by :func:`parse_json` and :func:`parse_toml`,
which turn what the standard parsers do with hostile input into one-line
errors: nesting deep enough to exhaust the recursion limit, integers with more
digits than Python converts, ``NaN``/``Infinity`` (not JSON), and documents
nested more deeply than any rigfit file is. Messages never quote the content
of the file, which may not be what it claims to be.
"""

from __future__ import annotations

import json
import os
import stat
import tomllib
from collections.abc import Callable
from typing import Any

from ..errors import IdentError

__all__ = ["check_input_file", "read_input_bytes", "parse_json", "parse_toml", "MAX_NESTING"]

#: Deepest nesting of lists and objects accepted in a JSON or TOML input.
MAX_NESTING = 32
#: Integers with more digits than this become floats (so a huge one becomes inf and is refused).
_INT_DIGITS = 40

ErrorFactory = Callable[[str], IdentError]


def _kind(mode: int) -> str | None:
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a named pipe"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    if stat.S_ISSOCK(mode):
        return "a socket"
    return "not a regular file"


def check_input_file(path: str | os.PathLike, error: ErrorFactory, *, what: str,
                     max_bytes: int | None = None) -> int:
    """Refuse an input that is not a readable regular file of at most ``max_bytes``.

    Parameters
    ----------
    path : path-like
        The file as given.
    error : callable
        ``error(reason)`` builds the error to raise (it names the file).
    what : str
        What the file should be ("log", "model file", ...), for the messages.
    max_bytes : int, optional
        Largest accepted size.

    Returns
    -------
    int
        The file size in bytes.

    Raises
    ------
    IdentError
        From ``error``: standard input, a pipe, device, socket or folder, a
        missing file, or a file larger than ``max_bytes``.
    """
    if os.fspath(path) == "-":
        raise error(f"reading a {what} from standard input is not supported; save it to a file first")
    try:
        info = os.stat(path)
    except FileNotFoundError:
        raise error("no such file") from None
    except OSError as exc:
        raise error(f"cannot read ({exc.strerror})") from exc
    kind = _kind(info.st_mode)
    if kind is not None:
        reason = f"is {kind}, not a regular file"
        if kind in ("a named pipe", "a device"):
            reason += ("; rigfit reads a log several times (format, header, data, checksum) and would wait "
                       "on it forever: save it to a file first" if what == "log" else
                       "; rigfit reads its input files from disk only: save it to a file first")
        raise error(reason)
    if max_bytes is not None and info.st_size > max_bytes:
        raise error(f"is {_size(info.st_size)}; rigfit reads a {what} of at most {_size(max_bytes)}")
    return info.st_size


def _size(n: int) -> str:
    for unit, factor in (("GiB", 2**30), ("MiB", 2**20), ("KiB", 2**10)):
        if n >= factor:
            return f"{n / factor:.3g} {unit}"
    return f"{n} bytes"


def read_input_bytes(path: str | os.PathLike, error: ErrorFactory, *, what: str, max_bytes: int) -> bytes:
    """Check ``path`` with :func:`check_input_file`, then read at most ``max_bytes`` of it."""
    check_input_file(path, error, what=what, max_bytes=max_bytes)
    try:
        with open(path, "rb") as fh:
            data = fh.read(max_bytes + 1)
    except OSError as exc:
        raise error(f"cannot read ({exc.strerror})") from exc
    if len(data) > max_bytes:  # grew after the check
        raise error(f"is larger than {_size(max_bytes)}; rigfit reads a {what} of at most that")
    return data


def _depth_over(obj: Any, limit: int) -> bool:
    stack = [(obj, 1)]
    while stack:
        item, depth = stack.pop()
        if depth > limit:
            return True
        children = item.values() if isinstance(item, dict) else item
        stack.extend((c, depth + 1) for c in children if isinstance(c, (dict, list)))
    return False


def _parse_int(text: str) -> int | float:
    digits = len(text.lstrip("-"))
    return int(text) if digits <= _INT_DIGITS else float(text)


class _NotFinite(ValueError):
    pass


def _refuse_constant(name: str) -> Any:
    raise _NotFinite(name)


def parse_json(data: bytes | str, error: ErrorFactory, *, max_nesting: int = MAX_NESTING) -> Any:
    """Parse a JSON document with bounded nesting; every failure is ``error(reason)``.

    Integers longer than 40 digits are read as floats (a value beyond the float
    range becomes ``inf``, which the caller's schema refuses as not finite);
    ``NaN`` and ``Infinity`` are refused.
    """
    try:
        text = data.decode("utf-8") if isinstance(data, bytes) else data
    except UnicodeDecodeError as exc:
        raise error(f"not UTF-8 text (byte {exc.start})") from exc
    try:
        doc = json.loads(text, parse_int=_parse_int, parse_constant=_refuse_constant)
    except json.JSONDecodeError as exc:
        raise error(f"not valid JSON (line {exc.lineno}, column {exc.colno}: {exc.msg})") from exc
    except RecursionError as exc:
        raise error(f"nested too deeply (rigfit files are at most {max_nesting} levels deep)") from exc
    except _NotFinite as exc:
        raise error(f"holds {exc}, which is not finite (and not a JSON number)") from exc
    except ValueError as exc:  # a number Python refuses to convert
        raise error(f"not valid JSON ({str(exc).split(':')[0]})") from exc
    if isinstance(doc, (dict, list)) and _depth_over(doc, max_nesting):
        raise error(f"nested more than {max_nesting} levels deep; rigfit files are never nested so deeply")
    return doc


def parse_toml(data: bytes, error: ErrorFactory, *, max_nesting: int = MAX_NESTING) -> dict[str, Any]:
    """Parse a TOML document with bounded nesting; every failure is ``error(reason)``."""
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as exc:
        raise error(f"not UTF-8 text (byte {exc.start})") from exc
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise error(f"not valid TOML: {exc}") from exc
    except RecursionError as exc:
        raise error(f"nested too deeply (rigfit files are at most {max_nesting} levels deep)") from exc
    if _depth_over(doc, max_nesting):
        raise error(f"nested more than {max_nesting} levels deep; rigfit files are never nested so deeply")
    return doc

