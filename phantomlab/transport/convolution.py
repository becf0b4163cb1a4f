"""A time-resolved model as a histogram seen through a measured instrument response (layer 2).

A time-correlated photon counter records, in bin k of width Δ centred on t_k, the counts

    N_k = A ∫_{bin k} dt ∫ IRF(t′) R(t − t′ − t0) dt′

of the sample's response R(t) (zero for t < 0) broadened by the instrument response function
IRF (the same system looking at the source directly, normalised to unit area) and delayed by
an unknown shift t0.  The IRF is known only as a histogram h_j on the same time step Δ
(centres τ_j, normalised to Σ h_j = 1); taking it as uniform inside each of its bins,

    N_k = A Σ_j h_j S(t_k − τ_j),   S(d) = Δ ∫ Λ(u − d) R(u − t0) du,

with Λ the triangle of unit area and half-width Δ (the convolution of the detector bin and
the IRF bin).  The differences t_k − τ_j lie on one lattice of step Δ, so S is evaluated once
per lattice point (Gauss–Legendre on each half of the triangle) and the sum over j is one
discrete convolution (FFT).  The rectangle-per-bin IRF is the only approximation: against a
continuous Gaussian IRF it errs by O((Δ/σ)²) (the analytic check of the tests: a Gaussian on an
exponential decay, whose convolution is a closed form with erfc).

References
----------
O'Connor DV, Phillips D 1984, *Time-correlated Single Photon Counting*, Academic Press (the
measured histogram as the convolution of the instrument response with the decay).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.signal import fftconvolve

from phantomlab.errors import InputError
from phantomlab.transport._convolution_kernel import banded_counts

__all__ = ["uniform_step_ps", "prepare_irf", "irf_fwhm_ps", "InstrumentResponse", "irf_convolved_counts", "TRIANGLE_NODES"]

#: Gauss–Legendre nodes on each half of the triangle Λ (the lattice points next to t0).
TRIANGLE_NODES = 4
#: Most terms (IRF sub-bins × data bins) for which each curve's convolution is added directly
#: over its band (about 1 ms a curve here); beyond, each call convolves by FFT (same numbers
#: to rounding, faster for long IRFs on long histograms).
MAX_BAND_TERMS = 2_000_000
#: Relative tolerance of "the same time step" (bin centres from instruments print rounded).
STEP_TOLERANCE = 1e-3


def uniform_step_ps(time_ps, *, what: str = "time_ps") -> float:
    """The common step Δ [ps] of an increasing, uniformly spaced grid (refused otherwise)."""
    t = np.asarray(time_ps, dtype=float)
    if t.ndim != 1 or t.size < 2:
        raise InputError(f"{what}: at least two time bins are needed")
    steps = np.diff(t)
    if np.any(steps <= 0):
        raise InputError(f"{what}: times must increase")
    step = float(np.median(steps))
    if np.max(np.abs(steps - step)) > STEP_TOLERANCE * step:
        raise InputError(f"{what}: bins must be evenly spaced (one time step); steps from "
                         f"{steps.min():g} to {steps.max():g} ps")
    return step


#: Weights of R at d − Δ′, d, d + Δ′ for Δ′ ∫ Λ(u − d) R(u) du, exact for quadratic R
#: (∫ Λ = 1, ∫ Λ x² = Δ′²/6 for the triangle of half-width Δ′).
_TRIANGLE_TAPS = np.array([1.0 / 12.0, 10.0 / 12.0, 1.0 / 12.0])


def _lattice_values(model, lattice, step, shift, smooth_start=False):
    """S(d) = Δ′ ∫ Λ(u − d) R(u − t0) du at every lattice point d, for each row's t0, (N, M).

    R is evaluated once per lattice point and the triangle integrated with the three-point
    rule :data:`_TRIANGLE_TAPS`; the (at most two) lattice points whose triangle contains the
    start t0 of the response are integrated again by Gauss–Legendre over the part after t0, so
    a response that starts with a jump (an exponential decay) is integrated as accurately as a
    smooth one.
    """
    rows = shift.size
    extended = np.concatenate([[lattice[0] - step], lattice, [lattice[-1] + step]])
    times = extended[None, :] - shift[:, None]  # (N, M + 2)
    values = np.asarray(model(times), dtype=float).reshape(times.shape)
    values = np.where(times > 0, values, 0.0)
    result = step * (_TRIANGLE_TAPS[0] * values[:, :-2] + _TRIANGLE_TAPS[1] * values[:, 1:-1]
                     + _TRIANGLE_TAPS[2] * values[:, 2:])
    # lattice points within one step of t0: the triangle holds the start of the response
    first = np.floor((shift - lattice[0]) / step).astype(int)  # the lattice point just before t0
    picks = np.stack([first, first + 1], axis=1)  # (N, 2)
    valid = (picks >= 0) & (picks < lattice.size)
    if np.any(valid) and not smooth_start:
        row_index = np.repeat(np.arange(rows), 2)[valid.ravel()]
        points = picks.ravel()[valid.ravel()]
        d = lattice[points]
        start = shift[row_index]
        x, w = np.polynomial.legendre.leggauss(TRIANGLE_NODES)
        u_all, weight_all = [], []
        for lo_offset, hi_offset in ((-step, 0.0), (0.0, step)):
            lo = np.maximum(d + lo_offset, start)[:, None]
            hi = (d + hi_offset)[:, None]
            width = np.clip(hi - lo, 0.0, None)
            u = lo + 0.5 * width * (x[None, :] + 1.0)
            u_all.append(u)
            weight_all.append(0.5 * width * w[None, :] * (step - np.abs(u - d[:, None])) / step)
        u = np.concatenate(u_all, axis=1)
        weight = np.concatenate(weight_all, axis=1)
        local = u - start[:, None]
        # evaluate row by row (each row its own parameters in the caller's model)
        grid = np.full((rows, 2 * u.shape[1] * 2), 1.0)
        slots = np.zeros(rows, dtype=int)
        for k, r in enumerate(row_index):
            grid[r, slots[r]:slots[r] + u.shape[1]] = local[k]
            slots[r] += u.shape[1]
        exact_values = np.asarray(model(grid), dtype=float).reshape(grid.shape)
        slots[:] = 0
        for k, r in enumerate(row_index):
            chunk = exact_values[r, slots[r]:slots[r] + u.shape[1]]
            slots[r] += u.shape[1]
            chunk = np.where((local[k] > 0) & (weight[k] > 0), chunk, 0.0)
            result[r, points[k]] = float(np.sum(chunk * weight[k]))
    return result


@dataclass(frozen=True, eq=False)  # holds arrays
class InstrumentResponse:
    """A measured IRF made ready for :meth:`counts` on one data time grid (built once per fit).

    Attributes
    ----------
    time_ps : ndarray (K,) [ps]
        Centres of the data bins.
    step_ps : float [ps]
        Their common step Δ.
    subdivisions : int
        Sub-bins per bin s: the IRF's cumulative sum is interpolated monotonically (PCHIP,
        Fritsch & Carlson 1980) onto bins of Δ/s, which takes the IRF's shape inside a bin
        into account (a rectangle per bin errs by O((Δ/σ)²), about 1e-3 of the peak for a
        Gaussian IRF of σ = 6Δ; three sub-bins bring that to 1e-4).
    fine_irf : ndarray (N or 1, J·s)
        The normalised IRF on the sub-bins (rows: one IRF per curve, or one for all).
    lattice_ps : ndarray (M,) [ps]
        Every difference of a data sub-bin centre and an IRF sub-bin centre.
    irf_fwhm_ps : ndarray (N or 1,) [ps]
        Full width at half maximum of each IRF row.
    moving : ndarray (N or 1, J·s + s − 1), optional
        The fine IRF's moving sums over s sub-bins, for the direct (banded) convolution;
        None: by FFT.
    """

    time_ps: np.ndarray
    step_ps: float
    subdivisions: int
    fine_irf: np.ndarray
    lattice_ps: np.ndarray
    irf_fwhm_ps: np.ndarray
    moving: np.ndarray | None = None

    def counts(self, model: Callable[[np.ndarray], np.ndarray], shift_ps, irf_rows=None,
               smooth_start: bool = False) -> np.ndarray:
        """Expected counts per data bin for unit amplitude, shape (N, K).

        Parameters
        ----------
        model : callable
            ``model(times)`` with times (N, L) [ps] gives R (N, L) [per ps]; 0 for t <= 0.
        shift_ps : float or ndarray (N,) [ps]
            Delay t0 of the response relative to the IRF.
        irf_rows : array of int (N,), optional
            Which IRF row each output row uses (default: row by row, or the only one).
        smooth_start : bool
            The response rises from 0 smoothly at t = 0 (diffusion, Monte Carlo): skip the
            exact integration of the triangles that hold t0 (a speed-up; a jump, as in an
            exponential decay, needs False).
        """
        shift = np.atleast_1d(np.asarray(shift_ps, dtype=float))
        irf = self.fine_irf if irf_rows is None else self.fine_irf[np.asarray(irf_rows, dtype=int)]
        rows = max(shift.size, irf.shape[0])
        shift = np.broadcast_to(shift, (rows,))
        h = np.broadcast_to(irf, (rows, irf.shape[1]))
        fine_step = self.step_ps / self.subdivisions
        values = _lattice_values(model, self.lattice_ps, fine_step, shift, smooth_start)  # (N, M)
        if self.moving is not None:  # the band of the convolution, added directly (small problems)
            which = np.zeros(rows, dtype=np.int64) if irf_rows is None and self.fine_irf.shape[0] == 1 else (
                np.arange(rows, dtype=np.int64) if irf_rows is None else np.asarray(irf_rows, dtype=np.int64))
            out = np.empty((rows, self.time_ps.size))
            banded_counts(np.ascontiguousarray(values), self.moving, which, self.subdivisions,
                          self.moving.shape[1] - 1, out)
            return out
        full = fftconvolve(values, h, axes=-1)
        J = h.shape[1]
        K = self.time_ps.size
        fine = full[:, J - 1:J - 1 + K * self.subdivisions]
        return fine.reshape(rows, K, self.subdivisions).sum(axis=-1)


def irf_fwhm_ps(time_ps: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Full width at half maximum [ps] of each row of a histogram (linear interpolation)."""
    out = np.empty(values.shape[0])
    for row, v in enumerate(values):
        peak = int(np.argmax(v))
        half = 0.5 * v[peak]
        left = peak
        while left > 0 and v[left - 1] > half:
            left -= 1
        right = peak
        while right < v.size - 1 and v[right + 1] > half:
            right += 1

        def cross(i, j):  # where the line from bin i (above half) to bin j reaches half
            if v[i] == v[j]:
                return time_ps[i]
            return time_ps[i] + (half - v[i]) * (time_ps[j] - time_ps[i]) / (v[j] - v[i])

        lo = cross(left, left - 1) if left > 0 else time_ps[0]
        hi = cross(right, right + 1) if right < v.size - 1 else time_ps[-1]
        out[row] = hi - lo
    return out


def prepare_irf(*, time_ps, irf_time_ps, irf, subdivisions: int = 3, direct: bool = True) -> InstrumentResponse:
    """Check and normalise a measured IRF for the data grid ``time_ps``.

    Parameters
    ----------
    time_ps : ndarray (K,) [ps]
        Centres of the data bins (one step Δ).
    irf_time_ps : ndarray (J,) [ps]
        Centres of the IRF bins (the same step Δ: refused otherwise).
    irf : ndarray (J,) or (N, J)
        IRF histogram, background removed, >= 0 (rows: one per curve).
    subdivisions : int
        Sub-bins per bin (1 takes each IRF bin as a rectangle).
    direct : bool
        Add each curve's convolution directly over its band (fast for the repeated calls of a
        fit; up to :data:`MAX_BAND_TERMS`), else convolve by FFT at each call.

    Returns
    -------
    InstrumentResponse
    """
    from scipy.interpolate import PchipInterpolator

    t = np.asarray(time_ps, dtype=float)
    tau = np.asarray(irf_time_ps, dtype=float)
    step = uniform_step_ps(t)
    irf_step = uniform_step_ps(tau, what="irf time_ps")
    if abs(irf_step - step) > STEP_TOLERANCE * step:
        raise InputError(f"the IRF has a time step of {irf_step:g} ps, the data {step:g} ps; "
                         "measure (or rebin) the IRF on the data's time step")
    h = np.atleast_2d(np.asarray(irf, dtype=float))
    if h.shape[1] != tau.size:
        raise InputError(f"the IRF has {h.shape[1]} values for {tau.size} times")
    if np.any(~np.isfinite(h)) or np.any(h < 0):
        raise InputError("the IRF counts must be finite and >= 0")
    total = h.sum(axis=-1, keepdims=True)
    if np.any(total <= 0):
        raise InputError("the IRF holds no counts")
    h = h / total
    s = int(subdivisions)
    if s < 1:
        raise InputError(f"subdivisions must be >= 1, got {subdivisions!r}")
    if s == 1:
        fine = h
    else:
        edges = np.concatenate([tau - 0.5 * step, [tau[-1] + 0.5 * step]])
        fine_edges = edges[0] + (step / s) * np.arange(tau.size * s + 1)
        cumulative = np.concatenate([np.zeros((h.shape[0], 1)), np.cumsum(h, axis=-1)], axis=-1)
        fine = np.diff(PchipInterpolator(edges, cumulative, axis=-1)(fine_edges), axis=-1)
        fine = np.clip(fine, 0.0, None)
        fine = fine / fine.sum(axis=-1, keepdims=True)
    fine_step = step / s
    fine_t0 = t[0] - 0.5 * step + 0.5 * fine_step
    fine_tau_last = tau[-1] + 0.5 * step - 0.5 * fine_step
    lattice = (fine_t0 - fine_tau_last) + fine_step * np.arange(t.size * s + tau.size * s - 1)
    moving = None
    if direct and fine.shape[1] * t.size <= MAX_BAND_TERMS:
        # counts_k = Σ_m S_m Σ_i h[k s + i + J' − 1 − m]: the convolution and the sum over sub-bins
        # = Σ_m S_m c[k s + J' − 1 − m] with c[b] = Σ_i h[b + i] (h zero outside its J' sub-bins),
        # b = −(s−1) … J' − 1 stored at b + s − 1: a band of J' + s − 1 terms per bin
        J = fine.shape[1]
        wide = np.concatenate([np.zeros((fine.shape[0], s - 1)), fine, np.zeros((fine.shape[0], s - 1))], axis=1)
        moving = np.ascontiguousarray(sum(wide[:, i:i + J + s - 1] for i in range(s)))
        moving.setflags(write=False)
    for array in (fine, lattice):
        array.setflags(write=False)
    return InstrumentResponse(time_ps=t, step_ps=step, subdivisions=s, fine_irf=fine, lattice_ps=lattice,
                              irf_fwhm_ps=irf_fwhm_ps(tau, h), moving=moving)


def irf_convolved_counts(*, model: Callable[[np.ndarray], np.ndarray], time_ps, irf_time_ps, irf,
                         shift_ps, subdivisions: int = 3) -> np.ndarray:
    """Expected histogram of a time-resolved response seen through a measured IRF (unit amplitude).

    One-off form of :func:`prepare_irf` + :meth:`InstrumentResponse.counts` (a fit prepares
    the IRF once and calls ``counts`` at every step).

    Parameters
    ----------
    model : callable
        ``model(times)`` with ``times`` of shape (N, L) [ps] returns R at those times, shape
        (N, L) (any unit per ps; the result carries it times ps).  Must give 0 for t <= 0.
    time_ps : ndarray (K,) [ps]
        Centres of the data bins (one step Δ).
    irf_time_ps : ndarray (J,) [ps]
        Centres of the IRF bins (the same step Δ).
    irf : ndarray (J,) or (N, J)
        IRF histogram (background removed, >= 0); each row is normalised to unit sum.
    shift_ps : float or ndarray (N,) [ps]
        Delay t0 of the response relative to the IRF.
    subdivisions : int

    Returns
    -------
    ndarray (N, K)
        Σ_j h_j S(t_k − τ_j) of the module docstring: the counts per bin for A = 1.
    """
    response = prepare_irf(time_ps=time_ps, irf_time_ps=irf_time_ps, irf=irf, subdivisions=subdivisions)
    return response.counts(model, shift_ps)
