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


def _browser(p):
    chromium = _chromium()
    _need(chromium is not None, "Chromium is not installed (apt-get install chromium, or set SPECMATCH_CHROMIUM)")
    return p.chromium.launch(executable_path=chromium, headless=True, args=CHROMIUM_ARGS)


def _playwright():
    _need(_chromium() is not None, "Chromium is not installed (apt-get install chromium, or set SPECMATCH_CHROMIUM)")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _need(False, "the playwright Python package is not installed")
    return sync_playwright


def _shot(page, tmp_path: Path, name: str) -> Path:
    """Full-length screenshot of the page (Streamlit scrolls inside its main block)."""
    height = page.evaluate("() => Math.max(...[...document.querySelectorAll('[data-testid=stMain], "
                           "[data-testid=stAppViewContainer], section.main')].map(e => e.scrollHeight), "
                           "document.body.scrollHeight)")
    page.set_viewport_size({"width": 1400, "height": int(min(max(height, 900), 8000))})
    page.wait_for_timeout(1500)  # plots re-layout to the new size
    shot = tmp_path / f"{name}.png"
    page.screenshot(path=str(shot), full_page=True)
    keep = os.environ.get("SPECMATCH_SCREENSHOT_DIR")  # optional copies for a human to look at
    if keep:
        Path(keep).mkdir(parents=True, exist_ok=True)
        shutil.copy(shot, Path(keep) / shot.name)
    return shot


def _load_demo(page, server: str) -> str:
    page.goto(server, wait_until="domcontentloaded", timeout=60_000)
    page.get_by_role("button", name="Load the demo").click(timeout=60_000)
    # the results view comes up by itself: the verdict card's structure caption appears
    answer = page.get_by_text(re.compile(r"^SMILES: ")).first
    answer.wait_for(state="visible", timeout=180_000)
    page.get_by_text("Signal by signal").wait_for(timeout=60_000)  # the page has finished
    return answer.inner_text().split("SMILES: ", 1)[1].strip()


def test_demo_in_headless_chromium(server, tmp_path):
    sync_playwright = _playwright()
    case = demo_case("a")
    with sync_playwright() as p:
        browser = _browser(p)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            answer = _load_demo(page, server)
            headline = page.locator("h4").filter(has_text=re.compile(r"^(Decisive|Likely|Tentative|Cannot)")).first
            headline.wait_for(timeout=30_000)
            ratio_text = page.locator("[data-testid='stMarkdownContainer'] strong").filter(
                has_text=re.compile(r"^\d{1,3}:\d{1,3}$")).first.inner_text(timeout=30_000)
            page.wait_for_timeout(2000)
            height = page.evaluate("() => document.querySelector('[data-testid=stMainBlockContainer]').scrollHeight")
            shot = _shot(page, tmp_path, "demo_a_results")
        finally:
            browser.close()
    assert shot.stat().st_size > 20_000  # a rendered page, not a blank one
    # the verdict names the rearranged (tertiary) product, and the ratio is shown
    assert canonical_smiles(answer) == canonical_smiles(case.rearranged), answer
    major = int(ratio_text.split(":")[0])
    assert abs(major - round(100 * case.truth[case.rearranged])) <= 10, ratio_text
    # the results view fits in about two screens at 1400 px (a screen of about 1000 px)
    assert height < 2600, height


def test_bad_upload_keeps_the_verdict_in_headless_chromium(server, tmp_path):
    sync_playwright = _playwright()
    case = demo_case("a")
    bad = tmp_path / "notes.txt"
    bad.write_text("this is not a spectrum\n", encoding="utf-8")
    with sync_playwright() as p:
        browser = _browser(p)
        try:
            page = browser.new_page(viewport={"width": 1400, "height": 1000})
            before = _load_demo(page, server)
            page.get_by_text("Spectra", exact=True).click(timeout=30_000)
            page.locator("[data-testid='stFileUploaderDropzoneInput']").first.set_input_files(str(bad))
            refused = page.get_by_text(re.compile("13C upload refused")).first
            refused.wait_for(timeout=120_000)
            _shot(page, tmp_path, "bad_upload_spectra")
            page.set_viewport_size({"width": 1400, "height": 1000})
            page.get_by_text("Results", exact=True).click(timeout=30_000)
            page.get_by_text("Signal by signal").wait_for(timeout=120_000)
            message = page.locator("[data-testid='stAlert']").filter(has_text="13C upload refused").first.inner_text(timeout=30_000)
            after = page.get_by_text(re.compile(r"^SMILES: ")).first.inner_text().split("SMILES: ", 1)[1].strip()
            _shot(page, tmp_path, "bad_upload_results")
        finally:
            browser.close()
    assert after == before  # the verdict is the one from the good data
    assert "notes.txt" in message and case.c13.name in message, message
