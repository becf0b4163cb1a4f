"""Monte Carlo engine against exact solutions, published tables and its own statistics.

Every statistical check fixes its seed and states its tolerance in standard errors (SE);
with a fixed seed each check is deterministic, and each can fail if the physics breaks.
"""

from __future__ import annotations

import math

import numba
import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.transport.hfunction import semi_infinite_reflectance_isotropic
from phantomlab.transport.montecarlo import rho_bin_edges_mm, simulate, specular_reflectance


def within_se(value, reference, se, k=3.0):
    """|value − reference| <= k standard errors (and the SE is a real, positive number)."""
    assert np.all(np.isfinite(se)) and np.all(np.asarray(se) > 0)
    return np.all(np.abs(np.asarray(value) - reference) <= k * np.asarray(se))


# ---------------------------------------------------------------- published slab (CHECKS.md)
# van de Hulst 1980, Multiple Light Scattering vol. 2 tables, as quoted in the Monte Carlo
# validation literature of the 1990s (CHECKS.md): mua = 1 /mm, mus = 9 /mm, g = 0.75,
# d = 0.2 mm, n = 1, normal collimated beam.  Five printed digits: far below 3 SE here.
VAN_DE_HULST_DIFFUSE_REFLECTANCE = 0.09739
VAN_DE_HULST_TOTAL_TRANSMITTANCE = 0.66096
UNSCATTERED_TRANSMITTANCE = math.exp(-2.0)  # Beer-Lambert, exp(-(mua + mus) d), exact


@pytest.mark.parametrize("estimator", ["weighted", "analog"])
def test_van_de_hulst_slab_within_three_se(estimator):
    result = simulate(mua_per_mm=1.0, mus_per_mm=9.0, g=0.75, n=1.0, thickness_mm=0.2,
                      photons=200_000, seed=11, estimator=estimator)
    assert result.specular_reflectance == 0.0
    assert within_se(result.diffuse_reflectance, VAN_DE_HULST_DIFFUSE_REFLECTANCE,
                     result.diffuse_reflectance_sd)
    assert within_se(result.total_transmittance, VAN_DE_HULST_TOTAL_TRANSMITTANCE,
                     result.total_transmittance_sd)
    assert within_se(result.unscattered_transmittance, UNSCATTERED_TRANSMITTANCE,
                     result.unscattered_transmittance_sd)
    # matched boundaries: nothing comes back without scattering
    assert result.unscattered_reflectance == 0.0
    # precision of this run: the SE is small enough for the check to bite (< 1 % of R)
    assert result.diffuse_reflectance_sd < 0.01 * VAN_DE_HULST_DIFFUSE_REFLECTANCE


# ------------------------------------------------ half-space, isotropic, matched (Chandrasekhar)
@pytest.mark.parametrize("albedo", [0.5, 0.9, 0.99])
def test_half_space_isotropic_matches_chandrasekhar_h_function(albedo):
    # exact: R = 1 - H(1) sqrt(1 - a), Chandrasekhar 1950 ch. V (H solved in
    # phantomlab.transport.hfunction, which is tested there against its moment identities)
    exact = float(semi_infinite_reflectance_isotropic(albedo=albedo, mu0=1.0))
    result = simulate(mua_per_mm=1.0 - albedo, mus_per_mm=albedo, g=0.0, n=1.0,
                      photons=20_000, seed=5)
    assert within_se(result.diffuse_reflectance, exact, result.diffuse_reflectance_sd)
    assert result.total_transmittance == 0.0
    assert result.diffuse_reflectance_sd < 0.02 * exact


# --------------------------------------------------------------------- rod model vs Kubelka
def kubelka_rod(*, mua, sigma, thickness):
    """Exact rod/two-flux slab solution, Kubelka 1948 JOSA 38:448 (CHECKS.md)."""
    a = 1.0 + mua / sigma
    b = math.sqrt(a * a - 1.0)
    kd = b * sigma * thickness
    denominator = a * math.sinh(kd) + b * math.cosh(kd)
    return math.sinh(kd) / denominator, b / denominator


@pytest.mark.parametrize("estimator", ["weighted", "analog"])
@pytest.mark.parametrize("mua, mus, p_b, thickness", [(0.1, 5.0, 0.3, 1.0), (0.5, 2.0, 0.1, 2.0)])
def test_rod_mode_reproduces_kubelka_slab(estimator, mua, mus, p_b, thickness):
    reflectance, transmittance = kubelka_rod(mua=mua, sigma=p_b * mus, thickness=thickness)
    result = simulate(mua_per_mm=mua, mus_per_mm=mus, g=0.0, n=1.0, thickness_mm=thickness,
                      photons=40_000, seed=3, geometry="rod", backscatter_probability=p_b,
                      estimator=estimator)
    assert within_se(result.total_reflectance, reflectance, result.total_reflectance_sd)
    assert within_se(result.total_transmittance, transmittance, result.total_transmittance_sd)


def test_rod_mode_half_space_reproduces_kubelka_limit():
    # d -> infinity in Kubelka 1948: R = 1 / (a + b)
    mua, mus, p_b = 0.2, 3.0, 0.25
    a = 1.0 + mua / (p_b * mus)
    exact = 1.0 / (a + math.sqrt(a * a - 1.0))
    result = simulate(mua_per_mm=mua, mus_per_mm=mus, g=0.0, n=1.0, photons=40_000, seed=4,
                      geometry="rod", backscatter_probability=p_b)
    assert within_se(result.total_reflectance, exact, result.total_reflectance_sd)


def test_rod_default_backscatter_keeps_mean_cosine():
    result = simulate(mua_per_mm=0.1, mus_per_mm=1.0, g=0.6, n=1.0, thickness_mm=1.0,
                      photons=10, geometry="rod")
    assert result.backscatter_probability == pytest.approx(0.2)  # (1 - g) / 2


# ------------------------------------------------------- exact limits of the Fresnel boundaries
def clear_slab(*, r, optical_depth):
    """Non-scattering slab with face reflectance r, incoherent multiple reflections (exact)."""
    t = math.exp(-optical_depth)
    transmittance = (1 - r) ** 2 * t / (1 - r * r * t * t)
    reflectance = r + (1 - r) ** 2 * r * t * t / (1 - r * r * t * t)
    return reflectance, transmittance


@pytest.mark.parametrize("n_slide", [None, 1.52])
@pytest.mark.parametrize("mua", [0.0, 0.5])
def test_non_scattering_slab_matches_multiple_reflection_formula(mua, n_slide):
    n, thickness = 1.5, 1.0
    r = specular_reflectance(n=n, n_outside=1.0, n_slide=n_slide)
    reflectance, transmittance = clear_slab(r=r, optical_depth=mua * thickness)
    result = simulate(mua_per_mm=mua, mus_per_mm=0.0, g=0.0, n=n, thickness_mm=thickness,
                      photons=20_000, seed=8, n_slide=n_slide, estimator="weighted",
                      roulette_threshold=1e-9)
    # weighted estimator with partial escape: with mua = 0 a normal ray's history is
    # deterministic (roulette pushed below 1e-9), so the tallies are exact; with mua > 0 the
    # absorption sites are sampled: 3 SE
    for value, exact, se in [(result.total_reflectance, reflectance, result.total_reflectance_sd),
                             (result.total_transmittance, transmittance, result.total_transmittance_sd)]:
        if mua == 0.0:
            assert value == pytest.approx(exact, abs=1e-9)
        else:
            assert abs(value - exact) <= 3 * se
    assert result.unscattered_transmittance == result.total_transmittance


def test_specular_reflectance_normal_fresnel():
    # Fresnel at normal incidence (Born & Wolf sec. 1.5.2): ((1.4 - 1)/(1.4 + 1))^2
    assert specular_reflectance(n=1.4) == pytest.approx((0.4 / 2.4) ** 2, rel=1e-12)
    assert specular_reflectance(n=1.33, n_outside=1.33) == 0.0
    # a slide of the medium's own index is one interface
    assert specular_reflectance(n=1.5, n_slide=1.5) == pytest.approx(0.04, rel=1e-12)


def test_mismatched_slab_with_slides_equals_direct_fresnel_when_slide_matches():
    # a slide with the medium's index is optically absent: same photons, same numbers
    common = dict(mua_per_mm=0.3, mus_per_mm=5.0, g=0.8, n=1.4, thickness_mm=0.5,
                  photons=5_000, seed=2)
    plain = simulate(**common)
    slid = simulate(**common, n_slide=1.4)
    assert slid.total_reflectance == pytest.approx(plain.total_reflectance, rel=1e-12)
    assert slid.total_transmittance == pytest.approx(plain.total_transmittance, rel=1e-12)


# --------------------------------------------------------------------- energy conservation
ENERGY_CASES = [
    dict(geometry="3d", thickness_mm=None, n=1.0, n_slide=None),
    dict(geometry="3d", thickness_mm=None, n=1.4, n_slide=None),
    dict(geometry="3d", thickness_mm=0.5, n=1.4, n_slide=None),
    dict(geometry="3d", thickness_mm=0.5, n=1.4, n_slide=1.5),
    dict(geometry="rod", thickness_mm=1.0, n=1.33, n_slide=None),
    dict(geometry="rod", thickness_mm=None, n=1.0, n_slide=None),
]


@pytest.mark.parametrize("estimator", ["analog", "weighted"])
@pytest.mark.parametrize("case", ENERGY_CASES, ids=lambda c: f"{c['geometry']}-{c['thickness_mm']}-{c['n']}-{c['n_slide']}")
def test_energy_is_conserved_in_every_mode(estimator, case):
    result = simulate(mua_per_mm=0.2, mus_per_mm=4.0, g=0.7, photons=4_000, seed=1,
                      estimator=estimator, **case)
    total = result.total_reflectance + result.total_transmittance + result.absorbed_fraction
    # exact bookkeeping: every unit of launched weight is tallied once (roulette apart)
    assert total - result.roulette_balance == pytest.approx(1.0, abs=1e-12)
    assert result.specular_reflectance + result.diffuse_reflectance == pytest.approx(
        result.total_reflectance, abs=1e-15)
    assert 0.0 <= result.unscattered_reflectance <= result.diffuse_reflectance
    if estimator == "analog":
        assert result.roulette_balance == 0.0
    else:
        # roulette is fair: its net weight is zero within 3 SE
        assert abs(result.roulette_balance) <= 3 * result.roulette_balance_sd


# ------------------------------------------------------------ estimator statistics
def test_analog_and_weighted_agree_and_weighted_is_more_efficient():
    # case: strongly absorbing half-space, albedo 0.2, isotropic, matched: absorption
    # weighting pays most where an analog photon rarely survives (measured on this engine:
    # weighted FOM about twice the analog one); in weakly absorbing half-spaces the two are
    # about as efficient (see the _kernels module docstring)
    common = dict(mua_per_mm=0.8, mus_per_mm=0.2, g=0.0, n=1.0, photons=1_000_000, seed=21,
                  batches=256, threads=1)
    analog = simulate(**common, estimator="analog")
    weighted = simulate(**common, estimator="weighted")
    combined = math.hypot(analog.diffuse_reflectance_sd, weighted.diffuse_reflectance_sd)
    assert within_se(analog.diffuse_reflectance, weighted.diffuse_reflectance, combined)
    assert within_se(analog.absorbed_fraction, weighted.absorbed_fraction,
                     math.hypot(analog.absorbed_fraction_sd, weighted.absorbed_fraction_sd))
    # efficiency by a timing-free cost (variance x interaction events), since a wall-clock
    # figure of merit 1/(sigma^2 t) depends on the machine's load (speed lives in bench/mc.py);
    # 256 batches make each variance estimate good to about 9 % (sqrt(2/255))
    assert weighted.figure_of_merit > 0 and analog.figure_of_merit > 0
    cost_analog = analog.diffuse_reflectance_sd**2 * analog.interactions
    cost_weighted = weighted.diffuse_reflectance_sd**2 * weighted.interactions
    assert cost_weighted < 0.75 * cost_analog


def test_standard_error_falls_as_one_over_root_n():
    common = dict(mua_per_mm=0.1, mus_per_mm=5.0, g=0.8, n=1.4, thickness_mm=1.0, seed=9,
                  batches=128)
    small = simulate(**common, photons=4_000)
    large = simulate(**common, photons=64_000)
    ratio = small.diffuse_reflectance_sd / large.diffuse_reflectance_sd
    # expected 4 = sqrt(16); each SE estimate from 128 batches has a relative spread of
    # about 1/sqrt(2 * 127) = 0.063, so ln(ratio) has SD about 0.089: allow 3 of them
    assert abs(math.log(ratio / 4.0)) < 3 * 0.089


def test_fixed_seed_is_reproducible_and_seeds_differ():
    common = dict(mua_per_mm=0.1, mus_per_mm=2.0, g=0.5, n=1.4, photons=2_000)
    first = simulate(**common, seed=7)
    again = simulate(**common, seed=7)
    other = simulate(**common, seed=8)
    assert first.diffuse_reflectance == again.diffuse_reflectance
    assert first.diffuse_reflectance != other.diffuse_reflectance


@pytest.mark.skipif(numba.config.NUMBA_NUM_THREADS < 2, reason="needs at least 2 numba threads")
@pytest.mark.parametrize("geometry", ["3d", "rod"])
def test_one_and_two_threads_give_identical_numbers(geometry):
    common = dict(mua_per_mm=0.05, mus_per_mm=5.0, g=0.9, n=1.4, photons=3_000, seed=13,
                  geometry=geometry)
    if geometry == "3d":
        common["rho_mm"] = [0.5, 1.0, 2.0, 4.0]
    one = simulate(**common, threads=1).to_json()
    two = simulate(**common, threads=2).to_json()
    for key in ("seconds", "figure_of_merit", "threads", "interactions_per_second"):
        one.pop(key), two.pop(key)
    assert set(one) == set(two)
    for key, value in one.items():
        if isinstance(value, np.ndarray):
            np.testing.assert_array_equal(value, two[key])
        else:
            assert value == two[key], key


# ------------------------------------------------------------------------- radial grid
def test_radial_bins_are_midpoint_edges():
    np.testing.assert_allclose(rho_bin_edges_mm([1.0, 2.0, 4.0]), [0.5, 1.5, 3.0, 5.0])
    np.testing.assert_allclose(rho_bin_edges_mm([0.1, 1.0]), [0.0, 0.55, 1.45])


def test_radial_reflectance_integrates_to_the_diffuse_reflectance():
    # a grid that covers every exit radius: sum of R(rho) x annulus area = Rd (exact identity
    # of the tally, so the per-area normalisation is checked); photons beyond the grid are
    # lost from R(rho) only
    rho = np.linspace(0.05, 49.95, 500)
    result = simulate(mua_per_mm=0.5, mus_per_mm=5.0, g=0.5, n=1.4, rho_mm=rho,
                      photons=5_000, seed=1)
    edges = result.rho_edges_mm
    integral = np.sum(result.reflectance_per_mm2 * np.pi * (edges[1:] ** 2 - edges[:-1] ** 2))
    assert integral == pytest.approx(result.diffuse_reflectance, rel=1e-6)
    assert result.reflectance_per_mm2.shape == rho.shape
    assert np.all(result.reflectance_per_mm2_sd >= 0)
    assert np.all(np.diff(result.reflectance_per_mm2[:8]) < 0)  # falls with distance near the source


def test_to_json_carries_the_design_keys():
    payload = simulate(mua_per_mm=0.5, mus_per_mm=5.0, g=0.5, n=1.4, thickness_mm=1.0,
                       rho_mm=[1.0, 2.0], photons=500).to_json()
    for key in ("total_reflectance", "specular_reflectance", "total_transmittance",
                "unscattered_transmittance", "total_reflectance_sd", "total_transmittance_sd",
                "unscattered_transmittance_sd", "photons", "seconds", "figure_of_merit",
                "rho_mm", "reflectance_per_mm2", "reflectance_per_mm2_sd"):
        assert key in payload
    no_grid = simulate(mua_per_mm=0.5, mus_per_mm=5.0, g=0.5, n=1.4, photons=50).to_json()
    assert "rho_mm" not in no_grid and "reflectance_per_mm2" not in no_grid


# ------------------------------------------------------------------------------ bad input
GOOD = dict(mua_per_mm=0.1, mus_per_mm=1.0, g=0.5, n=1.4, photons=100)


@pytest.mark.parametrize(
    "change, message",
    [
        (dict(mua_per_mm=-0.1), r"mua_per_mm must be >= 0"),
        (dict(mus_per_mm=-1.0), r"mus_per_mm must be >= 0"),
        (dict(mua_per_mm=float("nan")), r"mua_per_mm must be a finite number"),
        (dict(mus_per_mm=[1.0, 2.0]), r"mus_per_mm must be one real number"),
        (dict(g=1.0), r"g must lie strictly inside \(-1, 1\)"),
        (dict(g=-1.5), r"g must lie strictly inside"),
        (dict(g=float("nan")), r"g must be a finite number"),
        (dict(n=float("inf")), r"n must be a finite number"),
        (dict(n_slide=(1.5,)), r"n_slide must be one index, None, or a pair"),
        (dict(roulette_survival=0.0), r"roulette_survival in \(0, 1\]"),
        (dict(batches=0), r"batches must be a whole number >= 1"),
        (dict(n=0.9), r"n must be a refractive index >= 1"),
        (dict(n_outside=0.5), r"n_outside must be a refractive index >= 1"),
        (dict(n_slide=0.99), r"n_slide must be a refractive index >= 1"),
        (dict(photons=0), r"photons must be a whole number >= 1"),
        (dict(photons=2.5), r"photons must be a whole number"),
        (dict(threads=0), r"threads must be a whole number >= 1"),
        (dict(threads=10_000), r"threads must be 1\.\.\d+ on this machine"),
        (dict(seed=-1), r"seed must be a whole number >= 0"),
        (dict(estimator="fast"), r"estimator must be one of weighted, analog"),
        (dict(geometry="2d"), r"geometry must be one of 3d, rod"),
        (dict(thickness_mm=0.0), r"thickness_mm must be > 0"),
        (dict(mua_per_mm=0.0), r"mua_per_mm = 0 in a semi-infinite medium"),
        (dict(rho_mm=[1.0]), r"rho_mm must list at least two distances"),
        (dict(rho_mm=[2.0, 1.0]), r"rho_mm must be strictly increasing"),
        (dict(rho_mm=[-1.0, 1.0]), r"rho_mm must hold finite distances >= 0"),
        (dict(backscatter_probability=0.2), r"backscatter_probability is for geometry='rod' only"),
        (dict(geometry="rod", backscatter_probability=1.5), r"backscatter_probability must lie in \[0, 1\]"),
        (dict(geometry="rod", rho_mm=[1.0, 2.0]), r"rho_mm is not available in rod geometry"),
    ],
)
def test_bad_inputs_are_refused_with_one_line(change, message):
    with pytest.raises(InputError, match=message) as caught:
        simulate(**{**GOOD, **change})
    assert "\n" not in str(caught.value)


def test_mua_zero_is_accepted_in_a_slab():
    result = simulate(**{**GOOD, "mua_per_mm": 0.0, "thickness_mm": 1.0})
    assert result.absorbed_fraction == 0.0


def test_concurrent_calls_from_python_threads_give_the_sequential_numbers():
    # a page serving two sessions calls the engine from two threads at once
    from concurrent.futures import ThreadPoolExecutor

    cases = [dict(mua_per_mm=0.1, mus_per_mm=2.0, g=0.5, n=1.4, photons=3_000, seed=s)
             for s in (1, 2, 3, 4)]
    sequential = [simulate(**case).diffuse_reflectance for case in cases]
    with ThreadPoolExecutor(max_workers=4) as pool:
        concurrent = list(pool.map(lambda case: simulate(**case).diffuse_reflectance, cases))
    assert concurrent == sequential
