"""Intrinsic optics of a blood stock, by hand from the published tables."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.materials import load_shelf
from phantomlab.materials.water import water_absorption_per_mm
from phantomlab.optics import intrinsic_optics

DEMO = Path(__file__).resolve().parents[2] / "recipes" / "demo-stocks.toml"

# Gratzer & Kollias (Prahl 1999): (nm, HbO2, Hb) in 1/(M cm) per mole of tetramer.
ROWS = [(660, 319.6, 3226.56), (800, 816, 761.72), (900, 1198, 761.84)]
# Meinke et al. 2007 standard blood rows: (nm, mus /mm, mus' /mm)
MEINKE = {660: (34.1, 0.45), 800: (30.8, 0.407), 900: (28.4, 0.405)}


@pytest.mark.parametrize("so2", [0.0, 0.3, 0.97])
def test_blood_optics_by_hand(so2):
    shelf = load_shelf(DEMO)
    blood = shelf["blood_kb1"]  # 14.2 g/dL, Hct 0.42, water 0.8 (demo data)
    wavelength = np.array([r[0] for r in ROWS], dtype=float)
    optics = intrinsic_optics(blood, wavelength_nm=wavelength, matrix=None, so2=so2)
    molar = 142.0 / 64500.0
    for i, (lam, oxy, deoxy) in enumerate(ROWS):
        haemoglobin = math.log(10) * molar * (so2 * oxy + (1 - so2) * deoxy) / 10
        water = 0.8 * float(water_absorption_per_mm(lam))
        assert optics.mua_per_mm[i] == pytest.approx(haemoglobin + water, rel=1e-9)
        mus_st, musp_st = MEINKE[lam]
        assert optics.mus_per_mm[i] == pytest.approx(0.1268 * 42 * mus_st, rel=1e-9)
        assert optics.musp_per_mm[i] == pytest.approx(0.1167 * 42 * musp_st, rel=1e-9)


def test_potency_scales_haemoglobin_not_water():
    blood = load_shelf(DEMO)["blood_kb1"]
    one = intrinsic_optics(blood, wavelength_nm=800.0, matrix=None, so2=0.5, potency=1.0)
    two = intrinsic_optics(blood, wavelength_nm=800.0, matrix=None, so2=0.5, potency=2.0)
    assert two.mua_per_mm[0] - one.mua_per_mm[0] == pytest.approx(one.mua_per_mm[0] - one.mua_carrier_per_mm[0])
    assert two.mus_per_mm[0] == pytest.approx(2 * one.mus_per_mm[0])


def test_blood_needs_its_so2():
    blood = load_shelf(DEMO)["blood_kb1"]
    with pytest.raises(InputError, match="depends on the sO2 of the batch at that moment"):
        intrinsic_optics(blood, wavelength_nm=800.0, matrix=None)
    with pytest.raises(InputError, match="1.2 is outside 0-1"):
        intrinsic_optics(blood, wavelength_nm=800.0, matrix=None, so2=1.2)
