"""Spatial-frequency-domain diffusion reflectance (Cuccia et al. 2009, J Biomed Opt 14:024012).

Exact limits (CHECKS.md): μa = 0 and fx = 0 → R = 1 in Cuccia's model; fx → ∞ → 0.
Cuccia's R counts from the light that entered; the project reports per unit incident power
(DEVELOPERS.md, "Reflectance conventions"), so the μa = 0, fx = 0 limit is the beam's Fresnel
transmission 1 − ((n − 1)/(n + 1))² (Born & Wolf 1999, §1.5.2, normal incidence): all the light
that entered comes back.
"""

import math

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.boundary import effective_reflection_coefficient
from phantomlab.transport.spatial_frequency_domain import sfdi_reflectance


@pytest.mark.parametrize("boundary", ["groenhuis1983", "haskell1994"])
@pytest.mark.parametrize("n", [1.0, 1.33, 1.4])
def test_planar_non_absorbing_limit_is_one(boundary, n):
    # CHECKS.md / Cuccia et al. 2009: μa = 0, fx = 0 → R = 1 per light that entered; per
    # incident power that is the normal-incidence Fresnel transmission (Born & Wolf §1.5.2).
    entered = 1.0 - ((n - 1.0) / (n + 1.0)) ** 2
    assert sfdi_reflectance(
        mua_per_mm=0.0, musp_per_mm=1.0, fx_per_mm=0.0, n=n, boundary=boundary
    ) / entered == pytest.approx(1.0, abs=1e-12)


def test_high_frequency_limit_is_zero_and_monotone():
    # CHECKS.md: fx → ∞ → 0; R falls monotonically with fx.
    fx = np.array([0.0, 0.05, 0.1, 0.2, 0.5, 1e3, 1e9])
    with pytest.warns(PhantomlabWarning, match="finer than a transport mean free path"):
        r = sfdi_reflectance(mua_per_mm=0.01, musp_per_mm=1.0, fx_per_mm=fx, n=1.4)
    assert np.all(np.diff(r) < 0)
    assert r[-1] < 1e-15


def test_worked_value_step_by_step():
    # Cuccia et al. 2009 equations evaluated by hand for μa = 0.01, μs′ = 1, fx = 0.1, n = 1.4
    # with R_eff from the Groenhuis polynomial (0.529489, see test_diffusion_boundary):
    r_eff = effective_reflection_coefficient(n=1.4, method="groenhuis1983")
    a_cuccia = (1 - r_eff) / (2 * (1 + r_eff))  # their A convention
    assert a_cuccia == pytest.approx(0.153813, abs=1e-6)
    mutr, albedo = 1.01, 1 / 1.01
    ratio = math.sqrt(3 * 0.01 * 1.01 + (2 * math.pi * 0.1) ** 2) / mutr
    entered = 1 - (0.4 / 2.4) ** 2  # normal-incidence Fresnel transmission (Born & Wolf §1.5.2)
    expected = entered * 3 * a_cuccia * albedo / ((ratio + 1) * (ratio + 3 * a_cuccia))
    got = sfdi_reflectance(mua_per_mm=0.01, musp_per_mm=1.0, fx_per_mm=0.1, n=1.4)
    assert got == pytest.approx(expected, rel=1e-12)


def test_shapes_and_nan():
    r = sfdi_reflectance(
        mua_per_mm=[0.01, 0.02, np.nan], musp_per_mm=[1.0, 1.1, 1.2], fx_per_mm=[0, 0.1], n=1.4
    )
    assert r.shape == (3, 2)
    assert np.all(np.isnan(r[2])) and np.all(np.isfinite(r[:2]))
    assert isinstance(sfdi_reflectance(mua_per_mm=0.01, musp_per_mm=1, fx_per_mm=0.1, n=1.4), float)


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"fx_per_mm": -0.1}, r"fx_per_mm must be finite and >= 0 \[1/mm\]"),
        ({"mua_per_mm": -1.0}, r"mua_per_mm must be finite and >= 0"),
        ({"n": 0.5}, r"must be >= 1"),
        ({"boundary": "x"}, "unknown boundary method 'x'; valid: groenhuis1983, haskell1994"),
        ({"model": "x"}, "unknown sfdi model 'x'; valid: cuccia2009"),
    ],
)
def test_bad_input_refused(kwargs, match):
    arguments = {"mua_per_mm": 0.01, "musp_per_mm": 1.0, "fx_per_mm": 0.1, "n": 1.4}
    arguments.update(kwargs)
    with pytest.raises(InputError, match=match):
        sfdi_reflectance(**arguments)
