import warnings

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal

from ident.errors import OptionError, ResampleError, ResamplingWarning
from ident.estimate.resample import (
    EDGE_SAMPLES,
    Channel,
    decimate,
    linear_interpolation,
    rate_factor,
    resample_channels,
    zero_order_hold,
)


def _channel(name, rate, duration, f=None, start=0.0, values=None):
    t = start + np.arange(int(round(duration * rate))) / rate
    x = np.sin(2 * np.pi * f * t) if values is None else values(t)
    return Channel(name, t, x, 1.0 / rate)


@pytest.mark.parametrize(("native", "target", "expected"), [
    (1000.0, 100.0, (1, 10)),   # closed form: 100/1000 = 1/10
    (1000.0, 300.0, (3, 10)),   # closed form: 300/1000 = 3/10
    (48000.0, 44100.0, (147, 160)),  # closed form: 44100/48000 = 147/160
    (100.0, 100.0, (1, 1)),
])
def test_rate_factor_is_the_ratio_in_lowest_terms(native, target, expected):
    assert rate_factor(native, target) == expected


def test_rate_factor_refuses_ratios_beyond_the_largest_factor():
    # closed form: 5000 / 1 has a numerator above MAX_FACTOR = 1000
    assert rate_factor(1.0, 5000.0) is None


def test_decimation_passes_the_band_without_phase_and_stops_aliases():
    fs, q = 1000.0, 10
    t = np.arange(20000) / fs
    slow = np.sin(2 * np.pi * 3.0 * t)       # 3 Hz: well inside the new 50 Hz Nyquist band
    fast = np.sin(2 * np.pi * 130.0 * t)     # 130 Hz: would alias to 30 Hz at 100 Hz
    out_slow = decimate(slow, 1, q)[EDGE_SAMPLES:-EDGE_SAMPLES]
    out_fast = decimate(fast, 1, q)[EDGE_SAMPLES:-EDGE_SAMPLES]
    t_out = t[::q][EDGE_SAMPLES:-EDGE_SAMPLES]
    # closed form: unit gain and zero phase in the pass band (Kaiser beta 5 ripple < 1e-3)
    assert_allclose(out_slow, np.sin(2 * np.pi * 3.0 * t_out), atol=2e-3)
    # the alias is attenuated by the stop band (Kaiser beta 5: about -50 dB; require -40 dB)
    assert np.max(np.abs(out_fast)) < 1e-2


def test_hold_and_linear_interpolation_closed_forms():
    t = np.array([0.0, 0.1, 0.2, 0.3])
    x = np.array([0.0, 1.0, 4.0, 9.0])
    at = np.array([0.0, 0.05, 0.1, 0.15, 0.2999999999])
    # closed form: the last value at or before each time (a hair before a stamp counts as on it)
    assert_array_equal(zero_order_hold(t, x, at), [0.0, 0.0, 1.0, 1.0, 9.0])
    # closed form: straight lines between the samples
    assert_allclose(linear_interpolation(t, x, at[:4]), [0.0, 0.5, 1.0, 2.5], rtol=1e-12)


def test_fast_channel_decimated_slow_channel_kept_on_one_grid():
    enc = _channel("enc", 1000.0, 20.0, f=0.5)
    temp = _channel("temp", 10.0, 20.0, values=lambda t: 20.0 + t)
    res = resample_channels([enc, temp], 10.0)
    assert [p.action for p in res.channels] == ["decimated", "kept"]
    assert (res.channels[0].up, res.channels[0].down) == (1, 100)
    assert res.edge_samples == EDGE_SAMPLES
    # closed form: the grid is the slow channel's stamps without 10 samples at each end
    assert_allclose(res.time, np.arange(10, 190) / 10.0, rtol=0, atol=1e-12)
    assert_array_equal(res.values[:, 1], 20.0 + np.arange(10, 190) / 10.0)
    # closed form: a 0.5 Hz sine passes the anti-alias filter unchanged (ripple < 1e-3)
    assert_allclose(res.values[:, 0], np.sin(2 * np.pi * 0.5 * res.time), atol=2e-3)


def test_same_rate_channels_are_copied_without_filtering():
    a = _channel("a", 100.0, 5.0, f=2.0)
    b = _channel("b", 100.0, 4.0, f=3.0, start=0.5)  # starts 50 samples later: on the same grid
    res = resample_channels([a, b], 100.0)
    assert [p.action for p in res.channels] == ["kept", "kept"] and res.edge_samples == 0
    # the overlap 0.5 s .. 4.49 s (b's 400 samples), copied sample for sample
    assert_array_equal(res.values[:, 0], a.values[50:450])
    assert_array_equal(res.values[:, 1], b.values)


def test_going_up_needs_a_method_and_warns_about_what_it_does():
    fast = _channel("enc", 100.0, 10.0, f=1.0)
    slow = _channel("temp", 10.0, 10.0, values=lambda t: 3.0 * t)
    with pytest.raises(ResampleError, match="temp.*below the common rate 100 Hz") as info:
        resample_channels([fast, slow], 100.0)
    assert "--upsample zoh|linear" in info.value.hint
    for method in ("zoh", "linear"):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            res = resample_channels([fast, slow], 100.0, upsample=method)
        (w,) = caught
        assert issubclass(w.category, ResamplingWarning)
        assert "nothing above 5 Hz" in str(w.message)  # closed form: Nyquist of 10 Hz
        t = res.time
        if method == "zoh":
            assert "delays the channel by 0.05 s" in str(w.message)  # closed form: half of 0.1 s
            # closed form: the ramp 3 t held at the last 10 Hz stamp
            assert_allclose(res.values[:, 1], 3.0 * np.floor(t * 10.0 + 1e-9) / 10.0, atol=1e-12)
        else:
            assert_allclose(res.values[:, 1], 3.0 * t, atol=1e-12)  # closed form: a ramp is exact
        assert res.channels[1].action == method


def test_a_channel_off_the_grid_is_refused_unless_interpolation_is_asked():
    a = _channel("a", 100.0, 5.0, f=1.0)
    b = _channel("b", 100.0, 5.0, f=1.0, start=0.004)  # 0.4 sample times late: another clock
    with pytest.raises(ResampleError, match="0.4 of a sample time off the common grid"):
        resample_channels([a, b], 100.0)
    with pytest.warns(ResamplingWarning, match="interpolated onto the 100 Hz grid"):
        res = resample_channels([a, b], 100.0, upsample="linear")
    # closed form: linear interpolation of a 1 Hz sine sampled at 100 Hz (error < (2 pi f T)^2 / 8)
    assert_allclose(res.values[:, 1], np.sin(2 * np.pi * res.time), atol=(2 * np.pi / 100) ** 2 / 8)


def test_channels_that_do_not_overlap_are_refused():
    a = _channel("a", 100.0, 1.0, f=1.0)
    b = _channel("b", 100.0, 1.0, f=1.0, start=5.0)
    with pytest.raises(ResampleError, match="do not overlap"):
        resample_channels([a, b], 100.0)


def test_inputs_are_not_modified_or_copied():
    t = np.arange(1000) / 1000.0
    x = np.sin(2 * np.pi * 5 * t)
    keep = x.copy()
    ch = Channel("x", t, x, 1e-3)
    assert np.shares_memory(ch.values, x) and not ch.values.flags.writeable
    resample_channels([ch], 100.0)
    assert_array_equal(x, keep) and x.flags.writeable


def test_bad_arguments_name_the_parameter():
    ch = _channel("x", 100.0, 1.0, f=1.0)
    with pytest.raises(OptionError, match="rate_hz"):
        resample_channels([ch], 0.0)
    with pytest.raises(OptionError, match="upsample"):
        resample_channels([ch], 100.0, upsample="cubic")
    with pytest.raises(OptionError, match="at least one channel"):
        resample_channels([], 100.0)
