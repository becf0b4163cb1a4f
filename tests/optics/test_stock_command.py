"""The ``phantomlab stock optics`` command: what it prints and refuses (no physics re-checked)."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

from phantomlab.cli import main

REPO = Path(__file__).resolve().parents[2]
DEMO = str(REPO / "recipes" / "demo-stocks.toml")


def run(capsys, *argv):
    status = main(list(argv))
    out, err = capsys.readouterr()
    return status, out, err


def test_json_keys_and_lengths(capsys):
    status, out, err = run(capsys, "stock", "optics", DEMO, "lipid20", "--wavelength-nm", "600:900:100", "--matrix", "water", "--json")
    assert status == 0 and err == ""
    payload = json.loads(out)
    for key in ("stock", "wavelength_nm", "mua_per_mm", "mus_per_mm", "g", "musp_per_mm", "warnings"):
        assert key in payload
    assert payload["wavelength_nm"] == [600.0, 700.0, 800.0, 900.0]
    assert all(len(payload[k]) == 4 for k in ("mua_per_mm", "mus_per_mm", "g", "musp_per_mm"))
    assert out.count("\n") == 1  # one JSON object and nothing else


def test_warnings_collected_into_json(capsys):
    status, out, _ = run(capsys, "stock", "optics", DEMO, "water", "--wavelength-nm", "350,650", "--json")
    payload = json.loads(out)
    assert status == 0 and any("below the 380 nm start of Pope & Fry" in w for w in payload["warnings"])


def test_readable_table_has_units(capsys):
    status, out, _ = run(capsys, "stock", "optics", DEMO, "ps500", "--wavelength-nm", "650,750", "--matrix", "gelatin10")
    assert status == 0
    assert "mua [1/mm]" in out and "musp [1/mm]" in out and "wavelength_nm" in out
    assert "in matrix gelatin10" in out and "per unit volume fraction" in out


@pytest.mark.parametrize(
    "argv, message",
    [
        (("ps1000", "--wavelength-nm", "650"), "several matrices \\(water, gelatin10, silicone\\); choose one with --matrix KEY"),
        (("ps100", "--wavelength-nm", "650", "--matrix", "water"), "unknown stock 'ps100' \\(did you mean 'ps1000'\\?\\)"),
        (("ps1000", "--wavelength-nm", "650", "--matrix", "dye_blue"), "stock 'dye_blue' is of kind absorber, not a matrix"),
        (("ps1000", "--wavelength-nm", "six", "--matrix", "water"), "--wavelength-nm: cannot read 'six'"),
        (("dye_blue", "--wavelength-nm", "300:500:100", "--matrix", "water"), "covers 400–1000 nm"),
    ],
)
def test_errors_one_line_exit_2(capsys, argv, message):
    import re

    status, out, err = run(capsys, "stock", "optics", DEMO, *argv, "--json")
    assert status == 2 and out == ""
    assert re.search(message, err) and err.count("\n") == 1


def test_console_entry_point_runs():
    done = subprocess.run(
        [sys.executable, "-m", "phantomlab", "stock", "optics", DEMO, "dye_nir", "--wavelength-nm", "790", "--json"],
        capture_output=True, text=True, check=False,
    )
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)["stock"] == "dye_nir"
