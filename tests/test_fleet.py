"""rigfit fleet end to end on a LocalCluster started here: equal to an in-process loop, planted odd units
found, failed units isolated, resume after a kill, the fleet table through pandas and pyarrow."""

from __future__ import annotations

import json
import logging
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow.parquet as pq
import pytest
from fleets import FLEET, write_pipeline

from ident.errors import IdentError
from ident.fleet.aggregate import FIXED_COLUMNS
from ident.fleet.run import run_fleet
from ident.fleet.units import UnitJob, evaluate_unit, settings_hash
from ident.io.pipelinefile import load_pipeline

#: Planted odd units (1-based unit numbers) of the test fleet.
PLANTS = {3: "low_resonance", 7: "high_damping", 10: "extra_mode"}
N_UNITS = 12


@pytest.fixture(scope="module")
def cluster():
    from distributed import LocalCluster

    with LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=":0",
                      silence_logs=logging.ERROR) as c:
        yield c


@pytest.fixture(scope="module")
def fleet_dir(tmp_path_factory):
    d = tmp_path_factory.mktemp("fleet")
    truth = FLEET.write_fleet(d / "logs", N_UNITS, seed=11, plants=PLANTS)
    return d, truth, write_pipeline(d, "logs/eol_0001.csv")


@pytest.fixture(scope="module")
def fleet_run(fleet_dir, cluster):
    d, _, pipeline = fleet_dir
    return run_fleet(pipeline, [str(d / "logs" / "eol_*.csv")], out_dir=d / "runs",
                     scheduler=cluster.scheduler_address)


def _without(d: dict, *keys: str) -> dict:
    return {k: v for k, v in d.items() if k not in keys}


def test_cluster_results_equal_an_in_process_loop(fleet_run, fleet_dir):
    _, _, pipeline = fleet_dir
    spec = load_pipeline(pipeline, expand_logs=False)
    digest = settings_hash(spec)
    assert len(fleet_run.analysis.records) == N_UNITS
    for record in fleet_run.analysis.records:
        local = evaluate_unit(spec, UnitJob(record.unit, record.log_path, record.folder), digest)
        where = fleet_run.folder / "units" / record.folder
        # the model: every matrix identical bit for bit (JSON floats are written with full precision)
        remote_model = json.loads((where / "model.json").read_text(encoding="utf-8"))
        local_model = json.loads(local.model_text)
        assert remote_model["state_space"] == local_model["state_space"]
        assert remote_model["operating_point"] == local_model["operating_point"]
        # the summary's results and the fleet record, all but clock times
        remote = json.loads((where / "summary.json").read_text(encoding="utf-8"))
        mine = json.loads(local.summary_text)
        for section in ("verdict", "gates", "data", "model", "validation", "modes", "expectations"):
            assert remote[section] == mine[section], section
        on_disk = json.loads((where / "unit.json").read_text(encoding="utf-8"))
        assert _without(on_disk, "compute_s") == _without(json.loads(json.dumps(local.record.to_dict())), "compute_s")


def test_planted_odd_units_are_found_and_no_other(fleet_run, fleet_dir):
    _, truth, _ = fleet_dir
    planted = {u["serial"]: u["plant"] for u in truth["units"] if u["plant"]}
    assert set(fleet_run.analysis.outliers) == set(planted)
    assert not fleet_run.passed
    reasons = {row["unit"]: row["reason"] for row in fleet_run.analysis.rows}
    by_kind = {kind: reasons[serial] for serial, kind in planted.items()}
    assert "mode 2 natural frequency" in by_kind["low_resonance"] and "below the fleet median" in by_kind[
        "low_resonance"]
    assert "mode 2 damping ratio" in by_kind["high_damping"] and "above the fleet median" in by_kind["high_damping"]
    assert by_kind["extra_mode"].startswith("extra mode")
    # the units were named by the 'unit' column of their logs, not by their file names
    assert sorted(reasons) == sorted(u["serial"] for u in truth["units"])
    # the resonance the fleet reports is the one the logs were made with (sample_data/fleet.py truth)
    mode = next(m for m in fleet_run.summary["modes"] if m["kind"] == "pair" and m["count"] == N_UNITS)
    true = np.median([u["resonance_hz"] for u in truth["units"] if u["plant"] is None])
    assert abs(mode["median_natural_frequency_hz"] - true) < 0.01 * true


def test_fleet_table_round_trips_through_pandas_and_pyarrow(fleet_run):
    table = pq.read_table(fleet_run.parquet_path)
    names = table.schema.names
    assert names[: len(FIXED_COLUMNS)] == [c for c, _, _ in FIXED_COLUMNS]
    units = {f.name: f.metadata[b"unit"].decode() for f in table.schema}
    assert units["fit_rod_speed_percent"] == "%"
    assert units["mode_2_natural_frequency_hz"] == "Hz" and units["mode_1_time_constant_s"] == "s"
    assert units["dc_gain_current_cmd_to_rod_speed"] == "mm/s per A"
    meta = json.loads(table.schema.metadata[b"rigfit"])
    assert meta["format"] == "rigfit-fleet-table" and meta["rule"]["threshold"] == 3.5
    assert str(table.schema.field("outlier").type) == "bool"
    assert str(table.schema.field("mode_2_natural_frequency_hz").type) == "double"

    parquet = pd.read_parquet(fleet_run.parquet_path)
    csv = pd.read_csv(fleet_run.csv_path)
    assert list(csv.columns) == list(parquet.columns) == names
    assert parquet["status"].tolist() == ["ok"] * N_UNITS
    assert parquet["outlier"].sum() == 3 and csv["outlier"].tolist() == parquet["outlier"].tolist()
    for col in names:
        if parquet[col].dtype == "float64":
            # full-precision floats: the CSV reads back bit for bit
            np.testing.assert_array_equal(csv[col].to_numpy(float), parquet[col].to_numpy(float))
    assert parquet["unit"].tolist() == sorted(parquet["unit"])
    # what the files say is what the run returned
    assert parquet["reason"].fillna("").tolist() == [r["reason"] for r in fleet_run.analysis.rows]


def test_report_embeds_every_figure_and_fetches_nothing(fleet_run):
    page = fleet_run.report_path.read_text(encoding="utf-8")
    assert page.count("data:image/png;base64,") == len(fleet_run.summary["figures"]) >= 3
    assert "http://" not in page and "https://" not in page and "<script" not in page
    assert "Rule: a value is an outlier when" in page and fleet_run.summary["safety"] in page
    for unit in fleet_run.analysis.outliers:
        assert unit in page


def test_report_escapes_names_and_errors(fleet_run):
    from ident.fleet_report import render_fleet_report

    summary = json.loads(fleet_run.summary_path.read_text(encoding="utf-8"))
    evil = "<img src=x onerror=alert(1)>"
    summary["name"] = evil
    summary["failed"] = [{"unit": evil, "log": evil + ".csv", "error": f"{evil}.csv: not a number ('<b>')"}]
    summary["units"][0]["unit"] = evil
    page = render_fleet_report(summary, {})
    assert "<img src=x" not in page and "<b>" not in page
    assert "&lt;img src=x onerror=alert(1)&gt;" in page


def test_a_corrupt_and_a_missing_log_fail_alone(tmp_path, fleet_dir, cluster, run_cli):
    d, _, pipeline = fleet_dir
    logs = [d / "logs" / f"eol_{k:04d}.csv" for k in (1, 2, 4, 5, 6)]
    bad = tmp_path / "eol_bad.csv"
    lines = logs[0].read_text(encoding="utf-8").splitlines()
    lines[40] = lines[40].rsplit(",", 1)[0] + ",12.5x"  # file line 41, column rod_speed
    bad.write_text("\n".join(lines) + "\n", encoding="utf-8")
    result = run_cli("fleet", pipeline, *logs, bad, tmp_path / "gone.csv", "--unit-from", r"(eol_\w+|gone)",
                     "--scheduler", cluster.scheduler_address, "--out", tmp_path / "runs", "--json")
    assert result.exit_code == 3, result.stderr
    out = json.loads(result.stdout)
    assert _without(out["counts"], "outliers") == {"units": 7, "ok": 5, "failed": 2, "gates_failed": 0,
                                                   "computed": 7, "reused": 0}
    failed = {f["unit"]: f["error"] for f in out["failed"]}
    assert failed["eol_bad"] == "eol_bad.csv, row 41, column 'rod_speed': not a number ('12.5x')"
    assert failed["gone"] == "gone.csv: no such file"
    table = pd.read_csv(out["csv"])
    assert table.set_index("unit").loc["eol_bad", "status"] == "failed"
    assert (table["status"] == "ok").sum() == 5


def test_resume_after_a_kill_redoes_nothing_finished(tmp_path, fleet_dir, cluster):
    _, _, pipeline = fleet_dir
    n = 40
    FLEET.write_fleet(tmp_path / "logs", n, seed=5)
    pattern = str(tmp_path / "logs" / "eol_*.csv")
    cmd = [sys.executable, "-m", "ident", "fleet", str(pipeline), pattern, "--scheduler",
           cluster.scheduler_address, "--out", str(tmp_path / "runs"), "--quiet"]
    proc = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 120
    done: list[Path] = []
    try:
        while time.monotonic() < deadline and proc.poll() is None:
            done = sorted(tmp_path.glob("runs/fleet-*/units/*/unit.json"))
            if len(done) >= 3:
                break
            time.sleep(0.01)
    finally:
        proc.kill()
        proc.wait()
    finished = {p.parent.name: (p.stat().st_mtime_ns, p.read_bytes())
                for p in tmp_path.glob("runs/fleet-*/units/*/unit.json")}
    assert 3 <= len(finished) < n, "the run was not caught in the middle"
    folder = next(tmp_path.glob("runs/fleet-*"))
    assert not (folder / "fleet.csv").exists()
    for name in finished:  # a unit's record is written last, so its files are complete
        json.loads((folder / "units" / name / "summary.json").read_text(encoding="utf-8"))

    result = run_fleet(pipeline, [pattern], resume=folder, scheduler=cluster.scheduler_address)
    assert result.folder == folder
    assert result.reused == len(finished) and result.computed == n - len(finished)
    for name, (mtime, data) in finished.items():
        path = folder / "units" / name / "unit.json"
        assert path.stat().st_mtime_ns == mtime and path.read_bytes() == data
    assert len(list(folder.glob("units/*/unit.json"))) == n
    assert pd.read_parquet(result.parquet_path)["status"].tolist() == ["ok"] * n
    # a second resume finds everything done and starts no engine at all
    again = run_fleet(pipeline, [pattern], resume=folder, scheduler="tcp://127.0.0.1:9")
    assert again.reused == n and again.computed == 0
    # resuming with other settings would replace every unit's results: refused, nothing touched
    other = pipeline.with_name("other.toml")
    text = pipeline.read_text(encoding="utf-8")
    assert "max_order = 6" in text  # tests/fleets.py
    other.write_text(text.replace("max_order = 6", "max_order = 5"), encoding="utf-8")
    before = {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()}
    with pytest.raises(IdentError, match="made with other pipeline settings"):
        run_fleet(other, [pattern], resume=folder, scheduler="tcp://127.0.0.1:9")
    assert {p: p.read_bytes() for p in folder.rglob("*") if p.is_file()} == before


def test_embedded_cluster_from_the_command_line(tmp_path, fleet_dir, run_cli):
    d, _, pipeline = fleet_dir
    logs = [d / "logs" / f"eol_{k:04d}.csv" for k in (1, 2, 4, 5, 6, 8)]
    result = run_cli("fleet", pipeline, *logs, "--workers", "1", "--out", tmp_path, "--quiet")
    folder = next(tmp_path.glob("fleet-*"))
    summary = json.loads((folder / "fleet.json").read_text(encoding="utf-8"))
    assert result.exit_code == (0 if summary["passed"] else 3), result.stderr
    assert summary["counts"]["units"] == 6 and summary["counts"]["ok"] == 6
    assert summary["engine"]["description"] == "embedded Dask cluster, 1 worker process"
    assert {"fleet.csv", "fleet.parquet", "fleet.html", "fleet.json", "pipeline.toml"} <= {
        p.name for p in folder.iterdir()}
    assert "run folder:" in result.stdout and "fleet of 6 units" in result.stdout


def test_scenario_units_have_the_documented_dynamics():
    # the generator's transfer function against the parameters it documents (closed form:
    # poles of the quadratic at -zeta wn +- j wn sqrt(1 - zeta^2), the real pole at -1/tau, DC gain K)
    a = FLEET.Actuator("AX", 40.0, 24.0, 0.06, 0.05)
    num, den = FLEET.actuator_tf(a)
    poles = np.roots(den)
    pair = poles[np.argmax(poles.imag)]
    assert abs(abs(pair) / (2 * np.pi) - 24.0) < 1e-9 and abs(-pair.real / abs(pair) - 0.06) < 1e-12
    assert np.min(np.abs(poles + 1 / 0.05)) < 1e-9
    assert num[-1] / den[-1] == pytest.approx(40.0, rel=1e-12)
    extra = FLEET.actuator_tf(FLEET.Actuator("AX", 40.0, 24.0, 0.06, 0.05, extra_mode_hz=70.0))
    assert extra[0][-1] / extra[1][-1] == pytest.approx(40.0, rel=1e-12)  # unity DC gain of the extra mode


_PROBE = """
import json, os
from ident.fleet.engine import open_client

def probe():
    os.write(1, b"native-output-probe\\n")  # as a compiled library writes its message
    return {k: os.environ.get(k) for k in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MALLOC_TRIM_THRESHOLD_")}

if __name__ == "__main__":
    with open_client(workers=1) as client:
        seen = next(iter(client.run(probe).values()))
    print(json.dumps(seen))
"""


def test_embedded_workers_keep_stdout_clean_and_the_usual_allocator(tmp_path):
    # common practice, no source: stdout carries --json, so what a worker's libraries print
    # must go to stderr; the engine's eager memory trimming is left out. In a fresh process
    # with none of the variables set: variables already in the environment win (the
    # engine's rule), and an engine started earlier in a process sets them there.
    import os

    script = tmp_path / "probe.py"
    script.write_text(_PROBE, encoding="utf-8")
    env = {k: v for k, v in os.environ.items()
           if k not in ("OMP_NUM_THREADS", "MKL_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MALLOC_TRIM_THRESHOLD_")}
    proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True, env=env, timeout=120,
                          cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "native-output-probe" not in proc.stdout and "native-output-probe" in proc.stderr
    # one numeric thread per worker (the engine's default; a unit limits itself to one anyway)
    assert json.loads(proc.stdout) == {"OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1",
                                       "MALLOC_TRIM_THRESHOLD_": None}
