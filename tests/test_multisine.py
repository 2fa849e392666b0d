"""Multisine grids, Schroeder phases and crest-factor reduction."""

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from ident.errors import OptionError
from ident.estimate.multisine import (
    ODD_RANDOM_GROUP,
    crest_factor,
    frequency_lines,
    line_range,
    low_crest_phases,
    multisine,
    schroeder_phases,
)

#: Crest factor a reduced flat multisine with many lines should reach. Common practice:
#: optimised multisines with many lines reach about 1.4-1.5 (a single sine has sqrt(2) = 1.414).
GOOD_CREST = 1.5


def test_crest_factor_closed_forms():
    n = np.arange(1024)
    # closed form: a sine has peak/RMS sqrt(2); a two-level signal 1; an offset changes nothing
    assert_allclose(crest_factor(3.0 + np.sin(2 * np.pi * 5 * n / 1024)), [np.sqrt(2)], rtol=1e-12)
    assert_allclose(crest_factor(np.where(n % 2 == 0, 4.0, -2.0)), [1.0], rtol=1e-12)
    assert np.isnan(crest_factor(np.ones(10))[0])


def test_multisine_spectrum_holds_only_the_chosen_lines():
    n = 1000
    lines = np.array([1, 3, 7, 20, 101, 499])
    amplitudes = np.array([1.0, 0.5, 2.0, 1.0, 0.1, 0.3])
    phases = np.linspace(0, 5, lines.size)
    x = multisine(n, lines, phases, amplitudes)
    spectrum = np.fft.rfft(x) * 2 / n  # scaled so a cosine of amplitude a gives |X| = a
    off = np.ones(spectrum.size, dtype=bool)
    off[lines] = False
    # closed form: one period of a sum of harmonics has no leakage; off-line energy is rounding only
    assert np.sum(np.abs(spectrum[off]) ** 2) < 1e-24 * np.sum(np.abs(spectrum[lines]) ** 2)
    assert_allclose(np.abs(spectrum[lines]), amplitudes, rtol=1e-12)
    assert_allclose(np.angle(spectrum[lines] * np.exp(-1j * phases)), 0.0, atol=1e-10)


def test_multisine_is_a_sum_of_cosines():
    n = 64
    t = np.arange(n)
    expected = np.cos(2 * np.pi * 2 * t / n + 0.3) + 0.5 * np.cos(2 * np.pi * 5 * t / n - 1.0)  # definition
    assert_allclose(multisine(n, [2, 5], [0.3, -1.0], [1.0, 0.5]), expected, atol=1e-12)


def test_schroeder_phases_for_consecutive_lines():
    k = np.arange(1, 11)
    # Schroeder 1970, flat spectrum of K consecutive harmonics: phi_k = -pi k (k - 1) / K
    expected = np.mod(-np.pi * k * (k - 1) / k.size, 2 * np.pi)
    assert_allclose(schroeder_phases(k), expected, atol=1e-12)


def test_schroeder_phases_follow_the_general_formula():
    lines = np.array([1, 3, 4, 9])
    amp = np.array([1.0, 2.0, 0.5, 1.0])
    p = amp**2 / np.sum(amp**2)
    # Schroeder 1970: phi_n = -2 pi sum_{l < n} (n - l) p_l, with p_l = 0 on unexcited harmonics
    expected = [-2 * np.pi * sum((lines[i] - lines[j]) * p[j] for j in range(i)) for i in range(lines.size)]
    assert_allclose(schroeder_phases(lines, amp), np.mod(expected, 2 * np.pi), atol=1e-12)


@pytest.mark.parametrize("harmonics", ["all", "odd"])
def test_low_crest_phases_beat_schroeder_and_reach_common_practice(harmonics):
    n = 2048
    lines = frequency_lines(n, 2048.0, (1.0, 200.0), harmonics=harmonics)
    schroeder = crest_factor(multisine(n, lines, schroeder_phases(lines)))[0]
    phases = low_crest_phases(n, lines)
    reduced = multisine(n, lines, phases)
    cf = crest_factor(reduced)[0]
    assert cf < schroeder
    assert cf < GOOD_CREST
    # the amplitudes are kept: only the phases change
    assert_allclose(np.abs(np.fft.rfft(reduced) * 2 / n)[lines], 1.0, rtol=1e-9)


def test_equal_phases_give_the_worst_crest_factor():
    lines = np.array([1, 2, 3, 4, 5])
    worst = crest_factor(multisine(256, lines, np.zeros(lines.size)))[0]
    assert_allclose(worst, np.sqrt(2 * lines.size), rtol=1e-9)  # closed form: peak K over RMS sqrt(K / 2)


def test_low_crest_phases_improve_a_given_start(rng):
    n = 512
    lines = np.arange(2, 40)
    start = rng.uniform(0, 2 * np.pi, lines.size)
    before = crest_factor(multisine(n, lines, start))[0]
    after = crest_factor(multisine(n, lines, low_crest_phases(n, lines, start=start)))[0]
    assert after < before


def test_line_range_is_inside_the_band_and_below_nyquist():
    # 1000 samples at 1000 Hz: lines every 1 Hz; the band 2.5-10 Hz holds lines 3..10 (closed form)
    assert line_range(1000, 1000.0, (2.5, 10.0)) == (3, 10)
    # an even period leaves out the Nyquist line 500 (closed form)
    assert line_range(1000, 1000.0, (100.0, 500.0)) == (100, 499)


def test_linear_and_odd_grids():
    all_lines = frequency_lines(1000, 1000.0, (3.0, 20.0))
    assert_array_equal(all_lines, np.arange(3, 21))
    odd = frequency_lines(1000, 1000.0, (3.0, 20.0), harmonics="odd")
    assert_array_equal(odd, np.arange(3, 21, 2))


def test_odd_random_grid_leaves_one_line_out_per_group():
    lines = frequency_lines(4000, 1000.0, (0.25, 100.0), harmonics="odd-random", rng=np.random.default_rng(5))
    odd = np.arange(1, 401, 2)  # odd harmonics of 0.25 Hz up to 100 Hz (closed form)
    assert np.all(np.isin(lines, odd)) and np.all(lines % 2 == 1)
    groups = odd[: (odd.size // ODD_RANDOM_GROUP) * ODD_RANDOM_GROUP].reshape(-1, ODD_RANDOM_GROUP)
    kept_per_group = np.isin(groups, lines).sum(axis=1)
    assert np.all(kept_per_group == ODD_RANDOM_GROUP - 1)
    again = frequency_lines(4000, 1000.0, (0.25, 100.0), harmonics="odd-random", rng=np.random.default_rng(5))
    assert_array_equal(lines, again)  # the same seed gives the same grid


def test_log_grid_density_and_range():
    lines = frequency_lines(100_000, 1000.0, (0.1, 100.0), spacing="log", lines_per_decade=10)
    assert lines[0] == 10 and lines[-1] == 10_000  # 0.1 Hz and 100 Hz at 0.01 Hz spacing (closed form)
    ratios = lines[1:] / lines[:-1]
    # 10 lines per decade: ratio 10^(1/10) = 1.259 between neighbours (closed form), to the rounding to
    # whole lines (at most half a line in ten at the low end)
    assert_allclose(ratios, 10 ** 0.1, rtol=0.05)
    assert lines.size == 31  # three decades at 10 per decade, both ends included (closed form)


def test_band_without_lines_is_refused():
    with pytest.raises(OptionError, match="holds no"):
        frequency_lines(100, 1000.0, (1.0, 5.0))  # lines every 10 Hz
