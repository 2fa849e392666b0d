"""Tests of ``rigfit modes``."""

from __future__ import annotations

import cmath
import json
import math

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy import signal

from ident.assess.modes import FLAGS
from ident.io.modelfile import save_model
from ident.lti.models import StateSpaceModel

T = 1e-3


def _pair(zeta: float, f_hz: float) -> list[complex]:
    wn = 2 * math.pi * f_hz
    z = cmath.exp(complex(-zeta * wn, wn * math.sqrt(1 - zeta**2)) * T)  # z = exp(sT), closed form
    return [z, z.conjugate()]


def _model(poles, zeros=(), dc=40.0) -> StateSpaceModel:
    poles = np.asarray(poles, complex)
    zeros = np.asarray(zeros, complex)
    k = dc * abs(np.prod(1 - poles)) / abs(np.prod(1 - zeros))  # G(1) = dc, closed form
    A, B, C, D = signal.zpk2ss(zeros, poles, k)
    return StateSpaceModel(
        A=A.real, B=B.real, C=C.real, D=D.real, sample_time=T,
        inputs=["motor_torque_cmd"], outputs=["motor_speed"],
        input_units=["N m"], output_units=["rad/s"],
    )


@pytest.fixture
def clean_file(tmp_path):
    path = tmp_path / "clean.json"
    save_model(path, _model([*_pair(0.3, 32.0), 0.98]))
    return path


@pytest.fixture
def resonant_file(tmp_path):
    """A lightly damped 32 Hz mode (damping 0.01) and a pole on the negative real axis."""
    path = tmp_path / "resonant.json"
    save_model(path, _model([*_pair(0.01, 32.0), -0.6, 0.98]))
    return path


def test_flag_choices_match_the_core():
    from ident.cli.modes_cmd import modes

    (fail_on,) = [p for p in modes.params if p.name == "fail_on"]
    assert tuple(fail_on.type.choices) == FLAGS


def test_text_table_has_units_and_no_warnings_when_clean(run_cli, clean_file):
    result = run_cli("modes", clean_file)
    assert result.exit_code == 0, result.output
    out = result.stdout
    header = [ln for ln in out.splitlines() if "frequency [Hz]" in ln][0]
    # what a rig engineer reads first, in this order; the pole positions only with --detail
    assert header.split("  ")[1:] != []
    cols = [c.strip() for c in header.split("  ") if c.strip()]
    assert cols == ["#", "kind", "frequency [Hz]", "damping ratio", "time constant [s]", "period [s]", "flags"]
    assert "|z|" not in out and "rad/s]" not in out
    assert "32" in out  # the resonance, built at 32 Hz
    assert "motor_torque_cmd -> motor_speed: 40 rad/s/(N m)" in out  # built with DC gain 40
    assert "flags (rows marked !)" not in out


def test_text_marks_and_explains_warnings(run_cli, resonant_file):
    result = run_cli("modes", resonant_file)
    assert result.exit_code == 0
    out = result.stdout
    assert "flags (rows marked !):" in out
    assert "lightly_damped:" in out and "negative_real:" in out
    assert any(line.startswith("!") for line in out.splitlines())


def test_json_shape(run_cli, resonant_file):
    result = run_cli("modes", resonant_file, "--json")
    assert result.exit_code == 0
    data = json.loads(result.stdout)
    modes = data["modes"]
    assert len(modes) == 3  # the pair once
    for m in modes:
        assert {"z", "s", "natural_frequency_hz", "damping_ratio", "time_constant_s", "flags"} <= set(m)
    neg = [m for m in modes if m["z"][0] < 0][0]
    assert neg["s"] is None and "negative_real" in neg["flags"]
    osc = [m for m in modes if m["z"][1] != 0][0]
    assert osc["z"][1] > 0
    # built at 32 Hz and damping 0.01 (closed form); round-off only
    assert_allclose(osc["natural_frequency_hz"], 32.0, rtol=1e-8)
    assert_allclose(osc["damping_ratio"], 0.01, rtol=1e-6)
    assert "lightly_damped" in osc["flags"]
    assert_allclose(data["dc_gain"][0]["gain"], 40.0, rtol=1e-8)
    assert data["expectations"] == []


def test_fail_on_exits_3_only_when_the_flag_is_present(run_cli, resonant_file, clean_file):
    assert run_cli("modes", resonant_file, "--fail-on", "lightly_damped").exit_code == 3
    assert run_cli("modes", resonant_file, "--fail-on", "unstable").exit_code == 0
    assert run_cli("modes", clean_file, "--fail-on", "lightly_damped",
                   "--fail-on", "negative_real").exit_code == 0
    result = run_cli("modes", resonant_file, "--fail-on", "lightly_damped", "--json")
    assert json.loads(result.stdout)["fail_on"]["present"] == ["lightly_damped"]
    assert "flag lightly_damped present" in result.stderr


def test_damping_threshold_option(run_cli, clean_file):
    assert run_cli("modes", clean_file, "--fail-on", "lightly_damped").exit_code == 0
    # damping 0.3 is below a threshold of 0.5
    assert run_cli("modes", clean_file, "--fail-on", "lightly_damped",
                   "--damping-below", "0.5").exit_code == 3


def test_log_duration_from_option_and_provenance(run_cli, tmp_path):
    model = _model([math.exp(-T / 0.5)])  # tau 0.5 s
    path = tmp_path / "slow.json"
    save_model(path, model, provenance={"log": {"n_samples": 1000}})  # a 1 s log
    assert run_cli("modes", path, "--fail-on", "slow_for_log").exit_code == 3
    assert run_cli("modes", path, "--fail-on", "slow_for_log", "--log-duration", "60").exit_code == 0


def _expect(tmp_path, text):
    path = tmp_path / "expect.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_expectations_pass_and_fail(run_cli, clean_file, tmp_path):
    good = _expect(tmp_path, "[expect]\nstable = true\n[[expect.mode]]\nname = \"belt\"\n"
                   "frequency_hz = [25, 45]\n[[expect.dc_gain]]\nsign = \"positive\"\nrange = [10, 100]\n")
    result = run_cli("modes", clean_file, "--expect", good)
    assert result.exit_code == 0
    assert "met      mode 'belt'" in result.stdout
    bad = tmp_path / "bad.toml"
    bad.write_text("[expect]\nmax_order = 2\n[[expect.mode]]\nfrequency_hz = [100, 200]\n",
                   encoding="utf-8")
    result = run_cli("modes", clean_file, "--expect", bad, "--json")
    assert result.exit_code == 3
    data = json.loads(result.stdout)
    assert [r["met"] for r in data["expectations"]] == [False, False]
    assert data["expectations"][0]["measured_value"] == 3
    assert "max_order" in result.stderr


def test_unknown_expectation_key_exits_2_naming_it(run_cli, clean_file, tmp_path):
    path = _expect(tmp_path, "[expect]\n[[expect.mode]]\nfrequncy_hz = [25, 45]\n")
    result = run_cli("modes", clean_file, "--expect", path)
    assert result.exit_code == 2
    assert "expect.mode[1].frequncy_hz" in result.stderr
    assert "frequency_hz" in result.stderr


def test_plot_writes_png_and_refuses_overwrite(run_cli, resonant_file, tmp_path):
    png = tmp_path / "poles.png"
    assert run_cli("modes", resonant_file, "--plot", png).exit_code == 0
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"  # PNG signature (PNG spec, sec. 5.2)
    again = run_cli("modes", resonant_file, "--plot", png)
    assert again.exit_code == 2 and "already exists" in again.stderr
    assert run_cli("modes", resonant_file, "--plot", png, "--force").exit_code == 0


def test_plot_function_draws_on_given_axes(resonant_file):
    from matplotlib.figure import Figure

    from ident.assess.modes import mode_table
    from ident.io.modelfile import load_model
    from ident.plots.poles import pole_zero_map

    fig = Figure()
    ax = fig.add_subplot(1, 1, 1)
    table = mode_table(load_model(resonant_file).model,
                       pole_covariance=np.array([np.eye(2) * 1e-6] * 4))
    assert pole_zero_map(table, ax=ax) is fig
    assert len(ax.lines) > 20  # unit circle, grid curves, confidence ellipses


def test_missing_model_file_exits_2(run_cli, tmp_path):
    result = run_cli("modes", tmp_path / "nope.json")
    assert result.exit_code == 2


def test_detail_shows_s_and_natural_frequency_in_rad_per_s(run_cli, resonant_file):
    out = run_cli("modes", resonant_file, "--log-duration", "10", "--detail").stdout
    assert "pole positions (detail):" in out
    assert "s = ln(z)/T [1/s]" in out and "natural [rad/s]" in out
    lines = out.splitlines()
    wn = 2 * math.pi * 32.0
    s = complex(-0.01 * wn, wn * math.sqrt(1 - 0.01**2))  # built from s, closed form
    detail = lines[lines.index("pole positions (detail):") + 1:]
    pair_row = [ln for ln in detail if "±" in ln and "j" in ln][0]
    assert f"{s.real:.4g} ± {s.imag:.4g}j" in pair_row and f"{wn:.4g}" in pair_row
    # the negative real pole -0.6 has no s: shown as "-"
    neg_row = [ln for ln in detail if "-0.6000" in ln][0]
    assert neg_row.split()[3] == "-"
    detail_lines = detail[: detail.index("")]
    assert max(len(ln) for ln in detail_lines) <= 100


# Snapshot of the main mode table of the resonant model: a 32 Hz pair with damping 0.01, a pole
# at -0.6 and one at 0.98 (T = 1 ms). Closed forms: the real pole 0.98: -T/ln 0.98 = 0.0495 s;
# time constant of the pair 1/(0.01 * 2 pi 32) = 0.4974 s (> 0.2 * 2 s: slow_for_log), period
# 1/(32 sqrt(1 - 0.01^2)) = 0.03125 s; -0.6 decays as |z|^k: -T/ln 0.6 = 0.001958 s. Flags from
# the thresholds documented in ident/assess/modes.py.
MODES_SNAPSHOT = """\
   #  kind         frequency [Hz]  damping ratio  time constant [s]  period [s]  flags
   1  real                      -              -             0.0495           -
!  2  oscillation              32           0.01             0.4974     0.03125  lightly_damped, slow_for_log
!  3  real                      -              -           0.001958           -  negative_real, near_nyquist
"""


def test_text_snapshot_of_the_main_table(run_cli, resonant_file):
    out = run_cli("modes", resonant_file, "--log-duration", "2").stdout
    lines = out.splitlines()
    start = [k for k, ln in enumerate(lines) if "frequency [Hz]" in ln][0]
    block = "\n".join(lines[start:lines.index("", start)]) + "\n"
    assert block == MODES_SNAPSHOT


def test_json_always_has_the_pole_positions(run_cli, resonant_file):
    data = json.loads(run_cli("modes", resonant_file, "--json").stdout)
    for m in data["modes"]:
        assert {"z", "s", "natural_frequency_rad_s"} <= set(m)


def test_negative_real_angle_option(run_cli, tmp_path):
    # pole pair at angle pi - 0.1 rad, radius 0.5: outside the default 0.05 rad, inside 0.2
    z = 0.5 * cmath.exp(1j * (math.pi - 0.1))
    path = tmp_path / "neg.json"
    save_model(path, _model([z, z.conjugate(), 0.9]))
    assert run_cli("modes", path, "--fail-on", "negative_real").exit_code == 0
    assert run_cli("modes", path, "--fail-on", "negative_real",
                   "--negative-real-angle", "0.2").exit_code == 3
    bad = run_cli("modes", path, "--negative-real-angle", "2.0")
    assert bad.exit_code == 2 and "negative_real_angle_tolerance_rad" in bad.stderr


def test_confidence_level_option(run_cli, tmp_path):
    # poles 0.99 and 0.5 with std 0.005 per axis: the P = 0.5 region of 0.99 stays inside
    # |z| = 1, the P = 0.999 one crosses it (chi-square(2) radius sqrt(-2 ln(1 - P)) * 0.005:
    # 0.0059 and 0.0186; closed form)
    model = _model([0.99, 0.5])
    path = tmp_path / "cov.json"
    cov = [[[2.5e-5, 0.0], [0.0, 2.5e-5]]] * 2
    save_model(path, model, provenance={"estimation": {"pole_covariance": cov}})
    args = ("modes", path, "--fail-on", "uncertain_stability", "--log-duration", "100")
    assert run_cli(*args, "--confidence-level", "0.5").exit_code == 0
    assert run_cli(*args, "--confidence-level", "0.999").exit_code == 3
    assert run_cli(*args, "--confidence-level", "1.5").exit_code == 2


def test_plot_refuses_existing_file_before_printing(run_cli, resonant_file, tmp_path):
    png = tmp_path / "poles.png"
    png.write_bytes(b"keep me")
    result = run_cli("modes", resonant_file, "--plot", png)
    assert result.exit_code == 2 and "already exists" in result.stderr
    assert result.stdout == ""
    assert png.read_bytes() == b"keep me"


def test_unknown_log_duration_is_reported_on_stderr(run_cli, clean_file):
    result = run_cli("modes", clean_file)
    assert "slow_for_log not checked: log duration unknown (use --log-duration)" in result.stderr
    assert "slow_for_log not checked" not in result.stdout
    known = run_cli("modes", clean_file, "--log-duration", "30")
    assert "slow_for_log not checked" not in known.stderr


def _integrator_model() -> StateSpaceModel:
    # T = 2 s; a pole where the refinement holds one it cannot tell from an integrator
    # (|z| = STABLE_RADIUS = 1 - 1e-9; in floating point 1 - 1.00000008e-9, as on the heating-system
    # record), a pole at 1 - 1e-4 (a slow but real time constant) and one at 0.5 (invented plant)
    from ident.estimate.sensitivity import STABLE_RADIUS

    A = np.diag([STABLE_RADIUS, 1.0 - 1e-4, 0.5])
    return StateSpaceModel(A=A, B=np.ones((3, 1)), C=np.ones((1, 3)), D=np.zeros((1, 1)), sample_time=2.0,
                           inputs=["drive"], outputs=["plate_temp"])


def _main_rows(out: str) -> list[list[str]]:
    """Cells of the main mode table (mark, #, kind, frequency, damping, time constant, period, flags)."""
    import re

    lines = out.splitlines()
    start = next(k for k, ln in enumerate(lines) if "time constant [s]" in ln) + 1
    body = lines[start:lines.index("", start)]
    return [[ln[:1].strip()] + re.split(r"\s{2,}", ln[1:].strip()) for ln in body]


def test_a_pole_at_the_stability_boundary_is_shown_as_an_integrator(run_cli, tmp_path):
    from ident.assess.modes import mode_table, mode_table_to_dict
    from ident.display import mode_rows
    from ident.report import modes_html

    path = tmp_path / "boundary.json"
    save_model(path, _integrator_model())
    out = run_cli("modes", path, "--log-duration", "1600").stdout
    rows = {cells[1]: cells for cells in _main_rows(out)}
    # mode 1: -T / ln z would be 2 / 1.00000008e-9 = 2e9 s (closed form), a figure of rounding: shown as "-"
    assert rows["1"][2] == "integrator" and rows["1"][5] == "-"
    assert "2e+09" not in out
    # mode 2: 1 - 1e-4 carries the integrator flag (within 1e-3 of 1) but keeps its time constant,
    # -T / ln(1 - 1e-4) = 19999 s (closed form, 4 digits)
    assert rows["2"][2] == "integrator" and rows["2"][5] == "2e+04"
    # the JSON keeps the number -T / ln|z| of the pole as stored (closed form, to rounding of ln)
    data = json.loads(run_cli("modes", path, "--json").stdout)
    (boundary,) = [m for m in data["modes"] if 1.0 - m["z"][0] < 1e-8]
    assert_allclose(boundary["time_constant_s"], 2.0 / 1.000000082740371e-09, rtol=1e-6)
    # the API's table and the report's table show it the same way as the text
    table = mode_table(_integrator_model())
    first_row = mode_rows(table)[0]
    assert first_row["kind"] == "integrator" and first_row["time_constant_s"] is None
    assert first_row["time_constant_std_s"] is None
    assert mode_rows(table)[1]["time_constant_s"] == pytest.approx(-2.0 / math.log1p(-1e-4), rel=1e-12)
    html_rows = modes_html(mode_table_to_dict(table) | {"units": {"inputs": ["V"], "outputs": ["degC"]}})
    assert "2e+09" not in html_rows and "1.999e+09" not in html_rows
