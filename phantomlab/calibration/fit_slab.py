"""Inverse adding-doubling: μa, μs′ (and g) of a slab from its total reflectance, total
transmittance and, when measured, collimated transmittance (layer 3).

The forward model is the adding-doubling solution of the transport layer
(``phantomlab.transport.adding_doubling.slab_reflectance_transmittance``) for a homogeneous
slab of known thickness, index mismatch and glass slides as measured.  R and T alone cannot
tell g from μs, so g is then an input (``--g`` or the sidecar; the output says it was
assumed).  With the collimated transmittance Tc as a third number per wavelength the fit
returns g and its SD as well (:mod:`phantomlab.calibration.slab_inversion`); a given g is
still honoured, and Tc is then a check (one degree of freedom per wavelength).

Light lost at the ports and edges of a finite sample is corrected when the sidecar asks for
it (``lost_light = "monte-carlo"``, :mod:`phantomlab.calibration.lost_light`); otherwise a
warning says when it is likely (:func:`phantomlab.calibration.identifiability.slab_edge_warnings`).

References
----------
Prahl SA, van Gemert MJC, Welch AJ 1993, Appl Opt 32:559 (the inverse adding-doubling
method: iterate the forward adding-doubling model until it matches measured R and T).
Pickering JW et al. 1993, Appl Opt 32:399 (the unscattered transmission as a third
measurement that gives g).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from phantomlab.calibration.fit_srdr import _finish, model_range_warnings
from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.identifiability import _bands, outcome_warnings, slab_edge_warnings
from phantomlab.calibration.measurements import Measurement
from phantomlab.calibration.slab_inversion import SlabModel, SlabSolution, invert_slab
from phantomlab.calibration.spectral import SpectralConstraint, fit_spectrum
from phantomlab.errors import InputError

__all__ = ["fit_slab", "slab_forward", "slab_model", "result_from_solution", "slab_options"]

#: Beyond this g the streams' 0.1 % accuracy is not claimed (adding_doubling.STREAMS_BY_ANISOTROPY).
G_ACCURACY_LIMIT = 0.97


def _slide_arguments(meta) -> dict:
    """Slides as the forward model takes them: one index, or a (top, bottom) pair."""
    if meta.slides == "none" or meta.n_slide is None:
        return {}
    pair = {"both": meta.n_slide, "top": (meta.n_slide, None), "bottom": (None, meta.n_slide)}[meta.slides]
    return {"n_slide": pair, "slide_thickness_mm": meta.slide_thickness_mm}


def slab_forward(*, thickness_mm: float, g: float, n: float, n_outside: float = 1.0,
                 specular_included: bool = True, slides: dict | None = None,
                 unscattered_included: bool = True):
    """``forward(mua (N,), musp (N,)) -> (N, 2)``: total reflectance and total transmittance.

    With ``specular_included`` False the specular part is taken off the model reflectance
    (a sphere measuring with the specular port open); with ``unscattered_included`` False
    the unscattered beam is taken off the transmittance.
    """
    model = SlabModel(thickness_mm=thickness_mm, n=n, n_outside=n_outside, slides=dict(slides or {}),
                      specular_included=specular_included, unscattered_included=unscattered_included)

    def forward(mua, musp):
        mua = np.asarray(mua, float)
        observed = model.observables(mua, np.asarray(musp, float), np.full(mua.shape, g))
        return observed[..., :2].reshape(mua.shape + (2,))

    return forward


def slab_options(measurement: Measurement, *, n=None, n_outside=None, g=None, thickness_mm=None):
    """Index, thickness and g of a slab fit (options win over the sidecar), refused if missing."""
    meta = measurement.metadata
    n = meta.n if n is None else n
    g = meta.g if g is None else g
    thickness = meta.thickness_mm if thickness_mm is None else thickness_mm
    n_outside = meta.n_outside if n_outside is None else n_outside
    if n is None:
        raise InputError("the slab fit needs the slab's refractive index: give --n N or n = ... in the sidecar")
    if thickness is None:
        raise InputError("the slab fit needs the slab thickness: give --thickness-mm D or thickness_mm = ... in "
                         "the sidecar")
    if g is not None and not -1 < g < 1:
        raise InputError(f"g = {g!r}; accepted: -1 < g < 1")
    return n, n_outside, g, thickness


def slab_model(measurement: Measurement, *, n, n_outside, thickness_mm, capture=None) -> SlabModel:
    meta = measurement.metadata
    capture_r, capture_t = (None, None) if capture is None else capture
    return SlabModel(thickness_mm=thickness_mm, n=n, n_outside=n_outside, slides=_slide_arguments(meta),
                     specular_included=meta.specular_included, unscattered_included=meta.unscattered_included,
                     capture_reflectance=capture_r, capture_transmittance=capture_t)


def fit_slab(
    measurement: Measurement,
    *,
    n: float | None = None,
    n_outside: float | None = None,
    g: float | None = None,
    thickness_mm: float | None = None,
    constraint: SpectralConstraint | None = None,
) -> FitResult:
    """Fit μa and μs′ (and g, given Tc) of a slab to measured R, T (and Tc).

    Parameters
    ----------
    measurement : Measurement
        ``kind='slab'``: columns R, T and optionally Tc.
    n, n_outside, g : float, optional
        Override the metadata.  g is required without a collimated transmittance column;
        with one, leaving it out fits g.
    thickness_mm : float, optional [mm]
        Overrides the metadata; required.
    constraint : SpectralConstraint, optional
        Needs g given; the collimated transmittance is then left out (said in a warning).

    Returns
    -------
    FitResult
        ``model='adding-doubling'``; ``extras`` holds ``g``, ``g_sd`` (null when g was
        given), ``g_fitted``, the measured and model R, T, Tc.
    """
    if measurement.kind != "slab":
        raise InputError(f"fit_slab needs a slab measurement, got {measurement.kind}")
    n, n_outside, g, thickness = slab_options(measurement, n=n, n_outside=n_outside, g=g, thickness_mm=thickness_mm)
    meta = measurement.metadata
    has_tc = measurement.values.shape[1] == 3
    if g is None and not has_tc:
        raise InputError("the slab fit needs the anisotropy g (R and T cannot tell it): give --g G or g = ... in "
                         "the sidecar, or measure the collimated transmittance (column collimated_transmittance)")
    uses_constraint = constraint is not None and constraint.active
    if uses_constraint and g is None:
        raise InputError("a spectral constraint (--musp-power-law, --mua-from-stocks) needs g given: add --g G")
    if not has_tc and meta.lost_light == "none" and (measurement.sd is None or uses_constraint):
        return _fit_given_g(measurement, n=n, n_outside=n_outside, g=g, thickness=thickness, constraint=constraint)
    if uses_constraint:
        result = _fit_given_g(measurement, n=n, n_outside=n_outside, g=g, thickness=thickness,
                              constraint=constraint, columns=2)
        return result.with_warnings(["the collimated transmittance is not used with a spectral constraint"])
    if measurement.sd is None:
        raise InputError(f"{measurement.name}: a slab file with collimated_transmittance (or a lost-light "
                         f"correction) needs the data's SDs: add sd_r,sd_t,sd_tc")
    data = _three_columns(measurement.values)
    sd = _three_columns(measurement.sd)
    if meta.lost_light == "monte-carlo":
        from phantomlab.calibration.lost_light import fit_with_lost_light

        solution, model, lost = fit_with_lost_light(measurement, data=data, sd=sd, n=n, n_outside=n_outside,
                                                    g=g, thickness_mm=thickness)
    else:
        model = slab_model(measurement, n=n, n_outside=n_outside, thickness_mm=thickness)
        solution, lost = invert_slab(model, data=data, sd=sd, g=g), None
    result = result_from_solution(measurement, solution, data=data, sd=sd, g_given=g, thickness_mm=thickness,
                                  kind="slab", lost_light=lost)
    return _finish(result, measurement, slab_messages(measurement, result, solution, thickness, lost))


def _three_columns(values):
    values = np.asarray(values, float)
    if values.shape[1] == 3:
        return values
    return np.concatenate([values, np.full((values.shape[0], 1), np.nan)], axis=1)


def _fit_given_g(measurement, *, n, n_outside, g, thickness, constraint, columns=None):
    meta = measurement.metadata
    forward = slab_forward(thickness_mm=thickness, g=g, n=n, n_outside=n_outside,
                           specular_included=meta.specular_included, slides=_slide_arguments(meta),
                           unscattered_included=meta.unscattered_included)
    values = measurement.values[:, :2]
    sd = None if measurement.sd is None else measurement.sd[:, :2]
    result, correlation = fit_spectrum(
        forward, kind="slab", model="adding-doubling", wavelength_nm=measurement.wavelength_nm,
        data=values, sd=sd, relative=False, constraint=constraint)
    parameters = dict(result.parameters)
    parameters["g"] = {"value": float(g), "sd": None, "assumed": True}
    parameters["thickness_mm"] = {"value": float(thickness), "sd": None}
    model_values = forward(result.mua_per_mm, result.musp_per_mm)
    extras = {"g": np.full(result.wavelength_nm.shape, float(g)), "g_sd": None, "g_fitted": False,
              "total_reflectance": values[:, 0], "total_transmittance": values[:, 1],
              "model_total_reflectance": model_values[:, 0], "model_total_transmittance": model_values[:, 1]}
    if sd is not None:
        extras.update(total_reflectance_sd=sd[:, 0], total_transmittance_sd=sd[:, 1])
    result = replace(result, parameters=parameters, extras=extras)
    messages = model_range_warnings(forward, result)
    messages += slab_edge_warnings(thickness_mm=thickness, port_diameter_mm=meta.port_diameter_mm,
                                   wavelength_nm=result.wavelength_nm, mua_per_mm=result.mua_per_mm,
                                   musp_per_mm=result.musp_per_mm)
    messages += outcome_warnings(
        wavelength_nm=result.wavelength_nm, mua_per_mm=result.mua_per_mm,
        musp_per_mm=result.musp_per_mm, mua_sd_per_mm=result.mua_sd_per_mm,
        musp_sd_per_mm=result.musp_sd_per_mm, correlation=correlation)
    return _finish(result, measurement, messages)


def result_from_solution(measurement: Measurement, solution: SlabSolution, *, data, sd, g_given, thickness_mm,
                         kind: str, lost_light=None, model_name: str = "adding-doubling") -> FitResult:
    """A :class:`FitResult` from a per-wavelength slab solution (slab and sphere kinds).

    ``residuals`` keep the measured columns (R, T and Tc where measured); ``chi2_red``,
    ``chi2_red_per_wavelength`` and ``dof`` count data points minus fitted parameters (no
    degrees of freedom, hence NaN, for as many numbers as unknowns).
    """
    measured = np.any(np.isfinite(data), axis=0)
    columns = np.flatnonzero(measured)
    cov = solution.covariance
    with np.errstate(invalid="ignore"):
        mua_sd = np.sqrt(cov[:, 0, 0])
        musp_sd = np.sqrt(cov[:, 1, 1])
        chi2_red_w = np.where(solution.dof > 0, solution.chi2 / np.maximum(solution.dof, 1), np.nan)
    total_dof = int(np.sum(np.maximum(solution.dof, 0)))
    chi2_red = float(np.sum(solution.chi2[solution.dof > 0]) / total_dof) if total_dof > 0 else float("nan")
    g_fitted = g_given is None
    g_sd = np.sqrt(cov[:, 2, 2]) if g_fitted else None
    parameters = {"g": ({"fitted": True, "from": "collimated transmittance"} if g_fitted
                        else {"value": float(np.mean(g_given)), "sd": None, "assumed": True}),
                  "thickness_mm": {"value": float(thickness_mm), "sd": None}}
    extras = {"g": solution.g, "g_sd": g_sd, "g_fitted": g_fitted,
              "total_reflectance": data[:, 0], "total_reflectance_sd": sd[:, 0],
              "total_transmittance": data[:, 1], "total_transmittance_sd": sd[:, 1],
              "model_total_reflectance": solution.model[:, 0], "model_total_transmittance": solution.model[:, 1],
              "model_collimated_transmittance": solution.model[:, 2],
              "quadrature_points": solution.streams}
    if measured[2]:
        extras.update(collimated_transmittance=data[:, 2], collimated_transmittance_sd=sd[:, 2])
    if lost_light is not None:
        extras.update(lost_light.to_json())
    return FitResult(
        kind=kind, model=model_name, wavelength_nm=np.asarray(measurement.wavelength_nm, float),
        mua_per_mm=solution.mua_per_mm, musp_per_mm=solution.musp_per_mm, mua_sd_per_mm=mua_sd,
        musp_sd_per_mm=musp_sd, covariance=cov[:, :2, :2], chi2_red=chi2_red,
        chi2_red_per_wavelength=chi2_red_w, residuals=solution.residuals[:, columns], parameters=parameters,
        dof=float(total_dof) if total_dof > 0 else float("nan"), extras=extras,
    )


def slab_messages(measurement, result: FitResult, solution: SlabSolution, thickness_mm, lost) -> list[str]:
    """Warnings of a per-wavelength slab fit: g range, convergence, edges, confounding."""
    meta = measurement.metadata
    messages = []
    g = np.asarray(solution.g)
    beyond = np.abs(g) > G_ACCURACY_LIMIT
    if np.any(beyond):
        messages.append(f"g up to {np.max(np.abs(g[beyond])):.3f} at {_bands(result.wavelength_nm, beyond)}: "
                        f"adding-doubling's 0.1 % accuracy is claimed up to g = {G_ACCURACY_LIMIT}")
    if not np.all(solution.converged):
        messages.append(f"the fit did not converge at {_bands(result.wavelength_nm, ~solution.converged)}")
    if lost is None:
        port = meta.port_diameter_mm
        if meta.sphere is not None:
            port = min(meta.sphere.reflection.sample_port_mm, meta.sphere.transmission.sample_port_mm)
        messages += slab_edge_warnings(thickness_mm=thickness_mm, port_diameter_mm=port,
                                       wavelength_nm=result.wavelength_nm, mua_per_mm=result.mua_per_mm,
                                       musp_per_mm=result.musp_per_mm)
    else:
        messages += lost.warnings(result.wavelength_nm)
    with np.errstate(invalid="ignore", divide="ignore"):
        correlation = solution.covariance[:, 0, 1] / np.sqrt(solution.covariance[:, 0, 0] * solution.covariance[:, 1, 1])
    messages += outcome_warnings(
        wavelength_nm=result.wavelength_nm, mua_per_mm=result.mua_per_mm, musp_per_mm=result.musp_per_mm,
        mua_sd_per_mm=result.mua_sd_per_mm, musp_sd_per_mm=result.musp_sd_per_mm, correlation=correlation)
    if result.extras.get("g_fitted"):
        loose = ~np.isfinite(result.extras["g_sd"]) | (result.extras["g_sd"] > 0.05)
        if np.any(loose):
            messages.append(f"g is poorly determined (SD above 0.05) at {_bands(result.wavelength_nm, loose)}: "
                            f"the collimated transmittance is too small or too close to 1 to pin mus there")
    return messages
