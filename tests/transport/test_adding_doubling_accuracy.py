"""Adding-doubling with index-mismatched faces, against an independent computation,
and its convergence with the number of streams up to g = 0.95.

Independent reference for mismatched faces: an isotropically scattering half-space under a
Fresnel face (n = 1.4 in air).  Its matched reflection law is known exactly,
ρ(μ, μ0) ∝ H(μ) H(μ0) / (μ + μ0) (Chandrasekhar 1950, ch. V, the law of diffuse
reflection), and the face is put on top of it with the adding equation
(van de Hulst 1980) on a 300-node Gauss grid split at the critical angle — a different
discretisation, no doubling, no Radau rule and no phase-function expansion.
"""

import numpy as np
import pytest

from phantomlab.transport.adding_doubling import slab_reflectance_transmittance
from phantomlab.transport.fresnel import fresnel_reflectance
from phantomlab.transport.hfunction import h_function_isotropic


def _half_space_under_fresnel_face(albedo: float, n: float, incidence: str) -> float:
    mu_c = np.sqrt(1 - 1 / n**2)
    x, w = np.polynomial.legendre.leggauss(150)
    s, ws = 0.5 * (x + 1), 0.5 * w
    mu = np.concatenate([mu_c * s, mu_c + (1 - mu_c) * s**2])
    weight = np.concatenate([mu_c * ws, (1 - mu_c) * 2 * s * ws])
    h = h_function_isotropic(mu=mu, albedo=albedo)
    # Flux kernel of the matched half-space: power into dμ per unit power arriving along μ0
    # is (a/2) μ H(μ) H(μ0) / (μ + μ0) dμ (integrates to 1 − H(μ0)√(1 − a)).
    kernel = 0.5 * albedo * mu[:, None] * h[:, None] * h[None, :] / (mu[:, None] + mu[None, :])
    kernel = kernel * weight[:, None]
    face = np.asarray(fresnel_reflectance(cos_incident=mu, n_from=n, n_to=1.0))
    if incidence == "collimated":
        h1 = h_function_isotropic(mu=1.0, albedo=albedo)
        specular = float(fresnel_reflectance(cos_incident=1.0, n_from=1.0, n_to=n))
        first = (1 - specular) * 0.5 * albedo * mu * h * h1 / (mu + 1.0) * weight
    else:
        entering = np.where(mu >= mu_c, n**2 * 2 * mu * weight * (1 - face), 0.0)
        specular = 1 - entering.sum()
        first = kernel @ entering
    upward = np.linalg.solve(np.eye(mu.size) - kernel * face[None, :], first)
    return specular + (1 - face) @ upward


@pytest.mark.parametrize("incidence", ["collimated", "diffuse"])
@pytest.mark.parametrize("albedo", [0.5, 0.9, 0.99])
def test_mismatched_half_space_against_h_function_and_adding(albedo, incidence):
    reference = _half_space_under_fresnel_face(albedo, 1.4, incidence)
    result = slab_reflectance_transmittance(
        mua_per_mm=1 - albedo, mus_per_mm=albedo, g=0.0, thickness_mm=2000.0, n=1.4, incidence=incidence
    )
    assert result.total_reflectance == pytest.approx(reference, rel=1e-6)


CASES = [
    dict(mua_per_mm=1.0, mus_per_mm=9.0, g=0.75, thickness_mm=0.2, n=1.0),
    dict(mua_per_mm=0.1, mus_per_mm=20.0, g=0.95, thickness_mm=1.0, n=1.0),
    dict(mua_per_mm=0.1, mus_per_mm=20.0, g=0.95, thickness_mm=1.0, n=1.4),
    dict(mua_per_mm=0.1, mus_per_mm=20.0, g=0.95, thickness_mm=1.0, n=1.4, incidence="diffuse"),
    dict(mua_per_mm=0.5, mus_per_mm=50.0, g=0.9, thickness_mm=0.5, n=1.4, n_slide=1.52),
    dict(mua_per_mm=0.01, mus_per_mm=50.0, g=0.95, thickness_mm=5.0, n=1.5, n_outside=1.33, n_slide=(1.5, None)),
]


@pytest.mark.parametrize("case", CASES)
def test_default_streams_within_0_1_percent_of_64(case):
    # Convergence (numerical, no outside value): the default 24 streams per hemisphere
    # against 64, for g up to 0.95 with and without mismatch and slides.
    default = slab_reflectance_transmittance(**case)
    fine = slab_reflectance_transmittance(**case, quadrature_points=64)
    assert default.total_reflectance == pytest.approx(fine.total_reflectance, rel=1e-3)
    assert default.total_transmittance == pytest.approx(fine.total_transmittance, rel=1e-3)
