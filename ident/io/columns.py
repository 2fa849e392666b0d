"""Choosing a log's columns (channels) by name, shell-style pattern or position.

A selector is one of

* a **name**: the bare column name (a unit in brackets is ignored), matched
  case-insensitively; in a measurement file (ASAM MDF, HDF5) also the qualified
  ``group/name``, which is needed when the bare name occurs in several groups;
* a **pattern** holding ``*``, ``?`` or ``[...]``: a shell-style glob
  (:mod:`fnmatch`), case-insensitive, matched against the bare names (against
  ``group/name`` when it holds a ``/``); where several columns may be given (``--input`` of ``fit``, pipeline
  ``inputs``) it takes every match in file order, where one column is expected
  (``--time``, the columns of ``check``) a pattern matching several is an error
  listing them;
* a **position** ``#N``: the N-th column as ``rigfit inspect`` lists it (1-based).

A selector that matches nothing is an error listing the columns and the
nearest name ("did you mean").
"""

from __future__ import annotations

import difflib
import fnmatch
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

from ..errors import LogFormatError

__all__ = ["Entry", "is_pattern", "resolve", "resolve_all"]

_GLOB_CHARS = frozenset("*?[")
_POSITION_RE = re.compile(r"^#\s*(\d+)$")
_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*(?:\[[^\]]*\]|\([^)]*\))\s*$")
#: A unit after a selector: ``[unit]`` after a space (``name[12]`` is a glob class), or ``(unit)``.
_SELECTOR_UNIT_RE = re.compile(r"^(?P<name>.*?)(?:\s+\[[^\]]*\]|\s*\([^)]*\))\s*$")
#: Columns listed in full in a "no such column" message before it says "... and N more".
_LISTED = 40


@dataclass(frozen=True, slots=True)
class Entry:
    """One selectable column: bare name, unit, and group (``""`` in a flat table)."""

    name: str
    unit: str = ""
    group: str = ""

    @property
    def qualified(self) -> str:
        """``group/name``, or the bare name without a group."""
        return f"{self.group}/{self.name}" if self.group else self.name


def is_pattern(selector: str) -> bool:
    """Tell whether ``selector`` is a shell-style pattern (holds ``*``, ``?`` or ``[``).

    A unit written after the name (``"speed [rad/s]"``) does not make it a pattern.
    """
    return bool(_GLOB_CHARS & set(_without_unit(selector)))


def _without_unit(selector: str) -> str:
    text = selector.strip()
    m = _SELECTOR_UNIT_RE.match(text)
    return m.group("name").strip() if m and m.group("name").strip() else text


def resolve(
    selector: str,
    entries: Sequence[Entry],
    *,
    path: str,
    single: bool = True,
    exclude: Iterable[int] = (),
    word: str = "column",
) -> list[int]:
    """Return the indices of the entries ``selector`` names.

    Parameters
    ----------
    selector : str
        A name, ``group/name``, a shell-style pattern or ``#N``.
    entries : sequence of Entry
        The columns in listing order.
    path : str
        The log file, for messages.
    single : bool, default True
        Exactly one column is expected: a pattern matching several is an error.
    exclude : iterable of int
        Columns a pattern never takes (the time column).
    word : str
        ``"column"`` or ``"channel"``, for messages.

    Returns
    -------
    list of int
        One index for a name or position; the matches in listing order for a pattern.

    Raises
    ------
    LogFormatError
        Nothing matches (with the nearest name), a position out of range, a bare
        name found in several groups, or several matches where one was expected.
    """
    text = selector.strip()
    m = _POSITION_RE.match(text)
    if m:
        k = int(m.group(1))
        if not 1 <= k <= len(entries):
            raise LogFormatError(f"no {word} #{k}: the log has {len(entries)} {word}s (#1-#{len(entries)})",
                                 path=path, hint=f"'rigfit inspect {_base(path)}' lists them with their numbers")
        return [k - 1]
    if is_pattern(text):
        return _glob(_without_unit(text), entries, path=path, single=single, exclude=set(exclude), word=word)
    return [_by_name(text, entries, path=path, word=word)]


def resolve_all(
    selectors: Sequence[str],
    entries: Sequence[Entry],
    *,
    path: str,
    single: bool = False,
    exclude: Iterable[int] = (),
    word: str = "column",
) -> list[int]:
    """Resolve several selectors in order (see :func:`resolve`); a pattern may add several."""
    out: list[int] = []
    skip = set(exclude)
    for sel in selectors:
        out.extend(resolve(sel, entries, path=path, single=single, exclude=skip, word=word))
    return out


def _base(path: str) -> str:
    import os

    return os.path.basename(path)


def _bare(name: str) -> str:
    text = name.strip().strip('"').strip()
    m = _UNIT_RE.match(text)
    return m.group("name").strip() if m and m.group("name").strip() else text


def _cut(text: str, limit: int = 60) -> str:
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _listing(entries: Sequence[Entry]) -> str:
    shown = [_cut(f"{e.qualified} [{e.unit}]" if e.unit else e.qualified) for e in entries[:_LISTED]]
    more = f" ... and {len(entries) - _LISTED} more" if len(entries) > _LISTED else ""
    return ", ".join(shown) + more


def _by_name(text: str, entries: Sequence[Entry], *, path: str, word: str) -> int:
    key = _bare(text).lower()
    exact = [k for k, e in enumerate(entries) if e.qualified.lower() == key]
    if len(exact) == 1:
        return exact[0]
    bare = [k for k, e in enumerate(entries) if e.name.lower() == key]
    if len(bare) == 1:
        return bare[0]
    if len(bare) > 1 or len(exact) > 1:
        found = bare if len(bare) > 1 else exact
        names = ", ".join(entries[k].qualified for k in found)
        raise LogFormatError(
            f"{word} name {_bare(text)!r} is not unique: {names}", path=path,
            hint=(f"name it with its group, e.g. {entries[found[0]].qualified!r}"
                  if len({entries[k].qualified for k in found}) == len(found)
                  else "choose it by position (#N; 'rigfit inspect' lists the numbers)"),
        )
    candidates = [e.name for e in entries] + [e.qualified for e in entries if e.group]
    near = difflib.get_close_matches(key, [c.lower() for c in candidates], n=1, cutoff=0.6)
    nearest = None
    if near:
        nearest = next(c for c in candidates if c.lower() == near[0])
    raise LogFormatError(
        f"no {word} named {_bare(text)!r}" + (f"; nearest: {nearest!r}" if nearest else "")
        + f"; available: {_listing(entries)}",
        path=path, hint=f"did you mean {nearest!r}?" if nearest else None,
    )


def _glob(text: str, entries: Sequence[Entry], *, path: str, single: bool, exclude: set[int],
          word: str) -> list[int]:
    pattern = text.lower()
    # a pattern with a '/' is matched against group/name, any other against the bare names
    found = [
        k for k, e in enumerate(entries)
        if k not in exclude and fnmatch.fnmatchcase((e.qualified if "/" in pattern else e.name).lower(), pattern)
    ]
    if not found:
        plain = re.sub(r"[*?\[\]]", "", pattern)
        names = [e.name for k, e in enumerate(entries) if k not in exclude]
        near = difflib.get_close_matches(plain, [n.lower() for n in names], n=1, cutoff=0.5)
        nearest = next((n for n in names if near and n.lower() == near[0]), None)
        raise LogFormatError(
            f"no {word} matches the pattern {text!r} (shell-style, case-insensitive)"
            + (f"; nearest: {nearest!r}" if nearest else "") + f"; available: {_listing(entries)}",
            path=path, hint=f"did you mean {nearest!r}?" if nearest else None,
        )
    if single and len(found) > 1:
        names = ", ".join(entries[k].qualified for k in found)
        raise LogFormatError(
            f"the pattern {text!r} matches {len(found)} {word}s where one is expected: {names}",
            path=path, hint="name one of them, or narrow the pattern",
        )
    return found
