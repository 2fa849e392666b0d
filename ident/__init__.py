"""rigfit: turn test-rig logs into checked linear plant models.

The import package is ``ident``. The numeric core takes numpy arrays and
returns frozen dataclasses; it is three sub-packages, imported in one
direction: :mod:`ident.estimate` (data preparation and estimators) uses
:mod:`ident.assess` (judging a model), which uses :mod:`ident.lti` (model
objects and linear-systems algebra). File handling lives in :mod:`ident.io`,
figures in :mod:`ident.plots` and the command line in :mod:`ident.cli`.

For notebooks and scripts, :func:`fit` takes a pandas DataFrame (or a log file)
and returns a :class:`ModelResult` (``.model``, ``.modes``, ``.check(df)``,
``.save(path)``); :func:`load_model` reads a model file into the same object.
These load on first use (:mod:`ident.api`), so ``import ident`` stays cheap.
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
    ResampleError,
    ResamplingWarning,
    UnstableModelWarning,
)

_LAZY = {
    "fit": "api",
    "load_model": "api",
    "ModelResult": "api",
    "CheckResult": "api",
    "ModeFrame": "api",
    "OperatingPoint": "lti.models",
    "StateSpaceModel": "lti.models",
    "TransferFunctionModel": "lti.models",
}


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
    "ResampleError",
    "ResamplingWarning",
    "UnstableModelWarning",
    "OperatingPoint",
    "StateSpaceModel",
    "TransferFunctionModel",
    "fit",
    "load_model",
    "ModelResult",
    "CheckResult",
    "ModeFrame",
]
