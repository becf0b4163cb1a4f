"""Boundary terms of diffusion theory: Fresnel reflectance, A, C1 and C2.

Sources of the check values are named beside each; the integrals are re-done here with
scipy.integrate.quad (an independent general-purpose integrator) from the definitions.
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.boundary import (
    BOUNDARY_METHODS,
    boundary_coefficient,
    effective_reflection_coefficient,
    fluence_flux_coefficients_Kienle1997,
    fresnel_angular_moments,
)
from phantomlab.transport.fresnel import fresnel_reflectance


def test_fresnel_normal_incidence():
    # Born & Wolf 1999, §1.5.2: R = ((n1 − n2)/(n1 + n2))² at normal incidence.
    assert fresnel_reflectance(cos_incident=1.0, n_from=1.0, n_to=1.5) == pytest.approx(0.04)
    assert fresnel_reflectance(cos_incident=1.0, n_from=1.4, n_to=1.0) == pytest.approx(
        (0.4 / 2.4) ** 2
    )


def test_fresnel_total_internal_reflection_and_brewster():
    # Snell's law: beyond sin θc = n2/n1 all light is reflected (Born & Wolf 1999, §1.5.4).
    theta_c = math.asin(1.0 / 1.4)
    assert fresnel_reflectance(cos_incident=math.cos(theta_c + 0.01), n_from=1.4, n_to=1.0) == 1.0
    assert fresnel_reflectance(cos_incident=math.cos(theta_c - 0.01), n_from=1.4, n_to=1.0) < 1.0
    # At Brewster's angle tan θB = n2/n1, Rp = 0, so R = Rs/2 with
    # Rs = ((n1 cos θi − n2 cos θt)/(n1 cos θi + n2 cos θt))² (Born & Wolf 1999, §1.5.3).
    theta_b = math.atan(1.5)
    theta_t = math.asin(math.sin(theta_b) / 1.5)
    rs = ((math.cos(theta_b) - 1.5 * math.cos(theta_t)) / (math.cos(theta_b) + 1.5 * math.cos(theta_t))) ** 2
    assert fresnel_reflectance(cos_incident=math.cos(theta_b), n_from=1.0, n_to=1.5) == pytest.approx(
        rs / 2
    )


def test_fresnel_arrays_and_nan():
    r = fresnel_reflectance(cos_incident=np.array([1.0, 0.5, np.nan, 0.0]), n_from=1.0, n_to=1.5)
    assert r.shape == (4,)
    assert r[0] == pytest.approx(0.04) and 0.04 < r[1] < 1 and np.isnan(r[2]) and r[3] == 1.0


def test_fresnel_reciprocity():
    # Stokes relations: an interface reflects the same fraction from either side along
    # Snell-conjugate directions.
    theta = 0.7
    theta_t = math.asin(math.sin(theta) / 1.5)
    from_air = fresnel_reflectance(cos_incident=math.cos(theta), n_from=1.0, n_to=1.5)
    from_glass = fresnel_reflectance(cos_incident=math.cos(theta_t), n_from=1.5, n_to=1.0)
    assert from_air == pytest.approx(from_glass, rel=1e-12)


@pytest.mark.parametrize("n, n_outside", [(1.33, 1.0), (1.4, 1.0), (1.5, 1.0), (1.33, 1.52)])
def test_fresnel_moments_equal_quadrature_of_definition(n, n_outside):
    # Haskell et al. 1994, J Opt Soc Am A 11:2727: R_phi = ∫ 2μ R_F dμ, R_j = ∫ 3μ² R_F dμ.
    def rf(mu):
        return float(fresnel_reflectance(cos_incident=mu, n_from=n, n_to=n_outside))

    kink = [math.sqrt(1 - (n_outside / n) ** 2)] if n > n_outside else None
    r_phi = quad(lambda m: 2 * m * rf(m), 0, 1, points=kink, epsabs=1e-13, limit=200)[0]
    r_j = quad(lambda m: 3 * m * m * rf(m), 0, 1, points=kink, epsabs=1e-13, limit=200)[0]
    got_phi, got_j = fresnel_angular_moments(n=n, n_outside=n_outside)
    assert got_phi == pytest.approx(r_phi, abs=1e-8)
    assert got_j == pytest.approx(r_j, abs=1e-8)


def test_boundary_coefficient_haskell_at_1_4():
    # CHECKS.md: Haskell et al. 1994, exact angular integrals, n = 1.4 → A ≈ 2.95 (3 digits).
    assert boundary_coefficient(n=1.4, method="haskell1994") == pytest.approx(2.95, abs=0.005)


def test_boundary_coefficient_groenhuis_polynomial_step_by_step():
    # Groenhuis et al. 1983, Appl Opt 22:2456, r_d = −1.440/n² + 0.710/n + 0.668 + 0.0636 n,
    # by hand at n = 1.4: −0.734694 + 0.507143 + 0.668 + 0.08904 = 0.529489, A = 3.25070.
    r_d = effective_reflection_coefficient(n=1.4, method="groenhuis1983")
    assert r_d == pytest.approx(0.529489, abs=1e-6)
    assert boundary_coefficient(n=1.4, method="groenhuis1983") == pytest.approx(3.25070, abs=1e-5)
    # The polynomial depends on the relative index only.
    assert boundary_coefficient(n=1.4 * 1.33, n_outside=1.33, method="groenhuis1983") == pytest.approx(
        3.25070, abs=1e-5
    )


def test_matched_boundary_is_exact():
    # Exact limit: no index step, no internal reflection: A = 1, C1 = 1/4, C2 = 1/2
    # (Kienle & Patterson 1997, matched case).
    assert boundary_coefficient(n=1.0, method="haskell1994") == pytest.approx(1.0, abs=1e-12)
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=1.33, n_outside=1.33)
    assert (c1, c2) == (pytest.approx(0.25, abs=1e-12), pytest.approx(0.5, abs=1e-12))


def test_kienle_coefficients_at_1_4():
    # CHECKS.md: Kienle & Patterson 1997, n = 1.4 → C1 ≈ 0.118, C2 ≈ 0.306 (3 digits).
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=1.4)
    assert c1 == pytest.approx(0.118, abs=5e-4)
    assert c2 == pytest.approx(0.306, abs=5e-4)


def test_vectorised_over_wavelengths_and_nan():
    n = np.array([1.33, 1.40, np.nan, 1.50])
    a = boundary_coefficient(n=n)
    assert a.shape == (4,)
    assert np.isnan(a[2]) and np.all(np.diff(a[[0, 1, 3]]) > 0)  # more mismatch, larger A
    assert isinstance(boundary_coefficient(n=1.4), float)


def test_groenhuis_below_one_warns():
    with pytest.warns(PhantomlabWarning, match=r"relative index n/n_outside = 0\.875"):
        boundary_coefficient(n=1.33, n_outside=1.52, method="groenhuis1983")


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"n": 0.9}, r"n \(refractive index\) must be >= 1, got 0\.9"),
        ({"n": 1.4, "n_outside": 0.5}, r"n_outside \(refractive index\) must be >= 1"),
        ({"n": 1.4, "method": "nope"}, r"unknown boundary method 'nope'; valid: groenhuis1983, haskell1994"),
        ({"n": "glass"}, "expected a refractive index >= 1"),
    ],
)
def test_bad_input_refused(kwargs, match):
    with pytest.raises(InputError, match=match):
        boundary_coefficient(**kwargs)


def test_registry_lists_both_methods():
    assert sorted(BOUNDARY_METHODS) == ["groenhuis1983", "haskell1994"]


def test_fresnel_moments_of_mixed_pairs_match_each_pair_alone_and_are_computed_once():
    # the moments depend on (n, n_outside) only: an array of mixed pairs gives each pair's own
    # value, NaN stays NaN, and a 601-wavelength call integrates its one pair once
    from phantomlab.transport.boundary import _moments_of_pair

    n = np.array([1.33, 1.4, np.nan, 1.4, 1.5, 1.33])
    n_outside = np.array([1.0, 1.0, 1.0, 1.33, 1.0, 1.0])
    got_phi, got_j = fresnel_angular_moments(n=n, n_outside=n_outside)
    for k in (0, 1, 3, 4, 5):
        alone_phi, alone_j = fresnel_angular_moments(n=float(n[k]), n_outside=float(n_outside[k]))
        assert got_phi[k] == alone_phi and got_j[k] == alone_j
    assert np.isnan(got_phi[2]) and np.isnan(got_j[2])
    fresnel_angular_moments(n=1.417, n_outside=1.0)
    before = _moments_of_pair.cache_info().misses
    fresnel_angular_moments(n=np.full(601, 1.417), n_outside=1.0)
    assert _moments_of_pair.cache_info().misses == before
