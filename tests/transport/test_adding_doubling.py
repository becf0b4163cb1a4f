"""Adding-doubling slab reflectance and transmittance: published values and exact limits.

Sources beside each check:
* CHECKS.md slab (van de Hulst 1980, *Multiple Light Scattering* vol. 2 tables, as quoted in
  the Monte Carlo validation literature of the 1990s);
* Beer–Lambert and the incoherent multiple-reflection (Stokes) series for a clear slab
  between Fresnel faces (Born & Wolf 1999, §1.5; Stokes 1862 "pile of plates");
* energy conservation R + T = 1 without absorption (exact);
* Chandrasekhar's H-function for a thick, matched, isotropic slab (CHECKS.md; computed by
  phantomlab.transport.hfunction, itself tested against the integral representation).
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from phantomlab.errors import InputError
from phantomlab.transport.adding_doubling import SlabResult, slab_reflectance_transmittance
from phantomlab.transport.fresnel import fresnel_reflectance
from phantomlab.transport.hfunction import (
    semi_infinite_diffuse_incidence_reflectance_isotropic,
    semi_infinite_reflectance_isotropic,
)


def test_checks_slab_van_de_hulst():
    # CHECKS.md: μa 1, μs 9 /mm, g 0.75 (HG), d 0.2 mm, n = 1, normal collimated beam:
    # diffuse reflectance 0.09739, total transmittance 0.66096 (van de Hulst 1980); the
    # brief asks for 0.1 %, and the five printed digits hold too (±0.5 in the last digit).
    r = slab_reflectance_transmittance(mua_per_mm=1.0, mus_per_mm=9.0, g=0.75, thickness_mm=0.2, n=1.0)
    assert r.diffuse_reflectance == pytest.approx(0.09739, rel=1e-3)
    assert r.total_transmittance == pytest.approx(0.66096, rel=1e-3)
    assert r.diffuse_reflectance == pytest.approx(0.09739, abs=5e-6)
    assert r.total_transmittance == pytest.approx(0.66096, abs=5e-6)
    # CHECKS.md: unscattered part of T = e^(−2) = 0.135335.
    assert r.unscattered_transmittance == pytest.approx(0.135335, abs=5e-7)
    assert r.specular_reflectance == 0.0  # matched: no specular part
    assert r.total_reflectance == pytest.approx(r.diffuse_reflectance, abs=0)


@pytest.mark.parametrize("incidence", ["collimated", "diffuse"])
def test_beer_lambert_without_scattering_matched(incidence):
    # Beer–Lambert: T = e^(−μa d) for the normal beam; for Lambertian light T = 2 E3(μa d)
    # (the flux-weighted angular mean, evaluated with scipy quad).
    mua, d = 0.7, 1.3
    r = slab_reflectance_transmittance(mua_per_mm=mua, mus_per_mm=0.0, g=0.0, thickness_mm=d, n=1.0, incidence=incidence)
    if incidence == "collimated":
        expected = math.exp(-mua * d)
    else:
        expected = quad(lambda m: 2 * m * math.exp(-mua * d / m), 0, 1, epsabs=1e-14)[0]
    assert r.total_transmittance == pytest.approx(expected, rel=1e-9)
    assert r.unscattered_transmittance == pytest.approx(expected, rel=1e-9)
    assert r.total_reflectance == pytest.approx(0.0, abs=1e-14)


def test_clear_slab_between_fresnel_faces_collimated():
    # Stokes series for incoherent reflections between two identical faces (Born & Wolf 1999 §1.5):
    # T = (1 − R)² e^(−τ) / (1 − R² e^(−2τ)), R_tot = R + (1 − R)² R e^(−2τ) / (1 − R² e^(−2τ)).
    n, mua, d = 1.5, 0.4, 1.0
    face = ((n - 1) / (n + 1)) ** 2
    att = math.exp(-mua * d)
    loop = 1 - face**2 * att**2
    r = slab_reflectance_transmittance(mua_per_mm=mua, mus_per_mm=0.0, g=0.0, thickness_mm=d, n=n)
    # The doubling's diamond scheme approximates e^(−Δ) to O(Δ³) per thin layer: 1e-8 here.
    assert r.total_transmittance == pytest.approx((1 - face) ** 2 * att / loop, rel=1e-8)
    assert r.unscattered_transmittance == pytest.approx((1 - face) ** 2 * att / loop, rel=1e-10)
    assert r.total_reflectance == pytest.approx(face + (1 - face) ** 2 * face * att**2 / loop, rel=1e-8)
    assert r.specular_reflectance == pytest.approx(face, rel=1e-12)
    assert r.unscattered_reflectance == pytest.approx((1 - face) ** 2 * face * att**2 / loop, rel=1e-10)


def test_clear_slab_between_fresnel_faces_diffuse():
    # The same series integrated over Lambertian incidence in the outside angle θ0
    # (Snell: sin θ = sin θ0 / n), with scipy quad: an independent angular integral.
    n, mua, d = 1.4, 0.3, 0.8

    def through(theta0):
        mu0 = math.cos(theta0)
        mu = math.sqrt(1 - (math.sin(theta0) / n) ** 2)
        face = float(fresnel_reflectance(cos_incident=mu0, n_from=1.0, n_to=n))
        att = math.exp(-mua * d / mu)
        return 2 * mu0 * math.sin(theta0) * (1 - face) ** 2 * att / (1 - face**2 * att**2)

    expected = quad(through, 0, math.pi / 2, epsabs=1e-13, limit=200)[0]
    r = slab_reflectance_transmittance(
        mua_per_mm=mua, mus_per_mm=0.0, g=0.0, thickness_mm=d, n=n, incidence="diffuse"
    )
    assert r.total_transmittance == pytest.approx(expected, rel=1e-6)
    assert r.unscattered_transmittance == pytest.approx(expected, rel=1e-8)


def test_zero_thickness_is_a_pair_of_faces():
    # Stokes: two identical incoherent faces reflect 2R/(1 + R) (Born & Wolf 1999 §1.5).
    n = 1.4
    face = ((n - 1) / (n + 1)) ** 2
    r = slab_reflectance_transmittance(mua_per_mm=1.0, mus_per_mm=5.0, g=0.5, thickness_mm=0.0, n=n)
    assert r.total_reflectance == pytest.approx(2 * face / (1 + face), rel=1e-10)
    assert r.total_transmittance == pytest.approx(1 - 2 * face / (1 + face), rel=1e-10)


@pytest.mark.parametrize(
    "options",
    [
        {"n": 1.0},
        {"n": 1.4},
        {"n": 1.33, "n_slide": 1.52},
        {"n": 1.4, "n_slide": (1.52, None)},
        {"n": 1.4, "n_slide": (None, 1.52)},
        {"n": 1.0, "n_outside": 1.5},
        {"n": 1.4, "incidence": "diffuse"},
        {"n": 1.33, "n_slide": 1.52, "incidence": "diffuse"},
        {"n": 1.0, "n_outside": 1.5, "incidence": "diffuse"},
    ],
)
def test_energy_conservation_without_absorption(options):
    # Exact: a non-absorbing slab (clear slides) sends every photon out, R + T = 1.
    g = np.array([0.0, 0.5, 0.9, 0.95, -0.3])
    r = slab_reflectance_transmittance(mua_per_mm=0.0, mus_per_mm=20.0, g=g, thickness_mm=0.7, **options)
    assert r.total_reflectance + r.total_transmittance == pytest.approx(np.ones(5), abs=1e-9)
    assert np.all(r.absorbed_fraction > -1e-9)


def test_absorbing_slide_absorbs():
    base = slab_reflectance_transmittance(mua_per_mm=0.0, mus_per_mm=5.0, g=0.8, thickness_mm=1.0, n=1.33, n_slide=1.52)
    dark = slab_reflectance_transmittance(
        mua_per_mm=0.0, mus_per_mm=5.0, g=0.8, thickness_mm=1.0, n=1.33, n_slide=1.52,
        slide_thickness_mm=1.0, slide_mua_per_mm=0.05,
    )
    assert base.absorbed_fraction == pytest.approx(0.0, abs=1e-9)
    assert dark.absorbed_fraction > 0.01
    assert dark.total_transmittance < base.total_transmittance


def test_specular_of_a_slide_by_stokes_series():
    # Outer face of a slide (air–glass r2) over glass–sample (r1), normal incidence, clear glass:
    # R = r2 + (1 − r2)² r1 / (1 − r1 r2) (Stokes series, Born & Wolf 1999 §1.5).
    ng, n = 1.52, 1.4
    r2 = ((ng - 1) / (ng + 1)) ** 2
    r1 = ((ng - n) / (ng + n)) ** 2
    r = slab_reflectance_transmittance(mua_per_mm=0.1, mus_per_mm=5.0, g=0.8, thickness_mm=1.0, n=n, n_slide=ng)
    assert r.specular_reflectance == pytest.approx(r2 + (1 - r2) ** 2 * r1 / (1 - r1 * r2), rel=1e-12)


@pytest.mark.parametrize("albedo", [0.3, 0.8, 0.95, 0.99])
def test_thick_matched_isotropic_slab_is_chandrasekhar_half_space(albedo):
    # CHECKS.md: R = 1 − H(1)√(1 − a) (Chandrasekhar 1950); Lambertian light:
    # 1 − 2√(1 − a) ∫ H μ dμ.  A slab of optical thickness 2000 is a half-space here.
    options = dict(mua_per_mm=1 - albedo, mus_per_mm=albedo, g=0.0, thickness_mm=2000.0, n=1.0)
    collimated = slab_reflectance_transmittance(**options)
    diffuse = slab_reflectance_transmittance(**options, incidence="diffuse")
    assert collimated.total_reflectance == pytest.approx(
        semi_infinite_reflectance_isotropic(albedo=albedo), rel=1e-6
    )
    assert diffuse.total_reflectance == pytest.approx(
        semi_infinite_diffuse_incidence_reflectance_isotropic(albedo=albedo), rel=1e-6
    )


def test_vectorised_over_wavelengths_matches_scalar_calls():
    wavelengths = 5
    mua = np.linspace(0.01, 0.5, wavelengths)
    mus = np.linspace(20, 8, wavelengths)
    g = np.linspace(0.7, 0.9, wavelengths)
    n = np.linspace(1.34, 1.33, wavelengths)
    batch = slab_reflectance_transmittance(mua_per_mm=mua, mus_per_mm=mus, g=g, thickness_mm=1.0, n=n)
    assert isinstance(batch, SlabResult)
    assert batch.total_reflectance.shape == (wavelengths,)
    for k in range(wavelengths):
        one = slab_reflectance_transmittance(mua_per_mm=mua[k], mus_per_mm=mus[k], g=g[k], thickness_mm=1.0, n=n[k])
        assert np.ndim(one.total_reflectance) == 0
        assert one.total_reflectance == pytest.approx(batch.total_reflectance[k], rel=1e-9)
        assert one.total_transmittance == pytest.approx(batch.total_transmittance[k], rel=1e-9)


def test_nan_gives_nan_only_where_given():
    r = slab_reflectance_transmittance(mua_per_mm=[0.1, np.nan, 0.2], mus_per_mm=10, g=0.8, thickness_mm=1, n=1.4)
    assert np.isnan(r.total_reflectance[1]) and np.isnan(r.total_transmittance[1])
    assert np.all(np.isfinite(r.total_reflectance[[0, 2]]))


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"mua_per_mm": -0.1}, r"mua_per_mm must be finite and >= 0 \[1/mm\], got -0\.1"),
        ({"mus_per_mm": -1.0}, r"mus_per_mm must be finite and >= 0"),
        ({"g": 1.0}, r"g must lie in \(-1, 1\), got 1"),
        ({"g": -1.5}, r"g must lie in \(-1, 1\), got -1\.5"),
        ({"n": 0.99}, r"n \(refractive index\) must be >= 1, got 0\.99"),
        ({"n_slide": 0.5}, r"n_slide \(refractive index\) must be >= 1"),
        ({"thickness_mm": -1.0}, r"thickness_mm must be finite and >= 0 \[mm\]"),
        ({"incidence": "oblique"}, r"unknown incidence 'oblique'; valid: collimated, diffuse"),
        ({"quadrature_points": 7}, r"quadrature_points must be an even integer from 4 to 256 \(or one per wavelength\), got 7"),
        ({"mua_per_mm": [0.1, 0.2], "mus_per_mm": [1, 2, 3]}, "must share one shape"),
    ],
)
def test_bad_input_refused(kwargs, match):
    arguments = dict(mua_per_mm=0.1, mus_per_mm=10.0, g=0.8, thickness_mm=1.0, n=1.4)
    arguments.update(kwargs)
    with pytest.raises(InputError, match=match):
        slab_reflectance_transmittance(**arguments)


from hypothesis import example, given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402


@settings(max_examples=25, deadline=None)
@given(
    mua=st.floats(0.0, 5.0),
    mus=st.floats(0.0, 50.0),
    g=st.floats(-0.5, 0.95),
    d=st.floats(0.0, 3.0),
    n=st.floats(1.0, 1.6),
    slide=st.sampled_from([None, 1.52, (1.52, None)]),
    incidence=st.sampled_from(["collimated", "diffuse"]),
)
# a clear, zero-thickness layer between slides once gave 0/0 in the unscattered part
@example(mua=0.0, mus=0.0, g=0.0, d=0.0, n=1.0, slide=1.52, incidence="diffuse")
@example(mua=0.0, mus=0.0, g=0.0, d=0.0, n=1.6, slide=1.52, incidence="diffuse")
# a clear layer under diffuse light with n within 0.4 % of the outside: the streams missed the
# Fresnel rise at grazing incidence (R −1.4e-6; unscattered T above the total by 2.7e-7)
@example(mua=0.0, mus=0.0, g=0.0, d=0.0, n=1.000001, slide=None, incidence="diffuse")
@example(mua=0.0, mus=0.0, g=0.0, d=0.0, n=1.0039, slide=None, incidence="diffuse")
# a face matched up to rounding once made the layer equations singular
@example(mua=0.0, mus=1.0, g=0.0, d=0.0, n=1.0000000000000002, slide=None, incidence="collimated")
def test_fractions_are_physical_and_absorption_only_removes_light(mua, mus, g, d, n, slide, incidence):
    # Exact properties: every fraction in [0, 1], R + T + A = 1, and adding absorption can
    # only lower both R and T (each photon path's weight falls as e^(−μa L)).
    options = dict(mus_per_mm=mus, g=g, thickness_mm=d, n=n, n_slide=slide, incidence=incidence)
    base = slab_reflectance_transmittance(mua_per_mm=np.array([mua, mua + 0.5]), **options)
    for name in ("total_reflectance", "total_transmittance", "specular_reflectance",
                 "unscattered_transmittance", "absorbed_fraction"):
        values = getattr(base, name)
        assert np.all(values >= -1e-9) and np.all(values <= 1 + 1e-9), name
    assert base.total_reflectance[1] <= base.total_reflectance[0] + 1e-9
    assert base.total_transmittance[1] <= base.total_transmittance[0] + 1e-9
    # the unscattered part comes from its own angular quadrature (diffuse incidence): the two
    # agree to ~1e-9 where a clear layer makes them equal, so compare at 1e-7
    assert base.unscattered_transmittance[0] <= base.total_transmittance[0] + 1e-7


@pytest.mark.parametrize("excess", [2e-16, 1e-9, 6e-7, 3e-5, 1e-3, 5e-3])
def test_faces_matched_up_to_a_hair_conserve_energy(excess):
    # exact limit: a non-absorbing slab returns every photon as R + T (energy conservation),
    # also when n differs from the outside by rounding only (n = 1 + 2e-16 once made the
    # layer equations singular: Gauss nodes packed below a critical cosine of 2e-8)
    result = slab_reflectance_transmittance(mua_per_mm=np.array([0.0, 0.5]), mus_per_mm=1.0, g=0.0,
                                            thickness_mm=0.1, n=1.0 + excess, incidence="collimated")
    total = result.total_reflectance + result.total_transmittance
    assert np.all(np.isfinite(total))
    assert total[0] == pytest.approx(1.0, abs=1e-9)
    assert 0.0 < total[1] < 1.0
