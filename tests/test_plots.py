"""Tests of the figures in ``ident.plots``: sizes, nothing cut off, nothing drawn over."""

from __future__ import annotations

import dataclasses
import io
import math
import struct

import numpy as np
import pytest
from scipy import signal

from ident.assess.diagnostics import CheckOptions, Verdict, validate_model
from ident.assess.modes import mode_table
from ident.lti.models import StateSpaceModel
from ident.plots.poles import pole_zero_map
from ident.plots.validation import MAX_VERDICTS, frequency_comparison, residual_correlations, verdict_card

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


def _verdicts(n: int, *, failed_every: int = 3) -> tuple[Verdict, ...]:
    return tuple(
        Verdict(test="whiteness", passed=(k % failed_every != 0),
                message=f"verdict number {k}: " + "a long explanation of what was found " * 4)
        for k in range(n)
    )


def _verdict_texts(fig) -> list:
    return [t for t in fig.texts if t.get_text()[:1] in ("✓", "✗", "!", "?")]


def test_verdict_card_png_size_and_everything_inside(report):
    fig = verdict_card(report)
    data, renderer = _render(fig)
    w, h = _png_size(data)
    assert (w, h) == (round(fig.get_figwidth() * 100), round(fig.get_figheight() * 100))
    bar_ax = fig.axes[0]
    legend = bar_ax.get_legend()
    assert legend is not None and _inside(fig, renderer, legend)
    labels = {t.get_text() for t in legend.get_texts()}
    assert {"simulation", "1-step prediction", "required (80 %)"} <= labels
    ticks = [t for t in bar_ax.get_yticklabels() if t.get_text()]
    assert {t.get_text() for t in ticks} == set(LONG_NAMES)
    for artist in [*ticks, *fig.texts, bar_ax.xaxis.label]:
        assert _inside(fig, renderer, artist), artist.get_text()
    # the legend sits above the bars, not over them
    assert legend.get_window_extent(renderer).y0 >= bar_ax.get_window_extent(renderer).y1 - 1


def test_verdict_card_grows_with_the_list_and_lines_do_not_overlap(report):
    few = verdict_card(dataclasses.replace(report, verdicts=_verdicts(3)))
    many_report = dataclasses.replace(report, verdicts=_verdicts(13))
    many = verdict_card(many_report)
    assert many.get_figheight() > few.get_figheight()
    _, renderer = _render(many)
    texts = _verdict_texts(many)
    assert len(texts) == 13  # every verdict listed, none dropped
    boxes = sorted((t.get_window_extent(renderer) for t in texts), key=lambda b: -b.y1)
    for upper, lower in zip(boxes, boxes[1:], strict=False):
        assert lower.y1 <= upper.y0 + 0.5  # stacked, not drawn over each other
    for t in texts:
        assert _inside(many, renderer, t)
        assert "\n" in t.get_text()  # long messages are wrapped
        assert max(len(line) for line in t.get_text().splitlines()) <= 110


def test_verdict_card_counts_what_it_leaves_out(report):
    n = MAX_VERDICTS + 5
    rep = dataclasses.replace(report, verdicts=_verdicts(n))
    fig = verdict_card(rep)
    _, renderer = _render(fig)
    more = [t for t in fig.texts if t.get_text().startswith("+")]
    assert len(more) == 1 and more[0].get_text().startswith("+5 more")
    assert _inside(fig, renderer, more[0])
    listed = _verdict_texts(fig)
    assert len(listed) == MAX_VERDICTS
    # every failed verdict is kept when some must go (failures: k % 3 == 0 -> 7 of 21)
    assert sum(t.get_text().startswith("✗") for t in listed) == 7
    # no "+N more" when everything fits
    fig2 = verdict_card(dataclasses.replace(report, verdicts=_verdicts(MAX_VERDICTS)))
    assert not [t for t in fig2.texts if t.get_text().startswith("+")]


def test_verdict_card_on_given_axes(report):
    from matplotlib.figure import Figure

    fig = Figure(figsize=(12, 6))
    ax = fig.add_axes((0.1, 0.1, 0.2, 0.7))
    assert verdict_card(report, ax=ax) is fig
    assert len(_verdict_texts(fig)) == len(report.verdicts)


def _far_zero_model() -> StateSpaceModel:
    # Clustered slow real poles, a flagged pole at -0.3 and zeros at 38 and 69 (invented).
    zeros = np.array([-0.5, 38.0, 69.0])
    poles = np.array([0.99, 0.94, 0.92, -0.3])
    A, B, C, D = signal.zpk2ss(zeros, poles, 1e-3)
    return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=5.0, inputs=["heater_duty"],
                           outputs=["platen_temp"])


def test_pole_map_lists_zeros_outside_the_view_and_keeps_labels_inside():
    table = mode_table(_far_zero_model())
    fig = pole_zero_map(table)
    data, renderer = _render(fig)
    assert _png_size(data) == (640, 640)  # figsize 6.4 in at 100 dpi
    ax = fig.axes[0]
    assert ax.get_xlim()[1] < 2.0  # the view is not stretched by the far zeros
    note = [t for t in ax.texts if "outside the view" in t.get_text()]
    assert len(note) == 1 and "38" in note[0].get_text() and "69" in note[0].get_text()
    labels = [t for t in ax.texts if t.get_text().endswith("Hz") or "outside" in t.get_text()]
    labels += [c for c in ax.get_children() if type(c).__name__ == "Annotation"]
    for t in labels:
        assert _inside(fig, renderer, t), t.get_text()
    pole_labels = [c for c in ax.get_children() if type(c).__name__ == "Annotation"
                   and c.get_text().endswith("Hz") and c.get_fontsize() == 7]
    boxes = [t.get_window_extent(renderer) for t in pole_labels]
    assert len(boxes) == 4
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (pole_labels[i].get_text(), pole_labels[j].get_text())


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
