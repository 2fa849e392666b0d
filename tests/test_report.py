"""The HTML report: self-contained, escaped, parseable, sections in order, figures embedded."""

from __future__ import annotations

import base64
import copy
import textwrap
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest
from scipy import signal

from ident import __version__
from ident.pipeline import SAFETY_CAUTION, run_pipeline
from ident.report import render_report

EVIL_INPUT = "<script>alert(1)</script>"
EVIL_OUTPUT = "y<i>"
EVIL_FILE = "rig_<i>.csv"
EVIL_NOTES = '<b>bold & "quoted"</b>'
# the caution text required by issue 7 (task brief), verbatim
CAUTION = ("A model is valid only near the operating point and in the frequency band it was excited in. "
           "Validate any controller safely before running it on hardware; local machinery-safety rules and "
           "qualified engineers have the final say.")
VOID = {"meta", "img", "br", "hr", "link", "input", "col", "wbr", "source"}


def write_log(path: Path, n: int = 2000, T: float = 0.01) -> None:
    """Second-order resonance at 2 Hz, zeta 0.1, random binary input; invented data."""
    rng = np.random.default_rng(3)
    wn = 2 * np.pi * 2.0
    A, B, C, D = signal.tf2ss([wn**2], [1, 0.2 * wn, wn**2])
    A, B, C, D, _ = signal.cont2discrete((A, B, C, D), T, method="zoh")
    u = rng.integers(0, 2, size=n // 5 + 1).repeat(5)[:n] * 2.0 - 1.0
    _, y, _ = signal.dlsim((A, B, C, D, T), u)
    y = y[:, 0] + 0.01 * rng.standard_normal(n)
    rows = [f"time,{EVIL_INPUT},{EVIL_OUTPUT}"] + [
        f"{k * T:.4f},{a:.6f},{b:.6f}" for k, (a, b) in enumerate(zip(u, y, strict=True))
    ]
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    folder = tmp_path_factory.mktemp("report")
    write_log(folder / EVIL_FILE)
    pipe = folder / "job.toml"
    pipe.write_text(textwrap.dedent(f"""
        name = "<h1>bench</h1>"
        notes = '{EVIL_NOTES}'
        [log]
        paths = ["{EVIL_FILE}"]
        inputs = ["{EVIL_INPUT}"]
        outputs = ["{EVIL_OUTPUT}"]
        [fit]
        method = "subspace"
        max_order = 3
        [check]
        max_lag = 20
        min_fit = 50
        [expect]
        [[expect.mode]]
        name = "<u>resonance</u>"
        frequency_hz = [1, 3]
        """), encoding="utf-8")
    result = run_pipeline(pipe, out_dir=folder / "runs")
    return result, result.report_path.read_text(encoding="utf-8")


class _Checker(HTMLParser):
    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.imgs: list[str] = []
        self.ids: list[str] = []

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        if tag == "img":
            self.imgs.append(attrs.get("src", ""))
        if "id" in attrs:
            self.ids.append(attrs["id"])
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if tag in VOID:
            return
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
        else:
            self.stack.pop()


def parse(text: str) -> _Checker:
    checker = _Checker()
    checker.feed(text)
    checker.close()
    return checker


def test_user_strings_are_escaped(run):
    _, text = run
    lower = text.lower()
    assert "<script" not in lower  # neither the column name nor any script of our own
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in text
    for raw in ("<i>", "<b>", "<h1>bench", "<u>"):
        assert raw not in text
    assert "y&lt;i&gt;" in text and "rig_&lt;i&gt;.csv" in text
    assert "&lt;b&gt;bold &amp; &quot;quoted&quot;&lt;/b&gt;" in text
    assert "&lt;u&gt;resonance&lt;/u&gt;" in text


def test_parses_with_balanced_tags(run):
    _, text = run
    checker = parse(text)
    assert checker.errors == []
    assert checker.stack == []
    assert text.startswith("<!DOCTYPE html>")


def test_every_figure_is_embedded(run):
    result, text = run
    srcs = parse(text).imgs
    pngs = sorted(result.folder.glob("*.png"))
    assert len(srcs) == len(pngs) > 0
    assert all(s.startswith("data:image/png;base64,") for s in srcs)
    embedded = sorted(base64.b64decode(s.split(",", 1)[1]) for s in srcs)
    assert embedded == sorted(p.read_bytes() for p in pngs)


def test_self_contained_and_printable(run):
    _, text = run
    assert "<link" not in text and 'src="http' not in text and "url(" not in text
    assert "@media print" in text


def test_sections_in_order_with_the_verdict_first(run):
    result, text = run
    ids = parse(text).ids
    assert ids == ["data", "model", "validation", "modes", "expectations", "drift", "provenance"]
    verdict_at = text.index('class="verdict')
    assert verdict_at < text.index('id="data"')
    assert text.index('id="provenance"') < text.index('class="caution"')
    assert result.passed and "PASSED" in text[verdict_at:verdict_at + 200]


def test_caution_and_provenance(run):
    result, text = run
    assert SAFETY_CAUTION == CAUTION
    assert CAUTION in text
    assert result.summary["provenance"]["logs"][0]["sha256"] in text
    assert result.spec.sha256 in text
    assert f"rigfit {__version__}" in text


def test_render_marks_failures_and_skips_missing_figures(run):
    result, _ = run
    summary = copy.deepcopy(result.summary)
    summary["verdict"] = {"passed": False, "headline": "FAILED", "failed_gates": ["check.min_fit"]}
    summary["gates"][0]["passed"] = False
    text = render_report(summary, {})
    assert "<img" not in text
    start = text.index('class="verdict bad"')
    assert "FAILED" in text[start:start + 200]
    assert '<td class="bad">FAIL</td>' in text


def _modes_section(text: str) -> str:
    return text[text.index('id="modes"'):text.index('id="expectations"')]


def test_mode_table_shows_z_period_and_zeros(run):
    result, text = run
    section = _modes_section(text)
    for header in ("pole z", "period [s]", "Transmission zeros (z-plane):"):
        assert header in section
    modes = result.summary["modes"]
    pair = [m for m in modes["modes"] if m["is_pair"]][0]
    re, im = pair["z"]
    assert f"{re:.4f} ± {abs(im):.4f}j" in section
    assert f"{pair['period_s']:.4g}" in section
    # zeros written as stored in summary.json; injected values are escaped like any other string
    summary = copy.deepcopy(result.summary)
    summary["modes"]["zeros"] = [[0.5, 0.0], [-0.25, 0.125], [-0.25, -0.125]]
    summary["modes"]["modes"][0]["z"] = ["<b>", 0.0]
    edited = _modes_section(render_report(summary, {}))
    assert "Transmission zeros (z-plane): 0.5, -0.25 + 0.125j, -0.25 − 0.125j." in edited
    assert "<b>" not in edited
    summary["modes"]["zeros"] = []
    assert "Transmission zeros (z-plane): none." in _modes_section(render_report(summary, {}))
