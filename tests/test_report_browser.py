"""Every HTML page rigfit writes, in a real browser (headless Chromium).

The pages: the run reports of the belt-axis demo (before, and after with drift) and the fleet
report of a small generated fleet (``sample_data/fleet.py``). For each page: every figure is
displayed (image loaded, non-zero size), no table or figure reaches beyond a 1280-pixel-wide
window, no box holds content wider than itself (a table scrolled out of sight), and printing to
PDF works with a page count in the expected range. A screenshot of each page is kept under
``test-artifacts/`` (ignored by git) for a person to look at; its path is printed.

Chromium is the Debian package ``chromium`` (``.ci/run`` installs it); where it is missing the
tests are skipped with the reason.
"""

from __future__ import annotations

import json
import logging
import re
import shutil
import subprocess
from pathlib import Path

import pytest

REPO = Path(__file__).resolve().parents[1]
ARTIFACTS = REPO / "test-artifacts"
WIDTH = 1280
CHROMIUM = next((shutil.which(n) for n in ("chromium", "chromium-browser") if shutil.which(n)), None)

pytestmark = pytest.mark.skipif(
    CHROMIUM is None,
    reason="headless Chromium not found: install the Debian package 'chromium' (apt-get install chromium; "
           ".ci/run does this) to run the browser tests of the HTML report",
)

#: Measured in the page after it loaded: written into the DOM so --dump-dom returns it.
_PROBE = """
<script>
window.addEventListener("load", function () {
  var width = document.documentElement.clientWidth;
  var images = Array.prototype.map.call(document.images, function (img) {
    var r = img.getBoundingClientRect();
    return {alt: img.alt, complete: img.complete, natural: img.naturalWidth, width: r.width, height: r.height,
            right: r.right};
  });
  var wide = [];
  document.querySelectorAll("table, figure, img, pre, section, div").forEach(function (el) {
    var r = el.getBoundingClientRect();
    if (r.right > width + 0.5 || el.scrollWidth > el.clientWidth + 1 && el.tagName !== "PRE") {
      wide.push({tag: el.tagName, right: r.right, scroll: el.scrollWidth, client: el.clientWidth,
                 text: (el.textContent || "").slice(0, 60)});
    }
  });
  var out = document.createElement("pre");
  out.id = "rigfit-probe";
  out.textContent = JSON.stringify({width: width, page_width: document.documentElement.scrollWidth,
                                    height: document.documentElement.scrollHeight, images: images, wide: wide});
  document.body.appendChild(out);
});
</script>
"""


def _chromium(*args: str, timeout: float = 120) -> subprocess.CompletedProcess:
    cmd = [CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
           "--disable-dev-shm-usage", "--no-first-run", *args]
    return subprocess.run(cmd, capture_output=True, text=True, timeout=timeout)


def _probe(page: Path, tmp: Path) -> dict:
    probed = tmp / f"probe-{page.name}"
    probed.write_text(page.read_text(encoding="utf-8").replace("</body>", _PROBE + "</body>"), encoding="utf-8")
    run = _chromium(f"--window-size={WIDTH},1000", "--virtual-time-budget=10000", "--dump-dom", probed.as_uri())
    found = re.search(r'<pre id="rigfit-probe">(.*?)</pre>', run.stdout, re.S)
    assert found, f"the page did not load in Chromium: {run.stderr[-2000:]}"
    import html

    return json.loads(html.unescape(found.group(1)))


def _pdf_pages(pdf: bytes) -> int:
    # page objects of a PDF ("/Type /Page", not "/Pages"); PDF 1.7 (ISO 32000-1) sec. 7.7.3.3
    return len(re.findall(rb"/Type\s*/Page(?![s\w])", pdf))


@pytest.fixture(scope="module")
def run_reports(tmp_path_factory) -> dict[str, Path]:
    """The run reports of the belt-axis demo: before (no baseline) and after (with drift)."""
    from ident.pipeline import run_pipeline

    out = tmp_path_factory.mktemp("runs")
    before = run_pipeline(REPO / "pipelines" / "belt_axis_before.toml", out_dir=out / "before", allow_outside=True)
    after = run_pipeline(REPO / "pipelines" / "belt_axis_after.toml", out_dir=out / "after", allow_outside=True,
                         baseline=before.model_path)
    return {"run_report_before": before.report_path, "run_report_after": after.report_path}


@pytest.fixture(scope="module")
def fleet_reports(tmp_path_factory) -> dict[str, Path]:
    """The fleet report of six short generated units: one planted odd unit and one unreadable log.

    The units are computed on an in-process Dask cluster (threads, no worker processes), which
    starts in a fraction of a second; ``tests/test_fleet.py`` covers worker processes.
    """
    from distributed import LocalCluster
    from fleets import FLEET, write_pipeline

    from ident.fleet.run import run_fleet

    d = tmp_path_factory.mktemp("fleet")
    FLEET.write_fleet(d / "logs", 6, seed=11, plants={3: "low_resonance"}, samples=1500)
    good = d / "logs" / "eol_0001.csv"
    lines = good.read_text(encoding="utf-8").replace("AX-11-0001", "AX-11-0099").splitlines()
    lines[40] = lines[40].rsplit(",", 1)[0] + ",12.5x"  # a failed unit: its row is in the report
    (d / "logs" / "eol_0099.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    with LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=":0",
                      silence_logs=logging.ERROR) as cluster:
        result = run_fleet(write_pipeline(d, "logs/eol_0001.csv"), [str(d / "logs" / "eol_*.csv")],
                           out_dir=d / "runs", scheduler=cluster.scheduler_address)
    assert result.analysis.outliers and result.summary["failed"], "the page should show outliers and failures"
    return {"fleet_report": result.report_path}


#: Every page, the fixture that writes it, and the least number of figures it shows.
PAGES = {
    "run_report_before": ("run_reports", 5),
    "run_report_after": ("run_reports", 5),
    "fleet_report": ("fleet_reports", 3),  # a strip per fleet mode (two here), fits, DC gains
}


@pytest.mark.parametrize("page_name", list(PAGES))
def test_page_in_a_real_browser(page_name, request, tmp_path):
    fixture, min_figures = PAGES[page_name]
    page = request.getfixturevalue(fixture)[page_name]
    html_text = page.read_text(encoding="utf-8")
    n_figures = html_text.count("<img ")
    assert n_figures >= min_figures

    # every figure displayed, nothing wider than the window or than its box
    probe = _probe(page, tmp_path)
    assert probe["width"] == WIDTH - 0 or probe["width"] <= WIDTH
    assert len(probe["images"]) == n_figures
    for img in probe["images"]:
        assert img["complete"] and img["natural"] > 0, img["alt"]
        assert img["width"] > 0 and img["height"] > 0, img["alt"]
        assert img["right"] <= probe["width"] + 0.5, img["alt"]
    assert probe["wide"] == [], probe["wide"]
    assert probe["page_width"] <= probe["width"]

    # a screenshot for a person to look at
    ARTIFACTS.mkdir(exist_ok=True)
    shot = ARTIFACTS / f"{page_name}.png"
    height = min(int(probe["height"]) + 20, 16000)
    run = _chromium(f"--window-size={WIDTH},{height}", f"--screenshot={shot}", "--virtual-time-budget=10000",
                    page.as_uri())
    assert shot.is_file() and shot.stat().st_size > 10_000, run.stderr[-2000:]
    print(f"\nscreenshot of the {page_name.replace('_', ' ')}: {shot}")

    # printing to PDF works; the page count follows the length of the page
    pdf = tmp_path / f"{page_name}.pdf"
    run = _chromium("--no-pdf-header-footer", f"--print-to-pdf={pdf}", "--virtual-time-budget=10000", page.as_uri())
    assert pdf.is_file(), run.stderr[-2000:]
    data = pdf.read_bytes()
    assert data.startswith(b"%PDF-")
    pages = _pdf_pages(data)
    # a printed page (Letter or A4 with Chromium's default margins) holds roughly 900 to 1000 CSS pixels
    # of a page laid out 1280 pixels wide; printing narrows the page, so the count may roughly double,
    # and figures are never split across pages (break-inside: avoid), which adds a little
    lo = max(1, int(probe["height"] // 1500))
    hi = int(probe["height"] // 450) + 3
    assert lo <= pages <= hi, (pages, lo, hi, probe["height"])
    shutil.copyfile(pdf, ARTIFACTS / pdf.name)
