"""The loop README.md shows, run through the command line on a temporary SQLite batch log.

The demo probe file `recipes/measurements/demo-nir-liquid-srdr.csv` was made (by the script
beside it) from the demo recipe with invented "true" potencies lipid20 1.12, ink_black 0.80,
dye_nir 1.10 and 1 % noise: recalibration must move the potencies towards those values, and
the corrected plan must differ from the first in the direction that compensates.
"""

import json
from pathlib import Path

import pytest

from phantomlab.cli import main

ROOT = Path(__file__).resolve().parents[2]
RECIPE = ROOT / "recipes" / "demo-nir-liquid.toml"
MEASUREMENT = ROOT / "recipes" / "measurements" / "demo-nir-liquid-srdr.csv"


def run(capsys, *argv):
    status = main([*map(str, argv), "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    return json.loads(captured.out)


def test_plan_log_dispense_measure_recalibrate_correct(tmp_path, capsys):
    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    first = run(capsys, "plan", RECIPE)
    added = run(capsys, "batch", "add", RECIPE, "--operator", "A. Tech", "--db", db)
    code = added["batch_id"]
    planned = {d["stock"]: d["volume_ml"] for d in added["doses"]}
    assert planned == pytest.approx({d["stock"]: d["volume_ml"] for d in first["doses"]})

    amounts = tmp_path / "dispensed.csv"
    amounts.write_text("stock,volume_ml\n" + "".join(f"{k},{v:.6g}\n" for k, v in planned.items()))
    actual = run(capsys, "batch", "actual", code, amounts, "--db", db)
    assert actual["within_tolerance"] is True

    measured = run(capsys, "batch", "measure", code, MEASUREMENT, "--kind", "srdr",
                   "--model", "kienle1997", "--db", db)
    assert measured["fit"]["model"] == "diffusion-kienle1997"
    assert len(measured["fit"]["wavelength_nm"]) == 5

    calibrated = run(capsys, "recalibrate", "--db", db)["stocks"]
    # invented truth of the demo file (see the module docstring); the prior is 1.0 for each
    assert calibrated["lipid20"]["potency"] == pytest.approx(1.12, abs=0.04)
    assert calibrated["ink_black"]["potency"] == pytest.approx(0.80, abs=0.05)
    assert abs(calibrated["dye_nir"]["potency"] - 1.10) < abs(1.0 - 1.10)

    second = run(capsys, "plan", RECIPE, "--db", db)
    doses = {d["stock"]: d["volume_ml"] for d in second["doses"]}
    assert doses["lipid20"] < planned["lipid20"]  # stronger emulsion than the stock file said
    assert doses["ink_black"] > planned["ink_black"]  # weaker ink
    shown = run(capsys, "batch", "show", code, "--db", db)
    assert shown["batch_id"] == code
