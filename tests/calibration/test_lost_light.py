"""Lost-light correction against direct Monte Carlo runs of the finite sample.

``fixtures/mc_finite_sample_cases.json`` (``fixtures/make_slab_tc_fixture.py``): R and T that
reach 8–10 mm ports from samples 25 mm wide under a 3 mm beam, by direct Monte Carlo runs
(2 million photons, their own seeds).  Issue 15's acceptance: where the uncorrected fit's μa
is more than 10 % off, the corrected one is within 3 %.  The correction runs its own Monte
Carlo (100 000 photons per wavelength, other seeds) at the fitted optics.
"""

import json
import warnings
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration.fit_slab import fit_slab
from phantomlab.calibration.measurement_metadata import MeasurementMetadata
from phantomlab.calibration.measurements import parse_measurement_text
from phantomlab.errors import InputError, PhantomlabWarning

FIXTURE = json.loads((Path(__file__).parent / "fixtures" / "mc_finite_sample_cases.json").read_text())
GEOMETRY = dict(n=1.4, n_slide=1.52, slides="both", beam_diameter_mm=FIXTURE["header"]["beam_diameter_mm"],
                sample_diameter_mm=FIXTURE["header"]["sample_diameter_mm"])


def _measurement(wavelength, r, t, *, thickness, g, port, lost_light, photons=100_000, points=8):
    lines = ["# source: demo data, invented (direct Monte Carlo of a finite sample)",
             "wavelength_nm,total_reflectance,total_transmittance,sd_r,sd_t"]
    for w, a, b in zip(wavelength, r, t):
        lines.append(f"{w:g},{a!r},{b!r},{0.005 * a!r},{0.005 * b!r}")
    meta = MeasurementMetadata(thickness_mm=thickness, g=g, port_diameter_mm=port, lost_light=lost_light,
                               lost_light_photons=photons, lost_light_wavelengths=points, **GEOMETRY)
    return parse_measurement_text("\n".join(lines) + "\n", kind="slab", metadata=meta)


@pytest.mark.parametrize("index", range(len(FIXTURE["cases"])))
def test_correction_brings_mua_within_3_percent_where_the_plain_fit_is_10_percent_off(index):
    case = FIXTURE["cases"][index]
    args = ([700.0], [case["total_reflectance"]], [case["total_transmittance"]])
    geometry = dict(thickness=case["thickness_mm"], g=case["g"], port=case["port_mm"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        plain = fit_slab(_measurement(*args, **geometry, lost_light="none"))
        corrected = fit_slab(_measurement(*args, **geometry, lost_light="monte-carlo"))
    assert abs(plain.mua_per_mm[0] / case["mua_per_mm"] - 1) > 0.10
    assert corrected.mua_per_mm[0] == pytest.approx(case["mua_per_mm"], rel=0.03)
    assert corrected.musp_per_mm[0] == pytest.approx(case["musp_per_mm"], rel=0.03)
    payload = corrected.to_json()
    assert payload["lost_light"] == "monte-carlo" and payload["lost_light_converged"] is True
    assert 0.03 < payload["lost_reflectance_fraction"][0] < 0.2
    assert any("lost light corrected by Monte Carlo" in w for w in corrected.warnings)


def test_correction_across_a_spectrum_with_interpolated_capture():
    # three wavelengths, the Monte Carlo run at two of them (the middle one interpolated)
    spectrum = FIXTURE["spectrum"]
    m = _measurement(spectrum["wavelength_nm"], spectrum["total_reflectance"], spectrum["total_transmittance"],
                     thickness=spectrum["thickness_mm"], g=spectrum["g"], port=spectrum["port_mm"],
                     lost_light="monte-carlo", points=2)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        fit = fit_slab(m)
    np.testing.assert_allclose(fit.mua_per_mm, spectrum["mua_per_mm"], rtol=0.03)
    assert fit.extras["lost_light_wavelength_nm"].tolist() == [600.0, 800.0]


@pytest.mark.parametrize("change, words", [
    (dict(beam_diameter_mm=None), "needs beam_diameter_mm"),
    (dict(beam_diameter_mm=12.0), "not smaller than the port"),
    (dict(sample_diameter_mm=5.0), "smaller than the port"),
])
def test_bad_lost_light_geometry_refused(change, words):
    case = FIXTURE["cases"][0]
    meta = dict(thickness_mm=1.5, g=0.8, port_diameter_mm=10.0, lost_light="monte-carlo", **GEOMETRY)
    meta.update(change)
    text = "wavelength_nm,total_reflectance,total_transmittance,sd_r,sd_t\n700,0.33,0.39,0.002,0.002\n"
    m = parse_measurement_text(text, kind="slab", metadata=MeasurementMetadata(**meta))
    with pytest.raises(InputError, match=words):
        fit_slab(m)
    del case


@pytest.mark.parametrize("table, words", [
    ({"lost_light": "yes"}, "lost_light = 'yes'; accepted: none, monte-carlo"),
    ({"lost_light_photons": 10}, "lost_light_photons = 10; accepted: a whole number from 1000 to 10000000"),
    ({"lost_light_wavelengths": 0}, "lost_light_wavelengths = 0"),
])
def test_bad_lost_light_settings_refused(table, words):
    from phantomlab.calibration.measurement_metadata import metadata_from_mapping

    with pytest.raises(InputError, match=words):
        metadata_from_mapping(table, where="m.toml")
