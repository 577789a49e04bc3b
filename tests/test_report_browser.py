"""The report as a reader sees it: rendered in headless Chromium (Debian's `chromium` package), for the demo and for a
free-profile study. Checked at 1280 px: no horizontal overflow, every image loads, no image taller than a bound, the
summary box inside the first screen, no console messages. The screenshots are kept in reports/browser/.
"""

import json
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from helpers import ROOT, SCENARIOS, demo_text

BROWSER = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(BROWSER is None, reason="no headless browser: install Debian's 'chromium' package "
                                                         "(apt-get install chromium) to run the report checks")
WIDTH, SCREEN = 1280, 900
MAX_IMAGE_HEIGHT = 1400        # px at 1280 px width: any figure taller than this does not fit a screen or a page
ARTEFACTS = ROOT / "reports" / "browser"

PROBE = """<script>
window.addEventListener("load", () => {
  const imgs = [...document.images];
  const box = document.getElementById("summary").getBoundingClientRect();
  document.body.setAttribute("data-probe", JSON.stringify({
    overflow: document.documentElement.scrollWidth - window.innerWidth,
    images: imgs.length,
    broken: imgs.filter(i => !(i.complete && i.naturalWidth > 0)).map(i => i.alt || i.src.slice(0, 60)),
    tallest: Math.max(0, ...imgs.map(i => i.getBoundingClientRect().height)),
    summary_top: box.top, summary_bottom: box.bottom,
    stops: [...document.querySelectorAll("#summary .stops li")].map(li => li.textContent)}));
});
</script>"""


def _run(*args, cwd):
    r = subprocess.run([sys.executable, "-m", "tubeyield", *map(str, args)], capture_output=True, text=True,
                       cwd=cwd, timeout=900)
    assert r.returncode in (0, 4), r.stderr
    return r


def _report(tmp, study_file: str, front: bool) -> Path:
    res = tmp / "results"
    _run("optimize", study_file, "--save", res, cwd=tmp)
    if front:
        _run("front", study_file, "--points", "5", "--save", res, cwd=tmp)
    _run("window", study_file, "--at", res / "optimum.json", "--save", res, cwd=tmp)
    _run("report", res, "--out", tmp / "report", cwd=tmp)
    return tmp / "report"


def _browse(report, name: str) -> dict:
    html = (report / "index.html").read_text(encoding="utf-8")
    probe = report / "probe.html"
    probe.write_text(html.replace("</body>", PROBE + "</body>"), encoding="utf-8")
    base = [BROWSER, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars", f"--window-size={WIDTH},{SCREEN}",
            "--enable-logging=stderr", "--v=0", "--virtual-time-budget=10000"]
    r = subprocess.run(base + ["--dump-dom", probe.as_uri()], capture_output=True, text=True, timeout=120)
    m = re.search(r'data-probe="([^"]*)"', r.stdout)
    assert m, "the probe did not run: " + r.stderr[-2000:]
    found = json.loads(m.group(1).replace("&quot;", '"').replace("&amp;", "&"))
    found["console"] = [line for line in r.stderr.splitlines() if "CONSOLE" in line]
    ARTEFACTS.mkdir(parents=True, exist_ok=True)
    for suffix, size in (("first-screen", f"{WIDTH},{SCREEN}"), ("page", f"{WIDTH},6000")):
        subprocess.run([BROWSER, "--headless", "--no-sandbox", "--disable-gpu", "--hide-scrollbars",
                        f"--window-size={size}", f"--screenshot={ARTEFACTS / f'{name}-{suffix}.png'}",
                        (report / "index.html").as_uri()], capture_output=True, timeout=120)
    assert (ARTEFACTS / f"{name}-first-screen.png").stat().st_size > 10_000
    probe.unlink()
    return found


def _assert_reads_well(found: dict):
    assert found["overflow"] <= 0, f"the page is {found['overflow']} px wider than the window"
    assert found["images"] >= 2 and not found["broken"], found["broken"]
    assert found["tallest"] <= MAX_IMAGE_HEIGHT, f"an image is {found['tallest']:.0f} px tall"
    assert 0 <= found["summary_top"] < SCREEN, "the summary box is not in the first screen"
    assert not found["console"], found["console"]


def test_the_demo_report_reads_well_in_a_browser(tmp_path):
    shutil.copy(SCENARIOS / "oxidation-network.toml", tmp_path)
    text = demo_text().replace("points = [60, 60]", "points = [24, 20]")
    (tmp_path / "demo.toml").write_text(text)
    found = _browse(_report(tmp_path, "demo.toml", front=True), "demo")
    _assert_reads_well(found)
    assert found["summary_bottom"] <= SCREEN + 200 and not found["stops"]


def test_a_free_profile_report_has_bounded_figures(tmp_path):
    shutil.copy(SCENARIOS / "oxidation-network.toml", tmp_path)
    text = demo_text()
    text = text.replace('heat = "isothermal"', 'heat = "free"').replace("elements = 40", "elements = 20")
    text = text.replace('y = "T"', 'y = "ratio.O"').replace("points = [60, 60]", "points = [10, 8]")
    (tmp_path / "free.toml").write_text(text)
    report = _report(tmp_path, "free.toml", front=False)
    found = _browse(report, "free-profile")
    _assert_reads_well(found)
    assert "PiecewiseLinear" not in (report / "index.html").read_text()
