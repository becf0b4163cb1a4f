"""The Monte Carlo engine's time-resolved tally (simulate(..., time_ps=...)).

Checks: the same photons counted two ways (the time tally summed over time is the R(ρ)
tally; an analog run's time tally is the histogram of the exits a baseline records with the
same seed, a separate code path), bookkeeping with a time gate (R + T + A + gated = 1 +
roulette), the Beer–Lambert identity between a gated μa = 0 run and a run at μa, thread
independence.  The physics against diffusion far from the source is checked on the stored
fixture (tests/calibration/test_mc_lookup_time.py).  Every statistical check fixes its seed
and states its tolerance in standard errors.
"""

import numpy as np
import pytest

from phantomlab.errors import InputError
from phantomlab.transport.montecarlo import build_baseline, simulate, time_bin_edges_ps
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

TIME_PS = np.arange(5.0, 20000.0, 10.0)


def test_time_tally_sums_to_the_radial_tally():
    run = simulate(mua_per_mm=0.05, mus_per_mm=5.0, g=0.8, n=1.4, rho_mm=[1.0, 2.0, 3.0], time_ps=TIME_PS,
                   photons=20000, seed=5)
    summed = (run.reflectance_per_mm2_per_ps * np.diff(run.time_edges_ps)).sum(axis=1)
    assert summed == pytest.approx(run.reflectance_per_mm2, rel=1e-12)
    assert run.transmittance_per_mm2_per_ps is None  # a half-space has no bottom face


def test_analog_time_tally_is_the_histogram_of_recorded_exits():
    # same seed, photons and batches: the recording run and the tallying run walk the same photons
    baseline = build_baseline(mua_per_mm=0.05, mus_per_mm=5.0, g=0.8, n=1.4, photons=20000, seed=9)
    run = simulate(mua_per_mm=0.05, mus_per_mm=5.0, g=0.8, n=1.4, rho_mm=[1.0, 2.0, 3.0], time_ps=TIME_PS,
                   photons=20000, seed=9, estimator="analog")
    path_edges = run.time_edges_ps * SPEED_OF_LIGHT_MM_PER_PS / 1.4
    counts, _, _ = np.histogram2d(baseline.exit_radius_mm.astype(float), baseline.path_length_mm.astype(float),
                                  bins=(run.rho_edges_mm, path_edges))
    area = np.pi * np.diff(run.rho_edges_mm**2)
    tallied = run.reflectance_per_mm2_per_ps * area[:, None] * np.diff(run.time_edges_ps)[None, :]
    assert tallied.sum() > 0.1
    assert tallied == pytest.approx(counts * baseline.launch_weight / 20000, abs=1e-15)


def test_slab_transmittance_tally_integrates_to_the_total():
    # photons leave a 3 mm slab within 100 mm of the axis and 40 ns (their weight beyond is < 1e-12)
    run = simulate(mua_per_mm=0.05, mus_per_mm=5.0, g=0.8, n=1.4, thickness_mm=3.0, rho_mm=np.arange(2.5, 100.0, 5.0),
                   time_ps=np.arange(50.0, 40000.0, 100.0), photons=20000, seed=5)
    area = np.pi * np.diff(run.rho_edges_mm**2)
    total = (run.transmittance_per_mm2_per_ps * area[:, None] * np.diff(run.time_edges_ps)).sum()
    assert total == pytest.approx(run.total_transmittance, rel=1e-9)


def test_time_gate_bookkeeping_and_unchanged_window():
    common = dict(mus_per_mm=5.0, g=0.8, n=1.4, rho_mm=[4.0, 6.0, 8.0], time_ps=np.arange(25.0, 1500.0, 50.0),
                  photons=40000)
    gated = simulate(mua_per_mm=0.0, time_gate=True, seed=21, **common)
    assert gated.gated_fraction > 0.1
    balance = (gated.total_reflectance + gated.total_transmittance + gated.absorbed_fraction + gated.gated_fraction
               - gated.roulette_balance)
    assert balance == pytest.approx(1.0, abs=1e-12)
    # inside the window a gate changes nothing but the photons' random streams: the μa = 0 run,
    # weighted by exp(−μa v t) of each bin's centre, agrees with a run at μa within its SE
    mua = 0.02
    direct = simulate(mua_per_mm=mua, seed=22, **common)
    v = SPEED_OF_LIGHT_MM_PER_PS / 1.4
    # the weight's spread inside a 50 ps bin: exact bin average of exp(−μa v t)
    edges = gated.time_edges_ps
    factor = (np.exp(-mua * v * edges[:-1]) - np.exp(-mua * v * edges[1:])) / (mua * v * np.diff(edges))
    weighted = gated.reflectance_per_mm2_per_ps * factor
    se = np.hypot(gated.reflectance_per_mm2_per_ps_sd * factor, direct.reflectance_per_mm2_per_ps_sd)
    used = direct.reflectance_per_mm2_per_ps > 5 * direct.reflectance_per_mm2_per_ps_sd
    z = (weighted - direct.reflectance_per_mm2_per_ps)[used] / se[used]
    assert used.sum() >= 20
    assert np.max(np.abs(z)) < 4.0 and np.mean(z**2) < 1.6


def test_threads_do_not_change_the_numbers():
    kwargs = dict(mua_per_mm=0.02, mus_per_mm=5.0, g=0.8, n=1.4, rho_mm=[2.0, 4.0], time_ps=TIME_PS[:200],
                  photons=5000, seed=3)
    one = simulate(threads=1, **kwargs)
    two = simulate(threads=2, **kwargs) if __import__("numba").config.NUMBA_NUM_THREADS >= 2 else one
    assert np.array_equal(one.reflectance_per_mm2_per_ps, two.reflectance_per_mm2_per_ps)


@pytest.mark.parametrize("change, message", [
    (dict(rho_mm=None), "time_ps needs rho_mm"),
    (dict(time_ps=[10.0]), "at least two finite times"),
    (dict(time_ps=[20.0, 10.0]), "strictly increasing"),
    (dict(time_ps=[-10.0, 10.0]), ">= 0 and strictly increasing"),
    (dict(geometry="rod", rho_mm=None), "time_ps needs rho_mm"),
])
def test_bad_time_grids_are_refused(change, message):
    args = dict(mua_per_mm=0.05, mus_per_mm=5.0, g=0.8, n=1.4, rho_mm=[1.0, 2.0], time_ps=[10.0, 20.0],
                photons=100) | change
    with pytest.raises(InputError, match=message):
        simulate(**args)


def test_time_bin_edges_are_midpoints():
    assert time_bin_edges_ps([10.0, 20.0, 40.0]) == pytest.approx([5.0, 15.0, 30.0, 50.0])
