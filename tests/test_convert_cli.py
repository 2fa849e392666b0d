import json

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.io.modelfile import load_model, save_model
from ident.lti.models import OperatingPoint, StateSpaceModel

# scipy's reference dfreqresp goes through polynomials and warns about their conditioning;
# the accuracy is asserted explicitly instead
pytestmark = pytest.mark.filterwarnings("ignore::scipy.signal.BadCoefficients")


@pytest.fixture
def zoh_example(tmp_path):
    # G(s) = 1/(s(s+1)), T = 1 s, discretised with scipy.signal.cont2discrete (ZOH)
    A, B, C, D, _ = signal.cont2discrete(signal.tf2ss([1.0], [1.0, 1.0, 0.0]), 1.0, method="zoh")
    model = StateSpaceModel(A, B, C, D, sample_time=1.0, inputs=("force",), outputs=("position",),
                            input_units=("N",), output_units=("m",),
                            operating_point=OperatingPoint([0.0], [0.0]))
    return save_model(tmp_path / "plant.json", model)


def test_choice_sets_match_core():
    from ident.cli.convert_cmd import convert
    from ident.lti.discretize import DISCRETIZE_METHODS
    from ident.lti.realization import REALIZATIONS

    choices = {p.name: tuple(p.type.choices) for p in convert.params if hasattr(p.type, "choices")}
    assert choices["method"] == DISCRETIZE_METHODS
    assert choices["realization"] == REALIZATIONS


def test_tf_json_matches_textbook(run_cli, zoh_example):
    result = run_cli("convert", zoh_example, "--to", "tf", "--json")
    assert result.exit_code == 0, result.stderr
    data = json.loads(result.stdout)
    assert data["sample_time"] == 1.0
    (ch,) = data["channels"]
    assert ch["input"] == "force" and ch["output"] == "position"
    # Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed., ZOH equivalent of
    # 1/(s(s+1)) with T = 1: (0.3679 z + 0.2642) / (z^2 - 1.3679 z + 0.3679); 4 printed digits
    assert_allclose(ch["num"], [0.3679, 0.2642], atol=5e-5)
    assert_allclose(ch["den"], [1.0, -1.3679, 0.3679], atol=5e-5)


# Snapshot of the text display of the ZOH equivalent of 1/(s(s+1)) at T = 1 s. Every number is a
# closed form (Franklin, Powell & Workman, Digital Control of Dynamic Systems, 3rd ed., ZOH
# equivalents): numerator e^-1 z + (1 - 2 e^-1) = 0.367879 z + 0.264241, denominator
# (z - 1)(z - e^-1) = z^2 - 1.36788 z + 0.367879, zero -(1 - 2 e^-1)/e^-1 = -0.718282 (negative
# real: no continuous equivalent), poles e^-1 (time constant 1 s) and 1 (the integrator).
TF_SNAPSHOT = """\
transfer functions (discrete time, sample time 1 s); coefficients in descending powers of z

force [N] -> position [m]
  gain 0.367879 m/N (leading coefficient of the numerator)
        z             |z|  frequency [Hz]  damping ratio  time constant [s]  note
  zero  -0.718282  0.7183               -              -                  -  no continuous equivalent
  pole  0.367879   0.3679               -              -                  1
  pole  1               1               -              -                  -  integrator
  numerator   = [0.367879, 0.264241]
  denominator = [1, -1.36788, 0.367879]
"""


def test_tf_text_snapshot(run_cli, zoh_example):
    result = run_cli("convert", zoh_example, "--to", "tf")
    assert result.exit_code == 0
    assert result.stdout == TF_SNAPSHOT
    # not the numerator-over-dashes-over-denominator picture
    assert "----" not in result.stdout


def test_tf_text_gives_frequency_and_damping_of_a_pair():
    from ident.display import transfer_function_text
    from ident.lti.models import TransferFunctionModel

    # s^2 + 2 zeta wn s + wn^2 with wn = 2 pi 10 rad/s, zeta = 0.05 (closed form: f = 10 Hz,
    # damping 0.05, time constant 1 / (zeta wn) = 0.3183 s)
    wn = 2 * np.pi * 10.0
    tf = TransferFunctionModel(num=[[[wn**2]]], den=[[[1.0, 2 * 0.05 * wn, wn**2]]], sample_time=None,
                               inputs=("u",), outputs=("y",))
    text = transfer_function_text(tf)
    (row,) = [ln for ln in text.splitlines() if ln.strip().startswith("pole pair")]
    assert row.split()[-3:] == ["10", "0.05", "0.3183"]
    assert "descending powers of s" in text


def test_continuous_round_trip(run_cli, zoh_example, tmp_path):
    out = tmp_path / "cont.json"
    result = run_cli("convert", zoh_example, "--to", "continuous", "-o", out)
    assert result.exit_code == 0, result.stderr
    data = json.loads(out.read_text())
    assert data["sample_time"] is None
    cont = load_model(out).model
    # poles of 1/(s(s+1)) are 0 and -1 (closed form); logm inverse recovers them to rounding
    assert_allclose(np.sort(cont.poles().real), [-1.0, 0.0], atol=1e-9)
    back = tmp_path / "back.json"
    assert run_cli("convert", out, "--to", "discrete", "--sample-time", "1", "-o", back).exit_code == 0
    orig = load_model(zoh_example).model
    w = np.linspace(0.01, 0.45, 20)
    g1 = signal.dfreqresp((orig.A, orig.B, orig.C, orig.D, 1.0), w=2 * np.pi * w)[1]
    m2 = load_model(back).model
    g2 = signal.dfreqresp((m2.A, m2.B, m2.C, m2.D, 1.0), w=2 * np.pi * w)[1]
    assert_allclose(g2, g1, rtol=1e-8)  # exact round trip up to logm/expm rounding


def test_refusals(run_cli, zoh_example, tmp_path):
    before = zoh_example.read_bytes()
    r = run_cli("convert", zoh_example, "--to", "ss", "-o", zoh_example, "--force")
    assert r.exit_code == 2 and "input file" in r.stderr
    assert zoh_example.read_bytes() == before
    out = tmp_path / "x.json"
    out.write_text("keep")
    r = run_cli("convert", zoh_example, "--to", "ss", "-o", out)
    assert r.exit_code == 2 and "already exists" in r.stderr and out.read_text() == "keep"
    r = run_cli("convert", zoh_example, "--to", "tf", "-o", tmp_path / "tf.json")
    assert r.exit_code == 2 and "cannot be written" in r.stderr
    r = run_cli("convert", zoh_example, "--to", "discrete")
    assert r.exit_code == 2 and "--sample-time" in r.stderr
    assert "Traceback" not in r.stderr


def test_negative_real_pole_refused(run_cli, tmp_path):
    model = StateSpaceModel([[-0.5]], [[1.0]], [[1.0]], [[0.0]], sample_time=0.01)
    path = save_model(tmp_path / "neg.json", model)
    r = run_cli("convert", path, "--to", "continuous")
    assert r.exit_code == 2
    assert "-0.5" in r.stderr
    assert r.stderr.startswith("error:")


def test_modal_realization_keeps_response(run_cli, zoh_example, tmp_path):
    out = tmp_path / "modal.json"
    assert run_cli("convert", zoh_example, "--to", "ss", "--realization", "modal", "-o", out).exit_code == 0
    a, b = load_model(zoh_example).model, load_model(out).model
    assert_allclose(np.sort(b.poles().real), np.sort(a.poles().real), atol=1e-12)
    # Markov parameters C A^k B are realisation invariant (standard result)
    for k in range(5):
        assert_allclose(b.C @ np.linalg.matrix_power(b.A, k) @ b.B,
                        a.C @ np.linalg.matrix_power(a.A, k) @ a.B, rtol=1e-10, atol=1e-12)


def test_readable_ss_shows_operating_point(run_cli, zoh_example):
    r = run_cli("convert", zoh_example, "--to", "ss")
    assert r.exit_code == 0
    # plain nested arrays, one legend line for the order of states, inputs and outputs
    # (A of the ZOH example: cont2discrete of tf2ss(1, [1, 1, 0]) at T = 1 s, closed form e^-1)
    assert "operating point" in r.stdout
    assert "order: x = 2 state(s) in the model's coordinates; u = [force]; y = [position]" in r.stdout
    assert "A = [[0.367879, 0],\n     [0.632121, 1]]  (2 x 2)" in r.stdout
    assert "x1" not in r.stdout and "u1" not in r.stdout


def test_method_refused_where_it_does_not_apply(run_cli, zoh_example):
    r = run_cli("convert", zoh_example, "--to", "tf", "--method", "tustin")
    assert r.exit_code == 2 and "--method applies only" in r.stderr


def test_tf_pole_table_shows_a_pole_at_the_stability_boundary_as_an_integrator(run_cli, tmp_path):
    # poles at |z| = STABLE_RADIUS = 1 - 1e-9 (where the refinement holds a pole it cannot tell from an
    # integrator) and 0.5, a zero at z = 1, T = 2 s (invented). -T / ln z of the first would be
    # 2 / 1e-9 = 2e9 s (closed form): a figure of rounding, shown as "-" with the note "integrator";
    # the zero at z = 1 blocks the DC component (a differentiator)
    from ident.estimate.sensitivity import STABLE_RADIUS

    A, B, C, D = signal.tf2ss([1.0, -1.0], np.poly([STABLE_RADIUS, 0.5]))
    path = save_model(tmp_path / "boundary.json", StateSpaceModel(A, B, C, D, sample_time=2.0, inputs=("u",),
                                                                   outputs=("y",)))
    out = run_cli("convert", path, "--to", "tf").stdout
    assert "2e+09" not in out
    rows = [ln.split() for ln in out.splitlines() if ln.strip().startswith(("pole", "zero"))]
    # -T / ln 0.5 = 2.885 s (closed form)
    assert rows == [["zero", "1", "1", "-", "-", "-", "differentiator"],
                    ["pole", "0.5", "0.5", "-", "-", "2.885"],
                    ["pole", "1", "1", "-", "-", "-", "integrator"]]
