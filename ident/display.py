"""Text displays of models and mode tables, shared by the command line and the Python API.

Three displays, each a pure function of a model object or a mode table that
returns a string (nothing here prints):

- :func:`transfer_function_text`: per channel a table of the gain, the zeros and
  the poles (in z or s and, where it exists, as frequency, damping ratio and time
  constant), then the coefficients as labelled arrays;
- :func:`state_space_text`: the matrices as plain nested arrays, the order of
  states, inputs and outputs given once in a legend line;
- :func:`modes_text`: one row per mode in the quantities read on a rig (frequency
  in Hz, damping ratio, time constant, period, flags), with the pole positions
  (z, |z|, s, rad/s) in a detail block on request.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from typing import Any

__all__ = [
    "transfer_function_text", "state_space_text", "modes_text", "mode_rows", "root_rows", "ratio_unit",
    "INTEGRATOR_DISTANCE", "shows_as_integrator",
]

#: Roots whose imaginary part is below this fraction of ``max(1, |root|)`` are real.
_REAL_RTOL = 1e-9

#: A discrete pole within this distance of z = 1 is shown as an integrator, with no time constant.
#: The refinement keeps every pole inside |z| < 1 - 1e-9 (``ident.estimate.sensitivity.STABLE_RADIUS``)
#: and leaves a pole it cannot tell from an integrator just inside that boundary; eigenvalue and
#: polynomial-root rounding move it a further 1e-16 to 1e-13 (1 - 1.00000008e-9 on the heating-system
#: record, at T = 2 s a "time constant" of 2e9 s). A time constant of 5e8 samples or more is a figure of
#: that boundary and of rounding, not of the rig.
INTEGRATOR_DISTANCE = 2e-9


def shows_as_integrator(z: complex) -> bool:
    """Tell whether a discrete pole is displayed as an integrator (within :data:`INTEGRATOR_DISTANCE` of 1).

    Parameters
    ----------
    z : complex
        Pole in the z-plane.

    Returns
    -------
    bool
        ``True`` when ``|z - 1| <= INTEGRATOR_DISTANCE``; the displays then
        show ``-`` for its time constant and call it an integrator.
    """
    return abs(complex(z) - 1.0) <= INTEGRATOR_DISTANCE


def _num(value: float | None, fmt: str = ".4g") -> str:
    return "-" if value is None else format(value, fmt)


def _pm(std: float | None, fmt: str) -> str:
    return "" if std is None else " ± " + format(std, fmt)


def _columns(header: Sequence[str], rows: Sequence[Sequence[str]], right: set[int]) -> list[str]:
    """Align rows under a header; columns in ``right`` are right-aligned."""
    table = [list(header), *[list(r) for r in rows]]
    widths = [max(len(r[i]) for r in table) for i in range(len(header))]
    out = []
    for r in table:
        cells = [c.rjust(w) if i in right else c.ljust(w) for i, (c, w) in enumerate(zip(r, widths, strict=True))]
        out.append("  ".join(cells).rstrip())
    return out


def _complex_text(v: complex, digits: int = 6) -> str:
    if abs(v.imag) <= _REAL_RTOL * max(1.0, abs(v)):
        return f"{v.real:.{digits}g}"
    return f"{v.real:.{digits}g} ± {abs(v.imag):.{digits}g}j"


def _array_text(values: Any, digits: int = 6) -> str:
    """Format a nested list of numbers as text: ``[[1, 2], [3, 4]]``."""
    import numpy as np

    a = np.asarray(values, dtype=float)
    if a.ndim == 1:
        return "[" + ", ".join(f"{v:.{digits}g}" for v in a) + "]"
    return "[" + ", ".join(_array_text(row, digits) for row in a) + "]"


def ratio_unit(numerator: str, denominator: str) -> str:
    """Return the unit of a gain, ``"rad/s/(N m)"``: the denominator in brackets when it is compound."""
    num = numerator or "1"
    den = denominator or "1"
    if any(c in den for c in " /*·^"):
        den = f"({den})"
    return f"{num}/{den}"


# --------------------------------------------------------------------------- transfer functions


def root_rows(roots: Any, sample_time: float | None) -> list[dict[str, Any]]:
    """Describe polynomial roots (poles or zeros) physically, one entry per real root or pair.

    Parameters
    ----------
    roots : array_like of complex
        Roots in z (discrete time, ``sample_time`` given) or s (continuous time).
    sample_time : float or None
        Sample time in s; ``None`` for continuous time.

    Returns
    -------
    list of dict
        Keys ``root`` (complex; a pair by its member with positive imaginary
        part), ``pair`` (bool), ``magnitude``, ``frequency_hz``,
        ``damping_ratio`` (pairs only), ``time_constant_s`` (real stable roots
        and pairs) and ``note`` (``"integrator"``, ``"at z = 0"``, ``"no
        continuous equivalent"`` or ``""``). Roots are sorted by magnitude. A
        discrete root within :data:`INTEGRATOR_DISTANCE` of z = 1 (a
        continuous one within 1e-12 of s = 0) is an ``"integrator"``, with no
        time constant.

    Notes
    -----
    A discrete root is mapped to continuous time by ``s = ln(z) / T`` (the
    zero-order-hold correspondence); then ``frequency = |s| / (2 pi)``,
    ``damping = -Re(s) / |s|`` and the time constant ``-1 / Re(s)``.
    """
    import numpy as np

    roots = np.asarray(roots, dtype=complex).ravel()
    rows: list[dict[str, Any]] = []
    for r in sorted(roots, key=lambda c: (abs(c), -c.imag)):
        if r.imag < -_REAL_RTOL * max(1.0, abs(r)):
            continue  # the conjugate is listed with its partner
        pair = abs(r.imag) > _REAL_RTOL * max(1.0, abs(r))
        row: dict[str, Any] = {"root": complex(r), "pair": bool(pair), "magnitude": float(abs(r)),
                               "frequency_hz": None, "damping_ratio": None, "time_constant_s": None, "note": ""}
        if sample_time is not None:
            if shows_as_integrator(r):
                row["note"] = "integrator"
                rows.append(row)
                continue
            if abs(r) == 0.0:
                row["note"] = "at z = 0"
                rows.append(row)
                continue
            if not pair and r.real < 0:
                row["note"] = "no continuous equivalent"
                rows.append(row)
                continue
            s = complex(np.log(complex(r))) / sample_time
        else:
            s = complex(r)
        if sample_time is None and abs(s) <= 1e-12:
            row["note"] = "integrator"
        elif pair:
            row["frequency_hz"] = abs(s) / (2 * math.pi)
            row["damping_ratio"] = -s.real / abs(s)
            row["time_constant_s"] = -1.0 / s.real if s.real < 0 else None
        elif s.real < 0:
            row["time_constant_s"] = -1.0 / s.real
        rows.append(row)
    return rows


def _channel_lines(num: Any, den: Any, sample_time: float | None, gain_unit: str) -> list[str]:
    import numpy as np

    var = "z" if sample_time is not None else "s"
    nz = np.trim_zeros(np.asarray(num, dtype=float), "f")
    gain = float(nz[0]) if nz.size else 0.0
    zeros = np.roots(nz) if nz.size > 1 else np.array([])
    poles = np.roots(den) if np.asarray(den).size > 1 else np.array([])
    lines = [f"  gain {gain:.6g}{gain_unit} (leading coefficient of the numerator)"]
    header = ("", var, f"|{var}|", "frequency [Hz]", "damping ratio", "time constant [s]", "note")
    rows = []
    for kind, roots in (("zero", zeros), ("pole", poles)):
        for r in root_rows(roots, sample_time):
            # a zero where a pole would be an integrator blocks the DC component: a differentiator
            note = "differentiator" if kind == "zero" and r["note"] == "integrator" else r["note"]
            rows.append((
                kind + (" pair" if r["pair"] else ""), _complex_text(r["root"]), f"{r['magnitude']:.4g}",
                _num(r["frequency_hz"]), _num(r["damping_ratio"], ".3g"), _num(r["time_constant_s"]), note,
            ))
    if rows:
        lines += ["  " + ln for ln in _columns(header, rows, right={2, 3, 4, 5})]
    else:
        lines.append("  no zeros, no poles (a static gain)")
    lines.append(f"  numerator   = {_array_text(num)}")
    lines.append(f"  denominator = {_array_text(den)}")
    return lines


def transfer_function_text(tf: Any) -> str:
    """Show a :class:`~ident.lti.models.TransferFunctionModel` channel by channel.

    Parameters
    ----------
    tf : ident.lti.models.TransferFunctionModel

    Returns
    -------
    str
        A head line stating the time domain and that coefficients are in
        descending powers of z (or s); per channel ``input [unit] -> output
        [unit]``, the gain, a table of zeros and poles (root, magnitude,
        frequency, damping ratio, time constant) and the ``numerator`` and
        ``denominator`` arrays.
    """
    var = "z" if tf.sample_time is not None else "s"
    time_text = f"discrete time, sample time {tf.sample_time:g} s" if tf.sample_time else "continuous time"
    lines = [f"transfer functions ({time_text}); coefficients in descending powers of {var}", ""]
    for i, out in enumerate(tf.outputs):
        for j, inp in enumerate(tf.inputs):
            unit_in, unit_out = tf.input_units[j], tf.output_units[i]
            lines.append(f"{inp}{f' [{unit_in}]' if unit_in else ''} -> {out}{f' [{unit_out}]' if unit_out else ''}")
            gain_unit = f" {ratio_unit(unit_out, unit_in)}" if (unit_in or unit_out) else ""
            lines += _channel_lines(tf.num[i][j], tf.den[i][j], tf.sample_time, gain_unit)
            lines.append("")
    return "\n".join(lines).rstrip()


# --------------------------------------------------------------------------- state space


def state_space_text(model: Any) -> str:
    """Show a :class:`~ident.lti.models.StateSpaceModel` as plain nested arrays.

    Parameters
    ----------
    model : ident.lti.models.StateSpaceModel

    Returns
    -------
    str
        The equation, one legend line giving the order of states, inputs and
        outputs, then ``A = [[...]]`` etc. one row per line, and the operating
        point.
    """
    ins, outs = list(model.inputs), list(model.outputs)
    if model.sample_time is not None:
        head = (f"state-space model, discrete time, sample time {model.sample_time:g} s: "
                "x[k+1] = A x[k] + B u[k], y[k] = C x[k] + D u[k]")
    else:
        head = "state-space model, continuous time: dx/dt = A x + B u, y = C x + D u"
    order = (f"order: x = {model.n_states} state(s) in the model's coordinates; u = [{', '.join(ins)}]; "
             f"y = [{', '.join(outs)}]")
    lines = [head, order, ""]
    for name, mat in (("A", model.A), ("B", model.B), ("C", model.C), ("D", model.D)):
        if mat.size == 0:
            lines.append(f"{name} = []  ({mat.shape[0]} x {mat.shape[1]})")
            continue
        rows = [_array_text(r) for r in mat]
        pad = " " * (len(name) + 4)
        body = (",\n" + pad).join(rows)
        lines.append(f"{name} = [{body}]  ({mat.shape[0]} x {mat.shape[1]})")
    op = model.operating_point
    if op is not None:
        lines.append("")
        lines.append("operating point (the model maps deviations from these levels):")
        for name, unit, v in zip(ins, model.input_units, op.inputs, strict=True):
            lines.append(f"  {name} = {v:.6g} {unit}".rstrip())
        for name, unit, v in zip(outs, model.output_units, op.outputs, strict=True):
            lines.append(f"  {name} = {v:.6g} {unit}".rstrip())
    return "\n".join(lines).rstrip()


# --------------------------------------------------------------------------- mode table


def _kind(m: Any) -> str:
    if "integrator" in m.flags or shows_as_integrator(m.z):
        return "integrator"
    return "oscillation" if m.is_pair else "real"


def mode_rows(table: Any) -> list[dict[str, Any]]:
    """Return the main mode table as records: what a rig engineer reads first.

    Parameters
    ----------
    table : ident.assess.modes.ModeTable

    Returns
    -------
    list of dict
        One per mode with ``mode`` (1-based), ``kind`` (``oscillation``,
        ``real`` or ``integrator``), ``frequency_hz`` (natural frequency of an
        oscillation; ``None`` for a real mode), ``frequency_std_hz``,
        ``damping_ratio`` and ``damping_ratio_std`` (oscillations),
        ``time_constant_s``, ``time_constant_std_s``, ``period_s`` and ``flags``.
        A pole within :data:`INTEGRATOR_DISTANCE` of z = 1 is an integrator
        with no time constant (``None``; the mode table keeps the figure
        ``-T / ln|z|``, which there only measures rounding).
    """
    rows = []
    for k, m in enumerate(table.modes, start=1):
        at_one = shows_as_integrator(m.z)
        rows.append({
            "mode": k, "kind": _kind(m),
            "frequency_hz": m.natural_frequency_hz if m.is_pair else None,
            "frequency_std_hz": m.natural_frequency_std_hz if m.is_pair else None,
            "damping_ratio": m.damping_ratio if m.is_pair else None,
            "damping_ratio_std": m.damping_ratio_std if m.is_pair else None,
            "time_constant_s": None if at_one else m.time_constant_s,
            "time_constant_std_s": None if at_one else m.time_constant_std_s,
            "period_s": m.period_s, "flags": tuple(m.flags),
        })
    return rows


def _main_block(table: Any) -> list[str]:
    header = ("", "#", "kind", "frequency [Hz]", "damping ratio", "time constant [s]", "period [s]", "flags")
    rows = []
    for m, r in zip(table.modes, mode_rows(table), strict=True):
        rows.append((
            "!" if m.flags else "", str(r["mode"]), r["kind"] + (f" (x{m.multiplicity})" if m.multiplicity > 1 else ""),
            _num(r["frequency_hz"]) + _pm(r["frequency_std_hz"], ".2g"),
            _num(r["damping_ratio"], ".3g") + _pm(r["damping_ratio_std"], ".2g"),
            _num(r["time_constant_s"]) + _pm(r["time_constant_std_s"], ".2g"), _num(r["period_s"]),
            ", ".join(m.flags),
        ))
    return _columns(header, rows, right={1, 3, 4, 5, 6})


def _detail_block(table: Any) -> list[str]:
    header = ("#", "z", "|z|", "s = ln(z)/T [1/s]", "natural [rad/s]", "damped [Hz]")
    rows = []
    for k, m in enumerate(table.modes, start=1):
        z = f"{m.z.real:.4f} ± {abs(m.z.imag):.4f}j" if m.is_pair else f"{m.z.real:.4f}"
        if m.s is None:
            s = "-"
        else:
            s = f"{m.s.real:.4g} ± {abs(m.s.imag):.4g}j" if m.is_pair else f"{m.s.real:.4g}"
        rows.append((str(k), z, f"{abs(m.z):.4f}", s, _num(m.natural_frequency_rad_s), _num(m.damped_frequency_hz)))
    return _columns(header, rows, right={0, 2, 4, 5})


def modes_text(table: Any, *, model_path: str | None = None, units: Any = None, detail: bool = False) -> str:
    """Format a mode table: one row per mode, DC gains, zeros, and the flags explained.

    Parameters
    ----------
    table : ident.assess.modes.ModeTable
    model_path : str, optional
        Named in the head line.
    units : (sequence of str, sequence of str), optional
        Input and output units, for the DC gains.
    detail : bool, default False
        Add the pole positions: z, |z|, s = ln(z)/T, natural frequency in rad/s
        and damped frequency.

    Returns
    -------
    str
    """
    T = table.sample_time
    n_in, n_out = len(table.inputs), len(table.outputs)
    head = f"{table.n_states} states, {n_in} input(s), {n_out} output(s), T = {T:g} s, Nyquist {0.5 / T:.4g} Hz"
    lines = [f"{model_path}: {head}" if model_path else head]
    if table.log_duration_s is not None:
        lines.append(f"log duration {table.log_duration_s:.4g} s")
    lines.append("")
    if table.modes:
        lines.extend(_main_block(table))
        if detail:
            lines += ["", "pole positions (detail):"]
            lines.extend("  " + ln for ln in _detail_block(table))
    else:
        lines.append("(no poles: a static gain)")
    lines.append("")
    in_units, out_units = units if units is not None else (("",) * n_in, ("",) * n_out)
    lines.append("DC gain [output unit / input unit]:")
    for i, out in enumerate(table.outputs):
        for j, inp in enumerate(table.inputs):
            g = float(table.dc_gain[i, j])
            unit = f" {ratio_unit(out_units[i], in_units[j])}" if (out_units[i] or in_units[j]) else ""
            std = None if table.dc_gain_std is None else float(table.dc_gain_std[i, j])
            spread = f" ± {std:.2g}" if std is not None and math.isfinite(std) else ""
            value = f"{g:.5g}{spread}{unit}" if abs(g) != float("inf") else f"{g} (integrator)"
            lines.append(f"  {inp} -> {out}: {value}")
    if table.zeros.size:
        shown = [complex(q) for q in table.zeros if complex(q).imag >= -_REAL_RTOL * max(1.0, abs(complex(q)))]
        lines.append("transmission zeros: " + ", ".join(_complex_text(q, 4) for q in shown))
    else:
        lines.append("transmission zeros: none")
    if table.warnings:
        lines += ["", "flags (rows marked !):"]
        lines.extend(f"  {flag}: {text}" for flag, text in table.warnings.items())
    return "\n".join(lines)
