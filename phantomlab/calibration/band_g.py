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
:class:`~phantomlab.calibration.fit_result.FitResult` in wavelength order.  Under a
spectral constraint the merged free fits are the start of one joint fit whose rows are
routed to the same baselines (:mod:`phantomlab.calibration.band_lookup`).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from phantomlab.calibration.fit_result import FitResult
from phantomlab.errors import InputError

__all__ = ["G_STEP", "g_steps", "wavelength_groups", "measurement_part", "merge_fits", "g_of_spectrum", "band_plan",
           "fit_band", "lookup_g_values"]

#: Step of g between the baselines of one band [dimensionless].  Rounding to it leaves a g
#: at most 0.01 off, which moves R by at most 0.3 % next to the source (0.032 per 0.1 at
#: half a transport length, 0.025 at 1–4, G_SENSITIVITY_PER_0_1), a quarter or less of a
#: probe's usual 1 % reading noise (common practice, no source) and below the cached
#: baseline's own photon noise (about 1 %, baseline_cache.CACHE_PHOTONS).  A band from g
#: 0.64 to 0.51 takes seven baselines at most, each built once (about a minute).
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


def g_of_spectrum(measurement) -> np.ndarray:
    """The sidecar's ``[g_spectrum]`` at the measurement's wavelengths (linear; none outside it)."""
    grid, values = measurement.metadata.g_spectrum
    wavelength = np.asarray(measurement.wavelength_nm, float)
    outside = (wavelength < grid[0] - 1e-9) | (wavelength > grid[-1] + 1e-9)
    if np.any(outside):
        raise InputError(f"g_spectrum covers {grid[0]:g}-{grid[-1]:g} nm but the measurement has "
                         f"{wavelength[outside][0]:g} nm; accepted: a g_spectrum spanning every wavelength measured")
    return np.interp(wavelength, grid, values)


def band_plan(measurement, *, model: str, g_fallback=None, baseline=None) -> dict | None:
    """How the lookup takes a g known per wavelength, or None when it is not.

    Parameters
    ----------
    measurement : Measurement
        Read with its sidecar and options: a ``g`` given (``metadata.g``) wins; else its
        ``[g_spectrum]`` wins over ``g_fallback``.
    model : str
        The fit model (only ``mc`` is fitted per g step).
    g_fallback : (float or array (W,), str), optional
        The batch's g, one or per wavelength, and its origin.
    baseline : optional
        The fit's explicit baseline (a spectral constraint changes nothing here: a
        constrained band is fitted jointly on the same baselines).

    Returns
    -------
    dict or None
        None without a g per wavelength.  Else ``mean`` (the band's mean g), ``origin``, and
        ``steps`` (g per wavelength rounded to :data:`G_STEP`) when the wavelengths are fitted
        in groups: srdr/sfdi lookup with the cached baselines, no g given nor a baseline file,
        calibrated data with SDs, and more than one step over the band.  A spectral
        constraint couples the wavelengths: the band is then fitted jointly with each group's
        rows on its own baseline (:mod:`phantomlab.calibration.band_lookup`).
    """
    if measurement.metadata.g_spectrum is not None and measurement.metadata.g is None:
        g_fallback = (g_of_spectrum(measurement), "sidecar")
    if g_fallback is None or np.ndim(g_fallback[0]) == 0:
        return None
    g = np.asarray(g_fallback[0], float).reshape(-1)
    if g.size != measurement.wavelength_nm.size or not np.all(np.isfinite(g)):
        raise InputError(f"g per wavelength: {g.size} values for {measurement.wavelength_nm.size} wavelengths; "
                         "accepted: one finite g per wavelength of the measurement")
    band = {"mean": float(np.mean(g)), "origin": str(g_fallback[1])}
    steps = g_steps(g)
    if (model != "mc" or measurement.kind not in ("srdr", "sfdi") or measurement.metadata.g is not None
            or baseline is not None or np.unique(steps).size < 2):
        return band
    if measurement.scale == "raw" or measurement.sd is None:
        return band
    return {**band, "steps": steps}


def lookup_g_values(measurement, *, g_fallback=None) -> list[float]:
    """The g of each cached baseline the default lookup fit of ``measurement`` reads (to build them first).

    Parameters
    ----------
    measurement : Measurement
        Read with its sidecar and options.
    g_fallback : (float or array (W,), str), optional
        The batch's g, one or per wavelength (:func:`phantomlab.measurement_workflow.batch_anisotropy`).

    Returns
    -------
    list of float
        Highest first; one value unless the band is fitted per g step.  Not rounded to the
        cache's 0.01.
    """
    from phantomlab.calibration.baseline_cache import DEFAULT_G

    if measurement.metadata.g is not None:
        return [float(measurement.metadata.g)]
    band = band_plan(measurement, model="mc", g_fallback=g_fallback)
    if band is None:
        return [float(g_fallback[0])] if g_fallback is not None else [DEFAULT_G]
    if band.get("steps") is None:
        return [band["mean"]]
    return sorted({float(g) for g in band["steps"]}, reverse=True)


def fit_band(measurement, band: dict, *, fit_group, progress=None, rebuild: bool = False,
             baseline_dir=None, joint=None) -> FitResult:
    """Fit each group of wavelengths of one g step with its cached baseline, merged in wavelength order.

    Parameters
    ----------
    measurement : Measurement
    band : dict
        From :func:`band_plan`, with ``steps``.
    fit_group : callable
        ``fit_group(part, g, progress) -> (FitResult, ModelInputs)``: the fit of the
        measurement's part at one g step (its baseline resolved, built when missing).
    progress : callable, optional
        ``progress(done, total)`` [photons] over all the builds this fit needs (one bar).
    rebuild, baseline_dir
        As for the cache (every baseline is built again with ``rebuild``).
    joint : callable, optional
        ``joint(free, baselines) -> FitResult``: the band's spectrally constrained fit, started
        from the merged free fits ``free`` with ``baselines`` a
        :class:`~phantomlab.calibration.band_lookup.BandBaselines` (each group's rows with its
        own baseline); its result replaces the free one.

    Returns
    -------
    FitResult
        With ``g_used`` per wavelength, ``baseline`` one file per g step, ``g_note`` (srdr).
    """
    groups = wavelength_groups(band["steps"])
    builds = _builds_needed([g for g, _ in groups], measurement, rebuild=rebuild, folder=baseline_dir)
    parts, used = [], []
    for g, index in groups:
        share = _share_of(progress, builds.index(g), len(builds)) if g in builds else None
        result, inputs = fit_group(measurement_part(measurement, index), g, share)
        parts.append(result)
        used.append(inputs)
    result = merge_fits(parts, groups, measurement.wavelength_nm.size)
    if joint is not None:
        from phantomlab.calibration.band_lookup import BandBaselines

        result = joint(result, BandBaselines(baselines=tuple(inputs.baseline for inputs in used),
                                             rows=tuple(index for _, index in groups),
                                             size=measurement.wavelength_nm.size))
    return _with_band_inputs(result, used, groups, band, measurement)


def _builds_needed(values: list, measurement, *, rebuild: bool, folder) -> list:
    """The g values whose cached baseline the fit will build (all of them with ``rebuild``).

    A cached file that cannot be used is refused here (CachedBaselineError, one line), before
    any of the band's baselines is built.
    """
    from phantomlab.calibration.baseline_cache import baseline_folder, cache_file_name, find_cached_baseline, table_path

    if rebuild:
        return list(values)
    meta = measurement.metadata
    where = baseline_folder(folder)
    needed = []
    for g in values:
        path = where / cache_file_name(g=g, n=meta.n, n_outside=meta.n_outside)
        if not (path.is_file() or table_path(path).is_file()):
            needed.append(g)
        else:
            find_cached_baseline(g=g, n=meta.n, n_outside=meta.n_outside, folder=folder)
    return needed


def _share_of(progress, k: int, count: int):
    """A build's ``progress(done, total)`` reported as the k-th of ``count`` builds (one bar for all)."""
    if progress is None:
        return None

    def report(done, total):
        progress(k * total + done, count * total)

    return report


def _with_band_inputs(result: FitResult, used: list, groups: list, band: dict, measurement) -> FitResult:
    """The band fit's inputs: ``g_used`` per wavelength, ``baseline`` one file per g, and the note on g."""
    from phantomlab.calibration.fit_inputs import band_g_note

    keys = used[0].to_json()
    g_used = np.empty(measurement.wavelength_nm.size)
    for inputs, (_, index) in zip(used, groups):
        g_used[index] = inputs.g
    built = any(inputs.baseline_origin == "cache (built now)" for inputs in used)
    keys.update(g_used=[float(v) for v in g_used], baseline=[inputs.baseline_path for inputs in used],
                baseline_origin="cache (built now)" if built else "cache")
    result = replace(result, extras={**dict(result.extras), **keys})
    if measurement.kind == "srdr":
        note = band_g_note(g_per_wavelength=g_used, g_origin=band["origin"], step=G_STEP, rho_mm=measurement.axis,
                           musp_per_mm=result.musp_per_mm)
        if note:
            result = replace(result, extras={**dict(result.extras), "g_note": note})
    return result

