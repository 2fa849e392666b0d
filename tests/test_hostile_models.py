"""Hostile and malformed model files: every one is a one-line error (exit status 2), never exit 1.

The model file is checked against its whole schema before any of it is used (README, "Model
files"): JSON numbers only (never text), shapes, finiteness, sizes, nesting, and the provenance
entries rigfit reads back.
"""

import json

import numpy as np
import pytest

from ident.cli import cli
from ident.cli._common import run_guarded
from ident.errors import ModelFileError
from ident.io.modelfile import (
    MAX_MODEL_FILE_BYTES,
    MAX_STATES,
    dumps_model,
    load_model,
    model_from_dict,
    uncertainty_provenance,
)
from ident.lti.covariance import ParameterCovariance
from ident.lti.models import OperatingPoint, StateSpaceModel


@pytest.fixture
def model():
    # an invented 2-state SISO heater model, T = 0.1 s
    return StateSpaceModel(
        A=[[0.9, 0.05], [0.0, 0.8]], B=[[0.1], [0.2]], C=[[1.0, 0.5]], D=[[0.0]], sample_time=0.1,
        inputs=("heater",), outputs=("temp",), input_units=("%",), output_units=("degC",),
        operating_point=OperatingPoint([40.0], [61.2]), noise_gain=[[0.3], [0.1]],
    )


@pytest.fixture
def text(model):
    cov = ParameterCovariance(np.eye(4 + 2 + 2 + 1 + 2)[:, :3] * 1e-3, "gauss", 2, 1, 1)
    pole_cov = np.array([np.eye(2) * 1e-6, np.eye(2) * 2e-6])
    return dumps_model(model, {"log": {"duration_s": 24.0, "n_samples": 240},
                               "estimation": uncertainty_provenance(pole_cov, cov)})


def rigfit(capsys, *args):
    code = run_guarded(cli, [str(a) for a in args])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def refused(capsys, path, needle):
    """``rigfit modes`` on the file: exit 2 with one error line holding ``needle``."""
    code, out, err = rigfit(capsys, "modes", path)
    assert code == 2, err
    lines = err.splitlines()
    assert lines[0].startswith("error: ") and needle in lines[0], err
    assert len([ln for ln in lines if ln.startswith("error")]) == 1
    assert "Traceback" not in err and out == ""


def test_a_good_file_loads(text, tmp_path):
    path = tmp_path / "m.json"
    path.write_text(text)
    loaded = load_model(path)
    # as written above (closed form)
    assert loaded.parameter_covariance().factor.shape == (11, 3)
    assert loaded.pole_covariance().shape == (2, 2, 2)


@pytest.mark.parametrize("digits", [400, 5000])
def test_integer_too_large_for_a_float(text, tmp_path, capsys, digits):
    # 400 digits overflow a float; 5000 pass Python's 4300-digit limit for int(): both exit 2
    data = json.loads(text)
    raw = json.dumps(data).replace('"A": [[0.9,', '"A": [[' + "9" * digits + ",", 1)
    path = tmp_path / "big.json"
    path.write_text(raw)
    refused(capsys, path, "state_space.A holds a value that is not finite")


def test_huge_integer_in_provenance_is_refused_where_read(text, tmp_path, capsys):
    raw = text.replace('"n_samples": 240', '"n_samples": ' + "9" * 5000)
    path = tmp_path / "prov.json"
    path.write_text(raw)
    refused(capsys, path, "provenance.log.n_samples must be an integer")


@pytest.mark.parametrize("where", ["provenance", "units"])
def test_nesting_deep_enough_to_exhaust_recursion(text, tmp_path, capsys, where):
    data = json.loads(text)
    data[where] = None
    raw = json.dumps(data).replace(f'"{where}": null', f'"{where}": ' + "[" * 100_000 + "]" * 100_000)
    path = tmp_path / "deep.json"
    path.write_text(raw)
    refused(capsys, path, "nested too deeply")


def test_nesting_deeper_than_any_model_file(text, tmp_path):
    data = json.loads(text)
    data["provenance"]["extra"] = json.loads("[" * 40 + "]" * 40)
    with pytest.raises(ModelFileError, match="nested more than 32 levels"):
        from ident.io.inputs import parse_json

        parse_json(json.dumps(data), lambda r: ModelFileError(r))


@pytest.mark.parametrize(
    "mutate, needle",
    [
        (lambda d: d.update(units={"inputs": 5, "outputs": ["degC"]}), "units.inputs must be a list of names"),
        (lambda d: d.update(units=["%", "degC"]), "units must be an object"),
        (lambda d: d.update(units={"inputs": [3], "outputs": ["degC"]}), "units.inputs must be a list of names"),
        (lambda d: d.update(units={"inputs": ["%"], "outputs": ["degC"], "x": []}), "unknown key units.'x'"),
        (lambda d: d["state_space"]["A"][0].__setitem__(0, "0.9"), "row 1, column 1 is a string"),
        (lambda d: d["state_space"]["B"][1].__setitem__(0, True), "row 2, column 1 is a boolean"),
        (lambda d: d["state_space"].update(C=[[1.0, "0.5"]]), "state_space.C must be a matrix of numbers"),
        (lambda d: d["operating_point"].update(inputs=["40"]), "operating_point.inputs must be a matrix"),
        (lambda d: d.update(noise_gain=[[0.3], ["0.1"]]), "noise_gain must be a matrix of numbers"),
        (lambda d: d.update(noise_states="1"), "noise_states must be an integer in [0, 2]"),
        (lambda d: d.update(noise_states=3), "noise_states must be an integer in [0, 2]"),
        (lambda d: d.update(sample_time="0.1"), "sample_time must be a positive number or null"),
        (lambda d: d.update(sample_time=1e-300), "sample_time must be between"),
        (lambda d: d.update(inputs="heater"), "inputs must be a list of names"),
        (lambda d: d.update(inputs=[]), "inputs must list 1 to 100 names"),
        (lambda d: d.update(extra=1), "unknown key 'extra'"),
        (lambda d: d["state_space"].update(E=[[1.0]]), "unknown key state_space.'E'"),
        (lambda d: d["state_space"].update(A=[[0.9, 0.05], [0.0]]), "rows differ in length"),
        (lambda d: d.update(provenance=[]), "provenance must be an object"),
        (lambda d: d["provenance"].update(created_utc=5), "provenance.created_utc must be a string"),
        (lambda d: d["provenance"]["log"].update(duration_s="24"), "provenance.log.duration_s must be"),
        (lambda d: d["provenance"]["estimation"].update(pole_covariance=[[[1, 2], [3, "4"]]]),
         "pole_covariance: block 1 must hold finite numbers or null"),
        (lambda d: d["provenance"]["estimation"].update(pole_covariance=[[[1, 2]]] * 3),
         "pole_covariance must be a list of at most 2"),
        (lambda d: d["provenance"]["estimation"]["parameter_covariance"].update(method="guess"),
         "parameter_covariance.method must be one of"),
        (lambda d: d["provenance"]["estimation"]["parameter_covariance"].update(factor=[[0.0]] * 10),
         "parameter_covariance.factor must have shape (11, *)"),
        (lambda d: d["provenance"]["estimation"]["parameter_covariance"]["factor"][0].__setitem__(0, "1"),
         "parameter_covariance.factor must be a matrix of numbers"),
        (lambda d: d["provenance"]["estimation"]["parameter_covariance"].update(
            factor=[[0.0] * 12 for _ in range(11)]), "factor has 12 columns; at most 11"),
    ],
)
def test_schema_violations_are_named(text, tmp_path, capsys, mutate, needle):
    data = json.loads(text)
    mutate(data)
    with pytest.raises(ModelFileError) as info:
        model_from_dict(data, path="m.json")
    assert needle in str(info.value)
    path = tmp_path / "m.json"
    path.write_text(json.dumps(data))
    refused(capsys, path, needle)


def test_nan_and_infinity_are_not_json(text, tmp_path, capsys):
    path = tmp_path / "nan.json"
    path.write_text(json.dumps(json.loads(text)).replace('"A": [[0.9,', '"A": [[Infinity,', 1))
    refused(capsys, path, "holds Infinity, which is not finite")


def test_too_many_states_refused_before_parsing_the_matrix(model, tmp_path, capsys):
    n = MAX_STATES + 1
    data = json.loads(dumps_model(model))
    data["state_space"]["A"] = [[0]] * n  # the count alone decides; the rows are never read
    path = tmp_path / "huge.json"
    path.write_text(json.dumps(data))
    refused(capsys, path, f"the model has {n} states; rigfit reads models of at most {MAX_STATES}")


def test_file_size_capped(tmp_path, capsys, monkeypatch):
    import ident.io.modelfile as mf

    path = tmp_path / "large.json"
    path.write_text(" " * 2048 + "{}")
    monkeypatch.setattr(mf, "MAX_MODEL_FILE_BYTES", 1024)
    refused(capsys, path, "rigfit reads a model file of at most 1 KiB")
    assert MAX_MODEL_FILE_BYTES == 128 * 2**20  # the documented cap (README, "Model files")


def test_not_a_model_file_is_not_quoted(tmp_path, capsys):
    # a JSON file of something else: its content never appears in the message
    path = tmp_path / "secrets.json"
    path.write_text(json.dumps({"format": "token-4f9a8c", "key": "s3cr3t"}))
    code, _, err = rigfit(capsys, "modes", path)
    assert code == 2 and "not a rigfit model file" in err
    assert "4f9a8c" not in err and "s3cr3t" not in err


def test_fifo_and_standard_input_refused_without_blocking(tmp_path, capsys):
    import os

    fifo = tmp_path / "model.pipe"
    os.mkfifo(fifo)
    refused(capsys, fifo, "is a named pipe, not a regular file")
    refused(capsys, "-", "reading a model file from standard input is not supported")
