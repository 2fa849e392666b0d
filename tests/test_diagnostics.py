import json

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import linalg, signal
from statsmodels.stats.diagnostic import acorr_ljungbox
from statsmodels.stats.stattools import jarque_bera
from statsmodels.tsa.stattools import acf, ccf

from ident.assess.diagnostics import (
    DATA_TESTS,
    CheckOptions,
    correlation,
    cross_correlation,
    predict,
    report_to_dict,
    spectral_comparison,
    validate_model,
    whiteness,
)
from ident.errors import ModelError, OptionError
from ident.lti.models import StateSpaceModel
from ident.lti.simulate import simulate

T = 0.01


def _ss(num, den, **kw):
    A, B, C, D = signal.tf2ss(num, den)
    return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=T, **kw)


def _true_model():
    # invented plant: (0.5 z^-2 + 0.3 z^-3) / (1 - 1.5 z^-1 + 0.7 z^-2), input delay 2 samples,
    # with the steady-state Kalman gain of a disturbance entering the first state
    model = _ss([0.5, 0.3], [1, -1.5, 0.7, 0])
    Q = 0.5 * np.diag([1.0, 0.0, 0.0])
    R = np.array([[1.0]])
    P = linalg.solve_discrete_are(model.A.T, model.C.T, Q, R)
    K = model.A @ P @ model.C.T @ np.linalg.inv(model.C @ P @ model.C.T + R)
    return model.with_changes(noise_gain=K)


def _innovation_data(model, n, seed, noise=0.3, x0=None):
    rng = np.random.default_rng(seed)
    u = rng.standard_normal((n, model.n_inputs))
    e = noise * rng.standard_normal((n, model.n_outputs))
    aug = StateSpaceModel(
        A=model.A, B=np.hstack([model.B, model.noise_gain]), C=model.C,
        D=np.hstack([model.D, np.eye(model.n_outputs)]), sample_time=T,
    )
    return u, simulate(aug, np.hstack([u, e]), x0), e


@pytest.fixture(scope="module")
def truth():
    model = _true_model()
    u, y, _ = _innovation_data(model, 4000, seed=11)
    return model, u, y


def _failed(report, test):
    return [v for v in report.verdicts if v.test == test and not v.passed]


# --- correlations against statsmodels and the textbook band ---------------------------------


def test_band_is_2_58_over_sqrt_n(rng):
    x = rng.standard_normal(1600)
    c = correlation(x, 10, confidence=0.99)
    # Ljung, System Identification, 2nd ed., sec. 16.6: 99 % band +-2.58/sqrt(N);
    # 2.58 is the rounded normal quantile (scipy.stats.norm.ppf(0.995) = 2.5758)
    assert_allclose(c.band, 2.58 / 40.0, rtol=2e-3)  # rounding of 2.58 vs 2.5758
    assert CheckOptions(confidence=0.99).z_value == pytest.approx(2.5758293, abs=1e-6)  # scipy.stats.norm.ppf
    assert CheckOptions().z_value == pytest.approx(1.9599640, abs=1e-6)  # scipy.stats.norm.ppf(0.975)


def test_band_holds_99_percent_of_white_noise_lags():
    # large-sample result (Ljung, System Identification, 2nd ed., sec. 16.6): the sample
    # autocorrelation of white noise at each lag is ~N(0, 1/N), so about 1 % of the lags fall
    # outside +-2.58/sqrt(N). Over 20 seeds x 100 lags, a binomial(2000, 0.01) count has mean 20
    # and std 4.5; [5, 40] is more than 3 std either side.
    outside = 0
    for seed in range(20):
        x = np.random.default_rng(seed).standard_normal(5000)
        c = correlation(x, 100, confidence=0.99)
        outside += int(np.sum(np.abs(c.values[1:]) > c.band))
    assert 5 <= outside <= 40


def test_autocorrelation_equals_statsmodels_acf(rng):
    e = signal.lfilter([1.0], [1.0, -0.6], rng.standard_normal(700))
    c = correlation(e, 25)
    # reference: statsmodels.tsa.stattools.acf (biased estimator, demeaned); rounding only
    assert_allclose(c.values, acf(e, nlags=25, fft=False), rtol=1e-10, atol=1e-12)
    assert c.lags.tolist() == list(range(26))
    outside = [k for k in range(1, 26) if abs(c.values[k]) > c.band]
    assert list(c.significant_lags) == outside and 1 in outside


def test_cross_correlation_equals_statsmodels_ccf(rng):
    u = rng.standard_normal(900)
    e = 0.5 * np.roll(u, 3) + rng.standard_normal(900)
    c = cross_correlation(e, u, 12)
    # statsmodels ccf(x, y)[k] = corr(x[t+k], y[t]); negative lags from ccf(u, e)
    pos = ccf(e, u, adjusted=False, fft=False)[:13]
    neg = ccf(u, e, adjusted=False, fft=False)[1:13][::-1]
    assert_allclose(c.values, np.concatenate([neg, pos]), rtol=1e-10, atol=1e-12)
    assert c.lags.tolist() == list(range(-12, 13))
    assert 3 in c.significant_lags  # the injected lag-3 coupling


def test_ljung_box_equals_statsmodels_and_closed_form(rng):
    e = rng.standard_normal(500) + 0.2 * np.concatenate([[0.0], rng.standard_normal(499)])
    w = whiteness(e, 20)
    ref = acorr_ljungbox(e, lags=[20], return_df=True)
    # reference: statsmodels.stats.diagnostic.acorr_ljungbox; rounding only
    assert_allclose(w.ljung_box_statistic, ref["lb_stat"].iloc[0], rtol=1e-10)
    assert_allclose(w.ljung_box_pvalue, ref["lb_pvalue"].iloc[0], rtol=1e-10)
    # closed form, Ljung & Box (1978): Q = N (N + 2) sum r_k^2 / (N - k)
    r = acf(e, nlags=20, fft=False)[1:]
    N = e.size
    q = N * (N + 2) * np.sum(r**2 / (N - np.arange(1, 21)))
    assert_allclose(w.ljung_box_statistic, q, rtol=1e-10)
    # the verdict is the simultaneous band, which the table and the figure show too
    assert w.white == (not w.autocorrelation.significant_lags)


# --- spectra against scipy.signal ----------------------------------------------------------


@pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")
def test_siso_spectra_equal_scipy(truth):
    model, u, y = truth
    sp = spectral_comparison(model, u, y, segment=256)
    kw = {"fs": 1 / T, "nperseg": 256}
    f, puu = signal.welch(u[:, 0], **kw)
    _, pyu = signal.csd(u[:, 0], y[:, 0], **kw)
    _, coh = signal.coherence(u[:, 0], y[:, 0], **kw)
    # same scipy calls, zero-frequency bin dropped: agreement to rounding
    assert_allclose(sp.frequencies_hz, f[1:], rtol=1e-12)
    assert_allclose(sp.estimate[:, 0, 0], (pyu / puu)[1:], rtol=1e-9)
    assert_allclose(sp.coherence[:, 0, 0], coh[1:], rtol=1e-9, atol=1e-12)
    assert_allclose(sp.multiple_coherence[:, 0], coh[1:], rtol=1e-9, atol=1e-12)
    # model response against scipy.signal.dfreqresp
    _, g = signal.dfreqresp((model.A, model.B, model.C, model.D, T), w=2 * np.pi * f[1:] * T)
    assert_allclose(sp.model_response[:, 0, 0], g, rtol=1e-9)


def test_mimo_h1_recovers_noise_free_system(rng):
    model = StateSpaceModel(
        A=[[0.7, 0.2], [0.0, 0.5]], B=[[1.0, 0.0], [0.3, 1.0]], C=[[1.0, 0.0], [0.0, 1.0]],
        D=[[0.0, 0.0], [0.0, 0.0]], sample_time=T,
    )
    u = rng.standard_normal((20000, 2))
    y = simulate(model, u)
    sp = spectral_comparison(model, u, y, segment=1024)
    # closed form G(z) = C (zI - A)^-1 B + D at z = exp(j 2 pi f T)
    z = np.exp(2j * np.pi * sp.frequencies_hz * T)
    g = np.array([model.C @ np.linalg.solve(zk * np.eye(2) - model.A, model.B) for zk in z])
    # noise-free but windowed: Hann leakage (largest in the lowest bins, next to the
    # removed mean) stays below about 1 % of the peak gain (about 4)
    assert_allclose(sp.estimate, g, atol=0.04)
    assert_allclose(sp.estimate[5:], g[5:], atol=0.02)  # away from DC: under 0.5 %
    # noise-free linear data: multiple coherence 1 (closed form), up to leakage
    assert np.all(sp.multiple_coherence > 0.99)


# --- prediction ----------------------------------------------------------------------------


def _kalman_predictor_loop(model, u, y, x0):
    # direct recursion: xhat[t+1] = A xhat + B u + K (y - C xhat - D u)
    A, B, C, D, K = model.A, model.B, model.C, model.D, model.noise_gain
    x = np.array(x0, float)
    states = []
    for t in range(u.shape[0]):
        states.append(x.copy())
        x = A @ x + B @ u[t] + K @ (y[t] - C @ x - D @ u[t])
    return np.array(states)


@pytest.mark.parametrize("steps", [1, 3])
def test_predict_equals_direct_kalman_recursion(truth, steps):
    model, u, y = truth
    u, y = u[:300], y[:300]
    x0 = np.array([0.4, -0.2, 0.1])
    xp = _kalman_predictor_loop(model, u, y, x0)
    A, B, C, D = model.A, model.B, model.C, model.D
    ref = np.empty_like(y)
    for t in range(u.shape[0]):
        if t - steps + 1 <= 0:  # no measurement yet: free run from x0
            x, s = x0.copy(), 0
        else:
            s = t - steps + 1
            x = xp[s].copy()
        for k in range(s, t):
            x = A @ x + B @ u[k]
        ref[t] = C @ x + D @ u[t]
    # same arithmetic in another order: rounding only
    assert_allclose(predict(model, u, y, steps, x0), ref, rtol=1e-9, atol=1e-10)


def test_predict_without_noise_gain_is_simulation(truth, rng):
    model, u, y = truth
    plain = model.with_changes(noise_gain=None)
    x0 = rng.standard_normal(3)
    for steps in (1, 5):
        # identical by definition (K = None): rounding only
        assert_allclose(predict(plain, u, y, steps, x0), simulate(plain, u, x0), rtol=1e-12)


# --- the whole check -----------------------------------------------------------------------


def test_fit_is_100_for_noise_free_data_from_the_true_model(rng):
    model = _true_model().with_changes(noise_gain=None)
    u = rng.standard_normal((800, 1))
    y = simulate(model, u, x0=np.array([1.0, -2.0, 0.5]))
    report = validate_model(model, u, y, T)
    # closed form: a perfect model of noise-free data fits 100 %; the initial state is
    # estimated by least squares, so agreement is to rounding
    assert_allclose(report.simulation_fit, [100.0], atol=1e-6)
    assert_allclose(report.prediction_fit, [100.0], atol=1e-6)


def test_true_model_passes_on_its_own_data(truth):
    model, u, y = truth
    report = validate_model(model, u, y, T, CheckOptions(min_fit=70.0, require_white=True))
    model_failures = [v for v in report.verdicts if not v.passed and v.test not in DATA_TESTS]
    assert model_failures == [], [v.message for v in model_failures]
    assert report.passed and report.whiteness[0].white
    assert not _failed(report, "feedback")
    # the one-step predictor of the true model is better than its simulation (noise model)
    assert report.prediction_fit[0] > report.simulation_fit[0]
    # Jarque-Bera is reported as statsmodels computes it on the same residuals
    jb, pval, _, _ = jarque_bera(report.residuals[report.scored_from:], axis=0)
    assert_allclose(report.normality.statistic, jb, rtol=1e-12)
    assert_allclose(report.normality.pvalue, pval, rtol=1e-12)


def test_under_ordered_model_fails_and_the_advice_says_too_low(truth):
    _, u, y = truth
    under = _ss([0.6], [1, -0.85, 0])  # first order, same delay and DC gain 4
    report = validate_model(under, u, y, T, CheckOptions(min_fit=70.0))
    causes = {v.cause for v in _failed(report, "input_independence")}
    assert causes == {"input_dynamics"}
    assert _failed(report, "min_fit") and not report.passed
    assert [v.cause for v in _failed(report, "whiteness")] == ["input_dynamics"]
    assert _failed(report, "frequency_response")
    # one place speaks of the order, and only once
    assert report.advice.direction == "higher" and report.advice.too_high == ()
    order = [v for v in report.verdicts if v.test == "order"]
    assert len(order) == 1 and "too low" in order[0].message
    assert not any(word in v.message for v in report.verdicts if v.test != "order"
                   for word in ("too low", "too high"))


def test_wrong_delay_fails_with_delay_verdict(truth):
    _, u, y = truth
    early = _ss([0.5, 0.3], [1, -1.5, 0.7])  # right dynamics, delay 1 instead of 2
    report = validate_model(early, u, y, T)
    bad = _failed(report, "input_independence")
    assert [v.cause for v in bad] == ["delay"]
    assert "1 sample(s) later" in bad[0].message


def test_missing_noise_model_is_named(truth):
    model, u, y = truth
    report = validate_model(model.with_changes(noise_gain=None), u, y, T)
    assert not _failed(report, "input_independence")
    assert [v.cause for v in _failed(report, "whiteness")] == ["noise_model"]
    assert "noise model" in _failed(report, "whiteness")[0].message


def test_feedback_is_detected(rng):
    # closed loop: u[t] = r[t] - 0.3 y[t-1]; the residual of y leads u
    model = _true_model()
    n = 4000
    r = rng.standard_normal(n)
    e = 0.3 * rng.standard_normal(n)
    A, B, C, K = model.A, model.B, model.C, model.noise_gain
    x = np.zeros(3)
    u = np.zeros((n, 1))
    y = np.zeros((n, 1))
    for t in range(n):
        u[t] = r[t] - (0.3 * y[t - 1, 0] if t else 0.0)
        y[t] = C @ x + e[t]
        x = A @ x + B[:, 0] * u[t, 0] + K[:, 0] * e[t]
    report = validate_model(model.with_changes(noise_gain=None), u, y, T)
    assert [v.cause for v in _failed(report, "feedback")] == ["feedback"]
    # data that passed a zero-phase anti-alias filter: the filter is named beside feedback
    filtered = validate_model(model.with_changes(noise_gain=None), u, y, T, zero_phase_filtered=True)
    message = _failed(filtered, "feedback")[0].message
    assert "either u1 reacts to y1" in message and "zero-phase anti-alias filter" in message


def test_report_to_dict_is_json(truth):
    model, u, y = truth
    report = validate_model(model, u[:1000], y[:1000], T, CheckOptions(max_lag=10))
    d = report_to_dict(report)
    text = json.dumps(d, allow_nan=False)
    back = json.loads(text)
    assert back["fit"]["y1"]["simulation_percent"] == pytest.approx(report.simulation_fit[0])
    assert len(back["whiteness"]["y1"]["autocorrelation"]["values"]) == 11
    assert len(back["cross_correlation"]["y1"]["u1"]["lags"]) == 21
    assert {"test", "passed", "message", "cause"} <= set(back["verdicts"][0])


def test_options_and_inputs_are_checked(truth):
    model, u, y = truth
    with pytest.raises(OptionError, match="max_lag"):
        CheckOptions(max_lag=0)
    with pytest.raises(OptionError, match="initial_state"):
        CheckOptions(initial_state="guess")
    with pytest.raises(OptionError, match="unknown check option"):
        CheckOptions.from_mapping({"max_lags": 3})
    assert CheckOptions.from_mapping({"max_lag": 7}).max_lag == 7
    with pytest.raises(OptionError, match="sample time"):
        validate_model(model, u, y, 0.02)
    with pytest.raises(OptionError, match="at least"):
        validate_model(model, u[:40], y[:40], T)  # 30 samples after the 10-sample initial-state window
    with pytest.raises(ModelError):
        validate_model(model.with_changes(sample_time=None, noise_gain=None), u, y, T)
    before = u.copy()
    validate_model(model, u[:600], y[:600], T, CheckOptions(max_lag=10, initial_state="zero"))
    assert_allclose(u, before, rtol=0, atol=0)


# --- issue 13: verdicts a user can trust -----------------------------------------------------


def _plant_and_noise():
    # invented valve rig: y = 0.2 q^-1 / (1 - 0.8 q^-1) u + 1 / (1 - 0.98 q^-1) 0.05 e (slowly wandering noise)
    plant = _ss([0.2], [1.0, -0.8])
    return plant, ([0.0, 0.2], [1.0, -0.8]), ([1.0], [1.0, -0.98])


def test_swept_sine_open_loop_has_no_feedback_and_a_pi_loop_has():
    plant, (b, a), (c, d) = _plant_and_noise()
    rng = np.random.default_rng(0)
    n = 6000
    t = np.arange(n) * T
    sweep = signal.chirp(t, f0=0.02, t1=t[-1], f1=2.0)  # swept sine, 0.02 -> 2 Hz (scipy.signal.chirp)
    noise = signal.lfilter(c, d, 0.05 * rng.standard_normal(n))
    y = signal.lfilter(b, a, sweep) + noise
    u = sweep[:, None]
    report = validate_model(plant, u, y[:, None], T)  # the true plant, no noise model: coloured residuals
    assert not _failed(report, "feedback"), [v.message for v in _failed(report, "feedback")]
    assert not _failed(report, "input_independence")
    assert report.whiteners[0].order > 0
    # the same correlation without prewhitening raises a false alarm: the test has power
    s = report.scored_from
    raw = cross_correlation(report.residuals[s:, 0], u[s:, 0], report.lag_span.lags, 0.95, simultaneous=True)
    assert raw.fails(np.arange(-report.lag_span.lags, 0))
    # closed loop: a PI controller (kp = 0.5, ki = 0.05 per sample, invented) tracks the sweep
    u_cl = np.zeros(n)
    y_cl = np.zeros(n)
    x = 0.0
    integral = 0.0
    for k in range(n):
        y_cl[k] = x + noise[k]
        err = sweep[k] - y_cl[k]
        integral += err
        u_cl[k] = 0.5 * err + 0.05 * integral
        x = 0.8 * x + 0.2 * u_cl[k]
    closed = validate_model(plant, u_cl[:, None], y_cl[:, None], T)
    assert [v.cause for v in _failed(closed, "feedback")] == ["feedback"]


def test_table_figure_and_verdict_read_the_same_numbers(truth):
    model, u, y = truth
    under = _ss([0.6], [1, -0.85, 0])
    early = _ss([0.5, 0.3], [1, -1.5, 0.7])
    for m in (model, under, early, model.with_changes(noise_gain=None)):
        report = validate_model(m, u, y, T)
        L = report.lag_span.lags
        as_json = report_to_dict(report)
        for i, row in enumerate(report.cross_correlation):
            for j, c in enumerate(row):
                indep = next(v for v in report.verdicts if v.test == "input_independence" and v.input == m.inputs[j])
                fb = next(v for v in report.verdicts if v.test == "feedback" and v.input == m.inputs[j])
                assert indep.passed == (not c.outside(range(0, L + 1)))
                # feedback reads the residual less what past inputs explain, against its own band
                back = report.feedback_correlation[i][j]
                assert fb.passed == (not back.outside(range(-L, 0)))
                o, n = m.outputs[i], m.inputs[j]
                assert as_json["cross_correlation"][o][n]["outside_judged"] == list(c.outside(range(0, L + 1)))
                assert as_json["feedback_correlation"][o][n]["outside_judged"] == list(back.outside(range(-L, 0)))
                assert as_json["feedback_correlation"][o][n]["judged_lags"] == [-L, -1]
        for w in report.whiteness:
            white = next(v for v in report.verdicts if v.test == "whiteness" and v.output == w.output)
            assert white.passed == w.white == (not w.autocorrelation.significant_lags)


def test_fit_figures_are_labelled_and_match_an_independent_simulation(rng):
    # a slow invented plant that starts far from rest: the start matters
    plant = _ss([0.02], [1.0, -0.98])
    n = 1500
    u = rng.standard_normal((n, 1))
    _, y0, _ = signal.dlsim((plant.A, plant.B, plant.C, plant.D, T), u, x0=[40.0])
    y = y0 + 0.05 * rng.standard_normal(y0.shape)
    report = validate_model(plant, u, y, T)
    rest, est = report.fit_of("from_rest"), report.fit_of("initial_state")
    w = est.first_scored
    assert w == 50 and report.scored_from == 50  # max(10 n, 50) samples, n = 1 (the scoring rule)
    # from rest: scipy.signal.dlsim from zero, every sample scored
    _, yr, _ = signal.dlsim((plant.A, plant.B, plant.C, plant.D, T), u)
    assert_allclose(rest.fit, 100 * (1 - np.linalg.norm(y - yr) / np.linalg.norm(y - y.mean())), rtol=1e-9)
    # initial state estimated: least squares on the first w samples (free response from dlsim), those
    # samples not scored
    _, free, _ = signal.dlsim((plant.A, plant.B, plant.C, plant.D, T), np.zeros((w, 1)), x0=[1.0])
    x0 = np.linalg.lstsq(free, (y - yr)[:w, 0], rcond=None)[0]
    _, ye, _ = signal.dlsim((plant.A, plant.B, plant.C, plant.D, T), u, x0=x0)
    ref = 100 * (1 - np.linalg.norm(y[w:] - ye[w:]) / np.linalg.norm(y[w:] - y[w:].mean()))
    assert_allclose(est.fit, ref, rtol=1e-9)
    # and the same as the identification's held-out scoring with a window (ident.estimate.scoring)
    from ident.estimate.data import Experiment
    from ident.estimate.scoring import held_out_score

    assert_allclose(est.fit, held_out_score(plant, [Experiment(u, y)], w).fit, rtol=1e-12)
    assert est.fit[0] > rest.fit[0] + 10  # from rest is far lower here ...
    assert report.simulation_fit[0] == est.fit[0]  # ... and the estimated start is the one to believe
    assert "unless the record began at rest" in report.fit_note
    assert "not scored" in est.label


def test_a_continued_figure_is_believed_first(truth):
    from ident.assess.diagnostics import FitFigure

    model, u, y = truth
    cont = FitFigure("continued", [55.0], 0, "continued from the data before")
    report = validate_model(model, u, y, T, continued=cont)
    assert [f.kind for f in report.fits] == ["continued", "initial_state", "from_rest"]
    assert report.simulation_fit[0] == 55.0 and "believe 'continued" in report.fit_note


def test_prediction_worse_than_simulation_blames_the_noise_model(rng):
    plant = _ss([0.2], [1.0, -0.8])
    u = rng.standard_normal((3000, 1))
    _, y, _ = signal.dlsim((plant.A, plant.B, plant.C, plant.D, T), u)
    y = y + 0.05 * rng.standard_normal(y.shape)  # white measurement noise: K = 0 is right
    # a wrong noise gain: predictor pole A - K C = 0.8 - 6.5 * 0.2 = -0.5 feeds the noise back
    wrong = plant.with_changes(noise_gain=np.array([[6.5]]))
    report = validate_model(wrong, u, y, T)
    bad = _failed(report, "prediction")
    assert [v.cause for v in bad] == ["noise_model"] and "worse than the simulation" in bad[0].message
    assert report.prediction_fit[0] < report.simulation_fit[0] - 1


def test_in_sample_fit_far_above_held_out_is_called_out(truth):
    model, u, y = truth
    held = validate_model(model, u, y, T).simulation_fit[0]
    report = validate_model(model, u, y, T, in_sample_fit=[held + 5])
    assert next(v for v in report.verdicts if v.test == "fit_gap").passed is True
    report = validate_model(model, u, y, T, in_sample_fit=[held + 30])
    gap = next(v for v in report.verdicts if v.test == "fit_gap")
    assert gap.passed is False and gap.cause == "overfit"
    assert report.advice.direction == "lower"
    report = validate_model(model, u, y, T, in_sample_fit=[held - 30])
    gap = next(v for v in report.verdicts if v.test == "fit_gap")
    assert gap.cause == "suspicious_split" and "suspicious" in gap.message


def test_cancelling_mode_with_missed_dynamics_gets_no_contradictory_advice(truth):
    _, u, y = truth
    under = _ss([0.6], [1, -0.85, 0])
    # add a pole at 0.5010 that nearly cancels a zero at 0.5 (0.2 % apart): flagged near_cancellation
    extra = _ss([1.0, -0.5], [1.0, -0.501])
    from ident.lti.models import StateSpaceModel as SS

    A = np.block([[under.A, np.zeros((2, 1))], [extra.B @ under.C, extra.A]])
    B = np.vstack([under.B, extra.B @ under.D])
    C = np.hstack([extra.D @ under.C, extra.C])
    both = SS(A=A, B=B, C=C, D=extra.D @ under.D, sample_time=T)
    report = validate_model(both, u, y, T)
    assert report.advice.too_high and report.advice.too_low
    assert report.advice.direction == "unclear"
    texts = " ".join(v.message for v in report.verdicts)
    assert not ("too high" in texts and "too low" in texts)
    order = [v for v in report.verdicts if v.test == "order"]
    assert len(order) == 1 and order[0].passed is None


def test_poor_model_headline_without_a_gate(truth):
    model, u, y = truth
    bad = model.with_changes(C=0.2 * model.C, noise_gain=None)
    report = validate_model(bad, u, y, T)
    assert report.simulation_fit[0] < 50
    assert report.headline.startswith("POOR MODEL: y1 below the warning level of 50 %")
    assert "held-out fit y1" in report.headline
    assert [v.cause for v in _failed(report, "fit_level")] == ["poor_fit"]
    quiet = validate_model(bad, u, y, T, CheckOptions(fit_warning=None))
    assert quiet.headline.startswith("no gate set; held-out fit y1")
    good = validate_model(model, u, y, T, CheckOptions(min_fit=50.0))
    # PASSED never appears without the fit per output beside it
    assert good.headline.startswith("PASSED; held-out fit y1 ")


def test_level_dependent_residuals_suggest_a_nonlinearity(rng):
    plant = _ss([0.2], [1.0, -0.8])
    u = rng.uniform(-2, 2, (4000, 1))
    _, lin, _ = signal.dlsim((plant.A, plant.B, plant.C, plant.D, T), u)
    noise = 0.02 * rng.standard_normal(lin.shape)
    report = validate_model(plant, u, lin + noise, T)
    assert not _failed(report, "nonlinearity")
    saturated = 0.8 * np.tanh(lin / 0.8) + noise  # an invented sensor that saturates near 0.8
    report = validate_model(plant, u, saturated, T)
    bad = _failed(report, "nonlinearity")
    assert bad and "nonlinear around this operating point" in bad[0].message and "smaller amplitude" in bad[0].message
    assert "nonlinearity" in DATA_TESTS


@pytest.mark.filterwarnings("ignore::ident.errors.IdentWarning")
@pytest.mark.parametrize(("name", "column_in", "column_out", "rate"), [
    ("robot_arm.csv", "reaction torque", "arm acceleration", 1.0),  # DaISy 96-009, Ts unpublished
    ("heating_system.csv", "drive voltage", "plate temperature", None),  # DaISy 99-001, Ts 2 s
])
def test_frequency_verdict_agrees_with_the_time_domain_fit_on_measured_data(shared_dataset, name, column_in,
                                                                             column_out, rate):
    # issue 13: no "disagrees" for a model above 90 % held-out fit on the open datasets
    from ident.estimate.identify import identify
    from ident.estimate.validation import continued_fits
    from ident.io.log import read_log

    log = read_log(shared_dataset(name), [column_in], [column_out], sample_rate=rate)
    result = identify([(log.u, log.y)], log.sample_time)
    prep, model = result.prepared, result.model
    held = validate_model(model, prep.validation[0].u, prep.validation[0].y, prep.sample_time,
                          continued=continued_fits(model, prep)[0], in_sample_fit=result.estimation_fit)
    whole = validate_model(model, log.u - model.operating_point.inputs, log.y - model.operating_point.outputs,
                           log.sample_time)
    status = held.spectral.judgements[0].status
    assert not (held.simulation_fit[0] >= 90.0 and status == "disagrees")  # the rule: held-out fit
    for report in (held, whole):
        # never "agrees" on data that cannot tell (an in-sample fit above 90 % may still miss a band:
        # the heating-system model, an integrator at 83 % held-out, misses 0.023-0.035 Hz by 42 %)
        status = report.spectral.judgements[0].status
        assert status != "agrees" or report.spectral.judgements[0].informative_share >= 0.3
    if name == "robot_arm.csv":  # the case of the issue: a 97 % model the old verdict called wrong
        assert whole.simulation_fit[0] > 90.0 and whole.spectral.judgements[0].status == "agrees"


@pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")
def test_an_initial_state_the_record_cannot_overdetermine_is_refused(rng):
    # 21 states (a lag behind 20 samples of delay) on 60 samples: the window of N / 4 = 15 samples gives
    # 15 equations for 21 unknowns (least squares needs more equations than unknowns; common practice)
    num = np.zeros(22)
    num[21] = 0.1
    A, B, C, D = signal.tf2ss(num, np.r_[1.0, -0.9, np.zeros(20)])
    model = StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=T)
    assert model.n_states == 21
    u = rng.standard_normal((60, 1))
    y = simulate(model, u) + 0.01 * rng.standard_normal((60, 1))
    with pytest.raises(OptionError, match="15 equations for 21 unknowns"):
        validate_model(model, u, y, T)
    report = validate_model(model, u, y, T, CheckOptions(initial_state="zero"))  # from rest: nothing to fit
    assert np.isfinite(report.simulation_fit).all()
