"""The time- and frequency-domain Monte Carlo lookup against direct Monte Carlo runs.

The lookup is built from the stored baseline (``fixtures/mc_baseline.npz``: μa_ref = 0.0003,
μs_ref = 5 /mm, g = 0.8, n = 1.4, seed 7) by scaling and re-weighting; the reference is a
direct run of the engine with its time tally (``fixtures/mc_td_half_space.npz``: μs = 6 /mm,
μa = 0 with a time gate, seed 3001; made by ``fixtures/make_td_fixtures.py``), another seed,
another μs (so the scaling relation is exercised), no table, no smoothing.  The tolerance is
stated in standard errors of the two (the direct run's per bin and the lookup's own photon
noise, ``relative_sd``).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from phantomlab.calibration.mc_lookup_time import time_resolved_lookup
from phantomlab.errors import InputError
from phantomlab.transport.montecarlo import load_baseline
from phantomlab.transport.time_domain import time_resolved
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS
import td_fixture_data as fixture

BASELINE = fixture.FIXTURES / "mc_baseline.npz"
pytestmark = pytest.mark.skipif(not (fixture.FIXTURES / "mc_td_half_space.npz").is_file(),
                                reason="fixtures/mc_td_half_space.npz missing: run fixtures/make_td_fixtures.py")


@pytest.fixture(scope="module")
def lookup():
    return time_resolved_lookup(load_baseline(BASELINE))


@pytest.fixture(scope="module")
def run():
    return fixture.half_space()


REBIN = 5  # 5-ps bins of the run → 25 ps


def _ring_and_bin_average(lookup, run, mua, j):
    """The lookup averaged as the run tallies: over ring j (weight 2πρ) and over each 25-ps bin."""
    edges = run["rho_edges_mm"]
    x, w = np.polynomial.legendre.leggauss(6)
    rho = 0.5 * (edges[j + 1] - edges[j]) * x + 0.5 * (edges[j + 1] + edges[j])
    weight = w * rho / np.sum(w * rho)
    step = float(run["time_ps"][1] - run["time_ps"][0]) * REBIN
    centres = run["time_ps"].reshape(-1, REBIN).mean(axis=1)
    t = centres[:, None] + step * 0.5 * np.polynomial.legendre.leggauss(6)[0][None, :]
    tw = np.polynomial.legendre.leggauss(6)[1] / 2
    mus = float(run["mus_per_mm"])
    values = np.zeros(centres.size)
    sd = np.zeros(centres.size)
    for r, a in zip(rho, weight):
        point = lookup.point(mua_per_mm=[mua], mus_per_mm=[mus], rho_mm=np.full(t.size, r), time_ps=t.ravel())[0]
        values += a * (point.reshape(t.shape) @ tw)
        rel = lookup.relative_sd(mus_per_mm=[mus], rho_mm=np.full(centres.size, r), time_ps=centres)[0]
        sd += a * rel
    return centres, values, values * sd


def _direct(run, mua, j):
    values, sd = fixture.absorbed(run, mua)
    direct = values[j].reshape(-1, REBIN).mean(axis=1)
    direct_sd = np.sqrt((sd[j] ** 2).reshape(-1, REBIN).sum(axis=1)) / REBIN
    return direct, direct_sd


def test_time_resolved_lookup_within_3_se_of_direct_runs(lookup, run):
    pooled = []
    for ratio in (100.0, 1000.0):
        for rho_mm in (10.0, 15.0, 20.0):
            mua = 1.2 / ratio  # μs′ = 1.2 /mm in the run
            j = int(np.argmin(np.abs(run["rho_mm"] - rho_mm)))
            t, looked, looked_sd = _ring_and_bin_average(lookup, run, mua, j)
            direct, direct_sd = _direct(run, mua, j)
            # the fit window of the lookup model: from 10 % of the peak on the rising edge to 1 % on
            # the tail (earlier, at the first few per cent of the rise, the lookup reads 15-50 %
            # high: the baseline holds few photons that early and the smoothing spreads them)
            first = int(np.argmax(direct >= 0.1 * direct.max()))
            used = (np.arange(direct.size) >= first) & (direct > 0.01 * direct.max())
            assert used.sum() >= 30
            z = (looked - direct)[used] / np.hypot(direct_sd, looked_sd)[used]
            assert np.mean(z**2) < 1.5, (ratio, rho_mm, np.mean(z**2))  # no drift under the bound
            pooled.append(z)
    z = np.concatenate(pooled)
    # within 3 SE per bin: of these ~500 bins a normal variable leaves 3 SE about once or
    # twice, so one bin in a hundred may, none beyond 4
    assert np.mean(np.abs(z) > 3.0) <= 0.01 and np.max(np.abs(z)) < 4.0, (np.mean(np.abs(z) > 3), np.max(np.abs(z)))


@pytest.mark.parametrize("f_mhz", [100.0, 300.0])
@pytest.mark.parametrize("rho_mm", [10.0, 20.0])
def test_frequency_domain_lookup_within_3_se_of_the_transform_of_direct_runs(lookup, run, rho_mm, f_mhz):
    mua = 0.012  # the gate (5 ns) then leaves out < 1e-5 of the curve
    j = int(np.argmin(np.abs(run["rho_mm"] - rho_mm)))
    values, sd = fixture.absorbed(run, mua)
    step = float(run["time_ps"][1] - run["time_ps"][0])
    omega = 2 * math.pi * f_mhz * 1e-6
    kernel = np.exp(-1j * omega * run["time_ps"])  # bin centres: (ωΔ)²/24 < 1e-7 here
    direct = np.sum(values[j] * kernel) * step
    direct_sd_re = math.sqrt(np.sum((sd[j] * kernel.real) ** 2)) * step
    direct_sd_im = math.sqrt(np.sum((sd[j] * kernel.imag) ** 2)) * step
    # the lookup's ring average (weight 2πρ) of its transform
    edges = run["rho_edges_mm"]
    x, w = np.polynomial.legendre.leggauss(6)
    rho = 0.5 * (edges[j + 1] - edges[j]) * x + 0.5 * (edges[j + 1] + edges[j])
    weight = w * rho / np.sum(w * rho)
    looked = np.sum(weight * lookup.frequency_domain(mua_per_mm=[mua], mus_per_mm=[6.0], rho_mm=rho,
                                                     frequency_mhz=np.full(rho.size, f_mhz))[0])
    # the lookup's own noise: its relative SD at the curve's peak times, a bound for the transform
    rel = float(np.max(lookup.relative_sd(mus_per_mm=[6.0], rho_mm=np.full(50, rho_mm),
                                          time_ps=np.linspace(200, 2000, 50))))
    assert abs(looked.real - direct.real) <= 3 * math.hypot(direct_sd_re, rel * abs(looked))
    assert abs(looked.imag - direct.imag) <= 3 * math.hypot(direct_sd_im, rel * abs(looked))


def test_absorption_enters_as_beer_lambert_exactly(lookup):
    t = np.linspace(100, 4000, 50)
    v = SPEED_OF_LIGHT_MM_PER_PS / 1.4
    none = lookup.point(mua_per_mm=[0.0], mus_per_mm=[5.0], rho_mm=np.full(t.size, 15.0), time_ps=t)[0]
    some = lookup.point(mua_per_mm=[0.02], mus_per_mm=[5.0], rho_mm=np.full(t.size, 15.0), time_ps=t)[0]
    assert some == pytest.approx(none * np.exp(-0.02 * v * t), rel=1e-12)


def test_scaling_in_mus(lookup):
    # R(ρ, t; μs) = k³ R(kρ, kt; k⁻¹ μs) for lengths scaled by k (Graaff et al. 1993): exact by construction
    t = np.linspace(200, 3000, 20)
    a = lookup.point(mua_per_mm=[0.0], mus_per_mm=[6.0], rho_mm=np.full(t.size, 12.0), time_ps=t)[0]
    b = lookup.point(mua_per_mm=[0.0], mus_per_mm=[3.0], rho_mm=np.full(t.size, 24.0), time_ps=2 * t)[0]
    assert a == pytest.approx(8 * b, rel=1e-9)


def test_late_time_shape_agrees_with_diffusion_far_from_the_source(run):
    # Far from the source (18 transport lengths) and late, diffusion is good to a few per cent
    # (Contini et al. 1997, their comparison with Monte Carlo; # from memory): the direct run's
    # point values against kienle1997 normalised over the late part of the curve.
    values, sd = fixture.absorbed(run, 0.012)
    point, point_sd = fixture.point_value(run, values, sd, 15.0)
    t = run["time_ps"]
    late = (t > 1500) & (t < 4000)
    model = time_resolved(mua_per_mm=0.012, musp_per_mm=1.2, rho_mm=15.0, time_ps=t[late], n=1.4)
    coarse = point[late].reshape(-1, 50).sum(axis=1) / model.reshape(-1, 50).sum(axis=1)
    assert np.all(np.abs(coarse / coarse.mean() - 1) < 0.05)
    assert 0.8 < coarse.mean() < 1.2  # the absolute level too (per incident energy on both sides)


def test_the_compiled_read_of_whole_curves_equals_the_general_cubic_convolution(lookup):
    """Curves (one distance per row) are read by a numba kernel; points with their own distance
    each by numpy's two-dimensional cubic convolution (Keys 1981).  The same arithmetic: equal
    to rounding, and zero at the same points (before the first photons, after the last)."""
    rng = np.random.default_rng(4)
    rows, points = 9, 700
    mus = rng.uniform(2.0, 12.0, rows)
    rho = np.repeat(rng.uniform(2.0, 30.0, rows)[:, None], points, axis=1)
    times = np.sort(rng.uniform(-100.0, 6000.0, (rows, points)), axis=1)
    mua = rng.uniform(0.0, 0.05, rows)
    curves = lookup.point(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho, time_ps=times)
    # a distance that differs by 1e-12 mm at the last point sends the rows down the general path
    nudged = rho.copy()
    nudged[:, -1] += 1e-12
    general = lookup.point(mua_per_mm=mua, mus_per_mm=mus, rho_mm=nudged, time_ps=times)
    assert np.array_equal(curves[:, :-1] > 0, general[:, :-1] > 0)
    assert np.count_nonzero(curves) > rows * points // 3
    np.testing.assert_allclose(curves[:, :-1], general[:, :-1], rtol=1e-12, atol=0)


def test_the_compiled_whole_curve_read_equals_point(lookup):
    """``curves`` (the fit's read: scaling, reach, table and Beer–Lambert in one compiled pass)
    against ``point`` (numpy, itself held to the general cubic convolution above): equal to
    rounding, zero at the same points, and refusing the same bad input."""
    rng = np.random.default_rng(5)
    rows, points = 11, 600
    mus = rng.uniform(2.0, 12.0, rows)
    rho = rng.uniform(2.0, 30.0, rows)
    rho[0] = 1e-3  # nearer than the table's first node: no light
    rho[1] = 500.0  # beyond its last
    times = np.sort(rng.uniform(-100.0, 6000.0, (rows, points)), axis=1)
    mua = rng.uniform(0.0, 0.05, rows)
    fast = lookup.curves(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho, time_ps=times)
    slow = lookup.point(mua_per_mm=mua, mus_per_mm=mus, rho_mm=np.repeat(rho[:, None], points, axis=1),
                        time_ps=times)
    assert np.array_equal(fast > 0, slow > 0)
    assert not fast[:2].any() and np.count_nonzero(fast) > rows * points // 3
    np.testing.assert_allclose(fast, slow, rtol=1e-12, atol=0)
    with pytest.raises(InputError, match="mus_per_mm must be > 0"):
        lookup.curves(mua_per_mm=mua, mus_per_mm=-mus, rho_mm=rho, time_ps=times)


def test_the_table_cells_are_numpys_two_dimensional_histograms_to_the_bit():
    """The table's cells (photon counts, weight sums and squares) are found once, by arithmetic
    on the evenly spaced edges; numpy's histogram2d (binary search per histogram) is the
    reference: the same bins for values on edges, on the last edge and outside, the same sums."""
    from phantomlab.calibration.mc_lookup_time_table import cell_sums

    rng = np.random.default_rng(8)
    x_edges = np.arange(math.log(0.5), math.log(400.0) + math.log(1.1), math.log(1.1))
    y_edges = -12.0 + math.log(1.04) * np.arange(300)
    x = rng.uniform(x_edges[0] - 0.3, x_edges[-1] + 0.3, 20_000)
    y = rng.uniform(y_edges[0] - 0.3, y_edges[-1] + 0.3, 20_000)
    x[:200] = x_edges[rng.integers(0, x_edges.size, 200)]  # exactly on edges, the last one among them
    y[:200] = y_edges[rng.integers(0, y_edges.size, 200)]
    x[200], y[200] = x_edges[-1], y_edges[-1]
    w = rng.exponential(1.0, x.size)
    got = cell_sums(x, y, x_edges, y_edges, (None, w, w * w))
    for mine, weights in zip(got, (None, w, w * w)):
        assert np.array_equal(mine, np.histogram2d(x, y, bins=(x_edges, y_edges), weights=weights)[0])


def test_the_compiled_transform_equals_its_numpy_form(lookup):
    """The fd lookup's transform (eq. 2 of mc_lookup_time) is summed by a numba kernel; its numpy
    form (the same sums with numpy's einsum) is the reference: equal to rounding, including
    distances beyond the table (zero)."""
    rng = np.random.default_rng(6)
    mus = rng.uniform(2.0, 12.0, 7)
    mua = rng.uniform(0.0, 0.05, 7)
    rho = np.array([1e-3, 5.0, 10.0, 15.0, 22.0, 30.0, 500.0])
    freq = np.array([50.0, 140.0, 300.0, 500.0, 100.0, 200.0, 80.0])
    fast = lookup.frequency_domain(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho, frequency_mhz=freq)
    slow = lookup._numpy_transform(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho, frequency_mhz=freq)
    assert np.count_nonzero(fast) > fast.size // 2 and np.all(fast[:, -1] == 0)
    np.testing.assert_allclose(fast, slow, rtol=1e-12, atol=0)


def test_the_compiled_error_pair_block_equals_the_dense_kernel_products():
    """A block of the fd lookup's error covariance (transform_error_covariance) is summed by a
    numba kernel that skips kernel overlaps below e^(−40); the reference is the dense (T, T)
    overlap matrix in numpy, as the covariance was first written: equal to 1e-12 of the
    block's largest entry, for kernels of varying width and a shift between distances."""
    from phantomlab.calibration._lookup_kernels import error_pair_block

    rng = np.random.default_rng(8)
    times, rows = 300, 6
    log_t = np.log(np.geomspace(10.0, 6e4, times))
    for shift in (0.0, 0.81, -1.6):
        noise_a, bias_a, noise_b, bias_b = (rng.standard_normal((rows, times)) for _ in range(4))
        width_a = rng.uniform(0.06, 0.2, times)
        width_b = np.sort(rng.uniform(0.06, 0.2, times))
        pair = width_a[:, None] ** 2 + width_b[None, :] ** 2
        gap = log_t[:, None] - log_t[None, :] - shift
        overlap = np.sqrt(2 * width_a[:, None] * width_b[None, :] / pair) * np.exp(-(gap**2) / (2 * pair))
        dense = noise_a @ overlap @ noise_b.T + bias_a @ overlap @ bias_b.T
        block = np.empty((rows, rows))
        error_pair_block(noise_a, bias_a, noise_b, bias_b, log_t, width_a, width_b, shift, block)
        assert np.max(np.abs(block - dense)) <= 1e-12 * np.max(np.abs(dense))


def test_the_front_ramp_is_a_centred_smoothstep_that_keeps_the_light_of_the_step():
    """front_ramp against the smoothstep 3x² − 2x³ written out here, on a row with eight
    columns to the ramp: the weight rises from 0 to 1 over the ramp centred half a column before
    the first reached column (where the table's read, bilinear and kept above one half, had its
    step), the trapezoid sum of each row equals that of the step (3x² − 2x³ plus its mirror is 1),
    nothing lights after the last photon or in a row without photons, and a row reached over
    fewer columns than half the ramp is not lit beyond them."""
    from phantomlab.calibration.mc_lookup_time_table import FRONT_RAMP_LOG_TAU, front_ramp

    reached = np.zeros((3, 60), bool)
    reached[0, 20:45] = True
    reached[1, 30:32] = True
    weight = front_ramp(reached, FRONT_RAMP_LOG_TAU / 8)
    columns = np.arange(60)
    x = np.clip((columns - 19.5) / 8 + 0.5, 0.0, 1.0)
    expected = np.where(columns < 45, x * x * (3 - 2 * x), 0.0)
    assert np.allclose(weight[0], expected, atol=1e-12)
    assert weight[0, 15] == 0.0 and weight[0, 24] == 1.0  # the ramp spans 15.5 .. 23.5
    # the bilinear read of the step (0 before column 20, 1 from it) holds 24.5 columns of light
    # from 19.5 on when cut above one half; the ramp's trapezoid sum holds the same
    assert abs(np.sum(weight[0]) - 25.0) < 1e-12
    assert np.all(weight[1, 32:] == 0.0) and np.all(weight[1, :26] == 0.0) and weight[1, 31] < 1.0
    assert np.all(weight[2] == 0.0)


def test_the_lookup_is_continuous_in_mus_where_its_photons_begin(lookup):
    """At μs′/μa 10, 12 mm the table's first photons arrive at 3–5 % of the curve's peak.  The
    read at one time near there, as μs moves in steps of 1e-4, used to jump by that much (the
    step of the reach mask); the ramp makes it move by at most a fraction of a per cent."""
    mus = 6.0 * (1 + 1e-4 * np.arange(-400, 401))
    t = np.linspace(60.0, 100.0, 41)
    rows = lookup.curves(mua_per_mm=np.full(mus.size, 0.12), mus_per_mm=mus, rho_mm=np.full(mus.size, 12.0),
                         time_ps=np.broadcast_to(t, (mus.size, t.size)))
    peak = lookup.curves(mua_per_mm=[0.12], mus_per_mm=[6.0], rho_mm=[12.0],
                         time_ps=np.linspace(20.0, 400.0, 400)[None, :]).max()
    steps = np.abs(np.diff(rows, axis=0)) / peak
    assert steps.max() < 0.003, steps.max()
