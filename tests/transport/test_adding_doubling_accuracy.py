"""Adding-doubling with index-mismatched faces, against an independent computation,
and its convergence with the number of streams up to g = 0.95.

Independent reference for mismatched faces: an isotropically scattering half-space under a
Fresnel face (n = 1.4 in air).  Its matched reflection law is known exactly,
ρ(μ, μ0) ∝ H(μ) H(μ0) / (μ + μ0) (Chandrasekhar 1950, ch. V, the law of diffuse
reflection), and the face is put on top of it with the adding equation
(van de Hulst 1980) on a 300-node Gauss grid split at the critical angle — a different
discretisation, no doubling, no Radau rule and no phase-function expansion.

Convergence with streams: the default (chosen from g, ``STREAMS_BY_ANISOTROPY``) is held
within 0.1 % of 128 streams at the hardest cases the table was measured on (thin, nearly
non-absorbing slabs at n = 1.33 and 1.4; thick absorbing ones), up to g = 0.97.
"""

import numpy as np
import pytest

from phantomlab.transport.adding_doubling import slab_reflectance_transmittance, streams_for_anisotropy
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
def test_default_streams_within_0_1_percent_of_128(case):
    # Convergence (numerical, no outside value): the default streams chosen from g against
    # 128, with and without mismatch and slides.
    default = slab_reflectance_transmittance(**case)
    fine = slab_reflectance_transmittance(**case, quadrature_points=128)
    assert default.total_reflectance == pytest.approx(fine.total_reflectance, rel=1e-3)
    assert default.total_transmittance == pytest.approx(fine.total_transmittance, rel=1e-3)


# The hardest cases of the scan behind STREAMS_BY_ANISOTROPY (albedo, optical thickness):
# a thin, nearly non-absorbing slab (its reflectance is a few single-scattering events that
# the truncated phase function renders worst) and a thick absorbing one.
_HARD = [(0.999, 1.0), (0.99, 1.0), (0.999, 0.5), (0.6, 40.0), (0.6, 2.0)]


@pytest.mark.parametrize("g", [0.8, 0.85, 0.9, 0.95, 0.96, 0.97])
@pytest.mark.parametrize("n, slide, incidence", [(1.33, None, "collimated"), (1.4, None, "collimated"),
                                                 (1.4, 1.52, "collimated"), (1.4, None, "diffuse")])
def test_streams_chosen_from_g_hold_0_1_percent_up_to_g_0_97(g, n, slide, incidence):
    albedo, tau = np.array(_HARD).T
    case = dict(mua_per_mm=(1 - albedo) * tau, mus_per_mm=albedo * tau, g=g, thickness_mm=1.0, n=n,
                n_slide=slide, incidence=incidence)
    default = slab_reflectance_transmittance(**case)
    fine = slab_reflectance_transmittance(**case, quadrature_points=128)
    assert np.all(default.quadrature_points == streams_for_anisotropy(g))
    np.testing.assert_allclose(default.total_reflectance, fine.total_reflectance, rtol=1e-3)
    np.testing.assert_allclose(default.total_transmittance, fine.total_transmittance, rtol=1e-3)


def test_the_old_fixed_24_streams_miss_0_1_percent_at_g_0_95():
    # The reason for choosing streams from g: 24 streams are ≈0.4 % off at g = 0.95 (n = 1.4).
    case = dict(mua_per_mm=0.001, mus_per_mm=0.999, g=0.95, thickness_mm=1.0, n=1.4)
    coarse = slab_reflectance_transmittance(**case, quadrature_points=24)
    fine = slab_reflectance_transmittance(**case, quadrature_points=128)
    assert abs(coarse.total_reflectance / fine.total_reflectance - 1) > 2e-3


def test_streams_for_anisotropy_table():
    assert streams_for_anisotropy(0.0) == 24
    assert streams_for_anisotropy(-0.9) == streams_for_anisotropy(0.9) == 36
    assert streams_for_anisotropy(0.95) == 48
    assert streams_for_anisotropy(0.99) == 64
    np.testing.assert_array_equal(streams_for_anisotropy(np.array([0.5, 0.86, np.nan])), [24, 36, 24])


@pytest.mark.parametrize("incidence", ["collimated", "diffuse"])
def test_eigen_and_doubling_solve_the_same_equations(incidence):
    # Two solvers of one discretisation: the doubling's thin-layer error is ≈1e-8.
    rng = np.random.default_rng(3)
    size = 40
    case = dict(mua_per_mm=10 ** rng.uniform(-3, 0, size), mus_per_mm=10 ** rng.uniform(-1, 1.7, size),
                g=rng.uniform(-0.3, 0.95, size), thickness_mm=10 ** rng.uniform(-1, 0.5, size), n=1.4,
                n_slide=(1.52, None), incidence=incidence, quadrature_points=24)
    eigen = slab_reflectance_transmittance(**case)
    doubling = slab_reflectance_transmittance(**case, method="doubling")
    np.testing.assert_allclose(eigen.total_reflectance, doubling.total_reflectance, rtol=1e-6)
    np.testing.assert_allclose(eigen.total_transmittance, doubling.total_transmittance, rtol=1e-6)
