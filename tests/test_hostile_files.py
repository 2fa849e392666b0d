"""Outputs, inputs, interrupts and killed processes: files are never corrupted or left half written.

Rules (README, "Files rigfit writes"): an input is never an output; ``--force`` replaces regular
files only; names too long for the file system are refused before any work; the outputs of one
call are written all or nothing; temporary files and run folders of killed processes are removed
by the next write into the same folder; Ctrl-C exits 130 with ``interrupted`` and leaves nothing
at a final path; a pipe or standard input given as an input is refused at once.
"""

import os
import signal
import subprocess
import sys
import textwrap
from pathlib import Path

import numpy as np
import pytest

import ident.io.atomic as atomic
from ident.cli import cli
from ident.cli._common import run_guarded
from ident.errors import IdentError
from ident.io.atomic import (
    OutputExistsError,
    check_output_path,
    is_temporary_name,
    new_folder,
    remove_stale,
    write_atomic,
    write_many,
)

REPO = Path(__file__).resolve().parents[1]


def write_log(path: Path, n: int = 600) -> Path:
    """A first-order lag driven by a random binary input (invented), T = 0.01 s."""
    rng = np.random.default_rng(3)
    u = np.sign(rng.standard_normal(n))
    y = np.zeros(n)
    for k in range(1, n):
        y[k] = 0.9 * y[k - 1] + 0.1 * u[k - 1]
    y += 0.001 * rng.standard_normal(n)
    rows = ["time,u,y"] + [f"{k * 0.01:.2f},{a:.0f},{b:.6f}" for k, (a, b) in enumerate(zip(u, y, strict=True))]
    path.write_text("\n".join(rows) + "\n")
    return path


def rigfit(capsys, *args):
    code = run_guarded(cli, [str(a) for a in args])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def dead_pid() -> int:
    """A process id that belongs to no running process (a child that has exited and been reaped)."""
    proc = subprocess.Popen([sys.executable, "-c", "pass"])
    proc.wait()
    return proc.pid


# --------------------------------------------------------------------------- inputs never outputs


@pytest.mark.parametrize("force", [False, True])
def test_input_log_is_never_the_output(tmp_path, capsys, force):
    log = write_log(tmp_path / "log.csv")
    before = log.read_bytes()
    link = tmp_path / "alias.csv"
    os.link(log, link)  # the same file under another name
    for target in (log, link, tmp_path / "sub" / ".." / "log.csv"):
        (tmp_path / "sub").mkdir(exist_ok=True)
        args = ["fit", log, "--input", "u", "--output", "y", "-o", target, "--quiet"]
        code, _, err = rigfit(capsys, *(args + (["--force"] if force else [])))
        assert code == 2 and "refusing to write over the input file" in err, err
    assert log.read_bytes() == before


def test_model_and_expectations_files_are_never_outputs(tmp_path, capsys):
    log = write_log(tmp_path / "log.csv")
    model = tmp_path / "m.json"
    assert rigfit(capsys, "fit", log, "--input", "u", "--output", "y", "-o", model, "--quiet")[0] == 0
    expect = tmp_path / "expect.toml"
    expect.write_text("[expect]\nstable = true\n")
    saved = {p: p.read_bytes() for p in (model, expect)}
    for target in (model, expect):
        code, _, err = rigfit(capsys, "modes", model, "--expect", expect, "--plot", target, "--force")
        assert code == 2 and "input file" in err, err
    code, _, err = rigfit(capsys, "convert", model, "--to", "ss", "-o", model, "--force")
    assert code == 2 and "input file" in err
    code, _, err = rigfit(capsys, "check", log, model, "--plot", tmp_path, "--force")
    assert code == 0, err  # figures beside the inputs are fine ...
    assert {p: p.read_bytes() for p in saved} == saved  # ... and the inputs are untouched


def test_force_replaces_regular_files_only(tmp_path):
    os.mkfifo(tmp_path / "pipe")
    (tmp_path / "folder").mkdir()
    (tmp_path / "target").write_text("kept")
    os.symlink(tmp_path / "target", tmp_path / "link")
    for name, kind in (("pipe", "a named pipe"), ("folder", "a folder"), ("link", "a symbolic link")):
        with pytest.raises(IdentError, match=f"is {kind}; rigfit replaces only regular files"):
            write_atomic(tmp_path / name, "x", force=True)
    with pytest.raises(IdentError, match="is a device"):
        check_output_path("/dev/null", force=True)
    assert (tmp_path / "target").read_text() == "kept"


def test_overlong_names_refused_before_the_fit(tmp_path, capsys, monkeypatch):
    log = write_log(tmp_path / "log.csv")
    calls = []
    import ident.estimate.identify as identify_module

    monkeypatch.setattr(identify_module, "identify", lambda *a, **k: calls.append(1))
    name = "m" * 300 + ".json"  # more than the 255 bytes Linux file systems allow
    code, _, err = rigfit(capsys, "fit", log, "--input", "u", "--output", "y", "-o", tmp_path / name)
    assert code == 2 and "file name is 305 bytes long" in err
    assert calls == []  # refused before the fit


def test_run_folder_paths_too_long_refused_before_the_run(tmp_path, capsys, monkeypatch):
    from test_pipeline import write_pipeline, write_resonant_log

    import ident.pipeline as pipeline_module

    write_resonant_log(tmp_path / "rig.csv")
    pipe = write_pipeline(tmp_path)
    monkeypatch.setattr(pipeline_module, "_compute", lambda *a: pytest.fail("the run started"))
    deep = tmp_path / "/".join(["d" * 200] * 25)  # 5000 bytes: longer than PATH_MAX (4096)
    code, _, err = rigfit(capsys, "run", pipe, "--out", deep)
    assert code == 2 and "path too long for this file system" in err, err
    code, _, err = rigfit(capsys, "run", pipe, "--out", tmp_path / ("r" * 300))
    assert code == 2 and "longer than this file system allows" in err, err
    assert sorted(p.name for p in tmp_path.iterdir()) == ["job.toml", "rig.csv"]


def test_check_plot_folder_with_overlong_path_refused_before_validation(tmp_path, capsys):
    log = write_log(tmp_path / "log.csv")
    model = tmp_path / "m.json"
    rigfit(capsys, "fit", log, "--input", "u", "--output", "y", "-o", model, "--quiet")
    code, _, err = rigfit(capsys, "check", log, model, "--plot", tmp_path / ("p" * 300))
    assert code == 2 and "longer than this file system allows" in err
    assert not any(p.name.startswith("ppp") for p in tmp_path.iterdir())


# --------------------------------------------------------------------------- all or nothing


def test_write_many_removes_what_it_wrote_and_restores_what_it_replaced(tmp_path, monkeypatch):
    old = tmp_path / "b.png"
    old.write_bytes(b"old figure")
    calls = []
    real = atomic._commit

    def failing(tmp, target, force):
        calls.append(target.name)
        if len(calls) == 3:
            raise OSError(28, "No space left on device")
        return real(tmp, target, force)

    monkeypatch.setattr(atomic, "_commit", failing)
    items = [(tmp_path / "a.png", b"new a"), (old, b"new b"), (tmp_path / "c.png", b"new c")]
    with pytest.raises(OSError, match="No space left"):
        write_many(items, force=True)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["b.png"]  # a.png gone, no temporaries
    assert old.read_bytes() == b"old figure"  # put back


def test_check_plot_failure_part_way_leaves_no_figures(tmp_path, capsys, monkeypatch):
    log = write_log(tmp_path / "log.csv")
    model = tmp_path / "m.json"
    rigfit(capsys, "fit", log, "--input", "u", "--output", "y", "-o", model, "--quiet")
    real = atomic._commit
    count = []

    def failing(tmp, target, force):
        count.append(1)
        if len(count) == 2:
            raise OSError(28, "No space left on device")
        return real(tmp, target, force)

    monkeypatch.setattr(atomic, "_commit", failing)
    code, _, err = rigfit(capsys, "check", log, model, "--plot", tmp_path / "figs")
    assert code != 0
    assert not (tmp_path / "figs").exists()  # the folder this call created is gone with its files


def test_excite_outputs_all_or_nothing(tmp_path, capsys, monkeypatch):
    real = atomic._commit

    def failing(tmp, target, force):
        if target.suffix == ".png":
            raise OSError(28, "No space left on device")
        return real(tmp, target, force)

    monkeypatch.setattr(atomic, "_commit", failing)
    code, _, _ = rigfit(capsys, "excite", "--kind", "prbs", "--sample-rate", "100", "--band", "1", "10",
                        "--range", "-1", "1", "-o", tmp_path / "s.csv", "--describe", tmp_path / "s.json",
                        "--plot", tmp_path / "s.png")
    assert code != 0
    assert list(tmp_path.iterdir()) == []


def test_figure_names_are_unique_per_signal(tmp_path, capsys):
    from ident.cli.check_cmd import _figure_names

    names = _figure_names(("u",), ("y a", "y_a", "Y_A", "$y$"))
    files = list(names.values())
    assert len({f.lower() for f in files}) == len(files)  # unique even ignoring case
    assert names[("residuals", 0)] == "residuals_y_a.png"
    assert names[("residuals", 1)] == "residuals_y_a-2.png"
    long = _figure_names(("u",), ("x" * 300,))
    assert all(len(f) < 255 for f in long.values())


# --------------------------------------------------------------------------- killed processes


def test_stale_temporaries_of_dead_processes_are_removed(tmp_path):
    pid = dead_pid()
    host = atomic._host_tag()
    stale = tmp_path / f".model.json.rigfit-{pid}-{host}.1a2b3c4d.tmp"
    stale.write_text("half")
    folder = tmp_path / f".20261201T000000Z-abcd1234.rigfit-{pid}-{host}.5e6f7a8b.tmp"
    folder.mkdir()
    (folder / "model.json").write_text("{}")
    mine = tmp_path / f".other.rigfit-{os.getpid()}-{host}.0badcafe.tmp"  # a live process: kept
    mine.write_text("live")
    foreign = tmp_path / f".x.rigfit-{pid}-00000000.11111111.tmp"  # another host: kept
    foreign.write_text("elsewhere")
    unrelated = tmp_path / ".model.json.tmp"
    unrelated.write_text("not ours")
    assert is_temporary_name(stale.name) and not is_temporary_name(unrelated.name)
    write_atomic(tmp_path / "next.json", "{}")  # any write into the folder sweeps it
    left = sorted(p.name for p in tmp_path.iterdir())
    assert left == sorted([mine.name, foreign.name, unrelated.name, "next.json"])
    assert remove_stale(tmp_path) == []


def test_killed_writer_leaves_only_a_temporary_that_the_next_write_removes(tmp_path):
    # a child writes a model through the real code path and is killed (SIGKILL) between the
    # temporary file and the rename: no file at the final path, only a named temporary
    code = textwrap.dedent(f"""
        import os, signal
        import ident.io.atomic as atomic
        def killed(tmp, target, force):
            os.kill(os.getpid(), signal.SIGKILL)
        atomic._commit = killed
        atomic.write_atomic({str(tmp_path / "model.json")!r}, "{{}}")
    """)
    proc = subprocess.Popen([sys.executable, "-c", code], env={**os.environ, "PYTHONPATH": str(REPO)})
    assert proc.wait() == -signal.SIGKILL
    left = [p.name for p in tmp_path.iterdir()]
    assert len(left) == 1 and is_temporary_name(left[0]) and f"-{proc.pid}-" in left[0]
    write_atomic(tmp_path / "other.json", "{}")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["other.json"]


def test_run_folder_is_all_or_nothing(tmp_path, monkeypatch):
    names = []
    with pytest.raises(RuntimeError), new_folder(tmp_path, lambda k: f"run-{k}") as (tmp, final):
        (tmp / "model.json").write_text("{}")
        names.append(final())
        raise RuntimeError("the report failed")
    assert names == ["run-1"] and list(tmp_path.iterdir()) == []
    with new_folder(tmp_path, lambda k: f"run-{k}") as (tmp, final):
        (tmp / "model.json").write_text("{}")
        assert tmp.name.startswith(".run-1.rigfit-") and not (tmp_path / "run-1").exists()
    assert [p.name for p in tmp_path.iterdir()] == ["run-1"]
    assert (tmp_path / "run-1" / "model.json").is_file()
    with new_folder(tmp_path, lambda k: f"run-{k}") as (tmp, final):
        assert final() == "run-2"  # an existing folder is never reused


def test_interrupted_pipeline_run_leaves_no_run_folder(tmp_path):
    from test_pipeline import write_pipeline, write_resonant_log

    write_resonant_log(tmp_path / "rig.csv")
    pipe = write_pipeline(tmp_path)
    code = textwrap.dedent(f"""
        import os, signal
        import ident.io.atomic as atomic
        real = atomic.write_many
        def interrupted(items, **kw):
            if any(str(p).endswith("summary.json") for p, _ in items):
                os.kill(os.getpid(), signal.SIGINT)
            return real(items, **kw)
        atomic.write_many = interrupted
        from ident.cli import main
        main(["run", {str(pipe)!r}, "--quiet"])
    """)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(REPO)})
    assert proc.returncode == 130 and proc.stderr == "interrupted\n", proc.stderr
    runs = tmp_path / "runs"
    assert not runs.exists() or list(runs.iterdir()) == []


# --------------------------------------------------------------------------- Ctrl-C


def test_ctrl_c_exits_130_with_nothing_at_the_final_path(tmp_path):
    log = write_log(tmp_path / "log.csv")
    code = textwrap.dedent(f"""
        import os, signal
        import ident.io.atomic as atomic
        real = atomic._commit
        def interrupted(tmp, target, force):
            os.kill(os.getpid(), signal.SIGINT)  # Ctrl-C while the model is being written
            return real(tmp, target, force)
        atomic._commit = interrupted
        from ident.cli import main
        main(["fit", {str(log)!r}, "--input", "u", "--output", "y", "-o", {str(tmp_path / "m.json")!r},
              "--quiet"])
    """)
    proc = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          env={**os.environ, "PYTHONPATH": str(REPO)})
    assert proc.returncode == 130  # 128 + SIGINT, as shells report it
    assert proc.stderr == "interrupted\n" and proc.stdout == ""
    assert sorted(p.name for p in tmp_path.iterdir()) == ["log.csv"]  # no model, no temporary


def test_ctrl_c_in_process_is_130(tmp_path, capsys, monkeypatch):
    import ident.io.log as log_module

    def interrupted(*args, **kwargs):
        raise KeyboardInterrupt

    monkeypatch.setattr(log_module, "read_log", interrupted)
    code, out, err = rigfit(capsys, "fit", write_log(tmp_path / "log.csv"), "--input", "u", "--output", "y")
    assert code == 130 and err == "interrupted\n" and out == ""


# --------------------------------------------------------------------------- pipes and standard input


@pytest.mark.parametrize("command", ["fit", "inspect"])
def test_named_pipe_as_log_is_refused_at_once(tmp_path, command):
    fifo = tmp_path / "log.pipe"
    os.mkfifo(fifo)
    args = [sys.executable, "-m", "ident", command, str(fifo)]
    if command == "fit":
        args += ["--input", "u", "--output", "y"]
    # nothing writes to the pipe: a reader that opened it would wait forever (the timeout fails the test)
    proc = subprocess.run(args, capture_output=True, text=True, timeout=60,
                          env={**os.environ, "PYTHONPATH": str(REPO)})
    assert proc.returncode == 2
    assert "is a named pipe, not a regular file" in proc.stderr and "save it to a file first" in proc.stderr


def test_standard_input_as_log_is_refused(tmp_path):
    for name in ("-", "/dev/stdin"):
        proc = subprocess.run([sys.executable, "-m", "ident", "fit", name, "--input", "u", "--output", "y"],
                              input="time,u,y\n0,1,2\n", capture_output=True, text=True, timeout=60,
                              env={**os.environ, "PYTHONPATH": str(REPO)})
        assert proc.returncode == 2, proc.stderr
        assert "standard input" in proc.stderr or "named pipe" in proc.stderr


def test_existing_output_without_force_is_refused(tmp_path):
    path = tmp_path / "m.json"
    path.write_text("kept")
    with pytest.raises(OutputExistsError):
        write_atomic(path, "new")
    assert path.read_text() == "kept"
