"""Inverse fit of spatial-frequency-domain reflectance R(fx) (layer 3).

Forward models:

* ``cuccia2009``: the diffusion model of Cuccia et al. 2009
  (``phantomlab.transport.spatial_frequency_domain.sfdi_reflectance``);
* ``mc``: a Monte Carlo lookup from a stored baseline: the baseline's R(ρ) (re-weighted and
  scaled to the trial μa, μs) is Hankel-transformed,
  R(fx) = 2π ∫₀^∞ R(ρ) J₀(2π fx ρ) ρ dρ (Cuccia et al. 2009, eq. 8; the planar pattern
  as the zero-order Hankel transform of the point-source response), on a logarithmic
  grid in units of the transport mean free path.  Valid where diffusion is poor (high
  spatial frequency, low albedo).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
from scipy.special import j0

from phantomlab.calibration.band_lookup import BandBaselines, routed_forward
from phantomlab.calibration.fit_srdr import (
    _finish,
    baseline_absorption_floor,
    check_baseline_indices,
    model_range_warnings,
    smooth_lookup,
)
from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.identifiability import outcome_warnings, sfdi_design_warnings
from phantomlab.calibration.model_error import diffusion_error_warnings, diffusion_fit_error
from phantomlab.calibration.measurements import Measurement
from phantomlab.calibration.spectral import SpectralConstraint, fit_spectrum
from phantomlab.errors import InputError

__all__ = ["SFDI_FIT_MODELS", "fit_sfdi", "sfdi_forward", "hankel_sfdi_from_srdr"]

SFDI_FIT_MODELS = ("cuccia2009", "mc")

#: Radial grid of the Hankel transform, in transport mean free paths 1/μt′ (log spaced).
_RHO_GRID_TMFP = np.geomspace(1e-3, 200.0, 400)


def hankel_sfdi_from_srdr(*, srdr_per_mm2: np.ndarray, rho_mm: np.ndarray, fx_per_mm: np.ndarray) -> np.ndarray:
    """R(fx) = 2π ∫ R(ρ) J₀(2π fx ρ) ρ dρ by the trapezoidal rule on a given radial grid.

    Parameters
    ----------
    srdr_per_mm2 : ndarray (..., G) [1/mm²]
    rho_mm : ndarray (..., G) or (G,) [mm]
    fx_per_mm : ndarray (F,) [1/mm]

    Returns
    -------
    ndarray (..., F) [dimensionless]
    """
    rho = np.asarray(rho_mm, float)
    R = np.asarray(srdr_per_mm2, float)
    fx = np.asarray(fx_per_mm, float)
    kernel = j0(2 * np.pi * fx[..., :, None] * rho[..., None, :])  # (..., F, G)
    integrand = 2 * np.pi * R[..., None, :] * kernel * rho[..., None, :]
    return np.trapezoid(integrand, rho[..., None, :], axis=-1)


def sfdi_forward(*, model: str, fx_per_mm, n: float, n_outside: float = 1.0, baseline=None):
    """The forward model R(fx) as ``forward(mua (N,), musp (N,)) -> (N, F)``."""
    fx = np.asarray(fx_per_mm, float)
    if model == "mc" and isinstance(baseline, BandBaselines):  # one baseline per g step, rows routed
        return routed_forward([sfdi_forward(model=model, fx_per_mm=fx, n=n, n_outside=n_outside, baseline=part)
                               for part in baseline.baselines], baseline)
    if model == "mc":
        if baseline is None:
            raise InputError("sfdi model 'mc' needs a Monte Carlo baseline (--baseline FILE)")
        check_baseline_indices(baseline, n=n, n_outside=n_outside)
        lookup = smooth_lookup(baseline)
        g = lookup.g
        floor = baseline_absorption_floor(baseline)

        def forward(mua, musp):
            musp = np.asarray(musp, float)
            mus = musp / (1.0 - g)
            mua = np.maximum(np.asarray(mua, float), floor * mus)
            # each pair on its own radial grid in transport mean free paths
            rho = _RHO_GRID_TMFP[None, :] / (mua + musp)[:, None]
            R = lookup.point(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho)
            return hankel_sfdi_from_srdr(srdr_per_mm2=R, rho_mm=rho, fx_per_mm=fx)

        def unserved_share(mua, musp):
            """Share of each R(fx) that comes from distances the lookup does not serve, (N, F)."""
            musp = np.asarray(musp, float)
            mus = musp / (1.0 - g)
            mua = np.maximum(np.asarray(mua, float), floor * mus)
            rho = _RHO_GRID_TMFP[None, :] / (mua + musp)[:, None]
            R = lookup.point(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho)
            outside = ~lookup.served(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho)
            whole = hankel_sfdi_from_srdr(srdr_per_mm2=R, rho_mm=rho, fx_per_mm=fx)
            tail = hankel_sfdi_from_srdr(srdr_per_mm2=np.abs(R) * outside, rho_mm=rho, fx_per_mm=np.zeros(1))
            return np.abs(tail) / np.maximum(np.abs(whole), 1e-300)

        forward.lookup = lookup
        forward.unserved_share = unserved_share
        return forward
    if model not in SFDI_FIT_MODELS:
        raise InputError(f"unknown sfdi fit model {model!r}; accepted: {', '.join(SFDI_FIT_MODELS)}")
    from phantomlab.transport.spatial_frequency_domain import sfdi_reflectance

    def forward(mua, musp):
        return sfdi_reflectance(mua_per_mm=np.asarray(mua, float), musp_per_mm=np.asarray(musp, float),
                                fx_per_mm=fx, n=n, n_outside=n_outside)

    return forward


def fit_sfdi(
    measurement: Measurement,
    *,
    model: str = "cuccia2009",
    n: float | None = None,
    n_outside: float | None = None,
    baseline=None,
    constraint: SpectralConstraint | None = None,
    start: tuple[np.ndarray, np.ndarray] | None = None,
) -> FitResult:
    """Fit μa and μs′ to spatial-frequency-domain reflectance at two or more frequencies.

    Parameters
    ----------
    measurement : Measurement
        ``kind='sfdi'``, absolute (calibrated) diffuse reflectance.
    model : {'cuccia2009', 'mc'}
    n, n_outside : float, optional
    baseline : Baseline or BandBaselines, optional
        For ``model='mc'``; a :class:`~phantomlab.calibration.band_lookup.BandBaselines`
        (one baseline per group of wavelengths) needs ``start``.
    constraint : SpectralConstraint, optional
    start : (mua (W,), musp (W,)) [1/mm], optional
        Starting values (else a grid search and, with a constraint, the free fit of each
        wavelength first).

    Returns
    -------
    FitResult

    References
    ----------
    Cuccia DJ et al. 2009, J Biomed Opt 14:024012.
    """
    if measurement.kind != "sfdi":
        raise InputError(f"fit_sfdi needs an sfdi measurement, got {measurement.kind}")
    if measurement.scale == "raw":
        raise InputError("raw sfdi readings must be calibrated with the reference phantom first")
    meta = measurement.metadata
    n = meta.n if n is None else n
    if n is None:
        raise InputError("the sfdi fit needs the phantom's refractive index: give --n N or n = ... in the sidecar")
    n_outside = meta.n_outside if n_outside is None else n_outside
    fx = measurement.axis
    forward = sfdi_forward(model=model, fx_per_mm=fx, n=n, n_outside=n_outside, baseline=baseline)
    if isinstance(baseline, BandBaselines) and start is None:
        raise InputError("a fit with one baseline per group of wavelengths needs starting values")
    messages = sfdi_design_warnings(fx_per_mm=fx)
    label = "mc-lookup" if model == "mc" else "diffusion-cuccia2009"
    result, correlation = fit_spectrum(
        forward, kind="sfdi", model=label, wavelength_nm=measurement.wavelength_nm,
        data=measurement.values, sd=measurement.sd, relative=False, constraint=constraint, start=start)
    if model == "mc":
        result, correlation, reach = _sfdi_within_lookup_reach(forward, result, correlation, measurement, constraint)
        messages += reach
        messages += model_range_warnings(forward, result)
    else:
        # the measured diffusion-vs-Monte-Carlo error at the fitted optics (in place of the
        # forward model's own rule-of-thumb range warnings)
        error = diffusion_fit_error(kind="sfdi", model=model, forward=forward, axis=fx, n=n, n_outside=n_outside,
                                    result=result, data=measurement.values, sd=measurement.sd, relative=False)
        messages += diffusion_error_warnings(error, kind="sfdi", wavelength_nm=measurement.wavelength_nm)
        result = replace(result, model_covariance=error.covariance)
    messages += outcome_warnings(
        wavelength_nm=result.wavelength_nm, mua_per_mm=result.mua_per_mm,
        musp_per_mm=result.musp_per_mm, mua_sd_per_mm=result.mua_sd_per_mm,
        musp_sd_per_mm=result.musp_sd_per_mm, correlation=correlation)
    return _finish(result, measurement, messages)


#: Largest share of an R(fx) that may come from distances the lookup does not serve (there it
#: carries the far-field continuation, whose error is not counted): a frequency beyond it is
#: left out of the fit and named.
SFDI_MAX_UNSERVED_SHARE = 0.005


def _sfdi_within_lookup_reach(forward, result, correlation, measurement: Measurement, constraint):
    """Refit a Monte Carlo lookup sfdi fit without the frequencies the lookup cannot serve.

    R(fx) integrates R(ρ) over every distance; a frequency whose value rests by more than
    :data:`SFDI_MAX_UNSERVED_SHARE` on distances beyond what the baseline serves (low fx at
    high albedo, with a small baseline) is left out and named in one line, never fitted by
    extrapolation; a wavelength left with fewer than 2 frequencies is refused.
    """
    fx = measurement.axis
    finite = np.isfinite(measurement.values)
    share = forward.unserved_share(result.mua_per_mm, result.musp_per_mm)
    used = finite & (share <= SFDI_MAX_UNSERVED_SHARE)
    if np.array_equal(used, finite):
        return result, correlation, []
    short = used.sum(axis=1) < 2
    if np.any(short):
        from phantomlab.calibration.identifiability import _bands

        raise InputError(f"the Monte Carlo baseline serves fewer than 2 of the frequencies at "
                         f"{_bands(measurement.wavelength_nm, short)}: the lower frequencies rest on distances "
                         f"beyond its photons; build a baseline with more photons")
    result, correlation = fit_spectrum(
        forward, kind="sfdi", model="mc-lookup", wavelength_nm=measurement.wavelength_nm,
        data=measurement.values, sd=measurement.sd, relative=False, constraint=constraint,
        start=(result.mua_per_mm, result.musp_per_mm), mask=used)
    from phantomlab.calibration.identifiability import _bands

    left = finite & ~used
    return result, correlation, [
        f"Monte Carlo lookup: left out fx = {', '.join(f'{f:.3g}' for f in fx[left.any(axis=0)])} /mm at "
        f"{_bands(measurement.wavelength_nm, left.any(axis=1))} (more than {100 * SFDI_MAX_UNSERVED_SHARE:g} % of "
        f"R(fx) would come from distances beyond what the baseline's photons serve); they are not fitted by "
        f"extrapolation"]
