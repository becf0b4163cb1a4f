"""Frequency-domain diffusion reflectance of a half-space (transport/frequency_domain.py).

Check values and their sources:
* the closed form with the complex wave number k = √((μa + iω/v)/D) (Fishkin & Gratton 1993,
  J Opt Soc Am A 10:127, the infinite-medium photon-density wave; Haskell et al. 1994, J Opt Soc
  Am A 11:2727, the extrapolated-boundary half-space and R = C1 Φ + C2 J) typed in here;
* the Fourier transform of the time-resolved model (transport/time_domain.py) by quadrature:
  R̃(ρ, ω) = ∫ R(ρ, t) e^(−iωt) dt;
* f = 0 gives the steady state with zero phase; the phase lag grows with ρ and f.
"""

import cmath
import math

import numpy as np
import pytest
from scipy.integrate import quad

from phantomlab.errors import InputError
from phantomlab.transport.boundary import boundary_coefficient, fluence_flux_coefficients_Kienle1997
from phantomlab.transport.frequency_domain import (
    FD_MODELS,
    amplitude_and_phase,
    frequency_domain_reflectance,
)
from phantomlab.transport.time_domain import time_resolved

C = 0.299792458  # mm/ps (SI definition of the metre)


def closed_form(*, mua, musp, rho, f_mhz, n, model, boundary="haskell1994"):
    D = 1 / (3 * musp)
    v = C / n
    omega = 2 * math.pi * f_mhz * 1e-6
    k = cmath.sqrt((mua + 1j * omega / v) / D)
    z0 = 1 / musp
    zp = z0 + 4 * float(boundary_coefficient(n=n, method=boundary)) * D
    r1, r2 = math.hypot(rho, z0), math.hypot(rho, zp)
    phi = (cmath.exp(-k * r1) / r1 - cmath.exp(-k * r2) / r2) / (4 * math.pi * D)
    j = (z0 * (k + 1 / r1) * cmath.exp(-k * r1) / r1**2 + zp * (k + 1 / r2) * cmath.exp(-k * r2) / r2**2) / (4 * math.pi)
    entry = 1 - ((n - 1) / (n + 1)) ** 2
    if model == "contini1997":
        return entry * j
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=n)
    return entry * (c1 * phi + c2 * j)


@pytest.mark.parametrize("model", sorted(FD_MODELS))
@pytest.mark.parametrize("boundary", ["haskell1994", "groenhuis1983"])
def test_matches_the_closed_form(model, boundary):
    for mua, musp, rho, f in [(0.01, 1.0, 10.0, 100.0), (0.002, 0.6, 25.0, 500.0), (0.05, 2.0, 15.0, 0.0)]:
        got = frequency_domain_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, frequency_mhz=f, n=1.4,
                                           model=model, boundary=boundary)
        expected = closed_form(mua=mua, musp=musp, rho=rho, f_mhz=f, n=1.4, model=model, boundary=boundary)
        assert abs(got - expected) <= 1e-12 * abs(expected)


@pytest.mark.parametrize("model", sorted(FD_MODELS))
@pytest.mark.parametrize("f_mhz", [0.0, 140.0, 800.0])
def test_is_the_fourier_transform_of_the_time_domain_model(model, f_mhz):
    mua, musp, rho, n = 0.01, 1.0, 15.0, 1.4
    omega = 2 * math.pi * f_mhz * 1e-6

    def part(trig):
        return quad(lambda t: time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n, model=model)
                    * trig(omega * t), 0, 60000, limit=4000, epsabs=0, epsrel=1e-11)[0]

    transform = complex(part(math.cos), -part(math.sin))
    got = frequency_domain_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, frequency_mhz=f_mhz, n=n,
                                       model=model)
    assert abs(got - transform) <= 1e-8 * abs(transform)


def test_amplitude_and_phase():
    rho = np.linspace(5, 40, 8)
    amplitude, phase = amplitude_and_phase(mua_per_mm=0.005, musp_per_mm=1.0, rho_mm=rho, frequency_mhz=[[0.0], [100.0], [1000.0]], n=1.4)
    complex_value = frequency_domain_reflectance(mua_per_mm=0.005, musp_per_mm=1.0, rho_mm=rho,
                                                 frequency_mhz=[[0.0], [100.0], [1000.0]], n=1.4)
    assert amplitude == pytest.approx(np.abs(complex_value), rel=1e-14)
    # the unwrapped lag agrees with −arg R̃ modulo 360°
    wrapped = np.mod(phase + np.degrees(np.angle(complex_value)) + 180.0, 360.0) - 180.0
    assert np.max(np.abs(wrapped)) < 1e-9
    assert np.all(phase[0] == 0.0)  # steady state: no lag
    assert np.all(np.diff(phase[1]) > 0) and np.all(np.diff(phase[2]) > 0)  # lag grows with distance
    assert np.all(phase[2] > phase[1])  # and with frequency
    assert phase[2, -1] > 360.0  # not wrapped
    assert np.all(np.diff(np.log(rho**2 * amplitude[1])) < 0)


def test_shapes_and_nan():
    out = frequency_domain_reflectance(mua_per_mm=np.array([0.01, np.nan]), musp_per_mm=1.0,
                                       rho_mm=np.array([10.0, 20.0])[:, None], frequency_mhz=[100.0, 200.0, 300.0], n=1.4)
    assert out.shape == (2, 2, 3) and np.iscomplexobj(out)
    assert np.all(np.isfinite(out[0])) and np.all(np.isnan(out[1]))


@pytest.mark.parametrize("kwargs, match", [
    (dict(model="fantini1994"), "unknown frequency-domain model"),
    (dict(frequency_mhz=-10.0), "frequency_mhz must be finite and >= 0"),
    (dict(rho_mm=[1.0, 2.0, 3.0], frequency_mhz=[1.0, 2.0]), "must broadcast to one grid"),
    (dict(boundary="robin"), "unknown boundary method"),
])
def test_bad_input(kwargs, match):
    args = dict(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=10.0, frequency_mhz=100.0, n=1.4) | kwargs
    with pytest.raises(InputError, match=match):
        frequency_domain_reflectance(**args)
