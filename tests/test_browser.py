"""A real browser: the app served on localhost, every page opened in headless Chromium.

Needs Debian's ``chromium``. Locally the test is skipped without it; in CI
(``CEILING_LAB_REQUIRE_BROWSER=1``) a missing browser is a failure. Screenshots are written to
``tests/artifacts/`` for a person to look at.
"""

import contextlib
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


@contextlib.contextmanager
def served(database: Path):
    """The app on a free localhost port with its own lab file; yields its address."""
    port = free_port()
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
    try:
        yield url
    finally:
        process.terminate()
        try:
            process.wait(timeout=20)
        except subprocess.TimeoutExpired:
            process.kill()


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    with served(tmp_path_factory.mktemp("browser") / "lab.sqlite3") as url:
        yield url


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
    requested: list[str] = []
    page.on("request", lambda request: requested.append(request.url))
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
        # The app asks nothing of the internet: every request goes to the app itself.
        outside = [url for url in requested
                   if not url.startswith((server, "data:", "blob:", "about:"))]
        assert outside == [], outside
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


# --- the users' paths, step by step, with a screenshot at each step ----------------------------

def _settle(page) -> None:
    wait_until_drawn(page)


def _type(page, label: str, text: str) -> None:
    box = page.get_by_label(label, exact=True).first
    box.fill(text)
    box.press("Enter")
    _settle(page)


def _click(page, name: str) -> None:
    page.get_by_role("button", name=name, exact=True).first.click()
    page.wait_for_timeout(1000)  # the rerun starts a moment after the click
    _settle(page)


def _see(page, text: str) -> None:
    """Wait until the page shows ``text`` (a busy machine redraws slowly)."""
    page.get_by_text(text, exact=False).first.wait_for(timeout=90_000)


def _shot(page, name: str) -> None:
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    page.screenshot(path=str(ARTIFACTS / f"path-{name}.png"), full_page=True)


def _open(page, url: str) -> None:
    page.goto(url, wait_until="domcontentloaded", timeout=90_000)
    _settle(page)


def _no_errors(page) -> None:
    assert page.locator("[data-testid='stException']").count() == 0
    errors = page.locator("[data-testid='stAlertContentError']")
    assert errors.count() == 0, errors.all_inner_texts()


def _upload(page, path: Path, which: int = 0) -> None:
    page.locator("[data-testid='stFileUploader'] input[type=file]").nth(which).set_input_files(
        str(path))
    _settle(page)
    page.wait_for_timeout(1500)
    _settle(page)


def _readings_file(path: Path, day: str, base: float) -> Path:
    """An invented session of the gallery's machine, without a session column."""
    lines = ["machine,time,speed [rpm],current [uA],rh [%]"]
    lines += [f"gallery-twin,{day}T10:{minute:02d}:00,{120 + 30 * minute},"
              f"{base * (120 + 30 * minute) / 300:.3f},{45 + minute % 3}"
              for minute in range(16)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_the_conservator_s_path(browser, tmp_path):
    """Describe a machine, import before and after, compare, download the report."""
    with served(tmp_path / "museum.sqlite3") as url:
        page = browser.new_page(viewport={"width": 1400, "height": 1800},
                                accept_downloads=True)
        try:
            _open(page, url)
            assert "demonstration lab" in page.locator("body").inner_text()
            _click(page, "Start my own lab")
            _shot(page, "conservator-1-own-lab")
            _open(page, f"{url}/machines")
            assert "Where is your lab?" in page.locator("body").inner_text()
            _type(page, "Id (letters, digits, '-' and '_')", "gallery-twin")
            _type(page, "Name shown on charts", "Gallery twin-disc machine")
            _type(page, "outer diameter", "44 cm")
            _type(page, "inner diameter", "26 cm")
            _type(page, "sector fill", "0.5")
            _shot(page, "conservator-2-machine")
            body = page.locator("body").inner_text()
            assert "twin-disc with sectors = 1 unit" in body
            _click(page, "Add this machine")
            _see(page, "Saved machine 'gallery-twin'")
            _no_errors(page)
            _open(page, f"{url}/readings")
            _upload(page, _readings_file(tmp_path / "before.csv", "2025-11-08", 1.2))
            _type(page, "Session", "before restoration")
            _shot(page, "conservator-3-before")
            _click(page, "Save the readings")
            _see(page, "session 'before restoration'")
            _upload(page, _readings_file(tmp_path / "after.csv", "2026-03-14", 2.4))
            _type(page, "Session", "after restoration")
            _click(page, "Save the readings")
            _see(page, "session 'after restoration'")
            _no_errors(page)
            _open(page, f"{url}/sessions")
            page.wait_for_selector("[data-testid='stPlotlyChart'] .main-svg", timeout=60_000)
            body = page.locator("body").inner_text()
            assert "'after restoration' session delivers" in body and "more" in body
            _shot(page, "conservator-4-sessions")
            _no_errors(page)
            _open(page, f"{url}/report")
            _type(page, "Report title", "Gallery twin-disc before and after restoration")
            with page.expect_download(timeout=120_000) as download_info:
                page.get_by_role("button", name="HTML report").click()
            target = tmp_path / "report.html"
            download_info.value.save_as(target)
            assert download_info.value.suggested_filename.startswith(
                "gallery-twin-disc-before-and-after-restoration")
            html = target.read_text(encoding="utf-8")
            verdict = html.index("Verdict")
            assert html.index("after restoration", verdict) < html.index("Machines", verdict)
            _shot(page, "conservator-5-report")
        finally:
            page.close()


TEACHER_MACHINES = """
[site]
altitude = "120 m"

[[machine]]
id = "bench-1"
label = "Bench 1 twin-disc"
carrier = "disc"
outer_diameter = "30 cm"
inner_diameter = "16 cm"
sector_fill = 0.5
arrangement = "twin-disc"

[[machine]]
id = "bench-2"
label = "Bench 2 belt"
carrier = "belt"
width = "4 cm"
roller_diameter = "4 cm"

[[machine]]
id = "bench-3"
label = "Bench 3 cylinder"
carrier = "cylinder"
diameter = "10 cm"
active_length = "20 cm"
"""


def test_the_teacher_s_path(browser, tmp_path):
    """Three machines from a file, two lessons in one readings file, compare."""
    machines = tmp_path / "benches.toml"
    machines.write_text(TEACHER_MACHINES, encoding="utf-8")
    lines = ["machine,session,time,speed [rpm],current [uA],rh [%]"]
    for lesson, day, factor in (("lesson 1", "2026-02-02", 1.0), ("lesson 2", "2026-02-09", 0.8)):
        for bench, top in (("bench-1", 600), ("bench-2", 2400), ("bench-3", 300)):
            for step in range(8):
                speed = top * (step + 2) / 10
                current = factor * 0.004 * speed * {"bench-1": 1, "bench-2": 0.2,
                                                    "bench-3": 4}[bench]
                lines.append(f"{bench},{lesson},{day}T09:{step:02d}:{len(lines) % 60:02d},"
                             f"{speed:.0f},{current:.3f},{40 + step}")
    readings = tmp_path / "lessons.csv"
    readings.write_text("\n".join(lines) + "\n", encoding="utf-8")
    with served(tmp_path / "school.sqlite3") as url:
        page = browser.new_page(viewport={"width": 1400, "height": 1800})
        try:
            _open(page, url)
            _click(page, "Start my own lab")
            _open(page, f"{url}/machines")
            page.get_by_role("tab", name="Machines file (TOML)").click()
            _upload(page, machines)
            _click(page, "Import these machines")
            _see(page, "Imported 3 machines")
            _shot(page, "teacher-1-machines")
            _open(page, f"{url}/readings")
            _upload(page, readings)
            assert "have no session" not in page.locator("body").inner_text()
            _click(page, "Save the readings")
            _no_errors(page)
            _shot(page, "teacher-2-readings")
            _open(page, f"{url}/compare")
            page.wait_for_selector("[data-testid='stPlotlyChart'] .main-svg", timeout=60_000)
            assert page.locator("[data-testid='stPlotlyChart']").count() == 4
            body = page.locator("body").inner_text()
            for label in ("Bench 1 twin-disc", "Bench 2 belt", "Bench 3 cylinder"):
                assert label in body
            _shot(page, "teacher-3-compare")
            _no_errors(page)
        finally:
            page.close()


def test_the_classroom_path_on_a_shared_server_lab(browser, tmp_path, pg_cluster):
    """Three apps on one PostgreSQL lab: the keeper describes the benches, a bench saves its
    readings, and the projector (a viewer account) sees them in Compare, read-only."""
    name = pg_cluster.new_lab()
    machines = tmp_path / "benches.toml"
    machines.write_text(TEACHER_MACHINES, encoding="utf-8")
    lines = ["machine,session,time,speed [rpm],current [uA],rh [%]"]
    for step in range(10):
        speed = 100 + 50 * step
        lines.append(f"bench-2,lesson 1,2026-02-02T09:{step:02d}:00,{speed},"
                     f"{0.0008 * speed:.4f},{40 + step}")
    readings = tmp_path / "bench-2.csv"
    readings.write_text("\n".join(lines) + "\n", encoding="utf-8")
    secrets = list(pg_cluster.passwords.values())
    with served(pg_cluster.url("lab_keeper", name)) as keeper_url, \
            served(pg_cluster.url("lab_bench", name)) as bench_url, \
            served(pg_cluster.url("lab_viewer", name)) as viewer_url:
        page = browser.new_page(viewport={"width": 1400, "height": 1800})
        try:
            _open(page, keeper_url)
            _click(page, "Start my own lab")
            _see(page, f"Shared lab: database '{name}' on 127.0.0.1")
            _open(page, f"{keeper_url}/machines")
            page.get_by_role("tab", name="Machines file (TOML)").click()
            _upload(page, machines)
            _click(page, "Import these machines")
            _see(page, "Imported 3 machines")
            _shot(page, "classroom-1-keeper")

            # The projector shows Compare before the bench saves anything ...
            projector = browser.new_page(viewport={"width": 1400, "height": 1800})
            _open(projector, f"{viewer_url}/compare")
            assert "Bench 2 belt" not in projector.locator("body").inner_text()

            _open(page, f"{bench_url}/readings")
            _see(page, "as lab_bench")
            _upload(page, readings)
            _click(page, "Save the readings")
            _see(page, "Saved 10 readings")
            _no_errors(page)
            _shot(page, "classroom-2-bench")

            # ... and shows the bench's readings by itself, without a reload.
            _see(projector, "Bench 2 belt")
            projector.wait_for_selector("[data-testid='stPlotlyChart'] .main-svg",
                                        timeout=60_000)
            body = projector.locator("body").inner_text()
            assert "(read-only)" in body
            _shot(projector, "classroom-3-projector")
            projector.close()
            _open(page, f"{viewer_url}/readings")
            _see(page, "This lab is open read-only")
            assert page.locator("[data-testid='stFileUploader']").count() == 0
            _no_errors(page)
            for shown in (page.content(), body):
                assert not any(secret in shown for secret in secrets)
        finally:
            page.close()
