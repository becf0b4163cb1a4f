"""One fit over a band whose scatterer's g changes: each wavelength with a baseline near its own g (layer 3).

The Monte Carlo lookup of the default srdr/sfdi fit is tabulated for one anisotropy g.
Beyond a few transport lengths R(ρ) depends on μs′ alone (the similarity relation), but
within about four it moves by 1–3 % per 0.1 of g (:data:`~phantomlab.calibration.fit_inputs.G_SENSITIVITY_PER_0_1`,
measured on independent Monte Carlo runs).  A lipid emulsion's g falls by more than 0.1 from
the red to the near infrared, so one baseline at the band's mean g fits the band's ends
with g off by ±0.06 or more, and moves their μs′ by one to two SDs.

When the scatterer's g is known per wavelength (the batch's scattering model), the
wavelengths are grouped by g rounded to :data:`G_STEP`, each group is fitted with the
cached baseline of its g, and the groups' results are merged back into one
:class:`~phantomlab.calibration.fitting.FitResult` in wavelength order.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from phantomlab.calibration.fitting import FitResult

__all__ = ["G_STEP", "g_steps", "wavelength_groups", "measurement_part", "merge_fits"]

#: Step of g between the baselines of one band [dimensionless].  Rounding to it leaves a g
#: at most 0.01 off, which moves R by at most 0.3 % next to the source (0.032 per 0.1 at
#: half a transport length, 0.025 at 1–4, G_SENSITIVITY_PER_0_1), a quarter or less of a
#: probe's usual 1 % reading noise (common practice, no source) and below the cached
#: baseline's own photon noise (about 1 %, baseline_cache.CACHE_PHOTONS).  A band from g
#: 0.64 to 0.51 takes seven baselines at most, each built once (about half a minute).
G_STEP = 0.02


def g_steps(g_per_wavelength) -> np.ndarray:
    """g of each wavelength rounded to :data:`G_STEP` (and to two decimals, the cache's names).

    Parameters
    ----------
    g_per_wavelength : array (W,) [dimensionless]

    Returns
    -------
    ndarray (W,)
    """
    g = np.asarray(g_per_wavelength, float).reshape(-1)
    return np.round(np.round(g / G_STEP) * G_STEP, 2)


def wavelength_groups(steps) -> list[tuple[float, np.ndarray]]:
    """The distinct g of :func:`g_steps` with the indices of their wavelengths, highest g first.

    Returns
    -------
    list of (float, ndarray of int)
    """
    steps = np.asarray(steps, float)
    return [(float(g), np.flatnonzero(steps == g)) for g in sorted(set(steps.tolist()), reverse=True)]


def measurement_part(measurement, index):
    """The measurement at the wavelengths ``index`` only (rows of its values and SDs)."""
    index = np.asarray(index, int)
    return replace(measurement, wavelength_nm=np.asarray(measurement.wavelength_nm)[index],
                   values=np.asarray(measurement.values)[index],
                   sd=None if measurement.sd is None else np.asarray(measurement.sd)[index])


def _rows(parts, groups, size: int, name: str):
    values = [getattr(part, name) for part in parts]
    if any(value is None for value in values):
        return None
    first = np.asarray(values[0])
    out = np.full((size,) + first.shape[1:], np.nan, dtype=float)
    for value, (_, index) in zip(values, groups):
        out[index] = np.asarray(value, float)
    return out


def merge_fits(parts: list[FitResult], groups: list[tuple[float, np.ndarray]], size: int) -> FitResult:
    """One result of ``size`` wavelengths from the fits of the groups (same order as ``groups``).

    The per-wavelength arrays are put back in place; the whole fit's χ²ᵣ is the groups'
    χ² summed over their degrees of freedom summed; warnings, ``sd_includes`` are the union
    (first seen first).  The verdict is decided again on the merged result
    (:func:`phantomlab.calibration.fit_quality.judge_fit`).
    """
    from phantomlab.calibration.fit_quality import judge_fit

    first = parts[0]
    per_wavelength = {name: _rows(parts, groups, size, name) for name in (
        "wavelength_nm", "mua_per_mm", "musp_per_mm", "mua_sd_per_mm", "musp_sd_per_mm", "covariance",
        "chi2_red_per_wavelength", "residuals", "scale_factor", "scale_factor_sd", "model_covariance")}
    dofs = np.asarray([part.dof for part in parts], float)
    chi2 = np.asarray([part.chi2_red for part in parts], float)
    tested = np.isfinite(dofs) & np.isfinite(chi2) & (dofs > 0)
    dof = float(np.sum(dofs[tested])) if np.all(tested) else float("nan")
    chi2_red = float(np.sum(chi2[tested] * dofs[tested]) / dof) if np.all(tested) else float("nan")
    merged = replace(
        first, **per_wavelength, chi2_red=chi2_red, dof=dof, converged=all(part.converged for part in parts),
        warnings=tuple(dict.fromkeys(w for part in parts for w in part.warnings)),
        sd_includes=tuple(dict.fromkeys(s for part in parts for s in part.sd_includes)))
    quality, reason = judge_fit(merged)
    return replace(merged, fit_quality=quality, fit_quality_reason=reason)
