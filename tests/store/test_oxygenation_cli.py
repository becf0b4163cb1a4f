"""``phantomlab oxygenation add|show`` from the command line: one line per refusal, nothing written."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from phantomlab.cli import main

MEASUREMENTS = Path(__file__).resolve().parents[2] / "recipes" / "measurements"
RECIPE = Path(__file__).resolve().parents[2] / "recipes" / "demo-nir-liquid.toml"


def _run(capsys, *argv):
    status = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


@pytest.fixture
def lab(tmp_path, capsys):
    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    status, out, _ = _run(capsys, "batch", "add", RECIPE, "--db", db, "--json")
    return db, json.loads(out)["batch_id"]


def test_add_and_show(lab, capsys):
    db, code = lab
    status, out, _ = _run(capsys, "oxygenation", "add", code, MEASUREMENTS / "demo-oximeter-series.csv",
                          "--references", MEASUREMENTS / "demo-oximeter-references.csv",
                          "--chromophores", "hbo2,hb,water", "--name", "yeast run 1", "--db", db)
    assert status == 0 and "13 time points, 7 reference readings" in out and "interpolated" in out
    status, out, _ = _run(capsys, "oxygenation", "show", code, "--db", db, "--json")
    (series,) = json.loads(out)["series"]
    assert series["name"] == "yeast run 1" and len(series["comparison"]) == 7


@pytest.mark.parametrize(
    "readings, message",
    [
        ("measured_at,reference_so2_percent\n2026-03-02T10:02,120\n", "120 is outside 0-100 %"),
        ("measured_at,reference_so2\n2026-03-02T10:02,-0.1\n", "-0.1 is outside 0-1"),
        ("measured_at,reference_so2_percent\n,95\n", "no time (measured_at)"),
    ],
)
def test_bad_readings_one_line_nothing_stored(lab, capsys, tmp_path, readings, message):
    db, code = lab
    path = tmp_path / "readings.csv"
    path.write_text(readings, encoding="utf-8")
    status, out, err = _run(capsys, "oxygenation", "add", code, MEASUREMENTS / "demo-oximeter-series.csv",
                            "--references", path, "--chromophores", "hbo2,hb,water", "--db", db)
    assert status == 2 and out == "" and message in err and err.count("\n") == 1
    status, out, _ = _run(capsys, "oxygenation", "show", code, "--db", db, "--json")
    assert json.loads(out)["series"] == []


def test_refusals(lab, capsys):
    db, code = lab
    status, _, err = _run(capsys, "oxygenation", "add", code, "missing.csv", "--chromophores", "hbo2,hb", "--db", db)
    assert status == 2 and "series file 'missing.csv' not found" in err
    status, _, err = _run(capsys, "oxygenation")
    assert status == 2 and "give an action: add or show" in err
