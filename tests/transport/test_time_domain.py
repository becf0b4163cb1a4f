"""Time-resolved diffusion reflectance and transmittance (transport/time_domain.py).

Check values and their sources:
* Contini, Martelli & Zaccanti 1997, Appl Opt 36:4587, eqs. 36 (T) and 37 (R) with the image
  depths z₁,ₘ..z₄,ₘ of their eq. 35, typed in here term by term in the paper's own notation
  (an evaluation independent of the module's, which writes the images as z⁺ₘ, z⁻ₘ);
* Patterson, Chance & Wilson 1989, Appl Opt 28:2331: R(ρ, t) = (4πDc)^(−3/2) z0 t^(−5/2)
  exp(−μa c t) exp(−(ρ² + z0²)/(4Dct)), typed in;
* the light leaving is the flux D ∂Φ/∂z of the image-source fluence (a complex-step derivative
  of a fluence written out here) and, for kienle1997, C1 Φ + C2 J (Kienle & Patterson 1997);
* the time integral of the extrapolated-boundary flux is the steady-state flux of Farrell,
  Patterson & Wilson 1992 (Med Phys 19:879) with the same D and a unit source (quad);
* exact: in a homogeneous medium μa enters only as exp(−μa v t) (D = 1/(3μs′) models);
* the project's convention: per unit incident energy, i.e. the papers' values times the
  normal-incidence Fresnel transmission (Born & Wolf 1999, §1.5.2).
"""

import math
import warnings

import numpy as np
import pytest
from scipy.integrate import quad

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.boundary import boundary_coefficient, fluence_flux_coefficients_Kienle1997
from phantomlab.transport.time_domain import (
    TD_MODELS,
    time_resolved,
)
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

C = 0.299792458  # mm/ps, the SI definition of the metre
ENTRY_14 = 1 - (0.4 / 2.4) ** 2  # Fresnel transmission at n = 1.4 in air (Born & Wolf §1.5.2)


def contini_typed(*, mua, musp, rho, t, n, s, geometry, A, terms=60):
    """Contini et al. 1997 eqs. 35-37 in the paper's notation (per unit energy that entered)."""
    D = 1 / (3 * musp)
    v = C / n
    z0 = 1 / musp
    ze = 2 * A * D
    pref = math.exp(-mua * v * t - rho**2 / (4 * D * v * t)) / (2 * (4 * math.pi * D * v) ** 1.5 * t**2.5)
    total = 0.0
    for m in range(-terms, terms + 1):
        if geometry == "transmittance":
            z1 = s * (1 - 2 * m) - 4 * m * ze - z0
            z2 = s * (1 - 2 * m) - (4 * m - 2) * ze + z0
            total += z1 * math.exp(-z1**2 / (4 * D * v * t)) - z2 * math.exp(-z2**2 / (4 * D * v * t))
        else:
            z3 = -2 * m * s - 4 * m * ze - z0
            z4 = -2 * m * s - (4 * m - 2) * ze + z0
            total -= z3 * math.exp(-z3**2 / (4 * D * v * t)) - z4 * math.exp(-z4**2 / (4 * D * v * t))
    return pref * total


@pytest.mark.filterwarnings("ignore:diffusion R:phantomlab.errors.PhantomlabWarning")  # ρ = 0 in reflectance
@pytest.mark.parametrize("geometry", ["reflectance", "transmittance"])
@pytest.mark.parametrize("s, rho", [(5.0, 0.0), (20.0, 3.0), (40.0, 15.0)])
def test_slab_matches_contini_equations(geometry, s, rho):
    mua, musp, n = 0.01, 1.0, 1.4
    A = float(boundary_coefficient(n=n, method="haskell1994"))
    t = np.array([50.0, 200.0, 700.0, 2000.0, 6000.0])
    got = time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n, thickness_mm=s,
                        geometry=geometry, model="contini1997")
    expected = np.array([contini_typed(mua=mua, musp=musp, rho=rho, t=x, n=n, s=s, geometry=geometry, A=A)
                         for x in t]) * ENTRY_14
    big = expected > 1e-300
    assert got[big] == pytest.approx(expected[big], rel=1e-9)


def test_half_space_is_the_first_image_pair():
    mua, musp, n, rho = 0.02, 1.5, 1.33, 12.0
    A = float(boundary_coefficient(n=n, method="haskell1994"))
    t = np.geomspace(30.0, 8000.0, 12)
    got = time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n, model="contini1997")
    entry = 1 - ((n - 1) / (n + 1)) ** 2
    expected = [contini_typed(mua=mua, musp=musp, rho=rho, t=x, n=n, s=0.0, geometry="reflectance", A=A, terms=0)
                for x in t]
    assert got == pytest.approx(np.array(expected) * entry, rel=1e-10)
    thick = time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n, model="contini1997",
                          thickness_mm=2000.0)
    assert thick == pytest.approx(got, rel=1e-12)


def test_patterson_half_space_formula():
    # Patterson, Chance & Wilson 1989: zero boundary, D = 1/(3(μa + μs′)), z0 = 1/μs′.
    mua, musp, n, rho = 0.01, 1.0, 1.4, 10.0
    D = 1 / (3 * (mua + musp))
    c = C / n
    z0 = 1 / musp
    t = np.array([100.0, 400.0, 1500.0])
    expected = (4 * np.pi * D * c) ** -1.5 * z0 * t**-2.5 * np.exp(-mua * c * t) * np.exp(-(rho**2 + z0**2) / (4 * D * c * t))
    got = time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n, model="patterson1989")
    assert got == pytest.approx(ENTRY_14 * expected, rel=1e-12)


def _fluence_typed(z, *, mua, musp, rho, t, n, s, A, terms=40):
    """Fluence rate of the image sources at depth z (complex z allowed: complex-step derivative)."""
    D = 1 / (3 * musp)
    v = C / n
    z0 = 1 / musp
    ze = 2 * A * D
    out = 0.0
    for m in range(-terms, terms + 1) if s else [0]:
        period = 2 * m * (s + 2 * ze) if s else 0.0
        plus = period + z0
        minus = period - 2 * ze - z0
        out = out + np.exp(-((z - plus) ** 2) / (4 * D * v * t)) - np.exp(-((z - minus) ** 2) / (4 * D * v * t))
    return v * (4 * np.pi * D * v * t) ** -1.5 * np.exp(-mua * v * t - rho**2 / (4 * D * v * t)) * out


@pytest.mark.parametrize("s", [None, 10.0])
def test_kienle_is_fluence_plus_flux_of_the_image_fluence(s):
    mua, musp, n, rho = 0.005, 0.8, 1.4, 8.0
    A = float(boundary_coefficient(n=n, method="haskell1994"))
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=n)
    D = 1 / (3 * musp)
    h = 1e-20
    for t in (150.0, 900.0, 3000.0):
        phi = _fluence_typed(0.0, mua=mua, musp=musp, rho=rho, t=t, n=n, s=s or 0, A=A)
        # outward flux at the top face: +D ∂Φ/∂z (z points into the medium)
        flux = D * np.imag(_fluence_typed(1j * h, mua=mua, musp=musp, rho=rho, t=t, n=n, s=s or 0, A=A)) / h
        kienle = time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n, thickness_mm=s)
        contini = time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n, thickness_mm=s,
                                model="contini1997")
        assert contini == pytest.approx(ENTRY_14 * flux, rel=1e-9)
        assert kienle == pytest.approx(ENTRY_14 * (c1 * phi + c2 * flux), rel=1e-9)


def test_transmittance_is_the_outward_flux_at_the_bottom_face():
    mua, musp, n, rho, s = 0.01, 1.0, 1.4, 2.0, 12.0
    A = float(boundary_coefficient(n=n, method="haskell1994"))
    D = 1 / (3 * musp)
    h = 1e-20
    for t in (300.0, 1200.0):
        flux = -D * np.imag(_fluence_typed(s + 1j * h, mua=mua, musp=musp, rho=rho, t=t, n=n, s=s, A=A)) / h
        got = time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n, thickness_mm=s,
                            geometry="transmittance", model="contini1997")
        assert got == pytest.approx(ENTRY_14 * flux, rel=1e-9)


@pytest.mark.parametrize("boundary", ["haskell1994", "groenhuis1983"])
def test_time_integral_is_the_steady_state_flux(boundary):
    # Farrell et al. 1992's flux with D = 1/(3μs′), z0 = 1/μs′, a unit source (what the
    # time-domain source is): R = (1/4π)[z0 (μeff + 1/r1) e^(−μeff r1)/r1² + zp (...)].
    mua, musp, n, rho = 0.01, 1.0, 1.4, 15.0
    D = 1 / (3 * musp)
    z0 = 1 / musp
    zp = z0 + 4 * float(boundary_coefficient(n=n, method=boundary)) * D
    mueff = math.sqrt(mua / D)

    def term(z):
        r = math.hypot(rho, z)
        return z / (4 * math.pi) * (mueff + 1 / r) * math.exp(-mueff * r) / r**2

    steady = ENTRY_14 * (term(z0) + term(zp))
    integral = quad(lambda t: time_resolved(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, time_ps=t, n=n,
                                            model="contini1997", boundary=boundary),
                    0, np.inf, limit=500, epsrel=1e-11)[0]
    assert integral == pytest.approx(steady, rel=1e-7)


@pytest.mark.parametrize("model", ["kienle1997", "contini1997"])
def test_absorption_enters_only_as_beer_lambert(model):
    t = np.linspace(10.0, 5000.0, 40)
    v = SPEED_OF_LIGHT_MM_PER_PS / 1.4
    low = time_resolved(mua_per_mm=0.0, musp_per_mm=1.0, rho_mm=10.0, time_ps=t, n=1.4, model=model, thickness_mm=25.0)
    high = time_resolved(mua_per_mm=0.03, musp_per_mm=1.0, rho_mm=10.0, time_ps=t, n=1.4, model=model, thickness_mm=25.0)
    assert high == pytest.approx(low * np.exp(-0.03 * v * t), rel=1e-12)


def test_shapes_broadcast_wavelengths_and_grid():
    mua = np.array([0.01, 0.02, 0.03])
    out = time_resolved(mua_per_mm=mua, musp_per_mm=1.0, rho_mm=np.array([10.0, 20.0])[:, None],
                        time_ps=np.linspace(0, 3000, 7), n=1.4)
    assert out.shape == (3, 2, 7)
    assert np.all(out[..., 0] == 0.0)  # t = 0: nothing has left yet
    scalar = time_resolved(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=10.0, time_ps=500.0, n=1.4)
    assert np.ndim(scalar) == 0 and scalar > 0
    assert np.all(time_resolved(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=10.0, time_ps=[-5.0, 0.0], n=1.4) == 0)


def test_nan_input_gives_nan_in_that_entry():
    out = time_resolved(mua_per_mm=np.array([0.01, np.nan]), musp_per_mm=1.0, rho_mm=10.0, time_ps=[500.0, 900.0], n=1.4)
    assert np.all(np.isfinite(out[0])) and np.all(np.isnan(out[1]))


@pytest.mark.parametrize("model", sorted(TD_MODELS))
def test_every_model_is_positive_and_decays(model):
    t = np.geomspace(50, 10000, 60)
    out = time_resolved(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=15.0, time_ps=t, n=1.4, model=model)
    assert np.all(out > 0)
    peak = int(np.argmax(out))
    assert 0 < peak < t.size - 1 and np.all(np.diff(out[peak:]) < 0)


@pytest.mark.parametrize("kwargs, match", [
    (dict(model="diffusion"), "unknown time-resolved model"),
    (dict(geometry="sideways"), "unknown geometry"),
    (dict(geometry="transmittance"), "needs a slab"),
    (dict(thickness_mm=-2.0), "thickness_mm must be finite and > 0"),
    (dict(mua_per_mm=-0.1), "mua_per_mm must be finite and >= 0"),
    (dict(musp_per_mm=0.0), "musp_per_mm must be finite and > 0"),
    (dict(time_ps=[np.inf]), "time_ps must be finite"),
    (dict(time_ps="soon"), "time_ps: expected numbers in ps"),
    (dict(rho_mm=[1.0, 2.0, 3.0], time_ps=[1.0, 2.0]), "must broadcast to one grid"),
    (dict(model="patterson1989", boundary="haskell1994"), "boundary must be None"),
])
def test_bad_input_is_refused_in_one_line(kwargs, match):
    args = dict(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=10.0, time_ps=500.0, n=1.4) | kwargs
    with pytest.raises(InputError, match=match):
        time_resolved(**args)


def test_warnings_name_value_and_range():
    with pytest.warns(PhantomlabWarning, match="musp/mua = 5"):
        time_resolved(mua_per_mm=0.2, musp_per_mm=1.0, rho_mm=10.0, time_ps=500.0, n=1.4)
    with pytest.warns(PhantomlabWarning, match="rho_mm = 0.5 < 1/musp = 1 mm"):
        time_resolved(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=0.5, time_ps=500.0, n=1.4)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        time_resolved(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=0.0, time_ps=500.0, n=1.4, thickness_mm=10.0,
                      geometry="transmittance")  # on axis through a slab: no near-source warning
