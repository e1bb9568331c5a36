"""A real browser: the app served on localhost, every page opened in headless Chromium.

Needs Debian's ``chromium``. Locally the test is skipped without it; in CI
(``CEILING_LAB_REQUIRE_BROWSER=1``) a missing browser is a failure. Screenshots are written to
``tests/artifacts/`` for a person to look at.
"""

import os
import shutil
import socket
import subprocess
import sys
import time
import urllib.request
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
ARTIFACTS = ROOT / "tests" / "artifacts"
CHROMIUM = shutil.which("chromium") or shutil.which("chromium-browser")
CHROMIUM_FLAGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking",
                  "--disable-component-update", "--disable-sync", "--no-first-run"]
# Compare first: a direct link as the very first request of a fresh server must still go
# through the app's frame (navigation, demo loading), not Streamlit's folder-based pages.
PAGES = {"compare": "Compare", "": "Ceiling Lab", "machines": "Machines", "readings": "Readings",
         "sessions": "Sessions", "planner": "Planner", "report": "Report",
         "safety": "Safety and method"}

pytestmark = pytest.mark.browser

if CHROMIUM is None:
    if os.environ.get("CEILING_LAB_REQUIRE_BROWSER") == "1":
        raise RuntimeError("chromium is required for the browser tests (apt-get install chromium)")
    pytest.skip("chromium is not installed", allow_module_level=True)


def free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    port = free_port()
    database = tmp_path_factory.mktemp("browser") / "lab.sqlite3"
    environment = {**os.environ, "CEILING_LAB_DB": str(database)}
    process = subprocess.Popen(
        [sys.executable, "-m", "streamlit", "run", "app.py", "--server.port", str(port),
         "--server.address", "127.0.0.1", "--server.headless", "true",
         "--browser.gatherUsageStats", "false"],
        cwd=ROOT, env=environment, stdout=subprocess.PIPE, stderr=subprocess.STDOUT)
    url = f"http://127.0.0.1:{port}"
    deadline = time.monotonic() + 90
    while True:
        try:
            with urllib.request.urlopen(f"{url}/_stcore/health", timeout=2) as answer:
                if answer.status == 200:
                    break
        except OSError:
            pass
        if process.poll() is not None or time.monotonic() > deadline:
            process.kill()
            output = process.stdout.read().decode(errors="replace")
            raise RuntimeError(f"the app did not start:\n{output[-3000:]}")
        time.sleep(0.5)
    yield url
    process.terminate()
    try:
        process.wait(timeout=20)
    except subprocess.TimeoutExpired:
        process.kill()


@pytest.fixture(scope="module")
def browser():
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        launched = playwright.chromium.launch(executable_path=CHROMIUM, headless=True,
                                              args=CHROMIUM_FLAGS)
        yield launched
        launched.close()


def wait_until_drawn(page) -> None:
    """Wait for Streamlit to finish running the page script."""
    page.wait_for_selector("h1", timeout=90_000)
    # Running: the status widget shows; still drawing: skeleton placeholders remain.
    page.wait_for_function(
        "() => !document.querySelector('[data-testid=\"stStatusWidget\"]')"
        " && document.querySelectorAll('[data-testid=\"stSkeleton\"]').length === 0",
        timeout=90_000)
    page.wait_for_timeout(1000)


@pytest.mark.parametrize("path", list(PAGES))
def test_every_page_opens_without_error(server, browser, path):
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    page = browser.new_page(viewport={"width": 1400, "height": 2000})
    try:
        page.goto(f"{server}/{path}", wait_until="domcontentloaded", timeout=90_000)
        wait_until_drawn(page)
        if path == "compare":
            page.wait_for_selector("[data-testid='stPlotlyChart'] .main-svg", timeout=60_000)
        page.screenshot(path=str(ARTIFACTS / f"page-{path or 'overview'}.png"), full_page=True)
        assert page.locator("h1").first.inner_text().strip() == PAGES[path]
        assert page.locator("[data-testid='stException']").count() == 0
        errors = page.locator("[data-testid='stAlertContentError']")
        assert errors.count() == 0, errors.all_inner_texts()
        if path == "compare":
            assert page.locator("[data-testid='stPlotlyChart']").count() == 4
        # The app's own navigation, never one entry per file of the pages folder.
        sidebar = page.locator("[data-testid='stSidebarNav']").inner_text()
        assert "Safety and method" in sidebar and "_shared" not in sidebar
    finally:
        page.close()


def test_the_html_report_downloads_self_contained(server, browser, tmp_path):
    page = browser.new_page(viewport={"width": 1400, "height": 2000}, accept_downloads=True)
    try:
        page.goto(f"{server}/report", wait_until="domcontentloaded", timeout=90_000)
        wait_until_drawn(page)
        with page.expect_download(timeout=120_000) as download_info:
            page.get_by_role("button", name="HTML report").click()
        target = tmp_path / "report.html"
        download_info.value.save_as(target)
        # named after the report's title (the page's default) and today's date
        from engine.report import report_file_name

        assert download_info.value.suggested_filename == report_file_name("Ceiling Lab report")
        html = target.read_text(encoding="utf-8")
        assert "Plotly.newPlot" in html and "Science centre twin-disc machine" in html
        assert "<script src=" not in html.replace(" ", "")  # plotly's JavaScript is embedded
        assert "does not make a set-up safe" in html
    finally:
        page.close()
