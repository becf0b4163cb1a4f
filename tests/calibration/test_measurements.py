"""Measurement files: layouts of docs/formats.md, sidecar metadata, refusals, replicates.

The layouts and the refusal rules are the project's own contract (docs/formats.md,
"Measurement CSV"; issue 5, item 1); the replicate arithmetic is the textbook standard error of a mean
(Taylor 1997, *An Introduction to Error Analysis*, 2nd ed., eq. 4.14).
"""

import numpy as np
import pytest

from phantomlab.calibration.measurements import (
    combine_replicates,
    parse_measurement_text,
    read_measurement,
)
from phantomlab.errors import InputError

SRDR = """# source: demo data, invented
wavelength_nm,rho_mm,reflectance_per_mm2,sd
650,1.0,0.010,0.0001
650,2.0,0.002,0.00002
750,1.0,0.011,0.0001
750,2.0,0.0021,0.00002
"""


def test_srdr_absolute_parses_to_a_grid():
    m = parse_measurement_text(SRDR, kind="srdr")
    assert m.scale == "absolute"
    assert m.source == "demo data, invented"
    np.testing.assert_array_equal(m.wavelength_nm, [650, 750])
    np.testing.assert_array_equal(m.axis, [1.0, 2.0])
    assert m.values.shape == (2, 2) and m.values[1, 1] == pytest.approx(0.0021)
    assert m.sd[0, 1] == pytest.approx(0.00002)


def test_srdr_relative_and_ragged_grid():
    text = "wavelength_nm,rho_mm,reflectance_relative\n650,1,5\n650,2,1\n750,2,1.2\n"
    m = parse_measurement_text(text, kind="srdr")
    assert m.scale == "relative" and m.sd is None
    assert np.isnan(m.values[1, 0]) and m.values[1, 1] == pytest.approx(1.2)


def test_sfdi_slab_optics_layouts():
    sfdi = parse_measurement_text("wavelength_nm,fx_per_mm,reflectance\n650,0,0.5\n650,0.1,0.3\n", kind="sfdi")
    assert sfdi.axis_name == "fx_per_mm" and sfdi.values.shape == (1, 2)
    slab = parse_measurement_text(
        "wavelength_nm,total_reflectance,total_transmittance,sd_r,sd_t\n650,0.3,0.4,0.002,0.002\n", kind="slab")
    assert slab.values.shape == (1, 2) and slab.sd.shape == (1, 2)
    optics = parse_measurement_text("wavelength_nm,mua_per_mm,musp_per_mm\n650,0.01,1.0\n700,0.02,0.9\n", kind="optics")
    np.testing.assert_allclose(optics.values[:, 1], [1.0, 0.9])


BAD_FILES = [
    # (kind, text, words the one-line refusal must contain)
    ("srdr", "wavelength_nm,rho_mm\n650,1\n", "lacks the value column"),
    ("srdr", "wavelength_nm,reflectance_per_mm2\n650,1\n", "lacks column rho_mm"),
    ("srdr", "wavelength_nm,rho_cm,reflectance_per_mm2\n650,1,0.1\n", "column 2 (rho_...): unit not accepted; this column must be rho_mm"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n650,1,abc\n", "row 1 (file line 2), column reflectance_per_mm2"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n650,1 mm,0.1\n", "column rho_mm: not a number"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n650,2,0.1\n650,1,0.2\n", "row 2 (file line 3), column rho_mm"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n750,1,0.1\n650,2,0.2\n", "column wavelength_nm: 650 after 750"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n650,1,-0.1\n", "is negative"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n650,-1,0.1\n", "column rho_mm: -1 is negative"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n0.65,1,0.1\n", "(is it in um?)"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2,sd\n650,1,0.1,0\n", "column sd: 0"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n650,1\n", "2 cells, the header has 3"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2,reflectance_relative\n650,1,0.1,1\n", "give one value column"),
    ("srdr", "wavelength_nm,rho_mm,reading\n650,1,100\n", "no reference phantom"),
    ("srdr", "", "no header row"),
    ("srdr", "wavelength_nm,rho_mm,reflectance_per_mm2\n", "no data rows"),
    ("sfdi", "wavelength_nm,fx_per_mm,reflectance\n650,0.1,0.3\n650,0.1,0.3\n", "column fx_per_mm: 0.1 after 0.1"),
    ("sfdi", "wavelength_nm,fx_per_cm,reflectance\n650,1,0.3\n", "column 2 (fx_...): unit not accepted"),
    ("sfdi", "wavelength_nm,fx_per_mm,reflectance\n650,,0.3\n", "column fx_per_mm: empty cell"),
    ("slab", "wavelength_nm,total_reflectance,total_transmittance\n650,30,40\n", "above 1; accepted: 0 to 1"),
    ("slab", "wavelength_nm,total_reflectance,total_transmittance\n650,0.6,0.6\n", "R + T = 1.2 exceeds 1"),
    ("slab", "wavelength_nm,total_reflectance,total_transmittance,sd_r\n650,0.3,0.3,0.01\n", "give all SD columns or none"),
    ("slab", "wavelength_nm,total_reflectance,total_transmittance\n650,0.3,0.3\n650,0.3,0.3\n", "appears twice"),
    ("optics", "wavelength_nm,mua_per_cm,musp_per_mm\n650,0.1,1\n", "column 2 (mua_...): unit not accepted"),
    ("optics", "wavelength_nm,mua_per_mm,musp_per_mm\n650,0.01,0\n", "column musp_per_mm: 0"),
    ("optics", "wavelength_nm,mua_per_mm,musp_per_mm,colour\n650,0.01,1,red\n", "column 4: not a column"),
    ("optics", "wavelength_nm,mua_per_mm,musp_per_mm\n650,nan,1\n", "not a finite number"),
]


@pytest.mark.parametrize("kind, text, words", BAD_FILES)
def test_bad_files_are_refused_with_one_line(kind, text, words):
    with pytest.raises(InputError, match=None) as caught:
        parse_measurement_text(text, kind=kind, name="m.csv")
    message = str(caught.value)
    assert "\n" not in message
    assert words in message, message


def test_unknown_kind_refused():
    with pytest.raises(InputError, match="unknown measurement kind 'tof'; accepted: srdr, sfdi, slab, sphere, optics"):
        parse_measurement_text(SRDR, kind="tof")


def test_sidecar_metadata_and_options(tmp_path):
    path = tmp_path / "m1.csv"
    path.write_text(SRDR)
    (tmp_path / "m1.toml").write_text('n = 1.4\nn_outside = 1.0\ninstrument = "demo probe"\nthickness_mm = "2 mm"\n')
    m = read_measurement(path, kind="srdr")
    assert m.metadata.n == 1.4 and m.metadata.instrument == "demo probe"
    assert m.metadata.thickness_mm == pytest.approx(2.0)
    assert read_measurement(path, kind="srdr", n=1.33).metadata.n == 1.33  # options win


@pytest.mark.parametrize("toml, words", [
    ("n = 0.5\n", "n = 0.5; accepted: 1.0 to 3.0"),
    ("g = 1.2\n", "g = 1.2; accepted: -1 < g < 1"),
    ("thickness_mm = -2\n", "thickness_mm = -2; accepted: > 0"),
    ('thickness_mm = "2"\n', "no unit given"),
    ('slides = "left"\n', "accepted: none, top, bottom, both"),
    ("n = [\n", "not valid TOML"),
])
def test_bad_sidecar_refused(tmp_path, toml, words):
    path = tmp_path / "m2.csv"
    path.write_text(SRDR)
    (tmp_path / "m2.toml").write_text(toml)
    with pytest.raises(InputError) as caught:
        read_measurement(path, kind="srdr")
    assert words in str(caught.value)


def test_missing_file_refused(tmp_path):
    with pytest.raises(InputError, match="not found"):
        read_measurement(tmp_path / "absent.csv", kind="srdr")


def test_replicates_mean_and_spread():
    # three replicates; SD of the mean = s / sqrt(k) (Taylor 1997, eq. 4.14) when larger than
    # the stated SDs combined
    values = [0.010, 0.011, 0.012]
    ms = [parse_measurement_text(f"wavelength_nm,rho_mm,reflectance_per_mm2,sd\n650,1,{v},0.00001\n", kind="srdr",
                                 name=f"r{i}.csv") for i, v in enumerate(values)]
    combined = combine_replicates(ms)
    assert combined.replicates == 3
    assert combined.values[0, 0] == pytest.approx(0.011)
    assert combined.sd[0, 0] == pytest.approx(np.std(values, ddof=1) / np.sqrt(3))


def test_replicates_stated_sd_wins_when_larger():
    ms = [parse_measurement_text(f"wavelength_nm,rho_mm,reflectance_per_mm2,sd\n650,1,{v},0.01\n", kind="srdr")
          for v in (0.100, 0.1001)]
    combined = combine_replicates(ms)
    assert combined.sd[0, 0] == pytest.approx(np.sqrt(2 * 0.01**2) / 2)


def test_replicates_of_another_grid_refused():
    a = parse_measurement_text("wavelength_nm,rho_mm,reflectance_per_mm2\n650,1,0.1\n", kind="srdr", name="a.csv")
    b = parse_measurement_text("wavelength_nm,rho_mm,reflectance_per_mm2\n650,2,0.1\n", kind="srdr", name="b.csv")
    with pytest.raises(InputError, match="b.csv has another wavelength or distance grid than a.csv"):
        combine_replicates([a, b])
