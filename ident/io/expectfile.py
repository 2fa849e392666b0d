"""Reading expectation files (TOML with an ``[expect]`` table)."""

from __future__ import annotations

import os

from .._validate import did_you_mean
from ..assess.expectations import Expectations
from ..errors import PipelineError

__all__ = ["load_expectations", "MAX_EXPECTATIONS_BYTES"]

#: Largest expectations file rigfit reads, in bytes.
MAX_EXPECTATIONS_BYTES = 2**20


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
        Also: the file does not exist, is not a regular file, is larger than
        :data:`MAX_EXPECTATIONS_BYTES` or is nested too deeply.
    """
    from .inputs import parse_toml, read_input_bytes

    source = os.fspath(path)

    def error(reason: str) -> PipelineError:
        return PipelineError(reason, path=source)

    data = parse_toml(read_input_bytes(source, error, what="expectations file", max_bytes=MAX_EXPECTATIONS_BYTES),
                      error)
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
