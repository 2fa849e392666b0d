"""Time plots of logged signals: one strip per signal, inputs above outputs, shared time axis."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ..errors import OptionError
from ._text import literal

__all__ = ["SIGNAL_ROLES", "plot_signals", "plot_log"]

#: Roles a plotted signal can have; they set its colour.
SIGNAL_ROLES: tuple[str, ...] = ("input", "output", "other")

_INK = "#1f2a36"
_GRID = "#d5dde4"
_ROLE_COLOURS = {"input": "#b45309", "output": "#1d4e89", "other": "#4b5563"}
_ROLE_FILL = {"input": "#fbf3e8", "output": "#eef3fa", "other": "#ffffff"}
_MAX_POINTS = 4000  # envelope points per strip; more add nothing at screen resolution


def _envelope(t: np.ndarray, x: np.ndarray, max_points: int) -> tuple[np.ndarray, np.ndarray]:
    """Min/max envelope of a long trace: two points per bin, in time order."""
    n = x.shape[0]
    if n <= max_points:
        return t, x
    bins = max_points // 2
    size = n // bins
    stop = bins * size
    xs = x[:stop].reshape(bins, size)
    ts = t[:stop].reshape(bins, size)
    lo = xs.argmin(axis=1)
    hi = xs.argmax(axis=1)
    first = np.minimum(lo, hi)
    second = np.maximum(lo, hi)
    rows = np.arange(bins)
    idx_t = np.column_stack([ts[rows, first], ts[rows, second]]).ravel()
    idx_x = np.column_stack([xs[rows, first], xs[rows, second]]).ravel()
    if stop < n:
        idx_t = np.concatenate([idx_t, t[stop:]])
        idx_x = np.concatenate([idx_x, x[stop:]])
    return idx_t, idx_x


def plot_signals(
    time: Any,
    signals: Sequence[tuple[str, Any]],
    *,
    roles: Sequence[str] | None = None,
    segments: Sequence[tuple[int, int]] | None = None,
    fig: Any | None = None,
    axes: Sequence[Any] | None = None,
    title: str | None = None,
    times: Sequence[Any] | None = None,
) -> Any:
    """Draw signals against time, one strip each.

    Parameters
    ----------
    time : array_like, shape (N,)
        Time stamps in s.
    signals : sequence of (label, array_like of shape (N,))
        Label (name with unit) and samples of each signal, top to bottom.
    roles : sequence of str, optional
        One of ``SIGNAL_ROLES`` per signal (sets the colour); default "other".
    segments : sequence of (int, int), optional
        ``[start, stop)`` ranges of contiguous segments; the trace is broken
        between them and the gaps are shaded.
    fig : matplotlib.figure.Figure, optional
        Figure to draw in (subplots are added to it). A new figure, not
        registered with pyplot, when neither ``fig`` nor ``axes`` is given.
    axes : sequence of matplotlib.axes.Axes, optional
        One axes per signal, used instead of creating strips.
    title : str, optional
        Figure title.
    times : sequence of array_like, optional
        One time axis per signal, for signals recorded at different rates (a
        measurement file's channel groups); replaces ``time`` and excludes
        ``segments``.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure

    if times is not None:
        if len(times) != len(signals):
            raise OptionError(f"times must hold {len(signals)} entries; got {len(times)}")
        if segments:
            raise OptionError("segments apply to one shared time axis; got times per signal")
    t = np.asarray(time if times is None else times[0], dtype=float).ravel()
    if not signals:
        raise OptionError("signals must hold at least one (label, values) pair")
    roles = tuple(roles) if roles is not None else ("other",) * len(signals)
    if len(roles) != len(signals):
        raise OptionError(f"roles must hold {len(signals)} entries; got {len(roles)}")
    for role in roles:
        if role not in SIGNAL_ROLES:
            raise OptionError(f"roles must be among {SIGNAL_ROLES}; got {role!r}")
    segs = tuple(segments) if segments else ((0, t.shape[0]),)
    if axes is not None:
        axes = list(axes)
        if len(axes) != len(signals):
            raise OptionError(f"axes must hold {len(signals)} entries; got {len(axes)}")
        fig = axes[0].figure
    else:
        if fig is None:
            fig = Figure(figsize=(9.0, 1.0 + 1.45 * len(signals)), layout="constrained")
        axes = list(fig.subplots(len(signals), 1, sharex=True, squeeze=False)[:, 0])
    for k, (ax, (label, values), role) in enumerate(zip(axes, signals, roles, strict=True)):
        if times is not None:
            t = np.asarray(times[k], dtype=float).ravel()
            segs = ((0, t.shape[0]),)
        x = np.asarray(values, dtype=float).ravel()
        if x.shape != t.shape:
            raise OptionError(f"signal {label!r} has {x.shape[0]} samples; time has {t.shape[0]}")
        ax.set_facecolor(_ROLE_FILL[role])
        per_segment = max(200, _MAX_POINTS // len(segs))
        for start, stop in segs:
            ts, xs = _envelope(t[start:stop], x[start:stop], per_segment)
            ax.plot(ts, xs, color=_ROLE_COLOURS[role], linewidth=0.8, solid_joinstyle="round")
        for (_, stop), (start, _) in zip(segs[:-1], segs[1:], strict=True):
            ax.axvspan(t[stop - 1], t[start], color=_GRID, alpha=0.7, linewidth=0)
        ax.set_ylabel(literal(label), color=_INK, fontsize=8.5, rotation=0, ha="right", va="center")
        ax.grid(True, color=_GRID, linewidth=0.6)
        ax.tick_params(colors=_INK, labelsize=8, length=2.5)
        for side in ("top", "right"):
            ax.spines[side].set_visible(False)
        for side in ("left", "bottom"):
            ax.spines[side].set_color(_INK)
            ax.spines[side].set_linewidth(0.6)
        ax.margins(x=0.0, y=0.08)
        ax.text(
            1.0, 1.0, role if role != "other" else "", transform=ax.transAxes,
            ha="right", va="bottom", fontsize=7, color=_ROLE_COLOURS[role], style="italic",
        )
    axes[-1].set_xlabel("time [s]", color=_INK, fontsize=9)
    if title:
        fig.suptitle(literal(title), color=_INK, fontsize=10, x=0.01, ha="left")
    return fig


def plot_log(log: Any, *, fig: Any | None = None, title: str | None = None) -> Any:
    """Draw the inputs and outputs of a :class:`ident.io.log.Log`.

    Parameters
    ----------
    log : ident.io.log.Log
    fig : matplotlib.figure.Figure, optional
        Figure to draw in; a new one when omitted.
    title : str, optional
        Default: the log's file name.

    Returns
    -------
    matplotlib.figure.Figure
    """
    signals = []
    roles = []
    for j, (name, unit) in enumerate(zip(log.input_names, log.input_units, strict=True)):
        signals.append((f"{name} [{unit}]" if unit else name, log.u[:, j]))
        roles.append("input")
    for j, (name, unit) in enumerate(zip(log.output_names, log.output_units, strict=True)):
        signals.append((f"{name} [{unit}]" if unit else name, log.y[:, j]))
        roles.append("output")
    return plot_signals(
        log.time, signals, roles=roles, segments=log.segments, fig=fig,
        title=title if title is not None else log.source.file_name,
    )
