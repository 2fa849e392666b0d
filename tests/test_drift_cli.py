import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.io.modelfile import save_model
from ident.lti.models import OperatingPoint, StateSpaceModel
from ident.lti.simulate import simulate

T = 1e-3


def _plant(f_hz, zeta):
    w = 2 * np.pi * f_hz
    A, B, C, D = signal.tf2ss([w * w * 10.0], np.polymul([1.0, 10.0], [1.0, 2 * zeta * w, w * w]))
    Ad, Bd, Cd, Dd, _ = signal.cont2discrete((A, B, C, D), T, method="zoh")
    return StateSpaceModel(Ad, Bd, Cd, Dd, sample_time=T, inputs=("torque",), outputs=("speed",),
                           input_units=("N m",), output_units=("rad/s",),
                           operating_point=OperatingPoint([0.2], [5.0]))


@pytest.fixture
def pair(tmp_path):
    base = save_model(tmp_path / "before.json", _plant(30.0, 0.05))
    new_model = _plant(36.0, 0.05)
    new = save_model(tmp_path / "after.json", new_model)
    u = 0.2 + np.random.default_rng(1).standard_normal((5000, 1))
    y = 5.0 + simulate(new_model, u - 0.2)
    log = tmp_path / "after.csv"
    pd.DataFrame({"time [s]": np.arange(5000) * T, "torque [N m]": u[:, 0], "speed [rad/s]": y[:, 0]}).to_csv(
        log, index=False)
    return base, new, log


def test_drift_breach_exit_3_and_json(run_cli, pair):
    base, new, log = pair
    r = run_cli("drift", base, new, "--log", log, "--json")
    assert r.exit_code == 3
    data = json.loads(r.stdout)
    res = [m for m in data["modes"] if m["baseline"] and m["baseline"]["natural_frequency_hz"] > 20][0]
    assert_allclose(res["frequency_shift_percent"], 20.0, rtol=1e-6)  # closed form: 36/30 - 1
    # noise-free log of the new model: it fits exactly (fit percent 100 by definition)
    assert_allclose(data["fit_on_new_log"]["new_model"], [100.0], atol=1e-6)
    assert data["fit_on_new_log"]["baseline_model"][0] < 100.0
    assert "frequency shift" in r.stderr


def test_drift_within_thresholds_exit_0(run_cli, pair):
    base, new, _ = pair
    r = run_cli("drift", base, new, "--max-frequency-shift", "25", "--max-response-difference", "40")
    assert r.exit_code == 0, r.stderr
    assert "verdict: within the drift thresholds" in r.stdout


def test_drift_bad_model_file_exit_2(run_cli, pair, tmp_path):
    base, _, _ = pair
    bad = tmp_path / "bad.json"
    bad.write_text("[]")
    r = run_cli("drift", base, bad)
    assert r.exit_code == 2 and r.stderr.startswith("error: bad.json")


def test_drift_log_accepts_the_shared_log_options(run_cli, pair, tmp_path):
    base, new, log = pair
    lines = log.read_text().splitlines()
    lines[3001] = lines[3001].rsplit(",", 1)[0] + ",nan"  # one bad cell at file line 3002
    broken = tmp_path / "broken.csv"
    broken.write_text("\n".join(lines) + "\n")
    r = run_cli("drift", base, new, "--log", broken, "--json")
    assert r.exit_code == 2 and "row 3002" in r.stderr
    r = run_cli("drift", base, new, "--log", broken, "--drop-bad-rows", "--split-at-gaps",
                "--jitter-tolerance", "0.05", "--json")
    assert r.exit_code == 3, r.stderr  # the same breach as on the intact log
    assert "longest of 2 segments (samples 0..2999)" in r.stderr
    assert "1 bad rows dropped" in r.stderr
    data = json.loads(r.stdout)
    # noise-free log of the new model, scored on an unbroken segment: fit 100 % by definition
    assert_allclose(data["fit_on_new_log"]["new_model"], [100.0], atol=1e-6)
