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
