"""Good input that older versions mishandled, and files written whole or not at all.

* a UTF-8 byte-order mark (what spreadsheet programs write) is accepted in every CSV and
  TOML file a person hands over;
* a stock key such as ``../../../X`` never makes ``stock export`` write outside its folder;
* a mixing sheet exists only for a recorded batch: written after the commit through a
  temporary file, so a run stopped at any moment never leaves a sheet naming a batch ID
  the log does not hold (the next batch would receive that ID).
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

import pytest

from phantomlab.cli import main
from phantomlab.errors import InputError

REPO_ROOT = Path(__file__).resolve().parents[2]
RECIPES = REPO_ROOT / "recipes"
BOM = "\ufeff"
AMOUNTS = "stock,volume_ml\nwater,480\nlipid20,20\nink_black,0.05\ndye_nir,0.05\n"


def _run(*argv):
    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        status = main([str(a) for a in argv])
    return status, out.getvalue(), err.getvalue()


def _with_bom(path: Path) -> None:
    path.write_text(BOM + path.read_text(encoding="utf-8"), encoding="utf-8")


@pytest.fixture
def shelf(tmp_path):
    folder = tmp_path / "recipes"
    shutil.copytree(RECIPES, folder, ignore=shutil.ignore_patterns("*.py"))
    return folder


def test_a_byte_order_mark_is_accepted_in_every_file(shelf, tmp_path):
    for path in [shelf / "demo-nir-liquid.toml", shelf / "demo-stocks.toml", *shelf.glob("spectra/*.csv"),
                 *shelf.glob("measurements/*")]:
        _with_bom(path)
    status, out, err = _run("plan", shelf / "demo-nir-liquid.toml", "--json")
    assert status == 0, err
    url = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    status, out, err = _run("batch", "add", shelf / "demo-nir-liquid.toml", "--db", url, "--json")
    assert status == 0, err
    batch = json.loads(out)["batch_id"]
    (tmp_path / "amounts.csv").write_text(BOM + AMOUNTS, encoding="utf-8")
    status, _, err = _run("batch", "actual", batch, tmp_path / "amounts.csv", "--db", url)
    assert status == 0, err
    measurement = shelf / "measurements" / "demo-nir-liquid-srdr.csv"
    status, out, err = _run("fit", measurement, "--kind", "srdr", "--json")  # CSV and sidecar with a BOM
    assert status == 0, err
    assert json.loads(out)["wavelength_nm"] == [660.0, 700.0, 750.0, 800.0, 850.0]
    status, _, err = _run("batch", "measure", batch, measurement, "--kind", "srdr", "--db", url)
    assert status == 0, err
    target = shelf / "target.csv"
    target.write_text(BOM + "wavelength_nm,mua_per_mm,musp_per_mm\n660,0.01,1.0\n800,0.012,0.9\n", encoding="utf-8")
    recipe = (shelf / "demo-nir-liquid.toml").read_text(encoding="utf-8").replace(
        "wavelength_nm = [660, 700, 750, 800, 850]\nmua_per_mm = [0.010, 0.010, 0.012, 0.012, 0.012]\n"
        "musp_power_law = { a_per_mm = 1.0, b = 1.2, reference_nm = 750 }", 'spectrum_csv = "target.csv"')
    (shelf / "spectrum.toml").write_text(recipe, encoding="utf-8")
    status, _, err = _run("plan", shelf / "spectrum.toml")
    assert status == 0, err


def test_a_data_folder_can_be_allowed(shelf, tmp_path, monkeypatch):
    elsewhere = tmp_path / "shared-spectra"
    elsewhere.mkdir()
    shutil.copy(shelf / "spectra" / "dye_nir.csv", elsewhere / "dye_nir.csv")
    stocks = shelf / "demo-stocks.toml"
    stocks.write_text(stocks.read_text().replace('spectrum_csv = "spectra/dye_nir.csv"',
                                                 f'spectrum_csv = "{elsewhere / "dye_nir.csv"}"'))
    argv = ("stock", "optics", stocks, "dye_nir", "--wavelength-nm", "700")
    status, _, err = _run(*argv)
    assert status == 2 and "lies outside the folder" in err and "PHANTOMLAB_DATA_DIRS" in err
    monkeypatch.setenv("PHANTOMLAB_DATA_DIRS", str(elsewhere))
    status, _, err = _run(*argv)
    assert status == 0, err


def test_a_stock_key_never_leaves_the_export_folder(shelf, tmp_path):
    from phantomlab.materials import parse_shelf
    from phantomlab.shelf_export import PAGE_STOCK_SOURCE
    from phantomlab.store import open_store, record_stock_lot

    escape = "../../../escaped"
    stocks = shelf / "demo-stocks.toml"
    stocks.write_text(stocks.read_text() + f'\n[stocks."{escape}"]\nkind = "absorber"\n'
                      'spectrum_csv = "spectra/dye_nir.csv"\n')
    url = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    store = open_store(url)
    try:  # the same key as a stock added on the page (its CSV content kept in the log)
        page = parse_shelf({"stocks": {f"{escape}-page": {"kind": "absorber", "spectrum_csv": "spectra/dye_blue.csv"}}},
                           base=shelf)
        with store.transaction() as session:
            record_stock_lot(session, page[f"{escape}-page"], shelf_path=PAGE_STOCK_SOURCE)
    finally:
        store.close()
    out = tmp_path / "a" / "b" / "c" / "export.toml"
    out.parent.mkdir(parents=True)
    before = {p for p in tmp_path.rglob("*")}
    status, payload, err = _run("stock", "export", stocks, out, "--db", url, "--json")
    assert status == 0, err
    written = {p for p in tmp_path.rglob("*")} - before
    assert written and all(out.parent in p.parents or p == out for p in written), sorted(written)
    assert not [p for p in tmp_path.parent.rglob("escaped*") if out.parent not in p.parents]
    status, _, err = _run("stock", "optics", out, escape, "--wavelength-nm", "700")
    assert status == 0, err  # the export still loads, the key unchanged inside it


def test_a_sheet_is_written_only_after_the_commit(tmp_path, monkeypatch):
    import phantomlab.store as store_layer
    import phantomlab.workflows as workflows

    url = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    sheet = tmp_path / "sheet.html"

    def refuse(*args, **kwargs):
        raise InputError("the log refused the batch")

    with monkeypatch.context() as patch:  # the transaction fails: no batch, no sheet
        patch.setattr(store_layer, "add_batch", refuse)
        status, _, err = _run("batch", "add", RECIPES / "demo-nir-liquid.toml", "--sheet", sheet, "--db", url)
    assert status == 2 and "refused the batch" in err
    assert not sheet.exists() and not list(tmp_path.glob(".*partial"))

    def stopped(*args, **kwargs):
        raise KeyboardInterrupt

    with monkeypatch.context() as patch:  # stopped while writing the sheet: the batch stays, no partial sheet
        patch.setattr(workflows, "write_text_atomically", stopped)
        status, _, err = _run("batch", "add", RECIPES / "demo-nir-liquid.toml", "--sheet", sheet, "--db", url)
    assert status == 130
    assert not sheet.exists() and not list(tmp_path.glob("*.partial"))
    status, out, _ = _run("batch", "list", "--db", url, "--json")
    first = json.loads(out)["batches"][0]["batch_id"]

    seen_at_write = []
    real_write = workflows.write_text_atomically

    def write_and_look(path, text, **kwargs):  # what another reader sees when the sheet is written
        seen_at_write.append(json.loads(_run("batch", "list", "--db", url, "--json")[1])["batches"])
        return real_write(path, text, **kwargs)

    with monkeypatch.context() as patch:
        patch.setattr(workflows, "write_text_atomically", write_and_look)
        status, out, err = _run("batch", "add", RECIPES / "demo-nir-liquid.toml", "--sheet", sheet, "--db", url,
                                "--json")
    assert status == 0, err
    second = json.loads(out)["batch_id"]
    assert second in {row["batch_id"] for row in seen_at_write[0]}  # committed before the sheet exists
    assert second != first and second in sheet.read_text(encoding="utf-8")
    assert not list(tmp_path.glob(".*partial"))


def test_a_killed_batch_add_never_leaves_a_sheet_of_an_unrecorded_batch(tmp_path):
    """kill -9 at several moments: whenever a sheet exists, the log holds its batch ID."""
    url = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    assert _run("batch", "add", RECIPES / "demo-nir-liquid.toml", "--db", url)[0] == 0  # the log exists
    env = dict(os.environ, OPENBLAS_NUM_THREADS="1")
    for attempt, delay in enumerate((1.5, 2.5, 3.5, 5.0)):
        sheet = tmp_path / f"sheet-{attempt}.html"
        process = subprocess.Popen(
            [sys.executable, "-m", "phantomlab", "batch", "add", str(RECIPES / "demo-nir-liquid.toml"),
             "--sheet", str(sheet), "--db", url], stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, env=env)
        time.sleep(delay)
        process.send_signal(signal.SIGKILL)
        process.wait(timeout=30)
        status, out, err = _run("batch", "list", "--db", url, "--json")
        assert status == 0, err
        recorded = {row["batch_id"] for row in json.loads(out)["batches"]}
        if sheet.exists():
            text = sheet.read_text(encoding="utf-8")
            assert text.rstrip().endswith("</html>")  # whole, never half-written
            assert any(code in text for code in recorded)


def test_a_recipe_names_its_stock_file_inside_its_folder(shelf, tmp_path, monkeypatch):
    """A recipe handed over may not reach a stock file outside its folder tree (issue 16, item 3);
    one the batch log recorded (the page writes them naming the lab's stock file) may."""
    from phantomlab.recipe import load_recipe

    elsewhere = tmp_path / "recipes-elsewhere"
    elsewhere.mkdir()
    text = (shelf / "demo-nir-liquid.toml").read_text(encoding="utf-8")
    assert 'stocks_file = "demo-stocks.toml"' in text
    (elsewhere / "r.toml").write_text(text.replace('stocks_file = "demo-stocks.toml"',
                                                   f'stocks_file = "{shelf / "demo-stocks.toml"}"'), encoding="utf-8")
    status, out, err = _run("plan", elsewhere / "r.toml")
    assert status == 2 and "stocks_file" in err and "lies outside the folder" in err and not out
    assert load_recipe(elsewhere / "r.toml", recorded=True).name
    monkeypatch.setenv("PHANTOMLAB_DATA_DIRS", str(shelf))
    status, _, err = _run("plan", elsewhere / "r.toml")
    assert status == 0, err
