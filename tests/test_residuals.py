"""Residual-analysis pieces: prewhitening, simultaneous bands, lag span, cumulative periodogram, levels."""

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal, stats
from statsmodels.tsa.ar_model import AutoReg, ar_select_order

from ident.assess.residuals import (
    MAX_AUTO_LAGS,
    MIN_LAGS,
    cumulative_periodogram,
    fit_input_whitener,
    lag_span,
    level_dependence,
    simultaneous_band,
)
from ident.lti.models import StateSpaceModel


def test_whitener_equals_statsmodels_autoreg_and_its_aic_order(rng):
    # coloured input: AR(2) noise, u[t] = 1.2 u[t-1] - 0.5 u[t-2] + w[t] (invented)
    u = signal.lfilter([1.0], [1.0, -1.2, 0.5], rng.standard_normal(4000))
    w = fit_input_whitener(u, max_order=10)
    x = u - u.mean()
    # statsmodels.tsa.ar_model.ar_select_order with AIC on the common sample picks the same order
    assert list(range(1, w.order + 1)) == ar_select_order(x, 10, ic="aic", trend="n").ar_lags
    # statsmodels.tsa.ar_model.AutoReg (OLS, no trend) over the same samples: rounding only
    ref = AutoReg(x[10 - w.order:], lags=w.order, trend="n").fit().params
    assert_allclose(w.coefficients, np.concatenate([[1.0], -ref]), rtol=1e-9, atol=1e-12)
    # the filtered input is white: its autocorrelation stays in the 99 % band at every lag
    # but a few (statsmodels acf; band 2.58/sqrt(N), Ljung sec. 16.6)
    from statsmodels.tsa.stattools import acf

    r = acf(w.apply(u), nlags=20, fft=True)[1:]
    assert np.sum(np.abs(r) > 2.58 / math.sqrt(u.size)) <= 2


def test_whitener_of_white_noise_and_of_a_constant_does_nothing(rng):
    assert fit_input_whitener(np.full(500, 3.0)).order == 0
    # white noise: AIC rarely wants a filter, and any it picks is close to the identity
    w = fit_input_whitener(rng.standard_normal(3000))
    assert np.max(np.abs(w.coefficients[1:]), initial=0.0) < 0.1  # 1/sqrt(3000) = 0.018; 5 sigma
    assert w.innovation_share == pytest.approx(1.0, abs=0.02)


def test_simultaneous_band_is_bonferroni_and_holds_at_its_level():
    # closed form: one lag is the two-sided normal quantile; k lags use 1 - alpha / (2 k)
    assert simultaneous_band(400, 1, 0.95) == pytest.approx(1.959964 / 20.0, rel=1e-6)  # scipy.stats.norm
    assert simultaneous_band(400, 50, 0.95) == pytest.approx(stats.norm.isf(0.05 / 100) / 20.0, rel=1e-12)
    # Monte Carlo: white noise stays inside at all 50 lags in about 95 % of 400 series;
    # binomial(400, 0.95) has std 4.4, and Bonferroni is slightly conservative: [355, 395]
    from ident.assess.diagnostics import correlation

    inside = sum(not correlation(np.random.default_rng(s).standard_normal(2000), 50, 0.95,
                                 simultaneous=True).significant_lags for s in range(400))
    assert 355 <= inside <= 395


def _first_order(tau_s: float, T: float, delay: int = 0) -> StateSpaceModel:
    a = math.exp(-T / tau_s)
    n = 1 + delay
    A = np.zeros((n, n))
    A[0, 0] = a
    for k in range(1, n):
        A[k, k - 1] = 1.0
    B = np.zeros((n, 1))
    B[0, 0] = 1 - a
    C = np.zeros((1, n))
    C[0, -1] = 1.0
    return StateSpaceModel(A=A, B=B, C=C, D=np.zeros((1, 1)), sample_time=T)


def test_lag_span_is_four_time_constants_plus_the_delay():
    # closed form: tau = -T / ln(a); settling 4 tau = 4 * 0.5 s = 2 s = 40 samples at T = 0.05 s,
    # plus 3 samples of pure delay (three poles at z = 0)
    span = lag_span(_first_order(0.5, 0.05, delay=3), 10_000)
    assert span.slowest_time_constant_s == pytest.approx(0.5, rel=1e-12)
    assert span.lags == 43 and span.settling_time_s == pytest.approx(2.15, rel=1e-12)
    assert "settling time" in span.reason
    # a fast plant still gets MIN_LAGS; a slow one is capped, and so is a short log
    assert lag_span(_first_order(0.01, 0.05), 10_000).lags == MIN_LAGS
    assert lag_span(_first_order(100.0, 0.05), 10_000).lags == MAX_AUTO_LAGS
    assert lag_span(_first_order(0.5, 0.05), 100).lags == 25  # 100 samples / 4 per lag


def test_cumulative_periodogram_band_and_false_alarm_rate():
    # Box, Jenkins, Reinsel and Ljung, 5th ed., sec. 8.2.5: the 95 % band is about 1.36 / sqrt(q)
    cp = cumulative_periodogram(np.random.default_rng(3).standard_normal(4001), 1.0, 0.95)
    assert cp.band == pytest.approx(1.36 / math.sqrt(2000), rel=0.02)  # asymptotic constant, large q
    assert cp.frequencies_hz[0] == pytest.approx(1 / 4001) and cp.values[-1] == pytest.approx(1.0)
    # white noise leaves the band in about 5 % of 400 series (binomial std 1.1 %): [2 %, 9 %]
    alarms = sum(not cumulative_periodogram(np.random.default_rng(s).standard_normal(1000), 1.0).white
                 for s in range(400))
    assert 8 <= alarms <= 36


def test_cumulative_periodogram_sees_a_coloured_residual(rng):
    e = signal.lfilter([1.0], [1.0, -0.3], rng.standard_normal(2000))  # AR(1), invented
    assert not cumulative_periodogram(e, 0.01).white


def test_level_dependence_flags_a_saturation_and_not_a_linear_plant(rng):
    u = rng.uniform(-1, 1, 5000)
    noise = 0.05 * rng.standard_normal(5000)
    linear_error = noise  # a right linear model leaves only the noise
    d = level_dependence(linear_error, u, output="y", level_signal="u")
    assert not d.depends and d.share < 0.05
    # a saturating process seen through a linear model: the error follows tanh(2u) - a u
    # (a straight line in u is removed first, so a gain error alone would not count)
    sat_error = np.tanh(2 * u) - 0.9 * u + noise
    d = level_dependence(sat_error, u, output="y", level_signal="u")
    assert d.depends and d.share > 0.5
    # a gain error alone is a straight line in the level: not a nonlinearity
    assert not level_dependence(0.3 * u + noise, u).depends


def test_level_dependence_flags_an_error_spread_that_grows_with_the_level(rng):
    u = rng.uniform(0, 1, 5000)
    e = (0.02 + 0.2 * u) * rng.standard_normal(5000)  # heteroscedastic, invented
    d = level_dependence(e, u)
    assert d.depends and d.spread_ratio > 3
