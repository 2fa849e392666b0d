"""ASAM MDF and HDF5 logs, several rates, and the same log in every format.

MDF files are written here with asammdf itself and HDF5 files with h5py, so the
expected numbers are exactly the arrays written.
"""

import json
import sys
import warnings

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose, assert_array_equal
from scipy import signal

from ident.errors import LogFormatError, OptionError, ResamplingWarning
from ident.io.log import read_column_names, read_log, read_recording

asammdf = pytest.importorskip(

    "asammdf", reason="asammdf is not installed; pip install '.[test]' (or '.[mdf]') enables these tests"

)
h5py = pytest.importorskip(
    "h5py", reason="h5py is not installed; pip install '.[test]' (or '.[hdf5]') enables these tests"
)


# --------------------------------------------------------------------------- writers


def _mdf(path, groups, version="4.10"):
    """Write ``groups`` = [(acq_name, time, [(name, unit, values, invalid or None), ...]), ...]."""
    mdf = asammdf.MDF(version=version)
    for acq, t, channels in groups:
        sigs = [asammdf.Signal(v, t, name=name, unit=unit, invalidation_bits=inv)
                for name, unit, v, inv in channels]
        mdf.append(sigs, acq_name=acq)
    mdf.save(path, overwrite=True)
    mdf.close()
    return str(path)


def _bench(seconds=20.0):
    """A 1 kHz encoder group, a 10 Hz temperature group and a 1 kHz aux group (invented bench)."""
    t_fast = np.arange(int(seconds * 1000)) / 1000.0
    t_slow = np.arange(int(seconds * 10)) / 10.0
    rng = np.random.default_rng(7)
    return {
        "t_fast": t_fast, "t_slow": t_slow,
        "enc": np.sin(2 * np.pi * 0.4 * t_fast), "cmd": rng.standard_normal(t_fast.size),
        "temp": 20.0 + 0.5 * t_slow, "aux": np.cos(2 * np.pi * 0.2 * t_fast),
    }


@pytest.fixture
def bench_mdf(tmp_path):
    d = _bench()
    invalid = np.zeros(d["t_fast"].size, dtype=bool)
    invalid[1234] = True
    path = _mdf(tmp_path / "bench.mf4", [
        ("encoder", d["t_fast"], [("enc", "rad", d["enc"], None), ("cmd", "V", d["cmd"], invalid)]),
        ("climate", d["t_slow"], [("temp", "degC", d["temp"], None)]),
        ("spare", d["t_fast"], [("enc", "", d["aux"], None)]),
    ])
    return path, d


# --------------------------------------------------------------------------- MDF


def test_mdf_groups_channels_units_and_numbers_read_back(bench_mdf):
    path, d = bench_mdf
    rec = read_recording(path, drop_bad_rows=True)
    assert rec.source.format == "mdf" and rec.version == "4.10"
    assert [b.label for b in rec.blocks] == ["encoder", "climate", "spare"]
    # the duplicate name 'enc' is qualified by its group; unique names stay bare
    assert rec.names == ("encoder/enc", "cmd", "temp", "spare/enc")
    assert [e.unit for e in rec.entries] == ["rad", "V", "degC", ""]
    log = read_log(path, "#1", "spare/enc")
    # exact: MDF stores the float64 samples written above bit for bit
    assert_array_equal(log.u[:, 0], d["enc"])
    assert_array_equal(log.y[:, 0], d["aux"])
    # asammdf rebuilds the master channel's stamps to within a few ulps of those written
    assert_allclose(log.time, d["t_fast"], rtol=0, atol=1e-11)
    assert log.sample_time == pytest.approx(1e-3, rel=1e-12)  # float rounding of 1 ms stamps
    assert log.input_units == ("rad",) and log.source.format == "mdf"
    assert log.input_rates_hz == pytest.approx((1000.0,), rel=1e-9)
    # two groups at one rate: put on one grid sample for sample, nothing filtered or interpolated
    assert not log.resampling.requested and [p.action for p in log.resampling.channels] == ["kept", "kept"]
    slow = read_log(path, "temp", "#4", resample_hz=10.0)
    assert slow.output_names == ("spare/enc",)
    assert_array_equal(slow.u[:, 0], d["temp"][10:-10])  # kept: copied, 10 edge samples dropped
    # a dropped sample is a gap; groups are combined only where none has a gap
    with pytest.raises(LogFormatError, match=r"channel 'cmd', sample 1236: a gap in channel group 'encoder'"):
        read_log(path, "temp", "#2", drop_bad_rows=True, split_at_gaps=True, resample_hz=10.0)


def test_mdf_invalid_sample_names_channel_and_sample_or_is_dropped(bench_mdf):
    path, d = bench_mdf
    with pytest.raises(LogFormatError) as info:
        read_log(path, "enc*", "cmd")
    # sample 1235: the 1-based number of index 1234, marked invalid above
    assert str(info.value) == ("bench.mf4, channel 'cmd', sample 1235: invalid sample (the file marks it "
                               "invalid: its invalidation bit is set)")
    assert "--drop-bad-rows" in info.value.hint
    log = read_log(path, "encoder/enc", "cmd", drop_bad_rows=True, split_at_gaps=True)
    assert log.dropped_rows == 1 and log.segments == ((0, 1234), (1234, 19999))
    assert_array_equal(log.y[:, 0], np.delete(d["cmd"], 1234))


def test_mdf_version_3_reads_the_same(tmp_path):
    d = _bench(5.0)
    path = _mdf(tmp_path / "old.mdf", [("g", d["t_fast"], [("enc", "rad", d["enc"], None),
                                                           ("cmd", "V", d["cmd"], None)])], version="3.30")
    log = read_log(path, "cmd", "enc")
    assert log.source.format == "mdf"
    assert_array_equal(log.u[:, 0], d["cmd"])
    assert_array_equal(log.y[:, 0], d["enc"])
    assert log.output_units == ("rad",)


def test_mdf_refuses_a_time_column_or_sample_rate(bench_mdf):
    path, _ = bench_mdf
    with pytest.raises(LogFormatError, match="own time .its master channel."):
        read_log(path, "cmd", "encoder/enc", time="t")


def test_truncated_mdf_is_one_clear_error(bench_mdf, tmp_path, capfd):
    path, _ = bench_mdf
    data = open(path, "rb").read()
    for cut in (len(data) // 2, len(data) - 40):
        bad = tmp_path / f"cut{cut}.mf4"
        bad.write_bytes(data[:cut])
        with pytest.raises(LogFormatError, match=r"cannot read the ASAM MDF file") as info:
            read_log(bad, "cmd", "temp")
        assert "truncated or damaged" in info.value.hint
    # asammdf's half-built reader is collected silently: nothing else reaches stderr
    assert "Traceback" not in capfd.readouterr().err


def test_missing_readers_name_the_extra(bench_mdf, tmp_path, monkeypatch):
    path, _ = bench_mdf
    h5 = tmp_path / "x.h5"
    with h5py.File(h5, "w") as f:
        f["u"] = np.zeros(3)
    monkeypatch.setitem(sys.modules, "asammdf", None)
    monkeypatch.setitem(sys.modules, "h5py", None)
    with pytest.raises(LogFormatError) as info:
        read_log(path, "cmd", "temp")
    assert "needs the asammdf package" in str(info.value)
    assert info.value.hint == "install it with: pip install asammdf (from a rigfit checkout: pip install '.[mdf]')"
    with pytest.raises(LogFormatError) as info:
        read_log(h5, "u", "y")
    assert info.value.hint == "install it with: pip install h5py (from a rigfit checkout: pip install '.[hdf5]')"


# --------------------------------------------------------------------------- HDF5


@pytest.fixture
def bench_h5(tmp_path):
    d = _bench()
    path = tmp_path / "bench.h5"
    with h5py.File(path, "w") as f:
        fast = f.create_group("rig/fast")
        fast["time"] = d["t_fast"] * 1000.0
        fast["time"].attrs["unit"] = "ms"
        fast["enc"] = d["enc"]
        fast["enc"].attrs["unit"] = "rad"
        fast["cmd"] = d["cmd"].reshape(-1, 1)  # an (n, 1) dataset is one channel too
        fast["cmd"].attrs["units"] = b"V"
        slow = f.create_group("rig/slow")
        slow.attrs["sample_rate_hz"] = 10.0
        slow["temp"] = d["temp"]
        slow["temp"].attrs["unit"] = "degC"
        f["notes"] = np.array([b"text", b"only"])  # not numeric: not a channel
    return str(path), d


def test_hdf5_paths_time_dataset_rate_attribute_units(bench_h5):
    path, d = bench_h5
    assert read_column_names(path) == ("cmd", "enc", "temp")
    rec = read_recording(path)
    assert [(b.label, b.time, b.sample_rate) for b in rec.blocks] == [
        ("rig/fast", "rig/fast/time", None), ("rig/slow", None, 10.0)]
    log = read_log(path, "rig/fast/cmd", "ENC")
    # exact: the arrays written; the time is converted from ms (closed form: / 1000)
    assert_array_equal(log.u[:, 0], d["cmd"])
    assert_array_equal(log.y[:, 0], d["enc"])
    assert_allclose(log.time, d["t_fast"], rtol=0, atol=1e-12)
    assert (log.input_units, log.output_units) == (("V",), ("rad",))
    log = read_log(path, "cmd", "temp", resample_hz=10.0)
    assert_array_equal(log.y[:, 0], d["temp"][10:-10])  # kept at its own rate: copied
    assert log.output_units == ("degC",)


def test_hdf5_missing_path_and_bad_time_dataset(bench_h5, tmp_path):
    path, _ = bench_h5
    with pytest.raises(LogFormatError) as info:
        read_log(path, "rig/fast/cmd", "rig/fast/speed")
    assert str(info.value) == ("bench.h5: no channel named 'rig/fast/speed'; nearest: 'rig/fast/enc'; "
                               "available: rig/fast/cmd [V], rig/fast/enc [rad], rig/slow/temp [degC]")
    assert info.value.hint == "did you mean 'rig/fast/enc'?"
    bad = tmp_path / "back.h5"
    t = np.arange(100) / 100.0
    t[40] = t[38]
    with h5py.File(bad, "w") as f:
        f["time"], f["u"], f["y"] = t, np.sin(t), np.cos(t)
    with pytest.raises(LogFormatError) as info:
        read_log(bad, "u", "y")
    # sample 41: index 40 set back to the stamp of index 38 above
    assert str(info.value) == ("back.h5, channel 'time', sample 41: time goes backwards (0.38 s after "
                               "0.39 s on the sample before)")


def test_hdf5_named_time_dataset_and_sample_rate(tmp_path):
    path = tmp_path / "daq.h5"
    t = np.arange(50) * 0.02
    with h5py.File(path, "w") as f:
        f["stamp"], f["u"], f["y"] = t, t**2, -t
    with pytest.raises(LogFormatError, match="has no time base"):
        read_log(path, "u", "y")
    log = read_log(path, "u", "y", time="stamp")
    assert log.sample_time == pytest.approx(0.02, rel=1e-12)  # the stamps written
    log = read_log(path, "u", "y", sample_rate=25.0)
    assert_allclose(log.time, np.arange(50) / 25.0, rtol=1e-15)  # closed form: k / 25 Hz


# --------------------------------------------------------------------------- several rates


def test_several_rates_are_an_error_listing_them(bench_mdf):
    path, _ = bench_mdf
    with pytest.raises(LogFormatError) as info:
        read_log(path, "encoder/enc", "temp", drop_bad_rows=True, split_at_gaps=True)
    assert "several rates (encoder/enc 1000 Hz, temp 10 Hz)" in str(info.value)
    assert "--resample HZ" in info.value.hint


def test_going_up_needs_the_method_and_warns(bench_mdf):
    path, d = bench_mdf
    with pytest.raises(LogFormatError, match="channel 'temp': native rate 10 Hz is below the common rate"):
        read_log(path, "encoder/enc", "temp", resample_hz=100.0)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        log = read_log(path, "encoder/enc", "temp", resample_hz=100.0, upsample="linear")
    assert any(issubclass(w.category, ResamplingWarning) and "temp" in str(w.message) for w in caught)
    assert [p.action for p in log.resampling.channels] == ["decimated", "linear"]
    # closed form: linear interpolation of the ramp 20 + 0.5 t is exact
    assert_allclose(log.y[:, 0], 20.0 + 0.5 * log.time, rtol=1e-12)
    assert log.output_rates_hz == pytest.approx((10.0,), rel=1e-9)


def test_resample_options_are_checked():
    with pytest.raises(OptionError, match="upsample"):
        read_log("unused.csv", "u", "y", upsample="cubic")
    with pytest.raises(OptionError, match="resample_hz"):
        read_log("unused.csv", "u", "y", resample_hz=-1.0)


# --------------------------------------------------------------------------- decimation before a fit


def test_decimation_before_a_fit_keeps_the_continuous_poles(tmp_path):
    from ident.estimate.identify import IdentifyOptions, identify

    # known system: 3 Hz resonance, damping 0.2, simulated with its ZOH equivalent at 200 Hz
    fn, zeta, fs = 3.0, 0.2, 200.0
    wn = 2 * np.pi * fn
    a = np.array([[0.0, 1.0], [-wn**2, -2 * zeta * wn]])
    b, c, dd = np.array([[0.0], [wn**2]]), np.array([[1.0, 0.0]]), np.zeros((1, 1))
    ad, bd, cd, ddd, _ = signal.cont2discrete((a, b, c, dd), 1 / fs, method="zoh")
    rng = np.random.default_rng(5)
    n = 12000
    u = np.repeat(rng.choice([-1.0, 1.0], n // 4), 4)
    _, y, _ = signal.dlsim((ad, bd, cd, ddd, 1 / fs), u)
    y = y[:, 0] + 0.002 * rng.standard_normal(n)
    path = tmp_path / "resonance.csv"
    pd.DataFrame({"time": np.arange(n) / fs, "u": u, "y": y}).to_csv(path, index=False, float_format="%.17g")
    true = np.sort_complex(np.linalg.eigvals(a))  # closed form: -zeta wn +- j wn sqrt(1 - zeta^2)

    def continuous_poles(rate):
        log = read_log(path, "u", "y", resample_hz=rate)
        result = identify([(log.u, log.y)], log.sample_time, IdentifyOptions(method="subspace", order=2))
        return np.sort_complex(np.log(result.model.poles().astype(complex)) / log.sample_time), log

    native, _ = continuous_poles(None)
    decimated, log = continuous_poles(50.0)
    assert log.sample_time == pytest.approx(0.02, rel=1e-12) and log.resampling.channels[0].down == 4
    # s = ln(z) / T at both rates; 0.2 % noise on the output, so within 1 % of |s| of each other
    # and of the true poles
    assert_allclose(decimated, native, rtol=1e-2)
    assert_allclose(decimated, true, rtol=1e-2)
    assert_allclose(native, true, rtol=1e-2)


# --------------------------------------------------------------------------- one log, four formats


def _simulated(n=3000):
    """A first-order lag plus a lightly damped pair, driven by a random binary input (invented rig)."""
    rng = np.random.default_rng(11)
    t = np.arange(n) / 100.0
    u = np.repeat(rng.choice([0.0, 1.0], n // 5), 5)
    a, b = np.array([[0.0, 1.0], [-100.0, -4.0]]), np.array([[0.0], [100.0]])
    sys_d = signal.cont2discrete((a, b, np.array([[1.0, 0.0]]), np.zeros((1, 1))), 0.01)
    _, y, _ = signal.dlsim(sys_d[:4] + (0.01,), u)
    return t, u, y[:, 0] + 0.01 * rng.standard_normal(n)


def test_the_same_log_in_four_formats_gives_the_same_model_and_checks(tmp_path, run_cli):
    t, u, y = _simulated()
    frame = pd.DataFrame({"time [s]": t, "valve [V]": u, "flow [l/min]": y})
    files = {"csv": tmp_path / "run.csv", "parquet": tmp_path / "run.parquet",
             "mdf": tmp_path / "run.mf4", "hdf5": tmp_path / "run.h5"}
    frame.to_csv(files["csv"], index=False, float_format="%.17g")
    frame.to_parquet(files["parquet"], index=False)
    _mdf(files["mdf"], [("rig", t, [("valve", "V", u, None), ("flow", "l/min", y, None)])])
    with h5py.File(files["hdf5"], "w") as f:
        f["time"], f["valve"], f["flow"] = t, u, y
        f["valve"].attrs["unit"], f["flow"].attrs["unit"] = "V", "l/min"
    models, checks = {}, {}
    for kind, path in files.items():
        out = tmp_path / f"model_{kind}.json"
        result = run_cli("fit", path, "--input", "valve", "--output", "flow", "--max-order", "3", "-o", out,
                         "--quiet")
        assert result.exit_code == 0, result.stderr
        models[kind] = json.loads(out.read_text())
        result = run_cli("check", path, tmp_path / "model_csv.json", "--json")
        assert result.exit_code == 0, result.stderr
        checks[kind] = json.loads(result.stdout)
    ref = models["csv"]
    for kind, model in models.items():
        # same numbers in every format (CSV written with 17 significant digits): same model
        assert model["outputs"] == ["flow"] and model["units"] == ref["units"], kind
        for key in ("A", "B", "C", "D"):
            assert_allclose(model["state_space"][key], ref["state_space"][key], rtol=1e-9, atol=1e-12)
        assert_allclose(model["operating_point"]["outputs"], ref["operating_point"]["outputs"], rtol=1e-12)
        assert model["provenance"]["log"]["format"] == kind
        assert_allclose(model["provenance"]["validation"]["fit_percent"]["flow"],
                        ref["provenance"]["validation"]["fit_percent"]["flow"], rtol=1e-9)
        for key in ("simulation_percent", "prediction_percent"):
            assert_allclose(checks[kind]["fit"]["flow"][key], checks["csv"]["fit"]["flow"][key], rtol=1e-9)
        assert [v["passed"] for v in checks[kind]["verdicts"]] == [v["passed"] for v in checks["csv"]["verdicts"]]
