"""Figures of designed test signals and of periodic measurements.

:func:`designed_signal_figure` shows a designed signal as the engineer will replay
it: the whole record of the first input with its periods (transient periods
shaded, blocks marked), then for each input a zoomed stretch drawn sample by
sample (held values, as the controller outputs them) and the amplitude
spectrum of one period, line by line. :func:`periodic_response_figure` shows
what the periods of a log say about one channel: the frequency response as
points with error bars at the excited lines (and a model's curve if given),
and the output spectrum against the noise floor measured from the periods.
Nothing here changes global matplotlib state.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from ..errors import OptionError
from ._text import literal

__all__ = ["MAX_INPUTS_DRAWN", "zoom_window", "designed_signal_figure", "periodic_response_figure"]

#: Inputs drawn in :func:`designed_signal_figure` (the rest are named in the title).
MAX_INPUTS_DRAWN = 6

_INK = "#1f2a36"
_GRID = "#dfe5ea"
_SIGNAL = "#b45309"
_LINES = "#1d4e89"
_QUIET = "#a3b0bc"
_BAND = "#eef3fa"
_TRANSIENT = "#e4e9ee"
_ZOOM = "#1d4e89"
_MODEL = "#167a6e"
_NOISE = "#7b8a97"
_DISTORT = "#c2410c"
_LIMIT = "#6b7280"
_OVERVIEW_POINTS = 4000
_FLOOR_DB = -100.0


def _style(ax: Any) -> None:
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(colors=_INK, labelsize=7.5, length=2.5)
    ax.grid(True, color=_GRID, lw=0.5)


def zoom_window(signal: Any) -> tuple[int, int]:
    """Return the samples ``[start, stop)`` of the zoomed stretch of a designed signal.

    The stretch holds about twelve cycles of the band's top (at least 60
    samples, at least 30 PRBS bits), never more than one period. It starts at
    the first measured period, or for a chirp ends with it (where the sweep is
    fastest).
    """
    fs = signal.sample_rate_hz
    top = signal.options.band_hz[1]
    length = max(60, math.ceil(12 * fs / top))
    if signal.clock_divider is not None:
        length = max(length, 30 * signal.clock_divider)
    length = min(length, signal.period_samples)
    start = signal.transient_periods * signal.period_samples
    if signal.sweep_hz is not None:
        start += signal.period_samples - length
    return start, start + length


def _envelope(t: np.ndarray, x: np.ndarray, bins: int) -> tuple[np.ndarray, np.ndarray]:
    """Return the smallest and largest sample of each of ``bins`` stretches, in time order."""
    edges = np.linspace(0, x.size, bins + 1).astype(int)
    starts = edges[:-1]
    lo_idx = starts + np.array([np.argmin(x[a:b]) for a, b in zip(edges[:-1], edges[1:], strict=True)])
    hi_idx = starts + np.array([np.argmax(x[a:b]) for a, b in zip(edges[:-1], edges[1:], strict=True)])
    order = np.sort(np.column_stack([lo_idx, hi_idx]), axis=1).ravel()
    return t[order], x[order]


def _label(name: str, unit: str) -> str:
    return literal(f"{name} [{unit}]" if unit else name)


def designed_signal_figure(signal: Any, names: Sequence[str] | None = None, units: Sequence[str] | None = None,
                       *, fig: Any | None = None) -> Any:
    """Draw a designed test signal: overview, zoomed stretch and spectrum of each input.

    Parameters
    ----------
    signal : ident.estimate.signal_design.DesignedSignal
    names, units : sequence of str, optional
        Input names and units for the labels (default ``u1 ...`` and none).
    fig : matplotlib.figure.Figure, optional
        Figure to draw in; a new one (not registered with pyplot) when omitted.

    Returns
    -------
    matplotlib.figure.Figure
    """
    m = signal.n_inputs
    names = list(names) if names is not None else [f"u{j + 1}" for j in range(m)]
    units = list(units) if units is not None else [""] * m
    if len(names) != m or len(units) != m:
        raise OptionError(f"names and units must hold {m} entries each")
    shown = min(m, MAX_INPUTS_DRAWN)
    if fig is None:
        from matplotlib.figure import Figure

        fig = Figure(figsize=(10.5, 2.2 + 2.15 * shown), dpi=100, layout="constrained")
    grid = fig.add_gridspec(1 + shown, 2, width_ratios=(1.15, 1.0), height_ratios=(0.8,) + (1.0,) * shown)
    overview = fig.add_subplot(grid[0, :])
    _draw_overview(overview, signal, _label(names[0], units[0]))
    for j in range(shown):
        _draw_zoom(fig.add_subplot(grid[1 + j, 0]), signal, j, _label(names[j], units[j]))
        _draw_spectrum(fig.add_subplot(grid[1 + j, 1]), signal, j, names[j])
    opts = signal.options
    more = literal(f"; inputs {', '.join(names[shown:])} not drawn") if m > shown else ""
    fig.suptitle(
        f"{opts.kind} test signal, {opts.band_hz[0]:g}-{opts.band_hz[1]:g} Hz at {opts.sample_rate_hz:g} Hz: "
        f"{signal.periods} periods of {signal.period_s:.4g} s"
        + (f" in {signal.blocks} blocks" if signal.blocks > 1 else "") + more,
        fontsize=9.5, color=_INK, x=0.01, ha="left",
    )
    return fig


def _draw_overview(ax: Any, signal: Any, label: str) -> None:
    t = signal.time
    x = signal.values[:, 0]
    n, per_block = signal.period_samples, signal.periods * signal.period_samples
    dt = signal.sample_time
    for b in range(signal.blocks):
        begin = b * per_block
        ax.axvspan(begin * dt, (begin + signal.transient_periods * n) * dt, color=_TRANSIENT, lw=0, zorder=0)
        if b:
            ax.axvline(begin * dt, color=_INK, lw=0.8, ls="--")
    start, stop = zoom_window(signal)
    ax.axvspan(start * dt, stop * dt, ymin=0.0, ymax=0.04, color=_ZOOM, lw=0, zorder=3)
    ax.axvspan(start * dt, stop * dt, ymin=0.96, ymax=1.0, color=_ZOOM, lw=0, zorder=3)
    for k in range(1, signal.blocks * signal.periods):
        ax.axvline(k * n * dt, color=_GRID, lw=0.6, zorder=0.6)
    if x.size <= _OVERVIEW_POINTS:
        ax.step(t, x, where="post", color=_SIGNAL, lw=0.7)
    else:  # too many samples to draw one by one: the extremes of each short stretch, in time order
        ax.plot(*_envelope(t, x, _OVERVIEW_POINTS // 2), color=_SIGNAL, lw=0.6)
    low, high = signal.options.amplitude_range
    for level in (low, high):
        ax.axhline(level, color=_LIMIT, lw=0.7, ls=":")
    ax.set_xlim(0, signal.duration_s)
    ax.set_ylabel(label, fontsize=8, color=_INK)
    ax.set_xlabel("time [s]", fontsize=8, color=_INK)
    ax.set_title(
        "whole signal: transient periods shaded grey, period boundaries thin lines"
        + (", blocks split by dashes" if signal.blocks > 1 else "") + "; the zoomed stretch marked in blue",
        fontsize=8, loc="left", color=_INK,
    )
    _style(ax)


def _draw_zoom(ax: Any, signal: Any, j: int, label: str) -> None:
    start, stop = zoom_window(signal)
    t = signal.time[start:stop]
    x = signal.values[start:stop, j]
    ax.step(t, x, where="post", color=_SIGNAL, lw=1.0)
    if x.size <= 150:
        ax.plot(t, x, ls="none", marker="o", ms=2.2, color=_SIGNAL)
    low, high = signal.options.amplitude_range
    for level in (low, high):
        ax.axhline(level, color=_LIMIT, lw=0.7, ls=":")
    pad = 0.06 * (high - low)
    ax.set_ylim(low - pad, high + pad)
    ax.set_xlim(t[0], t[-1] + signal.sample_time)
    ax.set_ylabel(label, fontsize=8, color=_INK)
    ax.set_xlabel("time [s]", fontsize=8, color=_INK)
    text = (f"zoom: {stop - start} samples; crest factor {signal.crest_factor[j]:.2f}, "
            f"RMS {signal.rms[j]:.4g}, range limits dotted")
    if signal.blocks > 1:
        signs = " ".join("+" if v > 0 else "-" for v in signal.block_signs[j])
        text += f"; sign by block: {signs}"
    ax.set_title(text, fontsize=8, loc="left", color=_INK)
    _style(ax)


def _draw_spectrum(ax: Any, signal: Any, j: int, name: str) -> None:
    n = signal.period_samples
    first = signal.transient_periods * n
    period = signal.values[first:first + n, j]
    amplitude = np.abs(np.fft.rfft(period - period.mean()))[1:(n - 1) // 2 + 1] * (2.0 / n)
    lines = np.arange(1, amplitude.size + 1)
    peak = amplitude.max()
    with np.errstate(divide="ignore"):
        level = 20 * np.log10(np.maximum(amplitude, peak * 10 ** (_FLOOR_DB / 20)) / peak)
    f = lines * signal.resolution_hz
    low, high = signal.options.band_hz
    ax.axvspan(low, high, color=_BAND, lw=0, zorder=0)
    designed = np.zeros(amplitude.size, dtype=bool)
    designed[signal.lines[j] - 1] = True
    ax.plot(f[~designed], level[~designed], ls="none", marker=".", ms=1.8, color=_QUIET,
            label=f"other lines (floor drawn at {_FLOOR_DB:g} dB)")
    ax.plot(f[designed], level[designed], ls="none", marker="o", ms=2.4, color=_LINES,
            label="designed lines")
    use_log = high / low >= 20 or signal.spacing == "log"
    if use_log:
        ax.set_xscale("log")
        ax.set_xlim(max(f[0] * 0.8, low / 10), signal.sample_rate_hz / 2)
    else:
        ax.set_xlim(0, signal.sample_rate_hz / 2)
    ax.set_ylim(_FLOOR_DB - 5, 8)
    ax.set_ylabel("amplitude [dB re largest line]", fontsize=8, color=_INK)
    ax.set_xlabel("frequency [Hz]", fontsize=8, color=_INK)
    ax.set_title(f"{literal(name)}: one period, lines every {signal.resolution_hz:.4g} Hz; band shaded",
                 fontsize=8, loc="left", color=_INK)
    ax.legend(fontsize=7, frameon=False, loc="lower left", markerscale=2)
    _style(ax)


def periodic_response_figure(analysis: Any, *, output: int = 0, input: int = 0, comparison: Any = None,
                             axes: Sequence[Any] | None = None) -> Any:
    """Frequency response at the excited lines with error bars, and the output against its noise floor.

    Parameters
    ----------
    analysis : ident.estimate.periodic.PeriodicAnalysis
    output, input : int, default 0
        Channel shown.
    comparison : ident.estimate.periodic.LineComparison, optional
        A model's frequency response and output error, drawn beside the data.
    axes : sequence of matplotlib.axes.Axes, optional
        Three axes: magnitude, phase, output spectrum; a new figure when omitted.

    Returns
    -------
    matplotlib.figure.Figure
        Error bars are one standard deviation of the complex response (for the
        magnitude) and its angle ``asin(std / |G|)`` (for the phase).
    """
    if axes is None:
        from matplotlib.figure import Figure

        fig = Figure(figsize=(8.5, 8.0), dpi=100, layout="constrained")
        axes = list(fig.subplots(3, 1, sharex=True)[:])
    else:
        axes = list(axes)
        fig = axes[0].figure
    if not (0 <= output < len(analysis.outputs) and 0 <= input < len(analysis.inputs)):
        raise OptionError(f"output must be in [0, {len(analysis.outputs) - 1}] and input in "
                          f"[0, {len(analysis.inputs) - 1}]")
    _draw_frf(axes[0], axes[1], analysis, output, input, comparison)
    _draw_output(axes[2], analysis, output, comparison)
    axes[0].set_title(
        literal(f"{analysis.inputs[input]} → {analysis.outputs[output]}")
        + f": {analysis.measured_periods} periods averaged"
        + (f" in {analysis.blocks} blocks" if analysis.blocks > 1 else "")
        + f", lines every {analysis.resolution_hz:.4g} Hz", fontsize=9, loc="left", color=_INK)
    for ax in axes[:3]:
        _style(ax)
    return fig


def _draw_frf(ax_mag: Any, ax_ph: Any, analysis: Any, i: int, j: int, comparison: Any) -> None:
    f = analysis.frequencies_hz
    g = analysis.frf[:, i, j]
    s = analysis.frf_std[:, i, j]
    have = np.isfinite(g)
    mag = np.abs(g)
    err = np.where(np.isfinite(s), s, 0.0)
    lower = np.minimum(err, 0.999 * mag)  # a log axis cannot show a bar through zero
    if comparison is not None:
        model = comparison.model_frf[:, i, j]
        ax_mag.plot(f, np.abs(model), color=_MODEL, lw=1.3, label="model", zorder=2)
        ax_ph.plot(f, np.degrees(np.angle(model)), color=_MODEL, lw=1.3, zorder=2)
    ax_mag.errorbar(f[have], mag[have], yerr=[lower[have], err[have]], fmt="o", ms=3, color=_LINES,
                    ecolor=_LINES, elinewidth=0.8, capsize=1.5, label="measured at the excited lines ± 1 std",
                    zorder=3)
    ax_mag.set_xscale("log")
    ax_mag.set_yscale("log")
    ax_mag.set_ylabel("|G| [output unit / input unit]", fontsize=8, color=_INK)
    ax_mag.legend(fontsize=7, frameon=False)
    with np.errstate(divide="ignore", invalid="ignore"):
        phase_err = np.degrees(np.arcsin(np.clip(err / np.where(mag > 0, mag, np.inf), 0, 1)))
    ax_ph.errorbar(f[have], np.degrees(np.angle(g[have])), yerr=phase_err[have], fmt="o", ms=3,
                   color=_LINES, ecolor=_LINES, elinewidth=0.8, capsize=1.5, zorder=3)
    ax_ph.set_ylim(-190, 190)
    ax_ph.set_yticks([-180, -90, 0, 90, 180])
    ax_ph.set_ylabel("phase [deg]", fontsize=8, color=_INK)


def _draw_output(ax: Any, analysis: Any, i: int, comparison: Any) -> None:
    fb = analysis.band_frequencies_hz
    excited_band = np.isin(analysis.band_lines, analysis.lines)
    amp = analysis.band_output_amplitude[:, i]
    ax.plot(fb[excited_band], amp[excited_band], ls="none", marker="o", ms=3, color=_LINES,
            label="output at excited lines")
    if np.any(~excited_band):
        ax.plot(fb[~excited_band], amp[~excited_band], ls="none", marker="^", ms=3, color=_DISTORT,
                label="output at unexcited lines (distortion + noise)")
    floor = analysis.band_noise_floor[:, i]
    if np.all(np.isfinite(floor)):
        ax.plot(fb, floor, color=_NOISE, lw=1.0, label="noise floor (std of the average)")
    if comparison is not None:
        ax.plot(comparison.frequencies_hz, comparison.output_error[:, i], ls="none", marker="x", ms=3.5,
                color=_MODEL, label="model error at excited lines")
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_ylabel(f"{literal(analysis.outputs[i])} amplitude [output unit]", fontsize=8, color=_INK)
    ax.set_xlabel("frequency [Hz]", fontsize=8, color=_INK)
    ax.legend(fontsize=7, frameon=True, framealpha=0.85, edgecolor="none", loc="upper right")
