"""First-order propagation of a state-space parameter covariance, against finite differences."""

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.errors import OptionError
from ident.lti.covariance import (
    ParameterCovariance,
    dc_gain_std,
    frequency_response_covariance,
    magnitude_phase_std,
    pole_covariance,
    response_band,
    theta_layout,
)
from ident.lti.models import StateSpaceModel


def _model(rng, n=3, m=2, p=2):
    A = rng.standard_normal((n, n))
    A *= 0.8 / np.max(np.abs(np.linalg.eigvals(A)))
    return StateSpaceModel(A=A, B=rng.standard_normal((n, m)), C=rng.standard_normal((p, n)),
                           D=rng.standard_normal((p, m)), sample_time=0.1)


def _theta(model):
    K = np.zeros((model.n_states, model.n_outputs))
    return np.concatenate([model.A.ravel(), model.B.ravel(), model.C.ravel(), model.D.ravel(), K.ravel()])


def _from_theta(theta, n, m, p):
    lay = theta_layout(n, m, p)
    return StateSpaceModel(A=theta[lay["A"]].reshape(n, n), B=theta[lay["B"]].reshape(n, m),
                           C=theta[lay["C"]].reshape(p, n), D=theta[lay["D"]].reshape(p, m), sample_time=0.1)


def _numeric_jacobian(fun, theta, h=1e-7):
    cols = [(fun(theta + h * e) - fun(theta - h * e)) / (2 * h) for e in np.eye(theta.size)]
    return np.stack(cols, axis=-1)


def test_pole_covariance_matches_differentiated_eigenvalues():
    rng = np.random.default_rng(0)
    model = _model(rng)
    n, m, p = 3, 2, 2
    q = theta_layout(n, m, p)["K"].stop
    L = 1e-3 * rng.standard_normal((q, 5))
    cov = ParameterCovariance(L, "gauss", n, m, p)
    poles = model.poles()

    def pole_parts(theta):
        z = _from_theta(theta, n, m, p).poles()
        z = np.array([z[np.argmin(np.abs(z - p0))] for p0 in poles])  # follow each pole
        return np.stack([z.real, z.imag], axis=-1)

    J = _numeric_jacobian(pole_parts, _theta(model))  # numpy.linalg.eigvals, differentiated numerically
    expected = np.einsum("kaq,qr,kbr->kab", J, cov.matrix(), J)
    got = pole_covariance(model, cov)
    for k in range(n):
        assert_allclose(got[k], expected[k], rtol=1e-5, atol=1e-14)


def test_frequency_response_covariance_matches_finite_differences_and_scipy_response():
    rng = np.random.default_rng(1)
    model = _model(rng)
    n, m, p = 3, 2, 2
    q = theta_layout(n, m, p)["K"].stop
    cov = ParameterCovariance(1e-3 * rng.standard_normal((q, 6)), "robust", n, m, p)
    f = np.array([0.0, 0.7, 2.3])
    G, C = frequency_response_covariance(model, cov, f)
    for i in range(p):
        for j in range(m):
            # scipy.signal.dfreqresp of the (i, j) channel
            _, h = signal.dfreqresp(signal.dlti(model.A, model.B[:, [j]], model.C[[i]], model.D[[i]][:, [j]], dt=0.1),
                                    w=2 * np.pi * f * 0.1)
            assert_allclose(G[:, i, j], h, rtol=1e-10)

    def response_parts(theta):
        mdl = _from_theta(theta, n, m, p)
        z = np.exp(2j * np.pi * f * 0.1)
        out = np.array([mdl.C @ np.linalg.solve(zz * np.eye(n) - mdl.A, mdl.B) + mdl.D for zz in z])
        return np.stack([out.real, out.imag], axis=-1)

    J = _numeric_jacobian(response_parts, _theta(model))
    expected = np.einsum("fijaq,qr,fijbr->fijab", J, cov.matrix(), J)
    assert_allclose(C, expected, rtol=1e-5, atol=1e-14)
    mag_sd, phase_sd = magnitude_phase_std(G, C)
    assert mag_sd.shape == (3, p, m) and np.all(mag_sd >= 0) and np.all(phase_sd >= 0)
    assert_allclose(dc_gain_std(model, cov), np.sqrt(C[0, :, :, 0, 0]))


def test_covariance_must_match_the_model():
    rng = np.random.default_rng(2)
    model = _model(rng)
    with pytest.raises(OptionError, match="rows"):
        ParameterCovariance(np.zeros((3, 1)), "gauss", 3, 2, 2)
    other = ParameterCovariance(np.zeros((theta_layout(2, 2, 2)["K"].stop, 1)), "gauss", 2, 2, 2)
    with pytest.raises(OptionError, match="belongs to a model"):
        pole_covariance(model, other)
    with pytest.raises(OptionError, match="method"):
        ParameterCovariance(np.zeros((theta_layout(3, 2, 2)["K"].stop, 1)), "guess", 3, 2, 2)


def test_noise_states_are_left_out_of_the_poles():
    A = np.diag([0.9, 0.5])
    model = StateSpaceModel(A=A, B=[[1.0], [0.0]], C=[[1.0, 1.0]], D=[[0.0]], sample_time=1.0,
                            noise_gain=[[0.0], [0.4]], noise_states=1)
    assert_allclose(model.poles(), [0.9])
    assert_allclose(model.noise_poles(), [0.5])
    assert model.without_noise_model().n_states == 1
    with pytest.raises(OptionError, match="noise states"):
        StateSpaceModel(A=A, B=[[1.0], [1.0]], C=[[1.0, 1.0]], D=[[0.0]], sample_time=1.0,
                        noise_gain=[[0.0], [0.4]], noise_states=1)
    with pytest.raises(OptionError, match="noise_gain"):
        StateSpaceModel(A=A, B=[[1.0], [0.0]], C=[[1.0, 1.0]], D=[[0.0]], sample_time=1.0, noise_states=1)


def test_response_band_covers_sampled_responses_at_its_level():
    # Monte Carlo with numpy's normal sampler: theta drawn from N(theta_hat, L L^T), the response computed
    # directly as C (zI - A)^-1 B + D; in the linear regime (small covariance) the 95 % gain band holds
    # about 95 % of the draws and the chi-square(2) circle at least 95 % (common practice, no source).
    rng = np.random.default_rng(3)
    model = _model(rng, n=2, m=1, p=1)
    n, m, p = 2, 1, 1
    q = theta_layout(n, m, p)["K"].stop
    cov = ParameterCovariance(2e-3 * rng.standard_normal((q, 4)), "gauss", n, m, p)
    f = np.array([0.3, 1.1, 3.0])
    band = response_band(model, cov, f, 0.95)
    theta = _theta(model)
    draws = theta[:, None] + cov.factor @ rng.standard_normal((4, 4000))
    z = np.exp(2j * np.pi * f * 0.1)
    G = np.empty((4000, f.size), dtype=complex)
    for k in range(4000):
        mdl = _from_theta(draws[:, k], n, m, p)
        G[k] = [(mdl.C @ np.linalg.solve(zz * np.eye(n) - mdl.A, mdl.B) + mdl.D)[0, 0] for zz in z]
    inside = (np.abs(G) >= band.magnitude_low[:, 0, 0]) & (np.abs(G) <= band.magnitude_high[:, 0, 0])
    assert np.all(np.abs(inside.mean(axis=0) - 0.95) < 0.02)
    in_circle = np.abs(G - band.response[:, 0, 0]) <= band.radius[:, 0, 0]
    assert np.all(in_circle.mean(axis=0) >= 0.94)
    with pytest.raises(OptionError, match="confidence"):
        response_band(model, cov, f, 1.5)
