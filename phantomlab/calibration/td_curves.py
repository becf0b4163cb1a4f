"""Measured time-domain curves made ready for the fit: background, fit window, IRF, start values (layer 3).

What :func:`phantomlab.calibration.fit_td.fit_td` does to the histograms before it fits them,
each rule stated where it is applied:

* **background** (:func:`background_level`): the mean count of the bins before the pulse,
  earlier than two IRF widths before the curve first reaches 5 % of its peak, from at least
  :data:`MIN_BACKGROUND_BINS` bins;
* **window** (:func:`fit_window`): the bins from where the curve (5-bin running mean) first
  rises to a fraction of its peak to where it falls to another;
* **IRF** (:func:`clean_irf`): each IRF row with its own background (median of its bins below
  1e-4 of the peak) removed and the noise far from the pulse set to 0;
* **start values** (:func:`start_values`): the best of a 9 × 9 grid in (μa, μs′), each grid
  model moved onto the data's half-rise time and then by ±150 ps in 25-ps steps;
* **restart** (:func:`restart_poor_rows`): a Monte Carlo lookup fit that stopped far worse
  than its data allow is started again from the converged diffusion fit, its time shift
  found by a scan.
"""

from __future__ import annotations

import numpy as np

from phantomlab.calibration._scan_kernels import shift_scan_chi2
from phantomlab.calibration.fitting import far_worse_than_data_allow, fit_blocks, with_rows

__all__ = ["MIN_BACKGROUND_BINS", "SHIFT_UNIT_PS", "background_level", "fit_window", "clean_irf", "running_mean",
           "rise_time_ps", "peak_region", "start_values", "restart_poor_rows"]

#: Fewest pre-pulse bins to estimate the background from.
MIN_BACKGROUND_BINS = 10
#: The time shifts are fitted in ns (their steps then compare with those of the log coefficients).
SHIFT_UNIT_PS = 1000.0
#: The starting grid [1/mm].
_GRID_MUA = np.geomspace(2e-4, 0.3, 9)
_GRID_MUSP = np.geomspace(0.2, 5.0, 9)


def running_mean(values: np.ndarray, width: int = 5) -> np.ndarray:
    """Running mean over ``width`` bins along the last axis (same length)."""
    kernel = np.ones(width) / width
    return np.apply_along_axis(lambda v: np.convolve(v, kernel, mode="same"), -1, values)


def peak_region(signal: np.ndarray):
    """The 5-bin running mean of a curve, the index of its peak and the peak value."""
    smooth = running_mean(signal)
    peak = int(np.argmax(smooth))
    return smooth, peak, float(smooth[peak])


def background_level(counts, time_ps, irf_fwhm_ps) -> float | None:
    """Mean counts per bin before the pulse, or None with fewer than :data:`MIN_BACKGROUND_BINS` bins there."""
    smooth, peak, top = peak_region(counts)
    rising = np.flatnonzero(smooth[:peak + 1] >= 0.05 * top)
    start = rising[0] if rising.size else peak
    before = time_ps < time_ps[start] - 2.0 * irf_fwhm_ps
    if before.sum() < MIN_BACKGROUND_BINS:
        return None
    return float(np.mean(counts[before]))


def rise_time_ps(signal, step_ps: float) -> float:
    """Time from 10 % of the peak to the peak on the rising edge (5-bin running mean) [ps]."""
    smooth, peak, top = peak_region(signal)
    above = np.flatnonzero(smooth[:peak + 1] >= 0.1 * top)
    return float((peak - above[0]) * step_ps) if above.size and top > 0 else 0.0


def fit_window(signal, rise: float, tail: float) -> np.ndarray:
    """Mask of the bins from ``rise`` × peak on the rising edge to ``tail`` × peak on the tail."""
    smooth, peak, top = peak_region(signal)
    mask = np.zeros(signal.size, bool)
    if top <= 0:
        return mask
    lo = peak
    while lo > 0 and smooth[lo - 1] >= rise * top:
        lo -= 1
    hi = peak
    while hi < signal.size - 1 and smooth[hi + 1] >= tail * top:
        hi += 1
    mask[lo:hi + 1] = True
    return mask


def clean_irf(irf: np.ndarray, time_ps: np.ndarray) -> np.ndarray:
    """IRF rows with their own background removed and the noise far from the pulse set to 0."""
    out = np.empty_like(irf, dtype=float)
    for i, row in enumerate(np.asarray(irf, float)):
        smooth, peak, top = peak_region(row)
        tail = smooth < 1e-4 * top  # common practice, no source: below 1e-4 of the peak is noise
        background = float(np.median(row[tail])) if tail.sum() >= MIN_BACKGROUND_BINS else 0.0
        cleaned = np.clip(row - background, 0.0, None)
        keep = np.zeros(row.size, bool)
        lo = hi = peak
        while lo > 0 and smooth[lo - 1] - background >= 1e-4 * top:
            lo -= 1
        while hi < row.size - 1 and smooth[hi + 1] - background >= 1e-4 * top:
            hi += 1
        keep[lo:hi + 1] = True
        out[i] = np.where(keep, cleaned, 0.0)
    return out


def _shifted(time, curves, shifts):
    """Each curve (N, K) moved later by each shift (N, S) [ps], linear between bins: (N, S, K)."""
    step = time[1] - time[0]
    position = (np.arange(time.size)[None, None, :] - shifts[:, :, None] / step)
    low = np.floor(position).astype(np.int64)
    frac = position - low
    padded = np.concatenate([np.zeros((curves.shape[0], 1)), curves, np.zeros((curves.shape[0], 1))], axis=1)
    lo = np.clip(low + 1, 0, time.size + 1)
    hi = np.clip(low + 2, 0, time.size + 1)
    flat = padded.ravel()  # one flat gather each: faster than indexing by (row, column)
    row_start = (np.arange(curves.shape[0]) * (time.size + 2))[:, None, None]
    return flat[row_start + lo] * (1 - frac) + flat[row_start + hi] * frac


def _shifted_chi2(time, c, shifts, data, weight):
    """χ² of each curve moved by each shift with its best amplitude, (N, S): the numpy form of the kernel."""
    moved = _shifted(time, c, shifts)  # (N, S, K)
    weight = weight[:, None, :]
    data = data[:, None, :]
    amp = np.maximum(np.sum(weight * moved * data, 2) / np.maximum(np.sum(weight * moved**2, 2), 1e-300), 0)
    chi2 = np.sum(weight * (amp[:, :, None] * moved - data) ** 2, axis=2)
    return np.where(np.isfinite(chi2), chi2, np.inf)


def start_values(expected, counts, background, windows, time, W, R) -> np.ndarray:
    """Starting point per wavelength from a grid of (μa, μs′), each with its best t0.

    For every grid pair the model (t0 = 0) is moved so that its half-peak on the rising edge
    meets the data's, then by ±150 ps around that in 25-ps steps; the amplitude is projected
    and the (pair, shift) of smallest χ² kept.
    """
    G = _GRID_MUA.size * _GRID_MUSP.size
    mua_g = np.repeat(_GRID_MUA, _GRID_MUSP.size)
    musp_g = np.tile(_GRID_MUSP, _GRID_MUA.size)
    offsets = np.arange(-150.0, 151.0, 25.0)
    x0 = np.zeros((W, 2 + R))
    for w in range(W):
        curves = w * R + np.arange(R)
        rows = np.repeat(curves, G)
        c, _, _ = expected(np.tile(mua_g, R), np.tile(musp_g, R), np.zeros(rows.size), rows)
        data = (counts[rows] - background[rows][:, None])[:, None, :]
        shifts = (_half_rise(time, data[:, 0]) - _half_rise(time, c))[:, None] + offsets[None, :]
        # each model moved by each shift, its amplitude projected, scored (one compiled pass;
        # the numpy form is _shifted_chi2)
        weight = windows[rows] / np.maximum(counts[rows], 1.0)
        chi2 = np.empty(shifts.shape)
        shift_scan_chi2(np.ascontiguousarray(c, dtype=float), shifts / (time[1] - time[0]),
                        np.ascontiguousarray(data[:, 0], dtype=float), np.ascontiguousarray(weight, dtype=float),
                        chi2)
        chi2 = chi2.reshape(R, G, offsets.size)
        best_shift = np.argmin(chi2, axis=2)  # per curve and grid pair
        total = np.min(chi2, axis=2).sum(axis=0)
        best = int(np.argmin(total))
        x0[w, 0], x0[w, 1] = np.log(mua_g[best]), np.log(musp_g[best])
        x0[w, 2:] = shifts.reshape(R, G, -1)[np.arange(R), best, best_shift[:, best]] / SHIFT_UNIT_PS
    return x0


def _half_rise(time, curves) -> np.ndarray:
    """Time where each curve first reaches half its peak (linear between bins) [ps]."""
    curves = np.asarray(curves, float)
    top = curves.max(axis=1)
    k = np.argmax(curves >= 0.5 * top[:, None], axis=1)
    rows = np.arange(curves.shape[0])
    before = np.maximum(k - 1, 0)
    a, b = curves[rows, before], curves[rows, k]
    with np.errstate(invalid="ignore", divide="ignore"):
        between = time[before] + (0.5 * top - a) * (time[k] - time[before]) / np.where(b != a, b - a, 1.0)
    out = np.where(k == 0, time[0], between)
    out = np.where(top > 0, out, np.nan)
    return np.nan_to_num(out, nan=0.0)


#: The restart's scan of a common time shift about diffusion's [ps]: half-width and step.
#: Wider than diffusion's shift error (tens of ps at μs′/μa = 10, where its early rise is
#: furthest from Monte Carlo) and finer than the curve's rise.
RESTART_SHIFT_SCAN_PS = 200.0
RESTART_SHIFT_STEP_PS = 4.0


def restart_poor_rows(outcome, residual_fn, smooth_residual, *, mask, lower, upper, tolerance, step_tolerance):
    """Rows of a first lookup pass far worse than their data allow, fitted again from the converged diffusion fit.

    Each such row is fitted to convergence with the smooth diffusion model; at diffusion's
    (μa, μs′) the lookup's best common time shift is found by a scan
    (:data:`RESTART_SHIFT_SCAN_PS`), and the lookup fitted from there; where that lands lower
    in χ², the row takes that solution.  "Far worse": χ² more than 4 SD of the χ²
    distribution above its mean (:func:`~phantomlab.calibration.fitting.far_worse_than_data_allow`);
    the short diffusion start can leave the lookup's rough objective in a far basin (on the
    lookup's own noise-free curve at μs′/μa = 10, ρ 15 mm it stopped at μs′ +90 %, χ²ᵣ 187).

    Parameters
    ----------
    outcome : BlockOutcome
        The lookup's first pass (rows of (ln μa, ln μs′, shifts / SHIFT_UNIT_PS)).
    residual_fn, smooth_residual : callable
        ``f(x_rows, rows)`` → normalised residuals of the lookup and of the smooth diffusion
        model, rows of the fit.
    mask, lower, upper, tolerance, step_tolerance
        As for :func:`~phantomlab.calibration.fitting.fit_blocks`.
    """
    poor = np.flatnonzero(far_worse_than_data_allow(outcome.chi2, outcome.dof))
    if poor.size == 0:
        return outcome

    def on_rows(function):
        return lambda x_rows, rows: function(x_rows, poor[rows])

    smooth = fit_blocks(on_rows(smooth_residual), outcome.x[poor], mask=mask[poor], lower=lower, upper=upper,
                        row_aware=True, tolerance=tolerance, step_tolerance=step_tolerance)
    # diffusion's time shift is off where its shape is (early photons): the lookup's own best
    # common shift at diffusion's (μa, μs′), from a scan, before the search
    offsets = np.arange(-RESTART_SHIFT_SCAN_PS, RESTART_SHIFT_SCAN_PS + 1e-9, RESTART_SHIFT_STEP_PS) / SHIFT_UNIT_PS
    trial = np.repeat(smooth.x[None, :, :], offsets.size, axis=0)
    trial[:, :, 2:] += offsets[:, None, None]
    trial = np.clip(trial, lower, upper).reshape(-1, smooth.x.shape[1])
    scanned = residual_fn(trial, np.tile(poor, offsets.size))
    cost = np.nansum(np.where(np.tile(mask[poor], (offsets.size, 1)), scanned, 0.0) ** 2, axis=1)
    best = np.argmin(cost.reshape(offsets.size, poor.size), axis=0)
    start = trial.reshape(offsets.size, poor.size, -1)[best, np.arange(poor.size)]
    again = fit_blocks(on_rows(residual_fn), start, mask=mask[poor], lower=lower, upper=upper, row_aware=True,
                       tolerance=tolerance, step_tolerance=step_tolerance)
    better = np.flatnonzero(again.chi2 < outcome.chi2[poor])
    return with_rows(outcome, poor[better], again, better)
