"""End to end in a real headless browser: Debian's Chromium driven by Playwright.

Starts ``streamlit run app.py`` on a free port, loads the demo with one click, checks
that the verdict names the rearranged product and that the product ratio is shown,
and takes a screenshot. The browser is the system's Chromium (``$SPECMATCH_CHROMIUM``
or /usr/bin/chromium): Playwright is never asked to download one. Without Chromium
the test is skipped with the reason, except in CI (``CI=true``), where it fails.
"""

from __future__ import annotations

import os
import re
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

from specmatch.demo import demo_case
from specmatch.structures import canonical_smiles

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parents[1]
CHROMIUM_ARGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
                 "--disable-background-networking", "--disable-component-update", "--disable-sync"]
IN_CI = os.environ.get("CI", "").lower() == "true"


def _chromium() -> str | None:
    path = os.environ.get("SPECMATCH_CHROMIUM") or "/usr/bin/chromium"
    if path and os.path.isfile(path) and os.access(path, os.X_OK):
        return path
    found = shutil.which("chromium")
    return found


def _need(condition: bool, reason: str) -> None:
    if condition:
        return
    if IN_CI:
        pytest.fail(f"{reason} (CI=true: the browser test must run in CI)")
    pytest.skip(reason)


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


@pytest.fixture
def server(tmp_path):
    port = _free_port()
    env = {**os.environ, "SPECMATCH_STORE": f"sqlite:///{tmp_path / 'analyses.sqlite'}",
           "STREAMLIT_BROWSER_GATHER_USAGE_STATS": "false"}
    log = open(tmp_path / "streamlit.log", "w")
    proc = subprocess.Popen(
        [sys.executable, "-m", "streamlit", "run", "app.py", "--server.headless", "true",
         "--server.port", str(port), "--server.address", "127.0.0.1",
         "--server.fileWatcherType", "none", "--browser.gatherUsageStats", "false"],
        cwd=ROOT, env=env, stdout=log, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                with urllib.request.urlopen(url + "/_stcore/health", timeout=2) as r:
                    if r.read().strip() == b"ok":
                        break
            except OSError:
                pass
            if proc.poll() is not None or time.monotonic() > deadline:
                log.flush()
                raise AssertionError("streamlit did not start:\n" + (tmp_path / "streamlit.log").read_text())
            time.sleep(0.3)
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            proc.kill()
        log.close()


def test_demo_in_headless_chromium(server, tmp_path):
    chromium = _chromium()
    _need(chromium is not None, "Chromium is not installed (apt-get install chromium, or set SPECMATCH_CHROMIUM)")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _need(False, "the playwright Python package is not installed")
    case = demo_case("a")
    shot = tmp_path / "demo.png"
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=chromium, headless=True, args=CHROMIUM_ARGS)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            page.goto(server, wait_until="domcontentloaded", timeout=60_000)
            page.get_by_role("button", name="Load the demo").click(timeout=60_000)
            verdict = page.locator("[data-testid='stAlert']").filter(has_text="p = ").first
            verdict.wait_for(state="attached", timeout=120_000)  # the run has reached the verdict
            page.get_by_role("tab", name="3 · Results").click(timeout=60_000)
            page.set_viewport_size({"width": 1400, "height": 2600})
            verdict.wait_for(state="visible", timeout=60_000)
            text = verdict.inner_text()
            ratio = page.get_by_text("Product ratio (from 1H)")
            ratio.wait_for(timeout=30_000)
            page.get_by_text("Signal by signal").wait_for(timeout=60_000)  # the page has finished
            ratio_text = page.locator("[data-testid='stMarkdownContainer'] strong").filter(
                has_text=re.compile(r"^\d{1,3}:\d{1,3}$")).first.inner_text(timeout=10_000)
            page.screenshot(path=str(shot), full_page=True)
            keep = os.environ.get("SPECMATCH_SCREENSHOT")  # optional copy for a human to look at
            if keep:
                shutil.copy(shot, keep)
        finally:
            browser.close()
    assert shot.stat().st_size > 20_000  # a rendered page, not a blank one
    # the verdict names the rearranged (tertiary) product first, and the ratio is shown
    assert canonical_smiles(case.rearranged) in text.split("p = ")[0], text
    major = int(ratio_text.split(":")[0])
    assert abs(major - round(100 * case.truth[case.rearranged])) <= 10, ratio_text
