"""Designed test signals: the families, the limits, several inputs, the advice, and what they buy."""

import math
import warnings

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal
from scipy import linalg, signal
from systems import SETTINGS

from ident.errors import OptionError, SignalDesignWarning
from ident.estimate.multisine import crest_factor
from ident.estimate.signal_design import (
    PRBS_HALF_POWER,
    SignalDesignOptions,
    design_signal,
    duration_advice,
    prbs_period,
    swept_sine,
)
from ident.estimate.slew import periodic_rate_limit, rate_limit


def _design(**kw):
    base = {"sample_rate_hz": 1000.0, "band_hz": (2.0, 50.0), "amplitude_range": (-1.0, 3.0)}
    base.update(kw)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", SignalDesignWarning)
        return design_signal(SignalDesignOptions(**base))


# ---------------------------------------------------------------------------- PRBS


@pytest.mark.parametrize("nbits", [3, 7, 10])
def test_prbs_is_scipys_maximum_length_sequence(nbits):
    x = prbs_period(nbits)
    reference = signal.max_len_seq(nbits)[0] * 2.0 - 1.0  # scipy.signal.max_len_seq, 0/1 -> -1/+1
    assert_array_equal(x, reference)
    length = 2**nbits - 1
    assert x.size == length and set(np.unique(x)) == {-1.0, 1.0}
    # periodic autocorrelation of an m-sequence: 2^n - 1 at lag 0, -1 at every other lag (Golomb 1967)
    corr = np.array([np.dot(x, np.roll(x, k)) for k in range(length)])
    assert corr[0] == length
    assert np.all(corr[1:] == -1)


def test_prbs_design_is_two_valued_periodic_and_clocked():
    sig = _design(kind="prbs", periods=3)
    low, high = sig.options.amplitude_range
    assert set(np.unique(sig.values)) == {low, high}
    c = sig.clock_divider
    # clock divider: the top of the band within 3 dB of the PRBS level, sinc^2(f c / fs) >= 1/2
    assert c == math.floor(PRBS_HALF_POWER * 1000.0 / 50.0)
    assert sig.period_samples == (2**sig.prbs_bits - 1) * c
    assert sig.resolution_hz <= 2.0  # the band's low edge is resolved
    one = sig.values[: sig.period_samples, 0]
    assert_array_equal(sig.values[:, 0], np.tile(one, 3))
    bits = one.reshape(-1, c)
    assert np.all(bits == bits[:, :1])  # each bit held c samples
    levels = np.where(bits[:, 0] == high, 1.0, -1.0)
    reference = signal.max_len_seq(sig.prbs_bits)[0] * 2.0 - 1.0  # scipy.signal.max_len_seq
    shifts = [k for k in range(reference.size) if np.array_equal(np.roll(reference, k), levels)]
    assert len(shifts) == 1  # the design is scipy's sequence, started at a seeded bit


def test_shifted_prbs_for_two_inputs():
    sig = _design(kind="prbs", n_inputs=2, periods=2)
    length = 2**sig.prbs_bits - 1
    shift = (length // 2) * sig.clock_divider
    one = sig.values[: sig.period_samples]
    assert_array_equal(one[:, 1], np.roll(one[:, 0], shift))
    centred = one - one.mean(axis=0)
    # the two inputs are nearly uncorrelated over a period (|r| of an m-sequence at a nonzero lag is 1/L)
    r = np.dot(centred[:, 0], centred[:, 1]) / np.sqrt(np.sum(centred**2, axis=0).prod())
    assert abs(r) < 0.05


# ---------------------------------------------------------------------------- other families


def test_multisine_design_energy_only_on_its_lines():
    sig = _design(kind="multisine", periods=2, harmonics="odd")
    n = sig.period_samples
    period = sig.values[n:2 * n, 0]
    spectrum = np.abs(np.fft.rfft(period - period.mean())) ** 2
    off = np.ones(spectrum.size, dtype=bool)
    off[sig.lines[0]] = False
    assert np.all(sig.lines[0] % 2 == 1)
    assert spectrum[off].sum() < 1e-20 * spectrum[sig.lines[0]].sum()  # rounding only (closed form: none)
    assert sig.crest_factor[0] < 1.5  # common practice for a reduced multisine (see tests/test_multisine.py)


def test_noise_and_binary_follow_the_band():
    noise = _design(kind="noise", periods=2, seed=4)
    n = noise.period_samples
    spectrum = np.abs(np.fft.rfft(noise.values[:n, 0])) ** 2
    k = np.arange(spectrum.size)
    in_band = (k * noise.resolution_hz >= 2.0) & (k * noise.resolution_hz <= 50.0)
    assert spectrum[~in_band][1:].sum() < 1e-20 * spectrum[in_band].sum()  # random-phase noise: band only
    amplitudes = np.sqrt(spectrum[in_band])
    assert_allclose(amplitudes, amplitudes[0], rtol=1e-9)  # flat amplitude, random phases
    binary = _design(kind="binary", periods=2, seed=4)
    assert np.unique(binary.values).size == 2
    bspec = np.abs(np.fft.rfft(binary.values[:n, 0] - binary.values[:n, 0].mean())) ** 2
    assert bspec[in_band].sum() > 0.5 * bspec.sum()  # most of the power in the band


@pytest.mark.parametrize("spacing", ["linear", "log"])
def test_chirp_holds_whole_cycles(spacing):
    n, fs = 4000, 1000.0
    x, end = swept_sine(n, fs, (1.0, 100.0), spacing)
    length = n / fs
    if spacing == "linear":
        cycles = length * (1.0 + end) / 2  # closed form: phase of a linear sweep at its end
    else:
        cycles = length * (end - 1.0) / math.log(end / 1.0)  # closed form for an exponential sweep
    assert abs(cycles - round(cycles)) < 1e-6
    nominal = length * (1.0 + 100.0) / 2 if spacing == "linear" else length * 99.0 / math.log(100.0)
    assert end <= 100.0 and cycles > nominal - 1  # the end moves by less than one cycle
    method = "linear" if spacing == "linear" else "logarithmic"
    t = np.arange(n) / fs
    assert_allclose(x, signal.chirp(t, 1.0, length, end, method=method, phi=-90), atol=1e-12)


def test_same_seed_same_signal_other_seed_other_signal():
    for kind in ("prbs", "binary", "noise", "multisine"):
        kw = {"kind": kind, "periods": 2, "harmonics": "odd-random"} if kind == "multisine" \
            else {"kind": kind, "periods": 2}
        a, b, c = _design(seed=1, **kw), _design(seed=1, **kw), _design(seed=2, **kw)
        assert_array_equal(a.values, b.values)
        assert not np.array_equal(a.values, c.values), kind


# ---------------------------------------------------------------------------- several inputs


def test_orthogonal_blocks_follow_a_hadamard_matrix():
    sig = _design(kind="multisine", n_inputs=3, periods=2)
    assert sig.blocks == 4  # next power of two for a Hadamard matrix (closed form)
    assert_array_equal(sig.block_signs, linalg.hadamard(4)[:3])  # scipy.linalg.hadamard
    per_block = sig.periods * sig.period_samples
    mid = sum(sig.options.amplitude_range) / 2
    first = sig.values[:per_block] - mid
    for b in range(4):
        block = sig.values[b * per_block:(b + 1) * per_block] - mid
        assert_allclose(block, first * sig.block_signs[:, b], atol=1e-12)


def test_interleaved_inputs_share_the_lines():
    sig = _design(kind="multisine", n_inputs=2, arrangement="interleaved", periods=2)
    a, b = sig.lines
    assert np.intersect1d(a, b).size == 0
    assert_array_equal(np.sort(np.concatenate([a, b])), np.arange(a.min(), max(a.max(), b.max()) + 1))
    n = sig.period_samples
    for j, lines in enumerate(sig.lines):
        spectrum = np.abs(np.fft.rfft(sig.values[:n, j] - sig.values[:n, j].mean())) ** 2
        off = np.ones(spectrum.size, dtype=bool)
        off[lines] = False
        assert spectrum[off].sum() < 1e-20 * spectrum.sum()  # each input on its own lines only


def test_arrangement_must_suit_the_family():
    with pytest.raises(OptionError, match="does not apply to kind 'prbs'"):
        SignalDesignOptions(kind="prbs", sample_rate_hz=100.0, band_hz=(1, 10), amplitude_range=(0, 1),
                            arrangement="interleaved")
    with pytest.raises(OptionError, match="harmonics applies only to kind 'multisine'"):
        SignalDesignOptions(kind="chirp", sample_rate_hz=100.0, band_hz=(1, 10), amplitude_range=(0, 1),
                            harmonics="odd")


# ---------------------------------------------------------------------------- limits


def test_rate_limit_matches_the_plain_recursion(rng):
    for _ in range(50):
        x = np.cumsum(rng.standard_normal(rng.integers(2, 400))) * rng.uniform(0.1, 5.0)
        step = rng.uniform(0.05, 3.0)
        start = rng.uniform(-5, 5)
        expected = np.empty_like(x)  # definition: y[k] = y[k-1] + clip(x[k] - y[k-1], -step, step)
        prev = start
        for k in range(x.size):
            prev = prev + np.clip(x[k] - prev, -step, step)
            expected[k] = prev
        assert_allclose(rate_limit(x, step, start=start), expected, atol=1e-9)


def test_periodic_rate_limit_is_periodic_and_within_the_step():
    x = np.where(np.arange(100) < 50, 1.0, -1.0)
    y = periodic_rate_limit(x, 0.1)
    wrapped = np.diff(np.concatenate([y, y[:1]]))
    assert np.max(np.abs(wrapped)) <= 0.1 + 1e-12
    assert_allclose(periodic_rate_limit(y, 0.1), y)  # a compliant period is its own steady state


@SETTINGS
@given(
    kind=st.sampled_from(["prbs", "binary", "noise", "multisine", "chirp"]),
    fs=st.sampled_from([50.0, 200.0, 1000.0]),
    low_periods=st.integers(min_value=16, max_value=256),
    top=st.floats(min_value=0.05, max_value=0.5),
    lo=st.floats(min_value=-50, max_value=50),
    span=st.floats(min_value=0.01, max_value=100),
    rate=st.one_of(st.none(), st.floats(min_value=0.5, max_value=50.0)),
    inputs=st.integers(min_value=1, max_value=3),
    seed=st.integers(min_value=0, max_value=1000),
)
def test_written_samples_never_exceed_range_or_rate(kind, fs, low_periods, top, lo, span, rate, inputs, seed):
    low = fs / low_periods
    high = max(top * fs, 2.5 * low)
    rate_limit_value = None if rate is None else rate * span * high  # some limits bind, some are refused
    extra = {"phases": "schroeder"} if kind == "multisine" else {}  # the phases do not matter here
    try:
        sig = _design(**extra, kind=kind, sample_rate_hz=fs, band_hz=(low, high), amplitude_range=(lo, lo + span),
                      rate_limit=rate_limit_value, n_inputs=inputs, seed=seed, periods=2)
    except OptionError as exc:
        assert "rate limit" in str(exc)  # only a rate limit the range cannot meet is refused here
        return
    values = np.array([[float(repr(v)) for v in row] for row in sig.values.tolist()])  # as written
    assert values.min() >= lo and values.max() <= lo + span
    if rate_limit_value is not None:
        assert np.max(np.abs(np.diff(values, axis=0))) <= rate_limit_value / fs


def test_rate_limit_distortion_is_measured_and_warned():
    with pytest.warns(SignalDesignWarning, match="rate limit changes input 1 by"):
        sig = design_signal(SignalDesignOptions(kind="multisine", sample_rate_hz=1000.0, band_hz=(2.0, 50.0),
                                                amplitude_range=(0.0, 10.0), rate_limit=900.0, periods=3))
    assert 0.01 < sig.rate_distortion[0] < 1
    assert 0.5 <= sig.band_power_kept[0] < 1
    assert sig.peak_rate[0] <= 900.0
    n = sig.period_samples
    assert_array_equal(sig.values[n:2 * n], sig.values[2 * n:3 * n])  # still exactly periodic


def test_rate_limit_the_range_cannot_meet_is_refused():
    with pytest.raises(OptionError, match=r"rate limit 50 per s cannot meet the range 0 to 10: .* needs 1571 per s"):
        # closed form: a 50 Hz sine spanning 10 units needs pi * 50 * 10 = 1571 units/s
        design_signal(SignalDesignOptions(kind="multisine", sample_rate_hz=1000.0, band_hz=(2.0, 50.0),
                                          amplitude_range=(0.0, 10.0), rate_limit=50.0, periods=2))


# ---------------------------------------------------------------------------- periods, duration, errors


def test_band_above_nyquist_is_refused():
    with pytest.raises(OptionError, match="band top 600 Hz is above the Nyquist frequency 500 Hz"):
        SignalDesignOptions(kind="prbs", sample_rate_hz=1000.0, band_hz=(1, 600), amplitude_range=(0, 1))


def test_band_beyond_four_tenths_of_the_rate_warns():
    with pytest.warns(SignalDesignWarning, match="beyond 0.4 of the sample rate"):
        design_signal(SignalDesignOptions(kind="multisine", sample_rate_hz=100.0, band_hz=(2.0, 45.0),
                                          amplitude_range=(0, 1), periods=3))


def test_periods_that_do_not_fit_the_duration_are_refused():
    # a 2 Hz low edge at 1 kHz needs periods of 500 samples = 0.5 s; 10 of them do not fit in 3 s
    with pytest.raises(OptionError, match="10 periods do not fit the duration 3 s"):
        _design(kind="multisine", periods=10, duration_s=3.0)
    with pytest.raises(OptionError, match="holds 1 period"):
        _design(kind="chirp", duration_s=0.9)


def test_duration_sets_the_periods_and_periods_with_duration_set_the_period():
    sig = _design(kind="multisine", duration_s=10.0)
    assert sig.period_samples == 500 and sig.periods == 20  # closed form: 1000 / 2 Hz; 10 s / 0.5 s
    both = _design(kind="noise", duration_s=10.0, periods=4)
    assert both.period_samples == 2500 and both.n_samples == 10_000  # 10 s / 4 periods at 1 kHz
    assert both.resolution_hz == 0.4  # closed form: 1000 / 2500


def test_periods_must_exceed_the_transient():
    with pytest.raises(OptionError, match="must exceed"):
        SignalDesignOptions(kind="noise", sample_rate_hz=100.0, band_hz=(1, 10), amplitude_range=(0, 1),
                            periods=2, transient_periods=2)


def test_advice_closed_forms():
    advice = duration_advice(100.0, (1.0, 10.0), time_constant_s=0.45, noise_ratio=0.5)
    assert advice.resolution_hz == 1.0 and advice.period_s == 1.0  # N = 100 samples at 100 Hz
    assert advice.lines_in_band == 10
    assert advice.transient_periods == 3  # ceil(5 * 0.45 s / 1 s)
    # ceil(2 K r^2 / (N eps^2)) = ceil(2 * 10 * 0.25 / (100 * 0.05^2)) = 20 periods
    assert advice.measured_periods == 20
    assert_allclose(advice.expected_frf_std, 0.05, rtol=1e-12)  # r sqrt(2 K / (N P)) at the target
    assert advice.duration_s == 23.0
    assert any("corner frequency" in note for note in advice.notes)  # 1 Hz > 1 / (2 pi 0.45 s) = 0.354 Hz
    quiet = duration_advice(100.0, (1.0, 10.0))
    assert (quiet.transient_periods, quiet.measured_periods) == (1, 4)  # defaults (common practice)


def test_advice_drives_the_default_periods():
    sig = _design(kind="multisine", time_constant_s=1.2)
    assert sig.transient_periods == 12  # ceil(5 * 1.2 s / 0.5 s)
    assert sig.periods == 16  # 12 transient + 4 measured


def test_too_long_a_prbs_is_refused():
    with pytest.raises(OptionError, match="bit register; at most 32"):
        _design(kind="prbs", band_hz=(1e-9, 50.0))


def test_periodic_rate_limit_settles_slow_drifts():
    x = np.array([0.0, 0.0, 0.0, 10.0])  # falls 3 steps, rises 1 per period: settles after passes
    assert_allclose(periodic_rate_limit(x, 1.0, passes=0), [0.0, 0.0, 0.0, 1.0])  # steady state (by hand)
    square = np.where(np.arange(1000) < 500, 10.0, 0.0)
    y = periodic_rate_limit(square, 0.001, passes=0)  # far too slow: a triangle about the middle
    assert np.max(np.abs(np.diff(np.concatenate([y, y[:1]])))) <= 0.001 * (1 + 1e-9)
    assert_allclose([y.min(), y.max()], [5.0 - 0.25, 5.0 + 0.25], atol=1e-9)  # +-500 steps of 0.001 / 2


# ---------------------------------------------------------------------------- what a designed test buys


def test_designed_signal_recovers_modes_better_than_steps():
    """Same length, range and noise: a designed signal finds the resonance better than slow steps."""
    from ident.estimate.identify import IdentifyOptions, identify

    fs, duration = 20.0, 60.0
    wn, zeta, tau = 2 * np.pi * 2.0, 0.1, 0.3  # invented plant: 2 Hz resonance, 0.3 s lag
    den = np.polymul([1.0, 2 * zeta * wn, wn**2], [tau, 1.0])
    sysd = signal.cont2discrete(signal.tf2ss([wn**2], den), 1 / fs, method="zoh")[:4]
    n = int(duration * fs)

    def mode_error(u, seed):
        _, y, _ = signal.dlsim((*sysd, 1 / fs), u)
        y = y + 0.1 * np.random.default_rng(seed).standard_normal(y.shape)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            model = identify([(u[:, None], y)], 1 / fs, IdentifyOptions(method="subspace", order=3)).model
        z = model.poles()
        s = np.log(z[np.abs(z) > 0].astype(complex)) * fs  # input-delay states sit at z = 0
        if not np.any(s.imag > 0):
            return np.inf  # no resonance found at all
        pair = s[np.argmax(s.imag)]
        return abs(abs(pair) / wn - 1) + abs(-pair.real / abs(pair) - zeta)

    steps = np.where((np.arange(n) // int(5 * fs)) % 2 == 0, 1.0, -1.0)  # +-1 held 5 s each
    for kind in ("multisine", "prbs"):
        designed = _design(kind=kind, sample_rate_hz=fs, band_hz=(0.1, 8.0), amplitude_range=(-1.0, 1.0),
                           duration_s=duration).values[:, 0]
        u = np.resize(designed, n)  # the same test length: repeat into the last partial period
        err_designed = np.median([mode_error(u, seed) for seed in range(6)])
        err_steps = np.median([mode_error(steps, seed) for seed in range(6)])
        assert err_designed < 0.6 * err_steps, (kind, err_designed, err_steps)


def test_crest_factor_of_the_written_signal():
    sig = _design(kind="multisine", periods=2)
    n = sig.period_samples
    assert_allclose(sig.crest_factor, crest_factor(sig.values[n:2 * n]), rtol=1e-12)
    assert_allclose(sig.rms, np.std(sig.values[n:2 * n], axis=0), rtol=1e-12)
