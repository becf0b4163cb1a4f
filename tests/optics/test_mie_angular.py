"""Angular Mie scattering against an independent registry package and the integrated efficiencies."""

import miepython
import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.optics.mie import sphere_ensemble_optics
from phantomlab.optics.mie_angular import (
    angle_grid,
    ensemble_differential_cross_section,
    scattered_intensity,
)
from phantomlab.optics.mie_series import mie_efficiencies

CASES = [(1.5, 0.1), (1.5, 3.0), (1.2 - 0.01j, 20.0), (1.59 / 1.33, 7.5), (2.7 / 1.33 - 0.001j, 40.0)]


@pytest.mark.parametrize("m, x", CASES)
def test_intensity_matches_miepython(m, x):
    # miepython 3.3 S1_S2 with norm="wiscombe" is Bohren & Huffman's S1, S2 (independent code)
    mu = np.linspace(-1.0, 1.0, 41)
    s1, s2 = miepython.S1_S2(m, x, mu, norm="wiscombe")
    reference = 0.5 * (np.abs(s1) ** 2 + np.abs(s2) ** 2)
    assert scattered_intensity(m, x, mu)[0] == pytest.approx(reference, rel=1e-9)


@pytest.mark.parametrize("m, x", CASES)
def test_integral_over_angles_is_the_scattering_efficiency(m, x):
    # Bohren & Huffman 1983, eq. 4.61 with eq. 4.77: Qsca = (2/x^2) int S11 dcos(theta)
    mu, weights = angle_grid(x)
    qsca = 2.0 / x**2 * np.sum(weights * scattered_intensity(m, x, mu)[0])
    assert qsca == pytest.approx(float(mie_efficiencies(m, x)[1][0]), rel=1e-10)
    assert qsca == pytest.approx(float(miepython.efficiencies_mx(m, x)[1]), rel=1e-8)


def test_ensemble_cross_section_integrates_to_the_ensemble_scattering():
    # N <Csca> = mus and N int cos(theta) dCsca/dOmega dOmega = g mus, N = f / <V>
    lam = np.array([450.0, 633.0, 900.0])
    d = np.linspace(0.3, 0.7, 21)
    w = np.exp(-0.5 * ((d - 0.5) / 0.05) ** 2)
    ensemble = sphere_ensemble_optics(wavelength_nm=lam, particle_index=1.59, matrix_index=1.33,
                                      diameters_um=d, number_weights=w, volume_fraction=0.01)
    mu, weights = angle_grid(np.pi * 0.7 * 1.33 / 0.45)
    dcs = ensemble_differential_cross_section(wavelength_nm=lam, particle_index=1.59, matrix_index=1.33,
                                              diameters_um=d, number_weights=w, mu=mu)  # [um^2/sr]
    volume_um3 = np.sum(w / w.sum() * np.pi / 6 * d**3)
    number_per_mm3 = 0.01 / (volume_um3 * 1e-9)
    mus = number_per_mm3 * 2 * np.pi * (dcs * weights).sum(axis=1) * 1e-6  # um^2 -> mm^2
    g = (dcs * weights * mu).sum(axis=1) / (dcs * weights).sum(axis=1)
    assert mus == pytest.approx(ensemble.mus_per_mm, rel=1e-9)
    assert g == pytest.approx(ensemble.g, rel=1e-9)


def test_refusals():
    with pytest.raises(InputError, match="x finite and > 0"):
        scattered_intensity(1.5, 0.0, [0.0])
