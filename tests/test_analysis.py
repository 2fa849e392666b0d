"""Tests of zeros, DC gain, frequency, step and impulse responses (ident.lti.analysis)."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import linalg, signal
from systems import SETTINGS, random_stable

from ident.errors import OptionError
from ident.lti.analysis import (
    TimeResponse,
    dc_gain,
    frequency_response,
    impulse_response,
    step_response,
    transmission_zeros,
)
from ident.lti.models import StateSpaceModel

# scipy's reference polynomials (ss2tf inside freqresp/dfreqresp/ss2zpk) warn about
# their own conditioning at high order; the accuracy is asserted explicitly instead
pytestmark = pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")



def assert_same_roots(actual, desired, rtol):
    """Match each desired root to a distinct nearest actual root (order-free)."""
    actual = list(np.asarray(actual, dtype=complex))
    assert len(actual) == len(desired)
    for r in desired:
        k = int(np.argmin([abs(a - r) for a in actual]))
        assert abs(actual[k] - r) <= rtol * max(1.0, abs(r)), (actual[k], r)
        actual.pop(k)


def channel(model: StateSpaceModel, i: int, j: int):
    return model.A, model.B[:, [j]], model.C[[i]], model.D[[i]][:, [j]]


# ---------------------------------------------------------------- zeros


@SETTINGS
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 7))
def test_siso_zeros_match_scipy_ss2zpk(seed, n):
    model = random_stable(seed, n, 1, 1, None)
    # reference: scipy.signal.ss2zpk (roots of the ss2tf numerator; reliable at low order)
    z_ref, _, _ = signal.ss2zpk(model.A, model.B, model.C, model.D)
    # ss2zpk's roots carry ~1e-10 relative error; zeros are matched one to one
    assert_same_roots(transmission_zeros(model), z_ref, rtol=1e-7)


@SETTINGS
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 12), m=st.integers(1, 3))
def test_square_zeros_match_rosenbrock_generalised_eigenvalues(seed, n, m):
    model = random_stable(seed, n, m, m, 0.2)
    rng = np.random.default_rng(seed)
    # an invertible D: the pencil's infinite eigenvalues are then simple and QZ
    # separates them cleanly, so scipy.linalg.eig(M, E) is a sound reference
    model = model.with_changes(D=rng.standard_normal((m, m)) + 3 * np.eye(m))
    M = np.block([[model.A, model.B], [model.C, model.D]])
    E = linalg.block_diag(np.eye(n), np.zeros((m, m)))
    w = linalg.eigvals(M, E)
    w = w[np.isfinite(w)]
    z = transmission_zeros(model)
    assert z.size == w.size == n
    # simple zeros of a random system: ~1e-10 relative agreement of two eigensolvers
    assert_same_roots(z, w, rtol=1e-7)


def test_zero_at_high_relative_degree_has_no_spurious_zeros():
    # closed form: G(s) = (s + 2) / ((s+1)(s+3)(s+4)(s+5)(s+6)), relative degree 4;
    # the only finite zero is -2 (a plain QZ on the pencil gives large spurious ones)
    A, B, C, D = signal.zpk2ss([-2.0], [-1.0, -3.0, -4.0, -5.0, -6.0], 7.0)
    z = transmission_zeros(StateSpaceModel(A=A, B=B, C=C, D=D))
    assert_allclose(z, [-2.0], rtol=1e-10)


def tall_model() -> StateSpaceModel:
    """y1 = (s+2)/((s+1)(s+3)) u, y2 = y1 / (s+4): common zero -2 (closed form)."""
    A1, B1, C1, D1 = signal.zpk2ss([-2.0], [-1.0, -3.0], 1.0)
    A = np.zeros((3, 3))
    A[:2, :2] = A1
    A[2, :2] = C1[0]
    A[2, 2] = -4.0
    B = np.vstack([B1, [[0.0]]])
    C = np.array([[*C1[0], 0.0], [0.0, 0.0, 1.0]])
    return StateSpaceModel(A=A, B=B, C=C, D=np.zeros((2, 1)))


def test_non_square_zeros():
    # closed form: the only s where both outputs vanish for some input is s = -2
    tall = tall_model()
    assert_allclose(transmission_zeros(tall), [-2.0], rtol=1e-10)
    # the dual (transposed) system has the same zeros
    fat = StateSpaceModel(A=tall.A.T, B=tall.C.T, C=tall.B.T, D=tall.D.T)
    assert_allclose(transmission_zeros(fat), [-2.0], rtol=1e-10)


# ---------------------------------------------------------------- DC gain


@SETTINGS
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 12), discrete=st.booleans())
def test_dc_gain_closed_form(seed, n, discrete):
    model = random_stable(seed, n, 2, 3, 0.1 if discrete else None)
    A, B, C, D = model.A, model.B, model.C, model.D
    if discrete:
        ref = C @ np.linalg.solve(np.eye(n) - A, B) + D  # closed form G(1)
    else:
        ref = D - C @ np.linalg.solve(A, B)  # closed form G(0)
    # one linear solve: rounding times the condition number (~1e2 here)
    assert_allclose(dc_gain(model), ref, rtol=1e-9, atol=1e-12)


def test_dc_gain_integrator():
    # closed form: 1/(s(s+1)) grows without bound in a positive ramp -> +inf;
    # -2/s -> -inf
    A, B, C, D = signal.zpk2ss([], [0.0, -1.0], 1.0)
    assert dc_gain(StateSpaceModel(A=A, B=B, C=C, D=D)).tolist() == [[math.inf]]
    neg = StateSpaceModel(A=[[0.0]], B=[[1.0]], C=[[-2.0]], D=[[0.0]])
    assert dc_gain(neg).tolist() == [[-math.inf]]
    # discrete integrator T / (z - 1) (closed form, Euler) -> +inf
    disc = StateSpaceModel(A=[[1.0]], B=[[0.1]], C=[[1.0]], D=[[0.0]], sample_time=0.1)
    assert dc_gain(disc).tolist() == [[math.inf]]


def test_dc_gain_integrator_only_where_it_acts():
    # output 1 = integral of u1 (closed form +inf); output 2 = 3 u2 / (s + 2) (gain 1.5)
    # and the integrator state is not seen from u2 -> finite gain in that channel
    model = StateSpaceModel(
        A=[[0.0, 0.0], [0.0, -2.0]],
        B=[[1.0, 0.0], [0.0, 3.0]],
        C=[[1.0, 0.0], [0.0, 1.0]],
        D=[[0.0, 0.0], [0.0, 0.0]],
    )
    g = dc_gain(model)
    assert g[0, 0] == math.inf
    assert_allclose(g[1, 1], 1.5, rtol=1e-12)  # closed form 3/2
    assert g[0, 1] == 0.0 and g[1, 0] == 0.0  # closed form: no path


# ---------------------------------------------------------------- frequency response


@SETTINGS
@given(
    seed=st.integers(0, 2**32 - 1),
    n=st.integers(1, 12),
    m=st.integers(1, 2),
    p=st.integers(1, 2),
    discrete=st.booleans(),
)
def test_frequency_response_matches_scipy(seed, n, m, p, discrete):
    dt = 0.5 if discrete else None
    model = random_stable(seed, n, m, p, dt)
    f = np.linspace(0.0, 0.99, 40)  # Hz, up to just below the Nyquist of T = 0.5 s
    G = frequency_response(model, f)
    assert G.shape == (40, p, m)
    for i in range(p):
        for j in range(m):
            # reference: scipy.signal.freqresp / dfreqresp (through scipy's ss2tf
            # polynomials, which carry ~1e-10 relative error at order 12)
            if discrete:
                _, h = signal.dfreqresp((*channel(model, i, j), dt), w=2 * np.pi * f * dt)
            else:
                _, h = signal.freqresp(channel(model, i, j), w=2 * np.pi * f)
            assert_allclose(G[:, i, j], h, rtol=1e-8, atol=1e-8 * np.max(np.abs(h)))


def test_frequency_response_against_direct_solve_many_frequencies():
    # oracle: numpy.linalg.solve of (zI - A) X = B at every point (closed form of G)
    model = random_stable(5, 30, 2, 2, 0.01)
    f = np.linspace(0, 50, 3001)
    G = frequency_response(model, f)
    z = np.exp(2j * np.pi * f * 0.01)
    X = np.linalg.solve(z[:, None, None] * np.eye(30) - model.A, model.B.astype(complex))
    ref = np.einsum("pn,fnm->fpm", model.C, X) + model.D
    # both backward stable: agreement to ~1e-12 relative
    assert_allclose(G, ref, rtol=1e-10, atol=1e-10 * np.max(np.abs(ref)))


def test_frequency_response_rejects_negative_frequency():
    model = random_stable(1, 2, 1, 1, None)
    with pytest.raises(OptionError, match="frequencies_hz"):
        frequency_response(model, [1.0, -2.0])


# ---------------------------------------------------------------- time responses


@SETTINGS
@given(seed=st.integers(0, 2**32 - 1), n=st.integers(1, 12), m=st.integers(1, 2))
def test_discrete_step_matches_scipy_dlsim(seed, n, m):
    model = random_stable(seed, n, m, 2, 0.2)
    resp = step_response(model, n_samples=60)
    assert isinstance(resp, TimeResponse) and resp.values.shape == (60, 2, m)
    assert_allclose(resp.time, 0.2 * np.arange(60), rtol=1e-15)
    for j in range(m):
        u = np.zeros((60, m))
        u[:, j] = 1.0
        # reference: scipy.signal.dlsim with a unit step on input j
        _, y, _ = signal.dlsim((model.A, model.B, model.C, model.D, 0.2), u)
        # plain recursion of 60 steps: rounding ~1e-13 relative
        assert_allclose(resp.values[:, :, j], y, rtol=1e-9, atol=1e-10)


def test_discrete_impulse_matches_scipy_dimpulse():
    model = random_stable(3, 5, 1, 1, 0.1)
    resp = impulse_response(model, n_samples=40)
    # reference: scipy.signal.dimpulse (unit pulse at sample 0)
    _, (y,) = signal.dimpulse((model.A, model.B, model.C, model.D, 0.1), n=40)
    assert_allclose(resp.values[:, 0, 0], y[:, 0], rtol=1e-10, atol=1e-12)


def test_continuous_step_matches_scipy_step_and_ends_at_dc_gain():
    # closed form: 2 wn^2 / (s^2 + 2 zeta wn s + wn^2), wn = 3 rad/s, zeta = 0.4, gain 2
    wn, zeta = 3.0, 0.4
    A, B, C, D = signal.tf2ss([2 * wn**2], [1.0, 2 * zeta * wn, wn**2])
    model = StateSpaceModel(A=A, B=B, C=C, D=D)
    resp = step_response(model, n_samples=501, duration_s=10.0)
    assert_allclose(resp.time[-1], 10.0, rtol=1e-14)
    # reference: scipy.signal.step on the same grid
    _, y = signal.step((A, B, C, D), T=resp.time)
    assert_allclose(resp.values[:, 0, 0], y, rtol=1e-7, atol=1e-9)
    # closed form second-order step: 2 (1 - e^{-zeta wn t} (cos wd t + zeta/sqrt(1-zeta^2) sin wd t))
    t = resp.time
    wd = wn * math.sqrt(1 - zeta**2)
    exact = 2 * (1 - np.exp(-zeta * wn * t) * (np.cos(wd * t) + zeta / math.sqrt(1 - zeta**2) * np.sin(wd * t)))
    # exact sampling of the continuous response: rounding only
    assert_allclose(resp.values[:, 0, 0], exact, rtol=0, atol=1e-11)
    # default duration covers the settling: the end is within 1e-3 of the DC gain 2
    auto = step_response(model)
    assert abs(auto.values[-1, 0, 0] - 2.0) < 1e-3


def test_continuous_impulse_closed_form():
    # closed form: G(s) = 1 / (s + 2) -> h(t) = exp(-2 t)
    model = StateSpaceModel(A=[[-2.0]], B=[[1.0]], C=[[1.0]], D=[[0.0]])
    resp = impulse_response(model, n_samples=101, duration_s=3.0)
    assert_allclose(resp.values[:, 0, 0], np.exp(-2 * resp.time), rtol=1e-12)


def test_time_response_options_are_checked():
    model = random_stable(1, 2, 1, 1, 0.1)
    with pytest.raises(OptionError, match="not both"):
        step_response(model, n_samples=10, duration_s=1.0)
    with pytest.raises(OptionError, match="n_samples"):
        step_response(model, n_samples=1)
    # duration 1 s at T = 0.1 s: samples 0 .. 10 (closed form)
    assert step_response(model, duration_s=1.0).time.size == 11


def test_channel_zeros_equal_scipy_ss2zpk():
    from ident.lti.analysis import channel_zeros

    model = random_stable(7, 4, 2, 3, 0.1)
    zeros = channel_zeros(model)
    for j in range(2):
        for i in range(3):
            # reference: scipy.signal.ss2zpk on the single channel (i, j)
            want, _, _ = signal.ss2zpk(model.A, model.B[:, j:j + 1], model.C[i:i + 1], model.D[i:i + 1, j:j + 1])
            assert_same_roots(zeros[i][j], np.sort_complex(want), rtol=1e-7)
    silent = model.with_changes(C=np.zeros((3, 4)), D=np.zeros((3, 2)))
    assert channel_zeros(silent)[0][0] is None  # identically zero channel: zeros undefined
