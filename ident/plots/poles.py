"""Pole-zero map on the unit circle with a grid of constant damping and natural frequency."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..assess.modes import ModeTable
from ._text import literal

__all__ = ["pole_zero_map"]

_INK = "#1f2a36"
_GRID = "#b7c4cf"
_CLEAN = "#167a6e"
_FLAGGED = "#c2410c"
_ZERO = "#3d5a80"
_OUTSIDE = "#fbeee6"
_DAMPING_GRID = (0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9)
_FREQ_FRACTIONS = tuple(k / 10 for k in range(1, 11))
#: Half-width of the largest view [z-plane units]; zeros beyond it are listed in text.
_MAX_REACH = 2.0


def _damping_curve(zeta: float) -> np.ndarray:
    # z = exp(wn T (-zeta + j sqrt(1 - zeta^2))) for wn T from 0 up to where the
    # angle reaches pi (Franklin, Powell & Workman, 3rd ed., sec. 4.3.2).
    root = math.sqrt(1.0 - zeta * zeta)
    wt = np.linspace(0.0, math.pi / root, 200)
    return np.exp(wt * complex(-zeta, root))


def _frequency_curve(wn_t: float) -> np.ndarray:
    # Constant natural frequency wn T, damping ratio from 0 to 1.
    zeta = np.linspace(0.0, 1.0, 120)
    z = np.exp(wn_t * (-zeta + 1j * np.sqrt(1.0 - zeta**2)))
    return z[np.abs(np.angle(z)) <= math.pi + 1e-12]


def _ellipse(cov: np.ndarray, level: float) -> np.ndarray:
    # Confidence ellipse of a 2-D Gaussian: chi-square(2) quantile -2 ln(1 - level).
    k2 = -2.0 * math.log1p(-level)
    w, V = np.linalg.eigh(0.5 * (cov + cov.T))
    axes = V * np.sqrt(k2 * np.clip(w, 0.0, None))
    t = np.linspace(0.0, 2.0 * math.pi, 120)
    xy = axes @ np.vstack([np.cos(t), np.sin(t)])
    return xy[0] + 1j * xy[1]


def pole_zero_map(
    table: ModeTable, *, ax: Any | None = None, title: str | None = None
) -> Any:
    """Draw the poles and zeros of a mode table in the z-plane.

    Parameters
    ----------
    table : ModeTable
        From :func:`ident.assess.modes.mode_table`.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on; a new figure (not registered with pyplot) when omitted.
    title : str, optional
        Axes title; a summary of the model by default.

    Returns
    -------
    matplotlib.figure.Figure
        The figure holding ``ax``.

    Notes
    -----
    Both halves of the plane are drawn. Grid curves: constant damping ratio
    0.1 to 0.9 (spirals from z = 1) and constant natural frequency at tenths of
    the Nyquist frequency, labelled in Hz. Poles are crosses, teal when clean
    and orange when flagged, labelled with their natural frequency (and damping
    ratio for a pair); zeros are open circles; a known pole covariance is drawn as a
    confidence ellipse. The region outside the unit circle is tinted.
    """
    from matplotlib.figure import Figure
    from matplotlib.patches import Circle

    if ax is None:
        fig = Figure(figsize=(6.4, 6.4), dpi=100, layout="constrained")
        ax = fig.add_subplot(1, 1, 1)
    else:
        fig = ax.figure
    T = table.sample_time
    nyquist_hz = 0.5 / T

    all_pts = [m.z for m in table.modes] + [complex(q) for q in table.zeros]
    shown = [p for p in all_pts if np.isfinite(p) and abs(p) <= _MAX_REACH / 1.1]
    reach = max([1.15] + [abs(p) * 1.1 for p in shown])
    far_zeros = [complex(q) for q in table.zeros
                 if not (np.isfinite(q) and abs(complex(q)) * 1.1 <= reach)]
    ax.set_facecolor(_OUTSIDE)
    ax.add_patch(Circle((0, 0), 1.0, facecolor="white", edgecolor="none", zorder=0))

    for zeta in _DAMPING_GRID:
        c = _damping_curve(zeta)
        for sign in (1, -1):
            ax.plot(c.real, sign * c.imag, color=_GRID, lw=0.6, ls=(0, (4, 3)), zorder=1)
        k = len(c) // 3
        ax.annotate(f"ζ={zeta:g}", (c[k].real, c[k].imag), fontsize=6, color="#7b8a97",
                    ha="center", va="bottom", zorder=2)
    for frac in _FREQ_FRACTIONS:
        c = _frequency_curve(frac * math.pi)
        for sign in (1, -1):
            ax.plot(c.real, sign * c.imag, color=_GRID, lw=0.6, zorder=1)
        end = c[0]
        # Outside the circle, aligned away from it so the text never crosses the line.
        ha = "right" if end.real < -0.3 else ("left" if end.real > 0.3 else "center")
        ax.annotate(f"{frac * nyquist_hz:.3g} Hz", (end.real * 1.03, end.imag * 1.03 + 0.01),
                    fontsize=6, color="#7b8a97", ha=ha, va="bottom", zorder=2)
    theta = np.linspace(0, 2 * math.pi, 400)
    ax.plot(np.cos(theta), np.sin(theta), color=_INK, lw=1.6, zorder=3)
    ax.axhline(0.0, color=_GRID, lw=0.6, zorder=1)
    ax.axvline(0.0, color=_GRID, lw=0.6, zorder=1)

    if table.zeros.size:
        zr = np.asarray(table.zeros)
        zr = zr[np.isfinite(zr)]
        ax.scatter(zr.real, zr.imag, s=46, facecolors="none", edgecolors=_ZERO, linewidths=1.4,
                   zorder=5, label="zero")
    drew = {"clean": False, "flagged": False}
    placed: list[complex] = []
    for m in table.modes:
        colour = _FLAGGED if m.flags else _CLEAN
        kind = "flagged" if m.flags else "clean"
        pts = [m.z, m.z.conjugate()] if m.is_pair else [m.z]
        label = None
        if not drew[kind]:
            label = "pole, flagged" if m.flags else "pole"
            drew[kind] = True
        ax.scatter([p.real for p in pts], [p.imag for p in pts], marker="x", s=60, linewidths=1.8,
                   color=colour, zorder=6, label=label)
        if m.z_covariance is not None:
            ring = _ellipse(np.array(m.z_covariance), table.thresholds.confidence_level)
            for p in pts:
                e = p + (ring if p.imag >= 0 else np.conj(ring))
                ax.plot(e.real, e.imag, color=colour, lw=0.8, ls=":", zorder=4)
        if m.natural_frequency_hz is not None:
            text = f"{m.natural_frequency_hz:.3g} Hz"
            if m.is_pair and m.damping_ratio is not None:
                text += f", ζ {m.damping_ratio:.2g}"
            # Labels of poles close together are stacked instead of drawn over each other.
            # Text runs towards the centre so it stays inside the axes near z = 1.
            leftward = m.z.real > 0.5 * reach
            crowd = sum(1 for q in placed
                        if abs(q.imag - m.z.imag) < 0.08 * reach and abs(q.real - m.z.real) < 0.35 * reach)
            placed.append(m.z)
            ax.annotate(text, (m.z.real, m.z.imag),
                        xytext=(-6 if leftward else 6, 6 + 9 * crowd), textcoords="offset points",
                        ha="right" if leftward else "left", fontsize=7, color=colour, zorder=7)

    ax.set_xlim(-reach, reach)
    ax.set_ylim(-reach, reach)
    ax.set_aspect("equal")
    ax.set_xlabel("Re z")
    ax.set_ylabel("Im z")
    for spine in ax.spines.values():
        spine.set_color(_GRID)
    ax.tick_params(colors="#55636f", labelsize=8)
    if title is None:
        n_flagged = sum(1 for m in table.modes if m.flags)
        title = (f"{table.n_states} states, T = {T:g} s (Nyquist {nyquist_hz:.4g} Hz)"
                 f" - {n_flagged} flagged mode(s)")
    ax.set_title(literal(title), fontsize=9, color=_INK, loc="left")
    if table.modes or table.zeros.size:
        ax.legend(loc="lower left", fontsize=7, frameon=False)
    if far_zeros:
        listed = ", ".join(f"{q.real:.3g}" if abs(q.imag) < 1e-12 else f"{q.real:.3g}{q.imag:+.3g}j"
                           for q in far_zeros[:6])
        more = f" (+{len(far_zeros) - 6} more)" if len(far_zeros) > 6 else ""
        ax.text(0.99, 0.01, f"{len(far_zeros)} zero(s) outside the view: {listed}{more}",
                transform=ax.transAxes, ha="right", va="bottom", fontsize=7, color=_ZERO)
    return fig
