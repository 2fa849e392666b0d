"""``rigfit check`` on a log without a time column and with other column names."""

from __future__ import annotations

import json
import math

import numpy as np
from scipy import signal

from ident.io.modelfile import save_model
from ident.lti.models import OperatingPoint, StateSpaceModel

T = 0.01


def _files(tmp_path, *, with_time: bool):
    # invented valve -> flow rig: 2 Hz, damping 0.3, gain 2.5, ZOH at 100 Hz (scipy.signal.cont2discrete)
    wn = 2 * math.pi * 2.0
    A, B, C, D, _ = signal.cont2discrete(signal.tf2ss([2.5 * wn**2], [1, 2 * 0.3 * wn, wn**2]), T, method="zoh")
    model = StateSpaceModel(A, B, C, D, sample_time=T, inputs=("valve_cmd",), outputs=("flow",),
                            input_units=("V",), output_units=("l/min",), operating_point=OperatingPoint([4.0], [10.0]))
    model_path = save_model(tmp_path / "valve.json", model)
    rng = np.random.default_rng(5)
    u = np.repeat(rng.choice([-1.0, 1.0], size=300), 10)
    _, y, _ = signal.dlsim((A, B, C, D, T), u)
    y = y[:, 0] + 10.0 + 0.002 * rng.standard_normal(u.size)
    header = ("time [s]," if with_time else "") + "CMD [V],Q [l/min]"
    rows = [header] + [(f"{k * T:.2f}," if with_time else "") + f"{a + 4.0:.6f},{b:.6f}"
                       for k, (a, b) in enumerate(zip(u, y, strict=True))]
    log_path = tmp_path / "run.csv"
    log_path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return log_path, model_path


def test_check_without_time_column_takes_the_model_sample_time_and_names_log_columns(run_cli, tmp_path):
    log, model = _files(tmp_path, with_time=False)
    result = run_cli("check", log, model, "--input", "CMD", "--output", "Q")
    assert result.exit_code == 0, result.stderr
    out = result.stdout
    assert "log columns: inputs CMD [V] (model valve_cmd); outputs Q [l/min] (model flow)" in out
    assert "note: the log has no time column: sample time 0.01 s (100 Hz) from the model file" in out
    fit_rows = [ln for ln in out.splitlines() if ln.startswith("Q ")]
    assert fit_rows, out  # the tables name the log's column, not the model's signal
    # the model is the plant that made the data: the fit is near 100 % (noise 0.002 on a swing of ~2.5)
    assert float(fit_rows[0].split()[1]) > 95
    data = json.loads(run_cli("check", log, model, "--input", "CMD", "--output", "Q", "--json").stdout)
    assert data["columns"] == {"inputs": ["CMD"], "outputs": ["Q"]}
    assert data["sample_time_from_model"] is True


def test_check_with_time_column_says_nothing_about_the_sample_time(run_cli, tmp_path):
    log, model = _files(tmp_path, with_time=True)
    result = run_cli("check", log, model, "--input", "cmd", "--output", "q", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["sample_time_from_model"] is False
    assert data["columns"] == {"inputs": ["CMD"], "outputs": ["Q"]}  # as the log spells them
    # a wrong --sample-rate is still refused (the model's rate is only a default)
    bad = run_cli("check", log, model, "--input", "CMD", "--output", "Q", "--time", "", "--sample-rate", "50")
    assert bad.exit_code == 2
