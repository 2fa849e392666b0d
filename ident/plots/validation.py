"""Figures of a validation report: outputs, residual correlations, spectra, the verdict grid.

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
    "verdict_grid",
    "verdict_outcomes",
    "VERDICT_MARKS",
    "DENSE_POINTS",
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


def _unit_text(units: Sequence[str] | None, k: int) -> str:
    return units[k] if units is not None and k < len(units) and units[k] else "-"


def _zoom_window(n: int, span: int) -> tuple[int, int]:
    """``[lo, hi)`` of a window of at most ``span`` samples from the middle, never the whole record."""
    width = max(2, min(span, n // 4)) if n >= 8 else max(1, n - 1)
    lo = max(0, n // 2 - width // 2)
    return lo, min(n, lo + width)


def output_comparison(report: ValidationReport, *, model: Any | None = None,
                      axes: Sequence[Any] | None = None, fit_label: str = "held-out fit") -> Any:
    """Measured against simulated (and predicted) output, with a zoomed window.

    Parameters
    ----------
    report : ValidationReport
    model : ident.lti.models.StateSpaceModel, optional
        The model checked; its output units label the axes.
    axes : sequence of matplotlib.axes.Axes, optional
        ``2 p`` axes: for each output the whole log, then a window of at most
        :data:`ZOOM_SAMPLES` samples (and at most a quarter of the record) from
        its middle; a new figure when omitted.
    fit_label : str, default "held-out fit"
        Name of the fit figures in the box on each plot ("in-sample fit" for
        data the model was fitted on).

    Returns
    -------
    matplotlib.figure.Figure
        The legend names the curves; the fit percentages stand in a small box
        in the corner of each full-record plot.
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
    lo, hi = _zoom_window(N, ZOOM_SAMPLES)
    show_pred = not np.array_equal(report.predicted, report.simulated)
    k = report.prediction_steps
    units = None if model is None else model.output_units
    for i in range(p):
        full, zoom = axes[2 * i], axes[2 * i + 1]
        for ax, sel in ((full, idx), (zoom, np.arange(lo, hi))):
            t = sel * T
            ax.plot(t, report.measured[sel, i], color=_MEASURED, lw=1.8, label="measured")
            ax.plot(t, report.simulated[sel, i], color=_SIM, lw=0.8, label="simulated")
            if show_pred:
                ax.plot(t, report.predicted[sel, i], color=_PRED, lw=0.8, ls="--", label=f"{k}-step prediction")
            _style(ax)
        full.axvspan(lo * T, (hi - 1) * T, color=_LOWCOH, zorder=0)
        full.set_ylabel(f"{literal(report.outputs[i])}\ndeviation [{literal(_unit_text(units, i))}]",
                        fontsize=8, color=_INK)
        zoom.set_ylabel(f"[{literal(_unit_text(units, i))}]", fontsize=8, color=_INK)
        box = f"{fit_label}\nsimulation {report.simulation_fit[i]:.1f} %"
        if show_pred:
            box += f"\n{k}-step prediction {report.prediction_fit[i]:.1f} %"
        full.text(0.99, 0.97, box, transform=full.transAxes, ha="right", va="top", fontsize=7.5, color=_INK,
                  zorder=10, bbox={"boxstyle": "round,pad=0.3", "facecolor": "white", "edgecolor": "#b7c4cf",
                                   "alpha": 0.9})
        full.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), fontsize=7, frameon=False, ncol=3)
        zoom.set_title(f"zoom (shaded window, {hi - lo} samples)", fontsize=8, loc="left", color=_INK)
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


#: Points of the dense logarithmic grid on which the model's frequency response is drawn.
DENSE_POINTS = 2000


def frequency_comparison(report: ValidationReport, *, output: int = 0, input: int = 0,
                         model: Any | None = None, axes: Sequence[Any] | None = None) -> Any:
    """Model against nonparametric frequency response, with the coherence of the data.

    Parameters
    ----------
    report : ValidationReport
    output, input : int, default 0
        Channel shown.
    model : ident.lti.models.StateSpaceModel, optional
        The model checked: its response is drawn on a dense logarithmic grid of
        :data:`DENSE_POINTS` frequencies (so a sharp resonance keeps its shape)
        and its units label the gain axis. Without it the model is drawn at the
        spectral estimate's frequencies.
    axes : sequence of matplotlib.axes.Axes, optional
        Three axes: magnitude, phase, coherence.

    Returns
    -------
    matplotlib.figure.Figure
        Bands where the coherence is low are shaded on all three panels; the
        gain axis is in dB with the gain in output unit per input unit on the
        right; every line is named in a legend.
    """
    from matplotlib.patches import Patch

    from ..assess.diagnostics import COHERENCE_LOW

    if axes is None:
        fig, grid = _new_figure(3, height=2.2)
        axes = list(grid[:, 0])
    else:
        axes = list(axes)
        fig = axes[0].figure
    sp = report.spectral
    f = sp.frequencies_hz
    H = sp.estimate[:, output, input]
    fm, G = _model_curve(report, model, output, input)
    with np.errstate(divide="ignore"):
        g_db, h_db = 20 * np.log10(np.abs(G)), 20 * np.log10(np.abs(H))
    ax_mag, ax_ph, ax_coh = axes[:3]
    oname, iname = report.outputs[output], report.inputs[input]
    shaded = mismatch = False
    for band in sp.low_coherence_bands:
        if band.output == oname and band.input in (iname, None):
            shaded = True
            for ax in (ax_mag, ax_ph, ax_coh):
                ax.axvspan(band.low_hz, band.high_hz, color=_LOWCOH, zorder=0)
    for band in sp.mismatch_bands:
        if band.output == oname and band.input == iname:
            mismatch = True
            ax_mag.axvspan(band.low_hz, band.high_hz, ymax=0.04, color=_BAD, zorder=1)
    ax_mag.semilogx(f, h_db, color=_MEASURED, lw=1.0, label="estimate from data (H1)")
    ax_mag.semilogx(fm, g_db, color=_SIM, lw=1.4, label="model")
    extra = []
    if shaded:
        extra.append(Patch(color=_LOWCOH, label=f"coherence below {COHERENCE_LOW:g}"))
    if mismatch:
        extra.append(Patch(color=_BAD, label="model misses the data"))
    handles, labels = ax_mag.get_legend_handles_labels()
    ax_mag.legend(handles + extra, labels + [h.get_label() for h in extra], fontsize=7, frameon=False,
                  loc="lower left", bbox_to_anchor=(0.0, 1.0), ncol=4, borderaxespad=0.2)
    ratio = _gain_unit(model, output, input)
    ax_mag.set_ylabel("gain [dB]", fontsize=8)
    _gain_axis(ax_mag, ratio)
    ax_mag.set_title(literal(f"{iname} → {oname}"), fontsize=9, loc="right", color=_INK)
    ax_ph.semilogx(f, np.degrees(np.unwrap(np.angle(H))), color=_MEASURED, lw=1.0, label="estimate from data (H1)")
    ax_ph.semilogx(fm, np.degrees(np.unwrap(np.angle(G))), color=_SIM, lw=1.4, label="model")
    ax_ph.set_ylabel("phase [deg]", fontsize=8)
    ax_coh.semilogx(f, sp.coherence[:, output, input], color=_PRED, lw=1.1,
                    label=literal(f"coherence {iname} → {oname}"))
    if sp.multiple_coherence.shape[1] and len(report.inputs) > 1:
        ax_coh.semilogx(f, sp.multiple_coherence[:, output], color=_PRED, lw=0.8, ls="--",
                        label=literal(f"multiple coherence of {oname}"))
    ax_coh.axhline(COHERENCE_LOW, color=_BAD, lw=0.7, ls=":", label=f"threshold {COHERENCE_LOW:g}")
    ax_coh.set_ylim(0.0, 1.05)
    ax_coh.set_ylabel("coherence [-]", fontsize=8)
    ax_coh.set_xlabel("frequency [Hz]", fontsize=8)
    ax_coh.legend(fontsize=7, frameon=False, loc="lower left")
    for ax in axes[:3]:
        _style(ax)
    return fig


def _model_curve(report: ValidationReport, model: Any | None, output: int, input: int
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies [Hz] and model response: dense and logarithmic when the model is given."""
    sp = report.spectral
    f = sp.frequencies_hz
    if model is None:
        return f, sp.model_response[:, output, input]
    from ..lti.analysis import frequency_response

    positive = f[f > 0]
    lo = positive[0] if positive.size else 1e-3 / report.sample_time
    dense = np.geomspace(lo, f[-1], DENSE_POINTS)
    return dense, np.asarray(frequency_response(model, dense))[:, output, input]


def _gain_unit(model: Any | None, output: int, input: int) -> str:
    if model is None:
        return "output unit/input unit"
    from ..display import ratio_unit

    out_u = model.output_units[output] if output < len(model.output_units) else ""
    in_u = model.input_units[input] if input < len(model.input_units) else ""
    return ratio_unit(out_u, in_u) if (out_u or in_u) else "output unit/input unit"


def _gain_axis(ax: Any, unit: str) -> None:
    """Add a right-hand axis giving the gain of the dB scale in output unit per input unit."""
    from matplotlib.ticker import FixedLocator

    sec = ax.secondary_yaxis("right", functions=(lambda db: 10 ** (np.asarray(db) / 20.0),
                                                 lambda g: 20 * np.log10(np.maximum(np.asarray(g), 1e-300))))
    lo, hi = ax.get_ylim()
    decades = np.arange(math.floor(lo / 20.0), math.ceil(hi / 20.0) + 1)
    sec.yaxis.set_major_locator(FixedLocator(10.0 ** decades))
    sec.set_yticklabels([f"{10.0 ** d:g}" for d in decades])
    sec.set_ylabel(f"gain [{literal(unit)}]", fontsize=8)
    sec.tick_params(labelsize=7, colors=_INK)


#: Marks of :func:`verdict_grid`: (symbol, colour, legend text) per outcome.
VERDICT_MARKS = {
    "pass": ("✓", _GOOD, "passed"),
    "fail": ("✗", _BAD, "failed: the model misses something"),
    "cannot_judge": ("?", "#9a6b00", "cannot judge: the data do not allow it"),
}
#: Height of one output row and width of one test column of :func:`verdict_grid` [inch].
_ROW_IN = 0.36
_COL_IN = 1.05


def verdict_outcomes(report: ValidationReport) -> tuple[list[str], list[str], dict[tuple[str, str], str]]:
    """Outcome per (output, test): ``"pass"``, ``"fail"`` or ``"cannot_judge"``.

    Several verdicts of one test on one output (one per input, one per band)
    combine: a failure of a model test is ``"fail"``; a failure of a data test
    (:data:`ident.assess.diagnostics.DATA_TESTS`: feedback, coherence) is
    ``"cannot_judge"``; otherwise ``"pass"``. Verdicts about no particular
    output go in a row ``"all outputs"``.

    Returns
    -------
    rows : list of str
        Outputs (and ``"all outputs"`` when needed), in report order.
    tests : list of str
        Tests present, in the order of :data:`~ident.assess.diagnostics.VERDICT_TESTS`.
    outcome : dict
        ``{(row, test): outcome}``; a missing key means no verdict there.
    """
    from ..assess.diagnostics import DATA_TESTS, VERDICT_TESTS

    rank = {"pass": 0, "cannot_judge": 1, "fail": 2}
    outcome: dict[tuple[str, str], str] = {}
    rows = list(report.outputs)
    for v in report.verdicts:
        row = v.output if v.output in report.outputs else "all outputs"
        if row not in rows:
            rows.append(row)
        new = "pass" if v.passed else ("cannot_judge" if v.test in DATA_TESTS else "fail")
        old = outcome.get((row, v.test))
        if old is None or rank[new] > rank[old]:
            outcome[(row, v.test)] = new
    present = {t for _, t in outcome}
    tests = [t for t in VERDICT_TESTS if t in present] + sorted(present - set(VERDICT_TESTS))
    return rows, tests, outcome


def verdict_grid(report: ValidationReport, *, ax: Any | None = None) -> Any:
    """Draw outputs x tests with one pass / fail / cannot-judge mark per cell, for any number of outputs.

    Parameters
    ----------
    report : ValidationReport
    ax : matplotlib.axes.Axes, optional
        Axes to draw the grid on; a new figure, sized to the grid, when omitted.

    Returns
    -------
    matplotlib.figure.Figure
        Rows are the outputs (labelled with their simulation fit), columns the
        tests; the marks are explained in the legend. The words of each verdict
        stay in the terminal, the JSON and the HTML report.
    """
    from matplotlib.lines import Line2D

    rows, tests, outcome = verdict_outcomes(report)
    own = ax is None
    if ax is None:
        from matplotlib.figure import Figure

        label_in = 0.09 * max([len(r) for r in rows] + [10]) + 0.6
        width = math.ceil(10 * max(6.0, label_in + _COL_IN * max(1, len(tests)) + 0.4)) / 10
        height = math.ceil(10 * (1.6 + _ROW_IN * len(rows))) / 10
        fig = Figure(figsize=(width, height), dpi=100, layout="constrained")
        ax = fig.add_subplot(1, 1, 1)
    else:
        fig = ax.figure
    fits = dict(zip(report.outputs, report.simulation_fit, strict=True))
    for r, row in enumerate(rows):
        for c, test in enumerate(tests):
            state = outcome.get((row, test))
            face = {"pass": "#e8f3ef", "fail": "#fbe5dc", "cannot_judge": "#fbf1d9"}.get(state, "#f4f5f6")
            ax.add_patch(_cell(c, r, face))
            if state is None:
                ax.text(c, r, "–", ha="center", va="center", fontsize=9, color="#9aa5ae")
            else:
                mark, colour, _ = VERDICT_MARKS[state]
                ax.text(c, r, mark, ha="center", va="center", fontsize=12, color=colour, weight="bold")
    ax.set_xlim(-0.5, len(tests) - 0.5 if tests else 0.5)
    ax.set_ylim(len(rows) - 0.5, -0.5)
    ax.set_xticks(range(len(tests)), [t.replace("_", " ") for t in tests], fontsize=8, color=_INK)
    ax.xaxis.tick_top()
    ax.set_yticks(range(len(rows)),
                  [literal(f"{row} (fit {fits[row]:.1f} %)" if row in fits else row) for row in rows],
                  fontsize=8, color=_INK)
    ax.tick_params(length=0)
    for spine in ax.spines.values():
        spine.set_visible(False)
    handles = [Line2D([], [], ls="none", marker=f"${m}$", color=col, markersize=8, label=text)
               for m, col, text in VERDICT_MARKS.values()]
    handles.append(Line2D([], [], ls="none", marker="$–$", color="#9aa5ae", markersize=8, label="no such test"))
    model_failed = sum(1 for v in outcome.values() if v == "fail")
    head = (f"{report.n_samples} samples: " + (f"{model_failed} model test(s) failed" if model_failed
                                                 else "model tests passed"))
    if report.options.min_fit is not None or report.options.require_white:
        head += "; gates " + ("passed" if report.passed else "FAILED")
    if own:  # below the grid, inside the figure: constrained layout makes room for it
        fig.legend(handles=handles, loc="outside lower left", ncol=4, fontsize=7.5, frameon=False,
                   handletextpad=0.3, columnspacing=1.2)
    else:
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.0, 0.0), ncol=4, fontsize=7.5,
                  frameon=False, handletextpad=0.3, columnspacing=1.2)
    ax.set_title(head, fontsize=9.5, loc="left", color=_BAD if model_failed or not report.passed else _GOOD,
                 weight="bold", pad=22)
    return fig


def _cell(x: float, y: float, face: str) -> Any:
    from matplotlib.patches import Rectangle

    return Rectangle((x - 0.47, y - 0.42), 0.94, 0.84, facecolor=face, edgecolor="white", lw=1.0)


#: File stem -> figure function, for the figures ``rigfit check --plot`` writes per report.
FIGURES = {
    "outputs": output_comparison,
    "verdicts": verdict_grid,
}
