"""The stock shelf through the page (AppTest): list, add a stock from cuvette files, edit, optics.

The cuvette readings are made from a known intrinsic attenuation μ(λ) with the Beer–Lambert
law, A = μ f L / ln 10 (base-10 absorbance, natural-log μ; e.g. Prahl's and every
spectroscopy text's statement of the law), so the page must hand back μ exactly; the path
length typed as "1 cm" must act as 10 mm (exact SI, BIPM SI Brochure 2019).
"""

from __future__ import annotations

import io
import math
import tomllib

import numpy as np
import pandas as pd
import pytest

from phantomlab.ui.workspace import DEMO_SHELF

WAVELENGTH_NM = np.arange(500.0, 800.0 + 1.0, 20.0)
FRACTIONS = (1.0e-3, 2.0e-3, 3.0e-3, 4.0e-3)


def _intrinsic(wavelength_nm):
    """An invented smooth intrinsic attenuation for the test [1/mm] (made up, no source needed)."""
    return 30.0 + 20.0 * np.exp(-0.5 * ((wavelength_nm - 650.0) / 40.0) ** 2)


def _series_file(path_mm: float) -> bytes:
    lines = ["# source: test data, computed by Beer-Lambert from an invented spectrum",
             "wavelength_nm,stock_volume_fraction,absorbance"]
    for fraction in FRACTIONS:
        absorbance = _intrinsic(WAVELENGTH_NM) * fraction * path_mm / math.log(10.0)
        lines += [f"{w:g},{fraction:g},{a:.12g}" for w, a in zip(WAVELENGTH_NM, absorbance)]
    return ("\n".join(lines) + "\n").encode()


@pytest.fixture
def shelf_page(page, go_to):
    return go_to(page, "Stock shelf")


def _shelf_table(app) -> pd.DataFrame:
    frames = [f.value for f in app.dataframe if "defined in" in f.value.columns]
    assert frames, "the shelf table is not shown"
    return frames[0]


def test_every_stock_of_the_stock_file_is_listed_with_lot_and_expiry(shelf_page):
    document = tomllib.loads(DEMO_SHELF.read_text(encoding="utf-8"))
    table = _shelf_table(shelf_page).set_index("stock")
    assert set(table.index) == set(document["stocks"])
    for key, entry in document["stocks"].items():
        assert table.loc[key, "lot"] == entry.get("lot", "")
        expected = entry["expiry"].isoformat() if "expiry" in entry else "none given"
        assert table.loc[key, "expiry"].split(" (")[0].removesuffix(" EXPIRED") == expected


def test_intrinsic_optics_of_a_stock_are_plotted_with_units(shelf_page, downloads):
    shelf_page.selectbox(key="shelf.optics_stock").set_value("dye_blue").run()
    assert not shelf_page.exception
    _name, csv = downloads.content(shelf_page, "Download the plotted numbers (CSV)")
    table = pd.read_csv(io.BytesIO(csv))
    assert {"wavelength_nm", "mua_per_mm", "musp_per_mm"} <= set(table.columns)
    # dye_blue is given by a measured intrinsic spectrum (recipes/spectra/dye_blue.csv) taken
    # against a water blank (solvent = "water"): the plotted values are that file's, on the
    # chosen grid (linear interpolation in between), plus the stock's own water
    from phantomlab.materials import water_absorption_per_mm

    source = pd.read_csv(DEMO_SHELF.parent / "spectra" / "dye_blue.csv", comment="#")
    expected = np.interp(table["wavelength_nm"], source["wavelength_nm"], source["mua_per_mm"])
    expected = expected + water_absorption_per_mm(table["wavelength_nm"].to_numpy())
    assert table["mua_per_mm"].to_numpy() == pytest.approx(expected, rel=1e-9)
    assert np.all(table["musp_per_mm"] == 0.0)


@pytest.mark.parametrize("typed_path, path_mm", [("10 mm", 10.0), ("1 cm", 10.0), ("2 mm", 2.0)])
def test_cuvette_series_gives_back_the_intrinsic_spectrum(shelf_page, downloads, typed_path, path_mm):
    shelf_page.text_input(key="shelf.cuvette_path").set_value(typed_path)
    shelf_page.file_uploader(key="shelf.cuvette_files").set_value(
        [("series.csv", _series_file(path_mm), "text/csv")]).run()
    assert not shelf_page.exception
    assert any("4 dilutions" in m.value for m in shelf_page.markdown)
    assert any("Linear within the check" in s.value for s in shelf_page.success)
    _name, csv = downloads.content(shelf_page, "Download the plotted numbers (CSV)")
    # the optics plot comes first on the page; find the cuvette fit's table among the downloads
    buttons = [b for b in shelf_page.get("download_button") if b.proto.label.startswith("Download the plotted")]
    tables = []
    for button in buttons:
        name = button.proto.url.rsplit("/", 1)[-1]
        for storage in reversed(downloads.storages):
            try:
                tables.append(pd.read_csv(io.BytesIO(bytes(storage.get_file(name).content))))
                break
            except Exception:  # noqa: BLE001
                continue
    fit = next(t for t in tables if "intrinsic_per_mm" in t.columns)
    assert fit["intrinsic_per_mm"].to_numpy() == pytest.approx(_intrinsic(fit["wavelength_nm"].to_numpy()),
                                                              rel=1e-8)


def test_a_stock_added_from_cuvette_files_is_on_the_shelf_as_a_new_record(shelf_page, go_to):
    shelf_page.text_input(key="shelf.cuvette_path").set_value("10 mm")
    shelf_page.file_uploader(key="shelf.cuvette_files").set_value(
        [("series.csv", _series_file(10.0), "text/csv")]).run()
    shelf_page.text_input(key="shelf.new_key").set_value("dye_test")
    shelf_page.text_input(key="shelf.new_lot").set_value("test-lot-1")
    shelf_page.multiselect(key="shelf.new_hazards").set_value(["dye"])
    [b for b in shelf_page.get("button") if b.proto.label == "Add to the shelf"][0].click()
    shelf_page.run()
    assert not shelf_page.exception
    assert any("dye_test" in s.value and "added" in s.value for s in shelf_page.success)
    table = _shelf_table(shelf_page).set_index("stock")
    assert table.loc["dye_test", "lot"] == "test-lot-1"
    assert table.loc["dye_test", "defined in"] == "page, version 1"
    # written out with the stock file, the command line reads it like any bottle
    [b for b in shelf_page.get("button") if b.proto.label.startswith("Write them with the stock file")][0].click()
    shelf_page.run()
    assert not shelf_page.exception
    written = [s.value for s in shelf_page.success if s.value.startswith("Wrote ")]
    assert written, [s.value for s in shelf_page.success]
    from pathlib import Path

    from phantomlab.materials import load_shelf

    exported = Path(written[0].split()[1])
    assert exported.name == "demo-stocks-with-page-stocks.toml"
    assert load_shelf(exported)["dye_test"].lot == "test-lot-1"
    # the new stock is offered on the design page
    design = go_to(shelf_page, "Design a phantom")
    assert any(option.startswith("dye_test ") for option in design.multiselect(key="design.stocks").options)


def test_a_file_without_the_absorbance_column_is_refused_in_one_line(shelf_page):
    bad = b"wavelength_nm,stock_volume_fraction,transmittance\n500,0.001,0.5\n520,0.001,0.5\n"
    shelf_page.file_uploader(key="shelf.cuvette_files").set_value([("bad.csv", bad, "text/csv")]).run()
    assert not shelf_page.exception
    errors = [e.value for e in shelf_page.error]
    assert any("absorbance" in e for e in errors) and all("\n" not in e for e in errors)


def test_a_series_of_two_dilutions_is_refused(shelf_page):
    text = _series_file(10.0).decode().splitlines()
    kept = [line for line in text if not line.split(",")[1:2] or line.split(",")[1] in
            ("stock_volume_fraction", "0.001", "0.002")]
    shelf_page.file_uploader(key="shelf.cuvette_files").set_value(
        [("two.csv", ("\n".join(kept) + "\n").encode(), "text/csv")]).run()
    assert not shelf_page.exception
    assert any("at least 3" in e.value for e in shelf_page.error)


def test_editing_a_stock_records_a_new_version(shelf_page):
    shelf_page.selectbox(key="shelf.edit_stock").set_value("dye_blue").run()
    form_inputs = [t for t in shelf_page.text_input if t.label == "Lot or bottle" and t.value == "demo-blue-44"]
    assert form_inputs
    form_inputs[0].set_value("demo-blue-45")
    [b for b in shelf_page.get("button") if b.proto.label == "Record the new version"][0].click()
    shelf_page.run()
    assert not shelf_page.exception
    table = _shelf_table(shelf_page).set_index("stock")
    assert table.loc["dye_blue", "lot"] == "demo-blue-45"
    assert table.loc["dye_blue", "defined in"].startswith("page, version")
