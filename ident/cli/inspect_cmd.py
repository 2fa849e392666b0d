"""``rigfit inspect``: columns (channels), timing, statistics and excitation of a rig log."""

from __future__ import annotations

from typing import Any

import click

from ._common import echo_json, log_options, read_log_kwargs


@click.command()
@click.argument("log_path", metavar="LOG", type=click.Path(dir_okay=False))
@click.option("--input", "inputs", multiple=True, metavar="NAME",
              help="An input column; its excitation is checked (repeatable): a name, group/name, "
                   "a pattern such as 'u*' or a position such as '#2'.")
@click.option("--output", "outputs", multiple=True, metavar="NAME",
              help="An output column, drawn below the inputs with --plot (repeatable), chosen as --input.")
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
    resample_hz: float | None,
    upsample: str | None,
    as_json: bool,
    plot_path: str | None,
    force: bool,
) -> None:
    """Summarise LOG (CSV, Parquet, ASAM MDF or HDF5): columns or channels, timing, statistics, excitation.

    For MDF and HDF5 files the channel groups are listed with their time bases,
    and every channel with its group, sample count and rate. The excitation
    check runs for each --input: the order up to which the input is
    persistently exciting, and the band holding 90 % of its power as a
    fraction of the Nyquist frequency. With --input and --output the chosen
    channels are read as 'rigfit fit' reads them (--resample applies).

    Exit status: 0 ok; 2 the log cannot be read as asked.
    """
    from ..io.atomic import check_output_path
    from ..io.log import read_recording

    log_kwargs = read_log_kwargs(locals())
    if plot_path is not None:
        check_output_path(plot_path, force=force, protected=(log_path,))
    rec = read_recording(log_path, time=time_column, sample_rate=sample_rate, drop_bad_rows=drop_bad_rows)
    log = None
    if inputs and outputs:
        log = _log(rec, log_path, inputs, outputs, log_kwargs)
    else:
        _check_overlap(inputs, outputs)
    chosen_in = _chosen(rec, inputs, log_path)
    chosen_out = _chosen(rec, outputs, log_path)
    bases = _bases(rec, log_kwargs, explicit=time_column is not None or sample_rate is not None,
                   need=bool(inputs) and log is None)
    excitation = _excitation(rec, bases, log, chosen_in)
    payload = _summary(rec, bases, log, excitation)
    if plot_path is not None:
        _write_plot(rec, bases, log, chosen_in, chosen_out, plot_path, force=force, protected=(log_path,))
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


def _columns(rec: Any) -> list[tuple[int, int, Any]]:
    """(position, block index, Column) of every column read, in listing order."""
    out = []
    for k, name in enumerate(rec.names):
        found = rec.find(name)
        if found is not None:
            out.append((k + 1, *found))
    return out


def _chosen(rec: Any, selectors: tuple[str, ...], path: str) -> list[tuple[int, Any]]:
    """(block index, Column) of each selected column, selectors resolved as the log reader does."""
    from ..errors import LogFormatError
    from ..io.columns import resolve_all

    word = "column" if rec.source.format in ("csv", "parquet") else "channel"
    out = []
    for k in resolve_all(list(selectors), rec.entries, path=path, word=word):
        found = rec.find(rec.names[k])
        if found is None:
            raise LogFormatError("not a numeric channel", path=path, channel=rec.names[k])
        out.append(found)
    return out


def _log(rec: Any, path: str, inputs, outputs, log_kwargs: dict) -> Any:
    from ..io.log import log_from_recording

    return log_from_recording(rec, list(inputs), list(outputs), **log_kwargs)


def _bases(rec: Any, kw: dict, *, explicit: bool, need: bool) -> list[tuple[Any, str | None]]:
    """(TimeBase or None, note) per block; a table without a time base is summarised all the same."""
    from ..errors import LogFormatError
    from ..io.log import time_base

    out = []
    for block in rec.blocks:
        if block.label and not block.has_time_base:
            out.append((None, block.note))
            continue
        time = kw["time"] if not block.label else block.time
        rate = kw["sample_rate"] if not block.label else block.sample_rate
        try:
            out.append((time_base(block.table, time=time, sample_rate=rate, split_at_gaps=kw["split_at_gaps"],
                                  jitter_tolerance=kw["jitter_tolerance"]), None))
        except LogFormatError as exc:
            # without a named time base, a CSV log may still be summarised; with inputs the
            # excitation band needs it, so the error stands
            if block.label or explicit or need or "no time column" not in exc.reason:
                raise
            out.append((None, exc.reason))
    return out


def _excitation(rec: Any, bases: list, log: Any, chosen_in: list) -> tuple:
    if not chosen_in:
        return ()
    from ..errors import LogFormatError
    from ..estimate.excitation import excitation_report

    if log is not None:
        return excitation_report(log.u, log.sample_time, names=list(log.input_names))
    reports = []
    for b, column in chosen_in:
        base = bases[b][0]
        if base is None:
            raise LogFormatError(f"no time base: {bases[b][1]}", path=rec.source.path, channel=column.name)
        reports.extend(excitation_report(column.values[:, None], base.timing.sample_time, names=[column.name]))
    return tuple(reports)


def _timing(stats: Any, time_name: str | None) -> dict:
    return {
        "basis": stats.basis, "time_column": time_name,
        "sample_time_s": stats.sample_time, "sample_rate_hz": 1.0 / stats.sample_time,
        "jitter_std_s": stats.jitter_std_s, "jitter_max_s": stats.jitter_max_s,
        "jitter_relative": stats.jitter_relative,
    }


def _segments(table: Any, t, segs, lines: bool) -> list[dict]:
    return [
        {"start": int(a), "stop": int(b), "first_row": table.line_of(a) if lines else None,
         "last_row": table.line_of(b - 1) if lines else None, "duration_s": float(t[b - 1] - t[a])}
        for a, b in segs
    ]


def _stats(v) -> dict:
    """Min, mean, max and std of a column (scaled by its largest magnitude, so huge values do not overflow)."""
    import numpy as np

    from .._validate import MAX_SIGNAL_MAGNITUDE

    big = float(np.max(np.abs(v)))
    scale = big if 0.0 < big < np.inf else 1.0
    return {"min": float(np.min(v)), "mean": scale * float(np.mean(v / scale)), "max": float(np.max(v)),
            "std": scale * float(np.std(v / scale)), "beyond_limit": big > MAX_SIGNAL_MAGNITUDE}


def _groups(rec: Any, bases: list) -> list[dict]:
    if not rec.blocks[0].label:
        return []
    out = []
    for block, (base, note) in zip(rec.blocks, bases, strict=True):
        table = block.table
        item = {"label": block.label, "records": table.n_rows, "dropped": table.dropped_rows,
                "time": block.time, "sample_rate_attribute_hz": block.sample_rate if block.time is None else None,
                "note": note, "timing": None, "duration_s": None, "segments": None}
        if base is not None:
            item["timing"] = _timing(base.timing, block.time)
            item["duration_s"] = float(base.time[-1] - base.time[0])
            item["segments"] = _segments(table, base.time, base.segments, True)
        out.append(item)
    return out


def _time_name(table: Any, time_column: str | None) -> str | None:
    from ..io.log import TIME_COLUMN_NAMES

    if time_column is not None:
        return table.column(time_column).name
    for cand in TIME_COLUMN_NAMES:
        for c in table.columns:
            if c.name.lower() == cand:
                return c.name
    return None


def _top(rec: Any, bases: list, log: Any) -> dict:
    """Describe the timing of what the summary is about: the chosen channels' log, or the one table."""
    if log is not None:
        resampled = log.resampling is not None
        table = rec.blocks[0].table
        time_name = None
        if log.timing.basis == "time column" and not rec.blocks[0].label:
            time_name = _time_name(table, rec.blocks[0].time)
        return {"duration_s": log.duration_s, "timing": _timing(log.timing, time_name), "timing_note": None,
                "segments": _segments(table, log.time, log.segments,
                                      not resampled and not rec.blocks[0].label),
                "resampling": None if not resampled else log.resampling.to_dict(),
                "resampling_text": None if not resampled else log.resampling.describe()}
    if len(rec.blocks) == 1 and bases[0][0] is not None:
        base, block = bases[0][0], rec.blocks[0]
        time_name = (block.time if block.label else _time_name(block.table, block.time)) \
            if base.timing.basis == "time column" else None
        return {"duration_s": float(base.time[-1] - base.time[0]), "timing": _timing(base.timing, time_name),
                "timing_note": None, "segments": _segments(block.table, base.time, base.segments, True),
                "resampling": None, "resampling_text": None}
    note = bases[0][1] if len(rec.blocks) == 1 else "several channel groups, each with its own time base"
    return {"duration_s": None, "timing": None, "timing_note": note, "segments": None, "resampling": None,
            "resampling_text": None}


def _summary(rec: Any, bases: list, log: Any, excitation: tuple) -> dict:
    from ..io.channels import FORMAT_NAMES

    src = rec.source
    columns = []
    for pos, b, c in _columns(rec):
        base = bases[b][0]
        columns.append({
            "position": pos, "name": c.name, "unit": c.unit, "group": rec.blocks[b].label or None,
            "samples": int(c.values.shape[0]),
            "rate_hz": None if base is None else 1.0 / base.timing.sample_time, **_stats(c.values),
        })
    rows = rec.blocks[0].table.n_rows if len(rec.blocks) == 1 else max(b.table.n_rows for b in rec.blocks)
    return {
        "file": src.path, "format": src.format, "format_name": FORMAT_NAMES.get(src.format, src.format),
        "version": rec.version, "sha256": src.sha256, "rows": rows,
        "first_row": src.first_row, "last_row": src.last_row,
        "dropped_rows": sum(b.table.dropped_rows for b in rec.blocks),
        **_top(rec, bases, log), "groups": _groups(rec, bases), "columns": columns,
        "skipped": list(rec.skipped),
        "log": None if log is None else {"inputs": list(log.input_names), "outputs": list(log.output_names),
                                         "n_samples": log.n_samples, "sample_time_s": log.sample_time,
                                         "frozen_tails": _frozen_tails(log)},
        "excitation": [
            {"input": r.name, "pe_order": r.pe_order, "pe_order_is_lower_bound":
             r.pe_order_is_lower_bound, "max_order_tested": r.max_order_tested, "rcond": r.rcond,
             "power_fraction": r.power_fraction, "band_fraction_of_nyquist": r.band_fraction,
             "band_hz": r.band_hz}
            for r in excitation
        ],
    }


def _frozen_tails(log: Any) -> list[list[int]]:
    """Sample ranges ``[a, b)`` that ``rigfit fit`` leaves out as frozen tails of the chosen channels' segments."""
    from ..estimate.preprocess import frozen_tail_length, frozen_tail_rule

    tails = []
    for a, b in log.segments:
        count = frozen_tail_length(log.u[a:b], log.y[a:b])
        if frozen_tail_rule(count, b - a):
            tails.append([b - count, b])
    return tails


def _g(x: float | None, digits: int = 6) -> str:
    return "-" if x is None else f"{x:.{digits}g}"


def _head_lines(p: dict) -> list[str]:
    lines = [f"log        {p['file']}"]
    if p["format"] != "csv":
        lines.append(f"format     {p['format_name']}" + (f" {p['version']}" if p["version"] else ""))
    lines.append(f"sha256     {p['sha256']}")
    dropped = p["dropped_rows"]
    if p["format"] == "csv":
        lines.append(f"rows       {p['rows']} (file lines {p['first_row']}-{p['last_row']})"
                     + (f", {dropped} bad rows dropped" if dropped else ""))
    elif p["format"] == "parquet":
        lines.append(f"records    {p['rows']} (table rows {p['first_row']}-{p['last_row']}), "
                     f"{len(p['columns'])} channels" + (f", {dropped} bad records dropped" if dropped else ""))
    else:
        lines.append(f"records    {len(p['groups'])} channel group(s), {len(p['columns'])} channels"
                     + (f", {dropped} bad samples dropped" if dropped else ""))
        lines += _group_lines(p["groups"], p["format"])
    return lines


def _group_lines(groups: list[dict], fmt: str) -> list[str]:
    width = max([len("group"), *(len(g["label"]) for g in groups)])
    out = [f"  {'group':<{width}}  {'samples':>9}  time base"]
    for g in groups:
        if g["time"] is not None:
            where = f"{'master channel' if fmt == 'mdf' else 'time dataset'} {g['time']!r}"
        elif g["sample_rate_attribute_hz"] is not None:
            where = "sample-rate attribute" if fmt == "hdf5" else "sample rate"
        else:
            where = "none"
        t = g["timing"]
        if t is None:
            text = f"{where} ({g['note']})"
        else:
            text = (f"{where}: T = {_g(t['sample_time_s'])} s ({_g(t['sample_rate_hz'])} Hz), "
                    f"{_g(g['duration_s'])} s")
            if t["basis"] == "time column":
                text += f", jitter max {100 * t['jitter_relative']:.3g} % of T"
            if g["segments"] and len(g["segments"]) > 1:
                text += f", {len(g['segments'])} segments"
        if g["dropped"]:
            text += f", {g['dropped']} bad samples dropped"
        out.append(f"  {g['label']:<{width}}  {g['records']:>9}  {text}")
    return out


def _timing_lines(p: dict) -> list[str]:
    t = p["timing"]
    if t is None:
        if p["groups"]:
            return [f"timing     {p['timing_note']}; choose --input and --output (with --resample HZ "
                    "for several rates) to see them on one grid"]
        return [f"timing     none ({p['timing_note']}; pass --time NAME or --sample-rate HZ)"]
    if t["basis"] == "time column":
        basis = f"column {t['time_column']!r}" if t["time_column"] else "the time column"
    elif t["basis"] == "common grid":
        basis = "a common grid of the chosen channels"
    else:
        basis = "given sample rate"
    lines = [f"duration   {_g(p['duration_s'])} s",
             f"sampling   T = {_g(t['sample_time_s'])} s ({_g(t['sample_rate_hz'])} Hz) from {basis}"]
    if p.get("resampling_text"):
        lines[-1] = f"sampling   T = {_g(t['sample_time_s'])} s ({_g(t['sample_rate_hz'])} Hz), {p['resampling_text']}"
    if t["basis"] in ("time column", "common grid"):
        lines.append(
            f"jitter     std {_g(t['jitter_std_s'], 3)} s, max {_g(t['jitter_max_s'], 3)} s "
            f"({100 * t['jitter_relative']:.3g} % of T)"
        )
    segs = p["segments"]
    if segs and len(segs) > 1:
        lines.append(f"segments   {len(segs)} (split at gaps)")
        for k, s in enumerate(segs, start=1):
            where = f"  lines {s['first_row']}-{s['last_row']}" if s["first_row"] is not None else ""
            lines.append(f"  {k:>3}  samples {s['start']}-{s['stop'] - 1}{where}  {_g(s['duration_s'])} s")
    return lines


def _column_lines(p: dict) -> list[str]:
    cols = p["columns"]
    word = "column" if p["format"] == "csv" else "channel"
    grouped = bool(p["groups"])
    width = max([len(word), *(len(c["name"]) for c in cols)])
    uwidth = max([len("unit"), *(len(c["unit"]) for c in cols)])
    pwidth = max(2, len(str(len(cols))) + 1)
    head = f"{'#':>{pwidth}}  {word:<{width}}  {'unit':<{uwidth}}  "
    if grouped:
        head += f"{'samples':>9}  {'rate [Hz]':>10}  "
    head += "  ".join(f"{h:>12}" for h in ("min", "mean", "max", "std"))
    lines = [head, "-" * len(head)]
    for c in cols:
        line = f"{c['position']:>{pwidth}}  {c['name']:<{width}}  {c['unit']:<{uwidth}}  "
        if grouped:
            line += f"{c['samples']:>9}  {_g(c['rate_hz']):>10}  "
        lines.append(line + "  ".join(f"{_g(c[k]):>12}" for k in ("min", "mean", "max", "std")))
    if p["skipped"]:
        lines.append(f"not numeric (not read): {', '.join(p['skipped'])}")
    huge = [c["name"] for c in cols if c.get("beyond_limit")]
    if huge:
        from .._validate import MAX_SIGNAL_MAGNITUDE

        lines.append(f"note: {'columns' if len(huge) > 1 else 'column'} {', '.join(huge)} "
                     f"{'hold' if len(huge) > 1 else 'holds'} values beyond +-{MAX_SIGNAL_MAGNITUDE:g}: fit and "
                     "check refuse them (their sums of squares would overflow double precision); scale them first")
    return lines


def summary_text(p: dict) -> str:
    """Human-readable form of the inspect summary."""
    lines = _head_lines(p) + _timing_lines(p) + [""] + _column_lines(p)
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
    for a, b in (p["log"] or {}).get("frozen_tails", []):
        lines.append("")
        lines.append(f"frozen     samples {a}-{b - 1} repeat sample {a - 1} in every chosen channel, to the last "
                     "bit (a padded or stopped recording): rigfit fit leaves them out")
    if p.get("plot"):
        lines.append("")
        lines.append(f"plot       {p['plot']}")
    return "\n".join(lines)


def _write_plot(rec: Any, bases: list, log: Any, chosen_in: list, chosen_out: list, path: str, *,
                force: bool, protected: tuple[str, ...]) -> None:
    import io

    import matplotlib
    import numpy as np

    matplotlib.use("Agg")
    from ..io.atomic import write_atomic
    from ..plots.signals import plot_log, plot_signals

    title = rec.source.file_name
    if log is not None:
        fig = plot_log(log, title=title)
    else:
        if chosen_in or chosen_out:
            chosen = [(b, c, "input") for b, c in chosen_in] + [(b, c, "output") for b, c in chosen_out]
        else:
            time_like = {"time", "t"}
            chosen = [(b, c, "other") for _, b, c in _columns(rec) if c.name.lower() not in time_like]
            if not chosen:
                chosen = [(b, c, "other") for _, b, c in _columns(rec)]
        times = [bases[b][0].time if bases[b][0] is not None else np.arange(c.values.shape[0], dtype=float)
                 for b, c, _ in chosen]
        one_base = len({b for b, _, _ in chosen}) == 1 and bases[chosen[0][0]][0] is not None
        fig = plot_signals(
            times[0], [(c.label, c.values) for _, c, _ in chosen], roles=[r for _, _, r in chosen],
            segments=bases[chosen[0][0]][0].segments if one_base else None,
            times=None if one_base else times, title=title,
        )
        if all(bases[b][0] is None for b, _, _ in chosen):
            fig.axes[-1].set_xlabel("sample")
    buffer = io.BytesIO()
    fig.savefig(buffer, format="png", dpi=110)
    write_atomic(path, buffer.getvalue(), force=force, protected=protected)
