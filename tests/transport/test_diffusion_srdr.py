"""Diffusion R(ρ) and total diffuse reflectance of a semi-infinite medium.

Check values and their sources:
* CHECKS.md total reflectance formula Rd = (a′/2) e^(−√(3(1 − a′))) [1 + e^(−(4/3) A √(3(1 − a′)))]
  (Farrell, Patterson & Wilson 1992) typed in here;
* the total equals 2π ∫ R(ρ) ρ dρ of the same model, integrated with scipy.integrate.quad;
* exact limits: a non-absorbing half-space returns all light that entered (Rd = 1 − R_sp per
  unit incident power); far from the source d ln(ρ² R)/dρ → −μeff (Farrell et al. 1992, the
  asymptote they fit μeff from);
* the flux of the Farrell dipole is the outward D ∂Φ/∂z of the dipole fluence at the surface (checked by
  a numerical derivative of the fluence written out here, not the module's);
* the project's convention (DEVELOPERS.md, "Reflectance conventions"): per unit *incident*
  power, i.e. the papers' per-entered values times the normal-incidence Fresnel transmission
  T = 1 − ((n − n_out)/(n + n_out))² (Born & Wolf 1999, §1.5.2).
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.boundary import boundary_coefficient
from phantomlab.transport.diffusion import (
    SRDR_MODELS,
    srdr_model,
    srdr_reflectance,
    total_diffuse_reflectance,
)
from phantomlab.transport.diffusion_validity import MIN_MUSP_TO_MUA_RATIO, warn_scattering_dominance

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
    entered = 1 - (0.4 / 2.4) ** 2  # per unit incident power: × Fresnel transmission at n = 1.4
    expected = entered * albedo / 2 * np.exp(-root) * (1 + np.exp(-4 / 3 * big_a * root))
    got = total_diffuse_reflectance(mua_per_mm=mua, musp_per_mm=musp, n=n, boundary=boundary, model="farrell1992")
    assert got == pytest.approx(expected, rel=1e-12)


def test_non_absorbing_half_space_returns_everything():
    # Exact limit (energy conservation): μa = 0 → all light that entered comes back, i.e.
    # 1 − R_sp of the incident power (R_sp = ((n − 1)/(n + 1))², Born & Wolf §1.5.2).  For
    # kienle1997 with the exact Fresnel integrals C1·2A + C2 = 1 identically.
    entered = 1 - (0.4 / 2.4) ** 2
    assert total_diffuse_reflectance(mua_per_mm=0.0, musp_per_mm=1.0, n=1.4) == pytest.approx(entered)
    assert total_diffuse_reflectance(
        mua_per_mm=0.0, musp_per_mm=1.0, n=1.4, model="kienle1997", boundary="haskell1994"
    ) == pytest.approx(entered, abs=1e-12)
    # in water (n_outside = 1.33) under glass-like index 1.5: the same identity
    entered = 1 - ((1.5 - 1.33) / (1.5 + 1.33)) ** 2
    assert total_diffuse_reflectance(
        mua_per_mm=0.0, musp_per_mm=1.0, n=1.5, n_outside=1.33, model="kienle1997", boundary="haskell1994"
    ) == pytest.approx(entered, abs=1e-12)


def _dipole_fluence(rho, z, *, mua, musp, big_a):
    """Fluence of the extrapolated-boundary dipole at depth z (Farrell et al. 1992), per entered power."""
    mutp = mua + musp
    d = 1 / (3 * mutp)
    mueff = math.sqrt(3 * mua * mutp)
    z0, zb = 1 / mutp, 2 * big_a * d
    r1 = np.sqrt((z - z0) ** 2 + rho**2)
    r2 = np.sqrt((z + z0 + 2 * zb) ** 2 + rho**2)
    return musp / mutp / (4 * math.pi * d) * (np.exp(-mueff * r1) / r1 - np.exp(-mueff * r2) / r2), d


@pytest.mark.parametrize("n", [1.0, 1.4])
def test_farrell_flux_is_the_derivative_of_the_dipole_fluence(n):
    # R(ρ) of farrell1992 = T · D ∂Φ/∂z at z = 0 (the outward flux, Farrell et al. 1992), and
    # kienle1997 = T · (C1 Φ(ρ, 0) + C2 · that flux) (Kienle & Patterson 1997); central
    # differences of the fluence written out above.
    from phantomlab.transport.boundary import fluence_flux_coefficients_Kienle1997

    mua, musp, rho = 0.01, 1.0, np.array([2.0, 4.0, 8.0])
    big_a = boundary_coefficient(n=n, method="haskell1994")
    h = 1e-5
    up, d = _dipole_fluence(rho, h, mua=mua, musp=musp, big_a=big_a)
    down, _ = _dipole_fluence(rho, -h, mua=mua, musp=musp, big_a=big_a)
    flux = d * (up - down) / (2 * h)
    surface, _ = _dipole_fluence(rho, 0.0, mua=mua, musp=musp, big_a=big_a)
    entered = 1 - ((n - 1) / (n + 1)) ** 2
    farrell = srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=n, boundary="haskell1994",
                               model="farrell1992")
    np.testing.assert_allclose(farrell, entered * flux, rtol=1e-7)
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=n)
    kienle = srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=n, model="kienle1997")
    np.testing.assert_allclose(kienle, entered * (c1 * surface + c2 * flux), rtol=1e-7)


def test_per_incident_convention_scales_by_the_entry_transmission():
    # Project convention: the same R(ρ) per unit incident power at every index; a matched
    # boundary loses nothing at entry, n = 1.4 in air loses R_sp = (0.4/2.4)² = 2.78 %.
    from phantomlab.transport.boundary import beam_entry_transmission

    assert beam_entry_transmission(n=1.0) == 1.0
    assert beam_entry_transmission(n=1.4) == pytest.approx(1 - (0.4 / 2.4) ** 2, rel=1e-14)
    assert beam_entry_transmission(n=[1.33, 1.5], n_outside=1.33) == pytest.approx(
        [1.0, 1 - (0.17 / 2.83) ** 2], rel=1e-14)
    assert np.isnan(beam_entry_transmission(n=np.nan))
    with pytest.raises(InputError, match=r"n \(refractive index\) must be >= 1"):
        beam_entry_transmission(n=0.9)


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


def _caught(function, *args, **kwargs):
    import warnings

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        value = function(*args, **kwargs)
    return value, [str(w.message) for w in caught]


@pytest.mark.parametrize("model", MODELS)
@pytest.mark.parametrize("n, n_outside", [(1.4, 1.0), (1.33, 1.0), (1.0, 1.0), (1.0, 1.33), (np.nan, 1.0)])
def test_prepared_model_is_srdr_reflectance_to_the_last_bit(model, n, n_outside):
    # what a fit evaluates (the grid and surface checked once) against the checked function
    # above, on values that cross both warnings and a NaN row
    rng = np.random.default_rng(3)
    rho = np.array([0.2, 1.0, 3.0, 8.0, 15.0])
    mua = np.concatenate([rng.uniform(0.001, 0.3, 40), [np.nan, 0.0, 0.5]])
    musp = np.concatenate([rng.uniform(0.3, 3.0, 40), [1.0, 1.0, 1.0]])
    prepared = srdr_model(rho_mm=rho, n=n, n_outside=n_outside, model=model)
    for a, s in ((mua, musp), (mua[:5], musp[:5]), (mua[:1], musp[:1]), (mua[7], musp[7]), (mua[:3], 1.2)):
        got, got_warnings = _caught(prepared, a, s)
        want, want_warnings = _caught(srdr_reflectance, mua_per_mm=a, musp_per_mm=s, rho_mm=rho, n=n,
                                      n_outside=n_outside, model=model)
        np.testing.assert_array_equal(got, want)  # NaN where NaN, every other bit equal
        assert got_warnings == want_warnings


def test_prepared_model_refuses_bad_settings_at_once():
    with pytest.raises(InputError, match=r"rho_mm must be finite and >= 0"):
        srdr_model(rho_mm=[-1.0, 2.0], n=1.4)
    with pytest.raises(InputError, match=r"n \(refractive index\) must be >= 1"):
        srdr_model(rho_mm=[1.0, 2.0], n=0.8)
    with pytest.raises(InputError, match=r"unknown srdr model 'dipole'"):
        srdr_model(rho_mm=[1.0, 2.0], n=1.4, model="dipole")
    with pytest.raises(InputError, match=r"unknown boundary method 'x'"):
        srdr_model(rho_mm=[1.0, 2.0], n=1.4, boundary="x")


def test_scattering_dominance_warns_exactly_below_the_line():
    # its quick test lets through every case the ratio itself decides (one ulp either side
    # of musp/mua = 10, zero and NaN absorption, infinite absorption)
    line = MIN_MUSP_TO_MUA_RATIO
    mua = 0.01
    below, at = np.nextafter(line * mua, 0.0), line * mua
    assert below / mua < line <= at / mua  # the ratio as the function forms it
    cases = [(below, True), (at, False), (np.array([1.0, below]), True), (np.array([1.0, at]), False)]
    for musp, warns in cases:
        _, messages = _caught(warn_scattering_dominance, np.full(np.shape(musp), mua), np.asarray(musp))
        assert bool(messages) is warns, (musp, messages)
    for mua_value, musp_value, warns in ((0.0, 0.5, False), (np.nan, 0.5, False), (np.inf, 1.0, True),
                                         (0.1, np.nan, False), (0.1, np.inf, False)):
        _, messages = _caught(warn_scattering_dominance, np.array([mua_value]), np.array([musp_value]))
        assert bool(messages) is warns, (mua_value, musp_value)


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
