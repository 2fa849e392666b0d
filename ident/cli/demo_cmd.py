"""``rigfit demo``: run the bundled pipelines on the sample data into a fresh folder."""

from __future__ import annotations

import datetime as _dt
import json
from pathlib import Path
from typing import Any

import click

from ..errors import IdentError
from .run_cmd import progress_printer

#: (pipeline stem, stem of the run whose model is the baseline, or None), in run order.
DEMO_RUNS: tuple[tuple[str, str | None], ...] = (
    ("belt_axis_before", None),
    ("belt_axis_after", "belt_axis_before"),
    ("heated_platen", None),
)


def find_checkout() -> Path:
    """Return the repository checkout holding ``pipelines/`` and ``sample_data/``.

    Looked for beside the installed package, then in the current folder and its parents.

    Raises
    ------
    IdentError
        Not found (the package was installed elsewhere and the current folder is
        not in a checkout).
    """
    import ident

    candidates = [Path(ident.__file__).resolve().parents[1], Path.cwd(), *Path.cwd().parents]
    for root in candidates:
        if (root / "pipelines" / f"{DEMO_RUNS[0][0]}.toml").is_file() and (root / "sample_data").is_dir():
            return root
    raise IdentError(
        "cannot find the demo pipelines and sample data (pipelines/ and sample_data/)",
        hint="run 'rigfit demo' from a checkout of the rigfit repository (the folder holding "
             "pipelines/ and sample_data/)",
    )


def resonance_line(drift: dict[str, Any] | None, truth_path: Path) -> str | None:
    """Compare the belt resonance shift found with the one in ``truth.json`` (None if unknown)."""
    if drift is None or not truth_path.is_file():
        return None
    truth = json.loads(truth_path.read_text(encoding="utf-8")).get("belt_change")
    if not truth:
        return None
    pairs = [s for s in drift["modes"] if s["status"] == "matched" and s["baseline"]["is_pair"]]
    if not pairs:
        return "belt resonance: no oscillatory mode matched between the two runs"
    target = truth["resonance_before_hz"]
    s = min(pairs, key=lambda p: abs(p["baseline"]["natural_frequency_hz"] - target))
    return (
        f"belt resonance: {s['baseline']['natural_frequency_hz']:.2f} Hz -> {s['new']['natural_frequency_hz']:.2f} Hz "
        f"({s['frequency_shift_hz']:+.2f} Hz, {s['frequency_shift_percent']:+.1f} %); "
        f"generated (sample_data/truth.json): {truth['resonance_before_hz']:.2f} Hz -> "
        f"{truth['resonance_after_hz']:.2f} Hz ({truth['resonance_shift_hz']:+.2f} Hz, "
        f"{truth['resonance_shift_percent']:+.1f} %)"
    )


@click.command()
@click.option("--out", "out_dir", type=click.Path(file_okay=False), default=None, metavar="DIR",
              help="Fresh folder for the demo runs (default: ./rigfit-demo-<UTC time>/).")
@click.option("--quiet", is_flag=True, help="No progress messages on stderr.")
def demo(out_dir: str | None, quiet: bool) -> None:
    """Run the bundled demo pipelines on the sample data into a fresh folder.

    The belt axis before its belt change, after it (with the before-run's model
    as baseline), and the heated platen. Prints each run's verdict, where the reports are, and the belt
    resonance shift found against the one the sample data was generated with.

    Exit status 0 when the demo ran (a failed gate in a demo run is part of the
    story and is printed); 2 when the checkout cannot be found or DIR is not empty.
    """
    from ..pipeline import run_pipeline

    root = find_checkout()
    if out_dir is None:
        stamp = _dt.datetime.now(_dt.UTC).strftime("%Y%m%dT%H%M%SZ")
        out = Path.cwd() / f"rigfit-demo-{stamp}"
    else:
        out = Path(out_dir)
    if out.exists() and any(out.iterdir()):
        raise IdentError(f"{out}: folder is not empty; the demo writes into a fresh folder",
                         hint="give a new or empty folder with --out")
    out.mkdir(parents=True, exist_ok=True)
    results: dict[str, Any] = {}
    for stem, base in DEMO_RUNS:
        if not quiet:
            click.echo(f"running pipelines/{stem}.toml ...", err=True)
        results[stem] = run_pipeline(
            root / "pipelines" / f"{stem}.toml",
            out_dir=out / stem,
            baseline=None if base is None else results[base].model_path,
            progress=progress_printer(quiet, prefix="  "),
            allow_outside=True,  # the bundled pipelines read ../sample_data
        )
    click.echo(f"demo runs in {out}")
    for stem, _ in DEMO_RUNS:
        r = results[stem]
        click.echo(f"  {stem}: {r.summary['verdict']['headline']}")
        click.echo(f"    report: {r.report_path}")
    after = results.get("belt_axis_after")
    line = resonance_line(None if after is None else after.summary["drift"], root / "sample_data" / "truth.json")
    if line:
        click.echo(line)
    if after is not None and [g.key_path for g in after.failed_gates] == ["drift"]:
        click.echo("the after-run fails only its drift gate, as it should: the new belt moved the resonance "
                   "by more than the threshold in pipelines/belt_axis_after.toml")
