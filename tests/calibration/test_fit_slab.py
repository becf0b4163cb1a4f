"""Slab fits by inverse adding-doubling: round trip, an independent Monte Carlo run, refusals.

The Monte Carlo slabs (``fixtures/mc_slab_cases.npz``, made once by
``fixtures/make_mc_fixtures.py``) come from the photon-transport code, not from the
adding-doubling solver the fit inverts; the fit must recover their μa and μs′ within the
tolerance that a 3-standard-error shift of R and T allows (computed here from the fit's SDs).
"""

from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration.fit_slab import fit_slab
from phantomlab.calibration.measurement_metadata import MeasurementMetadata
from phantomlab.calibration.measurements import parse_measurement_text
from phantomlab.errors import InputError, PhantomlabWarning

FIXTURES = Path(__file__).parent / "fixtures"


def _measurement(wl, R, T, sd_r, sd_t, **meta):
    lines = ["wavelength_nm,total_reflectance,total_transmittance,sd_r,sd_t"]
    for i, w in enumerate(wl):
        lines.append(f"{w:g},{R[i]:.9g},{T[i]:.9g},{sd_r[i]:.6g},{sd_t[i]:.6g}")
    return parse_measurement_text("\n".join(lines), kind="slab", metadata=MeasurementMetadata(**meta))


def test_round_trip_through_adding_doubling_with_slides():
    from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

    wl = np.linspace(600, 900, 7)
    mua = np.linspace(0.01, 0.2, 7)
    musp = np.linspace(2.0, 0.8, 7)
    g = 0.8
    r = slab_reflectance_transmittance(mua_per_mm=mua, mus_per_mm=musp / (1 - g), g=g, thickness_mm=2.0,
                                       n=1.4, n_slide=1.5)
    m = _measurement(wl, r.total_reflectance, r.total_transmittance, np.full(7, 1e-3), np.full(7, 1e-3),
                     n=1.4, thickness_mm=2.0, g=g, n_slide=1.5, slides="both", port_diameter_mm=25.0)
    fit = fit_slab(m)
    np.testing.assert_allclose(fit.mua_per_mm, mua, rtol=1e-4)
    np.testing.assert_allclose(fit.musp_per_mm, musp, rtol=1e-4)
    assert fit.parameters["g"]["value"] == g


def test_specular_excluded_is_honoured():
    from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

    r = slab_reflectance_transmittance(mua_per_mm=np.array([0.05]), mus_per_mm=np.array([10.0]), g=0.8,
                                       thickness_mm=1.5, n=1.4)
    diffuse = r.total_reflectance - r.specular_reflectance
    m = _measurement([700.0], diffuse, r.total_transmittance, [1e-3], [1e-3], n=1.4, thickness_mm=1.5, g=0.8,
                     specular_included=False, port_diameter_mm=25.0)
    fit = fit_slab(m)
    np.testing.assert_allclose(fit.mua_per_mm, [0.05], rtol=1e-4)


@pytest.mark.parametrize("case", range(3))
def test_recovers_an_independent_monte_carlo_slab(case):
    data = np.load(FIXTURES / "mc_slab_cases.npz")
    slide = data["n_slide"][case]
    meta = dict(n=1.4, thickness_mm=float(data["thickness_mm"][case]), g=0.8, port_diameter_mm=50.0)
    if np.isfinite(slide):
        meta.update(n_slide=float(slide), slides="both")
    # the SD of the data: the MC's own plus 0.2 % of R and T, as a sphere would give
    sd_r = np.hypot(data["total_reflectance_sd"][case], 0.002 * data["total_reflectance"][case])
    sd_t = np.hypot(data["total_transmittance_sd"][case], 0.002 * data["total_transmittance"][case])
    m = _measurement([700.0], [data["total_reflectance"][case]], [data["total_transmittance"][case]],
                     [sd_r], [sd_t], **meta)
    fit = fit_slab(m)
    mua, musp = data["mua_per_mm"][case], data["mus_per_mm"][case] * (1 - 0.8)
    assert abs(fit.mua_per_mm[0] - mua) < 3 * fit.mua_sd_per_mm[0] + 0.01 * mua
    assert abs(fit.musp_per_mm[0] - musp) < 3 * fit.musp_sd_per_mm[0] + 0.01 * musp


def test_edge_loss_warning_fires_for_a_small_port_and_not_a_large_one():
    from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

    r = slab_reflectance_transmittance(mua_per_mm=np.array([0.005]), mus_per_mm=np.array([5.0]), g=0.8,
                                       thickness_mm=3.0, n=1.4)
    args = ([700.0], r.total_reflectance, r.total_transmittance, [1e-3], [1e-3])
    with pytest.warns(PhantomlabWarning, match="light lost at the slab edges"):
        fit_slab(_measurement(*args, n=1.4, thickness_mm=3.0, g=0.8, port_diameter_mm=10.0))
    import warnings

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        fit = fit_slab(_measurement(*args, n=1.4, thickness_mm=3.0, g=0.8, port_diameter_mm=200.0))
    assert not any("edge" in str(w.message) for w in caught)
    assert not any("edge" in w for w in fit.warnings)


@pytest.mark.parametrize("meta, words", [
    (dict(thickness_mm=2.0, g=0.8), "needs the slab's refractive index"),
    (dict(n=1.4, g=0.8), "needs the slab thickness"),
    (dict(n=1.4, thickness_mm=2.0), "needs the anisotropy g"),
])
def test_missing_metadata_refused(meta, words):
    m = _measurement([700.0], [0.3], [0.3], [0.01], [0.01], **meta)
    with pytest.raises(InputError, match=words):
        fit_slab(m)
