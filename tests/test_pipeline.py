"""run_pipeline end to end: the example pipelines, the drift the sample data was built with, run folders."""

from __future__ import annotations

import hashlib
import json
import textwrap
from pathlib import Path

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.errors import FrozenDataWarning, IdentError, LogFormatError
from ident.estimate.excitation import excited_band
from ident.io.modelfile import load_model
from ident.pipeline import run_pipeline

REPO = Path(__file__).resolve().parents[1]


def write_resonant_log(path: Path, *, f_hz: float = 2.0, zeta: float = 0.1, n: int = 2500, T: float = 0.01,
                       seed: int = 1, input_name: str = "u", output_name: str = "y", noise: float = 0.01) -> None:
    """A lightly damped second-order system (unit DC gain) driven by a random binary input."""
    rng = np.random.default_rng(seed)
    wn = 2 * np.pi * f_hz
    A, B, C, D = signal.tf2ss([wn**2], [1, 2 * zeta * wn, wn**2])
    A, B, C, D, _ = signal.cont2discrete((A, B, C, D), T, method="zoh")
    u = rng.integers(0, 2, size=n // 5 + 1).repeat(5)[:n] * 2.0 - 1.0
    _, y, _ = signal.dlsim((A, B, C, D, T), u)
    y = y[:, 0] + 5.0 + noise * rng.standard_normal(n)
    lines = [f"time,{input_name},{output_name}"]
    lines += [f"{k * T:.4f},{a + 1.0:.6f},{b:.6f}" for k, (a, b) in enumerate(zip(u, y, strict=True))]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")


def write_pipeline(folder: Path, extra: str = "", *, paths: str = '["rig.csv"]') -> Path:
    path = folder / "job.toml"
    path.write_text(textwrap.dedent(f"""
        name = "synthetic rig"
        [log]
        paths = {paths}
        inputs = ["u"]
        outputs = ["y"]
        [fit]
        method = "subspace"
        max_order = 3
        [check]
        max_lag = 20
        """) + textwrap.dedent(extra), encoding="utf-8")
    return path


def folder_digest(folder: Path) -> dict[str, str]:
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


# ---------------------------------------------------------------------------------------- belt axis


@pytest.fixture(scope="module")
def belt_runs(tmp_path_factory):
    out = tmp_path_factory.mktemp("belt")
    before = run_pipeline(REPO / "pipelines" / "belt_axis_before.toml", out_dir=out / "before",
                          allow_outside=True)  # the bundled pipelines read ../sample_data
    after = run_pipeline(REPO / "pipelines" / "belt_axis_after.toml", out_dir=out / "after",
                         baseline=before.model_path, allow_outside=True)
    return before, after


def test_belt_before_passes_its_gates_and_writes_the_folder(belt_runs):
    before, _ = belt_runs
    assert before.passed, [g.detail for g in before.failed_gates]
    names = {p.name for p in before.folder.iterdir()}
    assert {"model.json", "summary.json", "report.html", "pipeline.toml"} <= names
    pngs = sorted(n for n in names if n.endswith(".png"))
    assert pngs == sorted(f["file"] for f in before.summary["figures"])
    # summary.json on disk is the summary returned, and says every gate passed
    on_disk = json.loads(before.summary_path.read_text(encoding="utf-8"))
    assert on_disk == before.summary
    assert on_disk["verdict"]["passed"] and on_disk["verdict"]["failed_gates"] == []
    # the model file holds the selected model (same poles; the file round trip is exact)
    loaded = load_model(before.model_path).model
    assert_allclose(np.sort_complex(loaded.poles()), np.sort_complex(before.identification.model.poles()),
                    rtol=0, atol=0)  # exact: repr-precision floats
    # the provenance carries the hashes of the log and the pipeline file
    log_hash = hashlib.sha256((REPO / "sample_data" / "belt_axis_before.csv").read_bytes()).hexdigest()
    pipe_hash = hashlib.sha256((REPO / "pipelines" / "belt_axis_before.toml").read_bytes()).hexdigest()
    assert on_disk["provenance"]["logs"][0]["sha256"] == log_hash
    assert on_disk["provenance"]["pipeline"]["sha256"] == pipe_hash
    # the model file records the log duration, so `rigfit modes` can judge slow modes later;
    # 24000 samples at 1 kHz (sample_data/truth.json), counted as 23999 steps
    file_prov = load_model(before.model_path).provenance
    assert_allclose(file_prov["log"]["duration_s"], 23.999, rtol=1e-9)
    # and, as `rigfit fit` does, each log's file format and any resampling (none here)
    assert file_prov["log"]["files"][0]["format"] == "csv"
    assert file_prov["log"]["files"][0]["resampling"] is None


def test_belt_resonance_before_matches_the_generator(belt_runs):
    before, _ = belt_runs
    truth = json.loads((REPO / "sample_data" / "truth.json").read_text(encoding="utf-8"))["belt_change"]
    pairs = [m for m in before.modes.modes if m.is_pair]
    assert len(pairs) == 1
    # sample_data/truth.json (eigenvalues of the generating model); 1 %: 17 s of quantised data
    assert_allclose(pairs[0].natural_frequency_hz, truth["resonance_before_hz"], rtol=0.01)


def test_drift_recovers_the_documented_resonance_shift(belt_runs):
    _, after = belt_runs
    truth = json.loads((REPO / "sample_data" / "truth.json").read_text(encoding="utf-8"))["belt_change"]
    drift = after.summary["drift"]
    shifts = [s for s in drift["modes"] if s["status"] == "matched" and s["baseline"]["is_pair"]]
    assert len(shifts) == 1
    s = shifts[0]
    # sample_data/truth.json: +7.08 Hz, +22.5 %; "within a few percent" (issue 7): 3 % of the shift
    assert_allclose(s["frequency_shift_hz"], truth["resonance_shift_hz"], rtol=0.03)
    assert_allclose(s["frequency_shift_percent"], truth["resonance_shift_percent"], rtol=0.03)
    assert_allclose(s["new"]["natural_frequency_hz"], truth["resonance_after_hz"], rtol=0.01)
    # the damping ratio fell (0.050 -> 0.033 in truth.json)
    assert s["damping_shift"] < 0
    # a 22 % move breaches the 10 % threshold of belt_axis_after.toml: only the drift gate fails
    assert not after.passed
    assert [g.key_path for g in after.failed_gates] == ["drift"]
    assert after.summary["verdict"]["failed_gates"] == ["drift"]
    assert "frequency shift" in " ".join(drift["breaches"])
    # the old model explains the new log worse than the new model does
    fits = drift["fit_on_new_log"]
    assert all(o < n for o, n in zip(fits["baseline_model"], fits["new_model"], strict=True))
    assert (after.folder / "drift_magnitude.png").is_file()


# ---------------------------------------------------------------------------------------- run folders


@pytest.fixture(scope="module")
def synthetic(tmp_path_factory):
    folder = tmp_path_factory.mktemp("synthetic")
    write_resonant_log(folder / "rig.csv", f_hz=2.0, zeta=0.1)
    pipe = write_pipeline(folder)
    return pipe, run_pipeline(pipe)


def test_identifies_the_synthetic_resonance(synthetic):
    _, result = synthetic
    pairs = [m for m in result.modes.modes if m.is_pair]
    # closed form: the generating system has wn = 2 Hz, zeta = 0.1; 2 % and 0.02 for 0.01 noise
    assert_allclose(pairs[0].natural_frequency_hz, 2.0, rtol=0.02)
    assert_allclose(pairs[0].damping_ratio, 0.1, atol=0.02)
    # unit DC gain (closed form: wn^2 / wn^2)
    assert_allclose(result.modes.dc_gain[0, 0], 1.0, rtol=0.02)
    assert result.passed  # default gate: no unstable mode


def test_rerun_makes_a_new_folder_and_leaves_the_first_untouched(synthetic):
    pipe, first = synthetic
    assert first.folder.parent == pipe.parent / "runs"  # default: runs/ beside the pipeline file
    before = folder_digest(first.folder)
    second = run_pipeline(pipe)
    assert second.folder != first.folder and second.folder.parent == first.folder.parent
    assert folder_digest(first.folder) == before
    # same inputs, same hash part of the folder name
    assert first.summary["run"]["inputs_hash"] == second.summary["run"]["inputs_hash"]
    assert first.folder.name.split("-")[1] == first.summary["run"]["inputs_hash"]


def test_several_files_and_failed_gates(tmp_path):
    write_resonant_log(tmp_path / "rig_1.csv", seed=1, noise=0.3)
    write_resonant_log(tmp_path / "rig_2.csv", seed=2, n=2000, noise=0.3)
    extra = """
        min_fit = 99.9
        [expect]
        [[expect.mode]]
        name = "resonance"
        frequency_hz = [10, 20]
        """
    result = run_pipeline(write_pipeline(tmp_path, extra, paths='["rig_*.csv"]'), out_dir=tmp_path / "out")
    prep = result.identification.prepared
    assert len(prep.estimation) == 2 and len(prep.validation) == 2
    assert [lg["file_name"] for lg in result.summary["data"]["logs"]] == ["rig_1.csv", "rig_2.csv"]
    # the longest held-out part is validated first
    assert [v["experiment"] for v in result.summary["validation"]] == [1, 2]
    # files laid end to end: the second file's ranges start after the first file's 2500 samples
    assert result.summary["data"]["validation_ranges"][1][0] > 2500
    # failed gates are results, not errors: the run folder is written and says which failed
    assert not result.passed
    assert {g.key_path for g in result.failed_gates} == {"check.min_fit", "expect.mode[1]"}
    assert result.report_path.is_file()
    assert result.summary["verdict"]["headline"].startswith("FAILED")


def test_bad_input_writes_nothing(tmp_path):
    write_resonant_log(tmp_path / "rig.csv")
    pipe = write_pipeline(tmp_path)
    pipe.write_text(pipe.read_text().replace('outputs = ["y"]', 'outputs = ["speed"]'))
    with pytest.raises(LogFormatError, match="speed"):
        run_pipeline(pipe, out_dir=tmp_path / "out")
    assert not (tmp_path / "out").exists()


def test_baseline_of_other_signals_is_bad_input(tmp_path, synthetic):
    _, first = synthetic
    write_resonant_log(tmp_path / "other.csv", input_name="force", output_name="y")
    pipe = tmp_path / "other.toml"
    pipe.write_text(write_pipeline(tmp_path).read_text().replace('"rig.csv"', '"other.csv"')
                    .replace('inputs = ["u"]', 'inputs = ["force"]'))
    with pytest.raises(IdentError, match="signals"):
        run_pipeline(pipe, out_dir=tmp_path / "out2", baseline=first.model_path)
    assert not (tmp_path / "out2").exists() or not any((tmp_path / "out2").iterdir())


def test_excited_band_of_white_noise():
    rng = np.random.default_rng(7)
    u = rng.standard_normal((20000, 1))
    low, high = excited_band(u, 0.01)
    # closed form: a flat spectrum holds 90 % of its power below 0.9 Nyquist = 45 Hz; 3 % for Welch scatter
    assert_allclose(high, 45.0, rtol=0.03)
    assert_allclose(low, 0.05, rtol=1e-12)  # 1e-3 Nyquist, by definition
    assert excited_band(np.ones((100, 1)), 0.01) is None


# ------------------------------------------------------------------------------ pole uncertainty (ARX)


ARX_FIT = """
    [fit]
    method = "arx"
    order = 2
    [check]
    max_lag = 20
    """


def _arx_pipeline(folder: Path, extra: str = "") -> Path:
    path = folder / "job.toml"
    path.write_text(textwrap.dedent("""
        name = "synthetic rig, ARX"
        [log]
        paths = ["rig.csv"]
        inputs = ["u"]
        outputs = ["y"]
        """) + textwrap.dedent(ARX_FIT) + textwrap.dedent(extra), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def arx_runs(tmp_path_factory):
    """Two ARX runs of an invented resonance, 2.0 Hz then 2.3 Hz (a stiffer part fitted)."""
    before_dir = tmp_path_factory.mktemp("arx_before")
    after_dir = tmp_path_factory.mktemp("arx_after")
    write_resonant_log(before_dir / "rig.csv", f_hz=2.0, zeta=0.1, n=3000, seed=21, noise=0.02)
    write_resonant_log(after_dir / "rig.csv", f_hz=2.3, zeta=0.1, n=3000, seed=22, noise=0.02)
    before = run_pipeline(_arx_pipeline(before_dir), out_dir=before_dir / "runs")
    after = run_pipeline(_arx_pipeline(after_dir), out_dir=after_dir / "runs", baseline=before.model_path)
    return before, after


def test_arx_run_gives_pole_uncertainty_in_summary_and_model_file(arx_runs):
    from ident.estimate.uncertainty import arx_pole_covariance, pole_covariance_from_list

    before, _ = arx_runs
    assert before.summary["model"]["method"] == "arx"
    pairs = [m for m in before.summary["modes"]["modes"] if m["is_pair"]]
    assert len(pairs) == 1
    mode = pairs[0]
    # the resonance of the generator (closed form: wn = 2 pi 2.0 rad/s, zeta 0.1) within a few sigma
    assert mode["z_std"] is not None and mode["confidence_radius"] > 0
    assert abs(mode["natural_frequency_hz"] - 2.0) < max(5 * mode["natural_frequency_std_hz"], 0.02)
    # the model file holds the same covariance, JSON-safe, in model.poles() order
    loaded = load_model(before.model_path)
    stored = pole_covariance_from_list(loaded.provenance["estimation"]["pole_covariance"], loaded.model.n_states)
    direct = arx_pole_covariance(before.identification.arx, model=loaded.model)
    # the JSON round trip of floats is exact (repr), the eigenvalues of the reloaded A are the same
    assert_allclose(stored, direct, rtol=1e-9, atol=0)
    k = int(np.argmax(loaded.model.poles().imag))
    assert_allclose(mode["z_std"], np.sqrt(np.diag(stored[k])), rtol=1e-12)


def test_modes_command_shows_the_confidence_of_an_arx_model(arx_runs, run_cli):
    before, _ = arx_runs
    res = run_cli("modes", before.model_path, "--json")
    assert res.exit_code == 0, res.output
    modes = json.loads(res.stdout)["modes"]
    pair = [m for m in modes if m["is_pair"]][0]
    expected = [m for m in before.summary["modes"]["modes"] if m["is_pair"]][0]
    assert_allclose(pair["z_std"], expected["z_std"], rtol=1e-9)
    text = run_cli("modes", before.model_path)
    assert text.exit_code == 0
    assert "±" in text.stdout


def test_drift_between_arx_models_reports_a_z_score(arx_runs, run_cli):
    before, after = arx_runs
    matched = [m for m in after.summary["drift"]["modes"] if m["status"] == "matched" and m["baseline"]["is_pair"]]
    assert len(matched) == 1
    m = matched[0]
    # the resonance moved by +15 % (2.0 -> 2.3 Hz, invented); with these noise levels that is
    # several standard uncertainties (about 4 measured), so the shift is significant: z > 2
    assert m["frequency_shift_percent"] == pytest.approx(15.0, abs=2.0)
    assert m["z_score"] is not None and m["z_score"] > 2
    sb, sn = m["baseline"]["natural_frequency_std_hz"], m["new"]["natural_frequency_std_hz"]
    assert_allclose(m["z_score"], m["frequency_shift_hz"] / np.hypot(sb, sn), rtol=1e-12)
    # the stand-alone command reads both model files' covariances and gives the same z-score
    res = run_cli("drift", before.model_path, after.model_path, "--json")
    assert res.exit_code in (0, 3), res.output
    cli_m = [s for s in json.loads(res.stdout)["modes"] if s["status"] == "matched" and s["baseline"]["is_pair"]][0]
    assert_allclose(cli_m["z_score"], m["z_score"], rtol=1e-9)
    text = run_cli("drift", before.model_path, after.model_path)
    assert "z-score" in text.stdout


# ---------------------------------------------------------------------------------------- issue 13


def test_headline_gives_the_held_out_fit_and_continued_figures(synthetic):
    _, result = synthetic
    verdict = result.summary["verdict"]
    fit = result.summary["model"]["validation_fit"]["y"]
    # PASSED never without the fit per output beside it (issue 13)
    assert verdict["headline"].startswith("PASSED: all 1 gates passed; held-out fit y ")
    assert verdict["held_out_fit"]["y"] == pytest.approx(fit) and verdict["poor_outputs"] == []
    rep = result.summary["validation"][0]
    # the held-out tail continues the estimation part: the continued figure is believed, and it is the
    # identification's own held-out score (one held-out part)
    assert [f["kind"] for f in rep["fits"]] == ["continued", "initial_state", "from_rest"]
    assert rep["fits"][0]["percent"]["y"] == pytest.approx(fit, rel=1e-12)
    assert rep["gaps"] and rep["advice"]["direction"] in ("keep", "lower", "higher", "unclear")
    assert load_model(result.model_path).provenance["validation"]["estimation_fit_percent"]["y"] == \
        pytest.approx(result.summary["model"]["estimation_fit"]["y"])
    html = result.report_path.read_text(encoding="utf-8")
    assert "Which to believe" in html and "band judged" in html and "Order:" in html


def test_poor_model_without_gates_is_called_poor(tmp_path):
    write_resonant_log(tmp_path / "rig.csv", noise=3.0)  # noise far above the response: a poor model
    result = run_pipeline(write_pipeline(tmp_path, "fit_warning = 95"), out_dir=tmp_path / "out")
    headline = result.summary["verdict"]["headline"]
    assert headline.startswith("POOR MODEL: held-out fit of y below the warning level of 95 %")
    assert "(PASSED: all 1 gates passed)" in headline and result.passed  # a warning, not a gate
    assert "POOR MODEL" in result.report_path.read_text(encoding="utf-8")
    quiet = run_pipeline(write_pipeline(tmp_path, "fit_warning = false"), out_dir=tmp_path / "out2")
    assert quiet.summary["verdict"]["poor_outputs"] == [] and "POOR" not in quiet.summary["verdict"]["headline"]


def test_validate_with_holds_out_whole_logs(tmp_path):
    write_resonant_log(tmp_path / "rig.csv", seed=1)
    write_resonant_log(tmp_path / "second_run.csv", seed=9, n=1500)
    pipe = write_pipeline(tmp_path, "", paths='["rig.csv"]')
    pipe.write_text(pipe.read_text().replace('outputs = ["y"]', 'outputs = ["y"]\nvalidate_with = ["second_run.csv"]'))
    result = run_pipeline(pipe, out_dir=tmp_path / "out")
    prep = result.identification.prepared
    assert prep.separate_validation and prep.estimation_ranges == ((0, 2500),)  # nothing of rig.csv held out
    assert [v.n_samples for v in prep.validation] == [1500]
    rep = result.summary["validation"][0]
    assert rep["separate_log"] and [f["kind"] for f in rep["fits"]] == ["initial_state", "from_rest"]
    assert result.summary["data"]["validation_logs"][0]["file_name"] == "second_run.csv"
    assert [lg["file_name"] for lg in result.summary["provenance"]["logs"]] == ["rig.csv", "second_run.csv"]
    assert load_model(result.model_path).provenance["validation"]["logs"][0]["file_name"] == "second_run.csv"
    # the report's Data section lists it beside the estimation log
    data_section = result.report_path.read_text(encoding="utf-8").split('id="data"')[1].split("</section>")[0]
    assert "Separate validation logs" in data_section and "second_run.csv" in data_section


def test_a_frozen_tail_is_left_out_and_recorded_by_the_run(tmp_path):
    # rows 2000-2499 repeat row 1999's values (time still counting): a logger writing its last reading
    write_resonant_log(tmp_path / "rig.csv")
    lines = (tmp_path / "rig.csv").read_text().splitlines()
    held = lines[2000].split(",", 1)[1]
    lines[2001:] = [f"{k * 0.01:.4f},{held}" for k in range(2000, 2500)]
    (tmp_path / "rig.csv").write_text("\n".join(lines) + "\n")
    pipe = write_pipeline(tmp_path)
    with pytest.warns(FrozenDataWarning, match="samples 2000-2499"):
        result = run_pipeline(pipe, out_dir=tmp_path / "out")
    prep = result.identification.prepared
    assert prep.frozen_tails == ((2000, 2500),) and prep.validation_ranges == ((1400, 2000),)
    assert result.summary["data"]["frozen_tails"] == [[2000, 2500]]
    assert load_model(result.model_path).provenance["estimation"]["frozen_tails"] == [[2000, 2500]]
    data_section = result.report_path.read_text(encoding="utf-8").split('id="data"')[1].split("</section>")[0]
    assert "Left out as frozen" in data_section and "2000–2500" in data_section
    pipe.write_text(pipe.read_text() + "[preprocess]\ndrop_frozen_tail = false\n")
    kept = run_pipeline(pipe, out_dir=tmp_path / "kept").identification.prepared
    assert kept.frozen_tails == () and kept.validation_ranges == ((1750, 2500),)


@pytest.mark.filterwarnings("ignore::ident.errors.PoorExcitationWarning")
def test_periodic_input_in_the_run(tmp_path):
    # an invented multisine (lines 1..30 of a 250-sample period, 10 periods) through the resonant rig
    rng = np.random.default_rng(4)
    period, count, T = 250, 10, 0.01
    k = np.arange(period)
    one = sum(np.cos(2 * np.pi * line * k / period + rng.uniform(0, 2 * np.pi)) for line in range(1, 31)) / 4
    u = np.tile(one, count)
    wn = 2 * np.pi * 2.0
    num, den, _ = signal.cont2discrete(([wn**2], [1, 0.2 * wn, wn**2]), T, method="zoh")
    y = signal.lfilter(num.ravel(), den, u) + 5.0 + 0.01 * rng.standard_normal(u.size)
    lines = ["time,u,y"] + [f"{j * T:.4f},{a:.9f},{b:.9f}" for j, (a, b) in enumerate(zip(u, y, strict=True))]
    (tmp_path / "rig.csv").write_text("\n".join(lines) + "\n")
    result = run_pipeline(write_pipeline(tmp_path), out_dir=tmp_path / "out")
    per = result.summary["periodic"]
    assert per["period_samples"] == 250 and per["lines"] == 30 and per["period_source"] == "detected"
    # white noise of std 0.01 was added; what is left of the start-up (tau = 1 / (zeta wn) = 0.8 s) in the
    # second period (2.5 s later, about 4 %) adds to the scatter: 15 %
    assert per["noise_std"]["y"] == pytest.approx(0.01, rel=0.15)
    assert "periodic_response.png" in {f["file"] for f in result.summary["figures"]}
    # the held-out tail (750 samples, 3 periods) is judged at its excited lines
    assert result.summary["validation"][0]["spectral"]["source"] == "periodic"
    assert "Periodic input" in result.report_path.read_text(encoding="utf-8")
