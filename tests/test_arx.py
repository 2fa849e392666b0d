"""Tests for ident.estimate.arx: QR least-squares ARX, its realisation and the order/delay sweep."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from scipy import signal

from ident.errors import (
    IdentificationError,
    IllConditionedWarning,
    OptionError,
    UnstableModelWarning,
)
from ident.estimate.arx import (
    SELECTION_RULES,
    ArxOptions,
    arx_regressors,
    arx_state_space,
    fit_arx,
    fit_arx_candidates,
    iter_arx_candidates,
    sweep_arx,
)
from ident.estimate.data import Experiment

# A second-order plant with poles 0.75 +/- 0.3708j (|z| = 0.8367), delay 2, invented for
# these tests: A(q) = 1 - 1.5 q^-1 + 0.7 q^-2, B(q) = q^-2 (1.0 + 0.5 q^-1).
A_TRUE = np.array([1.0, -1.5, 0.7])
B_TRUE = np.array([1.0, 0.5])
NK_TRUE = 2


def _arx_output(u, e, a=A_TRUE, b=B_TRUE, nk=NK_TRUE):
    """y from A(q) y = q^-nk B(q) u + e, by scipy.signal.lfilter."""
    num = np.concatenate((np.zeros(nk), b))
    return signal.lfilter(num, a, u) + signal.lfilter([1.0], a, e)


def _regressors(u, y, na, nb, nk, start):
    """Independent reference regressor: columns -y[k-1..k-na], u_j[k-nk_j .. k-nk_j-nb_j+1]."""
    u = np.atleast_2d(u.T).T
    N = len(y)
    cols = [-y[start - lag:N - lag] for lag in range(1, na + 1)]
    for j in range(u.shape[1]):
        cols += [u[start - nk[j] - lag:N - nk[j] - lag, j] for lag in range(nb[j])]
    return np.column_stack(cols), y[start:]


def _poles(a):
    return np.sort_complex(np.roots(a))


def test_noise_free_siso_recovers_poles_and_parameters(rng):
    u = rng.standard_normal(500)
    y = _arx_output(u, np.zeros(500))
    res = fit_arx(Experiment(u, y), 0.01, ArxOptions(na=2, nb=2, nk=2))
    # noise-free data: exact up to rounding (regressor condition number ~ 10)
    assert_allclose(_poles(res.a[0]), _poles(A_TRUE), rtol=1e-6)
    assert_allclose(res.a[0], A_TRUE, rtol=1e-10, atol=1e-12)
    assert_allclose(res.b[0][0], B_TRUE, rtol=1e-10)
    assert res.nb == (2,) and res.nk == (2,) and res.n_parameters == 4
    # realisation: poles of the model = roots of A plus delay states at z = 0
    poles = res.model.poles()
    nonzero = np.sort_complex(poles[np.abs(poles) > 1e-8])
    assert_allclose(nonzero, _poles(A_TRUE), rtol=1e-6)
    assert res.model.n_states == 3  # max(na, nk + nb - 1) = max(2, 3)
    assert res.model.sample_time == 0.01 and res.model.operating_point is None


@pytest.mark.parametrize("nk", [(0, 2), (1, 3)])
def test_state_space_realisation_matches_difference_equation(rng, nk):
    # oracle: scipy.signal.dlsim of the state-space model vs. scipy.signal.lfilter of the
    # MISO difference equation A(q) y = sum_j q^-nk_j B_j(q) u_j, per output (2 outputs)
    a = [np.array([1.0, -0.9, 0.2]), np.array([1.0, 0.3])]
    b = [(np.array([0.4, -0.1]), np.array([1.2])), (np.array([0.7]), np.array([0.2, 0.3, -0.1]))]
    u = rng.standard_normal((60, 2))
    model = arx_state_space(a, b, nk, 0.5, input_names=["v", "w"], output_names=["p", "q"])
    _, y_ss, _ = signal.dlsim((model.A, model.B, model.C, model.D, 0.5), u)
    for i in range(2):
        want = sum(
            signal.lfilter(np.concatenate((np.zeros(nk[j]), b[i][j])), a[i], u[:, j])
            for j in range(2)
        )
        # pure recursion on O(1) signals: rounding only
        assert_allclose(y_ss[:, i], want, rtol=1e-10, atol=1e-12)
    assert model.inputs == ("v", "w") and model.outputs == ("p", "q")


def test_transfer_function_matches_lfilter(rng):
    u = rng.standard_normal(300)
    y = _arx_output(u, 0.05 * rng.standard_normal(300))
    res = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=2, nb=2, nk=2))
    tf = res.transfer_function()
    # scipy.signal.dlsim on the z-polynomials vs lfilter on the q^-1 polynomials
    _, y_tf = signal.dlsim((tf.num[0][0], tf.den[0][0], 1.0), u)
    want = signal.lfilter(np.r_[0.0, 0.0, res.b[0][0]], res.a[0], u)
    assert_allclose(y_tf.ravel(), want, rtol=1e-9, atol=1e-12)  # rounding only


def test_parameters_and_std_errors_equal_statsmodels_ols(rng):
    N = 800
    u = rng.standard_normal((N, 2))
    e = 0.2 * rng.standard_normal(N)
    y = signal.lfilter([0, 0.8, 0.3], A_TRUE, u[:, 0]) + signal.lfilter(
        [0, 0, 0.5], A_TRUE, u[:, 1]) + signal.lfilter([1], [1, -0.5], e)
    res = fit_arx(Experiment(u, y), 0.1, ArxOptions(na=3, nb=(2, 3), nk=(1, 2)))
    X, target = _regressors(u, y, 3, (2, 3), (1, 2), start=4)
    ols = sm.OLS(target, X).fit()
    # statsmodels OLS (pinv) on the same rows; both are backward-stable, cond(X) ~ 10
    assert_allclose(res.parameters[0], ols.params, rtol=1e-8)
    assert_allclose(res.std_errors[0], ols.bse, rtol=1e-8)
    assert_allclose(res.covariance[0], ols.cov_params(), rtol=1e-8, atol=1e-14)
    assert_allclose(res.residual_variance[0], ols.scale, rtol=1e-8)
    assert_allclose(res.loss, ols.ssr / ols.nobs, rtol=1e-8)
    assert res.n_samples == N - 4
    # the module's explicit regressor agrees with the independent one
    Phi, t = arx_regressors(Experiment(u, y), 3, (2, 3), (1, 2))
    assert_allclose(Phi, X, rtol=0, atol=0)
    assert_allclose(t, target, rtol=0, atol=0)


def test_parameters_equal_statsmodels_ols_when_accumulated_in_many_blocks(rng, monkeypatch):
    # the block-by-block R factor gives the same least squares as statsmodels OLS
    import ident.estimate.regression as regression_module

    monkeypatch.setattr(regression_module, "_BLOCK_VALUES", 2000)  # many small blocks, two experiments
    N = 3000
    u = rng.standard_normal((N, 1))
    y = signal.lfilter([0, 0.8, 0.3], A_TRUE, u[:, 0]) + 0.1 * rng.standard_normal(N)
    halves = [Experiment(u[:1700], y[:1700]), Experiment(u[1700:], y[1700:])]
    res = fit_arx(halves, 0.1, ArxOptions(na=3, nb=(2,), nk=(1,)))
    X1, t1 = _regressors(u[:1700], y[:1700], 3, (2,), (1,), start=3)
    X2, t2 = _regressors(u[1700:], y[1700:], 3, (2,), (1,), start=3)
    ols = sm.OLS(np.concatenate([t1, t2]), np.vstack([X1, X2])).fit()
    # statsmodels OLS on the stacked rows is the reference; cond(X) ~ 10
    assert_allclose(res.parameters[0], ols.params, rtol=1e-9)
    assert_allclose(res.std_errors[0], ols.bse, rtol=1e-9)


@pytest.mark.parametrize("rows", [5, 40, 3000, 70_000])
def test_blocked_r_factor_is_numpy_qr(rng, rows):
    # the R factor built a block of rows at a time against numpy.linalg.qr of the whole matrix:
    # R is unique up to the signs of its rows (Golub & Van Loan, Matrix Computations, 4th ed.,
    # thm. 5.2.3), so R^T R and |R| agree
    from ident.estimate.regression import r_factor

    A = rng.standard_normal((rows, 12)) @ np.diag(np.logspace(0, 4, 12))
    R = r_factor(A)
    ref = np.linalg.qr(A, mode="r")
    assert R.shape == (12, 12) and np.allclose(np.tril(R, -1), 0.0)
    k = ref.shape[0]
    assert_allclose(np.abs(R[:k]), np.abs(ref), rtol=1e-9, atol=1e-9 * np.abs(ref).max())
    assert_allclose(R.T @ R, A.T @ A, rtol=1e-9, atol=1e-9 * np.abs(A.T @ A).max())


def test_two_experiments_equal_stacked_regression(rng):
    u1, u2 = rng.standard_normal(400), rng.standard_normal(250)
    y1 = _arx_output(u1, 0.1 * rng.standard_normal(400))
    y2 = _arx_output(u2, 0.1 * rng.standard_normal(250)) + 0.0
    X1, t1 = _regressors(u1, y1, 2, (2,), (2,), start=3)
    X2, t2 = _regressors(u2, y2, 2, (2,), (2,), start=3)
    ols = sm.OLS(np.r_[t1, t2], np.vstack([X1, X2])).fit()
    res = fit_arx([Experiment(u1, y1), Experiment(u2, y2)], 1.0, ArxOptions(na=2, nb=2, nk=2))
    # statsmodels on rows built per experiment; rounding only
    assert_allclose(res.parameters[0], ols.params, rtol=1e-8)
    assert_allclose(res.std_errors[0], ols.bse, rtol=1e-8)
    assert res.n_samples == 397 + 247
    # gluing the logs together instead gives other rows (3 straddling the seam)
    glued = fit_arx(Experiment(np.r_[u1, u2], np.r_[y1, y2]), 1.0, ArxOptions(na=2, nb=2, nk=2))
    assert glued.n_samples == res.n_samples + 3
    assert not np.allclose(glued.parameters[0], res.parameters[0], rtol=1e-8)


def _pole_error(N, seed):
    rng = np.random.default_rng(seed)
    u = rng.standard_normal(N)
    y = _arx_output(u, 0.5 * rng.standard_normal(N))
    res = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=2, nb=2, nk=2))
    return np.max(np.abs(_poles(res.a[0]) - _poles(A_TRUE))), res


def test_noisy_poles_within_tolerance_and_consistent():
    small = [_pole_error(2000, s)[0] for s in (1, 2, 3)]
    large_fits = [_pole_error(50000, s) for s in (1, 2, 3)]
    large = [err for err, _ in large_fits]
    # LS is consistent for ARX data: error ~ 1/sqrt(N), expected ratio sqrt(25) = 5; we ask 2.5
    assert np.mean(large) < np.mean(small) / 2.5
    # stated tolerance at N = 50000: every a-parameter within 5 standard errors
    # (two-sided Gaussian tail at 5 sigma: 6e-7), and poles within 0.01
    for _, res in large_fits:
        assert np.all(np.abs(res.a[0][1:] - A_TRUE[1:]) < 5 * res.std_errors[0][:2])
        assert np.all(np.abs(res.b[0][0] - B_TRUE) < 5 * res.std_errors[0][2:])
    assert max(large) < 0.01


def test_sweep_noise_free_selects_true_structure(rng):
    u = rng.standard_normal(600)
    y = _arx_output(u, np.zeros(600))
    est, val = Experiment(u[:400], y[:400]), Experiment(u[400:], y[400:])
    sweep = sweep_arx(est, 1.0, na_values=[1, 2, 3], nb_values=[1, 2, 3],
                      nk_values=[1, 2, 3], validation=val)
    assert set(sweep.best) == set(SELECTION_RULES)
    for rule in SELECTION_RULES:
        row = sweep.rows[sweep.best[rule]]
        # the true structure (closed form, by construction of the data)
        assert (row.na, row.nb, row.nk) == (2, (2,), (2,)), rule
    assert_allclose(sweep.rows[sweep.best["validation_fit"]].validation_fit, [100.0],
                    rtol=1e-8)  # exact model, exact initial state
    assert len(sweep.rows) == 27
    assert sweep.best_options("bic").na == 2


def test_sweep_losses_equal_ols_on_common_rows(rng):
    N = 700
    u = rng.standard_normal(N)
    y = _arx_output(u, 0.3 * rng.standard_normal(N))
    sweep = sweep_arx(Experiment(u, y), 1.0, na_values=[1, 3], nb_values=[1, 2],
                      nk_values=[1, 2])
    L = 3  # largest lag of the grid: max(na) = 3, max(nk + nb - 1) = 3
    assert sweep.n_samples == N - L
    for row in sweep.rows:
        X, t = _regressors(u, y, row.na, row.nb, row.nk, start=L)
        ols = sm.OLS(t, X).fit()
        # one shared R factor vs an independent OLS per candidate; rounding only
        assert_allclose(row.loss, ols.ssr / ols.nobs, rtol=1e-9)
        assert row.n_parameters == X.shape[1]


def test_sweep_noisy_bic_selects_true_structure(rng):
    u = rng.standard_normal(3000)
    y = _arx_output(u, 0.3 * rng.standard_normal(3000))
    sweep = sweep_arx(Experiment(u, y), 1.0, na_values=[1, 2, 3, 4], nb_values=[1, 2, 3],
                      nk_values=[1, 2, 3])
    row = sweep.rows[sweep.best["bic"]]
    # BIC is consistent (Ljung 1999 sec. 16.4); at N = 3000 and SNR ~ 10 it picks the truth
    assert (row.na, row.nb, row.nk) == (2, (2,), (2,))
    assert sweep.rows[sweep.best["bic"]].validation_fit is None
    assert "validation_fit" not in sweep.best


def test_coupled_2x2_with_delays(rng):
    # invented coupled plant, x[k+1] = A x + B u[k - d], y = C x; every channel has the
    # characteristic polynomial det(zI - A) as denominator, so one MISO ARX per output with
    # na = 3 and A_i(q) = det polynomial is exact; CB has no zero entry, so the delay from
    # input j is d_j + 1 on every output.
    A = np.array([[0.7, 0.2, 0.0], [-0.1, 0.6, 0.3], [0.05, 0.0, 0.5]])
    B = np.array([[1.0, 0.3], [0.4, 1.0], [0.2, -0.5]])
    C = np.array([[1.0, 0.0, 0.5], [0.0, 1.0, -0.4]])
    D = np.zeros((2, 2))
    d = (1, 3)
    N = 1500
    u = rng.standard_normal((N, 2))
    ud = np.zeros_like(u)
    for j in range(2):
        ud[d[j]:, j] = u[:N - d[j], j]
    _, y, _ = signal.dlsim((A, B, C, D, 1.0), ud)
    res = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=3, nb=3, nk=None),
                  input_names=["valve", "pump"], output_names=["flow", "level"])
    assert res.nk == (2, 4)  # d_j + 1 (closed form, see above)
    want = np.sort_complex(np.linalg.eigvals(A))  # numpy.linalg.eigvals
    for i in range(2):
        assert_allclose(_poles(res.a[i]), want, rtol=1e-6)  # noise-free: rounding only
    # the realised model reproduces the data (scipy.signal.dlsim output)
    _, y_hat, _ = signal.dlsim((res.model.A, res.model.B, res.model.C, res.model.D, 1.0), u)
    assert_allclose(y_hat, y, atol=1e-8)  # noise-free; O(1) signals
    assert res.model.inputs == ("valve", "pump") and res.model.outputs == ("flow", "level")


def test_mimo_loss_is_det_of_residual_covariance(rng):
    N = 600
    u = rng.standard_normal((N, 2))
    e = rng.standard_normal((N, 2)) @ [[0.3, 0.1], [0.0, 0.2]]  # correlated noise
    y = np.column_stack([
        signal.lfilter([0, 1.0], [1, -0.5], u[:, 0]) + e[:, 0],
        signal.lfilter([0, 0.5], [1, -0.3], u[:, 1]) + signal.lfilter([0, 0.2], [1], u[:, 0])
        + e[:, 1],
    ])
    res = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=1, nb=1, nk=1))
    E = []
    for i in range(2):
        X, t = _regressors(u, y[:, i], 1, (1, 1), (1, 1), start=1)
        theta, *_ = np.linalg.lstsq(X, t, rcond=None)  # numpy.linalg.lstsq reference
        assert_allclose(res.parameters[i], theta, rtol=1e-9)
        E.append(t - X @ theta)
    E = np.column_stack(E)
    # Ljung 1999 sec. 16.4, multi-output loss det((1/N) E^T E); rounding only
    assert_allclose(res.loss, np.linalg.det(E.T @ E / len(E)), rtol=1e-9)
    assert res.n_parameters == 6


def test_order_too_high_for_data():
    u = np.arange(12.0) % 3
    with pytest.raises(OptionError, match=r"has 10 parameters per output but the data give "
                                          r"only 7 regression rows \(12 samples"):
        fit_arx(Experiment(u, np.arange(12.0) % 4), 1.0, ArxOptions(na=5, nb=5, nk=1))


def test_collinear_inputs_named(rng):
    u1 = rng.standard_normal(300)
    u = np.column_stack([u1, 2.0 * u1])
    y = signal.lfilter([0, 1.0], [1, -0.5], u1)
    with pytest.raises(IdentificationError, match="input 'pump' at lag 1.*collinear") as info:
        fit_arx(Experiment(u, y), 1.0, ArxOptions(na=1, nb=1, nk=1),
                input_names=["valve", "pump"])
    assert "pump" in info.value.hint


def test_not_persistently_exciting_input(rng):
    k = np.arange(400)
    u = np.sin(0.3 * k)  # a single sinusoid is persistently exciting of order 2 only
    y = signal.lfilter([0, 1.0], [1, -0.5], u) + 0.01 * rng.standard_normal(400)
    with pytest.raises(IdentificationError, match="input 'u1' at lag 3.*persistently exciting"):
        fit_arx(Experiment(u, y), 1.0, ArxOptions(na=1, nb=3, nk=1))


def test_nearly_collinear_inputs_warn(rng):
    u1 = rng.standard_normal(300)
    u = np.column_stack([u1, u1 + 1e-9 * rng.standard_normal(300)])
    y = signal.lfilter([0, 1.0], [1, -0.5], u1) + 0.1 * rng.standard_normal(300)
    with pytest.warns(IllConditionedWarning, match="input 'u2' at lag 1"):
        fit_arx(Experiment(u, y), 1.0, ArxOptions(na=1, nb=1, nk=1))


def test_nan_rejected():
    u = np.ones(50)
    u[7] = np.nan
    with pytest.raises(OptionError, match="u must be finite; sample 7"):
        fit_arx(Experiment(u, np.ones(50)), 1.0, ArxOptions(na=1, nb=1, nk=1))


def test_options_validation_and_mapping():
    opts = ArxOptions.from_mapping({"na": 3, "nb": [1, 2], "nk": 0})
    assert (opts.na, opts.nb, opts.nk) == (3, (1, 2), 0)
    with pytest.raises(OptionError, match="unknown ARX option.*'order'.*valid keys: na, nb, nk"):
        ArxOptions.from_mapping({"order": 2})
    with pytest.raises(OptionError, match=r"na must be an integer in \[0, inf\); got -1"):
        ArxOptions(na=-1)
    u = np.random.default_rng(0).standard_normal((100, 2))
    with pytest.raises(OptionError, match=r"nb must hold one value per input \(2\); got 3"):
        fit_arx(Experiment(u, u[:, 0]), 1.0, ArxOptions(nb=(1, 1, 1), nk=1))


def test_inputs_unchanged_and_deterministic(rng):
    u = rng.standard_normal(200)
    y = _arx_output(u, 0.1 * rng.standard_normal(200))
    u0, y0 = u.copy(), y.copy()
    r1 = fit_arx(Experiment(u, y), 1.0)
    r2 = fit_arx(Experiment(u, y), 1.0)
    assert np.array_equal(u, u0) and np.array_equal(y, y0)
    assert np.array_equal(r1.parameters[0], r2.parameters[0])  # same arithmetic, same bits
    assert r1.nk == (2,)  # delay estimated (closed form: the data's delay is 2)


def test_shared_dataset_hair_dryer(shared_dataset, record_property):
    import pandas as pd

    df = pd.read_csv(shared_dataset("hair_dryer.csv"))
    u_all, y_all = df.iloc[:, 0].to_numpy(), df.iloc[:, 1].to_numpy()
    n_est = int(0.7 * len(df))
    u0, y0 = u_all[:n_est].mean(), y_all[:n_est].mean()  # operating point from estimation part
    est = Experiment(u_all[:n_est] - u0, y_all[:n_est] - y0)
    val = Experiment(u_all[n_est:] - u0, y_all[n_est:] - y0)
    # sample time not published (README); it does not affect the fit percent
    sweep = sweep_arx(est, 1.0, na_values=[1, 2, 3, 4], nb_values=[1, 2, 3, 4],
                      nk_values=[1, 2, 3, 4], validation=val)
    baseline = sweep_arx(est, 1.0, na_values=[1], nb_values=[1], nk_values=[1],
                         validation=val).rows[0]
    chosen = sweep.rows[sweep.best["bic"]]
    record_property("hair_dryer_bic_choice", (chosen.na, chosen.nb, chosen.nk))
    record_property("hair_dryer_validation_fit", float(chosen.validation_fit[0]))
    record_property("hair_dryer_arx111_fit", float(baseline.validation_fit[0]))
    # the BIC-chosen model must do at least as well as the low-order baseline ARX(1,1,1)
    # on held-out data (common practice, no source)
    assert chosen.validation_fit[0] >= baseline.validation_fit[0]
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        fit_arx(est, 1.0, sweep.best_options("bic"))


def test_output_equal_to_input_rejected(rng):
    u = rng.standard_normal((200, 2))
    with pytest.raises(IdentificationError, match="output 'y1' equals input 'u2'"):
        fit_arx(Experiment(u, 3.0 * u[:, 1] - 1.0), 1.0, ArxOptions(na=1, nb=1, nk=1))
    with pytest.raises(IdentificationError, match="output 'temp' equals input 'heater'"):
        sweep_arx(Experiment(u[:, 0], u[:, 0]), 1.0, nk_values=[1],
                  input_names=["heater"], output_names=["temp"])


def test_unstable_estimate_warns(rng):
    # a slowly diverging invented plant, pole 1.01 (closed form: root of 1 - 1.01 q^-1)
    u = rng.standard_normal(200)
    y = signal.lfilter([0, 1.0], [1, -1.01], u)
    with pytest.warns(UnstableModelWarning, match="pole of magnitude 1.01 > 1"):
        res = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=1, nb=1, nk=1))
    assert_allclose(np.abs(res.model.poles()), [1.01], rtol=1e-8)  # noise-free: rounding


def test_fir_and_static_models(rng):
    u = rng.standard_normal((300, 2))
    # y = 0.5 u1[k] + 0.2 u1[k-1] + 0.3 u2[k] (invented, noise-free)
    y = signal.lfilter([0.5, 0.2], [1.0], u[:, 0]) + 0.3 * u[:, 1]
    res = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=0, nb=(2, 1), nk=(0, 0)))
    assert_allclose(res.b[0][0], [0.5, 0.2], rtol=1e-10)  # exact data: rounding only
    assert_allclose(res.model.D, [[0.5, 0.3]], rtol=1e-10)
    static = fit_arx(Experiment(u, 0.5 * u[:, 0] + 0.3 * u[:, 1]), 1.0,
                     ArxOptions(na=0, nb=1, nk=0))
    assert static.model.n_states == 0
    assert_allclose(static.model.D, [[0.5, 0.3]], rtol=1e-10)


def test_estimated_delay_evidence_kept(rng):
    u = rng.standard_normal(800)
    y = _arx_output(u, 0.1 * rng.standard_normal(800))
    res = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=2, nb=2))
    assert res.delay is not None and res.delay.delays.tolist() == [[NK_TRUE]]
    assert res.nk == (NK_TRUE,) and res.options.nk is None
    given = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=2, nb=2, nk=2))
    assert given.delay is None


# --------------------------------------------------------------------------- candidates


def _two_by_two_experiments(rng):
    """Two experiments (one shorter than the largest lag of the grid) of a 2x2 plant."""
    exps = []
    for N in (900, 6):
        u = rng.standard_normal((N, 2))
        y1 = signal.lfilter([0, 0.8, 0.3], A_TRUE, u[:, 0]) + signal.lfilter(
            [0, 0, 0.5], A_TRUE, u[:, 1]) + 0.1 * rng.standard_normal(N)
        y2 = signal.lfilter([0, 0, 0.4], [1.0, -0.6], u[:, 1]) + signal.lfilter(
            [0, 0.2], [1.0, -0.6], u[:, 0]) + 0.1 * rng.standard_normal(N)
        exps.append(Experiment(u, np.column_stack((y1, y2))))
    return exps


def test_candidates_equal_single_fits(rng):
    exps = _two_by_two_experiments(rng)
    structures = [ArxOptions(na=n, nb=n, nk=(1, 2)) for n in range(1, 6)]
    structures += [ArxOptions(na=0, nb=(2, 1), nk=(0, 3)), ArxOptions(na=2, nb=(1, 0), nk=1)]
    many = fit_arx_candidates(exps, 0.1, structures, output_names=["p", "q"])
    assert len(many) == len(structures)
    for opts, res in zip(structures, many, strict=True):
        one = fit_arx(exps, 0.1, opts, output_names=["p", "q"])
        # the same regression solved from the union R factor instead of its own: rounding
        # only (regressor condition number ~ 10), hence 1e-10
        assert res.n_samples == one.n_samples
        assert (res.na, res.nb, res.nk) == (one.na, one.nb, one.nk)
        for i in range(2):
            assert_allclose(res.parameters[i], one.parameters[i], rtol=1e-10, atol=1e-12)
            assert_allclose(res.std_errors[i], one.std_errors[i], rtol=1e-10)
            assert_allclose(res.covariance[i], one.covariance[i], rtol=1e-10, atol=1e-16)
        assert_allclose(res.residual_variance, one.residual_variance, rtol=1e-10)
        assert_allclose(res.loss, one.loss, rtol=1e-10)
        assert_allclose([res.criteria.aic, res.criteria.bic, res.criteria.fpe],
                        [one.criteria.aic, one.criteria.bic, one.criteria.fpe], rtol=1e-10)
        assert_allclose(res.model.A, one.model.A, rtol=1e-10, atol=1e-12)
        assert_allclose(res.model.B, one.model.B, rtol=1e-10, atol=1e-12)
    # and an outside reference for one candidate of the shared factor: statsmodels OLS on
    # explicit rows of both experiments (the short one contributes rows 3..5 for na = 3)
    X = np.vstack([_regressors(e.u, e.y[:, 0], 3, (3, 3), (1, 2), start=4)[0] for e in exps])
    t = np.concatenate([_regressors(e.u, e.y[:, 0], 3, (3, 3), (1, 2), start=4)[1]
                        for e in exps])
    ols = sm.OLS(t, X).fit()
    assert many[2].n_samples == 896 + 2
    assert_allclose(many[2].parameters[0], ols.params, rtol=1e-8)  # rounding, cond ~ 10
    assert_allclose(many[2].std_errors[0], ols.bse, rtol=1e-8)


def test_candidates_share_one_delay_estimate(rng):
    u = rng.standard_normal(800)
    y = _arx_output(u, 0.1 * rng.standard_normal(800))
    res = fit_arx_candidates(Experiment(u, y), 1.0,
                             [ArxOptions(na=2, nb=2), ArxOptions(na=3, nb=3, nk=1)])
    assert res[0].nk == (NK_TRUE,) and res[0].delay is not None  # closed form: delay 2
    assert res[1].nk == (1,) and res[1].delay is None
    single = fit_arx(Experiment(u, y), 1.0, ArxOptions(na=2, nb=2))
    assert_allclose(res[0].parameters[0], single.parameters[0], rtol=1e-10)  # rounding only


def test_iter_candidates_stops_at_the_first_unfittable_structure(rng):
    u = rng.standard_normal(40)
    y = _arx_output(u, 0.1 * rng.standard_normal(40))
    it = iter_arx_candidates(Experiment(u, y), 1.0,
                             [ArxOptions(na=1, nb=1, nk=1), ArxOptions(na=20, nb=20, nk=1),
                              ArxOptions(na=2, nb=2, nk=1)])
    first = next(it)
    assert first.na == 1
    # 40 samples minus lag 20 leave 20 rows for 40 parameters (closed form)
    with pytest.raises(OptionError, match=r"ARX\(na=20.*has 40 parameters per output but the "
                                          r"data give only 20 regression rows"):
        next(it)
    with pytest.raises(StopIteration):
        next(it)
    with pytest.raises(OptionError, match="structures must hold at least one"):
        fit_arx_candidates(Experiment(u, y), 1.0, [])
    with pytest.raises(OptionError, match=r"structures\[1\] must be ArxOptions; got dict"):
        fit_arx_candidates(Experiment(u, y), 1.0, [ArxOptions(), {"na": 1}])
    with pytest.raises(IdentificationError, match="regressor .* is a linear combination"):
        fit_arx_candidates(Experiment(u, signal.lfilter([0, 1.0], [1, -0.5], u)), 1.0,
                           [ArxOptions(na=1, nb=1, nk=1), ArxOptions(na=3, nb=3, nk=1)])


def test_arx_simulate_equals_dlsim_of_the_realisation(rng):
    exps = _two_by_two_experiments(rng)
    res = fit_arx(exps[0], 0.1, ArxOptions(na=3, nb=(2, 1), nk=(1, 3)))
    u = rng.standard_normal((500, 2))
    x0 = rng.standard_normal(res.model.n_states)
    M = res.model
    # scipy.signal.dlsim of the state-space realisation from the same state: the
    # difference equations are the same recursion, so rounding only
    _, y_ref, _ = signal.dlsim((M.A, M.B, M.C, M.D, 0.1), u, x0=x0)
    assert_allclose(res.simulate(u, x0), y_ref, rtol=1e-9, atol=1e-10)
    assert_allclose(res.simulate(u), signal.dlsim((M.A, M.B, M.C, M.D, 0.1), u)[1],
                    rtol=1e-9, atol=1e-10)
    # direct feed-through and a static model (no states): y = D u (closed form)
    fir = fit_arx(exps[0], 0.1, ArxOptions(na=0, nb=(2, 1), nk=(0, 0)))
    _, y_fir, _ = signal.dlsim((fir.model.A, fir.model.B, fir.model.C, fir.model.D, 0.1), u)
    assert_allclose(fir.simulate(u), y_fir, rtol=1e-9, atol=1e-10)
    static = fit_arx(exps[0], 0.1, ArxOptions(na=0, nb=1, nk=0))
    assert_allclose(static.simulate(u), u @ static.model.D.T, rtol=1e-12)
    # 3 states per output: max(na, nk_j + nb_j - 1) = 3 (closed form)
    with pytest.raises(OptionError, match="x0 must have 6 entries; got 2"):
        res.simulate(u, [0.0, 1.0])
    with pytest.raises(OptionError, match=r"u must have 2 column\(s\)"):
        res.simulate(u[:, 0])


def test_arx_simulate_across_blocks_equals_lfilter(rng, monkeypatch):
    import ident.lti.simulate as simulate_module

    monkeypatch.setattr(simulate_module, "_POLE_BLOCK", 5)  # many blocks, each shorter than 4 na
    exps = _two_by_two_experiments(rng)
    res = fit_arx(exps[0], 0.1, ArxOptions(na=4, nb=(2, 3), nk=(1, 0)))
    u = rng.standard_normal((203, 2))
    x0 = rng.standard_normal(res.model.n_states)
    # reference: scipy.signal.lfilter per input, the output block of x0 as the initial
    # condition of the first filter (transposed direct form II = observer form); rounding
    want = np.empty((203, 2))
    for i in range(2):
        n = 4
        num = [np.r_[np.zeros(1), res.b[i][0], np.zeros(n - 2)],
               np.r_[res.b[i][1], np.zeros(n - 2)]]
        want[:, i] = (signal.lfilter(num[0], res.a[i], u[:, 0], zi=x0[n * i:n * (i + 1)])[0]
                      + signal.lfilter(num[1], res.a[i], u[:, 1]))
    assert_allclose(res.simulate(u, x0), want, rtol=1e-9, atol=1e-10)


def test_shortlist_holds_the_best_of_each_order(rng):
    from ident.estimate.arx import shortlist, sweep_arx

    u = rng.standard_normal(3000)
    # second-order ARX data (scipy.signal.lfilter); a 1..4 grid
    y = signal.lfilter([0.0, 1.0, 0.5], [1.0, -1.5, 0.7], u) + 0.05 * rng.standard_normal(3000)
    sweep = sweep_arx(Experiment(u[:, None], y[:, None]), 0.01, na_values=[1, 2, 3, 4], nb_values=[1, 2, 3, 4],
                      nk_values=[1])
    picks = shortlist(sweep, per_criterion=1)
    orders = {max(sweep.rows[k].na, max(sweep.rows[k].nb)) for k in picks}
    assert orders == {1, 2, 3, 4}  # every order represented (definition of the shortlist)
    for name in ("aic", "bic", "fpe"):
        assert sweep.best[name] in picks


def test_arx_model_carries_its_one_step_predictor(rng):
    """The noise gain of an ARX realisation gives exactly the ARX one-step predictor."""
    from ident.assess.diagnostics import predict
    from ident.estimate.arx import ArxOptions, fit_arx
    from ident.estimate.data import Experiment

    n = 800
    u = rng.standard_normal((n, 2))
    y = (signal.lfilter([0.0, 0.5, 0.2], [1.0, -1.2, 0.5], u[:, 0])
         + signal.lfilter([0.0, 0.0, 0.3], [1.0, -1.2, 0.5], u[:, 1]) + 0.05 * rng.standard_normal(n))
    res = fit_arx(Experiment(u, y[:, None]), 1.0, ArxOptions(na=2, nb=(2, 1), nk=(1, 2)))
    a, b = res.a[0], res.b[0]
    # direct implementation of the ARX predictor (Ljung 1999, eq. 4.9):
    # yhat[t] = -a1 y[t-1] - a2 y[t-2] + sum_j sum_l b_jl u_j[t - nk_j - l]
    direct = np.zeros(n)
    for t in range(n):
        acc = 0.0
        for i in range(1, len(a)):
            acc -= a[i] * (y[t - i] if t - i >= 0 else 0.0)
        for j in range(2):
            for lag, coef in enumerate(b[j]):
                k = t - res.nk[j] - lag
                acc += coef * (u[k, j] if k >= 0 else 0.0)
        direct[t] = acc
    model = res.model
    assert model.noise_gain is not None
    # the predictor A - K C is nilpotent (closed form of the observer form with K = -a)
    Ab = model.A - model.noise_gain @ model.C
    assert_allclose(np.linalg.matrix_power(Ab, Ab.shape[0]), 0.0, atol=1e-12)
    pred = predict(model, u, y[:, None], 1, np.zeros(model.n_states))[:, 0]
    # from rest, both predictors see zeros before the record: identical from the first sample
    assert_allclose(pred, direct, rtol=1e-10, atol=1e-10)
