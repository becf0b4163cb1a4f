"""Stored Monte Carlo baselines: re-weighting and scaling against direct runs, storage, checks.

Statistical checks fix their seeds and state tolerances in standard errors (SE): the
baseline and the direct run use different seeds, so they are independent and their
difference is held to 3 combined SE.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.montecarlo import Baseline, build_baseline, load_baseline, simulate

REFERENCE = dict(mua_per_mm=0.02, mus_per_mm=2.0, g=0.5, n=1.4)
RHO_MM = np.array([0.25, 0.75, 1.5, 2.5, 4.0, 6.0])


@pytest.fixture(scope="module")
def baseline():
    return build_baseline(**REFERENCE, photons=100_000, seed=101)


def assert_within_combined_se(value, value_sd, other, other_sd, k=3.0):
    combined = np.hypot(value_sd, other_sd)
    assert np.all(combined > 0)
    z = (np.asarray(value) - other) / combined
    assert np.all(np.abs(z) <= k), z


@pytest.mark.parametrize(
    "mua, mus",
    [
        (0.08, 2.0),  # absorption only: Beer-Lambert re-weighting (Kienle & Patterson 1996)
        (0.2, 4.0),  # scattering x2 (Graaff et al. 1993 scaling) and absorption x10
        (0.03, 1.0),  # scattering halved: radii and paths doubled
    ],
)
def test_reweighting_and_scaling_match_direct_runs(baseline, mua, mus):
    direct = simulate(mua_per_mm=mua, mus_per_mm=mus, g=REFERENCE["g"], n=REFERENCE["n"],
                      rho_mm=RHO_MM, photons=100_000, seed=7)
    values, sd = baseline.srdr_with_sd(mua_per_mm=mua, mus_per_mm=mus, rho_mm=RHO_MM)
    assert_within_combined_se(values, sd, direct.reflectance_per_mm2, direct.reflectance_per_mm2_sd)
    total, total_sd = baseline.diffuse_reflectance(mua_per_mm=mua, mus_per_mm=mus)
    assert_within_combined_se(total, total_sd, direct.diffuse_reflectance, direct.diffuse_reflectance_sd)
    # the check bites: 3 combined SE is a few per cent of R(rho) near the source
    assert np.all(np.hypot(sd, direct.reflectance_per_mm2_sd)[:3] < 0.05 * values[:3])


def test_at_its_reference_the_baseline_replays_the_analog_run():
    # same seed, photons and batches: the recorded exits are the analog run's own photons
    rho = np.array([0.5, 1.0, 2.0, 3.0])
    run = simulate(**REFERENCE, rho_mm=rho, photons=5_000, seed=3, estimator="analog")
    stored = build_baseline(**REFERENCE, photons=5_000, seed=3)
    np.testing.assert_allclose(stored.srdr(mua_per_mm=0.02, mus_per_mm=2.0, rho_mm=rho, method="photons"),
                               run.reflectance_per_mm2, rtol=1e-12)
    total, _ = stored.diffuse_reflectance(mua_per_mm=0.02, mus_per_mm=2.0)
    assert total == pytest.approx(run.diffuse_reflectance, rel=1e-12)


def test_scaling_follows_the_published_similarity_relation(baseline):
    # Kienle & Patterson 1996 / Graaff et al. 1993: at fixed mua/mus, g and n,
    # R(rho; mua, mus) = (mus/mus_ref)^2 R(rho mus/mus_ref; mua_ref, mus_ref) - an exact
    # identity of the estimator when the annuli scale with rho (relative half-width)
    factor = 1.7
    rho = np.array([0.5, 1.0, 2.0, 4.0])
    scaled = baseline.srdr(mua_per_mm=0.02 * factor, mus_per_mm=2.0 * factor, rho_mm=rho,
                           relative_halfwidth=0.1, method="photons")
    reference = baseline.srdr(mua_per_mm=0.02, mus_per_mm=2.0, rho_mm=rho * factor,
                              relative_halfwidth=0.1, method="photons")
    np.testing.assert_allclose(scaled, factor**2 * reference, rtol=1e-10)


def test_table_lookup_agrees_with_the_exact_photon_sum(baseline):
    mua = np.array([0.02, 0.05, 0.3, 0.04])
    mus = np.array([2.0, 1.0, 6.0, 3.0])
    fast = baseline.srdr(mua_per_mm=mua, mus_per_mm=mus, rho_mm=RHO_MM)
    exact, sd = baseline.srdr_with_sd(mua_per_mm=mua, mus_per_mm=mus, rho_mm=RHO_MM)
    assert fast.shape == (4, RHO_MM.size)
    # the table shares the photons of a cut fine bin by area (a smoothing) and takes each
    # cell's path spread to second order: differences stay well inside one SE
    z = (fast - exact) / sd
    assert np.all(np.abs(z) <= 1.0) and np.sqrt(np.mean(z**2)) < 0.4, np.round(z, 2)
    narrow = baseline.srdr(mua_per_mm=mua, mus_per_mm=mus, rho_mm=RHO_MM, relative_halfwidth=0.05)
    narrow_exact, narrow_sd = baseline.srdr_with_sd(mua_per_mm=mua, mus_per_mm=mus, rho_mm=RHO_MM,
                                                    relative_halfwidth=0.05)
    z = (narrow - narrow_exact) / narrow_sd
    assert np.all(np.abs(z) <= 1.0) and np.sqrt(np.mean(z**2)) < 0.4, np.round(z, 2)


def test_table_lookup_is_continuous_in_scattering(baseline):
    # a fit differentiates by finite differences: a relative step of 1e-7 in mus must move
    # R(rho) by about 1e-7 relative (no photon-sized jumps)
    base = baseline.srdr(mua_per_mm=0.05, mus_per_mm=2.5, rho_mm=RHO_MM)
    bumped = baseline.srdr(mua_per_mm=0.05, mus_per_mm=2.5 * (1 + 1e-7), rho_mm=RHO_MM)
    assert np.all(np.abs(bumped / base - 1) < 1e-5)
    assert np.any(bumped != base)


def test_scalar_and_array_shapes(baseline):
    one = baseline.srdr(mua_per_mm=0.05, mus_per_mm=2.0, rho_mm=RHO_MM)
    many = baseline.srdr(mua_per_mm=[0.05, 0.05], mus_per_mm=2.0, rho_mm=RHO_MM)
    assert one.shape == (RHO_MM.size,)
    assert many.shape == (2, RHO_MM.size)
    np.testing.assert_array_equal(many[0], one)
    total, sd = baseline.diffuse_reflectance(mua_per_mm=[0.05, 0.1], mus_per_mm=2.0)
    assert total.shape == sd.shape == (2,) and total[0] > total[1]


def test_rho_beyond_the_stored_photons_warns(baseline):
    with pytest.warns(PhantomlabWarning, match=r"beyond this baseline's largest exit radius"):
        values = baseline.srdr(mua_per_mm=0.05, mus_per_mm=2.0, rho_mm=[1.0, 1e4])
    assert values[-1] == 0.0


@pytest.mark.parametrize(
    "change, message",
    [
        (dict(mua_per_mm=0.001), r"below this baseline's reference ratio 0\.01"),
        (dict(mua_per_mm=-0.1), r"mua_per_mm must be >= 0"),
        (dict(mua_per_mm=float("nan")), r"must be finite"),
        (dict(mus_per_mm=0.0), r"mus_per_mm must be > 0"),
        (dict(method="guess"), r"method must be one of table, photons"),
        (dict(rho_mm=[3.0]), r"rho_mm must list at least two distances"),
        (dict(relative_halfwidth=1.5), r"relative_halfwidth must lie in \(0, 1\)"),
        (dict(relative_halfwidth=0.1, rho_mm=[0.0, 1.0]), r"rho_mm must hold finite distances > 0"),
    ],
)
def test_bad_queries_are_refused(baseline, change, message):
    query = {**dict(mua_per_mm=0.05, mus_per_mm=2.0, rho_mm=RHO_MM), **change}
    with pytest.raises(InputError, match=message):
        baseline.srdr(**query)


@pytest.mark.parametrize(
    "change, message",
    [
        (dict(mua_per_mm=0.0), r"reference mua_per_mm > 0"),
        (dict(mus_per_mm=0.0), r"reference mus_per_mm > 0"),
        (dict(g=1.0), r"g must lie strictly inside"),
        (dict(n=0.5), r"n must be a refractive index >= 1"),
        (dict(photons=0), r"photons must be a whole number >= 1"),
        (dict(threads=0), r"threads must be a whole number >= 1"),
    ],
)
def test_bad_build_inputs_are_refused(change, message):
    with pytest.raises(InputError, match=message):
        build_baseline(**{**REFERENCE, "photons": 10, **change})


# ------------------------------------------------------------------------------ storage
def test_save_and_load_round_trip(baseline, tmp_path):
    path = baseline.save(tmp_path / "reference.npz")
    loaded = load_baseline(path)
    assert loaded.inputs() == baseline.inputs()
    for name in ("exit_radius_mm", "path_length_mm", "scatterings"):
        np.testing.assert_array_equal(getattr(loaded, name), getattr(baseline, name))
    np.testing.assert_array_equal(loaded.srdr(mua_per_mm=0.1, mus_per_mm=3.0, rho_mm=RHO_MM),
                                  baseline.srdr(mua_per_mm=0.1, mus_per_mm=3.0, rho_mm=RHO_MM))
    # compact: 10 bytes a stored photon in memory, no more than that on disk
    assert baseline.nbytes == 10 * baseline.detected
    assert path.stat().st_size < 10 * baseline.detected + 4096
    with np.load(path) as data:
        header = json.loads(str(data["inputs_json"]))
    assert header["format"] == "phantomlab-mc-baseline" and header["mus_per_mm"] == 2.0


def test_stored_photons_are_plausible(baseline):
    # every photon leaves no farther from the axis than it travelled, after >= 1 scattering
    assert np.all(baseline.exit_radius_mm <= baseline.path_length_mm * (1 + 1e-6))
    assert np.all(baseline.scatterings >= 1)
    # mean scatterings ~ mus x mean path (Poisson counting of collisions at rate mut, with
    # absorption as collisions too in the analog walk): within 2 %
    collisions = baseline.scatterings.mean()
    expected = REFERENCE["mus_per_mm"] * baseline.path_length_mm.mean()
    assert collisions == pytest.approx(expected, rel=0.02)
    assert 0.5 < baseline.detected / baseline.photons < 1.0


def _write(path, **arrays):
    with open(path, "wb") as handle:
        np.savez_compressed(handle, **arrays)
    return path


def _good_arrays(baseline, **header_changes):
    header = {"format": "phantomlab-mc-baseline", "version": 1, **baseline.inputs(), **header_changes}
    return dict(
        inputs_json=np.array(json.dumps(header)),
        exit_radius_mm=np.array(baseline.exit_radius_mm),
        path_length_mm=np.array(baseline.path_length_mm),
        scatterings=np.array(baseline.scatterings),
    )


def test_load_refuses_bad_files(baseline, tmp_path):
    with pytest.raises(InputError, match=r"does not exist"):
        load_baseline(tmp_path / "absent.npz")
    junk = tmp_path / "junk.npz"
    junk.write_text("not a zip")
    with pytest.raises(InputError, match=r"is not a readable \.npz baseline"):
        load_baseline(junk)
    arrays = _good_arrays(baseline)
    arrays.pop("scatterings")
    with pytest.raises(InputError, match=r"missing scatterings"):
        load_baseline(_write(tmp_path / "a.npz", **arrays))
    with pytest.raises(InputError, match=r"format version 2"):
        load_baseline(_write(tmp_path / "b.npz", **_good_arrays(baseline, version=2)))
    with pytest.raises(InputError, match=r"g must lie strictly inside"):
        load_baseline(_write(tmp_path / "c.npz", **_good_arrays(baseline, g=1.2)))
    wrong = _good_arrays(baseline)
    wrong["path_length_mm"] = wrong["path_length_mm"].astype(np.float64)
    with pytest.raises(InputError, match=r"path_length_mm has dtype float64, expected float32"):
        load_baseline(_write(tmp_path / "d.npz", **wrong))
    corrupt = _good_arrays(baseline)
    corrupt["exit_radius_mm"][0] = corrupt["path_length_mm"][0] * 2
    with pytest.raises(InputError, match=r"exit radius exceeds its path length"):
        load_baseline(_write(tmp_path / "e.npz", **corrupt))
    short = _good_arrays(baseline)
    short["scatterings"] = short["scatterings"][:-1]
    with pytest.raises(InputError, match=r"differ in length"):
        load_baseline(_write(tmp_path / "f.npz", **short))
    nan = _good_arrays(baseline)
    nan["path_length_mm"][3] = np.nan
    with pytest.raises(InputError, match=r"must be finite"):
        load_baseline(_write(tmp_path / "g.npz", **nan))


def test_baseline_constructor_checks_its_arrays():
    with pytest.raises(InputError, match=r"exit_radius_mm must be a 1-D float32 array"):
        Baseline(exit_radius_mm=np.zeros(2), path_length_mm=np.ones(2, np.float32),
                 scatterings=np.ones(2, np.uint16), photons=2, **REFERENCE, n_outside=1.0)
    with pytest.raises(InputError, match=r"3 detected photons but only 2 launched"):
        Baseline(exit_radius_mm=np.zeros(3, np.float32), path_length_mm=np.ones(3, np.float32),
                 scatterings=np.ones(3, np.uint16), photons=2, **REFERENCE, n_outside=1.0)
    assert math.isclose(
        Baseline(exit_radius_mm=np.zeros(1, np.float32), path_length_mm=np.ones(1, np.float32),
                 scatterings=np.ones(1, np.uint16), photons=2, **REFERENCE,
                 n_outside=1.0).minimum_absorption_ratio, 0.01)


@pytest.mark.skipif(__import__("numba").config.NUMBA_NUM_THREADS < 2, reason="needs 2 numba threads")
def test_baseline_does_not_depend_on_the_thread_count():
    one = build_baseline(**REFERENCE, photons=3_000, seed=4, threads=1)
    two = build_baseline(**REFERENCE, photons=3_000, seed=4, threads=2)
    for name in ("exit_radius_mm", "path_length_mm", "scatterings"):
        np.testing.assert_array_equal(getattr(one, name), getattr(two, name))
