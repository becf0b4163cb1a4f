"""Units: parsing typed quantities into canonical units (docs/design.md, "Canonical units").

Conversion factors are exact SI definitions (BIPM SI Brochure, 9th ed., 2019).
"""

import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.units import (
    LN10,
    absorbance_to_mua_per_mm,
    convert,
    mua_per_mm_to_absorbance,
    parse_number_list,
    parse_quantity,
)


@pytest.mark.parametrize(
    "text, kind, expected",
    [
        ("0.1 /cm", "attenuation", 0.01),
        ("1 mm^-1", "attenuation", 1.0),
        ("1 1/mm", "attenuation", 1.0),
        ("10 cm^-1", "attenuation", 1.0),
        ("100 1/m", "attenuation", 0.1),
        ("2.5 % w/v", "mass_concentration", 0.025),
        ("25 mg/mL", "mass_concentration", 0.025),
        ("10 uL", "volume", 0.010),
        ("10 µL", "volume", 0.010),
        ("0.5 L", "volume", 500.0),
        ("632.8 nm", "wavelength", 632.8),
        ("0.6328 um", "wavelength", 632.8),
        ("1.5 cm", "length", 15.0),
        ("250 mg", "mass", 0.25),
        ("1 % v/v", "volume_fraction", 0.01),
        ("0.02 v/v", "volume_fraction", 0.02),
        ("10 % w/w", "mass_fraction", 0.10),
        ("1e-4 M", "molar_concentration", 1e-4),
        ("37 °C", "temperature", 37.0),
        ("310.15 K", "temperature", 37.0),
        ("90 min", "time", 1.5),
    ],
)
def test_parse_quantity_to_canonical(text, kind, expected):
    assert parse_quantity(text, kind) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize(
    "text, kind, match",
    [
        ("0.1", "attenuation", r"no unit given in '0.1' \(attenuation\); accepted units: 1/mm"),
        ("5 mm", "attenuation", "unit of another kind"),
        ("3 blorps", "length", "unknown unit"),
        ("2 %", "volume_fraction", "bare % is ambiguous"),
        ("2.5 % w/v", "volume_fraction", "'w/v' is not a unit of this kind"),
        ("", "volume", "empty quantity"),
        ("1 mL", "no-such-kind", "unknown quantity kind"),
    ],
)
def test_parse_quantity_refuses(text, kind, match):
    with pytest.raises(InputError, match=match):
        parse_quantity(text, kind)


def test_refusal_is_one_line():
    with pytest.raises(InputError) as info:
        parse_quantity("0.1", "attenuation")
    assert "\n" not in str(info.value)


def test_number_lists():
    np.testing.assert_allclose(parse_number_list("650,750,850"), [650, 750, 850])
    grid = parse_number_list("400:1000:1")
    assert grid.size == 601 and grid[0] == 400 and grid[-1] == 1000
    with pytest.raises(InputError, match="START:STOP:STEP"):
        parse_number_list("1000:400:5")
    with pytest.raises(InputError, match="cannot read"):
        parse_number_list("650;750")


def test_convert_arrays_and_temperature():
    np.testing.assert_allclose(convert([1.0, 2.0], "1/cm", "attenuation"), [0.1, 0.2])
    np.testing.assert_allclose(convert([273.15, 300.0], "K", "temperature"), [0.0, 26.85])


def test_absorbance_is_base_10_mua_is_natural_log():
    # Beer-Lambert: A = 1 over 10 mm means a tenfold drop, exp(-mua*10) = 0.1.
    mua = absorbance_to_mua_per_mm(1.0, 10.0)
    assert np.exp(-mua * 10.0) == pytest.approx(0.1, rel=1e-12)
    assert mua == pytest.approx(LN10 / 10.0)
    assert mua_per_mm_to_absorbance(mua, 10.0) == pytest.approx(1.0)
    with pytest.raises(InputError, match="path length"):
        absorbance_to_mua_per_mm(1.0, 0.0)


def test_registry_disk_cache_is_one_folder_per_installation(tmp_path, monkeypatch):
    """pint's shared default cache records absolute paths of the definition files; an entry
    left by another, since removed, installation made every build raise inside flexcache (the
    page then read the files on every first run).  The folder is ours, one per installation,
    and the next build reads what the first one wrote."""
    import platformdirs

    from phantomlab import units

    monkeypatch.setattr(platformdirs, "user_cache_path", lambda name: tmp_path / name)
    folder = units._pint_cache_folder()
    assert folder is not None and folder.parent == tmp_path / "phantomlab"
    assert folder.name.startswith("pint-") and not any(folder.iterdir())
    units._registry.cache_clear()
    try:
        assert parse_quantity("25 uL", "volume") == pytest.approx(0.025)
        assert any(folder.iterdir()), "the registry's definitions were not cached in the installation's folder"
        units._registry.cache_clear()
        assert parse_quantity("2 cm", "length") == pytest.approx(20.0)  # built again from that cache
    finally:
        units._registry.cache_clear()
