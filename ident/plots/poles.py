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


#: Poles crowd when closer than this share of the view's half-width to another pole.
_CROWD_DISTANCE = 0.08
#: Most zoomed maps beside the full one.
_MAX_ZOOMS = 2
#: Flags that make the unit circle part of a zoom: where the pole sits against it is the point.
_STABILITY_FLAGS = frozenset({"unstable", "marginal", "integrator", "uncertain_stability"})
#: Half-width of the area kept clear around a pole or zero marker [points]: the cross of ``s = 60``
#: (7.7 pt across) plus half its line width is 4.8 pt, and a label keeps a point more away.
_MARKER_HALF_PT = 6.0
#: Offsets tried for a label, in points from its pole (nearest first); from ``_LEADER_FROM`` on, a
#: thin line ties the label to its pole.
_LABEL_OFFSETS = tuple((r * math.cos(a), r * math.sin(a)) for r in (7, 16, 28, 42, 60)
                       for a in (math.pi / 4, -math.pi / 4, 3 * math.pi / 4, -3 * math.pi / 4, 0.0, math.pi,
                                 math.pi / 2, -math.pi / 2))
_LEADER_FROM = 28
#: Figure width [in] by the number of zoomed maps: the full map is 6.4 in square, one zoom as large
#: beside it, two zooms stacked in a column half as wide.
_FIGURE_WIDTH = {0: 6.4, 1: 12.8, 2: 10.0}


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


def _upper(z: complex) -> complex:
    """Return the member of a pole pair that carries the label: the one in the upper half plane."""
    return z if z.imag >= 0 else z.conjugate()


def _groups(points: dict[int, complex], link: float) -> list[tuple[int, ...]]:
    """Return the groups of two or more points chained by distances below ``link`` (single linkage), by key."""
    left = set(points)
    out = []
    while left:
        seed = min(left)
        group, frontier = {seed}, [seed]
        left.discard(seed)
        while frontier:
            k = frontier.pop()
            near = {j for j in left if abs(points[j] - points[k]) < link}
            left -= near
            group |= near
            frontier.extend(near)
        if len(group) > 1:
            out.append(tuple(sorted(group)))
    return out


def _tightness(points: dict[int, complex], group: tuple[int, ...]) -> float:
    """Smallest distance between two members of ``group``."""
    return min(abs(points[a] - points[b]) for a in group for b in group if a < b)


def crowded_clusters(table: ModeTable, reach: float) -> list[tuple[int, ...]]:
    """Clusters of poles too close to be read on a map of half-width ``reach``, the ones to zoom on.

    Parameters
    ----------
    table : ModeTable
        The modes; a pair counts by its member in the upper half plane.
    reach : float
        Half-width of the map [z-plane units].

    Returns
    -------
    list of tuple of int
        Indices into ``table.modes``, at most two clusters, the tightest first
        (smallest distance between two of its poles). Poles crowd when they lie
        closer than 0.08 of the half-width to another (chained: a pole close to
        any member joins the cluster). When a cluster still crowds within its
        own zoom and a second zoom is free, the second is its tightest
        sub-cluster at the first zoom's scale.
    """
    points = {k: _upper(m.z) for k, m in enumerate(table.modes)}
    clusters = sorted(_groups(points, _CROWD_DISTANCE * reach), key=lambda g: _tightness(points, g))
    chosen = clusters[:_MAX_ZOOMS]
    if len(chosen) == 1:
        group = chosen[0]
        xs, _ = _zoom_limits(table, group)
        inner = [g for g in _groups({k: points[k] for k in group}, _CROWD_DISTANCE * 0.5 * (xs[1] - xs[0]))
                 if g != group]
        if inner:
            chosen.append(min(inner, key=lambda g: _tightness(points, g)))
    return chosen


def _extent(points: list[complex]) -> float:
    re = [p.real for p in points]
    im = [p.imag for p in points]
    return max(max(re) - min(re), max(im) - min(im))


def _gap(points: list[complex], q: complex) -> float:
    """Distance from ``q`` to the bounding box of ``points``."""
    dx = max(min(p.real for p in points) - q.real, 0.0, q.real - max(p.real for p in points))
    dy = max(min(p.imag for p in points) - q.imag, 0.0, q.imag - max(p.imag for p in points))
    return math.hypot(dx, dy)


def _zoom_limits(table: ModeTable, members: tuple[int, ...]) -> tuple[tuple[float, float], tuple[float, float]]:
    """Return a square view (upper half plane) around the poles ``members`` of ``table``, with a margin.

    The unit circle joins the view at the point nearest each member that carries
    a stability flag (unstable, marginal, integrator, uncertain_stability) or
    lies closer to the circle than the cluster's extent; z = 1 and the real axis
    join it when they are no farther than the view is wide, the real axis then
    near the bottom edge (the lower half plane mirrors the upper one).
    """
    pts = [_upper(table.modes[k].z) for k in members]
    spread = max(_extent(pts), 1e-9)
    frame = list(pts)
    for k, p in zip(members, pts, strict=True):
        near_circle = abs(1.0 - abs(p)) <= spread or bool(_STABILITY_FLAGS.intersection(table.modes[k].flags))
        if near_circle and abs(p) > 0:
            frame.append(p / abs(p))
    if _gap(frame, 1.0 + 0j) <= max(_extent(frame), 1e-9):
        frame.append(1.0 + 0j)
    on_axis = min(p.imag for p in frame) <= max(_extent(frame), 1e-9)
    if on_axis:
        frame.append(complex(min(p.real for p in frame), 0.0))
    size = max(_extent(frame), 1e-9)
    half = 0.5 * size * 1.35 + 0.02 * size
    re = [p.real for p in frame]
    im = [p.imag for p in frame]
    cx = 0.5 * (max(re) + min(re))
    cy = 0.5 * (max(im) + min(im))
    if on_axis:
        cy = max(cy, 0.85 * half)
    return (cx - half, cx + half), (cy - half, cy + half)


def _where(table: ModeTable, members: tuple[int, ...], xs: tuple[float, float], ys: tuple[float, float]) -> str:
    """Where a zoom looks: ``z = 1`` when it shows z = 1, else the centre of its poles."""
    if xs[0] <= 1.0 <= xs[1] and ys[0] <= 0.0 <= ys[1]:
        return "z = 1"
    c = sum(_upper(table.modes[k].z) for k in members) / len(members)
    if abs(c.imag) <= 1e-3 * max(1.0, abs(c)) or not any(table.modes[k].is_pair for k in members):
        return f"z = {c.real:.3g}"
    return f"z = {c.real:.3g} ± {c.imag:.3g}j"


def pole_zero_map(
    table: ModeTable, *, ax: Any | None = None, title: str | None = None
) -> Any:
    """Draw the poles and zeros of a mode table in the z-plane, with zoomed views where poles crowd.

    Parameters
    ----------
    table : ModeTable
        From :func:`ident.assess.modes.mode_table`.
    ax : matplotlib.axes.Axes, optional
        Axes to draw on (the full map only); a new figure (not registered with
        pyplot) when omitted, with one or two zoomed maps when poles crowd.
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
    labels are placed where they overlap neither each other, nor a pole or zero
    marker, nor the frame. Zeros are open circles; a known pole covariance is
    drawn as a confidence ellipse. The region outside the unit circle is
    tinted. For slow plants every pole sits near z = 1: each cluster of
    crowded poles (:func:`crowded_clusters`, at most two) gets a zoomed map
    of its own, framed on the full map (tagged A and B when there are two),
    with constant natural-frequency curves at round frequencies; the zoom
    shows the unit circle (and z = 1) where a pole sits close to it or is
    flagged for stability, and its title says where it looks.
    """
    T = table.sample_time
    all_pts = [m.z for m in table.modes] + [complex(q) for q in table.zeros]
    shown = [p for p in all_pts if np.isfinite(p) and abs(p) <= _MAX_REACH / 1.1]
    reach = max([1.15] + [abs(p) * 1.1 for p in shown])
    clusters = crowded_clusters(table, reach) if ax is None else []
    zoom_axes: list[Any] = []
    if ax is None:
        fig, ax, zoom_axes = _new_figure(len(clusters))
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
    views = [_zoom_limits(table, members) for members in clusters]
    for j, (zoom_ax, members, view) in enumerate(zip(zoom_axes, clusters, views, strict=True)):
        # framed on the full map, or on the zoom it lies in (a zoom on a cluster inside another's)
        parents = [zoom_axes[i] for i in range(j) if _contains(views[i], view)]
        _draw_zoom(zoom_ax, parents[-1] if parents else ax, table, members, view,
                   tag="AB"[j] if len(zoom_axes) > 1 else "")
    home = {k: j for j, members in enumerate(clusters) for k in members}  # a nested zoom comes later: it wins
    _place_labels(fig, [ax, *zoom_axes], table, home)
    return fig


def _new_figure(n_zooms: int) -> tuple[Any, Any, list[Any]]:
    """Return a figure, its full map's axes and ``n_zooms`` zoom axes (beside it, or stacked when two)."""
    from matplotlib.figure import Figure

    fig = Figure(figsize=(_FIGURE_WIDTH[n_zooms], 6.4), dpi=100, layout="constrained")
    if n_zooms == 2:
        grid = fig.add_gridspec(2, 2, width_ratios=(2, 1))
        return fig, fig.add_subplot(grid[:, 0]), [fig.add_subplot(grid[0, 1]), fig.add_subplot(grid[1, 1])]
    if n_zooms == 1:
        ax, zoom = fig.subplots(1, 2)
        return fig, ax, [zoom]
    return fig, fig.add_subplot(1, 1, 1), []


def _draw_zoom(zoom_ax: Any, host: Any, table: ModeTable, members: tuple[int, ...],
               view: tuple[tuple[float, float], tuple[float, float]], *, tag: str) -> None:
    """Draw the zoomed map of ``members`` on ``zoom_ax``, titled, and its frame (tagged) on ``host``."""
    xs, ys = view
    _draw_map(zoom_ax, table, xs, ys, full=False)
    where = _where(table, members, xs, ys)
    crowd = f"{len(members)} crowded poles"  # a pair by its member in the upper half plane, as drawn
    # the stacked zooms are narrow: their titles take two lines
    title = f"zoom {tag}: {crowd}\nnear {where}" if tag else f"zoom on the {crowd} near {where}"
    zoom_ax.set_title(title, fontsize=9, color=_INK, loc="left")
    host.add_patch(_frame(xs, ys))
    if tag:
        host.annotate(tag, (xs[0], ys[1]), xytext=(2, 2), textcoords="offset points", fontsize=8,
                      color=_INK, ha="left", va="bottom", zorder=8, annotation_clip=False)


def _contains(outer: tuple[tuple[float, float], tuple[float, float]],
              inner: tuple[tuple[float, float], tuple[float, float]]) -> bool:
    (ox, oy), (ix, iy) = outer, inner
    return ox[0] <= ix[0] and ix[1] <= ox[1] and oy[0] <= iy[0] and iy[1] <= oy[1]


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
    if not full:  # a zoom's tick labels carry many digits: fewer of them, so they never touch
        from matplotlib.ticker import MaxNLocator

        ax.xaxis.set_major_locator(MaxNLocator(nbins=4, steps=[1, 2, 2.5, 5, 10]))
        ax.yaxis.set_major_locator(MaxNLocator(nbins=4, steps=[1, 2, 2.5, 5, 10]))
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
    # |ln z| grows away from z = 1: a view that holds z = 1 starts at 0 Hz, any other near its lowest corner
    holds_one = xs[0] <= 1.0 <= xs[1] and ys[0] <= 0.0 <= ys[1]
    lo = 0.0 if holds_one else 0.8 * min(wt) / (2 * math.pi * T)
    return [float(f) for f in MaxNLocator(nbins=6, steps=[1, 2, 2.5, 5, 10]).tick_values(lo, hi) if lo < f <= hi]


def _marker_boxes(ax: Any, table: ModeTable) -> list[Any]:
    """Display-space boxes covered by the pole and zero markers drawn on ``ax``."""
    from matplotlib.transforms import Bbox

    half = _MARKER_HALF_PT * ax.figure.dpi / 72.0
    pts = [p for m in table.modes for p in ((m.z, m.z.conjugate()) if m.is_pair else (m.z,))]
    pts += [complex(q) for q in table.zeros if np.isfinite(q)]
    boxes = []
    for p in pts:
        x, y = ax.transData.transform((p.real, p.imag))
        boxes.append(Bbox.from_extents(x - half, y - half, x + half, y + half))
    return boxes


def _place_labels(fig: Any, axes: list[Any], table: ModeTable, home: dict[int, int]) -> None:
    """Label every pole (upper half plane) where its label overlaps no label, marker or note and stays in its axes.

    ``axes`` is the full map followed by the zoomed maps; ``home`` maps a pole
    (index into ``table.modes``) to the zoom that labels it: such a pole is
    labelled only there, every other pole wherever it is in view.
    """
    if not hasattr(fig.canvas, "get_renderer"):  # a figure made without pyplot has no renderer of its own
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        FigureCanvasAgg(fig)
    fig.draw_without_rendering()  # settle the layout, so text extents are final
    renderer = fig.canvas.get_renderer()
    nyquist_hz = 0.5 / table.sample_time
    for j, ax in enumerate(axes):
        box = ax.get_window_extent(renderer)
        # the grid's own labels, notes, frame tags, the legend and every marker are obstacles too
        placed: list[Any] = [c.get_window_extent(renderer) for c in ax.texts]
        if ax.get_legend() is not None:
            placed.append(ax.get_legend().get_window_extent(renderer))
        placed += _marker_boxes(ax, table)
        x0, x1 = ax.get_xlim()
        y0, y1 = ax.get_ylim()
        for k, m in enumerate(table.modes):
            text = pole_label(m, nyquist_hz)
            p = _upper(m.z)
            if text is None or (k in home and home[k] != j - 1):
                continue
            if not (x0 <= p.real <= x1 and y0 <= p.imag <= y1):
                continue
            placed.append(_label(ax, renderer, box, p, text, _FLAGGED if m.flags else _CLEAN, placed))


def _annotate(ax: Any, p: complex, text: str, colour: str, dx: float, dy: float) -> Any:
    """Put the label of ``p`` at ``(dx, dy)`` points from it, tied to it by a thin line when far."""
    leader = dict(arrowstyle="-", color=colour, lw=0.5, shrinkA=1, shrinkB=6)
    ann = ax.annotate(text, (p.real, p.imag), xytext=(dx, dy), textcoords="offset points",
                      ha="left" if dx >= 0 else "right", va="bottom" if dy >= 0 else "top", fontsize=7,
                      color=colour, zorder=7, arrowprops=leader if math.hypot(dx, dy) >= _LEADER_FROM else None)
    ann.set_in_layout(False)
    return ann


def _crosses_unit_circle(ax: Any, extent: Any) -> bool:
    """Tell whether the display-space box ``extent`` lies across the unit circle drawn on ``ax``."""
    (a, c), (b, d) = ax.transData.inverted().transform([(extent.x0, extent.y0), (extent.x1, extent.y1)])
    nearest = math.hypot(min(max(0.0, a), b), min(max(0.0, c), d))
    farthest = max(math.hypot(x, y) for x in (a, b) for y in (c, d))
    return nearest < 1.0 < farthest


def _label(ax: Any, renderer: Any, box: Any, p: complex, text: str, colour: str, obstacles: list[Any]) -> Any:
    """Label ``p`` at the first offset whose text stays in ``box`` and overlaps no obstacle; return its extent.

    The unit circle counts as an obstacle too, a lesser one. Where every offset
    overlaps something, the one inside ``box`` that overlaps the least is kept:
    the fewest markers and texts, then off the circle.
    """
    best: tuple[int, float, float] | None = None
    for dx, dy in _LABEL_OFFSETS:
        ann = _annotate(ax, p, text, colour, dx, dy)
        ext = ann.get_window_extent(renderer)
        inside = ext.x0 >= box.x0 and ext.x1 <= box.x1 and ext.y0 >= box.y0 and ext.y1 <= box.y1
        # covering a marker or another text is worse than lying across the unit circle
        clash = 10 * sum(1 for q in obstacles if ext.overlaps(q)) + _crosses_unit_circle(ax, ext)
        if inside and not clash:
            return ext
        if inside and (best is None or clash < best[0]):
            best = (clash, dx, dy)
        ann.remove()
    _, dx, dy = best if best is not None else (0, -6.0, 6.0)
    return _annotate(ax, p, text, colour, dx, dy).get_window_extent(renderer)
