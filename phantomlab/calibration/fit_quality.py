"""Honest uncertainty and a verdict for every fit (layer 3).

One place, applied by :func:`phantomlab.calibration.fit_file.fit_measurement` to the result of
every kind (srdr, sfdi, slab, optics, and any fit that fills ``FitResult.chi2_red``,
``chi2_red_per_wavelength``, ``dof`` and ``residuals``):

1. **Misfit.**  At every wavelength whose reduced χ² exceeds 1 the statistical covariance is
   multiplied by χ²ᵣ (SDs by √χ²ᵣ): the residuals say the data scatter more about the model
   than their SDs claim, and the usual remedy of weighted least squares is to trust the
   residuals then (Press et al. 1992, *Numerical Recipes*, 2nd ed., sec. 15.1; Bevington &
   Robinson 2003, *Data Reduction and Error Analysis*, 3rd ed., sec. 7.5).  A χ²ᵣ below 1
   leaves the SDs alone (the data's own SDs are not shrunk on the model's word).
2. **Known model error.**  A forward model that is known to be approximate (diffusion)
   puts its measured error into ``FitResult.model_covariance``; it is added after the
   scaling.
3. **Verdict** ``fit_quality``:

   * ``failed``: the minimiser did not converge, a fitted value is not finite, or no value
     is determined (every SD infinite);
   * ``poor``: "the model does not describe these data": the χ² test rejects the fit and the
     misfit is large (rule below), over the whole file or at some wavelengths;
   * ``good``: otherwise (also when there is no test of fit: no sd column, no degrees of
     freedom, values taken as measured; the reason says so).

The rule for ``poor`` (:func:`misfit_flags`).  A χ² test alone cries wolf on large files:
with 601 wavelengths × 20 distances (12 000 degrees of freedom) a χ²ᵣ of 1.1, i.e. SDs that
are 5 % too small, has a p-value of 3·10⁻¹⁴.  So two conditions must hold together:

* significance: the upper-tail probability of χ² for its degrees of freedom is below
  :data:`POOR_P_VALUE` (0.001; per wavelength, Bonferroni-corrected for the number of
  wavelengths tested, so a 601-wavelength file does not flag one by chance);
* effect size: χ²ᵣ ≥ :data:`POOR_MIN_CHI2_RED` (2).  Write the residuals as noise of the
  stated size plus a systematic part; then χ²ᵣ − 1 ≈ (RMS systematic residual / SD)².
  χ²ᵣ ≥ 2 says the systematic misfit is at least as large as the noise the file states —
  beyond what SDs "slightly off" can explain (SDs underestimated by 30 % give χ²ᵣ = 1.7),
  and large enough to move the fitted values by about their own SD or more, which is what a
  user must hear about.  Measured on Monte Carlo data with 1 % noise: the Monte Carlo lookup
  within its reach gives χ²ᵣ ≈ 1 (good); diffusion at n = 1.4 χ²ᵣ of a few to tens, beyond
  the lookup's reach χ²ᵣ ≈ 175 (poor).

``sd_includes`` lists what the SDs account for, from :data:`SD_PARTS`.
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from scipy.stats import chi2 as chi2_distribution

from phantomlab.calibration.fit_result import FitResult

__all__ = ["FIT_QUALITIES", "SD_PARTS", "POOR_P_VALUE", "POOR_MIN_CHI2_RED", "assess_fit", "judge_fit",
           "misfit_flags", "wavelength_dof"]

FIT_QUALITIES = ("good", "poor", "failed")

#: What an SD can account for (the values of ``sd_includes``), with their meaning.
SD_PARTS = {
    "measurement_sd": "the file's sd column, carried through the fit's covariance",
    "poisson_counts": "time-domain histograms: Poisson counting noise (Pearson chi2, weights from the model)",
    "residual_scatter": "no sd column: SDs from the scatter of the residuals about the model",
    "replicate_spread": "replicate files combined: their spread where it exceeds the stated SDs",
    "reference_phantom": "raw readings: the reference phantom's optics uncertainty",
    "sphere_standards": "integrating sphere: the reflectance standard's and the sphere walls' stated uncertainty",
    "lookup_photon_noise": "the Monte Carlo lookup's own photon noise (and, td and fd, its smoothing bias), added to the data SDs",
    "slab_photon_noise": "the photon noise of the Monte Carlo slab runs that correct the diffusion model, added to the data SDs",
    "misfit_scale": "multiplied by sqrt(chi2_red) at wavelengths where chi2_red > 1",
    "diffusion_model_error": "the diffusion model's error against Monte Carlo (measured map), propagated to mua and musp",
    "slab_model_error": "the slab model's error between its Monte Carlo runs (measured by fitting each run from the others), propagated to mua and musp",
    "as_measured": "values and SDs taken from the file as they are (no model)",
}

#: Significance of the χ² test for ``poor`` (per wavelength divided by the number tested).
POOR_P_VALUE = 1e-3
#: Smallest χ²ᵣ for ``poor``: the systematic misfit at least as large as the stated noise.
POOR_MIN_CHI2_RED = 2.0


def wavelength_dof(result: FitResult) -> np.ndarray:
    """Degrees of freedom of ``chi2_red_per_wavelength`` (W,), from the residuals and ``dof``.

    Points used per wavelength (finite residuals) minus that wavelength's share of the
    fitted parameters, (points used in all − ``dof``)/W; NaN where there is no test.
    """
    W = np.size(result.wavelength_nm)
    residuals = np.asarray(result.residuals, float)
    if residuals.ndim != 2 or residuals.shape[0] != W or not np.isfinite(result.dof):
        return np.full(W, np.nan)
    used = np.isfinite(residuals).sum(axis=1).astype(float)
    per_wavelength = (used.sum() - float(result.dof)) / max(W, 1)
    dof = used - per_wavelength
    return np.where(dof > 0, dof, np.nan)


def misfit_flags(chi2_red, dof, *, tests: int = 1) -> np.ndarray:
    """True where the fit does not describe the data (significant and large misfit).

    Parameters
    ----------
    chi2_red, dof : float or array
        Reduced χ² and its degrees of freedom (NaN: no test, never flagged).
    tests : int
        Number of tests made together (the p-value threshold is divided by it).

    Returns
    -------
    ndarray of bool
    """
    chi2_red = np.asarray(chi2_red, float)
    dof = np.asarray(dof, float)
    ok = np.isfinite(chi2_red) & np.isfinite(dof) & (dof > 0)
    with np.errstate(invalid="ignore"):
        p_value = np.where(ok, chi2_distribution.sf(np.where(ok, chi2_red * dof, 0.0), np.where(ok, dof, 1.0)), 1.0)
    return ok & (p_value < POOR_P_VALUE / max(int(tests), 1)) & (chi2_red >= POOR_MIN_CHI2_RED)


def _bands(wavelength_nm, flags) -> str:
    from phantomlab.calibration.identifiability import _bands as bands

    return bands(wavelength_nm, flags)


def _failure(result: FitResult) -> str | None:
    values = np.concatenate([np.ravel(result.mua_per_mm), np.ravel(result.musp_per_mm)])
    wl = np.asarray(result.wavelength_nm)
    if not result.converged:
        return "the fit did not converge (the minimiser ran out of iterations)"
    bad = ~(np.isfinite(result.mua_per_mm) & np.isfinite(result.musp_per_mm))
    if values.size == 0:
        return "no values were fitted"
    if np.any(bad):
        return f"the fit gave non-finite values at {_bands(wl, bad)}"
    determined = np.isfinite(result.mua_sd_per_mm) | np.isfinite(result.musp_sd_per_mm)
    if result.model != "direct" and not np.any(determined):
        return "the data determine neither mua nor musp at any wavelength (infinite SDs)"
    return None


def assess_fit(result: FitResult, *, sd_parts=("measurement_sd",)) -> FitResult:
    """The result with misfit-scaled SDs, the model-error term, ``sd_includes`` and a verdict.

    Parameters
    ----------
    result : FitResult
        As a kind's fit returns it (``fit_quality`` None); ``model_covariance`` (W, 2, 2), if
        set, is the forward model's known error.
    sd_parts : sequence of str
        What the data SDs going into the fit already include (keys of :data:`SD_PARTS`).

    Returns
    -------
    FitResult
        ``covariance``, ``mua_sd_per_mm``, ``musp_sd_per_mm`` (and ``scale_factor_sd``,
        ``parameters`` SDs) final; ``fit_quality``, ``fit_quality_reason``, ``sd_includes``
        set.  A result already assessed is returned unchanged.
    """
    if result.fit_quality is not None:
        return result
    parts = list(dict.fromkeys(sd_parts))
    wl = np.asarray(result.wavelength_nm)
    W = wl.size
    chi2_w = np.asarray(result.chi2_red_per_wavelength, float).reshape(-1)
    if chi2_w.size != W:
        chi2_w = np.full(W, np.nan)
    factor = np.where(np.isfinite(chi2_w) & (chi2_w > 1.0), chi2_w, 1.0)
    covariance = np.array(result.covariance, float, copy=True)
    changes: dict = {}
    if np.any(factor > 1.0):
        parts.append("misfit_scale")
        covariance = covariance * factor[:, None, None]
        if result.scale_factor_sd is not None:
            changes["scale_factor_sd"] = np.asarray(result.scale_factor_sd, float) * np.sqrt(factor)
        overall = result.chi2_red if np.isfinite(result.chi2_red) and result.chi2_red > 1.0 else 1.0
        changes["parameters"] = _scaled_parameters(result.parameters, np.sqrt(overall))
    if result.model_covariance is not None:
        extra = np.asarray(result.model_covariance, float)
        if np.any(extra[np.isfinite(extra)] != 0.0):
            parts.append("slab_model_error" if result.model == "mc-slab" else "diffusion_model_error")
        covariance = covariance + np.nan_to_num(extra, nan=0.0)
    with np.errstate(invalid="ignore"):
        mua_sd = np.sqrt(np.diagonal(covariance, axis1=1, axis2=2)[:, 0])
        musp_sd = np.sqrt(np.diagonal(covariance, axis1=1, axis2=2)[:, 1])
    for name, model_name in (("time_shift_sd_ps", "time_shift_model_sd_ps"),  # td: the delay t0
                             ("phase_offset_sd_deg", "phase_offset_model_sd_deg")):  # fd: the system phase
        # a nuisance parameter's SD as μa's and μs′'s: the misfit scale, the model's own error
        nuisance_sd = getattr(result, name, None)
        nuisance_sd = np.zeros((0, 0)) if nuisance_sd is None else np.asarray(nuisance_sd, float)
        if nuisance_sd.ndim == 2 and nuisance_sd.shape[0] == W and nuisance_sd.size:
            variance = nuisance_sd**2 * factor[:, None]
            model_sd = getattr(result, model_name, None)
            if model_sd is not None and np.shape(model_sd) == nuisance_sd.shape:
                variance = variance + np.nan_to_num(np.asarray(model_sd, float), nan=0.0) ** 2
            changes[name] = np.sqrt(variance)
    result = replace(result, covariance=covariance, mua_sd_per_mm=mua_sd, musp_sd_per_mm=musp_sd, **changes)
    quality, reason = _verdict(result)
    return replace(result, sd_includes=tuple(parts), fit_quality=quality, fit_quality_reason=reason)


def _scaled_parameters(parameters, factor: float) -> dict:
    """Extra fitted parameters with every SD entry (keys ending in ``sd``) times ``factor``."""
    out = {}
    for name, entry in dict(parameters).items():
        if isinstance(entry, dict):
            out[name] = {key: (value * factor if key.endswith("sd") and isinstance(value, (int, float))
                               and value is not None else value) for key, value in entry.items()}
        else:
            out[name] = entry
    return out


def judge_fit(result: FitResult) -> tuple[str, str]:
    """The verdict and its reason for a result whose SDs are final (fit_quality, fit_quality_reason).

    :func:`assess_fit` ends with it; a result merged from fits already assessed (one band
    fitted in parts, :mod:`phantomlab.calibration.band_g`) is judged again with it.
    """
    return _verdict(result)


def _verdict(result: FitResult) -> tuple[str, str]:
    failure = _failure(result)
    if failure is not None:
        return "failed", failure
    if result.model == "direct":
        return "good", "values taken as measured: no model was fitted"
    wl = np.asarray(result.wavelength_nm)
    chi2_w = np.asarray(result.chi2_red_per_wavelength, float).reshape(-1)
    if not np.isfinite(result.chi2_red):
        if result.parameters.get("relative_rms_residual") is not None:
            return "good", ("no test of fit: the file gives no sd column (the SDs come from the scatter of the "
                            f"residuals, {100 * result.parameters['relative_rms_residual']:.2g} % RMS)")
        return "good", "no test of fit: as many fitted values as data (no degrees of freedom)"
    dof_w = wavelength_dof(result)
    tested = int(np.sum(np.isfinite(dof_w) & np.isfinite(chi2_w)))
    poor_w = misfit_flags(chi2_w, dof_w, tests=max(tested, 1)) if chi2_w.size == wl.size else np.zeros(wl.size, bool)
    poor_all = bool(misfit_flags(result.chi2_red, result.dof))
    if poor_all or np.any(poor_w):
        where = wl.size > 1 and np.any(poor_w) and not np.all(poor_w)
        worst = float(np.nanmax(chi2_w[poor_w])) if np.any(poor_w) else float(result.chi2_red)
        p_all = float(chi2_distribution.sf(result.chi2_red * result.dof, result.dof))
        return "poor", (
            f"the model does not describe these data: chi2_red {result.chi2_red:.3g} over {result.dof:.0f} "
            f"degrees of freedom (p {_p_text(p_all)})"
            + (f", up to {worst:.3g} at {_bands(wl, poor_w)}" if where else "")
            + f"; the residuals are {np.sqrt(worst):.2g} times the stated SDs, so the model (or the SDs) is wrong "
            "there: the SDs are scaled by sqrt(chi2_red), but a systematic misfit can move the values further")
    p_all = float(chi2_distribution.sf(result.chi2_red * result.dof, result.dof))
    summary = f"chi2_red {result.chi2_red:.3g} over {result.dof:.0f} degrees of freedom (p {_p_text(p_all)})"
    if p_all >= POOR_P_VALUE:
        return "good", f"{summary}: the model describes the data within their SDs"
    # significant, but the systematic part is smaller than the stated noise (misfit_flags)
    return "good", (f"{summary}: a small systematic misfit, below the stated noise; the SDs are scaled by "
                    "sqrt(chi2_red) where it exceeds 1")


def _p_text(p: float) -> str:
    if not np.isfinite(p) or p <= 0:
        return "< 1e-300"
    return f"{p:.2g}" if p >= 1e-4 else f"< {10 ** np.ceil(np.log10(p)):.0e}"
