"""One conversion of results to JSON-ready Python values, for every JSON rigfit writes."""

from __future__ import annotations

import math
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["json_ready"]


def json_ready(obj: Any) -> Any:
    """Return ``obj`` with numpy values as Python ones, recursively.

    Dict keys become strings; arrays and tuples become lists; non-finite floats
    become ``None`` (JSON has no NaN or infinity); complex numbers become
    ``[re, im]``; paths become strings. Anything else is returned as it is.
    """
    if isinstance(obj, dict):
        return {str(k): json_ready(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_ready(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if isinstance(obj, complex):
        return [json_ready(obj.real), json_ready(obj.imag)]
    if isinstance(obj, Path):
        return str(obj)
    return obj
