"""The ``--period`` and ``--signal-description`` options of ``fit`` and ``check``, and their text."""

from __future__ import annotations

from typing import Any

import click


def periodic_options(command: Any) -> Any:
    """Add ``--period auto|none|SECONDS`` and ``--signal-description FILE.json``."""
    decorators = [
        click.option("--period", "period_text", default="auto", show_default=True, metavar="auto|none|S",
                     help="Take this period of a periodic input, in seconds; 'auto' detects it from the input (used "
                          "when the log holds at least 3 periods), 'none' treats the input as not periodic."),
        click.option("--signal-description", "description_path", type=click.Path(dir_okay=False), default=None,
                     metavar="FILE.json",
                     help="Read the test signal's period, transient periods, blocks and excited lines from this "
                          "description written by 'rigfit excite --describe'."),
    ]
    for deco in reversed(decorators):
        command = deco(command)
    return command


def analyse_log_periods(u: Any, y: Any, sample_time: float, period_text: str, description_path: str | None,
                        names: dict[str, Any]) -> Any:
    """Run the periodic analysis the options ask for (``None`` when the input is not periodic or not asked)."""
    from ..errors import OptionError
    from ..estimate.periodic_check import period_samples, periodic_for_log

    arguments = None
    if description_path is not None:
        from ..io.signalfile import read_signal_description

        arguments = read_signal_description(description_path).periodic_arguments(sample_time)
    text = period_text.strip().lower()
    period, detect = None, text == "auto"
    if text not in ("auto", "none"):
        try:
            seconds = float(text)
        except ValueError:
            raise OptionError(f"--period must be 'auto', 'none' or a number of seconds; got {period_text!r}") \
                from None
        period = period_samples(seconds, sample_time)
    return periodic_for_log(u, y, sample_time, period=period, arguments=arguments, detect=detect, **names)


def periodic_lines(summary: dict[str, Any] | None) -> list[str]:
    """Format the periodic block of the text output."""
    if summary is None:
        return []
    s = summary
    lines = [f"periodic input: period {s['period_samples']} samples ({s['period_s']:.6g} s, {s['period_source']}); "
             f"{s['periods']} period(s) per block, first {s['transient_periods']} left out as transient, "
             f"{s['measured_periods']} averaged; {s['lines']} excited line(s)"
             + (f" from {s['band_hz'][0]:.4g} to {s['band_hz'][1]:.4g} Hz" if s["band_hz"] else "")]
    if s["noise_std"] is not None:
        noise = ", ".join(f"{k} {v:.4g}" for k, v in s["noise_std"].items())
        lines.append(f"  noise std from the period-to-period scatter: {noise}")
    model = s.get("model")
    if model is not None:
        ratio = ", ".join(f"{k} {_db(v)}" for k, v in model["error_to_noise_db"].items())
        lines.append(f"  model error against the measured noise floor at the lines: {ratio} "
                     "(0 dB: the error is at the noise level, the best a model can do; +10 dB: ten times the noise "
                     "power, the model misses part of the response)")
    for d in s["distortion"] or []:
        parts = []
        for kind in ("odd", "even"):
            if d[f"{kind}_lines"]:
                level = "below the noise" if d[f"{kind}_db"] is None else f"{d[f'{kind}_db']:.1f} dB"
                seen = "detected" if d[f"{kind}_detected"] else "not detected"
                parts.append(f"{kind} {level} ({seen}, {d[f'{kind}_lines']} lines)")
        if parts:
            lines.append(f"  nonlinear distortion of {d['output']} at the unexcited lines: " + "; ".join(parts)
                         + (f"; noise {d['noise_db']:.1f} dB" if d["noise_db"] is not None else "")
                         + " (relative to the excited lines)")
    lines += [f"  note: {n}" for n in s["notes"]]
    return lines


def _db(value: Any) -> str:
    return "n/a" if value is None else f"{value:+.1f} dB"
