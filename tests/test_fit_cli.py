"""End-to-end tests of ``rigfit fit`` on generated CSV logs."""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

T = 0.01
#: Poles of the test plant 0.9 +- 0.2j (chosen, no source).
POLES = np.array([0.9 - 0.2j, 0.9 + 0.2j])


def _write_log(path, n=3000, seed=5, copy_input=False):
    rng = np.random.default_rng(seed)
    u = rng.standard_normal(n)
    y = signal.lfilter([0.0, 0.5, 0.3], np.poly(POLES).real, u) + 0.002 * rng.standard_normal(n)
    lines = ["time [s],valve [V],flow [l/min],valve_copy [V]"]
    for k in range(n):
        lines.append(f"{k * T:.4f},{u[k] + 2.0:.9g},{y[k] + 10.0:.9g},{u[k] + 2.0:.9g}")
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture(scope="module")
def log_file(tmp_path_factory):
    return _write_log(tmp_path_factory.mktemp("fit") / "rig.csv")


def test_fit_json_and_model_file(run_cli, log_file, tmp_path):
    out = tmp_path / "plant.json"
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--max-order", "4",
                  "-o", out, "--json", "--quiet")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["method"] in ("arx", "subspace")
    assert data["order"] == 2 and data["n_states"] == 2
    assert data["inputs"] == ["valve"] and data["outputs"] == ["flow"]
    assert set(data["validation_fit"]) == {"flow"}
    # 0.2 % output noise relative to the input: the fit is close to 100 percent
    assert data["validation_fit"]["flow"] > 99.0
    # direct estimates: subspace orders 1..4 (three weightings, two horizons) and the ARX grid's
    # best 3 per criterion (at most 9, at least 1); then the refined ones
    direct = [c for c in data["candidates"] if c["stage"] == "estimated"]
    assert {c["order"] for c in direct if c["method"] == "subspace"} == {1, 2, 3, 4}
    assert {c["structure"]["weighting"] for c in direct if c["method"] == "subspace"} == {"n4sid", "moesp", "cva"}
    assert 1 <= sum(c["method"] == "arx" for c in direct) <= 9
    refined = [c for c in data["candidates"] if c["stage"] == "refined"]
    assert refined and all(c["noise_model"] == "output_error" for c in refined)
    assert data["stage"] == "refined" and data["refinement"]["noise_model"] == "output_error"
    assert data["selection"]["reason"]
    assert set(data["best_by"]) == {"aic", "bic", "fpe"}
    assert data["arx_grid"]["n_structures"] == 4 * 4 * 3  # na, nb in 1..4, nk 0..2
    assert sum(c["selected"] for c in data["candidates"]) == 1
    for key in ("method", "order", "structure", "n_parameters", "validation_fit", "mean_fit",
                "criteria"):
        assert key in data["candidates"][0]
    assert isinstance(data["warnings"], list) and isinstance(data["flags"], list)
    assert data["model_file"] == str(out)
    # the operating point is the estimation mean (70 % of 3000 samples), about 2 and 10
    assert_allclose(data["operating_point"]["inputs"], [2.0], atol=0.1)

    from ident.io.modelfile import load_model

    loaded = load_model(out)
    # poles 0.9 +- 0.2j by construction; 0.2 % output noise -> within 5e-3
    poles = np.sort_complex(loaded.model.poles())
    assert_allclose(poles, np.sort_complex(POLES), atol=5e-3)
    prov = loaded.provenance
    assert prov["log"]["file_name"] == "rig.csv"
    assert len(prov["log"]["sha256"]) == 64
    assert prov["estimation"]["method"] == data["method"]
    assert prov["validation"]["fit_percent"]["flow"] == pytest.approx(
        data["validation_fit"]["flow"], rel=1e-12)
    assert "created_utc" in prov and "tool_version" in prov
    assert loaded.model.operating_point is not None
    assert loaded.model.output_units == ("l/min",)
    # every refined model carries its one-step predictor and its parameter covariance
    assert loaded.model.noise_gain is not None
    cov = loaded.parameter_covariance()
    assert cov is not None and cov.method == "robust"
    assert loaded.pole_covariance() is not None


def test_fit_readable_summary(run_cli, log_file):
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--method", "arx",
                  "--max-order", "3")
    assert res.exit_code == 0, res.output
    assert "held-out" in res.stdout and "flow" in res.stdout
    assert "<- selected" in res.stdout
    assert "frequency [Hz]" in res.stdout and "damping ratio" in res.stdout  # the modes as a rig engineer reads them
    # the pair 0.9 +- 0.2j at T = 0.01 s: f_n = |ln z| / (2 pi T) = 3.713 Hz (closed form)
    assert "3.71" in res.stdout


def test_fit_reports_criteria_table_and_delay_evidence(run_cli, log_file):
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--method", "arx",
                  "--max-order", "3")
    assert res.exit_code == 0, res.output
    out = res.stdout
    header = next(line for line in out.splitlines() if "AIC" in line)
    assert "BIC" in header and "FPE" in header and "fit %" in header
    assert "preferred: AIC -> #" in out and "BIC -> #" in out and "FPE -> #" in out
    # the plant has one sample of delay (numerator [0, 0.5, 0.3], by construction)
    assert "valve -> flow: 1 sample;" in out and "t-ratios at lags 0..3" in out
    assert "|t| > 3" in out  # the threshold of the delay test (ident.estimate.delay default)

    data = json.loads(run_cli("fit", log_file, "--input", "valve", "--output", "flow",
                              "--method", "arx", "--max-order", "3", "--json").stdout)
    cands = data["candidates"]
    for name in ("aic", "bic", "fpe"):
        k = data["best_by"][name]
        # best_by points at the smallest value of that criterion among the ARX candidates
        assert cands[k]["criteria"][name] == min(c["criteria"][name] for c in cands)
        # ... which is also the grid's best structure by that criterion
        row = data["arx_grid"]["rows"][data["arx_grid"]["best"][name]]
        assert cands[k]["structure"] == {"na": row["na"], "nb": row["nb"], "nk": row["nk"]}
    ev = data["delay_evidence"]
    assert ev["threshold"] == 3.0 and ev["method"]
    (ch,) = ev["channels"]
    assert (ch["input"], ch["output"], ch["delay"], ch["detected"]) == ("valve", "flow", 1, True)
    # t-ratio = |coefficient| / standard error (definition)
    assert_allclose(ch["t_ratios"], np.abs(ch["coefficients"]) / np.array(ch["std_errors"]),
                    rtol=1e-12)
    # lag 1 carries b_1 = 0.5 (by construction); estimated within a few standard errors
    assert abs(ch["coefficients"][1] - 0.5) < 5 * ch["std_errors"][1]
    assert abs(ch["t_ratios"][0]) < 3.0 < abs(ch["t_ratios"][1])


def _log_with_bad_row(tmp_path, *, time_column):
    rng = np.random.default_rng(12)
    n = 2000
    u = rng.standard_normal(n)
    y = signal.lfilter([0.0, 0.5, 0.3], np.poly(POLES).real, u) + 0.002 * rng.standard_normal(n)
    lines = [("time [s]," if time_column else "") + "valve [V],flow [l/min]"]
    for k in range(n):
        lines.append((f"{k * T:.4f}," if time_column else "") + f"{u[k]:.9g},{y[k]:.9g}")
    lines[1201] = lines[1201].rsplit(",", 1)[0] + ",n/a"  # file line 1202 (sample 1200)
    path = tmp_path / ("timed.csv" if time_column else "rate.csv")
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.mark.parametrize("time_column", [True, False])
def test_dropped_rows_are_gaps_that_need_split_at_gaps(run_cli, tmp_path, time_column):
    path = _log_with_bad_row(tmp_path, time_column=time_column)
    base = ["fit", path, "--input", "valve", "--output", "flow", "--max-order", "2",
            "--method", "arx", "--quiet"]
    if not time_column:
        base += ["--sample-rate", "100"]
    res = run_cli(*base)
    assert res.exit_code == 2 and "row 1202" in res.stderr  # the bad cell, named
    res = run_cli(*base, "--drop-bad-rows")
    # the dropped row is a gap: refused without --split-at-gaps, naming the row after it
    assert res.exit_code == 2 and "row 1203" in res.stderr and "--split-at-gaps" in res.stderr
    res = run_cli(*base, "--drop-bad-rows", "--split-at-gaps")
    assert res.exit_code == 0, res.output
    assert "1999 samples, 2 segments" in res.stdout  # 2000 rows less one (closed form)
    assert "1 bad rows dropped" in res.stdout
    data = json.loads(run_cli(*base, "--drop-bad-rows", "--split-at-gaps", "--json").stdout)
    assert data["log"]["segments"] == [[0, 1200], [1200, 1999]]
    assert data["log"]["dropped_rows"] == 1


def test_gap_in_time_column_needs_split_at_gaps(run_cli, tmp_path):
    path = _write_log(tmp_path / "gap.csv", n=1500)
    lines = path.read_text().splitlines()
    del lines[801:811]  # ten samples missing before file line 802
    path.write_text("\n".join(lines) + "\n")
    args = ["fit", path, "--input", "valve", "--output", "flow", "--max-order", "2", "--quiet"]
    res = run_cli(*args)
    assert res.exit_code == 2 and "row 802" in res.stderr and "gap" in res.stderr
    res = run_cli(*args, "--split-at-gaps")
    assert res.exit_code == 0, res.output
    assert "2 segments" in res.stdout


def test_log_options_are_shared_by_every_log_command():
    from ident.cli.check_cmd import check
    from ident.cli.drift_cmd import drift
    from ident.cli.fit_cmd import fit
    from ident.cli.inspect_cmd import inspect

    wanted = ("--time", "--sample-rate", "--drop-bad-rows", "--split-at-gaps",
              "--jitter-tolerance")

    def spec(command):
        out = {}
        for param in command.params:
            for opt in getattr(param, "opts", []):
                if opt in wanted:
                    out[opt] = (param.name, param.is_flag, param.default, param.help,
                                getattr(param.type, "name", None))
        return out

    ref = spec(fit)
    assert set(ref) == set(wanted)
    for command in (inspect, check, drift):
        assert spec(command) == ref, command.name


def test_fixed_order_subspace(run_cli, log_file):
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--method",
                  "subspace", "--order", "2", "--json")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["method"] == "subspace" and data["order"] == 2
    # one order, three weightings and two horizons; every candidate has 2 states before delays
    assert {c["order"] for c in data["candidates"]} == {2}
    assert sum(c["stage"] == "refined" for c in data["candidates"]) >= 1
    # which factorisation built the projection is reported (common practice, no source)
    assert data["subspace_factorization"]["path"] in ("gram", "householder")
    assert data["subspace_factorization"]["gram_condition"] >= 1.0


def test_refuses_to_overwrite(run_cli, log_file, tmp_path):
    out = tmp_path / "exists.json"
    out.write_text("keep me")
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "-o", out)
    assert res.exit_code == 2
    assert "already exists" in res.stderr
    assert out.read_text() == "keep me"


def test_refuses_to_write_the_input_log(run_cli, log_file):
    before = log_file.read_bytes()
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "-o", log_file,
                  "--force")
    assert res.exit_code == 2
    assert "input file" in res.stderr
    assert log_file.read_bytes() == before


def test_missing_column_named(run_cli, log_file):
    res = run_cli("fit", log_file, "--input", "valve", "--output", "pressure")
    assert res.exit_code == 2
    assert "pressure" in res.stderr


def test_output_equal_to_input(run_cli, log_file):
    res = run_cli("fit", log_file, "--input", "valve", "--output", "valve_copy")
    assert res.exit_code == 2
    assert "identical to input" in res.stderr
    # the same column as both input and output is a usage error, also exit 2
    res = run_cli("fit", log_file, "--input", "valve", "--output", "valve")
    assert res.exit_code == 2


def test_fit_with_one_worker_or_several_writes_the_same_model(run_cli, log_file, tmp_path):
    # the jobs of the search are independent and taken in submission order: the number of worker
    # processes changes the wall time only (common practice for parallel code, no source)
    outputs = {}
    for workers in ("1", "3"):
        out = tmp_path / f"plant-{workers}.json"
        res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--max-order", "4",
                      "--workers", workers, "-o", out, "--json", "--quiet")
        assert res.exit_code == 0, res.output
        outputs[workers] = (json.loads(res.stdout), json.loads(out.read_text()))
    (summary_1, model_1), (summary_3, model_3) = outputs["1"], outputs["3"]
    for data in (summary_1, summary_3):
        data.pop("model_file", None)
    assert summary_1 == summary_3
    for data in (model_1, model_3):
        data["provenance"].pop("created_utc")
    assert model_1 == model_3
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--workers", "0")
    assert res.exit_code == 2 and "--workers" in res.output


def test_a_frozen_tail_is_left_out_and_named_unless_kept(run_cli, tmp_path):
    # the log's last 600 rows repeat row 2399 in every column but time (a logger writing its last
    # reading); the hold-out is taken from the 2400 rows before (common practice, no source)
    lines = _write_log(tmp_path / "src.csv").read_text().splitlines()
    frozen = lines[:2401] + [f"{k * T:.4f}," + lines[2400].split(",", 1)[1] for k in range(2400, 3000)]
    log = tmp_path / "stopped.csv"
    log.write_text("\n".join(frozen) + "\n")
    before = log.read_bytes()
    res = run_cli("fit", log, "--input", "valve", "--output", "flow", "--max-order", "2", "--json", "--quiet")
    assert res.exit_code == 0, res.output
    data = json.loads(res.stdout)
    assert data["ranges"] == {"estimation": [[0, 1680]], "validation": [[1680, 2400]],
                              "frozen_tails": [[2400, 3000]]}
    assert any("samples 2400-2999 (the last 600 of the log)" in w for w in data["warnings"])
    text = run_cli("fit", log, "--input", "valve", "--output", "flow", "--max-order", "2", "--quiet")
    assert "600 frozen samples at the end left out" in text.stdout
    kept = run_cli("fit", log, "--input", "valve", "--output", "flow", "--max-order", "2", "--json", "--quiet",
                   "--keep-frozen-tail")
    assert json.loads(kept.stdout)["ranges"]["validation"] == [[2100, 3000]]
    assert log.read_bytes() == before


@pytest.mark.parametrize("args", [["--order", "zero"], ["--order", "0"], ["--holdout", "1.5"],
                                  ["--method", "best"]])
def test_bad_options_exit_2(run_cli, log_file, args):
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", *args)
    assert res.exit_code == 2


def test_method_choices_match_library():
    from ident.cli.fit_cmd import fit
    from ident.estimate.identify import METHODS

    choice = next(p for p in fit.params if p.name == "method").type
    assert tuple(choice.choices) == METHODS


@pytest.mark.parametrize("model_out", [False, True])
def test_fresh_fit_process_loads_neither_scipy_nor_pandas(log_file, tmp_path, model_out):
    import importlib.util
    import subprocess
    import sys

    extra = f", '-o', {str(tmp_path / 'm.json')!r}" if model_out else ""
    code = (
        "import os, sys\n"
        "from ident.cli import main\n"
        "try:\n"
        f"    main(['fit', {str(log_file)!r}, '--input', 'valve', '--output', 'flow',\n"
        f"          '--method', 'auto', '--max-order', '3', '--json', '--quiet'{extra}])\n"
        "except SystemExit as exc:\n"
        "    assert exc.code in (0, None), exc.code\n"
        "heavy = sorted({m.split('.')[0] for m in sys.modules} & {'statsmodels', 'matplotlib', 'scipy', 'pandas'})\n"
        "print('HEAVY', heavy, 'THREADS', os.environ.get('OPENBLAS_NUM_THREADS'), file=sys.stderr)\n"
    )
    env = {k: v for k, v in __import__("os").environ.items()
           if k not in ("OPENBLAS_NUM_THREADS", "GOTO_NUM_THREADS", "OMP_NUM_THREADS",
                        "MKL_NUM_THREADS")}
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env=env, timeout=120)
    assert proc.returncode == 0, proc.stderr
    # fitting (ARX and subspace, modes, model file) needs numpy only, and reads a clean CSV
    # with pyarrow when it is installed; scipy, pandas, statsmodels and plotting load with
    # the commands that use them (start-up time: see benchmarks/README.md)
    expected = [] if importlib.util.find_spec("pyarrow") else ["pandas"]
    assert f"HEAVY {expected} " in proc.stderr
    # a fresh process asks for one BLAS thread when the user did not choose a count
    assert "THREADS 1" in proc.stderr


def test_blas_thread_choice_of_the_user_is_kept(monkeypatch):
    import os
    import sys

    from ident.cli.fit_cmd import _single_blas_thread

    monkeypatch.delitem(sys.modules, "numpy")  # as in a fresh process (restored after)
    monkeypatch.setenv("OMP_NUM_THREADS", "2")
    monkeypatch.delenv("OPENBLAS_NUM_THREADS", raising=False)
    _single_blas_thread()
    assert "OPENBLAS_NUM_THREADS" not in os.environ
    monkeypatch.delenv("OMP_NUM_THREADS")
    _single_blas_thread()
    assert os.environ["OPENBLAS_NUM_THREADS"] == "1"


def test_arx_model_file_carries_pole_covariance(run_cli, tmp_path):
    import numpy as np
    import pandas as pd
    from scipy import signal

    from ident.io.modelfile import load_model

    rng = np.random.default_rng(11)
    u = rng.standard_normal(3000)
    # ARX data: y = B/A u + e/A (the noise enters through the ARX equation; scipy.signal.lfilter)
    den = [1.0, -1.5, 0.7]
    y = signal.lfilter([0.0, 1.0, 0.5], den, u) + signal.lfilter([1.0], den, 0.05 * rng.standard_normal(3000))
    log = tmp_path / "arx.csv"
    pd.DataFrame({"time [s]": np.arange(3000) * 0.01, "u": u, "y": y}).to_csv(log, index=False)
    out = tmp_path / "m.json"
    r = run_cli("fit", log, "--input", "u", "--output", "y", "--method", "arx", "--order", "2", "-o", out)
    assert r.exit_code == 0, r.stderr
    cov = load_model(out).pole_covariance()
    assert cov is not None and cov.shape == (load_model(out).model.n_states, 2, 2)
    m = run_cli("modes", out, "--json")
    pair = [x for x in __import__("json").loads(m.stdout)["modes"] if x["z"][1] > 0][0]
    assert pair["natural_frequency_std_hz"] > 0


# --- issue 13: a separate validation log; periodic input --------------------------------------


def _tank_logs(path, tmp_path):
    """The cascaded-tanks benchmark's estimation and validation records as two logs."""
    import pandas as pd

    data = pd.read_csv(path)
    est, val = tmp_path / "tank_est.csv", tmp_path / "tank_val.csv"
    for target, u, y in ((est, 1, 3), (val, 2, 4)):
        pd.DataFrame({"time [s]": data.iloc[:, 0], "pump [V]": data.iloc[:, u], "level": data.iloc[:, y]}
                     ).to_csv(target, index=False)
    return est, val, data


@pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")
def test_validate_with_holds_out_a_whole_separate_log(run_cli, shared_dataset, tmp_path):
    est, val, data = _tank_logs(shared_dataset("cascaded_tanks.csv"), tmp_path)
    out = tmp_path / "tank.json"
    res = run_cli("fit", est, "--input", "pump", "--output", "level", "--validate-with", val, "-o", out,
                  "--json", "--quiet")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    assert d["validation_log"]["file_name"] == "tank_val.csv"
    # nothing of the estimation log is held out: its whole 1024 samples are estimation data
    assert d["ranges"]["estimation"] == [[0, 1024]]
    from ident.io.modelfile import load_model

    model = load_model(out).model
    op = model.operating_point
    u = data.iloc[:, 2].to_numpy()[:, None] - op.inputs
    y = data.iloc[:, 4].to_numpy()[:, None] - op.outputs
    # an independent simulation of the written model on the validation record (scipy.signal.dlsim):
    # initial state by least squares on the first max(10 n, 50) samples, which are not scored
    sys = (model.A, model.B, model.C, model.D, 4.0)
    n = model.n_states
    w = max(10 * n, 50)
    _, forced, _ = signal.dlsim(sys, u)
    free = np.column_stack([signal.dlsim(sys, np.zeros((w, 1)), x0=np.eye(n)[k])[1][:, 0] for k in range(n)])
    x0 = np.linalg.lstsq(free, (y - forced)[:w, 0], rcond=None)[0]
    _, sim, _ = signal.dlsim(sys, u, x0=x0)
    fit = 100 * (1 - np.linalg.norm(y[w:] - sim[w:]) / np.linalg.norm(y[w:] - y[w:].mean()))
    assert_allclose(d["validation_fit"]["level"], fit, rtol=1e-8)  # same arithmetic, another order
    assert load_model(out).provenance["validation"]["log"]["file_name"] == "tank_val.csv"
    # check on the validation log gives the same figure, labelled
    chk = json.loads(run_cli("check", val, out, "--json").stdout)
    assert_allclose(chk["fits"][0]["percent"]["level"], fit, rtol=1e-8)
    assert chk["fits"][0]["kind"] == "initial_state"


def test_validate_with_refuses_other_columns_and_detrend(run_cli, log_file, tmp_path):
    other = tmp_path / "other.csv"
    other.write_text(log_file.read_text().replace("flow [l/min]", "pressure [bar]", 1))
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--validate-with", other, "--quiet")
    assert res.exit_code == 2 and "other.csv" in res.stderr
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--validate-with", log_file,
                  "--detrend", "--quiet")
    assert res.exit_code == 2 and "detrend" in res.stderr
    # the fit through a set point holds out part of LOG itself: no separate validation log with it
    res = run_cli("fit", log_file, "--input", "valve", "--output", "flow", "--reference", "valve",
                  "--validate-with", log_file, "--quiet")
    assert res.exit_code == 2 and "--reference" in res.stderr and "--validate-with" in res.stderr


def test_fit_reports_a_periodic_input(run_cli, tmp_path):
    rng = np.random.default_rng(8)
    period, count = 100, 20
    k = np.arange(period)
    one = sum(np.cos(2 * np.pi * line * k / period + rng.uniform(0, 2 * np.pi)) for line in range(1, 30)) / 4
    u = np.tile(one, count)
    y = signal.lfilter([0.0, 0.5, 0.3], np.poly(POLES).real, u) + 0.01 * rng.standard_normal(u.size)
    path = tmp_path / "periodic.csv"
    lines = ["time [s],valve [V],flow [l/min]"] + [f"{j * T:.4f},{u[j]:.10g},{y[j]:.10g}" for j in range(u.size)]
    path.write_text("\n".join(lines) + "\n")
    res = run_cli("fit", path, "--input", "valve", "--output", "flow", "--max-order", "3", "--json", "--quiet")
    assert res.exit_code == 0, res.output
    per = json.loads(res.stdout)["periodic"]
    assert per["period_samples"] == 100 and per["lines"] == 29 and per["measured_periods"] == 19
    # white noise of std 0.01 added: the period scatter gives it back (within 5 %, about 10 standard errors)
    assert per["noise_std"]["flow"] == pytest.approx(0.01, rel=0.05)
    text = run_cli("fit", path, "--input", "valve", "--output", "flow", "--max-order", "3", "--quiet").stdout
    assert "periodic input: period 100 samples" in text and "noise std from the period-to-period scatter" in text
    none = json.loads(run_cli("fit", path, "--input", "valve", "--output", "flow", "--max-order", "3",
                              "--period", "none", "--json", "--quiet").stdout)
    assert none["periodic"] is None


def test_a_diverged_candidate_reads_diverged_in_the_tables():
    # a simulation that ran away scores a fit like -1e140 %: printed as a word, not 140 digits
    from ident.cli.fit_cmd import _fit_cell
    from ident.report import _pct

    assert _fit_cell(-1e140) == "diverged" and _pct(-1e140) == "diverged" and _pct(None) == "diverged"
    assert _fit_cell(87.654).strip() == "87.65" and _pct(87.654) == "87.7 %"
