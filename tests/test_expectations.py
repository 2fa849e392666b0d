"""Tests of engineer-stated expectations (ident.assess.expectations, ident.io.expectfile)."""

from __future__ import annotations

import cmath
import math
import tomllib

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.assess.expectations import Expectations, check_expectations
from ident.assess.modes import mode_table
from ident.errors import PipelineError
from ident.io.expectfile import load_expectations
from ident.lti.models import StateSpaceModel

T = 1e-3

EXAMPLE = """
[expect]
stable = true
max_order = 6
integrators = 0
no_mode_above_hz = 200

[[expect.mode]]
name = "belt resonance"
frequency_hz = [25, 45]
damping_ratio = [0.01, 0.2]

[[expect.dc_gain]]
input = "motor_torque_cmd"
output = "motor_speed"
sign = "positive"
range = [10, 100]
"""


def rig_model(gain_at_dc: float = 40.0, zeta: float = 0.05, f_hz: float = 32.0) -> StateSpaceModel:
    """Belt-drive-like plant: resonance plus a 50 ms real pole, DC gain set by construction."""
    wn = 2 * math.pi * f_hz
    z = cmath.exp(complex(-zeta * wn, wn * math.sqrt(1 - zeta**2)) * T)  # z = exp(sT), closed form
    poles = np.array([z, z.conjugate(), math.exp(-T / 0.05)])
    k = gain_at_dc * abs(np.prod(1 - poles))  # G(1) = k / prod(1 - p), closed form
    A, B, C, D = signal.zpk2ss([], poles, k)
    return StateSpaceModel(
        A=A.real, B=B.real, C=C.real, D=D.real, sample_time=T,
        inputs=["motor_torque_cmd"], outputs=["motor_speed"],
    )


def parse(text: str) -> Expectations:
    return Expectations.from_mapping(tomllib.loads(text)["expect"], source="rig.toml")


def run(model, text):
    return check_expectations(model, mode_table(model), parse(text))


def test_example_parses():
    e = parse(EXAMPLE)
    assert e.stable is True and e.max_order == 6 and e.integrators == 0
    assert e.no_mode_above_hz == 200.0
    assert e.modes[0].name == "belt resonance" and e.modes[0].frequency_hz == (25.0, 45.0)
    assert e.modes[0].damping_ratio == (0.01, 0.2)
    g = e.dc_gains[0]
    assert (g.input, g.output, g.sign, g.range) == ("motor_torque_cmd", "motor_speed", "positive",
                                                   (10.0, 100.0))
    assert not e.is_empty and Expectations().is_empty


def test_all_met_on_a_matching_model():
    results = run(rig_model(), EXAMPLE)
    assert [r.name for r in results] == [
        "stable", "max_order", "integrators", "no_mode_above_hz", "mode 'belt resonance'",
        "dc_gain motor_torque_cmd -> motor_speed",
    ]
    assert all(r.met for r in results), [r for r in results if not r.met]
    by_name = {r.name: r for r in results}
    # the resonance was built at 32 Hz and the DC gain at 40 (closed form); round-off only
    assert_allclose(by_name["mode 'belt resonance'"].measured_value, 32.0, rtol=1e-8)
    assert_allclose(by_name["dc_gain motor_torque_cmd -> motor_speed"].measured_value, 40.0, rtol=1e-8)
    assert by_name["max_order"].measured_value == 3


@pytest.mark.parametrize(
    ("model_kwargs", "failing"),
    [
        ({"gain_at_dc": 400.0}, "dc_gain motor_torque_cmd -> motor_speed"),  # out of [10, 100]
        ({"gain_at_dc": -40.0}, "dc_gain motor_torque_cmd -> motor_speed"),  # wrong sign
        ({"f_hz": 60.0}, "mode 'belt resonance'"),  # outside the 25-45 Hz band
        ({"zeta": 0.5}, "mode 'belt resonance'"),  # damping outside [0.01, 0.2]
        ({"f_hz": 250.0}, "no_mode_above_hz"),
    ],
)
def test_each_expectation_fails_when_the_model_breaks_it(model_kwargs, failing):
    results = run(rig_model(**model_kwargs), EXAMPLE)
    failed = [r.name for r in results if not r.met]
    assert failing in failed
    if failing == "no_mode_above_hz":
        assert failed == ["no_mode_above_hz", "mode 'belt resonance'"]
    else:
        assert failed == [failing]


def test_stability_order_and_integrators():
    model = StateSpaceModel(A=np.diag([1.02, 1.0, 0.5]), B=np.ones((3, 1)), C=np.ones((1, 3)),
                            D=[[0.0]], sample_time=T)
    text = "[expect]\nstable = true\nmax_order = 2\nintegrators = 0\n"
    results = {r.name: r for r in run(model, text)}
    assert not results["stable"].met and "1.02" in results["stable"].measured
    assert not results["max_order"].met and results["max_order"].measured_value == 3
    assert not results["integrators"].met and results["integrators"].measured_value == 1
    assert run(model, "[expect]\nintegrators = 1\n")[0].met


def test_siso_dc_gain_may_omit_the_names():
    text = "[expect]\n[[expect.dc_gain]]\nsign = \"positive\"\n"
    (r,) = run(rig_model(), text)
    assert r.met


@pytest.mark.parametrize(
    ("text", "key_path", "hint"),
    [
        ("[expect]\nstabel = true\n", "expect.stabel", "stable"),
        ("[expect]\n[[expect.mode]]\nfrequncy_hz = [1, 2]\n", "expect.mode[1].frequncy_hz",
         "frequency_hz"),
        ("[expect]\n[[expect.dc_gain]]\nsign = \"positive\"\nrnage = [1, 2]\n",
         "expect.dc_gain[1].rnage", "range"),
        ("[expect]\n[[expect.dc_gain]]\nsign = \"positiv\"\n", "expect.dc_gain[1].sign", "positive"),
    ],
)
def test_unknown_keys_name_the_key_and_the_nearest(text, key_path, hint):
    with pytest.raises(PipelineError) as err:
        parse(text)
    assert err.value.key_path == key_path
    assert hint in err.value.hint
    assert "rig.toml" in str(err.value)


@pytest.mark.parametrize(
    ("text", "key_path"),
    [
        ("[expect]\nstable = \"yes\"\n", "expect.stable"),
        ("[expect]\nmax_order = 2.5\n", "expect.max_order"),
        ("[expect]\nmax_order = true\n", "expect.max_order"),
        ("[expect]\nno_mode_above_hz = -3\n", "expect.no_mode_above_hz"),
        ("[expect]\n[[expect.mode]]\nfrequency_hz = [45, 25]\n", "expect.mode[1].frequency_hz"),
        ("[expect]\n[[expect.mode]]\nfrequency_hz = 30\n", "expect.mode[1].frequency_hz"),
        ("[expect]\n[[expect.mode]]\nname = \"x\"\n", "expect.mode[1]"),
        ("[expect]\n[[expect.dc_gain]]\ninput = \"u\"\n", "expect.dc_gain[1]"),
    ],
)
def test_wrong_types_name_the_key(text, key_path):
    with pytest.raises(PipelineError) as err:
        parse(text)
    assert err.value.key_path == key_path


def test_dc_gain_signal_names_must_exist():
    text = "[expect]\n[[expect.dc_gain]]\ninput = \"motor_torque\"\nsign = \"positive\"\n"
    with pytest.raises(PipelineError) as err:
        run(rig_model(), text)
    assert err.value.key_path == "expect.dc_gain[1].input"
    assert "motor_torque_cmd" in err.value.hint


def test_load_expectations_file(tmp_path):
    path = tmp_path / "rig.toml"
    path.write_text(EXAMPLE, encoding="utf-8")
    e = load_expectations(path)
    assert e.max_order == 6 and e.source == str(path)
    bad = tmp_path / "bad.toml"
    bad.write_text("[expcet]\nstable = true\n", encoding="utf-8")
    with pytest.raises(PipelineError) as err:
        load_expectations(bad)
    assert err.value.key_path == "expcet" and "expect" in err.value.hint
    broken = tmp_path / "broken.toml"
    broken.write_text("[expect\n", encoding="utf-8")
    with pytest.raises(PipelineError, match="not valid TOML"):
        load_expectations(broken)


def _thermal_model() -> StateSpaceModel:
    # two first-order lags, tau 395 s and 75 s, sampled at 1 s with ZOH (invented platen, close to the demo's)
    A, B, C, D = signal.tf2ss([1.0], np.polymul([395.0, 1.0], [75.0, 1.0]))
    Ad, Bd, Cd, Dd, _ = signal.cont2discrete((A, B, C, D), 1.0, method="zoh")
    return StateSpaceModel(Ad, Bd, Cd, Dd, sample_time=1.0, inputs=("duty",), outputs=("temp",))


def test_time_constant_expectation_met_and_missed():
    model = _thermal_model()
    table = mode_table(model)
    e = parse('[[expect.mode]]\nname = "platen heating"\ntime_constant_s = [300, 500]\n'
              '[[expect.mode]]\nname = "fast zone"\ntime_constant_s = [5, 20]\n')
    met, missed = check_expectations(model, table, e)
    assert met.met and met.key_path == "expect.mode[1]"
    # ZOH keeps tau exactly: z = exp(-T/tau) (closed form)
    assert_allclose(met.measured_value, 395.0, rtol=1e-6)
    assert "time constant 395 s" in met.measured and "[300, 500] s" in met.expected
    assert not missed.met and "nearest: time constant 75 s" in missed.measured
    assert_allclose(missed.measured_value, 75.0, rtol=1e-6)


def test_time_constant_expectation_is_refused_with_frequency_or_damping():
    with pytest.raises(PipelineError) as err:
        parse('[[expect.mode]]\nfrequency_hz = [1, 2]\ntime_constant_s = [1, 2]\n')
    assert err.value.key_path == "expect.mode[1]"
    with pytest.raises(PipelineError) as err:
        parse('[[expect.mode]]\ntime_constant_s = [1, 2]\ndamping_ratio = [0.1, 0.2]\n')
    assert err.value.key_path == "expect.mode[1].damping_ratio"
    with pytest.raises(PipelineError) as err:
        parse('[[expect.mode]]\ntime_constant_s = [0, 2]\n')
    assert err.value.key_path == "expect.mode[1].time_constant_s"
