"""``rigfit excite``: the fixed interface, the files, and refusals that write nothing."""

import json
import struct

import numpy as np
import pytest
from scipy import signal

from ident.io.log import read_table
from ident.io.signalfile import read_signal_description


def _error_lines(result):
    return [ln for ln in result.stderr.splitlines() if ln]


def _read(path):
    table = read_table(path)
    return table, np.column_stack([c.values for c in table.columns[1:]])


def test_the_fixed_interface(run_cli, tmp_path):
    out = tmp_path / "prbs.csv"
    result = run_cli("excite", "--kind", "prbs", "--sample-rate", "500", "--band", "1", "40", "--range", "0", "10",
                     "--inputs", "2", "--periods", "5", "--duration", "60", "--rate-limit", "4000", "--seed", "3",
                     "-o", out)
    assert result.exit_code == 0, result.stderr
    text = out.read_text(encoding="utf-8")
    assert text.splitlines()[0] == "time [s],u1 [-],u2 [-]"
    table, values = _read(out)
    assert values.min() >= 0.0 and values.max() <= 10.0
    assert np.max(np.abs(np.diff(values, axis=0))) <= 4000 / 500  # the rate limit, per sample
    assert np.all(np.diff(table.columns[0].values) > 0)
    assert "prbs test signal, 2 inputs at 500 Hz" in result.stdout
    assert "periods    5: the first 1 to discard as transient, 4 measured" in result.stdout


def test_summary_figures_and_deterministic_output(run_cli, tmp_path):
    args = ["excite", "--kind", "multisine", "--sample-rate", "1000", "--band", "2", "50", "--range", "-1", "1",
            "--periods", "3", "--seed", "5", "--harmonics", "odd-random", "--json"]
    first = run_cli(*args, "-o", tmp_path / "a.csv")
    second = run_cli(*args, "-o", tmp_path / "b.csv")
    assert first.exit_code == 0 and second.exit_code == 0, first.stderr
    assert (tmp_path / "a.csv").read_bytes() == (tmp_path / "b.csv").read_bytes()
    payload = json.loads(first.stdout)
    assert payload["period_samples"] == 500 and payload["resolution_hz"] == 2.0  # 1000 Hz / 2 Hz
    assert payload["duration_s"] == 1.5  # 3 periods of 0.5 s
    row = payload["inputs"][0]
    _, values = _read(tmp_path / "a.csv")
    one = values[500:1000, 0]
    # crest factor and RMS of one measured period, recomputed from the file
    assert row["rms"] == pytest.approx(np.std(one), rel=1e-12)
    assert row["crest_factor"] == pytest.approx(np.max(np.abs(one - one.mean())) / np.std(one), rel=1e-12)
    assert row["crest_factor"] < 1.6
    spectrum = np.abs(np.fft.rfft(one)) ** 2
    lines = np.flatnonzero(spectrum > 1e-20 * spectrum.max())
    assert np.all(lines % 2 == 1) and lines.size == row["lines"]


def test_description_and_plot(run_cli, tmp_path):
    result = run_cli("excite", "--kind", "chirp", "--sample-rate", "200", "--band", "0.5", "20", "--range", "0", "5",
                     "--name", "pump_cmd", "--unit", "%", "-o", tmp_path / "s.csv", "--describe", tmp_path / "s.json",
                     "--plot", tmp_path / "s.png")
    assert result.exit_code == 0, result.stderr
    description = read_signal_description(tmp_path / "s.json")
    assert description.input_names == ("pump_cmd",) and description.input_units == ("%",)
    assert description.kind == "chirp" and description.sample_rate_hz == 200.0
    data = (tmp_path / "s.png").read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = struct.unpack(">II", data[16:24])  # IHDR fields (PNG spec, sec. 11.2.2)
    assert width > 800 and height > 300
    assert "wrote      " in result.stdout and "s.json (description)" in result.stdout


@pytest.mark.parametrize(("args", "message"), [
    (["--band", "1", "600"], "error: band top 600 Hz is above the Nyquist frequency 500 Hz"),
    (["--band", "2", "50", "--periods", "10", "--duration", "3"], "error: 10 periods do not fit the duration 3 s"),
    (["--band", "2", "50", "--rate-limit", "50", "--periods", "2"],
     "error: rate limit 50 per s cannot meet the range 0 to 10"),
    (["--band", "2", "50", "--inputs", "2", "--name", "a"], "error: give one name per input"),
    (["--band", "2", "50", "--harmonics", "odd", "--kind", "prbs"], "error: harmonics applies only to kind"),
])
def test_impossible_requests_exit_2_and_write_nothing(run_cli, tmp_path, args, message):
    base = ["excite", "--kind", "multisine", "--sample-rate", "1000", "--range", "0", "10"]
    result = run_cli(*base, *args, "-o", tmp_path / "x.csv", "--describe", tmp_path / "x.json",
                     "--plot", tmp_path / "x.png")
    assert result.exit_code == 2
    lines = _error_lines(result)
    assert lines[0].startswith(message), lines
    assert len(lines) <= 2 and all(ln.startswith(("error:", "hint:")) for ln in lines)
    assert "Traceback" not in result.stderr
    assert list(tmp_path.iterdir()) == []  # nothing written, no temporary file left


def test_existing_files_need_force(run_cli, tmp_path):
    out = tmp_path / "x.csv"
    out.write_text("keep me\n", encoding="utf-8")
    args = ["excite", "--kind", "noise", "--sample-rate", "100", "--band", "1", "10", "--range", "0", "1",
            "-o", out]
    refused = run_cli(*args)
    assert refused.exit_code == 2 and "already exists" in refused.stderr
    assert out.read_text(encoding="utf-8") == "keep me\n"
    replaced = run_cli(*args, "--force")
    assert replaced.exit_code == 0, replaced.stderr
    assert out.read_text(encoding="utf-8").startswith("time [s],u1 [-]")


def test_one_path_for_two_outputs_is_refused(run_cli, tmp_path):
    result = run_cli("excite", "--kind", "noise", "--sample-rate", "100", "--band", "1", "10", "--range", "0", "1",
                     "-o", tmp_path / "x.csv", "--plot", tmp_path / "x.csv")
    assert result.exit_code == 2 and "given for two outputs" in result.stderr
    assert list(tmp_path.iterdir()) == []


def test_warnings_go_to_stderr(run_cli, tmp_path):
    result = run_cli("excite", "--kind", "multisine", "--sample-rate", "100", "--band", "2", "45", "--range", "0", "1",
                     "--periods", "3", "-o", tmp_path / "x.csv")
    assert result.exit_code == 0
    assert "warning: the band reaches 45 Hz, beyond 0.4 of the sample rate (40 Hz)" in result.stderr
    assert "warning:" not in result.stdout


def test_prbs_written_matches_scipy(run_cli, tmp_path):
    out = tmp_path / "p.csv"
    result = run_cli("excite", "--kind", "prbs", "--sample-rate", "100", "--band", "1", "40", "--range", "-2", "2",
                     "--periods", "2", "-o", out, "--json")
    assert result.exit_code == 0, result.stderr
    payload = json.loads(result.stdout)
    assert payload["clock_divider"] == 1 and payload["prbs_bits"] == 7  # 2^7 - 1 = 127 >= 100 samples per Hz
    _, values = _read(out)
    bits = np.where(values[:127, 0] > 0, 1.0, -1.0)
    reference = signal.max_len_seq(7)[0] * 2.0 - 1.0  # scipy.signal.max_len_seq
    assert any(np.array_equal(np.roll(reference, k), bits) for k in range(127))
