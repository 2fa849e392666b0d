"""Tests of continuous <-> discrete conversion (ident.lti.discretize)."""

from __future__ import annotations

import cmath
import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import signal
from systems import SETTINGS, random_stable

from ident.errors import ModelError, OptionError
from ident.lti.analysis import frequency_response, step_response
from ident.lti.convert import ss_to_tf
from ident.lti.discretize import (
    DISCRETIZE_METHODS,
    pole_to_continuous,
    poles_to_continuous,
    to_continuous,
    to_discrete,
)
from ident.lti.models import OperatingPoint, StateSpaceModel

FREQS = np.array([0.0, 0.1, 0.5, 1.0, 2.0, 4.5])  # Hz, below the Nyquist 5 Hz of T = 0.1 s
T = 0.1

SCIPY_METHOD = {"zoh": "zoh", "foh": "foh", "tustin": "bilinear"}


def rel_err(a, b) -> float:
    return float(np.max(np.abs(a - b)) / np.max(np.abs(b)))


@SETTINGS
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 12),
    m=st.integers(1, 2),
    p=st.integers(1, 2),
    method=st.sampled_from(["zoh", "foh", "tustin"]),
)
def test_to_discrete_matches_scipy_cont2discrete(seed, n, m, p, method):
    model = random_stable(seed, n, m, p)
    d = to_discrete(model, T, method=method)
    assert d.sample_time == T and d.n_states == n
    # reference: scipy.signal.cont2discrete with the same method
    Ad, Bd, Cd, Dd, _ = signal.cont2discrete(
        (model.A, model.B, model.C, model.D), T, method=SCIPY_METHOD[method]
    )
    ref = StateSpaceModel(A=Ad, B=Bd, C=Cd, D=Dd, sample_time=T)
    # realisations agree, but compare frequency responses and poles, not matrices;
    # both are expm / solve based: rounding ~1e-13
    assert rel_err(frequency_response(d, FREQS), frequency_response(ref, FREQS)) < 1e-10
    assert_allclose(np.sort_complex(d.poles()), np.sort_complex(ref.poles()), rtol=0, atol=1e-10)


@SETTINGS
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 12),
    m=st.integers(1, 2),
    p=st.integers(1, 2),
    method=st.sampled_from(["zoh", "foh", "tustin"]),
)
def test_round_trip_recovers_the_continuous_model(seed, n, m, p, method):
    model = random_stable(seed, n, m, p)
    back = to_continuous(to_discrete(model, T, method=method), method=method)
    assert back.sample_time is None and back.n_states == n
    # oracle: the original model; logm/expm round trip loses a few digits
    assert rel_err(frequency_response(back, FREQS), frequency_response(model, FREQS)) < 1e-9


def test_tustin_prewarp_round_trip_and_exact_match_at_the_prewarp_frequency():
    model = random_stable(4, 6, 1, 2)
    f0 = 3.0  # Hz
    d = to_discrete(model, T, method="tustin", prewarp_hz=f0)
    # closed form: with k = w0 / tan(w0 T / 2), G_d(exp(j w0 T)) = G_c(j w0) exactly
    assert_allclose(frequency_response(d, [f0]), frequency_response(model, [f0]), rtol=1e-12)
    # without pre-warping the two differ at 3 Hz (frequency warping, closed form)
    plain = to_discrete(model, T, method="tustin")
    assert rel_err(frequency_response(plain, [f0]), frequency_response(model, [f0])) > 1e-3
    back = to_continuous(d, method="tustin", prewarp_hz=f0)
    assert rel_err(frequency_response(back, FREQS), frequency_response(model, FREQS)) < 1e-10


def test_prewarp_only_for_tustin_and_below_nyquist():
    model = random_stable(4, 2, 1, 1)
    with pytest.raises(ModelError, match="tustin"):
        to_discrete(model, T, method="zoh", prewarp_hz=1.0)
    with pytest.raises(ModelError, match="Nyquist"):
        to_discrete(model, T, method="tustin", prewarp_hz=6.0)


def test_zoh_textbook_example():
    # Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed., Ch. 6
    # (ZOH equivalent); also Ogata, Discrete-Time Control Systems: G(s) = 1/(s(s+1)),
    # T = 1 s -> (0.3679 z + 0.2642) / (z^2 - 1.3679 z + 0.3679)
    A, B, C, D = signal.tf2ss([1.0], [1.0, 1.0, 0.0])
    tf = ss_to_tf(to_discrete(StateSpaceModel(A=A, B=B, C=C, D=D), 1.0))
    # the book rounds to 4 decimals
    assert_allclose(tf.num[0][0], [0.3679, 0.2642], atol=5e-5)
    assert_allclose(tf.den[0][0], [1.0, -1.3679, 0.3679], atol=5e-5)
    # closed form of the same: num = [e^-1, 1 - 2 e^-1], den = [1, -(1 + e^-1), e^-1]
    e = math.exp(-1.0)
    assert_allclose(tf.num[0][0], [e, 1 - 2 * e], rtol=1e-12)
    assert_allclose(tf.den[0][0], [1.0, -(1 + e), e], rtol=1e-12)


def test_second_order_pole_maps_to_exp_st():
    # closed form: s = -zeta wn +- j wn sqrt(1 - zeta^2) maps to z = exp(s T) with
    # |z| = exp(-zeta wn T) and angle wn sqrt(1 - zeta^2) T
    wn, zeta, Ts = 2 * math.pi * 4.0, 0.2, 0.01
    A, B, C, D = signal.tf2ss([wn**2], [1.0, 2 * zeta * wn, wn**2])
    z = to_discrete(StateSpaceModel(A=A, B=B, C=C, D=D), Ts).poles()
    z = z[np.argmax(z.imag)]
    assert_allclose(abs(z), math.exp(-zeta * wn * Ts), rtol=1e-12)
    assert_allclose(cmath.phase(z), wn * math.sqrt(1 - zeta**2) * Ts, rtol=1e-12)
    s = pole_to_continuous(z, Ts)
    assert_allclose(s, complex(-zeta * wn, wn * math.sqrt(1 - zeta**2)), rtol=1e-12)


def test_zoh_step_response_equals_sampled_continuous_step():
    # invariant of the ZOH equivalent: a step is held exactly, so the discrete step
    # response equals the continuous one (scipy.signal.step) at the sample instants
    model = random_stable(9, 5, 1, 1)
    d = to_discrete(model, T, method="zoh")
    resp = step_response(d, n_samples=80)
    _, y = signal.step((model.A, model.B, model.C, model.D), T=resp.time)
    assert_allclose(resp.values[:, 0, 0], y, rtol=1e-7, atol=1e-9)


def test_negative_real_pole_is_refused_with_its_value():
    model = StateSpaceModel(
        A=[[0.8, 0.0], [0.0, -0.45]], B=[[1.0], [1.0]], C=[[1.0, 1.0]], D=[[0.0]], sample_time=0.01
    )
    with pytest.raises(ModelError, match=r"z=-0\.45 .*negative real axis") as err:
        to_continuous(model)
    text = str(err.value)
    assert "order" in text and "sample rate" in text
    with pytest.raises(ModelError, match="negative real axis"):
        to_continuous(model, method="foh")
    # Tustin has an equivalent for it (only z = -1 is refused)
    assert to_continuous(model, method="tustin").sample_time is None


def test_pole_at_origin_is_refused():
    model = StateSpaceModel(
        A=[[0.0, 0.0], [0.0, 0.5]], B=[[1.0], [1.0]], C=[[1.0, 1.0]], D=[[0.0]], sample_time=0.1
    )
    with pytest.raises(ModelError, match="z=0 is at the origin"):
        to_continuous(model)


def test_per_pole_mapping():
    # closed form: ln(0.5) / 0.1 = -6.931471805599453
    assert_allclose(pole_to_continuous(0.5, 0.1), -10 * math.log(2), rtol=1e-15)
    assert pole_to_continuous(-0.3, 0.1) is None
    assert pole_to_continuous(0.0, 0.1) is None
    s = poles_to_continuous([0.5, -0.3, 0.9j, 0.0], 0.1)
    assert_allclose(s[0], -10 * math.log(2), rtol=1e-15)
    assert np.isnan(s[1]) and np.isnan(s[3])
    # closed form: ln(0.9 j) = ln 0.9 + j pi/2
    assert_allclose(s[2], complex(math.log(0.9), math.pi / 2) / 0.1, rtol=1e-15)


def test_matched_pole_zero_siso():
    # Franklin, Powell & Workman, 3rd ed., Ch. 6 (matched pole-zero): for
    # G(s) = (s + 2) / ((s + 1)(s + 5)) the poles go to e^{-T}, e^{-5T}, the zero to
    # e^{-2T}, the zero at infinity to z = -1, and the DC gain 2/5 is kept
    A, B, C, D = signal.zpk2ss([-2.0], [-1.0, -5.0], 1.0)
    model = StateSpaceModel(A=A, B=B, C=C, D=D)
    d = to_discrete(model, T, method="matched")
    assert_allclose(np.sort(d.poles().real), np.sort(np.exp([-5 * T, -T])), rtol=1e-12)
    tf = ss_to_tf(d)
    zeros = np.sort(np.roots(tf.num[0][0]).real)
    assert_allclose(zeros, [-1.0, math.exp(-2 * T)], rtol=1e-10)
    assert_allclose(frequency_response(d, [0.0])[0, 0, 0].real, 0.4, rtol=1e-12)
    back = to_continuous(d, method="matched")
    assert rel_err(frequency_response(back, FREQS), frequency_response(model, FREQS)) < 1e-9


def test_results_keep_names_and_operating_point():
    op = OperatingPoint(inputs=[2.0], outputs=[50.0])
    model = random_stable(2, 3, 1, 1).with_changes(
        inputs=("pump",), outputs=("pressure",), output_units=("bar",), operating_point=op
    )
    for method in DISCRETIZE_METHODS:
        d = to_discrete(model, T, method=method)
        c = to_continuous(d, method=method)
        for out in (d, c):
            assert out.inputs == ("pump",) and out.output_units == ("bar",)
            assert_allclose(out.operating_point.outputs, [50.0], rtol=0)


def test_wrong_direction_and_bad_options():
    cont = random_stable(2, 2, 1, 1)
    disc = to_discrete(cont, T)
    with pytest.raises(ModelError, match="already discrete"):
        to_discrete(disc, T)
    with pytest.raises(ModelError, match="already continuous"):
        to_continuous(cont)
    with pytest.raises(OptionError, match="method must be one of"):
        to_discrete(cont, T, method="euler")
    with pytest.raises(OptionError, match="sample_time"):
        to_discrete(cont, 0.0)


@pytest.mark.parametrize("method", DISCRETIZE_METHODS)
def test_static_gain_passes_through(method):
    # closed form: a model without states is the same gain in both time domains
    static = StateSpaceModel(A=np.zeros((0, 0)), B=np.zeros((0, 2)), C=np.zeros((1, 0)),
                             D=[[2.0, -0.5]])
    d = to_discrete(static, T, method=method)
    assert_allclose(d.D, [[2.0, -0.5]], rtol=0)
    assert_allclose(to_continuous(d, method=method).D, [[2.0, -0.5]], rtol=0)


def test_matched_integrator_keeps_low_frequency_gain():
    # G(s) = 1/(s(s+1)), T = 0.5 s: matched pole-zero gives K (z+1)^2 / ((z-1)(z-e^-0.5))
    # (Franklin, Powell & Workman, 3rd ed., Ch. 6: zeros at infinity to z = -1); with
    # the gain matched at low frequency K = T (1 - e^-0.5) / 4 (closed form of the
    # low-frequency limit K * 4 / ((z-1)(1 - e^-0.5)) = 1/s with z - 1 = s T)
    A, B, C, D = signal.tf2ss([1.0], [1.0, 1.0, 0.0])
    tf = ss_to_tf(to_discrete(StateSpaceModel(A=A, B=B, C=C, D=D), 0.5, method="matched"))
    k = 0.5 * (1 - math.exp(-0.5)) / 4
    # the gain is matched at f = 1/(100 T), not at 0: agreement to ~1e-3
    assert_allclose(tf.num[0][0], k * np.array([1.0, 2.0, 1.0]), rtol=2e-3)
    assert_allclose(tf.den[0][0], [1.0, -(1 + math.exp(-0.5)), math.exp(-0.5)], rtol=1e-12)


# --------------------------------------------------------------------------- matched: the rule written out


def _matched_reference(zeros_s, poles_s, dc_gain, T):
    """The matched pole-zero rule on a transfer function, written independently of rigfit.

    Franklin, Powell & Workman, *Digital Control of Dynamic Systems*, 3rd ed., 1998, sec. 6.3.3:
    every pole and finite zero goes to ``z = exp(s T)``, every zero at infinity to ``z = -1``,
    and the gain makes the DC gains equal. numpy polynomials only.
    """
    zd = np.concatenate([np.exp(np.asarray(zeros_s, dtype=complex) * T), -np.ones(len(poles_s) - len(zeros_s))])
    pd = np.exp(np.asarray(poles_s, dtype=complex) * T)
    num, den = np.real(np.poly(zd)), np.real(np.poly(pd))
    return dc_gain * np.polyval(den, 1.0) / np.polyval(num, 1.0) * num, den


def _siso(zeros_s, poles_s):
    """State space of the unit-DC-gain transfer function with these zeros and poles (scipy.signal.zpk2ss)."""
    k = float(np.real(np.prod(np.negative(poles_s)) / np.prod(np.negative(zeros_s))))
    A, B, C, D = signal.zpk2ss(zeros_s, poles_s, k)
    return StateSpaceModel(A=A, B=B, C=C, D=D)


def _response_on_circle(num, den, w):
    z = np.exp(1j * w)
    return np.polyval(num, z) / np.polyval(den, z)


# relative degree 1 to 4; a resonance, real poles, slow and fast ones (invented plants)
_MATCHED_CASES = [
    ([-3.0], [-1.0, -8.0]),
    ([], [-1.0, -4.0]),
    ([], [-0.5 + 3j, -0.5 - 3j, -6.0]),
    ([-2.0], [-1.0, -3.0, -0.4 + 2j, -0.4 - 2j]),
    ([], [-1.0, -2.0, -3.0, -5.0]),
]


@pytest.mark.parametrize("zeros_s, poles_s", _MATCHED_CASES)
@pytest.mark.parametrize("T", [0.01, 0.05, 0.2])
def test_matched_equals_the_rule_written_out(zeros_s, poles_s, T):
    model = _siso(zeros_s, poles_s)
    d = to_discrete(model, T, method="matched")
    num, den = _matched_reference(zeros_s, poles_s, 1.0, T)
    w = np.linspace(0.0, 0.8 * np.pi, 60)
    got = frequency_response(d, w / (2 * np.pi * T))[:, 0, 0]
    # 1e-6: the polynomials of poles within 0.05 of z = 1 hold them to about 1e-8 (conditioning)
    assert rel_err(got, _response_on_circle(num, den, w)) < 1e-6


@pytest.mark.parametrize("zeros_s, poles_s", _MATCHED_CASES)
@pytest.mark.parametrize("T", [0.05, 0.2])
def test_matched_round_trip_with_zeros_at_minus_one(zeros_s, poles_s, T):
    # relative degree k puts a k-fold zero at z = -1, which the zero computation splits by about
    # eps**(1/k) (1e-8 for two, 6e-6 for three, 1e-4 for four); the way back must recognise it
    model = _siso(zeros_s, poles_s)
    back = to_continuous(to_discrete(model, T, method="matched"), method="matched")
    assert back.n_states == model.n_states
    assert_allclose(np.sort_complex(back.poles()), np.sort_complex(np.asarray(poles_s, dtype=complex)),
                    rtol=1e-6, atol=1e-6)  # the continuous poles, back through s = ln(z)/T
    freqs = np.array([0.0, 0.05, 0.2, 0.5, 1.0])
    assert rel_err(frequency_response(back, freqs), frequency_response(model, freqs)) < 1e-6


def test_cluster_at_minus_one_is_recognised_by_multiplicity():
    from ident.lti.discretize import _cluster_at_minus_one

    rng = np.random.default_rng(4)
    for k in range(1, 6):
        # np.roots of (z + 1)^k (z - 0.5) with coefficients rounded as a computation would
        coeffs = np.poly([-1.0] * k + [0.5]) * (1 + 1e-16 * rng.standard_normal(k + 2))
        roots = np.roots(coeffs)
        mask = _cluster_at_minus_one(roots)
        assert mask.sum() == k, k
        assert_allclose(roots[~mask].real, [0.5], rtol=1e-6)
    # a genuine zero near -1 is not absorbed into the cluster: the cluster's mean would move
    roots = np.concatenate([np.roots(np.poly([-1.0, -1.0, -1.0])), [-0.98]])
    assert _cluster_at_minus_one(roots).sum() == 3
    assert not _cluster_at_minus_one(np.array([-0.999, -0.9])).any()


def test_matched_refuses_several_inputs_or_outputs():
    A = np.diag([-1.0, -2.0, -3.0, -4.0])
    B = np.array([[1.0, 0.0], [0.0, 1.0], [1.0, 1.0], [0.5, -1.0]])
    C = np.array([[1.0, 0.0, 1.0, 0.0], [0.0, 1.0, 0.0, 1.0]])
    model = StateSpaceModel(A=A, B=B, C=C, D=np.zeros((2, 2)))  # 4 states, 2 x 2
    with pytest.raises(ModelError, match="2 input\\(s\\) and 2 output\\(s\\)") as info:
        to_discrete(model, T, method="matched")
    assert "zoh or tustin" in info.value.hint
    discrete = to_discrete(model, T, method="zoh")
    with pytest.raises(ModelError, match="matched pole-zero rule maps one transfer function"):
        to_continuous(discrete, method="matched")
    assert to_discrete(model, T, method="tustin").n_states == 4  # one state per pole


def test_matched_small_numerator_is_not_lost():
    # a stiff actuator: DC gain 1e-6 m/N, five poles, T = 0.05 s; the discrete numerator is about
    # 1e-12, below a rank tolerance set by the whole model (read as zero before channels were scaled)
    poles_s = [-1.0, -2.0, -3.0, -4.0, -5.0]
    A, B, C, D = signal.zpk2ss([], poles_s, 120.0 * 1e-6)  # DC gain 1e-6 (closed form: 120 = 5!)
    model = StateSpaceModel(A=A, B=B, C=C, D=D)
    d = to_discrete(model, 0.05, method="matched")
    assert d.n_states == 5
    num, den = _matched_reference([], poles_s, 1e-6, 0.05)
    w = np.linspace(0.0, 0.8 * np.pi, 40)
    assert rel_err(frequency_response(d, w / (2 * np.pi * 0.05))[:, 0, 0], _response_on_circle(num, den, w)) < 1e-6
    back = to_continuous(d, method="matched")
    assert rel_err(frequency_response(back, [0.0, 0.5]), frequency_response(model, [0.0, 0.5])) < 1e-6


def test_convert_matched_on_a_mimo_model_is_one_line(tmp_path, run_cli):
    from ident.io.modelfile import save_model

    model = StateSpaceModel(A=np.diag([0.9, 0.8]), B=np.eye(2), C=np.eye(2), D=np.zeros((2, 2)), sample_time=0.1)
    path = save_model(tmp_path / "m.json", model)
    result = run_cli("convert", path, "--to", "continuous", "--method", "matched")
    assert result.exit_code == 2
    assert result.stderr.startswith("error: the matched pole-zero rule maps one transfer function")
    assert "hint: use --method zoh or tustin" in result.stderr
