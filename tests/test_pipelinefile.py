"""Pipeline files: the examples load; bad keys and values are named, with the nearest key."""

from __future__ import annotations

import textwrap
from pathlib import Path

import pytest

from ident.errors import PipelineError
from ident.io.pipelinefile import DEFAULT_FAIL_ON, load_pipeline

REPO = Path(__file__).resolve().parents[1]

MINIMAL = """
[log]
paths = ["rig.csv"]
inputs = ["u"]
outputs = ["y"]
"""


def write(tmp_path: Path, body: str, name: str = "job.toml") -> Path:
    (tmp_path / "rig.csv").write_text("time,u,y\n0,0,0\n1,1,0\n", encoding="utf-8")
    path = tmp_path / name
    path.write_text(textwrap.dedent(body), encoding="utf-8")
    return path


def error_of(tmp_path: Path, body: str) -> PipelineError:
    with pytest.raises(PipelineError) as info:
        load_pipeline(write(tmp_path, body))
    return info.value


@pytest.mark.parametrize("stem", ["belt_axis_before", "belt_axis_after", "heated_platen"])
def test_example_pipelines_load(stem):
    spec = load_pipeline(REPO / "pipelines" / f"{stem}.toml", allow_outside=True)  # they read ../sample_data
    # paths in the examples are relative to the pipeline file, not to the current folder
    assert spec.log.files == ((REPO / "sample_data" / f"{stem}.csv").resolve(),)
    assert spec.fit.order is None  # order = "auto"
    assert spec.check.min_fit is not None
    assert len(spec.sha256) == 64
    assert spec.to_dict()["log"]["inputs"] == list(spec.log.inputs)


def test_defaults_of_a_minimal_file(tmp_path):
    spec = load_pipeline(write(tmp_path, MINIMAL))
    assert spec.name == "job"  # default: file name without suffix
    assert spec.log.inputs == ("u",) and spec.log.outputs == ("y",)
    assert spec.fit.method == "auto" and spec.fit.preprocess.holdout == 0.3  # documented defaults
    assert spec.modes.fail_on == DEFAULT_FAIL_ON
    assert spec.expect.is_empty and spec.drift.baseline is None


def test_sections_reach_their_options_classes(tmp_path):
    spec = load_pipeline(write(tmp_path, MINIMAL + """
        [preprocess]
        holdout = 0.25
        decimate = 2
        [fit]
        method = "arx"
        order = 3
        delay = 1
        [check]
        min_fit = 70
        require_white = true
        max_lag = 10
        [modes]
        lightly_damped_below = 0.05
        fail_on = ["unstable", "lightly_damped"]
        [expect]
        stable = true
        [[expect.mode]]
        frequency_hz = [1, 2]
        [drift]
        baseline = "models/base.json"
        frequency_shift_percent = 5
        """))
    assert (spec.fit.preprocess.holdout, spec.fit.preprocess.decimate) == (0.25, 2)
    assert (spec.fit.method, spec.fit.order, spec.fit.delay) == ("arx", 3, 1)
    assert (spec.check.min_fit, spec.check.require_white, spec.check.max_lag) == (70.0, True, 10)
    assert spec.modes.thresholds.lightly_damped_below == 0.05
    assert spec.modes.fail_on == ("unstable", "lightly_damped")
    assert spec.expect.stable and spec.expect.modes[0].frequency_hz == (1.0, 2.0)
    assert spec.drift.baseline == (tmp_path / "models" / "base.json").resolve()
    assert spec.drift.thresholds.frequency_shift_percent == 5.0


@pytest.mark.parametrize(
    ("body", "key_path", "nearest"),
    [
        ("fitt = 1\n", "fitt", "fit"),
        ("[fit]\nordr = 3\n", "fit.ordr", "order"),
        ("[preprocess]\nhold_out = 0.2\n", "preprocess.hold_out", "holdout"),
        ("[check]\nmin_fti = 50\n", "check.min_fti", "min_fit"),
        ("[modes]\nlightly_damped_belo = 0.1\n", "modes.lightly_damped_belo", "lightly_damped_below"),
        ("[expect]\n[[expect.mode]]\nfrequncy_hz = [1, 2]\n", "expect.mode[1].frequncy_hz", "frequency_hz"),
        ("[drift]\nfrequency_shift_pct = 5\n", "drift.frequency_shift_pct", "frequency_shift_percent"),
    ],
)
def test_unknown_keys_name_the_key_and_the_nearest(tmp_path, body, key_path, nearest):
    exc = error_of(tmp_path, MINIMAL + body if not body.startswith("fitt") else body + MINIMAL)
    assert exc.key_path == key_path
    assert f"did you mean {nearest!r}" in exc.hint
    assert str(exc).startswith("job.toml, key " + repr(key_path))


def test_unknown_log_key(tmp_path):
    exc = error_of(tmp_path, MINIMAL.replace("outputs", "outptus"))
    assert exc.key_path == "log.outptus" and "'outputs'" in exc.hint


@pytest.mark.parametrize(
    ("body", "key_path"),
    [
        ("[fit]\nmax_order = \"four\"\n", "fit.max_order"),
        ("[fit]\norder = \"three\"\n", "fit.order"),
        ("[fit]\nmethod = \"fuzzy\"\n", "fit.method"),
        ("[preprocess]\nholdout = 1.5\n", "preprocess.holdout"),
        ("[preprocess]\ndetrend = \"yes\"\n", "preprocess.detrend"),
        ("[check]\nmin_fit = \"high\"\n", "check.min_fit"),
        ("[check]\nrequire_white = 1\n", "check.require_white"),
        ("[modes]\nlightly_damped_below = true\n", "modes.lightly_damped_below"),
        ("[modes]\nfail_on = \"unstable\"\n", "modes.fail_on"),
        ("[drift]\ndamping_shift = -1\n", "drift.damping_shift"),
        ("[drift]\nbaseline = 3\n", "drift.baseline"),
        ("[expect]\nstable = \"yes\"\n", "expect.stable"),
        ("fit = 3\n", "fit"),
    ],
)
def test_wrong_values_name_the_key(tmp_path, body, key_path):
    exc = error_of(tmp_path, MINIMAL + body if not body.startswith("fit =") else body + MINIMAL)
    assert exc.key_path == key_path
    assert "job.toml" in str(exc)


def test_unknown_flag_in_fail_on_suggests_the_nearest(tmp_path):
    exc = error_of(tmp_path, MINIMAL + "[modes]\nfail_on = [\"unstabel\"]\n")
    assert exc.key_path == "modes.fail_on" and "'unstable'" in exc.hint


def test_preprocess_inside_fit_points_to_its_section(tmp_path):
    exc = error_of(tmp_path, MINIMAL + "[fit.preprocess]\nholdout = 0.2\n")
    assert exc.key_path == "fit.preprocess" and "[preprocess]" in exc.hint


@pytest.mark.parametrize(
    ("log", "key_path"),
    [
        ('inputs = ["u"]\noutputs = ["y"]\n', "log.paths"),
        ('paths = ["rig.csv"]\noutputs = ["y"]\n', "log.inputs"),
        ('paths = ["rig.csv"]\ninputs = 3\noutputs = ["y"]\n', "log.inputs"),
        ('paths = ["rig.csv"]\ninputs = ["u"]\noutputs = ["U"]\n', "log.outputs"),
        ('paths = ["missing.csv"]\ninputs = ["u"]\noutputs = ["y"]\n', "log.paths[1]"),
        ('paths = ["rig.csv", "run_*.csv"]\ninputs = ["u"]\noutputs = ["y"]\n', "log.paths[2]"),
        ('paths = ["rig.csv"]\ninputs = ["u"]\noutputs = ["y"]\ntime = "t"\nsample_rate_hz = 10\n',
         "log.sample_rate_hz"),
        ('paths = ["rig.csv"]\ninputs = ["u"]\noutputs = ["y"]\nsample_rate_hz = 0\n', "log.sample_rate_hz"),
        ('paths = ["rig.csv"]\ninputs = ["u"]\noutputs = ["y"]\ndrop_bad_rows = "no"\n', "log.drop_bad_rows"),
        ('paths = ["rig.csv"]\ninputs = ["u"]\noutputs = ["y"]\nunits = { w = "V" }\n', "log.units.w"),
    ],
)
def test_log_section_errors(tmp_path, log, key_path):
    exc = error_of(tmp_path, "[log]\n" + log)
    assert exc.key_path == key_path


def test_globs_expand_relative_to_the_file_in_name_order(tmp_path):
    sub = tmp_path / "logs"
    sub.mkdir()
    for name in ("run_b.csv", "run_a.csv", "other.txt"):
        (sub / name).write_text("time,u,y\n0,0,0\n1,1,1\n", encoding="utf-8")
    spec = load_pipeline(write(tmp_path, MINIMAL.replace('["rig.csv"]', '["logs/run_*.csv", "rig.csv"]')))
    assert [f.name for f in spec.log.files] == ["run_a.csv", "run_b.csv", "rig.csv"]


def test_invalid_toml_and_missing_file(tmp_path):
    exc = error_of(tmp_path, "[log\npaths = 1\n")
    assert "not valid TOML" in str(exc)
    with pytest.raises(PipelineError, match="no such file"):
        load_pipeline(tmp_path / "absent.toml")


def test_missing_log_section(tmp_path):
    exc = error_of(tmp_path, 'name = "x"\n')
    assert exc.key_path == "log"


def test_strings_are_data_only(tmp_path):
    text = "__import__('os').remove('rig.csv')"
    spec = load_pipeline(write(tmp_path, f'name = "{text}"\n' + MINIMAL))
    assert spec.name == text
    assert (tmp_path / "rig.csv").is_file()


@pytest.mark.parametrize(
    "section, key, value",
    [
        ("check", "min_fit", "true"),
        ("check", "min_fit", '"80"'),
        ("check", "confidence", '"0.95"'),
        ("preprocess", "holdout", '"0.3"'),
        ("drift", "frequency_shift_percent", "true"),
    ],
)
def test_wrong_types_are_refused_with_the_key(tmp_path, section, key, value):
    from ident.errors import PipelineError
    from ident.io.pipelinefile import load_pipeline

    log = tmp_path / "rig.csv"
    log.write_text("time [s],u,y\n0,1,2\n0.1,2,3\n")
    pipe = tmp_path / "job.toml"
    pipe.write_text(
        'name = "t"\n[log]\npaths = ["rig.csv"]\ninputs = ["u"]\noutputs = ["y"]\n'
        f"[{section}]\n{key} = {value}\n"
    )
    with pytest.raises(PipelineError) as info:
        load_pipeline(pipe)
    assert info.value.key_path == f"{section}.{key}"


def test_validation_logs_period_and_fit_warning(tmp_path):
    (tmp_path / "run2.csv").write_text("time,u,y\n0,0,0\n1,1,0\n", encoding="utf-8")
    body = MINIMAL.replace('outputs = ["y"]', 'outputs = ["y"]\nvalidate_with = ["run2.csv"]\nperiod = 2.5\n'
                           'signal_description = "test.json"') + "[check]\nfit_warning = false\n"
    spec = load_pipeline(write(tmp_path, body))
    assert spec.log.validation_files == ((tmp_path / "run2.csv").resolve(),)
    assert spec.log.period == 2.5 and spec.log.signal_description == (tmp_path / "test.json").resolve()
    assert spec.check.fit_warning is None  # false: no warning level (TOML has no null)
    assert load_pipeline(write(tmp_path, MINIMAL)).check.fit_warning == 50.0  # documented default
    assert spec.to_dict()["log"]["validate_with"] == ["run2.csv"]


@pytest.mark.parametrize(("line", "key"), [
    ('validate_with = ["missing.csv"]', "log.validate_with[1]"),
    ('period = "sometimes"', "log.period"),
    ("period = -1", "log.period"),
])
def test_bad_validation_and_period_keys_are_named(tmp_path, line, key):
    exc = error_of(tmp_path, MINIMAL.replace('outputs = ["y"]', f'outputs = ["y"]\n{line}'))
    assert exc.key_path == key
