"""Validation helpers called at the top of every public core function.

Each helper names the parameter, says what is allowed and shows what arrived,
and raises :class:`ident.errors.OptionError` (a ``ValueError``);
:func:`options_from_mapping`, the one way a pipeline table becomes an options
dataclass, raises :class:`ident.errors.PipelineError` with the key path.
"""

from __future__ import annotations

import difflib
import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import fields
from typing import Any

import numpy as np

from .errors import OptionError, PipelineError

__all__ = [
    "SAMPLE_TIME_RANGE_S",
    "MAX_SIGNAL_MAGNITUDE",
    "as_signal",
    "sample_time_value",
    "sample_rate_value",
    "as_matrix",
    "positive_float",
    "optional_positive_float",
    "int_in_range",
    "fraction",
    "one_of",
    "names_tuple",
    "did_you_mean",
    "options_from_mapping",
]


#: Sample times rigfit accepts, in s: from 1 ns (1 GHz) to 1e6 s (about 11.6 days between
#: samples). Outside this range a rate is not a rig's, and the arithmetic on it (Nyquist
#: frequencies, ``exp(s T)``, time stamps) overflows or underflows double precision.
SAMPLE_TIME_RANGE_S = (1e-9, 1e6)
#: Largest magnitude of a signal sample. Sums of squares over a long log and the fourth
#: powers of the normality test must stay below the double-precision limit (about
#: 1.8e308): (1e50)^4 times 1e8 samples is 1e208, with room for the factors around them.
MAX_SIGNAL_MAGNITUDE = 1e50


def _short(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


def as_signal(x: Any, name: str, *, ndim: int = 2, finite: bool = True, bounded: bool = False) -> np.ndarray:
    """Return ``x`` as a float64 array of samples.

    A 1-D input with ``ndim=2`` becomes one column ``(n_samples, 1)``. The caller's
    array is never modified; a copy is made only when a conversion is needed.
    With ``bounded`` (measured data entering an estimator), samples beyond
    :data:`MAX_SIGNAL_MAGNITUDE` are refused.
    """
    try:
        arr = np.asarray(x, dtype=float)
    except (TypeError, ValueError) as exc:
        raise OptionError(f"{name} must be numeric; got {_short(x)}") from exc
    if ndim == 2 and arr.ndim == 1:
        arr = arr[:, None]
    if arr.ndim != ndim:
        raise OptionError(f"{name} must be a {ndim}-D array; got shape {arr.shape}")
    if finite and not np.all(np.isfinite(arr)):
        bad = np.argwhere(~np.isfinite(arr))[0]
        raise OptionError(
            f"{name} must be finite; sample {int(bad[0])} is {float(arr[tuple(bad)])}"
        )
    if bounded and arr.size and (arr.max() > MAX_SIGNAL_MAGNITUDE or arr.min() < -MAX_SIGNAL_MAGNITUDE):
        bad = np.argwhere(np.abs(arr) > MAX_SIGNAL_MAGNITUDE)[0]
        raise OptionError(
            f"{name}: sample {int(bad[0])} is {float(arr[tuple(bad)]):.3g}; values beyond "
            f"+-{MAX_SIGNAL_MAGNITUDE:g} overflow double precision in the sums of squares and "
            "fourth powers the estimators form",
            hint="express the signal in other units (scale it) before fitting",
        )
    return arr


def as_matrix(x: Any, name: str, shape: tuple[int | None, int | None] | None = None) -> np.ndarray:
    """Return ``x`` as a finite 2-D float64 array, optionally of a given shape."""
    arr = as_signal(x, name, ndim=2)
    if shape is not None:
        for axis, want in enumerate(shape):
            if want is not None and arr.shape[axis] != want:
                raise OptionError(
                    f"{name} must have shape {tuple('*' if s is None else s for s in shape)}; "
                    f"got {arr.shape}"
                )
    return arr


def _is_number(value: Any) -> bool:
    # bool is an int subclass and a string converts with float(); neither is a number here
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))


def positive_float(value: Any, name: str) -> float:
    """Return ``value`` as a finite float > 0 (booleans and strings are refused)."""
    if not _is_number(value):
        raise OptionError(f"{name} must be a positive number; got {_short(value)}")
    out = float(value)
    if not math.isfinite(out) or out <= 0:
        raise OptionError(f"{name} must be a positive number; got {_short(value)}")
    return out


def sample_time_value(value: Any, name: str = "sample_time") -> float:
    """Return ``value`` as a sample time in s within :data:`SAMPLE_TIME_RANGE_S`."""
    low, high = SAMPLE_TIME_RANGE_S
    out = positive_float(value, name)
    if not low * (1 - 1e-12) <= out <= high * (1 + 1e-12):
        raise OptionError(
            f"{name} must be between {low:g} s and {high:g} s (sample rates from {1 / high:g} Hz to "
            f"{1 / low:g} Hz); got {out:g} s",
        )
    return out


def sample_rate_value(value: Any, name: str = "sample_rate") -> float:
    """Return ``value`` as a sample rate in Hz whose sample time is within :data:`SAMPLE_TIME_RANGE_S`."""
    low, high = SAMPLE_TIME_RANGE_S
    out = positive_float(value, name)
    if not (1 - 1e-12) / high <= out <= (1 + 1e-12) / low:
        raise OptionError(f"{name} must be between {1 / high:g} Hz and {1 / low:g} Hz; got {out:g} Hz")
    return out


def optional_positive_float(value: Any, name: str) -> float | None:
    """Like :func:`positive_float` but ``None`` passes through."""
    return None if value is None else positive_float(value, name)


def int_in_range(value: Any, name: str, low: int, high: int | None = None) -> int:
    """Return ``value`` as an int in ``[low, high]`` (``high=None``: no upper bound)."""
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)):
        if isinstance(value, float) and value.is_integer():
            value = int(value)
        else:
            raise OptionError(f"{name} must be an integer in {_range(low, high)}; got {_short(value)}")
    value = int(value)
    if value < low or (high is not None and value > high):
        raise OptionError(f"{name} must be an integer in {_range(low, high)}; got {value}")
    return value


def _range(low: int, high: int | None) -> str:
    return f"[{low}, {high}]" if high is not None else f"[{low}, inf)"


def fraction(value: Any, name: str, *, low: float = 0.0, high: float = 1.0,
             inclusive: bool = False) -> float:
    """Return ``value`` as a float strictly inside ``(low, high)`` (or closed if inclusive)."""
    brackets = f"[{low}, {high}]" if inclusive else f"({low}, {high})"
    if not _is_number(value):
        raise OptionError(f"{name} must be a number in {brackets}; got {_short(value)}")
    out = float(value)
    ok = (low <= out <= high) if inclusive else (low < out < high)
    if not ok or not math.isfinite(out):
        raise OptionError(f"{name} must be a number in {brackets}; got {_short(value)}")
    return out


def one_of(value: Any, name: str, allowed: Sequence[str]) -> str:
    """Return ``value`` if it is one of ``allowed``; no aliases, no case folding."""
    if value not in allowed:
        raise OptionError(f"{name} must be one of {', '.join(map(repr, allowed))}; got {_short(value)}")
    return value


def names_tuple(names: Iterable[str] | None, name: str, count: int, prefix: str) -> tuple[str, ...]:
    """Return ``count`` signal names; ``None`` gives ``prefix1, prefix2, ...``."""
    if names is None:
        return tuple(f"{prefix}{i + 1}" for i in range(count))
    out = tuple(str(n) for n in names)
    if len(out) != count:
        raise OptionError(f"{name} must hold {count} names; got {len(out)}")
    return out


def did_you_mean(value: str, valid: Sequence[str]) -> str | None:
    """Return the hint ``"did you mean 'x'?"`` for the valid word nearest ``value``, or None."""
    close = difflib.get_close_matches(str(value), list(valid), n=1, cutoff=0.5)
    return f"did you mean {close[0]!r}?" if close else None


def options_from_mapping(cls: type, mapping: Mapping[str, Any], key_path: str) -> Any:
    """Build the options dataclass ``cls`` from a mapping such as a parsed TOML table.

    Keys must be field names of ``cls`` (missing ones take their defaults);
    ``key_path`` is the dotted location of the table, used in messages.

    Raises
    ------
    PipelineError
        The mapping is not a table, has an unknown key (with the valid keys and
        the nearest one as a hint), or ``cls`` refuses a value.
    """
    if not isinstance(mapping, Mapping):
        raise PipelineError(
            f"expected a table; got {type(mapping).__name__}", key_path=key_path or None
        )
    valid = [f.name for f in fields(cls)]
    for key in mapping:
        if key not in valid:
            where = f"{key_path}.{key}" if key_path else str(key)
            raise PipelineError(
                f"unknown key; valid keys are {', '.join(valid)}",
                key_path=where,
                hint=did_you_mean(key, valid),
            )
    try:
        return cls(**dict(mapping))
    except OptionError as exc:
        raise PipelineError(str(exc), key_path=key_path or None, hint=exc.hint) from exc
