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


#: Vega's SVG renderer puts each data mark in a ``g.role-mark`` group; rules (axes, reference lines) are left out
#: so a chart whose data layer is empty is not saved by its zero line.
_COUNT_MARKS = """els => els.map(el => el.querySelectorAll('g.role-mark:not(.mark-rule) > *').length)"""
#: Page url path → text that says the page has rendered.
PAGES = {"": "Catalyst screening workbench", "log_trial": "Log a trial", "import_page": "Import a campaign",
         "trials": "One trial", "compare": "Compare catalysts", "rank": "Ranking on the"}
TRACE = "time,volume\n" + "".join(f"{60 * i},{20 * (1 - 0.85 ** i):.3f}\n" for i in range(25))


def _settle(page) -> None:
    """Wait until the script run is over and the charts have painted."""
    page.wait_for_timeout(800)
    page.locator("[data-testid='stStatusWidget']").wait_for(state="detached", timeout=120_000)
    page.wait_for_timeout(1500)


def _charts_have_marks(page, where: str) -> int:
    charts = page.locator("[data-testid='stVegaLiteChart']:visible")
    counts = charts.evaluate_all(_COUNT_MARKS)
    assert all(n > 0 for n in counts), f"{where}: a chart drew no marks ({counts})"
    return len(counts)


def _clean(page, where: str) -> None:
    assert page.locator("[data-testid='stException']").count() == 0, f"{where} shows an exception"
    assert page.get_by_text("Traceback", exact=False).count() == 0, f"{where} shows a traceback"


@pytest.mark.browser
@pytest.mark.slow
def test_every_page_in_a_real_browser_draws_its_charts(tmp_path):
    if not CHROMIUM.exists():
        if os.environ.get("CATALOG_REQUIRE_BROWSER") == "1":
            pytest.fail(f"{CHROMIUM} is missing and CATALOG_REQUIRE_BROWSER=1")
        pytest.skip(f"{CHROMIUM} is not installed")
    from playwright.sync_api import sync_playwright

    shots = Path(os.environ.get("CATALOG_SHOTS", ARTIFACTS))
    shots.mkdir(parents=True, exist_ok=True)
    port = _free_port()
    url = f"http://127.0.0.1:{port}"
    env = {**os.environ, "CATALOG_DB": os.environ.get("CATALOG_BROWSER_DB", str(tmp_path / "browser.duckdb"))}
    server = subprocess.Popen(
        [sys.executable, "-m", "streamlit", "run", str(ROOT / "app.py"), "--server.headless", "true",
         "--server.address", "127.0.0.1", "--server.port", str(port), "--browser.gatherUsageStats", "false"],
        cwd=tmp_path, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True)
    drawn: dict[str, int] = {}
    try:
        _wait_until_serving(url, server)
        with sync_playwright() as p:
            browser = p.chromium.launch(
                executable_path=str(CHROMIUM), headless=True,
                args=["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update",
                      "--disable-sync", "--no-first-run"])
            try:
                context = browser.new_context(viewport={"width": 1500, "height": 2400})  # a fresh profile
                page = context.new_page()
                for path, marker in PAGES.items():
                    name = path or "overview"
                    page.goto(f"{url}/{path}", wait_until="domcontentloaded")
                    page.get_by_text(marker, exact=False).first.wait_for(timeout=120_000)
                    _settle(page)
                    demo = "CATALOG_BROWSER_DB" not in os.environ  # another database (e.g. a large one) has no demo
                    assert not demo or page.get_by_text("Demo data", exact=False).count() >= 1
                    if name == "rank" and demo:
                        # The table is drawn on a canvas; its cells are mirrored into an accessible grid as text.
                        page.get_by_text(DEMO_CATALYST, exact=True).first.wait_for(state="attached", timeout=60_000)
                    if name == "log_trial":
                        box = page.get_by_label("paste it", exact=False)
                        box.fill(TRACE)
                        box.press("Control+Enter")
                        page.get_by_text("Preview of the trace", exact=False).first.wait_for(timeout=60_000)
                        _settle(page)
                        drawn["log_trial preview"] = _charts_have_marks(page, "log_trial preview")
                        ratio = page.get_by_role("spinbutton", name="Product per limiting reactant")
                        ratio.fill("3")
                        ratio.press("Enter")
                        _settle(page)
                        page.get_by_role("button", name="Check and save the trial").click()
                        page.get_by_text("saved and analysed", exact=False).first.wait_for(timeout=120_000)
                        _settle(page)
                    _clean(page, name)
                    drawn[name] = _charts_have_marks(page, name)
                    page.screenshot(path=str(shots / f"{name}.png"), full_page=True)
                    if name == "import_page" and demo:
                        # The demo's own files again: the preview must say they are already imported.
                        page.locator("input[type='file']").set_input_files(
                            [str(ROOT / "sample_campaign" / f) for f in ("catalysts.csv", "trials.csv", "traces.csv")])
                        page.get_by_text("already imported", exact=False).first.wait_for(timeout=60_000)
                        _settle(page)
                        _clean(page, "import preview")
                        page.screenshot(path=str(shots / "import_preview.png"), full_page=True)
                    if name == "compare":
                        tabs = page.get_by_role("tab")
                        for i in range(tabs.count()):
                            label = tabs.nth(i).inner_text().strip()
                            tabs.nth(i).click()
                            _settle(page)
                            _clean(page, f"compare tab {label}")
                            drawn[f"compare: {label}"] = _charts_have_marks(page, f"compare tab {label}")
                            page.screenshot(path=str(shots / f"compare-{i + 1}.png"), full_page=True)
            finally:
                browser.close()
    finally:
        server.terminate()
        try:
            server.wait(timeout=15)
        except subprocess.TimeoutExpired:
            server.kill()
            server.wait()
    # Pages that must have charts: a trial (raw signal, fit, residuals), the trace preview, every compare figure.
    assert drawn["trials"] >= 3 and drawn["log_trial preview"] >= 1 and drawn["log_trial"] >= 3, drawn
    assert all(drawn[k] >= 1 for k in drawn if k.startswith("compare: ") and "Flags" not in k), drawn
