"""One real-browser check: the app served by `streamlit run`, driven by headless Chromium (Debian's, no download)."""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
CHROMIUM = Path("/usr/bin/chromium")
ARTIFACTS = Path(__file__).resolve().parent / "artifacts"
#: A catalyst of the demo campaign; its id in the ranking table says the page rendered the real results.
DEMO_CATALYST = "PtCe-12"


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _wait_until_serving(url: str, server: subprocess.Popen, limit_s: float = 90.0) -> None:
    deadline = time.monotonic() + limit_s
    while time.monotonic() < deadline:
        if server.poll() is not None:
            raise RuntimeError(f"streamlit exited early: {server.stdout.read() if server.stdout else ''}")
        try:
            with urllib.request.urlopen(url + "/_stcore/health", timeout=2) as response:
                if response.status == 200:
                    return
        except OSError:
            time.sleep(0.5)
    raise RuntimeError("streamlit did not start serving")


@pytest.mark.browser
def test_rank_page_in_a_real_browser(tmp_path):
    if not CHROMIUM.exists():
        if os.environ.get("CATALOG_REQUIRE_BROWSER") == "1":
            pytest.fail(f"{CHROMIUM} is missing and CATALOG_REQUIRE_BROWSER=1")
        pytest.skip(f"{CHROMIUM} is not installed")
    from playwright.sync_api import sync_playwright

    port = _free_port()
    url = f"http://127.0.0.1:{port}"
    env = {**os.environ, "CATALOG_DB": str(tmp_path / "browser.duckdb")}
    server = subprocess.Popen(
        [sys.executable, "-m", "streamlit", "run", str(ROOT / "app.py"), "--server.headless", "true",
         "--server.address", "127.0.0.1", "--server.port", str(port), "--browser.gatherUsageStats", "false"],
        cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    try:
        _wait_until_serving(url, server)
        with sync_playwright() as p:
            browser = p.chromium.launch(
                executable_path=str(CHROMIUM), headless=True,
                args=["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
                      "--disable-sync", "--no-first-run"])
            try:
                context = browser.new_context(viewport={"width": 1500, "height": 1100})  # a fresh profile
                page = context.new_page()
                page.goto(f"{url}/rank", wait_until="domcontentloaded")
                page.get_by_text("Ranking:", exact=False).first.wait_for(timeout=120_000)
                # The table is drawn on a canvas; its cells are mirrored into an accessible grid as text.
                page.get_by_text(DEMO_CATALYST, exact=True).first.wait_for(state="attached", timeout=60_000)
                page.wait_for_timeout(1500)  # let the table finish painting before the picture
                assert page.get_by_text("Demo data", exact=False).count() >= 1
                assert page.locator("[data-testid='stException']").count() == 0
                ARTIFACTS.mkdir(exist_ok=True)
                page.screenshot(path=str(ARTIFACTS / "rank.png"), full_page=True)
            finally:
                browser.close()
    finally:
        server.terminate()
        try:
            server.wait(timeout=15)
        except subprocess.TimeoutExpired:
            server.kill()
            server.wait()
