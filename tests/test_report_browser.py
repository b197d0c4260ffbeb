"""The report in a real browser: headless Chromium renders it at 1280 px; the findings are on the
first screen and nothing is wider than the page. CI installs Chromium (.ci/chromium.sh)."""

from __future__ import annotations

import json
import re
import shutil
import struct
import subprocess
from pathlib import Path

import pytest

from fewshot.analysis import analyse_study
from fewshot.demo.run import prepare_demo, run_workers
from fewshot.ledger import Ledger
from fewshot.report import write_report
from fewshot.stats import CurveSettings

CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
pytestmark = pytest.mark.skipif(
    CHROMIUM is None, reason="headless Chromium is not installed (apt-get install chromium)"
)
WIDTH, HEIGHT = 1280, 800  # a laptop's first screen

# Measures the page after layout and writes what it found into the body (read back by --dump-dom).
PROBE = """<script>
window.addEventListener('load', () => {
  const root = document.documentElement;
  const rect = id => document.getElementById(id).getBoundingClientRect();
  const wide = [...document.querySelectorAll('body *')]
    .filter(e => e.getBoundingClientRect().right > root.clientWidth + 1)
    .map(e => e.tagName.toLowerCase() + (e.id ? '#' + e.id : ''));
  const first = document.querySelector('#findings li').getBoundingClientRect();
  const probe = document.createElement('pre');
  probe.id = 'probe';
  probe.textContent = JSON.stringify({
    findings_top: rect('findings').top, first_claim_bottom: first.bottom,
    caution_top: rect('caution').top, scroll_width: root.scrollWidth,
    client_width: root.clientWidth, wide: wide.slice(0, 8)});
  document.body.appendChild(probe);
});
</script>"""


def _chromium(*args: str) -> subprocess.CompletedProcess[str]:
    assert CHROMIUM is not None
    return subprocess.run(
        [
            CHROMIUM,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--hide-scrollbars",
            f"--window-size={WIDTH},{HEIGHT}",
            *args,
        ],
        capture_output=True,
        text=True,
        timeout=180,
    )


@pytest.fixture(scope="module")
def report(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    demo = prepare_demo(folder, quick=True)
    run_workers(demo, 2)
    led = Ledger.open(demo.ledger)
    try:
        rep = analyse_study(led, CurveSettings(resamples=300))
    finally:
        led.close()
    return write_report(folder / "report.html", rep)


def test_findings_on_the_first_screen_and_nothing_too_wide(report: Path, tmp_path: Path):
    probed = tmp_path / "probed.html"
    probed.write_text(report.read_text().replace("</body>", PROBE + "</body>"))
    done = _chromium("--virtual-time-budget=10000", "--dump-dom", probed.as_uri())
    assert done.returncode == 0, done.stderr[-2000:]
    m = re.search(r'<pre id="probe">(.*?)</pre>', done.stdout, re.S)
    if m is None:
        pytest.fail("the probe did not run: " + done.stdout[-500:])
    seen = json.loads(m.group(1).replace("&quot;", '"'))
    assert seen["caution_top"] < HEIGHT, seen
    assert 0 < seen["findings_top"] and seen["first_claim_bottom"] <= HEIGHT, seen
    assert seen["scroll_width"] <= seen["client_width"], seen
    assert seen["wide"] == [], seen


def test_screenshot_at_1280(report: Path, tmp_path: Path):
    shot = tmp_path / "shot.png"
    done = _chromium(f"--screenshot={shot}", report.as_uri())
    assert done.returncode == 0 and shot.exists(), done.stderr[-2000:]
    head = shot.read_bytes()[:24]
    assert head[:8] == b"\x89PNG\r\n\x1a\n"
    width, height = struct.unpack(">II", head[16:24])  # the PNG IHDR chunk (PNG spec, 11.2.2)
    assert (width, height) == (WIDTH, HEIGHT)
