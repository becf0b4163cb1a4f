"""A smooth Monte Carlo lookup of R(ρ) for fitting, built on a stored baseline (layer 3).

A fit needs a forward model that is smooth in μa and μs: its Jacobian drives the search
and gives the covariance.  A baseline evaluated directly (``Baseline.srdr``) is smooth in μa
(Beer–Lambert re-weighting of fixed photons) but not in μs: scaling moves every photon's exit
radius, and photons hop between annuli, so R(ρ) jumps by the photon noise of one annulus as
μs changes by a fraction of a percent.  On the flat valley of a relative-data fit those
jumps become local minima.

This module therefore asks the baseline only for re-weighted values at its own reference
scattering μs_ref (no scaling inside), on a fixed log-spaced radial grid u with annuli of a
fixed relative width, over a grid of absorption ratios r = μa/μs, smooths each row over
log u, and interpolates log R with a bicubic spline in (log r, log u).

The smoothing matters because the annuli are independent photon samples: an interpolating
spline through them keeps their noise as wiggles a node apart, and a fit of relative data,
whose valley runs along μs′ and so slides the distances across the table, finds a local
minimum in every wiggle (then its linearised SD is far too small).  Each row is divided by a
smooth control — the fluence-plus-flux diffusion R(ρ) of the same medium (Kienle &
Patterson 1997, J Opt Soc Am A 14:246) — and the ratio, which varies slowly beyond about one
transport length, is smoothed there by a local-linear kernel regression weighted by the
photon statistics, its kernel as wide as each node's noise needs (:func:`_smooth_rows`);
the control is multiplied back.  The table's nodes are averages over annuli about 10 % wide,
read as point values; beyond one transport length each is corrected by the ratio of the
control's point value to its own annulus average (the annulus bias, +0.2 % at μs′/μa = 10,
is a property of the curve's shape, which the control shares).  (A global penalised spline with its penalty chosen by
cross-validation was tried and rejected: one penalty for the whole row flattened the
near-source shoulder by 2 % and biased μa at μs′/μa = 10.)  The scaling relation of the
semi-infinite homogeneous medium (g and the indices fixed) is then applied analytically:

    R(ρ; μa, μs) = (μs/μs_ref)² · R_ref(ρ μs/μs_ref; μa_ref' = r μs_ref),   r = μa/μs

(Graaff et al. 1993, Appl Opt 32:426; Kienle & Patterson 1996, Phys Med Biol 41:2221 — the
relation the baseline itself uses).  Measured values are annulus averages over the bins of the
measurement's distances (edges at the midpoints, ``rho_bin_edges_mm``), integrated here by
Gauss–Legendre quadrature of the smooth point values.
"""

from __future__ import annotations

import warnings

import numpy as np
from scipy.interpolate import RectBivariateSpline

from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["SmoothLookup"]

#: Radial grid of the table, in reference scattering lengths u·μs_ref (log spaced, annuli
#: about 10 % wide): out to 250 scattering lengths, i.e. 50 transport lengths at g = 0.8 — a
#: probe reaching 40 mm at μs′ = 1 /mm (what μs′/μa = 1000 needs to pin μa).
_U_RANGE_MFP = (0.02, 250.0)
_U_NODES = 97
#: Absorption-ratio grid μa/μs of the table (log spaced), from the baseline's lowest ratio.
_RATIO_MAX = 1.0
_RATIO_NODES = 45
#: Gauss–Legendre nodes per measurement annulus.
_QUADRATURE = 6


#: Fewest photon-bearing nodes a row needs to be smoothed (fewer: kept as counted).
_MIN_SMOOTHED_NODES = 8
#: Relative SD the smoothing brings each table node down to (where its photons do not).
_TARGET_RELATIVE_SD = 0.003


def _control_log_reflectance(baseline, mua_per_mm, rho_mm) -> np.ndarray:
    """log R of the fluence-plus-flux diffusion model for the baseline's medium, (ratios, u)."""
    from phantomlab.transport.diffusion import srdr_reflectance

    musp = float(baseline.mus_per_mm) * (1.0 - float(baseline.g))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)  # near the source, low albedo: only a control
        control = srdr_reflectance(mua_per_mm=np.asarray(mua_per_mm, float),
                                   musp_per_mm=np.full(np.size(mua_per_mm), musp), rho_mm=rho_mm,
                                   n=float(baseline.n), n_outside=float(baseline.n_outside), model="kienle1997")
    control = np.asarray(control, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(np.isfinite(control) & (control > 0), np.log(control), np.nan)


def _smooth_rows(log_table, positive, relative_sd, log_u, log_control, *, log_u_start) -> np.ndarray:
    """Each row of ``log_table`` smoothed over ``log_u`` as a ratio to ``log_control``.

    A local-linear kernel regression (Cleveland 1979, J Am Stat Assoc 74:829) of
    y = log R − log R_control with weights 1/SD² and a Gaussian kernel whose width at each
    node grows with that node's noise: about as many neighbours as bring its relative SD
    down to :data:`_TARGET_RELATIVE_SD`, and none where the photons already give that (near
    the source).  Only nodes from ``log_u_start`` out are smoothed (within about one
    transport length of the source the ratio to diffusion changes too fast to smooth, and
    the photons there are plentiful); half a transport length further in takes part in the
    regression.  Only nodes holding photons with a relative SD below 0.5 take part; the
    others, and rows with too few such nodes, keep their counted values.
    """
    out = log_table.copy()
    step = float(log_u[1] - log_u[0])
    for row in range(log_table.shape[0]):
        use = (positive[row] & np.isfinite(log_control[row]) & (relative_sd[row] < 0.5)
               & (log_u >= log_u_start - np.log(2.0)))
        if use.sum() < _MIN_SMOOTHED_NODES:
            continue
        x = log_u[use]
        y = log_table[row, use] - log_control[row, use]
        sd = np.clip(relative_sd[row, use], 1e-4, None)
        # neighbours needed n = (sd/target)²; a Gaussian of width σ spans 2√π σ/step nodes
        wanted = np.maximum((sd / _TARGET_RELATIVE_SD) ** 2, 1.0)
        width = np.maximum(step * wanted / (2.0 * np.sqrt(np.pi)), 1e-3 * step)
        smoothed = y.copy()
        for j in np.where((wanted > 1.0) & (x >= log_u_start))[0]:
            d = x - x[j]
            w = np.exp(-0.5 * (d / width[j]) ** 2) / sd**2
            s0, s1, s2 = w.sum(), (w * d).sum(), (w * d * d).sum()
            t0, t1 = (w * y).sum(), (w * d * y).sum()
            det = s0 * s2 - s1 * s1
            smoothed[j] = (s2 * t0 - s1 * t1) / det if det > 1e-12 * s0 * s2 else t0 / s0
        out[row, use] = log_control[row, use] + smoothed
    return out


class SmoothLookup:
    """Smooth R(ρ) for any (μa, μs) from one baseline (fixed g, n, n_outside).

    Parameters
    ----------
    baseline : phantomlab.transport.montecarlo.Baseline

    Attributes
    ----------
    g : float
        The baseline's anisotropy.
    """

    def __init__(self, baseline):
        self.baseline = baseline
        self.g = float(baseline.g)
        self.mus_ref = float(baseline.mus_per_mm)
        self.ratio_min = float(baseline.mua_per_mm) / self.mus_ref
        u = np.geomspace(_U_RANGE_MFP[0], _U_RANGE_MFP[1], _U_NODES) / self.mus_ref
        step = np.log(u[1] / u[0])
        ratio = np.geomspace(self.ratio_min * (1 + 1e-6), _RATIO_MAX, _RATIO_NODES)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            table = np.asarray(baseline.srdr(mua_per_mm=ratio * self.mus_ref, mus_per_mm=np.full(ratio.size, self.mus_ref),
                                             rho_mm=u, relative_halfwidth=float(np.tanh(step / 2))), float)
            _, table_sd = baseline.srdr_with_sd(mua_per_mm=ratio * self.mus_ref,
                                                mus_per_mm=np.full(ratio.size, self.mus_ref), rho_mm=u,
                                                relative_halfwidth=float(np.tanh(step / 2)))
        self.table_relative_width = 2.0 * float(np.tanh(step / 2))
        largest = float(np.max(baseline.exit_radius_mm)) if baseline.detected else 0.0
        self.u_max = min(u[-1], largest)
        positive = table > 0
        floor = np.min(table[positive]) if np.any(positive) else 1e-300
        with np.errstate(divide="ignore", invalid="ignore"):
            relative_sd = np.where(positive, np.asarray(table_sd, float) / np.where(positive, table, 1.0), 1.0)
        with np.errstate(divide="ignore"):
            log_table = np.log(np.where(positive, table, floor * 1e-3))
        self.log_u = np.log(u)
        self.log_ratio = np.log(ratio)
        transport_length = 1.0 / (self.mus_ref * (1.0 - self.g))
        control = _control_log_reflectance(baseline, ratio * self.mus_ref, u)
        half = float(np.tanh(step / 2))
        nodes, weights = np.polynomial.legendre.leggauss(8)
        rho = u[:, None] * (1.0 + half * nodes[None, :])  # (U, Q) inside each table annulus
        area_weights = weights[None, :] * rho / (2.0 * u[:, None])  # ∫ f ρ dρ / ∫ ρ dρ over the annulus
        inside = _control_log_reflectance(baseline, ratio * self.mus_ref, rho.ravel()).reshape(ratio.size, *rho.shape)
        averaged = np.log(np.einsum("ruq,uq->ru", np.exp(inside), area_weights))
        beyond = self.log_u >= np.log(transport_length)
        bias = np.where(beyond[None, :] & np.isfinite(averaged - control), averaged - control, 0.0)
        log_table = log_table - np.where(positive, bias, 0.0)
        log_table = _smooth_rows(log_table, positive, relative_sd, self.log_u, control,
                                 log_u_start=float(np.log(transport_length)))
        self._spline = RectBivariateSpline(self.log_ratio, self.log_u, log_table, kx=3, ky=3)
        self._sd_spline = RectBivariateSpline(self.log_ratio, self.log_u, np.log(np.clip(relative_sd, 1e-6, 1.0)),
                                              kx=1, ky=1)

    def point(self, *, mua_per_mm, mus_per_mm, rho_mm) -> np.ndarray:
        """Point values R(ρ) [1/mm²], shape (N, G) for coefficients (N,) and distances (N, G) or (G,)."""
        mua = np.atleast_1d(np.asarray(mua_per_mm, float))
        mus = np.atleast_1d(np.asarray(mus_per_mm, float))
        if np.any(mus <= 0) or np.any(mua < 0):
            raise InputError("Monte Carlo lookup: mus_per_mm must be > 0 and mua_per_mm >= 0")
        scale = mus / self.mus_ref
        ratio = np.clip(mua / mus, np.exp(self.log_ratio[0]), np.exp(self.log_ratio[-1]))
        rho = np.asarray(rho_mm, float)
        rho = np.broadcast_to(rho, (mua.size,) + rho.shape[-1:]) if rho.ndim == 1 else rho
        u = rho * scale[:, None]
        log_u = np.log(np.clip(u, np.exp(self.log_u[0]), np.exp(self.log_u[-1])))
        log_r = np.broadcast_to(np.log(ratio)[:, None], log_u.shape)
        values = np.exp(self._spline.ev(log_r, log_u))
        # beyond the farthest stored photon there is no light to report (and no table)
        values = np.where(u <= self.u_max, values, 0.0)
        return scale[:, None] ** 2 * values

    def annuli(self, *, mua_per_mm, mus_per_mm, edges_mm) -> np.ndarray:
        """Annulus averages of R [1/mm²] between consecutive ``edges_mm`` (R+1,), shape (N, R)."""
        edges = np.asarray(edges_mm, float)
        nodes, weights = np.polynomial.legendre.leggauss(_QUADRATURE)
        lo, hi = edges[:-1], edges[1:]
        # integrate R(ρ) 2πρ dρ over each annulus, divide by its area π (hi² − lo²)
        rho = 0.5 * (hi - lo)[:, None] * nodes[None, :] + 0.5 * (hi + lo)[:, None]  # (R, Q)
        w = 0.5 * (hi - lo)[:, None] * weights[None, :] * 2 * np.pi * rho / (np.pi * (hi**2 - lo**2))[:, None]
        values = self.point(mua_per_mm=mua_per_mm, mus_per_mm=mus_per_mm, rho_mm=rho.ravel())
        return np.einsum("nrq,rq->nr", values.reshape(values.shape[0], *rho.shape), w)

    def annuli_relative_sd(self, *, mua_per_mm, mus_per_mm, edges_mm) -> np.ndarray:
        """Relative standard error of :meth:`annuli` from the baseline's photon statistics, (N, R).

        The table's relative error at the annulus centre, scaled by √(table width / annulus
        width) in log-radius (wider annuli hold more photons; counting statistics).
        """
        edges = np.asarray(edges_mm, float)
        lo, hi = np.maximum(edges[:-1], 1e-9), edges[1:]
        centre = 0.5 * (lo + hi)
        mua = np.atleast_1d(np.asarray(mua_per_mm, float))
        mus = np.atleast_1d(np.asarray(mus_per_mm, float))
        scale = mus / self.mus_ref
        ratio = np.clip(mua / mus, np.exp(self.log_ratio[0]), np.exp(self.log_ratio[-1]))
        u = centre[None, :] * scale[:, None]
        log_u = np.log(np.clip(u, np.exp(self.log_u[0]), np.exp(self.log_u[-1])))
        log_r = np.broadcast_to(np.log(ratio)[:, None], log_u.shape)
        relative = np.exp(self._sd_spline.ev(log_r, log_u))
        width = np.log(hi / lo)
        return relative * np.sqrt(np.clip(self.table_relative_width / width, 0.0, 1.0))[None, :]

    def reach_warning(self, *, mus_per_mm, rho_max_mm) -> str | None:
        """A message when the largest distance lies beyond the photons the baseline holds."""
        reach = float(np.max(np.asarray(rho_max_mm) * np.asarray(mus_per_mm) / self.mus_ref))
        if reach > self.u_max:
            return (f"rho up to {reach:.3g} mm (in reference units) lies beyond this baseline's reach "
                    f"{self.u_max:.3g} mm; the Monte Carlo lookup extrapolates there")
        return None
