"""Newey-West covariance of summed gradients and Andrews' bandwidth."""

import numpy as np
from numpy.testing import assert_allclose
from scipy.signal import lfilter
from statsmodels.stats.sandwich_covariance import S_hac_simple

from ident.estimate.hac import andrews_bandwidth, long_run_covariance


def _ar1(rng, n, rho, k=3):
    return lfilter([1.0], [1.0, -rho], rng.standard_normal((n, k)), axis=0)


def test_newey_west_equals_statsmodels_with_the_same_bandwidth():
    rng = np.random.default_rng(0)
    g = _ar1(rng, 5000, 0.5)
    L = andrews_bandwidth([g])
    # statsmodels.stats.sandwich_covariance.S_hac_simple: Bartlett weights 1 - l/(L+1), unnormalised
    assert_allclose(long_run_covariance([g]), S_hac_simple(g, nlags=L), rtol=1e-12)


def test_lags_never_straddle_two_experiments():
    rng = np.random.default_rng(1)
    g1, g2 = _ar1(rng, 3000, 0.7), _ar1(rng, 2000, 0.7)
    L = andrews_bandwidth([g1, g2])
    # the sum of each experiment's own S_hac_simple (statsmodels) with the common bandwidth
    assert_allclose(long_run_covariance([g1, g2]), S_hac_simple(g1, nlags=L) + S_hac_simple(g2, nlags=L), rtol=1e-12)


def test_andrews_bandwidth_for_ar1_columns():
    rng = np.random.default_rng(2)
    n, rho = 20000, 0.5
    # Andrews 1991 eq. 6.4 with equal AR(1) columns: alpha = 4 rho^2 / ((1 - rho)^2 (1 + rho)^2),
    # bandwidth = 1.1447 (alpha n)^(1/3) = 37.6 for rho = 0.5 (closed form); rho is estimated, so +-10 %
    expected = 1.1447 * (4 * rho**2 / ((1 - rho) ** 2 * (1 + rho) ** 2) * n) ** (1 / 3)
    assert abs(andrews_bandwidth([_ar1(rng, n, rho)]) - expected) <= 0.1 * expected
    # white columns: rho near 0, so a bandwidth of a few lags at most (closed form: alpha ~ 4 rho^2)
    assert andrews_bandwidth([rng.standard_normal((n, 3))]) <= 3
