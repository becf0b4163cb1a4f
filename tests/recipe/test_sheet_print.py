"""Every demo sheet prints on ONE A4 page, checked by printing it with Debian's chromium.

Each sheet is written to the test's temporary folder and printed with ``chromium --headless
--print-to-pdf`` (the launch flags of ../shared/TOOLING.md: the system browser, no download,
no network services).  The page count is read from the PDF twice, independently: the number of
page objects (``/Type /Page``) and the ``/Count`` of the page tree (ISO 32000-1:2008, 7.7.3.2),
and the page size from the ``/MediaBox``: A4 is 210 × 297 mm = 595.28 × 841.89 pt
(ISO 216).  Skips, saying why, when /usr/bin/chromium is absent (``.ci/run`` installs it).
"""

from __future__ import annotations

import re
import shutil
import subprocess
from pathlib import Path

import pytest

from phantomlab.recipe import load_recipe, solve
from phantomlab.recipe.calibration_series import plan_series
from phantomlab.recipe.sheet import render_series_html, render_sheet_html

pytestmark = [pytest.mark.browser, pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")]

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
CHROMIUM = Path("/usr/bin/chromium")
LAUNCH_ARGS = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--no-first-run",
    "--no-pdf-header-footer",
]
A4_PT = (595.28, 841.89)  # ISO 216: 210 x 297 mm at 72 pt per inch
A4_SLACK_PT = 1.5  # the browser rounds the page box to its own device units


def _print(html: str, folder: Path, name: str) -> bytes:
    if not CHROMIUM.exists():
        pytest.skip(f"{CHROMIUM} not found: the print check needs Debian's chromium (.ci/run installs it)")
    page = folder / f"{name}.html"
    pdf = folder / f"{name}.pdf"
    page.write_text(html, encoding="utf-8")
    done = subprocess.run([str(CHROMIUM), *LAUNCH_ARGS, f"--user-data-dir={folder / 'profile'}",
                           f"--print-to-pdf={pdf}", page.as_uri()],
                          capture_output=True, timeout=180, check=False)
    assert pdf.exists() and pdf.stat().st_size > 0, done.stderr.decode(errors="replace")[-2000:]
    return pdf.read_bytes()


def _pages(pdf: bytes) -> tuple[int, int, list[tuple[float, float]]]:
    """(page objects, page-tree count, page sizes in pt) of an uncompressed-dictionary PDF."""
    objects = len(re.findall(rb"/Type\s*/Page(?![a-zA-Z])", pdf))
    counts = [int(c) for c in re.findall(rb"/Type\s*/Pages\b[^>]*?/Count\s+(\d+)", pdf, re.S)]
    counts += [int(c) for c in re.findall(rb"/Count\s+(\d+)[^>]*?/Type\s*/Pages\b", pdf, re.S)]
    boxes = [tuple(float(v) for v in box.split()[2:4])
             for box in re.findall(rb"/MediaBox\s*\[\s*([-0-9.\s]+?)\s*\]", pdf)]
    return objects, max(counts) if counts else -1, boxes


def _assert_a4_pages(pdf: bytes, expected: int) -> None:
    objects, count, boxes = _pages(pdf)
    assert objects == count == expected, f"{objects} page objects, page tree says {count}; want {expected}"
    assert boxes, "no /MediaBox in the PDF"
    for width, height in boxes:
        assert abs(width - A4_PT[0]) <= A4_SLACK_PT and abs(height - A4_PT[1]) <= A4_SLACK_PT, (width, height)


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("print")


@pytest.mark.parametrize("name", ["demo-nir-liquid", "demo-silicone", "demo-gel-g", "demo-oximeter-blood"])
def test_demo_draft_sheet_is_one_a4_page(folder, name):
    plan = solve(load_recipe(RECIPES / f"{name}.toml"))
    _assert_a4_pages(_print(render_sheet_html(plan), folder, name), 1)


def test_logged_batch_sheet_is_one_a4_page(folder):
    plan = solve(load_recipe(RECIPES / "demo-silicone.toml"))
    html = render_sheet_html(plan, batch_id="2026-031", draft=False)
    _assert_a4_pages(_print(html, folder, "batch-2026-031"), 1)


def test_calibration_series_is_one_a4_page_per_level(folder):
    series = plan_series(load_recipe(RECIPES / "demo-nir-liquid.toml"), "ink_black", levels=3)
    html = render_series_html(series)
    _assert_a4_pages(_print(html, folder, "series"), html.count('<div class="page">'))


def test_page_counter_reads_a_two_page_print(folder):
    # the check itself can fail: a sheet twice as long prints on two pages
    plan = solve(load_recipe(RECIPES / "demo-gel-g.toml"))
    html = render_sheet_html(plan)
    body_start, body_end = html.index('<div class="page">'), html.rindex("</body>")
    doubled = html[:body_end] + html[body_start:body_end] + "</body></html>"
    objects, count, _ = _pages(_print(doubled, folder, "doubled"))
    assert objects == count >= 2


def test_bundled_pdf_tool_agrees_when_present(folder):
    # poppler's pdfinfo, where installed, reads the same page count and size
    if shutil.which("pdfinfo") is None:
        pytest.skip("pdfinfo (poppler-utils) not installed: the cross-check is optional")
    plan = solve(load_recipe(RECIPES / "demo-silicone.toml"))
    pdf = folder / "silicone-pdfinfo.pdf"
    pdf.write_bytes(_print(render_sheet_html(plan), folder, "silicone-pdfinfo"))
    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout
    assert re.search(r"^Pages:\s+1$", info, re.M)
    assert re.search(r"^Page size:.*\(A4\)", info, re.M)
