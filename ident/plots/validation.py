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
            shown = report.fit_of("initial_state") or report.fit_of("from_rest")
            fit = shown.fit[i] if shown is not None else report.simulation_fit[i]
            ax.plot(t, report.simulated[sel, i], color=_SIM, lw=0.8,
                    label=f"simulated (fit {fit:.1f} %, {shown.kind.replace('_', ' ') if shown else ''})")
            if show_pred:
                ax.plot(t, report.predicted[sel, i], color=_PRED, lw=0.8, ls="--",
                        label=f"{k}-step prediction (fit {report.prediction_fit[i]:.1f} %)")
            _style(ax)
        full.axvspan(lo * T, (hi - 1) * T, color=_LOWCOH, zorder=0)
        full.set_ylabel(f"{report.outputs[i]}\n(deviation)", fontsize=8, color=_INK)
        full.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), fontsize=7, frameon=False,
                    ncol=3)
        zoom.set_title("zoom (shaded window)", fontsize=8, loc="left", color=_INK)
    axes[2 * p - 2].set_xlabel("time [s]", fontsize=8)
    axes[2 * p - 1].set_xlabel("time [s]", fontsize=8)
    return fig


def _half(c: Correlation, negative: bool) -> Correlation:
    """Keep the negative (or the non-negative) lags of a correlation, with its band."""
    keep = c.lags < 0 if negative else c.lags >= 0
    lags = c.lags[keep]
    return Correlation(lags, c.values[keep], c.band, tuple(k for k in c.significant_lags if k in set(lags.tolist())),
                       c.confidence, c.simultaneous, c.spread, c.family, c.lags.size * c.family)


def _draw_correlation(ax: Any, c: Correlation, title: str, *, skip_zero: bool, sample_time: float,
                      label: str, band_label: str | None = None) -> None:
    """Stems of a correlation against the lag in seconds, the band shaded, values outside it in orange."""
    lags = c.lags
    vals = c.values
    t_band = np.array([lags.min() - 0.5, lags.max() + 0.5]) * sample_time
    ax.fill_between(t_band, -c.band, c.band, color=_BAND, zorder=0, lw=0,
                    label=band_label if band_label is not None else c.band_text)
    ax.axhline(0.0, color=_INK, lw=0.6)
    outside = np.abs(vals) > c.band
    if skip_zero:
        outside &= lags != 0
    t = lags * sample_time
    ax.vlines(t[~outside], 0.0, vals[~outside], colors=_SIM, lw=1.0)
    if outside.any():
        ax.vlines(t[outside], 0.0, vals[outside], colors=_BAD, lw=1.4)
        ax.scatter(t[outside], vals[outside], s=10, c=_BAD, zorder=3, label="outside the band")
    ax.set_title(title, fontsize=9, color=_INK, loc="left")
    ax.set_xlabel(label, fontsize=8)
    ax.set_ylabel("correlation", fontsize=8)
    if skip_zero and vals.size > 1:  # r(0) = 1 by definition: scale to the other lags
        limit = 1.25 * max(float(np.max(np.abs(vals[1:]))), c.band)
        ax.set_ylim(-limit, limit)
        ax.annotate("r(0) = 1", (0.0, limit), xytext=(4, -10), textcoords="offset points", fontsize=7,
                    color="#7b8a97")
    top = ax.secondary_xaxis("top", functions=(lambda x: x / sample_time, lambda k: k * sample_time))
    top.tick_params(labelsize=7, colors="#7b8a97")
    top.set_xlabel("[samples]", fontsize=7, color="#7b8a97")
    ax.legend(fontsize=7, frameon=False, loc="upper right" if skip_zero else "upper left")
    _style(ax)


def _draw_periodogram(ax: Any, cp: Any) -> None:
    """Bartlett's cumulative periodogram against the line of white noise and its Kolmogorov-Smirnov band."""
    f = cp.frequencies_hz
    line = np.arange(1, f.size + 1) / f.size
    ax.fill_between(f, np.clip(line - cp.band, 0, 1), np.clip(line + cp.band, 0, 1), color=_BAND, zorder=0,
                    label=f"{100 * cp.confidence:g} % Kolmogorov-Smirnov band (+-{cp.band:.3g})")
    ax.plot(f, line, color=_INK, lw=0.6, ls=":", label="white noise")
    ax.plot(f, cp.values, color=_SIM if cp.white else _BAD, lw=1.2, label="residuals")
    ax.set_xlim(0.0, f[-1])
    ax.set_ylim(0.0, 1.0)
    word = "inside its band" if cp.white else "leaves its band"
    ax.set_title(f"cumulative periodogram: {word}", fontsize=9, color=_INK, loc="left")
    ax.set_xlabel("frequency [Hz]", fontsize=8)
    ax.set_ylabel("share of the power", fontsize=8)
    ax.legend(fontsize=7, frameon=False, loc="upper left")
    _style(ax)


def _residual_verdict_text(report: ValidationReport, name: str) -> tuple[str, bool]:
    """Summarise the whiteness, independence and feedback verdicts of one output in a few words each."""
    import textwrap

    words = {"whiteness": ("white", "correlated"), "input_independence": ("independent of", "depends on"),
             "feedback": ("no feedback from", "feedback to")}
    parts, good = [], True
    for v in report.verdicts:
        if v.output != name or v.test not in words:
            continue
        ok = bool(v.passed)
        good &= ok or v.test == "feedback"
        word = words[v.test][0 if ok else 1]
        parts.append(f"{'✓' if ok else '✗'} {word}" + (f" {v.input}" if v.input else ""))
    return textwrap.fill("verdict: " + "; ".join(parts), 120), good


def residual_correlations(report: ValidationReport, *, output: int = 0,
                          axes: Sequence[Any] | None = None) -> Any:
    """Residual analysis of one output: autocorrelation and cumulative periodogram, then the inputs.

    Parameters
    ----------
    report : ValidationReport
    output : int, default 0
        Index of the output whose residuals are shown.
    axes : sequence of matplotlib.axes.Axes, optional
        ``2 + m`` axes: autocorrelation, cumulative periodogram, then one per
        input (cross-correlation with the prewhitened input over negative and
        positive lags).

    Returns
    -------
    matplotlib.figure.Figure
        Lags in seconds (samples on the top axis) over the span the model's
        settling time sets; the band and its level in each legend; values
        outside the band in orange; the output's verdicts written at the top.
    """
    m = len(report.inputs)
    name = report.outputs[output]
    if axes is None:
        from matplotlib.figure import Figure

        fig = Figure(figsize=(10.0, 2.9 * (1 + m) + 0.5), dpi=100, layout="constrained")
        grid = fig.add_gridspec(1 + m, 2, width_ratios=(1.6, 1.0))
        axes = [fig.add_subplot(grid[0, 0]), fig.add_subplot(grid[0, 1])]
        axes += [fig.add_subplot(grid[1 + j, :]) for j in range(m)]
    else:
        axes = list(axes)
        fig = axes[0].figure
    T = report.sample_time
    w = report.whiteness[output]
    span = report.lag_span
    span_text = "" if span is None else f", lags up to {span.lags * T:.4g} s ({span.lags} samples)"
    _draw_correlation(axes[0], w.autocorrelation, f"autocorrelation of the {name} residuals{span_text}",
                      skip_zero=True, sample_time=T, label="lag [s]")
    if w.periodogram is not None:
        _draw_periodogram(axes[1], w.periodogram)
    else:
        axes[1].set_axis_off()
    for j in range(m):
        order = report.whiteners[j].order if report.whiteners else 0
        how = f"prewhitened {report.inputs[j]} (AR({order}))" if order else report.inputs[j]
        ax = axes[2 + j]
        raw = report.cross_correlation[output][j]
        lag_label = ("lag [s]   (negative: the residual less what past inputs explain leads, feedback; "
                     "positive: the input leads, missed dynamics)")
        if report.feedback_correlation:
            fb = _half(report.feedback_correlation[output][j], True)
            _draw_correlation(ax, fb, f"{name} residuals against {how}", skip_zero=False, sample_time=T,
                              label=lag_label, band_label=f"negative lags: {fb.band_text}")
            raw = _half(raw, False)
            _draw_correlation(ax, raw, f"{name} residuals against {how}", skip_zero=False, sample_time=T,
                              label=lag_label, band_label=f"positive lags: {raw.band_text}")
        else:
            _draw_correlation(ax, raw, f"{name} residuals against {how}", skip_zero=False, sample_time=T,
                              label=lag_label)
        ax.text(0.01, 0.03, "← feedback side", transform=ax.transAxes, fontsize=7, color="#7b8a97")
        ax.text(0.99, 0.03, "input leads →", transform=ax.transAxes, fontsize=7, color="#7b8a97", ha="right")
    text, good = _residual_verdict_text(report, name)
    fig.suptitle(text, fontsize=9, color=_GOOD if good else _BAD, x=0.01, ha="left")
    return fig


def _magnitude_band(H: np.ndarray, r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    with np.errstate(divide="ignore", invalid="ignore"):
        low = 20 * np.log10(np.maximum(np.abs(H) - r, np.abs(H) * 1e-3))
        high = 20 * np.log10(np.abs(H) + r)
    return low, high


def frequency_comparison(report: ValidationReport, *, output: int = 0, input: int = 0,
                         axes: Sequence[Any] | None = None) -> Any:
    """Model against the measured frequency response with its confidence region, and where it is informative.

    Parameters
    ----------
    report : ValidationReport
    output, input : int, default 0
        Channel shown.
    axes : sequence of matplotlib.axes.Axes, optional
        Three axes: magnitude, phase, and coherence (Welch) or relative width
        of the region (periodic lines).

    Returns
    -------
    matplotlib.figure.Figure
        The model on a dense grid; the estimate with its region (a band for the
        Welch estimate, error bars at the lines of a periodic input), dark where
        informative and pale elsewhere; the band judged and any misses marked;
        the verdict in the title.
    """
    if axes is None:
        fig, grid = _new_figure(3, height=2.3)
        axes = list(grid[:, 0])
    else:
        axes = list(axes)
        fig = axes[0].figure
    sp = report.spectral
    oname, iname = report.outputs[output], report.inputs[input]
    judged = sp.judgement(oname, iname)
    ax_mag, ax_ph, ax_low = axes[:3]
    _draw_response(sp, output, input, ax_mag, ax_ph)
    if judged.informative:
        for ax in (ax_mag, ax_ph):
            ax.axvspan(judged.low_hz, judged.high_hz, color="#eef5f3", zorder=0)
    for band in sp.mismatch_bands:
        if band.output == oname and band.input == iname:
            ax_mag.axvspan(band.low_hz, band.high_hz, ymax=0.05, color=_BAD, zorder=1)
    _draw_quality(sp, output, input, ax_low)
    status = {"agrees": "agrees", "disagrees": "DISAGREES", "cannot_judge": "cannot judge"}[judged.status]
    where = f"; judged over {judged.low_hz:.3g}-{judged.high_hz:.3g} Hz (shaded)" if judged.informative else ""
    ax_mag.set_title(f"{iname} → {oname}: the model {status}{where}\n{100 * judged.informative_share:.0f} % of "
                     "the excited band informative", fontsize=9, loc="left",
                     color={"agrees": _GOOD, "disagrees": _BAD}.get(judged.status, "#9a6b00"))
    ax_mag.legend(fontsize=7, frameon=False, loc="lower left")
    for ax in axes[:3]:
        _style(ax)
    ax_low.set_xlabel("frequency [Hz]", fontsize=8)
    return fig


def _draw_response(sp: Any, i: int, j: int, ax_mag: Any, ax_ph: Any) -> None:
    f = sp.frequencies_hz
    H, r = sp.estimate[:, i, j], sp.radius[:, i, j]
    info = sp.informative[:, i, j]
    dense = sp.dense_response[:, i, j]
    with np.errstate(divide="ignore", invalid="ignore"):
        h_db = 20 * np.log10(np.abs(H))
        ph_width = np.degrees(np.arcsin(np.clip(r / np.abs(H), 0.0, 1.0)))
    h_ph = np.degrees(np.unwrap(np.where(np.isfinite(H), np.angle(H), 0.0)))
    fd = sp.dense_frequencies_hz
    model_ph = _phase_near(dense, fd, f, h_ph, info)
    with np.errstate(divide="ignore"):
        ax_mag.semilogx(fd, 20 * np.log10(np.abs(dense)), color=_SIM, lw=1.6, label="model", zorder=2)
    ax_ph.semilogx(fd, model_ph, color=_SIM, lw=1.6, zorder=2)
    level = f"{100 * sp.confidence:g} %"
    low, high = _magnitude_band(H, r)
    if sp.source == "periodic":
        for sel, alpha, lab in ((info, 1.0, f"measured at the lines ({level} region)"), (~info, 0.35, None)):
            ax_mag.errorbar(f[sel], h_db[sel], yerr=[h_db[sel] - low[sel], high[sel] - h_db[sel]], fmt="o", ms=3,
                            color=_PRED, alpha=alpha, lw=0.8, label=lab, zorder=3)
            ax_ph.errorbar(f[sel], h_ph[sel], yerr=ph_width[sel], fmt="o", ms=3, color=_PRED, alpha=alpha, lw=0.8,
                           zorder=3)
    else:
        ax_mag.fill_between(f, low, high, color=_MEASURED, alpha=0.35, lw=0, label=f"{level} region of the estimate")
        ax_mag.semilogx(f, np.where(info, np.nan, h_db), color=_MEASURED, lw=0.8, label="estimate, not informative")
        ax_mag.semilogx(f, np.where(info, h_db, np.nan), color=_PRED, lw=0.9, label="estimate (H1), informative",
                        zorder=3)
        ax_ph.fill_between(f, h_ph - ph_width, h_ph + ph_width, color=_MEASURED, alpha=0.35, lw=0)
        ax_ph.semilogx(f, np.where(info, np.nan, h_ph), color=_MEASURED, lw=0.8)
        ax_ph.semilogx(f, np.where(info, h_ph, np.nan), color=_PRED, lw=0.9, zorder=3)
    ax_mag.set_xscale("log")
    ax_ph.set_xscale("log")
    shown = np.concatenate([model_ph[np.isfinite(model_ph)], h_ph[info]])
    if shown.size:
        pad = max(30.0, 0.1 * float(np.ptp(shown)))
        ax_ph.set_ylim(float(shown.min()) - pad, float(shown.max()) + pad)
    ax_mag.set_ylabel("magnitude [dB]", fontsize=8)
    ax_ph.set_ylabel("phase [deg]", fontsize=8)


def _phase_near(dense: np.ndarray, fd: np.ndarray, f: np.ndarray, h_ph: np.ndarray, info: np.ndarray) -> np.ndarray:
    """Unwrap the model phase and shift it by whole turns to lie nearest the informative estimate."""
    ph = np.degrees(np.unwrap(np.angle(dense)))
    if info.any():
        at = np.interp(f[info], fd, ph)
        turns = np.round(np.median(h_ph[info] - at) / 360.0)
        ph = ph + 360.0 * turns
    return ph


def _draw_quality(sp: Any, i: int, j: int, ax: Any) -> None:
    from ..assess.spectral import COHERENCE_LOW, INFORMATIVE_RADIUS

    f = sp.frequencies_hz
    if sp.source == "periodic":
        with np.errstate(divide="ignore", invalid="ignore"):
            rel = sp.radius[:, i, j] / np.abs(sp.estimate[:, i, j])
        ax.semilogx(f, rel, "o", ms=3, color=_PRED, label="region radius / |estimate|")
        ax.axhline(INFORMATIVE_RADIUS, color=_BAD, lw=0.7, ls=":", label=f"informative below {INFORMATIVE_RADIUS:g}")
        ax.set_ylabel("relative width", fontsize=8)
        ax.set_yscale("log")
    else:
        ax.semilogx(f, sp.coherence[:, i, j], color=_PRED, lw=1.1, label="coherence")
        if sp.multiple_coherence.shape[1] and sp.coherence.shape[2] > 1:
            ax.semilogx(f, sp.multiple_coherence[:, i], color=_PRED, lw=0.8, ls="--", label="multiple coherence")
        ax.axhline(COHERENCE_LOW, color=_BAD, lw=0.7, ls=":", label=f"informative above {COHERENCE_LOW:g}")
        ax.set_ylim(0.0, 1.05)
        ax.set_ylabel("coherence", fontsize=8)
        excited = sp.excited[:, j]
        if (~excited).any():
            ax.fill_between(f, 0, 1.05, where=~excited, color="#f2f2f2", zorder=0, label="not excited")
    ax.legend(fontsize=7, frameon=False, loc="lower left")


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
    failed = [i for i, v in enumerate(items) if v.passed is not True]
    passed = [i for i, v in enumerate(items) if v.passed is True]
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
        textwrap.fill(f"{_mark(v, DATA_TESTS)} {v.test}: {v.message}", _WRAP,
                      subsequent_indent="   ")
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
    ax.set_yticks(y, list(report.outputs), fontsize=8)
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

    model_failed = sum(1 for v in report.verdicts if v.passed is False and v.test not in DATA_TESTS)
    verdict = f"{model_failed} model test(s) failed" if model_failed else "model tests passed"
    if report.options.min_fit is not None or report.options.require_white:
        verdict += "; gates " + ("passed" if report.passed else "FAILED")
    if report.poor_outputs:
        verdict = f"POOR MODEL ({', '.join(report.poor_outputs)}); " + verdict
    good = report.passed and not model_failed and not report.poor_outputs

    def place(text: str, offset_in: float, **kw: Any) -> Any:
        shift = ScaledTranslation(0.0, -(offset_in + pad_in), fig.dpi_scale_trans)
        art = fig.text(x0, y0, text, transform=anchor + shift, va="top", ha="left", **kw)
        art.set_in_layout(False)
        return art

    place(f"{report.n_samples} samples — {verdict}", 0.0, fontsize=11,
          color=_GOOD if good else _BAD, weight="bold")
    top = _HEADER_IN
    for v, text in zip(items, wrapped, strict=True):
        colour = _GOOD if v.passed else ("#9a6b00" if v.test in DATA_TESTS or v.passed is None else _BAD)
        place(text, top, fontsize=7.5, color=colour)
        top += _LINE_IN * (1 + text.count("\n")) + _GAP_IN
    if hidden:
        place(f"+{hidden} more verdict(s) not listed (passed ones first left out; "
              "all are in the report and in --json)", top, fontsize=7.5, color=_INK,
              style="italic")
    return fig


def _mark(verdict: Any, data_tests: tuple[str, ...]) -> str:
    if verdict.passed is None:
        return "?"
    if verdict.passed:
        return "✓"
    return "!" if verdict.test in data_tests else "✗"


#: File stem -> figure function, for the figures ``rigfit check --plot`` writes per report.
FIGURES = {
    "outputs": output_comparison,
    "verdicts": verdict_card,
}
