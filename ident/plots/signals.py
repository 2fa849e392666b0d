"""Time plots of logged signals: one strip per signal, inputs above outputs, shared time axis."""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ..errors import OptionError
from ._text import literal

__all__ = ["SIGNAL_ROLES", "plot_signals", "plot_log", "zoom_window"]

#: Roles a plotted signal can have; they set its colour.
SIGNAL_ROLES: tuple[str, ...] = ("input", "output", "other")

_INK = "#1f2a36"
_GRID = "#d5dde4"
_ROLE_COLOURS = {"input": "#b45309", "output": "#1d4e89", "other": "#4b5563"}
_ROLE_FILL = {"input": "#fbf3e8", "output": "#eef3fa", "other": "#ffffff"}
_MAX_POINTS = 4000  # envelope points per strip; more add nothing at screen resolution
#: A signal crossing its median more often than once per this many envelope points draws as
#: a solid block: the figure then adds a zoomed window where single transitions show.
_DENSE_POINTS_PER_CROSSING = 8
#: Median crossings of the densest signal the zoomed window aims to show.
ZOOM_CROSSINGS = 24


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


def _crossings(x: np.ndarray) -> int:
    """Count the times a signal crosses its median (a binary signal: its transitions)."""
    if x.size < 2:
        return 0
    above = x > np.median(x)
    return int(np.count_nonzero(above[1:] != above[:-1]))


def zoom_window(signals: Sequence[Any], max_points: int = _MAX_POINTS) -> tuple[int, int] | None:
    """Sample range ``[lo, hi)`` of a zoomed window, or ``None`` when every signal reads at full length.

    A window is needed when some signal crosses its median more often than once per
    ``_DENSE_POINTS_PER_CROSSING`` envelope points (a fast binary input draws as a
    solid block). The window holds about :data:`ZOOM_CROSSINGS` crossings of the
    densest signal, at least 20 samples, and at most a quarter of the record, so
    it never covers the whole record; it sits in the middle of the record.
    """
    arrays = [np.asarray(x, dtype=float).ravel() for x in signals]
    n = min(a.size for a in arrays) if arrays else 0
    if n < 80:
        return None
    densest = max(_crossings(a[:n]) for a in arrays)
    if densest * _DENSE_POINTS_PER_CROSSING <= min(n, max_points):
        return None
    width = int(min(n // 4, max(20, round(ZOOM_CROSSINGS * n / densest))))
    lo = n // 2 - width // 2
    return lo, lo + width


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
        When a signal changes too often to read at full length (a fast binary
        input would draw as a solid block), a second column shows a zoomed
        window (:func:`zoom_window`) of every signal sample by sample, shaded
        on the full record; never when ``axes`` or ``times`` are given.
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
    window = None
    if times is None and axes is None:
        window = zoom_window([v for _, v in signals])
    zooms: list[Any] = []
    if axes is not None:
        axes = list(axes)
        if len(axes) != len(signals):
            raise OptionError(f"axes must hold {len(signals)} entries; got {len(axes)}")
        fig = axes[0].figure
    else:
        if fig is None:
            fig = Figure(figsize=(9.0 if window is None else 12.0, 1.0 + 1.45 * len(signals)), layout="constrained")
        if window is None:
            axes = list(fig.subplots(len(signals), 1, sharex=True, squeeze=False)[:, 0])
        else:
            grid = fig.subplots(len(signals), 2, squeeze=False, gridspec_kw={"width_ratios": (2.6, 1.0)})
            axes = list(grid[:, 0])
            zooms = list(grid[:, 1])
            for ax in axes[1:]:
                ax.sharex(axes[0])
            for ax in zooms[1:]:
                ax.sharex(zooms[0])
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
        if zooms:
            _draw_zoom(ax, zooms[k], t, x, window, role)
    axes[-1].set_xlabel("time [s]", color=_INK, fontsize=9)
    if zooms:
        for ax in axes[:-1]:
            ax.tick_params(labelbottom=False)
        for ax in zooms[:-1]:
            ax.tick_params(labelbottom=False)
        zooms[0].set_title(f"zoom: {window[1] - window[0]} samples (shaded on the left)", fontsize=8,
                           color=_INK, loc="left")
        zooms[-1].set_xlabel("time [s]", color=_INK, fontsize=9)
    if title:
        fig.suptitle(literal(title), color=_INK, fontsize=10, x=0.01, ha="left")
    return fig


def _draw_zoom(full: Any, ax: Any, t: np.ndarray, x: np.ndarray, window: tuple[int, int], role: str) -> None:
    """Draw samples ``window`` of one signal as steps (each sample held) and shade them on ``full``."""
    lo, hi = window
    full.axvspan(t[lo], t[hi - 1], color="#f2c9a6", alpha=0.6, lw=0, zorder=0)
    ax.set_facecolor(_ROLE_FILL[role])
    ax.step(t[lo:hi], x[lo:hi], where="post", color=_ROLE_COLOURS[role], linewidth=0.9)
    ax.grid(True, color=_GRID, linewidth=0.6)
    ax.tick_params(colors=_INK, labelsize=8, length=2.5)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.margins(x=0.0, y=0.08)


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
