"""sfdi fits: recovery from synthetic data of the forward models; the Monte Carlo lookup's
Hankel transform checked against an exact identity.

Identity: at fx = 0 the planar reflectance equals the total diffuse reflectance,
R(0) = 2π ∫ R(ρ) ρ dρ (Cuccia et al. 2009, J Biomed Opt 14:024012, eq. 8 with J₀(0) = 1).
Hankel transform check: the pair ∫₀^∞ e^{−aρ} J₀(kρ) ρ dρ = a/(a² + k²)^{3/2}
(Gradshteyn & Ryzhik 2007, *Table of Integrals*, 7th ed., 6.623.2).
"""

from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration.fit_sfdi import fit_sfdi, hankel_sfdi_from_srdr, sfdi_forward
from phantomlab.calibration.measurement_metadata import MeasurementMetadata
from phantomlab.calibration.measurements import parse_measurement_text
from phantomlab.errors import InputError, PhantomlabWarning

FIXTURES = Path(__file__).parent / "fixtures"


def _measurement(wl, fx, R, sd):
    lines = ["wavelength_nm,fx_per_mm,reflectance,sd"]
    for i, w in enumerate(wl):
        for j, f in enumerate(fx):
            lines.append(f"{w:g},{f:g},{R[i, j]:.9g},{sd[i, j]:.6g}")
    return parse_measurement_text("\n".join(lines), kind="sfdi", metadata=MeasurementMetadata(n=1.4))


def test_hankel_transform_of_an_exponential():
    rho = np.geomspace(1e-5, 80, 20000)
    a, fx = 0.7, np.array([0.0, 0.05, 0.2])
    k = 2 * np.pi * fx
    got = hankel_sfdi_from_srdr(srdr_per_mm2=np.exp(-a * rho) / (2 * np.pi), rho_mm=rho, fx_per_mm=fx)
    np.testing.assert_allclose(got, a / (a**2 + k**2) ** 1.5, rtol=1e-4)  # G&R 6.623.2


def test_diffusion_fit_recovers_forward_model_data():
    from phantomlab.transport.spatial_frequency_domain import sfdi_reflectance

    rng = np.random.default_rng(4)
    wl = np.linspace(650, 850, 11)
    fx = np.array([0.0, 0.05, 0.1, 0.15, 0.2])
    mua = np.linspace(0.005, 0.03, wl.size)
    musp = 1.5 * (wl / 650) ** -1.3
    R = sfdi_reflectance(mua_per_mm=mua, musp_per_mm=musp, fx_per_mm=fx, n=1.4)
    sd = 0.005 * R
    fit = fit_sfdi(_measurement(wl, fx, R + sd * rng.standard_normal(R.shape), sd))
    np.testing.assert_array_less(np.abs(fit.mua_per_mm / mua - 1), 0.05)
    np.testing.assert_array_less(np.abs(fit.musp_per_mm / musp - 1), 0.03)
    assert fit.model == "diffusion-cuccia2009"


def test_one_frequency_warns_and_leaves_them_undetermined():
    from phantomlab.transport.spatial_frequency_domain import sfdi_reflectance

    R = sfdi_reflectance(mua_per_mm=np.array([0.01]), musp_per_mm=np.array([1.0]), fx_per_mm=np.array([0.1]), n=1.4)
    with pytest.warns(PhantomlabWarning, match=r"too few spatial frequencies \(1\)"):
        fit = fit_sfdi(_measurement([650.0], [0.1], R, 0.005 * R))
    assert not np.isfinite(fit.mua_sd_per_mm[0])


@pytest.fixture(scope="module")
def baseline():
    from phantomlab.transport.montecarlo import load_baseline

    return load_baseline(FIXTURES / "mc_baseline.npz")


def test_mc_lookup_at_zero_frequency_is_the_total_diffuse_reflectance(baseline):
    forward = sfdi_forward(model="mc", fx_per_mm=np.array([0.0]), n=1.4, baseline=baseline)
    mua, musp = np.array([0.01, 0.05]), np.array([1.0, 2.0])
    got = forward(mua, musp)[:, 0]
    total, total_sd = baseline.diffuse_reflectance(mua_per_mm=mua, mus_per_mm=musp / (1 - baseline.g))
    np.testing.assert_allclose(got, total, rtol=0.01)


def test_mc_lookup_fit_recovers_its_own_data_at_high_frequency(baseline):
    fx = np.array([0.0, 0.1, 0.3, 0.5])
    mua, musp = np.array([0.02, 0.1]), np.array([1.0, 1.0])  # musp/mua = 50 and 10
    forward = sfdi_forward(model="mc", fx_per_mm=fx, n=1.4, baseline=baseline)
    R = forward(mua, musp)
    fit = fit_sfdi(_measurement([650.0, 660.0], fx, R, 0.005 * R), model="mc", baseline=baseline)
    np.testing.assert_allclose(fit.mua_per_mm, mua, rtol=0.02)
    np.testing.assert_allclose(fit.musp_per_mm, musp, rtol=0.01)


def test_sfdi_fit_refusals():
    m = parse_measurement_text("wavelength_nm,fx_per_mm,reflectance\n650,0,0.5\n650,0.1,0.3\n", kind="sfdi")
    with pytest.raises(InputError, match="needs the phantom's refractive index"):
        fit_sfdi(m)
    with pytest.raises(InputError, match="unknown sfdi fit model 'dipole'; accepted: cuccia2009, mc"):
        fit_sfdi(m, model="dipole", n=1.4)
