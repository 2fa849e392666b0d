"""Periodic logs: period detection, averaging, noise from the period scatter, FRF at the lines, distortion."""

import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.errors import IdentificationError, OptionError
from ident.estimate.periodic import analyse_periodic, compare_with_model, detect_period
from ident.estimate.signal_design import SignalDesignOptions, design_signal
from ident.lti.models import StateSpaceModel

FS = 100.0
T = 1 / FS
# scipy.signal.dfreqresp converts to a transfer function and warns about the tiny numerator terms of a
# ZOH model; the responses still agree to 1e-8 with ours (checked below)
pytestmark = pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")


def _plant() -> tuple:
    """Invented actuator: 5 Hz resonance (damping 0.2) behind a 20 ms lag, ZOH at 100 Hz."""
    wn, zeta, tau = 2 * np.pi * 5.0, 0.2, 0.02
    den = np.polymul([1.0, 2 * zeta * wn, wn**2], [tau, 1.0])
    return signal.cont2discrete(signal.tf2ss([wn**2], den), T, method="zoh")[:4]


def _design(**kw):
    base = {"sample_rate_hz": FS, "band_hz": (0.5, 20.0), "amplitude_range": (-1.0, 1.0), "periods": 10}
    if kw.get("kind") == "multisine":
        base["phases"] = "schroeder"  # the crest factor does not matter here; saves the optimisation
    base.update(kw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return design_signal(SignalDesignOptions(**base))


def _simulate(system, u):
    A, B, C, D = system
    _, y, _ = signal.dlsim((A, B, C, D, T), u)
    return y.reshape(u.shape[0], -1)


def _true_frf(system, frequencies_hz):
    A, B, C, D = system
    _, h = signal.dfreqresp((A, B[:, :1], C[:1], D[:1, :1], T), 2 * np.pi * frequencies_hz * T)
    return np.asarray(h).ravel()


@pytest.mark.parametrize("kind", ["multisine", "prbs", "chirp", "noise"])
def test_period_is_detected(kind):
    sig = _design(kind=kind, periods=4)
    assert detect_period(sig.values) == sig.period_samples


def test_a_non_periodic_input_has_no_period(rng):
    with pytest.raises(IdentificationError, match="not periodic"):
        detect_period(rng.standard_normal(4000))


def test_noise_free_frf_equals_the_plant_at_every_line():
    system = _plant()
    sig = _design(kind="multisine")
    y = _simulate(system, sig.values)
    an = analyse_periodic(sig.values, y, T, transient_periods=2)
    assert an.period_source == "detected" and an.period_samples == sig.period_samples
    assert an.measured_periods == 8
    assert np.array_equal(an.lines, sig.lines[0])
    # steady state of a periodic input: Y(k) = G(exp(j 2 pi k / N)) U(k) exactly (scipy.signal.dfreqresp)
    assert_allclose(an.frf[:, 0, 0], _true_frf(system, an.frequencies_hz), rtol=1e-8)
    assert_allclose(an.output_noise_variance, 0.0, atol=1e-20)


def test_averaging_divides_the_noise_variance_by_the_periods(rng):
    system = _plant()
    sig = _design(kind="multisine", periods=9, band_hz=(0.25, 20.0))  # 400-sample periods
    clean = _simulate(system, sig.values)
    sigma = 0.05
    noisy = clean + sigma * rng.standard_normal(clean.shape)
    an = analyse_periodic(sig.values, noisy, T, period=sig.period_samples, transient_periods=1)
    n = an.period_samples
    truth = clean[n:2 * n]  # steady state (the plant settles within the first period)
    left = np.var(an.y_average[0] - truth)
    # averaging P independent periods divides the variance by P (closed form); 400 samples give the
    # sample variance a relative std of sqrt(2 / 400) = 7 %, so 25 % is a safe bound
    assert_allclose(left / (sigma**2 / an.measured_periods), 1.0, rtol=0.25)
    assert_allclose(an.average_noise_variance, an.output_noise_variance / 8, rtol=1e-12)


@pytest.mark.parametrize("colour", ["white", "ar1"])
def test_noise_variance_from_the_period_scatter(rng, colour):
    system = _plant()
    sig = _design(kind="prbs", periods=12)
    clean = _simulate(system, sig.values)
    e = rng.standard_normal(clean.shape[0])
    if colour == "white":
        noise, variance = 0.1 * e, 0.01  # closed form
    else:
        a = 0.8
        noise = signal.lfilter([0.1], [1.0, -a], e)
        variance = 0.01 / (1 - a**2)  # closed form: AR(1) variance sigma^2 / (1 - a^2)
    an = analyse_periodic(sig.values, clean + noise[:, None], T, period=sig.period_samples)
    assert abs(an.output_noise_variance[0] / variance - 1) < 0.10  # the 10 %
    assert_allclose(an.input_noise_variance, 0.0, atol=1e-24)


def test_frf_standard_deviation_matches_the_errors(rng):
    system = _plant()
    sig = _design(kind="multisine", periods=9)
    clean = _simulate(system, sig.values)
    noisy = clean + 0.05 * rng.standard_normal(clean.shape)
    an = analyse_periodic(sig.values, noisy, T, period=sig.period_samples)
    z = np.abs(an.frf[:, 0, 0] - _true_frf(system, an.frequencies_hz)) / an.frf_std[:, 0, 0]
    # |complex Gaussian error| / its std is Rayleigh: median sqrt(ln 2) = 0.83 (closed form); with 39
    # lines and the std itself estimated from 8 periods, 0.55-1.15 holds comfortably
    assert 0.55 < np.median(z) < 1.15
    assert np.mean(z < 3.0) > 0.9


def test_two_inputs_from_orthogonal_blocks(rng):
    # invented 2x2 plant: two first-order lags with cross coupling, ZOH at 100 Hz
    A = np.diag([0.9, 0.7])
    B = np.array([[1.0, 0.3], [0.2, 1.0]])
    C = np.array([[1.0, 0.5], [0.0, 1.0]])
    D = np.zeros((2, 2))
    sig = _design(kind="multisine", n_inputs=2, periods=4)
    assert sig.blocks == 2
    y = _simulate((A, B, C, D), sig.values)
    an = analyse_periodic(sig.values, y, T, period=sig.period_samples, blocks=2, periods_per_block=4)
    w = 2 * np.pi * an.frequencies_hz * T
    for j in range(2):
        for i in range(2):
            _, hij = signal.dfreqresp((A, B[:, [j]], C[[i]], D[[i]][:, [j]], T), w)  # scipy reference
            assert_allclose(an.frf[:, i, j], np.asarray(hij).ravel(), rtol=1e-8)


def test_orthogonal_blocks_not_given_are_noticed():
    sig = _design(kind="multisine", n_inputs=2, periods=4)
    y = _simulate((np.diag([0.9, 0.7]), np.eye(2), np.ones((1, 2)), np.zeros((1, 2))), sig.values)
    an = analyse_periodic(sig.values, y, T, period=sig.period_samples)  # blocks=2 forgotten
    assert any("changes from period to period" in note for note in an.notes)


def test_two_inputs_on_interleaved_lines():
    A = np.diag([0.9, 0.7])
    B = np.eye(2)
    C = np.array([[1.0, 1.0]])
    D = np.zeros((1, 2))
    sig = _design(kind="multisine", n_inputs=2, arrangement="interleaved")
    y = _simulate((A, B, C, D), sig.values)
    an = analyse_periodic(sig.values, y, T, period=sig.period_samples, excited_lines=list(sig.lines))
    for j in range(2):
        at = np.isin(an.lines, sig.lines[j])
        assert np.all(np.isfinite(an.frf[at, 0, j])) and np.all(np.isnan(an.frf[~at, 0, j]))
        _, h = signal.dfreqresp((A, B[:, [j]], C, D[:, [j]], T), 2 * np.pi * an.frequencies_hz[at] * T)
        assert_allclose(an.frf[at, 0, j], np.asarray(h).ravel(), rtol=1e-8)


def test_shifted_inputs_in_one_block_leave_the_matrix_open():
    A = np.diag([0.9, 0.7])
    sig = _design(kind="prbs", n_inputs=2, periods=3)
    y = _simulate((A, np.eye(2), np.ones((1, 2)), np.zeros((1, 2))), sig.values)
    an = analyse_periodic(sig.values, y, T, period=sig.period_samples)
    assert np.all(np.isnan(an.frf))
    assert any("more inputs are excited than the blocks can separate" in note for note in an.notes)


@pytest.mark.parametrize(("bend", "odd", "even"), [(None, False, False), ("cubic", True, False),
                                                   ("square", False, True)])
def test_distortion_shows_on_the_unexcited_lines(rng, bend, odd, even):
    system = _plant()
    sig = _design(kind="multisine", harmonics="odd-random", periods=8, band_hz=(0.25, 20.0))
    y = _simulate(system, sig.values)
    if bend == "cubic":
        y = y + 0.2 * y**3  # odd nonlinearity: distortion on odd lines only (Pintelon & Schoukens 2012)
    elif bend == "square":
        y = y + 0.2 * y**2  # even nonlinearity: distortion on even lines only
    y = y + 0.01 * rng.standard_normal(y.shape)
    an = analyse_periodic(sig.values, y, T, period=sig.period_samples)
    level = an.distortion[0]
    assert level.odd_lines > 0 and level.even_lines > 0
    assert (level.odd_detected, level.even_detected) == (odd, even)
    if odd:
        assert level.odd_db > level.noise_db + 10
    if even:
        assert level.even_db > level.noise_db + 10


def test_no_distortion_level_when_every_line_is_excited():
    sig = _design(kind="multisine")
    an = analyse_periodic(sig.values, _simulate(_plant(), sig.values), T)
    assert an.distortion is None
    assert any("every line of the band is excited" in note for note in an.notes)


def test_model_comparison_against_the_noise_floor(rng):
    system = _plant()
    sig = _design(kind="multisine", periods=9)
    clean = _simulate(system, sig.values)
    an = analyse_periodic(sig.values, clean + 0.05 * rng.standard_normal(clean.shape), T)
    A, B, C, D = system
    true = StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=T)
    good = compare_with_model(an, true)
    # the true model's error at the lines is the noise itself: about 0 dB against the floor (the floor
    # std is estimated from 9 periods over 39 lines, so +-1.5 dB is a generous band)
    assert abs(good.error_to_noise_db[0]) < 1.5
    bad = compare_with_model(an, StateSpaceModel(A=A, B=1.2 * B, C=C, D=D, sample_time=T))
    assert bad.error_to_noise_db[0] > 12  # a 20 % gain error stands far above the noise
    assert np.median(good.frf_z) < 1.5 and np.max(bad.frf_z) > 10
    with pytest.raises(OptionError, match="sample time"):
        compare_with_model(an, StateSpaceModel(A=A, B=B, C=C, D=D, sample_time=2 * T))


def test_too_few_periods_and_bad_shapes(rng):
    u = np.tile(rng.standard_normal(100), 3)
    with pytest.raises(IdentificationError, match="more than the 3 transient"):
        analyse_periodic(u, u, 0.01, period=100, transient_periods=3)
    with pytest.raises(OptionError, match="same number of samples"):
        analyse_periodic(u, u[:-1], 0.01, period=100)
    one = analyse_periodic(u, 2 * u, 0.01, period=100, transient_periods=2)
    assert one.output_noise_variance is None and one.distortion is None
    assert np.all(np.isnan(one.frf_std))
    assert_allclose(np.nanmax(np.abs(one.frf[:, 0, 0] - 2.0)), 0.0, atol=1e-9)  # y = 2 u (closed form)


def test_results_are_read_only_and_inputs_untouched(rng):
    sig = _design(kind="multisine", periods=3)
    u = np.array(sig.values)
    y = _simulate(_plant(), u)
    before = (u.copy(), y.copy())
    an = analyse_periodic(u, y, T)
    assert np.array_equal(u, before[0]) and np.array_equal(y, before[1])
    with pytest.raises(ValueError):
        an.frf[0, 0, 0] = 0
