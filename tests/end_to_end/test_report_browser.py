"""The demo's report in a real browser: images load, no script error, verdict box styled.

Headless Chromium (Debian packages chromium + chromium-driver; .ci/run installs them)
loads a copy of report.html with a small checking script put first in <head>; the
script writes what it found into the DOM, and --dump-dom hands the DOM back.
"""

from __future__ import annotations

import json
import re
import shutil
import subprocess

import pytest

from inclination.report.document import VERDICT_STYLES

BROWSER = shutil.which("chromium") or shutil.which("chromium-browser")

pytestmark = pytest.mark.skipif(
    BROWSER is None,
    reason="no Chromium on this machine (Debian package chromium; .ci/run installs it)",
)

_CHECK = """<script>
window.__errors = [];
window.addEventListener('error', e => window.__errors.push(String(e.message || e.type)), true);
window.addEventListener('load', () => {
  const imgs = Array.from(document.images);
  const bad = imgs.filter(i => !(i.complete && i.naturalWidth > 0)).map(i => i.alt);
  const v = document.getElementById('verdict');
  const out = document.createElement('pre');
  out.id = 'browser-check';
  out.textContent = JSON.stringify({images: imgs.length, bad: bad,
    verdict: v ? v.dataset.verdict : null, cls: v ? v.className : null,
    errors: window.__errors});
  document.body.appendChild(out);
});
</script>"""


def _flags(tmp_path):
    return [
        BROWSER,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--no-first-run",
        f"--user-data-dir={tmp_path / 'profile'}",
    ]


def _check(tmp_path, report):
    page = report.read_text(encoding="utf-8").replace("<head>", "<head>" + _CHECK, 1)
    copy = tmp_path / "checked.html"
    copy.write_text(page, encoding="utf-8")
    run = subprocess.run(
        _flags(tmp_path)
        + ["--enable-logging=stderr", "--virtual-time-budget=10000", "--dump-dom", copy.as_uri()],
        capture_output=True,
        text=True,
        timeout=180,
    )
    assert run.returncode == 0, run.stderr[-2000:]
    found = re.search(r'<pre id="browser-check">(.*?)</pre>', run.stdout, flags=re.S)
    assert found, run.stdout[-2000:]
    console_errors = re.findall(r"Uncaught.*|CONSOLE\(\d+\).*[Ee]rror.*", run.stderr)
    return json.loads(found.group(1).replace("&quot;", '"').replace("&amp;", "&")), console_errors


@pytest.mark.parametrize(
    ("folder", "verdict"),
    [("results", "as_declared"), ("results-turned-frame", "turned_180_about_normal")],
)
def test_report_renders_in_chromium(tmp_path, demo_run, folder, verdict):
    result, console_errors = _check(tmp_path, demo_run / folder / "report.html")
    assert result["images"] >= 3 and result["bad"] == []
    assert result["errors"] == [] and console_errors == []
    assert result["verdict"] == verdict
    assert f"verdict-{VERDICT_STYLES[verdict]}" in result["cls"].split()


def test_survey_report_shows_its_stereograms_in_chromium(tmp_path, demo_run):
    # The fourth case has no sections: no verdict box, but the map figures and the two
    # stereograms (all boundaries, Σ3) must load.
    result, console_errors = _check(tmp_path, demo_run / "results-survey" / "report.html")
    assert result["images"] >= 4 and result["bad"] == []
    assert result["errors"] == [] and console_errors == []


def test_report_screenshot(tmp_path, demo_run):
    shot = tmp_path / "report.png"
    run = subprocess.run(
        _flags(tmp_path)
        + [
            f"--screenshot={shot}",
            "--window-size=1280,2000",
            "--hide-scrollbars",
            (demo_run / "results-turned-frame" / "report.html").as_uri(),
        ],
        capture_output=True,
        text=True,
        timeout=180,
    )
    assert run.returncode == 0, run.stderr[-2000:]
    # A PNG file (signature from the PNG specification, §5.2) of some size.
    data = shot.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n" and len(data) > 10_000
