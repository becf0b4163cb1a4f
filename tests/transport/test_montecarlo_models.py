"""Monte Carlo against the project's other forward models (written independently).

* adding-doubling (phantomlab.transport.adding_doubling): mismatched slabs with and without
  glass slides; tolerance 3 Monte Carlo standard errors (SE) — the adding-doubling values
  are far more precise than that (they are checked against van de Hulst's table to 0.1 %
  in their own tests);
* diffusion (phantomlab.transport.diffusion): R(rho) beyond two transport mean free paths,
  against a Monte Carlo fixture of 10^6 photons made by fixtures/make_mc_srdr_fixture.py
  (which says how to regenerate it); a small live run ties the fixture to the engine.
  Both sides are per unit *incident* power (DEVELOPERS.md, "Reflectance conventions"), so
  they are compared as they come, with no factor 1 - R_specular in between.  The gaps
  measured here (mua = 0.01 /mm, musp = 1 /mm, g = 0.8, 1 mm annuli; in per cent, diffusion
  over Monte Carlo minus one; the fixture's SE is 0.2-1.2 %):

  ====================  =========================================================
  n = 1.4 in air        kienle1997: +1.3 ... +4.5 at 1-15 mm;
                        farrell1992 (groenhuis1983): -8.5 ... -20.5 at 3-8 mm
                        (haskell1994 A: -7.7 ... -16.4)
  n = 1.33 in air       kienle1997: +1.0 ... +5.0 at 1-15 mm;
                        farrell1992 (groenhuis1983): -13.4 ... -16.2 at 3-5 mm
  matched, n = 1.0      farrell1992: +6.1 ... +10.9 at 1-3 mm, within 4.4 beyond;
                        kienle1997: +7.6 ... +13.4 at 2-4 mm, within 5.4 beyond
  ====================  =========================================================

  Before the diffusion models took the entry loss in (they counted from the light that
  entered), kienle1997 at n = 1.4 read +4.2 ... +7.4 at 2-15 mm and farrell1992 -5.9 ... -18.2
  at 3-8 mm.
"""

from __future__ import annotations

import json
import warnings
from pathlib import Path

import numpy as np
import pytest

from phantomlab.errors import PhantomlabWarning
from phantomlab.transport.adding_doubling import slab_reflectance_transmittance
from phantomlab.transport.diffusion import srdr_reflectance
from phantomlab.transport.montecarlo import simulate

FIXTURE = Path(__file__).parent / "fixtures" / "mc_srdr_semi_infinite.json"

SLABS = [
    # mismatched, forward scattering, bare faces
    dict(mua_per_mm=0.1, mus_per_mm=10.0, g=0.9, n=1.4, thickness_mm=1.0),
    # the same slab between two glass slides (n = 1.52, clear)
    dict(mua_per_mm=0.1, mus_per_mm=10.0, g=0.9, n=1.4, thickness_mm=1.0, n_slide=1.52),
    # a thinner, more absorbing slab with a slide on the illuminated face only
    dict(mua_per_mm=0.5, mus_per_mm=5.0, g=0.5, n=1.5, thickness_mm=0.5, n_slide=(1.52, None)),
]


@pytest.mark.parametrize("case", SLABS, ids=["bare", "two-slides", "top-slide"])
def test_mismatched_slabs_agree_with_adding_doubling(case):
    reference = slab_reflectance_transmittance(**case)
    result = simulate(**case, photons=40_000, seed=17)
    assert result.specular_reflectance == pytest.approx(float(reference.specular_reflectance), abs=1e-12)
    for key in ("total_reflectance", "total_transmittance", "unscattered_transmittance"):
        value, se = getattr(result, key), getattr(result, key + "_sd")
        expected = float(getattr(reference, key))
        assert se > 0, key
        assert abs(value - expected) <= 3 * se, (key, value, expected, se)
    # a check that bites: R and T known to better than 1 % here
    assert result.total_reflectance_sd < 0.01 * result.total_reflectance


# ------------------------------------------------------------------------------ diffusion
def _annulus_average(model, boundary, edges, mua, musp, n):
    """Diffusion R(rho) averaged over each annulus (as the Monte Carlo tallies it)."""
    values = []
    for low, high in zip(edges[:-1], edges[1:]):
        rho = np.linspace(low, high, 201)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)  # the near-source warning
            r = srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=n,
                                 model=model, boundary=boundary)
        values.append(np.trapezoid(r * 2 * np.pi * rho, rho) / (np.pi * (high**2 - low**2)))
    return np.array(values)


@pytest.fixture(scope="module")
def fixture_cases():
    return json.loads(FIXTURE.read_text())


def test_fixture_still_matches_the_engine(fixture_cases):
    case = fixture_cases["cases"]["n1.4_in_air"]
    rho = np.array(fixture_cases["rho_mm"])
    live = simulate(**case["inputs"], rho_mm=rho, photons=20_000, seed=5)
    stored = np.array(case["reflectance_per_mm2"])
    stored_sd = np.array(case["reflectance_per_mm2_sd"])
    near = slice(0, 8)  # 1-8 mm, where 2e4 photons give a few per cent
    combined = np.hypot(live.reflectance_per_mm2_sd, stored_sd)[near]
    assert np.all(np.abs(live.reflectance_per_mm2[near] - stored[near]) <= 3 * combined)
    assert live.diffuse_reflectance == pytest.approx(case["diffuse_reflectance"],
                                                     abs=3 * live.diffuse_reflectance_sd)


def test_diffusion_fluence_plus_flux_beyond_two_transport_lengths(fixture_cases):
    # Case (the kind Kienle & Patterson 1997, JOSA A 14:246, discuss): semi-infinite,
    # mua = 0.01 /mm, musp = 1 /mm (mus = 5 /mm, g = 0.8 in the Monte Carlo), n = 1.4 in
    # air; fluence-plus-flux model with the Haskell 1994 boundary coefficient; rho from 2 to
    # 15 mm (2-15 transport mean free paths).  Both per unit incident power.  Expected:
    # within a few per cent beyond about two transport lengths at high albedo (# from memory);
    # measured +1.3 ... +4.4 %, held to 0 ... +5 % (diffusion sits above Monte Carlo here by
    # 7-9 SE: a real, small model error, not noise).
    case = fixture_cases["cases"]["n1.4_in_air"]
    edges = np.array(case["rho_edges_mm"])
    rho = np.array(fixture_cases["rho_mm"])
    mc = np.array(case["reflectance_per_mm2"])
    diffusion = _annulus_average("kienle1997", "haskell1994", edges, 0.01, 1.0, 1.4)
    beyond = rho >= 2.0
    deviation = diffusion[beyond] / mc[beyond] - 1.0
    assert np.all((deviation > 0.0) & (deviation < 0.05)), np.round(deviation, 3)


def test_diffusion_models_carry_the_entry_loss_like_the_monte_carlo(fixture_cases):
    # The same convention on both sides: dividing the diffusion model by the Fresnel
    # transmission 1 - R_sp (what it used to report) moves it 2.9 % further from the Monte
    # Carlo at every distance from 2 to 15 mm.  The model's closed-form total diffuse
    # reflectance (per incident power) is 1.5 % below the Monte Carlo's (measured; the
    # near-source part, where diffusion is poor, is inside the total): held to 3 %.
    from phantomlab.transport.diffusion import total_diffuse_reflectance

    case = fixture_cases["cases"]["n1.4_in_air"]
    edges = np.array(case["rho_edges_mm"])
    rho = np.array(fixture_cases["rho_mm"])
    mc = np.array(case["reflectance_per_mm2"])
    entering = 1.0 - case["specular_reflectance"]
    assert entering == pytest.approx(1 - (0.4 / 2.4) ** 2, rel=1e-12)  # Born & Wolf §1.5.2
    diffusion = _annulus_average("kienle1997", "haskell1994", edges, 0.01, 1.0, 1.4)
    beyond = rho >= 2.0
    now = np.abs(diffusion[beyond] / mc[beyond] - 1.0)
    before = np.abs(diffusion[beyond] / entering / mc[beyond] - 1.0)
    assert np.all(before > now)
    assert np.mean(now) < 0.035 < np.mean(before)
    total = total_diffuse_reflectance(mua_per_mm=0.01, musp_per_mm=1.0, n=1.4, model="kienle1997")
    assert total == pytest.approx(case["diffuse_reflectance"], rel=0.03)


@pytest.mark.parametrize("name, n, band", [("n1.4_in_air", 1.4, (-0.25, -0.05)),
                                           ("n1.33_in_air", 1.33, (-0.20, -0.03))])
def test_flux_only_dipole_is_low_at_a_mismatched_boundary(fixture_cases, name, n, band):
    # The measured gap of farrell1992 (flux only, Groenhuis A as published) in air: at
    # n = 1.4, 8.5-20.5 % below Monte Carlo at 3-8 transport lengths; at n = 1.33, 5.3-16.2 %.
    # Its equation is checked against a numerical derivative of the dipole fluence in
    # test_diffusion_srdr.py, so this is the model, not a slip: the light leaving a
    # mismatched surface is not the net flux alone (Kienle & Patterson 1997, JOSA A 14:246;
    # the size of the gap is ours).  Held to a band so that a change of model or of
    # convention shows here; the fluence-plus-flux model is closer at every one of them.
    case = fixture_cases["cases"][name]
    assert case["inputs"]["n"] == n
    edges = np.array(case["rho_edges_mm"])
    rho = np.array(fixture_cases["rho_mm"])
    mc = np.array(case["reflectance_per_mm2"])
    diffusion = _annulus_average("farrell1992", "groenhuis1983", edges, 0.01, 1.0, n)
    middle = (rho >= 3.0) & (rho <= 8.0)
    deviation = diffusion[middle] / mc[middle] - 1.0
    assert np.all((deviation > band[0]) & (deviation < band[1])), np.round(deviation, 3)
    fluence_flux = _annulus_average("kienle1997", "haskell1994", edges, 0.01, 1.0, n)
    assert np.all(np.abs(fluence_flux[middle] / mc[middle] - 1.0) < np.abs(deviation))


def test_diffusion_fluence_plus_flux_water_phantom_in_air(fixture_cases):
    # n = 1.33 in air, the same medium: kienle1997 measured +1.0 ... +4.5 % at 2-15 mm
    # (5 SE and more of the fixture: a small real model error), held to 0 ... +6 %.
    case = fixture_cases["cases"]["n1.33_in_air"]
    edges = np.array(case["rho_edges_mm"])
    rho = np.array(fixture_cases["rho_mm"])
    mc = np.array(case["reflectance_per_mm2"])
    diffusion = _annulus_average("kienle1997", "haskell1994", edges, 0.01, 1.0, 1.33)
    beyond = rho >= 2.0
    deviation = diffusion[beyond] / mc[beyond] - 1.0
    assert np.all((deviation > 0.0) & (deviation < 0.06)), np.round(deviation, 3)


def test_diffusion_dipole_matched_boundary_far_from_the_source(fixture_cases):
    # Case: the same medium with a matched boundary (n = 1), Farrell et al. 1992 dipole.
    # Beyond 4 transport mean free paths it is within 5 % (measured: within 4.4 %); at 1-3 of
    # them it is 6-11 % high (measured here; diffusion is known to be poor within a few
    # transport lengths of the source, CHECKS.md), so this check starts at 4 mm.
    case = fixture_cases["cases"]["matched"]
    edges = np.array(case["rho_edges_mm"])
    rho = np.array(fixture_cases["rho_mm"])
    mc = np.array(case["reflectance_per_mm2"])
    assert case["specular_reflectance"] == 0.0
    diffusion = _annulus_average("farrell1992", "haskell1994", edges, 0.01, 1.0, 1.0)
    beyond = rho >= 4.0
    deviation = diffusion[beyond] / mc[beyond] - 1.0
    assert np.all(np.abs(deviation) < 0.05), np.round(deviation, 3)


def test_diffusion_fluence_plus_flux_matched_boundary(fixture_cases):
    # The fluence-plus-flux model at a matched boundary (C1 = 1/4, C2 = 1/2, A = 1): measured
    # +7.6 ... +13.4 % at 2-4 transport lengths, within 5.4 % from 5 mm on; held to 6 %
    # from 5 mm.  At n = 1 it is no better than the flux alone near the source (the P1
    # radiance at the surface is the weak point there).
    case = fixture_cases["cases"]["matched"]
    edges = np.array(case["rho_edges_mm"])
    rho = np.array(fixture_cases["rho_mm"])
    mc = np.array(case["reflectance_per_mm2"])
    diffusion = _annulus_average("kienle1997", "haskell1994", edges, 0.01, 1.0, 1.0)
    beyond = rho >= 5.0
    deviation = diffusion[beyond] / mc[beyond] - 1.0
    assert np.all(np.abs(deviation) < 0.06), np.round(deviation, 3)
