import hashlib
import importlib.util
import os
import subprocess
import sys
import textwrap
import threading

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose, assert_array_equal

import ident.io.log as log_module
from ident.errors import IdentError, LogFormatError, OptionError
from ident.io.log import Log, read_log, read_table, time_base

_HAVE_PYARROW = importlib.util.find_spec("pyarrow") is not None


def pytest_generate_tests(metafunc):
    # every test runs with the pyarrow CSV path on and off; tests about the pyarrow path
    # itself (decorated with pyarrow_path) run once, and only when pyarrow is installed
    if "csv_parser" in metafunc.fixturenames:
        if getattr(metafunc.function, "pyarrow_path", False):
            params = ["pyarrow"]
        else:
            params = ["pyarrow", "pandas"]
        metafunc.parametrize("csv_parser", params, indirect=True)


@pytest.fixture(autouse=True)
def csv_parser(request, monkeypatch):
    """Switch the pyarrow CSV path on or off (``_FAST_CSV``) for one test."""
    if request.param == "pyarrow" and not _HAVE_PYARROW:
        pytest.skip("pyarrow is not installed; pip install . (it is a base dependency) enables this test")
    monkeypatch.setattr(log_module, "_FAST_CSV", request.param == "pyarrow")
    return request.param


def pyarrow_path(test):
    """Mark a test about the pyarrow path itself (it switches the paths as it needs)."""
    test.pyarrow_path = True
    return test

# Values written into the small hand-made logs below (closed form: what the file says).
T3 = np.array([0.0, 0.001, 0.002])
U3 = np.array([1.5, 2.5, 3.0])
Y3 = np.array([-0.25, 0.0, 4.25])


def _write(tmp_path, text: str, name: str = "log.csv", *, encoding: str = "utf-8",
           newline: str = "\n") -> str:
    path = tmp_path / name
    path.write_bytes(text.replace("\n", newline).encode(encoding))
    return str(path)


def _assert_small_log(log: Log) -> None:
    # exact: the decimal strings in the file are exactly the doubles above
    assert_array_equal(log.time, T3)
    assert_array_equal(log.u[:, 0], U3)
    assert_array_equal(log.y[:, 0], Y3)
    assert log.sample_time == pytest.approx(0.001, rel=1e-12)  # float rounding of 0.001 steps


# --------------------------------------------------------------------------- dialects


def test_comma_with_units_in_brackets(tmp_path):
    path = _write(tmp_path, "time [s],torque [N m],speed [rad/s]\n0,1.5,-0.25\n0.001,2.5,0\n"
                            "0.002,3,4.25\n")
    log = read_log(path, "torque", "speed")
    _assert_small_log(log)
    assert log.input_names == ("torque",) and log.input_units == ("N m",)
    assert log.output_names == ("speed",) and log.output_units == ("rad/s",)
    assert log.segments == ((0, 3),) and log.dropped_rows == 0
    assert (log.source.first_row, log.source.last_row) == (2, 4)
    assert log.timing.basis == "time column"


def test_semicolon_decimal_comma_crlf_bom_comments_trailing_empty(tmp_path):
    text = ("# bench 4, axis X\n# operator: night shift\n"
            "Time (ms);Torque (N m);SPEED (rad/s);\n0;1,5;-0,25;\n1;2,5;0;\n2;3;4,25;\n")
    path = _write(tmp_path, "\ufeff" + text, newline="\r\n")
    log = read_log(path, "torque", "speed")  # case-insensitive bare names
    _assert_small_log(log)
    assert log.input_names == ("Torque",) and log.output_units == ("rad/s",)
    # the header is line 3 (after two comment lines), data lines 4-6
    assert (log.source.first_row, log.source.last_row) == (4, 6)


@pytest.mark.parametrize("decimal", [".", ","])
def test_tab_separated(tmp_path, decimal):
    rows = ["t\ttorque\tspeed", "0\t1.5\t-0.25", "0.001\t2.5\t0", "0.002\t3\t4.25"]
    text = "\n".join(rows).replace(".", decimal) + "\n"
    path = _write(tmp_path, text)
    log = read_log(path, ["torque"], ["speed"])
    _assert_small_log(log)


def test_trailing_empty_columns_and_blank_lines_at_end(tmp_path):
    path = _write(tmp_path, "time,torque,speed,,\n0,1.5,-0.25,,\n0.001,2.5,0,,\n0.002,3,4.25,,\n\n\n")
    _assert_small_log(read_log(path, "torque", "speed"))


def test_quoted_header_and_parenthesised_units(tmp_path):
    path = _write(tmp_path, '"time (s)","torque (N m)","speed"\n0,1.5,-0.25\n0.001,2.5,0\n'
                            "0.002,3,4.25\n")
    log = read_log(path, "TORQUE", "Speed")
    _assert_small_log(log)
    assert log.input_units == ("N m",) and log.output_units == ("",)


def test_windows_1252_header(tmp_path):
    path = _write(tmp_path, "time;temp [°C];duty [%]\n0;20,5;10\n1;21;20\n", encoding="cp1252")
    log = read_log(path, "duty", "temp")
    assert log.output_units == ("°C",)
    assert_array_equal(log.y[:, 0], [20.5, 21.0])  # the values in the file


def test_read_table_reads_every_column(tmp_path):
    path = _write(tmp_path, "time [s],torque [N m],speed [rad/s]\n0,1.5,-0.25\n0.001,2.5,0\n"
                            "0.002,3,4.25\n")
    table = read_table(path)
    assert table.names == ("time", "torque", "speed")
    assert [c.unit for c in table.columns] == ["s", "N m", "rad/s"]
    assert_array_equal(table.column("SPEED").values, Y3)
    assert table.n_rows == 3 and table.column("torque").label == "torque [N m]"


def test_sha256_and_file_untouched(tmp_path):
    path = _write(tmp_path, "time,u,y\n0,1,2\n1,2,3\n2,3,5\n")
    before = open(path, "rb").read()
    mtime = os.stat(path).st_mtime_ns
    log = read_log(path, "u", "y")
    # reference: hashlib over the same bytes
    assert log.source.sha256 == hashlib.sha256(before).hexdigest()
    assert log.source.file_name == "log.csv"
    assert open(path, "rb").read() == before and os.stat(path).st_mtime_ns == mtime


@pytest.mark.parametrize(
    ("text", "kwargs"),
    [
        # comments, a BOM and CRLF before the data; the checksum is taken while parsing
        ("\ufeff# rig 7\r\n# run 3\r\ntime;u;y\r\n0;1,5;2\r\n1;2;3\r\n2;3;5\r\n", {}),
        # a bad cell dropped on request: the slow text parse; the checksum still covers
        # every byte of the file
        ("time,u,y\n0,1,2\n1,2,3\n2,3,5\n3,x,6\n", {"drop_bad_rows": True}),
        # a file bigger than the 1 MiB read buffer
        ("time,u,y\n" + "".join(f"{k},{k % 7}.25,{k % 5}.5\n" for k in range(80_000)), {}),
    ],
)
def test_sha256_covers_the_whole_file_in_one_pass(tmp_path, text, kwargs):
    path = tmp_path / "log.csv"
    path.write_bytes(text.encode("utf-8"))
    log = read_log(str(path), "u", "y", split_at_gaps=True, **kwargs)
    # reference: hashlib over the file's bytes
    assert log.source.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_log_arrays_are_read_only(tmp_path):
    path = _write(tmp_path, "time,u,y\n0,1,2\n1,2,3\n2,3,5\n")
    log = read_log(path, "u", "y")
    assert (log.n_samples, log.n_inputs, log.n_outputs) == (3, 1, 1)
    assert log.duration_s == 2.0  # closed form: last stamp minus first
    with pytest.raises(ValueError):
        log.u[0, 0] = 7.0


# --------------------------------------------------------------------------- columns


def test_missing_column_lists_available_and_nearest(tmp_path):
    path = _write(tmp_path, "time [s],motor_current [A],speed\n0,1,2\n1,2,3\n")
    with pytest.raises(LogFormatError) as info:
        read_log(path, "motor_curent", "speed")
    msg = str(info.value)
    assert msg.startswith("log.csv: no column named 'motor_curent'")
    assert "nearest: 'motor_current'" in msg
    assert "available: time [s], motor_current [A], speed" in msg
    assert info.value.hint == "did you mean 'motor_current'?"


def test_missing_column_without_near_name(tmp_path):
    path = _write(tmp_path, "time,u,y\n0,1,2\n1,2,3\n")
    with pytest.raises(LogFormatError, match=r"no column named 'pressure'; available: time, u, y"):
        read_log(path, "pressure", "y")


def test_duplicate_column_names(tmp_path):
    path = _write(tmp_path, "time,speed [rpm],u,Speed (rad/s)\n0,1,2,3\n1,2,3,4\n")
    with pytest.raises(LogFormatError) as info:
        read_log(path, "u", "speed")
    assert str(info.value) == (
        "log.csv, row 1: duplicate column name 'Speed': header fields 2 ('speed [rpm]') "
        "and 4 ('Speed (rad/s)')"
    )


def test_output_equal_to_input_is_refused(tmp_path):
    path = _write(tmp_path, "time,u,y\n0,1,2\n1,2,3\n")
    with pytest.raises(OptionError, match="'u' is named both as an input and as an output"):
        read_log(path, "u", ["y", "U"])
    with pytest.raises(OptionError, match="'y' is named twice as an output"):
        read_log(path, "u", ["y", "y"])
    with pytest.raises(OptionError, match="'time' is the time column"):
        read_log(path, ["u", "time"], "y")
    with pytest.raises(OptionError, match="inputs must name at least one column"):
        read_log(path, [], "y")


def test_empty_header_field_in_the_middle(tmp_path):
    path = _write(tmp_path, "time,,y\n0,1,2\n")
    with pytest.raises(LogFormatError, match=r"row 1: header field 2 is empty"):
        read_table(path)


def test_empty_and_header_only_files(tmp_path):
    with pytest.raises(LogFormatError, match="log.csv: the file is empty"):
        read_table(_write(tmp_path, ""))
    with pytest.raises(LogFormatError, match="only comments or blank lines"):
        read_table(_write(tmp_path, "# nothing\n# here\n", "c.csv"))
    with pytest.raises(LogFormatError, match="h.csv, row 1: no data rows after the header"):
        read_table(_write(tmp_path, "time,u,y\n", "h.csv"))


def test_row_with_too_many_fields(tmp_path):
    path = _write(tmp_path, "time,u,y\n0,1,2\n1,2,3,9,9\n2,3,4\n")
    with pytest.raises(LogFormatError, match=r"log.csv, row 3: 5 fields but the header has 3"):
        read_log(path, "u", "y")


def test_decimal_comma_in_a_comma_separated_file_is_not_misread(tmp_path):
    # "1,5" splits into two fields: the row is refused instead of shifting the values
    path = _write(tmp_path, "time,u,y\n0,1,2\n1,1,5,3\n2,3,4\n")
    with pytest.raises(LogFormatError) as info:
        read_log(path, "u", "y")
    assert str(info.value) == "log.csv, row 3: 4 fields but the header has 3"
    assert "a decimal comma needs ';' or tab" in info.value.hint


def test_bare_carriage_return_line_ends_are_refused(tmp_path):
    path = _write(tmp_path, "time,u,y\n0,1,2\n1,2,3\n", newline="\r")
    with pytest.raises(LogFormatError) as info:
        read_log(path, "u", "y")
    assert str(info.value) == "log.csv, row 1: lines end in a bare carriage return (CR)"
    assert info.value.hint == "save the log with LF or CRLF line ends"


def test_decimal_comma_found_after_integer_rows(tmp_path):
    rows = ["time;u;y"] + [f"{k};{k};{k}" for k in range(200)] + ["200;2,5;7,25"]
    log = read_log(_write(tmp_path, "\n".join(rows) + "\n"), "u", "y")
    assert log.u[-1, 0] == 2.5 and log.y[-1, 0] == 7.25  # the values in the file


# --------------------------------------------------------------------------- bad cells


@pytest.mark.parametrize(
    ("cell", "reason"),
    [
        ("abc", "not a number ('abc')"),
        ("", "empty cell"),
        ("NaN", "NaN is not allowed ('NaN')"),
        ("nan", "NaN is not allowed ('nan')"),
        ("inf", "infinite value is not allowed ('inf')"),
        ("-Infinity", "infinite value is not allowed ('-Infinity')"),
        ("1.2.3", "not a number ('1.2.3')"),
    ],
)
def test_bad_cell_names_file_row_column_and_text(tmp_path, cell, reason):
    lines = ["# exported by the bench PC", "time,motor_current,speed"]
    lines += [f"{k * 0.01:.2f},{k},{2 * k}" for k in range(20)]
    lines[16] = f"0.14,{cell},28"  # file line 17
    path = _write(tmp_path, "\n".join(lines) + "\n")
    with pytest.raises(LogFormatError) as info:
        read_log(path, "motor_current", "speed")
    assert str(info.value) == f"log.csv, row 17, column 'motor_current': {reason}"
    assert (info.value.row, info.value.column) == (17, "motor_current")
    assert "--drop-bad-rows" in info.value.hint


def test_decimal_comma_cell_with_a_point_is_refused(tmp_path):
    lines = ["time;motor_current;speed"] + [f"{k};{k},5;{k}" for k in range(20)]
    lines[16] = "15;1,2.3;15"  # file line 17
    path = _write(tmp_path, "\n".join(lines) + "\n")
    with pytest.raises(LogFormatError) as info:
        read_log(path, "motor_current", "speed")
    assert str(info.value) == "log.csv, row 17, column 'motor_current': not a number ('1,2.3')"


def test_bad_cell_in_unused_column_is_ignored(tmp_path):
    path = _write(tmp_path, "time,u,note,y\n0,1,ok,2\n1,2,fault,3\n2,3,,4\n")
    log = read_log(path, "u", "y")
    assert_array_equal(log.y[:, 0], [2.0, 3.0, 4.0])  # the values in the file


def test_drop_bad_rows_reports_count_and_keeps_line_numbers(tmp_path):
    lines = ["time,u,y"] + [f"{k},{k},{10 * k}" for k in range(10)]
    lines[3] = "2,x,20"  # file line 4
    lines[4] = "3,3,nan"  # file line 5
    path = _write(tmp_path, "\n".join(lines) + "\n")
    with pytest.raises(LogFormatError, match="row 4, column 'u'"):
        read_log(path, "u", "y")
    # dropping two rows leaves a 3-sample gap, which split_at_gaps turns into segments
    log = read_log(path, "u", "y", drop_bad_rows=True, split_at_gaps=True)
    assert log.dropped_rows == 2
    assert_array_equal(log.u[:, 0], [0, 1, 4, 5, 6, 7, 8, 9])  # rows kept, in file order
    assert log.segments == ((0, 2), (2, 8))
    assert (log.source.first_row, log.source.last_row) == (2, 11)
    table = read_table(path, drop_bad_rows=True)
    assert table.dropped_rows == 2
    assert [table.line_of(i) for i in range(3)] == [2, 3, 6]


def test_drop_bad_rows_with_sample_rate_splits_at_the_dropped_rows(tmp_path):
    lines = ["u,y"] + [f"{k},{10 * k}" for k in range(10)]
    lines[3] = "x,20"  # file line 4 (sample 2)
    lines[7] = "6,inf"  # file line 8 (sample 6)
    path = _write(tmp_path, "\n".join(lines) + "\n")
    # a dropped row is a gap in the sample sequence: refused without split_at_gaps
    with pytest.raises(LogFormatError, match=r"row 5: 1 dropped row") as info:
        read_log(path, "u", "y", sample_rate=100.0, drop_bad_rows=True)
    assert "--split-at-gaps" in info.value.hint
    log = read_log(path, "u", "y", sample_rate=100.0, drop_bad_rows=True, split_at_gaps=True)
    assert log.dropped_rows == 2
    assert_array_equal(log.u[:, 0], [0, 1, 3, 4, 5, 7, 8, 9])
    # kept samples 0-1 | 3-5 | 7-9 (closed form: breaks where the file lines jump)
    assert log.segments == ((0, 2), (2, 5), (5, 8))
    # the stamps count the missing samples (T = 0.01 s, closed form)
    assert_allclose(log.time, np.array([0, 1, 3, 4, 5, 7, 8, 9]) * 0.01, rtol=1e-12,
                    atol=0)  # exact arithmetic up to rounding
    # without dropped rows the sample-rate log stays one segment
    clean = _write(tmp_path, "u,y\n1,2\n2,3\n3,4\n", name="clean.csv")
    assert read_log(clean, "u", "y", sample_rate=10.0, drop_bad_rows=True).segments == ((0, 3),)


def test_blank_line_inside_the_data_is_an_empty_row(tmp_path):
    path = _write(tmp_path, "time,u,y\n0,1,2\n\n1,2,3\n")
    with pytest.raises(LogFormatError, match=r"row 3, column 'time': empty cell"):
        read_log(path, "u", "y")


# --------------------------------------------------------------------------- time base


@pytest.mark.parametrize(
    ("unit", "factor"),
    # closed form: definitions of the units
    [("s", 1.0), ("ms", 1e-3), ("us", 1e-6), ("min", 60.0), ("h", 3600.0), (None, 1.0)],
)
def test_time_units(tmp_path, unit, factor):
    head = "t" if unit is None else f"t [{unit}]"
    path = _write(tmp_path, f"{head},u,y\n0,1,2\n2,2,3\n4,3,4\n6,5,6\n")
    log = read_log(path, "u", "y")
    assert_allclose(log.time, np.array([0, 2, 4, 6]) * factor, rtol=1e-15)  # one rounding
    assert_allclose(log.sample_time, 2 * factor, rtol=1e-15)


def test_unknown_time_unit(tmp_path):
    path = _write(tmp_path, "time [days],u,y\n0,1,2\n1,2,3\n")
    with pytest.raises(LogFormatError, match=r"column 'time': unknown time unit 'days'"):
        read_log(path, "u", "y")


def test_named_time_column_and_sample_rate(tmp_path):
    path = _write(tmp_path, "stamp [ms],u,y\n0,1,2\n10,2,3\n20,3,4\n")
    log = read_log(path, "u", "y", time="STAMP")
    assert_allclose(log.sample_time, 0.01, rtol=1e-15)  # 10 ms
    log = read_log(path, "u", "y", sample_rate=250.0)
    assert log.timing.basis == "sample rate"
    assert_allclose(log.time, [0.0, 0.004, 0.008], rtol=1e-15)  # k / 250 Hz
    assert log.timing.jitter_max_s == 0.0
    with pytest.raises(LogFormatError) as info:
        read_log(path, "u", "y")
    assert str(info.value) == "log.csv: no time column (named 'time' or 't') and no sample rate"
    assert "--sample-rate" in info.value.hint
    with pytest.raises(OptionError, match="either a time column or a sample rate"):
        read_log(path, "u", "y", time="stamp", sample_rate=100.0)
    with pytest.raises(OptionError, match="sample_rate must be a positive number"):
        read_log(path, "u", "y", sample_rate=-1.0)


def test_robust_sample_time_and_jitter_statistics(tmp_path, rng):
    n = 2000
    t = np.arange(n) * 0.002 + rng.uniform(-1e-4, 1e-4, n)  # +-5 % jitter
    frame = pd.DataFrame({"time [s]": t, "u": rng.standard_normal(n), "y": rng.standard_normal(n)})
    path = tmp_path / "jit.csv"
    frame.to_csv(path, index=False)
    log = read_log(path, "u", "y")
    dt = np.diff(t)
    # reference: numpy on the same stamps (median interval; deviations from it)
    assert_allclose(log.sample_time, np.median(dt), rtol=1e-12)
    assert_allclose(log.timing.jitter_std_s, np.std(dt - np.median(dt)), rtol=1e-9)
    assert_allclose(log.timing.jitter_max_s, np.max(np.abs(dt - np.median(dt))), rtol=1e-9)
    assert log.timing.jitter_relative < 0.1
    # the same log is refused with a tolerance below its jitter
    with pytest.raises(LogFormatError, match="shorter than the sample time|gap of"):
        read_log(path, "u", "y", jitter_tolerance=0.02)


@pytest.mark.parametrize(
    ("stamps", "row", "text"),
    [
        ("0,1,2,1.5,3", 6, "time goes backwards (1.5 s after 2 s on the row before)"),
        ("0,1,2,2,3", 6, "duplicated time stamp (2 s after 2 s on the row before)"),
        ("0,1,2,3,6,7", 7, "gap of 3 s (3 sample times) before this row"),
        ("0,1,2,3,3.5,4.5", 7, "irregular sampling: interval 0.5 s"),
    ],
)
def test_bad_time_stamps_give_the_row(tmp_path, stamps, row, text):
    values = stamps.split(",")
    body = "".join(f"{v},{k},{k}\n" for k, v in enumerate(values))
    path = _write(tmp_path, "# rig\ntime,u,y\n" + body)  # header on line 2; value k on line k + 3
    with pytest.raises(LogFormatError) as info:
        read_log(path, "u", "y")
    assert str(info.value).startswith(f"log.csv, row {row}, column 'time': {text}")


def test_split_at_gaps_gives_segments(tmp_path):
    stamps = [0, 1, 2, 3, 10, 11, 12, 30, 31]
    body = "".join(f"{v},{k},{k}\n" for k, v in enumerate(stamps))
    path = _write(tmp_path, "time,u,y\n" + body)
    with pytest.raises(LogFormatError) as info:
        read_log(path, "u", "y")
    assert "row 6" in str(info.value) and "--split-at-gaps" in info.value.hint
    log = read_log(path, "u", "y", split_at_gaps=True)
    assert log.segments == ((0, 4), (4, 7), (7, 9))  # [start, stop) around the two gaps
    assert log.sample_time == 1.0  # median interval
    assert log.timing.jitter_max_s == 0.0  # gaps are not jitter


def test_time_base_needs_two_rows(tmp_path):
    table = read_table(_write(tmp_path, "time,u,y\n0,1,2\n"))
    with pytest.raises(LogFormatError, match="needs at least 2 data rows"):
        time_base(table)


# --------------------------------------------------------------------------- Parquet


def test_parquet_round_trip(tmp_path, rng):
    pytest.importorskip(
        "pyarrow", reason="pyarrow is not installed; pip install . (a base dependency) enables this test"
    )
    n = 50
    frame = pd.DataFrame({
        "time [ms]": np.arange(n, dtype=float),
        "heater_duty [%]": rng.uniform(0, 100, n),
        "zone_temp [degC]": rng.normal(60, 2, n),
    })
    path = tmp_path / "zones.parquet"
    frame.to_parquet(path, index=False)
    log = read_log(path, "heater_duty", "zone_temp")
    # exact: Parquet stores the float64 values bit for bit
    assert_array_equal(log.u[:, 0], frame["heater_duty [%]"].to_numpy())
    assert_array_equal(log.y[:, 0], frame["zone_temp [degC]"].to_numpy())
    assert log.output_units == ("degC",) and log.sample_time == pytest.approx(1e-3, rel=1e-12)
    assert (log.source.first_row, log.source.last_row) == (1, n)


def test_parquet_nan_and_text_columns(tmp_path):
    pytest.importorskip(
        "pyarrow", reason="pyarrow is not installed; pip install . (a base dependency) enables this test"
    )
    frame = pd.DataFrame({"time": [0.0, 1.0, 2.0], "u": [1.0, np.nan, 3.0], "y": [1.0, 2.0, 3.0],
                          "mode": ["a", "b", "c"]})
    path = tmp_path / "p.parquet"
    frame.to_parquet(path, index=False)
    with pytest.raises(LogFormatError, match=r"p.parquet, row 2, column 'u': NaN is not allowed"):
        read_log(path, "u", "y")
    assert read_log(path, "u", "y", drop_bad_rows=True, split_at_gaps=True).dropped_rows == 1
    with pytest.raises(LogFormatError, match=r"column 'mode': not a numeric column"):
        read_log(path, "mode", "y")


def test_parquet_without_pyarrow_says_how_to_install(tmp_path, monkeypatch):
    path = tmp_path / "x.parquet"
    path.write_bytes(b"PAR1" + b"\x00" * 16 + b"PAR1")
    monkeypatch.setitem(sys.modules, "pyarrow", None)
    monkeypatch.setitem(sys.modules, "pyarrow.parquet", None)
    with pytest.raises(LogFormatError) as info:
        read_log(path, "u", "y")
    assert "needs the pyarrow package" in str(info.value)
    assert info.value.hint == ("install it with: pip install pyarrow (a dependency of rigfit: reinstalling "
                               "it with pip installs it)")


# --------------------------------------------------------------------------- round trip

_NAMES = ("motor_torque_cmd", "motor_speed", "carriage_speed", "heater_duty", "zone_temp")
_UNITS = ("N m", "rad/s", "m/s", "%", "degC")
# Finite doubles at magnitudes rig loggers write (subnormals and 1e300 are not rig data).
_VALUES = st.one_of(
    st.just(0.0),
    st.floats(min_value=1e-12, max_value=1e12) | st.floats(min_value=-1e12, max_value=-1e-12),
)
_DIALECTS = {
    "comma": {"sep": ",", "decimal": "."},
    "semicolon": {"sep": ";", "decimal": ","},
    "tab": {"sep": "\t", "decimal": "."},
}


@st.composite
def _frames(draw):
    m = draw(st.integers(1, 3))
    p = draw(st.integers(1, 2))
    n = draw(st.integers(2, 25))
    cols = {}
    names = []
    for k in range(m + p):
        label = f"{_NAMES[k]} [{_UNITS[k]}]" if draw(st.booleans()) else _NAMES[k]
        names.append(_NAMES[k])
        cols[label] = draw(st.lists(_VALUES, min_size=n, max_size=n))
    frame = pd.DataFrame(cols)
    frame.insert(0, "time [s]", np.arange(n) * 0.01)
    return frame, names[:m], names[m:]


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=_frames(), dialect=st.sampled_from(sorted(_DIALECTS)), crlf=st.booleans(),
       bom=st.booleans())
def test_round_trip_random_frames(tmp_path, data, dialect, crlf, bom):
    frame, inputs, outputs = data
    path = tmp_path / f"rt_{dialect}.csv"
    frame.to_csv(path, index=False, lineterminator="\r\n" if crlf else "\n",
                 encoding="utf-8-sig" if bom else "utf-8", **_DIALECTS[dialect])
    log = read_log(path, inputs, outputs)
    # exact: pandas writes shortest round-trip decimal strings
    assert_array_equal(log.u, frame.iloc[:, 1 : 1 + len(inputs)].to_numpy())
    assert_array_equal(log.y, frame.iloc[:, 1 + len(inputs) :].to_numpy())
    assert_array_equal(log.time, frame["time [s]"].to_numpy())
    assert log.input_names == tuple(inputs) and log.output_names == tuple(outputs)


def test_memory_one_extra_copy(tmp_path):
    import tracemalloc

    n = 100_000
    rng = np.random.default_rng(5)
    frame = pd.DataFrame({"time [ms]": np.arange(n, dtype=float)})
    for name in ("u1", "u2", "y1", "y2"):
        frame[name] = rng.standard_normal(n)
    path = tmp_path / "m.csv"
    frame.to_csv(path, index=False)
    read_log(path, ["u1", "u2"], ["y1", "y2"])  # warm-up: lazy imports are not data
    data_bytes = frame.shape[0] * frame.shape[1] * 8
    tracemalloc.start()
    try:
        log = read_log(path, ["u1", "u2"], ["y1", "y2"])
        held, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert log.n_samples == n
    # the parsed columns plus the u/y/time copy (2x), with a margin of a quarter of the data
    # for one-column temporaries (time differences); an object-dtype copy would be ~7x
    assert peak <= 2.25 * data_bytes
    assert held <= 1.1 * data_bytes  # only the Log's arrays survive



# --------------------------------------------------------------------------- pyarrow CSV path


def _outcome(path, fast: bool, monkeypatch, reader, **kwargs):
    """Everything a caller can see of one read: values bit for bit, provenance, or the error."""
    monkeypatch.setattr(log_module, "_FAST_CSV", fast)
    try:
        t = reader(path, **kwargs)
    except IdentError as exc:
        return ("error", type(exc).__name__, str(exc), exc.hint)
    if isinstance(t, Log):
        arrays = [t.time, t.u, t.y]
        extra = (t.segments, t.input_units, t.output_units)
    else:
        arrays = [c.values for c in t.columns]
        extra = (t.names, None if t.line_numbers is None else t.line_numbers.tolist())
    return ("ok", [a.view(np.uint64).tolist() for a in arrays], t.source.sha256,
            t.source.first_row, t.source.last_row, t.dropped_rows, extra)


def _pyarrow_answers(path) -> bool:
    header = log_module._read_header(str(path))
    arrays, scan = log_module._arrow_csv_columns(str(path), header,
                                                 list(range(len(header.names))))
    if scan is not None:
        scan.sha256()  # join the background scan
    return arrays is not None


# (file bytes, whether the pyarrow path answers); what answers is our design: pyarrow only
# for well-formed files, the pandas path for everything else
_DIALECT_CASES = {
    "clean": (b"time,u,y\n0,1.5,2\n1,2,3\n", True),
    "no final line end": (b"time,u,y\n0,1.5,2\n1,2,3", True),
    "blank lines at the end": (b"time,u,y\n0,1.5,2\n1,2,3\n\n\n", True),
    "CRLF, blank lines at the end": (b"time,u,y\r\n0,1.5,2\r\n1,2,3\r\n\r\n\r\n", True),
    "trailing empty columns": (b"time,u,y,,\n0,1.5,2,,\n1,2,3,,\n", True),
    "trailing empty header fields only": (b"time,u,y,,\n0,1.5,2\n1,2,3\n", True),
    "spaces around numbers": (b"time,u,y\n0, 1.5 ,2\n1,2,3\n", True),
    "quoted numbers": (b'time,u,y\n0,"1.5",2\n1,"2",3\n', True),
    "signs, bare points, exponents": (b"time,u,y\n0,+1.5,+2E3\n1,.5,5.\n2,-0,1e-5\n", True),
    "semicolon, decimal comma": (b"time;u;y\n0;1,5;2\n1;2,25;3\n", True),
    "semicolon, decimal point": (b"time;u;y\n0;1.5;2\n1;2.25;3\n", True),
    "tab, decimal comma": (b"time\tu\ty\n0\t1,5\t2\n1\t2,25\t3\n", True),
    "BOM and comments": ("\ufeff# rig 2\ntime,u,y\n0,1.5,2\n1,2,3\n".encode(), True),
    "a 30-digit integer": (b"time,u,y\n0,123456789012345678901234567890,2\n1,2,3\n", True),
    "blank line inside": (b"time,u,y\n0,1.5,2\n\n1,2,3\n", False),
    "CRLF blank line inside": (b"time,u,y\r\n0,1.5,2\r\n\r\n1,2,3\r\n", False),
    "blank-looking line at the end": (b"time,u,y\n0,1.5,2\n1,2,3\n   \n", False),
    "stray CR inside a line": (b"time,u,y\n0,1.5,2\r1,2,3\n2,3,4\n", False),
    "extra field with a value": (b"time,u,y\n0,1.5,2\n1,2,3,8\n", False),
    "extra fields on every row": (b"time,u,y\n0,1.5,2,7\n1,2,3,8\n", False),
    "extra empty field on one row": (b"time,u,y\n0,1.5,2\n1,2,3,\n", False),
    "short row": (b"time,u,y\n0,1.5,2\n1,2\n", False),
    "short first row": (b"time,u,y\n0,1.5\n1,2,3\n", False),
    "empty cell": (b"time,u,y\n0,,2\n1,2,3\n", False),
    "quoted empty cell": (b'time,u,y\n0,"",2\n1,2,3\n', False),
    "blank cell": (b"time,u,y\n0, ,2\n1,2,3\n", False),
    "nan": (b"time,u,y\n0,nan,2\n1,2,3\n", False),
    "NA": (b"time,u,y\n0,NA,2\n1,2,3\n", False),
    "inf": (b"time,u,y\n0,-inf,2\n1,2,3\n", False),
    "overflow to inf": (b"time,u,y\n0,1e400,2\n1,2,3\n", False),
    "text": (b"time,u,y\n0,abc,2\n1,2,3\n", False),
    "hex": (b"time,u,y\n0,0x10,2\n1,2,3\n", False),
    "digit separator": (b"time,u,y\n0,1_000,2\n1,2,3\n", False),
    "unicode minus": ("time,u,y\n0,\u22121.5,2\n1,2,3\n".encode(), False),
    "quoted separator": (b'time,u,y\n0,"1,5",2\n1,2,3\n', False),
    "quoted line end": (b'time,u,y\n0,"1\n5",2\n1,2,3\n', False),
    "decimal comma cell with a point": (b"time;u;y\n0;1,5;2\n1;1,2.3;3\n", False),
    "decimal point in a decimal-comma log": (b"time;u;y\n0;1,5;2\n1;2.25;3\n", False),
    "comment line inside": (b"time,u,y\n0,1.5,2\n#1,2,3\n", False),
    "Latin-1 byte in a used cell": (b"time,u,y\n0,1.5,2\n1,2\xe9,3\n", False),
    "NUL byte after the preview": (b"time,u,y\n" + b"0,1,2\n" * 12000 + b"3,\x00,5\n", False),
}


@pyarrow_path
@pytest.mark.parametrize("name", sorted(_DIALECT_CASES))
def test_pyarrow_and_pandas_paths_agree(tmp_path, monkeypatch, name):
    data, answers = _DIALECT_CASES[name]
    path = tmp_path / "log.csv"
    path.write_bytes(data)
    assert _pyarrow_answers(path) is answers
    for reader, kwargs in [
        (read_table, {}),
        (read_table, {"drop_bad_rows": True}),
        (read_log, {"inputs": "u", "outputs": "y", "split_at_gaps": True}),
        (read_log, {"inputs": "u", "outputs": "y", "drop_bad_rows": True, "split_at_gaps": True}),
    ]:
        fast = _outcome(path, True, monkeypatch, reader, **kwargs)
        slow = _outcome(path, False, monkeypatch, reader, **kwargs)
        assert fast == slow, (reader.__name__, kwargs)


@pyarrow_path
def test_pyarrow_path_ignores_text_in_unused_columns(tmp_path, monkeypatch):
    path = tmp_path / "log.csv"
    path.write_bytes("time,u,note,y\n0,1,café,2\n1,2,fault,3\n2,3,,4\n".encode())
    kwargs = {"inputs": "u", "outputs": "y"}
    assert _outcome(path, True, monkeypatch, read_log, **kwargs) == _outcome(
        path, False, monkeypatch, read_log, **kwargs)
    # and read_table, which parses the text column, gets the pandas path's error
    fast = _outcome(path, True, monkeypatch, read_table)
    assert fast == _outcome(path, False, monkeypatch, read_table)
    assert fast[2] == "log.csv, row 2, column 'note': not a number ('café')"


def _varied_number_strings(rng, n):
    """Decimal strings with up to 25 significant digits, exponents, signs, negative zero."""
    digits = rng.integers(0, 10, size=(n, 25))
    lengths = rng.integers(1, 26, size=n)
    points = rng.integers(0, 26, size=n)
    out = []
    for row, length, point in zip(digits, lengths, points, strict=True):
        body = "".join(map(str, row[:length]))
        point = min(point, length)
        text = (body[:point] or "0") + "." + (body[point:] or "0")
        r = rng.random()
        if r < 0.3:
            text += f"e{rng.integers(-20, 21):+d}"
        elif r < 0.4:
            text += f"E{rng.integers(-280, 280)}"
        if rng.random() < 0.4:
            text = "-" + text
        out.append(text)
    out[:6] = ["-0", "-0.0", "0", "-0e5", "4.9406564584124654e-324", "1.7976931348623157e308"]
    return out


@pyarrow_path
@pytest.mark.parametrize("dialect", ["comma", "semicolon-decimal-comma"])
def test_pyarrow_values_bit_identical_to_pandas_and_to_python(tmp_path, monkeypatch,
                                                              dialect):
    rng = np.random.default_rng(20261202)
    n = 3000
    u_text = _varied_number_strings(rng, n)
    y_text = _varied_number_strings(rng, n)
    sep, comma = (",", False) if dialect == "comma" else (";", True)
    lines = [f"u{sep}y"] + [f"{a}{sep}{b}" for a, b in zip(u_text, y_text, strict=True)]
    text = "\n".join(lines) + "\n"
    if comma:
        text = text.replace(".", ",")
    path = tmp_path / "digits.csv"
    path.write_text(text, encoding="utf-8")
    assert _pyarrow_answers(path)
    fast = _outcome(path, True, monkeypatch, read_table)
    slow = _outcome(path, False, monkeypatch, read_table)
    assert fast == slow
    # oracle: Python's float() rounds decimal strings correctly (IEEE 754 round-half-even)
    table = read_table(path)
    for name, strings in (("u", u_text), ("y", y_text)):
        expected = np.array([float(s) for s in strings])
        assert_array_equal(table.column(name).values.view(np.uint64), expected.view(np.uint64))
    assert np.signbit(table.column("u").values[0])  # "-0" stays negative zero


@pyarrow_path
def test_clean_csv_does_not_use_the_pandas_path(tmp_path, monkeypatch):
    path = tmp_path / "log.csv"
    path.write_text("time,u,y\n" + "".join(f"{k * 0.01:.2f},{k % 7}.5,{k % 5}\n"
                                            for k in range(5000)))

    def refuse(*args, **kwargs):
        raise AssertionError("the pandas path ran on a clean file")

    monkeypatch.setattr(log_module, "_csv_columns", refuse)
    log = read_log(path, "u", "y")
    assert log.n_samples == 5000
    assert log.source.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib oracle


@pyarrow_path
def test_clean_csv_read_without_importing_pandas(tmp_path):
    path = tmp_path / "log.csv"
    path.write_text("time [s],u [V],y [m]\n0,1,2\n0.5,2,3\n1.0,3,5\n")
    code = textwrap.dedent(f"""
        import sys
        from ident.io.log import read_log
        log = read_log({str(path)!r}, "u", "y")
        assert log.y.tolist() == [[2.0], [3.0], [5.0]], log.y
        print(sorted(m for m in ("pandas", "pyarrow.csv") if m in sys.modules))
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert out.strip() == "['pyarrow.csv']"


@pytest.mark.parametrize("text", ["time,u,y\n0,1,2\n1,2,3\n", "time,u,y\n0,x,2\n1,2,3\n"])
def test_no_scan_thread_left_running(tmp_path, text):
    path = tmp_path / "log.csv"
    path.write_text(text)
    try:
        read_log(path, "u", "y")
    except LogFormatError:
        pass
    assert not [t for t in threading.enumerate() if t.name == "rigfit-scan" and t.is_alive()]


@pyarrow_path
def test_pyarrow_memory_about_the_numeric_data(tmp_path, monkeypatch):
    n = 400_000
    k = np.arange(n)
    path = tmp_path / "long.csv"
    path.write_text("time,u,y\n" + "\n".join(map("{0},{1}.125,{2}.5".format, k, k % 1000,
                                                  k % 777)) + "\n")
    pools = []

    def proxy_pool(pa_module):
        pools.append(pa_module.proxy_memory_pool(pa_module.default_memory_pool()))
        return pools[-1]

    monkeypatch.setattr(log_module, "_arrow_memory_pool", proxy_pool)
    table = read_table(path)
    assert table.n_rows == n and len(pools) == 1
    # closed form: the values written above
    assert_array_equal(table.column("y").values, (k % 777) + 0.5)
    pool = pools[0]
    assert pool.bytes_allocated() == 0  # Arrow keeps nothing once the columns are copied
    # the parsed table holds the float64 columns once (9.6 MB here) plus the file blocks
    # being read and parsed (1 MiB each, a few in flight: 14.5 MB peak measured)
    assert pool.max_memory() <= 3 * 8 * n + 8 * log_module._ARROW_BLOCK
    keep_alive.append(pool)  # Arrow pools must outlive every buffer; keep it to the end


keep_alive: list = []


def test_csv_without_pyarrow_uses_pandas(tmp_path, monkeypatch):
    path = tmp_path / "log.csv"
    path.write_text("time,u,y\n0,1.5,2\n1,2,3\n2,3,5\n")
    monkeypatch.setitem(sys.modules, "pyarrow", None)  # makes "import pyarrow" fail
    monkeypatch.setitem(sys.modules, "pyarrow.csv", None)
    calls = []
    pandas_path = log_module._csv_columns
    monkeypatch.setattr(log_module, "_csv_columns",
                        lambda *a, **k: calls.append(1) or pandas_path(*a, **k))
    log = read_log(path, "u", "y")
    assert calls == [1]
    assert_array_equal(log.y[:, 0], [2.0, 3.0, 5.0])  # the values in the file
    assert log.source.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()  # hashlib oracle


@pytest.mark.parametrize("n", [1, 2, 3, 10, 11])
def test_median_helper_equals_numpy(n, rng):
    # numpy.median is the reference
    x = rng.standard_normal(n)
    assert log_module._median(x) == np.median(x)
