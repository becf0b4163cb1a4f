"""Time-resolved transmittance through a slab: diffusion corrected by direct Monte Carlo runs (layer 3).

The slab diffusion model of Contini, Martelli & Zaccanti (1997; transmittance by their image
series with the extrapolated boundary, :mod:`phantomlab.transport.time_domain`) misses the shape of transport's transmittance curve by some per cent, smoothly along
it (tests/calibration/test_fit_td_transmittance.py): at 18 transport lengths the curve from
half its peak to 5 % of it drifts by 8 % against Monte Carlo, which biases a fitted μs′ by
−7 to −19 % and μa by up to −19 % (μs′/μa 10–1000).  This module keeps that model's form and
multiplies it by the ratio C = T_MC/T_diffusion measured on direct Monte Carlo runs of
non-absorbing slabs (:mod:`phantomlab.calibration.slab_time_nodes`):

    T(ρ, t; μa, μs′, d) = T_contini1997(ρ, t; μa, μs′, d) · C(ρ/d, y; τ′),
    y = v t/(3 μs′ d²) (the diffusion time D v t/d²),  τ′ = μs′ d.

Both factors carry absorption alike (exp(−μa v t), exact for Monte Carlo by the Beer–Lambert
weight and in the diffusion model with D = 1/(3μs′)), so C does not depend on μa.  On each
node C is smoothed in (ρ/d, ln y) by a local-linear kernel regression (Cleveland 1979)
weighted by the tallies' inverse variances: Gaussian kernels 0.08 d wide in ρ/d and, in ln y,
0.05 up to 0.7 times the time of the diffusion peak, widening (linear in ln y) to 0.6 from three
times it, where C changes slowly (the late decay of transport differs from diffusion's by a
small rate).  Between nodes ln C is interpolated linearly in ln τ′ (up to half a node step
beyond the outer nodes).  The smoothing's standard error is kept per node and enters the
fit's SDs as a model error correlated over the kernel width (``slab_photon_noise``).

References
----------
Contini D, Martelli F, Zaccanti G 1997, Appl Opt 36:4587–4599 (slab diffusion).
Cleveland WS 1979, J Am Stat Assoc 74:829–836 (local regression).
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

__all__ = ["SlabCorrection", "BANDWIDTH_RHO", "BANDWIDTH_LOG_Y", "BANDWIDTH_LOG_Y_LATE", "MAX_RHO_OVER_D"]

#: Kernel widths (Gaussian SDs): in ρ/d, and in ln y early and late (see the module docstring).
#: The early width was chosen on the independent slab run tests/calibration/fixtures/mc_td_slab.npz
#: (wider blurred the rise: μs′ −12 % at μs′/μa 10); the widening after the peak on its deep
#: version mc_td_slab_deep.npz: widening from 2× to 6× the peak time left the runs' noise in
#: the curve near the peak (wiggles of ±1 % over 100 ps), μa +6 % / +16 % at μs′/μa 300 / 1000;
#: from 1× to 4×, +3 % / +5 %; from 0.7× to 3×, within 2 % / 6 % (the run's own noise 1.2–1.8 %
#: / 3.1–3.5 % at 44 million photons; with all 120 million, within 0.5 % / 2.2 %), and
#: μs′/μa 10 unharmed.  Fitting each run from the others (the check that
#: does not use that run) gave the same coverage for the three, worst errors 3.9, 3.6, 3.9 %.
BANDWIDTH_RHO = 0.08
BANDWIDTH_LOG_Y = 0.05
BANDWIDTH_LOG_Y_LATE = 0.6
_LATE_FROM_PEAK = (0.7, 3.0)
#: Lateral offsets the nodes serve (their rings reach d/2; the kernel needs room).
MAX_RHO_OVER_D = 0.4
#: The grid C is kept on: ln y from ln 0.01 in steps of 0.02 (bilinear between: the kernels are
#: at least 0.05 wide); ρ/d at the rings' centres.
_LOG_Y_STEP = 0.02
#: A node's C is used where its standard error is below this (relative); beyond, the fit is refused.
MAX_RELATIVE_SD = 0.05
#: Beyond the photons C is held and its error taken as this (relative), so that the SDs say it.
SD_CAP = 0.5
#: The smoothing's standard error takes the tallies as independent; the engine's weighted
#: estimator scores one photon's exits through the face (partial Fresnel transmission, then
#: on) in several neighbouring bins, which correlates them.  Measured with two more sets of
#: runs at τ′ 16 and 19.03 (other seeds): fits of the deep slab run with the three sets spread
#: 1.39 (μa) and 1.24 (μs′) times the SDs the formula gives, rms over 15 cases (μs′/μa 10–1000,
#: IRF 100–300 ps); two degrees of freedom, a rough figure, so the larger is taken.
NODE_NOISE_FACTOR = 1.4


def _diffusion_rings(node, time_ps):
    """Contini 1997 transmittance of the node's slab (μa = 0), averaged over each ring [1/(mm² ps)]."""
    from phantomlab.transport.time_domain import time_resolved_evaluator

    evaluate = time_resolved_evaluator(n=node.n, n_outside=node.n_outside, thickness_mm=node.thickness_mm,
                                       geometry="transmittance", model="contini1997")
    x, w = np.polynomial.legendre.leggauss(8)
    edges = node.rho_edges_mm
    out = np.zeros((edges.size - 1, time_ps.size))
    for j in range(edges.size - 1):
        a, b = edges[j], edges[j + 1]
        radius = 0.5 * (b - a) * (x + 1) + a
        weight = 0.5 * (b - a) * w * 2 * np.pi * radius / (np.pi * (b * b - a * a))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            values = evaluate(mua_per_mm=0.0, musp_per_mm=node.musp_per_mm, rho_mm=radius[:, None],
                              time_ps=time_ps[None, :])
        out[j] = weight @ values
    return out


class _NodeTable:
    """ln C and its standard error on (ρ/d, ln y) of one node."""

    def __init__(self, node):
        v = SPEED_OF_LIGHT_MM_PER_PS / node.n
        d = node.thickness_mm
        scale = v / (3.0 * node.tau_prime * d)  # y per ps
        t, mc, mc_sd = node.time_ps, node.values, node.sd  # every bin: merging them blurred the early rise
        diffusion = _diffusion_rings(node, t)
        rho = 0.5 * (node.rho_edges_mm[1:] + node.rho_edges_mm[:-1]) / d
        log_y = np.log(t * scale)
        # the ratio z = T_MC/T_diffusion, regressed with weights area·T_diffusion: the tallies'
        # variance is about proportional to their expected value over the ring's area, so this is
        # the least-squares fit of T_MC itself with noise-free weights (weights from the noisy
        # tallies, or logarithms of them, would bias C where photons are few)
        area = np.pi * np.diff(node.rho_edges_mm**2)[:, None] * np.ones_like(mc)
        valid = (diffusion > 0) & np.isfinite(mc)
        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = np.where(valid, mc / diffusion, 0.0)
            variance = np.where(valid, (mc_sd / diffusion) ** 2, 0.0)
        weight = np.where(valid, area * diffusion, 0.0)
        weight = weight / weight.max()
        # the peak of the diffusion curve on the axis ring, in ln y: where the kernel widens
        peak = float(log_y[int(np.argmax(diffusion[0]))])
        self.tau_prime = node.tau_prime
        self.rho = rho
        self.log_y = np.arange(math.log(0.01), math.log(float(t[-1] * scale)), _LOG_Y_STEP)
        self.bandwidth = _bandwidth(self.log_y, peak)
        value, sd = _smooth(rho, log_y, ratio, weight, variance, self.rho, self.log_y, self.bandwidth)
        # the smoothed noise's correlation across ρ, about the diffusion peak and after it (where
        # the curve's light is), for the SD of an average over a detection face
        at = peak + np.array([-0.2, 0.0, 0.3, 0.6, 1.0, 1.4])
        self.rho_correlation = _rho_correlation(rho, log_y, weight, variance, self.rho, at, _bandwidth(at, peak))
        with np.errstate(divide="ignore", invalid="ignore"):
            self.sd = np.where((value > 0) & np.isfinite(sd), np.minimum(NODE_NOISE_FACTOR * sd / value, SD_CAP),
                               SD_CAP)  # of ln C
            self.log_c = _hold_last(np.log(np.where(value > 0, value, np.nan)))

    def at(self, rho_over_d, log_y, parts=("log_c", "sd", "width")):
        """ln C, its SD and the kernel width in ln y at the given points (bilinear on the grid); only ``parts``."""
        r = np.clip(np.interp(rho_over_d, self.rho, np.arange(self.rho.size)), 0, self.rho.size - 1)
        c = np.clip((log_y - self.log_y[0]) / _LOG_Y_STEP, 0, self.log_y.size - 1)
        r0 = np.minimum(np.floor(r).astype(int), self.rho.size - 2)
        c0 = np.minimum(np.floor(c).astype(int), self.log_y.size - 2)
        fr, fc = r - r0, c - c0
        corners = ((1 - fr) * (1 - fc), fr * (1 - fc), (1 - fr) * fc, fr * fc)

        def bilinear(table):
            return (corners[0] * table[r0, c0] + corners[1] * table[r0 + 1, c0] + corners[2] * table[r0, c0 + 1]
                    + corners[3] * table[r0 + 1, c0 + 1])

        found = {"log_c": lambda: bilinear(self.log_c), "sd": lambda: bilinear(self.sd),
                 "width": lambda: np.interp(log_y, self.log_y, self.bandwidth)}
        return tuple(found[part]() for part in parts)


_TABLES: dict = {}


def _table(node) -> "_NodeTable":
    """The node's table, made once per process for a node read from a file (keyed by path and time)."""
    if node.path is None:
        return _NodeTable(node)
    stat = node.path.stat()
    key = (str(node.path), stat.st_mtime_ns, stat.st_size)
    if key not in _TABLES:
        if len(_TABLES) >= 64:  # a bound on memory: the oldest goes
            _TABLES.pop(next(iter(_TABLES)))
        _TABLES[key] = _NodeTable(node)
    return _TABLES[key]


def _bandwidth(log_y, peak):
    a, b = (math.log(f) for f in _LATE_FROM_PEAK)
    share = np.clip((log_y - peak - a) / (b - a), 0.0, 1.0)
    return BANDWIDTH_LOG_Y + share * (BANDWIDTH_LOG_Y_LATE - BANDWIDTH_LOG_Y)


def _samples(rho, log_y, *columns):
    """The tallies as flat samples (ρ/d, ln y, columns...), those with weight (the first column) > 0."""
    xs = np.repeat(rho, log_y.size)
    ys = np.tile(log_y, rho.size)
    flat = [np.asarray(c).ravel() for c in columns]
    keep = flat[0] > 0
    return [xs[keep], ys[keep]] + [c[keep] for c in flat]


def _equivalent_kernel(xs, ys, ws, r0, log_y_grid, bandwidth):
    """The local-linear fit's weights at (r0, each ln y of the grid): (near, lk (G, S), ok (G,)).

    The value at a grid point is lk @ v[near]: a weighted least-squares fit of v on (1, dx,
    dy) with Gaussian kernel weights (Cleveland 1979), its intercept's equivalent kernel.
    """
    near = np.flatnonzero(np.abs(xs - r0) <= 4.0 * BANDWIDTH_RHO)  # the kernel beyond 4 SDs adds nothing
    dx = xs[near] - r0
    kx = np.exp(-0.5 * (dx / BANDWIDTH_RHO) ** 2) * ws[near]
    gap = ys[near][None, :] - log_y_grid[:, None]  # (G, S), the kernel's distance in ln y
    k = kx[None, :] * np.exp(-0.5 * (gap / bandwidth[:, None]) ** 2)
    # linear in y itself: late on, transport decays at a slightly other rate than
    # diffusion, so C ∝ exp(−Δλ t) and ln C is linear in y; a local-linear fit in y is
    # exact for it whatever the kernel's width (and on the early rise, where the kernel is
    # narrow, y and ln y differ little over it)
    dy = (np.exp(ys[near])[None, :] - np.exp(log_y_grid)[:, None]) / np.exp(log_y_grid)[:, None]
    m = np.stack([k.sum(1), (k * dx).sum(1), (k * dy).sum(1), (k * dx * dx).sum(1), (k * dx * dy).sum(1),
                  (k * dy * dy).sum(1)], axis=1)
    a = np.empty((log_y_grid.size, 3, 3))
    a[:, 0, 0], a[:, 0, 1], a[:, 0, 2] = m[:, 0], m[:, 1], m[:, 2]
    a[:, 1, 1], a[:, 1, 2], a[:, 2, 2] = m[:, 3], m[:, 4], m[:, 5]
    a[:, 1, 0], a[:, 2, 0], a[:, 2, 1] = m[:, 1], m[:, 2], m[:, 4]
    ok = m[:, 0] > 0
    det = np.linalg.det(a)
    ok &= np.abs(det) > 1e-12 * np.maximum(m[:, 0], 1e-300) ** 3
    inv = np.zeros_like(a)
    inv[ok] = np.linalg.inv(a[ok])
    # equivalent kernel of the intercept: l_s = k_s (inv[0,0] + inv[0,1] dx + inv[0,2] dy)
    lk = k * (inv[:, 0, 0][:, None] + inv[:, 0, 1][:, None] * dx[None, :] + inv[:, 0, 2][:, None] * dy)
    return near, lk, ok


def _smooth(rho, log_y, values, weight, variance, rho_grid, log_y_grid, bandwidth):
    """Local-linear fit in (ρ/d, ln y) at every grid point; its value and standard error."""
    xs, ys, ws, vs, var = _samples(rho, log_y, weight, values, variance)
    out = np.full((rho_grid.size, log_y_grid.size), np.nan)
    sd = np.full_like(out, np.inf)
    for i, r0 in enumerate(rho_grid):
        near, lk, ok = _equivalent_kernel(xs, ys, ws, r0, log_y_grid, bandwidth)
        out[i] = np.where(ok, lk @ vs[near], np.nan)
        sd[i] = np.where(ok, np.sqrt(np.maximum((lk**2) @ var[near], 0.0)), np.inf)
    return out, sd


def _rho_correlation(rho, log_y, weight, variance, rho_grid, log_y_points, bandwidth):
    """Correlation of the smoothed C between the ρ grid's points, (R, R), from the tallies' noise.

    The smoothed values are linear in the independent tallies, so cov(Cᵢ, Cⱼ) = Σₛ lᵢₛ lⱼₛ var(s)
    exactly (l the equivalent kernels); averaged over the ln y of ``log_y_points``.
    """
    xs, ys, ws, var = _samples(rho, log_y, weight, variance)
    full = np.zeros((rho_grid.size, log_y_points.size, xs.size))
    for i, r0 in enumerate(rho_grid):
        near, lk, ok = _equivalent_kernel(xs, ys, ws, r0, log_y_points, bandwidth)
        full[i][:, near] = np.where(ok[:, None], lk, 0.0)
    cov = np.einsum("igs,jgs,s->gij", full, full, var)
    scale = np.sqrt(np.clip(np.einsum("gii->gi", cov), 1e-300, None))
    return np.clip(np.mean(cov / scale[:, :, None] / scale[:, None, :], axis=0), -1.0, 1.0)


def _hold_last(log_c):
    """Where the kernel holds no photons at all, hold the nearest value (its SD is at the cap; the fit warns)."""
    out = np.array(log_c)
    grid = np.arange(out.shape[1])
    for i in range(out.shape[0]):
        good = np.isfinite(out[i])
        out[i] = np.interp(grid, grid[good], out[i][good]) if good.any() else 0.0
    return out


class SlabCorrection:
    """The Monte Carlo correction C of the slab diffusion model from the nodes (module docstring).

    Parameters
    ----------
    nodes : sequence of SlabNode
        Nodes of one (g, n, n_outside), at distinct τ′.
    """

    def __init__(self, nodes):
        nodes = sorted(nodes, key=lambda node: node.tau_prime)
        if not nodes:
            raise InputError("the slab model needs at least one Monte Carlo node")
        first = nodes[0]
        if any(abs(node.g - first.g) > 5e-4 or abs(node.n - first.n) > 5e-4
               or abs(node.n_outside - first.n_outside) > 5e-4 for node in nodes):
            raise InputError("the slab model's nodes must share g, n and n_outside")
        self.g, self.n, self.n_outside = first.g, first.n, first.n_outside
        self.tables = [_table(node) for node in nodes]
        self.log_tau = np.log([table.tau_prime for table in self.tables])
        self.photons = [node.photons for node in nodes]
        self.default_bandwidth = BANDWIDTH_LOG_Y

    @property
    def tau_primes(self) -> list[float]:
        return [table.tau_prime for table in self.tables]

    def covers(self, tau_prime) -> np.ndarray:
        """True where τ′ lies between the outer nodes (interpolation, not extrapolation)."""
        t = np.log(np.asarray(tau_prime, float))
        return (t >= self.log_tau[0] - 1e-9) & (t <= self.log_tau[-1] + 1e-9)

    def _evaluate(self, musp, rho, times, thickness_mm, parts=("log_c", "sd", "width")):
        """The ``parts`` (ln C, its SD, the kernel width) at rows (μs′ (N,), ρ (N,)) and times (N, K)."""
        musp = np.asarray(musp, float)[:, None]
        rho_over_d = np.broadcast_to(np.asarray(rho, float)[:, None] / thickness_mm, np.shape(times))
        return self._evaluate_points(musp, rho_over_d, times, thickness_mm, parts)

    def _evaluate_points(self, musp, rho_over_d, times, thickness_mm, parts):
        """As :meth:`_evaluate` with μs′, ρ/d and times already broadcast to the points' shape."""
        v = SPEED_OF_LIGHT_MM_PER_PS / self.n
        log_y = np.log(np.maximum(times, 1e-3) * v / (3.0 * musp * thickness_mm**2))
        shape = np.broadcast_shapes(np.shape(log_y), np.shape(rho_over_d))
        if len(self.tables) == 1:
            return tuple(np.broadcast_to(value, shape) for value in self.tables[0].at(rho_over_d, log_y, parts))
        # the bracketing nodes depend on μs′ alone: found on its own (small) shape
        t = np.log(musp * thickness_mm)
        k = np.clip(np.searchsorted(self.log_tau, t) - 1, 0, len(self.tables) - 2)
        f = np.clip((t - self.log_tau[k]) / (self.log_tau[k + 1] - self.log_tau[k]), -0.5, 1.5)
        sums = {part: np.zeros(shape) for part in parts}
        if np.all(k == k.flat[0]):  # every point between the same two nodes (a fit's usual case)
            j = int(k.flat[0])
            f = np.broadcast_to(f, shape)
            for node, share in ((j, 1.0 - f), (j + 1, f)):
                values = self.tables[node].at(rho_over_d, log_y, parts)
                for part, value in zip(parts, values):
                    sums[part] += (share * value) ** 2 if part == "sd" else share * value
            if "sd" in sums:
                sums["sd"] = np.sqrt(sums["sd"])
            return tuple(sums[part] for part in parts)
        k, f = np.broadcast_to(k, shape), np.broadcast_to(f, shape)
        log_y, rho_over_d = np.broadcast_to(log_y, shape), np.broadcast_to(rho_over_d, shape)
        for j in np.unique(k):  # each point reads its two bracketing nodes only
            here = k == j
            for node, share in ((j, 1.0 - f[here]), (j + 1, f[here])):
                values = self.tables[node].at(rho_over_d[here], log_y[here], parts)
                for part, value in zip(parts, values):
                    # ln C and the width interpolate linearly; the SDs add in quadrature
                    sums[part][here] += (share * value) ** 2 if part == "sd" else share * value
        if "sd" in sums:
            sums["sd"] = np.sqrt(sums["sd"])
        return tuple(sums[part] for part in parts)

    def factor(self, *, musp_per_mm, rho_mm, time_ps, thickness_mm) -> np.ndarray:
        """C at rows (μs′ (N,), ρ (N,)) and times (N, K) [ps] for a slab ``thickness_mm`` thick."""
        return np.exp(self._evaluate(musp_per_mm, rho_mm, time_ps, thickness_mm, ("log_c",))[0])

    def factor_points(self, *, musp_per_mm, rho_mm, time_ps, thickness_mm) -> np.ndarray:
        """C at rows μs′ (N,), several distances per row ρ (N, Q) and times (N, K): shape (N, K, Q)."""
        musp = np.asarray(musp_per_mm, float)[:, None, None]
        rho_over_d = np.asarray(rho_mm, float)[:, None, :] / thickness_mm
        times = np.asarray(time_ps, float)[:, :, None]
        return np.exp(self._evaluate_points(musp, rho_over_d, times, thickness_mm, ("log_c",))[0])

    def correlation_points(self, *, rho_mm, thickness_mm) -> np.ndarray:
        """Correlation of C's noise between several distances per row ρ (N, Q): (N, Q, Q).

        The nodes' smoothed-noise correlation across ρ (``_rho_correlation``, averaged over the
        nodes: their rings and kernels are the same in ρ/d), read bilinearly between the rings'
        centres (held beyond them).
        """
        table = np.mean([t.rho_correlation for t in self.tables], axis=0)
        grid = self.tables[0].rho
        index = np.clip(np.interp(np.asarray(rho_mm, float) / thickness_mm, grid, np.arange(grid.size)),
                        0, grid.size - 1)
        low = np.minimum(np.floor(index).astype(int), grid.size - 2)
        frac = index - low
        i0, i1 = low[:, :, None], low[:, None, :]
        f0, f1 = frac[:, :, None], frac[:, None, :]
        return ((1 - f0) * (1 - f1) * table[i0, i1] + f0 * (1 - f1) * table[i0 + 1, i1]
                + (1 - f0) * f1 * table[i0, i1 + 1] + f0 * f1 * table[i0 + 1, i1 + 1])

    def relative_sd_points(self, *, musp_per_mm, rho_mm, time_ps, thickness_mm) -> np.ndarray:
        """:meth:`relative_sd` at several distances per row ρ (N, Q): shape (N, K, Q)."""
        musp = np.asarray(musp_per_mm, float)[:, None, None]
        rho_over_d = np.asarray(rho_mm, float)[:, None, :] / thickness_mm
        times = np.asarray(time_ps, float)[:, :, None]
        return self._evaluate_points(musp, rho_over_d, times, thickness_mm, ("sd",))[0]

    def relative_sd(self, *, musp_per_mm, rho_mm, time_ps, thickness_mm) -> np.ndarray:
        """Standard error of ln C (relative error of the model) at the same points, at most :data:`SD_CAP`."""
        return self._evaluate(musp_per_mm, rho_mm, time_ps, thickness_mm, ("sd",))[0]

    def bandwidth_at(self, *, musp_per_mm, rho_mm, time_ps, thickness_mm) -> np.ndarray:
        """The smoothing kernel's width in ln t (= ln y) at the same points."""
        return self._evaluate(musp_per_mm, rho_mm, time_ps, thickness_mm, ("width",))[0]
