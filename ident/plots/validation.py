"""Figures of a validation report: outputs, residual correlations, spectra, verdict card.

Every function takes a :class:`ident.assess.diagnostics.ValidationReport`, draws on
the axes it is given (or on a new figure not registered with pyplot) and
returns the figure. Nothing here changes global matplotlib state.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

import numpy as np

from ..assess.diagnostics import Correlation, ValidationReport
from ._text import literal

__all__ = [
    "output_comparison",
    "residual_correlations",
    "frequency_comparison",
    "verdict_card",
    "MAX_VERDICTS",
    "FIGURES",
]

_INK = "#1f2a36"
_MEASURED = "#a3b0bc"
_SIM = "#167a6e"
_PRED = "#3d5a80"
_BAND = "#e8eef3"
_BAD = "#c2410c"
_GOOD = "#167a6e"
_LOWCOH = "#fbeee6"
#: Largest number of points drawn per time series (longer logs are strided).
_MAX_POINTS = 20_000
#: Samples shown in the zoomed window of :func:`output_comparison`.
ZOOM_SAMPLES = 300


def _new_figure(rows: int, cols: int = 1, *, width: float = 8.0, height: float = 2.4,
                sharex: bool = True) -> tuple[Any, np.ndarray]:
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width, max(2.6, height * rows)), dpi=100, layout="constrained")
    axes = fig.subplots(rows, cols, sharex=sharex, squeeze=False)
    return fig, axes


def _style(ax: Any) -> None:
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(colors=_INK, labelsize=8)
    ax.grid(True, color="#dfe5ea", lw=0.5)


def output_comparison(report: ValidationReport, *, axes: Sequence[Any] | None = None) -> Any:
    """Measured against simulated (and predicted) output, with a zoomed window.

    Parameters
    ----------
    report : ValidationReport
    axes : sequence of matplotlib.axes.Axes, optional
        ``2 p`` axes: for each output the whole log, then a window of
        :data:`ZOOM_SAMPLES` samples from its middle; a new figure when omitted.

    Returns
    -------
    matplotlib.figure.Figure
    """
    p = len(report.outputs)
    if axes is None:
        from matplotlib.figure import Figure

        fig = Figure(figsize=(10.0, max(2.8, 2.5 * p)), dpi=100, layout="constrained")
        grid = fig.subplots(p, 2, squeeze=False, gridspec_kw={"width_ratios": (2.2, 1.0)})
        axes = [ax for row in grid for ax in row]
    else:
        axes = list(axes)
        fig = axes[0].figure
    N = report.n_samples
    T = report.sample_time
    stride = max(1, N // _MAX_POINTS)
    idx = np.arange(0, N, stride)
    half = min(N, ZOOM_SAMPLES) // 2
    lo, hi = N // 2 - half, N // 2 + half
    show_pred = not np.array_equal(report.predicted, report.simulated)
    k = report.prediction_steps
    for i in range(p):
        full, zoom = axes[2 * i], axes[2 * i + 1]
        for ax, sel in ((full, idx), (zoom, np.arange(lo, hi))):
            t = sel * T
            ax.plot(t, report.measured[sel, i], color=_MEASURED, lw=1.8, label="measured")
            ax.plot(t, report.simulated[sel, i], color=_SIM, lw=0.8,
                    label=f"simulated (fit {report.simulation_fit[i]:.1f} %)")
            if show_pred:
                ax.plot(t, report.predicted[sel, i], color=_PRED, lw=0.8, ls="--",
                        label=f"{k}-step prediction (fit {report.prediction_fit[i]:.1f} %)")
            _style(ax)
        full.axvspan(lo * T, (hi - 1) * T, color=_LOWCOH, zorder=0)
        full.set_ylabel(f"{literal(report.outputs[i])}\n(deviation)", fontsize=8, color=_INK)
        full.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), fontsize=7, frameon=False,
                    ncol=3)
        zoom.set_title("zoom (shaded window)", fontsize=8, loc="left", color=_INK)
    axes[2 * p - 2].set_xlabel("time [s]", fontsize=8)
    axes[2 * p - 1].set_xlabel("time [s]", fontsize=8)
    return fig


def _draw_correlation(ax: Any, c: Correlation, title: str, *, skip_zero: bool) -> None:
    lags = c.lags
    vals = c.values
    ax.axhspan(-c.band, c.band, color=_BAND, zorder=0)
    ax.axhline(0.0, color=_INK, lw=0.6)
    outside = np.abs(vals) > c.band
    if skip_zero:
        outside &= lags != 0
    colours = np.where(outside, _BAD, _SIM)
    ax.vlines(lags, 0.0, vals, colors=colours, lw=1.4)
    ax.scatter(lags, vals, s=10, c=colours, zorder=3)
    ax.set_title(title, fontsize=9, color=_INK, loc="left")
    ax.text(0.99, 0.95, f"band ±{c.band:.3f}", transform=ax.transAxes, ha="right", va="top",
            fontsize=7, color="#7b8a97")
    _style(ax)


def residual_correlations(report: ValidationReport, *, output: int = 0,
                          axes: Sequence[Any] | None = None) -> Any:
    """Residual autocorrelation and cross-correlation with each input, with the band.

    Parameters
    ----------
    report : ValidationReport
    output : int, default 0
        Index of the output whose residuals are shown.
    axes : sequence of matplotlib.axes.Axes, optional
        ``1 + m`` axes (autocorrelation, then one per input).

    Returns
    -------
    matplotlib.figure.Figure
        Values outside the band are drawn in orange.
    """
    m = len(report.inputs)
    if axes is None:
        fig, grid = _new_figure(1 + m, sharex=False, height=2.2)
        axes = list(grid[:, 0])
    else:
        axes = list(axes)
        fig = axes[0].figure
    name = literal(report.outputs[output])
    w = report.whiteness[output]
    _draw_correlation(
        axes[0], w.autocorrelation,
        f"autocorrelation of {name} residuals (Ljung-Box p = {w.ljung_box_pvalue:.3g})",
        skip_zero=True,
    )
    for j in range(m):
        ax = axes[1 + j]
        _draw_correlation(
            ax, report.cross_correlation[output][j],
            f"residuals of {name} vs {literal(report.inputs[j])} (negative lag: feedback; "
            "positive: missed input dynamics)",
            skip_zero=False,
        )
    for ax in axes[: 1 + m]:
        ax.set_xlabel("lag [samples]", fontsize=8)
    return fig


def frequency_comparison(report: ValidationReport, *, output: int = 0, input: int = 0,
                         axes: Sequence[Any] | None = None) -> Any:
    """Model against nonparametric frequency response, with the coherence of the data.

    Parameters
    ----------
    report : ValidationReport
    output, input : int, default 0
        Channel shown.
    axes : sequence of matplotlib.axes.Axes, optional
        Three axes: magnitude, phase, coherence.

    Returns
    -------
    matplotlib.figure.Figure
        Bands where the coherence is low are shaded on all three panels.
    """
    if axes is None:
        fig, grid = _new_figure(3, height=2.2)
        axes = list(grid[:, 0])
    else:
        axes = list(axes)
        fig = axes[0].figure
    sp = report.spectral
    f = sp.frequencies_hz
    G = sp.model_response[:, output, input]
    H = sp.estimate[:, output, input]
    with np.errstate(divide="ignore"):
        g_db, h_db = 20 * np.log10(np.abs(G)), 20 * np.log10(np.abs(H))
    ax_mag, ax_ph, ax_coh = axes[:3]
    oname, iname = report.outputs[output], report.inputs[input]
    for band in sp.low_coherence_bands:
        if band.output == oname and band.input in (iname, None):
            for ax in (ax_mag, ax_ph, ax_coh):
                ax.axvspan(band.low_hz, band.high_hz, color=_LOWCOH, zorder=0)
    for band in sp.mismatch_bands:
        if band.output == oname and band.input == iname:
            ax_mag.axvspan(band.low_hz, band.high_hz, ymax=0.04, color=_BAD, zorder=1)
    ax_mag.semilogx(f, h_db, color=_MEASURED, lw=1.0, label="estimate from data (H1)")
    ax_mag.semilogx(f, g_db, color=_SIM, lw=1.4, label="model")
    ax_mag.set_ylabel("magnitude [dB]", fontsize=8)
    ax_mag.set_title(literal(f"{iname} → {oname}"), fontsize=9, loc="left", color=_INK)
    ax_mag.legend(fontsize=7, frameon=False)
    ax_ph.semilogx(f, np.degrees(np.unwrap(np.angle(H))), color=_MEASURED, lw=1.0)
    ax_ph.semilogx(f, np.degrees(np.unwrap(np.angle(G))), color=_SIM, lw=1.4)
    ax_ph.set_ylabel("phase [deg]", fontsize=8)
    ax_coh.semilogx(f, sp.coherence[:, output, input], color=_PRED, lw=1.1, label="coherence")
    if sp.multiple_coherence.shape[1] and len(report.inputs) > 1:
        ax_coh.semilogx(f, sp.multiple_coherence[:, output], color=_PRED, lw=0.8, ls="--",
                        label="multiple coherence")
    from ..assess.diagnostics import COHERENCE_LOW

    ax_coh.axhline(COHERENCE_LOW, color=_BAD, lw=0.7, ls=":")
    ax_coh.set_ylim(0.0, 1.05)
    ax_coh.set_ylabel("coherence", fontsize=8)
    ax_coh.set_xlabel("frequency [Hz]", fontsize=8)
    for ax in axes[:3]:
        _style(ax)
    return fig


#: Largest number of verdicts listed on :func:`verdict_card`; the rest are counted.
MAX_VERDICTS = 16
#: Characters per line of a verdict before it wraps.
_WRAP = 105
#: Vertical space of one text line and the gap between verdicts [inch].
_LINE_IN = 0.145
_GAP_IN = 0.07
_HEADER_IN = 0.42


def _pick_verdicts(verdicts: Sequence[Any], limit: int) -> tuple[list[Any], int]:
    """Choose the verdicts to list (failures first when too many) and count the rest."""
    items = list(verdicts)
    if len(items) <= limit:
        return items, 0
    failed = [i for i, v in enumerate(items) if not v.passed]
    passed = [i for i, v in enumerate(items) if v.passed]
    keep = sorted((failed + passed)[:limit])
    return [items[i] for i in keep], len(items) - limit


def verdict_card(report: ValidationReport, *, ax: Any | None = None,
                 max_verdicts: int = MAX_VERDICTS) -> Any:
    """One-glance summary: fit bars per output beside the verdicts in plain words.

    Parameters
    ----------
    report : ValidationReport
    ax : matplotlib.axes.Axes, optional
        Axes for the fit bars; the verdict text goes into the figure to its
        right (leave room there). A new figure, sized to hold every listed
        line, when omitted.
    max_verdicts : int, default :data:`MAX_VERDICTS`
        Verdicts listed at most; failed ones are kept first and the number left
        out is written as "+N more".

    Returns
    -------
    matplotlib.figure.Figure
    """
    import textwrap

    from matplotlib.transforms import ScaledTranslation, blended_transform_factory

    from ..assess.diagnostics import DATA_TESTS

    items, hidden = _pick_verdicts(report.verdicts, max_verdicts)
    wrapped = [
        literal(textwrap.fill(f"{_mark(v, DATA_TESTS)} {v.test}: {v.message}", _WRAP,
                              subsequent_indent="   "))
        for v in items
    ]
    p = len(report.outputs)
    n_lines = sum(1 + t.count("\n") for t in wrapped) + (1 if hidden else 0)
    text_height = 0.2 + _HEADER_IN + _LINE_IN * n_lines + _GAP_IN * (len(items) + 1)
    bar_height = 1.5 + 0.55 * p
    if ax is None:
        from matplotlib.figure import Figure

        # Rounded up to a tenth of an inch so the pixel size is exact at any whole dpi.
        height = math.ceil(10.0 * max(3.0, text_height, bar_height)) / 10.0
        fig = Figure(figsize=(11.0, height), dpi=100,
                     layout="constrained")
        ax, text_ax = fig.subplots(1, 2, gridspec_kw={"width_ratios": (1.0, 2.9)})
        text_ax.set_axis_off()
        # x from the text column, y from the top of the figure (level with the legend).
        anchor = blended_transform_factory(text_ax.transAxes, fig.transFigure)
        x0, y0 = 0.0, 1.0
        pad_in = 0.08
    else:
        fig = ax.figure
        anchor = ax.transAxes
        x0, y0 = 1.12, 1.0
        pad_in = 0.0
    y = np.arange(p)
    sim = np.clip(report.simulation_fit, -20, 100)
    pred = np.clip(report.prediction_fit, -20, 100)
    ax.barh(y + 0.2, sim, height=0.38, color=_SIM, label="simulation")
    ax.barh(y - 0.2, pred, height=0.38, color=_PRED,
            label=f"{report.prediction_steps}-step prediction")
    for yy, vals, raw in ((y + 0.2, sim, report.simulation_fit),
                          (y - 0.2, pred, report.prediction_fit)):
        for yi, v, r in zip(yy, vals, raw, strict=True):
            inside = v > 25
            ax.text(v - 1.5 if inside else max(v, 0.0) + 1.5, yi, f"{r:.1f} %", fontsize=7,
                    va="center", ha="right" if inside else "left",
                    color="white" if inside else _INK)
    if report.options.min_fit is not None:
        ax.axvline(report.options.min_fit, color=_BAD, lw=1.0, ls="--",
                   label=f"required ({report.options.min_fit:g} %)")
    ax.set_yticks(y, [literal(o) for o in report.outputs], fontsize=8)
    ax.set_ylim(-0.7, p - 0.3)
    ax.set_xlim(min(0.0, float(min(sim.min(), pred.min()))), 100)
    ax.set_xlabel("fit [%]", fontsize=8)
    # Above the bars, inside the figure: constrained layout makes room for it.
    handles, labels = ax.get_legend_handles_labels()
    order = sorted(range(len(labels)), key=lambda i: labels[i].startswith("required"))
    ax.legend([handles[i] for i in order], [labels[i] for i in order], fontsize=7,
              frameon=False, loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=1,
              borderaxespad=0.2)
    _style(ax)
    ax.grid(False, axis="y")

    model_failed = sum(1 for v in report.verdicts if not v.passed and v.test not in DATA_TESTS)
    verdict = f"{model_failed} model test(s) failed" if model_failed else "model tests passed"
    if report.options.min_fit is not None or report.options.require_white:
        verdict += "; gates " + ("passed" if report.passed else "FAILED")
    good = report.passed and not model_failed

    def place(text: str, offset_in: float, **kw: Any) -> Any:
        shift = ScaledTranslation(0.0, -(offset_in + pad_in), fig.dpi_scale_trans)
        art = fig.text(x0, y0, text, transform=anchor + shift, va="top", ha="left", **kw)
        art.set_in_layout(False)
        return art

    place(f"{report.n_samples} samples — {verdict}", 0.0, fontsize=11,
          color=_GOOD if good else _BAD, weight="bold")
    top = _HEADER_IN
    for v, text in zip(items, wrapped, strict=True):
        colour = _GOOD if v.passed else ("#9a6b00" if v.test in DATA_TESTS else _BAD)
        place(text, top, fontsize=7.5, color=colour)
        top += _LINE_IN * (1 + text.count("\n")) + _GAP_IN
    if hidden:
        place(f"+{hidden} more verdict(s) not listed (passed ones first left out; "
              "all are in the report and in --json)", top, fontsize=7.5, color=_INK,
              style="italic")
    return fig


def _mark(verdict: Any, data_tests: tuple[str, ...]) -> str:
    if verdict.passed:
        return "✓"
    return "!" if verdict.test in data_tests else "✗"


#: File stem -> figure function, for the figures ``rigfit check --plot`` writes per report.
FIGURES = {
    "outputs": output_comparison,
    "verdicts": verdict_card,
}
