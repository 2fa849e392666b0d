"""Closed-loop logs: feedback detection, prediction error with a noise model, the two-stage method."""

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal, stats

from ident.errors import IdentificationError, OptionError
from ident.estimate.closed_loop import f_survival, feedback_evidence
from ident.estimate.data import Experiment
from ident.estimate.identify import IdentifyOptions, identify

T = 0.01
WN, ZETA = 2 * np.pi * 2.0, 0.2  # the rig's plant: 2 Hz, damping 0.2 (invented)


def _plant():
    num, den, _ = signal.cont2discrete(([WN**2], [1, 2 * ZETA * WN, WN**2]), T, "zoh")
    return num.ravel(), den


def _pi_rig(seed, n=20000):
    """The plant under a PI controller (Kp 0.8, Ki 0.05 per sample), coloured output disturbance.

    The controller computes u[k] from the measurement y[k-1] (one sample of computation delay)
    and the plant answers u[k] from sample k + 1 on; the reference is a random binary signal
    held 0.5 s.
    """
    rng = np.random.default_rng(seed)
    b, a = _plant()
    r = np.repeat(rng.choice([-1.0, 1.0], n // 50 + 1), 50)[:n]
    v = signal.lfilter([1.0], [1.0, -0.9], 0.05 * rng.standard_normal(n))
    y, u = np.zeros(n), np.zeros(n)
    zi = np.zeros(max(len(a), len(b)) - 1)
    integral = 0.0
    for k in range(n):
        e = r[k] - (y[k - 1] if k else 0.0)
        integral += e
        u[k] = 0.8 * e + 0.05 * integral
        out, zi = signal.lfilter(b, a, [u[k]], zi=zi)
        y[k] = out[0] + v[k]
    return u[:, None], y[:, None], r[:, None]


def _resonance(model):
    s = np.log(model.poles()[np.abs(model.poles()) > 0].astype(complex)) / T
    pair = s[np.argmax(s.imag)]
    return abs(pair), -pair.real / abs(pair)


def test_f_survival_matches_scipy():
    for f, d1, d2 in ((1.0, 10, 1000), (2.5, 10, 5000), (4.0, 3, 100), (3.2, 10, 50000)):
        # Paulson's approximation (Abramowitz & Stegun 26.6.15) against scipy.stats.f.sf:
        # within 15 % of the tail probability at these degrees of freedom
        assert_allclose(f_survival(f, d1, d2), stats.f.sf(f, d1, d2), rtol=0.15)


def test_f_statistic_equals_two_ordinary_least_squares_fits():
    # the nested sums of squares read from one R factor against two numpy.linalg.lstsq fits of the
    # same regressions, the textbook F statistic ((RSS_s - RSS_f) / q) / (RSS_f / dof)
    # (Granger 1969; any regression text), on the open-loop and the closed-loop rig
    from ident.estimate.closed_loop import _innovations, _lagged

    lags = 10
    u_cl, y_cl, _ = _pi_rig(3, n=6000)
    rng = np.random.default_rng(4)
    u_ol = signal.lfilter([1.0], [1.0, -0.9], rng.standard_normal(6000))[:, None]
    y_ol = signal.lfilter(*_plant(), u_ol[:, 0])[:, None] + 0.05 * rng.standard_normal((6000, 1))
    for u, y in ((u_cl, y_cl), (u_ol, y_ol)):
        e = _innovations([Experiment(u, y)], lags, True)[0]
        small = np.hstack([_lagged(u, lags), np.ones((u.shape[0] - lags, 1))])
        full = np.hstack([small, e[lags:], _lagged(e, lags)])
        rss = [float(np.sum((u[lags:] - X @ np.linalg.lstsq(X, u[lags:], rcond=None)[0]) ** 2)) for X in (small, full)]
        dof = full.shape[0] - full.shape[1]
        expected = ((rss[0] - rss[1]) / (full.shape[1] - small.shape[1])) / (rss[1] / dof)
        got = feedback_evidence(Experiment(u, y), input_delay=1)
        assert_allclose(got.f_statistic, expected, rtol=1e-8)


def test_feedback_is_found_in_closed_loop_and_not_in_open_loop():
    u, y, _ = _pi_rig(1)
    assert feedback_evidence(Experiment(u, y)).closed_loop
    rng = np.random.default_rng(2)
    b, a = _plant()
    u_open = signal.lfilter([1.0], [1.0, -0.95], rng.standard_normal(20000))[:, None]  # coloured, open loop
    y_open = signal.lfilter(b, a, u_open[:, 0])[:, None] + 0.05 * rng.standard_normal((20000, 1))
    evidence = feedback_evidence(Experiment(u_open, y_open))
    assert not evidence.closed_loop and evidence.p_value > evidence.significance


def test_closed_loop_log_is_refined_with_a_noise_model_and_finds_the_resonance():
    u, y, r = _pi_rig(3)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = identify([(u, y)], T, IdentifyOptions(max_order=4))
    assert res.feedback.closed_loop
    assert res.noise_model == "innovations"
    assert any("closed-loop" in note for note in res.notes)
    wn, zeta = _resonance(res.model)
    # the generating plant (closed form above): natural frequency within 2 %, damping within 0.02
    assert abs(wn - WN) <= 0.02 * WN and abs(zeta - ZETA) <= 0.02


def test_two_stage_through_the_reference():
    u, y, r = _pi_rig(4)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = identify([(u, y)], T, IdentifyOptions(max_order=4), references=[r])
    assert res.noise_model == "output_error"
    assert any("two-stage" in note for note in res.notes)
    # the pair nearest the plant's: the two-stage estimate may keep a further mode near the
    # loop's own resonance (2.6 Hz, closed form of the loop's characteristic polynomial), where
    # the first stage's model of reference -> input is least accurate
    s = np.log(res.model.poles()[np.abs(res.model.poles()) > 0].astype(complex)) / T
    pair = s[np.argmin(np.abs(np.abs(s) - WN) + 1e3 * (s.imag <= 0))]
    wn, zeta = abs(pair), -pair.real / abs(pair)
    assert abs(wn - WN) <= 0.05 * WN and abs(zeta - ZETA) <= 0.05  # a less efficient estimate: looser
    with pytest.raises(IdentificationError, match="reference explains only"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        noise = np.random.default_rng(5).standard_normal(u.shape)  # not the loop's reference
        identify([(u, y)], T, IdentifyOptions(max_order=2), references=[noise])



def test_references_and_separate_validation_records_are_refused_together():
    u, y, r = _pi_rig(4)
    half = u.shape[0] // 2
    with pytest.raises(OptionError, match="references and separate validation records"):
        identify([(u[:half], y[:half])], T, IdentifyOptions(max_order=2), references=[r[:half]],
                 validation_segments=[(u[half:], y[half:])])
