"""The blood stock kind: a good stock, its default hazards, and one line per refusal."""

from __future__ import annotations

import pytest

from phantomlab.errors import InputError
from phantomlab.materials import load_shelf
from phantomlab.materials.stock import HAZARD_KEYS

GOOD = """
[stocks.water]
kind = "matrix"
material = "water"
density_g_per_ml = 1.0

[stocks.blood]
kind = "blood"
haemoglobin = "14.5 g/dL"
haematocrit = 0.43
species = "porcine"
anticoagulant = "heparin"
lot = "B1"
"""


def _shelf(tmp_path, text=GOOD):
    path = tmp_path / "stocks.toml"
    path.write_text(text, encoding="utf-8")
    return load_shelf(path)


def test_good_blood_stock(tmp_path):
    stock = _shelf(tmp_path)["blood"]
    assert stock.kind == "blood" and stock.spec.haemoglobin_g_per_l == pytest.approx(145.0)
    assert stock.spec.haematocrit == 0.43 and stock.solids_volume_fraction == 0.43
    assert stock.spec.scattering == "meinke2007" and stock.spec.extinction_source == "gratzer-kollias"
    assert stock.hazards == ("biohazard", "oxygen_exchange")  # always, even when the file lists none
    assert "clinical waste" in HAZARD_KEYS["biohazard"] and "human blood" in HAZARD_KEYS["biohazard"]
    assert "surface" in HAZARD_KEYS["oxygen_exchange"] and "vented" in HAZARD_KEYS["yeast"]


@pytest.mark.parametrize(
    "text, g_per_l",
    [('"145 g/L"', 145.0), ('"9.0 mmol/L"', 9.0 * 16.125), ('"145 mg/mL"', 145.0)],
)
def test_haemoglobin_units(tmp_path, text, g_per_l):
    stock = _shelf(tmp_path, GOOD.replace('"14.5 g/dL"', text))["blood"]
    assert stock.spec.haemoglobin_g_per_l == pytest.approx(g_per_l)


def test_a_haemoglobin_solution_has_no_red_cell_scattering(tmp_path):
    stock = _shelf(tmp_path, GOOD.replace("haematocrit = 0.43", "haematocrit = 0"))["blood"]
    assert stock.spec.scattering == "none"


BAD = [
    (('haemoglobin = "14.5 g/dL"\n', ""), "stock blood, field haemoglobin: missing"),
    (('"14.5 g/dL"', '"14.5 g/furlong"'), "stock blood, field haemoglobin: unknown unit 'g/furlong'; accepted units: g/dL"),
    (('"14.5 g/dL"', '"2.2 mM"'), "stock blood, field haemoglobin: unknown unit 'mM'"),
    (('"14.5 g/dL"', "14.5"), "stock blood, field haemoglobin: cannot read 14.5"),
    (("haematocrit = 0.43", "haematocrit = 43"), "stock blood, field haematocrit: expected the red-cell volume fraction"),
    (("haematocrit = 0.43\n", ""), "stock blood, field haematocrit: missing"),
    (('species = "porcine"', 'species = "pig"'), "stock blood, field species: 'pig' is not one of human, porcine"),
    (('anticoagulant = "heparin"', 'so2 = 0.97'), "stock blood: unknown field 'so2'"),
    (("haematocrit = 0.43", 'haematocrit = 0\nscattering = "meinke2007"'), "meinke2007 is a red-cell model"),
]


@pytest.mark.parametrize("edit, message", BAD, ids=[m[:50] for _, m in BAD])
def test_bad_blood_stock_refused_with_one_line(tmp_path, edit, message):
    old, new = edit
    assert old in GOOD
    with pytest.raises(InputError, match=message) as info:
        _shelf(tmp_path, GOOD.replace(old, new, 1))
    assert "\n" not in str(info.value)
