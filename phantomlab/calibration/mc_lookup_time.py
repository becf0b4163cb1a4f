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

F is the smoothed table of :mod:`phantomlab.calibration.mc_lookup_time_table` (cells of about
10 % in u and 4 % in τ in the similarity coordinates (log u, s = log(τ/u²)), smoothed as a
ratio to time-resolved diffusion), read here as a bicubic spline of log F.  The relative
standard error of each smoothed node is added to the fit's data variance, correlated over the
kernel's width (:meth:`TimeResolvedLookup.tau_bandwidth_at`), and so is the size of each
node's smoothing bias (:meth:`TimeResolvedLookup.relative_bias`).

The frequency-domain lookup is the Fourier transform of (1) term by term:

    R̃(ρ, ω) = ∫ R(ρ, t) e^(−iωt) dt = μs² ∫ F(ρμs, τ) e^(−(μa + iω/v) τ/μs) dτ            (2)

integrated on the table's τ grid (trapezoid in log τ) from the same smooth F.

References
----------
Graaff R et al. 1993, Appl Opt 32:426–434, doi:10.1364/AO.32.000426.
Kienle A, Patterson MS 1996, Phys Med Biol 41:2221–2227, doi:10.1088/0031-9155/41/10/026.
"""

from __future__ import annotations

import math
import weakref

import numpy as np
from scipy.interpolate import RectBivariateSpline

from phantomlab.calibration._lookup_kernels import error_pair_block, read_curves, read_rows, transform_rows
from phantomlab.calibration.mc_lookup_time_table import (
    BANDWIDTH_LOG_TAU,
    BANDWIDTH_LOG_TAU_LATE,
    BANDWIDTH_LOG_U,
    BANDWIDTH_LOG_U_FAR,
    BANDWIDTH_LOG_U_FRONT,
    front_ramp,
    front_share,
    smoothed_time_table,
    wide_shares,
)
from phantomlab.errors import InputError
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

__all__ = ["TimeResolvedLookup", "time_resolved_lookup", "LookupReachError", "SERVED_MAX_RELATIVE_SD"]

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


class TimeResolvedLookup:
    """Smooth time-resolved reflectance F(u, τ) of one baseline (fixed g, n, n_outside).

    Parameters
    ----------
    baseline : phantomlab.transport.montecarlo.Baseline or TimeTabulatedBaseline
        The photons, or their table as kept beside a cached baseline
        (:mod:`phantomlab.calibration.time_table_store`).

    Notes
    -----
    Built once per baseline (see :func:`time_resolved_lookup`); 3–4 s for two million
    stored photons.
    """

    def __init__(self, baseline):
        self.baseline = baseline
        self.g = float(baseline.g)
        self.n = float(baseline.n)
        self.n_outside = float(baseline.n_outside)
        self.v = SPEED_OF_LIGHT_MM_PER_PS / self.n
        table = getattr(baseline, "time_table", None)  # a table kept on disk (time_table_store)
        if table is None:
            table = smoothed_time_table(baseline)
        self.u_nodes, self.s_nodes = table.u_nodes, table.s_nodes
        inside = table.inside
        self._inside = inside
        self.log_u = np.log(self.u_nodes)
        self._spline = RectBivariateSpline(self.log_u, self.s_nodes, table.log_f, kx=3, ky=3)
        self._inside_spline = RectBivariateSpline(self.log_u, self.s_nodes, inside.astype(float), kx=1, ky=1)
        # the evaluation table: log F on a grid 4× finer in log u and s (from the bicubic spline,
        # once), read by cubic convolution (smooth: no kinks for the fit's Jacobian to find), the
        # spline's own smooth continuation beyond the photons' reach weighed by where they reach
        # (read bilinearly: 1 inside, 0 beyond, a smooth ramp before a distance's first photons)
        self._fine_s = np.linspace(self.s_nodes[0], self.s_nodes[-1], 4 * (self.s_nodes.size - 1) + 1)
        self._fine_log_u = np.linspace(self.log_u[0], self.log_u[-1], 4 * (self.log_u.size - 1) + 1)
        # (evaluated on the grid: the same numbers to the bit as point by point, 30× sooner)
        fine = np.clip(self._spline(self._fine_log_u, self._fine_s), -700.0, 700.0)
        self._fine_step = (float(self._fine_s[1] - self._fine_s[0]),
                           float(self._fine_log_u[1] - self._fine_log_u[0]))
        fine_lit = front_ramp(self._inside_spline(self._fine_log_u, self._fine_s) > 0.5, self._fine_step[0])
        self._fine_log_f = np.where(fine_lit > 0, fine, -700.0)
        self._fine_smooth = fine
        self._fine_lit = fine_lit
        self._log_sd = np.log(np.clip(np.where(inside, table.relative_sd, 1.0), 1e-6, 1.0))
        self._log_bias = np.log(np.clip(np.where(inside, table.relative_bias, 1.0), 1e-6, 1.0))
        self.counts = table.counts
        #: width of the smoothing kernel in log τ (the fit's correlation length of the lookup error)
        self.tau_bandwidth = BANDWIDTH_LOG_TAU
        self.tau_max = table.tau_max
        self._u_range = (float(self.u_nodes[0]), float(self.u_nodes[-1]))
        self._s_range = (float(self.s_nodes[0]), float(self.s_nodes[-1]))
        self.u_max = table.u_max

    def tau_bandwidth_at(self, *, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """Width (Gaussian SD in log τ) of the smoothing kernel at each point, as :meth:`relative_sd`."""
        _, _, u, tau, _ = self._scaled(np.zeros(np.size(mus_per_mm)), mus_per_mm, rho_mm, time_ps)
        _, lu, ls = self._coordinates(u, tau)
        _, late = wide_shares(self.g, lu, ls)
        return BANDWIDTH_LOG_TAU + late * (BANDWIDTH_LOG_TAU_LATE - BANDWIDTH_LOG_TAU)

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

    def curves(self, *, mua_per_mm, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """:meth:`point` for whole curves, one distance per row, in one compiled pass.

        Parameters
        ----------
        mua_per_mm, mus_per_mm, rho_mm : array (N,) [1/mm], [1/mm], [mm]
        time_ps : array (N, L) [ps]

        Returns
        -------
        ndarray (N, L)
            The values of :meth:`point` (to rounding; tests/calibration/test_mc_lookup_time.py).
        """
        t = np.ascontiguousarray(np.atleast_2d(time_ps), dtype=float)
        mua, mus, rho = (np.ascontiguousarray(np.broadcast_to(np.asarray(a, dtype=float).ravel(), t.shape[:1]))
                         for a in (mua_per_mm, mus_per_mm, rho_mm))
        if np.any(~np.isfinite(mus)) or np.any(mus <= 0) or np.any(mua < 0):
            raise InputError("Monte Carlo lookup: mus_per_mm must be > 0 and mua_per_mm >= 0")
        out = np.empty(t.shape)
        ds, du = self._fine_step
        read_curves(self._fine_smooth, self._fine_lit, float(self._fine_log_u[0]), float(self._fine_s[0]),
                    float(du), float(ds), float(self.v), mua, mus, rho, t, self._u_range, float(self.tau_max),
                    self._s_range, out)
        return out

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
        # Keys's kernel at the distances 1 + f, f, 1 − f, 2 − f to nodes i−1, i, i+1, i+2,
        # written out as polynomials in f
        f = np.asarray(frac, float)
        f2 = f * f
        f3 = f2 * f
        out = np.empty(f.shape + (4,))
        out[..., 0] = -0.5 * f3 + f2 - 0.5 * f
        out[..., 1] = 1.5 * f3 - 2.5 * f2 + 1.0
        out[..., 2] = -1.5 * f3 + 2.0 * f2 + 0.5 * f
        out[..., 3] = 0.5 * f3 - 0.5 * f2
        return out

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

    def _coordinates(self, u, tau):
        """(log u, s = log τ − 2 log u) of the table, and where both are positive."""
        live = (tau > 0) & (u > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            lu = np.log(np.where(live, u, 1.0))
            ls = np.log(np.where(live, tau, 1.0)) - 2.0 * lu
        return live, lu, ls

    def _f(self, u, tau):
        live, lu, ls = self._coordinates(u, tau)
        ds, du = self._fine_step
        origin = (self._fine_log_u[0], self._fine_s[0])
        if lu.ndim == 2 and np.all(u == u[:, :1]):  # one distance per row (every curve): the compiled path
            lu_row = np.log(np.where(u[:, 0] > 0, u[:, 0], 1.0))  # lu is 0 where τ <= 0: not from it
            values = np.empty(ls.shape)
            read_rows(self._fine_smooth, self._fine_lit, lu_row, np.ascontiguousarray(ls, dtype=float),
                      float(origin[0]), float(origin[1]), float(du), float(ds), values)
        else:
            values = np.exp(np.clip(self._bicubic(self._fine_smooth, lu, ls, origin[0], origin[1], du, ds),
                                    -700, 700))
            values = values * self._bilinear(self._fine_lit, lu, ls, origin[0], origin[1], du, ds)
        within = live & (u >= self.u_nodes[0]) & (u <= self.u_nodes[-1]) & (tau <= self.tau_max) & (
            ls >= self.s_nodes[0]) & (ls <= self.s_nodes[-1])
        return np.where(within, values, 0.0)

    def _node_table(self, log_table, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """A per-node table of logs read bilinearly at the points (μs, ρ, t), exponentiated."""
        _, _, u, tau, _ = self._scaled(np.zeros(np.size(mus_per_mm)), mus_per_mm, rho_mm, time_ps)
        _, lu, ls = self._coordinates(u, tau)
        return np.exp(self._bilinear(log_table, lu, ls, self.log_u[0], self.s_nodes[0],
                                     float(self.log_u[1] - self.log_u[0]), float(self.s_nodes[1] - self.s_nodes[0])))

    def relative_sd(self, *, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """Relative standard error of :meth:`point` from the baseline's photon statistics."""
        return self._node_table(self._log_sd, mus_per_mm, rho_mm, time_ps)

    def relative_bias(self, *, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """Size of the smoothing's bias of :meth:`point`, relative (the plug-in ½ h² f'' of each node)."""
        return self._node_table(self._log_bias, mus_per_mm, rho_mm, time_ps)

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

    def curve_relative_sd(self, *, mua_per_mm: float, mus_per_mm: float, rho_mm):
        """Response-weighted mean relative SD of the lookup over each whole curve R(ρ, t), shape (R,).

        How well the table holds a quantity that integrates the curve over time (the fd fit's
        reach): Σ R σ_rel Δt / Σ R Δt on 200 log-spaced times out to the table's reach.
        """
        rho = np.atleast_1d(np.asarray(rho_mm, float))
        times = np.geomspace(10.0, self.tau_max / (self.v * mus_per_mm), 200)
        out = np.empty(rho.size)
        for r in range(rho.size):
            grid = np.full(times.size, rho[r])
            point = self.point(mua_per_mm=[mua_per_mm], mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=times)[0]
            weight = point * np.gradient(times)
            sd = self.relative_sd(mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=times)[0]
            total = np.sum(weight)
            out[r] = float(np.sum(weight * sd) / total) if total > 0 else np.inf
        return out

    def _log_u_bandwidth_at(self, *, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """Width (Gaussian SD in log u) of the smoothing kernel at each point (the blend of the table's kernels)."""
        _, _, u, tau, _ = self._scaled(np.zeros(np.size(mus_per_mm)), mus_per_mm, rho_mm, time_ps)
        _, lu, ls = self._coordinates(u, tau)
        far, late = wide_shares(self.g, lu, ls)
        early = (1 - late) * front_share(lu, ls)
        return (1 - far) * (early * BANDWIDTH_LOG_U_FRONT + (1 - early) * BANDWIDTH_LOG_U) + far * BANDWIDTH_LOG_U_FAR

    def transform_error_covariance(self, *, mua_per_mm: float, mus_per_mm: float, rho_mm, frequency_mhz,
                                   times: int = 300) -> np.ndarray:
        """Covariance of the lookup's error in ln amplitude and phase lag [rad] of its transform, (2RF, 2RF).

        The transform R̃ = ∫ R(t) e^(−iωt) dt moves by δ ln R̃ = ∫ r(t) δ(t) dt, r = R e^(−iωt) dt / R̃,
        for a relative error δ(t) of the table: ln amplitude by its real part, the phase lag
        (−arg R̃) by minus its imaginary part.  δ holds the photon noise (:meth:`relative_sd`)
        and the smoothing bias (:meth:`relative_bias`), each correlated along the curve as the
        smoothing kernels overlap in s = ln(τ/u²) (widths :meth:`tau_bandwidth_at`) and in ln u
        (their curve-weighted widths): at two distances the times
        whose s agree share the table's nodes.  A per-cent error that is the same at every time moves no
        phase; an error that changes along the curve averages down over its many kernel widths.
        Quadrature: ``times`` log-spaced times out to the table's reach.

        Parameters
        ----------
        mua_per_mm, mus_per_mm : float [1/mm]
        rho_mm : array (R,) [mm]
        frequency_mhz : array (F,) [MHz]

        Returns
        -------
        ndarray (2RF, 2RF)
            Order: ln amplitude at (ρ₀, f₀), (ρ₀, f₁), …, then the phase lags in the same order.
        """
        rho = np.atleast_1d(np.asarray(rho_mm, float))
        freq = np.atleast_1d(np.asarray(frequency_mhz, float))
        t = np.geomspace(10.0, self.tau_max / (self.v * mus_per_mm), int(times))
        dt = np.gradient(t)
        omega = 2.0 * math.pi * freq * 1e-6  # rad/ps
        R, F = rho.size, freq.size
        log_t = np.log(t)
        rows_noise = np.zeros((R, 2 * F, t.size))
        rows_bias = np.zeros((R, 2 * F, t.size))
        widths = np.zeros((R, t.size))
        width_u = np.full(R, BANDWIDTH_LOG_U)  # curve-weighted, as the transform weighs the curve
        for r in range(R):
            grid = np.full(t.size, rho[r])
            value = self.point(mua_per_mm=[mua_per_mm], mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=t)[0]
            held = value * dt
            if held.sum() > 0:
                h_u = self._log_u_bandwidth_at(mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=t)[0]
                width_u[r] = float(np.sum(held * h_u) / held.sum())
            phasor = value[None, :] * np.exp(-1j * omega[:, None] * t[None, :]) * dt[None, :]  # (F, T)
            total = phasor.sum(axis=1, keepdims=True)
            with np.errstate(invalid="ignore", divide="ignore"):
                weight = np.where(np.abs(total) > 0, phasor / total, 0.0)
            parts = np.concatenate([weight.real, -weight.imag])  # (2F, T): ln amplitude, phase lag
            rows_noise[r] = parts * self.relative_sd(mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=t)[0]
            rows_bias[r] = parts * self.relative_bias(mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=t)[0]
            widths[r] = self.tau_bandwidth_at(mus_per_mm=[mus_per_mm], rho_mm=grid, time_ps=t)[0]
        pair_u = width_u[:, None] ** 2 + width_u[None, :] ** 2
        corr_u = np.sqrt(2 * width_u[:, None] * width_u[None, :] / pair_u) * np.exp(
            -((np.log(rho)[:, None] - np.log(rho)[None, :]) ** 2) / (2 * pair_u))
        out = np.zeros((R, 2 * F, R, 2 * F))
        block = np.empty((2 * F, 2 * F))
        for a in range(R):
            for b in range(a, R):
                # the table is smoothed in s = ln(τ/u²): at two distances the same table nodes
                # hold the times whose s agree, t_b = t_a (ρ_b/ρ_a)² (compiled: error_pair_block)
                error_pair_block(rows_noise[a], rows_bias[a], rows_noise[b], rows_bias[b], log_t, widths[a],
                                 widths[b], 2.0 * (math.log(rho[a]) - math.log(rho[b])), block)
                out[a, :, b, :] = corr_u[a, b] * block
                out[b, :, a, :] = corr_u[a, b] * block.T
        # reorder (R, [amp F, lag F]) to ([amp (R, F)], [lag (R, F)])
        order = np.concatenate([np.arange(R)[:, None] * 2 * F + np.arange(F)[None, :],
                                np.arange(R)[:, None] * 2 * F + F + np.arange(F)[None, :]]).ravel()
        flat = out.reshape(2 * R * F, 2 * R * F)
        return flat[np.ix_(order, order)]

    def frequency_domain(self, *, mua_per_mm, mus_per_mm, rho_mm, frequency_mhz) -> np.ndarray:
        """Complex R̃(ρ, ω) [1/mm²] by eq. (2) of the module docstring, shape (N, G).

        Parameters
        ----------
        mua_per_mm, mus_per_mm : array (N,) [1/mm]
        rho_mm, frequency_mhz : arrays broadcast together to (G,) [mm], [MHz]
        """
        mua = np.ascontiguousarray(np.atleast_1d(np.asarray(mua_per_mm, float)))
        mus = np.ascontiguousarray(np.atleast_1d(np.asarray(mus_per_mm, float)))
        rho, freq = np.broadcast_arrays(np.atleast_1d(np.asarray(rho_mm, float)),
                                        np.atleast_1d(np.asarray(frequency_mhz, float)))
        omega = np.ascontiguousarray(2.0 * math.pi * freq * 1e-6)  # rad/ps
        smooth, mask, s_nodes, weights = self._transform_columns()
        u = np.ascontiguousarray(rho[None, :] * mus[:, None])  # (N, G)
        out = np.empty(u.shape, dtype=complex)
        # each (N, G) needs a whole row of the table at its u: cubic convolution in log u over
        # four rows (smooth in μs), weighed by the photons' reach; compiled (_numpy_transform
        # is the same sum in numpy)
        transform_rows(smooth, mask, float(self._fine_log_u[0]), float(self._fine_step[1]), s_nodes, weights,
                       float(self.tau_max), self._u_range, float(self.v), mua, mus, u, omega, out)
        return out

    def _transform_columns(self):
        """The fine table's columns that hold light, with their s and trapezoid weights in ln τ (made once)."""
        if getattr(self, "_columns", None) is None:
            live = np.flatnonzero(np.any(self._fine_log_f > -700.0, axis=0))  # s columns holding light
            columns = slice(int(live[0]), int(live[-1]) + 1) if live.size else slice(0, 0)
            s_nodes = np.ascontiguousarray(self._fine_s[columns])
            weights = np.full(s_nodes.size, self._fine_step[0])  # trapezoid in log τ = s + 2 log u: dτ = τ ds
            if s_nodes.size:
                weights[[0, -1]] *= 0.5
            self._columns = (np.ascontiguousarray(self._fine_smooth[:, columns]),
                             np.ascontiguousarray(self._fine_lit[:, columns]), s_nodes, weights)
        return self._columns

    def _numpy_transform(self, *, mua_per_mm, mus_per_mm, rho_mm, frequency_mhz) -> np.ndarray:
        """:meth:`frequency_domain` in numpy (the compiled kernel's reference in the tests)."""
        mua = np.atleast_1d(np.asarray(mua_per_mm, float))
        mus = np.atleast_1d(np.asarray(mus_per_mm, float))
        rho, freq = np.broadcast_arrays(np.atleast_1d(np.asarray(rho_mm, float)),
                                        np.atleast_1d(np.asarray(frequency_mhz, float)))
        omega = 2.0 * math.pi * freq * 1e-6  # rad/ps
        smooth, mask, s_nodes, weights = self._transform_columns()
        u = rho[None, :] * mus[:, None]  # (N, G)
        rows = self._fine_log_u.size
        x = np.clip((np.log(u) - self._fine_log_u[0]) / self._fine_step[1], 1.0, rows - 2.000001)
        i = x.astype(np.int64)
        wx = self._cubic_weights(x - i)  # (N, G, 4)
        log_values = sum(wx[..., a, None] * smooth[i - 1 + a] for a in range(4))
        fx = (x - i)[..., None]
        lit = (1.0 - fx) * mask[i] + fx * mask[i + 1]
        tau = np.exp(s_nodes[None, None, :] + 2.0 * np.log(u)[..., None])  # (N, G, T)
        lit = np.where(tau <= self.tau_max, lit, 0.0)
        values = lit * np.exp(np.clip(log_values, -700.0, 700.0))  # (N, G, T)
        inside = (u >= self.u_nodes[0]) & (u <= self.u_nodes[-1])
        values = np.where(inside[..., None], values, 0.0)
        rate = (mua[:, None] + 1j * omega[None, :] / self.v) / mus[:, None]  # per unit τ
        kernel = np.exp(-rate[:, :, None] * tau)
        return mus[:, None] ** 2 * np.einsum("ngt,ngt,ngt,t->ng", values, kernel, tau, weights)

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
