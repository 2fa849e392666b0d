"""``rigfit convert``: show or write a model in another form."""

from __future__ import annotations

import click

from ..choices import DISCRETIZE_METHODS, REALIZATIONS
from ._common import DataError, echo_json

TARGETS = ("tf", "ss", "continuous", "discrete")


@click.command()
@click.argument("model_path", metavar="MODEL", type=click.Path(dir_okay=False))
@click.option("--to", "target", type=click.Choice(TARGETS), required=True, help="Form to convert to.")
@click.option(
    "--method",
    type=click.Choice(DISCRETIZE_METHODS),
    default="zoh",
    show_default=True,
    help="Discretisation method for --to continuous / discrete.",
)
@click.option("--prewarp", "prewarp_hz", type=float, default=None, help="Tustin pre-warping frequency [Hz].")
@click.option(
    "--sample-time", "sample_time", type=float, default=None, help="Sample time [s] for --to discrete."
)
@click.option(
    "--realization",
    type=click.Choice(REALIZATIONS),
    default=None,
    help="State coordinates for --to ss (default: keep the model's own).",
)
@click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON on stdout.")
@click.option("-o", "--output", "out_path", type=click.Path(dir_okay=False), default=None,
              help="Write the converted model to a model file.")
@click.option("--force", is_flag=True, help="Replace an existing output file.")
def convert(
    model_path: str,
    target: str,
    method: str,
    prewarp_hz: float | None,
    sample_time: float | None,
    realization: str | None,
    as_json: bool,
    out_path: str | None,
    force: bool,
) -> None:
    """Show MODEL as a transfer function, in other state coordinates, or in continuous/discrete time.

    \b
    Examples:
      rigfit convert model.json --to tf
      rigfit convert model.json --to continuous --json
      rigfit convert model.json --to ss --realization modal -o modal.json
    """
    from ..display import state_space_text, transfer_function_text
    from ..io.modelfile import load_model, model_to_dict, save_model
    from ..lti.convert import ss_to_tf
    from ..lti.discretize import to_continuous, to_discrete
    from ..lti.realization import realize

    if out_path is not None and target != "tf":
        from ..io.atomic import check_output_path

        check_output_path(out_path, force=force, protected=(model_path,))  # before any work
    loaded = load_model(model_path)
    model = loaded.model
    if target in ("tf", "ss") and method != "zoh":
        raise DataError("--method applies only to --to continuous / discrete")
    if prewarp_hz is not None and method != "tustin":
        raise DataError("--prewarp applies only to --method tustin")
    if sample_time is not None and target != "discrete":
        raise DataError("--sample-time applies only to --to discrete")
    if realization is not None and target != "ss":
        raise DataError("--realization applies only to --to ss")

    conversion: dict = {"from_file": loaded.path, "to": target}
    if target == "tf":
        if out_path is not None:
            raise DataError(
                "model files hold state-space models; --to tf cannot be written with -o",
                hint="use --to tf --json > file.json to keep the transfer function",
            )
        tf = ss_to_tf(model)
        if as_json:
            echo_json(_tf_json(tf))
        else:
            click.echo(transfer_function_text(tf))
        return
    if target == "ss":
        result = realize(model, realization) if realization else model
        conversion["realization"] = realization
    elif target == "continuous":
        if model.sample_time is None:
            raise DataError(f"{model_path}: the model is already continuous-time")
        result = to_continuous(model, method=method, prewarp_hz=prewarp_hz)
        conversion.update(method=method, prewarp_hz=prewarp_hz)
    else:  # discrete
        if sample_time is None:
            raise DataError("--to discrete needs --sample-time SECONDS")
        source = model
        if model.sample_time is not None:
            # resampling: back to continuous time by the same method, then forward
            source = to_continuous(model, method=method, prewarp_hz=prewarp_hz)
        result = to_discrete(source, sample_time, method=method, prewarp_hz=prewarp_hz)
        conversion.update(method=method, prewarp_hz=prewarp_hz, sample_time=sample_time)

    provenance = dict(loaded.provenance)
    for key in ("tool", "tool_version", "created_utc"):
        if key in provenance:
            provenance[f"source_{key}"] = provenance.pop(key)
    provenance["conversion"] = conversion
    if out_path is not None:
        save_model(out_path, result, provenance=provenance, force=force, protected=(model_path,))
        click.echo(f"wrote {out_path}", err=True)
    if as_json:
        echo_json(model_to_dict(result, provenance))
    elif out_path is None:
        click.echo(state_space_text(result))


def _tf_json(tf) -> dict:
    channels = []
    for i, out in enumerate(tf.outputs):
        for j, inp in enumerate(tf.inputs):
            channels.append(
                {"input": inp, "output": out, "num": [float(c) for c in tf.num[i][j]],
                 "den": [float(c) for c in tf.den[i][j]]}
            )
    return {"sample_time": tf.sample_time, "channels": channels}
