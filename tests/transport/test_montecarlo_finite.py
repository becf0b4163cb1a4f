"""Monte Carlo of a finite sample under a finite beam (``montecarlo/finite_sample.py``).

Checks against things outside the new code: the pencil-beam engine (``simulate``) and its
radial tally, an exact geometric convolution (a uniform disc beam is the pencil beam's
R(ρ) averaged over the beam; the probability that a point at distance ρ from a uniformly
drawn beam point lies inside the port is the overlap area of two discs over the beam's
area — elementary geometry), and exact bookkeeping.  Tolerances in standard errors, seeds
fixed.
"""

import math

import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.transport.montecarlo import simulate
from phantomlab.transport.montecarlo.finite_sample import simulate_finite_sample

SLAB = dict(mua_per_mm=0.02, mus_per_mm=5.0, g=0.8, n=1.4, thickness_mm=1.5, n_slide=1.52)


def _disc_overlap(d, a, b):
    """Area shared by discs of radii a and b whose centres are d apart (elementary geometry)."""
    d = np.asarray(d, float)
    out = np.zeros_like(d)
    inside = d <= abs(a - b)
    out[inside] = math.pi * min(a, b) ** 2
    part = (d > abs(a - b)) & (d < a + b)
    dd = d[part]
    alpha = np.arccos(np.clip((dd**2 + a**2 - b**2) / (2 * dd * a), -1, 1))
    beta = np.arccos(np.clip((dd**2 + b**2 - a**2) / (2 * dd * b), -1, 1))
    out[part] = a**2 * (alpha - np.sin(2 * alpha) / 2) + b**2 * (beta - np.sin(2 * beta) / 2)
    return out


def test_unbounded_sample_and_wide_port_capture_everything():
    run = simulate_finite_sample(**SLAB, beam_diameter_mm=2.0, capture_radii_mm=[1e5], photons=20_000, seed=1)
    assert run.captured_reflectance[0] == pytest.approx(run.diffuse_reflectance, rel=1e-12)
    assert run.captured_transmittance[0] == pytest.approx(run.total_transmittance, rel=1e-12)
    assert run.edge_loss == 0.0
    total = (run.specular_reflectance + run.diffuse_reflectance + run.total_transmittance + run.absorbed_fraction
             + run.edge_loss)
    assert total == pytest.approx(1 + run.roulette_balance, abs=1e-12)


def test_totals_agree_with_the_pencil_beam_engine():
    finite = simulate_finite_sample(**SLAB, beam_diameter_mm=3.0, capture_radii_mm=[1e5], photons=60_000, seed=2)
    pencil = simulate(**SLAB, photons=60_000, seed=3)
    for a, sa, b, sb in ((finite.diffuse_reflectance, finite.diffuse_reflectance_sd, pencil.diffuse_reflectance,
                          pencil.diffuse_reflectance_sd),
                         (finite.total_transmittance, finite.total_transmittance_sd, pencil.total_transmittance,
                          pencil.total_transmittance_sd)):
        assert abs(a - b) < 4 * math.hypot(sa, sb)


def test_disc_beam_is_the_pencil_beam_averaged_over_the_beam():
    # captured(r) for a beam of radius b = ∫ R(ρ) 2πρ K(ρ) dρ with K(ρ) = overlap(ρ; b, r)/(π b²),
    # R(ρ) the pencil beam's radial reflectance (simulate's tally, fine bins).
    beam_r, port_r = 2.0, 3.0
    rho = np.arange(0.025, 12.0, 0.05)
    pencil = simulate(**SLAB, photons=150_000, seed=11, rho_mm=rho)
    edges = pencil.rho_edges_mm
    centres = 0.5 * (edges[1:] + edges[:-1])
    power = pencil.reflectance_per_mm2 * math.pi * (edges[1:] ** 2 - edges[:-1] ** 2)
    kernel = _disc_overlap(centres, beam_r, port_r) / (math.pi * beam_r**2)
    expected = np.sum(power * kernel)
    expected_sd = math.sqrt(np.sum((pencil.reflectance_per_mm2_sd * math.pi * (edges[1:] ** 2 - edges[:-1] ** 2)
                                    * kernel) ** 2))
    finite = simulate_finite_sample(**SLAB, beam_diameter_mm=2 * beam_r, capture_radii_mm=[port_r],
                                    photons=150_000, seed=12)
    assert abs(finite.captured_reflectance[0] - expected) < 4 * math.hypot(finite.captured_reflectance_sd[0],
                                                                           3 * expected_sd)


def test_edge_takes_light_and_the_books_balance():
    run = simulate_finite_sample(**SLAB, beam_diameter_mm=2.0, capture_radii_mm=[3.0], sample_diameter_mm=6.0,
                                 photons=20_000, seed=4)
    assert run.edge_loss > 10 * run.edge_loss_sd > 0
    total = (run.specular_reflectance + run.diffuse_reflectance + run.total_transmittance + run.absorbed_fraction
             + run.edge_loss)
    assert total == pytest.approx(1 + run.roulette_balance, abs=1e-12)
    assert run.captured_reflectance[0] <= run.diffuse_reflectance


@pytest.mark.parametrize("kwargs, words", [
    (dict(beam_diameter_mm=8.0, capture_radii_mm=[3.0]), "narrower than the beam"),
    (dict(beam_diameter_mm=2.0, capture_radii_mm=[5.0, 3.0]), "increasing radii"),
    (dict(beam_diameter_mm=2.0, capture_radii_mm=[5.0], sample_diameter_mm=6.0), "at least the largest port"),
    (dict(beam_diameter_mm=-1.0, capture_radii_mm=[5.0]), "beam_diameter_mm"),
])
def test_bad_geometry_refused(kwargs, words):
    with pytest.raises(InputError, match=words):
        simulate_finite_sample(**SLAB, photons=100, **kwargs)
