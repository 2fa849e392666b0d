"""Tests of the figures in ``ident.plots``: sizes, nothing cut off, nothing drawn over."""

from __future__ import annotations

import dataclasses
import io
import math
import struct

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.assess.diagnostics import CheckOptions, Correlation, Verdict, validate_model
from ident.assess.modes import mode_table
from ident.lti.models import StateSpaceModel
from ident.plots.poles import pole_zero_map
from ident.plots.validation import (
    DENSE_POINTS,
    frequency_comparison,
    output_comparison,
    residual_correlations,
    verdict_grid,
    verdict_outcomes,
)

T = 1e-3
LONG_NAMES = ("carriage_speed_at_the_far_end", "motor_speed")


def _two_output_model() -> StateSpaceModel:
    # A 25 Hz pair (damping 0.1) and a 0.2 s real mode, sampled with ZOH; invented rig.
    wn = 2 * math.pi * 25.0
    A = np.array([[0.0, 1.0, 0.0], [-wn**2, -2 * 0.1 * wn, 0.0], [0.0, 0.0, -5.0]])
    B = np.array([[0.0], [wn**2], [5.0]])
    C = np.array([[1.0, 0.0, 0.0], [0.0, 0.0, 1.0]])
    D = np.zeros((2, 1))
    Ad, Bd, Cd, Dd, _ = signal.cont2discrete((A, B, C, D), T, method="zoh")
    return StateSpaceModel(A=Ad, B=Bd, C=Cd, D=Dd, sample_time=T,
                           inputs=["motor_torque_cmd"], outputs=list(LONG_NAMES))


@pytest.fixture(scope="module")
def report():
    rng = np.random.default_rng(20261201)
    model = _two_output_model()
    u = rng.standard_normal((3000, 1))
    _, y, _ = signal.dlsim((model.A, model.B, model.C, model.D, T), u)
    y = y + 0.02 * rng.standard_normal(y.shape)
    return validate_model(model, u, y, T, CheckOptions(min_fit=80.0))


def _png_size(data: bytes) -> tuple[int, int]:
    # Width and height are the first two fields of the IHDR chunk (PNG spec, sec. 11.2.2).
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    return struct.unpack(">II", data[16:24])


def _render(fig):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)  # a figure made without pyplot has no renderer of its own
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    fig.canvas.draw()
    return buf.getvalue(), fig.canvas.get_renderer()


def _inside(fig, renderer, artist) -> bool:
    box = artist.get_window_extent(renderer)
    fb = fig.bbox
    # one pixel of slack for anti-aliasing/rounding (common practice, no source)
    return (box.x0 >= fb.x0 - 1 and box.y0 >= fb.y0 - 1
            and box.x1 <= fb.x1 + 1 and box.y1 <= fb.y1 + 1)


def _verdicts(outputs, *, failed_every: int = 3) -> tuple[Verdict, ...]:
    tests = ("whiteness", "input_independence", "coherence", "frequency_response")
    out = []
    for k, name in enumerate(outputs):
        for t, test in enumerate(tests):
            out.append(Verdict(test=test, passed=((k + t) % failed_every != 0), message=f"verdict {k}/{t}",
                               output=name))
    return tuple(out)


def _axis_labels(fig) -> list[str]:
    labels = []
    for ax in [a for top in fig.axes for a in (top, *top.child_axes)]:
        for axis in (ax.xaxis, ax.yaxis):
            text = axis.label.get_text()
            if text and axis.get_visible() and ax.get_visible():
                labels.append(text)
    return labels


def test_verdict_grid_one_figure_for_many_outputs_everything_inside(report):
    names = [f"zone_{k + 1}_temperature" for k in range(30)]
    many = dataclasses.replace(report, outputs=tuple(names), verdicts=_verdicts(names),
                               simulation_fit=np.linspace(50, 99, 30))
    few = verdict_grid(dataclasses.replace(report, verdicts=_verdicts(LONG_NAMES)))
    fig = verdict_grid(many)
    assert fig.get_figheight() > few.get_figheight()
    data, renderer = _render(fig)
    assert _png_size(data) == (round(fig.get_figwidth() * 100), round(fig.get_figheight() * 100))
    ax = fig.axes[0]
    ticks = [t for t in [*ax.get_yticklabels(), *ax.get_xticklabels()] if t.get_text()]
    assert len(ticks) == 30 + 4
    (legend,) = fig.legends
    for artist in [*ticks, legend, ax.title]:
        assert _inside(fig, renderer, artist)
    # one mark per (output, test) cell, as verdict_outcomes says; nothing about "+N more"
    marks = [t for t in ax.texts if t.get_text() in ("✓", "✗", "?")]
    assert len(marks) == 30 * 4
    assert not any("more" in t.get_text() for t in fig.texts + ax.texts)
    boxes = [t.get_window_extent(renderer) for t in ticks if t in ax.get_yticklabels()]
    for upper, lower in zip(boxes, boxes[1:], strict=False):
        assert not upper.overlaps(lower)


def test_verdict_outcomes_pass_fail_cannot_judge(report):
    verdicts = (
        Verdict("whiteness", True, "white", output="motor_speed"),
        Verdict("coherence", False, "low coherence", output="motor_speed", input="u"),
        Verdict("frequency_response", False, "misses", output="motor_speed", input="u"),
        Verdict("frequency_response", True, "fine", output="motor_speed", input="v"),
    )
    rows, tests, outcome = verdict_outcomes(dataclasses.replace(report, verdicts=verdicts))
    assert rows == list(LONG_NAMES)
    assert tests == ["whiteness", "coherence", "frequency_response"]  # VERDICT_TESTS order
    assert outcome == {("motor_speed", "whiteness"): "pass", ("motor_speed", "coherence"): "cannot_judge",
                       ("motor_speed", "frequency_response"): "fail"}


def test_verdicts_the_data_cannot_decide_show_a_question_mark(report):
    far = LONG_NAMES[0]
    verdicts = (
        # passed=None: the data cannot judge (nothing informative in the excited band)
        Verdict("frequency_response", None, "cannot judge", output=far, input="u"),
        Verdict("whiteness", True, "white", output=far),
        # a failed data test is a note about the data, not a model failure
        Verdict("feedback", False, "feedback", output=far, input="u"),
        # "cannot judge" on one input and a miss on another: the miss wins
        Verdict("frequency_response", None, "cannot judge", output="motor_speed", input="u"),
        Verdict("frequency_response", False, "misses", output="motor_speed", input="v"),
    )
    rep = dataclasses.replace(report, verdicts=verdicts)
    _, _, outcome = verdict_outcomes(rep)
    assert outcome == {(far, "frequency_response"): "cannot_judge", (far, "whiteness"): "pass",
                       (far, "feedback"): "cannot_judge", ("motor_speed", "frequency_response"): "fail"}
    fig = verdict_grid(rep)
    _, renderer = _render(fig)
    ax = fig.axes[0]
    marks = sorted(t.get_text() for t in ax.texts if t.get_text() in ("✓", "✗", "?"))
    assert marks == sorted(["?", "✓", "?", "✗"])  # the fourth cell (motor_speed, feedback) has no verdict
    (legend,) = fig.legends
    assert any(t.get_text().startswith("cannot judge") for t in legend.get_texts())
    assert "1 model test(s) failed" in ax.get_title(loc="left")


def test_output_comparison_names_fits_in_a_box_and_units(report):
    fig = output_comparison(report, model=_two_output_model().with_changes(output_units=("m/s", "rad/s")))
    _, renderer = _render(fig)
    full = fig.axes[0]
    labels = full.get_legend_handles_labels()[1]
    assert labels[:2] == ["measured", "simulated"]  # no figures in the legend
    assert not any("%" in label or "fit" in label for label in labels)
    (box,) = [t for t in full.texts if "held-out fit" in t.get_text()]
    assert f"simulation {report.simulation_fit[0]:.1f} %" in box.get_text()
    assert box.get_bbox_patch() is not None and _inside(fig, renderer, box)
    assert "[m/s]" in full.get_ylabel() and "deviation" in full.get_ylabel()
    in_sample = output_comparison(report, fit_label="in-sample fit")
    assert any("in-sample fit" in t.get_text() for t in in_sample.axes[0].texts)


def test_output_comparison_zoom_never_covers_a_short_record(report):
    short = dataclasses.replace(report, n_samples=200, measured=report.measured[:200],
                                simulated=report.simulated[:200], predicted=report.predicted[:200])
    fig = output_comparison(short)
    zoom = fig.axes[1]
    n_zoom = len(zoom.lines[0].get_xdata())
    assert 0 < n_zoom < 200 and n_zoom <= 50  # at most a quarter of the record


def test_frequency_comparison_dense_model_curve_units_and_labelled_lines(report):
    model = _two_output_model().with_changes(input_units=("N m",), output_units=("m/s", "rad/s"))
    fig = frequency_comparison(report, output=0, model=model)
    data, renderer = _render(fig)
    ax_mag, ax_ph, ax_coh = fig.axes[:3]
    model_line = [ln for ln in ax_mag.lines if ln.get_label() == "model"][0]
    assert len(model_line.get_xdata()) == DENSE_POINTS
    # the 25 Hz, damping 0.1 resonance: peak gain 1 / (2 zeta sqrt(1 - zeta^2)) = 5.025 (13.0 dB) for a
    # unit-DC-gain second-order system (closed form); the dense grid draws it to within 0.1 dB
    assert_allclose(np.max(model_line.get_ydata()), 20 * np.log10(1 / (2 * 0.1 * math.sqrt(1 - 0.01))), atol=0.1)
    labels = _axis_labels(fig)
    assert all("[" in text and "]" in text for text in labels), labels
    right = [t for t in labels if "gain [m/s/(N m)]" in t]
    assert right, labels  # gain in output unit per input unit beside the dB axis
    # every line on the coherence panel is named in its legend
    named = {t.get_text() for t in ax_coh.get_legend().get_texts()}
    assert {ln.get_label() for ln in ax_coh.lines} <= named
    for ax in fig.axes:
        if ax.get_title(loc="right"):
            assert _inside(fig, renderer, ax.title) and _inside(fig, renderer, ax._right_title)


def _far_zero_model() -> StateSpaceModel:
    # Clustered slow real poles, a flagged pole at -0.3 and zeros at 38 and 69 (invented).
    zeros = np.array([-0.5, 38.0, 69.0])
    poles = np.array([0.99, 0.94, 0.92, -0.3])
    A, B, C, D = signal.zpk2ss(zeros, poles, 1e-3)
    return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=5.0, inputs=["heater_duty"],
                           outputs=["platen_temp"])


def _pole_labels(ax):
    return [c for c in ax.get_children() if type(c).__name__ == "Annotation" and c.get_fontsize() == 7]


def _no_overlap(boxes):
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j])


def _marker_boxes(ax):
    """Display boxes of the pole and zero markers in view, as drawn, with one point of clearance.

    A marker of size s (points^2) is sqrt(s) points across (matplotlib's scatter), plus half its line
    width; the point of clearance keeps a label from touching it (common practice, no source).
    """
    from matplotlib.collections import PathCollection
    from matplotlib.transforms import Bbox

    boxes = []
    x0, x1 = ax.get_xlim()
    y0, y1 = ax.get_ylim()
    for coll in [c for c in ax.collections if isinstance(c, PathCollection)]:
        half = (math.sqrt(coll.get_sizes()[0]) / 2 + coll.get_linewidths()[0] / 2 + 1.0) * ax.figure.dpi / 72
        for x, y in coll.get_offsets():
            if x0 <= x <= x1 and y0 <= y <= y1:
                px, py = ax.transData.transform((x, y))
                boxes.append(Bbox.from_extents(px - half, py - half, px + half, py + half))
    return boxes


def _check_pole_map_labels(fig, renderer):
    """Every pole label inside the figure, clear of the other labels and of every pole and zero marker."""
    for axis in fig.axes:
        labels = _pole_labels(axis)
        boxes = [t.get_window_extent(renderer) for t in labels]
        for t, box in zip(labels, boxes, strict=True):
            assert _inside(fig, renderer, t), t.get_text()
            covered = [m for m in _marker_boxes(axis) if box.overlaps(m)]
            assert not covered, f"label {t.get_text()!r} covers {len(covered)} marker(s)"
        _no_overlap(boxes)
        assert _inside(fig, renderer, axis._left_title), axis.get_title(loc="left")


def _zoomed_poles_apart(zoom, poles):
    """The markers of ``poles`` (upper half plane) on ``zoom`` are all in view and at least one marker apart."""
    x0, x1 = zoom.get_xlim()
    y0, y1 = zoom.get_ylim()
    assert all(x0 <= p.real <= x1 and y0 <= p.imag <= y1 for p in poles)
    px = [zoom.transData.transform((p.real, p.imag)) for p in poles]
    across = math.sqrt(60) * zoom.figure.dpi / 72  # the cross is sqrt(s) points wide (s = 60, matplotlib)
    gaps = [math.dist(a, b) for i, a in enumerate(px) for b in px[i + 1:]]
    assert min(gaps) >= across, gaps


def _shows_z1_and_the_circle(zoom) -> bool:
    x0, x1 = zoom.get_xlim()
    y0, y1 = zoom.get_ylim()
    theta = np.linspace(0, math.pi / 2, 20001)
    arc = [(math.cos(t), math.sin(t)) for t in theta if x0 <= math.cos(t) <= x1 and y0 <= math.sin(t) <= y1]
    return x0 < 1.0 < x1 and y0 <= 0.0 <= y1 and len(arc) > 1


def test_pole_map_lists_zeros_outside_the_view_and_keeps_labels_inside():
    table = mode_table(_far_zero_model())
    fig = pole_zero_map(table)
    data, renderer = _render(fig)
    ax = fig.axes[0]
    assert ax.get_xlim()[1] < 2.0  # the view is not stretched by the far zeros
    note = [t for t in ax.texts if "outside the view" in t.get_text()]
    assert len(note) == 1 and "38" in note[0].get_text() and "69" in note[0].get_text()
    # slow poles 0.99, 0.94 and 0.92 crowd near z = 1: a second, zoomed map shows them
    assert len(fig.axes) == 2 and _png_size(data) == (1280, 640)  # figsize 12.8 x 6.4 in at 100 dpi
    zoom = fig.axes[1]
    x0, x1 = zoom.get_xlim()
    # 0.99 lies closer to the unit circle than the cluster is wide: the zoom reaches on to z = 1
    assert 0.89 < x0 < 0.92 and 1.0 < x1 < 1.05 and _shows_z1_and_the_circle(zoom)
    assert zoom.get_title(loc="left") == "zoom on the 3 crowded poles near z = 1"
    _check_pole_map_labels(fig, renderer)
    for axis in fig.axes:
        # real poles are labelled with their time constant, never a frequency: with T = 5 s the
        # Nyquist frequency is 0.1 Hz, and a real pole's corner frequency can lie above it
        assert not any(t.get_text().endswith("Hz") for t in _pole_labels(axis))
    zoom_texts = {t.get_text() for t in _pole_labels(zoom)}
    # tau = -T / ln z (closed form): 0.99 -> 497.5 s, 0.94 -> 80.81 s, 0.92 -> 59.97 s
    assert zoom_texts == {"τ 497 s", "τ 80.8 s", "τ 60 s"}
    assert {t.get_text() for t in _pole_labels(ax)} == {"z = -0.3"}  # the crowded ones only in the zoom
    _zoomed_poles_apart(zoom, [0.99, 0.94, 0.92])


def _platen_model() -> StateSpaceModel:
    # Poles and zeros of the demo's heated platen model (two heaters, two zones; one channel here), T = 5 s,
    # rounded to 4 digits: slow poles 0.9874, 0.9359, 0.9192 (time constants 396, 75.5, 59.3 s), a pair of
    # fitted poles on the negative real axis at -0.2454 and -0.2215, zeros -0.5866, -0.5323, 0.9705 and
    # two far outside the circle
    zeros = np.array([-0.5866, -0.5323, 0.9705, 39.83, 49.31])
    poles = np.array([0.9874, 0.9359, 0.9192, -0.2454, -0.2215])
    A, B, C, D = signal.zpk2ss(zeros, poles, 1e-3)
    return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=5.0, inputs=["heater_1_duty"], outputs=["zone_1_temp"])


def test_pole_map_zooms_on_each_crowded_cluster_apart():
    fig = pole_zero_map(mode_table(_platen_model()))
    data, renderer = _render(fig)
    assert len(fig.axes) == 3 and _png_size(data) == (1000, 640)  # figsize 10 x 6.4 in at 100 dpi
    ax, slow, negative = fig.axes
    # each zoom frames its own cluster: the slow poles apart from one another, the zero at 0.9705 between
    # them uncovered, z = 1 and the unit circle in view (0.9874 is closer to it than the cluster is wide)
    _zoomed_poles_apart(slow, [0.9874, 0.9359, 0.9192])
    assert slow.get_xlim()[0] > 0.85 and _shows_z1_and_the_circle(slow)
    assert slow.get_title(loc="left") == "zoom A: 3 crowded poles\nnear z = 1"
    _zoomed_poles_apart(negative, [-0.2454, -0.2215])
    x0, x1 = negative.get_xlim()
    assert -0.3 < x0 and x1 < -0.15  # the negative pair alone, not the span from it to the slow poles
    # centre of the pair: (-0.2454 - 0.2215) / 2 = -0.23345 (3 digits)
    assert negative.get_title(loc="left") == "zoom B: 2 crowded poles\nnear z = -0.233"
    # tau = -T / ln z (closed form): 0.9874 -> 394.3 s, 0.9359 -> 75.48 s, 0.9192 -> 59.35 s
    assert {t.get_text() for t in _pole_labels(slow)} == {"τ 394 s", "τ 75.5 s", "τ 59.3 s"}
    # z to 3 digits; -0.2215 is stored as -0.22149999... (binary), so "-0.221"
    assert {t.get_text() for t in _pole_labels(negative)} == {"z = -0.245", "z = -0.221"}
    assert _pole_labels(ax) == []  # every pole is crowded: each labelled in its zoom only
    _check_pole_map_labels(fig, renderer)
    # both zooms are framed and tagged on the full map
    assert sorted(t.get_text() for t in ax.texts if t.get_text() in ("A", "B")) == ["A", "B"]


def _modal_model(poles, sample_time: float) -> StateSpaceModel:
    # real modal form, one 2 x 2 rotation block per pair (listed by its upper member), so the poles are exact
    from scipy.linalg import block_diag

    blocks = [np.array([[p.real, p.imag], [-p.imag, p.real]]) if isinstance(p, complex) else np.array([[p]])
              for p in poles]
    A = block_diag(*blocks)
    n = A.shape[0]
    return StateSpaceModel(A=A, B=np.ones((n, 1)), C=np.ones((1, n)), D=np.zeros((1, 1)), sample_time=sample_time,
                           inputs=["u"], outputs=["y"])


def test_pole_map_zoom_away_from_z1_says_where_it_looks():
    # two lightly damped pairs at 0.68 + 0.72j and 0.69 + 0.712j (about 129 Hz at T = 1 ms) and a real pole
    # at 0.3 (invented): the zoom is on the pairs, far from z = 1
    pairs = [complex(0.68, 0.72), complex(0.69, 0.712)]
    fig = pole_zero_map(mode_table(_modal_model([*pairs, 0.3], 1e-3)))
    _, renderer = _render(fig)
    assert len(fig.axes) == 2
    zoom = fig.axes[1]
    # the centre of the two upper members: 0.685 + 0.716j
    assert zoom.get_title(loc="left") == "zoom on the 2 crowded poles near z = 0.685 ± 0.716j"
    x0, x1 = zoom.get_xlim()
    assert x1 < 1.0 and x1 - x0 < 0.05
    _zoomed_poles_apart(zoom, pairs)
    # s = ln(z) / T, f = |s| / 2 pi, zeta = -Re s / |s| (closed form): 129.6 Hz, 0.0119 and 127.5 Hz, 0.0107
    assert {t.get_text() for t in _pole_labels(zoom)} == {"130 Hz, ζ 0.012", "128 Hz, ζ 0.011"}
    _check_pole_map_labels(fig, renderer)


def test_pole_map_zoom_shows_z1_and_the_circle_for_a_pole_flagged_uncertain_stability():
    # real poles 0.91 and 0.90 (T = 0.1 s, invented) crowd, 0.09 from the unit circle, far more than they
    # are apart (0.01): the zoom alone would leave z = 1 out. With a standard deviation of 0.05 per axis,
    # the 95 % region of 0.91 (radius sqrt(-2 ln 0.05) * 0.05 = 0.122, closed form) crosses the circle
    model = _modal_model([0.91, 0.90, -0.5], 0.1)
    plain = pole_zero_map(mode_table(model))
    assert not _shows_z1_and_the_circle(plain.axes[1])
    assert plain.axes[1].get_title(loc="left") == "zoom on the 2 crowded poles near z = 0.905"
    cov = np.array([np.eye(2) * 0.05**2, np.eye(2) * 1e-8, np.eye(2) * 1e-8])
    table = mode_table(model, pole_covariance=cov)
    assert "uncertain_stability" in table.modes[0].flags + table.modes[1].flags
    fig = pole_zero_map(table)
    _, renderer = _render(fig)
    zoom = fig.axes[1]
    assert _shows_z1_and_the_circle(zoom)
    assert zoom.get_title(loc="left") == "zoom on the 2 crowded poles near z = 1"
    _zoomed_poles_apart(zoom, [0.91, 0.90])
    _check_pole_map_labels(fig, renderer)


def _crowded_pairs_model() -> StateSpaceModel:
    # Four lightly damped pairs at 1.0, 1.05, 1.1 and 1.15 Hz and a 3 s real mode, T = 10 ms (invented
    # drive train): on the full map every label would sit on top of the others
    # real modal form: one 2 x 2 rotation block per pair, so the poles are exact
    n = 9
    A = np.zeros((n, n))
    for k, f_hz in enumerate((1.0, 1.05, 1.1, 1.15)):
        wn = 2 * math.pi * f_hz
        z = np.exp(complex(-0.05 * wn, wn * math.sqrt(1 - 0.05**2)) * 0.01)  # z = exp(sT), closed form
        A[2 * k:2 * k + 2, 2 * k:2 * k + 2] = [[z.real, z.imag], [-z.imag, z.real]]
    A[8, 8] = math.exp(-0.01 / 3.0)
    B = np.ones((n, 1))
    C = np.ones((1, n))
    return StateSpaceModel(A=A, B=B, C=C, D=np.zeros((1, 1)), sample_time=0.01, inputs=["u"], outputs=["y"])


def test_pole_map_zooms_on_crowded_pairs_and_separates_their_labels():
    table = mode_table(_crowded_pairs_model())
    fig = pole_zero_map(table)
    _, renderer = _render(fig)
    # the pairs and the real pole crowd near z = 1 (zoom A); within that zoom the four pairs still crowd
    # (0.0031 apart in angle: 2 pi 0.05 Hz T), so zoom B is on them
    assert len(fig.axes) == 3
    _, whole, pairs = fig.axes
    assert {t.get_text() for t in _pole_labels(whole)} == {"τ 3 s"}
    texts = sorted(t.get_text() for t in _pole_labels(pairs))
    assert texts == sorted(["1 Hz, ζ 0.05", "1.05 Hz, ζ 0.05", "1.1 Hz, ζ 0.05", "1.15 Hz, ζ 0.05"])
    _zoomed_poles_apart(pairs, [m.z for m in table.modes if m.is_pair and m.z.imag > 0])
    assert _shows_z1_and_the_circle(whole)
    assert pairs.get_title(loc="left").startswith("zoom B: 4 crowded poles\nnear z = 0.99")
    # zoom B is framed on zoom A, where it lies, not on the full map
    assert [t.get_text() for t in whole.texts if t.get_text() == "B"] == ["B"]
    _check_pole_map_labels(fig, renderer)
    assert all("[-]" in text for text in _axis_labels(fig))


def test_pole_map_without_crowding_is_one_square_map():
    fig = pole_zero_map(mode_table(_two_output_model()))
    data, _ = _render(fig)
    assert len(fig.axes) == 1 and _png_size(data) == (640, 640)


def _binary_log(n: int, hold: int, seed: int = 3):
    rng = np.random.default_rng(seed)
    t = np.arange(n) * 1e-3
    u = np.repeat(rng.choice([-1.0, 1.0], size=n // hold + 1), hold)[:n]
    y = signal.lfilter([0.05], [1, -0.95], u)
    return t, u, y


def test_fast_binary_input_gets_a_zoom_where_transitions_show():
    from ident.plots.signals import ZOOM_CROSSINGS, plot_signals, zoom_window

    t, u, y = _binary_log(24_000, hold=2)
    window = zoom_window([u, y])
    assert window is not None
    lo, hi = window
    assert hi - lo <= 24_000 // 4  # never the whole record
    crossings = np.count_nonzero(np.diff(u[lo:hi] > 0))
    # about ZOOM_CROSSINGS transitions in the window (a random binary signal held 2 samples switches on
    # average every 4 samples: closed form), so each is several pixels wide
    assert ZOOM_CROSSINGS / 2 <= crossings <= 2 * ZOOM_CROSSINGS
    fig = plot_signals(t, [("torque_cmd [N m]", u), ("speed [rad/s]", y)], roles=["input", "output"])
    data, renderer = _render(fig)
    assert len(fig.axes) == 4
    zoom = fig.axes[1]
    (line,) = zoom.lines
    assert line.get_drawstyle().startswith("steps")
    assert "zoom" in zoom.get_title(loc="left")
    for ax in fig.axes:
        for artist in (ax.title, ax._left_title, ax.yaxis.label, ax.xaxis.label):
            if artist.get_text():
                assert _inside(fig, renderer, artist)


def test_slow_signals_need_no_zoom():
    from ident.plots.signals import plot_signals, zoom_window

    t, u, y = _binary_log(7_200, hold=200)
    assert zoom_window([u, y]) is None
    fig = plot_signals(t, [("duty [%]", u), ("temp [degC]", y)], roles=["input", "output"])
    assert len(fig.axes) == 2


def _texts_inside(fig, renderer):
    artists = list(fig.texts)
    if fig._suptitle is not None:
        artists.append(fig._suptitle)
    for ax in fig.axes:
        artists += [ax.title, ax._left_title, ax.xaxis.label, ax.yaxis.label]
        legend = ax.get_legend()
        if legend is not None:
            artists.append(legend)
    return [a for a in artists if (not hasattr(a, "get_text") or a.get_text()) and not _inside(fig, renderer, a)]


def test_residual_figure_groups_one_output_with_its_verdicts(report):
    fig = residual_correlations(report, output=1)
    _, renderer = _render(fig)
    assert _texts_inside(fig, renderer) == []
    # autocorrelation, cumulative periodogram, one cross-correlation per input (+ the samples axes)
    titles = [ax.get_title(loc="left") for ax in fig.axes]
    assert titles[0].startswith("autocorrelation of the motor_speed residuals, lags up to")
    assert "samples)" in titles[0] and titles[1].startswith("cumulative periodogram")
    assert "prewhitened motor_torque_cmd" in titles[2] or "motor_torque_cmd" in titles[2]
    # the band and its level are in the legend; the verdicts are written on the figure
    legend = [t.get_text() for t in fig.axes[0].get_legend().get_texts()]
    assert any(text.startswith("95 % simultaneous band over") for text in legend)
    assert fig._suptitle.get_text().startswith("verdict: ")
    assert fig.axes[0].get_xlabel() == "lag [s]"



def _crowded(c: Correlation, *, height: float) -> Correlation:
    # every lag outside the band, signs alternating: stems and markers at every place of the panel
    values = height * c.band * np.where(c.lags % 2 == 0, 1.0, -1.0)
    values[c.lags == 0] = 1.0 if c.lags.min() == 0 else values[c.lags == 0]
    return dataclasses.replace(c, values=values, significant_lags=tuple(int(k) for k in c.lags if k != 0))


def _marks(ax, renderer, *, notes: bool = True) -> list:
    """Display boxes of the stems (vlines), markers (scatter) and notes (texts) an axes draws, within the axes."""
    from matplotlib.collections import LineCollection, PathCollection
    from matplotlib.transforms import Bbox

    frame = ax.get_window_extent(renderer)
    boxes = []
    for c in ax.collections:
        if isinstance(c, LineCollection):
            for seg in c.get_segments():
                xy = ax.transData.transform(seg)
                boxes.append(Bbox.from_extents(*xy.min(axis=0), *xy.max(axis=0)))
        elif isinstance(c, PathCollection):
            radius = math.sqrt(float(np.max(c.get_sizes()))) / 2 * ax.figure.dpi / 72  # s is in points^2
            for x, y in c.get_offset_transform().transform(c.get_offsets()):
                boxes.append(Bbox.from_extents(x - radius, y - radius, x + radius, y + radius))
    boxes += [t.get_window_extent(renderer) for t in ax.texts] if notes else []
    return [b for b in (Bbox.intersection(b, frame) for b in boxes) if b is not None]


@pytest.mark.parametrize("with_feedback", [True, False])
def test_residual_figure_legends_never_cover_a_stem_or_marker(report, with_feedback):
    # A legend is read over the panel's data only if it covers none of it: with stems and markers
    # everywhere in every panel, each legend must lie outside its axes (common practice, no source).
    w = report.whiteness[1]
    crowded = dataclasses.replace(
        report,
        whiteness=(report.whiteness[0], dataclasses.replace(w, autocorrelation=_crowded(w.autocorrelation, height=3))),
        cross_correlation=tuple(tuple(_crowded(c, height=3) for c in row) for row in report.cross_correlation),
        feedback_correlation=(tuple(tuple(_crowded(c, height=3) for c in row) for row in report.feedback_correlation)
                              if with_feedback else ()),
    )
    fig = residual_correlations(crowded, output=1)
    _, renderer = _render(fig)
    assert _texts_inside(fig, renderer) == []
    legends = [(ax, ax.get_legend()) for ax in fig.axes if ax.get_legend() is not None]
    assert len(legends) == 3  # autocorrelation, periodogram, the one input's cross-correlation
    for ax, legend in legends:
        box = legend.get_window_extent(renderer)
        covered = [b for b in _marks(ax, renderer) if b.overlaps(box)]
        assert covered == [], (ax.get_title(loc="left"), [t.get_text() for t in legend.get_texts()])
        labels = [t.get_text() for t in legend.get_texts()]
        assert len(labels) == len(set(labels))  # "outside the band" once, though both halves have it
    for ax in fig.axes:  # nor is a note written over a stem
        stems = _marks(ax, renderer, notes=False)
        for note in ax.texts:
            box = note.get_window_extent(renderer)
            assert not [b for b in stems if b.overlaps(box)], note.get_text()
    cross = [t.get_text() for t in legends[2][1].get_texts()]
    assert cross.count("outside the band") == 1
    assert sum(text.startswith(("negative lags", "positive lags")) for text in cross) == (2 if with_feedback else 0)

def test_frequency_figure_draws_the_region_and_the_judged_band(report):
    fig = frequency_comparison(report, output=0, input=0)
    _, renderer = _render(fig)
    assert _texts_inside(fig, renderer) == []
    mag = fig.axes[0]
    title = mag.get_title(loc="left")
    status = report.spectral.judgements[0].status
    assert {"agrees": "agrees", "disagrees": "DISAGREES", "cannot_judge": "cannot judge"}[status] in title
    labels = [t.get_text() for t in mag.get_legend().get_texts()]
    assert "95 % region of the estimate" in labels and "model" in labels


def test_frequency_comparison_shades_the_models_band_from_its_covariance(report):
    # The shaded band is response_band's gain interval on the dense grid (its own test checks it by
    # Monte Carlo); here: drawn, named, and absent without a covariance (common practice, no source).
    from ident.lti.covariance import ParameterCovariance, response_band, theta_layout

    model = _two_output_model()
    lay = theta_layout(model.n_states, 1, 2)
    factor = np.zeros((lay["K"].stop, 1))
    factor[lay["C"], 0] = 0.1 * model.C.ravel()
    cov = ParameterCovariance(factor, "gauss", model.n_states, 1, 2)
    fig = frequency_comparison(report, output=0, model=model, covariance=cov)
    ax_mag = fig.axes[0]
    shaded = [c for c in ax_mag.collections if "parameter covariance" in str(c.get_label())]
    assert len(shaded) == 1
    named = {t.get_text() for t in ax_mag.get_legend().get_texts()}
    assert shaded[0].get_label() in named
    top = shaded[0].get_paths()[0].vertices[:, 1].max()
    fd = [ln for ln in ax_mag.lines if ln.get_label() == "model"][0].get_xdata()
    band = response_band(model, cov, fd, report.spectral.confidence)
    assert_allclose(top, 20 * np.log10(band.magnitude_high[:, 0, 0].max()), rtol=1e-9)
    plain = frequency_comparison(report, output=0, model=model)
    assert not [c for c in plain.axes[0].collections if "parameter covariance" in str(c.get_label())]


def test_strip_figure_names_outliers_at_either_edge_in_full():
    # Units flagged at the smallest and the largest value sit next to the panel's edges; their names
    # must be drawn whole inside the panel, not clipped by it (common practice, no source).
    from ident.plots.fleet import StripPanel, strip_figure

    values = [22.08, 23.8, 23.9, 24.0, 24.1, 25.9]
    names = ["AX-11-0003-long-serial", "a", "b", "c", "d", "AX-11-0017-long-serial"]
    flagged = [True, False, False, False, False, True]
    panel = StripPanel("mode 2 natural frequency", "Hz", values, names, flagged, 23.95, 0.1, 3.5)
    ratio = dataclasses.replace(panel, title="mode 2 damping ratio", unit="")
    fig = strip_figure([panel, panel, ratio], title="Mode 2")
    _, renderer = _render(fig)
    # every axis label names a unit, [-] when dimensionless (the house rule for figures)
    assert [ax.get_xlabel() for ax in fig.axes if ax.get_visible()] == [
        "mode 2 natural frequency [Hz]", "mode 2 natural frequency [Hz]", "mode 2 damping ratio [-]"]
    for ax in fig.axes[:2]:
        labels = [t for t in ax.texts if t.get_text().startswith("AX-11-")]
        assert len(labels) == 2
        box = ax.get_window_extent(renderer)
        for label in labels:
            text = label.get_window_extent(renderer)
            # one pixel of slack for anti-aliasing/rounding (common practice, no source)
            assert box.x0 - 1 <= text.x0 and text.x1 <= box.x1 + 1, label.get_text()
