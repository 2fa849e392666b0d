"""Rate (slew) limiting of sampled signals, once through or in periodic steady state.

A rig input with a rate limit cannot change by more than ``R * T`` between two
samples. :func:`rate_limit` applies that limit the way a slew limiter does
(move towards the target by at most one step per sample, follow it exactly
once it is reachable); :func:`periodic_rate_limit` finds the periodic state the
limiter settles into when the target repeats, so that a rate-limited periodic
test signal is still exactly periodic. Pure numpy; the loop runs once per
stretch the limiter cannot follow, each stretch in one vectorised step.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from .._validate import int_in_range, positive_float
from ..errors import IdentificationError

__all__ = ["rate_limit", "periodic_rate_limit"]


def rate_limit(x: Any, max_step: float, *, start: float | None = None) -> np.ndarray:
    """Slew-limit a signal: each sample moves towards the target by at most ``max_step``.

    Parameters
    ----------
    x : array_like, shape (N,)
        Target samples.
    max_step : float
        Largest change between consecutive samples (rate limit times sample time).
    start : float, optional
        Value before the first sample; default: the first sample is ``x[0]``.

    Returns
    -------
    numpy.ndarray, shape (N,)
        ``y[k] = y[k-1] + clip(x[k] - y[k-1], -max_step, max_step)``; equal to
        ``x[k]`` exactly wherever the target is reachable. It stays between
        the smallest and largest of ``x`` (and ``start``).
    """
    target = np.asarray(x, dtype=float).ravel()
    step = positive_float(max_step, "max_step")
    out = target.copy()
    n = target.size
    if n == 0:
        return out
    # where a sample that follows its target exactly cannot reach the next target
    jumps = np.flatnonzero(np.abs(np.diff(target)) > step) + 1
    prev = target[0] if start is None else float(start)
    low, high = min(target.min(), prev), max(target.max(), prev)
    k = 0
    while k < n:
        d = target[k] - prev
        if abs(d) <= step:  # caught up: follow the target until the next unreachable step
            out[k] = prev = target[k]
            nxt = int(np.searchsorted(jumps, k + 1))
            if nxt >= jumps.size:
                break
            k = int(jumps[nxt])
            prev = target[k - 1]
            continue
        sign = math.copysign(1.0, d)
        run = _ramp_length(target, k, prev, sign, step)
        out[k:k + run] = prev + sign * step * np.arange(1, run + 1)
        prev = out[k + run - 1]
        k += run
    return np.clip(out, low, high)


def _ramp_length(target: np.ndarray, k: int, prev: float, sign: float, step: float) -> int:
    """Count the samples from ``k`` on during which a ramp from ``prev`` cannot reach the target (at least 1)."""
    width = 64
    while True:
        seg = target[k:k + width]
        ahead = sign * (seg - prev) - step * np.arange(seg.size)
        stop = np.flatnonzero(ahead <= step)
        if stop.size:
            return int(stop[0])
        if k + width >= target.size:
            return int(seg.size)
        width *= 4


def periodic_rate_limit(x: Any, max_step: float, *, passes: int = 5) -> np.ndarray:
    """Periodic steady state of the slew limiter driven by a periodic signal.

    Parameters
    ----------
    x : array_like, shape (N,)
        One period of the target.
    max_step : float
        Largest change between consecutive samples, the wrap-around from the
        last sample to the first included.
    passes : int
        Plain passes over the period tried first (default 5); most signals
        settle within them.

    Returns
    -------
    numpy.ndarray, shape (N,)
        One period ``y`` that the limiter repeats: every step of ``y``,
        ``y[0] - y[-1]`` included, is at most ``max_step`` (to rounding).

    Raises
    ------
    IdentificationError
        No periodic state found (not expected: one always exists).

    Notes
    -----
    The value ``F(a)`` at the end of a period started from ``a`` is
    non-decreasing in ``a`` and moves less than ``a`` does (the limiter never
    expands differences), and maps the range of the target into itself, so
    ``F(a) = a`` has a solution, found by bisection when plain passes have
    not settled. The solutions form an interval (a limiter that never catches
    up with its target can run at any level); the middle one is returned.
    """
    target = np.asarray(x, dtype=float).ravel()
    step = positive_float(max_step, "max_step")
    y = rate_limit(target, step, start=target[-1])
    for _ in range(int_in_range(passes, "passes", 0)):
        nxt = rate_limit(target, step, start=y[-1])
        if np.array_equal(nxt, y):
            return y
        y = nxt
    low, high = float(target.min()), float(target.max())
    tol = 1e-12 * max(1.0, abs(low), abs(high))

    def gap(a: float) -> float:
        return rate_limit(target, step, start=a)[-1] - a

    first = _bisect(lambda a: gap(a) > tol, low, high)  # lowest start that comes back to itself
    last = _bisect(lambda a: gap(a) >= -tol, low, high)  # highest
    y = rate_limit(target, step, start=0.5 * (first + last))
    if abs(y[0] - y[-1]) > step * (1 + 1e-9):
        raise IdentificationError("the rate-limited signal did not settle into a periodic state")
    return y


def _bisect(below: Any, low: float, high: float) -> float:
    """Return the boundary in ``[low, high]`` where the monotone predicate ``below`` turns false."""
    for _ in range(200):
        mid = 0.5 * (low + high)
        if mid in (low, high):
            break
        if below(mid):
            low = mid
        else:
            high = mid
    return 0.5 * (low + high)
