"""Tests of ident.estimate.identify: recovery of known systems, order selection, bad input."""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.errors import IdentificationError, OptionError, PipelineError, PoorExcitationWarning
from ident.estimate.identify import (
    METHODS,
    IdentifyOptions,
    excitation_order,
    identify,
)
from ident.estimate.preprocess import PreprocessOptions

T = 0.01
#: Poles of the second-order test plant: 0.9 +- 0.2j (chosen, no source).
POLES_2 = np.array([0.9 - 0.2j, 0.9 + 0.2j])
#: Rest period at the start of noise-free logs, used as the operating point so
#: that the recorded data satisfy the model exactly.
REST = 50
AT_REST = PreprocessOptions(offset="initial", initial_window_s=REST * T)


def _second_order_log(rng, n=3000, noise=0.0):
    """SISO log of y = (0.5 z + 0.3) / ((z - p1)(z - p2)) u, simulated with scipy.signal.dlsim."""
    den = np.poly(POLES_2).real
    u = rng.standard_normal(n)
    u[:REST] = 0.0
    _, y = signal.dlsim((np.array([0.5, 0.3]), den, T), u)
    y = y[:, 0] + noise * rng.standard_normal(n)
    return u[:, None] + 1.5, y[:, None] - 4.0  # an operating point the data carry


def _sorted(z):
    z = np.asarray(z, dtype=complex)
    return z[np.lexsort((z.imag, z.real))]


@pytest.mark.parametrize("method", ["arx", "subspace"])
def test_noise_free_poles_recovered(rng, method):
    u, y = _second_order_log(rng)
    res = identify((u, y), T, IdentifyOptions(method=method, order=2, preprocess=AT_REST))
    assert res.method == method and res.order == 2
    # noise-free data: the poles are exact up to rounding; 1e-6 relative as asked
    assert_allclose(_sorted(res.model.poles()), _sorted(POLES_2), rtol=1e-6)
    assert_allclose(res.validation_fit, [100.0], atol=1e-4)  # fit percent, noise free
    # operating point = level over the rest window (closed form: the offsets added)
    assert_allclose(res.model.operating_point.inputs, [1.5], rtol=1e-15)
    assert_allclose(res.model.operating_point.outputs, [-4.0], rtol=1e-15)
    assert res.model.sample_time == T


def test_auto_order_arx_data(rng):
    # an ARX process: A(q) y = B(q) u + e, equation-error noise (Ljung 1999, sec. 4.2)
    n = 6000
    den = np.poly(POLES_2).real
    u = rng.standard_normal(n)
    e = 0.05 * rng.standard_normal(n)
    y = signal.lfilter([0.0, 0.5, 0.3], den, u) + signal.lfilter([1.0], den, e)
    res = identify((u, y), T, IdentifyOptions(method="arx", max_order=6))
    assert res.method == "arx"
    assert res.order == 2
    assert res.selected.structure["nk"] == [1]  # one sample delay, by construction
    # the order-2 ARX model is the true structure: poles close to the truth; the
    # tolerance is many standard errors wide for this noise level and length
    assert_allclose(_sorted(res.model.poles()), _sorted(POLES_2), atol=0.01)
    assert sum(c.selected for c in res.candidates) == 1
    # the grid: na, nb in 1..6, delays 0..2 around the estimated 1 (6 * 6 * 3 structures)
    grid = res.arx_sweep
    assert len(grid.rows) == 108
    assert {r.nk for r in grid.rows} == {(0,), (1,), (2,)}
    # every criterion's best grid structure is among the candidates, and best_by points at it
    for name in ("aic", "bic", "fpe"):
        row = grid.rows[grid.best[name]]
        cand = res.candidates[res.best_by[name]]
        assert (cand.structure["na"], cand.structure["nb"], cand.structure["nk"]) == (
            row.na, list(row.nb), list(row.nk))
        assert cand.criteria.get(name) == getattr(row, name)
    # at most 3 per criterion are validated
    assert 1 <= len(res.candidates) <= 9
    # BIC prefers the true structure na = nb = 2, nk = 1 (common practice: BIC is
    # consistent for the order when the true model is in the set; Ljung 1999, sec. 16.4)
    assert res.candidates[res.best_by["bic"]].structure == {"na": 2, "nb": [2], "nk": [1]}


def test_grid_criteria_match_statsmodels(rng):
    # the grid's criteria come from residuals equal to OLS residuals on the common rows
    import statsmodels.api as sm

    from ident.estimate.arx import arx_regressors, fit_arx, grid_search_arx
    from ident.estimate.data import Experiment

    n = 3000
    u = rng.standard_normal(n)
    y = signal.lfilter([0.0, 0.4], [1.0, -0.6], u) + 0.1 * rng.standard_normal(n)
    sweep, picks, steps = grid_search_arx(Experiment(u, y), T, na_values=[1, 2],
                                          nb_values=[1, 2], nk_values=[(1,), (2,)])
    L = 3  # largest lag of the grid: nk = 2, nb = 2 (closed form)
    for row in sweep.rows:
        phi, target = arx_regressors(Experiment(u, y), row.na, row.nb, row.nk)
        lag = max(row.na, row.nk[0] + row.nb[0] - 1)
        ols = sm.OLS(target[L - lag:], phi[L - lag:]).fit()
        # same least-squares problem, two algorithms: agreement to rounding
        assert_allclose(row.loss, ols.ssr / ols.nobs, rtol=1e-9)
    results = dict(steps)
    assert set(results) == set(picks)
    for k, fitted in results.items():
        row = sweep.rows[k]
        assert (fitted.na, fitted.nb, fitted.nk) == (row.na, row.nb, row.nk)
        alone = fit_arx(Experiment(u, y), T, row.options())
        # one shared R factor vs the structure's own factorisation: equal to rounding
        assert_allclose(fitted.parameters[0], alone.parameters[0], rtol=1e-9)
        assert_allclose(fitted.std_errors[0], alone.std_errors[0], rtol=1e-9)


def test_auto_order_subspace_data(rng):
    # a third-order state-space plant with white output noise (output-error)
    sys_c = signal.StateSpace(*signal.zpk2ss([], [-2.0, -1.0 + 6.0j, -1.0 - 6.0j], 40.0))
    A, B, C, D, _ = signal.cont2discrete((sys_c.A, sys_c.B, sys_c.C, sys_c.D), 0.05)
    n = 6000
    u = rng.standard_normal(n)
    _, y, _ = signal.dlsim((A, B, C, D, 0.05), u)
    y = y[:, 0] + 0.02 * np.std(y) * rng.standard_normal(n)
    res = identify((u, y), 0.05, IdentifyOptions(method="subspace", max_order=6))
    assert res.method == "subspace"
    assert res.order == 3
    # exp(s T) of the continuous poles (closed form); loose for 2 % output noise
    assert_allclose(_sorted(res.model.poles()),
                    _sorted(np.exp(np.array([-2.0, -1 + 6j, -1 - 6j]) * 0.05)), atol=5e-3)
    assert res.singular_values is not None and res.suggested_order == 3
    # 2 % output noise keeps the scaled data covariance well conditioned: the Gram path
    assert res.subspace_factorization["path"] == "gram"
    assert 1.0 <= res.subspace_factorization["gram_condition"] <= 1e8


def test_auto_picks_simpler_model_on_noise_free_first_order(rng):
    n = 2000
    u = rng.standard_normal(n)
    u[:REST] = 0.0
    y = signal.lfilter([0.0, 0.2], [1.0, -0.8], u)  # first order, pole 0.8
    res = identify((u, y), T, IdentifyOptions(max_order=3, preprocess=AT_REST))
    # every candidate of order >= 1 fits exactly: exact fits tie (the loss floor of
    # ident.estimate.selection) and the fewest parameters win
    assert res.order == 1
    assert res.model.n_states == 1
    assert_allclose(res.model.poles(), [0.8], rtol=1e-6)  # pole of 1/(1 - 0.8 z^-1)


def test_two_experiments_combined(rng):
    u1, y1 = _second_order_log(rng, n=1500)
    u2, y2 = _second_order_log(rng, n=1500)
    # the two records, each from rest; joining them end to end would break the recursion
    res = identify([(u1, y1), (u2, y2)], T,
                   IdentifyOptions(method="arx", order=2, preprocess=AT_REST))
    assert_allclose(_sorted(res.model.poles()), _sorted(POLES_2), rtol=1e-6)  # noise free
    assert res.prepared.estimation_ranges == ((0, 1050), (1500, 2550))  # 70 % of each


def test_mimo_subspace_noise_free(rng):
    # 2x2 coupled plant (chosen, no source), simulated with scipy.signal.dlsim
    A = np.array([[0.8, 0.2, 0.0], [-0.2, 0.8, 0.1], [0.0, 0.0, 0.5]])
    B = np.array([[1.0, 0.0], [0.0, 0.5], [0.3, 1.0]])
    C = np.array([[1.0, 0.0, 0.5], [0.0, 1.0, -1.0]])
    D = np.zeros((2, 2))
    n = 3000
    u = rng.standard_normal((n, 2))
    u[:REST] = 0.0
    _, y, _ = signal.dlsim((A, B, C, D, T), u)
    res = identify((u, y), T, IdentifyOptions(method="subspace", max_order=5,
                                              preprocess=AT_REST))
    assert res.order == 3
    # numpy.linalg.eigvals of A is the reference; noise free, so 1e-6 relative
    assert_allclose(_sorted(res.model.poles()), _sorted(np.linalg.eigvals(A)), rtol=1e-6)


# --------------------------------------------------------------------------- bad input


def test_output_equal_to_input_is_refused(rng):
    u = rng.standard_normal((500, 1))
    with pytest.raises(IdentificationError, match="identical to input"):
        identify((u, u.copy()), T, IdentifyOptions(method="arx", order=1))


def test_collinear_inputs_refused(rng):
    a = rng.standard_normal(800)
    u = np.column_stack((a, 2.0 * a + 1.0))
    y = signal.lfilter([0.0, 1.0], [1.0, -0.5], a)
    with pytest.raises(IdentificationError, match="collinear"):
        identify((u, y[:, None]), T, IdentifyOptions(method="arx", order=1))


def test_constant_input_refused(rng):
    u = np.ones((500, 1))
    y = rng.standard_normal((500, 1))
    with pytest.raises(IdentificationError, match="constant"):
        identify((u, y), T)
    # round-off variation on a level is still constant; a signal in small units is not (the test is
    # relative to the signal's own magnitude; common practice, no source)
    with pytest.raises(IdentificationError, match="input 'u1' is constant"):
        identify((5.0 + 1e-15 * rng.standard_normal((500, 1)), y), T, IdentifyOptions(method="arx", order=1))
    small = 1e-13 * rng.standard_normal((500, 1))
    res = identify((small, 1e-13 * signal.lfilter([0.0, 0.5], [1.0, -0.7], small[:, 0] / 1e-13)[:, None]), T,
                   IdentifyOptions(method="arx", order=1))
    assert_allclose(res.model.poles(), [0.7], atol=1e-4)  # the pole of the noise-free lag


def test_weak_excitation_is_a_warning_never_a_cap(rng):
    k = np.arange(2000)
    u = np.sin(0.3 * k)  # one sinusoid: persistently exciting of order 2 (closed form)
    y = signal.lfilter([0.0, 0.5], [1.0, -0.7], u) + 0.01 * rng.standard_normal(k.size)
    assert excitation_order([u[:, None]], 8).tolist() == [2]
    # a fixed order above what the input supports is fitted anyway, with a warning
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = identify((u, y), T, IdentifyOptions(method="arx", order=3))
    assert res.order == 3
    assert any(issubclass(w.category, PoorExcitationWarning) and "persistently exciting of order 2" in str(w.message)
               for w in caught)
    # a sweep tries every order (no cap) and says which ones the input cannot pin down
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = identify((u, y), T, IdentifyOptions(method="arx", max_order=4))
    assert {r.na for r in res.arx_sweep.rows} == {1, 2, 3, 4}
    assert any("may be poorly determined" in w for w in res.warnings)


def test_excitation_order_of_white_noise(rng):
    # white noise is persistently exciting of any order (Söderström & Stoica 1989, 5.4)
    assert excitation_order([rng.standard_normal((5000, 2))], 10).tolist() == [10, 10]


def test_order_too_high_for_data_length(rng):
    u, y = _second_order_log(rng, n=150)
    with pytest.raises(IdentificationError, match="too high"):
        identify((u, y), T, IdentifyOptions(method="arx", order=10))


def test_options_validation_and_mapping():
    assert METHODS == ("arx", "subspace", "auto", "oe", "armax", "bj")  # ident.choices
    with pytest.raises(OptionError):
        IdentifyOptions(method="best")
    with pytest.raises(OptionError):
        IdentifyOptions(order=0)
    opts = IdentifyOptions.from_mapping(
        {"method": "arx", "max_order": 4, "preprocess": {"holdout": 0.4}}, key_path="fit"
    )
    assert opts.method == "arx" and opts.preprocess.holdout == 0.4
    with pytest.raises(PipelineError, match="fit.preprocess.holdot"):
        IdentifyOptions.from_mapping({"preprocess": {"holdot": 0.4}}, key_path="fit")
    with pytest.raises(PipelineError, match="fit.ordr"):
        IdentifyOptions.from_mapping({"ordr": 3}, key_path="fit")
    d = opts.to_dict()
    assert d["preprocess"]["holdout"] == 0.4 and d["method"] == "arx"


def test_holdout_zero_refused(rng):
    u, y = _second_order_log(rng, n=500)
    with pytest.raises(OptionError, match="holdout"):
        identify((u, y), T, IdentifyOptions(preprocess=PreprocessOptions(holdout=0.0)))


def test_progress_called_and_inputs_unchanged(rng):
    u, y = _second_order_log(rng, n=800, noise=0.01)
    u0 = u.copy()
    calls = []
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        identify((u, y), T, IdentifyOptions(method="arx", max_order=2),
                 progress=lambda step, f: calls.append((step, f)))
    assert calls[0][1] == 0.0 and calls[-1] == ("done", 1.0)
    assert all(0.0 <= f <= 1.0 for _, f in calls)
    np.testing.assert_array_equal(u, u0)


def test_hair_dryer_beats_low_order_arx_baseline(shared_dataset):
    # measured data (DaISy 96-006); sample time not published, 1 s used (normalised)
    import statsmodels.api as sm

    from ident.io.log import read_log

    log = read_log(shared_dataset("hair_dryer.csv"), ["heater voltage"],
                   ["outlet air temperature"], sample_rate=1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = identify([(log.u, log.y)], 1.0, IdentifyOptions(max_order=6))
    prep = res.prepared
    est, val = prep.estimation[0], prep.validation[0]
    # baseline: ARX na = nb = 2, nk = 1 by statsmodels OLS on explicit lagged regressors,
    # simulated with scipy.signal.lfilter from the measured past (scipy.signal.lfiltic)
    u, y = est.u[:, 0], est.y[:, 0]
    X = np.column_stack((-y[1:-1], -y[:-2], u[1:-1], u[:-2]))
    a1, a2, b1, b2 = sm.OLS(y[2:], X).fit().params
    a, b = [1.0, a1, a2], [0.0, b1, b2]
    zi = signal.lfiltic(b, a, y[::-1][:2], u[::-1][:2])
    y_hat, _ = signal.lfilter(b, a, val.u[:, 0], zi=zi)
    yv = val.y[:, 0]
    baseline = 100 * (1 - np.linalg.norm(yv - y_hat) / np.linalg.norm(yv - yv.mean()))
    assert np.isfinite(res.selected.mean_fit)
    # the refined model is at least as good on the held-out data as the low-order ARX baseline
    # (same held-out samples; the baseline also starts from the measured past)
    assert res.validation_fit[0] >= baseline


def test_held_out_scores_match_dlsim(rng):
    from ident.estimate.arx import ArxOptions, fit_arx
    from ident.estimate.data import Experiment
    from ident.estimate.scoring import held_out_score
    from ident.lti.models import StateSpaceModel

    A = np.array([[0.9, 0.2], [-0.2, 0.9]])
    B = np.array([[1.0], [0.5]])
    C = np.array([[1.0, -1.0]])
    D = np.array([[0.1]])
    model = StateSpaceModel(A, B, C, D, sample_time=T)
    u = rng.standard_normal((3000, 1))
    x0 = np.array([0.3, -0.7])
    _, y, _ = signal.dlsim((A, B, C, D, T), u, x0=x0)  # scipy.signal.dlsim with the same state
    warm = Experiment(u[:1000], y[:1000])
    part = Experiment(u[1000:], y[1000:])
    # continued from the warm-up: the true model explains every held-out sample to rounding
    score = held_out_score(model, [part], 50, warmups=[warm])
    assert_allclose(score.errors[0], 0.0, atol=1e-9)
    assert_allclose(score.fit, [100.0], atol=1e-7)
    # an ARX candidate is scored by its own difference equations: the same numbers as dlsim of
    # its realisation (rounding only)
    yy = signal.lfilter([0.0, 0.5, 0.2], [1.0, -1.2, 0.5], u[:, 0]) + 0.01 * rng.standard_normal(3000)
    arx = fit_arx(Experiment(u[:2000], yy[:2000]), T, ArxOptions(na=2, nb=2, nk=1))
    fast = held_out_score(arx.model, [Experiment(u[2000:], yy[2000:, None])], 60, simulator=arx.simulate)
    slow = held_out_score(arx.model, [Experiment(u[2000:], yy[2000:, None])], 60)
    assert_allclose(fast.errors[0], slow.errors[0], atol=1e-9)


def test_an_overflowing_candidate_scores_minus_infinity_quietly(rng, capfd):
    # common practice, no source: a strongly unstable candidate's response overflows over the
    # warm-up; it must score -inf without handing LAPACK a non-finite matrix (LAPACK then prints
    # its own complaint on standard output, which carries --json documents)
    from ident.estimate.data import Experiment
    from ident.estimate.scoring import held_out_score
    from ident.lti.models import StateSpaceModel

    model = StateSpaceModel(np.array([[40.0]]), np.array([[1.0]]), np.array([[1.0]]), np.array([[0.0]]),
                            sample_time=T)
    u = rng.standard_normal((2000, 1))
    y = rng.standard_normal((2000, 1))
    score = held_out_score(model, [Experiment(u[1000:], y[1000:])], 50, warmups=[Experiment(u[:1000], y[:1000])])
    assert score.errors == () and np.all(score.fit == -np.inf)
    out, _ = capfd.readouterr()
    assert out == ""


def test_a_delay_too_long_for_the_log_is_refused(rng):
    u, y = _second_order_log(rng, n=600)
    # 600 samples: 420 estimation, 180 held out; a 100-sample delay needs 100 states
    with pytest.raises(IdentificationError, match="too long for this log"):
        identify((u, y), T, IdentifyOptions(method="arx", order=2, delay=100))


def test_held_out_fit_of_a_huge_order_is_not_flattered(rng):
    # a model with many states cannot earn held-out fit from its initial state: the held-out part
    # continues from the estimation data (nothing of it is used for the state)
    u, y = _second_order_log(rng, n=1200, noise=0.05)
    res = identify((u, y), T, IdentifyOptions(method="subspace", order=20, preprocess=AT_REST))
    assert res.validation_fit[0] < 99.9


def test_default_fit_of_the_platen_demo_finds_its_three_modes():
    # our own demo log (sample_data/generate.py, truth in sample_data/truth.json): three real
    # modes, 395.0, 75.33 and 59.31 s, behind a 3 s transport delay. The direct subspace
    # estimates score best with a fourth, noise-fitting state; reducing the refined model
    # by balanced truncation (Moore 1981) and refining again removes it on the evidence
    # of the held-out test, and the three time constants come out within 2 %
    import json
    from pathlib import Path

    from ident.io.log import read_log

    root = Path(__file__).resolve().parents[1] / "sample_data"
    truth = json.loads((root / "truth.json").read_text())["files"]["heated_platen.csv"]
    log = read_log(root / "heated_platen.csv", ["heater_1_duty", "heater_2_duty"], ["zone_1_temp", "zone_2_temp"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = identify([(log.u, log.y)], log.sample_time, IdentifyOptions())
    assert res.input_delay == (3, 3)
    core = res.model.n_states - sum(res.input_delay)
    assert core == 3
    poles = np.sort(np.abs(res.model.poles()))[-3:]
    found = np.sort(-log.sample_time / np.log(poles))
    expected = np.sort([m["time_constant_s"] for m in truth["modes"]])
    assert_allclose(found, expected, rtol=0.02)
    assert res.validation_fit.min() > 99.0


def test_a_polish_that_drives_a_pole_onto_the_unit_circle_is_not_kept(rng, monkeypatch):
    # the final polish on all the estimation data is replaced by one that returns a model with a
    # pole at z = 1 (a stand-in for a lightly damped mode carried onto the stability constraint);
    # the rule (common practice, no source): keep the model the held-out test judged
    import ident.estimate.identify as ident_mod

    u, y = _second_order_log(rng, n=3000, noise=0.05)
    real = ident_mod._final_model
    calls = []

    def polish_onto_circle(prep, options, search, chosen, screen, *, steps=True):
        calls.append(steps)
        model, res, cov = real(prep, options, search, chosen, screen, steps=steps)
        if not steps:
            return model, res, cov
        eig = np.linalg.eigvals(model.A)
        return model.with_changes(A=model.A / np.max(np.abs(eig))), res, cov  # spectral radius exactly 1

    monkeypatch.setattr(ident_mod, "_final_model", polish_onto_circle)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = identify((u, y), T, IdentifyOptions())
    assert res.selected.stage == "refined"
    assert calls == [True, False]
    assert np.max(np.abs(res.model.poles())) < 1.0 - 1e-6
    assert any("drove a pole onto the unit circle" in note for note in res.notes)
