"""Pole covariance of ARX models: Jacobian against numpy.roots, covariance against Monte Carlo."""

from __future__ import annotations

import json

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal
from scipy.optimize import linear_sum_assignment

from ident.assess.modes import mode_table
from ident.errors import OptionError
from ident.estimate.arx import ArxOptions, fit_arx
from ident.estimate.data import Experiment
from ident.estimate.uncertainty import (
    arx_pole_covariance,
    pole_covariance_from_list,
    pole_covariance_to_list,
    root_covariance,
    root_jacobian,
)
from ident.lti.models import StateSpaceModel

#: ARX(2,2) test system A(q) = 1 - 1.5 q^-1 + 0.7 q^-2 (poles 0.75 +- 0.371j, closed form),
#: B(q) = q^-1 + 0.5 q^-2. Invented for these tests.
A_TRUE = np.array([1.0, -1.5, 0.7])
B_TRUE = np.array([0.0, 1.0, 0.5])


def _match(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Indices j so that b[j] pairs with a[k] (minimum total distance)."""
    _, cols = linear_sum_assignment(np.abs(a[:, None] - b[None, :]))
    return cols


def _simulate(seed: int, n: int = 2000, noise: float = 0.2) -> Experiment:
    rng = np.random.default_rng(seed)
    u = rng.standard_normal(n)
    e = noise * rng.standard_normal(n)
    # ARX structure: A y = B u + e, so the noise is filtered by 1/A
    y = signal.lfilter(B_TRUE, A_TRUE, u) + signal.lfilter([1.0], A_TRUE, e)
    return Experiment(u=u[:, None], y=y[:, None])


@pytest.mark.parametrize(
    "coeffs",
    [
        [-1.5, 0.7],  # complex pair
        [-1.2, 0.35],  # two real roots 0.7 and 0.5 (closed form)
        [-2.1, 1.9, -0.8, 0.2],  # mixed, fourth order
        [0.4],  # one real root at -0.4
    ],
)
def test_jacobian_matches_finite_differences_of_numpy_roots(coeffs):
    roots, jac = root_jacobian(coeffs)
    # numpy as the reference: the roots are numpy.roots of [1, a_1, ..., a_na]
    assert_allclose(np.sort_complex(roots), np.sort_complex(np.roots([1.0, *coeffs])), rtol=1e-12)
    h = 1e-6
    for k in range(len(coeffs)):
        up = np.array(coeffs, dtype=float)
        dn = up.copy()
        up[k] += h
        dn[k] -= h
        r_up = np.roots([1.0, *up])
        r_dn = np.roots([1.0, *dn])
        fd = (r_up[_match(roots, r_up)] - r_dn[_match(roots, r_dn)]) / (2 * h)
        # central difference: truncation O(h^2) ~ 1e-12 times third derivatives of order 1e2,
        # round-off ~ eps / h ~ 1e-10
        assert_allclose(jac[:, k], fd, rtol=1e-6, atol=1e-7)


def test_first_order_root_closed_form():
    # A(z) = z + a1: z = -a1, dz/da1 = -1, Var(z) = Var(a1) (closed form)
    roots, cov = root_covariance([-0.9], [[0.04]])
    assert_allclose(roots, [0.9], rtol=1e-15)
    assert_allclose(cov[0], [[0.04, 0.0], [0.0, 0.0]], rtol=1e-14)


def test_real_roots_stay_on_the_real_axis():
    roots, cov = root_covariance([-1.2, 0.35], np.array([[2e-4, -1e-4], [-1e-4, 3e-4]]))
    assert np.all(roots.imag == 0.0)
    assert np.all(cov[:, 1, :] == 0.0) and np.all(cov[:, :, 1] == 0.0)
    assert np.all(cov[:, 0, 0] > 0.0)


def test_repeated_root_gives_nan():
    # (z - 0.8)^2 = z^2 - 1.6 z + 0.64: a double root (closed form)
    roots, cov = root_covariance([-1.6, 0.64], 1e-4 * np.eye(2))
    assert_allclose(roots, [0.8, 0.8], atol=1e-7)  # numpy.roots splits it by ~sqrt(eps)
    assert np.all(np.isnan(cov))


def test_bad_covariance_shape_is_an_option_error():
    with pytest.raises(OptionError, match="covariance"):
        root_covariance([-1.5, 0.7], np.eye(3))
    with pytest.raises(OptionError, match="ArxResult"):
        arx_pole_covariance(object())


def test_monte_carlo_covariance_of_the_estimated_pole():
    """Empirical covariance of the fitted pole over 400 noise realisations vs the prediction."""
    n_runs = 400
    z_hat, predicted = [], []
    for seed in range(n_runs):
        res = fit_arx(_simulate(seed), 0.01, ArxOptions(na=2, nb=2, nk=1))
        poles = res.model.poles()
        cov = arx_pole_covariance(res)
        k = int(np.argmax(poles.imag))
        z_hat.append([poles[k].real, poles[k].imag])
        predicted.append(cov[k])
    z_hat = np.array(z_hat)
    empirical = np.cov(z_hat.T)
    pred = np.mean(predicted, axis=0)
    # the estimate is consistent: the mean pole is the true one (closed form 0.75 + 0.3708j)
    # (within 4 standard errors of the mean; the O(1/N) bias is far smaller)
    se = np.sqrt(np.diag(pred) / n_runs)
    assert np.all(np.abs(z_hat.mean(axis=0) - [0.75, np.sqrt(0.7 - 0.75**2)]) < 4 * se)
    # a sample variance from 400 Gaussian draws has relative standard error sqrt(2/399) ~ 7 %;
    # 25 % is about 3.5 standard errors (with 2000 runs the ratio was 0.98 for both)
    assert_allclose(np.diag(empirical), np.diag(pred), rtol=0.25)
    corr_emp = empirical[0, 1] / np.sqrt(empirical[0, 0] * empirical[1, 1])
    corr_pred = pred[0, 1] / np.sqrt(pred[0, 0] * pred[1, 1])
    # the standard error of a sample correlation is (1 - rho^2) / sqrt(n) ~ 0.04 here
    assert_allclose(corr_emp, corr_pred, atol=0.15)


def test_delay_states_get_zero_covariance_and_order_follows_model_poles():
    # nk = 3, nb = 2: the realisation has max(na, nk + nb - 1) = 4 states, two of them delays at z = 0
    res = fit_arx(_simulate(7), 0.01, ArxOptions(na=2, nb=2, nk=3))
    poles = res.model.poles()
    assert poles.size == 4
    cov = arx_pole_covariance(res)
    roots, rc = root_covariance(res.a[0][1:], np.asarray(res.covariance[0])[:2, :2])
    for k, p in enumerate(poles):
        if abs(p) < 1e-12:
            assert np.all(cov[k] == 0.0)
        else:
            j = int(np.argmin(np.abs(roots - p)))
            assert_allclose(cov[k], rc[j], rtol=1e-12)


def test_mimo_blocks_carry_their_own_outputs_covariance():
    rng = np.random.default_rng(11)
    n = 1500
    u = rng.standard_normal((n, 1))
    y1 = signal.lfilter(B_TRUE, A_TRUE, u[:, 0]) + signal.lfilter([1.0], A_TRUE, 0.1 * rng.standard_normal(n))
    a2 = [1.0, -0.6]  # first-order second output, pole 0.6 (invented)
    y2 = signal.lfilter([0.0, 0.4], a2, u[:, 0]) + signal.lfilter([1.0], a2, 0.3 * rng.standard_normal(n))
    res = fit_arx(Experiment(u=u, y=np.column_stack([y1, y2])), 0.01, ArxOptions(na=2, nb=2, nk=1))
    poles = res.model.poles()
    cov = arx_pole_covariance(res)
    assert cov.shape == (poles.size, 2, 2)
    expected_z, expected_c = [], []
    for i in range(2):
        r, c = root_covariance(res.a[i][1:], np.asarray(res.covariance[i])[:2, :2])
        expected_z.extend(r)
        expected_c.extend(c)
    expected_z = np.array(expected_z)
    for k, p in enumerate(poles):
        j = int(np.argmin(np.abs(expected_z - p)))
        assert_allclose(cov[k], expected_c[j], rtol=1e-12)


def test_aligned_with_a_model_of_the_same_poles_and_rejects_another():
    res = fit_arx(_simulate(3), 0.01, ArxOptions(na=2, nb=2, nk=1))
    renamed = res.model.with_changes(inputs=("motor",), outputs=("speed",))
    assert_allclose(arx_pole_covariance(res, model=renamed), arx_pole_covariance(res), rtol=0, atol=0)
    other = StateSpaceModel(A=[[0.1, 0.0], [0.0, 0.2]], B=[[1.0], [1.0]], C=[[1.0, 1.0]], D=[[0.0]],
                            sample_time=0.01)
    with pytest.raises(OptionError, match="do not match"):
        arx_pole_covariance(res, model=other)


def test_mode_table_uses_it_and_treats_nan_as_unknown():
    res = fit_arx(_simulate(5), 0.01, ArxOptions(na=2, nb=2, nk=1))
    cov = arx_pole_covariance(res)
    table = mode_table(res.model, pole_covariance=cov)
    (mode,) = [m for m in table.modes if m.is_pair]
    k = int(np.argmax(res.model.poles().imag))
    assert_allclose(mode.z_std, np.sqrt(np.diag(cov[k])), rtol=1e-12)
    assert mode.natural_frequency_std_hz > 0 and mode.damping_ratio_std > 0
    # a nan block (unknown) gives the mode no uncertainty figures instead of an error
    unknown = np.full_like(cov, np.nan)
    table2 = mode_table(res.model, pole_covariance=unknown)
    assert all(m.z_std is None and m.confidence_radius is None for m in table2.modes)


def test_json_round_trip_with_unknown_blocks():
    cov = np.array([[[1e-4, 2e-5], [2e-5, 3e-4]], [[np.nan] * 2] * 2, [[0.0, 0.0], [0.0, 0.0]]])
    raw = pole_covariance_to_list(cov)
    text = json.dumps(raw, allow_nan=False)  # JSON-safe: nan written as null
    back = pole_covariance_from_list(json.loads(text), 3)
    assert_allclose(back, cov, rtol=0, atol=0, equal_nan=True)
    assert pole_covariance_from_list(json.loads(text), 4) is None  # wrong pole count
    assert pole_covariance_from_list([[[None, None], [None, None]]], 1) is None  # nothing known
    assert pole_covariance_from_list("junk", 1) is None


def test_compare_models_z_score_from_both_pole_covariances():
    from ident.assess.drift import compare_models

    base = fit_arx(_simulate(31), 0.01, ArxOptions(na=2, nb=2, nk=1))
    # the same structure with the resonance moved: A = 1 - 1.4 q^-1 + 0.7 q^-2 (invented)
    rng = np.random.default_rng(32)
    u = rng.standard_normal(2000)
    a_new = [1.0, -1.4, 0.7]
    y = signal.lfilter(B_TRUE, a_new, u) + signal.lfilter([1.0], a_new, 0.2 * rng.standard_normal(2000))
    new = fit_arx(Experiment(u=u[:, None], y=y[:, None]), 0.01, ArxOptions(na=2, nb=2, nk=1))
    report = compare_models(base.model, new.model, baseline_pole_covariance=arx_pole_covariance(base),
                            new_pole_covariance=arx_pole_covariance(new))
    (shift,) = [s for s in report.mode_shifts if s.status == "matched" and s.baseline.is_pair]
    sb, sn = shift.baseline.natural_frequency_std_hz, shift.new.natural_frequency_std_hz
    assert sb > 0 and sn > 0
    # definition: shift over the combined standard uncertainty of independent estimates
    assert_allclose(shift.z_score, shift.frequency_shift_hz / np.hypot(sb, sn), rtol=1e-12)
    # the poles moved by far more than their scatter (std ~1e-3 in z, shift ~0.05): significant
    assert abs(shift.z_score) > 10
    # one side unknown: no z-score
    one = compare_models(base.model, new.model, new_pole_covariance=arx_pole_covariance(new))
    assert all(s.z_score is None for s in one.mode_shifts)


def test_nearest_pairs_equals_optimal_assignment_for_roundoff_matches(rng):
    # scipy.optimize.linear_sum_assignment is the reference; with every pole matched
    # within round-off (as for an exact realisation) nearest-first pairing is optimal
    from ident.estimate.uncertainty import _nearest_pairs

    z = rng.uniform(-1, 1, 12) + 1j * rng.uniform(-1, 1, 12)
    perm = rng.permutation(12)
    dist = np.abs(z[:, None] - (z[perm] + 1e-13)[None, :])
    rows, cols = _nearest_pairs(dist)
    ref_rows, ref_cols = linear_sum_assignment(dist)
    np.testing.assert_array_equal(rows, ref_rows)
    np.testing.assert_array_equal(cols, ref_cols)
