"""The batch log from the command line, through ``phantomlab.cli.main``, on both engines:
plan -> batch add -> actual -> status -> measure -> show -> record -> list -> export/import.

These tests check what the commands call and show (docs/contract.md), not the physics:
the optics come from the recipe and calibration layers.
"""

from __future__ import annotations

import json
import re
import shutil
from pathlib import Path

import pytest

from phantomlab.cli import main
from phantomlab.recipe.sheet import DRAFT_MARK

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
RECIPE = RECIPES / "demo-nir-liquid.toml"


def run(capsys, *argv):
    """Run the command line; return (exit status, parsed JSON or None, stderr)."""
    capsys.readouterr()
    status = main([str(a) for a in argv])
    out, err = capsys.readouterr()
    payload = json.loads(out) if status == 0 and "--json" in argv else None
    if status == 0 and "--json" in argv:
        assert out.count("\n") == 1, "--json prints exactly one line"
    return status, payload, err


def _amounts(path: Path, doses, *, scale=None):
    scale = scale or {}
    lines = ["stock,volume_ml"] + [
        f"{d['stock']},{d['volume_ml'] * scale.get(d['stock'], 1.0)!r}" for d in doses
    ]
    path.write_text("\n".join(lines) + "\n")
    return path


def _optics_file(path: Path, target, factor=1.0, sd=0.01):
    rows = ["# source: demo data, invented",
            "wavelength_nm,mua_per_mm,musp_per_mm,mua_sd_per_mm,musp_sd_per_mm"]
    for w, a, s in zip(target["wavelength_nm"], target["mua_per_mm"], target["musp_per_mm"]):
        rows.append(f"{w},{a * factor!r},{s * factor!r},{a * sd!r},{s * sd!r}")
    path.write_text("\n".join(rows) + "\n")
    return path


def test_plan_add_actual_status_measure_show(db_url, tmp_path, capsys):
    status, plan, _ = run(capsys, "plan", RECIPE, "--db", db_url, "--json")
    assert status == 0
    sheet = tmp_path / "sheet.html"
    status, added, err = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--sheet", sheet,
                             "--operator", "A. Demo", "--json")
    assert status == 0, err
    code = added["batch_id"]
    assert re.fullmatch(r"\d{4}-001", code)
    for key in ("recipe", "batch_volume_ml", "doses", "predicted", "target", "warnings"):
        assert key in added
    assert [d["volume_ml"] for d in added["doses"]] == [d["volume_ml"] for d in plan["doses"]]
    html = sheet.read_text()
    assert code in html and DRAFT_MARK not in html

    amounts = _amounts(tmp_path / "amounts.csv", added["doses"])
    status, actual, err = run(capsys, "batch", "actual", code, amounts, "--db", db_url,
                              "--cure", "stirred 10 min", "--json")
    assert status == 0, err
    assert actual["status"] == "mixed" and actual["version"] == 2
    assert actual["predicted"]["mua_per_mm"] == pytest.approx(added["predicted"]["mua_per_mm"], rel=1e-9)
    assert actual["alarm"] is (not (plan["residuals"]["mua_met"] and plan["residuals"]["musp_met"]))

    status, moved, err = run(capsys, "batch", "status", code, "characterised", "--db", db_url, "--json")
    assert status == 0 and moved["status"] == "characterised", err

    measured = _optics_file(tmp_path / "m1.csv", added["target"])
    status, measure, err = run(capsys, "batch", "measure", code, measured, "--kind", "optics",
                               "--age-days", "1", "--db", db_url, "--json")
    assert status == 0, err
    assert measure["batch_id"] == code and isinstance(measure["measurement_id"], int)
    fit = measure["fit"]
    for key in ("wavelength_nm", "mua_per_mm", "musp_per_mm", "mua_sd_per_mm", "musp_sd_per_mm",
                "model", "chi2_red", "warnings"):
        assert key in fit
    assert fit["mua_per_mm"] == pytest.approx(added["target"]["mua_per_mm"])

    status, shown, err = run(capsys, "batch", "show", code, "--db", db_url, "--json")
    assert status == 0, err
    assert [v["status"] for v in shown["history"]] == ["planned", "mixed", "characterised"]
    assert shown["cure_details"] == {"schedule": "stirred 10 min"}
    assert shown["measurements"][0]["fits"][0]["result"]["model"] == fit["model"]
    assert set(shown["lots"]) == {"water", "lipid20", "ink_black", "dye_nir"}

    record = tmp_path / "record.html"
    status, reviewed, err = run(capsys, "batch", "record", code, "--html", record, "--db", db_url, "--json")
    assert status == 0, err
    assert reviewed["pass"] is True  # measured exactly on target, 1 % SD: 0 + 2 SD within ±3 %
    text = record.read_text()
    assert "not a certified reference standard" in text and code in text

    status, listed, _ = run(capsys, "batch", "list", "--db", db_url, "--json")
    assert [b["batch_id"] for b in listed["batches"]] == [code]

    # the readable form works too
    assert main(["batch", "show", code, "--db", db_url]) == 0
    assert "history:" in capsys.readouterr().out


def test_alarm_when_what_was_dispensed_leaves_the_tolerance(db_url, tmp_path, capsys):
    _, added, _ = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--json")
    absorbers = {d["stock"]: 1.5 for d in added["doses"] if d["kind"] == "absorber"}
    amounts = _amounts(tmp_path / "a.csv", added["doses"], scale=absorbers)
    status, actual, _ = run(capsys, "batch", "actual", added["batch_id"], amounts, "--db", db_url, "--json")
    assert status == 0
    assert actual["alarm"] is True
    assert any(a.startswith("ALARM: predicted mua") for a in actual["alarms"])
    assert any(w.startswith("ALARM:") for w in actual["warnings"])


def test_series_cv_and_drift_across_batches(db_url, tmp_path, capsys):
    factors = {1: 1.00, 2: 1.02, 3: 0.98}
    for age, factor in factors.items():
        _, added, _ = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--json")
        measured = _optics_file(tmp_path / f"m{age}.csv", added["target"], factor=factor)
        status, _, err = run(capsys, "batch", "measure", added["batch_id"], measured, "--kind", "optics",
                             "--age-days", age, "--db", db_url, "--json")
        assert status == 0, err
    status, reviewed, _ = run(capsys, "batch", "record", added["batch_id"], "--html", tmp_path / "r.html",
                              "--db", db_url, "--json")
    series = reviewed["series"]
    assert series["batches"] == 3
    # sample CV of (1.00, 1.02, 0.98): SD 0.02 / mean 1.00 -> 2 %  (n - 1 in the SD)
    assert series["mua_cv_percent"][0] == pytest.approx(2.0, rel=1e-6)
    # least-squares slope of (1, 1.00), (2, 1.02), (3, 0.98) against age: -0.01 per day
    # -> -0.01 * 30 / mean(1.00) = -30 % per 30 days
    assert series["musp_drift_percent_per_30_days"][0] == pytest.approx(-30.0, rel=1e-6)


def _table_counts(db_url):
    from sqlalchemy import func, select

    from phantomlab.store import open_store
    from phantomlab.store.schema import Base

    store = open_store(db_url)
    with store.reading() as session:
        counts = {name: session.scalar(select(func.count()).select_from(t))
                  for name, t in Base.metadata.tables.items()}
    store.close()
    return counts


def test_bad_input_is_one_line_and_writes_nothing(db_url, tmp_path, capsys):
    _, added, _ = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--json")
    code = added["batch_id"]
    good = _amounts(tmp_path / "good.csv", added["doses"])
    wrong_unit = tmp_path / "ul.csv"
    wrong_unit.write_text("stock,volume_ul\nlipid20,5000\n")
    unknown_stock = tmp_path / "unknown.csv"
    unknown_stock.write_text("stock,volume_ml\nmilk,5\n")
    not_a_number = tmp_path / "nan.csv"
    not_a_number.write_text("stock,volume_ml\nlipid20,5 mL\n")
    broken = tmp_path / "broken.csv"
    broken.write_text("this is not,a measurement\n1,2\n")
    cases = [
        (("batch", "actual", "2026-999", good), "unknown batch 2026-999"),
        (("batch", "actual", code, wrong_unit), "header not accepted (column 2)"),
        (("batch", "actual", code, unknown_stock), "'milk' is not a stock of this batch"),
        (("batch", "actual", code, not_a_number), "volume_ml: not a number"),
        (("batch", "status", code, "finished"), "status 'finished' not accepted"),
        (("batch", "status", code, "planned"), "status moves forward only"),
        (("batch", "measure", code, broken, "--kind", "optics"), "broken.csv"),
        (("batch", "measure", code, tmp_path / "missing.csv", "--kind", "optics"), "not found"),
        (("batch", "show", "yesterday"), "accepted: YEAR-SEQUENCE"),
        (("batch", "add", tmp_path / "none.toml"), ""),
        (("lab", "import", broken), "not a zip archive"),
        (("batch", "add", RECIPE, "--sheet", tmp_path / "no" / "sheet.html"), "does not exist"),
        (("batch", "add", RECIPE, "--sheet", tmp_path / "sheet.pdf"), "must end in .html"),
        (("batch", "export", tmp_path / "no" / "lab.zip"), "does not exist"),
        (("batch", "record", code, "--html", tmp_path / "no" / "r.html"), "does not exist"),
    ]
    before = _table_counts(db_url)
    for argv, match in cases:
        status, _, err = run(capsys, *argv, "--db", db_url)
        assert status == 2, (argv, err)
        assert err.startswith("phantomlab: error: ") and err.count("\n") == 1, err
        assert match in err, (match, err)
    assert _table_counts(db_url) == before


def test_expired_lot_warns_in_json_and_on_the_sheet(db_url, tmp_path, capsys):
    shelf_dir = tmp_path / "shelf"
    shutil.copytree(RECIPES, shelf_dir)
    stocks = shelf_dir / "demo-stocks.toml"
    # move the expiry of the dye_nir table (whatever date the demo shelf gives) into the past
    text, count = re.subn(r"(\[stocks\.dye_nir\][^\[]*?expiry = )\d{4}-\d{2}-\d{2}", r"\g<1>2020-01-15",
                          stocks.read_text())
    assert count == 1
    stocks.write_text(text)
    sheet = tmp_path / "sheet.html"
    status, added, err = run(capsys, "batch", "add", shelf_dir / "demo-nir-liquid.toml", "--db", db_url,
                             "--sheet", sheet, "--json")
    assert status == 0, err
    assert any("expired" in w and "dye_nir" in w for w in added["warnings"])
    assert [(e["stock"], e["expiry"]) for e in added["expired_lots"]] == [("dye_nir", "2020-01-15")]
    assert "2020-01-15" in sheet.read_text()


def test_export_and_import_from_the_command_line(db_url, tmp_path, capsys):
    _, added, _ = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--json")
    archive = tmp_path / "lab.zip"
    status, exported, err = run(capsys, "batch", "export", archive, "--db", db_url, "--json")
    assert status == 0 and exported["tables"]["batches"] == 1, err
    copy = f"sqlite:///{tmp_path / 'copy.sqlite'}"
    status, imported, err = run(capsys, "lab", "import", archive, "--db", copy, "--json")
    assert status == 0 and imported["tables"]["batches"] == 1, err
    _, original, _ = run(capsys, "batch", "show", added["batch_id"], "--db", db_url, "--json")
    _, restored, _ = run(capsys, "batch", "show", added["batch_id"], "--db", copy, "--json")
    assert restored == original


def test_default_database_is_created_in_the_working_folder(tmp_path, monkeypatch, capsys):
    monkeypatch.delenv("PHANTOMLAB_DB", raising=False)
    monkeypatch.chdir(tmp_path)
    status, added, _ = run(capsys, "batch", "add", RECIPE, "--json")
    assert status == 0 and (tmp_path / "phantomlab.sqlite").is_file()
    monkeypatch.setenv("PHANTOMLAB_DB", f"sqlite:///{tmp_path / 'env.sqlite'}")
    status, listed, _ = run(capsys, "batch", "list", "--json")
    assert listed["batches"] == [] and (tmp_path / "env.sqlite").is_file()


def test_measure_stores_the_raw_file_and_sidecar_and_fits_srdr(db_url, tmp_path, capsys):
    """The fit is the calibration layer's; here: it runs, and file and result are kept."""
    import numpy as np

    from phantomlab.store import get_batch, measurements_of, open_store
    from phantomlab.transport.diffusion import srdr_reflectance

    _, added, _ = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--json")
    wavelength, rho = np.array([660.0, 750.0]), np.array([1.5, 2.0, 3.0, 4.0, 5.0, 6.0])
    mua, musp = np.array([0.010, 0.012]), np.array([1.10, 1.00])
    reflectance = srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=1.33, model="farrell1992")
    lines = ["# source: demo data, invented (diffusion forward model)", "wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    lines += [f"{w:g},{r:g},{float(v)!r},{float(v) * 0.01!r}"
              for w, row in zip(wavelength, reflectance) for r, v in zip(rho, row)]
    measured = tmp_path / "probe.csv"
    measured.write_text("\n".join(lines) + "\n")
    (tmp_path / "probe.toml").write_text('# demo data, invented\nn = 1.33\ninstrument = "demo probe"\n')
    status, result, err = run(capsys, "batch", "measure", added["batch_id"], measured, "--kind", "srdr",
                              "--model", "farrell1992", "--db", db_url, "--json")
    assert status == 0, err
    assert result["fit_ran"] is True
    assert result["fit"]["mua_per_mm"] == pytest.approx(mua, rel=1e-4)
    assert result["fit"]["musp_per_mm"] == pytest.approx(musp, rel=1e-4)
    store = open_store(db_url)
    with store.reading() as session:
        (row,) = measurements_of(session, get_batch(session, added["batch_id"]))
        assert row.raw_content == measured.read_bytes()
        assert row.metadata_toml == (tmp_path / "probe.toml").read_text()
        assert row.instrument == "demo probe" and row.geometry["rho_mm"] == rho.tolist()
    store.close()

    status, stored_only, _ = run(capsys, "batch", "measure", added["batch_id"], measured, "--kind", "srdr",
                                 "--no-fit", "--db", db_url, "--json")
    assert status == 0 and stored_only["fit"] is None and stored_only["fit_ran"] is False
    assert any("no fit ran" in w for w in stored_only["warnings"])


def test_batch_add_uses_calibrated_potency_of_the_lot_on_the_shelf_only(db_url, tmp_path, capsys):
    from phantomlab.store import open_store, record_calibration

    _, uncalibrated, _ = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--json")
    store = open_store(db_url)
    with store.transaction() as session:
        record_calibration(session, potencies={("lipid20", "demo-LE20-0555"): (1.10, 0.02),
                                               ("ink_black", "another-bottle"): (2.0, 0.1)},
                           computed_from={"batches": [uncalibrated["batch_id"]]}, method="demo")
    store.close()
    _, calibrated, _ = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--json")
    used = calibrated["potencies_used"]
    assert used["lipid20"]["source"] == "calibrated" and used["lipid20"]["potency"] == 1.10
    assert used["lipid20"]["calibration_state_id"] is not None
    assert used["ink_black"]["source"] == "shelf"  # a calibration of another bottle is not applied
    before = {d["stock"]: d["volume_fraction"] for d in uncalibrated["doses"]}
    after = {d["stock"]: d["volume_fraction"] for d in calibrated["doses"]}
    # a stronger emulsion lot needs less of it for the same target (potency scales all its optics)
    assert after["lipid20"] == pytest.approx(before["lipid20"] / 1.10, rel=1e-3)
    status, reviewed, _ = run(capsys, "batch", "record", calibrated["batch_id"], "--html", tmp_path / "r.html",
                              "--db", db_url, "--json")
    assert status == 0
    text = (tmp_path / "r.html").read_text()
    assert "Calibration state" in text and "method demo" in text


def test_amend_and_retract_make_versions_that_show_in_the_history(db_url, capsys):
    _, added, _ = run(capsys, "batch", "add", RECIPE, "--db", db_url, "--operator", "A. Demo", "--json")
    code = added["batch_id"]
    status, fixed, err = run(capsys, "batch", "amend", code, "--set-operator", "B. Demo",
                             "--reason", "wrong name typed", "--operator", "reviewer", "--db", db_url, "--json")
    assert status == 0, err
    assert fixed["before"] == {"operator": "A. Demo"} and fixed["version"] == 2
    status, _, err = run(capsys, "batch", "amend", code, "--reason", "nothing", "--db", db_url)
    assert status == 2 and "nothing to amend" in err
    status, gone, err = run(capsys, "batch", "retract", code, "--reason", "spilled", "--db", db_url, "--json")
    assert status == 0 and gone["retracted"] is True, err
    _, listed, _ = run(capsys, "batch", "list", "--db", db_url, "--json")
    assert listed["batches"] == []
    _, everything, _ = run(capsys, "batch", "list", "--all", "--db", db_url, "--json")
    assert [b["batch_id"] for b in everything["batches"]] == [code]
    _, shown, _ = run(capsys, "batch", "show", code, "--db", db_url, "--json")
    assert [(v["version"], v["retracted"], v["change_note"]) for v in shown["history"]] == [
        (1, False, None), (2, False, "wrong name typed"), (3, True, "spilled")]
    assert shown["history"][1]["recorded_by"] == "reviewer" and shown["operator"] == "B. Demo"
