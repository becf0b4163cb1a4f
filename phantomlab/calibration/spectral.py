"""Fitting optical properties over a band, per wavelength or with spectral constraints (layer 3).

The measurement-specific modules (:mod:`fit_srdr`, :mod:`fit_sfdi`, :mod:`fit_slab`) supply a
forward model ``forward(mua_per_mm, musp_per_mm) -> (W, M)`` and the data; this module does
the rest: starting values, the fit per wavelength (independent problems solved together) or
jointly across the band, and the covariance of (μa, μs′) at each wavelength.

Spectral constraints (:class:`SpectralConstraint`):

* μs′(λ) = a (λ/λ₀)^−b, the empirical power law of tissue optics (Jacques 2013, Phys Med
  Biol 58:R37, eq. 2);
* μa(λ) = μa_m(λ) + Σ_k c_k ε_k(λ), c_k ≥ 0: a non-negative combination of the stocks'
  intrinsic absorption spectra ε_k plus the matrix's absorption, so the fit reports stock
  amounts c_k (volume fraction × potency) directly.
"""

from __future__ import annotations

import warnings
from typing import Callable

import numpy as np

from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.fitting import fit_blocks, log_to_linear
from phantomlab.calibration.spectral_joint import MUA_BOUNDS_PER_MM, MUSP_BOUNDS_PER_MM, SpectralConstraint, joint_fit
from phantomlab.errors import PhantomlabWarning

__all__ = ["SpectralConstraint", "fit_spectrum", "grid_start"]

#: forward(mua_per_mm (N,), musp_per_mm (N,)) -> model (N, M), the same at every wavelength.
Forward = Callable[[np.ndarray, np.ndarray], np.ndarray]



def grid_start(forward: Forward, data: np.ndarray, *, relative: bool, W: int,
               candidates: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Starting (μa, μs′) per wavelength from a coarse logarithmic grid search.

    Compares log model and log data (after the best common scale when ``relative``).
    With ``candidates`` > 1, returns the best few grid points, shape (candidates, W) each,
    for restarts where the first start lands in a local minimum.
    """
    mua_grid = np.geomspace(1e-4, 2.0, 14)
    musp_grid = np.geomspace(0.05, 10.0, 12)
    A, S = np.meshgrid(mua_grid, musp_grid, indexing="ij")
    pairs_a, pairs_s = A.ravel(), S.ravel()
    G = pairs_a.size
    with warnings.catch_warnings(), np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        warnings.simplefilter("ignore")
        model = np.asarray(forward(pairs_a, pairs_s), float).reshape(G, -1)
        lm = np.log(np.where(model > 0, model, 1e-300))  # (G, M)
        lm = np.where(np.isfinite(lm), lm, np.log(1e-300))
        m = np.isfinite(data) & (data > 0)  # (W, M)
        ld = np.where(m, np.log(np.where(m, data, 1.0)), 0.0)
        w = m.astype(float)
        count = np.maximum(w.sum(axis=1, keepdims=True), 1.0)
        # mean over the used points of (lm - ld)^2, as matrix products (W, G)
        cost = (w @ (lm**2).T - 2.0 * (ld @ lm.T) + np.sum(ld**2, axis=1, keepdims=True)) / count
        if relative:
            shift = (w @ lm.T - np.sum(ld, axis=1, keepdims=True)) / count
            cost = cost - shift**2
    cost = np.where(np.isfinite(cost), cost, np.inf)
    if candidates == 1:
        best = np.argmin(cost, axis=1)
        return pairs_a[best], pairs_s[best]
    order = np.argsort(cost, axis=1)[:, :candidates].T
    return pairs_a[order], pairs_s[order]


def _optimal_scale(model, data, sd, mask):
    """The scale k minimising Σ ((k m − d)/σ)² over the used points: Σ m d/σ² / Σ m²/σ²."""
    w = np.where(mask, 1.0 / sd**2, 0.0)
    num = np.sum(w * model * np.where(mask, data, 0.0), axis=1)
    den = np.sum(w * model**2, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        k = num / den
    return np.where(np.isfinite(k) & (k > 0), k, 1e-300)


def _block_fit(forward, data, sd, mask, relative, start, scale_by_chi2, profile_sd=True):
    """Per-wavelength fit of (log μa, log μs′); relative data by variable projection.

    For relative data the scale factor enters linearly, so it is solved in closed form at
    every trial (μa, μs′) and the search runs over two parameters only (variable projection,
    Golub & Pereyra 1973, SIAM J Numer Anal 10:413); the covariance of all three comes from
    the full Jacobian at the solution.
    """
    W = data.shape[0]
    mua0, musp0 = start
    x0 = np.stack([np.log(mua0), np.log(musp0)], axis=1)
    lower = np.array([np.log(MUA_BOUNDS_PER_MM[0]), np.log(MUSP_BOUNDS_PER_MM[0])])
    upper = np.array([np.log(MUA_BOUNDS_PER_MM[1]), np.log(MUSP_BOUNDS_PER_MM[1])])
    safe = np.where(mask, data, 0.0)

    def residuals(x, rows):
        model = forward(np.exp(x[:, 0]), np.exp(x[:, 1]))
        if relative:
            model = model * _optimal_scale(model, safe[rows], sd[rows], mask[rows])[:, None]
        return (model - safe[rows]) / sd[rows]

    outcome = fit_blocks(residuals, x0, mask=mask, lower=lower, upper=upper,
                         scale_by_chi2=scale_by_chi2, row_aware=True)
    x, covariance, chi2, dof, chi2_red = outcome.x, outcome.covariance, outcome.chi2, outcome.dof, outcome.chi2_red
    scale = scale_sd = None
    if relative:
        model = forward(np.exp(x[:, 0]), np.exp(x[:, 1]))
        log_k = np.log(_optimal_scale(model, safe, sd, mask))
        x3 = np.column_stack([x, log_k])

        def full(x_all):
            m = forward(np.exp(x_all[:, 0]), np.exp(x_all[:, 1])) * np.exp(x_all[:, 2:3])
            return np.where(mask, (m - safe) / sd, 0.0)

        from phantomlab.calibration.fitting import _invert_normal, finite_jacobian

        covariance = _invert_normal(finite_jacobian(full, x3))
        dof = mask.sum(axis=1) - 3
        with np.errstate(invalid="ignore", divide="ignore"):
            chi2_red = np.where(dof > 0, chi2 / np.maximum(dof, 1), np.nan)
        if scale_by_chi2:
            covariance = covariance * np.where(np.isfinite(chi2_red), chi2_red, np.inf)[:, None, None]
        threshold = np.where(np.isfinite(chi2_red), chi2_red, np.inf) if scale_by_chi2 else np.ones(W)
        if profile_sd:
            covariance = _profile_widths(residuals, x, chi2, covariance, mask, lower, upper, threshold)
        x = x3
    values, cov = log_to_linear(x, covariance)
    mua, musp = values[:, 0], values[:, 1]
    if relative:
        scale = values[:, 2]
        scale_sd = np.sqrt(cov[:, 2, 2])
    with np.errstate(invalid="ignore"):
        corr = covariance[:, 0, 1] / np.sqrt(covariance[:, 0, 0] * covariance[:, 1, 1])
    return dict(mua=mua, musp=musp, cov=cov[:, :2, :2], chi2=chi2, dof=dof,
                chi2_red_w=chi2_red, residuals=outcome.residuals, scale=scale,
                scale_sd=scale_sd, parameters={}, correlation=corr,
                converged=(np.asarray(outcome.settled, bool) if outcome.settled is not None
                           else np.full(W, bool(outcome.success))))


#: Steps (in linearised SDs) at which :func:`_profile_widths` evaluates the profile χ².
_PROFILE_STEPS = (1.0, 2.0, 4.0)
#: Bounds of the ratio of profile to linearised SD (numerical safety).
_PROFILE_RATIO_BOUNDS = (0.5, 10.0)


def _profile_widths(residuals, x, chi2_min, covariance, mask, lower, upper, threshold):
    """The covariance with the SDs of log μa and log μs′ taken from their profile χ².

    Relative data fit a scale factor too, and their χ² valley along (μa, μs′, scale) is
    curved and flat-bottomed, so the linearised covariance (JᵀJ)⁻¹ can claim half the width
    the data give.  For each of the two coefficients the other one is refitted (the scale in
    closed form) at steps of 1, 2 and 4 linearised SDs on either side until χ² has risen by
    ``threshold`` (1 for data with SDs): the profile-likelihood interval (Venzon & Moolgavkar
    1988, Appl Stat 37:87).  Half its width replaces the SD; the correlations are kept.

    Parameters
    ----------
    residuals : callable
        ``residuals(x_rows (N, 2), rows)`` of the variable-projection fit.
    x : ndarray (W, 2)
        Solution in (log μa, log μs′).
    chi2_min : ndarray (W,)
    covariance : ndarray (W, P, P)
        Covariance in log parameters (P = 3 with the log scale last).
    mask : ndarray (W, M)
    lower, upper : ndarray (2,)
        Bounds of the log parameters.
    threshold : ndarray (W,)
        Rise of χ² that marks one SD.
    """
    W = x.shape[0]
    cov = np.array(covariance, dtype=float, copy=True)
    with np.errstate(invalid="ignore"):
        sigma = np.sqrt(np.diagonal(cov, axis1=1, axis2=2)[:, :2])
    usable = np.all(np.isfinite(sigma), axis=1) & (sigma > 0).all(axis=1) & np.isfinite(threshold)
    if not usable.any():
        return cov
    factors = np.ones((W, 2))
    for p in range(2):
        q = 1 - p
        half_widths = []
        for side in (-1.0, 1.0):
            width = np.full(W, np.nan)
            last_step, last_root = np.zeros(W), np.zeros(W)
            pending = usable.copy()
            for step in _PROFILE_STEPS:
                rows = np.where(pending)[0]
                if rows.size == 0:
                    break
                fixed = x[rows, p] + side * step * sigma[rows, p]
                # start the other coefficient at its conditional mean given the fixed one
                start = x[rows, q] + cov[rows, q, p] / cov[rows, p, p] * (fixed - x[rows, p])

                def conditional(xq, sub, fixed=fixed, rows=rows, p=p, q=q):
                    full_x = np.empty((sub.size, 2))
                    full_x[:, p] = fixed[sub]
                    full_x[:, q] = xq[:, 0]
                    return residuals(full_x, rows[sub])

                outcome = fit_blocks(conditional, np.clip(start, lower[q], upper[q])[:, None], mask=mask[rows],
                                     lower=lower[q], upper=upper[q], row_aware=True)
                rise = np.maximum(outcome.chi2 - chi2_min[rows], 0.0) / threshold[rows]
                root = np.sqrt(rise)
                crossed = root >= 1.0
                # √Δχ² is linear in the step for a quadratic valley: interpolate the crossing
                between = last_step[rows] + (step - last_step[rows]) * (1.0 - last_root[rows]) / np.maximum(
                    root - last_root[rows], 1e-12)
                width[rows[crossed]] = between[crossed] * sigma[rows[crossed], p]
                last_step[rows], last_root[rows] = step, root
                pending[rows[crossed]] = False
            far = pending & usable  # not crossed at the last step: extrapolate as a quadratic
            width[far] = last_step[far] * sigma[far, p] / np.maximum(last_root[far], 1.0 / _PROFILE_RATIO_BOUNDS[1])
            half_widths.append(width)
        profile = 0.5 * (half_widths[0] + half_widths[1])
        ratio = np.clip(profile / sigma[:, p], *_PROFILE_RATIO_BOUNDS)
        factors[:, p] = np.where(usable & np.isfinite(ratio), ratio, 1.0)
    scale = np.ones((W, cov.shape[1]))
    scale[:, :2] = factors
    return cov * scale[:, :, None] * scale[:, None, :]


#: A wavelength is refitted from other starting points (a sign of a local minimum) when its χ²
#: lies more than this many standard deviations of the χ² distribution above its mean, or, for
#: data without SDs, above this many times the median.
_RESTART_SIGMAS = 5.0
_RESTART_FACTOR = 3.0
#: Wavelengths restarted first, as a probe, when more are poor: if none of them finds a
#: clearly lower χ² (by :data:`_RESTART_GAIN` of it), the misfit is the model's, not a local
#: minimum, and the others are not restarted.
_RESTART_PROBES = 6
_RESTART_GAIN = 0.1


def _restart_poor_blocks(forward, data, sd, mask, relative, scale_by_chi2, parts, candidates=6, profile_sd=True,
                         probe=True):
    """Refit the wavelengths whose χ² is far too high from the best few grid points.

    A χ² far above its distribution can mean a local minimum (restarts help) or a model that
    does not describe the data (restarts cannot help, and on a 601-wavelength file cost
    seconds).  A local minimum shows as a wavelength far worse than the band's typical
    misfit (χ²ᵣ above :data:`_RESTART_FACTOR` × the median): those are all restarted.  A
    model error is spread over the band: of the other poor wavelengths, up to
    :data:`_RESTART_PROBES`, spread over the band, are restarted first, and only if one of
    them lowers its χ² by more than :data:`_RESTART_GAIN` are the rest restarted too.
    ``probe=False`` (a refinement from a solution already found, whose band-wide misfit the
    first fit probed) restarts the outliers only.
    """
    chi2, dof = parts["chi2"], parts["dof"]
    if not np.any(dof > 0):
        return parts
    if scale_by_chi2:
        chi2_red = parts["chi2_red_w"]
        limit = _RESTART_FACTOR * float(np.nanmedian(chi2_red)) * np.maximum(dof, 1)
    else:
        limit = dof + _RESTART_SIGMAS * np.sqrt(2.0 * np.maximum(dof, 1))
    poor = (dof > 0) & (chi2 > limit)
    if not poor.any():
        return parts
    # far above the band's typical misfit: a local minimum is likely, restart every one
    with np.errstate(invalid="ignore", divide="ignore"):
        chi2_red_w = chi2 / np.maximum(dof, 1)
    typical = float(np.nanmedian(chi2_red_w[dof > 0]))
    outliers = np.where(poor & (chi2_red_w > _RESTART_FACTOR * typical))[0]
    best = parts
    if outliers.size:
        best, _ = _restart_rows(forward, data, sd, mask, relative, scale_by_chi2, best, outliers, candidates,
                                profile_sd)
    # the rest are as poor as the band: a model error, unless a probe finds a lower minimum
    rest = np.setdiff1d(np.where(poor)[0], outliers) if probe else np.zeros(0, int)
    if rest.size > _RESTART_PROBES:
        probes = rest[np.unique(np.linspace(0, rest.size - 1, _RESTART_PROBES).round().astype(int))]
        best, gained = _restart_rows(forward, data, sd, mask, relative, scale_by_chi2, best, probes,
                                     candidates, profile_sd)
        if not gained:
            return best  # a model error: other starting points do not lower the misfit
        rest = np.setdiff1d(rest, probes)
    if rest.size:
        best, _ = _restart_rows(forward, data, sd, mask, relative, scale_by_chi2, best, rest, candidates,
                                profile_sd)
    return best


#: A wavelength whose fitted log μa and log μs′ are correlated beyond this is also refitted from
#: starts along its valley (:func:`_restart_along_valleys`).
_VALLEY_CORRELATION = 0.99
#: Those starts: μs′ times these factors, μa moved to keep μa(μa + μs′) (so μeff) as fitted.
_VALLEY_STEPS = (0.4, 0.6, 1.6, 2.5)


def _restart_along_valleys(forward, data, sd, mask, relative, scale_by_chi2, parts, profile_sd):
    """Refit the wavelengths whose μa and μs′ trade along a narrow valley from starts along it.

    Data far from the source fix μeff = √(3μa(μa + μs′)) well and the other combination
    weakly: the χ² valley follows constant μeff and can hold more than one minimum, and a fit
    is not poor in χ² in the wrong one.  Measured on independent Monte Carlo data (steady-state
    point values at 8–17 mm, μs′/μa 80–100, 1 % noise): 20–22 of 30 copies stopped with μa
    +140 %, μs′ −49 % and linear SDs of 9 %, their χ² a little above the true minimum's (9.2
    against 6.6 on 11 points; tests/calibration/test_srdr_independent_coverage.py).  Where
    |correlation| exceeds :data:`_VALLEY_CORRELATION`, four starts along constant μeff
    (:data:`_VALLEY_STEPS`) are fitted too and the lowest χ² kept: then 1 of 150 fits was off
    by more than 30 %, 98.7 % within 2 SD.  Probes reaching near the source stay below that
    correlation (0.69–0.93 in bench/fit.py) and cost nothing more.
    """
    corr = np.abs(np.nan_to_num(np.asarray(parts["correlation"], float), nan=0.0))
    rows = np.where((corr > _VALLEY_CORRELATION) & (parts["dof"] > 0))[0]
    if rows.size == 0:
        return parts
    mua, musp = parts["mua"][rows], parts["musp"][rows]
    product = mua * (mua + musp)
    starts_s = np.array([np.clip(musp * f, *MUSP_BOUNDS_PER_MM) for f in _VALLEY_STEPS])
    starts_a = np.clip(0.5 * (np.sqrt(starts_s**2 + 4.0 * product) - starts_s), *MUA_BOUNDS_PER_MM)
    best, _ = _restart_rows(forward, data, sd, mask, relative, scale_by_chi2, parts, rows, len(_VALLEY_STEPS),
                            profile_sd, starts=(starts_a, starts_s))
    return best


def _restart_rows(forward, data, sd, mask, relative, scale_by_chi2, parts, poor, candidates, profile_sd,
                  starts=None):
    """Restart the wavelengths ``poor`` (from the best grid points, or ``starts``, (candidates,
    poor.size) each); returns the merged parts and whether any clearly gained."""
    chi2 = parts["chi2"]
    if starts is None:
        starts = grid_start(forward, np.where(mask, data, np.nan)[poor], relative=relative, W=poor.size,
                            candidates=candidates)
    starts_a, starts_s = starts
    # every candidate start of every poor wavelength in one batched fit
    rows = np.tile(poor, candidates)
    trial = _block_fit(forward, data[rows], sd[rows], mask[rows], relative,
                       (starts_a.ravel(), starts_s.ravel()), scale_by_chi2, profile_sd)
    trial_chi2 = trial["chi2"].reshape(candidates, poor.size)
    pick = np.argmin(trial_chi2, axis=0)
    chosen = pick * poor.size + np.arange(poor.size)
    lowest = trial_chi2[pick, np.arange(poor.size)]
    better = lowest < chi2[poor]
    gained = bool(np.any(lowest < (1.0 - _RESTART_GAIN) * chi2[poor]))
    best = {key: (value.copy() if isinstance(value, np.ndarray) else value) for key, value in parts.items()}
    for key in ("mua", "musp", "cov", "chi2", "dof", "chi2_red_w", "residuals", "correlation", "scale", "scale_sd",
                "converged"):
        if best.get(key) is not None:
            best[key][poor[better]] = trial[key][chosen[better]]
    return best, gained


def fit_spectrum(
    forward: Forward,
    *,
    kind: str,
    model: str,
    wavelength_nm: np.ndarray,
    data: np.ndarray,
    sd: np.ndarray | None,
    relative: bool = False,
    constraint: SpectralConstraint | None = None,
    start: tuple[np.ndarray, np.ndarray] | None = None,
    mask: np.ndarray | None = None,
    profile_sd: bool = True,
) -> tuple[FitResult, np.ndarray]:
    """Fit μa and μs′ over a band with a forward model.

    Parameters
    ----------
    forward : callable
        ``forward(mua_per_mm (W,), musp_per_mm (W,)) -> (W, M)`` model of the data; it must
        be the same function at every wavelength, so any number N of (μa, μs′) pairs gives
        (N, M) (the grid search uses this).
    kind, model : str
        Recorded in the result.
    wavelength_nm : ndarray (W,) [nm]
    data : ndarray (W, M)
        Measured values (NaN where missing).
    sd : ndarray (W, M) or None
        Their SDs; None means relative weighting (1 per value) with the covariance scaled by
        the reduced χ².
    relative : bool
        Fit an unknown scale factor per wavelength (data = scale · model).
    constraint : SpectralConstraint, optional
        Joint fit across the band.
    start : (mua (W,), musp (W,)), optional
        Starting values (else a grid search).  A fit from given starting values is a
        refinement: only wavelengths far worse than the band are restarted (no probing of a
        band-wide misfit, see :func:`_restart_poor_blocks`).
    mask : ndarray of bool (W, M), optional
        Points to use (default: finite data).
    profile_sd : bool, default True
        Relative data, per-wavelength fits: SDs of μa and μs′ from the profile χ²
        (:func:`_profile_widths`); False keeps the linearised ones (cheaper, for
        intermediate passes of a fit that is refined afterwards).

    Returns
    -------
    (FitResult, ndarray)
        The result (without warnings) and the correlation of log μa with log μs′ per
        wavelength, for the identifiability checks.
    """
    data = np.asarray(data, float)
    W = data.shape[0]
    use = np.isfinite(data) if mask is None else (np.asarray(mask, bool) & np.isfinite(data))
    scale_by_chi2 = sd is None
    if sd is None:
        sigma = np.where(use, np.abs(data), 1.0)
        sigma = np.where(sigma > 0, sigma, 1.0)
    else:
        sigma = np.where(use, np.asarray(sd, float), 1.0)
    refinement = start is not None
    if start is None:
        start = grid_start(forward, np.where(use, data, np.nan), relative=relative, W=W)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        if constraint is not None and constraint.active:
            if not refinement:
                # the joint problem starts from the free fit of each wavelength (with its
                # restarts): a coarse grid start can leave the coupled search in a far basin
                free = _block_fit(forward, data, sigma, use, relative, start, scale_by_chi2, profile_sd=False)
                free = _restart_poor_blocks(forward, data, sigma, use, relative, scale_by_chi2, free,
                                            profile_sd=False, probe=True)
                free = _restart_along_valleys(forward, data, sigma, use, relative, scale_by_chi2, free, False)
                start = (free["mua"], free["musp"])
            parts = joint_fit(forward, data, sigma, use, relative, start, scale_by_chi2, constraint, wavelength_nm)
        else:
            parts = _block_fit(forward, data, sigma, use, relative, start, scale_by_chi2, profile_sd)
            parts = _restart_poor_blocks(forward, data, sigma, use, relative, scale_by_chi2, parts,
                                         profile_sd=profile_sd, probe=not refinement)
            parts = _restart_along_valleys(forward, data, sigma, use, relative, scale_by_chi2, parts, profile_sd)
    total_dof = parts["dof"].sum()
    chi2_red = float(parts["chi2"].sum() / total_dof) if total_dof > 0 else float("nan")
    notes = []
    chi2_red_w = parts["chi2_red_w"]
    if scale_by_chi2:
        # relative weights of 1: the "chi2" is the mean square relative residual, no test of fit
        parts["parameters"]["relative_rms_residual"] = float(np.sqrt(chi2_red)) if np.isfinite(chi2_red) else None
        chi2_red = float("nan")
        chi2_red_w = np.full_like(chi2_red_w, np.nan)
        notes.append("the file gives no sd column: SDs are estimated from the scatter of the residuals "
                     "and chi2_red is not available")
    cov = parts["cov"]
    with np.errstate(invalid="ignore"):
        mua_sd = np.sqrt(np.diagonal(cov, axis1=1, axis2=2)[:, 0])
        musp_sd = np.sqrt(np.diagonal(cov, axis1=1, axis2=2)[:, 1])
    result = FitResult(
        kind=kind, model=model, wavelength_nm=np.asarray(wavelength_nm, float),
        mua_per_mm=parts["mua"], musp_per_mm=parts["musp"], mua_sd_per_mm=mua_sd,
        musp_sd_per_mm=musp_sd, covariance=cov, chi2_red=chi2_red,
        chi2_red_per_wavelength=chi2_red_w, residuals=parts["residuals"], warnings=tuple(notes),
        scale_factor=parts["scale"], scale_factor_sd=parts["scale_sd"], parameters=parts["parameters"],
        dof=float(total_dof) if np.isfinite(chi2_red) else float("nan"),
        converged=bool(np.all(parts.get("converged", True))),
    )
    return result, parts["correlation"]


def merge_rows(full: FitResult, full_correlation: np.ndarray, part: FitResult, part_correlation: np.ndarray,
               rows: np.ndarray, *, parameters_per_wavelength: int) -> tuple[FitResult, np.ndarray]:
    """Put the per-wavelength fit ``part`` of wavelengths ``rows`` into ``full`` (block fits only).

    The overall reduced χ² is recomputed from the merged residuals (NaN stays NaN when the
    data carry no SDs).
    """
    from dataclasses import replace

    def put(a, b):
        if a is None:
            return None
        out = np.array(a, copy=True)
        out[rows] = b
        return out

    residuals = put(full.residuals, part.residuals)
    chi2_red, total_dof = full.chi2_red, full.dof
    if np.isfinite(full.chi2_red):
        dof = np.sum(np.isfinite(residuals)) - parameters_per_wavelength * residuals.shape[0]
        chi2_red = float(np.nansum(residuals**2) / dof) if dof > 0 else float("nan")
        total_dof = float(dof) if dof > 0 else float("nan")
    merged = replace(
        full, mua_per_mm=put(full.mua_per_mm, part.mua_per_mm), musp_per_mm=put(full.musp_per_mm, part.musp_per_mm),
        mua_sd_per_mm=put(full.mua_sd_per_mm, part.mua_sd_per_mm),
        musp_sd_per_mm=put(full.musp_sd_per_mm, part.musp_sd_per_mm), covariance=put(full.covariance, part.covariance),
        chi2_red=chi2_red, dof=total_dof,
        chi2_red_per_wavelength=put(full.chi2_red_per_wavelength, part.chi2_red_per_wavelength),
        residuals=residuals, scale_factor=put(full.scale_factor, part.scale_factor),
        scale_factor_sd=put(full.scale_factor_sd, part.scale_factor_sd),
        converged=bool(full.converged and part.converged),
    )
    return merged, put(full_correlation, part_correlation)
