"""Prediction-error refinement of state-space models: gradients, monotone search, accuracy, calibrated uncertainty."""

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.errors import IdentificationError, OptionError
from ident.estimate import sensitivity as S
from ident.estimate.data import Experiment
from ident.estimate.refine import RefineOptions, fit_noise_gain, refine_state_space
from ident.estimate.subspace import SubspaceOptions, fit_subspace
from ident.lti.covariance import pole_covariance
from ident.lti.models import StateSpaceModel
from ident.lti.simulate import simulate


def _discrete(num, den, T):
    """ZOH equivalent of a continuous SISO transfer function (scipy.signal.cont2discrete)."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", signal.BadCoefficients)
        numd, dend, _ = signal.cont2discrete((num, den), T, method="zoh")
        A, B, C, D = signal.tf2ss(numd.ravel(), dend)
    return A, B, C, D


def _modes(model):
    """(f Hz, zeta) of every pole pair / real pole with s = ln(z)/T, sorted by frequency."""
    s = np.log(model.poles().astype(complex)) / model.sample_time
    s = s[s.imag >= 0]
    return sorted((abs(v) / (2 * np.pi), -v.real / abs(v)) for v in s)


# ---------------------------------------------------------------------------- gradients


@pytest.mark.parametrize("innovations", [False, True])
@pytest.mark.parametrize("modal", [True, False])
@pytest.mark.parametrize("block", [7, 1 << 16])
def test_jacobian_matches_central_differences(monkeypatch, innovations, modal, block):
    monkeypatch.setattr(S, "_DRIVE_BLOCK", block)  # [u, y] stacked a few samples at a time, or at once
    rng = np.random.default_rng(2)
    n, m, p = 3, 2, 2
    A = rng.standard_normal((n, n))
    A *= 0.9 / np.max(np.abs(np.linalg.eigvals(A)))
    B, C, D = rng.standard_normal((n, m)), rng.standard_normal((p, n)), rng.standard_normal((p, m))
    K = 0.1 * rng.standard_normal((n, p)) if innovations else np.zeros((n, p))
    theta = S.pack_theta(A, B, C, D, K)
    free = np.ones(theta.size, dtype=bool)
    if not innovations:
        free[-n * p:] = False
    u, y = rng.standard_normal((300, m)), rng.standard_normal((300, p))
    prob = S.PredictionProblem([(u, y)], (n, m, p), free, innovations, np.eye(p))
    Q = prob.coordinates(theta)
    x0 = rng.standard_normal(n)
    if not modal:
        monkeypatch.setattr(S, "MODAL_CONDITION", 0.0)
    chunks = [c for _, c in prob.jacobian_chunks(S.Point(theta, [x0]), Q)]
    J = np.concatenate([c[1] for c in chunks])
    Jx = np.concatenate([c[2] for c in chunks])
    h = 1e-6
    for k in range(Q.shape[1]):  # dyhat/dbeta = -de/dbeta, central differences
        fd = -(prob.errors(theta + h * Q[:, k], x0, u, y) - prob.errors(theta - h * Q[:, k], x0, u, y)) / (2 * h)
        assert_allclose(J[:, :, k], fd, atol=1e-6 * np.max(np.abs(fd)))  # differences: O(h^2) + rounding/h
    for i in range(n):
        dx = np.zeros(n)
        dx[i] = h
        fd = -(prob.errors(theta, x0 + dx, u, y) - prob.errors(theta, x0 - dx, u, y)) / (2 * h)
        assert_allclose(Jx[:, :, i], fd, atol=1e-6 * np.max(np.abs(fd)))


@pytest.mark.parametrize("block", [7, 1 << 16])
def test_innovations_errors_are_those_of_the_predictor_simulated_by_scipy(monkeypatch, block):
    # Ljung, System Identification, 2nd ed., eq. (4.86): the one-step predictor of the
    # innovations form, x[k+1] = (A - K C) x + (B - K D) u + K y, yhat = C x + D u,
    # simulated by scipy.signal.dlsim; the errors y - yhat must not depend on how many
    # samples of [u, y] are stacked at a time
    from scipy import signal

    monkeypatch.setattr(S, "_DRIVE_BLOCK", block)
    rng = np.random.default_rng(5)
    n, m, p = 3, 2, 2
    A = rng.standard_normal((n, n))
    A *= 0.8 / np.max(np.abs(np.linalg.eigvals(A)))
    B, C, D = rng.standard_normal((n, m)), rng.standard_normal((p, n)), rng.standard_normal((p, m))
    K = 0.1 * rng.standard_normal((n, p))
    theta = S.pack_theta(A, B, C, D, K)
    u, y = rng.standard_normal((500, m)), rng.standard_normal((500, p))
    x0 = rng.standard_normal(n)
    prob = S.PredictionProblem([(u, y)], (n, m, p), np.ones(theta.size, dtype=bool), True, np.eye(p))
    _, yhat, _ = signal.dlsim((A - K @ C, np.hstack([B - K @ D, K]), C, np.hstack([D, np.zeros((p, p))]), 1.0),
                              np.hstack([u, y]), x0=x0)
    assert_allclose(prob.errors(theta, x0, u, y), y - yhat, rtol=1e-10, atol=1e-12)


def test_local_coordinates_are_orthogonal_to_similarity_directions():
    rng = np.random.default_rng(4)
    n, m, p = 3, 1, 2
    theta = rng.standard_normal(n * n + n * m + p * n + p * m + n * p)
    free = np.ones(theta.size, dtype=bool)
    Q = S.local_coordinates(theta, n, m, p, free)
    # McKelvey et al. 2004: d = n(m + p) + m p + n p free directions remain for a generic point
    assert Q.shape[1] == n * (m + p) + m * p + n * p
    assert_allclose(Q.T @ Q, np.eye(Q.shape[1]), atol=1e-12)
    assert_allclose(Q.T @ S._gauge_tangent(theta, n, m, p), 0.0, atol=1e-12)


# ---------------------------------------------------------------------------- the search


def _plant(T=0.01):
    wn = 2 * np.pi * 3  # resonance 3 Hz, zeta 0.05, and a real pole at s = -2
    A, B, C, D = _discrete([2 * wn**2], np.polymul([1, 2 * 0.05 * wn, wn**2], [1, 2.0]), T)
    return StateSpaceModel(A=A, B=B, C=C, D=0 * D, sample_time=T)


def test_refinement_from_the_true_model_stays_there():
    true = _plant()
    u = np.random.default_rng(1).standard_normal((2000, 1))
    y = simulate(true, u)
    res = refine_state_space(true, Experiment(u, y))
    assert res.loss <= res.initial_loss * (1 + 1e-9)  # no step may raise the loss (rounding aside)
    # noise-free data: the truth is the minimum (closed form); poles unchanged to rounding level
    assert_allclose(np.sort_complex(res.model.poles()), np.sort_complex(true.poles()), atol=1e-9)
    assert res.error_variance[0] < 1e-20 * np.var(y)


def test_loss_never_increases_and_an_unstable_start_is_reflected():
    true = _plant()
    rng = np.random.default_rng(7)
    u = rng.standard_normal((4000, 1))
    y = simulate(true, u) + 0.05 * rng.standard_normal((4000, 1))
    start = true.with_changes(A=true.A + 0.03 * rng.standard_normal((3, 3)))
    assert np.max(np.abs(start.poles())) > 1.0  # this perturbation makes the start unstable
    res = refine_state_space(start, Experiment(u, y))
    assert np.all(np.diff(res.history) <= 1e-15 * res.history[0])
    assert np.max(np.abs(res.model.poles())) < 1.0
    assert res.converged
    # every pole within 4 of its own standard deviations of the truth (the covariance is checked
    # for calibration below)
    poles, cov = res.model.poles(), pole_covariance(res.model, res.covariance)
    for z0 in true.poles():
        k = int(np.argmin(np.abs(poles - z0)))
        d = np.array([poles[k].real - z0.real, poles[k].imag - z0.imag])
        sd = np.sqrt(np.diag(cov[k])) + 1e-300
        assert np.all(np.abs(d) <= 4 * sd + 1e-12)


def test_two_input_plant_with_nonminimum_phase_zero_and_coloured_noise():
    """Output-error data: refined modes within 2 % / 0.02 of the truth; the subspace start is not."""
    T = 0.01
    wn = 2 * np.pi * 5.0
    den = np.polymul([1, 2 * 0.1 * wn, wn**2], [1, 0.5])  # resonance 5 Hz, zeta 0.1; slow pole tau 2 s
    A1, B1, C1, _ = _discrete(np.polymul([-1 / 3.0, 1], [0.5 * wn**2]), den, T)  # zero at s = +3 (NMP)
    A2, B2, C2, _ = _discrete([0.2 * wn**2], den, T)
    # two inputs through the same modes: a 6-state block model, minimal 3-state form by subspace
    true = StateSpaceModel(A=np.block([[A1, np.zeros((3, 3))], [np.zeros((3, 3)), A2]]),
                           B=np.block([[B1, np.zeros((3, 1))], [np.zeros((3, 1)), B2]]),
                           C=np.hstack([C1, C2]), D=np.zeros((1, 2)), sample_time=T)
    truth = _modes(StateSpaceModel(A=A1, B=B1, C=C1, D=[[0.0]], sample_time=T))
    worse = []
    for seed in (11, 12, 13):
        rng = np.random.default_rng(seed)
        N = 20000  # the slow pole's standard deviation is then about 0.6 % (3 of them within 2 %)
        u = rng.standard_normal((N, 2))
        y0 = simulate(true, u)
        v = signal.lfilter([1.0], [1.0, -0.5], rng.standard_normal(N + 200))[200:, None]  # coloured noise
        y = y0 + 0.1 * np.std(y0) * v / np.std(v)
        start = fit_subspace(Experiment(u, y), T, SubspaceOptions(order=3)).model
        res = refine_state_space(start, Experiment(u, y))
        for (f, z), (f0, z0) in zip(_modes(res.model), truth, strict=True):
            assert abs(f - f0) <= 0.02 * f0 and abs(z - z0) <= 0.02  # the tolerance
        worse.append(max(max(abs(f - f0) / (0.02 * f0), abs(z - z0) / 0.02)
                         for (f, z), (f0, z0) in zip(_modes(start), truth, strict=True)))
    assert max(worse) > 1.0  # the unrefined subspace estimate misses the tolerance on some seed


def test_monte_carlo_intervals_of_an_output_error_model_are_calibrated():
    """200 experiments with white output noise: the 95 % intervals cover the truth 90-99 % of the time."""
    true = _plant()
    (f0, z0) = [fz for fz in _modes(true) if fz[0] > 1.0][0]
    rng = np.random.default_rng(20261204)
    hits_f = hits_z = 0
    runs = 200
    for _ in range(runs):
        u = rng.standard_normal((3000, 1))
        y0 = simulate(true, u)
        y = y0 + 0.5 * np.std(y0) * rng.standard_normal(y0.shape)
        start = fit_subspace(Experiment(u, y), 0.01, SubspaceOptions(order=3, weighting="moesp", horizon=20)).model
        res = refine_state_space(start, Experiment(u, y))
        from ident.assess.modes import mode_table

        table = mode_table(res.model, pole_covariance=pole_covariance(res.model, res.covariance))
        mode = [md for md in table.modes if md.natural_frequency_hz and md.natural_frequency_hz > 1.0][0]
        hits_f += abs(mode.natural_frequency_hz - f0) <= 1.96 * mode.natural_frequency_std_hz
        hits_z += abs(mode.damping_ratio - z0) <= 1.96 * mode.damping_ratio_std
    assert 0.90 <= hits_f / runs <= 0.99
    assert 0.90 <= hits_z / runs <= 0.99


# ---------------------------------------------------------------------------- innovations form


def test_noise_gain_of_a_known_innovations_model_is_recovered():
    rng = np.random.default_rng(5)
    A = np.array([[0.9, 0.2], [0.0, 0.7]])
    B = np.array([[1.0], [0.5]])
    C = np.array([[1.0, 0.0]])
    K = np.array([[0.5], [0.3]])
    true = StateSpaceModel(A=A, B=B, C=C, D=[[0.0]], sample_time=1.0, noise_gain=K)
    N = 20000
    u = rng.standard_normal((N, 1))
    e = 0.3 * rng.standard_normal((N, 1))
    # innovations form driven by u and e: x+ = A x + B u + K e, y = C x + e
    gen = StateSpaceModel(A=A, B=np.hstack([B, K]), C=C, D=[[0.0, 1.0]], sample_time=1.0)
    y = simulate(gen, np.hstack([u, e]))
    res = fit_noise_gain(true.with_changes(noise_gain=None), Experiment(u, y))
    # the Kalman gain of the generating model is K itself (closed form: innovations form);
    # within 4 standard deviations of the estimate
    sd = np.sqrt(np.diag(res.covariance.matrix()))[-2:]
    assert np.all(np.abs(res.model.noise_gain.ravel() - K.ravel()) <= 4 * sd)
    assert_allclose(res.error_variance, [0.09], rtol=0.05)  # innovations variance 0.3^2
    full = refine_state_space(true.with_changes(A=A * 0.98, noise_gain=K * 0.5), Experiment(u, y),
                              RefineOptions(noise_model="innovations"))
    assert full.covariance.method == "gauss"
    poles, cov = full.model.poles(), pole_covariance(full.model, full.covariance)
    for z0 in (0.7, 0.9):  # the generating poles (closed form), within 4 standard deviations
        k = int(np.argmin(np.abs(poles - z0)))
        assert abs(poles[k].real - z0) <= 4 * np.sqrt(cov[k, 0, 0])


def test_unstable_innovations_predictor_is_refused_and_options_are_checked():
    model = StateSpaceModel(A=[[0.5]], B=[[1.0]], C=[[1.0]], D=[[0.0]], sample_time=1.0, noise_gain=[[3.0]])
    u = np.random.default_rng(0).standard_normal((200, 1))
    with pytest.raises(IdentificationError, match="unstable"):
        refine_state_space(model, Experiment(u, u), RefineOptions(noise_model="innovations"))
    with pytest.raises(OptionError, match="noise_model"):
        RefineOptions(noise_model="bj")
    with pytest.raises(OptionError, match="step_tolerance"):
        RefineOptions(step_tolerance=0.0)
