"""``phantomlab stock export``: the stock file plus the page's stocks, as one stock file.

A stock added on the page lives in the batch log only; exported, the command line must read
it like any bottle of the stock file, with the same optics, and the export must stand alone
(its CSV files beside it).  Demo data: the invented Kestrel Bay shelf in ``recipes/`` and an
invented page dye.
"""

import json
from pathlib import Path

import numpy as np
import pytest

from phantomlab.cli import main
from phantomlab.errors import InputError
from phantomlab.materials import load_shelf, parse_shelf
from phantomlab.shelf_export import PAGE_STOCK_SOURCE, export_shelf
from phantomlab.store import open_store, record_stock_lot

ROOT = Path(__file__).resolve().parents[2]
SHELF = ROOT / "recipes" / "demo-stocks.toml"


def _page_dye(folder: Path):
    """An absorber as the page records it: its definition carries the spectrum's content."""
    spectrum = folder / "page-dye.csv"
    wl = np.arange(600, 901, 50)
    spectrum.write_text("# source: demo data, invented\nwavelength_nm,mua_per_mm\n"
                        + "".join(f"{w},{0.5 + 0.001 * (w - 600):.6g}\n" for w in wl))
    document = {"stocks": {"dye_page": {"kind": "absorber", "lot": "P-1", "potency": 1.0, "potency_sd": 0.1,
                                        "spectrum_csv": spectrum.name}}}
    return parse_shelf(document, base=folder)["dye_page"]


@pytest.fixture()
def store_with_page_stock(tmp_path):
    store = open_store(f"sqlite:///{tmp_path / 'lab.sqlite'}")
    dye = _page_dye(tmp_path)
    with store.transaction() as session:
        record_stock_lot(session, dye, shelf_path=PAGE_STOCK_SOURCE)
    (tmp_path / "page-dye.csv").unlink()  # the page keeps the content, not the file
    yield store
    store.close()


def test_export_holds_the_file_stocks_and_the_page_stock(store_with_page_stock, tmp_path):
    out = tmp_path / "export" / "shelf.toml"
    out.parent.mkdir()
    done = export_shelf(store_with_page_stock, SHELF, out)
    exported = load_shelf(out)
    original = load_shelf(SHELF)
    assert set(exported.stocks) == set(original.stocks) | {"dye_page"}
    assert done.from_page == (("dye_page", 1),)
    assert all(path.parent == out.parent / "shelf-files" and path.is_file() for path in done.files)
    # the same optics as the originals: a file stock with a spectrum, and the page stock
    from phantomlab.optics import intrinsic_optics

    wl = np.array([650.0, 700.0, 800.0])
    for key in ("dye_nir", "ink_black"):
        np.testing.assert_allclose(intrinsic_optics(exported[key], wavelength_nm=wl, matrix=None).mua_per_mm,
                                   intrinsic_optics(original[key], wavelength_nm=wl, matrix=None).mua_per_mm, rtol=1e-12)
    np.testing.assert_allclose(intrinsic_optics(exported["dye_page"], wavelength_nm=wl, matrix=None).mua_per_mm,
                               0.5 + 0.001 * (wl - 600), rtol=1e-9)


def test_command_line_export_then_read_the_page_stock(store_with_page_stock, tmp_path, capsys):
    out = tmp_path / "with-page.toml"
    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    assert main(["stock", "export", str(SHELF), str(out), "--db", db, "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert payload["from_page"] == [{"stock": "dye_page", "version": 1}]
    assert "dye_page" in payload["stocks"] and payload["file"] == str(out)
    assert main(["stock", "optics", str(out), "dye_page", "--wavelength-nm", "700", "--json"]) == 0
    optics = json.loads(capsys.readouterr().out)
    assert optics["mua_per_mm"] == pytest.approx([0.6])


def test_refusals_leave_nothing_behind(store_with_page_stock, tmp_path):
    with pytest.raises(InputError, match="would replace the stock file itself"):
        export_shelf(store_with_page_stock, SHELF, SHELF)
    with pytest.raises(InputError, match=r"must end in \.toml, got 'shelf\.txt'"):
        export_shelf(store_with_page_stock, SHELF, tmp_path / "shelf.txt")
    kept = tmp_path / "kept.toml"
    kept.write_text("# mine\n")
    with pytest.raises(InputError, match="exists; give --force"):
        export_shelf(store_with_page_stock, SHELF, kept)
    assert kept.read_text() == "# mine\n"
    before = sorted(p.name for p in tmp_path.iterdir())
    broken = tmp_path / "broken.toml"
    bad_shelf = tmp_path / "bad-stocks.toml"
    bad_shelf.write_text('[stocks.dye_x]\nkind = "absorber"\nspectrum_csv = "missing.csv"\n')
    with pytest.raises(InputError, match="stock dye_x, field spectrum_csv: file 'missing.csv' not found"):
        export_shelf(store_with_page_stock, bad_shelf, broken)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(before + ["bad-stocks.toml"])


def test_every_csv_a_stock_names_is_copied_with_the_export(tmp_path):
    """A page stock with its own solvent spectrum: both CSV files travel with the export."""
    wl = np.arange(600, 901, 50)
    (tmp_path / "dye.csv").write_text("# source: demo data, invented\nwavelength_nm,mua_per_mm\n"
                                      + "".join(f"{w},0.5\n" for w in wl))
    (tmp_path / "solvent.csv").write_text("# source: demo data, invented\nwavelength_nm,mua_per_mm\n"
                                          + "".join(f"{w},0.002\n" for w in wl))
    document = {"stocks": {"dye_solvent": {"kind": "absorber", "lot": "P-2", "potency": 1.0, "potency_sd": 0.1,
                                           "spectrum_csv": "dye.csv", "solvent_spectrum_csv": "solvent.csv"}}}
    stock = parse_shelf(document, base=tmp_path)["dye_solvent"]
    store = open_store(f"sqlite:///{tmp_path / 'lab.sqlite'}")
    try:
        with store.transaction() as session:
            record_stock_lot(session, stock, shelf_path=PAGE_STOCK_SOURCE)
        for name in ("dye.csv", "solvent.csv"):
            (tmp_path / name).unlink()
        out = tmp_path / "export" / "shelf.toml"
        out.parent.mkdir()
        done = export_shelf(store, SHELF, out)
    finally:
        store.close()
    exported = load_shelf(out).stocks["dye_solvent"]
    copied = {path.name.split("-")[1] for path in done.files if path.name.startswith("dye_solvent")}
    assert copied == {"spectrum_csv", "solvent_spectrum_csv"}
    from phantomlab.optics import intrinsic_optics

    np.testing.assert_allclose(intrinsic_optics(exported, wavelength_nm=np.array([700.0]), matrix=None).mua_per_mm,
                               intrinsic_optics(stock, wavelength_nm=np.array([700.0]), matrix=None).mua_per_mm)
