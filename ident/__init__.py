"""rigfit: turn test-rig logs into checked linear plant models.

The import package is ``ident``. The numeric core (models, conversions,
estimators, modes, diagnostics) takes numpy arrays and returns frozen
dataclasses; file handling lives in :mod:`ident.io` and the command line in
:mod:`ident.cli`.
"""

from ._version import __version__
from .errors import (
    IdentError,
    IdentificationError,
    IdentWarning,
    IllConditionedWarning,
    LogFormatError,
    ModelError,
    ModelFileError,
    OptionError,
    PipelineError,
    PoorExcitationWarning,
    UnstableModelWarning,
)

_LAZY = {"OperatingPoint": "models", "StateSpaceModel": "models", "TransferFunctionModel": "models"}


def __getattr__(name: str):
    # numpy-backed types load on first use, so `rigfit --help` starts instantly
    if name in _LAZY:
        import importlib

        return getattr(importlib.import_module(f".{_LAZY[name]}", __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")

__all__ = [
    "__version__",
    "IdentError",
    "IdentificationError",
    "IdentWarning",
    "IllConditionedWarning",
    "LogFormatError",
    "ModelError",
    "ModelFileError",
    "OptionError",
    "PipelineError",
    "PoorExcitationWarning",
    "UnstableModelWarning",
    "OperatingPoint",
    "StateSpaceModel",
    "TransferFunctionModel",
]
