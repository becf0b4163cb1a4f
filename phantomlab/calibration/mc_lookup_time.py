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

F is tabulated on cells of about 10 % in u and 4 % in τ, in the coordinates (log u,
s = log(τ/u²)): s is the similarity variable of diffusion, in which the peak of a curve far
from the source stays at one s (τ_peak ≈ 0.3 (1 − g) u²), so a kernel wide in log u at fixed s
follows the curves' shape instead of cutting across their rising edges.  F is smoothed as a
ratio to the time-resolved diffusion model of the same medium (``kienle1997`` of
:mod:`phantomlab.transport.time_domain` at μa = 0, integrated over each cell, a smooth control
as in :mod:`phantomlab.calibration.mc_lookup`): log(F_MC/F_diffusion) varies slowly except at
the earliest times, and is smoothed by a local-linear kernel regression in (log u, s)
(Cleveland 1979) with weights from the photon counts; log F is then a bicubic spline.  The
kernel is 0.12 wide in log u and 0.06 in s, and wider where the ratio is smooth: 0.3 in log u
beyond 10 transport lengths once the curve has peaked (0.12 nearer than 3, blended between),
and 0.2 in s from six times the peak time on (0.06 before twice it).  Measured on quarters of
a 3-million-photon baseline fitted to independent Monte Carlo data
(tests/calibration/fixtures/mc_td_half_space.npz), the wider kernels brought the spread of
μa at μs′/μa = 1000 (20 mm) from 5.6 to 3.9 %; a wide kernel in log u on the rising edge
biased μs′ at μs′/μa = 10 by −18 %, hence none there.  The relative standard error of each
smoothed node (counting statistics through the kernel weights) is kept for the fit, which
adds it to the data's variance, correlated over the kernel's width
(:meth:`TimeResolvedLookup.tau_bandwidth_at`), and so is the size of each node's smoothing
bias, the plug-in ½ h² f'' of a local-linear Gaussian-kernel fit (Fan & Gijbels 1996,
*Local Polynomial Modelling and Its Applications*, eq. 3.10) with f'' from second differences
of the smoothed table (:meth:`TimeResolvedLookup.relative_bias`): a few per cent on the
earliest rise, 0.1–0.3 % after the peak.

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

from phantomlab.calibration.lookup_smoothing import fill_rows, local_linear_2d
from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.time_domain import SPEED_OF_LIGHT_MM_PER_PS

__all__ = ["TimeResolvedLookup", "time_resolved_lookup", "LookupReachError", "SERVED_MAX_RELATIVE_SD"]

#: Radial cells of the table, in scattering lengths u = ρμs (log spaced).
_U_RANGE = (0.5, 400.0)
_U_STEP = math.log(1.10)
#: Path cells of the table, in scattering lengths τ = Lμs (log spaced).
_TAU_MIN = 0.5
_TAU_STEP = math.log(1.04)
#: Kernel widths (Gaussian SDs) of the smoothing, in log u and in s (= log τ at fixed u).
#: common practice, no source: about two cells each way, chosen by comparison with direct
#: Monte Carlo runs (tests/calibration/test_mc_lookup_time.py).
_BANDWIDTH_LOG_U = 0.12
_BANDWIDTH_LOG_TAU = 0.06
#: Wider kernels where the ratio to diffusion is smooth (see the module docstring), chosen
#: on independent Monte Carlo data: in s from the first to the second multiple of the
#: diffusion peak time on (linear in s) ...
_BANDWIDTH_LOG_TAU_LATE = 0.2
_LATE_FROM_PEAK = (2.0, 6.0)
#: ... and in log u between these distances [transport lengths] (linear in log u), only from
#: this fraction of the peak time on (linear in s up to the peak).
_BANDWIDTH_LOG_U_FAR = 0.3
_WIDE_FROM_TRANSPORT_LENGTHS = (3.0, 10.0)
_WIDE_U_FROM_PEAK = 0.5
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
        live = (u > 0) & (tau > 0)
        u, tau, weight = u[live], tau[live], weight[live]
        log_u_photon = np.log(u)
        s_photon = np.log(tau) - 2.0 * log_u_photon  # the diffusion similarity variable log(τ/u²)
        lu_edges = np.arange(math.log(_U_RANGE[0]), math.log(_U_RANGE[1]) + _U_STEP, _U_STEP)
        tau_max = max(float(tau.max()) if tau.size else 1.0, _TAU_MIN * 2)
        s_low = math.log(_TAU_MIN) - 2.0 * lu_edges[-1]
        s_high = math.log(tau_max) - 2.0 * lu_edges[0]
        s_edges = s_low + _TAU_STEP * np.arange(int(math.ceil((s_high - s_low) / _TAU_STEP)) + 1)
        counts, _, _ = np.histogram2d(log_u_photon, s_photon, bins=(lu_edges, s_edges))
        sums, _, _ = np.histogram2d(log_u_photon, s_photon, bins=(lu_edges, s_edges), weights=weight)
        squares, _, _ = np.histogram2d(log_u_photon, s_photon, bins=(lu_edges, s_edges), weights=weight * weight)
        launched = float(baseline.photons)
        launch = float(baseline.launch_weight)
        # expected weight of each cell under the control: ∫∫ 2π u F_c du dτ, du dτ = u τ dx ds
        # (x = log u, s = log τ − 2x), Gauss–Legendre 3×3 in (x, s)
        x, w = np.polynomial.legendre.leggauss(3)
        xq = 0.5 * (lu_edges[:-1, None] + lu_edges[1:, None]) + 0.5 * _U_STEP * x[None, :]  # (U, 3)
        sq = 0.5 * (s_edges[:-1, None] + s_edges[1:, None]) + 0.5 * _TAU_STEP * x[None, :]  # (S, 3)
        wx = 0.5 * _U_STEP * w  # (3,)
        wy = 0.5 * _TAU_STEP * w
        uq = np.exp(xq).reshape(-1, 1)  # (3U, 1)
        tq = np.exp(sq.reshape(1, -1) + 2.0 * xq.reshape(-1, 1))  # (3U, 3S)
        control_nodes = _control(baseline, uq, tq).reshape(xq.shape[0], 3, sq.shape[0], 3)
        jacobian = (2 * math.pi * uq * uq * tq).reshape(control_nodes.shape)
        expected = np.einsum("aibj,aibj,i,j->ab", control_nodes, jacobian, wx, wy)
        measured = launch * sums / launched  # per incident photon
        use = (counts >= _MIN_PHOTONS) & (expected > 0) & (measured > 0)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_ratio = np.where(use, np.log(measured / expected), 0.0)
            # relative variance of a cell's weight sum: Σw²/(Σw)² (counting statistics)
            inverse_var = np.where(use, sums**2 / squares, 0.0)
        self.u_nodes = np.exp(0.5 * (lu_edges[:-1] + lu_edges[1:]))
        self.s_nodes = 0.5 * (s_edges[:-1] + s_edges[1:])
        far, late = self._wide_shares(np.log(self.u_nodes)[:, None], self.s_nodes[None, :])
        smoothed = np.zeros(use.shape)
        spread = np.zeros(use.shape)
        bias = np.zeros(use.shape)
        # four local-linear fits (narrow or wide in log u × narrow or wide in s), blended
        for u_width, s_width, share in ((_BANDWIDTH_LOG_U, _BANDWIDTH_LOG_TAU, (1 - far) * (1 - late)),
                                        (_BANDWIDTH_LOG_U_FAR, _BANDWIDTH_LOG_TAU, far * (1 - late)),
                                        (_BANDWIDTH_LOG_U, _BANDWIDTH_LOG_TAU_LATE, (1 - far) * late),
                                        (_BANDWIDTH_LOG_U_FAR, _BANDWIDTH_LOG_TAU_LATE, far * late)):
            share = np.broadcast_to(share, use.shape)
            if not np.any(share > 0):
                continue
            sx, sy = u_width / _U_STEP, s_width / _TAU_STEP
            fitted, mass = local_linear_2d(log_ratio, inverse_var, sx, sy)
            # standard error of a node (local-constant approximation of the kernel fit):
            # Var = Σ K² w / (Σ K w)², K the Gaussian kernel with peak 1; K² is the Gaussian of
            # half the variance, so with the unit-area filters above Σ K w = Z·f(w) and
            # Σ K² w = (Z/2)·f_half(w), Z = 2π σ_u σ_s in cells
            half = gaussian_filter1d(gaussian_filter1d(inverse_var, sx / math.sqrt(2), axis=0, mode="constant"),
                                     sy / math.sqrt(2), axis=1, mode="constant")
            with np.errstate(divide="ignore", invalid="ignore"):
                node_sd = np.sqrt(np.where(mass > 0, half / (4 * math.pi * sx * sy * mass**2), np.inf))
            # the kernel's bias, ½ h² f'' per axis (local-linear regression with a Gaussian
            # kernel; Fan & Gijbels 1996, Local Polynomial Modelling, eq. 3.10), with f'' from
            # second differences two cells wide of the fitted values themselves
            with np.errstate(invalid="ignore"):
                curv_u = np.full(fitted.shape, np.nan)
                curv_u[2:-2] = (fitted[4:] - 2 * fitted[2:-2] + fitted[:-4]) / 4.0
                curv_s = np.full(fitted.shape, np.nan)
                curv_s[:, 2:-2] = (fitted[:, 4:] - 2 * fitted[:, 2:-2] + fitted[:, :-4]) / 4.0
                node_bias = 0.5 * np.abs(np.nan_to_num(sx**2 * curv_u) + np.nan_to_num(sy**2 * curv_s))
            bias = bias + np.where(share > 0, share * node_bias, 0.0)
            smoothed = smoothed + np.where(share > 0, share * fitted, 0.0)
            # the fits share their photons: the SD of the blend is at most the blend of the SDs
            spread = spread + np.where(share > 0, share * np.where(share > 0, node_sd, 0.0), 0.0)
        variance = spread**2
        relative_sd = np.sqrt(variance)
        control_centre = _control(baseline, self.u_nodes[:, None],
                                  np.exp(self.s_nodes[None, :] + 2.0 * np.log(self.u_nodes)[:, None]))
        # before the first photon of a row (earlier than light arrives) and after its last one,
        # there is no light to report; the spline is given the row's edge values there (so it
        # does not ring) and :meth:`_f` returns 0 outside
        reached = np.isfinite(smoothed) & np.isfinite(variance)
        first = np.where(use.any(axis=1), np.argmax(use, axis=1), use.shape[1])
        last = np.where(use.any(axis=1), use.shape[1] - 1 - np.argmax(use[:, ::-1], axis=1), -1)
        column = np.arange(use.shape[1])[None, :]
        inside = reached & (column >= first[:, None]) & (column <= last[:, None])
        ratio = np.where(inside, smoothed, np.nan)
        ratio = fill_rows(ratio)
        with np.errstate(divide="ignore"):
            log_f = np.log(np.clip(control_centre, 1e-300, None)) + ratio
        log_f = np.clip(log_f, -700.0, None)
        self._inside = inside
        self.log_u = np.log(self.u_nodes)
        self._spline = RectBivariateSpline(self.log_u, self.s_nodes, log_f, kx=3, ky=3)
        self._inside_spline = RectBivariateSpline(self.log_u, self.s_nodes, inside.astype(float), kx=1, ky=1)
        # the evaluation table: log F on a grid 4× finer in log u and s (from the bicubic spline,
        # once), read by cubic convolution (smooth: no kinks for the fit's Jacobian to find), the
        # spline's own smooth continuation beyond the photons' reach cut by the mask
        self._fine_s = np.linspace(self.s_nodes[0], self.s_nodes[-1], 4 * (self.s_nodes.size - 1) + 1)
        self._fine_log_u = np.linspace(self.log_u[0], self.log_u[-1], 4 * (self.log_u.size - 1) + 1)
        grid_u, grid_s = np.meshgrid(self._fine_log_u, self._fine_s, indexing="ij")
        fine = np.clip(self._spline.ev(grid_u, grid_s), -700.0, 700.0)
        fine_inside = self._inside_spline.ev(grid_u, grid_s) > 0.5
        self._fine_log_f = np.where(fine_inside, fine, -700.0)
        self._fine_smooth = fine
        self._fine_inside = fine_inside.astype(float)
        self._fine_step = (float(self._fine_s[1] - self._fine_s[0]),
                           float(self._fine_log_u[1] - self._fine_log_u[0]))
        self._log_sd = np.log(np.clip(np.where(inside, relative_sd, 1.0), 1e-6, 1.0))
        self._log_bias = np.log(np.clip(np.where(inside, bias, 1.0), 1e-6, 1.0))
        self.counts = counts
        #: width of the smoothing kernel in log τ (the fit's correlation length of the lookup error)
        self.tau_bandwidth = _BANDWIDTH_LOG_TAU
        self.tau_max = tau_max
        self.u_max = float(u.max()) if u.size else 0.0

    def _wide_shares(self, log_u, s):
        """Shares (0–1) of the wide kernels in log u and in s at table coordinates (log u, s).

        In log u: 0 within the first, 1 beyond the second distance of
        :data:`_WIDE_FROM_TRANSPORT_LENGTHS`, linear in log u between.  In s: 0 up to twice
        the time of the diffusion peak at that distance, 1 from six times it (linear in s),
        the peak taken as τ_p = 0.3 (1 − g) u² + u (half-space diffusion at μa = 0,
        t_p = ρ²/(10 D v) with D = 1/(3μs′) (Patterson et al. 1989, eq. 5 at μa = 0), plus
        the straight path).
        """
        a, b = (math.log(t) for t in _WIDE_FROM_TRANSPORT_LENGTHS)
        peak = np.log(0.3 * (1.0 - self.g) + np.exp(-log_u))  # log(τ_p/u²)
        # before the peak the ratio to diffusion changes fast with u at fixed s: narrow there
        after_peak = np.clip((s - peak + math.log(_WIDE_U_FROM_PEAK)) / -math.log(_WIDE_U_FROM_PEAK), 0.0, 1.0)
        far = np.clip((log_u + math.log(1.0 - self.g) - a) / (b - a), 0.0, 1.0) * after_peak
        late = np.clip((s - peak - math.log(_LATE_FROM_PEAK[0])) / math.log(_LATE_FROM_PEAK[1] / _LATE_FROM_PEAK[0]),
                       0.0, 1.0)
        return far, late

    def tau_bandwidth_at(self, *, mus_per_mm, rho_mm, time_ps) -> np.ndarray:
        """Width (Gaussian SD in log τ) of the smoothing kernel at each point, as :meth:`relative_sd`."""
        _, _, u, tau, _ = self._scaled(np.zeros(np.size(mus_per_mm)), mus_per_mm, rho_mm, time_ps)
        _, lu, ls = self._coordinates(u, tau)
        _, late = self._wide_shares(lu, ls)
        return _BANDWIDTH_LOG_TAU + late * (_BANDWIDTH_LOG_TAU_LATE - _BANDWIDTH_LOG_TAU)

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
        values = np.exp(np.clip(self._bicubic(self._fine_smooth, lu, ls, origin[0], origin[1], du, ds), -700, 700))
        inside = self._bilinear(self._fine_inside, lu, ls, origin[0], origin[1], du, ds) > 0.5
        values = np.where(inside, values, 0.0)
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
        """Width (Gaussian SD in log u) of the smoothing kernel at each point (wider far out, after the peak)."""
        _, _, u, tau, _ = self._scaled(np.zeros(np.size(mus_per_mm)), mus_per_mm, rho_mm, time_ps)
        _, lu, ls = self._coordinates(u, tau)
        far, _ = self._wide_shares(lu, ls)
        return _BANDWIDTH_LOG_U + far * (_BANDWIDTH_LOG_U_FAR - _BANDWIDTH_LOG_U)

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
        width_u = np.full(R, _BANDWIDTH_LOG_U)  # curve-weighted, as the transform weighs the curve
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
        for a in range(R):
            for b in range(a, R):
                # the table is smoothed in s = ln(τ/u²): at two distances the same table nodes
                # hold the times whose s agree, t_b = t_a (ρ_b/ρ_a)²
                pair = widths[a][:, None] ** 2 + widths[b][None, :] ** 2
                gap_s = (log_t[:, None] - log_t[None, :]) - 2.0 * (math.log(rho[a]) - math.log(rho[b]))
                corr_t = np.sqrt(2 * widths[a][:, None] * widths[b][None, :] / pair) * np.exp(-(gap_s**2) / (2 * pair))
                block = corr_u[a, b] * (rows_noise[a] @ corr_t @ rows_noise[b].T + rows_bias[a] @ corr_t @ rows_bias[b].T)
                out[a, :, b, :] = block
                out[b, :, a, :] = block.T
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
        mua = np.atleast_1d(np.asarray(mua_per_mm, float))
        mus = np.atleast_1d(np.asarray(mus_per_mm, float))
        rho, freq = np.broadcast_arrays(np.atleast_1d(np.asarray(rho_mm, float)),
                                        np.atleast_1d(np.asarray(frequency_mhz, float)))
        omega = 2.0 * math.pi * freq * 1e-6  # rad/ps
        live = np.flatnonzero(np.any(self._fine_log_f > -700.0, axis=0))  # s columns holding light
        columns = slice(int(live[0]), int(live[-1]) + 1) if live.size else slice(0, 0)
        s_nodes = self._fine_s[columns]
        weights = np.full(s_nodes.size, self._fine_step[0])  # trapezoid in log τ = s + 2 log u: dτ = τ ds
        if s_nodes.size:
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
        tau = np.exp(s_nodes[None, None, :] + 2.0 * np.log(u)[..., None])  # (N, G, T)
        reached &= tau <= self.tau_max
        values = np.where(reached, np.exp(np.clip(log_values, -700.0, 700.0)), 0.0)  # (N, G, T)
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
