"""``rigfit drift``: what moved between a baseline model and a new model."""

from __future__ import annotations

import click

from ._common import GateFailed, echo_json, log_options, read_log_kwargs


@click.command()
@click.argument("baseline_path", metavar="BASELINE", type=click.Path(dir_okay=False))
@click.argument("new_path", metavar="NEW", type=click.Path(dir_okay=False))
@click.option("--log", "log_path", type=click.Path(dir_okay=False), default=None,
              help="A log of the rig after the change: both models are scored on it.")
@log_options
@click.option("--band", "band_hz", type=(float, float), default=None, metavar="LOW HIGH",
              help="Band [Hz] for the frequency-response comparison (default: the log's excited band, "
                   "else 0.001 to 0.8 Nyquist).")
@click.option("--max-frequency-shift", "frequency_shift_percent", type=float, default=10.0, show_default=True,
              help="Largest allowed shift of an oscillation's natural frequency [%].")
@click.option("--max-time-constant-shift", "time_constant_shift_percent", type=float, default=10.0,
              show_default=True, help="Largest allowed change of a real mode's time constant [%].")
@click.option("--max-damping-shift", "damping_shift", type=float, default=0.05, show_default=True,
              help="Largest allowed absolute damping-ratio change.")
@click.option("--max-gain-change", "dc_gain_change_percent", type=float, default=20.0, show_default=True,
              help="Largest allowed DC-gain change [%].")
@click.option("--max-response-difference", "response_difference_db", type=float, default=6.0, show_default=True,
              help="Largest allowed frequency-response difference in the band [dB].")
@click.option("--no-new-modes", is_flag=True, help="Treat a mode that appears or vanishes as a breach.")
@click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON on stdout.")
def drift(
    baseline_path: str,
    new_path: str,
    log_path: str | None,
    time_column: str | None,
    sample_rate: float | None,
    drop_bad_rows: bool,
    split_at_gaps: bool,
    jitter_tolerance: float,
    resample_hz: float | None,
    upsample: str | None,
    band_hz: tuple[float, float] | None,
    frequency_shift_percent: float,
    time_constant_shift_percent: float,
    damping_shift: float,
    dc_gain_change_percent: float,
    response_difference_db: float,
    no_new_modes: bool,
    as_json: bool,
) -> None:
    """Compare NEW with BASELINE (two model files of the same rig) and report what moved.

    Exit status 3 when a threshold is breached.
    """
    from ..assess.drift import DriftThresholds, compare_models, drift_report_to_dict
    from ..io.modelfile import load_model

    baseline_file = load_model(baseline_path)
    new_file = load_model(new_path)
    baseline, new = baseline_file.model, new_file.model
    baseline_cov = baseline_file.pole_covariance()
    new_cov = new_file.pole_covariance()
    thresholds = DriftThresholds(
        frequency_shift_percent=frequency_shift_percent,
        time_constant_shift_percent=time_constant_shift_percent,
        damping_shift=damping_shift,
        dc_gain_change_percent=dc_gain_change_percent,
        response_difference_db=response_difference_db,
        new_modes_allowed=not no_new_modes,
    )
    log_kwargs = read_log_kwargs(locals())
    u = y = None
    if log_path is not None:
        from ..estimate.excitation import excited_band
        from ..io.log import read_log

        log = read_log(log_path, list(new.inputs), list(new.outputs), **log_kwargs,
                       expand_patterns=False)
        # with --split-at-gaps both models are scored on the longest segment
        start, stop = max(log.segments, key=lambda seg: seg[1] - seg[0])
        if len(log.segments) > 1:
            click.echo(f"note: --log scored on the longest of {len(log.segments)} segments "
                       f"(samples {start}..{stop - 1})", err=True)
        if log.dropped_rows:
            click.echo(f"note: {log.dropped_rows} bad rows dropped from --log", err=True)
        u, y = log.u[start:stop], log.y[start:stop]
        if band_hz is None:
            band_hz = excited_band(u, new.sample_time)
    report = compare_models(baseline, new, thresholds=thresholds, band_hz=band_hz, u=u, y=y,
                            baseline_pole_covariance=baseline_cov, new_pole_covariance=new_cov)
    if as_json:
        echo_json(drift_report_to_dict(report))
    else:
        click.echo(drift_text(report))
    if not report.passed:
        raise GateFailed("; ".join(report.breaches))


def drift_text(report) -> str:
    """Readable drift summary."""
    lines = ["modes (baseline -> new)"]
    lines.append(f"  {'status':<9}{'f base [Hz]':>13}{'f new [Hz]':>13}{'shift [%]':>11}"
                 f"{'z-score':>9}{'zeta base':>11}{'zeta new':>10}  note")
    for s in report.mode_shifts:
        fb = f"{s.baseline.natural_frequency_hz:.4g}" if s.baseline else "-"
        fn = f"{s.new.natural_frequency_hz:.4g}" if s.new else "-"
        zb = f"{s.baseline.damping_ratio:.3f}" if s.baseline else "-"
        zn = f"{s.new.damping_ratio:.3f}" if s.new else "-"
        shift = f"{s.frequency_shift_percent:+.1f}" if s.frequency_shift_percent is not None else "-"
        zscore = f"{s.z_score:+.2g}" if s.z_score is not None else "-"
        note = ", ".join(s.breaches) + (" !" if s.breaches else "") + ("" if s.in_band else "outside the band")
        lines.append(f"  {s.status:<9}{fb:>13}{fn:>13}{shift:>11}{zscore:>9}{zb:>11}{zn:>10}  {note}".rstrip())
    taus = [s for s in report.mode_shifts if s.time_constant_shift_percent is not None]
    if taus:
        lines.append("real modes (judged by their time constant)")
        lines.append(f"  {'tau base [s]':>14}{'tau new [s]':>13}{'shift [%]':>11}  note")
        for s in taus:
            note = ", ".join(s.breaches) + (" !" if s.breaches else "") + ("" if s.in_band else "outside the band")
            lines.append(f"  {s.baseline.time_constant_s:>14.4g}{s.new.time_constant_s:>13.4g}"
                         f"{s.time_constant_shift_percent:>+11.1f}  {note}".rstrip())
    if any(s.z_score is not None for s in report.mode_shifts):
        lines.append("  z-score: frequency shift / its standard uncertainty from both models' pole "
                     "covariances; beyond +-2 the shift is significant at about 95 %")
    lines.append("")
    lines.append("DC gains")
    for g in report.gain_changes:
        pct = f"{g.change_percent:+.1f} %" if g.change_percent is not None else "n/a"
        mark = "  !" if g.breach else ""
        lines.append(f"  {g.input} -> {g.output}: {g.baseline:.4g} -> {g.new:.4g} ({pct}){mark}")
    r = report.response
    lines.append("")
    lines.append(
        f"largest response difference in {r.band_hz[0]:.3g}-{r.band_hz[1]:.3g} Hz: {r.largest_db:.2f} dB "
        f"at {r.at_frequency_hz:.4g} Hz ({r.input} -> {r.output})"
    )
    if report.new_model_fit is not None:
        lines.append("")
        width = max(len(name) for name in report.outputs) + 4
        lines.append(f"{'fit on the new log [%]':<{width}}{'baseline model':>16}{'new model':>12}")
        for k, name in enumerate(report.outputs):
            lines.append(f"  {name:<{width - 2}}{report.old_model_fit[k]:>16.1f}{report.new_model_fit[k]:>12.1f}")
    lines.append("")
    if report.passed:
        lines.append("verdict: within the drift thresholds")
    else:
        lines.append("verdict: drift thresholds breached:")
        lines += [f"  - {b}" for b in report.breaches]
    return "\n".join(lines)
