"""report.html in a real browser: headless Chromium opens it from a file URL.

Chromium is driven by its own command line: ``--screenshot`` saves a PNG, ``--dump-dom`` prints
the page as the browser built it, and ``--enable-logging=stderr --v=0`` writes every console
message to stderr as a ``CONSOLE`` line. The report has no script, so any console message (an
error, a refused fetch under its Content-Security-Policy) is a failure. Install on Debian:
``apt-get install -y chromium``. Skipped only where no Chromium binary exists.
"""
from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from planner.report.html import render_report
from planner.demo.report_preview import sample_run

BROWSERS = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
CHROMIUM = next((p for p in map(shutil.which, BROWSERS) if p), None)
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="no Chromium binary on PATH "
                                "(Debian: apt-get install -y chromium)")

KEY_SECTIONS = ("cautions", "summary", "crews", "cash-orders", "depot-plans", "terminals",
                "data-quality", "forecast-accuracy", "method")
CONSOLE = re.compile(r":CONSOLE[:(]")
WINDOW = (1200, 2400)


def _chromium(args: list[str], profile: Path) -> subprocess.CompletedProcess:
    flags = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
             "--disable-background-networking", "--disable-component-update", "--disable-sync",
             "--disable-extensions", "--hide-scrollbars", "--mute-audio",
             f"--user-data-dir={profile}", "--enable-logging=stderr", "--v=0"]
    return subprocess.run([CHROMIUM, *flags, *args], capture_output=True, text=True,
                          timeout=180, check=False, stdin=subprocess.DEVNULL)


def _console_lines(stderr: str) -> list[str]:
    return [line for line in stderr.splitlines() if CONSOLE.search(line)]


@pytest.fixture(scope="module")
def report_file(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("browser")
    run = sample_run(folder / "scenario", terminals=9)
    path = folder / "report.html"
    path.write_text(render_report(run), encoding="utf-8")
    return path


def test_console_messages_are_caught(tmp_path):
    """The check below would see an error: a page that logs one is caught."""
    page = tmp_path / "noisy.html"
    page.write_text("<!DOCTYPE html><html><body><p id='x'>x</p>"
                    "<script>console.error('report-check')</script></body></html>")
    proc = _chromium(["--dump-dom", page.as_uri()], tmp_path / "profile")
    assert "id=\"x\"" in proc.stdout
    assert any("report-check" in line for line in _console_lines(proc.stderr)), proc.stderr


def test_report_renders_in_chromium_with_no_console_messages(report_file, tmp_path):
    shot = tmp_path / "report.png"
    proc = _chromium([f"--screenshot={shot}", f"--window-size={WINDOW[0]},{WINDOW[1]}",
                      report_file.as_uri()], tmp_path / "profile")
    assert proc.returncode == 0, proc.stderr[-2000:]
    assert _console_lines(proc.stderr) == []
    data = shot.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    from PIL import Image

    with Image.open(shot) as image:
        assert image.size == WINDOW
        grey = image.convert("L")
        lo, hi = grey.getextrema()
        # not a blank page: dark text on a light background, and the blue header rule
        assert lo < 60 and hi > 240
        colours = image.convert("RGB").getcolors(maxcolors=1 << 20) or []
        assert any(abs(r - 0x00) < 40 and abs(g - 0x72) < 40 and abs(b - 0xB2) < 40
                   for _, (r, g, b) in colours)


def test_dom_shows_the_key_sections(report_file, tmp_path):
    proc = _chromium(["--dump-dom", report_file.as_uri()], tmp_path / "profile")
    assert proc.returncode == 0, proc.stderr[-2000:]
    dom = proc.stdout
    for sid in KEY_SECTIONS:
        assert re.search(rf"<section id=\"{sid}\"><h2>[^<]+</h2>", dom), sid
    assert dom.count("<article class=\"terminal\"") == 9
    assert "Before you use this plan" in dom and "Network summary" in dom
    assert _console_lines(proc.stderr) == []
