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
            click.echo(_tf_text(tf))
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
        click.echo(_ss_text(result))


def _tf_json(tf) -> dict:
    channels = []
    for i, out in enumerate(tf.outputs):
        for j, inp in enumerate(tf.inputs):
            channels.append(
                {"input": inp, "output": out, "num": [float(c) for c in tf.num[i][j]],
                 "den": [float(c) for c in tf.den[i][j]]}
            )
    return {"sample_time": tf.sample_time, "channels": channels}


def _poly_text(coeffs, var: str) -> str:
    import numpy as np

    coeffs = np.asarray(coeffs, dtype=float)
    degree = coeffs.size - 1
    terms = []
    for k, c in enumerate(coeffs):
        power = degree - k
        if c == 0 and coeffs.size > 1:
            continue
        mag = f"{abs(c):.6g}"
        if power == 0:
            body = mag
        else:
            body = (var if mag == "1" else f"{mag} {var}") + (f"^{power}" if power > 1 else "")
        sign = "-" if c < 0 else "+"
        terms.append((sign, body))
    if not terms:
        return "0"
    first_sign, first = terms[0]
    text = ("-" if first_sign == "-" else "") + first
    for sign, body in terms[1:]:
        text += f" {sign} {body}"
    return text


def _roots_text(values) -> str:
    if len(values) == 0:
        return "none"
    parts = []
    for v in sorted(values, key=lambda c: (abs(c), c.imag)):
        if abs(v.imag) <= 1e-12 * max(1.0, abs(v)):
            parts.append(f"{v.real:.6g}")
        else:
            parts.append(f"{v.real:.6g}{v.imag:+.6g}j")
    return ", ".join(parts)


def _tf_text(tf) -> str:
    import numpy as np

    var = "z" if tf.sample_time is not None else "s"
    time_text = f"discrete time, sample time {tf.sample_time:g} s" if tf.sample_time else "continuous time"
    lines = [f"transfer functions ({time_text}; polynomials in descending powers of {var})", ""]
    for i, out in enumerate(tf.outputs):
        for j, inp in enumerate(tf.inputs):
            num, den = tf.num[i][j], tf.den[i][j]
            nz = np.trim_zeros(num, "f")
            gain = float(nz[0]) if nz.size else 0.0
            zeros = np.roots(nz) if nz.size > 1 else np.array([])
            poles = np.roots(den) if den.size > 1 else np.array([])
            unit_in = f" [{tf.input_units[j]}]" if tf.input_units[j] else ""
            unit_out = f" [{tf.output_units[i]}]" if tf.output_units[i] else ""
            lines.append(f"{inp}{unit_in} -> {out}{unit_out}")
            num_text, den_text = _poly_text(num, var), _poly_text(den, var)
            width = max(len(num_text), len(den_text))
            lines.append(f"    {num_text.center(width)}")
            lines.append(f"    {'-' * width}")
            lines.append(f"    {den_text.center(width)}")
            lines.append(f"  gain {gain:.6g}; zeros: {_roots_text(zeros)}")
            lines.append(f"  poles: {_roots_text(poles)}")
            lines.append("")
    return "\n".join(lines).rstrip()


def _matrix_text(name: str, matrix, rows: list[str], cols: list[str]) -> list[str]:
    if matrix.size == 0:
        return [f"{name}: empty ({matrix.shape[0]} x {matrix.shape[1]})"]
    cells = [[f"{v:.6g}" for v in row] for row in matrix]
    width = max(12, *(len(c) for row in cells for c in row), *(len(c) for c in cols))
    label_w = max(len(r) for r in rows)
    out = [f"{name} ({matrix.shape[0]} x {matrix.shape[1]})"]
    out.append(" " * (label_w + 2) + "".join(c.rjust(width + 1) for c in cols))
    for label, row in zip(rows, cells, strict=True):
        out.append(f"  {label.ljust(label_w)}" + "".join(c.rjust(width + 1) for c in row))
    return out


def _ss_text(model) -> str:
    states = [f"x{k + 1}" for k in range(model.n_states)]
    ins, outs = list(model.inputs), list(model.outputs)
    if model.sample_time is not None:
        head = f"state-space model, discrete time, sample time {model.sample_time:g} s"
        eq = "x[k+1] = A x[k] + B u[k];  y[k] = C x[k] + D u[k]"
    else:
        head = "state-space model, continuous time"
        eq = "dx/dt = A x + B u;  y = C x + D u"
    lines = [head, f"  {eq}", f"  {model.n_states} states, inputs {ins}, outputs {outs}", ""]
    for name, mat, rows, cols in (
        ("A", model.A, states, states),
        ("B", model.B, states, ins),
        ("C", model.C, outs, states),
        ("D", model.D, outs, ins),
    ):
        lines += _matrix_text(name, mat, rows, cols) + [""]
    op = model.operating_point
    if op is not None:
        lines.append("operating point (the model maps deviations from these levels):")
        for name, unit, v in zip(ins, model.input_units, op.inputs, strict=True):
            lines.append(f"  {name} = {v:.6g} {unit}".rstrip())
        for name, unit, v in zip(outs, model.output_units, op.outputs, strict=True):
            lines.append(f"  {name} = {v:.6g} {unit}".rstrip())
    return "\n".join(lines).rstrip()
