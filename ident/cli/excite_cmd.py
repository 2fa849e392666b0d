"""``rigfit excite``: design a test signal before the test and write it for the rig controller."""

from __future__ import annotations

import os
from typing import Any

import click

from ..choices import ARRANGEMENTS, HARMONICS, PHASES, SIGNAL_KINDS, SPACINGS
from ._common import DataError, echo_json


@click.command()
@click.option("--kind", type=click.Choice(SIGNAL_KINDS), required=True,
              help="Signal family: PRBS, random binary, band-limited random-phase noise, multisine, or "
                   "swept sine (chirp).")
@click.option("--sample-rate", "sample_rate", type=float, required=True, metavar="HZ",
              help="Sample rate of the rig controller that replays the signal.")
@click.option("--band", "band", type=float, nargs=2, required=True, metavar="LOW HIGH",
              help="Band of interest in Hz; LOW sets the period (frequency resolution).")
@click.option("--range", "amplitude_range", type=float, nargs=2, required=True, metavar="MIN MAX",
              help="Smallest and largest value the input may take (its units).")
@click.option("--inputs", "n_inputs", type=int, default=1, show_default=True, metavar="N",
              help="Number of inputs designed together for one test.")
@click.option("--periods", type=int, default=None, metavar="P",
              help="Periods (per block), the transient ones included [default: from --duration, else "
                   "the advice: transient + 4].")
@click.option("--transient-periods", "transient_periods", type=int, default=None, metavar="T",
              help="Leading periods of each block to discard [default: from --time-constant, else 1].")
@click.option("--duration", type=float, default=None, metavar="S",
              help="Test length in s, rounded down to whole periods.")
@click.option("--rate-limit", "rate_limit", type=float, default=None, metavar="R",
              help="Largest rate of change of the input, units per second.")
@click.option("--seed", type=int, default=0, show_default=True, metavar="K",
              help="Seed of the random choices; the same options and seed give the same signal.")
@click.option("--spacing", type=click.Choice(SPACINGS), default=None,
              help="Multisine line grid or chirp sweep [default: linear].")
@click.option("--harmonics", type=click.Choice(HARMONICS), default=None,
              help="Multisine: excite all, odd, or odd-random harmonics [default: all].")
@click.option("--lines-per-decade", "lines_per_decade", type=int, default=None, metavar="N",
              help="Multisine with --spacing log: lines per decade [default: 20].")
@click.option("--phases", type=click.Choice(PHASES), default=None,
              help="Multisine phases [default: low-crest].")
@click.option("--arrangement", type=click.Choice(ARRANGEMENTS), default=None,
              help="How several inputs are kept apart [default: orthogonal for multisines, shifted for "
                   "PRBS and chirps, independent for binary and noise].")
@click.option("--time-constant", "time_constant", type=float, default=None, metavar="S",
              help="Rough slowest time constant of the plant, for the advice (transient periods).")
@click.option("--noise-ratio", "noise_ratio", type=float, default=None, metavar="R",
              help="Output noise RMS over output signal RMS, if known, for the advice (periods).")
@click.option("--name", "names", multiple=True, metavar="NAME",
              help="Column name of an input (repeatable, one per input) [default: u1, u2, ...].")
@click.option("--unit", "units", multiple=True, metavar="UNIT",
              help="Unit of the inputs (once for all, or once per input) [default: -].")
@click.option("-o", "--output", "out_path", type=click.Path(dir_okay=False), required=True,
              metavar="FILE.csv", help="Write the signal to this CSV file.")
@click.option("--describe", "describe_path", type=click.Path(dir_okay=False), default=None,
              metavar="FILE.json", help="Also write a JSON description of the signal for later commands.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), default=None, metavar="FILE.png",
              help="Also draw the signal (zoomed stretch) and its spectrum.")
@click.option("--force", is_flag=True, help="Replace existing output files.")
@click.option("--json", "as_json", is_flag=True, help="Print a machine-readable summary on stdout.")
def excite(**params: Any) -> None:
    """Design a periodic test signal for a rig and write it as CSV (time [s], one column per input).

    The signal is centred in --range and scaled so its peak reaches it; with
    --rate-limit it is slew-limited and the distortion is reported. Written
    samples never leave the range or exceed the rate limit. The summary gives
    crest factor, RMS, band, frequency resolution, duration and advice on the
    test length.

    \b
    Examples:
      rigfit excite --kind multisine --sample-rate 1000 --band 0.5 50 --range -2 2 -o test.csv
      rigfit excite --kind prbs --sample-rate 500 --band 1 40 --range 0 10 --inputs 2 \\
          --duration 60 -o prbs.csv --describe prbs.json --plot prbs.png

    Exit status: 0 ok; 2 a request that cannot be met (band above Nyquist,
    periods that do not fit the duration, a rate limit the range cannot meet,
    an existing output without --force); nothing is written then.
    """
    import warnings

    from ..estimate.signal_design import SignalDesignOptions, design_signal
    from ..io.signalfile import check_signal_names

    targets = _check_targets(params)
    names, units = check_signal_names(params["names"], params["units"], max(1, params["n_inputs"]))
    options = SignalDesignOptions(
        kind=params["kind"], sample_rate_hz=params["sample_rate"], band_hz=params["band"],
        amplitude_range=params["amplitude_range"], n_inputs=params["n_inputs"], periods=params["periods"],
        transient_periods=params["transient_periods"], duration_s=params["duration"],
        rate_limit=params["rate_limit"], seed=params["seed"], spacing=params["spacing"],
        harmonics=params["harmonics"], lines_per_decade=params["lines_per_decade"], phases=params["phases"],
        arrangement=params["arrangement"], time_constant_s=params["time_constant"],
        noise_ratio=params["noise_ratio"],
    )
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # the design's warnings are in signal.warnings, printed below
        signal = design_signal(options)
    written = _write_outputs(signal, names, units, targets, params["force"])
    for text in signal.warnings:
        click.echo(f"warning: {text}", err=True)
    payload = _payload(signal, names, units, written)
    if params["as_json"]:
        echo_json(payload)
    else:
        click.echo(summary_text(payload))


def _check_targets(params: dict[str, Any]) -> dict[str, str]:
    """Refuse clashing or existing outputs before any work (nothing is written on an error)."""
    from ..io.atomic import check_output_path

    targets = {key: params[key] for key in ("out_path", "describe_path", "plot_path") if params[key]}
    seen: dict[str, str] = {}
    for key, path in targets.items():
        real = os.path.realpath(path)
        if real in seen:
            raise DataError(f"{path}: given for two outputs ({seen[real]} and {_OPTION[key]})")
        seen[real] = _OPTION[key]
        check_output_path(path, force=params["force"])
    return targets


_OPTION = {"out_path": "-o", "describe_path": "--describe", "plot_path": "--plot"}


def _write_outputs(signal: Any, names: tuple[str, ...], units: tuple[str, ...], targets: dict[str, str],
                   force: bool) -> dict[str, str]:
    """Render every output first, then write them all or none (temporary files, then renames)."""
    from ..io.atomic import write_many
    from ..io.signalfile import describe_signal, dumps_description, signal_csv_text

    csv_text = signal_csv_text(signal, names, units)
    files: list[tuple[str, str, str | bytes]] = [("csv", targets["out_path"], csv_text)]
    if "describe_path" in targets:
        description = describe_signal(signal, names, units, csv_name=os.path.basename(targets["out_path"]),
                                      csv_text=csv_text)
        files.append(("description", targets["describe_path"], dumps_description(description)))
    if "plot_path" in targets:
        files.append(("plot", targets["plot_path"], _plot_png(signal, names, units)))
    write_many([(path, data) for _, path, data in files], force=force)  # all or nothing
    return {label: path for label, path, _ in files}


def _plot_png(signal: Any, names: tuple[str, ...], units: tuple[str, ...]) -> bytes:
    import io

    import matplotlib

    matplotlib.use("Agg")
    from ..plots.excite import designed_signal_figure

    fig = designed_signal_figure(signal, names, units)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110)
    return buffer.getvalue()


def _payload(signal: Any, names: tuple[str, ...], units: tuple[str, ...], written: dict[str, str]) -> dict:
    opts = signal.options
    advice = signal.advice
    return {
        "kind": opts.kind, "sample_rate_hz": opts.sample_rate_hz, "band_hz": list(opts.band_hz),
        "amplitude_range": list(opts.amplitude_range), "rate_limit": opts.rate_limit, "seed": opts.seed,
        "arrangement": signal.arrangement, "spacing": signal.spacing, "harmonics": signal.harmonics,
        "phases": signal.phases, "prbs_bits": signal.prbs_bits, "clock_divider": signal.clock_divider,
        "sweep_hz": None if signal.sweep_hz is None else list(signal.sweep_hz),
        "period_samples": signal.period_samples, "period_s": signal.period_s,
        "resolution_hz": signal.resolution_hz, "periods": signal.periods,
        "transient_periods": signal.transient_periods, "measured_periods": signal.measured_periods,
        "blocks": signal.blocks, "n_samples": signal.n_samples, "duration_s": signal.duration_s,
        "inputs": [
            {"name": n, "unit": u, "lines": int(signal.lines[j].size),
             "first_line_hz": float(signal.lines[j][0] * signal.resolution_hz),
             "last_line_hz": float(signal.lines[j][-1] * signal.resolution_hz),
             "min": float(signal.values[:, j].min()), "max": float(signal.values[:, j].max()),
             "mean": float(signal.mean[j]), "rms": float(signal.rms[j]),
             "crest_factor": float(signal.crest_factor[j]), "peak_rate": float(signal.peak_rate[j]),
             "rate_distortion": None if signal.rate_distortion is None else float(signal.rate_distortion[j]),
             "band_power_kept": None if signal.band_power_kept is None else float(signal.band_power_kept[j])}
            for j, (n, u) in enumerate(zip(names, units, strict=True))
        ],
        "advice": {
            "resolution_hz": advice.resolution_hz, "period_s": advice.period_s,
            "transient_periods": advice.transient_periods, "measured_periods": advice.measured_periods,
            "blocks": advice.blocks, "duration_s": advice.duration_s,
            "expected_frf_std": advice.expected_frf_std, "notes": list(advice.notes),
        },
        "warnings": list(signal.warnings),
        "notes": [n for n in signal.notes if n not in advice.notes],
        "files": written,
    }


def _family_line(p: dict[str, Any]) -> str | None:
    if p["kind"] == "prbs":
        bits = (1 << p["prbs_bits"]) - 1
        return (f"PRBS       {p['prbs_bits']}-bit register ({bits} bits per period), {p['clock_divider']} "
                f"sample(s) per bit (clock {p['sample_rate_hz'] / p['clock_divider']:g} Hz)")
    if p["kind"] == "multisine":
        return f"grid       {p['spacing']}, {p['harmonics']} harmonics, {p['phases']} phases"
    if p["kind"] == "chirp":
        return (f"sweep      {p['sweep_hz'][0]:g} -> {p['sweep_hz'][1]:.6g} Hz ({p['spacing']}), one sweep "
                "per period, a whole number of cycles")
    return None


def summary_text(p: dict[str, Any]) -> str:
    """Format the summary of a designed signal for the terminal."""
    count = len(p["inputs"])
    lines = [f"{p['kind']} test signal, {count} input{'s' if count > 1 else ''} at {p['sample_rate_hz']:g} Hz"]
    lines.append(f"band       {p['band_hz'][0]:g} to {p['band_hz'][1]:g} Hz; lines every {p['resolution_hz']:.6g} Hz")
    family = _family_line(p)
    if family:
        lines.append(family)
    lines.append(f"period     {p['period_samples']} samples = {p['period_s']:.6g} s")
    blocks = f" in each of {p['blocks']} blocks ({p['arrangement']} arrangement)" if p["blocks"] > 1 else ""
    lines.append(f"periods    {p['periods']}{blocks}: the first {p['transient_periods']} to discard as "
                 f"transient, {p['measured_periods']} measured")
    lines.append(f"duration   {p['duration_s']:.6g} s ({p['n_samples']} samples per input)")
    if count > 1 and p["blocks"] == 1:
        lines.append(f"inputs     {p['arrangement']} arrangement")
    lines.append("")
    lines.append(f"{'input':<16} {'lines':>6} {'min':>10} {'max':>10} {'mean':>10} {'RMS':>10} {'crest':>6} "
                 f"{'peak rate/s':>12}")
    for row in p["inputs"]:
        label = f"{row['name']} [{row['unit']}]"
        lines.append(f"{label:<16} {row['lines']:>6} {row['min']:>10.4g} {row['max']:>10.4g} {row['mean']:>10.4g} "
                     f"{row['rms']:>10.4g} {row['crest_factor']:>6.3f} {row['peak_rate']:>12.4g}")
        if row["rate_distortion"] is not None:
            lines.append(f"{'':<16} rate limit {p['rate_limit']:g}/s: in-band change "
                         f"{100 * row['rate_distortion']:.2f} %, in-band power kept "
                         f"{100 * row['band_power_kept']:.1f} %")
    a = p["advice"]
    lines.append("")
    lines.append(f"advice     {a['transient_periods']} transient + {a['measured_periods']} measured period(s)"
                 + (f" in each of {a['blocks']} blocks" if a["blocks"] > 1 else "")
                 + f" = {a['duration_s']:.6g} s, resolution {a['resolution_hz']:.6g} Hz")
    if a["expected_frf_std"] is not None:
        lines.append(f"           expected frequency-response std per line: {100 * a['expected_frf_std']:.2g} %")
    lines.extend(f"           {note}" for note in a["notes"])
    lines.extend(f"note: {note}" for note in p["notes"])
    lines.append("")
    lines.append("wrote      " + "; ".join(f"{path} ({label})" for label, path in p["files"].items()))
    return "\n".join(lines)
