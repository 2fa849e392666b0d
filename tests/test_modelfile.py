import json

import numpy as np
import pytest
from numpy.testing import assert_array_equal

from ident.errors import ModelFileError
from ident.io.atomic import OutputExistsError
from ident.io.modelfile import (
    FORMAT_NAME,
    SCHEMA_VERSION,
    dumps_model,
    load_model,
    model_from_dict,
    save_model,
)
from ident.lti.models import OperatingPoint, StateSpaceModel


@pytest.fixture
def model(rng):
    n, m, p = 3, 2, 2
    return StateSpaceModel(
        A=rng.standard_normal((n, n)) * 0.3,
        B=rng.standard_normal((n, m)),
        C=rng.standard_normal((p, n)),
        D=rng.standard_normal((p, m)),
        sample_time=1e-3,
        inputs=("torque", "heater"),
        outputs=("speed", "temp"),
        input_units=("N m", "%"),
        output_units=("rad/s", "degC"),
        operating_point=OperatingPoint([0.8, 40.0], [12.5, 61.2]),
        noise_gain=rng.standard_normal((n, p)),
    )


def test_round_trip_is_bit_exact(model, tmp_path):
    path = save_model(tmp_path / "m.json", model, provenance={"log": {"file": "a.csv"}})
    back = load_model(path)
    for name in ("A", "B", "C", "D", "noise_gain"):
        # exact: floats are written with repr precision (JSON round trip, closed form)
        assert_array_equal(getattr(back.model, name), getattr(model, name))
    assert back.model.sample_time == model.sample_time
    assert back.model.inputs == model.inputs and back.model.outputs == model.outputs
    assert back.model.input_units == model.input_units
    assert_array_equal(back.model.operating_point.outputs, model.operating_point.outputs)
    assert back.provenance["log"] == {"file": "a.csv"}
    assert back.provenance["tool"] == "rigfit"


def test_required_keys_present(model):
    data = json.loads(dumps_model(model))
    assert data["format"] == FORMAT_NAME and data["schema_version"] == SCHEMA_VERSION
    for key in ("sample_time", "inputs", "outputs", "units", "operating_point", "state_space", "provenance"):
        assert key in data
    assert set(data["state_space"]) == {"A", "B", "C", "D"}
    assert set(data["operating_point"]) == {"inputs", "outputs"}
    assert "created_utc" in data["provenance"] and "tool_version" in data["provenance"]


def test_continuous_model_has_null_sample_time(model, tmp_path):
    cont = model.with_changes(sample_time=None)
    path = save_model(tmp_path / "c.json", cont)
    assert json.loads(path.read_text())["sample_time"] is None
    assert load_model(path).model.sample_time is None


def test_refuses_overwrite(model, tmp_path):
    path = save_model(tmp_path / "m.json", model)
    before = path.read_bytes()
    with pytest.raises(OutputExistsError, match="already exists"):
        save_model(path, model.with_changes(sample_time=2e-3))
    assert path.read_bytes() == before
    save_model(path, model.with_changes(sample_time=2e-3), force=True)
    assert load_model(path).model.sample_time == 2e-3


def test_refuses_protected_input(model, tmp_path):
    log = tmp_path / "log.csv"
    log.write_text("t,u,y\n")
    with pytest.raises(Exception, match="input file"):
        save_model(log, model, force=True, protected=(log,))
    assert log.read_text() == "t,u,y\n"


@pytest.mark.parametrize(
    "mutate, message",
    [
        (lambda d: d.update(schema_version=99), "unsupported schema_version 99"),
        (lambda d: d.update(format="other"), "not a rigfit model file"),
        (lambda d: d["state_space"].pop("B"), "missing key 'B'"),
        (lambda d: d["state_space"].update(C=[[1.0]]), "state_space.C must have shape"),
        (lambda d: d.update(sample_time=-1), "sample_time must be a positive number"),
        (lambda d: d["state_space"]["A"][0].__setitem__(0, "x"), "state_space.A must be a matrix"),
        (lambda d: d["operating_point"].update(inputs=[1.0]), "operating_point.inputs must have shape"),
    ],
)
def test_malformed_content_rejected(model, mutate, message):
    data = json.loads(dumps_model(model))
    mutate(data)
    with pytest.raises(ModelFileError, match=message):
        model_from_dict(data, path="m.json")


def test_not_json_and_missing_file(tmp_path):
    bad = tmp_path / "bad.json"
    bad.write_text("{not json")
    with pytest.raises(ModelFileError, match=r"bad.json: not valid JSON \(line 1"):
        load_model(bad)
    with pytest.raises(ModelFileError, match="no such file"):
        load_model(tmp_path / "nope.json")


def test_nan_in_file_rejected(model, tmp_path):
    text = dumps_model(model).replace(repr(float(model.A[0, 0])), "NaN", 1)
    path = tmp_path / "nan.json"
    path.write_text(text)
    with pytest.raises(ModelFileError, match="not finite"):
        load_model(path)


def test_static_gain_model_round_trip(tmp_path):
    static = StateSpaceModel(A=np.zeros((0, 0)), B=np.zeros((0, 1)), C=np.zeros((1, 0)), D=[[2.5]], sample_time=0.1)
    back = load_model(save_model(tmp_path / "s.json", static)).model
    assert back.n_states == 0
    assert_array_equal(back.D, [[2.5]])  # closed form: stored as written


def test_written_file_has_umask_mode(model, tmp_path):
    import os
    import stat

    mask = os.umask(0o022)
    try:
        path = save_model(tmp_path / "perm.json", model)
    finally:
        os.umask(mask)
    # a plain open() under umask 022 gives 0644 (POSIX, common practice)
    assert stat.S_IMODE(path.stat().st_mode) == 0o644


def test_missing_folder_refused_before_any_work(tmp_path):
    from ident.io.atomic import check_output_path

    with pytest.raises(Exception, match="does not exist"):
        check_output_path(tmp_path / "no" / "m.json")


def test_name_list_mismatch_is_named(model):
    data = json.loads(dumps_model(model))
    data["inputs"] = ["torque"]  # the model has two inputs
    with pytest.raises(ModelFileError, match=r"inputs lists 1 name\(s\) and outputs 2, but state_space.D is 2 x 2"):
        model_from_dict(data, path="m.json")
