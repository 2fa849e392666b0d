"""Reading expectation files (TOML with an ``[expect]`` table)."""

from __future__ import annotations

import os
import tomllib
from pathlib import Path

from .._validate import did_you_mean
from ..assess.expectations import Expectations
from ..errors import PipelineError

__all__ = ["load_expectations"]


def load_expectations(path: str | os.PathLike) -> Expectations:
    """Read an expectations file.

    Parameters
    ----------
    path : path-like
        A TOML file whose only top-level table is ``[expect]``; see
        :mod:`ident.assess.expectations` for the keys.

    Returns
    -------
    Expectations

    Raises
    ------
    ident.errors.PipelineError
        The file is not valid TOML, has no ``[expect]`` table, or an entry is
        unknown or of the wrong type.
    FileNotFoundError
        The file does not exist.
    """
    source = os.fspath(path)
    text = Path(source).read_bytes()
    try:
        data = tomllib.loads(text.decode("utf-8"))
    except UnicodeDecodeError as exc:
        raise PipelineError("not UTF-8 text", path=source) from exc
    except tomllib.TOMLDecodeError as exc:
        raise PipelineError(f"not valid TOML: {exc}", path=source) from exc
    for key in data:
        if key != "expect":
            raise PipelineError(
                f"unknown key {key!r}; an expectations file holds one table, [expect]",
                path=source,
                key_path=str(key),
                hint=did_you_mean(key, ["expect"]),
            )
    if "expect" not in data:
        raise PipelineError("no [expect] table", path=source, hint="start the file with [expect]")
    return Expectations.from_mapping(data["expect"], source=source)
