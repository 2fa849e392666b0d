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
from .models import OperatingPoint, StateSpaceModel, TransferFunctionModel

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
