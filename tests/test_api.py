"""The Python interface (``ident.fit``, ``ModelResult``, ``ident.load_model``), notebook-style."""

from __future__ import annotations

import math
import subprocess
import sys
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from numpy.testing import assert_allclose
from scipy import signal

import ident
from ident.errors import LogFormatError, OptionError

T = 0.01
F_HZ, ZETA, GAIN = 2.0, 0.3, 2.5  # invented valve -> flow rig


def _plant():
    wn = 2 * math.pi * F_HZ
    return signal.cont2discrete(([GAIN * wn**2], [1.0, 2 * ZETA * wn, wn**2]), T, method="zoh")


def _frame(seed: int, n: int = 3000, *, with_time: bool = True) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    u = np.repeat(rng.choice([-1.0, 1.0], size=n // 10), 10) + 4.0
    num, den, _ = _plant()
    y = signal.lfilter(num.ravel(), den, u - 4.0) + 10.0 + 0.002 * rng.standard_normal(n)
    frame = pd.DataFrame({"valve_cmd [V]": u, "flow [l/min]": y})
    if with_time:
        frame.insert(0, "time [s]", np.arange(n) * T)
    return frame


@pytest.fixture(scope="module")
def result():
    return ident.fit(_frame(1), inputs=["valve_cmd"], outputs=["flow"], method="arx", max_order=3)


class _Tables(HTMLParser):
    """Collect the tables of an HTML fragment as lists of rows of cell texts."""

    def __init__(self) -> None:
        super().__init__()
        self.tables: list[list[list[str]]] = []
        self.headings: list[str] = []
        self._cell: list[str] | None = None
        self._heading: list[str] | None = None

    def handle_starttag(self, tag, attrs):
        if tag == "table":
            self.tables.append([])
        elif tag == "tr":
            self.tables[-1].append([])
        elif tag in ("td", "th"):
            self._cell = []
        elif tag in ("h2", "h3"):
            self._heading = []

    def handle_endtag(self, tag):
        if tag in ("td", "th") and self._cell is not None:
            self.tables[-1][-1].append("".join(self._cell).strip())
            self._cell = None
        elif tag in ("h2", "h3") and self._heading is not None:
            self.headings.append("".join(self._heading).strip())
            self._heading = None

    def handle_data(self, data):
        if self._cell is not None:
            self._cell.append(data)
        if self._heading is not None:
            self._heading.append(data)


def _parse(html_text: str) -> _Tables:
    parser = _Tables()
    parser.feed(html_text)
    parser.close()
    return parser


def test_fit_on_a_dataframe_knows_names_units_and_recovers_the_plant(result):
    model = result.model
    assert model.inputs == ("valve_cmd",) and model.outputs == ("flow",)
    assert model.input_units == ("V",) and model.output_units == ("l/min",)
    assert_allclose(model.sample_time, T, rtol=1e-9)
    # operating point: the levels the data were generated around (4 V, 10 l/min); the mean of a
    # random binary input is within a few hundredths of its centre
    assert_allclose(model.operating_point.inputs, [4.0], atol=0.1)
    # the poles of the ZOH equivalent (scipy.signal.cont2discrete), to the noise
    true_poles = np.roots(_plant()[1])
    for pole in true_poles:
        assert np.min(np.abs(model.poles() - pole)) < 5e-3


def test_to_scipy_has_the_same_frequency_response(result):
    sys_ = result.model.to_scipy()
    assert isinstance(sys_, signal.StateSpace) and sys_.dt == pytest.approx(T)
    w = np.linspace(0.05, 1.0, 25)
    z = np.exp(1j * w)
    h = np.array([(sys_.C @ np.linalg.solve(zk * np.eye(sys_.A.shape[0]) - sys_.A, sys_.B) + sys_.D)[0, 0]
                  for zk in z])
    num, den, _ = _plant()
    _, h_true = signal.freqz(num.ravel(), den, worN=w)
    # the DC gain and resonance of the invented plant (closed form 2.5) to within the noise
    assert_allclose(np.abs(h), np.abs(h_true), rtol=0.03)


def test_modes_is_a_dataframe_in_rig_terms(result):
    modes = result.modes
    assert isinstance(modes, pd.DataFrame) and modes.index.name == "mode"
    assert list(modes.columns[:9]) == ["kind", "frequency_hz", "frequency_std_hz", "damping_ratio",
                                       "damping_ratio_std", "time_constant_s", "time_constant_std_s", "period_s",
                                       "flags"]
    osc = modes[modes["kind"] == "oscillation"]
    assert len(osc) == 1
    # the invented plant: 2 Hz, damping 0.3 (closed form), to the noise
    assert_allclose(osc["frequency_hz"].iloc[0], F_HZ, rtol=0.02)
    assert_allclose(osc["damping_ratio"].iloc[0], ZETA, atol=0.02)
    assert {"z", "abs_z", "s", "natural_frequency_rad_s"} <= set(modes.columns)


def test_check_on_data_without_time_uses_the_model_sample_time(result):
    other = _frame(2, with_time=False)
    checked = result.check(other)
    assert checked.columns == {"inputs": ["valve_cmd"], "outputs": ["flow"]}
    frame = checked.to_frame()
    assert list(frame.index) == ["flow"]
    assert list(frame.columns) == ["simulation_fit_percent", "prediction_fit_percent", "ljung_box_pvalue", "white"]
    # a right model on fresh data of the same plant: noise 0.002 on an output swinging ~2.5, so the
    # fit is far above 90 % (fit percent definition, README)
    assert frame.loc["flow", "simulation_fit_percent"] > 90
    verdicts = checked.verdicts
    assert list(verdicts.columns) == ["test", "passed", "about", "message"] and len(verdicts) > 0


def test_check_compares_with_the_in_sample_fit_as_rigfit_check_does(result, tmp_path):
    checked = result.check(_frame(2))
    (gap,) = checked.report.gaps  # the in-sample fit travels in the provenance, as fit -o writes it
    assert_allclose(gap.in_sample, result.identification.estimation_fit[0])
    assert gap.kind == "none"  # fresh data of the same plant: no over-fitting to call out
    again = ident.load_model(result.save(tmp_path / "valve.json"))
    assert len(again.check(_frame(2)).report.gaps) == 1


def test_check_maps_other_column_names(result):
    other = _frame(3).rename(columns={"valve_cmd [V]": "CMD [V]", "flow [l/min]": "Q [l/min]"})
    checked = result.check(other, inputs=["CMD"], outputs=["Q"], min_fit=50)
    assert checked.columns == {"inputs": ["CMD"], "outputs": ["Q"]} and checked.passed


def test_save_and_load_model_round_trip(result, tmp_path):
    path = result.save(tmp_path / "valve.json")
    again = ident.load_model(path)
    assert isinstance(again, ident.ModelResult) and again.identification is None
    assert_allclose(again.model.A, result.model.A, rtol=0, atol=0)  # floats are written in full
    assert again.model.input_units == ("V",)
    assert_allclose(again.held_out_fit["flow"], result.held_out_fit["flow"])
    with pytest.raises(ident.IdentError):
        result.save(path)  # never over an existing file without force
    assert result.save(path, force=True) == path


def test_fit_from_a_path_and_with_sample_time(tmp_path, result):
    csv = tmp_path / "rig.csv"
    _frame(1).to_csv(csv, index=False)
    from_file = ident.fit(csv, inputs="valve_cmd", outputs="flow", method="arx", max_order=3)
    assert_allclose(from_file.model.poles(), result.model.poles(), atol=1e-8)  # same data, same model
    no_time = _frame(1, with_time=False)
    with_rate = ident.fit(no_time, inputs="valve_cmd", outputs="flow", sample_time=T, method="arx", max_order=3)
    assert_allclose(with_rate.model.sample_time, T)


def test_bad_data_named_by_row_and_column():
    frame = _frame(1)
    frame.iloc[16, 2] = np.nan
    with pytest.raises(LogFormatError) as err:
        ident.fit(frame, inputs="valve_cmd", outputs="flow")
    assert "DataFrame, row 17, column 'flow'" in str(err.value)


def test_unknown_option_names_the_nearest():
    with pytest.raises(OptionError) as err:
        ident.fit(_frame(1), inputs="valve_cmd", outputs="flow", max_ordr=3)
    assert "max_ordr" in str(err.value) and "max_order" in (err.value.hint or "")


def test_notebook_html_of_result_modes_and_check(result):
    page = _parse(result._repr_html_())
    assert any("arx model" in h and "valve_cmd [V] -> flow [l/min]" in h for h in page.headings)
    fits = [t for t in page.tables if t and t[0] == ["output", "held-out fit", "in-sample fit"]]
    assert len(fits) == 1 and fits[0][1][0] == "flow" and fits[0][1][1].endswith("%")
    modes = [t for t in page.tables if t and t[0][:3] == ["mode", "kind", "frequency [Hz]"]]
    assert len(modes) == 1 and any(row[1] == "oscillation" for row in modes[0][1:])
    # the mode frame shows the same table; a slice falls back to pandas' own
    frame_page = _parse(result.modes._repr_html_())
    assert [t[0][:3] for t in frame_page.tables if t][0] == ["mode", "kind", "frequency [Hz]"]
    assert "rigfit-fragment" not in result.modes.iloc[:1]._repr_html_()
    check_page = _parse(result.check(_frame(2))._repr_html_())
    assert "Check on DataFrame: 3000 samples" in check_page.headings
    # the fit table: a column per labelled fit figure (no --from here: initial state estimated, from rest)
    fit_heads = [t[0] for t in check_page.tables if t and t[0][0] == "output"]
    assert any(any(h.startswith("initial state estimated") for h in heads) and "from rest" in heads
               for heads in fit_heads), fit_heads


def test_html_escapes_names():
    frame = _frame(1).rename(columns={"flow [l/min]": "<b>flow</b> [l/min]"})
    res = ident.fit(frame, inputs="valve_cmd", outputs="<b>flow</b>", method="arx", max_order=2)
    text = res._repr_html_()
    assert "<b>flow</b>" not in text and "&lt;b&gt;flow&lt;/b&gt;" in text


def test_import_ident_stays_cheap():
    code = "import sys, ident; print('pandas' in sys.modules, 'numpy' in sys.modules)"
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout
    assert out.split() == ["False", "False"]
    code = "import sys, ident; ident.fit; print('ident.api' in sys.modules)"
    assert subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          check=True).stdout.strip() == "True"
