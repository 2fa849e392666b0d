import json

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import signal


@pytest.fixture
def axis_log(tmp_path, rng):
    """A small invented drive log: PRBS torque around 0.5 N m, first-order speed response."""
    n = 4000
    seq = signal.max_len_seq(8)[0] * 2.0 - 1.0
    u = 0.5 + 0.2 * np.resize(np.repeat(seq, 3), n)
    y = signal.lfilter([0.05], [1.0, -0.95], u) + 0.01 * rng.standard_normal(n)
    frame = pd.DataFrame({
        "time [ms]": np.arange(n, dtype=float),
        "motor_torque_cmd [N m]": u,
        "motor_speed (rad/s)": y,
    })
    path = tmp_path / "axis.csv"
    frame.to_csv(path, index=False)
    return path, frame


def _error_lines(result):
    return [ln for ln in result.stderr.splitlines() if ln]


def test_text_summary(run_cli, axis_log):
    path, frame = axis_log
    result = run_cli("inspect", path, "--input", "motor_torque_cmd", "--output", "motor_speed")
    assert result.exit_code == 0, result.stderr
    out = result.stdout
    assert "rows       4000 (file lines 2-4001)" in out
    assert "T = 0.001 s (1000 Hz) from column 'time'" in out  # 1 ms stamps
    assert "duration   3.999 s" in out  # closed form: (4000 - 1) * 1 ms
    assert "motor_torque_cmd  N m" in out and "motor_speed       rad/s" in out
    # per-column statistics: reference pandas describe on the same data (ddof=0 std)
    u = frame["motor_torque_cmd [N m]"]
    # the column's position (#2, as --input '#2' chooses it) comes first
    line = next(ln for ln in out.splitlines() if ln.startswith(" 2  motor_torque_cmd  N m"))
    values = [float(v) for v in line.split()[4:]]
    assert_allclose(values, [u.min(), u.mean(), u.max(), u.std(ddof=0)], rtol=1e-5)  # 6 digits
    assert "excitation" in out and ">= 50" in out


def test_json_summary(run_cli, axis_log):
    path, frame = axis_log
    result = run_cli("inspect", path, "--input", "motor_torque_cmd", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["rows"] == 4000 and data["dropped_rows"] == 0
    assert [c["name"] for c in data["columns"]] == ["time", "motor_torque_cmd", "motor_speed"]
    assert [c["unit"] for c in data["columns"]] == ["ms", "N m", "rad/s"]
    assert_allclose(data["timing"]["sample_time_s"], 1e-3, rtol=1e-12)  # 1 ms stamps
    # integer ms stamps: regular up to the rounding of k * 1e-3 (a few ulp of 1 ms)
    assert data["timing"]["jitter_max_s"] < 1e-15
    y = frame["motor_speed (rad/s)"].to_numpy()
    col = data["columns"][2]
    # reference: numpy on the same column
    assert_allclose([col["min"], col["mean"], col["max"], col["std"]],
                    [y.min(), y.mean(), y.max(), y.std()], rtol=1e-12)
    (exc,) = data["excitation"]
    assert exc["input"] == "motor_torque_cmd" and exc["pe_order_is_lower_bound"] is True
    assert 0.0 < exc["band_fraction_of_nyquist"] < 1.0
    assert_allclose(exc["band_hz"], exc["band_fraction_of_nyquist"] * 500.0, rtol=1e-12)  # f_N


def test_frozen_tail_of_the_chosen_channels_is_named(run_cli, tmp_path, axis_log):
    # the last 500 rows repeat row 3499 in both chosen columns (time still counts): what fit leaves out
    _, frame = axis_log
    frame = frame.copy()
    frame.iloc[3500:, 1:] = frame.iloc[3499, 1:].to_numpy()
    path = tmp_path / "stopped.csv"
    frame.to_csv(path, index=False)
    args = ("inspect", path, "--input", "motor_torque_cmd", "--output", "motor_speed")
    result = run_cli(*args)
    assert result.exit_code == 0, result.stderr
    assert "frozen     samples 3500-3999 repeat sample 3499 in every chosen channel" in result.stdout
    assert json.loads(run_cli(*args, "--json").stdout)["log"]["frozen_tails"] == [[3500, 4000]]
    plain = run_cli("inspect", axis_log[0], "--input", "motor_torque_cmd", "--output", "motor_speed", "--json")
    assert json.loads(plain.stdout)["log"]["frozen_tails"] == []


def test_plot_written_atomically_and_not_overwritten(run_cli, axis_log, tmp_path):
    path, _ = axis_log
    png = tmp_path / "signals.png"
    result = run_cli("inspect", path, "--input", "motor_torque_cmd", "--output", "motor_speed",
                     "--plot", png)
    assert result.exit_code == 0, result.stderr
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG specification)
    before = png.read_bytes()
    result = run_cli("inspect", path, "--plot", png)
    assert result.exit_code == 2
    assert _error_lines(result)[0] == f"error: {png}: already exists; not overwritten"
    assert png.read_bytes() == before
    result = run_cli("inspect", path, "--plot", png, "--force")
    assert result.exit_code == 0, result.stderr
    assert not list(tmp_path.glob(".signals.png.*"))  # no temporary left behind


def test_plot_never_writes_the_input(run_cli, axis_log):
    path, _ = axis_log
    before = path.read_bytes()
    result = run_cli("inspect", path, "--plot", path, "--force")
    assert result.exit_code == 2
    assert "refusing to write over the input file" in result.stderr
    assert path.read_bytes() == before


def test_missing_column_is_exit_2_without_traceback(run_cli, axis_log):
    path, _ = axis_log
    result = run_cli("inspect", path, "--input", "motor_torq")
    assert result.exit_code == 2
    lines = _error_lines(result)
    assert lines[0].startswith("error: axis.csv: no column named 'motor_torq'; nearest: "
                               "'motor_torque_cmd'; available: time [ms], motor_torque_cmd [N m]")
    assert lines[1] == "hint: did you mean 'motor_torque_cmd'?"
    assert "Traceback" not in result.stderr + result.stdout


def test_bad_cell_and_drop_bad_rows(run_cli, tmp_path):
    rows = ["time;u [V];y [V]"] + [f"{k};{k},5;{2 * k},25" for k in range(30)]
    rows[10] = "9;--;18,25"  # file line 11
    path = tmp_path / "eu.csv"
    path.write_text("\n".join(rows) + "\n")
    result = run_cli("inspect", path)
    assert result.exit_code == 2
    assert _error_lines(result)[0] == "error: eu.csv, row 11, column 'u': not a number ('--')"
    result = run_cli("inspect", path, "--drop-bad-rows", "--split-at-gaps", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["dropped_rows"] == 1 and data["rows"] == 29
    assert [(s["first_row"], s["last_row"]) for s in data["segments"]] == [(2, 10), (12, 31)]
    text = run_cli("inspect", path, "--drop-bad-rows", "--split-at-gaps").stdout
    assert "1 bad rows dropped" in text and "segments   2 (split at gaps)" in text


def test_dropped_row_splits_a_sample_rate_log(run_cli, tmp_path):
    rows = ["u [V],y [V]"] + [f"{k},{2 * k}" for k in range(30)]
    rows[10] = "9,inf"  # file line 11
    path = tmp_path / "rate.csv"
    path.write_text("\n".join(rows) + "\n")
    result = run_cli("inspect", path, "--sample-rate", "10", "--drop-bad-rows")
    assert result.exit_code == 2 and "row 12" in result.stderr  # the row after the dropped one
    result = run_cli("inspect", path, "--sample-rate", "10", "--drop-bad-rows",
                     "--split-at-gaps", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    # as with a time column: segments between the dropped row (file lines 2-10 and 12-31)
    assert [(s["first_row"], s["last_row"]) for s in data["segments"]] == [(2, 10), (12, 31)]
    # the duration counts the missing sample: 30 samples at 10 Hz span 2.9 s (closed form)
    assert data["duration_s"] == pytest.approx(2.9, rel=1e-12)


def test_no_time_column(run_cli, tmp_path):
    path = tmp_path / "rate.csv"
    pd.DataFrame({"u": np.arange(10.0), "y": np.arange(10.0) ** 2}).to_csv(path, index=False)
    result = run_cli("inspect", path)
    assert result.exit_code == 0, result.stderr
    assert "timing     none (no time column" in result.stdout
    result = run_cli("inspect", path, "--input", "u")
    assert result.exit_code == 2 and "no time column" in result.stderr
    result = run_cli("inspect", path, "--input", "u", "--sample-rate", "100", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["timing"]["basis"] == "sample rate"
    assert_allclose(data["duration_s"], 0.09, rtol=1e-12)  # 9 intervals of 10 ms


def test_input_equal_to_output_is_refused(run_cli, axis_log):
    path, _ = axis_log
    result = run_cli("inspect", path, "--input", "motor_speed", "--output", "MOTOR_SPEED")
    assert result.exit_code == 2
    assert _error_lines(result)[0] == (
        "error: column 'motor_speed' is named both as an input and as an output"
    )


def test_gap_is_exit_2_with_row(run_cli, tmp_path):
    path = tmp_path / "gap.csv"
    stamps = [0.0, 0.1, 0.2, 0.3, 0.9, 1.0]
    pd.DataFrame({"t [s]": stamps, "u": range(6)}).to_csv(path, index=False)
    result = run_cli("inspect", path)
    assert result.exit_code == 2
    assert _error_lines(result)[0].startswith("error: gap.csv, row 6, column 't': gap of 0.6 s")
    assert "hint: split the log at gaps (--split-at-gaps" in result.stderr


def test_missing_file(run_cli, tmp_path):
    result = run_cli("inspect", tmp_path / "nope.csv")
    assert result.exit_code == 2
    assert _error_lines(result)[0].startswith("error: ")
    assert "Traceback" not in result.stderr


def test_plot_module_takes_axes_and_leaves_rcparams(tmp_path):
    import matplotlib
    from matplotlib.figure import Figure

    from ident.plots.signals import plot_signals

    before = dict(matplotlib.rcParams)
    fig = Figure()
    axes = fig.subplots(2, 1)
    t = np.linspace(0, 1, 50_000)
    out = plot_signals(t, [("u [V]", np.sin(t)), ("y [V]", np.cos(t))], roles=["input", "output"],
                       axes=axes, segments=[(0, 20_000), (20_000, 50_000)])
    assert out is fig
    assert axes[0].get_ylabel() == "u [V]" and axes[1].get_xlabel() == "time [s]"
    # long traces are reduced to a min/max envelope of at most a few thousand points
    assert sum(len(line.get_xdata()) for line in axes[0].lines) <= 4100
    assert dict(matplotlib.rcParams) == before
