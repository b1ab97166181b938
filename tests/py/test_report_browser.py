"""The `flowsift compare --html` report in a real browser.

Headless Chromium (Debian's `chromium` package; installed here with apt-get
when missing, as CI runs as root) loads the report from a file: no console
messages or uncaught errors (read from Chromium's `--enable-logging=stderr`
log lines containing `CONSOLE`/`Uncaught`; a probe page with a deliberate
error checks that this detection works), a screenshot is written, and the
DOM as the browser built it (`--dump-dom`) has the charts, the verdict, the
caution and the method. Expected verdict text and classes: the scenario's
ground truth (`sample-captures/*.truth.json`).

Run: build the binary (`cargo build -p flowsift`), then `pytest tests/py`.
The screenshot goes to $FLOWSIFT_SCREENSHOT_DIR (default: pytest's tmp dir).
"""

import json
import os
import pathlib
import re
import shutil
import subprocess

import pytest
from flowsift_cli import flowsift_bin

ROOT = pathlib.Path(__file__).resolve().parents[2]
SAMPLES = ROOT / "sample-captures"
WINDOW = "2026-11-30T00:50:00Z..2026-11-30T01:10:00Z"



@pytest.fixture(scope="module")
def chromium():
    path = shutil.which("chromium")
    if path is None:
        if os.geteuid() != 0:
            pytest.skip("chromium is not installed and installing it needs root")
        env = dict(os.environ, DEBIAN_FRONTEND="noninteractive")
        subprocess.run(["apt-get", "update"], check=True, env=env, capture_output=True, timeout=600)
        subprocess.run(["apt-get", "install", "-y", "chromium"], check=True, env=env, capture_output=True, timeout=1200)
        path = shutil.which("chromium")
    assert path, "chromium not found after installing"
    return path


def browse(chromium, page: pathlib.Path, profile: pathlib.Path, *mode):
    """Runs headless Chromium on a file; returns (stdout, console lines)."""
    proc = subprocess.run(
        [
            chromium,
            "--headless",
            "--no-sandbox",
            "--disable-gpu",
            "--disable-background-networking",
            "--disable-component-update",
            "--disable-sync",
            "--no-first-run",
            f"--user-data-dir={profile}",
            "--enable-logging=stderr",
            "--v=0",
            *mode,
            page.as_uri(),
        ],
        capture_output=True,
        text=True,
        timeout=180,
    )
    assert proc.returncode == 0, proc.stderr[-2000:]
    console = [line for line in proc.stderr.splitlines() if "CONSOLE" in line or "Uncaught" in line]
    return proc.stdout, console


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    out = tmp_path_factory.mktemp("report") / "window-report.html"
    proc = subprocess.run(
        [flowsift_bin(), "compare", str(SAMPLES / "regional-carrier.pcapng"), "--window", WINDOW,
         "--html", str(out), "--format", "json"],
        capture_output=True, text=True, timeout=300,
    )
    assert proc.returncode == 0, proc.stderr
    return out, json.loads(proc.stdout)


def test_console_detection_works(chromium, tmp_path):
    """A probe page with console.error and an uncaught error is caught."""
    probe = tmp_path / "probe.html"
    probe.write_text('<!DOCTYPE html><p>x</p><script>console.error("probe"); missingFn();</script>')
    _, console = browse(chromium, probe, tmp_path / "profile", "--dump-dom")
    assert any("probe" in line for line in console), console
    assert any("Uncaught" in line for line in console), console


def test_report_is_self_contained(report):
    """No scripts and no references that would fetch anything."""
    html = report[0].read_text()
    assert "<script" not in html
    assert not re.search(r"""(?:src|href)\s*=\s*["'](?!#)""", html)
    assert "http://" not in html.replace("http://www.w3.org", "") and "https://" not in html
    assert "@import" not in html


def test_report_in_chromium(chromium, report, tmp_path):
    page, result = report
    shots = pathlib.Path(os.environ.get("FLOWSIFT_SCREENSHOT_DIR", tmp_path))
    shots.mkdir(parents=True, exist_ok=True)
    png = shots / "compare-report.png"
    _, console = browse(chromium, page, tmp_path / "p1", f"--screenshot={png}", "--window-size=1280,1600")
    assert console == [], console
    assert png.exists() and png.stat().st_size > 10_000
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"

    dom, console = browse(chromium, page, tmp_path / "p2", "--dump-dom")
    assert console == [], console
    # Verdict first, with the ground truth's persistent episodes named.
    assert dom.index('id="verdict"') < dom.index('id="chart-reasons"')
    assert "STILL DROPPING" in dom
    truth = json.loads((SAMPLES / "regional-carrier.pcapng.truth.json").read_text())
    evidence = dom[dom.index('id="evidence"'):dom.index("</ul>", dom.index('id="evidence"'))]
    for episode in truth["episodes"]:
        assert f"{episode['observationDomainId']} · {episode['why']}: {episode['expectedClass']}" in evidence
    # Chart elements: the rate chart with the window shaded and one series
    # per reason, the period bars, one small series per top value.
    assert dom.count('class="window"') >= 1 + dom.count('class="spark"')
    for reason in result["reasons"]:
        assert f'data-reason="{reason["reason"]}"' in dom
    assert 'id="chart-periods"' in dom
    assert dom.count('class="bar bar-during"') == min(8, len(result["values"]))
    assert dom.count('class="spark"') == min(8, len(result["values"]))
    assert "maintenance window" in dom
    # Caution, thresholds and method with its sources.
    assert "estimates from sampled flow exports" in dom and "operator decides" in dom
    assert "stable buckets" in dom and "min increase" in dom
    assert "Wilson" in dom and "7.3.3" in dom and "Cochran" in dom


def test_report_prints(chromium, report, tmp_path):
    """Chromium's print path (print styles) yields a PDF without console errors."""
    pdf = tmp_path / "compare-report.pdf"
    _, console = browse(chromium, report[0], tmp_path / "p3", f"--print-to-pdf={pdf}", "--no-pdf-header-footer")
    assert console == [], console
    data = pdf.read_bytes()
    assert data[:5] == b"%PDF-" and len(data) > 10_000
