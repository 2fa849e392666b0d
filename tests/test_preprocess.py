"""Tests of ident.estimate.preprocess against numpy/scipy references."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import signal

from ident.errors import FrozenDataWarning, OptionError, PipelineError
from ident.estimate.data import Experiment
from ident.estimate.preprocess import OFFSET_METHODS, PreprocessOptions, frozen_tail_length, prepare


def _record(rng, n=1000, m=2, p=1, offset=(3.0, -1.0, 20.0)):
    u = rng.standard_normal((n, m)) + np.asarray(offset[:m])
    y = rng.standard_normal((n, p)) + np.asarray(offset[m:m + p])
    return u, y


def test_operating_point_is_mean_of_estimation_part(rng):
    u, y = _record(rng)
    prep = prepare((u, y), 0.01, PreprocessOptions(holdout=0.25))
    # split point: round(0.75 * 1000) = 750 (closed form)
    assert prep.estimation_ranges == ((0, 750),)
    assert prep.validation_ranges == ((750, 1000),)
    # numpy.mean over the estimation rows is the reference
    assert_allclose(prep.operating_point.inputs, u[:750].mean(axis=0), rtol=1e-13)
    assert_allclose(prep.operating_point.outputs, y[:750].mean(axis=0), rtol=1e-13)
    # the same level is removed from estimation and validation data
    assert_allclose(prep.estimation[0].u, u[:750] - u[:750].mean(axis=0), atol=1e-13)
    assert_allclose(prep.validation[0].y, y[750:] - y[:750].mean(axis=0), atol=1e-13)
    # estimation part has zero mean (closed form); exact up to rounding
    assert_allclose(prep.estimation[0].u.mean(axis=0), 0.0, atol=1e-13)


def test_offset_log_initial_window(rng):
    # a log that rests at a known level for its first second, then moves
    T = 0.01
    n = 2000
    u = np.full((n, 1), 4.5)
    y = np.full((n, 1), 120.0)
    u[100:, 0] += rng.standard_normal(n - 100)
    y[100:, 0] += rng.standard_normal(n - 100)
    prep = prepare((u, y), T, PreprocessOptions(offset="initial", initial_window_s=1.0))
    # the resting level is the operating point exactly (closed form)
    assert_array_equal(prep.operating_point.inputs, [4.5])
    assert_array_equal(prep.operating_point.outputs, [120.0])
    assert_array_equal(prep.estimation[0].u[:100], 0.0)
    # the mean method gives the estimation mean instead (numpy reference)
    prep_mean = prepare((u, y), T, PreprocessOptions(offset="mean"))
    assert_allclose(prep_mean.operating_point.outputs, y[:1400].mean(axis=0), rtol=1e-13)


def test_holdout_zero_keeps_everything(rng):
    u, y = _record(rng, n=100)
    prep = prepare((u, y), 1.0, PreprocessOptions(holdout=0.0))
    assert prep.validation == ()
    assert prep.estimation[0].n_samples == 100


def test_decimation_matches_scipy(rng):
    u, y = _record(rng, n=3000)
    q = 5
    prep = prepare((u, y), 0.002, PreprocessOptions(decimate=q, holdout=0.3))
    raw = np.hstack((u, y)) - np.concatenate(
        (prep.operating_point.inputs, prep.operating_point.outputs)
    )
    # reference: scipy.signal.decimate with its default 8th-order Chebyshev IIR filter
    ref = signal.decimate(raw, q, axis=0)
    got = np.vstack(
        (np.hstack((prep.estimation[0].u, prep.estimation[0].y)),
         np.hstack((prep.validation[0].u, prep.validation[0].y)))
    )
    assert got.shape == ref.shape
    # same filter on the same data: identical up to rounding
    assert_allclose(got, ref, rtol=1e-12, atol=1e-12)
    assert prep.sample_time == pytest.approx(0.01, rel=1e-15)  # 5 x 0.002 s, closed form
    assert prep.decimation == q
    # split at round(0.7 * 600) = 420 decimated samples = raw sample 2100 (closed form)
    assert prep.estimation[0].n_samples == 420
    assert prep.estimation_ranges == ((0, 2100),)


def test_detrend_matches_scipy_on_estimation_part(rng):
    n = 1000
    t = np.arange(n)
    u = (0.01 * t + 2.0)[:, None] + rng.standard_normal((n, 1))
    y = (-0.05 * t + 7.0)[:, None] + rng.standard_normal((n, 1))
    prep = prepare((u, y), 0.1, PreprocessOptions(detrend=True, holdout=0.2))
    # reference: scipy.signal.detrend (least-squares line) of the estimation rows
    assert_allclose(prep.estimation[0].u, signal.detrend(u[:800], axis=0), atol=1e-10)
    assert_allclose(prep.estimation[0].y, signal.detrend(y[:800], axis=0), atol=1e-10)
    # the validation part has the same line, extended, removed: numpy.polyfit reference
    slope, intercept = np.polyfit(t[:800], y[:800, 0], 1)
    assert_allclose(prep.validation[0].y[:, 0], y[800:, 0] - (intercept + slope * t[800:]),
                    atol=1e-9)
    assert prep.trends.shape == (1, 2, 2)


def test_two_experiments_kept_apart(rng):
    a = _record(rng, n=600)
    b = _record(rng, n=400, offset=(10.0, 10.0, 10.0))
    prep = prepare([a, Experiment(*b)], 1.0, PreprocessOptions(holdout=0.5),
                   segment_starts=[0, 1000])
    # each experiment is split on its own (closed form: half of each)
    assert [e.n_samples for e in prep.estimation] == [300, 200]
    assert [e.n_samples for e in prep.validation] == [300, 200]
    assert prep.estimation_ranges == ((0, 300), (1000, 1200))
    assert prep.validation_ranges == ((300, 600), (1200, 1400))
    # pooled mean of the two estimation parts (numpy reference)
    pooled = np.vstack((a[0][:300], b[0][:200])).mean(axis=0)
    assert_allclose(prep.operating_point.inputs, pooled, rtol=1e-13)
    assert_allclose(prep.estimation[1].u, b[0][:200] - pooled, atol=1e-12)


def test_inputs_not_modified(rng):
    u, y = _record(rng, n=300)
    u0, y0 = u.copy(), y.copy()
    prepare((u, y), 1.0, PreprocessOptions(detrend=True, decimate=2))
    assert_array_equal(u, u0)
    assert_array_equal(y, y0)


def test_overwrite_makes_the_deviations_in_place_and_the_same_data(rng):
    # common practice, no source: the in-place path gives bit for bit the same prepared data
    # as the copying one; the caller's arrays then hold the deviations; read-only arrays and
    # detrending (which needs the raw values) are copied as before
    u, y = rng.standard_normal((500, 2)) + 3.0, rng.standard_normal((500, 1)) - 1.0
    reference = prepare([(u.copy(), y.copy())], 0.1)
    uo, yo = u.copy(), y.copy()
    got = prepare([(uo, yo)], 0.1, overwrite=True)
    for a, b in zip((*reference.estimation, *reference.validation), (*got.estimation, *got.validation), strict=True):
        assert_array_equal(a.u, b.u)
        assert_array_equal(a.y, b.y)
    assert_array_equal(uo, u - reference.operating_point.inputs)  # numpy's own subtraction
    frozen = u.copy()
    frozen.flags.writeable = False
    prepare([(frozen, y.copy())], 0.1, overwrite=True)
    assert_array_equal(frozen, u)
    raw = u.copy()
    prepare([(raw, y.copy())], 0.1, PreprocessOptions(detrend=True), overwrite=True)
    assert_array_equal(raw, u)


def test_names_and_units(rng):
    u, y = _record(rng, n=100)
    prep = prepare((u, y), 1.0, input_names=["a", "b"], output_names=["c"],
                   input_units=["V", "A"], output_units=["m"])
    assert prep.input_names == ("a", "b") and prep.output_units == ("m",)


@pytest.mark.parametrize(
    "kwargs",
    [{"offset": "median"}, {"holdout": 1.0}, {"holdout": -0.1}, {"decimate": 0},
     {"initial_window_s": 0.0}, {"detrend": "yes"}, {"drop_frozen_tail": "no"}],
)
def test_bad_options(kwargs):
    with pytest.raises(OptionError):
        PreprocessOptions(**kwargs)


def test_from_mapping_rejects_unknown_key():
    opts = PreprocessOptions.from_mapping({"holdout": 0.2, "offset": "initial"})
    assert opts.holdout == 0.2 and opts.offset == "initial"
    with pytest.raises(PipelineError, match="fit.preprocess.hold_out"):
        PreprocessOptions.from_mapping({"hold_out": 0.2}, key_path="fit.preprocess")
    with pytest.raises(PipelineError):
        PreprocessOptions.from_mapping({"offset": "median"})
    assert OFFSET_METHODS == ("mean", "initial")


def test_short_experiment_for_decimation_is_refused(rng):
    u, y = _record(rng, n=20)
    with pytest.raises(OptionError, match="decimation by 4"):
        prepare((u, y), 1.0, PreprocessOptions(decimate=4))


def test_mismatched_lengths_refused(rng):
    with pytest.raises(OptionError, match="same number of samples"):
        prepare([(np.zeros((10, 1)), np.zeros((9, 1)))], 1.0)


def _frozen_by_loop(u, y):
    # direct reference: walk back from the end while a row equals the last row (common practice, no source)
    z = np.hstack((u, y))
    k = z.shape[0] - 1
    while k > 0 and np.array_equal(z[k - 1], z[-1]):
        k -= 1
    return z.shape[0] - 1 - k


@pytest.mark.parametrize("tail", [0, 1, 5, 255, 256, 257, 700, 2999])
def test_frozen_tail_length_matches_a_direct_loop(rng, tail):
    u, y = _record(rng, n=3000)
    if tail:
        u[-tail:], y[-tail:] = u[-tail - 1], y[-tail - 1]
    assert frozen_tail_length(u, y) == _frozen_by_loop(u, y) == tail


def test_frozen_tail_needs_every_channel_to_repeat(rng):
    u, y = _record(rng, n=500)
    u[-100:] = u[-101]  # the input is held, the output still moves
    assert frozen_tail_length(u, y) == 0
    y[-100:] = y[-101]
    y[-1, 0] = np.nextafter(y[-1, 0], np.inf)  # one bit off in the last sample: not frozen
    assert frozen_tail_length(u, y) == 0


def test_frozen_tail_is_left_out_before_the_split(rng):
    u, y = _record(rng, n=1000)
    u[800:], y[800:] = u[799], y[799]  # a record padded with its last values (200 repeats)
    with pytest.warns(FrozenDataWarning, match=r"samples 800-999 \(the last 200 of the log\)"):
        prep = prepare((u, y), 1.0, PreprocessOptions(holdout=0.25))
    assert prep.frozen_tails == ((800, 1000),)
    # the hold-out fraction applies to the 800 samples that remain: round(0.75 * 800) = 600
    assert prep.estimation_ranges == ((0, 600),) and prep.validation_ranges == ((600, 800),)
    assert_allclose(prep.validation[0].y, y[600:800] - y[:600].mean(axis=0), atol=1e-13)
    kept = prepare((u, y), 1.0, PreprocessOptions(holdout=0.25, drop_frozen_tail=False))
    assert kept.frozen_tails == () and kept.validation_ranges == ((750, 1000),)


def test_short_or_whole_frozen_runs_are_kept(rng):
    import warnings

    u, y = _record(rng, n=4000)
    u[-39:], y[-39:] = u[-40], y[-40]  # 39 repeats: fewer than 1 % of 4000
    const = (np.ones((300, 1)), np.ones((300, 1)))  # a record that is one value throughout
    with warnings.catch_warnings():
        warnings.simplefilter("error", FrozenDataWarning)
        assert prepare((u, y), 1.0).frozen_tails == ()
        assert prepare(const, 1.0).frozen_tails == ()


def test_frozen_tails_of_several_records_and_of_a_separate_validation_log(rng):
    a, b = _record(rng, n=500), _record(rng, n=600)
    for u, y in (a, b):
        u[-50:], y[-50:] = u[-51], y[-51]
    with pytest.warns(FrozenDataWarning) as caught:
        prep = prepare([a, b], 1.0, segment_starts=[0, 700])
    assert ["of segment 1" in str(w.message) for w in caught] == [True, False]
    assert "samples 1250-1299 (the last 50 of segment 2)" in str(caught[1].message)
    assert prep.frozen_tails == ((450, 500), (1250, 1300))
    assert prep.estimation_ranges == ((0, 315), (700, 1085))
    with pytest.warns(FrozenDataWarning, match="of the validation log"):
        sep = prepare([_record(rng, n=400)], 1.0, validation_data=[a])
    # validation records count on after the estimation records with a gap of one sample
    assert sep.frozen_tails == ((401 + 450, 401 + 500),)
    assert sep.validation_ranges == ((401, 401 + 450),)
