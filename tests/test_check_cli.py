import json

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import linalg, signal

from ident.assess.diagnostics import CheckOptions, validate_model
from ident.io.modelfile import save_model
from ident.lti.models import OperatingPoint, StateSpaceModel
from ident.lti.simulate import simulate

T = 0.01
U_LEVEL, Y_LEVEL = 2.0, 10.0


def _model():
    # invented valve-to-flow plant with input delay 2 and a Kalman gain (test_diagnostics)
    A, B, C, D = signal.tf2ss([0.5, 0.3], [1, -1.5, 0.7, 0])
    Q = 0.5 * np.diag([1.0, 0.0, 0.0])
    P = linalg.solve_discrete_are(A.T, C.T, Q, np.eye(1))
    K = A @ P @ C.T @ np.linalg.inv(C @ P @ C.T + np.eye(1))
    return StateSpaceModel(
        A=A, B=B, C=C, D=D, sample_time=T, inputs=["valve_cmd"], outputs=["flow"],
        input_units=["%"], output_units=["l/min"],
        operating_point=OperatingPoint([U_LEVEL], [Y_LEVEL]), noise_gain=K,
    )


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    folder = tmp_path_factory.mktemp("check")
    model = _model()
    rng = np.random.default_rng(606)
    n = 3000
    u = rng.standard_normal((n, 1))
    e = 0.3 * rng.standard_normal((n, 1))
    aug = StateSpaceModel(A=model.A, B=np.hstack([model.B, model.noise_gain]), C=model.C,
                          D=np.hstack([model.D, np.eye(1)]), sample_time=T)
    y = simulate(aug, np.hstack([u, e]))
    t = np.arange(n) * T
    log = folder / "rig.csv"
    np.savetxt(log, np.column_stack([t, u[:, 0] + U_LEVEL, y[:, 0] + Y_LEVEL]), delimiter=",",
               header="time [s],valve_cmd [%],flow [l/min]", comments="", fmt="%.9f")
    renamed = folder / "renamed.csv"
    renamed.write_text(log.read_text().replace("flow [l/min]", "flow_rate [l/min]", 1))
    slow = folder / "slow.csv"
    np.savetxt(slow, np.column_stack([2 * t, u[:, 0] + U_LEVEL, y[:, 0] + Y_LEVEL]),
               delimiter=",", header="time [s],valve_cmd [%],flow [l/min]", comments="",
               fmt="%.9f")
    good = folder / "plant.json"
    save_model(good, model)
    plain = folder / "plain.json"
    save_model(plain, model.with_changes(noise_gain=None))
    return {"log": log, "renamed": renamed, "slow": slow, "model": good, "plain": plain,
            "u": u, "y": y, "dir": folder}


def test_check_passes_and_prints_report(run_cli, files):
    res = run_cli("check", files["log"], files["model"], "--min-fit", "70")
    assert res.exit_code == 0, res.output
    assert "verdicts" in res.stdout and "flow" in res.stdout
    # the result line never says PASSED without the fit per output beside it
    assert "result: PASSED; held-out fit flow" in res.stdout


def test_json_shape_and_operating_point(run_cli, files):
    res = run_cli("check", files["log"], files["model"], "--json", "--max-lag", "15")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    assert {"fit", "whiteness", "cross_correlation", "normality", "spectral", "verdicts",
            "gates", "log", "model"} <= set(d)
    assert d["inputs"] == ["valve_cmd"] and d["outputs"] == ["flow"]
    assert len(d["whiteness"]["flow"]["autocorrelation"]["lags"]) == 16
    assert len(d["cross_correlation"]["flow"]["valve_cmd"]["values"]) == 31
    assert d["gates"]["passed"] is True
    # the CLI subtracts the model's operating point: same figures as the library on
    # deviation arrays (the CSV holds 9 decimals, so agreement to about 1e-6 %)
    ref = validate_model(_model(), files["u"], files["y"], T, CheckOptions(max_lag=15))
    assert_allclose(d["fit"]["flow"]["simulation_percent"], ref.simulation_fit[0], atol=1e-4)
    assert_allclose(d["whiteness"]["flow"]["ljung_box_pvalue"],
                    ref.whiteness[0].ljung_box_pvalue, rtol=1e-4)


def test_min_fit_unmet_exits_3(run_cli, files):
    res = run_cli("check", files["log"], files["model"], "--min-fit", "99")
    assert res.exit_code == 3
    assert "failed:" in res.stderr and "below the required 99 %" in res.stderr


def test_require_white_fails_without_noise_model(run_cli, files):
    res = run_cli("check", files["log"], files["plain"], "--require-white", "--json")
    assert res.exit_code == 3
    d = json.loads(res.stdout)
    white = [v for v in d["verdicts"] if v["test"] == "whiteness"]
    assert white[0]["passed"] is False and white[0]["cause"] == "noise_model"


def test_column_mismatch_exits_2_naming_columns(run_cli, files):
    res = run_cli("check", files["renamed"], files["model"])
    assert res.exit_code == 2
    assert "'flow'" in res.stderr and "flow_rate" in res.stderr and "valve_cmd" in res.stderr
    # naming the column explicitly works
    ok = run_cli("check", files["renamed"], files["model"], "--output", "flow_rate")
    assert ok.exit_code == 0, ok.output


def test_wrong_override_count_exits_2(run_cli, files):
    res = run_cli("check", files["log"], files["model"], "--output", "flow", "--output", "x")
    assert res.exit_code == 2
    assert "--output" in res.stderr


def test_sample_time_mismatch_exits_2(run_cli, files):
    res = run_cli("check", files["slow"], files["model"])
    assert res.exit_code == 2
    assert "sample time" in res.stderr and "0.02" in res.stderr


def test_plot_writes_pngs_and_refuses_overwrite(run_cli, files):
    out = files["dir"] / "figs" / "nested"
    res = run_cli("check", files["log"], files["model"], "--plot", out)
    assert res.exit_code == 0, res.output
    pngs = sorted(p.name for p in out.glob("*.png"))
    assert pngs == ["outputs.png", "residuals_flow.png", "response_valve_cmd_to_flow.png",
                    "verdicts.png"]
    for p in out.glob("*.png"):
        assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec)
    before = (out / "outputs.png").stat().st_mtime_ns
    again = run_cli("check", files["log"], files["model"], "--plot", out)
    assert again.exit_code == 2 and "already exists" in again.stderr
    assert (out / "outputs.png").stat().st_mtime_ns == before
    forced = run_cli("check", files["log"], files["model"], "--plot", out, "--force")
    assert forced.exit_code == 0, forced.output
    assert not list(out.glob(".*.tmp"))  # no temporary files left behind


def test_split_at_gaps_validates_on_the_longest_segment(run_cli, files, tmp_path):
    lines = files["log"].read_text().splitlines()
    del lines[501:511]  # ten samples missing before file line 502: segments of 500 and 2490
    gappy = tmp_path / "gappy.csv"
    gappy.write_text("\n".join(lines) + "\n")
    res = run_cli("check", gappy, files["model"])
    assert res.exit_code == 2 and "row 502" in res.stderr and "--split-at-gaps" in res.stderr
    res = run_cli("check", gappy, files["model"], "--split-at-gaps")
    assert res.exit_code == 0, res.output
    assert "validated on the longest of 2 segments: samples 500..2989" in res.stdout
    data = json.loads(run_cli("check", gappy, files["model"], "--split-at-gaps", "--json").stdout)
    assert {k: data["segment"][k] for k in ("start", "stop", "n_segments", "dropped_rows", "warmup")} == \
        {"start": 500, "stop": 2990, "n_segments": 2, "dropped_rows": 0, "warmup": 0}
    assert data["n_samples"] == 2490  # the longest segment only (3000 - 10 - 500)
    # the same figures as validating a log holding that stretch alone
    alone = tmp_path / "alone.csv"
    alone.write_text("\n".join([lines[0], *lines[501:]]) + "\n")
    direct = json.loads(run_cli("check", alone, files["model"], "--json").stdout)
    assert direct["n_samples"] == 2490
    assert direct["fit"] == data["fit"]  # identical input data and code path


def test_dropped_rows_reported(run_cli, files, tmp_path):
    lines = files["log"].read_text().splitlines()
    lines[2999] = lines[2999].rsplit(",", 1)[0] + ",bad"  # the second-to-last data row
    broken = tmp_path / "broken.csv"
    broken.write_text("\n".join(lines) + "\n")
    res = run_cli("check", broken, files["model"], "--drop-bad-rows", "--split-at-gaps")
    assert res.exit_code == 0, res.output
    assert "1 bad rows dropped" in res.stdout


# --- issue 13: part of a log, honest fit figures, headlines, periodic input ----------------


def test_from_to_scores_part_of_the_log_continued_from_before(run_cli, files):
    res = run_cli("check", files["log"], files["model"], "--from", "10", "--to", "2500rows", "--json")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    # --from 10 s: the first sample at t >= 10 s is index 1000 (t = k * 0.01 s); --to 2500rows includes
    # data row 2500, i.e. index 2499 (rows count from 1)
    seg = d["segment"]
    assert (seg["start"], seg["stop"], seg["warmup"], d["n_samples"]) == (1000, 2500, 1000, 1500)
    assert [f["kind"] for f in d["fits"]] == ["continued", "initial_state", "from_rest"]
    # the continued figure is the identification's held-out score with the 1000 rows before as warm-up
    from ident.estimate.data import Experiment
    from ident.estimate.scoring import held_out_score

    u, y = files["u"], files["y"]
    ref = held_out_score(_model(), [Experiment(u[1000:2500], y[1000:2500])], 50,
                         warmups=[Experiment(u[:1000], y[:1000])]).fit
    assert_allclose(d["fits"][0]["percent"]["flow"], ref[0], atol=1e-4)  # 9-decimal CSV
    assert d["fit"]["flow"]["simulation_percent"] == d["fits"][0]["percent"]["flow"]  # believed: continued
    text = run_cli("check", files["log"], files["model"], "--from", "10", "--to", "2500rows").stdout
    assert "rows 1001..2500" in text and "after 1000 rows of warm-up" in text
    assert "which to believe: believe 'continued" in text


@pytest.mark.parametrize(("args", "words"), [
    (("--from", "50"), "outside the log's time axis"),
    (("--from", "12abc"), "seconds such as 12.5"),
    (("--from", "20", "--to", "10"), "must come before"),
    (("--to", "4000rows"), "data rows 1 to 3000"),
])
def test_bad_ranges_exit_2(run_cli, files, args, words):
    res = run_cli("check", files["log"], files["model"], *args)
    assert res.exit_code == 2 and words in res.stderr, res.output


def test_range_across_a_gap_exits_2(run_cli, files, tmp_path):
    lines = files["log"].read_text().splitlines()
    del lines[501:511]
    gappy = tmp_path / "gappy.csv"
    gappy.write_text("\n".join(lines) + "\n")
    res = run_cli("check", gappy, files["model"], "--split-at-gaps", "--from", "1", "--to", "10")
    assert res.exit_code == 2 and "crosses a gap" in res.stderr


def test_poor_model_headline_without_a_gate(run_cli, files, tmp_path):
    bad = tmp_path / "bad.json"
    save_model(bad, _model().with_changes(C=0.2 * _model().C))
    res = run_cli("check", files["log"], bad)
    assert res.exit_code == 0  # a warning, not a gate
    head = res.stdout.splitlines()[2]
    assert head.startswith("  POOR MODEL: flow below the warning level of 50 %") and "held-out fit flow" in head
    assert res.stdout.rstrip().splitlines()[-1].startswith("result: POOR MODEL")
    quiet = run_cli("check", files["log"], bad, "--no-fit-warning")
    assert "POOR MODEL" not in quiet.stdout and "result: no gate set; held-out fit flow" in quiet.stdout


def _periodic_log(tmp_path, model):
    # an invented multisine: lines 1..40 of a 200-sample period, random phases, 12 periods
    rng = np.random.default_rng(5)
    period, count = 200, 12
    t = np.arange(period)
    one = sum(np.cos(2 * np.pi * k * t / period + rng.uniform(0, 2 * np.pi)) for k in range(1, 41)) / 5
    u = np.tile(one, count)[:, None]
    y = simulate(model.with_changes(noise_gain=None), u) + 0.05 * rng.standard_normal((u.shape[0], 1))
    path = tmp_path / "periodic.csv"
    np.savetxt(path, np.column_stack([np.arange(u.shape[0]) * T, u[:, 0] + U_LEVEL, y[:, 0] + Y_LEVEL]),
               delimiter=",", header="time [s],valve_cmd [%],flow [l/min]", comments="", fmt="%.10f")
    return path


def test_periodic_log_uses_the_excited_lines(run_cli, files, tmp_path):
    path = _periodic_log(tmp_path, _model())
    res = run_cli("check", path, files["plain"], "--json")
    assert res.exit_code == 0, res.output
    d = json.loads(res.stdout)
    per = d["periodic"]
    assert per["period_samples"] == 200 and per["period_source"] == "detected" and per["lines"] == 40
    # the noise added was white with std 0.05: the period scatter gives it back (11 periods averaged,
    # 2200 samples of 10 degrees of freedom each; 5 % is about 5 standard errors)
    assert per["noise_std"]["flow"] == pytest.approx(0.05, rel=0.05)
    assert d["spectral"]["source"] == "periodic"
    assert d["spectral"]["judgements"][0]["status"] == "agrees"
    assert per["model"]["error_to_noise_db"]["flow"] == pytest.approx(0.0, abs=1.5)  # a right model: 0 dB
    text = run_cli("check", path, files["plain"]).stdout
    assert "periodic input: period 200 samples" in text and "excited lines of the periodic input" in text
    # the period given in seconds, or no periodic analysis at all
    assert json.loads(run_cli("check", path, files["plain"], "--period", "2", "--json").stdout
                      )["periodic"]["period_source"] == "given"
    plain = json.loads(run_cli("check", path, files["plain"], "--period", "none", "--json").stdout)
    assert plain["periodic"] is None and plain["spectral"]["source"] == "welch"
    bad = run_cli("check", path, files["plain"], "--period", "1.234")
    assert bad.exit_code == 2 and "whole number" in bad.stderr


def test_checking_the_rows_a_model_was_fitted_on_says_so(run_cli, files, tmp_path):
    # rigfit fit holds out the last 30 % (rows 2101..3000 of 3000) and records the log's SHA-256 and
    # its estimation rows; check on the whole log says the first 2100 rows were fitted on; on the
    # held-out rows, or on another log, it says nothing (common practice, no source)
    fitted = tmp_path / "fitted.json"
    res = run_cli("fit", files["log"], "--input", "valve_cmd", "--output", "flow", "--order", "3", "-o", fitted,
                  "--quiet")
    assert res.exit_code == 0, res.stderr
    whole = run_cli("check", files["log"], fitted)
    assert whole.exit_code == 0, whole.stderr
    assert "note: rows 1..2100 of this log were used to fit the model" in whole.stdout
    as_json = json.loads(run_cli("check", files["log"], fitted, "--json").stdout)
    assert as_json["fitted_rows_checked"] == [0, 2100]
    held_out = run_cli("check", files["log"], fitted, "--from", "2101rows")
    assert "used to fit the model" not in held_out.stdout
    other = run_cli("check", files["renamed"], fitted, "--output", "flow_rate")
    assert other.exit_code == 0, other.stderr
    assert "used to fit the model" not in other.stdout
