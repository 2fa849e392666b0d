"""Tests for ident.estimate.delay: input-delay estimation from a high-order ARX impulse response."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.errors import IdentificationError, OptionError
from ident.estimate.data import Experiment
from ident.estimate.delay import DELAY_METHOD, estimate_delay


def test_siso_noisy_delay_and_evidence(rng):
    # invented plant q^-4 (0.8 + 0.4 q^-1) / (1 - 1.2 q^-1 + 0.5 q^-2), coloured noise
    N = 3000
    u = rng.standard_normal(N)
    y = signal.lfilter([0, 0, 0, 0, 0.8, 0.4], [1, -1.2, 0.5], u)
    y += signal.lfilter([1.0], [1, -0.9], 0.2 * rng.standard_normal(N))
    est = estimate_delay(Experiment(u, y), max_delay=10)
    assert est.delays.tolist() == [[4]]  # by construction of the data
    assert est.detected.tolist() == [[True]]
    assert est.method == DELAY_METHOD and est.coefficients.shape == (1, 1, 11)
    # first impulse-response sample of B/A is b_0 = 0.8 (closed form, A monic); tolerance:
    # 5 standard errors of that coefficient
    assert abs(est.coefficients[0, 0, 4] - 0.8) < 5 * est.std_errors[0, 0, 4]
    assert est.t_ratios[0, 0, 4] > est.threshold
    assert_allclose(est.t_ratios, np.abs(est.coefficients) / est.std_errors, rtol=1e-12)


def test_mimo_delays_per_channel(rng):
    # 2 inputs x 2 outputs with four different channel delays (invented)
    N = 4000
    u = rng.standard_normal((N, 2))
    delays = np.array([[1, 5], [3, 0]])
    y = np.zeros((N, 2))
    for i in range(2):
        for j in range(2):
            num = np.r_[np.zeros(delays[i, j]), 1.0 - 0.3 * j, 0.2]
            y[:, i] += signal.lfilter(num, [1, -0.6 - 0.1 * i], u[:, j])
    y += 0.1 * rng.standard_normal((N, 2))
    est = estimate_delay(Experiment(u, y), max_delay=8)
    assert est.delays.tolist() == delays.tolist()  # by construction
    assert est.detected.all()


def test_noise_free_data_reduce_ar_order(rng):
    # noise-free second-order data make a 10th-order ARX regression rank deficient;
    # the estimator halves the AR order until it is not, and still finds delay 2
    u = rng.standard_normal(600)
    y = signal.lfilter([0, 0, 1.0, 0.5], [1, -1.5, 0.7], u)
    est = estimate_delay(Experiment(u, y), max_delay=6)
    assert est.delays.tolist() == [[2]]
    assert est.ar_order <= 2


def test_max_rows_uses_leading_samples(rng):
    N = 5000
    u = rng.standard_normal(N)
    y = signal.lfilter([0, 0, 0, 1.0], [1, -0.5], u) + 0.1 * rng.standard_normal(N)
    # without prewhitening (whose input model depends on the rows it sees)
    short = estimate_delay(Experiment(u[:1000], y[:1000]), max_delay=5, whiten=False)
    capped = estimate_delay(Experiment(u, y), max_delay=5, max_rows=1000 - 14, whiten=False)
    # same rows: 1000 samples minus the largest lag 14 = max(ar_order 10, fir_order 15 - 1),
    # the default fir_order being max_delay + 10 = 15
    assert capped.fir_order == 15
    # same rows, blocked differently: rounding only
    assert_allclose(capped.coefficients, short.coefficients, rtol=1e-9, atol=1e-13)
    assert capped.delays.tolist() == [[3]]


def test_bad_options_and_data(rng):
    u = rng.standard_normal(40)
    with pytest.raises(OptionError, match="fir_order must be an integer in \\[21, inf\\); got 5"):
        estimate_delay(Experiment(u, u), fir_order=5)
    with pytest.raises(OptionError, match="delay estimation needs more than 30 regression rows"):
        estimate_delay(Experiment(u, u), max_delay=20)
    both = np.column_stack([u, -u])
    with pytest.raises(IdentificationError, match="linearly dependent"):
        estimate_delay(Experiment(both, u), max_delay=2)


def test_prewhitening_finds_the_delay_behind_a_smooth_input(rng):
    # a low-pass (smooth) test signal: neighbouring impulse-response lags are confounded
    # unless the input is prewhitened (Box & Jenkins 1970, sec. 11.2); invented plant with
    # a 2-sample delay, q^-2 0.3 / (1 - 0.9 q^-1)
    N = 4000
    u = signal.lfilter([1.0], [1.0, -1.8, 0.81], rng.standard_normal(N))  # double pole at 0.9
    y = signal.lfilter([0, 0, 0.3], [1, -0.9], u) + 0.05 * np.std(u) * rng.standard_normal(N)
    est = estimate_delay(Experiment(u, y), max_delay=20)
    assert est.delays.tolist() == [[2]]  # by construction
    assert est.prewhitening_order >= 2  # an AR(2) input needs at least two coefficients
    # the input model: AR(2) with poles 0.9, 0.9 (closed form: 1 - 1.8 q^-1 + 0.81 q^-2)
    from ident.estimate.delay import _input_ar_model

    order, coef = _input_ar_model([Experiment(u[:, None], y[:, None])], 2)
    assert order == 2
    assert_allclose(coef, [-1.8, 0.81], atol=0.03)  # 4000 samples: standard error ~0.01


def test_signal_to_noise_evidence(rng):
    N = 3000
    u = rng.standard_normal(N)
    clean = signal.lfilter([0, 1.0], [1, -0.5], u)
    y = clean + 0.2 * rng.standard_normal(N)
    est = estimate_delay(Experiment(u, y), max_delay=5)
    # white input: prewhitening leaves it alone; residual variance = noise variance 0.04
    # (closed form) within the sampling error of 3000 samples
    assert_allclose(est.residual_variance, [0.04], rtol=0.1)
    assert_allclose(est.output_variance, [np.var(y)], rtol=0.05)
