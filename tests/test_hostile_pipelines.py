"""Pipeline files from others (a pull request run in CI): bounded, confined to their folder, never echoing files.

Rules (README, "Pipeline files from others"): one-line errors for nesting deep enough to exhaust
recursion; log paths and the baseline resolved relative to the pipeline file and confined to its
folder tree unless ``--allow-outside``; globs that start at the root or walk too many folders are
refused; messages never quote a file that is not a log.
"""

import glob
import os
from pathlib import Path

import pytest

import ident.io.pipelinefile as pf
from ident.cli import cli
from ident.cli._common import run_guarded
from ident.errors import PipelineError
from ident.io.expectfile import load_expectations
from ident.io.pipelinefile import bounded_glob, load_pipeline

LOG = "time,u,y\n0,1,2\n0.1,2,3\n0.2,3,5\n"


def pipeline(folder: Path, paths: str, extra: str = "") -> Path:
    path = folder / "job.toml"
    path.write_text(f'[log]\npaths = {paths}\ninputs = ["u"]\noutputs = ["y"]\n{extra}')
    return path


def rigfit(capsys, *args):
    code = run_guarded(cli, [str(a) for a in args])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


@pytest.mark.parametrize("body", ["x = " + "[" * 100_000 + "]" * 100_000,
                                  "x = " + "{a=" * 3000 + "1" + "}" * 3000])
def test_nesting_deep_enough_to_exhaust_recursion_is_one_line(tmp_path, capsys, body):
    path = tmp_path / "deep.toml"
    path.write_text(body + "\n")
    code, out, err = rigfit(capsys, "run", path)
    assert code == 2 and out == ""
    assert err.startswith("error: deep.toml: nested too deeply") and err.count("\n") == 1
    with pytest.raises(PipelineError, match="nested too deeply"):
        load_expectations(path)


def test_nesting_deeper_than_any_pipeline(tmp_path):
    path = tmp_path / "deep.toml"
    path.write_text("x = " + "[" * 40 + "]" * 40 + "\n")
    with pytest.raises(PipelineError, match="nested more than 32 levels"):
        load_pipeline(path)


def test_size_capped(tmp_path, monkeypatch):
    monkeypatch.setattr(pf, "MAX_PIPELINE_BYTES", 100)
    path = pipeline(tmp_path, '["rig.csv"]', "# " + "x" * 200 + "\n")
    with pytest.raises(PipelineError, match="rigfit reads a pipeline file of at most 100 bytes"):
        load_pipeline(path)


def test_paths_are_relative_to_the_pipeline_file(tmp_path, monkeypatch):
    (tmp_path / "logs").mkdir()
    (tmp_path / "logs" / "rig.csv").write_text(LOG)
    pipe = pipeline(tmp_path, '["logs/rig.csv"]')
    monkeypatch.chdir(tmp_path / "logs")  # another current folder changes nothing
    assert load_pipeline(pipe).log.files == ((tmp_path / "logs" / "rig.csv").resolve(),)


@pytest.mark.parametrize("paths", ['["../outside.csv"]', '["{outside}"]', '["link/outside.csv"]',
                                   '["../*.csv"]', '["~/outside.csv"]'])
def test_files_outside_the_folder_tree_need_allow_outside(tmp_path, capsys, paths, monkeypatch):
    home = tmp_path / "home"
    home.mkdir()
    monkeypatch.setenv("HOME", str(home))
    (home / "outside.csv").write_text(LOG)
    (tmp_path / "outside.csv").write_text(LOG)
    job = tmp_path / "job"
    job.mkdir()
    os.symlink(tmp_path, job / "link")  # a link inside the folder pointing out of it
    pipe = pipeline(job, paths.replace("{outside}", str(tmp_path / "outside.csv")))
    with pytest.raises(PipelineError) as info:
        load_pipeline(pipe)
    assert info.value.key_path == "log.paths[1]" and "outside the pipeline's folder" in str(info.value)
    assert "--allow-outside" in info.value.hint
    assert load_pipeline(pipe, allow_outside=True).log.files  # allowed when asked
    code, _, err = rigfit(capsys, "run", pipe)
    assert code == 2 and "--allow-outside" in err


def test_baseline_outside_the_folder_tree_needs_allow_outside(tmp_path):
    job = tmp_path / "job"
    job.mkdir()
    (job / "rig.csv").write_text(LOG)
    pipe = pipeline(job, '["rig.csv"]', '[drift]\nbaseline = "../model.json"\n')
    with pytest.raises(PipelineError) as info:
        load_pipeline(pipe)
    assert info.value.key_path == "drift.baseline"
    assert load_pipeline(pipe, allow_outside=True).drift.baseline == (tmp_path / "model.json").resolve()


@pytest.mark.parametrize(("extra", "key"), [('validate_with = ["../run2.csv"]', "log.validate_with[1]"),
                                             ('signal_description = "../test.json"', "log.signal_description")])
def test_validation_logs_and_signal_description_outside_the_folder_tree_need_allow_outside(tmp_path, extra,
                                                                                             key):
    job = tmp_path / "job"
    job.mkdir()
    (job / "rig.csv").write_text(LOG)
    (tmp_path / "run2.csv").write_text(LOG)
    pipe = job / "job.toml"
    pipe.write_text(f'[log]\npaths = ["rig.csv"]\ninputs = ["u"]\noutputs = ["y"]\n{extra}\n')
    with pytest.raises(PipelineError) as info:
        load_pipeline(pipe)
    assert info.value.key_path == key and "outside the pipeline's folder" in str(info.value)
    assert "--allow-outside" in info.value.hint
    spec = load_pipeline(pipe, allow_outside=True)  # allowed when asked
    if key == "log.validate_with[1]":
        assert spec.log.validation_files == ((tmp_path / "run2.csv").resolve(),)
    else:
        assert spec.log.signal_description == (tmp_path / "test.json").resolve()


def test_a_mapping_built_in_python_is_not_confined(tmp_path):
    from ident.io.pipelinefile import parse_pipeline

    (tmp_path / "rig.csv").write_text(LOG)
    spec = parse_pipeline({"log": {"paths": [str(tmp_path / "rig.csv")], "inputs": ["u"], "outputs": ["y"]}})
    assert spec.log.files == ((tmp_path / "rig.csv").resolve(),)


@pytest.mark.parametrize("pattern", ["/**/*.csv", "/*/rig.csv", "/../**/*.csv"])
def test_globs_from_the_root_are_refused_even_when_allowed_outside(tmp_path, pattern):
    pipe = pipeline(tmp_path, f'["{pattern}"]')
    with pytest.raises(PipelineError, match="starts at the file system root"):
        load_pipeline(pipe, allow_outside=True)


def test_a_relative_glob_climbing_to_the_root_is_refused(tmp_path):
    climb = "../" * (len(tmp_path.parts) + 2)
    pipe = pipeline(tmp_path, f'["{climb}**/*.csv"]')
    with pytest.raises(PipelineError, match="starts at the file system root"):
        load_pipeline(pipe, allow_outside=True)


def test_globs_walking_too_many_folders_are_refused(tmp_path, monkeypatch):
    for k in range(30):
        (tmp_path / "data" / f"day{k:02d}").mkdir(parents=True)
    (tmp_path / "data" / "day07" / "rig.csv").write_text(LOG)
    pipe = pipeline(tmp_path, '["data/**/*.csv"]')
    monkeypatch.setattr(pf, "MAX_GLOB_FOLDERS", 10)
    with pytest.raises(PipelineError, match="would list more than 10 folders"):
        load_pipeline(pipe)
    monkeypatch.setattr(pf, "MAX_GLOB_FOLDERS", 10_000)
    assert [p.name for p in load_pipeline(pipe).log.files] == ["rig.csv"]


def test_bounded_glob_matches_the_standard_glob(tmp_path):
    # glob.glob(recursive=True) is the reference, files only, sorted
    for rel in ("a/x.csv", "a/b/y.csv", "a/b/c/z.csv", "a/.hidden/h.csv", "a/.dot.csv", "a/b/notes.txt",
                "top.csv", "a/b/c/Z.CSV"):
        (tmp_path / rel).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / rel).write_text("x")
    for pattern in ("**/*.csv", "a/**/*.csv", "a/*/*.csv", "a/b/**", "*.csv", "a/?/y.csv", "a/[bc]/*.csv",
                    "a/.*", "**/c/*"):
        want = sorted(Path(p) for p in glob.glob(str(tmp_path / pattern), recursive=True) if Path(p).is_file())
        got = bounded_glob(tmp_path, tuple(Path(pattern).parts))
        assert got == want, pattern


def test_messages_never_quote_a_file_that_is_not_a_log(tmp_path, capsys):
    (tmp_path / "deploy.key").write_text("token = 'ghp_4f9a8c2e1d'\npassword: hunter2\n")
    pipe = pipeline(tmp_path, '["deploy.key"]')
    code, out, err = rigfit(capsys, "run", pipe)
    assert code == 2 and "does not look like a rig log" in err
    assert "ghp_" not in err + out and "hunter2" not in err + out


def test_run_cli_offers_allow_outside(tmp_path, capsys):
    code, out, _ = rigfit(capsys, "run", "--help")
    assert code == 0 and "--allow-outside" in out


def test_fleet_reference_outside_the_folder_tree_needs_allow_outside(tmp_path):
    # common practice, no source: the same confinement as the [drift] baseline
    job = tmp_path / "job"
    job.mkdir()
    (job / "rig.csv").write_text(LOG)
    pipe = pipeline(job, '["rig.csv"]', '[fleet]\nreference = "../golden.json"\n')
    with pytest.raises(PipelineError) as info:
        load_pipeline(pipe)
    assert info.value.key_path == "fleet.reference"
    assert load_pipeline(pipe, allow_outside=True).fleet.reference == (tmp_path / "golden.json").resolve()


def test_fleet_globs_are_bounded_like_pipeline_globs(tmp_path, monkeypatch):
    # the glob is matched as glob.glob(recursive=True) matches it, but never from the root
    from ident.errors import IdentError
    from ident.fleet.units import collect_logs

    for name in ("a/u1.csv", "a/b/u2.csv", "c/u3.txt"):
        (tmp_path / name).parent.mkdir(parents=True, exist_ok=True)
        (tmp_path / name).write_text(LOG)
    monkeypatch.chdir(tmp_path)
    expected = sorted(Path(p).resolve() for p in glob.glob("**/*.csv", recursive=True))
    assert sorted(collect_logs(["**/*.csv"])) == expected
    with pytest.raises(IdentError, match="file system root"):
        collect_logs(["/*/*.csv"])
