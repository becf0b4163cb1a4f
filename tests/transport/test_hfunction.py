"""Chandrasekhar's H-function (isotropic scattering) and the exact half-space reflectance.

Checks against the outside world:
* the explicit integral representation of H (Chandrasekhar 1950, ch. V), evaluated here
  independently with scipy.integrate.quad — a different formula and a different numerical
  method from the iteration in the module;
* the zeroth-moment identity ∫₀¹ H dμ = 2(1 − √(1 − a))/a (Chandrasekhar 1950, ch. V);
* the conservative value H(1) = 2.9078 at a = 1 (Chandrasekhar 1950, table of H for
  isotropic scattering)  # from memory
* exact limits: a = 0 → H = 1, R = 0; a = 1 → R = 1 (no absorption in a half-space).
"""

import math

import numpy as np
import pytest
from scipy.integrate import quad

from phantomlab.errors import InputError
from phantomlab.transport.hfunction import (
    h_function_isotropic,
    semi_infinite_diffuse_incidence_reflectance_isotropic,
    semi_infinite_reflectance_isotropic,
)


def _h_by_integral_representation(mu: float, albedo: float) -> float:
    """ln H(μ) = −(μ/π) ∫₀^{π/2} ln(1 − a θ cot θ) / (cos²θ + μ² sin²θ) dθ (Chandrasekhar 1950, ch. V)."""

    def integrand(theta):
        return math.log(1.0 - albedo * theta / math.tan(theta)) / (
            math.cos(theta) ** 2 + mu**2 * math.sin(theta) ** 2
        )

    value, _ = quad(integrand, 1e-12, math.pi / 2, limit=200, epsabs=1e-13)
    return math.exp(-mu / math.pi * value)


@pytest.mark.parametrize("albedo", [0.3, 0.8, 0.95, 0.99, 1.0])
@pytest.mark.parametrize("mu", [0.05, 0.5, 1.0])
def test_h_matches_integral_representation(albedo, mu):
    expected = _h_by_integral_representation(mu, albedo)
    assert h_function_isotropic(mu=mu, albedo=albedo) == pytest.approx(expected, rel=1e-8)


@pytest.mark.parametrize("albedo", [0.2, 0.7, 0.9, 0.999, 1.0])
def test_zeroth_moment_identity(albedo):
    # Chandrasekhar 1950, ch. V: α0 = ∫ H dμ = 2 (1 − √(1 − a)) / a.
    x, w = np.polynomial.legendre.leggauss(400)
    x, w = 0.5 * (x + 1.0), 0.5 * w
    moment = h_function_isotropic(mu=x, albedo=albedo) @ w
    assert moment == pytest.approx(2.0 * (1.0 - math.sqrt(1.0 - albedo)) / albedo, rel=1e-8)


def test_conservative_h_at_normal():
    # Chandrasekhar 1950, table of H(μ) for isotropic scattering, a = 1: H(1) = 2.9078  # from memory
    assert h_function_isotropic(mu=1.0, albedo=1.0) == pytest.approx(2.9078, abs=1e-4)


def test_limits_of_reflectance():
    # Exact limits: no scattering reflects nothing; a non-absorbing half-space returns all.
    assert semi_infinite_reflectance_isotropic(albedo=0.0) == pytest.approx(0.0, abs=1e-15)
    assert semi_infinite_reflectance_isotropic(albedo=1.0) == pytest.approx(1.0, abs=1e-12)
    assert semi_infinite_diffuse_incidence_reflectance_isotropic(albedo=1.0) == pytest.approx(
        1.0, abs=1e-9
    )
    assert np.allclose(h_function_isotropic(mu=[0.0, 0.3, 1.0], albedo=0.0), 1.0)


def test_reflectance_formula_uses_h_at_mu0():
    # R = 1 − H(μ0) √(1 − a) (Chandrasekhar 1950, ch. V), at an oblique incidence.
    albedo, mu0 = 0.9, 0.6
    expected = 1.0 - _h_by_integral_representation(mu0, albedo) * math.sqrt(1.0 - albedo)
    assert semi_infinite_reflectance_isotropic(albedo=albedo, mu0=mu0) == pytest.approx(
        expected, rel=1e-8
    )


def test_diffuse_incidence_is_flux_weighted_mean_of_collimated():
    # R_diffuse = 2 ∫ R(μ0) μ0 dμ0 (definition of Lambertian illumination), by scipy quad.
    albedo = 0.95
    value, _ = quad(
        lambda m: 2.0 * m * float(semi_infinite_reflectance_isotropic(albedo=albedo, mu0=m)),
        0.0,
        1.0,
    )
    assert semi_infinite_diffuse_incidence_reflectance_isotropic(albedo=albedo) == pytest.approx(
        value, rel=1e-7
    )


def test_shapes_scalar_and_arrays():
    assert isinstance(h_function_isotropic(mu=0.5, albedo=0.5), float)
    assert h_function_isotropic(mu=[0.1, 0.5, 1.0], albedo=0.5).shape == (3,)
    assert h_function_isotropic(mu=[0.1, 0.5, 1.0], albedo=[0.2, 0.5]).shape == (2, 3)
    reflectance = semi_infinite_reflectance_isotropic(albedo=[0.2, 0.5, 0.9, 0.99])
    assert reflectance.shape == (4,)
    assert np.all(np.diff(reflectance) > 0)  # more albedo, more light back


def test_nan_propagates():
    values = semi_infinite_reflectance_isotropic(albedo=[0.5, np.nan])
    assert np.isfinite(values[0]) and np.isnan(values[1])
    assert np.isnan(h_function_isotropic(mu=np.nan, albedo=0.5))


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"mu": 0.5, "albedo": 1.2}, r"albedo must lie in \[0, 1\]"),
        ({"mu": 0.5, "albedo": -0.1}, r"albedo must lie in \[0, 1\]"),
        ({"mu": 1.5, "albedo": 0.5}, r"mu \(cosine of the polar angle\) must lie in \[0, 1\]"),
        ({"mu": 0.5, "albedo": 0.5, "nodes": 2}, "nodes must be an integer >= 8"),
    ],
)
def test_bad_input_refused(kwargs, match):
    with pytest.raises(InputError, match=match):
        h_function_isotropic(**kwargs)
