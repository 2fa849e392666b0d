"""Tests of state space <-> transfer function conversion and scipy interop (ident.lti.convert)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import linalg, signal
from systems import SETTINGS, random_stable

from ident.errors import ModelError, OptionError
from ident.lti.analysis import frequency_response
from ident.lti.convert import (
    TF_TO_SS_FORMS,
    from_scipy,
    ss_from_scipy,
    ss_to_tf,
    tf_from_scipy,
    tf_to_ss,
    to_scipy,
)
from ident.lti.models import OperatingPoint, StateSpaceModel, TransferFunctionModel

# scipy's reference polynomials (ss2tf inside freqresp/dfreqresp/ss2zpk) warn about
# their own conditioning at high order; the accuracy is asserted explicitly instead
pytestmark = pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")



def tf_response(tf: TransferFunctionModel, f_hz: np.ndarray) -> np.ndarray:
    """Evaluate num/den channel by channel with numpy.polyval."""
    x = np.exp(2j * np.pi * f_hz * tf.sample_time) if tf.is_discrete else 2j * np.pi * f_hz
    out = np.empty((f_hz.size, tf.n_outputs, tf.n_inputs), dtype=complex)
    for i in range(tf.n_outputs):
        for j in range(tf.n_inputs):
            out[:, i, j] = np.polyval(tf.num[i][j], x) / np.polyval(tf.den[i][j], x)
    return out


FREQS = np.array([0.0, 0.05, 0.3, 1.0, 2.5, 4.0])  # Hz, below Nyquist of T = 0.1 s


def hankel_singular_values(model: StateSpaceModel) -> np.ndarray:
    """sqrt(eig(Wc Wo)) with scipy.linalg Lyapunov solvers, decreasing."""
    A, B, C = model.A, model.B, model.C
    if model.is_discrete:
        Wc = linalg.solve_discrete_lyapunov(A, B @ B.T)
        Wo = linalg.solve_discrete_lyapunov(A.T, C.T @ C)
    else:
        Wc = linalg.solve_continuous_lyapunov(A, -B @ B.T)
        Wo = linalg.solve_continuous_lyapunov(A.T, -C.T @ C)
    return np.sort(np.sqrt(np.abs(np.linalg.eigvals(Wc @ Wo))))[::-1]


def rel_err(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.max(np.abs(a - b)) / max(1e-300, np.max(np.abs(b))))


@SETTINGS
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 12),
    m=st.integers(1, 3),
    p=st.integers(1, 3),
    discrete=st.booleans(),
)
def test_ss_to_tf_matches_scipy_ss2tf(seed, n, m, p, discrete):
    dt = 0.5 if discrete else None
    model = random_stable(seed, n, m, p, dt)
    tf = ss_to_tf(model)
    for j in range(m):
        # reference: scipy.signal.ss2tf(A, B, C, D, input=j)
        num_ref, den_ref = signal.ss2tf(model.A, model.B, model.C, model.D, input=j)
        for i in range(p):
            # the denominator is monic of degree n; rounding grows with the order
            assert_allclose(tf.den[i][j], den_ref, rtol=1e-8, atol=1e-9)
            num = np.zeros(n + 1)
            num[n + 1 - tf.num[i][j].size :] = tf.num[i][j]
            scale = max(1.0, np.max(np.abs(num_ref[i])))
            # scipy's expansion det(zI - A + BC) - det(zI - A) loses ~1e-9 at order 12
            assert_allclose(num, num_ref[i], rtol=0, atol=1e-8 * scale)


@SETTINGS
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 12), discrete=st.booleans())
def test_tf_frequency_response_matches_scipy_freqresp(seed, n, discrete):
    # T = 0.5 s spreads the discrete poles over (0.08, 0.9); with T much smaller they
    # crowd near z = 1 and the coefficients (ours and scipy's) lose digits
    dt = 0.5 if discrete else None
    model = random_stable(seed, n, 2, 2, dt)
    tf = ss_to_tf(model)
    w = 2 * np.pi * FREQS
    for i in range(2):
        for j in range(2):
            sys = (model.A, model.B[:, [j]], model.C[[i]], model.D[[i]][:, [j]])
            # reference: scipy.signal.freqresp / dfreqresp on the state-space channel
            if discrete:
                _, h = signal.dfreqresp((*sys, dt), w=w * dt)
            else:
                _, h = signal.freqresp(sys, w=w)
            # scipy evaluates the discrete case through its own polynomials
            # (ss2tf), which carry ~1e-10 relative error at order 12
            assert rel_err(tf_response(tf, FREQS)[:, i, j], h) < (1e-8 if discrete else 1e-10)


def test_denominator_is_det_zi_minus_a_and_poles_are_eig():
    # standard result: den(z) = det(zI - A), so its roots are eig(A)
    # (Ogata, Modern Control Engineering, 5th ed., Section 9-2)
    model = random_stable(7, 6, 2, 2, 0.2)
    tf = ss_to_tf(model)
    for z in (0.3 + 0.4j, -1.2, 2.0 + 1.0j):
        det = np.linalg.det(z * np.eye(6) - model.A)
        for row in tf.den:
            for den in row:
                # rounding in a 6 x 6 determinant: 1e-12 relative
                assert_allclose(np.polyval(den, z), det, rtol=1e-12)
    roots = np.sort_complex(np.roots(tf.den[0][0]))
    # well-separated poles: roots agree to ~1e-10 (numpy.linalg.eigvals as oracle)
    assert_allclose(roots, np.sort_complex(np.linalg.eigvals(model.A)), rtol=1e-9, atol=1e-10)


def test_order_twenty_channel_is_accurate():
    # order 20, continuous, well-separated poles: the transfer function must match the
    # state-space frequency response (scipy.signal.freqresp) to rounding
    model = random_stable(2026, 20, 1, 1, None)
    tf = ss_to_tf(model)
    _, h = signal.freqresp((model.A, model.B, model.C, model.D), w=2 * np.pi * FREQS)
    # 1e-10: twenty factors of rounding, far below anything a rig cares about
    assert rel_err(tf_response(tf, FREQS)[:, 0, 0], h) < 1e-10


def test_zero_channel_and_static_gain():
    # closed form: input 2 reaches no state and has no feedthrough -> G[0][1] = 0
    model = StateSpaceModel(A=[[-1.0]], B=[[1.0, 0.0]], C=[[2.0]], D=[[0.0, 0.0]])
    tf = ss_to_tf(model)
    assert_allclose(tf.num[0][1], [0.0], atol=0)
    assert_allclose(tf.num[0][0], [2.0], rtol=1e-14)  # 2 / (s + 1), closed form
    static = StateSpaceModel(A=np.zeros((0, 0)), B=np.zeros((0, 1)), C=np.zeros((1, 0)), D=[[3.0]])
    tf = ss_to_tf(static)
    assert_allclose(tf.num[0][0], [3.0], rtol=0)
    assert_allclose(tf.den[0][0], [1.0], rtol=0)


def test_conversion_keeps_names_units_and_operating_point():
    op = OperatingPoint(inputs=[1.5], outputs=[20.0])
    model = StateSpaceModel(
        A=[[0.9]], B=[[1.0]], C=[[0.5]], D=[[0.0]], sample_time=0.01,
        inputs=["valve"], outputs=["flow"], input_units=["%"], output_units=["l/min"],
        operating_point=op,
    )
    for out in (ss_to_tf(model), tf_to_ss(ss_to_tf(model))):
        assert out.inputs == ("valve",) and out.outputs == ("flow",)
        assert out.input_units == ("%",) and out.output_units == ("l/min",)
        assert out.sample_time == 0.01
        assert_allclose(out.operating_point.outputs, [20.0], rtol=0)


def markov(model: StateSpaceModel, count: int) -> np.ndarray:
    out, M = [model.D], model.B
    for _ in range(count):
        out.append(model.C @ M)
        M = model.A @ M
    return np.array(out)


@SETTINGS
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 10), form=st.sampled_from(TF_TO_SS_FORMS))
def test_siso_tf_to_ss_matches_scipy_tf2ss(seed, n, form):
    rng = np.random.default_rng(seed)
    den = np.real(np.poly(np.exp(-rng.uniform(0.1, 2.0, n) + 0j)))
    num = rng.standard_normal(rng.integers(1, n + 2))
    tf = TransferFunctionModel(num=[[num]], den=[[den]], sample_time=1.0)
    ss = tf_to_ss(tf, form=form)
    assert ss.n_states == n
    # reference: scipy.signal.tf2ss (controllable canonical form); realisations
    # differ between forms, so compare Markov parameters D, CB, CAB, ...
    A, B, C, D = signal.tf2ss(num, den)
    ref = StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=1.0)
    scale = np.max(np.abs(markov(ref, 2 * n)))
    # companion forms: rounding of order 1e-12 relative over 2n steps
    assert_allclose(markov(ss, 2 * n), markov(ref, 2 * n), rtol=0, atol=1e-10 * scale)


@SETTINGS
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 12),
    m=st.integers(1, 3),
    p=st.integers(1, 3),
    discrete=st.booleans(),
)
def test_mimo_tf_to_ss_is_minimal_with_same_response(seed, n, m, p, discrete):
    if p == 1 and m == 1:
        return
    # discrete orders above 6 at T = 0.1 s have poles clustered near z = 1, where
    # the coefficients cannot carry a minimal structure (see tf_to_ss Notes)
    if discrete and n > 6:
        n = 6
    model = random_stable(seed, n, m, p, 0.1 if discrete else None)
    ss = tf_to_ss(ss_to_tf(model))
    # a random model is minimal, but some are nearly not: the reduction (relative
    # tolerance 1e-8) may drop a mode whose Hankel singular value is ~1e-12 of the
    # largest; every mode above 1e-6 of it must stay (scipy Lyapunov Gramians)
    hsv = hankel_singular_values(model)
    assert np.sum(hsv > 1e-6 * hsv[0]) <= ss.n_states <= n
    # oracle: the original state-space frequency response (checked against scipy
    # in test_analysis); 1e-8 relative covers the coefficient rounding
    assert rel_err(frequency_response(ss, FREQS), frequency_response(model, FREQS)) < 1e-8


def test_mimo_common_factor_is_removed():
    # closed form: [1/(s+1), 2/(s+1); 3/(s+1), 6/(s+1)] = [1; 3] [1, 2] / (s+1) has
    # McMillan degree 1
    den = [1.0, 1.0]
    tf = TransferFunctionModel(num=[[[1.0], [2.0]], [[3.0], [6.0]]], den=[[den, den], [den, den]])
    ss = tf_to_ss(tf)
    assert ss.n_states == 1
    assert_allclose(ss.poles(), [-1.0], rtol=1e-12)


def test_tf_to_ss_rejects_bad_form():
    tf = TransferFunctionModel(num=[[[1.0]]], den=[[[1.0, 2.0]]])
    with pytest.raises(OptionError, match="form must be one of"):
        tf_to_ss(tf, form="jordan")


def test_scipy_round_trip_state_space():
    model = random_stable(11, 4, 2, 3, 0.05)
    sys = to_scipy(model)
    assert isinstance(sys, signal.StateSpace) and sys.dt == 0.05
    back = ss_from_scipy(sys, inputs=["a", "b"])
    assert back.inputs == ("a", "b") and back.sample_time == 0.05
    # exact copy of the matrices: nothing is computed
    assert_allclose(back.A, model.A, rtol=0, atol=0)
    assert_allclose(back.D, model.D, rtol=0, atol=0)
    cont = to_scipy(random_stable(11, 3, 1, 1, None))
    assert cont.dt is None
    assert ss_from_scipy(cont).sample_time is None
    assert isinstance(from_scipy(cont), StateSpaceModel)


def test_scipy_round_trip_transfer_function():
    tf = TransferFunctionModel(num=[[[2.0, 1.0]]], den=[[[1.0, -1.5, 0.7]]], sample_time=0.1)
    sys = to_scipy(tf)
    assert isinstance(sys, signal.TransferFunction)
    # scipy keeps the coefficients as given (descending powers of z)
    assert_allclose(sys.num, [2.0, 1.0], rtol=0)
    back = tf_from_scipy(sys)
    assert_allclose(back.den[0][0], [1.0, -1.5, 0.7], rtol=0)
    assert back.sample_time == 0.1
    assert isinstance(from_scipy(sys), TransferFunctionModel)
    # scipy.signal.TransferFunction holds one channel only
    mimo = TransferFunctionModel(num=[[[1.0], [2.0]]], den=[[[1.0, 1.0], [1.0, 2.0]]])
    with pytest.raises(ModelError, match="one channel"):
        to_scipy(mimo)


def test_uncancelled_denominator_keeps_the_hidden_mode_in_the_numerator():
    # closed form: A = diag(-1, -2), B = [1, 0]^T, C = [1, 1]: G = 1/(s+1), written
    # over det(sI - A) = (s+1)(s+2) as (s+2)/((s+1)(s+2))
    model = StateSpaceModel(A=[[-1.0, 0.0], [0.0, -2.0]], B=[[1.0], [0.0]], C=[[1.0, 1.0]],
                            D=[[0.0]])
    tf = ss_to_tf(model)
    assert_allclose(tf.den[0][0], [1.0, 3.0, 2.0], rtol=1e-14)
    assert_allclose(tf.num[0][0], [1.0, 2.0], rtol=1e-12)
