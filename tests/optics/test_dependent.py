"""The Percus–Yevick packing factor against independent routes to the same quantity."""

import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.optics.dependent import packing_factor_PercusYevick


def test_compressibility_route_of_the_percus_yevick_equation_of_state():
    # S(0) = 1 / d(beta p)/d(rho); Percus-Yevick compressibility equation of state
    # beta p / rho = (1 + f + f^2) / (1 - f)^3 (Thiele 1963, eq. 23); with f = rho v,
    # d(beta p)/d(rho) = d(f Z(f))/df, differentiated numerically here
    def f_z(f):
        return f * (1 + f + f**2) / (1 - f) ** 3

    for f in (0.01, 0.05, 0.1, 0.2, 0.3, 0.45):
        h = 1e-6
        derivative = (f_z(f + h) - f_z(f - h)) / (2 * h)
        assert packing_factor_PercusYevick(volume_fraction=f) == pytest.approx(1 / derivative, rel=1e-8)


def test_low_density_limit_is_the_second_virial_coefficient():
    # hard spheres: B2 = 4 v (exact), so S(0) = 1 - 8 f + O(f^2)  (Hansen & McDonald, Theory of
    # Simple Liquids, hard-sphere virial coefficients; from memory)
    f = 1e-5
    assert (1 - packing_factor_PercusYevick(volume_fraction=f)) / f == pytest.approx(8.0, rel=1e-3)


@pytest.mark.parametrize("f", [0.05, 0.1, 0.2])
def test_close_to_carnahan_starling(f):
    # Carnahan & Starling 1969 (J Chem Phys 51:635) equation of state, a different closure:
    # S(0) = (1 - f)^4 / (1 + 4f + 4f^2 - 4f^3 + f^4); the two agree within 3 % up to f = 0.2 (4 % at 0.3)
    carnahan_starling = (1 - f) ** 4 / (1 + 4 * f + 4 * f**2 - 4 * f**3 + f**4)
    assert packing_factor_PercusYevick(volume_fraction=f) == pytest.approx(carnahan_starling, rel=0.03)


def test_limits_and_refusals():
    assert packing_factor_PercusYevick(volume_fraction=0.0) == 1.0
    values = packing_factor_PercusYevick(volume_fraction=np.linspace(0, 0.6, 13))
    assert np.all(np.diff(values) < 0)
    with pytest.raises(InputError, match="volume fraction must lie in \\[0, 0.64\\)"):
        packing_factor_PercusYevick(volume_fraction=0.7)


# ---- the structure factor S(q) and the angular model ------------------------------------------

from scipy.integrate import quad  # noqa: E402

from phantomlab.optics.dependent import angular_scattering, structure_factor_PercusYevick  # noqa: E402


def structure_factor_by_quadrature(q, f):
    # S = 1 / (1 - rho c(q)), rho c(q) = 4 pi rho int c(r) r^2 sin(qr)/(qr) dr with Wertheim's
    # (1963, eq. 7) direct correlation function c(r) = -(alpha + beta s + gamma s^3), s = r/d < 1;
    # integrated numerically here, not from the closed form under test
    alpha = (1 + 2 * f) ** 2 / (1 - f) ** 4
    beta = -6 * f * (1 + f / 2) ** 2 / (1 - f) ** 4
    gamma = f * alpha / 2
    integral = quad(lambda s: -(alpha + beta * s + gamma * s**3) * s**2 * np.sinc(q * s / np.pi), 0, 1,
                    epsabs=1e-13, epsrel=1e-12)[0]
    return 1 / (1 - 24 * f * integral)


@pytest.mark.parametrize("f", [0.01, 0.1, 0.3, 0.5])
@pytest.mark.parametrize("q", [0.0, 0.4, 0.999, 1.0, 1.001, 3.0, 4.5, 7.2, 15.0, 60.0])
def test_structure_factor_against_the_transform_of_the_direct_correlation_function(q, f):
    assert structure_factor_PercusYevick(q_diameter=q, volume_fraction=f) == pytest.approx(
        structure_factor_by_quadrature(q, f), rel=1e-10)


def test_structure_factor_limits():
    q = np.linspace(0.0, 40.0, 401)
    for f in (0.05, 0.2, 0.4):
        s = structure_factor_PercusYevick(q_diameter=q, volume_fraction=f)
        assert s[0] == pytest.approx(packing_factor_PercusYevick(volume_fraction=f), rel=1e-12)  # S(0) = W(f)
        assert np.all(s >= s[0])  # hard spheres: q -> 0 is where S is lowest
        assert abs(s[-1] - 1) < 0.05  # S -> 1 at large q
    assert structure_factor_PercusYevick(q_diameter=q, volume_fraction=1e-9) == pytest.approx(1.0, abs=1e-7)
    with pytest.raises(InputError, match="q·d must be finite and >= 0"):
        structure_factor_PercusYevick(q_diameter=-1.0, volume_fraction=0.1)


LAMBDA = np.array([450.0, 633.0, 900.0])


def test_angular_factors_tend_to_one_and_to_the_packing_factor():
    tiny = angular_scattering(wavelength_nm=LAMBDA, particle_index=1.59, matrix_index=1.33,
                              diameters_um=[0.002], number_weights=[1.0])
    for f in (0.05, 0.2, 0.4):
        mus, musp = tiny.factors(volume_fraction=f)
        w = packing_factor_PercusYevick(volume_fraction=f)  # q d -> 0 for particles << wavelength
        assert mus == pytest.approx(np.full(3, w), rel=1e-3)
        assert musp == pytest.approx(np.full(3, w), rel=1e-3)
    sized = angular_scattering(wavelength_nm=LAMBDA, particle_index=1.59, matrix_index=1.33,
                               diameters_um=[0.5], number_weights=[1.0])
    mus, musp = sized.factors(volume_fraction=0.0)
    assert mus == pytest.approx(np.ones(3), abs=1e-12) and musp == pytest.approx(np.ones(3), abs=1e-12)
    mus, musp = sized.factors(volume_fraction=0.2)
    w = packing_factor_PercusYevick(volume_fraction=0.2)
    # wavelength-sized spheres: less reduction than the small-particle factor, least for mus'
    assert np.all(mus > w) and np.all(musp > mus) and np.all(musp < 1)


def test_angular_factors_against_adaptive_quadrature_with_miepython():
    # independent route: miepython's S1, S2 (norm="wiscombe") integrated over theta by scipy quad,
    # weighted by the structure factor (itself checked above against its defining transform)
    import miepython

    d_um, f, n_medium = 0.5, 0.2, 1.33
    for lam in LAMBDA:
        k = 2 * np.pi * n_medium / (lam / 1000)
        x, m = k * d_um / 2, 1.59 / n_medium

        def s11(mu):
            s1, s2 = miepython.S1_S2(m, x, np.array([mu]), norm="wiscombe")
            return 0.5 * (abs(s1[0]) ** 2 + abs(s2[0]) ** 2)

        def structure(mu):
            return float(structure_factor_PercusYevick(q_diameter=k * d_um * np.sqrt(2 * (1 - mu)), volume_fraction=f))

        plain = quad(s11, -1, 1, limit=400, epsrel=1e-11)[0]
        plain_t = quad(lambda u: s11(u) * (1 - u), -1, 1, limit=400, epsrel=1e-11)[0]
        mus = quad(lambda u: s11(u) * structure(u), -1, 1, limit=400, epsrel=1e-11)[0] / plain
        musp = quad(lambda u: s11(u) * structure(u) * (1 - u), -1, 1, limit=400, epsrel=1e-11)[0] / plain_t
        ours = angular_scattering(wavelength_nm=[lam], particle_index=1.59, matrix_index=n_medium,
                                  diameters_um=[d_um], number_weights=[1.0]).factors(volume_fraction=f)
        assert float(ours[0][0]) == pytest.approx(mus, rel=1e-8)
        assert float(ours[1][0]) == pytest.approx(musp, rel=1e-8)


def test_small_spheres_follow_the_sharp_decrease_ishimaru_and_kuga_report():
    # Ishimaru & Kuga 1982, JOSA 72:1317, abstract (qualitative; the thresholds below are ours):
    # latex spheres in water, above about 0.1 % by volume the attenuation departs markedly from
    # independent scattering and "decreases sharply when ka < 1" (their smallest ka: 0.529).
    # For ka >> 1 they saw a slight increase, which this model does not give (docs/design.md).
    k = 2 * np.pi * 1.33 / 0.6328  # [1/um], HeNe in water
    small = angular_scattering(wavelength_nm=[632.8], particle_index=1.59, matrix_index=1.33,
                               diameters_um=[2 * 0.529 / k], number_weights=[1.0])
    assert float(small.factors(volume_fraction=0.01)[0][0]) < 0.95
    assert float(small.factors(volume_fraction=0.10)[0][0]) < 0.6
