"""The fleet report: one self-contained HTML file about every unit of a fleet run.

:func:`render_fleet_report` turns the fleet summary (the content of ``fleet.json``,
see :mod:`ident.fleet.run`) and the PNG bytes of its figures into one HTML document:
figures embedded as ``data:`` URIs, the style sheet inline, nothing fetched, so it
can be mailed, archived or printed as it is.

Order: the count of units (ok, failed, outliers, failed gates); the outlier units
with the reasons and the rule that found them; the modes across the fleet (which
units have which mode, medians and spread, a strip per mode); fit per unit and DC
gains; the reference the modes were matched against; the failed units with their
errors; every unit; provenance; the safety caution.

Every string that comes from the user or the data (unit names, file names,
signal names, errors) is escaped with :func:`html.escape`.
"""

from __future__ import annotations

import base64
import html
import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

__all__ = ["render_fleet_report"]

#: Above this many units, the table of every unit is folded (``<details>``).
FOLD_UNITS = 40


class _Html(str):
    """Markup built here from escaped parts; inserted as is."""

    __slots__ = ()


def _e(value: Any) -> str:
    if isinstance(value, _Html):
        return value
    return html.escape("" if value is None else str(value), quote=True)


def _n(x: Any, spec: str = ".4g") -> str:
    if x is None or isinstance(x, bool):
        return "–" if x is None else str(x).lower()
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    return format(v, spec) if math.isfinite(v) else "–"


def _table(headers: Sequence[Any], rows: Iterable[Sequence[Any]], cls: str = "") -> _Html:
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
    return _Html(f'<div class="scroll"><table{klass}><thead><tr>{head}</tr></thead>'
                 f"<tbody>{''.join(body)}</tbody></table></div>")


def _p(text: Any, cls: str = "") -> _Html:
    klass = f' class="{_e(cls)}"' if cls else ""
    return _Html(f"<p{klass}>{_e(text)}</p>")


def _section(anchor: str, title: str, *parts: Any) -> str:
    return f'<section id="{anchor}"><h2>{_e(title)}</h2>' + "".join(_e(p) for p in parts) + "</section>"


def _figures(summary: Mapping[str, Any], figures: Mapping[str, bytes], section: str) -> _Html:
    out = []
    for meta in summary.get("figures", []):
        if meta.get("section") != section or meta.get("file") not in figures:
            continue
        data = base64.b64encode(figures[meta["file"]]).decode("ascii")
        out.append(f'<figure><img src="data:image/png;base64,{data}" alt="{_e(meta.get("caption", ""))}">'
                   f"<figcaption>{_e(meta.get('caption', ''))}</figcaption></figure>")
    return _Html("".join(out))


# --------------------------------------------------------------------------- sections


def _tiles(s: Mapping[str, Any]) -> str:
    c = s["counts"]
    tiles = [("units", c["units"], ""), ("ok", c["ok"], ""), ("failed", c["failed"], "bad" if c["failed"] else ""),
             ("outliers", c["outliers"], "bad" if c["outliers"] else ""),
             ("failed gates", c["gates_failed"], "bad" if c["gates_failed"] else "")]
    cells = "".join(f'<div class="tile {cls}"><span class="big">{_e(v)}</span><span class="cap">{_e(k)}</span></div>'
                    for k, v, cls in tiles)
    state = "clear" if s["passed"] else "attention"
    return (f'<div class="band {state}"><div class="headline">{_e(s["headline"])}</div>'
            f'<div class="tiles">{cells}</div></div>')


def _outliers(s: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    rule = s["rule"]
    parts: list[Any] = [_p("Rule: " + rule["statement"] + ".", cls="rule")]
    if rule.get("chance_flags") is not None:
        parts.append(_p(f"In a fleet of this size whose units all came from one normal distribution, this rule "
                        f"would flag about {rule['chance_flags']:.2g} values by chance; when that is near 1 or "
                        "more, a flag with |z| close to the threshold may be a healthy unit (raise the threshold "
                        "for large fleets)."))
    out = s.get("outliers", [])
    if not out:
        parts.append(_p("No unit is an outlier under this rule.", cls="good"))
    else:
        rows = [(o["unit"], _n(o.get("largest_robust_z"), ".1f"),
                 _Html("<ul>" + "".join(f"<li>{_e(r)}</li>" for r in o["reasons"]) + "</ul>"))
                for o in out]
        parts.append(_table(("unit", "largest |robust z|", "why it stands out"), rows, cls="odd"))
    if s["counts"]["ok"] < rule["min_units"]:
        parts.append(_p(f"Only {s['counts']['ok']} units were computed; the rule needs at least "
                        f"{rule['min_units']}, so nothing was screened.", cls="warn"))
    return _section("outliers", "Units that stand out", *parts)


def _modes(s: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    ref = s.get("reference", {})
    if ref.get("kind") == "model":
        lead = f"Modes were matched against the reference model {ref.get('name')}"
    elif ref.get("kind") == "median unit":
        lead = f"Modes were matched against the fleet's median unit {ref.get('name')}"
    else:
        lead = "No unit was computed, so no modes were matched"
    lead += (" by an optimal assignment on frequency and damping; mode numbers mean the same physical mode "
             "in every unit. A rare mode is one that fewer units have than the rule's fraction.")
    rows = []
    for m in s.get("modes", []):
        r = m["reference"]
        rows.append((
            m["number"], m["kind"], f"{m['count']} of {s['counts']['ok']}", ("rare", "bad") if m["rare"] else "",
            "reference" if m["from_reference"] else "units only",
            _n(r["natural_frequency_hz"]), _n(m.get("median_natural_frequency_hz")),
            _n(m.get("median_damping_ratio"), ".3g") if m["kind"] == "pair" else "–",
            _n(m.get("median_time_constant_s")) if m["kind"] == "real" else "–",
        ))
    table = _table(("mode", "kind", "units with it", "", "from", "reference frequency [Hz]",
                    "median frequency [Hz]", "median damping ratio", "median time constant [s]"), rows)
    return _section("modes", "Modes across the fleet", _p(lead), table, _figures(s, figures, "modes"))


def _fits(s: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    return _section("fits", "Fit and DC gain per unit",
                    _p("Validation fit is the simulation fit on each unit's held-out data; only a fit below the "
                       "fleet counts against a unit."),
                    _figures(s, figures, "fits"), _figures(s, figures, "gains"))


def _failed(s: Mapping[str, Any]) -> str:
    failed = s.get("failed", [])
    gates = s.get("gates_failed", [])
    parts: list[Any] = []
    if failed:
        parts.append(_table(("unit", "log", "error"), [(f["unit"], f["log"], (f["error"], "bad")) for f in failed]))
    else:
        parts.append(_p("Every unit was computed.", cls="good"))
    if gates:
        parts.append(_Html("<h3>Units that failed their pipeline gates</h3>"))
        parts.append(_table(("unit", "failed gates"), [(g["unit"], g["failed_gates"]) for g in gates]))
    return _section("failed", "Failed units", *parts)


def _units(s: Mapping[str, Any]) -> str:
    units = s.get("units", [])
    outputs = list(dict.fromkeys(o for u in units for o in u.get("fit", {})))
    rows = []
    for u in units:
        state = ("failed", "bad") if u["status"] == "failed" else (("outlier", "bad") if u["outlier"] else "ok")
        gates = "–" if u.get("gates_passed") is None else ("pass" if u["gates_passed"] else ("FAIL", "bad"))
        rows.append((u["unit"], state, gates, u.get("method") or "–", _n(u.get("order"), "g"),
                     *[_n(u.get("fit", {}).get(o), ".1f") for o in outputs]))
    table = _table(("unit", "state", "gates", "method", "order", *[f"fit {o} [%]" for o in outputs]), rows)
    if len(units) > FOLD_UNITS:
        table = _Html(f"<details><summary>Show all {len(units)} units</summary>{table}</details>")
    return _section("units", "Every unit", _p("The same rows, with every figure, are in fleet.csv and "
                                               "fleet.parquet; each unit's model and summary are under units/."),
                    table)


def _provenance(s: Mapping[str, Any]) -> str:
    p = s["provenance"]
    e = s.get("engine", {})
    rows = [("tool", f"{p['tool']} {p['tool_version']} (Python {p.get('python', '?')})"),
            ("run folder", s["run"]["folder"]), ("created (UTC)", s["run"]["created_utc"]),
            ("pipeline file", p["pipeline"].get("file_name") or "–"),
            ("pipeline sha256", p["pipeline"].get("sha256") or "–"),
            ("unit settings hash", p.get("settings_hash")),
            ("engine", e.get("description", "–")),
            ("units computed in this run", s["counts"].get("computed")),
            ("units reused from an earlier run (--resume)", s["counts"].get("reused"))]
    ref = s.get("reference", {})
    if ref.get("kind") == "model":
        rows.append(("reference model", f"{ref.get('name')} (sha256 {ref.get('sha256')})"))
    return _section("provenance", "Provenance", _table(("item", "value"), rows, cls="prov"))


_CSS = """
:root { --ink:#20262e; --soft:#5f6b75; --rule:#d5dbe0; --calm:#2e6b58; --alarm:#b2441c; --wash:#f4f6f3; }
* { box-sizing: border-box; }
body { margin:0; background:#fff; color:var(--ink); font: 14px/1.5 "Helvetica Neue", Arial, sans-serif; }
main { max-width: 1000px; margin: 0 auto; padding: 24px 26px 56px; }
header { border-bottom: 3px double var(--ink); padding-bottom: 8px; }
header h1 { margin: 0; font: 600 1.5em/1.2 Georgia, serif; }
header .meta { color: var(--soft); font-size: 12.5px; }
nav { margin: 8px 0 14px; font-size: 12.5px; }
nav a { color: var(--ink); margin-right: 12px; }
h2 { font: 600 1.1em Georgia, serif; margin: 30px 0 8px; padding-left: 8px; border-left: 5px solid var(--ink); }
h3 { font-size: 1em; margin: 16px 0 6px; }
.band { padding: 12px 16px; margin: 12px 0; background: var(--wash); border-top: 5px solid; }
.band.clear { border-color: var(--calm); } .band.attention { border-color: var(--alarm); }
.headline { font-weight: 600; font-size: 1.05em; margin-bottom: 8px; }
.tiles { display: flex; flex-wrap: wrap; gap: 10px; }
.tile { background: #fff; border: 1px solid var(--rule); min-width: 110px; padding: 6px 12px; }
.tile .big { display: block; font: 600 1.6em Georgia, serif; }
.tile .cap { color: var(--soft); font-size: 12px; text-transform: uppercase; letter-spacing: .06em; }
.tile.bad .big { color: var(--alarm); }
.scroll { overflow-x: auto; max-width: 100%; }
table { border-collapse: collapse; margin: 6px 0 12px; font-size: 12.5px; }
th, td { border-bottom: 1px solid var(--rule); padding: 3px 9px; text-align: left; vertical-align: top; }
th { border-bottom: 2px solid var(--ink); font-weight: 600; }
td.bad { color: var(--alarm); font-weight: 600; }
table.odd td ul { margin: 0; padding-left: 16px; }
table.prov td:first-child { color: var(--soft); white-space: nowrap; }
p.rule { background: var(--wash); padding: 6px 10px; font-size: 13px; }
p.good { color: var(--calm); } p.warn { color: var(--alarm); }
figure { margin: 12px 0; break-inside: avoid; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--soft); font-size: 12px; }
details summary { cursor: pointer; color: var(--soft); margin: 4px 0; }
.caution { border: 2px solid var(--ink); padding: 10px 14px; margin-top: 30px; }
@media print { nav { display: none; } main { max-width: none; padding: 0; } details > * { display: block; }
  * { -webkit-print-color-adjust: exact; print-color-adjust: exact; } }
"""

_NAV = (("outliers", "Outliers"), ("modes", "Modes"), ("fits", "Fit and gains"), ("failed", "Failed"),
        ("units", "Units"), ("provenance", "Provenance"))


def render_fleet_report(summary: Mapping[str, Any], figures: Mapping[str, bytes]) -> str:
    """Render the HTML report of a fleet run.

    Parameters
    ----------
    summary : Mapping
        The fleet summary as written to ``fleet.json`` (keys ``name, run, counts,
        passed, headline, rule, reference, modes, outliers, failed, gates_failed,
        units, figures, engine, provenance, safety``).
    figures : Mapping of str to bytes
        PNG bytes by file name, embedded in the section ``summary["figures"]`` gives.

    Returns
    -------
    str
        A complete HTML5 document; every user-supplied string is escaped.
    """
    name = summary.get("name", "rigfit fleet")
    nav = "".join(f'<a href="#{a}">{_e(t)}</a>' for a, t in _NAV)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_e(name)} – fleet of {_e(summary['counts']['units'])} units</title>",
        f"<style>{_CSS}</style></head><body><main>",
        f'<header><h1>{_e(name)}: fleet of {_e(summary["counts"]["units"])} units</h1>'
        f'<div class="meta">rigfit fleet run {_e(summary["run"]["folder"])} · {_e(summary["run"]["created_utc"])}'
        "</div></header>",
        f"<nav>{nav}</nav>",
        _tiles(summary),
        _outliers(summary, figures),
        _modes(summary, figures),
        _fits(summary, figures),
        _failed(summary),
        _units(summary),
        _provenance(summary),
        f'<div class="caution"><strong>Caution.</strong> {_e(summary.get("safety", ""))}</div>',
        "</main></body></html>",
    ]
    return "\n".join(parts) + "\n"
