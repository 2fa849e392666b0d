"""``rigfit modes``: a model's poles in physical units, plausibility flags, expectations."""

from __future__ import annotations

import math
from typing import Any

import click

from ..choices import FLAGS
from ._common import GateFailed, echo_json


@click.command()
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON on stdout.")
@click.option("--expect", "expect_path", type=click.Path(dir_okay=False), default=None,
              help="TOML file with an [expect] table; each expectation is checked (exit 3 if one fails).")
@click.option("--fail-on", "fail_on", multiple=True, type=click.Choice(FLAGS),
              help="Exit with status 3 when any mode carries this flag (repeatable).")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), default=None,
              help="Write a pole-zero map to this PNG file.")
@click.option("--force", is_flag=True, help="Replace an existing --plot file.")
@click.option("--log-duration", "log_duration_s", type=float, default=None, metavar="S",
              help="Duration of the fitted log [s] (default: from the model file's provenance).")
@click.option("--damping-below", "lightly_damped_below", type=float, default=0.02, show_default=True,
              help="Flag oscillatory modes with a damping ratio below this.")
@click.option("--nyquist-fraction", type=float, default=0.8, show_default=True,
              help="Flag modes at or above this fraction of the Nyquist frequency.")
@click.option("--log-fraction", "log_duration_fraction", type=float, default=0.2, show_default=True,
              help="Flag time constants longer than this fraction of the log duration.")
@click.option("--cancellation-distance", type=float, default=0.01, show_default=True,
              help="Flag a pole within this relative distance of a zero.")
@click.option("--marginal-tolerance", type=float, default=1e-3, show_default=True,
              help="Flag poles with |z| within this of 1 as marginal (and at z = 1 as integrators).")
@click.option("--stability-tolerance", type=float, default=1e-6, show_default=True,
              help="Flag poles with |z| > 1 + this as unstable.")
@click.option("--negative-real-angle", "negative_real_angle_tolerance_rad", type=float, default=0.05,
              show_default=True, metavar="RAD",
              help="Flag poles whose angle is within this many radians of pi as negative_real.")
@click.option("--negative-real-min-magnitude", type=float, default=0.05, show_default=True, metavar="R",
              help="Do not flag poles nearer z = 0 than this as negative_real (they die out within a sample).")
@click.option("--confidence-level", type=float, default=0.95, show_default=True, metavar="P",
              help="Probability content of the pole confidence region (used when the model file "
                   "holds a pole covariance); flag uncertain_stability when it crosses |z| = 1.")
def modes(
    model_path: str,
    as_json: bool,
    expect_path: str | None,
    fail_on: tuple[str, ...],
    plot_path: str | None,
    force: bool,
    log_duration_s: float | None,
    lightly_damped_below: float,
    nyquist_fraction: float,
    log_duration_fraction: float,
    cancellation_distance: float,
    marginal_tolerance: float,
    stability_tolerance: float,
    negative_real_angle_tolerance_rad: float,
    negative_real_min_magnitude: float,
    confidence_level: float,
) -> None:
    """Tabulate the poles of MODEL (a model file) in physical units and flag implausible ones.

    Each real pole or complex pair is one mode: natural frequency, damping
    ratio, time constant, and for oscillations the damped frequency and period.
    Warnings are explained under the table.

    Exit status: 0 ok; 2 bad input; 3 an expectation failed or a --fail-on flag is present.
    """
    # An existing --plot file is refused (below) before anything is printed.
    from ..assess.modes import ModeThresholds, mode_table, mode_table_to_dict
    from ..io.atomic import check_output_path
    from ..io.modelfile import load_model

    if plot_path is not None:
        check_output_path(plot_path, force=force, protected=(model_path, expect_path))
    loaded = load_model(model_path)
    model = loaded.model
    expectations = None
    if expect_path is not None:
        from ..io.expectfile import load_expectations

        expectations = load_expectations(expect_path)
    thresholds = ModeThresholds(
        stability_tolerance=stability_tolerance,
        marginal_tolerance=marginal_tolerance,
        lightly_damped_below=lightly_damped_below,
        nyquist_fraction=nyquist_fraction,
        log_duration_fraction=log_duration_fraction,
        cancellation_distance=cancellation_distance,
        negative_real_angle_tolerance_rad=negative_real_angle_tolerance_rad,
        negative_real_min_magnitude=negative_real_min_magnitude,
        confidence_level=confidence_level,
    )
    if log_duration_s is None:
        log_duration_s = log_duration_from_provenance(loaded.provenance, model.sample_time)
    if log_duration_s is None:
        click.echo("slow_for_log not checked: log duration unknown (use --log-duration)", err=True)
    covariance = loaded.pole_covariance()
    table = mode_table(
        model, thresholds=thresholds, log_duration_s=log_duration_s, pole_covariance=covariance
    )
    results: tuple = ()
    if expectations is not None:
        from ..assess.expectations import check_expectations

        results = check_expectations(model, table, expectations)
    present = table.flags()
    tripped = [f for f in FLAGS if f in fail_on and f in present]

    if plot_path is not None:
        _write_plot(table, plot_path, force=force, protected=(model_path, expect_path))

    if as_json:
        payload = mode_table_to_dict(table)
        payload["model"] = model_path
        payload["expectations"] = [_result_dict(r) for r in results]
        payload["fail_on"] = {"flags": list(fail_on), "present": tripped}
        echo_json(payload)
    else:
        click.echo(modes_text(table, model_path=model_path, units=(model.input_units,
                                                                   model.output_units)))
        if results:
            click.echo("")
            click.echo(expectations_text(results, expect_path))
    failures = [f"expectation {r.name} not met ({r.measured})" for r in results if not r.met]
    failures += [f"flag {f} present" for f in tripped]
    if failures:
        raise GateFailed("; ".join(failures))


def log_duration_from_provenance(provenance: dict, sample_time: float | None) -> float | None:
    """Log duration in s recorded in a model file's provenance, if any.

    Looks at ``log_duration_s``, then ``log.duration_s``, then
    ``log.n_samples`` (or ``estimation.n_samples``) times the sample time.
    """
    def number(value: Any) -> float | None:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            return None
        return float(value) if value > 0 else None

    if not isinstance(provenance, dict):
        return None
    direct = number(provenance.get("log_duration_s"))
    if direct is not None:
        return direct
    for section in ("log", "estimation"):
        block = provenance.get(section)
        if not isinstance(block, dict):
            continue
        for key in ("duration_s", "log_duration_s"):
            value = number(block.get(key))
            if value is not None:
                return value
        n = number(block.get("n_samples"))
        if n is not None and sample_time:
            return n * sample_time
    return None


def _write_plot(table, path: str, *, force: bool, protected: tuple[str | None, ...]) -> None:
    import io

    import matplotlib

    matplotlib.use("Agg")
    from ..io.atomic import write_atomic
    from ..plots.poles import pole_zero_map

    fig = pole_zero_map(table)
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=120, bbox_inches="tight")
    write_atomic(path, buffer.getvalue(), force=force, protected=protected)


def _result_dict(r) -> dict:
    return {
        "name": r.name,
        "key_path": r.key_path,
        "met": r.met,
        "measured": r.measured,
        "expected": r.expected,
        "measured_value": r.measured_value,
    }


def _num(value: float | None, fmt: str = ".4g") -> str:
    return "-" if value is None else format(value, fmt)


def _pm(std: float | None, fmt: str) -> str:
    return "" if std is None else " ± " + format(std, fmt)


def _z_text(z: complex, is_pair: bool) -> str:
    if is_pair:
        return f"{z.real:.4f} ± {abs(z.imag):.4f}j"
    return f"{z.real:.4f}"


def _s_text(s: complex | None, is_pair: bool) -> str:
    if s is None:
        return "-"
    if is_pair:
        return f"{s.real:.4g} ± {abs(s.imag):.4g}j"
    return f"{s.real:.4g}"


def _columns(header: tuple[str, ...], rows: list[tuple[str, ...]], right: set[int]) -> list[str]:
    widths = [max(len(r[i]) for r in [header, *rows]) for i in range(len(header))]
    out = []
    for r in [header, *rows]:
        cells = [c.rjust(w) if i in right else c.ljust(w)
                 for i, (c, w) in enumerate(zip(r, widths, strict=True))]
        out.append("  ".join(cells).rstrip())
    return out


def _pole_block(table) -> list[str]:
    """Poles: z, |z|, the continuous-time equivalent s = ln(z)/T, and the flags."""
    header = ("", "#", "z", "|z|", "s = ln(z)/T [1/s]", "flags")
    rows = []
    for k, m in enumerate(table.modes, start=1):
        z_text = _z_text(m.z, m.is_pair)
        if m.multiplicity > 1:
            z_text += f" (x{m.multiplicity})"
        rows.append(("!" if m.flags else "", str(k), z_text, f"{abs(m.z):.4f}",
                     _s_text(m.s, m.is_pair), ", ".join(m.flags)))
    return _columns(header, rows, right={1, 3})


def _physical_block(table) -> list[str]:
    """Modes in physical units: natural frequency (rad/s and Hz), damping, time constant, period."""
    header = ("", "#", "omega_n [rad/s]", "f_n [Hz]", "zeta [-]", "tau [s]", "f_d [Hz]", "period [s]")
    rows = []
    for k, m in enumerate(table.modes, start=1):
        std_hz = m.natural_frequency_std_hz
        rows.append((
            "!" if m.flags else "",
            str(k),
            _num(m.natural_frequency_rad_s) + _pm(None if std_hz is None else 2 * math.pi * std_hz, ".2g"),
            _num(m.natural_frequency_hz) + _pm(std_hz, ".2g"),
            _num(m.damping_ratio, ".3g") + _pm(m.damping_ratio_std, ".2g"),
            _num(m.time_constant_s),
            _num(m.damped_frequency_hz),
            _num(m.period_s),
        ))
    return _columns(header, rows, right={1, 2, 3, 4, 5, 6, 7})


def modes_text(table, *, model_path: str | None = None, units=None) -> str:
    """Format the mode table as text: header, one row per mode, DC gain, zeros, warnings."""
    T = table.sample_time
    n_in, n_out = len(table.inputs), len(table.outputs)
    lines = []
    head = f"{table.n_states} states, {n_in} input(s), {n_out} output(s), T = {T:g} s, Nyquist {0.5 / T:.4g} Hz"
    lines.append(f"{model_path}: {head}" if model_path else head)
    if table.log_duration_s is not None:
        lines.append(f"log duration {table.log_duration_s:.4g} s")
    lines.append("")
    if table.modes:
        lines.extend(_pole_block(table))
        lines.append("")
        lines.extend(_physical_block(table))
    else:
        lines.append("(no poles: a static gain)")
    lines.append("")
    in_units, out_units = units if units is not None else (("",) * n_in, ("",) * n_out)
    lines.append("DC gain [output unit / input unit]:")
    for i, out in enumerate(table.outputs):
        for j, inp in enumerate(table.inputs):
            g = float(table.dc_gain[i, j])
            unit = ""
            if out_units[i] or in_units[j]:
                unit = f" {out_units[i] or '1'}/({in_units[j] or '1'})"
            value = f"{g:.5g}{unit}" if abs(g) != float("inf") else f"{g} (integrator)"
            lines.append(f"  {inp} -> {out}: {value}")
    if table.zeros.size:
        zs = ", ".join(_z_text(complex(q), False) if abs(complex(q).imag) < 1e-12
                       else f"{q.real:.4f}{q.imag:+.4f}j" for q in table.zeros)
        lines.append(f"transmission zeros: {zs}")
    else:
        lines.append("transmission zeros: none")
    if table.warnings:
        lines.append("")
        lines.append("warnings (rows marked !):")
        for flag, text in table.warnings.items():
            lines.append(f"  {flag}: {text}")
    return "\n".join(lines)


def expectations_text(results, source: str | None = None) -> str:
    """Format expectation outcomes, one line each: met or NOT MET, name, measured, expected."""
    lines = [f"expectations ({source}):" if source else "expectations:"]
    for r in results:
        mark = "met    " if r.met else "NOT MET"
        lines.append(f"  {mark}  {r.name}: {r.measured} (expected {r.expected})")
    return "\n".join(lines)
