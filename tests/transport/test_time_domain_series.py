"""The slab's depth sums: the eigenfunction series at late times against the image series.

The image series of Contini, Martelli & Zaccanti (1997, eqs. 36–37) and the eigenfunction
(sine) series of the slab between its extrapolated boundaries (Carslaw & Jaeger 1959, §14.2)
are one function (Poisson's summation formula).  ``image_series_terms`` takes late times from
the sine series; here both are summed far beyond need and compared: the sine series by its own
terms, the image series with 200 pairs on each side.
"""

from __future__ import annotations

import numpy as np
import pytest

from phantomlab.transport.time_domain_images import (
    SINE_SERIES_FROM,
    SPEED_OF_LIGHT_MM_PER_PS,
    _image_sums,
    image_series_terms,
)

V = SPEED_OF_LIGHT_MM_PER_PS / 1.4


def _reference(d, z0, zb, t, thickness, geometry, r=0.0, mua=0.0):
    """Φ and J from the image series with 200 pairs (the published form, summed far beyond need)."""
    d, z0, zb, t = np.broadcast_arrays(*(np.asarray(x, float) for x in (d, z0, zb, t)))
    s_fluence, s_flux = _image_sums(d.ravel(), np.full(d.size, V), z0.ravel(), zb.ravel(), t.ravel(),
                                    thickness=thickness, geometry=geometry, pairs=200)
    four_dvt = 4.0 * d.ravel() * V * t.ravel()
    base = (np.pi * four_dvt) ** -1.5 * np.exp(-mua * V * t.ravel() - r * r / four_dvt)
    return (V * base * s_fluence).reshape(t.shape), (base * s_flux).reshape(t.shape)


@pytest.mark.parametrize("geometry", ["transmittance", "reflectance"])
@pytest.mark.parametrize("thickness, musp, a_coef", [(15.0, 1.2, 2.95), (2.0, 1.0, 2.95), (40.0, 0.5, 1.0),
                                                     (5.0, 2.0, 0.0)])
def test_sine_series_agrees_with_the_images(geometry, thickness, musp, a_coef):
    d = 1.0 / (3.0 * musp)
    zb = 2.0 * a_coef * d
    length = thickness + 2.0 * zb
    # times from well before the switch to far into the tail (diffusion time 0.01 … 40)
    a = np.geomspace(0.01, 40.0, 400)
    t = a * length**2 / (np.pi**2 * d * V)
    assert np.any(a < SINE_SERIES_FROM) and np.any(a > 5.6)
    fluence, flux = image_series_terms(d=d, v=V, mua=0.002, z0=1.0 / musp, zb=zb, r=1.5, t=t, thickness=thickness,
                                       geometry=geometry, pairs=200)
    ref_fluence, ref_flux = _reference(d, 1.0 / musp, zb, t, thickness, geometry, r=1.5, mua=0.002)
    live = ref_flux > 1e-300
    # relative to each value where it is not negligible against the curve's peak
    scale = np.abs(ref_flux).max()
    np.testing.assert_allclose(flux, ref_flux, rtol=1e-9, atol=1e-12 * scale)
    assert np.all(flux[live] > 0)
    if a_coef > 0:
        np.testing.assert_allclose(fluence, ref_fluence, rtol=1e-9, atol=1e-12 * np.abs(ref_fluence).max())
    else:  # zero fluence on the faces
        assert np.all(np.abs(fluence) <= 1e-12 * np.abs(ref_flux).max() * V)


def test_distances_on_their_own_axis_share_the_depth_sums():
    """r with an axis of its own (several distances at the same times): the same values as one call per distance."""
    d, zb, thickness = 1.0 / 3.6, 1.6, 15.0
    t = np.linspace(50.0, 6000.0, 300)[:, None]
    r = np.array([0.0, 2.0, 5.0])[None, :]
    both = image_series_terms(d=d, v=V, mua=0.01, z0=1 / 1.2, zb=zb, r=r, t=t, thickness=thickness,
                              geometry="transmittance", pairs=12)
    for j in range(r.size):
        one = image_series_terms(d=d, v=V, mua=0.01, z0=1 / 1.2, zb=zb, r=r[0, j], t=t[:, 0], thickness=thickness,
                                 geometry="transmittance", pairs=12)
        np.testing.assert_allclose(both[1][:, j], one[1], rtol=1e-13, atol=0)
        np.testing.assert_allclose(both[0][:, j], one[0], rtol=1e-13, atol=0)
