"""``rigfit modes``: a model's poles in physical units, plausibility flags, expectations."""

from __future__ import annotations

import click

from ..choices import FLAGS
from ._common import GateFailed, echo_json


@click.command()
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("--json", "as_json", is_flag=True,
              help="Print machine-readable JSON on stdout, pole positions included.")
@click.option("--detail", is_flag=True,
              help="Also print the pole positions: z, |z|, s = ln(z)/T and the frequencies in rad/s.")
@click.option("--expect", "expect_path", type=click.Path(dir_okay=False), default=None,
              help="TOML file with an [expect] table; each expectation is checked (exit 3 if one fails).")
@click.option("--fail-on", "fail_on", multiple=True, type=click.Choice(FLAGS),
              help="Exit with status 3 when any mode carries this flag (repeatable).")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), default=None,
              help="Write a pole-zero map to this PNG file.")
@click.option("--force", is_flag=True, help="Replace an existing --plot file.")
@click.option("--log-duration", "log_duration_s", type=float, default=None, metavar="S",
              help="Duration of the fitted log [s] (default: from the model file's provenance).")
@click.option("--damping-below", "lightly_damped_below", type=float, default=0.07, show_default=True,
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
    detail: bool,
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

    Each real pole or complex pair is one mode, shown as a rig engineer reads
    it: frequency in Hz and damping ratio (oscillations), time constant, period
    and flags. The flags are explained under the table. The pole positions (z,
    |z|, s and rad/s) are printed with --detail and are always in --json.

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
        from ..io.modelfile import log_duration_from_provenance

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
        click.echo(modes_text(table, model_path=model_path, units=(model.input_units, model.output_units),
                              detail=detail))
        if results:
            click.echo("")
            click.echo(expectations_text(results, expect_path))
    failures = [f"expectation {r.name} not met ({r.measured})" for r in results if not r.met]
    failures += [f"flag {f} present" for f in tripped]
    if failures:
        raise GateFailed("; ".join(failures))


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


def modes_text(table, *, model_path: str | None = None, units=None, detail: bool = False) -> str:
    """Format the mode table as text (see :func:`ident.display.modes_text`)."""
    from ..display import modes_text as _text

    return _text(table, model_path=model_path, units=units, detail=detail)


def expectations_text(results, source: str | None = None) -> str:
    """Format expectation outcomes, one line each: met or NOT MET, name, measured, expected."""
    lines = [f"expectations ({source}):" if source else "expectations:"]
    for r in results:
        mark = "met    " if r.met else "NOT MET"
        lines.append(f"  {mark}  {r.name}: {r.measured} (expected {r.expected})")
    return "\n".join(lines)
