"""Water absorption against the Hale & Querry 1973 table (FIELD.md values)."""

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.materials import water_absorption_HaleQuerry1973, water_absorption_per_mm

# Hale & Querry 1973, Appl Opt 12:555, mua = 4 pi k / lambda, in 1/cm (FIELD.md)
HALE_QUERRY_1973_PER_CM = {
    600: 0.00228, 650: 0.00317, 700: 0.00601, 750: 0.02614, 800: 0.01963,
    850: 0.04332, 900: 0.06786, 950: 0.3876, 975: 0.4485, 1000: 0.3632,
}


@pytest.mark.parametrize("wavelength_nm, per_cm", sorted(HALE_QUERRY_1973_PER_CM.items()))
def test_table_values_reproduced(wavelength_nm, per_cm):
    assert water_absorption_per_mm(float(wavelength_nm)) == pytest.approx(per_cm / 10.0, rel=1e-12)


def test_interpolation_stays_between_neighbours():
    nodes = sorted(HALE_QUERRY_1973_PER_CM)
    for lo, hi in zip(nodes[:-1], nodes[1:]):
        inside = water_absorption_per_mm(np.linspace(lo, hi, 9)[1:-1])
        a, b = sorted((HALE_QUERRY_1973_PER_CM[lo] / 10, HALE_QUERRY_1973_PER_CM[hi] / 10))
        assert np.all(inside >= a * (1 - 1e-12)) and np.all(inside <= b * (1 + 1e-12))  # PCHIP: no overshoot


def test_array_shape_and_nan():
    values = water_absorption_per_mm(np.array([[650.0, np.nan], [800.0, 900.0]]))
    assert values.shape == (2, 2)
    assert np.isnan(values[0, 1])
    assert values[1, 0] == pytest.approx(0.001963)  # Hale & Querry 1973 Table 1: 800 nm 0.01963 /cm


def test_below_table_holds_600_nm_value_with_warning():
    with pytest.warns(PhantomlabWarning, match="450 nm below the 600–1000 nm"):
        value = water_absorption_HaleQuerry1973(wavelength_nm=450.0)
    assert value == pytest.approx(0.000228)  # Hale & Querry 1973 Table 1: 600 nm 0.00228 /cm, held


def test_above_table_refused():
    with pytest.raises(InputError, match="1064 nm above the 1000 nm end"):
        water_absorption_per_mm(1064.0)


def test_bad_input_refused():
    with pytest.raises(InputError, match="must be a number"):
        water_absorption_per_mm("red")
    with pytest.raises(InputError, match="must be > 0 nm"):
        water_absorption_per_mm(0.0)


def test_table_file_has_provenance_line():
    from importlib import resources

    text = resources.files("phantomlab").joinpath("data", "water_absorption_hale_querry_1973.csv").read_text()
    assert text.splitlines()[0].startswith("# source: Hale G M & Querry M R 1973")
