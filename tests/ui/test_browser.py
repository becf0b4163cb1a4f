"""The page in a real browser: ``streamlit run app.py`` driven by Debian's chromium.

Starts the page on a free localhost port against a demo database in the test's temporary
folder, designs a phantom, downloads the mixing sheet, and saves screenshots under the
test's ``tmp_path``.  Fails if the page ever shows Streamlit's exception element.  Skips,
saying why, only when /usr/bin/chromium is absent (``.ci/run`` installs it).

Launch flags: ../shared/TOOLING.md (the system browser, never a downloaded one).
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

pytestmark = pytest.mark.browser

REPO_ROOT = Path(__file__).resolve().parents[2]
CHROMIUM = Path("/usr/bin/chromium")
LAUNCH_ARGS = [
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
]
START_TIMEOUT_S = 90
STEP_TIMEOUT_MS = 120_000
EXCEPTION_SELECTOR = '[data-testid="stException"]'


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def _wait_healthy(url: str, process: subprocess.Popen, log: Path) -> None:
    deadline = time.monotonic() + START_TIMEOUT_S
    while time.monotonic() < deadline:
        if process.poll() is not None:
            pytest.fail(f"streamlit exited with {process.returncode}:\n{log.read_text()}")
        try:
            with urllib.request.urlopen(f"{url}/_stcore/health", timeout=2) as answer:
                if answer.status == 200:
                    return
        except OSError:
            time.sleep(0.5)
    pytest.fail(f"streamlit did not answer within {START_TIMEOUT_S} s:\n{log.read_text()}")


@pytest.fixture
def served_page(tmp_path, seeded_demo_file):
    """``streamlit run app.py`` on a free port, on a copy of the seeded demo database."""
    if not CHROMIUM.exists():
        pytest.skip(f"{CHROMIUM} is absent: install Debian's chromium (apt-get install chromium)")
    demo = tmp_path / "demo-data" / "phantomlab-demo.sqlite"
    demo.parent.mkdir()
    shutil.copyfile(seeded_demo_file, demo)
    port = _free_port()
    env = {k: v for k, v in os.environ.items() if k not in ("PHANTOMLAB_DB", "PHANTOMLAB_SHELF")}
    env["PHANTOMLAB_DEMO_DB"] = str(demo)
    log = tmp_path / "streamlit.log"
    command = [
        sys.executable, "-m", "streamlit", "run", str(REPO_ROOT / "app.py"),
        "--server.headless", "true",
        "--server.port", str(port),
        "--server.address", "127.0.0.1",
        "--browser.gatherUsageStats", "false",
        "--server.fileWatcherType", "none",
        "--client.toolbarMode", "minimal",
    ]
    with log.open("w") as log_file:
        process = subprocess.Popen(
            command, cwd=tmp_path, env=env, stdout=log_file, stderr=subprocess.STDOUT
        )
    url = f"http://127.0.0.1:{port}"
    try:
        _wait_healthy(url, process, log)
        yield url
    finally:
        process.terminate()
        try:
            process.wait(timeout=15)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait()


def _no_exception(page, where: str) -> None:
    shown = page.locator(EXCEPTION_SELECTOR)
    if shown.count():
        pytest.fail(f"the page shows an exception {where}: {shown.first.inner_text()[:2000]}")


def _settle(page) -> None:
    """Wait until Streamlit has finished running the script."""
    page.wait_for_timeout(300)
    page.wait_for_function(
        "() => !document.querySelector('[data-testid=\"stStatusWidget\"]')",
        timeout=STEP_TIMEOUT_MS,
    )
    page.wait_for_timeout(300)


def _shoot(page, path: Path) -> None:
    """A screenshot of the whole page: Streamlit scrolls inside its main block, not the window."""
    height = page.evaluate(
        "() => Math.max(...[...document.querySelectorAll('[data-testid=\"stMain\"], "
        "[data-testid=\"stAppViewContainer\"], section.main')].map(e => e.scrollHeight), 1000)"
    )
    page.set_viewport_size({"width": 1400, "height": min(int(height) + 40, 12000)})
    page.wait_for_timeout(1500)
    charts = page.locator('[data-testid="stPlotlyChart"]')
    for index in range(charts.count()):  # every chart drawn, not a placeholder
        charts.nth(index).locator(".main-svg").first.wait_for(state="attached", timeout=STEP_TIMEOUT_MS)
    page.wait_for_timeout(500)
    page.screenshot(path=path, full_page=True)
    page.set_viewport_size({"width": 1400, "height": 1000})


def test_design_a_phantom_and_download_the_sheet(served_page, tmp_path):
    from playwright.sync_api import sync_playwright

    shots = tmp_path / "screenshots"
    shots.mkdir()
    with sync_playwright() as driver:
        browser = driver.chromium.launch(
            executable_path=str(CHROMIUM), headless=True, args=LAUNCH_ARGS
        )
        try:
            context = browser.new_context(
                viewport={"width": 1400, "height": 1000}, accept_downloads=True
            )
            page = context.new_page()
            page.set_default_timeout(STEP_TIMEOUT_MS)
            page.goto(served_page)
            page.get_by_text("Demo data.").first.wait_for()
            page.get_by_role("heading", name="Design a phantom").first.wait_for()
            _settle(page)
            _no_exception(page, "on opening")
            _shoot(page, shots / "01-design-opened.png")

            page.get_by_text("Predicted against target").first.wait_for()
            volume = page.get_by_label("Batch volume (with unit: 500 mL, 0.25 L)")
            volume.fill("250")  # no unit: refused next to the field
            volume.press("Enter")
            page.get_by_text("no unit given").first.wait_for()
            _settle(page)
            _no_exception(page, "after a refused batch volume")
            _shoot(page, shots / "02-design-refused-volume.png")
            volume.fill("250 mL")
            volume.press("Enter")
            page.get_by_text("batch 250 mL").first.wait_for()
            _settle(page)
            _no_exception(page, "after solving")
            _shoot(page, shots / "02-design-solved.png")

            page.get_by_text("Preview the sheet").first.click()
            page.frame_locator("iframe").first.get_by_text("DRAFT").first.wait_for()
            _settle(page)
            page.get_by_text("Preview the sheet").first.scroll_into_view_if_needed()
            page.screenshot(path=shots / "02-design-sheet-preview.png")
            with page.expect_download() as download_info:
                page.get_by_role("button", name="Download the mixing sheet (HTML)").click()
            download = download_info.value
            sheet = tmp_path / download.suggested_filename
            download.save_as(sheet)
            html = sheet.read_text(encoding="utf-8")
            assert "<html" in html.lower()
            assert "certified reference" in html.lower()
            sheet_page = context.new_page()
            sheet_page.goto(sheet.as_uri())
            sheet_page.screenshot(path=shots / "03-sheet.png", full_page=True)
            sheet_page.close()

            # save the plan as a batch: it gets an ID
            page.get_by_label("Operator (your name or initials)").fill("browser test")
            page.get_by_role("button", name="Save as a new batch").click()
            page.get_by_text("Saved as batch").first.wait_for()
            _settle(page)
            _no_exception(page, "after saving the batch")

            for index, name in enumerate(["Stock shelf", "Batch log"], 4):
                page.get_by_text(name, exact=True).first.click()
                page.get_by_role("heading", name=name).first.wait_for()
                _settle(page)
                _no_exception(page, f"on the page {name!r}")
                _shoot(page, shots / f"0{index}-{name.replace(' ', '-')}.png")

            # at the bench: type what was dispensed, as the sheet gives it (stock or pre-dilution)
            fields = page.get_by_role("textbox", name=re.compile(r": from .*, sheet .* \(type the amount"))
            assert fields.count() == 3, "one field per dosed stock of the demo recipe"
            for index in range(fields.count()):
                field = fields.nth(index)
                label = field.get_attribute("aria-label") or ""
                planned = re.search(r", sheet ([0-9.]+ (?:µL|mL|mg|g)) \(", label)
                assert planned, label
                field.fill(planned.group(1).replace("µ", "u"))
                field.press("Tab")
            page.get_by_role("button", name="Record the amounts").click()
            page.get_by_text("recorded (version").first.wait_for()
            _settle(page)
            _no_exception(page, "after recording the amounts")
            page.get_by_role("tab", name="Measurements").click()
            with page.expect_download() as download_info:
                page.get_by_role("button", name=re.compile("Demo only: download an invented")).click()
            measurement = tmp_path / "demo-measurement.csv"
            download_info.value.save_as(measurement)
            page.locator('[data-testid="stFileUploaderDropzoneInput"]').first.set_input_files(str(measurement))
            _settle(page)
            page.get_by_role("button", name="Fit and attach").click()
            page.get_by_text("attached to batch").first.wait_for()
            _settle(page)
            _no_exception(page, "after attaching a measurement")
            _shoot(page, shots / "06-batch-measured.png")

            page.get_by_text("Fit and correct", exact=True).first.click()
            page.get_by_role("heading", name="Fit and correct").first.wait_for()
            _settle(page)
            _no_exception(page, "on the page 'Fit and correct'")
            _shoot(page, shots / "06-Fit-and-correct.png")

            # after the measurements, to a corrected next recipe, without the command line
            page.get_by_role("tab", name="Recalibrate the stocks").click()
            page.get_by_role("button", name="Preview the recalibration").click()
            page.get_by_text("nothing is recorded until you confirm").first.wait_for()
            _settle(page)
            _no_exception(page, "on the recalibration preview")
            _shoot(page, shots / "07-recalibration-preview.png")
            page.get_by_role("button", name="Record this calibration").click()
            page.get_by_text("Calibration recorded").first.wait_for()
            _settle(page)
            _no_exception(page, "after recalibrating")
            _shoot(page, shots / "07-recalibrated.png")
            page.get_by_role("tab", name="Correct the next batch").click()
            page.get_by_role("button", name="Save the corrected plan as a new batch").wait_for()
            _settle(page)
            _no_exception(page, "on the corrected plan")
            _shoot(page, shots / "08-corrected-plan.png")
            with page.expect_download() as download_info:
                page.get_by_role("button", name="Download the mixing sheet (HTML)").first.click()
            corrected = tmp_path / "corrected-sheet.html"
            download_info.value.save_as(corrected)
            assert "calibrated" in corrected.read_text(encoding="utf-8")
            assert "potencies from calibration state" in corrected.read_text(encoding="utf-8")
        finally:
            browser.close()
    print(f"screenshots in {shots}")


def test_record_an_oxygenation_series_and_see_it(served_page, tmp_path):
    """A demo batch gets the invented oximeter-test series through the page's form; the plot
    of fitted vs reference sO₂ over time and the reference-vs-fitted table appear."""
    from playwright.sync_api import sync_playwright

    shots = tmp_path / "screenshots"
    shots.mkdir()
    measurements = REPO_ROOT / "recipes" / "measurements"
    with sync_playwright() as driver:
        browser = driver.chromium.launch(executable_path=str(CHROMIUM), headless=True, args=LAUNCH_ARGS)
        try:
            page = browser.new_context(viewport={"width": 1400, "height": 1000}).new_page()
            page.set_default_timeout(STEP_TIMEOUT_MS)
            page.goto(served_page)
            page.get_by_text("Demo data.").first.wait_for()
            _settle(page)
            page.get_by_text("Batch log", exact=True).first.click()
            page.get_by_role("heading", name="Batch log").first.wait_for()
            _settle(page)
            page.get_by_role("tab", name="Oxygenation series").click()
            page.get_by_text("No oxygenation series recorded for this batch yet").first.wait_for()
            for label, name in (("Series file", "demo-oximeter-series.csv"),
                                ("Reference sO₂ readings", "demo-oximeter-references.csv")):
                uploader = page.locator('[data-testid="stFileUploader"]').filter(has_text=label).first
                uploader.locator('[data-testid="stFileUploaderDropzoneInput"]').set_input_files(str(measurements / name))
                _settle(page)
            page.get_by_role("button", name="Unmix and record").click()
            page.get_by_text("Oxygenation series 'demo-oximeter-series' recorded").first.wait_for()
            _settle(page)
            page.get_by_role("tab", name="Oxygenation series").click()
            page.get_by_text("Fitted vs reference sO₂ over time").first.wait_for()
            page.get_by_text("Reference vs fitted sO₂").first.wait_for()
            _settle(page)
            _no_exception(page, "after recording an oxygenation series")
            _shoot(page, shots / "09-oxygenation-series.png")
        finally:
            browser.close()
    print(f"screenshots in {shots}")
