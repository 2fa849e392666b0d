"""The files of a designed signal: replayable CSV and its JSON description."""

import json
import warnings

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from ident.errors import OptionError, SignalFileError
from ident.estimate.periodic import analyse_periodic
from ident.estimate.signal_design import SignalDesignOptions, design_signal
from ident.io.log import read_table
from ident.io.signalfile import (
    check_signal_names,
    describe_signal,
    dumps_description,
    read_signal_description,
    signal_csv_text,
)


@pytest.fixture(scope="module")
def two_inputs():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return design_signal(SignalDesignOptions(
            kind="multisine", sample_rate_hz=200.0, band_hz=(1.0, 40.0), amplitude_range=(-0.5, 2.0),
            n_inputs=2, periods=3, rate_limit=200.0, seed=7))


def test_csv_reads_back_bit_for_bit(tmp_path, two_inputs):
    text = signal_csv_text(two_inputs, ["valve_a", "valve_b"], ["mA"])
    assert text.splitlines()[0] == "time [s],valve_a [mA],valve_b [mA]"
    path = tmp_path / "signal.csv"
    path.write_text(text, encoding="utf-8")
    table = read_table(path)
    names = [c.name for c in table.columns]
    assert names == ["time", "valve_a", "valve_b"] and [c.unit for c in table.columns] == ["s", "mA", "mA"]
    assert table.n_rows == two_inputs.n_samples
    assert_array_equal(table.columns[0].values, np.arange(two_inputs.n_samples) / 200.0)  # k / fs
    values = np.column_stack([table.columns[1].values, table.columns[2].values])
    assert_array_equal(values, two_inputs.values)  # repr round trip: the same floats
    assert values.min() >= -0.5 and values.max() <= 2.0
    assert np.max(np.abs(np.diff(values, axis=0))) <= 200.0 / 200.0


def test_names_and_units_are_checked():
    assert check_signal_names(None, None, 2) == (("u1", "u2"), ("-", "-"))
    assert check_signal_names(["a"], ["V"], 1) == (("a",), ("V",))
    for names, units, count, match in (
        (["a", "b"], None, 1, "one name per input"),
        (["a,b"], None, 1, "cannot be written"),
        (["time"], None, 1, "reserved"),
        (["a", "A"], None, 2, "given twice"),
        (["a"], ["V", "A"], 1, "one unit"),
        (["a"], ["[V]"], 1, "cannot be written"),
    ):
        with pytest.raises(OptionError, match=match):
            check_signal_names(names, units, count)


def test_description_round_trip_feeds_the_periodic_analysis(tmp_path, two_inputs):
    text = signal_csv_text(two_inputs, ["valve_a", "valve_b"], ["mA", "mA"])
    description = describe_signal(two_inputs, ["valve_a", "valve_b"], ["mA", "mA"], csv_name="signal.csv",
                                  csv_text=text)
    path = tmp_path / "signal.json"
    path.write_text(dumps_description(description), encoding="utf-8")
    back = read_signal_description(path)
    assert back.kind == "multisine" and back.input_names == ("valve_a", "valve_b")
    assert back.period_samples == two_inputs.period_samples and back.blocks == 2
    for a, b in zip(back.lines, two_inputs.lines, strict=True):
        assert_array_equal(a, b)
    assert json.loads(path.read_text())["csv"]["file"] == "signal.csv"
    args = back.periodic_arguments(sample_time=1 / 200.0)
    # a noise-free "plant" y = 3 u: the analysis of the replayed signal returns 3 at every line
    an = analyse_periodic(two_inputs.values, two_inputs.values @ np.array([[3.0], [0.0]]), 1 / 200.0, **args)
    assert np.allclose(an.frf[:, 0, 0], 3.0, rtol=1e-9) and np.allclose(an.frf[:, 0, 1], 0.0, atol=1e-9)
    with pytest.raises(SignalFileError, match="designed for 200 Hz"):
        back.periodic_arguments(sample_time=1 / 100.0)


@pytest.mark.parametrize(("content", "match"), [
    ("{", "not valid JSON"),
    ('{"format": "rigfit-model"}', "not a rigfit test-signal description"),
    ('{"format": "rigfit-excitation", "schema_version": 9}', "unsupported schema_version 9"),
    ('{"format": "rigfit-excitation", "schema_version": 1}', "missing key 'sample_rate_hz'"),
])
def test_malformed_descriptions_are_refused(tmp_path, content, match):
    path = tmp_path / "bad.json"
    path.write_text(content, encoding="utf-8")
    with pytest.raises(SignalFileError, match=match):
        read_signal_description(path)
    with pytest.raises(SignalFileError, match="no such file"):
        read_signal_description(tmp_path / "missing.json")
