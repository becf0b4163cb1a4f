"""Diffusion R(ρ) and total diffuse reflectance of a semi-infinite medium.

Check values and their sources:
* CHECKS.md total reflectance formula Rd = (a′/2) e^(−√(3(1 − a′))) [1 + e^(−(4/3) A √(3(1 − a′)))]
  (Farrell, Patterson & Wilson 1992) typed in here;
* the total equals 2π ∫ R(ρ) ρ dρ of the same model, integrated with scipy.integrate.quad;
* exact limits: a non-absorbing half-space returns all light (Rd = 1); far from the source
  d ln(ρ² R)/dρ → −μeff (Farrell et al. 1992, the asymptote they fit μeff from).
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.boundary import boundary_coefficient
from phantomlab.transport.diffusion import (
    SRDR_MODELS,
    srdr_reflectance,
    total_diffuse_reflectance,
)

MODELS = sorted(SRDR_MODELS)
BOUNDARIES = ["groenhuis1983", "haskell1994"]


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("boundary", BOUNDARIES)
@pytest.mark.parametrize("mua, musp, n", [(0.01, 1.0, 1.4), (0.05, 2.0, 1.33), (0.001, 0.8, 1.0)])
def test_total_equals_integral_of_srdr(model, boundary, mua, musp, n):
    def integrand(rho):
        return 2 * math.pi * rho * float(
            srdr_reflectance(
                mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=n, model=model, boundary=boundary
            )
        )

    with pytest.warns(PhantomlabWarning):  # quad samples ρ inside one transport mfp
        numeric = quad(integrand, 0, np.inf, limit=500, epsabs=1e-12)[0]
    closed = total_diffuse_reflectance(
        mua_per_mm=mua, musp_per_mm=musp, n=n, model=model, boundary=boundary
    )
    assert closed == pytest.approx(numeric, rel=1e-7)


@pytest.mark.parametrize("boundary", BOUNDARIES)
def test_total_matches_checks_formula(boundary):
    # CHECKS.md (Farrell et al. 1992): Rd = (a′/2) e^(−√(3(1−a′))) [1 + e^(−(4/3) A √(3(1−a′)))].
    mua, musp, n = np.array([0.005, 0.02, 0.1]), np.array([1.2, 0.9, 2.5]), 1.4
    albedo = musp / (mua + musp)
    big_a = boundary_coefficient(n=n, method=boundary)
    root = np.sqrt(3 * (1 - albedo))
    expected = albedo / 2 * np.exp(-root) * (1 + np.exp(-4 / 3 * big_a * root))
    got = total_diffuse_reflectance(mua_per_mm=mua, musp_per_mm=musp, n=n, boundary=boundary)
    assert got == pytest.approx(expected, rel=1e-12)


def test_non_absorbing_half_space_returns_everything():
    # Exact limit (energy conservation): μa = 0 → all light comes back.  For kienle1997
    # with the exact Fresnel integrals C1·2A + C2 = 1 identically.
    assert total_diffuse_reflectance(mua_per_mm=0.0, musp_per_mm=1.0, n=1.4) == pytest.approx(1.0)
    assert total_diffuse_reflectance(
        mua_per_mm=0.0, musp_per_mm=1.0, n=1.4, model="kienle1997", boundary="haskell1994"
    ) == pytest.approx(1.0, abs=1e-12)


@pytest.mark.parametrize("model", MODELS)
def test_far_field_slope_is_mueff(model):
    # Farrell et al. 1992: far from the source ρ² R(ρ) ∝ e^(−μeff ρ)(1 + O(1/ρ)).
    mua, musp = 0.01, 1.0
    mueff = math.sqrt(3 * mua * (mua + musp))
    rho = np.array([60.0, 61.0])
    r = srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=1.4, model=model)
    slope = np.diff(np.log(rho**2 * r))[0] / np.diff(rho)[0]
    assert slope == pytest.approx(-mueff, rel=0.01)


def test_shape_wavelengths_by_distances():
    mua = np.linspace(0.005, 0.05, 7)
    musp = np.linspace(2.0, 0.8, 7)
    n = np.linspace(1.34, 1.33, 7)
    rho = np.linspace(2.0, 20.0, 5)
    for model in MODELS:
        r = srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=n, model=model)
        assert r.shape == (7, 5)
        row = srdr_reflectance(mua_per_mm=mua[3], musp_per_mm=musp[3], rho_mm=rho, n=n[3], model=model)
        assert r[3] == pytest.approx(row, rel=1e-13)
        assert np.all(np.diff(r, axis=1) < 0)  # falls with distance
    assert isinstance(srdr_reflectance(mua_per_mm=0.01, musp_per_mm=1, rho_mm=5, n=1.4), float)
    assert total_diffuse_reflectance(mua_per_mm=mua, musp_per_mm=musp, n=n).shape == (7,)


def test_more_absorption_less_light_and_keyword_roles():
    base = srdr_reflectance(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=10.0, n=1.4)
    more_absorption = srdr_reflectance(mua_per_mm=0.02, musp_per_mm=1.0, rho_mm=10.0, n=1.4)
    assert more_absorption < base


def test_nan_propagates():
    r = srdr_reflectance(mua_per_mm=[0.01, np.nan], musp_per_mm=1.0, rho_mm=[5.0, 10.0], n=1.4)
    assert np.all(np.isfinite(r[0])) and np.all(np.isnan(r[1]))
    assert np.isnan(total_diffuse_reflectance(mua_per_mm=np.nan, musp_per_mm=1.0, n=1.4))


def test_warns_close_to_source():
    with pytest.warns(PhantomlabWarning, match=r"rho_mm = 0\.5 < 1/\(mua\+musp\) = 0\.99 mm"):
        srdr_reflectance(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=[0.5, 5.0], n=1.4)


def test_warns_when_scattering_does_not_dominate():
    with pytest.warns(PhantomlabWarning, match=r"musp/mua = 2 here, wanted >= 10"):
        total_diffuse_reflectance(mua_per_mm=0.5, musp_per_mm=1.0, n=1.4)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"mua_per_mm": -0.01}, r"mua_per_mm must be finite and >= 0 \[1/mm\], got -0\.01"),
        ({"musp_per_mm": 0.0}, r"musp_per_mm must be finite and > 0 \[1/mm\], got 0"),
        ({"rho_mm": [-1.0, 2.0]}, r"rho_mm must be finite and >= 0 \[mm\]"),
        ({"n": 0.8}, r"n \(refractive index\) must be >= 1"),
        ({"model": "dipole"}, r"unknown srdr model 'dipole'; valid: farrell1992, kienle1997"),
        ({"boundary": "x"}, r"unknown boundary method 'x'; valid: groenhuis1983, haskell1994"),
        ({"mua_per_mm": [0.01, 0.02], "musp_per_mm": [1, 2, 3]}, "must share one shape"),
    ],
)
def test_bad_input_refused(kwargs, match):
    arguments = {"mua_per_mm": 0.01, "musp_per_mm": 1.0, "rho_mm": 5.0, "n": 1.4}
    arguments.update(kwargs)
    with pytest.raises(InputError, match=match):
        srdr_reflectance(**arguments)
