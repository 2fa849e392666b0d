"""Benchmark of `rigfit fleet`: units per second, speed-up from 1 to 2 workers, engine overhead, driver memory.

Run by hand (it takes a few minutes for 1000 units on a 2-core machine):

    python benchmarks/bench_fleet.py --sizes 100 1000 --workers 1 2

For each fleet size N it writes N simulated end-of-line logs (``sample_data/fleet.py``: small
logs, unit-to-unit spread, three planted odd units) into a temporary folder outside the
repository, then measures in the same run:

* the baseline: one fresh process computing every unit in a plain loop (the same per-unit job,
  ``ident.fleet.units.evaluate_unit``, and the same per-unit files written);
* ``rigfit fleet`` as a fresh process with the embedded cluster of 1 and of 2 workers, timing
  the whole command and (from its ``--json``) the part from the first job sent to the last
  result; the driver's resident memory and CPU time are sampled every 20 ms (the driver only,
  which also hosts the scheduler; not its workers).

It prints units per second, the speed-up from 1 to 2 workers (target >= 1.6), the engine's
overhead per unit against the plain loop (1 worker, target < 20 %), the driver's peak memory
per N (it must not grow with N beyond the fleet table), and whether exactly the planted units
were flagged.
"""

from __future__ import annotations

import argparse
import importlib.util
import json
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]

_LOOP = """
import json, sys, time
from pathlib import Path
from ident.io.pipelinefile import load_pipeline
from ident.fleet.units import UnitJob, collect_logs, evaluate_unit, name_units, settings_hash, unit_folders
from ident.fleet.run import _writer
spec = load_pipeline(sys.argv[1], expand_logs=False)
logs = collect_logs([sys.argv[2]])
names = name_units(logs)
out = Path(sys.argv[3]); out.mkdir(parents=True, exist_ok=True)
write = _writer(out)
digest = settings_hash(spec)
start = time.perf_counter()
for name, path, folder in zip(names, logs, unit_folders(names)):
    write(evaluate_unit(spec, UnitJob(name, str(path), folder), digest))
print(json.dumps({"loop_s": time.perf_counter() - start}))
"""


def _scenario():
    spec = importlib.util.spec_from_file_location("fleet_scenario", REPO / "sample_data" / "fleet.py")
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module
    spec.loader.exec_module(module)
    return module


def _pipeline(folder: Path) -> Path:
    path = folder / "eol.toml"
    path.write_text(textwrap.dedent("""
        name = "actuator end-of-line test (benchmark)"
        [log]
        paths = ["logs/eol_0001.csv"]
        inputs = ["current_cmd"]
        outputs = ["rod_speed"]
        [fit]
        method = "subspace"
        max_order = 6
        [check]
        max_lag = 25
        """), encoding="utf-8")
    return path


def _run_fleet(pipeline: Path, pattern: str, out: Path, workers: int) -> dict:
    import psutil

    cmd = [sys.executable, "-m", "ident", "fleet", str(pipeline), pattern, "--workers", str(workers),
           "--out", str(out), "--quiet", "--json"]
    start = time.perf_counter()
    with tempfile.TemporaryFile("w+") as out_file, tempfile.TemporaryFile("w+") as err_file:
        # files, not pipes: a full pipe would stall the command while the loop below samples it
        proc = subprocess.Popen(cmd, stdout=out_file, stderr=err_file, text=True)
        watch = psutil.Process(proc.pid)
        peak, cpu = 0, 0.0
        while proc.poll() is None:
            try:
                peak = max(peak, watch.memory_info().rss)
                times = watch.cpu_times()
                cpu = times.user + times.system
            except psutil.Error:
                break
            time.sleep(0.02)
        proc.wait()
        wall = time.perf_counter() - start
        out_file.seek(0)
        err_file.seek(0)
        stdout, stderr = out_file.read(), err_file.read()
    if proc.returncode not in (0, 3):
        raise SystemExit(f"rigfit fleet failed ({proc.returncode}): {stderr}")
    try:
        summary = json.loads(stdout)
    except json.JSONDecodeError as exc:
        raise SystemExit(f"rigfit fleet printed no JSON document ({exc}); stdout began {stdout[:200]!r}") from exc
    return {"wall_s": wall, "peak_rss_mib": peak / 2**20, "driver_cpu_s": cpu, **summary}


def main(argv: list[str] | None = None) -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--sizes", type=int, nargs="+", default=[100, 1000])
    parser.add_argument("--workers", type=int, nargs="+", default=[1, 2])
    args = parser.parse_args(argv)
    fleet = _scenario()
    rows = []
    with tempfile.TemporaryDirectory(prefix="rigfit-bench-fleet-") as tmp:
        for n in args.sizes:
            folder = Path(tmp) / f"n{n}"
            plants = {max(1, n // 7): "low_resonance", max(2, n // 3): "high_damping", max(3, n // 2): "extra_mode"}
            truth = fleet.write_fleet(folder / "logs", n, seed=2026, plants=plants)
            planted = {u["serial"] for u in truth["units"] if u["plant"]}
            pipeline = _pipeline(folder)
            pattern = str(folder / "logs" / "eol_*.csv")
            loop = subprocess.run([sys.executable, "-c", _LOOP, str(pipeline), pattern, str(folder / "loop")],
                                  capture_output=True, text=True, check=True)
            loop_s = json.loads(loop.stdout.strip().splitlines()[-1])["loop_s"]
            row = {"n": n, "loop_s": loop_s}
            for w in args.workers:
                r = _run_fleet(pipeline, pattern, folder / f"w{w}", w)
                flagged = {o["unit"] for o in r["outliers"]}
                row[w] = {"wall_s": r["wall_s"], "units_s": r["engine"]["units_s"],
                          "start_s": r["engine"]["engine_start_s"], "peak_rss_mib": r["peak_rss_mib"],
                          "driver_cpu_s": r["driver_cpu_s"],
                          "found": flagged == planted, "extra": sorted(flagged - planted),
                          "missed": sorted(planted - flagged), "failed": r["counts"]["failed"]}
            rows.append(row)
            _print(row, args.workers)


def _print(row: dict, workers: list[int]) -> None:
    n, loop_s = row["n"], row["loop_s"]
    print(f"\nN = {n} units; plain loop in one process: {loop_s:.1f} s ({n / loop_s:.1f} units/s)")
    for w in workers:
        r = row[w]
        print(f"  {w} worker(s): whole command {r['wall_s']:.1f} s ({n / r['wall_s']:.1f} units/s); "
              f"jobs {r['units_s']:.1f} s ({n / r['units_s']:.1f} units/s); cluster start {r['start_s']:.1f} s; "
              f"driver peak {r['peak_rss_mib']:.0f} MiB, CPU {1000 * r['driver_cpu_s'] / n:.1f} ms per unit; "
              f"failed {r['failed']}; planted units found exactly: "
              f"{r['found']}" + (f" (also flagged {r['extra']}, missed {r['missed']})" if not r["found"] else ""))
    if 1 in workers:
        over = row[1]["units_s"] / loop_s - 1
        print(f"  engine overhead per unit, 1 worker against the plain loop: {100 * over:+.1f} % (target < 20 %)")
    if 1 in workers and 2 in workers:
        print(f"  speed-up 1 -> 2 workers: jobs {row[1]['units_s'] / row[2]['units_s']:.2f}x, whole command "
              f"{row[1]['wall_s'] / row[2]['wall_s']:.2f}x (target >= 1.6)")


if __name__ == "__main__":
    main()
