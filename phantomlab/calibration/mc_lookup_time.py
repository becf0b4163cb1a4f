"""Time- and frequency-domain Monte Carlo lookups built on a stored baseline (layer 3).

A baseline keeps, for every photon that left the top face of a half-space run at (μa_ref,
μs_ref), its exit radius ρᵢ and path length Lᵢ.  In a homogeneous medium with g and the
indices fixed, the time-resolved reflectance has the scaling form

    R(ρ, t; μa, μs) = μs³ v F(ρ μs, v t μs) e^(−μa v t)                       (1)

with v = c/n, F(u, τ) the reflectance of the non-absorbing medium per unit area and per unit
path in units of the scattering length (u = ρμs, τ = Lμs), and e^(−μa v t) the Beer–Lambert
weight of the path L = v t (the scaling relation of Graaff et al. 1993 with the absorption
re-weighting of Kienle & Patterson 1996, as in :mod:`phantomlab.transport.montecarlo.baseline`;
for time-resolved data both are exact, with no restriction on μa beyond the baseline's reach in
time).  Each stored photon enters F at (ρᵢμs_ref, Lᵢμs_ref) with weight e^(μa_ref Lᵢ) (it
survived the reference absorption with probability e^(−μa_ref Lᵢ)).

F is tabulated on cells of about 10 % in u and 4 % in τ and smoothed as a ratio to the
time-resolved diffusion model of the same medium (``kienle1997`` of
:mod:`phantomlab.transport.time_domain` at μa = 0, integrated over each cell, a smooth control
as in :mod:`phantomlab.calibration.mc_lookup`): log(F_MC/F_diffusion) varies slowly except at
the earliest times, and is smoothed by a local-linear kernel regression in (log u, log τ)
(Cleveland 1979) with weights from the photon counts; log F is then a bicubic spline.  The
relative standard error of each smoothed node (counting statistics through the kernel
weights) is kept for the fit, which adds it to the data's variance.

The frequency-domain lookup is the Fourier transform of (1) term by term:

    R̃(ρ, ω) = ∫ R(ρ, t) e^(−iωt) dt = μs² ∫ F(ρμs, τ) e^(−(μa + iω/v) τ/μs) dτ            (2)

integrated on the table's τ grid (trapezoid in log τ) from the same smooth F.

References
----------
Graaff R et al. 1993, Appl Opt 32:426–434, doi:10.1364/AO.32.000426.
Kienle A, Patterson MS 1996, Phys Med Biol 41:2221–2227, doi:10.1088/0031-9155/41/10/026.
Cleveland WS 1979, J Am Stat Assoc 74:829–836, doi:10.1080/01621459.1979.10481038.
"""

from __future__ import annotations

import math
import warnings
import weakref

import numpy as np
from scipy.interpolate import RectBivariateSpline
from scipy.ndimage import gaussian_filter1d

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.time_domain import SPEED_OF_LIGHT_MM_PER_PS

__all__ = ["TimeResolvedLookup", "time_resolved_lookup", "LookupReachError", "SERVED_MAX_RELATIVE_SD"]

#: Radial cells of the table, in scattering lengths u = ρμs (log spaced).
_U_RANGE = (0.5, 400.0)
_U_STEP = math.log(1.10)
#: Path cells of the table, in scattering lengths τ = Lμs (log spaced).
_TAU_MIN = 0.5
_TAU_STEP = math.log(1.04)
#: Kernel widths (Gaussian SDs) of the smoothing, in log u and log τ.
#: common practice, no source: about two cells each way, chosen by comparison with direct
#: Monte Carlo runs (tests/calibration/test_mc_lookup_time.py).
_BANDWIDTH_LOG_U = 0.12
_BANDWIDTH_LOG_TAU = 0.06
#: Cells with fewer photons than this do not take part in the smoothing as data.
_MIN_PHOTONS = 1.0
#: The lookup serves a curve when its photons reach the latest time the fit needs at that
#: distance and its relative standard error there is at most this; beyond, the fit would
#: read a table made of a handful of photons (or none) and the default fit uses diffusion.
#: Chosen: at 10 % the lookup's error (added to the SDs) still leaves the late tail a
#: small weight next to the peak's; common practice, no source.
SERVED_MAX_RELATIVE_SD = 0.10


class LookupReachError(InputError):
    """The data reach beyond the Monte Carlo lookup's photons (in distance or time); ``reason`` says where."""

    def __init__(self, reason: str):
        self.reason = reason
        super().__init__(f"the Monte Carlo lookup does not serve these data: {reason}; fit them with a diffusion "
                         "model (--model kienle1997) or give a baseline with more photons")


def _control(baseline, u: np.ndarray, tau: np.ndarray) -> np.ndarray:
    """F of the time-resolved diffusion model (kienle1997, μa = 0) at (u, τ), per unit u-area and τ."""
    from phantomlab.transport.time_domain import time_resolved

    n = float(baseline.n)
    v = SPEED_OF_LIGHT_MM_PER_PS / n
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)  # only a control, near the source too
        values = time_resolved(mua_per_mm=0.0, musp_per_mm=1.0 - float(baseline.g), rho_mm=u, time_ps=tau / v,
                               n=n, n_outside=float(baseline.n_outside), model="kienle1997")
    # per unit time → per unit τ (τ = v t for μs = 1 /mm); strip the entry transmission the
    # baseline carries in its launch weight (both per incident energy: keep it, the ratio is what matters)
    return np.asarray(values, float) / v


def _local_linear(y, weights, x_step, y_step):
    """Local-linear regression of ``y`` on a 2-D grid with a separable Gaussian kernel.

    ``weights`` are inverse variances (0 where no data); kernel SDs in grid units
    (``x_step``, ``y_step``).  Returns the fitted values and the effective inverse variance
    of each fit (Σw)²/Σw² scaled by the kernel, for its standard error.
    """
    rows, cols = y.shape
    gx = np.arange(rows, dtype=float)[:, None] * np.ones((1, cols))
    gy = np.ones((rows, 1)) * np.arange(cols, dtype=float)[None, :]
    yz = np.where(weights > 0, y, 0.0)

    def smooth(a):
        a = gaussian_filter1d(a, x_step, axis=0, mode="constant", truncate=3.0)
        return gaussian_filter1d(a, y_step, axis=1, mode="constant", truncate=3.0)

    w = weights
    s = {name: smooth(arr) for name, arr in {
        "1": w, "x": w * gx, "y": w * gy, "xx": w * gx * gx, "xy": w * gx * gy, "yy": w * gy * gy,
        "z": w * yz, "xz": w * gx * yz, "yz": w * gy * yz}.items()}
    # moments about each node: Σ K w (x_i − x_j)^a (y_i − y_j)^b
    m1 = s["1"]
    mx = s["x"] - gx * m1
    my = s["y"] - gy * m1
    mxx = s["xx"] - 2 * gx * s["x"] + gx * gx * m1
    mxy = s["xy"] - gx * s["y"] - gy * s["x"] + gx * gy * m1
    myy = s["yy"] - 2 * gy * s["y"] + gy * gy * m1
    mz = s["z"]
    mxz = s["xz"] - gx * mz
    myz = s["yz"] - gy * mz
    matrix = np.stack([np.stack([m1, mx, my], -1), np.stack([mx, mxx, mxy], -1),
                       np.stack([my, mxy, myy], -1)], -2)
    rhs = np.stack([mz, mxz, myz], -1)
    fitted = np.full(y.shape, np.nan)
    ok = m1 > 0
    with np.errstate(invalid="ignore", divide="ignore"):
        det = np.linalg.det(matrix[ok])
        scale = np.abs(matrix[ok][:, 0, 0] * matrix[ok][:, 1, 1] * matrix[ok][:, 2, 2])
        good = np.abs(det) > 1e-10 * np.maximum(scale, 1e-300)
        solved = np.full(ok.sum(), np.nan)
        if np.any(good):
            solved[good] = np.linalg.solve(matrix[ok][good], rhs[ok][good][..., None])[:, 0, 0]
        constant = mz[ok] / m1[ok]  # local-constant where the linear fit is singular (edges)
        solved = np.where(good, solved, constant)
    fitted[ok] = solved
    return fitted, m1


def _fill_rows(values: np.ndarray) -> np.ndarray:
    """NaN entries of each row replaced by the nearest finite value of that row (0 if none)."""
    out = values.copy()
    columns = np.arange(values.shape[1])
    for row in range(values.shape[0]):
        finite = np.isfinite(values[row])
        if not finite.any():
            out[row] = 0.0
            continue
        index = columns[finite]
        nearest = np.clip(np.searchsorted(index, columns), 0, index.size - 1)
        before = np.clip(nearest - 1, 0, index.size - 1)
        pick = np.where(np.abs(index[before] - columns) < np.abs(index[nearest] - columns), before, nearest)
        out[row] = np.where(finite, values[row], values[row, index[pick]])
    return out


class TimeResolvedLookup:
    """Smooth time-resolved reflectance F(u, τ) of one baseline (fixed g, n, n_outside).

    Parameters
    ----------
    baseline : phantomlab.transport.montecarlo.Baseline

    Notes
    -----
    Built once per baseline (see :func:`time_resolved_lookup`); about 0.5 s for two million
    stored photons.
    """

    def __init__(self, baseline):
        self.baseline = baseline
        self.g = float(baseline.g)
        self.n = float(baseline.n)
        self.n_outside = float(baseline.n_outside)
        self.v = SPEED_OF_LIGHT_MM_PER_PS / self.n
        mus_ref = float(baseline.mus_per_mm)
        mua_ref = float(baseline.mua_per_mm)
        path = baseline.path_length_mm.astype(np.float64)
        u = baseline.exit_radius_mm.astype(np.float64) * mus_ref
        tau = path * mus_ref
        weight = np.exp(mua_ref * path)  # back to the non-absorbing medium
        u_edges = np.exp(np.arange(math.log(_U_RANGE[0]), math.log(_U_RANGE[1]) + _U_STEP, _U_STEP))
        tau_max = max(float(tau.max()) if tau.size else 1.0, _TAU_MIN * 2)
        tau_edges = np.exp(np.arange(math.log(_TAU_MIN), math.log(tau_max) + _TAU_STEP, _TAU_STEP))
        counts, _, _ = np.histogram2d(u, tau, bins=(u_edges, tau_edges))
        sums, _, _ = np.histogram2d(u, tau, bins=(u_edges, tau_edges), weights=weight)
        squares, _, _ = np.histogram2d(u, tau, bins=(u_edges, tau_edges), weights=weight * weight)
        launched = float(baseline.photons)
        launch = float(baseline.launch_weight)
        # expected weight of each cell under the control: ∫∫ 2π u F_c du dτ (Gauss–Legendre 3×3 in logs)
        x, w = np.polynomial.legendre.leggauss(3)
        lu = np.log(u_edges)
        lt = np.log(tau_edges)
        uq = np.exp(0.5 * (lu[:-1, None] + lu[1:, None]) + 0.5 * (lu[1:, None] - lu[:-1, None]) * x[None, :])
        tq = np.exp(0.5 * (lt[:-1, None] + lt[1:, None]) + 0.5 * (lt[1:, None] - lt[:-1, None]) * x[None, :])
        wu = 0.5 * np.diff(lu)[:, None] * w[None, :] * uq  # du = u d(log u)
        wt = 0.5 * np.diff(lt)[:, None] * w[None, :] * tq
        control_nodes = _control(baseline, uq.ravel()[:, None], tq.ravel()[None, :])
        control_nodes = control_nodes.reshape(uq.shape[0], 3, tq.shape[0], 3)
        expected = np.einsum("aibj,ai,bj->ab", control_nodes, 2 * math.pi * uq * wu, wt)
        measured = launch * sums / launched  # per incident photon
        use = (counts >= _MIN_PHOTONS) & (expected > 0) & (measured > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_ratio = np.where(use, np.log(measured / expected), 0.0)
            # relative variance of a cell's weight sum: Σw²/(Σw)² (counting statistics)
            inverse_var = np.where(use, sums**2 / squares, 0.0)
        smoothed, effective = _local_linear(log_ratio, inverse_var, _BANDWIDTH_LOG_U / _U_STEP,
                                            _BANDWIDTH_LOG_TAU / _TAU_STEP)
        # standard error of a node (local-constant approximation of the kernel fit):
        # Var = Σ K² w / (Σ K w)², K the Gaussian kernel with peak 1; K² is the Gaussian of
        # half the variance, so with the unit-area filters above Σ K w = Z·f(w) and
        # Σ K² w = (Z/2)·f_half(w), Z = 2π σ_u σ_τ in cells
        sx, sy = _BANDWIDTH_LOG_U / _U_STEP, _BANDWIDTH_LOG_TAU / _TAU_STEP
        half = gaussian_filter1d(gaussian_filter1d(inverse_var, sx / math.sqrt(2), axis=0, mode="constant"),
                                 sy / math.sqrt(2), axis=1, mode="constant")
        area = 2 * math.pi * sx * sy
        with np.errstate(divide="ignore", invalid="ignore"):
            relative_sd = np.where(effective > 0, np.sqrt(half / (2 * area * effective**2)), np.inf)
        self.u_nodes = np.sqrt(u_edges[:-1] * u_edges[1:])
        self.tau_nodes = np.sqrt(tau_edges[:-1] * tau_edges[1:])
        control_centre = _control(baseline, self.u_nodes[:, None], self.tau_nodes[None, :])
        # before the first photon of a row (earlier than light arrives) and after its last one,
        # there is no light to report; the spline is given the row's edge values there (so it
        # does not ring) and :meth:`_f` returns 0 outside
        reached = np.isfinite(smoothed) & (effective > 0)
        first = np.where(use.any(axis=1), np.argmax(use, axis=1), use.shape[1])
        last = np.where(use.any(axis=1), use.shape[1] - 1 - np.argmax(use[:, ::-1], axis=1), -1)
        column = np.arange(use.shape[1])[None, :]
        inside = reached & (column >= first[:, None]) & (column <= last[:, None])
        ratio = np.where(inside, smoothed, np.nan)
        ratio = _fill_rows(ratio)
        with np.errstate(divide="ignore"):
            log_f = np.log(np.clip(control_centre, 1e-300, None)) + ratio
        log_f = np.clip(log_f, -700.0, None)
        self._inside = inside
        self.log_u = np.log(self.u_nodes)
        self.log_tau = np.log(self.tau_nodes)
        self._spline = RectBivariateSpline(self.log_u, self.log_tau, log_f, kx=3, ky=3)
        self._inside_spline = RectBivariateSpline(self.log_u, self.log_tau, inside.astype(float), kx=1, ky=1)
        # the evaluation table: log F on a grid 4× finer in log u and log τ (from the bicubic spline,
        # once), read by bilinear interpolation (within 1e-4 of the spline); outside the photons'
        # reach log F = −700 (no light)
        self._fine_log_tau = np.linspace(self.log_tau[0], self.log_tau[-1], 4 * (self.log_tau.size - 1) + 1)
        self._fine_log_u = np.linspace(self.log_u[0], self.log_u[-1], 4 * (self.log_u.size - 1) + 1)
        grid_u, grid_t = np.meshgrid(self._fine_log_u, self._fine_log_tau, indexing="ij")
        fine = np.clip(self._spline.ev(grid_u, grid_t), -700.0, 700.0)
        fine_inside = self._inside_spline.ev(grid_u, grid_t) > 0.5
        self._fine_log_f = np.where(fine_inside, fine, -700.0)
        # the table read by cubic convolution (smooth: no kinks for the fit's Jacobian to find),
        # the spline's own smooth continuation beyond the photons' reach, cut by the mask
        self._fine_smooth = fine
        self._fine_inside = fine_inside.astype(float)
        self._fine_step = (float(self._fine_log_tau[1] - self._fine_log_tau[0]),
                           float(self._fine_log_u[1] - self._fine_log_u[0]))
        self._log_sd = np.log(np.clip(np.where(inside, relative_sd, 1.0), 1e-6, 1.0))
        self.counts = counts
        #: width of the smoothing kernel in log τ (the fit's correlation length of the lookup error)
        self.tau_bandwidth = _BANDWIDTH_LOG_TAU
        self.tau_max = float(tau_edges[-1])
        self.u_max = float(u.max()) if u.size else 0.0

    # ------------------------------------------------------------------ evaluation
    def _scaled(self, mua_per_mm, mus_per_mm, rho_mm, time_ps):
        mua = np.atleast_1d(np.asarray(mua_per_mm, float))
        mus = np.atleast_1d(np.asarray(mus_per_mm, float))
        if np.any(~np.isfinite(mus)) or np.any(mus <= 0) or np.any(mua < 0):
            raise InputError("Monte Carlo lookup: mus_per_mm must be > 0 and mua_per_mm >= 0")
        rho = np.asarray(rho_mm, float)
        t = np.asarray(time_ps, float)
        rho, t = np.broadcast_arrays(rho, t)
        if rho.ndim == 1 or rho.shape[0] != mua.size:
            rho = np.broadcast_to(rho, (mua.size,) + rho.shape[-1:])
            t = np.broadcast_to(t, rho.shape)
        u = rho * mus.reshape((-1,) + (1,) * (rho.ndim - 1))
        tau = self.v * t * mus.reshape((-1,) + (1,) * (rho.ndim - 1))
        return mua, mus, u, tau, t

    def point(self, *, mua_per_mm, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """R(ρ, t) [1/(mm² ps)] per unit incident energy (specular excluded).

        Parameters
        ----------
        mua_per_mm, mus_per_mm : array (N,) [1/mm]
        rho_mm, time_ps : arrays broadcast to (N, L) (or (L,) for every row) [mm], [ps]

        Returns
        -------
        ndarray (N, L)
        """
        mua, mus, u, tau, t = self._scaled(mua_per_mm, mus_per_mm, rho_mm, time_ps)
        values = self._f(u, tau)
        shape = (-1,) + (1,) * (u.ndim - 1)
        return mus.reshape(shape) ** 3 * self.v * values * np.exp(-mua.reshape(shape) * self.v * np.clip(t, 0, None))

    @staticmethod
    def _bilinear(table, lu, lt, lu0, lt0, du, dt):
        """Bilinear interpolation of ``table`` (U, T) on uniform grids, clamped at the edges."""
        x = np.clip((lu - lu0) / du, 0.0, table.shape[0] - 1.000001)
        y = np.clip((lt - lt0) / dt, 0.0, table.shape[1] - 1.000001)
        i = x.astype(np.int64)
        j = y.astype(np.int64)
        fx = x - i
        fy = y - j
        flat = table.ravel()
        base = i * table.shape[1] + j
        top = flat[base] * (1 - fy) + flat[base + 1] * fy
        bottom = flat[base + table.shape[1]] * (1 - fy) + flat[base + table.shape[1] + 1] * fy
        return top * (1 - fx) + bottom * fx

    @staticmethod
    def _cubic_weights(frac):
        """Keys's cubic-convolution weights (a = −1/2) of the four nodes around ``frac`` ∈ [0, 1)."""
        f = frac[..., None] + np.array([1.0, 0.0, -1.0, -2.0])  # distances to nodes i−1, i, i+1, i+2
        d = np.abs(f)
        near = (1.5 * d - 2.5) * d * d + 1.0
        far = ((-0.5 * d + 2.5) * d - 4.0) * d + 2.0
        return np.where(d <= 1.0, near, np.where(d < 2.0, far, 0.0))

    def _bicubic(self, table, lu, lt, lu0, lt0, du, dt):
        """Cubic convolution (Keys 1981, IEEE Trans ASSP 29:1153) of ``table`` on its uniform grid."""
        rows, cols = table.shape
        x = np.clip((lu - lu0) / du, 1.0, rows - 2.000001)
        y = np.clip((lt - lt0) / dt, 1.0, cols - 2.000001)
        i = x.astype(np.int64)
        j = y.astype(np.int64)
        wx = self._cubic_weights(x - i)
        wy = self._cubic_weights(y - j)
        flat = table.ravel()
        out = np.zeros(np.shape(x))
        for a in range(4):
            base = (i - 1 + a) * cols + (j - 1)
            row = (flat[base] * wy[..., 0] + flat[base + 1] * wy[..., 1] + flat[base + 2] * wy[..., 2]
                   + flat[base + 3] * wy[..., 3])
            out += wx[..., a] * row
        return out

    def _f(self, u, tau):
        live = (tau > 0) & (u > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            lu = np.log(np.where(live, u, 1.0))
            lt = np.log(np.where(live, tau, 1.0))
        dt, du = self._fine_step
        origin = (self._fine_log_u[0], self._fine_log_tau[0])
        values = np.exp(np.clip(self._bicubic(self._fine_smooth, lu, lt, origin[0], origin[1], du, dt), -700, 700))
        inside = self._bilinear(self._fine_inside, lu, lt, origin[0], origin[1], du, dt) > 0.5
        values = np.where(inside, values, 0.0)
        within = live & (u >= self.u_nodes[0]) & (u <= self.u_nodes[-1]) & (tau <= self.tau_max) & (
            tau >= self.tau_nodes[0])
        return np.where(within, values, 0.0)

    def relative_sd(self, *, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """Relative standard error of :meth:`point` from the baseline's photon statistics."""
        _, _, u, tau, _ = self._scaled(np.zeros(np.size(mus_per_mm)), mus_per_mm, rho_mm, time_ps)
        lu = np.log(np.where(u > 0, u, 1.0))
        lt = np.log(np.where(tau > 0, tau, 1.0))
        return np.exp(self._bilinear(self._log_sd, lu, lt, self.log_u[0], self.log_tau[0],
                                     float(self.log_u[1] - self.log_u[0]), float(self.log_tau[1] - self.log_tau[0])))

    def serves(self, *, mus_per_mm, rho_mm, latest_time_ps) -> np.ndarray:
        """Whether the lookup serves a curve out to ``latest_time_ps``, per (μs, ρ) pair, shape (N,).

        Served: the distance lies within the photons' reach (u = ρμs at most the farthest
        stored exit), and at the latest time the table holds light with a relative standard
        error of at most :data:`SERVED_MAX_RELATIVE_SD`.

        Parameters
        ----------
        mus_per_mm, rho_mm, latest_time_ps : arrays (N,) [1/mm], [mm], [ps]
        """
        mus = np.atleast_1d(np.asarray(mus_per_mm, float))
        rho = np.broadcast_to(np.asarray(rho_mm, float), mus.shape)[:, None]
        late = np.broadcast_to(np.asarray(latest_time_ps, float), mus.shape)[:, None]
        u = rho[:, 0] * mus
        tau = self.v * late[:, 0] * mus
        relative = self.relative_sd(mus_per_mm=mus, rho_mm=rho, time_ps=np.maximum(late, 1e-3))[:, 0]
        lit = self.point(mua_per_mm=np.zeros(mus.size), mus_per_mm=mus, rho_mm=rho,
                         time_ps=np.maximum(late, 1e-3))[:, 0] > 0
        return (u <= self.u_max) & (u >= self.u_nodes[0]) & (tau <= self.tau_max) & lit & (
            relative <= SERVED_MAX_RELATIVE_SD)

    def curve_relative_sd(self, *, mua_per_mm: float, mus_per_mm: float, rho_mm) -> np.ndarray:
        """Response-weighted mean relative SD of the lookup over each whole curve R(ρ, t), shape (R,).

        The error of a quantity that integrates the curve over time (the frequency-domain
        transform): Σ R σ_rel Δt / Σ R Δt on 200 log-spaced times out to the table's reach.
        """
        rho = np.atleast_1d(np.asarray(rho_mm, float))
        times = np.geomspace(10.0, self.tau_max / (self.v * mus_per_mm), 200)
        out = np.empty(rho.size)
        for r in range(rho.size):
            grid = np.full(times.size, rho[r])
            point = self.point(mua_per_mm=[mua_per_mm], mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=times)[0]
            weight = point * np.gradient(times)
            sd = self.relative_sd(mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=times)[0]
            out[r] = float(np.sum(weight * sd) / np.sum(weight)) if np.sum(weight) > 0 else np.inf
        return out

    def frequency_domain(self, *, mua_per_mm, mus_per_mm, rho_mm, frequency_mhz) -> np.ndarray:
        """Complex R̃(ρ, ω) [1/mm²] by eq. (2) of the module docstring, shape (N, G).

        Parameters
        ----------
        mua_per_mm, mus_per_mm : array (N,) [1/mm]
        rho_mm, frequency_mhz : arrays broadcast together to (G,) [mm], [MHz]
        """
        mua = np.atleast_1d(np.asarray(mua_per_mm, float))
        mus = np.atleast_1d(np.asarray(mus_per_mm, float))
        rho, freq = np.broadcast_arrays(np.atleast_1d(np.asarray(rho_mm, float)),
                                        np.atleast_1d(np.asarray(frequency_mhz, float)))
        omega = 2.0 * math.pi * freq * 1e-6  # rad/ps
        live = np.flatnonzero(np.any(self._fine_log_f > -700.0, axis=0))  # τ columns holding light
        columns = slice(int(live[0]), int(live[-1]) + 1) if live.size else slice(0, 0)
        tau = np.exp(self._fine_log_tau[columns])
        weights = np.full(tau.size, self._fine_step[0]) * tau  # trapezoid in log τ: dτ = τ d(log τ)
        if tau.size:
            weights[[0, -1]] *= 0.5
        u = rho[None, :] * mus[:, None]  # (N, G)
        # each (N, G) needs a whole row of the table at its u: cubic convolution in log u over
        # four rows (smooth in μs), the photons' reach cut by the mask
        rows = self._fine_log_u.size
        x = np.clip((np.log(u) - self._fine_log_u[0]) / self._fine_step[1], 1.0, rows - 2.000001)
        i = x.astype(np.int64)
        wx = self._cubic_weights(x - i)  # (N, G, 4)
        smooth = self._fine_smooth[:, columns]
        mask = self._fine_inside[:, columns]
        log_values = sum(wx[..., a, None] * smooth[i - 1 + a] for a in range(4))
        fx = (x - i)[..., None]
        reached = ((1.0 - fx) * mask[i] + fx * mask[i + 1]) > 0.5
        values = np.where(reached, np.exp(np.clip(log_values, -700.0, 700.0)), 0.0)  # (N, G, T)
        inside = (u >= self.u_nodes[0]) & (u <= self.u_nodes[-1])
        values = np.where(inside[..., None], values, 0.0)
        rate = (mua[:, None] + 1j * omega[None, :] / self.v) / mus[:, None]  # per unit τ
        kernel = np.exp(-rate[:, :, None] * tau[None, None, :])
        return mus[:, None] ** 2 * np.einsum("ngt,ngt,t->ng", values, kernel, weights)

    def reach_warning(self, *, mus_per_mm, rho_max_mm) -> str | None:
        """A message when the farthest distance lies beyond the photons the baseline holds."""
        reach = float(np.max(np.asarray(rho_max_mm) * np.asarray(mus_per_mm)))
        if reach > self.u_max:
            return (f"rho up to {reach / float(np.min(mus_per_mm)):.3g} mm lies beyond this baseline's reach "
                    f"({self.u_max:.3g} scattering lengths); the Monte Carlo lookup reports no light there")
        return None


_LOOKUPS: dict[int, tuple] = {}


def time_resolved_lookup(baseline) -> TimeResolvedLookup:
    """The :class:`TimeResolvedLookup` of a baseline (built once per baseline object)."""
    entry = _LOOKUPS.get(id(baseline))
    if entry is not None and entry[0]() is baseline:
        return entry[1]
    lookup = TimeResolvedLookup(baseline)
    try:
        reference = weakref.ref(baseline)
    except TypeError:
        reference = (lambda obj: (lambda: obj))(baseline)
    _LOOKUPS[id(baseline)] = (reference, lookup)
    return lookup
