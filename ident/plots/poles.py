"""Pole-zero map on the unit circle with a grid of constant damping and natural frequency."""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from ..assess.modes import ModeTable
from ..display import shows_as_integrator
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


#: Poles whose labels crowd: closer than this share of the view's half-width to another labelled pole.
_CROWD_DISTANCE = 0.08
#: Offsets tried for a label, in points from its pole (nearest first).
_LABEL_OFFSETS = tuple((r * math.cos(a), r * math.sin(a)) for r in (7, 16, 28, 42)
                       for a in (math.pi / 4, -math.pi / 4, 3 * math.pi / 4, -3 * math.pi / 4, 0.0, math.pi,
                                 math.pi / 2, -math.pi / 2))


def pole_label(mode: Any, nyquist_hz: float) -> str | None:
    """Label of a pole on the map: frequency and damping of a pair, time constant of a real pole.

    A real pole is never labelled with a frequency (a real pole's corner
    frequency can exceed the Nyquist frequency that bounds the map); a pole with
    no continuous equivalent (on the negative real axis) gets its z.
    """
    if mode.is_pair and mode.natural_frequency_hz is not None:
        text = f"{mode.natural_frequency_hz:.3g} Hz"
        if mode.damping_ratio is not None:
            text += f", ζ {mode.damping_ratio:.2g}"
        return text
    if mode.s is None:
        return f"z = {mode.z.real:.3g}"
    if "integrator" in mode.flags or shows_as_integrator(mode.z):
        return "integrator"
    if mode.time_constant_s is not None:
        return f"τ {mode.time_constant_s:.3g} s"
    return None


def crowded_poles(table: ModeTable, reach: float) -> list[complex]:
    """Labelled poles (upper half plane) that sit too close to another to be read on the full map."""
    pts = [m.z if m.z.imag >= 0 else m.z.conjugate() for m in table.modes]
    out = []
    for k, p in enumerate(pts):
        if any(abs(p - q) < _CROWD_DISTANCE * reach for j, q in enumerate(pts) if j != k):
            out.append(p)
    return out


def pole_zero_map(
    table: ModeTable, *, ax: Any | None = None, title: str | None = None
) -> Any:
    """Draw the poles and zeros of a mode table in the z-plane, with a zoomed view where poles crowd.

    Parameters
    ----------
    table : ModeTable
        From :func:`ident.assess.modes.mode_table`.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on (the full map only); a new figure (not registered with
        pyplot) when omitted, with a second, zoomed map when poles crowd.
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
    and orange when flagged; a pair is labelled with its natural frequency and
    damping ratio, a real pole with its time constant (:func:`pole_label`);
    labels are placed where they overlap neither each other nor the frame.
    Zeros are open circles; a known pole covariance is drawn as a confidence
    ellipse. The region outside the unit circle is tinted. For slow plants
    every pole sits near z = 1: when labelled poles crowd
    (:func:`crowded_poles`), a second map zooms in on them, with constant
    natural-frequency curves at round frequencies.
    """
    from matplotlib.figure import Figure

    T = table.sample_time
    all_pts = [m.z for m in table.modes] + [complex(q) for q in table.zeros]
    shown = [p for p in all_pts if np.isfinite(p) and abs(p) <= _MAX_REACH / 1.1]
    reach = max([1.15] + [abs(p) * 1.1 for p in shown])
    crowd = crowded_poles(table, reach)
    zoom_ax = None
    if ax is None:
        wide = bool(crowd)
        fig = Figure(figsize=(12.8 if wide else 6.4, 6.4), dpi=100, layout="constrained")
        if wide:
            ax, zoom_ax = fig.subplots(1, 2)
        else:
            ax = fig.add_subplot(1, 1, 1)
    else:
        fig = ax.figure
    _draw_map(ax, table, (-reach, reach), (-reach, reach), full=True)
    if title is None:
        n_flagged = sum(1 for m in table.modes if m.flags)
        title = (f"{table.n_states} states, T = {T:g} s (Nyquist {0.5 / T:.4g} Hz)"
                 f" - {n_flagged} flagged mode(s)")
    ax.set_title(literal(title), fontsize=9, color=_INK, loc="left")
    far_zeros = [complex(q) for q in table.zeros if not (np.isfinite(q) and abs(complex(q)) * 1.1 <= reach)]
    if far_zeros:
        listed = ", ".join(f"{q.real:.3g}" if abs(q.imag) < 1e-12 else f"{q.real:.3g}{q.imag:+.3g}j"
                           for q in far_zeros[:6])
        more = f" (+{len(far_zeros) - 6} more)" if len(far_zeros) > 6 else ""
        ax.text(0.99, 0.01, f"{len(far_zeros)} zero(s) outside the view: {listed}{more}",
                transform=ax.transAxes, ha="right", va="bottom", fontsize=7, color=_ZERO)
    if zoom_ax is not None:
        xs, ys = _zoom_limits(crowd)
        _draw_map(zoom_ax, table, xs, ys, full=False)
        zoom_ax.set_title(f"zoom on the {len(crowd)} crowded poles near z = 1", fontsize=9, color=_INK, loc="left")
        ax.add_patch(_frame(xs, ys))
    _place_labels(fig, [a for a in (ax, zoom_ax) if a is not None], table, crowd)
    return fig


def _zoom_limits(points: list[complex]) -> tuple[tuple[float, float], tuple[float, float]]:
    """Return a square view around ``points`` (upper half plane and the real axis), with a margin."""
    re = [p.real for p in points]
    im = [abs(p.imag) for p in points]
    half = 0.5 * max(max(re) - min(re), max(im), 1e-6) * 1.35 + 0.02 * max(max(re) - min(re), max(im), 1e-3)
    cx = 0.5 * (max(re) + min(re))
    cy = max(0.5 * max(im), half * 0.85)
    return (cx - half, cx + half), (cy - half, cy + half)


def _frame(xs: tuple[float, float], ys: tuple[float, float]) -> Any:
    from matplotlib.patches import Rectangle

    return Rectangle((xs[0], ys[0]), xs[1] - xs[0], ys[1] - ys[0], fill=False, edgecolor=_INK, lw=0.8,
                     ls="--", zorder=8)


def _draw_map(ax: Any, table: ModeTable, xs: tuple[float, float], ys: tuple[float, float], *, full: bool) -> None:
    """Grid, unit circle, zeros and poles on ``ax`` within the limits ``xs``, ``ys`` (labels come later)."""
    from matplotlib.patches import Circle

    T = table.sample_time
    nyquist_hz = 0.5 / T
    ax.set_facecolor(_OUTSIDE)
    ax.add_patch(Circle((0, 0), 1.0, facecolor="white", edgecolor="none", zorder=0))
    for zeta in _DAMPING_GRID:
        c = _damping_curve(zeta)
        for sign in (1, -1):
            ax.plot(c.real, sign * c.imag, color=_GRID, lw=0.6, ls=(0, (4, 3)), zorder=1)
        if full:
            k = len(c) // 3
            ax.annotate(f"ζ={zeta:g}", (c[k].real, c[k].imag), fontsize=6, color="#7b8a97",
                        ha="center", va="bottom", zorder=2)
    freqs = [frac * nyquist_hz for frac in _FREQ_FRACTIONS] if full else _round_frequencies(xs, ys, T)
    for f_hz in freqs:
        c = _frequency_curve(2 * math.pi * f_hz * T)
        for sign in (1, -1):
            ax.plot(c.real, sign * c.imag, color=_GRID, lw=0.6, zorder=1)
        end = c[0]
        if full:
            # Outside the circle, aligned away from it so the text never crosses the line.
            ha = "right" if end.real < -0.3 else ("left" if end.real > 0.3 else "center")
            ax.annotate(f"{f_hz:.3g} Hz", (end.real * 1.03, end.imag * 1.03 + 0.01),
                        fontsize=6, color="#7b8a97", ha=ha, va="bottom", zorder=2)
        elif xs[0] <= end.real <= xs[1] and ys[0] <= end.imag <= ys[1]:
            ax.annotate(f"{f_hz:.3g} Hz", (end.real, end.imag), xytext=(2, 2), textcoords="offset points",
                        fontsize=6, color="#7b8a97", ha="left", va="bottom", zorder=2, annotation_clip=True)
    theta = np.linspace(0, 2 * math.pi, 4000 if not full else 400)
    ax.plot(np.cos(theta), np.sin(theta), color=_INK, lw=1.6, zorder=3)
    ax.axhline(0.0, color=_GRID, lw=0.6, zorder=1)
    ax.axvline(0.0, color=_GRID, lw=0.6, zorder=1)
    if table.zeros.size:
        zr = np.asarray(table.zeros)
        zr = zr[np.isfinite(zr)]
        ax.scatter(zr.real, zr.imag, s=46, facecolors="none", edgecolors=_ZERO, linewidths=1.4,
                   zorder=5, label="zero")
    drew = {"clean": False, "flagged": False}
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
    ax.set_xlim(*xs)
    ax.set_ylim(*ys)
    ax.set_aspect("equal")
    ax.set_xlabel("Re z [-]")
    ax.set_ylabel("Im z [-]")
    for spine in ax.spines.values():
        spine.set_color(_GRID)
    ax.tick_params(colors="#55636f", labelsize=8)
    if full and (table.modes or table.zeros.size):
        ax.legend(loc="lower left", fontsize=7, frameon=False)


def _round_frequencies(xs: tuple[float, float], ys: tuple[float, float], T: float) -> list[float]:
    """Round natural frequencies [Hz] whose constant-frequency curves cross a zoomed view."""
    from matplotlib.ticker import MaxNLocator

    corners = [complex(x, y) for x in xs for y in ys if complex(x, y) != 0]
    wt = [abs(np.log(c)) for c in corners]
    hi = max(wt) / (2 * math.pi * T)
    return [float(f) for f in MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]).tick_values(0.0, hi) if 0 < f <= hi]


def _place_labels(fig: Any, axes: list[Any], table: ModeTable, crowd: list[complex]) -> None:
    """Label every pole (upper half plane) where its label overlaps no other label and stays in its axes.

    On the full map, crowded poles are left to the zoomed map when there is one.
    """
    if not hasattr(fig.canvas, "get_renderer"):  # a figure made without pyplot has no renderer of its own
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        FigureCanvasAgg(fig)
    fig.draw_without_rendering()  # settle the layout, so text extents are final
    renderer = fig.canvas.get_renderer()
    nyquist_hz = 0.5 / table.sample_time
    for k, ax in enumerate(axes):
        box = ax.get_window_extent(renderer)
        # the grid's own labels (frequencies, damping ratios) are obstacles too
        placed: list[Any] = [c.get_window_extent(renderer) for c in ax.texts if c.get_fontsize() < 7]
        for m in table.modes:
            text = pole_label(m, nyquist_hz)
            p = m.z if m.z.imag >= 0 else m.z.conjugate()
            if text is None or (k == 0 and len(axes) > 1 and p in crowd):
                continue
            x0, x1 = ax.get_xlim()
            y0, y1 = ax.get_ylim()
            if not (x0 <= p.real <= x1 and y0 <= p.imag <= y1):
                continue
            colour = _FLAGGED if m.flags else _CLEAN
            ann = None
            for dx, dy in _LABEL_OFFSETS:
                ann = ax.annotate(text, (p.real, p.imag), xytext=(dx, dy), textcoords="offset points",
                                  ha="left" if dx >= 0 else "right", va="bottom" if dy >= 0 else "top",
                                  fontsize=7, color=colour, zorder=7)
                ann.set_in_layout(False)
                ext = ann.get_window_extent(renderer)
                inside = ext.x0 >= box.x0 and ext.x1 <= box.x1 and ext.y0 >= box.y0 and ext.y1 <= box.y1
                if inside and not any(ext.overlaps(q) for q in placed):
                    break
                ann.remove()
                ann = None
            if ann is None:  # nowhere free: the nearest spot, kept inside the axes
                ann = ax.annotate(text, (p.real, p.imag), xytext=(-6, 6), textcoords="offset points",
                                  ha="right", va="bottom", fontsize=7, color=colour, zorder=7)
                ann.set_in_layout(False)
            placed.append(ann.get_window_extent(renderer))
