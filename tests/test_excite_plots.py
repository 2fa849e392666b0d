"""Figures of designed signals and periodic measurements: what is drawn, and nothing cut off."""

import io
import warnings

import numpy as np
import pytest
from scipy import signal

from ident.estimate.periodic import analyse_periodic, compare_with_model
from ident.estimate.signal_design import SignalDesignOptions, design_signal
from ident.lti.models import StateSpaceModel
from ident.plots.excite import designed_signal_figure, periodic_response_figure, zoom_window


def _render(fig):
    from matplotlib.backends.backend_agg import FigureCanvasAgg

    FigureCanvasAgg(fig)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    fig.canvas.draw()
    return fig.canvas.get_renderer()


def _inside(fig, renderer, artist) -> bool:
    box = artist.get_window_extent(renderer)
    fb = fig.bbox
    # one pixel of slack for anti-aliasing/rounding (common practice, no source)
    return box.x0 >= fb.x0 - 1 and box.y0 >= fb.y0 - 1 and box.x1 <= fb.x1 + 1 and box.y1 <= fb.y1 + 1


def _design(**kw):
    base = {"sample_rate_hz": 1000.0, "band_hz": (1.0, 50.0), "amplitude_range": (0.0, 5.0), "periods": 4}
    if kw.get("kind") == "multisine":
        base["phases"] = "schroeder"  # the crest factor does not matter here; saves the optimisation
    base.update(kw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return design_signal(SignalDesignOptions(**base))


@pytest.mark.parametrize("kind", ["prbs", "multisine", "chirp"])
def test_zoom_is_a_readable_stretch_not_the_whole_record(kind):
    sig = _design(kind=kind)
    start, stop = zoom_window(sig)
    assert stop - start <= sig.period_samples
    assert stop - start < 0.2 * sig.n_samples
    # about twelve cycles of the band's top, so single samples can be told apart (by design)
    assert (stop - start) / sig.sample_rate_hz * sig.options.band_hz[1] <= 40
    if kind == "chirp":  # the fastest part of the sweep: the end of the first measured period
        assert stop == (sig.transient_periods + 1) * sig.period_samples


def test_signal_figure_draws_each_input_and_keeps_text_inside():
    sig = _design(kind="prbs", n_inputs=2)
    fig = designed_signal_figure(sig, ["valve_a", "valve_b"], ["V", "V"])
    renderer = _render(fig)
    zoom_axes = [ax for ax in fig.axes if ax.get_title(loc="left").startswith("zoom")]
    assert len(zoom_axes) == 2
    start, stop = zoom_window(sig)
    for ax in zoom_axes:
        left, right = ax.get_xlim()
        assert right - left == pytest.approx((stop - start) / sig.sample_rate_hz)
    assert [ax.get_ylabel() for ax in zoom_axes] == ["valve_a [V]", "valve_b [V]"]
    for ax in fig.axes:
        for text in (ax._left_title, ax.xaxis.label, ax.yaxis.label):
            if text.get_text():
                assert _inside(fig, renderer, text), text.get_text()
    assert _inside(fig, renderer, fig._suptitle)


def test_spectrum_panel_marks_the_designed_lines():
    sig = _design(kind="multisine", harmonics="odd")
    fig = designed_signal_figure(sig)
    spectrum_ax = next(ax for ax in fig.axes if "one period" in ax.get_title(loc="left"))
    designed = next(line for line in spectrum_ax.get_lines() if line.get_label() == "designed lines")
    assert designed.get_xdata().size == sig.lines[0].size
    np.testing.assert_allclose(designed.get_xdata(), sig.lines[0] * sig.resolution_hz)
    np.testing.assert_allclose(designed.get_ydata(), 0.0, atol=1e-6)  # a flat multisine: every line 0 dB


def test_periodic_response_figure_has_error_bars_at_every_line(rng):
    fs = 100.0
    A, B, C, D = signal.cont2discrete(signal.tf2ss([1.0], [0.05, 1.0]), 1 / fs, method="zoh")[:4]
    sig = _design(kind="multisine", sample_rate_hz=fs, band_hz=(0.5, 20.0), amplitude_range=(-1, 1),
                  periods=6, harmonics="odd-random")
    _, y, _ = signal.dlsim((A, B, C, D, 1 / fs), sig.values)
    an = analyse_periodic(sig.values, y + 0.01 * rng.standard_normal(y.shape), 1 / fs)
    comparison = compare_with_model(an, StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=1 / fs))
    fig = periodic_response_figure(an, comparison=comparison)
    renderer = _render(fig)
    mag = fig.axes[0]
    bars = [c for c in mag.containers if type(c).__name__ == "ErrorbarContainer"]
    assert len(bars) == 1
    points = bars[0].lines[0]
    assert points.get_xdata().size == an.lines.size  # one point per excited line
    assert "model" in [line.get_label() for line in mag.get_lines()]
    labels = [t.get_text() for t in fig.axes[2].get_legend().get_texts()]
    assert any("noise floor" in t for t in labels) and any("unexcited" in t for t in labels)
    assert any("model error" in t for t in labels)
    for ax in fig.axes:
        assert _inside(fig, renderer, ax.yaxis.label)
