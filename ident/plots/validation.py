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
#: Characters per line of a legend entry set beside a residual panel.
_LEGEND_CHARS = 30
#: Legend entry of the correlations outside their band.
_OUTSIDE = "outside the band"


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
        box = f"{fit_label}\n" + _fit_box(report, i)
        if show_pred:
            box += f"\n{k}-step prediction {_percent(report.prediction_fit[i])}"
        full.text(0.99, 0.97, box, transform=full.transAxes, ha="right", va="top", fontsize=7.5, color=_INK,
                  zorder=10, bbox={"boxstyle": "round,pad=0.3", "facecolor": "white", "edgecolor": "#b7c4cf",
                                   "alpha": 0.9})
        full.legend(loc="lower left", bbox_to_anchor=(0.0, 1.0), fontsize=7, frameon=False, ncol=3)
        zoom.set_title(f"zoom (shaded window, {hi - lo} samples)", fontsize=8, loc="left", color=_INK)
    axes[2 * p - 2].set_xlabel("time [s]", fontsize=8)
    axes[2 * p - 1].set_xlabel("time [s]", fontsize=8)
    return fig


def _half(c: Correlation, negative: bool) -> Correlation:
    """Keep the negative (or the non-negative) lags of a correlation, with its band."""
    keep = c.lags < 0 if negative else c.lags >= 0
    lags = c.lags[keep]
    return Correlation(lags, c.values[keep], c.band, tuple(k for k in c.significant_lags if k in set(lags.tolist())),
                       c.confidence, c.simultaneous, c.spread, c.family, c.lags.size * c.family)


#: How the fit box of :func:`output_comparison` names each kind of fit figure.
_FIT_NAMES = {"continued": "continued", "initial_state": "initial state est.", "from_rest": "from rest"}


def _fit_box(report: ValidationReport, i: int) -> str:
    """Fit lines of output ``i``: the simulation drawn (labelled by its initial state), then the other figures."""
    drawn = report.fit_of("initial_state") or report.fit_of("from_rest")
    if drawn is None:
        return f"simulation {_percent(report.simulation_fit[i])}"
    text = f"simulation {_percent(drawn.fit[i])} ({_FIT_NAMES[drawn.kind]})"
    others = [f"{_FIT_NAMES[f.kind]} {_percent(f.fit[i])}" for f in report.fits if f is not drawn]
    return text + ("\n" + ", ".join(others) if others else "")


def _percent(value: float) -> str:
    return f"{value:.1f} %" if np.isfinite(value) else "diverged"


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
        ax.scatter(t[outside], vals[outside], s=10, c=_BAD, zorder=3, label=_OUTSIDE)
    ax.set_title(title, fontsize=9, color=_INK, loc="left")
    ax.set_xlabel(label, fontsize=8)
    ax.set_ylabel("correlation [-]", fontsize=8)
    if skip_zero and vals.size > 1:  # r(0) = 1 by definition: scale to the other lags
        limit = 1.25 * max(float(np.max(np.abs(vals[1:]))), c.band)
        ax.set_ylim(-limit, limit)
        ax.annotate("r(0) = 1", (0.0, limit), xytext=(4, -10), textcoords="offset points", fontsize=7,
                    color="#7b8a97")
    top = ax.secondary_xaxis("top", functions=(lambda x: x / sample_time, lambda k: k * sample_time))
    top.tick_params(labelsize=7, colors="#7b8a97")
    top.set_xlabel("[samples]", fontsize=7, color="#7b8a97")
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
    ax.set_ylabel("share of the power [-]", fontsize=8)
    _style(ax)


def _residual_verdict_text(report: ValidationReport, name: str) -> tuple[str, bool]:
    """Summarise the whiteness, independence and feedback verdicts of one output in a few words each."""
    import textwrap

    words = {"whiteness": ("white", "correlated"), "input_independence": ("independent of", "depends on"),
             "feedback": ("no feedback to", "feedback to")}  # from this output to the input
    parts, good = [], True
    for v in report.verdicts:
        if v.output != name or v.test not in words:
            continue
        ok = bool(v.passed)
        good &= ok or v.test == "feedback"
        word = words[v.test][0 if ok else 1]
        parts.append(f"{'✓' if ok else '✗'} {word}" + (f" {v.input}" if v.input else ""))
    return literal(textwrap.fill("verdict: " + "; ".join(parts), 120)), good


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
        settling time sets; the band and its level in each legend, set beside
        its panel, off the stems; values outside the band in orange; the
        output's verdicts written at the top.
    """
    m = len(report.inputs)
    name = report.outputs[output]
    shown = literal(name)
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
    _draw_correlation(axes[0], w.autocorrelation, f"autocorrelation of the {shown} residuals{span_text}",
                      skip_zero=True, sample_time=T, label="lag [s]")
    _legend_each_once(axes[0])
    if w.periodogram is not None:
        _draw_periodogram(axes[1], w.periodogram)
        _legend_each_once(axes[1])
    else:
        axes[1].set_axis_off()
    for j in range(m):
        order = report.whiteners[j].order if report.whiteners else 0
        how = literal(f"prewhitened {report.inputs[j]} (AR({order}))" if order else report.inputs[j])
        ax = axes[2 + j]
        raw = report.cross_correlation[output][j]
        lag_label = ("lag [s]   (← negative: the residual less what past inputs explain leads, feedback;  "
                     "positive: the input leads, missed dynamics →)")
        if report.feedback_correlation:
            fb = _half(report.feedback_correlation[output][j], True)
            _draw_correlation(ax, fb, f"{shown} residuals against {how}", skip_zero=False, sample_time=T,
                              label=lag_label, band_label=f"negative lags: {fb.band_text}")
            raw = _half(raw, False)
            _draw_correlation(ax, raw, f"{shown} residuals against {how}", skip_zero=False, sample_time=T,
                              label=lag_label, band_label=f"positive lags: {raw.band_text}")
        else:
            _draw_correlation(ax, raw, f"{shown} residuals against {how}", skip_zero=False, sample_time=T,
                              label=lag_label)
        _legend_each_once(ax)
    text, good = _residual_verdict_text(report, name)
    fig.suptitle(text, fontsize=9, color=_GOOD if good else _BAD, x=0.01, ha="left")
    return fig


def _legend_each_once(ax: Any) -> None:
    """Put the legend beside the axes, off the stems, each label once and wrapped into a narrow column.

    Both halves of a split lag axis mark their values outside the band; the legend names that once,
    after the bands.
    """
    import textwrap

    first: dict[str, Any] = {}
    for handle, text in zip(*ax.get_legend_handles_labels(), strict=True):
        first.setdefault(text, handle)
    texts = sorted(first, key=lambda text: text == _OUTSIDE)
    _legend_beside(ax, [first[t] for t in texts], [textwrap.fill(t, _LEGEND_CHARS) for t in texts])


def _magnitude_band(H: np.ndarray, r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    with np.errstate(divide="ignore", invalid="ignore"):
        low = 20 * np.log10(np.maximum(np.abs(H) - r, np.abs(H) * 1e-3))
        high = 20 * np.log10(np.abs(H) + r)
    return low, high


#: Points of the dense logarithmic grid on which a given model's frequency response is drawn.
DENSE_POINTS = 2000
#: Shade of the band over which the frequency response was judged.
_JUDGED = "#eef5f3"


def frequency_comparison(report: ValidationReport, *, output: int = 0, input: int = 0,
                         model: Any | None = None, axes: Sequence[Any] | None = None,
                         covariance: Any | None = None) -> Any:
    """Model against the measured frequency response with its confidence region, and where it is informative.

    Parameters
    ----------
    report : ValidationReport
    output, input : int, default 0
        Channel shown.
    model : ident.lti.models.StateSpaceModel, optional
        The model checked: its response is drawn on a dense logarithmic grid of
        :data:`DENSE_POINTS` frequencies (so a sharp resonance keeps its shape)
        and its units label the gain axis. Without it the model is drawn on the
        report's own dense grid (``report.spectral.dense_response``) and the
        gain is in output unit per input unit.
    axes : sequence of matplotlib.axes.Axes, optional
        Three axes: magnitude, phase, and coherence (Welch) or relative width
        of the region (periodic lines).
    covariance : ident.lti.covariance.ParameterCovariance, optional
        The model's parameter covariance: its confidence band (at the report's
        confidence, :func:`ident.lti.covariance.response_band`) is shaded
        about the model's gain and phase. Needs ``model``; ignored when its
        dimensions are not the model's.

    Returns
    -------
    matplotlib.figure.Figure
        The model on a dense grid; the estimate with its region (a band for the
        Welch estimate, error bars at the lines of a periodic input), dark where
        informative and pale elsewhere; the band judged and any misses marked;
        the verdict in the title. The gain axis is in dB with the gain in the
        output unit per input unit on the right; every line is named in a
        legend.
    """
    from matplotlib.patches import Patch

    if axes is None:
        fig, grid = _new_figure(3, width=10.5, height=2.3)
        axes = list(grid[:, 0])
    else:
        axes = list(axes)
        fig = axes[0].figure
    sp = report.spectral
    oname, iname = report.outputs[output], report.inputs[input]
    judged = sp.judgement(oname, iname)
    ax_mag, ax_ph, ax_low = axes[:3]
    curve = _model_curve(report, model, output, input)
    _draw_response(sp, output, input, curve, ax_mag, ax_ph,
                   band=_model_band(model, covariance, curve[0], sp.confidence, output, input))
    extra = []
    if judged.informative:
        for ax in (ax_mag, ax_ph):
            ax.axvspan(judged.low_hz, judged.high_hz, color=_JUDGED, zorder=0)
        extra.append(Patch(facecolor=_JUDGED, edgecolor="#9cc5bb", lw=0.6, label="band judged"))
    missed = [b for b in sp.mismatch_bands if b.output == oname and b.input == iname]
    for band in missed:
        ax_mag.axvspan(band.low_hz, band.high_hz, ymax=0.05, color=_BAD, zorder=1)
    if missed:
        extra.append(Patch(color=_BAD, label="model misses the data"))
    _draw_quality(sp, output, input, ax_low, (iname, oname))
    status = {"agrees": "agrees", "disagrees": "DISAGREES", "cannot_judge": "cannot judge"}[judged.status]
    where = f"; judged over {judged.low_hz:.3g}-{judged.high_hz:.3g} Hz (shaded)" if judged.informative else ""
    ax_mag.set_title(literal(f"{iname} → {oname}") + f": the model {status}{where}\n"
                     f"{100 * judged.informative_share:.0f} % of the excited band informative", fontsize=9, loc="left",
                     color={"agrees": _GOOD, "disagrees": _BAD}.get(judged.status, "#9a6b00"))
    for ax in axes[:3]:
        _style(ax)
    _gain_axis(ax_mag, _gain_unit(model, output, input))
    handles, labels = ax_mag.get_legend_handles_labels()
    _legend_beside(ax_mag, handles + extra, labels + [h.get_label() for h in extra], clear_in=0.75)
    ax_low.set_xlabel("frequency [Hz]", fontsize=8)
    return fig


def _model_curve(report: ValidationReport, model: Any | None, output: int, input: int
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies [Hz] and the model's response: :data:`DENSE_POINTS` of them when the model is given."""
    sp = report.spectral
    fd = sp.dense_frequencies_hz
    if model is None:
        return fd, sp.dense_response[:, output, input]
    from ..lti.analysis import frequency_response

    dense = np.geomspace(fd[0], fd[-1], DENSE_POINTS)
    return dense, np.asarray(frequency_response(model, dense))[:, output, input]


def _model_band(model: Any | None, covariance: Any | None, frequencies: np.ndarray, confidence: float,
                output: int, input: int) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
    """Lower and upper gain and the phase half-width (rad) of the model's confidence band, or ``None``."""
    if model is None or covariance is None or not covariance.matches(model):
        return None
    from ..lti.covariance import response_band

    band = response_band(model, covariance, frequencies, confidence)
    return (band.magnitude_low[:, output, input], band.magnitude_high[:, output, input],
            band.phase_halfwidth_rad[:, output, input])


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


def _draw_response(sp: Any, i: int, j: int, curve: tuple[np.ndarray, np.ndarray], ax_mag: Any, ax_ph: Any,
                   band: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None) -> None:
    f = sp.frequencies_hz
    H, r = sp.estimate[:, i, j], sp.radius[:, i, j]
    info = sp.informative[:, i, j]
    fd, dense = curve
    with np.errstate(divide="ignore", invalid="ignore"):
        h_db = 20 * np.log10(np.abs(H))
        ph_width = np.degrees(np.arcsin(np.clip(r / np.abs(H), 0.0, 1.0)))
    h_ph = np.degrees(np.unwrap(np.where(np.isfinite(H), np.angle(H), 0.0)))
    model_ph = _phase_near(dense, fd, f, h_ph, info)
    with np.errstate(divide="ignore"):
        ax_mag.semilogx(fd, 20 * np.log10(np.abs(dense)), color=_SIM, lw=1.6, label="model", zorder=2)
    ax_ph.semilogx(fd, model_ph, color=_SIM, lw=1.6, zorder=2)
    level = f"{100 * sp.confidence:g} %"
    if band is not None:
        low_g, high_g, half = band
        ax_mag.fill_between(fd, 20 * np.log10(low_g), 20 * np.log10(high_g), color=_SIM, alpha=0.18, lw=0,
                            label=f"model, {level} band (parameter covariance)", zorder=1)
        ax_ph.fill_between(fd, model_ph - np.degrees(half), model_ph + np.degrees(half), color=_SIM, alpha=0.18,
                           lw=0, zorder=1)
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
    ax_mag.set_ylabel("gain [dB]", fontsize=8)
    ax_ph.set_ylabel("phase [deg]", fontsize=8)


def _phase_near(dense: np.ndarray, fd: np.ndarray, f: np.ndarray, h_ph: np.ndarray, info: np.ndarray) -> np.ndarray:
    """Unwrap the model phase and shift it by whole turns to lie nearest the informative estimate."""
    ph = np.degrees(np.unwrap(np.angle(dense)))
    if info.any():
        at = np.interp(f[info], fd, ph)
        turns = np.round(np.median(h_ph[info] - at) / 360.0)
        ph = ph + 360.0 * turns
    return ph


def _draw_quality(sp: Any, i: int, j: int, ax: Any, names: tuple[str, str]) -> None:
    from ..assess.spectral import COHERENCE_LOW, INFORMATIVE_RADIUS

    f = sp.frequencies_hz
    if sp.source == "periodic":
        with np.errstate(divide="ignore", invalid="ignore"):
            rel = sp.radius[:, i, j] / np.abs(sp.estimate[:, i, j])
        ax.semilogx(f, rel, "o", ms=3, color=_PRED, label="region radius / |estimate|")
        ax.axhline(INFORMATIVE_RADIUS, color=_BAD, lw=0.7, ls=":", label=f"informative below {INFORMATIVE_RADIUS:g}")
        ax.set_ylabel("relative width [-]", fontsize=8)
        ax.set_yscale("log")
    else:
        iname, oname = names
        ax.semilogx(f, sp.coherence[:, i, j], color=_PRED, lw=1.1, label=literal(f"coherence {iname} → {oname}"))
        if sp.multiple_coherence.shape[1] and sp.coherence.shape[2] > 1:
            ax.semilogx(f, sp.multiple_coherence[:, i], color=_PRED, lw=0.8, ls="--",
                        label=literal(f"multiple coherence of {oname}"))
        ax.axhline(COHERENCE_LOW, color=_BAD, lw=0.7, ls=":", label=f"informative above {COHERENCE_LOW:g}")
        ax.set_ylim(0.0, 1.05)
        ax.set_ylabel("coherence [-]", fontsize=8)
        excited = sp.excited[:, j]
        if (~excited).any():
            ax.fill_between(f, 0, 1.05, where=~excited, color="#f2f2f2", zorder=0, label="not excited")
    _legend_beside(ax, *ax.get_legend_handles_labels())


def _legend_beside(ax: Any, handles: list, labels: list, *, clear_in: float = 0.1) -> None:
    """Put the legend to the right of the axes, ``clear_in`` inches out (past a right-hand axis), never on the data."""
    from matplotlib.transforms import ScaledTranslation

    shift = ScaledTranslation(clear_in, 0.0, ax.figure.dpi_scale_trans)
    ax.legend(handles, labels, fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.0, 1.0),
              bbox_transform=ax.transAxes + shift, borderaxespad=0.0)


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
    combine, the worst winning: a failure of a model test is ``"fail"``; a
    verdict the data cannot decide (``passed is None``) and a failure of a
    data test (:data:`ident.assess.diagnostics.DATA_TESTS`: feedback,
    coherence, nonlinearity: a note about the data, not the model) are
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
    from ..assess.diagnostics import VERDICT_TESTS

    rank = {"pass": 0, "cannot_judge": 1, "fail": 2}
    outcome: dict[tuple[str, str], str] = {}
    rows = list(report.outputs)
    for v in report.verdicts:
        row = v.output if v.output in report.outputs else "all outputs"
        if row not in rows:
            rows.append(row)
        new = {"pass": "pass", "fail": "fail", "note": "cannot_judge", "cannot_judge": "cannot_judge"}[v.outcome]
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
    ax.set_xticks(range(len(tests)), [_column_label(t) for t in tests], fontsize=8, color=_INK)
    ax.xaxis.tick_top()
    ax.set_yticks(range(len(rows)),
                  [literal(f"{row} (fit {_percent(fits[row])})" if row in fits else row) for row in rows],
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
    poor = report.poor_outputs
    if poor:
        which = ", ".join(poor) if len(poor) <= 3 else f"{len(poor)} outputs"
        head = literal(f"POOR MODEL ({which} below {report.options.fit_warning:g} %); ") + head
    if own:  # below the grid, inside the figure: constrained layout makes room for it
        fig.legend(handles=handles, loc="outside lower left", ncol=4, fontsize=7.5, frameon=False,
                   handletextpad=0.3, columnspacing=1.2)
    else:
        ax.legend(handles=handles, loc="upper left", bbox_to_anchor=(0.0, 0.0), ncol=4, fontsize=7.5,
                  frameon=False, handletextpad=0.3, columnspacing=1.2)
    bad = model_failed or not report.passed or report.poor_outputs
    ax.set_title(head, fontsize=9.5, loc="left", color=_BAD if bad else _GOOD,
                 weight="bold", pad=22)
    return fig


def _column_label(test: str) -> str:
    """Return a test's name as a column head: long names on two lines, so neighbouring heads keep apart."""
    words = test.split("_")
    if len(test) <= 12 or len(words) == 1:
        return " ".join(words)
    return words[0] + "\n" + " ".join(words[1:])


def _cell(x: float, y: float, face: str) -> Any:
    from matplotlib.patches import Rectangle

    return Rectangle((x - 0.47, y - 0.42), 0.94, 0.84, facecolor=face, edgecolor="white", lw=1.0)


#: File stem -> figure function, for the figures ``rigfit check --plot`` writes per report.
FIGURES = {
    "outputs": output_comparison,
    "verdicts": verdict_grid,
}
