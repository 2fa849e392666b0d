"""Tests of the mode table (ident.assess.modes)."""

from __future__ import annotations

import cmath
import json
import math
import subprocess
import sys

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal, stats

from ident.assess.modes import FLAGS, Mode, ModeTable, ModeThresholds, mode_table, mode_table_to_dict
from ident.errors import ModelError, OptionError, PipelineError
from ident.lti.models import StateSpaceModel
from ident.lti.simulate import simulate

T = 1e-3  # s, a 1 kHz rig


def zpk_model(zeros, poles, gain=1.0, sample_time=T) -> StateSpaceModel:
    """Discrete model with the given zeros and poles (scipy.signal.zpk2ss)."""
    A, B, C, D = signal.zpk2ss(np.asarray(zeros, complex), np.asarray(poles, complex), gain)
    return StateSpaceModel(A=A.real, B=B.real, C=C.real, D=D.real, sample_time=sample_time)


def pair(zeta: float, f_hz: float, sample_time: float = T) -> list[complex]:
    """The z-plane pair of a continuous pole pair, z = exp(s T) (closed form)."""
    wn = 2 * math.pi * f_hz
    s = complex(-zeta * wn, wn * math.sqrt(1 - zeta**2))
    z = cmath.exp(s * sample_time)
    return [z, z.conjugate()]


def clean_model() -> StateSpaceModel:
    """A plausible rig: a 30 Hz resonance with damping 0.3, a 16 ms real pole, zeros far away."""
    poles = [*pair(0.3, 30.0), 0.94]
    return zpk_model([0.2], poles, gain=0.05)


# ----------------------------------------------------------------- formulas


@pytest.mark.parametrize(
    "z",
    [0.97 + 0.2j, 0.5 + 0.5j, 0.999 + 0.01j, -0.3 + 0.6j, 0.8 + 0.0j, 1.02 + 0.1j],
)
def test_damping_and_natural_frequency_follow_the_z_plane_relations(z):
    model = zpk_model([], [z, np.conj(z)] if z.imag else [z])
    mode = mode_table(model).modes[0]
    # Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed., sec. 4.3.2:
    # zeta = -ln|z| / sqrt(ln^2|z| + angle(z)^2), wn = sqrt(ln^2|z| + angle(z)^2) / T.
    lr, th = math.log(abs(z)), abs(cmath.phase(z))
    zeta = -lr / math.sqrt(lr**2 + th**2)
    wn = math.sqrt(lr**2 + th**2) / T
    # eigenvalues of a companion matrix: relative error ~1e-12 (numpy.linalg.eigvals)
    assert_allclose(mode.damping_ratio, zeta, rtol=1e-9)
    assert_allclose(mode.natural_frequency_rad_s, wn, rtol=1e-9)
    assert_allclose(mode.natural_frequency_hz, wn / (2 * math.pi), rtol=1e-9)
    # s = ln(z) / T maps back to z under z = exp(sT) (closed form)
    assert_allclose(cmath.exp(mode.s * T), z, rtol=1e-9)
    if abs(z) < 1:
        assert_allclose(mode.time_constant_s, -T / lr, rtol=1e-9)  # tau = -T / ln|z|, closed form
    else:
        assert mode.time_constant_s is None
    if z.imag:
        assert mode.is_pair
        assert mode.z.imag > 0
        assert_allclose(mode.damped_frequency_hz, th / (2 * math.pi * T), rtol=1e-9)
        assert_allclose(mode.period_s, 2 * math.pi * T / th, rtol=1e-9)
    else:
        assert mode.damped_frequency_hz is None and mode.period_s is None


@pytest.mark.parametrize(("zeta", "f_hz"), [(0.05, 12.0), (0.3, 30.0), (0.7, 150.0)])
def test_continuous_second_order_system_is_recovered_through_zoh(zeta, f_hz):
    wn = 2 * math.pi * f_hz
    # wn^2 / (s^2 + 2 zeta wn s + wn^2), discretised by scipy.signal.cont2discrete (ZOH)
    A, B, C, D, _ = signal.cont2discrete(
        signal.tf2ss([wn**2], [1.0, 2 * zeta * wn, wn**2]), T, method="zoh"
    )
    table = mode_table(StateSpaceModel(A, B, C, D, sample_time=T))
    (mode,) = table.modes
    # ZOH maps s to exp(sT) exactly, so the continuous figures come back (round-off only)
    assert_allclose(mode.damping_ratio, zeta, rtol=1e-8)
    assert_allclose(mode.natural_frequency_hz, f_hz, rtol=1e-8)
    assert_allclose(mode.time_constant_s, 1 / (zeta * wn), rtol=1e-8)
    # ZOH keeps the DC gain of 1 (closed form: G(0) = 1)
    assert_allclose(table.dc_gain, [[1.0]], rtol=1e-8)


@pytest.mark.parametrize(
    ("zeta", "overshoot"),
    [
        (0.5, 0.163),  # Ogata, Modern Control Engineering, 5th ed., sec. 5-3: about 16.3 %
        (0.7, 0.046),  # Ogata, Modern Control Engineering, 5th ed., sec. 5-3: about 4.6 %
    ],
)
def test_damping_ratio_predicts_the_step_overshoot(zeta, overshoot):
    f_hz = 5.0
    poles = pair(zeta, f_hz)
    k = abs(np.prod([1 - p for p in poles]))  # unity DC gain, closed form G(1) = k / prod(1 - p)
    model = zpk_model([], poles, gain=k)
    mode = mode_table(model).modes[0]
    y = simulate(model, np.ones((2000, 1)))[:, 0]
    measured = y.max() - 1.0
    # Ogata, 5th ed., eq. (5-21): Mp = exp(-zeta pi / sqrt(1 - zeta^2))
    predicted = math.exp(-mode.damping_ratio * math.pi / math.sqrt(1 - mode.damping_ratio**2))
    # the textbook values are rounded to 0.1 %; 5 Hz at 1 kHz samples the peak within 1e-4
    assert_allclose(measured, overshoot, atol=1e-3)
    assert_allclose(predicted, overshoot, atol=1e-3)
    assert_allclose(measured, predicted, atol=2e-4)


def test_confidence_radius_uses_the_chi_square_quantile():
    sigma = 1e-3
    model = zpk_model([], [0.5])
    table = mode_table(model, pole_covariance=np.array([np.eye(2) * sigma**2]))
    mode = table.modes[0]
    # scipy.stats.chi2.ppf(0.95, 2): radius of the 95 % circle of an isotropic 2-D Gaussian
    assert_allclose(mode.confidence_radius, sigma * math.sqrt(stats.chi2.ppf(0.95, 2)), rtol=1e-12)
    assert mode.z_std == pytest.approx((sigma, sigma))


# ----------------------------------------------------------------- table layout


def test_modes_sorted_slowest_first_with_pairs_once_and_repeats_merged():
    poles = [*pair(0.2, 80.0), *pair(0.4, 10.0), 0.9, 0.9, 0.3]
    table = mode_table(zpk_model([], poles))
    f = [m.natural_frequency_hz for m in table.modes]
    assert f == sorted(f)
    assert len(table.modes) == 4  # 2 pairs, the repeated 0.9 once, 0.3
    assert sum(m.multiplicity * (2 if m.is_pair else 1) for m in table.modes) == 7
    repeated = [m for m in table.modes if m.multiplicity == 2]
    assert len(repeated) == 1 and repeated[0].z == pytest.approx(0.9, abs=1e-6)
    assert all(m.z.imag > 0 for m in table.modes if m.is_pair)


def test_pole_at_origin_is_a_delay_without_mode_figures():
    table = mode_table(zpk_model([], [0.0, 0.5]))
    last = table.modes[-1]
    assert last.z == 0
    assert last.s is None and last.natural_frequency_hz is None and last.time_constant_s is None


def test_continuous_model_is_refused():
    model = StateSpaceModel(A=[[-1.0]], B=[[1.0]], C=[[1.0]], D=[[0.0]])
    with pytest.raises(ModelError, match="discrete"):
        mode_table(model)


def test_bad_covariance_shape_is_refused():
    with pytest.raises(OptionError, match="pole_covariance"):
        mode_table(zpk_model([], [0.5, 0.6]), pole_covariance=np.zeros((1, 2, 2)))


# ----------------------------------------------------------------- flags


def test_clean_model_has_no_flags():
    table = mode_table(clean_model(), log_duration_s=10.0, pole_covariance=None)
    assert [m.flags for m in table.modes] == [(), ()]
    assert table.warnings == {}
    assert table.flags() == ()


def _flags_of(model, **kw) -> set[str]:
    return set(mode_table(model, **kw).flags())


@pytest.mark.parametrize(
    ("flag", "poles", "zeros", "kwargs"),
    [
        ("unstable", [1.01, 0.5], [], {}),
        ("marginal", [cmath.exp(0.3j), cmath.exp(-0.3j)], [], {}),
        ("integrator", [1.0, 0.5], [], {}),
        ("lightly_damped", pair(0.01, 30.0), [], {}),
        ("negative_real", [-0.5, 0.9], [], {}),
        ("near_nyquist", pair(0.2, 450.0), [], {}),  # 0.9 of the 500 Hz Nyquist frequency
        ("slow_for_log", [math.exp(-T / 1.0)], [], {"log_duration_s": 2.0}),  # tau 1 s > 0.2 * 2 s
        # s = ln(z)/T of pole and zero differ by 0.53 % < 1 % (closed form: ln 0.8995 / ln 0.9 - 1)
        ("near_cancellation", [0.9, 0.5], [0.8995], {}),
    ],
)
def test_each_flag_fires_on_a_model_built_for_it(flag, poles, zeros, kwargs):
    flags = _flags_of(zpk_model(zeros, poles), **kwargs)
    assert flag in flags
    table = mode_table(zpk_model(zeros, poles), **kwargs)
    assert flag in table.warnings and len(table.warnings[flag]) > 20
    flagged = [m for m in table.modes if flag in m.flags]
    for m in flagged:
        assert len(m.explanations) == len(m.flags)


def test_uncertain_stability_fires_when_the_region_crosses_the_circle():
    model = zpk_model([], [0.99])
    wide = np.array([np.eye(2) * 0.01**2])  # 95 % radius 0.024 > distance 0.01 to the circle
    narrow = np.array([np.eye(2) * 0.001**2])  # 95 % radius 0.0024 < 0.01
    assert "uncertain_stability" in _flags_of(model, pole_covariance=wide)
    assert "uncertain_stability" not in _flags_of(model, pole_covariance=narrow)


def test_flags_stay_silent_just_inside_their_thresholds():
    # damping 0.08 > 0.07; 300 Hz < 0.8 * 500 Hz; tau 0.4 s < 0.2 * 10 s (and |z| = 0.9975,
    # not marginal); zero 3 % away from the pole at 0.9
    model = zpk_model([0.927], [*pair(0.08, 30.0), *pair(0.3, 300.0), math.exp(-T / 0.4), 0.9])
    assert _flags_of(model, log_duration_s=10.0) == set()
    # marginal tolerance 1e-3: |z| = 0.998 is not marginal, 0.9995 is
    assert _flags_of(zpk_model([], [0.998])) == set()
    assert _flags_of(zpk_model([], [0.9995])) == {"marginal", "integrator"}


def test_lightly_damped_default_catches_the_demo_belt_resonance():
    # the demo's belt resonance: damping 0.050 before and 0.033 after the belt change
    # (sample_data/truth.json, generated by ident/demo/generate.py); servo practice calls a
    # damping ratio below about 0.05-0.1 light (common practice, no single source)
    assert ModeThresholds().lightly_damped_below == 0.07
    for zeta, f_hz in ((0.050, 31.51), (0.033, 38.59)):
        assert _flags_of(zpk_model([], pair(zeta, f_hz))) == {"lightly_damped"}


def test_thresholds_are_configurable():
    model = zpk_model([], pair(0.08, 30.0))
    assert _flags_of(model) == set()
    assert _flags_of(model, thresholds=ModeThresholds(lightly_damped_below=0.1)) == {"lightly_damped"}
    fast = zpk_model([], pair(0.3, 300.0))
    assert _flags_of(fast, thresholds=ModeThresholds(nyquist_fraction=0.5)) == {"near_nyquist"}


def test_negative_real_pole_has_no_continuous_equivalent():
    table = mode_table(zpk_model([], [-0.5]))
    (mode,) = table.modes
    assert mode.s is None
    assert "negative_real" in mode.flags


def test_thresholds_from_mapping_rejects_unknown_keys_with_nearest():
    assert ModeThresholds.from_mapping({"nyquist_fraction": 0.7}).nyquist_fraction == 0.7
    with pytest.raises(PipelineError) as err:
        ModeThresholds.from_mapping({"lightly_damped_bellow": 0.1})
    assert err.value.key_path == "modes.lightly_damped_bellow"
    assert "lightly_damped_below" in err.value.hint
    with pytest.raises(OptionError):
        ModeThresholds(nyquist_fraction=1.5)


# ----------------------------------------------------------------- JSON


def test_json_shape():
    model = zpk_model([0.2], [*pair(0.3, 30.0), -0.4, 1.0])
    data = mode_table_to_dict(mode_table(model))
    text = json.dumps(data, allow_nan=False)  # must be strict JSON
    back = json.loads(text)
    assert len(back["modes"]) == 3  # the pair once
    required = {"z", "s", "natural_frequency_hz", "damping_ratio", "time_constant_s", "flags"}
    for m in back["modes"]:
        assert required <= set(m)
        assert len(m["z"]) == 2
    by_re = {round(m["z"][0], 3): m for m in back["modes"]}
    assert by_re[-0.4]["s"] is None
    assert by_re[1.0]["time_constant_s"] is None and "integrator" in by_re[1.0]["flags"]
    osc = [m for m in back["modes"] if m["z"][1] != 0][0]
    assert osc["z"][1] > 0 and len(osc["s"]) == 2
    assert back["dc_gain"][0]["gain"] in ("inf", "-inf")  # integrator channel
    assert back["zeros"] == [[pytest.approx(0.2), 0.0]]


def test_types_are_frozen():
    table = mode_table(clean_model())
    assert isinstance(table, ModeTable) and isinstance(table.modes[0], Mode)
    with pytest.raises(AttributeError):
        table.modes[0].z = 0  # frozen dataclass
    assert FLAGS[0] == "unstable" and len(FLAGS) == len(set(FLAGS))


def test_core_modules_do_not_import_cli_or_plotting():
    code = (
        "import sys, ident.assess.modes, ident.assess.expectations; "
        "bad = [m for m in ('click', 'matplotlib', 'pandas') if m in sys.modules]; print(bad)"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "[]"


@pytest.mark.parametrize("z", [0.97 + 0.2j, 0.6 + 0.0j, -0.2 + 0.7j])
def test_frequency_and_damping_std_follow_the_delta_method(z):
    cov = np.array([[2e-6, 5e-7], [5e-7, 1e-6]])
    poles = [z, np.conj(z)] if z.imag else [z]
    full = np.array([cov, cov * [[1, -1], [-1, 1]]])[: len(poles)]  # conjugate: Im negated
    mode = mode_table(zpk_model([], poles), pole_covariance=full).modes[0]

    def figures(x, y):
        # Franklin, Powell & Workman, 3rd ed., sec. 4.3.2 (closed form, as above)
        lr, th = math.log(math.hypot(x, y)), math.atan2(y, x)
        mag = math.hypot(lr, th)
        return np.array([mag / T / (2 * math.pi), -lr / mag])

    # Jacobian by central differences (numpy), then J cov J^T (delta method)
    h = 1e-7
    J = np.column_stack([
        (figures(z.real + h, z.imag) - figures(z.real - h, z.imag)) / (2 * h),
        (figures(z.real, z.imag + h) - figures(z.real, z.imag - h)) / (2 * h),
    ])
    var = np.diag(J @ cov @ J.T)
    # central differences with h = 1e-7 are accurate to ~1e-7 relative; atol for the
    # positive real pole, whose damping ratio is 1 whatever z is (std 0 up to round-off)
    assert_allclose(mode.natural_frequency_std_hz, math.sqrt(var[0]), rtol=1e-5)
    assert_allclose(mode.damping_ratio_std, math.sqrt(var[1]), rtol=1e-5, atol=1e-9)


def test_near_cancellation_on_a_model_with_more_outputs_than_inputs():
    # the 0.3 pole is barely excited (B entry 1e-4): with one input and two outputs there are no
    # transmission zeros, but each channel has a zero next to 0.3 (closed form: a mode the input
    # hardly reaches cancels in every output)
    from ident.lti.analysis import transmission_zeros

    A = np.diag([0.9, 0.5, 0.3])
    B = np.array([[1.0], [1.0], [1e-4]])
    C = np.array([[1.0, 1.0, 1.0], [1.0, -1.0, 2.0]])
    model = StateSpaceModel(A, B, C, np.zeros((2, 1)), sample_time=0.01)
    assert transmission_zeros(model).size == 0
    table = mode_table(model)
    flagged = [m for m in table.modes if "near_cancellation" in m.flags]
    assert len(flagged) == 1 and abs(flagged[0].z - 0.3) < 1e-12
    # fully excited: silent
    clean = mode_table(model.with_changes(B=np.array([[1.0], [1.0], [1.0]])))
    assert not any("near_cancellation" in m.flags for m in clean.modes)
