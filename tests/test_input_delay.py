"""Input delays as shift-register states: the delayed model equals the model driven by shifted inputs."""

import numpy as np
from numpy.testing import assert_allclose
from scipy import signal

from ident.lti.covariance import ParameterCovariance, frequency_response_covariance, theta_layout
from ident.lti.input_delay import delayed_covariance, with_input_delays
from ident.lti.models import StateSpaceModel
from ident.lti.simulate import simulate


def _model(rng, n=3, m=2, p=2):
    A = rng.standard_normal((n, n))
    A *= 0.8 / np.max(np.abs(np.linalg.eigvals(A)))
    return StateSpaceModel(A=A, B=rng.standard_normal((n, m)), C=rng.standard_normal((p, n)),
                           D=rng.standard_normal((p, m)), sample_time=0.5,
                           noise_gain=rng.standard_normal((n, p)))


def test_delayed_model_equals_simulation_with_shifted_inputs():
    rng = np.random.default_rng(0)
    model = _model(rng)
    u = rng.standard_normal((60, 2))
    delays = (0, 3)
    shifted = np.vstack([np.zeros((3, 2)), u[:-3]])
    shifted[:, 0] = u[:, 0]
    expected = simulate(model, shifted)  # shifting the input column by hand (closed form)
    got = simulate(with_input_delays(model, delays), u)
    assert_allclose(got, expected, atol=1e-12)
    big = with_input_delays(model, delays)
    assert big.n_states == 6
    assert_allclose(np.sort(np.abs(big.poles()))[:3], 0.0)  # three register poles at z = 0


def test_delayed_frequency_response_is_the_delay_times_the_response():
    rng = np.random.default_rng(1)
    model = _model(rng)
    big = with_input_delays(model, (2, 1))
    w = np.array([0.1, 0.9, 2.0])
    for i in range(2):
        for j, dj in enumerate((2, 1)):
            # scipy.signal.dfreqresp of each channel; d samples of delay multiply by z^-d
            def resp(mdl, i=i, j=j):
                sys = signal.dlti(mdl.A, mdl.B[:, [j]], mdl.C[[i]], mdl.D[[i]][:, [j]], dt=0.5)
                return signal.dfreqresp(sys, w=w)[1]

            h0, h1 = resp(model), resp(big)
            assert_allclose(h1, h0 * np.exp(-1j * w * dj), rtol=1e-10)


def test_delayed_covariance_gives_the_same_response_uncertainty():
    rng = np.random.default_rng(2)
    model = _model(rng)
    q = theta_layout(3, 2, 2)["K"].stop
    cov = ParameterCovariance(1e-2 * rng.standard_normal((q, 4)), "gauss", 3, 2, 2)
    delays = (1, 2)
    big = with_input_delays(model, delays)
    f = np.array([0.05, 0.3])
    _, c0 = frequency_response_covariance(model, cov, f)
    g1, c1 = frequency_response_covariance(big, delayed_covariance(model, cov, delays), f)
    # a pure delay rotates G by z^-d: |G| and the covariance's eigenvalues are unchanged
    assert_allclose(np.linalg.eigvalsh(c1), np.linalg.eigvalsh(c0), rtol=1e-9, atol=1e-15)
