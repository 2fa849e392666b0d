"""Measurement files, several rates and column patterns from the command line and pipeline files."""

import hashlib
import json

import numpy as np
import pandas as pd
import pytest

from ident.errors import PipelineError
from ident.io.pipelinefile import parse_pipeline

asammdf = pytest.importorskip(

    "asammdf", reason="asammdf is not installed; pip install '.[test]' (or '.[mdf]') enables these tests"

)
h5py = pytest.importorskip(
    "h5py", reason="h5py is not installed; pip install '.[test]' (or '.[hdf5]') enables these tests"
)


def _errors(result):
    return [ln for ln in result.stderr.splitlines() if ln]


def _rig_mdf(path, seconds=30.0):
    """Invented bench: 'drive' group at 1 kHz (torque_cmd -> speed, a first-order lag of 50 ms),
    'climate' group at 10 Hz (oil_temp)."""
    from scipy import signal

    rng = np.random.default_rng(3)
    t = np.arange(int(seconds * 1000)) / 1000.0
    u = np.repeat(rng.choice([-1.0, 1.0], t.size // 20), 20)
    lag = tuple(np.array([[v]]) for v in (-20.0, 20.0, 1.0, 0.0))
    _, y, _ = signal.dlsim(signal.cont2discrete(lag, 1e-3)[:4] + (1e-3,), u)
    t_slow = np.arange(int(seconds * 10)) / 10.0
    mdf = asammdf.MDF(version="4.10")
    mdf.append([asammdf.Signal(u, t, name="torque_cmd", unit="N m"),
                asammdf.Signal(y[:, 0] + 0.001 * rng.standard_normal(t.size), t, name="speed", unit="rad/s")],
               acq_name="drive")
    mdf.append([asammdf.Signal(40.0 + 0.1 * t_slow, t_slow, name="oil_temp", unit="degC")], acq_name="climate")
    mdf.save(path, overwrite=True)
    mdf.close()
    return str(path)


@pytest.fixture
def rig(tmp_path):
    return _rig_mdf(tmp_path / "bench.mf4")


def test_fit_on_mdf_with_patterns_and_the_input_untouched(run_cli, rig, tmp_path):
    before = hashlib.sha256(open(rig, "rb").read()).hexdigest()
    out = tmp_path / "m.json"
    result = run_cli("fit", rig, "--input", "torque*", "--output", "#2", "--method", "arx", "--max-order", "2",
                     "-o", out, "--quiet")
    assert result.exit_code == 0, result.stderr
    model = json.loads(out.read_text())
    assert model["inputs"] == ["torque_cmd"] and model["outputs"] == ["speed"]
    assert model["units"] == {"inputs": ["N m"], "outputs": ["rad/s"]}
    prov = model["provenance"]["log"]
    assert prov["format"] == "mdf" and prov["sha256"] == before and prov["resampling"] is None
    assert hashlib.sha256(open(rig, "rb").read()).hexdigest() == before  # the log is never written


def test_mixed_rates_need_resample_and_it_is_recorded(run_cli, rig, tmp_path):
    out = tmp_path / "m.json"
    result = run_cli("fit", rig, "--input", "torque_cmd", "--output", "speed", "--output", "oil_temp",
                     "-o", out, "--quiet")
    assert result.exit_code == 2 and not out.exists()
    errors = _errors(result)
    assert errors[0] == ("error: bench.mf4: the chosen channels come at several rates (torque_cmd 1000 Hz, "
                         "speed 1000 Hz, oil_temp 10 Hz); they are never interpolated silently")
    assert errors[1].startswith("hint: bring them to one rate with --resample HZ") and len(errors) == 2
    result = run_cli("fit", rig, "--input", "torque_cmd", "--output", "speed", "--output", "oil_temp",
                     "--resample", "20", "--method", "arx", "--max-order", "2", "-o", out, "--quiet")
    assert result.exit_code == 2 and "--upsample zoh|linear" in result.stderr  # 10 Hz is below 20 Hz
    result = run_cli("fit", rig, "--input", "torque_cmd", "--output", "speed", "--output", "oil_temp",
                     "--resample", "10", "--method", "arx", "--max-order", "2", "-o", out, "--quiet")
    assert result.exit_code == 0, result.stderr
    assert "note: resampled to 10 Hz: torque_cmd 1000 Hz decimated" in result.stderr
    model = json.loads(out.read_text())
    assert model["sample_time"] == pytest.approx(0.1, rel=1e-12)  # closed form: 1 / 10 Hz
    resampling = model["provenance"]["log"]["resampling"]
    assert resampling["rate_hz"] == 10.0 and resampling["edge_samples"] == 10
    assert [c["action"] for c in resampling["channels"]] == ["decimated", "decimated", "kept"]


def test_bad_files_are_one_line_exit_2_and_nothing_written(run_cli, rig, tmp_path):
    data = open(rig, "rb").read()
    cut = tmp_path / "cut.mf4"
    cut.write_bytes(data[: len(data) // 2])
    out = tmp_path / "m.json"
    result = run_cli("fit", cut, "--input", "torque_cmd", "--output", "speed", "-o", out)
    assert result.exit_code == 2 and not out.exists()
    errors = _errors(result)
    assert errors[0].startswith("error: cut.mf4: cannot read the ASAM MDF file (")
    assert errors[1] == "hint: the file may be truncated or damaged; record or copy it again"
    assert len(errors) == 2 and "Traceback" not in result.stderr

    h5 = tmp_path / "daq.h5"
    t = np.arange(200) / 100.0
    with h5py.File(h5, "w") as f:
        f["run/time"], f["run/u"], f["run/y"] = t, np.sin(t), np.cos(t)
    result = run_cli("fit", h5, "--input", "run/u", "--output", "run/flow", "-o", out)
    assert result.exit_code == 2 and not out.exists()
    assert _errors(result)[0].startswith("error: daq.h5: no channel named 'run/flow'")

    back = tmp_path / "back.h5"
    t2 = t.copy()
    t2[120] = t2[100]
    with h5py.File(back, "w") as f:
        f["time"], f["u"], f["y"] = t2, np.sin(t), np.cos(t)
    plots = tmp_path / "figs"
    result = run_cli("inspect", back, "--plot", tmp_path / "x.png")
    assert result.exit_code == 2 and not (tmp_path / "x.png").exists()
    # sample 121: index 120 set back to the stamp of index 100 above
    assert _errors(result)[0] == ("error: back.h5, channel 'time', sample 121: time goes backwards "
                                  "(1 s after 1.19 s on the sample before)")
    result = run_cli("fit", back, "--input", "u", "--output", "y", "-o", out)
    assert result.exit_code == 2 and not out.exists() and not plots.exists()


def test_inspect_speaks_of_groups_records_and_channels(run_cli, rig, tmp_path):
    result = run_cli("inspect", rig)
    assert result.exit_code == 0, result.stderr
    out = result.stdout
    assert "file lines" not in out and "format     ASAM MDF 4.10" in out
    assert "records    2 channel group(s), 3 channels" in out
    assert "drive" in out and "climate" in out and "master channel 'time'" in out
    data = json.loads(run_cli("inspect", rig, "--json").stdout)
    assert [(c["position"], c["name"], c["group"], c["samples"]) for c in data["columns"]] == [
        (1, "torque_cmd", "drive", 30000), (2, "speed", "drive", 30000), (3, "oil_temp", "climate", 300)]
    assert [c["rate_hz"] for c in data["columns"]] == pytest.approx([1000.0, 1000.0, 10.0], rel=1e-9)
    result = run_cli("inspect", rig, "--input", "torque_cmd", "--output", "oil_temp", "--resample", "10")
    assert result.exit_code == 0, result.stderr
    assert "resampled to 10 Hz: torque_cmd 1000 Hz decimated, oil_temp 10 Hz kept" in result.stdout
    pq = tmp_path / "t.parquet"
    pd.DataFrame({"time": np.arange(5.0), "u": np.arange(5.0)}).to_parquet(pq, index=False)
    text = run_cli("inspect", pq).stdout
    assert "file lines" not in text and "records    5 (table rows 1-5), 2 channels" in text


def test_inspect_plot_of_groups_at_their_own_rates(run_cli, rig, tmp_path):
    png = tmp_path / "groups.png"
    result = run_cli("inspect", rig, "--plot", png)
    assert result.exit_code == 0, result.stderr
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_check_pattern_must_match_one_column(run_cli, tmp_path):
    csv = tmp_path / "log.csv"
    pd.DataFrame({"time": np.arange(300) / 100.0, "u1": np.sin(np.arange(300.0)), "u2": np.cos(np.arange(300.0)),
                  "y": np.arange(300.0)}).to_csv(csv, index=False)
    model = tmp_path / "m.json"
    assert run_cli("fit", csv, "--input", "u1", "--output", "y", "--method", "arx", "--max-order", "1",
                   "-o", model, "--quiet").exit_code == 0
    result = run_cli("check", csv, model, "--input", "u*")
    assert result.exit_code == 2
    assert _errors(result)[0] == ("error: log.csv: the pattern 'u*' matches 2 columns where one is expected: "
                                  "u1, u2")


def test_pipeline_log_section_takes_resample_and_upsample(tmp_path):
    log = tmp_path / "a.csv"
    log.write_text("time,u,y\n0,1,2\n")
    spec = parse_pipeline({"log": {"paths": [str(log)], "inputs": ["u*"], "outputs": ["#3"],
                                   "resample_hz": 50, "upsample": "linear", "units": {"u": "V"}}},
                          path=tmp_path / "p.toml")
    assert spec.log.resample_hz == 50.0 and spec.log.upsample == "linear"
    assert spec.log.read_log_kwargs()["resample_hz"] == 50.0
    assert spec.to_dict()["log"]["upsample"] == "linear"
    with pytest.raises(PipelineError) as info:
        parse_pipeline({"log": {"paths": [str(log)], "inputs": ["u"], "outputs": ["y"], "upsample": "zho"}},
                       path=tmp_path / "p.toml")
    assert str(info.value) == "p.toml, key 'log.upsample': must be one of zoh, linear; got 'zho'"
    assert info.value.hint == "did you mean 'zoh'?"
    with pytest.raises(PipelineError, match="log.resample_hz"):
        parse_pipeline({"log": {"paths": [str(log)], "inputs": ["u"], "outputs": ["y"], "resample_hz": 0}},
                       path=tmp_path / "p.toml")


def test_pipeline_reads_an_mdf_log_with_resampling(rig, tmp_path):
    from ident.pipeline import _read_logs

    spec = parse_pipeline({"log": {"paths": [rig], "inputs": ["torque_cmd"], "outputs": ["speed", "oil*"],
                                   "resample_hz": 10, "units": {"oil_temp": "degC"}}}, path=tmp_path / "p.toml")
    (log,) = _read_logs(spec)
    assert log.output_names == ("speed", "oil_temp") and log.sample_time == pytest.approx(0.1, rel=1e-12)
    bad = parse_pipeline({"log": {"paths": [rig], "inputs": ["torque_cmd"], "outputs": ["speed", "oil*"],
                                  "resample_hz": 10, "units": {"oil_tmp": "degC"}}}, path=tmp_path / "p.toml")
    with pytest.raises(PipelineError) as info:
        _read_logs(bad)
    assert "key 'log.units.oil_tmp': names no input or output column" in str(info.value)
    assert info.value.hint == "did you mean 'oil_temp'?"
