"""``rigfit inspect``: columns, timing, statistics and excitation of a rig log."""

from __future__ import annotations

from typing import Any

import click

from ._common import echo_json, log_options


@click.command()
@click.argument("log_path", metavar="LOG", type=click.Path(dir_okay=False))
@click.option("--input", "inputs", multiple=True, metavar="NAME",
              help="An input column; its excitation is checked (repeatable).")
@click.option("--output", "outputs", multiple=True, metavar="NAME",
              help="An output column, drawn below the inputs with --plot (repeatable).")
@log_options
@click.option("--json", "as_json", is_flag=True, help="Print machine-readable JSON on stdout.")
@click.option("--plot", "plot_path", type=click.Path(dir_okay=False), default=None,
              metavar="FILE.png", help="Draw the signals into this PNG file.")
@click.option("--force", is_flag=True, help="Replace an existing --plot file.")
def inspect(
    log_path: str,
    inputs: tuple[str, ...],
    outputs: tuple[str, ...],
    time_column: str | None,
    sample_rate: float | None,
    drop_bad_rows: bool,
    split_at_gaps: bool,
    jitter_tolerance: float,
    as_json: bool,
    plot_path: str | None,
    force: bool,
) -> None:
    """Summarise LOG (CSV or Parquet): columns and units, rows, timing, statistics, excitation.

    The excitation check runs for each --input: the order up to which the input
    is persistently exciting, and the band holding 90 % of its power as a
    fraction of the Nyquist frequency.

    Exit status: 0 ok; 2 the log cannot be read as asked.
    """
    from ..estimate.excitation import excitation_report
    from ..io.atomic import check_output_path
    from ..io.log import log_from_table, read_table, time_base

    if plot_path is not None:
        check_output_path(plot_path, force=force, protected=(log_path,))
    table = read_table(log_path, drop_bad_rows=drop_bad_rows)
    # validates the names and roles; with no --input/--output only the time base
    selected = [table.column(n) for n in (*inputs, *outputs)]
    explicit_time = time_column is not None or sample_rate is not None
    base = None
    base_note = None
    if inputs and outputs:
        log = log_from_table(table, inputs, outputs, time=time_column, sample_rate=sample_rate,
                             split_at_gaps=split_at_gaps, jitter_tolerance=jitter_tolerance)
        base = (log.time, log.timing, log.segments)
    else:
        _check_overlap(inputs, outputs)
        from ..errors import LogFormatError

        try:
            tb = time_base(table, time=time_column, sample_rate=sample_rate,
                           split_at_gaps=split_at_gaps, jitter_tolerance=jitter_tolerance)
            base = (tb.time, tb.timing, tb.segments)
        except LogFormatError as exc:
            # without a named time base, a log may still be summarised; with inputs the
            # excitation band needs it, so the error stands
            if explicit_time or inputs or "no time column" not in exc.reason:
                raise
            base_note = exc.reason
    time_name = None
    if base is not None and base[1].basis == "time column":
        time_name = _time_name(table, time_column)

    excitation = ()
    if inputs:
        import numpy as np

        u = np.column_stack([c.values for c in selected[: len(inputs)]])
        excitation = excitation_report(u, base[1].sample_time, names=[c.name for c in
                                                                      selected[: len(inputs)]])

    payload = _summary(table, base, time_name, excitation, base_note)
    if plot_path is not None:
        _write_plot(table, base, inputs, outputs, plot_path, force=force, protected=(log_path,))
        payload["plot"] = plot_path
    if as_json:
        echo_json(payload)
    else:
        click.echo(summary_text(payload))


def _check_overlap(inputs: tuple[str, ...], outputs: tuple[str, ...]) -> None:
    from ..errors import OptionError

    low_in = [n.lower() for n in inputs]
    for name in outputs:
        if name.lower() in low_in:
            raise OptionError(f"column {name!r} is named both as an input and as an output")
    for names, role in ((inputs, "input"), (outputs, "output")):
        low = [n.lower() for n in names]
        for n in names:
            if low.count(n.lower()) > 1:
                raise OptionError(f"column {n!r} is named twice as an {role}")


def _time_name(table: Any, time_column: str | None) -> str | None:
    from ..io.log import TIME_COLUMN_NAMES

    if time_column is not None:
        return table.column(time_column).name
    for cand in TIME_COLUMN_NAMES:
        for c in table.columns:
            if c.name.lower() == cand:
                return c.name
    return None


def _summary(table: Any, base: Any, time_name: str | None, excitation: tuple,
             base_note: str | None) -> dict:
    import numpy as np

    src = table.source
    columns = []
    for c in table.columns:
        v = c.values
        columns.append({
            "name": c.name, "unit": c.unit, "min": float(np.min(v)), "mean": float(np.mean(v)),
            "max": float(np.max(v)), "std": float(np.std(v)),
        })
    timing = None
    segments = None
    duration = None
    if base is not None:
        t, stats, segs = base
        duration = float(t[-1] - t[0])
        timing = {
            "basis": stats.basis, "time_column": time_name,
            "sample_time_s": stats.sample_time, "sample_rate_hz": 1.0 / stats.sample_time,
            "jitter_std_s": stats.jitter_std_s, "jitter_max_s": stats.jitter_max_s,
            "jitter_relative": stats.jitter_relative,
        }
        segments = [
            {"start": int(a), "stop": int(b), "first_row": table.line_of(a),
             "last_row": table.line_of(b - 1), "duration_s": float(t[b - 1] - t[a])}
            for a, b in segs
        ]
    return {
        "file": src.path, "sha256": src.sha256, "rows": table.n_rows,
        "first_row": src.first_row, "last_row": src.last_row,
        "dropped_rows": table.dropped_rows, "duration_s": duration,
        "timing": timing, "timing_note": base_note, "segments": segments, "columns": columns,
        "excitation": [
            {"input": r.name, "pe_order": r.pe_order, "pe_order_is_lower_bound":
             r.pe_order_is_lower_bound, "max_order_tested": r.max_order_tested, "rcond": r.rcond,
             "power_fraction": r.power_fraction, "band_fraction_of_nyquist": r.band_fraction,
             "band_hz": r.band_hz}
            for r in excitation
        ],
    }


def _g(x: float | None, digits: int = 6) -> str:
    return "-" if x is None else f"{x:.{digits}g}"


def summary_text(p: dict) -> str:
    """Human-readable form of the inspect summary."""
    lines = [
        f"log        {p['file']}",
        f"sha256     {p['sha256']}",
        f"rows       {p['rows']} (file lines {p['first_row']}-{p['last_row']})"
        + (f", {p['dropped_rows']} bad rows dropped" if p["dropped_rows"] else ""),
    ]
    t = p["timing"]
    if t is None:
        lines.append(f"timing     none ({p['timing_note']}; pass --time NAME or --sample-rate HZ)")
    else:
        basis = (f"column {t['time_column']!r}" if t["basis"] == "time column"
                 else "given sample rate")
        lines.append(f"duration   {_g(p['duration_s'])} s")
        lines.append(
            f"sampling   T = {_g(t['sample_time_s'])} s ({_g(t['sample_rate_hz'])} Hz) from {basis}"
        )
        if t["basis"] == "time column":
            lines.append(
                f"jitter     std {_g(t['jitter_std_s'], 3)} s, max {_g(t['jitter_max_s'], 3)} s "
                f"({100 * t['jitter_relative']:.3g} % of T)"
            )
        segs = p["segments"]
        if segs and len(segs) > 1:
            lines.append(f"segments   {len(segs)} (split at gaps)")
            for k, s in enumerate(segs, start=1):
                lines.append(
                    f"  {k:>3}  samples {s['start']}-{s['stop'] - 1}  lines "
                    f"{s['first_row']}-{s['last_row']}  {_g(s['duration_s'])} s"
                )
    lines.append("")
    width = max([len("column"), *(len(c["name"]) for c in p["columns"])])
    uwidth = max([len("unit"), *(len(c["unit"]) for c in p["columns"])])
    head = f"{'column':<{width}}  {'unit':<{uwidth}}  " + "  ".join(
        f"{h:>12}" for h in ("min", "mean", "max", "std"))
    lines.append(head)
    lines.append("-" * len(head))
    for c in p["columns"]:
        lines.append(
            f"{c['name']:<{width}}  {c['unit']:<{uwidth}}  "
            + "  ".join(f"{_g(c[k]):>12}" for k in ("min", "mean", "max", "std"))
        )
    if p["excitation"]:
        lines.append("")
        lines.append("excitation")
        iw = max([len("input"), *(len(r["input"]) for r in p["excitation"])])
        lines.append(f"{'input':<{iw}}  {'PE order':>9}  90 % power band")
        for r in p["excitation"]:
            order = (f">= {r['pe_order']}" if r["pe_order_is_lower_bound"]
                     else str(r["pe_order"]))
            band = ("none (constant)" if r["band_fraction_of_nyquist"] is None else
                    f"{r['band_fraction_of_nyquist']:.3f} of Nyquist ({_g(r['band_hz'], 4)} Hz)")
            lines.append(f"{r['input']:<{iw}}  {order:>9}  {band}")
        lines.append(
            "(PE order: largest n whose n x n input covariance has lambda_min/lambda_max > "
            f"{p['excitation'][0]['rcond']:g}; a model with nb input terms needs nb <= it)"
        )
    if p.get("plot"):
        lines.append("")
        lines.append(f"plot       {p['plot']}")
    return "\n".join(lines)


def _write_plot(table: Any, base: Any, inputs, outputs, path: str, *, force: bool,
                protected: tuple[str, ...]) -> None:
    import io

    import matplotlib
    import numpy as np

    matplotlib.use("Agg")
    from ..io.atomic import write_atomic
    from ..plots.signals import plot_signals

    if inputs or outputs:
        chosen = [(table.column(n), "input") for n in inputs]
        chosen += [(table.column(n), "output") for n in outputs]
    else:
        time_like = {"time", "t"}
        chosen = [(c, "other") for c in table.columns if c.name.lower() not in time_like]
        if not chosen:
            chosen = [(c, "other") for c in table.columns]
    if base is not None:
        t, segments = base[0], base[2]
    else:
        t, segments = np.arange(table.n_rows, dtype=float), None
    fig = plot_signals(
        t, [(c.label, c.values) for c, _ in chosen], roles=[r for _, r in chosen],
        segments=segments, title=table.source.file_name,
    )
    if base is None:
        fig.axes[-1].set_xlabel("sample")
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110)
    write_atomic(path, buffer.getvalue(), force=force, protected=protected)
