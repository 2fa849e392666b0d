"""Peak memory of reading and fitting a long single-input single-output CSV log, and of refusing a log
with one enormous line (run by hand; no test runs it).

Every case runs as a fresh process whose own peak resident memory comes from ``os.wait4``.
Peaks are printed in MiB and as ratios: against the numeric data (rows x used columns x 8
bytes) and against a baseline measured in the same run, a fresh process that only reads the
same file with ``pandas.read_csv``.

    python benchmarks/bench_memory.py                      # 1e7 rows (about 300 MB of CSV; a few minutes)
    python benchmarks/bench_memory.py --rows 1000000       # a quicker look
    python benchmarks/bench_memory.py --workdir /tmp/m     # keep (and reuse) the generated files
    python benchmarks/bench_memory.py --cases read long-line

Cases:

========== ==================================================================================
read       ``ident.io.log.read_log`` of the log (time, ``valve``, ``flow``)
fit        ``rigfit fit LOG --input valve --output flow --json --quiet`` (the whole job)
long-line  ``rigfit fit`` of a log whose third line is a single 200 MB line (refused); the
           ratio is against the file size
========== ==================================================================================

The log is an invented valve-to-flow plant (a lightly damped second-order lag with a one-sample
delay, 1 % output noise) at 1 kHz.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np

T = 0.001  # s
LONG_LINE_BYTES = 200_000_000


def make_log(path: Path, n: int, seed: int = 7) -> None:
    """Write the SISO log of ``n`` rows (the plant of benchmarks/bench_fit.py)."""
    from scipy import signal

    rng = np.random.default_rng(seed)
    u = rng.standard_normal(n)
    den = np.poly([0.97 * np.exp(0.05j), 0.97 * np.exp(-0.05j)]).real
    y = signal.lfilter([0.0, 0.02, 0.018], den, u)
    y += 0.01 * np.std(y) * rng.standard_normal(n)
    data = np.column_stack([np.arange(n) * T, u + 2.0, y + 15.0])
    with open(path, "w") as fh:
        fh.write("time [s],valve [V],flow [l/min]\n")
        for start in range(0, n, 1_000_000):
            np.savetxt(fh, data[start:start + 1_000_000], fmt="%.9g", delimiter=",")


def make_long_line(path: Path) -> None:
    """A log whose third line is one line of LONG_LINE_BYTES digits (no line break)."""
    with open(path, "w") as fh:
        fh.write("time,valve,flow\n0,1,2\n0.001,")
        block = "1" * 1_000_000
        for _ in range(LONG_LINE_BYTES // len(block)):
            fh.write(block)
        fh.write(",3\n")


def child(case: str, path: str) -> None:
    """Body of a child process (``--child CASE PATH``)."""
    if case.startswith("make-"):
        # the logs are written by a child too: a child's peak counts what it inherits from the
        # process that started it, so the parent stays small
        make_log(Path(path), int(case[5:])) if case != "make-long" else make_long_line(Path(path))
    elif case == "baseline":
        import pandas as pd

        pd.read_csv(path)
    elif case == "read":
        from ident.io.log import read_log

        read_log(path, ["valve"], ["flow"])
    else:
        raise SystemExit(f"unknown child case {case}")


def peak_mib(args: list[str]) -> tuple[float, int]:
    """Run a fresh process; its own peak RSS in MiB (os.wait4) and its exit status."""
    proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    err = proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    proc.stderr.close()
    code = os.waitstatus_to_exitcode(status)
    if code not in (0, 2):
        sys.stderr.write(err.decode(errors="replace"))
        raise SystemExit(f"{args} failed with status {code}")
    return usage.ru_maxrss / 1024.0, code


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    parser.add_argument("--rows", type=int, default=10_000_000)
    parser.add_argument("--workdir", type=Path, default=None)
    parser.add_argument("--cases", nargs="+", default=["read", "fit", "long-line"],
                        choices=["read", "fit", "long-line"])
    parser.add_argument("--child", nargs=2, metavar=("CASE", "PATH"), help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        child(*args.child)
        return
    folder = args.workdir or Path(tempfile.mkdtemp(prefix="rigfit-mem-"))
    folder.mkdir(parents=True, exist_ok=True)
    log = folder / f"siso_{args.rows}.csv"
    me = [sys.executable, __file__, "--child"]
    if not log.exists():
        print(f"writing {log} ...", file=sys.stderr)
        subprocess.run(me + [f"make-{args.rows}", str(log)], check=True)
    env = dict(os.environ, OPENBLAS_NUM_THREADS=os.environ.get("OPENBLAS_NUM_THREADS", "1"))
    os.environ.update(env)
    numeric = args.rows * 3 * 8 / 2**20
    peak_mib(me + ["baseline", str(log)])  # warm-up: page cache, bytecode caches
    base, _ = peak_mib(me + ["baseline", str(log)])
    results = {"rows": args.rows, "numeric_mib": numeric, "baseline_read_csv_mib": base}
    print(f"log: {args.rows} rows x 3 columns; numeric data {numeric:.0f} MiB; "
          f"baseline (pandas.read_csv process) {base:.0f} MiB = {base / numeric:.2f} x the data")
    for case in args.cases:
        if case == "read":
            peak, _ = peak_mib(me + ["read", str(log)])
        elif case == "fit":
            peak, _ = peak_mib([sys.executable, "-m", "ident", "fit", str(log), "--input", "valve",
                                "--output", "flow", "--json", "--quiet"])
        else:
            long_log = folder / "long_line.csv"
            if not long_log.exists():
                subprocess.run(me + ["make-long", str(long_log)], check=True)
            peak, code = peak_mib([sys.executable, "-m", "ident", "fit", str(long_log), "--input", "valve",
                                   "--output", "flow", "--quiet"])
            size = long_log.stat().st_size / 2**20
            results[case] = {"peak_mib": peak, "file_mib": size, "exit_status": code}
            print(f"{case:<10} peak {peak:7.0f} MiB = {peak / size:.2f} x the file ({size:.0f} MiB), "
                  f"exit status {code}")
            continue
        results[case] = {"peak_mib": peak, "per_numeric": peak / numeric, "per_baseline": peak / base}
        print(f"{case:<10} peak {peak:7.0f} MiB = {peak / numeric:.2f} x the data, {peak / base:.2f} x the baseline")
    print(json.dumps(results))


if __name__ == "__main__":
    main()
