"""Figure of a drift comparison: both models' frequency-response magnitudes overlaid.

The function takes a :class:`ident.assess.drift.DriftReport`, draws on the axes it is
given (or on a new figure not registered with pyplot) and returns the figure.
Nothing here changes global matplotlib state.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import numpy as np

from ..assess.drift import DriftReport
from ._text import literal

__all__ = ["magnitude_overlay"]

_INK = "#1f2a36"
_BASE = "#8a99a8"
_NEW = "#167a6e"
_BAD = "#c2410c"
_GRID = "#dfe5ea"


def magnitude_overlay(
    report: DriftReport,
    *,
    inputs: Sequence[str] | None = None,
    axes: Sequence[Any] | None = None,
    units: tuple[Sequence[str], Sequence[str]] | None = None,
) -> Any:
    """Overlay the baseline and new models' magnitude responses, one panel per channel.

    Parameters
    ----------
    report : DriftReport
        From :func:`ident.assess.drift.compare_models`; its ``response`` holds the
        magnitudes over the compared band.
    inputs : sequence of str, optional
        Input names (columns of the magnitude arrays), for the panel titles;
        default ``u1, u2, ...``. The output names come from the report.
    axes : sequence of matplotlib.axes.Axes, optional
        One per channel, outputs major (``p * m`` axes); a new figure when omitted.
    units : (sequence of str, sequence of str), optional
        Input and output units: a right-hand axis then gives the gain in output
        unit per input unit beside the dB scale.

    Returns
    -------
    matplotlib.figure.Figure
        Baseline in grey, new model in teal; the frequencies of matched modes
        are marked with dotted lines (baseline) and dashed lines (new), and the
        point of the largest difference with a dot.
    """
    r = report.response
    f = np.asarray(r.frequencies_hz, dtype=float)
    base = np.asarray(r.baseline_db, dtype=float)
    new = np.asarray(r.new_db, dtype=float)
    _, p, m = new.shape
    outs = tuple(report.outputs) if report.outputs else tuple(f"y{i + 1}" for i in range(p))
    ins = tuple(inputs) if inputs is not None else tuple(f"u{j + 1}" for j in range(m))
    if axes is None:
        from matplotlib.figure import Figure

        fig = Figure(figsize=(8.0, max(2.8, 2.4 * p * m)), dpi=100, layout="constrained")
        axes = list(fig.subplots(p * m, 1, sharex=True, squeeze=False)[:, 0])
    else:
        axes = list(axes)
        fig = axes[0].figure
    lo, hi = r.band_hz
    for i in range(p):
        for j in range(m):
            ax = axes[i * m + j]
            ax.semilogx(f, base[:, i, j], color=_BASE, lw=1.3, label="baseline")
            ax.semilogx(f, new[:, i, j], color=_NEW, lw=1.5, label="new")
            for s in report.mode_shifts:
                if s.status != "matched":
                    continue
                for mode, style in ((s.baseline, ":"), (s.new, "--")):
                    hz = mode.natural_frequency_hz
                    if hz is not None and lo <= hz <= hi:
                        ax.axvline(hz, color=_BASE if style == ":" else _NEW, lw=0.7, ls=style)
            if outs[i] == r.output and ins[j] == r.input:
                k = int(np.argmin(np.abs(f - r.at_frequency_hz)))
                ax.plot([f[k], f[k]], [base[k, i, j], new[k, i, j]], color=_BAD, lw=1.0)
                ax.plot([f[k]], [new[k, i, j]], "o", color=_BAD, ms=4,
                        label=f"largest difference {r.largest_db:.1f} dB")
            ax.set_title(literal(f"{ins[j]} → {outs[i]}"), fontsize=9, loc="left", color=_INK)
            ax.set_ylabel("gain [dB]", fontsize=8)
            ax.legend(fontsize=7, frameon=False)
            if units is not None:
                from ..display import ratio_unit
                from .validation import _gain_axis

                _gain_axis(ax, ratio_unit(units[1][i], units[0][j]) if (units[1][i] or units[0][j])
                           else "output unit/input unit")
            for side in ("top", "right"):
                ax.spines[side].set_visible(False)
            ax.tick_params(colors=_INK, labelsize=8)
            ax.grid(True, color=_GRID, lw=0.5)
    axes[p * m - 1].set_xlabel("frequency [Hz]", fontsize=8)
    return fig
