"""rigfit fleet: bad input is one error line and exit 2 before anything is computed; unit naming;
the [fleet] pipeline table; the fleet table files; the unit column of a log."""

from __future__ import annotations

import json
import sys
import textwrap
from pathlib import Path

import pandas as pd
import pyarrow.parquet as pq
import pytest

from ident.errors import IdentError, PipelineError
from ident.fleet.units import collect_logs, name_units, unit_folders
from ident.io.fleettable import spreadsheet_safe, write_fleet_table
from ident.io.log import read_first_text
from ident.io.pipelinefile import load_pipeline


def _log(path: Path, unit: str | None = None, sep: str = ",") -> Path:
    head = ["time", "u", "y"] + (["unit"] if unit is not None else [])
    rows = [sep.join(head)]
    rows += [sep.join([f"{k * 0.01:.2f}", "1.0", "2.0"] + ([unit] if unit is not None else [])) for k in range(5)]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


def _pipeline(folder: Path, extra: str = "") -> Path:
    path = folder / "job.toml"
    path.write_text(textwrap.dedent("""
        [log]
        paths = ["nowhere/*.csv"]
        inputs = ["u"]
        outputs = ["y"]
        """) + textwrap.dedent(extra), encoding="utf-8")
    return path


def _one_error(result) -> str:
    assert result.exit_code == 2, (result.stdout, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert lines[0].startswith("error: ") and "Traceback" not in result.stderr
    return result.stderr


def test_without_dask_the_error_names_the_extra(tmp_path, run_cli, monkeypatch):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed now raises ImportError
    err = _one_error(run_cli("fleet", _pipeline(tmp_path), _log(tmp_path / "a.csv"), "--out", tmp_path / "runs"))
    assert "rigfit fleet runs on Dask" in err and "pip install 'rigfit[fleet]'" in err
    assert not list(tmp_path.glob("runs/fleet-*"))  # nothing written


@pytest.mark.parametrize("args, words", [
    (["--out", "o", "--resume", "r"], "give either --out"),
    (["--workers", "2", "--scheduler", "tcp://127.0.0.1:9"], "give either --workers"),
    (["--unit-from", "("], "not a valid regular expression"),
    (["--unit-from", "zzz"], "does not match the log path"),
    (["--resume", "."], "not a fleet run folder"),
    (["--reference", "missing.json"], "missing.json"),
])
def test_bad_options_are_one_line_exit_2(tmp_path, run_cli, monkeypatch, args, words):
    monkeypatch.chdir(tmp_path)
    err = _one_error(run_cli("fleet", _pipeline(tmp_path), _log(tmp_path / "a.csv"), *args))
    assert words in err
    assert not list(tmp_path.glob("runs/fleet-*")) and not list(tmp_path.glob("o/fleet-*"))


def test_a_glob_matching_nothing_is_bad_input(tmp_path, run_cli):
    err = _one_error(run_cli("fleet", _pipeline(tmp_path), str(tmp_path / "none_*.csv")))
    assert "no log file matches" in err


def test_without_logs_the_pipeline_paths_must_exist(tmp_path, run_cli):
    err = _one_error(run_cli("fleet", _pipeline(tmp_path)))
    assert "log.paths" in err


def test_two_logs_of_one_unit_are_refused(tmp_path, run_cli):
    (tmp_path / "rig1").mkdir()
    (tmp_path / "rig2").mkdir()
    a, b = _log(tmp_path / "rig1" / "night.csv"), _log(tmp_path / "rig2" / "night.csv")
    err = _one_error(run_cli("fleet", _pipeline(tmp_path), a, b))
    assert "both name unit 'night'" in err and "--unit-from" in err
    assert name_units([a, b], unit_from=r"(rig\d)/") == ("rig1", "rig2")


def test_unit_names_from_regex_column_or_file_name(tmp_path):
    a = _log(tmp_path / "eol_1.csv", unit="SN-0042")
    b = _log(tmp_path / "eol_2.csv")
    c = _log(tmp_path / "x_SN7_y.csv", unit="SN-0043", sep=";")
    assert name_units([a, b, c]) == ("SN-0042", "eol_2", "SN-0043")
    assert name_units([a, b, c], unit_from=r"_(?P<unit>\w+?)\.csv") == ("1", "2", "SN7_y")
    assert unit_folders(["SN-0042", "a/b", ".."])[0] == "SN-0042"
    folders = unit_folders(["SN-0042", "a/b", ".."])
    assert all("/" not in f and not f.startswith(".") for f in folders) and len(set(folders)) == 3


def test_list_file_paths_are_relative_to_it(tmp_path):
    (tmp_path / "logs").mkdir()
    a = _log(tmp_path / "logs" / "a.csv")
    b = _log(tmp_path / "logs" / "b.csv")
    listing = tmp_path / "fleet.txt"
    listing.write_text("# tonight\nlogs/a.csv\n\nlogs/*.csv\n", encoding="utf-8")
    assert collect_logs([], list_file=listing) == (a.resolve(), b.resolve())
    listing.write_text("logs/none_*.csv\n", encoding="utf-8")
    with pytest.raises(IdentError, match="fleet.txt, line 1: no log file matches"):
        collect_logs([], list_file=listing)


def test_read_first_text_reads_the_unit_column(tmp_path):
    path = tmp_path / "eu.csv"
    path.write_text("# logger v2\ntime [s];Unit;u [A]\n0,0;SN 17;1,5\n0,1;SN 17;1,5\n", encoding="utf-8")
    assert read_first_text(path, "unit") == "SN 17"
    assert read_first_text(path, "serial") is None
    frame = pd.DataFrame({"time": [0.0, 0.1], "unit": ["P-9", "P-9"], "u": [1.0, 2.0]})
    frame.to_parquet(tmp_path / "log.parquet")
    assert read_first_text(tmp_path / "log.parquet", "unit") == "P-9"


def test_fleet_table_in_the_pipeline_file(tmp_path):
    model = tmp_path / "golden.json"
    spec = load_pipeline(_pipeline(tmp_path, """
        [fleet]
        unit_from = "SN(\\\\d+)"
        workers = 3
        reference = "golden.json"
        threshold = 4.0
        rare_mode_fraction = 0.25
        """), expand_logs=False)
    assert spec.fleet.unit_from == r"SN(\d+)" and spec.fleet.workers == 3
    assert spec.fleet.reference == model.resolve()
    assert spec.fleet.rule.threshold == 4.0 and spec.fleet.rule.rare_mode_fraction == 0.25
    assert spec.log.files == ()
    with pytest.raises(PipelineError, match="fleet.treshold") as exc:
        load_pipeline(_pipeline(tmp_path, "[fleet]\ntreshold = 3\n"), expand_logs=False)
    assert exc.value.hint == "did you mean 'threshold'?"
    with pytest.raises(PipelineError, match="fleet.workers"):
        load_pipeline(_pipeline(tmp_path, "[fleet]\nworkers = 2\nscheduler = 'tcp://h:8786'\n"), expand_logs=False)
    with pytest.raises(PipelineError, match="fleet.threshold"):
        load_pipeline(_pipeline(tmp_path, "[fleet]\nthreshold = -1\n"), expand_logs=False)


def test_fleet_table_files_are_safe_for_spreadsheets_and_round_trip(tmp_path):
    columns = [("unit", ""), ("status", ""), ("outlier", ""), ("reason", ""), ("gates_passed", ""),
               ("order", ""), ("fit_y_percent", "%"), ("dc_gain_u_to_y", "m per V")]
    rows = [
        {"unit": "=HYPERLINK(\"http://x\")", "status": "ok", "outlier": True, "reason": "-1 dB", "gates_passed": True,
         "order": 3, "fit_y_percent": 97.123456789012345, "dc_gain_u_to_y": -0.1},
        {"unit": "@SUM(A1)", "status": "failed", "outlier": False, "reason": "+bad", "gates_passed": None,
         "order": None, "fit_y_percent": None, "dc_gain_u_to_y": None},
        {"unit": "plain", "status": "ok", "outlier": False, "reason": "", "gates_passed": False,
         "order": 2, "fit_y_percent": 1e-300, "dc_gain_u_to_y": 12.0},
    ]
    csv_path, parquet_path = write_fleet_table(rows, columns, tmp_path / "f.csv", tmp_path / "f.parquet",
                                               metadata={"rule": {"threshold": 3.5}})
    text = csv_path.read_text(encoding="utf-8").splitlines()
    # text cells starting with = @ + - get a quote; numbers never do (-0.1 stays a number)
    assert text[1] == f"\"'=HYPERLINK(\"\"http://x\"\")\",ok,true,'-1 dB,true,3,{97.123456789012345!r},-0.1"
    assert text[2] == "'@SUM(A1),failed,false,'+bad,,,,"
    assert text[3] == "plain,ok,false,,false,2,1e-300,12.0"
    csv = pd.read_csv(csv_path, keep_default_na=False)
    assert csv["unit"].tolist() == ["'=HYPERLINK(\"http://x\")", "'@SUM(A1)", "plain"]
    table = pq.read_table(parquet_path)
    assert table.column("unit").to_pylist() == [r["unit"] for r in rows]  # Parquet keeps the raw text
    assert table.column("gates_passed").to_pylist() == [True, None, False]
    assert table.column("order").to_pylist() == [3, None, 2]
    assert table.column("fit_y_percent").to_pylist()[2] == 1e-300
    assert table.schema.field("dc_gain_u_to_y").metadata[b"unit"] == b"m per V"
    assert json.loads(table.schema.metadata[b"rigfit"])["rule"] == {"threshold": 3.5}
    assert spreadsheet_safe("\tx") == "'\tx" and spreadsheet_safe(-3.0) == -3.0
