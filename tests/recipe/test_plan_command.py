"""``phantomlab plan`` through phantomlab.cli.main: the JSON contract of docs/contract.md, sheets, errors."""

import json
from pathlib import Path

import numpy as np
import pytest

from phantomlab.cli import main

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
NIR = str(RECIPES / "demo-nir-liquid.toml")
pytestmark = pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")


def _run(capsys, *argv):
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


def test_plan_json_contract(capsys):
    code, out, err = _run(capsys, "plan", NIR, "--json")
    assert code == 0 and err == ""
    payload = json.loads(out)  # exactly one JSON object, nothing else
    for key in ("recipe", "batch_volume_ml", "doses", "predicted", "target", "warnings"):
        assert key in payload
    assert payload["batch_volume_ml"] == 500
    for dose in payload["doses"]:
        assert {"stock", "volume_fraction", "volume_ml", "mass_g", "dilution"} <= set(dose)
        assert dose["volume_ml"] == pytest.approx(dose["volume_fraction"] * 500, rel=1e-12)
        assert dose["dilution"] is None or isinstance(dose["dilution"], list)
    assert any(d["dilution"] for d in payload["doses"])  # min_dispense_ul = 20 forces a pre-dilution
    predicted = payload["predicted"]
    for key in ("wavelength_nm", "mua_per_mm", "musp_per_mm", "g", "mua_sd_per_mm", "musp_sd_per_mm"):
        assert len(predicted[key]) == len(payload["target"]["wavelength_nm"])
    assert isinstance(payload["warnings"], list)


def test_plan_text_summary_and_sheet_files(capsys, tmp_path):
    sheet, table = tmp_path / "s.html", tmp_path / "s.csv"
    code, out, _ = _run(capsys, "plan", NIR, "--sheet", str(sheet), "--csv", str(table))
    assert code == 0
    assert "DRAFT — not a logged batch" in out and "lipid20" in out and "pre-dilute" in out
    assert sheet.read_text(encoding="utf-8").startswith("<!DOCTYPE html>")
    assert table.read_text(encoding="utf-8").startswith("section,item,value")


@pytest.mark.parametrize("argv, match", [
    (["plan", "no-such-recipe.toml"], "recipe file 'no-such-recipe.toml' not found"),
    (["plan", NIR, "--levels", "4"], "--levels needs --series STOCK_KEY"),
    (["plan", NIR, "--series", "nope"], "series: 'nope' is not a stock of this recipe"),
    (["plan", NIR, "--series", "dye_nir", "--levels", "7"], "give 3 to 5 concentrations"),
])
def test_plan_errors_are_one_line(capsys, argv, match):
    code, out, err = _run(capsys, *argv)
    assert code == 2 and out == ""
    assert err.startswith("phantomlab: error: ") and match in err and err.count("\n") == 1


def test_plan_with_db_uses_calibrated_potency(capsys, tmp_path):
    from phantomlab.materials import load_shelf
    from phantomlab.store import open_store, record_calibration

    url = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    code, out, _ = _run(capsys, "plan", NIR, "--db", url, "--json")
    assert code == 0
    payload = json.loads(out)
    assert payload["potencies_from"] == "stock file"  # no log there yet ...
    assert not (tmp_path / "lab.sqlite").exists()  # ... and plan does not create one
    assert any("no batch log at" in w for w in payload["warnings"])
    assert all(d["potency_source"] == "shelf" for d in payload["doses"])  # the priors
    shelf = load_shelf(RECIPES / "demo-stocks.toml")
    assert [d["potency"] for d in payload["doses"]] == [shelf[d["stock"]].potency for d in payload["doses"]]
    before = {d["stock"]: d["volume_fraction"] for d in payload["doses"]}
    # a calibration of the ink lot on the shelf at potency 0.5: the plan doubles the ink dose
    store = open_store(url)
    with store.transaction() as session:
        record_calibration(session, potencies={"ink_black": (0.5, 0.02, shelf["ink_black"].lot)},
                           computed_from={"test": "plan --db"}, method="test")
    store.close()
    code, out, _ = _run(capsys, "plan", NIR, "--db", url, "--json")
    payload = json.loads(out)
    after = {d["stock"]: d for d in payload["doses"]}
    assert after["ink_black"]["potency_source"] == "calibrated" and after["ink_black"]["potency"] == 0.5
    assert after["ink_black"]["volume_fraction"] > 1.5 * before["ink_black"]
    assert payload["potencies_from"]["state_id"] == 1 and payload["potencies_from"]["recorded_at"]


def test_plan_uses_the_default_batch_log_when_it_exists_and_never_creates_it(capsys, tmp_path, monkeypatch):
    from phantomlab.materials import load_shelf
    from phantomlab.store import open_store, record_calibration

    monkeypatch.chdir(tmp_path)
    monkeypatch.delenv("PHANTOMLAB_DB", raising=False)
    code, out, _ = _run(capsys, "plan", NIR, "--json")
    assert code == 0 and json.loads(out)["potencies_from"] == "stock file"
    assert not (tmp_path / "phantomlab.sqlite").exists()
    shelf = load_shelf(RECIPES / "demo-stocks.toml")
    store = open_store(None)  # the default file, as batch add would make it
    with store.transaction() as session:
        record_calibration(session, potencies={"ink_black": (0.5, 0.02, shelf["ink_black"].lot)},
                           computed_from={}, method="test")
    store.close()
    code, out, _ = _run(capsys, "plan", NIR, "--json")
    payload = json.loads(out)
    assert payload["potencies_from"]["state_id"] == 1
    assert {d["stock"]: d["potency"] for d in payload["doses"]}["ink_black"] == 0.5


def test_plan_series_json(capsys):
    code, out, _ = _run(capsys, "plan", NIR, "--series", "dye_nir", "--levels", "4", "--json")
    assert code == 0
    payload = json.loads(out)
    assert payload["series_stock"] == "dye_nir" and len(payload["levels"]) == 5  # base + 4
    fractions = [lv["volume_fraction"] for lv in payload["levels"]]
    assert fractions[0] == 0 and np.all(np.diff(fractions) > 0)
    np.testing.assert_allclose(np.diff(fractions[1:]), np.diff(fractions[1:])[0], rtol=1e-9)  # even steps
    k = payload["levels"][0]["predicted"]["wavelength_nm"].index(payload["readout_wavelength_nm"])
    mua = [lv["predicted"]["mua_per_mm"][k] for lv in payload["levels"]]
    assert np.all(np.diff(mua) > 0)
    # linear in concentration, as the calibration fit assumes
    slope = np.polyfit(fractions, mua, 1)[0]
    np.testing.assert_allclose(np.polyval(np.polyfit(fractions, mua, 1), fractions), mua, rtol=1e-6)
    assert slope > 0
