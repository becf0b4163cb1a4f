"""The page in a real browser: ``streamlit run app.py`` driven by Debian's chromium.

Starts the page on a free localhost port against a demo database in the test's temporary
folder, designs a phantom, downloads the mixing sheet (named after the recipe and the day),
saves it as a batch, fills in the whole bench record as the sheet asks (pre-dilutions as
made, the water, a dose weighed, mixing time, temperature, cure, who) and checks that
``batch actual`` of the same sheet stores the same (``batch show``), attaches a measurement,
downloads the batch record with its verdict, recalibrates and corrects; then photographs
every page at 1280 and 1920 px and checks that no table is wider than its place.
Screenshots are saved under the test's ``tmp_path``.  Fails if the page ever shows Streamlit's exception element.  Skips,
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
        "--server.maxUploadSize", "10",  # as `make run` passes it: the layers' file_mb limit
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


def _open_tab(page, name: str, shows) -> None:
    """Click the tab ``name`` and wait until ``shows`` (a locator in it) is there.

    Only the open tab's content runs: a tab's content appears after the rerun the click starts.
    """
    page.get_by_role("tab", name=name).click()
    shows.first.wait_for()
    _settle(page)


def _shoot(page, path: Path, *, width: int = 1400, settle_ms: int = 1500) -> None:
    """A screenshot of the whole page: Streamlit scrolls inside its main block, not the window."""
    height = page.evaluate(
        "() => Math.max(...[...document.querySelectorAll('[data-testid=\"stMain\"], "
        "[data-testid=\"stAppViewContainer\"], section.main')].map(e => e.scrollHeight), 1000)"
    )
    page.set_viewport_size({"width": width, "height": min(int(height) + 40, 12000)})
    page.wait_for_timeout(settle_ms)
    charts = page.locator('[data-testid="stPlotlyChart"]')
    for index in range(charts.count()):  # every chart drawn, not a placeholder
        charts.nth(index).locator(".main-svg").first.wait_for(state="attached", timeout=STEP_TIMEOUT_MS)
    page.wait_for_timeout(500)
    page.screenshot(path=path, full_page=True)
    page.set_viewport_size({"width": width, "height": 1000})


#: The sheet of the demo recipe as written down at the bench (demo data, invented); the same
#: lines as an amounts CSV for `batch actual`.
BENCH = {"ink_black-D1 actual taken": "101 uL", "ink_black-D1 actual diluent": "0.905 mL",
         "dye_nir-D1 actual taken": "98 uL", "dye_nir-D1 actual diluent": "902 uL",
         "1 · water": "476.0 mL", "2 · dye_nir": "160 uL", "3 · ink_black": "0.180 mL", "4 · lipid20": "23.9 g"}
BENCH_CSV = ("stock,volume_ml,mass_g,diluent_ml\nwater,476.0,,\nink_black-D1,0.101,,0.905\n"
             "dye_nir-D1,0.098,,0.902\ndye_nir,0.160,,\nink_black,0.180,,\nlipid20,,23.9,\n")
BY, CURE = "browser test", "stirred 10 min; liquid, no cure"


def _bench_record(page, tmp_path) -> str:
    """Fill the bench record of the batch just saved (the one open) and record it once."""
    form = page.locator('[data-testid="stForm"]').filter(has_text="Pre-dilutions as made")
    form.wait_for()
    for start, text in BENCH.items():
        field = form.get_by_role("textbox", name=re.compile("^" + re.escape(start)))
        assert field.count() == 1, start
        field.fill(text)
    form.get_by_role("textbox", name="Mixing time (HH:MM, 24 h; optional)").fill("14:30")
    form.get_by_role("textbox", name="Mixing temperature (with unit: 21 °C; optional)").fill("21 °C")
    form.get_by_role("textbox", name="Cure or setting schedule as done (optional)").fill(CURE)
    form.get_by_role("textbox", name="By (name or initials)").fill(BY)
    button = form.get_by_role("button", name="Record the amounts")
    button.click()
    notice = page.get_by_text(re.compile(r"Amounts of batch \d{4}-\d{3} recorded \(version 2, by browser test\)"))
    notice.first.wait_for()
    _settle(page)
    _no_exception(page, "after recording the bench record")
    # the success line sits right under the form's button
    form_box = page.locator('[data-testid="stForm"]').filter(has_text="Record corrected amounts").bounding_box()
    notice_box = notice.first.bounding_box()
    assert form_box and notice_box and 0 <= notice_box["y"] - (form_box["y"] + form_box["height"]) < 120
    return re.search(r"batch (\d{4}-\d{3})", notice.first.inner_text())[1]


def _check_the_command_line_stores_the_same(url, code, tmp_path) -> None:
    """`batch actual` of the same sheet into a twin batch stores what the page stored (`batch show`)."""
    import datetime as _dt
    import io
    import json
    from contextlib import redirect_stdout

    from phantomlab.cli import main

    database = f"sqlite:///{tmp_path / 'demo-data' / 'phantomlab-demo.sqlite'}"

    def cli(*argv):
        out = io.StringIO()
        with redirect_stdout(out):
            assert main([str(a) for a in argv] + ["--json"]) == 0
        return json.loads(out.getvalue())

    twin = cli("batch", "add", REPO_ROOT / "recipes" / "demo-nir-liquid.toml", "--db", database)["batch_id"]
    amounts = tmp_path / "bench.csv"
    amounts.write_text(BENCH_CSV, encoding="utf-8")
    cli("batch", "actual", twin, amounts, "--mixed-on", f"{_dt.date.today().isoformat()}T14:30",
        "--mixing-temperature-c", "21", "--cure", CURE, "--operator", BY, "--db", database)
    by_page, by_cli = cli("batch", "show", code, "--db", database), cli("batch", "show", twin, "--db", database)
    for key in ("cure_details", "mixed_on", "status", "alarms"):
        assert by_page[key] == by_cli[key], key
    assert by_page["history"][-1]["recorded_by"] == by_cli["history"][-1]["recorded_by"] == BY
    assert by_page["cure_details"] == {"schedule": CURE, "mixing_temperature_c": 21.0, "mixing_time": "14:30"}
    page_rows = {r["stock"]: r for r in by_page["actual_amounts"]}
    for row in by_cli["actual_amounts"]:
        mine = page_rows[row["stock"]]
        for key in ("volume_ml", "mass_g", "volume_fraction", "dilution_factor"):
            assert mine[key] == pytest.approx(row[key], rel=1e-12), (row["stock"], key)
        assert [s["step"] for s in mine.get("predilution", [])] == [s["step"] for s in row.get("predilution", [])]
    assert page_rows["lipid20"]["given"] == {"mass_g": 23.9}
    for a, b in zip(by_page["actual_prediction"]["musp_per_mm"], by_cli["actual_prediction"]["musp_per_mm"]):
        assert a == pytest.approx(b, rel=1e-12)


def _batch_record(page, code, tmp_path) -> None:
    """The batch record downloads from the batch's page and says PASS or FAIL as the page does."""
    _open_tab(page, "Amounts dispensed", page.get_by_text("What was dispensed"))
    with page.expect_download() as download_info:
        page.get_by_role("button", name=f"Download the batch record of {code} (HTML)").click()
    download = download_info.value
    assert download.suggested_filename == f"batch-record-{code}.html"
    record = tmp_path / download.suggested_filename
    download.save_as(record)
    html = record.read_text(encoding="utf-8")
    verdict = re.search(r"(PASS|FAIL|UNDECIDED): ", html)
    assert verdict, "the record gives no verdict"
    assert page.get_by_text(re.compile(f"^Batch record: {verdict[1]}")).count() == 1
    assert "ink_black-D1" in html and "14:30" in html and CURE in html


#: Every dataframe's scroller: a table whose columns do not fit shows a horizontal scroll bar.
_TABLE_WIDTHS = """() => [...document.querySelectorAll('[data-testid="stDataFrame"]')]
  .map(frame => frame.querySelector('.dvn-scroller'))
  .filter(scroller => scroller && scroller.clientWidth > 0)
  .map(scroller => [scroller.scrollWidth, scroller.clientWidth])"""


def _every_page_at(browser, url, widths, shots) -> dict[int, dict[str, list]]:
    """Screenshots of every page at each of ``widths`` px; the widths of its tables.

    Each page is opened once and the window resized (Streamlit lays the page out again
    without running it)."""
    context = browser.new_context(viewport={"width": widths[0], "height": 1000})
    page = context.new_page()
    page.set_default_timeout(STEP_TIMEOUT_MS)
    found: dict[int, dict[str, list]] = {width: {} for width in widths}
    try:
        page.goto(url)
        page.get_by_role("heading", name="Design a phantom").first.wait_for()
        for name in ("Design a phantom", "Stock shelf", "Batch log", "Fit and correct"):
            page.get_by_text(name, exact=True).first.click()
            page.get_by_role("heading", name=name).first.wait_for()
            _settle(page)
            if name != "Fit and correct":  # these pages hold tables: wait until one is drawn (on a
                # loaded machine the script can still be computing after the first settle)
                page.locator('[data-testid="stDataFrame"] .dvn-scroller').first.wait_for(state="visible")
                _settle(page)
            _no_exception(page, f"on the page {name!r}")
            for width in widths:
                _shoot(page, shots / f"{width}-{name.replace(' ', '-')}.png", width=width, settle_ms=600)
                found[width][name] = page.evaluate(_TABLE_WIDTHS)
    finally:
        context.close()
    return found


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
            assert re.fullmatch(r"sheet-demo-nir-liquid-mua-0-01-mm-musp-1-mm-\d{4}-\d{2}-\d{2}\.html",
                                download.suggested_filename), download.suggested_filename
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

            # at the bench: the whole sheet as written down, recorded on the page
            started = time.monotonic()
            code = _bench_record(page, tmp_path)
            _shoot(page, shots / "05-bench-recorded.png")
            _check_the_command_line_stores_the_same(served_page, code, tmp_path)
            bench_seconds = time.monotonic() - started
            _open_tab(page, "Measurements",
                      page.get_by_role("button", name=re.compile("Demo only: download an invented")))
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
            started = time.monotonic()
            _batch_record(page, code, tmp_path)
            bench_seconds += time.monotonic() - started

            page.get_by_text("Fit and correct", exact=True).first.click()
            page.get_by_role("heading", name="Fit and correct").first.wait_for()
            _settle(page)
            _no_exception(page, "on the page 'Fit and correct'")
            _shoot(page, shots / "06-Fit-and-correct.png")

            # after the measurements, to a corrected next recipe, without the command line
            _open_tab(page, "Recalibrate the stocks", page.get_by_role("button", name="Preview the recalibration"))
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
            _open_tab(page, "Correct the next batch",
                      page.get_by_role("button", name="Save the corrected plan as a new batch"))
            _no_exception(page, "on the corrected plan")
            _shoot(page, shots / "08-corrected-plan.png")
            with page.expect_download() as download_info:
                page.get_by_role("button", name="Download the mixing sheet (HTML)").first.click()
            corrected = tmp_path / "corrected-sheet.html"
            download_info.value.save_as(corrected)
            assert "calibrated" in corrected.read_text(encoding="utf-8")
            assert "potencies from calibration state" in corrected.read_text(encoding="utf-8")

            # every page at a laptop's and a desktop's width: no table hides a column
            started = time.monotonic()
            for width, tables in _every_page_at(browser, served_page, (1280, 1920), shots).items():
                assert tables["Design a phantom"] and tables["Stock shelf"] and tables["Batch log"], tables
                cut = {name: widths for name, widths in tables.items()
                       if any(scroll > client + 1 for scroll, client in widths)}
                assert not cut, f"at {width} px a table is wider than its place (scroll, client): {cut}"
            # a table column holding dates and strings makes pyarrow log a traceback on every run
            log = (tmp_path / "streamlit.log").read_text(encoding="utf-8", errors="replace")
            assert "Arrow" not in log, log[-3000:]
            print(f"bench record, its twin by the command line and the batch record: {bench_seconds:.0f} s; "
                  f"every page at 1280 and 1920 px: {time.monotonic() - started:.0f} s")
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
            _open_tab(page, "Oxygenation series", page.get_by_text("No oxygenation series recorded for this batch yet"))
            # the uploader states the layers' 10 MB file limit, not Streamlit's own 200 MB
            assert "10MB per file" in page.locator('[data-testid="stFileUploader"]').first.inner_text()
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
