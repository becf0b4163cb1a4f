"""The measured diffusion-vs-Monte-Carlo error maps (phantomlab.transport.diffusion_error).

Checks: the stored maps follow from the stored tallies and the diffusion code as it is now
(a changed diffusion model fails here until ``make_diffusion_mc_error.py maps`` is rerun);
they agree with an independent Monte Carlo run (tests/transport/fixtures/
mc_srdr_semi_infinite.json: other seeds, 1 mm annuli); the spatial-frequency transform of
the tallies returns the Monte Carlo total diffuse reflectance at fx = 0 and the exact Hankel
transform of a known R(ρ) at fx > 0; the query broadcasts and says when it leaves the map.
"""

import json
import warnings
from pathlib import Path

import numpy as np
import pytest
from scipy.integrate import quad
from scipy.special import j0

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.diffusion import srdr_reflectance
from phantomlab.transport.diffusion_error import (
    FX_OVER_MUSP_GRID,
    _annulus_nodes,
    _hankel_weights,
    hankel_of_annuli,
    load_maps,
    sfdi_diffusion_error,
    srdr_diffusion_error,
)

FIXTURE = Path(__file__).parent / "fixtures" / "mc_srdr_semi_infinite.json"


@pytest.fixture(scope="module")
def maps():
    return load_maps()


def _run(maps, g, n, ratio):
    k = np.where((maps["g"] == g) & (maps["n"] == n) & (maps["ratio"] == ratio))[0]
    assert k.size == 1, (g, n, ratio)
    return int(k[0])


def test_the_file_says_where_it_comes_from(maps):
    assert str(maps["provenance"]).startswith("source: phantomlab Monte Carlo")
    assert set(maps["n_nodes"]) == {1.0, 1.15, 1.33, 1.4, 1.5}
    assert maps["ratio_nodes"][0] == 2.0 and maps["ratio_nodes"][-1] == 3000.0


@pytest.mark.parametrize("n, ratio", [(1.0, 10.0), (1.4, 100.0), (1.33, 1000.0), (1.5, 3.0)])
def test_stored_map_follows_from_the_tallies_and_todays_diffusion_code(maps, n, ratio):
    # the unsmoothed eps of the run, from the stored tallies and srdr_reflectance as it is:
    # within 4 noise SDs (+0.2 %) of the stored smooth map wherever the tallies are good
    k = _run(maps, 0.8, n, ratio)
    R, sd = maps["reflectance"][k], maps["reflectance_sd"][k]
    nodes, weights = _annulus_nodes(maps["rho_edges_musp"])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        D = srdr_reflectance(mua_per_mm=1.0 / ratio, musp_per_mm=1.0, rho_mm=nodes.ravel(), n=n).reshape(nodes.shape)
    with np.errstate(divide="ignore", invalid="ignore"):
        raw = np.sum(D * weights, axis=1) / R - 1.0
        raw_sd = (1.0 + raw) * sd / R
    i = int(np.where(maps["ratio_nodes"] == ratio)[0][0])
    j = int(np.where(maps["n_nodes"] == n)[0][0])
    stored = maps["srdr_kienle1997_eps"][i, j]
    good = np.isfinite(raw_sd) & (sd < 0.02 * R)
    assert good.sum() > 30
    allowed = 4.0 * np.hypot(raw_sd, maps["srdr_kienle1997_noise_sd"][i, j]) + 0.002
    assert np.all(np.abs(stored - raw)[good] < allowed[good]), np.max((np.abs(stored - raw) - allowed)[good])


def test_map_agrees_with_an_independent_monte_carlo_run(maps):
    # tests/transport/fixtures/mc_srdr_semi_infinite.json: mu_a 0.01, mu_s 5 /mm, g 0.8
    # (mus'/mua = 100), 1 mm annuli, other seeds.  eps of kienle1997 there against the map
    # at the annulus centres, from 2 transport lengths on: within 3 combined SDs + 0.3 %
    # (the map is smooth in rho, the fixture averages over 1 mm).
    fixture = json.loads(FIXTURE.read_text())
    checked = 0
    for case in fixture["cases"].values():
        inputs = case["inputs"]
        edges = np.asarray(case["rho_edges_mm"], float)
        centres = 0.5 * (edges[1:] + edges[:-1])
        nodes, weights = _annulus_nodes(edges)
        D = srdr_reflectance(mua_per_mm=inputs["mua_per_mm"], musp_per_mm=1.0, rho_mm=nodes.ravel(),
                             n=inputs["n"], n_outside=inputs["n_outside"]).reshape(nodes.shape)
        R = np.asarray(case["reflectance_per_mm2"], float)
        sd = np.asarray(case["reflectance_per_mm2_sd"], float)
        eps = np.sum(D * weights, axis=1) / R - 1.0
        eps_sd = (1.0 + eps) * sd / R
        mapped = srdr_diffusion_error(model="kienle1997", mua_per_mm=inputs["mua_per_mm"], musp_per_mm=1.0,
                                      rho_mm=centres, n=inputs["n"], n_outside=inputs["n_outside"])
        far = centres >= 2.0
        allowed = 3.0 * np.hypot(eps_sd, mapped.noise_sd) + 0.003
        assert np.all(np.abs(mapped.eps - eps)[far] < allowed[far]), (inputs["n"], np.round(100 * (mapped.eps - eps), 2))
        checked += int(far.sum())
    assert checked >= 30


def test_hankel_of_the_annuli_returns_the_total_at_zero_frequency(maps):
    # R(fx = 0) of the map's Monte Carlo is the run's own total diffuse reflectance
    # (every photon leaving except the specular part): within 0.1 %
    for ratio in (3.0, 100.0, 3000.0):
        k = _run(maps, 0.8, 1.4, ratio)
        i = int(np.where(maps["ratio_nodes"] == ratio)[0][0])
        j = int(np.where(maps["n_nodes"] == 1.4)[0][0])
        assert maps["sfdi_mc_reflectance"][i, j, 0] == pytest.approx(maps["diffuse_reflectance"][k], rel=1e-3)


def test_hankel_of_annulus_averages_matches_the_exact_transform():
    # R(rho) = exp(-rho/L) / (2 pi L^2): H(fx) = (1 + (k L)^2)^(-3/2), k = 2 pi fx: minus the
    # a-derivative of the Laplace transform of J0, ∫ exp(-a r) J0(k r) dr = 1/sqrt(a^2 + k^2)
    # (Abramowitz & Stegun 1964, ch. 29 table of Laplace transforms; # from memory, checked by
    # quadrature below).  From its averages over the map's annuli: within 0.02 % for fx up to
    # 1 in units of mus', for decay lengths L = 1 and 0.3; a diffusion R(rho) peaked at the
    # source (kienle1997, mus'/mua = 100, n = 1.4) within 0.2 % of dense quadrature.  The sum
    # of the annuli taken as constant is off by percents (the check that the reconstruction
    # matters).
    maps = load_maps()
    edges = maps["rho_edges_musp"]
    nodes, weights = _annulus_nodes(edges, order=16)
    k = 2 * np.pi * FX_OVER_MUSP_GRID
    for length in (1.0, 0.3):
        averages = np.sum(np.exp(-nodes / length) / (2 * np.pi * length**2) * weights, axis=1)
        exact = (1 + (k * length) ** 2) ** -1.5
        np.testing.assert_allclose(hankel_of_annuli(average=averages, edges=edges, fx=FX_OVER_MUSP_GRID),
                                   exact, rtol=2e-4)
    value = quad(lambda r: np.exp(-r) * j0(k[5] * r) * r, 0, 60, limit=400)[0]
    assert value == pytest.approx((1 + k[5] ** 2) ** -1.5, rel=1e-8)

    def peaked(rho):
        return srdr_reflectance(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=rho, n=1.4)

    dense = np.unique(np.concatenate([np.linspace(0, 2, 200001), np.geomspace(2, edges[-1], 200000)]))
    exact = np.array([np.trapezoid(peaked(dense) * j0(kk * dense) * 2 * np.pi * dense, dense) for kk in k])
    averages = np.sum(peaked(nodes.ravel()).reshape(nodes.shape) * weights, axis=1)
    np.testing.assert_allclose(hankel_of_annuli(average=averages, edges=edges, fx=FX_OVER_MUSP_GRID), exact,
                               rtol=2e-3)
    plain = _hankel_weights(edges, FX_OVER_MUSP_GRID) @ averages
    assert np.max(np.abs(plain / exact - 1)) > 0.1


def test_query_shapes_and_the_edges_of_the_map():
    err = srdr_diffusion_error(model="kienle1997", mua_per_mm=np.array([0.01, 0.02, 0.0001]),
                               musp_per_mm=np.array([1.0, 1.0, 1.0]), rho_mm=np.linspace(1, 10, 7), n=1.4)
    assert err.eps.shape == (3, 7) and err.g_sd.shape == (3, 7) and err.outside.shape == (3,)
    assert list(err.outside) == [False, False, True]  # mus'/mua = 10 000 is beyond 3000
    far = srdr_diffusion_error(model="farrell1992", mua_per_mm=0.01, musp_per_mm=2.0, rho_mm=[10.0, 60.0], n=1.33)
    assert bool(far.outside)  # 60 mm at musp 2 /mm: 120 transport lengths
    glass = srdr_diffusion_error(model="kienle1997", mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=[3.0], n=1.33,
                                 n_outside=1.52)
    assert bool(glass.outside)  # n/n_outside < 1
    fx = sfdi_diffusion_error(mua_per_mm=[0.01, 0.001], musp_per_mm=[1.0, 0.5], fx_per_mm=[0.0, 0.1, 0.2], n=1.4)
    assert fx.eps.shape == (2, 3) and not fx.outside.any()
    with pytest.raises(InputError, match="unknown srdr diffusion error map 'cuccia2009'"):
        srdr_diffusion_error(model="cuccia2009", mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=[1.0], n=1.4)
