"""Figures of a fleet: where each unit lies among the others, one strip per figure of merit.

Each panel is a strip of dots, one per unit, along the quantity's axis (spread
vertically by a fixed low-discrepancy sequence so that equal values stay
visible); the fleet median is a solid line and the band inside which the
outlier rule accepts a value is shaded. Units outside it are drawn as larger
orange diamonds and named (the first few).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ._text import literal

__all__ = ["StripPanel", "strip_figure"]

_INK = "#1d232b"
_DOT = "#2f6f8f"
_ODD = "#d0661c"
_BAND = "#dfe9e4"
#: Most outliers named in one panel.
MAX_LABELS = 6


@dataclass(frozen=True, slots=True, eq=False)
class StripPanel:
    """One quantity over the fleet.

    Parameters
    ----------
    title : str
        Panel title, e.g. ``"mode 2 natural frequency"``.
    unit : str
        Unit of measure for the axis label (empty: dimensionless, shown as ``[-]``).
    values : sequence of float
        One value per unit (nan where a unit has none; not drawn).
    names : sequence of str
        Unit names, same order.
    flagged : sequence of bool
        Units flagged on this quantity.
    median, scale : float or None
        Fleet median and the rule's scale (``None``: quantity not screened).
    threshold : float
        The rule's threshold in scales.
    side : {"both", "low", "high"}
        Which side of the band the rule watches.
    """

    title: str
    unit: str
    values: Sequence[float]
    names: Sequence[str]
    flagged: Sequence[bool]
    median: float | None
    scale: float | None
    threshold: float
    side: str = "both"


def _jitter(n: int) -> np.ndarray:
    # golden-ratio sequence: evenly spread, no random numbers, the same figure every time
    return ((np.arange(n) * 0.6180339887498949) % 1.0) - 0.5


def _band(ax, panel: StripPanel) -> None:
    if panel.median is None or panel.scale is None or not math.isfinite(panel.scale):
        return
    lo = panel.median - panel.threshold * panel.scale if panel.side != "high" else None
    hi = panel.median + panel.threshold * panel.scale if panel.side != "low" else None
    x0, x1 = ax.get_xlim()
    ax.axvspan(lo if lo is not None else x0, hi if hi is not None else x1, color=_BAND, zorder=0, lw=0)
    ax.axvline(panel.median, color=_INK, lw=1.2, zorder=1)
    ax.set_xlim(x0, x1)


def _label_alignment(ax, x: float) -> str:
    """Align a unit's name so that it runs into the panel: near an edge it starts (or ends) at the dot."""
    lo, hi = ax.get_xlim()
    where = (x - lo) / (hi - lo)
    return "left" if where < 0.25 else "right" if where > 0.75 else "center"


def _panel(ax, panel: StripPanel) -> None:
    x = np.asarray(panel.values, dtype=float)
    flagged = np.asarray(panel.flagged, dtype=bool)
    have = np.isfinite(x)
    y = _jitter(x.size)
    ax.scatter(x[have & ~flagged], y[have & ~flagged], s=16, color=_DOT, alpha=0.75, lw=0, zorder=2)
    odd = np.flatnonzero(have & flagged)
    ax.scatter(x[odd], y[odd], s=46, color=_ODD, marker="D", edgecolor=_INK, lw=0.6, zorder=3)
    if have.any():
        span = np.nanmax(x) - np.nanmin(x)
        pad = 0.08 * span if span > 0 else max(abs(float(np.nanmax(x))) * 0.05, 1e-9)
        lo, hi = float(np.nanmin(x)) - pad, float(np.nanmax(x)) + pad
        if panel.median is not None and panel.scale is not None and math.isfinite(panel.scale):
            lo = min(lo, panel.median - 1.1 * panel.threshold * panel.scale)
            hi = max(hi, panel.median + 1.1 * panel.threshold * panel.scale)
        ax.set_xlim(lo, hi)
    _band(ax, panel)
    for k in odd[:MAX_LABELS]:
        ax.annotate(literal(str(panel.names[k])), (x[k], y[k]), xytext=(0, 7), textcoords="offset points",
                    ha=_label_alignment(ax, x[k]), fontsize=7.5, color=_ODD, clip_on=True)
    ax.set_ylim(-0.85, 0.85)
    ax.set_yticks([])
    label = f"{panel.title} [{panel.unit or '-'}]"  # [-]: dimensionless
    ax.set_xlabel(literal(label), fontsize=9)
    ax.tick_params(labelsize=8)
    for side in ("left", "right", "top"):
        ax.spines[side].set_visible(False)
    n_odd = int(flagged[have].sum())
    ax.set_title(f"{int(have.sum())} units" + (f", {n_odd} outside the band" if n_odd else ""), fontsize=8.5,
                 loc="left", color=_INK)


def strip_figure(panels: Sequence[StripPanel], *, title: str = "", columns: int = 2):
    """Draw strips of several quantities side by side.

    Parameters
    ----------
    panels : sequence of StripPanel
    title : str
        Figure title.
    columns : int
        Panels per row.

    Returns
    -------
    matplotlib.figure.Figure
    """
    from matplotlib.figure import Figure

    n = max(1, len(panels))
    cols = min(columns, n)
    rows = math.ceil(n / cols)
    fig = Figure(figsize=(9.2, 0.4 + 1.9 * rows), layout="constrained")
    axes = fig.subplots(rows, cols, squeeze=False)
    for k, ax in enumerate(axes.flat):
        if k < len(panels):
            _panel(ax, panels[k])
        else:
            ax.set_visible(False)
    if title:
        fig.suptitle(literal(title), fontsize=10.5, x=0.01, ha="left", color=_INK)
    return fig
