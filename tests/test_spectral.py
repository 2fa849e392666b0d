"""The frequency-response check: resolution, confidence regions, informative band, verdicts."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal, stats

from ident.assess.spectral import (
    INFORMATIVE_RADIUS,
    MIN_AVERAGES,
    LineResponse,
    choose_segment,
    spectral_comparison,
)
from ident.lti.models import StateSpaceModel

pytestmark = pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")


def _resonant(fn_hz: float, zeta: float, T: float, gain: float = 1.0) -> tuple[StateSpaceModel, tuple]:
    # an invented second-order plant, ZOH-discretised with scipy.signal.cont2discrete
    wn = 2 * math.pi * fn_hz
    num, den, _ = signal.cont2discrete(([gain * wn**2], [1.0, 2 * zeta * wn, wn**2]), T, method="zoh")
    num = num.ravel()  # leading zero kept: one sample of delay, as the ZOH gives
    A, B, C, D = signal.tf2ss(num, den)
    return StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=T), (num, den)


def _data(num, den, n, noise, seed):
    rng = np.random.default_rng(seed)
    u = rng.standard_normal((n, 1))
    y = signal.lfilter(num, den, u[:, 0])[:, None] + noise * rng.standard_normal((n, 1))
    return u, y


def test_segment_resolves_the_sharpest_mode_in_the_excited_band():
    model, (num, den) = _resonant(5.0, 0.05, 0.01)
    u, _ = _data(num, den, 200_000, 0.0, 1)
    choice = choose_segment(model, u, 0.01)
    # closed form: a quarter of the half-power width 2 zeta fn = 0.5 Hz is 0.125 Hz; the Hann
    # window's resolution is 1.5 / (L T), so L >= 1.5 / (0.01 * 0.125) = 1200 -> 2048 (power of two)
    assert choice.needed_hz == pytest.approx(0.125, rel=1e-6)
    assert choice.segment == 2048 and not choice.limited_by_log
    assert choice.resolution_hz == pytest.approx(1.5 / (2048 * 0.01), rel=1e-12)
    assert "5 Hz" in choice.describe()
    # a short log cannot give that: the segment leaves MIN_AVERAGES averages and says so
    short = choose_segment(model, u[:4000], 0.01)
    assert short.limited_by_log and short.segment <= 2 * 4000 // (MIN_AVERAGES + 1)
    assert "too short" in short.describe()


def test_the_true_response_lies_in_the_95_percent_region_at_about_95_percent_of_informative_frequencies():
    # Bendat and Piersol, Random Data, 4th ed., sec. 9.2: the region holds the true H1 with the
    # stated probability; Monte Carlo over 40 logs of an invented plant: 90 % to 99 % (issue 13)
    model, (num, den) = _resonant(0.05, 0.3, 1.0)
    inside = total = 0
    for seed in range(40):
        u, y = _data(num, den, 8192, 0.5, seed)
        sp = spectral_comparison(model, u, y)
        info = sp.informative[:, 0, 0]
        # the true response, from scipy.signal.freqz of the same polynomials
        _, g = signal.freqz(num, den, worN=sp.frequencies_hz, fs=1.0)
        inside += int(np.sum(np.abs(g - sp.estimate[:, 0, 0])[info] <= sp.radius[:, 0, 0][info]))
        total += int(info.sum())
    assert total > 400
    assert 0.90 <= inside / total <= 0.99


def test_radius_is_bendat_and_piersols_formula():
    model, (num, den) = _resonant(0.05, 0.3, 1.0)
    u, y = _data(num, den, 4096, 0.5, 7)
    sp = spectral_comparison(model, u, y, segment=256, confidence=0.9)
    kw = {"fs": 1.0, "nperseg": 256}
    f, puu = signal.welch(u[:, 0], **kw)
    _, pyy = signal.welch(y[:, 0], **kw)
    _, coh = signal.coherence(u[:, 0], y[:, 0], **kw)
    K = (4096 - 256) // 128 + 1
    n_d = K / (1 + 2 * 0.167**2 * (K - 1) / K)  # Welch (1967): half-overlapping Hann segments
    # Bendat and Piersol sec. 9.2: r^2 = 2/(n - 2) F(2, n - 2; P) (1 - g^2) Gyy / Gxx with n = 2 n_d
    r2 = 2 / (2 * n_d - 2) * stats.f.ppf(0.9, 2, 2 * n_d - 2) * (1 - coh) * pyy / puu
    assert sp.effective_averages == pytest.approx(n_d, rel=1e-12)
    assert_allclose(sp.radius[:, 0, 0], np.sqrt(r2[1:]), rtol=1e-9)


def test_model_seen_through_the_estimator_is_its_own_h1(rng):
    model, (num, den) = _resonant(0.05, 0.3, 1.0)
    u = rng.standard_normal((3000, 1))
    y = signal.lfilter(num, den, u[:, 0])[:, None]
    sp = spectral_comparison(model, u, y + 0.1 * rng.standard_normal(y.shape), segment=256, simulated=y)
    kw = {"fs": 1.0, "nperseg": 256}
    _, puu = signal.welch(u[:, 0], **kw)
    _, pyu = signal.csd(u[:, 0], y[:, 0], **kw)
    # the same scipy.signal calls on the model's own output: rounding only
    assert_allclose(sp.model_seen[:, 0, 0], (pyu / puu)[1:], rtol=1e-9)
    # the dense grid reaches the Nyquist frequency and holds the estimate's frequencies
    assert sp.dense_frequencies_hz[-1] == pytest.approx(0.5)
    assert np.isin(sp.frequencies_hz, sp.dense_frequencies_hz).all()


def test_a_right_model_agrees_and_a_wrong_gain_disagrees():
    model, (num, den) = _resonant(0.05, 0.3, 1.0)
    u, y = _data(num, den, 8192, 0.2, 11)
    right = spectral_comparison(model, u, y).judgements[0]
    assert right.status == "agrees" and right.informative_share > 0.5
    wrong = model.with_changes(C=1.6 * model.C)
    sp = spectral_comparison(wrong, u, y)
    assert sp.judgements[0].status == "disagrees" and sp.mismatch_bands
    assert sp.mismatch_bands[0].worst > 0.3  # |1.6 G - G| / |G| = 0.6 where the region is narrow


def test_low_coherence_everywhere_cannot_judge_never_agrees():
    # issue 13: a log whose coherence is below 0.5 across the excited band gives "cannot judge"
    model, (num, den) = _resonant(0.05, 0.3, 1.0)
    u, y = _data(num, den, 8192, 20.0, 5)
    sp = spectral_comparison(model, u, y)
    assert np.all(sp.coherence[sp.excited[:, 0], 0, 0] < 0.5)
    assert sp.judgements[0].status == "cannot_judge"
    # even a wildly wrong model is not called wrong (nor right) on such data
    assert spectral_comparison(model.with_changes(C=3 * model.C), u, y).judgements[0].status == "cannot_judge"


def test_periodic_lines_replace_the_welch_estimate():
    from ident.estimate.periodic import analyse_periodic
    from ident.estimate.periodic_check import line_response

    model, (num, den) = _resonant(0.05, 0.3, 1.0)
    rng = np.random.default_rng(2)
    period = 200
    lines = np.arange(1, 60)
    one = np.zeros(period)
    phases = rng.uniform(0, 2 * np.pi, lines.size)
    t = np.arange(period)
    for k, ph in zip(lines, phases, strict=True):
        one += np.cos(2 * np.pi * k * t / period + ph)
    u = np.tile(one, 12)[:, None]
    y = signal.lfilter(num, den, u[:, 0])[:, None] + 0.05 * rng.standard_normal((u.shape[0], 1))
    analysis = analyse_periodic(u, y, 1.0, period=period, transient_periods=2)
    measured = line_response(analysis)
    sp = spectral_comparison(model, u, y, lines=measured)
    assert sp.source == "periodic" and sp.segment is None
    assert_allclose(sp.frequencies_hz, lines / period)
    # the model at the lines is the exact response (no window, no leakage): scipy.signal.freqz
    _, g = signal.freqz(num, den, worN=lines / period, fs=1.0)
    assert_allclose(sp.model_seen[:, 0, 0], g, rtol=1e-9)
    # radius: std times sqrt(F(2, 2 (P - 1))) at the confidence (complex normal estimate)
    scale = math.sqrt(stats.f.ppf(0.95, 2, 2 * (analysis.measured_periods - 1)))
    assert_allclose(sp.radius[:, 0, 0], measured.frf_std[:, 0, 0] * scale, rtol=1e-12)
    assert np.all(sp.radius[:, 0, 0] <= INFORMATIVE_RADIUS * np.abs(sp.estimate[:, 0, 0]))
    assert sp.judgements[0].status == "agrees"
    assert spectral_comparison(model.with_changes(C=1.5 * model.C), u, y, lines=measured
                               ).judgements[0].status == "disagrees"


def test_line_response_is_checked():
    from ident.errors import OptionError

    model, _ = _resonant(0.05, 0.3, 1.0)
    bad = LineResponse(np.array([0.1]), np.ones((1, 2, 1)), np.ones((1, 2, 1)), 4)
    with pytest.raises(OptionError, match="shape"):
        spectral_comparison(model, np.zeros((100, 1)), np.zeros((100, 1)), lines=bad)


def test_a_difference_inside_the_models_own_region_does_not_count_against_it():
    # Sums of independent errors: the estimate's and the model's regions combine as sqrt(r^2 + r_m^2)
    # (common practice, no source). A gain 60 % high whose covariance allows it is not called wrong;
    # a negligible covariance changes nothing.
    from ident.lti.covariance import ParameterCovariance, theta_layout

    model, (num, den) = _resonant(0.05, 0.3, 1.0)
    u, y = _data(num, den, 8192, 0.2, 11)
    wrong = model.with_changes(C=1.6 * model.C)
    n = wrong.n_states
    lay = theta_layout(n, 1, 1)

    def gain_only(scale):
        factor = np.zeros((lay["K"].stop, 1))
        factor[lay["C"], 0] = scale * wrong.C.ravel()  # dG = scale * G * xi
        return ParameterCovariance(factor, "gauss", n, 1, 1)

    assert spectral_comparison(wrong, u, y).model_radius is None
    tiny = spectral_comparison(wrong, u, y, covariance=gain_only(1e-9))
    assert tiny.judgements[0].status == "disagrees"
    assert_allclose(tiny.model_radius[:, 0, 0], 1e-9 * np.abs(tiny.model_response[:, 0, 0])
                    * math.sqrt(stats.chi2.ppf(0.95, 2)), rtol=1e-6)
    wide = spectral_comparison(wrong, u, y, covariance=gain_only(0.5))
    assert wide.judgements[0].status == "agrees"
    # a covariance of another model's size is ignored, as if there were none
    other = ParameterCovariance(np.zeros((theta_layout(n + 1, 1, 1)["K"].stop, 1)), "gauss", n + 1, 1, 1)
    assert spectral_comparison(wrong, u, y, covariance=other).model_radius is None
