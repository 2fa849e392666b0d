"""Speed and memory of ``rigfit fit`` on long logs, against baselines measured in the same run.

Run by hand (never from the test suite)::

    python benchmarks/bench_fit.py                 # 1e5 and 1e6 samples, about 6 minutes
    python benchmarks/bench_fit.py --sizes 100000  # quicker

For each size it writes a SISO log and a 2x2 log (CSV, time column plus signals)
into a temporary folder and times, each as a fresh process (wall time from
start to exit, peak resident memory from ``os.wait4``):

- ``rigfit fit`` with ARX and the order sweep (``--method arx``, orders 1..10,
  delays estimated) on the SISO log; with subspace at one order (``--method
  subspace --order 3``: one projection, as the baseline, then B, D, the initial
  state, the validation and the modes) on the 2x2 log; and with the subspace
  order sweep (``--max-order 10``: every order fitted and validated);
- ``pandas.read_csv`` of the same file alone (interpreter start, pandas
  import and the read; the read by itself is printed too);
- a straightforward baseline: for ARX, lagged columns made with pandas
  ``shift`` and one statsmodels OLS per candidate (na = nb = 1..10); for
  subspace, the block Hankel matrices built fully in memory, one dense numpy QR
  of the stacked data and the SVD of the oblique projection (orders read off
  the same SVD).

It prints the ratios against the targets in the issues: the default fit (``auto``:
candidates, refinement, selection, polish) on 1e6 samples at most 4x the CSV read
and under 2 s end to end on 1e5; ARX sweep on 1e6 samples
at most 1.5x the CSV read and at least 10x faster than the baseline; subspace
2x2 on 1e6 samples at most 3x the CSV read, at least 5x faster than the
baseline and at most a fifth of its peak memory; time growing linearly with N.
"""

from __future__ import annotations

import argparse
import json
import os
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

T = 0.001  # s, 1 kHz logs
MAX_ORDER = 10
HORIZON = 7  # the subspace horizon rigfit chooses for max order 10 and 2 outputs
TARGET_N = 1_000_000  # the ratio targets are stated for logs of this length


# --------------------------------------------------------------------------- data


def make_logs(folder: Path, n: int, seed: int = 7) -> dict[str, Path]:
    """Write a SISO and a 2x2 log of ``n`` samples; return their paths."""
    from scipy import signal

    rng = np.random.default_rng(seed)
    t = np.arange(n) * T
    # SISO: a lightly damped second-order plant with a one-sample delay (invented)
    u = rng.standard_normal(n)
    den = np.poly([0.97 * np.exp(0.05j), 0.97 * np.exp(-0.05j)]).real
    y = signal.lfilter([0.0, 0.02, 0.018], den, u)
    y += 0.01 * np.std(y) * rng.standard_normal(n)
    siso = folder / f"siso_{n}.csv"
    _write_csv(siso, ["time [s]", "valve [V]", "flow [l/min]"], [t, u + 2.0, y + 15.0])
    # 2x2: a coupled three-state plant (invented)
    A = np.array([[0.98, 0.05, 0.0], [-0.05, 0.98, 0.01], [0.0, 0.0, 0.9]])
    B = np.array([[0.1, 0.0], [0.0, 0.05], [0.03, 0.1]])
    C = np.array([[1.0, 0.0, 0.5], [0.0, 1.0, -1.0]])
    D = np.zeros((2, 2))
    U = rng.standard_normal((n, 2))
    _, Y, _ = signal.dlsim((A, B, C, D, T), U)
    Y += 0.02 * np.std(Y, axis=0) * rng.standard_normal((n, 2))
    mimo = folder / f"mimo_{n}.csv"
    _write_csv(mimo, ["time [s]", "heater [W]", "fan [V]", "temp [degC]", "flow [m/s]"],
               [t, U[:, 0] + 50.0, U[:, 1] + 5.0, Y[:, 0] + 20.0, Y[:, 1] + 1.0])
    return {"siso": siso, "mimo": mimo}


def _write_csv(path: Path, header: list[str], columns: list[np.ndarray]) -> None:
    data = np.column_stack(columns)
    with open(path, "w") as fh:
        fh.write(",".join(header) + "\n")
        np.savetxt(fh, data, fmt="%.9g", delimiter=",")


# --------------------------------------------------------------------------- children


def child_read_csv(path: str) -> dict:
    import pandas as pd

    t0 = time.perf_counter()
    frame = pd.read_csv(path)
    return {"read_s": time.perf_counter() - t0, "rows": len(frame)}


def child_arx_baseline(path: str, inputs: list[str], outputs: list[str]) -> dict:
    """ARX sweep the plain way: pandas lag columns, one statsmodels OLS per candidate."""
    import pandas as pd
    import statsmodels.api as sm

    frame = pd.read_csv(path)
    frame.columns = [c.split(" [")[0] for c in frame.columns]
    n_est = int(0.7 * len(frame))
    est = frame.iloc[:n_est]
    est = est - est.mean()
    t0 = time.perf_counter()
    aics = []
    for out in outputs:
        for n in range(1, MAX_ORDER + 1):
            cols = {}
            for lag in range(1, n + 1):
                cols[f"y{lag}"] = -est[out].shift(lag)
            for name in inputs:
                for lag in range(1, n + 1):  # delay 1, as rigfit finds for these logs
                    cols[f"{name}{lag}"] = est[name].shift(lag)
            X = pd.DataFrame(cols).iloc[n:]
            res = sm.OLS(est[out].iloc[n:], X).fit()
            aics.append(float(res.aic))
    return {"fit_s": time.perf_counter() - t0, "candidates": len(aics)}


def child_subspace_baseline(path: str, inputs: list[str], outputs: list[str]) -> dict:
    """N4SID the plain way: full block Hankel matrices, dense QR and SVD."""
    import pandas as pd

    frame = pd.read_csv(path)
    frame.columns = [c.split(" [")[0] for c in frame.columns]
    n_est = int(0.7 * len(frame))
    u = frame[inputs].to_numpy()[:n_est]
    y = frame[outputs].to_numpy()[:n_est]
    u = u - u.mean(axis=0)
    y = y - y.mean(axis=0)
    t0 = time.perf_counter()
    i = HORIZON
    m, p = u.shape[1], y.shape[1]
    j = n_est - 2 * i + 1
    U = np.vstack([u[k:k + j].T for k in range(2 * i)])  # (2 i m, j)
    Y = np.vstack([y[k:k + j].T for k in range(2 * i)])  # (2 i p, j)
    Up, Uf = U[: i * m], U[i * m:]
    Yp, Yf = Y[: i * p], Y[i * p:]
    H = np.vstack((Uf, Up, Yp, Yf)) / np.sqrt(j)
    R = np.linalg.qr(H.T, mode="r").T  # lower-triangular L of H = L Q
    # oblique projection of Yf along Uf onto Wp = [Up; Yp] (Van Overschee & De Moor 1996)
    # rows of H: Uf [0, a), Wp = [Up; Yp] [a, c), Yf [c, end); H = L Q with L lower triangular
    a, c = i * m, 2 * i * m + i * p
    L32 = R[c:, a:c]
    L22 = R[a:c, a:c]
    Lwp = R[a:c, :c]
    oblique = L32 @ np.linalg.pinv(L22) @ Lwp  # Yf /_Uf Wp in the coordinates of Q
    s = np.linalg.svd(oblique, compute_uv=False)
    return {"fit_s": time.perf_counter() - t0, "singular_values": s[: MAX_ORDER + 1].tolist()}


# --------------------------------------------------------------------------- timing

def child_modules(method: str, path: str, inputs: list[str], outputs: list[str]) -> dict:
    """Run ``rigfit fit`` in this process; list the modules it loaded, in load order."""
    import contextlib
    import io

    before = set(sys.modules)
    from ident.cli import main as rigfit_main

    args = rigfit_cmd(Path(path), method, inputs, outputs)[3:]  # after "python -m ident"
    with contextlib.redirect_stdout(io.StringIO()):
        try:
            rigfit_main(args)
        except SystemExit as exc:
            if exc.code not in (0, None):
                raise
    return {"modules": [m for m in sys.modules if m not in before and m != "__main__"]}


def child_startup(modules: list[str]) -> dict:
    """Import ``modules`` (what a ``rigfit fit`` process loads) and exit."""
    import importlib

    loaded = 0
    for name in modules:
        try:
            importlib.import_module(name)
            loaded += 1
        except ImportError:  # aliases and modules made at run time
            pass
    return {"modules": loaded}


def child_work(method: str, path: str, inputs: list[str], outputs: list[str],
               modules: list[str]) -> dict:
    """Import what ``rigfit fit`` imports, then time the command itself in this process."""
    import contextlib
    import io

    child_startup(modules)
    from ident.cli import main as rigfit_main

    args = rigfit_cmd(Path(path), method, inputs, outputs)[3:]  # after "python -m ident"
    sink = io.StringIO()
    t0 = time.perf_counter()
    with contextlib.redirect_stdout(sink):
        try:
            rigfit_main(args)
        except SystemExit as exc:
            if exc.code not in (0, None):
                raise
    return {"work_s": time.perf_counter() - t0}


def _child_env() -> dict[str, str]:
    # bytecode caches as in any installed package (a sandbox may switch them off)
    return {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}


def run_timed_wait4(args: list[str]) -> dict:
    """Run a fresh process; wall time, CPU time, its own peak RSS (MiB, from os.wait4), JSON out."""
    env = _child_env()
    if "--child" in args and args[args.index("--child") + 1].startswith("work-"):
        # as in a fresh rigfit process (see ident.cli.fit_cmd._single_blas_thread); numpy
        # is loaded by this script before the command runs, so it is set from outside
        env.setdefault("OPENBLAS_NUM_THREADS", "1")
    t0 = time.perf_counter()
    proc = subprocess.Popen(args, stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    # read the pipes first (a full pipe would block the child), then reap with wait4
    out = proc.stdout.read()
    err = proc.stderr.read()
    _, status, usage = os.wait4(proc.pid, 0)
    wall = time.perf_counter() - t0
    proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(args)} failed ({proc.returncode}):\n{err.decode()[-2000:]}")
    try:
        payload = json.loads(out.decode() or "null")
    except json.JSONDecodeError:
        payload = None
    return {"wall_s": wall, "cpu_s": usage.ru_utime + usage.ru_stime,
            "peak_mib": usage.ru_maxrss / 1024.0, "out": payload}


def best_of(commands: dict[str, list[str]], repeat: int) -> dict[str, dict]:
    """Per command, the run with the smallest wall time of ``repeat`` rounds.

    The commands take turns within each round, so a change in the load of a
    shared machine hits them alike; extra load only ever adds time, hence the
    minimum.
    """
    runs: dict[str, list[dict]] = {name: [] for name in commands}
    for _ in range(repeat):
        for name, args in commands.items():
            runs[name].append(run_timed_wait4(args))
    best: dict = {"all_work": runs.get("work", [])}
    for name, items in runs.items():
        pick = dict(min(items, key=lambda r: r["wall_s"]))
        pick["cpu_s"] = min(r["cpu_s"] for r in items)
        pick["peak_mib"] = max(r["peak_mib"] for r in items)
        best[name] = pick
    return best


#: case -> (log, inputs, outputs, rigfit fit options, baseline). "subspace" fits one order
#: from one projection, the work the baseline does (plus B, D, validation and modes);
#: "subspace-sweep" fits and validates every order 1..MAX_ORDER; "auto" is the default fit
#: (ARX and subspace candidates, refinement, reduction, selection, polish on all data), judged
#: against the CSV read only (no baseline does that job).
CASES = {
    "auto": ("siso", ["valve"], ["flow"], [], None),
    "arx": ("siso", ["valve"], ["flow"], ["--method", "arx", "--max-order", str(MAX_ORDER)], "arx"),
    "subspace": ("mimo", ["heater", "fan"], ["temp", "flow"],
                 ["--method", "subspace", "--order", "3"], "subspace"),
    "subspace-sweep": ("mimo", ["heater", "fan"], ["temp", "flow"],
                       ["--method", "subspace", "--max-order", str(MAX_ORDER)], "subspace"),
}


def rigfit_cmd(path: Path, case: str, inputs: list[str], outputs: list[str]) -> list[str]:
    args = [sys.executable, "-m", "ident", "fit", str(path), *CASES[case][3], "--json", "--quiet"]
    for name in inputs:
        args += ["--input", name]
    for name in outputs:
        args += ["--output", name]
    return args


def self_cmd(mode: str, path: Path, inputs: list[str], outputs: list[str],
             modules: Path | None = None) -> list[str]:
    args = [sys.executable, __file__, "--child", mode, str(path),
            "--inputs", ",".join(inputs), "--outputs", ",".join(outputs)]
    return args + (["--modules", str(modules)] if modules is not None else [])


def _ok(flag: bool) -> str:
    return "ok" if flag else "MISSED"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--sizes", type=float, nargs="+", default=[1e5, 1e6])
    parser.add_argument("--workdir", type=Path, default=None,
                        help="keep the logs here (and reuse logs already there)")
    parser.add_argument("--repeat", type=int, default=3,
                        help="runs of rigfit, the read and the start-up; the fastest counts")
    parser.add_argument("--cases", nargs="+", default=list(CASES), choices=list(CASES))
    parser.add_argument("--child", default=None, help=argparse.SUPPRESS)
    parser.add_argument("path", nargs="?", help=argparse.SUPPRESS)
    parser.add_argument("--inputs", default="", help=argparse.SUPPRESS)
    parser.add_argument("--outputs", default="", help=argparse.SUPPRESS)
    parser.add_argument("--modules", default=None, help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        ins, outs = args.inputs.split(","), args.outputs.split(",")
        mods = json.loads(Path(args.modules).read_text()) if args.modules else []
        fn = {"read": lambda: child_read_csv(args.path),
              "startup": lambda: child_startup(mods),
              "baseline-arx": lambda: child_arx_baseline(args.path, ins, outs),
              "baseline-subspace": lambda: child_subspace_baseline(args.path, ins, outs)}
        for case in CASES:
            fn[f"modules-{case}"] = lambda case=case: child_modules(case, args.path, ins, outs)
            fn[f"work-{case}"] = lambda case=case: child_work(case, args.path, ins, outs, mods)
        fn = fn[args.child]
        print(json.dumps(fn()))
        return

    folder = args.workdir or Path(tempfile.mkdtemp(prefix="rigfit-bench-"))
    folder.mkdir(parents=True, exist_ok=True)
    cases = {k: v for k, v in CASES.items() if k in args.cases}
    results: dict[tuple[str, int], dict] = {}
    print(f"# fastest of {args.repeat} runs for rigfit, read and start-up; baselines run once; "
          f"wall time (CPU time in brackets)", flush=True)
    try:
        for size in args.sizes:
            n = int(size)
            t0 = time.perf_counter()
            logs = {"siso": folder / f"siso_{n}.csv", "mimo": folder / f"mimo_{n}.csv"}
            reused = args.workdir is not None and all(p.exists() for p in logs.values())
            if not reused:
                logs = make_logs(folder, n)
            print(f"# N = {n}: logs {'reused' if reused else 'written'} in "
                  f"{time.perf_counter() - t0:.1f} s "
                  f"({', '.join(f'{p.name} {p.stat().st_size / 2**20:.0f} MiB' for p in logs.values())})",
                  flush=True)
            for method, (kind, ins, outs, _, baseline) in cases.items():
                path = logs[kind]
                cmd = rigfit_cmd(path, method, ins, outs)
                run_timed_wait4(cmd)  # warm-up: page cache and bytecode caches
                # the modules a rigfit fit process loads, for the start-up and work children
                loaded = run_timed_wait4(self_cmd(f"modules-{method}", path, ins, outs))
                modules = folder / f"modules-{method}.json"
                modules.write_text(json.dumps(loaded["out"]["modules"]))
                best = best_of({"start": self_cmd("startup", path, ins, outs, modules),
                                "read": self_cmd("read", path, ins, outs), "ours": cmd,
                                "work": self_cmd(f"work-{method}", path, ins, outs, modules)},
                               args.repeat)
                start, read, ours = best["start"], best["read"], best["ours"]
                work_s = min(r["out"]["work_s"] for r in best["all_work"])
                base = (run_timed_wait4(self_cmd(f"baseline-{baseline}", path, ins, outs)) if baseline
                        else {"wall_s": float("nan"), "cpu_s": float("nan"), "peak_mib": float("nan"),
                              "out": {"fit_s": float("nan")}})
                results[(method, n)] = {"read": read, "ours": ours, "base": base, "start": start,
                                        "work_s": work_s}
                chosen = ours["out"]
                print(
                    f"{method:<14} {kind} N={n:>8}: rigfit {ours['wall_s']:6.2f} s "
                    f"({ours['cpu_s']:5.2f}) {ours['peak_mib']:6.0f} MiB, chose "
                    f"{chosen['method']} order {chosen['order']} (fit "
                    f"{chosen['mean_validation_fit']:.2f} %), of which the work after the "
                    f"imports {work_s:5.2f} s | start-up alone "
                    f"{start['wall_s']:5.2f} s ({start['cpu_s']:5.2f}) | read_csv "
                    f"{read['wall_s']:5.2f} s ({read['cpu_s']:5.2f}; read alone "
                    f"{read['out']['read_s']:.2f} s) {read['peak_mib']:5.0f} MiB | baseline "
                    f"{base['wall_s']:6.2f} s ({base['cpu_s']:6.2f}; fit part "
                    f"{base['out']['fit_s']:.2f} s) {base['peak_mib']:6.0f} MiB",
                    flush=True,
                )
    finally:
        if args.workdir is None:
            shutil.rmtree(folder, ignore_errors=True)

    print()
    print("ratios (targets from the issue; 'read' = fresh process running pandas.read_csv;")
    print("        'work' = the fit command timed inside a process that has imported what it")
    print("        imports, i.e. rigfit without the interpreter and import start-up):")
    for method in cases:
        sizes = sorted(n for (meth, n) in results if meth == method)
        for n in sizes:
            r = results[(method, n)]
            vs_read = r["ours"]["wall_s"] / r["read"]["wall_s"]
            cpu_vs_read = r["ours"]["cpu_s"] / r["read"]["cpu_s"]
            work = r["work_s"]
            speedup = r["base"]["wall_s"] / r["ours"]["wall_s"]
            mem = r["ours"]["peak_mib"] / r["base"]["peak_mib"]
            read_target, speed_target = {"arx": (1.5, 10.0), "auto": (4.0, None)}.get(method, (3.0, 5.0))
            judged = n == TARGET_N  # the targets are stated for 1e6 samples

            def verdict(flag: bool, judged: bool = judged) -> str:
                return _ok(flag) if judged else "target is for N = 1e6"

            if speed_target is None:
                extra = (f"; end to end {r['ours']['wall_s']:.2f} s (target < 2 s at N = 1e5: "
                         f"{_ok(r['ours']['wall_s'] < 2.0)})" if n == 100_000 else "")
                print(f"  {method:<14} N={n:>8}: rigfit / read {vs_read:5.2f} (target <= {read_target:g}: "
                      f"{verdict(vs_read <= read_target)}; CPU time {cpu_vs_read:5.2f}; work {work:5.2f} s "
                      f"vs the read alone {r['read']['out']['read_s']:5.2f} s){extra}")
                continue

            line = (f"  {method:<14} N={n:>8}: rigfit / read {vs_read:5.2f} (target <= "
                    f"{read_target:g}: {verdict(vs_read <= read_target)}; CPU time "
                    f"{cpu_vs_read:5.2f}; start-up alone / read "
                    f"{r['start']['wall_s'] / r['read']['wall_s']:4.2f}; work "
                    f"{work:5.2f} s vs the read alone {r['read']['out']['read_s']:5.2f} s); "
                    f"baseline / rigfit {speedup:5.2f} (target >= {speed_target:g}: "
                    f"{verdict(speedup >= speed_target)})")
            if method.startswith("subspace"):
                line += f"; peak memory rigfit / baseline {mem:4.2f} (target <= 0.2: {verdict(mem <= 0.2)})"
            print(line)
        if len(sizes) >= 2:
            a, b = sizes[0], sizes[-1]
            ra, rb = results[(method, a)], results[(method, b)]
            growth = rb["ours"]["wall_s"] / ra["ours"]["wall_s"]
            work_growth = rb["work_s"] / ra["work_s"]
            line = (f"  {method:<14} N {a} -> {b} ({b / a:g}x the samples): end to end "
                    f"x{growth:.2f} (start-up included); work {ra['work_s']:.2f} s -> "
                    f"{rb['work_s']:.2f} s, x{work_growth:.2f} (linear or better: "
                    f"{_ok(work_growth <= 1.1 * b / a)})")
            print(line)


if __name__ == "__main__":
    main()
