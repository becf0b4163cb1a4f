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
Patterson 1997, J Opt Soc Am A 14:246) — and the ratio is smoothed, weighted by the photon
statistics (:mod:`phantomlab.calibration.lookup_smoothing`): beyond five transport lengths,
where it varies slowly, by a local-linear kernel regression with a kernel as wide as each
node's noise needs; from a fifth of a transport length to five, where it still bends, by a
local-quadratic one with a fixed kernel of ±15 % in distance.  (Before the second, a million
photons left 1–1.4 % of noise on the unsmoothed nodes within one transport length at
μs′/μa = 10, and the local line beyond, as wide as that noise asked for, flattened the bend
at one transport length: relative data at low albedo, whose μa rests on that part of the
curve, moved by 7 %; measured on independent Monte Carlo curves,
tests/calibration/test_default_fit.py.)  The control is multiplied back.  The table's
nodes are averages over annuli about 10 % wide, read as point values; beyond one transport
length each is corrected by the ratio of the control's point value to its own annulus
average (the annulus bias, +0.2 % at μs′/μa = 10, is a property of the curve's shape, which
the control shares).  (A global penalised spline with its penalty chosen by
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

import json
import warnings
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from scipy.interpolate import RectBivariateSpline

from phantomlab.calibration.lookup_smoothing import smooth_rows
from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.outputs import save_npz_atomically

__all__ = ["SmoothLookup", "TabulatedBaseline", "BaselineInputs", "LOOKUP_VERSION"]

#: Tag and version of a saved lookup table (a table of another version is made again from
#: its baseline; raise the version whenever the table's construction changes).
LOOKUP_FORMAT = "phantomlab-mc-lookup"
LOOKUP_VERSION = 4
_SOURCE_KEYS = ("g", "n", "n_outside", "mua_per_mm", "mus_per_mm", "photons", "detected", "seed")

#: Radial grid of the table, in reference scattering lengths u·μs_ref (log spaced, annuli
#: about 10 % wide, ``_U_STEP`` apart in log u): from 0.002 scattering lengths (the sfdi transform
#: integrates from 0.001 transport lengths) out to
#: ``TABLE_TRANSPORT_LENGTHS`` transport lengths (but at least 250 scattering lengths), or
#: the farthest stored photon if nearer.  200 transport lengths cover a probe reaching
#: 20 mm at μs′ = 10 /mm, and the sfdi transform (fit_sfdi) integrates that far.
_U_START_MFP = 0.002
_U_STEP = float(np.log(250.0 / 0.02) / 96)
TABLE_TRANSPORT_LENGTHS = 200.0
_U_MIN_TOP_MFP = 250.0
#: Absorption-ratio grid μa/μs of the table (log spaced), from the baseline's lowest ratio.
_RATIO_MAX = 1.0
_RATIO_NODES = 45
#: Gauss–Legendre nodes per measurement annulus (3 for annuli narrower than
#: ``_NARROW_ANNULUS`` of their centre).
_QUADRATURE = 6
_NARROW_ANNULUS = 0.35


#: A distance is served by the lookup where the smoothed table's relative SD there is at
#: most this (the lookup's own noise, added to the data's SDs in the fit) ...
SERVED_MAX_RELATIVE_SD = 0.02
#: ... and it lies at most this factor beyond the farthest node counted to better than
#: ``_COUNTED_RELATIVE_SD`` (the far-field continuation is not carried further than that).
SERVED_MAX_EXTENSION = 2.0
#: Near the source, nodes from the first to the second of these distances [transport
#: lengths] are smoothed by a local quadratic (``lookup_smoothing.smooth_near``), beyond
#: by the noise-adaptive local line (``lookup_smoothing.smooth_rows``).
_NEAR_SMOOTHED_FROM = 0.2
_NEAR_SMOOTHED_TO = 5.0
_COUNTED_RELATIVE_SD = 0.2


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


class SmoothLookup:
    """Smooth R(ρ) for any (μa, μs) from one baseline (fixed g, n, n_outside).

    Parameters
    ----------
    baseline : phantomlab.transport.montecarlo.Baseline

    Attributes
    ----------
    g : float
        The baseline's anisotropy.
    u_top : float [mm]
        The table's farthest node in reference units (``ρ μs/μs_ref``).
    """

    def __init__(self, baseline):
        self.baseline = baseline
        self.g = float(baseline.g)
        self.mus_ref = float(baseline.mus_per_mm)
        self.ratio_min = float(baseline.mua_per_mm) / self.mus_ref
        transport_length = 1.0 / (self.mus_ref * (1.0 - self.g))
        largest = float(np.max(baseline.exit_radius_mm)) if baseline.detected else 0.0
        bottom = _U_START_MFP / self.mus_ref
        top = max(_U_MIN_TOP_MFP / self.mus_ref, TABLE_TRANSPORT_LENGTHS * transport_length)
        # the last annulus must lie inside the farthest exit (a half-empty annulus reads low)
        top = max(min(top, largest / (1.0 + np.tanh(_U_STEP / 2))), bottom * np.exp(10 * _U_STEP))
        nodes = int(np.ceil(np.log(top / bottom) / _U_STEP)) + 1
        u = bottom * np.exp(_U_STEP * np.arange(nodes))
        step = _U_STEP
        ratio = np.geomspace(self.ratio_min * (1 + 1e-6), _RATIO_MAX, _RATIO_NODES)
        half = float(np.tanh(step / 2))
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            table = np.asarray(baseline.srdr(mua_per_mm=ratio * self.mus_ref, mus_per_mm=np.full(ratio.size, self.mus_ref),
                                             rho_mm=u, relative_halfwidth=half), float)
            exact, table_sd = baseline.srdr_with_sd(mua_per_mm=ratio * self.mus_ref,
                                                    mus_per_mm=np.full(ratio.size, self.mus_ref), rho_mm=u,
                                                    relative_halfwidth=half)
        self.table_relative_width = 2.0 * half
        self.u_top = float(u[-1])
        positive = table > 0
        floor = np.min(table[positive]) if np.any(positive) else 1e-300
        table_sd, exact = np.asarray(table_sd, float), np.asarray(exact, float)
        # a node whose exact photon sum is empty, or far from the table's value (the table's
        # area sharing put slivers of photons there), has no standard error to speak of: it is
        # marked as uncounted (SD 1), never as exact
        counted = positive & (table_sd > 0) & (np.abs(table - exact) <= 3.0 * table_sd + 0.05 * table)
        with np.errstate(divide="ignore", invalid="ignore"):
            relative_sd = np.where(counted, table_sd / np.where(positive, table, 1.0), 1.0)
        with np.errstate(divide="ignore"):
            log_table = np.log(np.where(positive, table, floor * 1e-3))
        self.log_u = np.log(u)
        self.log_ratio = np.log(ratio)
        control = _control_log_reflectance(baseline, ratio * self.mus_ref, u)
        nodes_q, weights_q = np.polynomial.legendre.leggauss(8)
        rho = u[:, None] * (1.0 + half * nodes_q[None, :])  # (U, Q) inside each table annulus
        area_weights = weights_q[None, :] * rho / (2.0 * u[:, None])  # ∫ f ρ dρ / ∫ ρ dρ over the annulus
        inside = _control_log_reflectance(baseline, ratio * self.mus_ref, rho.ravel()).reshape(ratio.size, *rho.shape)
        with np.errstate(divide="ignore", invalid="ignore"):
            averaged = np.log(np.einsum("ruq,uq->ru", np.exp(inside), area_weights))
        beyond = self.log_u >= np.log(transport_length)
        bias = np.where(beyond[None, :] & np.isfinite(averaged - control), averaged - control, 0.0)
        log_table = log_table - np.where(positive, bias, 0.0)
        self.table_counted_log = np.where(positive, log_table, -np.inf)
        self.log_smooth_start = float(np.log(_NEAR_SMOOTHED_FROM * transport_length))
        log_table, smooth_sd = smooth_rows(log_table, positive, relative_sd, self.log_u, control,
                                            log_u_start=float(np.log(_NEAR_SMOOTHED_TO * transport_length)),
                                            log_u_near=self.log_smooth_start)
        self.log_u_limit = self._served_limits(positive, relative_sd, smooth_sd, transport_length)
        self.table_log = log_table
        self.table_counted_sd = relative_sd
        self.table_smoothed_sd = smooth_sd
        self.log_transport_length = float(np.log(transport_length))
        self._splines()

    def _splines(self) -> None:
        self._spline = RectBivariateSpline(self.log_ratio, self.log_u, self.table_log, kx=3, ky=3)
        self._sd_spline = RectBivariateSpline(self.log_ratio, self.log_u,
                                              np.log(np.clip(self.table_counted_sd, 1e-6, 1.0)), kx=1, ky=1)
        self._smooth_sd_spline = RectBivariateSpline(self.log_ratio, self.log_u,
                                                     np.log(np.clip(self.table_smoothed_sd, 1e-6, 1.0)), kx=1, ky=1)

    # ---------------------------------------------------------------- persistence
    _ARRAYS = ("log_ratio", "log_u", "table_log", "table_counted_log", "table_counted_sd", "table_smoothed_sd",
               "log_u_limit")
    _SCALARS = ("g", "mus_ref", "ratio_min", "table_relative_width", "u_top", "log_transport_length", "log_smooth_start")

    def save(self, path) -> Path:
        """Write the table (with the baseline's inputs) as ``.npz``, through a temporary file renamed into place."""
        source = self.baseline
        header = {"format": LOOKUP_FORMAT, "version": LOOKUP_VERSION,
                  **{key: getattr(self, key) for key in self._SCALARS},
                  "baseline": {key: (int(getattr(source, key)) if key in ("photons", "detected", "seed")
                                     else float(getattr(source, key))) for key in _SOURCE_KEYS}}
        return save_npz_atomically(path, compressed=True, header_json=np.array(json.dumps(header)),
                                   **{key: getattr(self, key) for key in self._ARRAYS})

    @classmethod
    def load(cls, path) -> "TabulatedBaseline":
        """Read a table written by :meth:`save`; returns the baseline's inputs with the lookup.

        Raises
        ------
        InputError
            Unreadable file, not a lookup table, another table version, bad arrays.
        """
        source = Path(path)
        try:
            with np.load(source, allow_pickle=False) as data:
                contents = {key: data[key] for key in data.files}
            header = json.loads(str(contents["header_json"]))
        except (OSError, ValueError, EOFError, KeyError, zipfile.BadZipFile) as exc:
            raise InputError(f"{str(source)!r} is not a readable lookup table ({type(exc).__name__})") from None
        if not isinstance(header, dict) or header.get("format") != LOOKUP_FORMAT:
            raise InputError(f"{str(source)!r} is not a phantomlab lookup table")
        if header.get("version") != LOOKUP_VERSION:
            raise InputError(f"{str(source)!r}: lookup table version {header.get('version')!r}, this phantomlab "
                             f"makes version {LOOKUP_VERSION}")
        lookup = cls.__new__(cls)
        try:
            for key in cls._SCALARS:
                setattr(lookup, key, float(header[key]))
            for key in cls._ARRAYS:
                setattr(lookup, key, np.asarray(contents[key], float))
            made = header["baseline"]
            tabulated = TabulatedBaseline(lookup=lookup, **{key: made[key] for key in _SOURCE_KEYS})
            lookup.baseline = tabulated
            lookup._splines()
        except (KeyError, TypeError, ValueError):
            raise InputError(f"{str(source)!r}: the lookup table is incomplete or damaged") from None
        return tabulated

    def _served_limits(self, positive, counted_sd, smoothed_sd, transport_length) -> np.ndarray:
        """Per absorption row, the farthest log u the lookup serves (see :meth:`served`)."""
        limits = np.empty(self.log_ratio.size)
        log_u = self.log_u
        for row in range(limits.size):
            counted = positive[row] & (counted_sd[row] <= _COUNTED_RELATIVE_SD)
            if not np.any(counted):
                limits[row] = log_u[0]
                continue
            reach = log_u[np.where(counted)[0].max()] + np.log(SERVED_MAX_EXTENSION)
            far = log_u >= np.log(_NEAR_SMOOTHED_TO * transport_length)  # nearer: served, its SD in the fit
            bad = (smoothed_sd[row] > SERVED_MAX_RELATIVE_SD) & far
            first_bad = log_u[np.where(bad)[0].min()] if np.any(bad) else np.inf
            limits[row] = min(reach, first_bad - _U_STEP, log_u[-1])
        return limits

    def _coordinates(self, mua_per_mm, mus_per_mm, rho_mm):
        mua = np.atleast_1d(np.asarray(mua_per_mm, float))
        mus = np.atleast_1d(np.asarray(mus_per_mm, float))
        if np.any(mus <= 0) or np.any(mua < 0):
            raise InputError("Monte Carlo lookup: mus_per_mm must be > 0 and mua_per_mm >= 0")
        scale = mus / self.mus_ref
        ratio = np.clip(mua / mus, np.exp(self.log_ratio[0]), np.exp(self.log_ratio[-1]))
        rho = np.asarray(rho_mm, float)
        rho = np.broadcast_to(rho, (mua.size,) + rho.shape[-1:]) if rho.ndim == 1 else rho
        u = rho * scale[:, None]
        return scale, ratio, u

    def point(self, *, mua_per_mm, mus_per_mm, rho_mm) -> np.ndarray:
        """Point values R(ρ) [1/mm²], shape (N, G) for coefficients (N,) and distances (N, G) or (G,).

        Beyond the table's last node the last value's ratio to the diffusion control is
        carried on (for integrals such as the sfdi transform, whose tail there is small;
        :meth:`served` says which distances a fit may use).
        """
        scale, ratio, u = self._coordinates(mua_per_mm, mus_per_mm, rho_mm)
        log_u = np.log(np.clip(u, np.exp(self.log_u[0]), np.exp(self.log_u[-1])))
        log_r = np.broadcast_to(np.log(ratio)[:, None], log_u.shape)
        values = np.exp(self._spline.ev(log_r, log_u))
        outside = u > self.u_top
        for row in np.where(outside.any(axis=1))[0]:
            mua_ref = np.array([ratio[row] * self.mus_ref])
            far = np.append(u[row, outside[row]], self.u_top)
            log_control = _control_log_reflectance(self.baseline, mua_ref, far)[0]
            log_edge = float(self._spline.ev(np.log(ratio[row]), self.log_u[-1]))
            values[row, outside[row]] = np.nan_to_num(np.exp(log_control[:-1] - log_control[-1] + log_edge))
        return scale[:, None] ** 2 * values

    def annuli(self, *, mua_per_mm, mus_per_mm, edges_mm) -> np.ndarray:
        """Annulus averages of R [1/mm²] between consecutive ``edges_mm`` (R+1,), shape (N, R)."""
        edges = np.asarray(edges_mm, float)
        lo, hi = edges[:-1], edges[1:]
        # narrow annuli (relative width <= 0.35: the usual probe) need half the nodes: the
        # 3-point rule is exact to degree 5, off by < 1e-5 there; wider ones take 6
        narrow = bool(np.all((hi - lo) <= _NARROW_ANNULUS * 0.5 * (hi + lo)))
        nodes, weights = np.polynomial.legendre.leggauss(3 if narrow else _QUADRATURE)
        # integrate R(ρ) 2πρ dρ over each annulus, divide by its area π (hi² − lo²)
        rho = 0.5 * (hi - lo)[:, None] * nodes[None, :] + 0.5 * (hi + lo)[:, None]  # (R, Q)
        w = 0.5 * (hi - lo)[:, None] * weights[None, :] * 2 * np.pi * rho / (np.pi * (hi**2 - lo**2))[:, None]
        values = self.point(mua_per_mm=mua_per_mm, mus_per_mm=mus_per_mm, rho_mm=rho.ravel())
        return np.einsum("nrq,rq->nr", values.reshape(values.shape[0], *rho.shape), w)

    def fibre(self, *, mua_per_mm, mus_per_mm, rho_mm, core_mm: float) -> np.ndarray:
        """Average of R [1/mm²] over a fibre face of diameter ``core_mm`` [mm] centred at each ρ, (N, R).

        Gauss–Legendre quadrature over the disc in polar coordinates about the fibre's centre
        (4 radial nodes weighted by r, 8 angular nodes over the half turn, R being symmetric
        about the line to the source): a point at (r, φ) lies at √(ρ² + r² + 2ρr cos φ).
        """
        rho = np.asarray(rho_mm, float)
        a = 0.5 * float(core_mm)
        xr, wr = np.polynomial.legendre.leggauss(4)
        xp, wp = np.polynomial.legendre.leggauss(8)
        r = 0.5 * a * (xr + 1.0)
        phi = 0.5 * np.pi * (xp + 1.0)
        weight = (0.5 * a * wr * r)[:, None] * (0.5 * np.pi * wp)[None, :] / (0.5 * np.pi * a * a)  # sums to 1
        distance = np.sqrt(rho[:, None, None] ** 2 + r[None, :, None] ** 2
                           + 2.0 * rho[:, None, None] * r[None, :, None] * np.cos(phi)[None, None, :])
        values = self.point(mua_per_mm=mua_per_mm, mus_per_mm=mus_per_mm, rho_mm=np.maximum(distance, 1e-9).ravel())
        return np.einsum("nrab,ab->nr", values.reshape(values.shape[0], rho.size, r.size, phi.size), weight)

    def point_relative_sd(self, *, mua_per_mm, mus_per_mm, rho_mm) -> np.ndarray:
        """Relative standard error of :meth:`point` from the baseline's photon statistics, (N, R).

        Within a fifth of a transport length of the source: the counted error of the table
        node at ρ (a node is an annulus of the table's relative width); beyond, the smoothed
        table's SD.
        """
        scale, ratio, u = self._coordinates(mua_per_mm, mus_per_mm, rho_mm)
        log_u = np.log(np.clip(u, np.exp(self.log_u[0]), np.exp(self.log_u[-1])))
        log_r = np.broadcast_to(np.log(ratio)[:, None], log_u.shape)
        counted = np.exp(self._sd_spline.ev(log_r, log_u))
        smoothed = np.exp(self._smooth_sd_spline.ev(log_r, log_u))
        return np.where(log_u >= self.log_smooth_start, smoothed, counted)

    def annuli_relative_sd(self, *, mua_per_mm, mus_per_mm, edges_mm) -> np.ndarray:
        """Relative standard error of :meth:`annuli` from the baseline's photon statistics, (N, R).

        Within a fifth of a transport length of the source (not smoothed): the table's counted
        relative error at the annulus centre, scaled by √(table width / annulus width) in
        log-radius (wider annuli hold more photons; counting statistics).  Beyond: the
        smoothed table's own SD there (its values are correlated over the kernel, so a wider
        annulus does not average it down).
        """
        edges = np.asarray(edges_mm, float)
        lo, hi = np.maximum(edges[:-1], 1e-9), edges[1:]
        centre = 0.5 * (lo + hi)
        scale, ratio, u = self._coordinates(mua_per_mm, mus_per_mm, centre)
        log_u = np.log(np.clip(u, np.exp(self.log_u[0]), np.exp(self.log_u[-1])))
        log_r = np.broadcast_to(np.log(ratio)[:, None], log_u.shape)
        counted = np.exp(self._sd_spline.ev(log_r, log_u))
        width = np.log(hi / lo)
        counted = counted * np.sqrt(np.clip(self.table_relative_width / width, 0.0, 1.0))[None, :]
        smoothed = np.exp(self._smooth_sd_spline.ev(log_r, log_u))
        return np.where(log_u >= self.log_smooth_start, smoothed, counted)

    def served(self, *, mua_per_mm, mus_per_mm, rho_mm) -> np.ndarray:
        """Which distances the lookup serves at these optics, shape (N, G) of bool.

        A distance is served where it lies within the table, the smoothed table's relative SD
        there is at most :data:`SERVED_MAX_RELATIVE_SD` (checked beyond the near-source region
        of :func:`_smooth_near`; nearer, the photons are many and their SD enters the fit), and it is at most
        :data:`SERVED_MAX_EXTENSION` times beyond the farthest node counted to better than
        20 % (nearer in, along the row).  The limit is interpolated between the table's
        absorption rows, taking the nearer of the two.
        """
        scale, ratio, u = self._coordinates(mua_per_mm, mus_per_mm, rho_mm)
        position = np.interp(np.log(ratio), self.log_ratio, np.arange(self.log_ratio.size))
        below = np.floor(position).astype(int)
        above = np.minimum(below + 1, self.log_ratio.size - 1)
        limit = np.minimum(self.log_u_limit[below], self.log_u_limit[above])
        with np.errstate(divide="ignore"):
            return (np.log(u) <= limit[:, None]) & (u >= np.exp(self.log_u[0]))

    def served_limit_mm(self, *, mua_per_mm, mus_per_mm) -> np.ndarray:
        """The farthest distance [mm] :meth:`served` accepts at these optics, shape (N,)."""
        scale, ratio, _ = self._coordinates(mua_per_mm, mus_per_mm, np.ones(1))
        position = np.interp(np.log(ratio), self.log_ratio, np.arange(self.log_ratio.size))
        below = np.floor(position).astype(int)
        above = np.minimum(below + 1, self.log_ratio.size - 1)
        limit = np.minimum(self.log_u_limit[below], self.log_u_limit[above])
        return np.exp(limit) / scale

    def reach_warning(self, *, mus_per_mm, rho_max_mm) -> str | None:
        """A message when the largest distance lies beyond the table (fits refuse such points first)."""
        reach = float(np.max(np.asarray(rho_max_mm) * np.asarray(mus_per_mm) / self.mus_ref))
        if reach > self.u_top:
            return (f"rho up to {reach:.3g} mm (in reference units) lies beyond this baseline's table "
                    f"({self.u_top:.3g} mm); the Monte Carlo lookup does not serve it")
        return None


@dataclass(frozen=True, eq=False)
class BaselineInputs:
    """The inputs that made a Monte Carlo baseline: g, the indices, μa_ref and μs_ref [1/mm],
    the photons launched and the seed (what a table kept without the photons still knows)."""

    g: float
    n: float
    n_outside: float
    mua_per_mm: float
    mus_per_mm: float
    photons: int
    seed: int


@dataclass(frozen=True, eq=False)
class TabulatedBaseline(BaselineInputs):
    """What a fit needs of a baseline: the inputs that made it and its :class:`SmoothLookup`.

    Read from a saved table (:meth:`SmoothLookup.load`) without the photons, so a fit with a
    baseline already tabulated starts in milliseconds.  The fits accept it wherever they
    accept a :class:`~phantomlab.transport.montecarlo.Baseline`.
    """

    detected: int
    lookup: SmoothLookup = field(repr=False)

    @property
    def minimum_absorption_ratio(self) -> float:
        """Smallest μa/μs the baseline answers: μa_ref/μs_ref."""
        return self.mua_per_mm / self.mus_per_mm

    @classmethod
    def from_baseline(cls, baseline) -> "TabulatedBaseline":
        """Tabulate a baseline with photons (builds its :class:`SmoothLookup`, a few seconds)."""
        lookup = SmoothLookup(baseline)
        made = cls(lookup=lookup, **{key: getattr(baseline, key) for key in _SOURCE_KEYS})
        lookup.baseline = made  # the photons are not needed any more
        return made
