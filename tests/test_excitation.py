import subprocess
import sys

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal
from scipy.integrate import cumulative_trapezoid

from ident.errors import OptionError
from ident.estimate.excitation import (
    excitation_covariance,
    excitation_report,
    persistent_excitation_order,
    power_band,
)


def test_covariance_matches_regressor_matrix_product(rng):
    # reference: numpy product of the explicit regressor matrix [x(t), ..., x(t-n+1)]
    x = rng.standard_normal(400) + 3.0
    n = 7
    xc = x - x.mean()
    H = np.column_stack([xc[n - 1 - i : x.size - i] for i in range(n)])
    # rounding only (the diagonal recursion adds O(n) roundings)
    assert_allclose(excitation_covariance(x, n), H.T @ H / H.shape[0], rtol=1e-12, atol=1e-12)


def test_covariance_is_close_to_numpy_autocovariance_toeplitz(rng):
    # for a long record the windowed estimate approaches the Toeplitz matrix of
    # sample autocovariances (scipy.signal.correlate, biased); the difference is O(n / N)
    x = rng.standard_normal(20000)
    n = 5
    xc = x - x.mean()
    r = signal.correlate(xc, xc, mode="full", method="fft")[x.size - 1 : x.size - 1 + n] / x.size
    toeplitz = r[np.abs(np.subtract.outer(np.arange(n), np.arange(n)))]
    assert_allclose(excitation_covariance(x, n), toeplitz, atol=5e-3)  # ~ sqrt(1/N) noise + n/N


def test_white_noise_is_exciting_to_high_order(rng):
    u = rng.standard_normal(5000)
    # closed form: white noise is persistently exciting of every order (Ljung 1999, sec. 13.2)
    assert persistent_excitation_order(u, max_order=50) == 50
    report = excitation_report(u, 0.001)[0]
    assert report.pe_order == 50 and report.pe_order_is_lower_bound


@pytest.mark.parametrize("omega", [0.05, 0.7, 2.5])
def test_single_sinusoid_has_order_exactly_two(omega):
    k = np.arange(3000)
    u = 1.7 * np.sin(omega * k + 0.3)
    # closed form: a sinusoid is PE of order 2 exactly (Soderstrom & Stoica 1989, sec. 5.4):
    # x(t) = 2 cos(omega) x(t-1) - x(t-2), so [x(t), x(t-1), x(t-2)] spans only 2 dimensions
    assert persistent_excitation_order(u) == 2


def test_two_sinusoids_have_order_four():
    k = np.arange(4000)
    u = np.sin(0.3 * k) + 0.5 * np.cos(1.1 * k + 1.0)
    # closed form: each sinusoid contributes 2 (Soderstrom & Stoica 1989, sec. 5.4)
    assert persistent_excitation_order(u) == 4


def test_constant_has_order_zero():
    # closed form: after removing the mean (the operating point) nothing is left, so the
    # 1 x 1 covariance is 0 and the order is 0 (the textbook 1 counts the mean itself)
    assert persistent_excitation_order(np.full(500, 2.5)) == 0
    report = excitation_report(np.full((500, 1), 2.5), 0.01)[0]
    assert report.pe_order == 0 and report.band_fraction is None and report.band_hz is None


@pytest.mark.parametrize("nbits", [4, 5])
def test_prbs_order_is_period_minus_one(nbits):
    period = 2**nbits - 1
    seq = signal.max_len_seq(nbits)[0] * 2.0 - 1.0
    u = np.tile(seq, 200)  # whole periods, so the removed mean is exactly the period mean
    # closed form: the eigenvalues of the period x period covariance are |DFT(seq)|^2 / P^2,
    # nonzero for every frequency but 0 (Soderstrom & Stoica 1989, sec. 5.4: a PRBS of
    # period P is PE of order P); removing the mean removes the zero-frequency line
    eig = np.abs(np.fft.fft(seq - seq.mean())) ** 2 / period**2
    assert np.sum(eig > 1e-9) == period - 1  # the oracle itself: P - 1 nonzero eigenvalues
    assert persistent_excitation_order(u, max_order=50) == period - 1


def test_order_is_monotone_in_rcond(rng):
    b, a = signal.butter(6, 0.1)
    u = signal.lfilter(b, a, rng.standard_normal(20000))
    orders = [persistent_excitation_order(u, rcond=r) for r in (1e-2, 1e-4, 1e-6, 1e-8)]
    # a low-passed input excites fewer directions as the threshold tightens (interlacing)
    assert orders == sorted(orders) and orders[0] < orders[-1] <= 50


def test_power_band_of_white_noise(rng):
    u = rng.standard_normal(200000)
    # closed form: flat spectrum, 90 % of the power lies below 0.9 of Nyquist;
    # tolerance: Welch estimate over ~390 segments, relative error of the cumulative ~1 %
    assert_allclose(power_band(u, 0.002), 0.9, atol=0.01)
    assert_allclose(power_band(u, 0.002, fraction=0.5), 0.5, atol=0.01)


def test_power_band_of_low_passed_noise(rng):
    b, a = signal.butter(4, 0.2)
    u = signal.lfilter(b, a, rng.standard_normal(200000))
    # reference: the 90 % point of |H(e^jw)|^2 from scipy.signal.freqz, integrated with
    # scipy.integrate.cumulative_trapezoid
    w, h = signal.freqz(b, a, worN=8192)
    cum = cumulative_trapezoid(np.abs(h) ** 2, w, initial=0.0)
    expected = np.interp(0.9 * cum[-1], cum, w) / np.pi
    # Welch leakage with a Hann window and estimation error: within 0.01 of Nyquist
    assert_allclose(power_band(u, 1.0), expected, atol=0.01)
    report = excitation_report(u[:, None], 0.5, names=["heater_duty"])[0]
    assert report.name == "heater_duty"
    assert_allclose(report.band_hz, report.band_fraction * 1.0, rtol=1e-12)  # f_N = 1 Hz


def test_report_per_input_column(rng):
    k = np.arange(3000)
    u = np.column_stack([rng.standard_normal(3000), np.sin(0.4 * k)])
    reports = excitation_report(u, 0.01, max_order=20)
    assert [r.name for r in reports] == ["u1", "u2"]
    assert [r.pe_order for r in reports] == [20, 2]  # closed forms above
    # closed form: a sinusoid at 0.4 rad/sample lies at 0.4 / pi of Nyquist
    assert_allclose(reports[1].band_fraction, 0.4 / np.pi, atol=0.01)  # one Welch bin


def test_short_signals_cap_the_order():
    u = np.random.default_rng(7).standard_normal(30)
    assert persistent_excitation_order(u, max_order=50) <= 15  # capped at N // 2


def test_validation_messages():
    with pytest.raises(OptionError, match=r"u must be one signal.*got \(10, 2\)"):
        persistent_excitation_order(np.zeros((10, 2)))
    with pytest.raises(OptionError, match=r"max_order must be an integer in \[1, 1000\]; got 0"):
        persistent_excitation_order(np.ones(10), max_order=0)
    with pytest.raises(OptionError, match=r"rcond must be a number in \(0.0, 1.0\)"):
        persistent_excitation_order(np.ones(10), rcond=2.0)
    with pytest.raises(OptionError, match="sample_time must be a positive number"):
        power_band(np.ones(10), 0.0)
    with pytest.raises(OptionError, match="u must be finite"):
        power_band(np.array([1.0, np.nan, 2.0]), 1.0)


def test_core_module_imports_no_io_libraries():
    code = (
        "import sys, ident.estimate.excitation; "
        "bad = [m for m in ('pandas', 'click', 'matplotlib') if m in sys.modules]; "
        "print(','.join(bad))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == ""
