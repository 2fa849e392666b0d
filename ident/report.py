"""The run report: one self-contained HTML file, readable offline and printable.

:func:`render_report` turns the machine-readable summary of a run (the content
of ``summary.json``, see :mod:`ident.pipeline`) and the PNG bytes of its figures
into one HTML document. Figures are embedded as base64 ``data:`` URIs, the
style sheet is inline and nothing is fetched from anywhere, so the file can be
mailed, archived or printed as it is.

Order of the sections: headline verdict and gates (with the held-out fit per
output, and a warning when it is below the warning level); data overview;
chosen model and why (the candidate table); validation (the fit figures and
which to believe, residual analysis, the frequency response and where it was
judged, the order advice, the verdicts); the periodic input, when there is
one; modes in physical units with their warnings; expectations; drift from
the baseline; provenance; safety caution.

Every string that comes from the user or the data (names, notes, column
names, file names, units, messages) is passed through :func:`html.escape`.
"""

from __future__ import annotations

import base64
import html
import json
import math
import re
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

from .display import shows_as_integrator

__all__ = ["render_report", "html_fragment", "modes_html", "validation_html", "table_html"]


class _Raw(str):
    """Markup built here from escaped parts; inserted as is."""

    __slots__ = ()


def _e(value: Any) -> str:
    """Escape any value for HTML text or attribute context."""
    if isinstance(value, _Raw):
        return value
    return html.escape("" if value is None else str(value), quote=True)


def _num(x: Any, spec: str = ".4g", none: str = "–") -> str:
    if x is None:
        return none
    if isinstance(x, str):
        return x
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(v):
        return none
    return format(v, spec)


def _pct(x: Any) -> str:
    """Format a fit percent: ``diverged`` for none or for a simulation that ran away (below -1e6 %)."""
    if x is None or (isinstance(x, (int, float)) and x <= -1e6):
        return "diverged"
    return _num(x, ".1f") + " %"


def _table(headers: Sequence[Any], rows: Iterable[Sequence[Any]], *, cls: str = "") -> _Raw:
    head = "".join(f"<th>{_e(h)}</th>" for h in headers)
    body = []
    for row in rows:
        cells = []
        for cell in row:
            if isinstance(cell, tuple):  # (content, css class)
                cells.append(f'<td class="{_e(cell[1])}">{_e(cell[0])}</td>')
            else:
                cells.append(f"<td>{_e(cell)}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    klass = f' class="{_e(cls)}"' if cls else ""
    return _Raw(f"<table{klass}><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>")


def _ok(passed: bool, yes: str = "pass", no: str = "FAIL") -> tuple[str, str]:
    return (yes, "ok") if passed else (no, "bad")


def _label(name: Any, unit: Any) -> str:
    return f"{name} [{unit}]" if unit else str(name)


def _figures(summary: Mapping[str, Any], figures: Mapping[str, bytes], section: str) -> _Raw:
    parts = []
    for meta in summary.get("figures", []):
        if meta.get("section") != section or meta.get("file") not in figures:
            continue
        data = base64.b64encode(figures[meta["file"]]).decode("ascii")
        caption = meta.get("caption", "")
        parts.append(
            f'<figure><img src="data:image/png;base64,{data}" alt="{_e(caption)}">'
            f"<figcaption>{_e(caption)} <span class=\"file\">({_e(meta['file'])})</span></figcaption></figure>"
        )
    return _Raw("".join(parts))


def _section(anchor: str, title: str, *content: Any) -> str:
    return f'<section id="{anchor}"><h2>{_e(title)}</h2>' + "".join(_e(c) for c in content) + "</section>"


def _p(text: Any, cls: str = "") -> _Raw:
    klass = f' class="{_e(cls)}"' if cls else ""
    return _Raw(f"<p{klass}>{_e(text)}</p>")


def _ul(items: Iterable[Any], cls: str = "") -> _Raw:
    items = list(items)
    if not items:
        return _Raw("")
    klass = f' class="{_e(cls)}"' if cls else ""
    return _Raw(f"<ul{klass}>" + "".join(f"<li>{_e(i)}</li>" for i in items) + "</ul>")


# --------------------------------------------------------------------------- sections


def _verdict(s: Mapping[str, Any]) -> str:
    v = s["verdict"]
    gates = s.get("gates", [])
    poor = v.get("poor_outputs") or []
    cls = "verdict ok" if v["passed"] and not poor else "verdict bad"
    word = "PASSED" if v["passed"] else "FAILED"
    n_failed = sum(1 for g in gates if not g["passed"])
    if not gates:
        line = "no gates were set"
    else:
        line = (f"all {len(gates)} gates passed" if v["passed"] else f"{n_failed} of {len(gates)} gates failed")
    model = s.get("model", {})
    fits = ", ".join(f"{k} {_pct(x)}" for k, x in model.get("validation_fit", {}).items())
    sub = (f"{model.get('method', '?')} model, {model.get('n_states', '?')} states; "
           f"held-out fit {fits}") if model else ""
    warn = ""
    if poor:
        warn = (f'<div class="poor">POOR MODEL: the held-out fit of {_e(", ".join(poor))} is below the warning '
                f'level of {_e(_num(v.get("fit_warning"), "g"))} % ([check] fit_warning); do not design a '
                "controller on it before the cause is found.</div>")
    rows = [(_ok(g["passed"]), g["name"], g["key_path"], g["detail"]) for g in gates]
    table = _table(("result", "gate", "set by", "measured"), rows, cls="gates") if gates else _p(
        "No gates were set in the pipeline file.")
    return (
        f'<div class="{cls}"><span class="word">{word}</span> <span class="line">{_e(line)}</span>'
        f'<div class="sub">{_e(sub)}</div>{warn}</div>' + table
    )


def _data(s: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    d = s["data"]
    logs = _table(
        ("file", "rows", "samples", "sample time [s]", "duration [s]", "segments", "dropped rows",
         "timing jitter max [s]"),
        [(lg["file_name"], f"{lg['rows'][0]}–{lg['rows'][1]}", lg["n_samples"], _num(lg["sample_time"]),
          _num(lg["duration_s"]), len(lg["segments"]), lg["dropped_rows"], _num(lg["jitter_max_s"], ".3g"))
         for lg in d["logs"]],
    )
    sig = _table(
        ("role", "signal", "unit", "min", "max", "mean", "std"),
        [(x["role"], x["name"], x["unit"], _num(x["min"]), _num(x["max"]), _num(x["mean"]), _num(x["std"]))
         for x in d["signals"]],
    )
    exc = _table(
        ("input", "90 % power below [Hz]", "persistently exciting of order"),
        [(x["input"], _num(x["band_hz"]),
          f"{x['persistent_excitation_order']}" + (" or more" if x["order_is_lower_bound"] else ""))
         for x in d.get("excitation", [])],
    )
    band = d.get("excited_band_hz")
    band_text = ("The inputs excite the band " f"{_num(band[0])}–{_num(band[1])} Hz; the model is "
                 "trustworthy only inside it." if band else "The excited band could not be judged.")
    names = [x for x in d["signals"]]
    op_in = [f"{x['name']} = {_num(v)} {x['unit']}".rstrip()
             for x, v in zip([n for n in names if n["role"] == "input"], d["operating_point"]["inputs"], strict=False)]
    op_out = [f"{x['name']} = {_num(v)} {x['unit']}".rstrip()
              for x, v in zip([n for n in names if n["role"] == "output"], d["operating_point"]["outputs"],
                              strict=False)]
    split = (f"Estimation samples {', '.join(f'{a}–{b}' for a, b in d['estimation_ranges'])}; held out for "
             f"validation {', '.join(f'{a}–{b}' for a, b in d['validation_ranges'])} (sample indices, "
             "files laid end to end)."
             + (f" Left out as frozen (every channel repeating one value to the end of its record): "
                f"{', '.join(f'{a}–{b}' for a, b in d['frozen_tails'])}." if d.get("frozen_tails") else "")
             + (f" Decimated by {d['decimation']} to T = {_num(d['sample_time'])} s." if d["decimation"] > 1 else ""))
    resampled = [_p(f"{lg['file_name']}: {lg['resampling_text']}.") for lg in d["logs"]
                 if lg.get("resampling_text")]
    held = d.get("validation_logs") or []
    separate = [_p("Separate validation logs (held out whole, never fitted on):"),
                _table(("file", "samples", "segments", "SHA-256"),
                       [(lg["file_name"], lg["n_samples"], len(lg["segments"]), lg["sha256"][:16] + "…")
                        for lg in held])] if held else []
    return _section(
        "data", "Data", logs, *resampled, *separate, sig, _p(band_text), exc,
        _p("Operating point (subtracted before fitting): " + "; ".join(op_in + op_out) + "."),
        _p(split), _figures(s, figures, "data"),
    )


def _model(s: Mapping[str, Any]) -> str:
    m = s["model"]
    sel = m["selection"]
    outs = m["outputs"]
    cands = sel["candidates"]
    struct = ", ".join(f"{k} = {v}" for k, v in m["structure"].items() if k != "refined_from")
    how = {"output_error": "refined by output error", "innovations": "refined in innovations form"}
    delay = m.get("input_delay") or []
    lead = (f"Selected: {m['method']} start of order {m['order']} ({struct}), "
            f"{how.get(m.get('noise_model'), 'as estimated')}; {m['n_states']} states"
            + (f" of which {sum(delay)} hold the input delay" if any(delay) else "")
            + f", {m['n_parameters']} parameters, sample time {_num(m['sample_time'])} s.")
    why = f"Rule: {sel['rule']}."
    if sel.get("reason"):
        why += f" This model: {sel['reason']}."
    refined = [c for c in cands if c.get("stage") == "refined"]
    shown = refined or sorted(cands, key=lambda c: -(c["mean_fit"] or -1e300))[:8]
    rows = []
    for c in shown:
        start = cands[c["structure"]["refined_from"]] if c.get("stage") == "refined" else None
        fits = [_pct(v) for v in c["validation_fit"]]
        rows.append((
            ("selected", "ok") if c["selected"] else "",
            c["method"], c["order"], c["n_states"], c["n_parameters"],
            _pct(start["mean_fit"]) if start is not None else "-", *fits, _pct(c["mean_fit"]),
        ))
    direct = sum(c.get("stage") != "refined" for c in cands)
    count = _p(f"{direct} direct estimates (ARX structures and subspace models) were scored on the held-out "
               f"data; {'the best ' + str(len(refined)) + ' were refined' if refined else 'the best are listed'}.")
    table = _table(("", "start", "order", "states", "parameters", "held-out fit before refinement",
                    *[f"fit {o}" for o in outs], "mean fit"), rows, cls="candidates")
    fit_rows = [(_label(o, m["units"]["outputs"][i]), _pct(m["validation_fit"].get(o)),
                 _pct(m["estimation_fit"].get(o))) for i, o in enumerate(outs)]
    parts = [_p(lead), _p(why), count, table,
             _table(("output", "held-out fit", "in-sample fit"), fit_rows)]
    sv = sel.get("singular_values")
    if sv:
        parts.append(_p("Subspace singular values: " + ", ".join(_num(v, ".3g") for v in sv[:12])
                        + (f" (largest gap after {sel['suggested_order']})" if sel.get("suggested_order") else "")))
    if m.get("delays") is not None:
        parts.append(_p(f"Input delays estimated from the data [samples]: {m['delays']}"))
    parts.append(_ul([f"note: {n}" for n in m.get("notes", [])], cls="notes"))
    parts.append(_ul([f"warning: {w}" for w in m.get("warnings", [])], cls="warnings"))
    parts.append(_p(f"Model file: {m['file']} (in this run folder).", cls="file"))
    return _section("model", "Chosen model and why", *parts)


_OUTCOME = {"pass": ("ok", "ok"), "fail": ("FAIL", "bad"), "note": ("note", "note"),
            "cannot_judge": ("cannot judge", "note")}


def _validation(s: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    parts = []
    for rep in s.get("validation", []):
        where = ("Separate validation log" if rep.get("separate_log")
                 else f"Held-out part of experiment {rep.get('experiment')}")
        title = f"{where}, samples {rep['range'][0]}–{rep['range'][1]} ({rep['n_samples']} samples)"
        parts.append(_Raw(f"<h3>{_e(title)}</h3>"))
        parts.append(_p(rep.get("headline", ""), cls="bad" if rep.get("poor_outputs") else ""))
        parts += _fit_tables(rep)
        parts += _residual_text(rep)
        parts += _frequency_text(rep)
        advice = rep.get("advice")
        if advice:
            parts.append(_p(f"Order: {advice['message']}.", cls="" if advice["direction"] == "keep" else "bad"))
        parts.append(_table(
            ("", "test", "finding"),
            [(_OUTCOME.get(v.get("outcome"), ("?", "note")), v["test"], v["message"]) for v in rep["verdicts"]],
            cls="verdicts"))
    parts.append(_figures(s, figures, "validation"))
    return _section("validation", "Validation on held-out data", *parts)


def _fit_tables(rep: Mapping[str, Any]) -> list[Any]:
    """Put the fit figures beside the prediction and whiteness, and say which to believe."""
    fits = rep.get("fits", [])
    heads = [f["label"] for f in fits]
    rows = []
    for o in rep["outputs"]:
        w = rep["whiteness"][o]
        rows.append((o, *[_pct(f["percent"].get(o)) for f in fits], _pct(rep["fit"][o]["prediction_percent"]),
                     _ok(bool(w["white"]), "white", "not white")))
    out: list[Any] = [_table(("output", *heads, f"{rep['prediction_steps']}-step prediction", "residuals"), rows)]
    if rep.get("fit_note"):
        out.append(_p(f"Which to believe: {rep['fit_note']}."))
    out += [_p(g["message"] + ".", cls="bad") for g in rep.get("gaps", []) if g["kind"] != "none"]
    return out


def _residual_text(rep: Mapping[str, Any]) -> list[Any]:
    span = rep.get("lag_span")
    if not span:
        return []
    return [_p(f"Residual correlations over lags up to {_num(span['seconds'])} s ({span['lags']} samples): "
               f"{span['reason']}. The bands hold at every lag shown together; the inputs are prewhitened "
               "before the cross-correlation.")]


def _frequency_text(rep: Mapping[str, Any]) -> list[Any]:
    sp = rep.get("spectral", {})
    judgements = sp.get("judgements", [])
    if not judgements:
        return []
    if sp.get("source") == "periodic":
        head = f"Frequency response measured at the excited lines of the periodic input ({sp['n_segments']} periods)."
    else:
        choice = sp.get("segment_choice") or {}
        head = (f"Frequency response: {choice.get('text', '')}; {sp['n_segments']} segments; "
                f"{_num(100 * sp['confidence'], 'g')} % confidence region (Bendat and Piersol).")
    rows = [(f"{j['input']} → {j['output']}", _judgement_cell(j["status"]),
             f"{_num(j['low_hz'])}–{_num(j['high_hz'])} Hz" if j["informative"] else "–",
             f"{100 * j['informative_share']:.0f} %") for j in judgements]
    return [_p(head), _table(("channel", "model against the data", "band judged", "excited band informative"),
                             rows)]


def _judgement_cell(status: str) -> tuple[str, str]:
    return {"agrees": ("agrees", "ok"), "disagrees": ("DISAGREES", "bad")}.get(status, ("cannot judge", "note"))


def _periodic(s: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    per = s.get("periodic")
    if not per:
        return ""
    parts = [_p(f"Period {per['period_samples']} samples ({_num(per['period_s'])} s, {per['period_source']}); "
                f"{per['measured_periods']} of {per['periods']} periods averaged after {per['transient_periods']} "
                f"transient; {per['lines']} excited lines"
                + (f" from {_num(per['band_hz'][0])} to {_num(per['band_hz'][1])} Hz." if per["band_hz"] else "."))]
    if per.get("noise_std"):
        parts.append(_p("Noise standard deviation from the period-to-period scatter: "
                        + ", ".join(f"{k} {_num(v)}" for k, v in per["noise_std"].items()) + "."))
    model = per.get("model")
    if model:
        parts.append(_p("Model error against the measured noise floor at the lines: "
                        + ", ".join(f"{k} {_num(v, '+.1f')} dB" for k, v in model["error_to_noise_db"].items())
                        + " (0 dB: the error is at the noise level, the best a model can do; +10 dB: ten times the "
                        "noise power, the model misses part of the response)."))
    for d in per.get("distortion") or []:
        bits = [f"{kind} {_num(d[kind + '_db'], '.1f') + ' dB' if d[kind + '_db'] is not None else 'below the noise'}"
                f" ({'detected' if d[kind + '_detected'] else 'not detected'})"
                for kind in ("odd", "even") if d[f"{kind}_lines"]]
        if bits:
            parts.append(_p(f"Nonlinear distortion of {d['output']} at the unexcited lines: " + "; ".join(bits)
                            + " (relative to the excited lines)."))
    parts.append(_ul([f"note: {n}" for n in per.get("notes", [])], cls="notes"))
    parts.append(_figures(s, figures, "periodic"))
    return _section("periodic", "Periodic input", *parts)


def _complex_text(value: Any, *, pair: bool = False) -> str:
    """``[re, im]`` (as in summary.json) as text; a pair as ``re ± |im|j``."""
    if isinstance(value, Sequence) and not isinstance(value, str) and len(value) == 2:
        try:
            re, im = float(value[0]), float(value[1])
        except (TypeError, ValueError):
            return _num(None)
        if pair:
            return f"{re:.4f} ± {abs(im):.4f}j"
        if im == 0.0:
            return f"{re:.4g}"
        return f"{re:.4g} {'+' if im >= 0 else '−'} {abs(im):.4g}j"
    return _num(value)


def _at_one(value: Any) -> bool:
    """Tell whether ``[re, im]`` (as in summary.json) is a pole the displays call an integrator."""
    if isinstance(value, Sequence) and not isinstance(value, str) and len(value) == 2:
        try:
            return shows_as_integrator(complex(float(value[0]), float(value[1])))
        except (TypeError, ValueError):
            return False
    return False


def _pm(std: float | None) -> str:
    """`` ± std`` (two significant digits), or nothing when unknown."""
    return "" if std is None else f" ± {std:.2g}"


def _modes(s: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    t = s["modes"]
    rows = []
    for k, m in enumerate(t["modes"], start=1):
        pair = bool(m["is_pair"])
        at_one = _at_one(m.get("z"))
        kind = "integrator" if "integrator" in m["flags"] or at_one else ("oscillation" if pair else "real")
        if m["multiplicity"] > 1:
            kind += f" ×{m['multiplicity']}"
        rows.append((k, kind, _num(m["natural_frequency_hz"] if pair else None)
                     + _pm(m.get("natural_frequency_std_hz") if pair else None),
                     _num(m["damping_ratio"] if pair else None, ".3g")
                     + _pm(m.get("damping_ratio_std") if pair else None),
                     _num(None) if at_one else _num(m["time_constant_s"]) + _pm(m.get("time_constant_std_s")),
                     _num(m.get("period_s")), (", ".join(m["flags"]) or "–", "bad" if m["flags"] else ""),
                     _complex_text(m.get("z"), pair=pair)))
    parts = [
        _p(f"{t['n_states']} states, sample time {_num(t['sample_time'])} s. Frequency and damping ratio of each "
           "oscillation, time constant of every mode; the pole z (detail) maps to continuous time by "
           "s = ln(z)/T; ± one standard deviation where the parameter covariance is known (first order: noise "
           "scatter only, not bias from a structure that does not match the rig). Flags that fail the run: "
           + (", ".join(t.get("fail_on", [])) or "none") + "."),
        _table(("mode", "kind", "frequency [Hz]", "damping ratio", "time constant [s]", "period [s]", "flags",
                "pole z (detail)"), rows, cls="modes"),
    ]
    zeros = t.get("zeros") or []
    zero_text = ", ".join(_complex_text(q) for q in zeros) if zeros else "none"
    parts.append(_p(f"Transmission zeros (z-plane): {zero_text}."))
    if t.get("warnings"):
        parts.append(_Raw("<h3>Flags</h3>"))
        parts.append(_ul([f"{k}: {v}" for k, v in t["warnings"].items()], cls="warnings"))
    units = t.get("units", {})
    ins, outs = units.get("inputs", []), units.get("outputs", [])
    in_names = sorted({g["input"] for g in t["dc_gain"]}, key=[g["input"] for g in t["dc_gain"]].index)
    out_names = sorted({g["output"] for g in t["dc_gain"]}, key=[g["output"] for g in t["dc_gain"]].index)
    gain_rows = []
    for g in t["dc_gain"]:
        iu = ins[in_names.index(g["input"])] if in_names.index(g["input"]) < len(ins) else ""
        ou = outs[out_names.index(g["output"])] if out_names.index(g["output"]) < len(outs) else ""
        unit = f"{ou} per {iu}" if (iu or ou) else ""
        std = g.get("std")
        gain_rows.append((g["input"], g["output"], _num(g["gain"]) + _pm(std if isinstance(std, float) else None),
                          unit))
    parts.append(_Raw("<h3>Steady-state (DC) gains</h3>"))
    parts.append(_table(("input", "output", "gain", "unit"), gain_rows))
    parts.append(_figures(s, figures, "modes"))
    return _section("modes", "Modes in physical units", *parts)


def _expectations(s: Mapping[str, Any]) -> str:
    ex = s.get("expectations", [])
    if not ex:
        return _section("expectations", "Expectations", _p("No expectations were stated in the pipeline file."))
    rows = [(_ok(r["met"], "met", "NOT MET"), r["name"], r["key_path"], r["expected"], r["measured"]) for r in ex]
    met = sum(1 for r in ex if r["met"])
    return _section("expectations", "Expectations", _p(f"{met} of {len(ex)} expectations met."),
                    _table(("result", "expectation", "stated at", "expected", "model shows"), rows))


def _drift(s: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    d = s.get("drift")
    if d is None:
        return _section("drift", "Drift from a baseline",
                        _p("No baseline model was given ([drift] baseline or --baseline), so nothing was compared."))
    b = d["baseline"]
    parts = [_p(f"Baseline: {b['file_name']} (created {b.get('created_utc') or 'unknown'}, "
                f"sha256 {b['sha256'][:16]}…)."),
             _p("Verdict: " + ("within the drift thresholds." if d["passed"] else "thresholds breached."),
                cls="ok" if d["passed"] else "bad")]
    parts.append(_ul(d["breaches"], cls="warnings"))
    rows = []
    for m in d["modes"]:
        base, new = m["baseline"] or {}, m["new"] or {}
        outside = not m.get("in_band", True)
        rows.append((
            m["status"] + (" (outside the excited band)" if outside else ""),
            _num(base.get("natural_frequency_hz")), _num(new.get("natural_frequency_hz")),
            _num(m["frequency_shift_hz"], "+.3g"),
            _num(m["frequency_shift_percent"], "+.1f") + (" %" if m["frequency_shift_percent"] is not None else ""),
            _num(base.get("damping_ratio"), ".3g"), _num(new.get("damping_ratio"), ".3g"),
            _num(m["damping_shift"], "+.3g"),
            _num(base.get("time_constant_s")) + " → " + _num(new.get("time_constant_s"))
            + (f" ({_num(m.get('time_constant_shift_percent'), '+.1f')} %)"
               if m.get("time_constant_shift_percent") is not None else ""),
            _num(m["z_score"], ".2g"),
            (", ".join(m["breaches"]) or "–", "bad" if m["breaches"] else ""),
        ))
    parts.append(_Raw("<h3>Mode shifts</h3>"))
    parts.append(_p("Oscillations are judged by natural frequency and damping, real modes by their time constant."))
    parts.append(_table(("status", "baseline [Hz]", "new [Hz]", "shift [Hz]", "shift", "ζ baseline", "ζ new",
                         "ζ shift", "time constant [s]", "z-score", "breach"), rows))
    parts.append(_Raw("<h3>DC gains</h3>"))
    parts.append(_table(
        ("input", "output", "baseline", "new", "change", ""),
        [(g["input"], g["output"], _num(g["baseline"]), _num(g["new"]),
          _num(g["change_percent"], "+.1f") + (" %" if g["change_percent"] is not None else ""),
          _ok(not g["breach"], "", "breach")) for g in d["dc_gains"]]))
    r = d["response_difference"]
    parts.append(_p(f"Largest frequency-response difference in {_num(r['band_hz'][0], '.3g')}–"
                    f"{_num(r['band_hz'][1], '.3g')} Hz: {_num(r['largest_db'], '.1f')} dB at "
                    f"{_num(r['at_frequency_hz'])} Hz ({r['input']} → {r['output']})."))
    fits = d.get("fit_on_new_log")
    if fits:
        parts.append(_Raw("<h3>How well each model explains the new log (held-out part)</h3>"))
        parts.append(_table(("output", "baseline model", "new model"),
                            [(o, _pct(a), _pct(b_)) for o, a, b_ in
                             zip(fits["outputs"], fits["baseline_model"], fits["new_model"], strict=True)]))
    parts.append(_figures(s, figures, "drift"))
    return _section("drift", "Drift from the baseline", *parts)


def _provenance(s: Mapping[str, Any]) -> str:
    p = s["provenance"]
    rows = [("tool", f"{p['tool']} {p['tool_version']} (Python {p.get('python', '?')}, numpy {p.get('numpy', '?')})"),
            ("run folder", s["run"]["folder"]), ("created (UTC)", s["run"]["created_utc"])]
    pl = p["pipeline"]
    if pl.get("file_name"):
        rows.append(("pipeline file", f"{pl['file_name']} (copy in this folder: {pl.get('copy')})"))
    rows.append(("pipeline sha256", pl.get("sha256") or "–"))
    for lg in p["logs"]:
        rows.append((f"log {lg['file_name']} sha256", lg["sha256"]))
    if p.get("baseline"):
        rows.append((f"baseline {p['baseline']['file_name']} sha256", p["baseline"]["sha256"]))
    settings = json.dumps(p.get("settings", {}), indent=2, sort_keys=False, allow_nan=False, default=str)
    return _section(
        "provenance", "Provenance",
        _table(("item", "value"), rows, cls="prov"),
        _Raw(f"<details><summary>Settings as parsed from the pipeline file</summary><pre>{_e(settings)}</pre>"
             "</details>"),
    )


_CSS = """
:root { --ink:#1d232b; --muted:#5b6670; --line:#cfd6dc; --ok:#1f6f5c; --bad:#a3361a; --paper:#fbfaf7; }
* { box-sizing: border-box; }
body { margin:0; background:var(--paper); color:var(--ink);
  font: 15px/1.45 Georgia, "Times New Roman", serif; }
main { max-width: 980px; margin: 0 auto; padding: 28px 28px 60px; }
header h1 { font-size: 1.6em; margin: 0 0 2px; font-weight: normal; }
header .meta { color: var(--muted); font: 13px/1.4 "Helvetica Neue", Arial, sans-serif; }
nav { font: 13px "Helvetica Neue", Arial, sans-serif; margin: 10px 0 18px; border-top: 1px solid var(--line);
  border-bottom: 1px solid var(--line); padding: 6px 0; }
nav a { color: var(--ink); margin-right: 14px; text-decoration: none; }
h2 { font-size: 1.2em; font-weight: normal; border-bottom: 2px solid var(--ink); padding-bottom: 2px;
  margin-top: 34px; letter-spacing: .02em; }
h3 { font-size: 1em; margin: 18px 0 6px; }
.verdict { border-left: 8px solid; padding: 10px 14px; margin: 8px 0 12px; background: #fff; }
.verdict.ok { border-color: var(--ok); } .verdict.bad { border-color: var(--bad); }
.verdict .word { font: bold 1.5em "Helvetica Neue", Arial, sans-serif; letter-spacing: .08em; }
.verdict.ok .word { color: var(--ok); } .verdict.bad .word { color: var(--bad); }
.verdict .sub { color: var(--muted); margin-top: 2px; }
.verdict .poor { color: var(--bad); font-weight: bold; margin-top: 6px; }
td.note { color: #8a6100; font-weight: 600; }
table { border-collapse: collapse; margin: 8px 0 12px; font: 13px/1.35 "Helvetica Neue", Arial, sans-serif;
  background: #fff; }
th, td { border: 1px solid var(--line); padding: 3px 8px; text-align: left; vertical-align: top; }
th { background: #eef0ee; font-weight: 600; }
td.ok { color: var(--ok); font-weight: 600; } td.bad { color: var(--bad); font-weight: 600; }
p.ok { color: var(--ok); } p.bad { color: var(--bad); font-weight: bold; }
ul.warnings li { color: var(--bad); } ul.notes li { color: var(--muted); }
figure { margin: 14px 0; page-break-inside: avoid; break-inside: avoid; }
figure img { max-width: 100%; border: 1px solid var(--line); background: #fff; }
figcaption { font: 12px "Helvetica Neue", Arial, sans-serif; color: var(--muted); }
.file { color: var(--muted); font-size: .9em; }
pre { font-size: 12px; background: #fff; border: 1px solid var(--line); padding: 8px; overflow-x: auto; }
.caution { border: 2px solid var(--ink); padding: 10px 14px; margin-top: 30px; background: #fff; }
.notes-text { white-space: pre-wrap; }
@media print {
  body { background: #fff; font-size: 11pt; }
  main { max-width: none; padding: 0; }
  nav { display: none; }
  h2 { page-break-after: avoid; break-after: avoid; }
  table, .verdict, .caution { page-break-inside: avoid; break-inside: avoid; }
  details > pre { display: block; }
  a { color: inherit; text-decoration: none; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; }
}
"""

_NAV = (("data", "Data"), ("model", "Model"), ("validation", "Validation"), ("modes", "Modes"),
        ("expectations", "Expectations"), ("drift", "Drift"), ("provenance", "Provenance"))


def render_report(summary: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    """Render the HTML report of a run.

    Parameters
    ----------
    summary : Mapping
        The run summary as written to ``summary.json`` by
        :func:`ident.pipeline.run_pipeline` (keys ``name, notes, verdict, gates,
        run, data, model, validation, modes, expectations, drift, figures,
        warnings, provenance, safety``).
    figures : Mapping of str to bytes
        PNG bytes by file name; every entry of ``summary["figures"]`` whose
        file is present is embedded as a ``data:`` URI in its section.

    Returns
    -------
    str
        A complete HTML5 document; every user-supplied string is escaped.
    """
    name = summary.get("name", "rigfit run")
    notes = summary.get("notes", "")
    verdict = summary["verdict"]
    nav = "".join(f'<a href="#{a}">{_e(t)}</a>' for a, t in _NAV)
    warnings_ = summary.get("warnings", [])
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(name)} – {'passed' if verdict['passed'] else 'FAILED'}</title>",
        f"<style>{_CSS}</style></head><body><main>",
        f"<header><h1>{_e(name)}</h1><div class=\"meta\">rigfit run {_e(summary['run']['folder'])} · "
        f"{_e(summary['run']['created_utc'])}</div></header>",
        f"<nav>{nav}</nav>",
        _verdict(summary),
    ]
    if notes:
        parts.append(f'<p class="notes-text"><strong>Notes:</strong> {_e(notes)}</p>')
    if warnings_:
        parts.append("<h3>Warnings during the run</h3>" + _ul(warnings_, cls="warnings"))
    parts += [
        _data(summary, figures),
        _model(summary),
        _validation(summary, figures),
        _periodic(summary, figures),
        _modes(summary, figures),
        _expectations(summary),
        _drift(summary, figures),
        _provenance(summary),
        f'<div class="caution"><strong>Caution.</strong> {_e(summary.get("safety", ""))}</div>',
        "</main></body></html>",
    ]
    return "\n".join(parts) + "\n"


# --------------------------------------------------------------------------- fragments (notebooks)

#: Style of a fragment shown inside a notebook: the report's table look, scoped to the fragment.
_FRAGMENT_CSS = """
.rigfit-fragment { font: 13px/1.4 "Helvetica Neue", Arial, sans-serif; color: #1f2a36; }
.rigfit-fragment h2 { font-size: 15px; margin: 8px 0 4px; } .rigfit-fragment h3 { font-size: 13px; margin: 6px 0; }
.rigfit-fragment table { border-collapse: collapse; margin: 4px 0 8px; }
.rigfit-fragment th, .rigfit-fragment td { border: 1px solid #d5dbd6; padding: 2px 7px; text-align: left; }
.rigfit-fragment th { background: #eef0ee; font-weight: 600; }
.rigfit-fragment td.ok { color: #1f6f43; font-weight: 600; }
.rigfit-fragment td.bad { color: #b3261e; font-weight: 600; }
.rigfit-fragment ul.warnings li { color: #b3261e; } .rigfit-fragment .caution { font-size: 12px; color: #555; }
"""


def html_fragment(*parts: str) -> str:
    """Wrap pieces made by this module in one ``<div>`` with the report's table style (for notebooks)."""
    return f'<div class="rigfit-fragment"><style>{_FRAGMENT_CSS}</style>' + "".join(parts) + "</div>"


def table_html(headers: Sequence[Any], rows: Iterable[Sequence[Any]], *, caption: str | None = None) -> str:
    """Return an HTML table as in the report; every cell is escaped (a ``(text, "ok"|"bad")`` cell is coloured)."""
    head = _p(caption) if caption else ""
    return head + _table(headers, rows)


def modes_html(modes: Mapping[str, Any]) -> str:
    """Return the report's mode section for one mode table.

    Parameters
    ----------
    modes : Mapping
        :func:`ident.assess.modes.mode_table_to_dict` plus ``units`` (``{"inputs": [...],
        "outputs": [...]}``) and optionally ``fail_on``.
    """
    return _modes({"modes": modes, "figures": []}, {})


def validation_html(validation: Mapping[str, Any], *, title: str | None = None) -> str:
    """Return the report's validation section for one validation report.

    Parameters
    ----------
    validation : Mapping
        :func:`ident.assess.diagnostics.report_to_dict` of the report.
    title : str, optional
        Heading of the part (default: the sample count).
    """
    rep = dict(validation)
    rep.setdefault("experiment", 1)
    rep.setdefault("range", [0, rep.get("n_samples", 0)])
    html_text = _validation({"validation": [rep], "figures": []}, {})
    if title is not None:
        html_text = re.sub(r"<h2>.*?</h2>", "<h2>Validation</h2>", html_text, count=1, flags=re.S)
        html_text = re.sub(r"<h3>.*?</h3>", f"<h3>{_e(title)}</h3>", html_text, count=1, flags=re.S)
    return html_text
