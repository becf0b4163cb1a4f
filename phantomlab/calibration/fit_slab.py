"""Inverse adding-doubling: μa and μs′ of a slab from its total reflectance and transmittance (layer 3).

The forward model is the adding-doubling solution of the transport layer
(``phantomlab.transport.adding_doubling.slab_reflectance_transmittance``) for a homogeneous
slab of known thickness, with the anisotropy g given (it is not separable from μs by R and T
alone), index mismatch, and glass slides as measured.  Two numbers per wavelength fit two
unknowns, so the reduced χ² has no degrees of freedom unless a spectral constraint ties the
wavelengths together.  Light lost at the sample edges is not modelled; a warning says when
it is likely (:func:`phantomlab.calibration.identifiability.slab_edge_warnings`).

References
----------
Prahl SA, van Gemert MJC, Welch AJ 1993, Appl Opt 32:559 (the inverse adding-doubling
method: iterate the forward adding-doubling model until it matches measured R and T).
"""

from __future__ import annotations

import numpy as np

from phantomlab.calibration.fit_srdr import _finish, model_range_warnings
from phantomlab.calibration.fitting import FitResult
from phantomlab.calibration.identifiability import outcome_warnings, slab_edge_warnings
from phantomlab.calibration.measurements import Measurement
from phantomlab.calibration.spectral import SpectralConstraint, fit_spectrum
from phantomlab.errors import InputError

__all__ = ["fit_slab", "slab_forward"]


def _slide_arguments(meta) -> dict:
    """Slides as the forward model takes them: one index, or a (top, bottom) pair."""
    if meta.slides == "none" or meta.n_slide is None:
        return {}
    pair = {"both": meta.n_slide, "top": (meta.n_slide, None), "bottom": (None, meta.n_slide)}[meta.slides]
    return {"n_slide": pair, "slide_thickness_mm": meta.slide_thickness_mm}


def slab_forward(*, thickness_mm: float, g: float, n: float, n_outside: float = 1.0,
                 specular_included: bool = True, slides: dict | None = None):
    """``forward(mua (N,), musp (N,)) -> (N, 2)``: total reflectance and total transmittance.

    With ``specular_included`` False the specular part is taken off the model reflectance
    (a sphere measuring with the specular port open).
    """
    from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

    slides = dict(slides or {})

    def forward(mua, musp):
        mua = np.asarray(mua, float)
        mus = np.asarray(musp, float) / (1.0 - g)
        result = slab_reflectance_transmittance(
            mua_per_mm=mua, mus_per_mm=mus, g=np.full(mua.shape, g), thickness_mm=thickness_mm, n=n,
            n_outside=n_outside, **slides)
        reflectance = np.asarray(result.total_reflectance, float)
        if not specular_included:
            reflectance = reflectance - np.asarray(result.specular_reflectance, float)
        return np.stack([np.broadcast_to(reflectance, mua.shape),
                         np.broadcast_to(np.asarray(result.total_transmittance, float), mua.shape)], axis=-1)

    return forward


def fit_slab(
    measurement: Measurement,
    *,
    n: float | None = None,
    n_outside: float | None = None,
    g: float | None = None,
    thickness_mm: float | None = None,
    constraint: SpectralConstraint | None = None,
) -> FitResult:
    """Fit μa and μs′ of a slab to measured total reflectance and transmittance.

    Parameters
    ----------
    measurement : Measurement
        ``kind='slab'``.
    n, n_outside, g : float, optional
        Override the metadata; g is required (option or sidecar).
    thickness_mm : float, optional [mm]
        Overrides the metadata; required.
    constraint : SpectralConstraint, optional

    Returns
    -------
    FitResult
        ``model='adding-doubling'``; ``parameters['g']`` holds the g assumed.
    """
    if measurement.kind != "slab":
        raise InputError(f"fit_slab needs a slab measurement, got {measurement.kind}")
    meta = measurement.metadata
    n = meta.n if n is None else n
    g = meta.g if g is None else g
    thickness = meta.thickness_mm if thickness_mm is None else thickness_mm
    n_outside = meta.n_outside if n_outside is None else n_outside
    if n is None:
        raise InputError("the slab fit needs the slab's refractive index: give --n N or n = ... in the sidecar")
    if thickness is None:
        raise InputError("the slab fit needs the slab thickness: give --thickness-mm D or thickness_mm = ... in the sidecar")
    if g is None:
        raise InputError("the slab fit needs the anisotropy g (R and T cannot tell it): give --g G or g = ... in the sidecar")
    if not -1 < g < 1:
        raise InputError(f"g = {g!r}; accepted: -1 < g < 1")
    forward = slab_forward(thickness_mm=thickness, g=g, n=n, n_outside=n_outside,
                           specular_included=meta.specular_included, slides=_slide_arguments(meta))
    result, correlation = fit_spectrum(
        forward, kind="slab", model="adding-doubling", wavelength_nm=measurement.wavelength_nm,
        data=measurement.values, sd=measurement.sd, relative=False, constraint=constraint)
    from dataclasses import replace

    parameters = dict(result.parameters)
    parameters["g"] = {"value": float(g), "sd": None, "assumed": True}
    parameters["thickness_mm"] = {"value": float(thickness), "sd": None}
    result = replace(result, parameters=parameters)
    messages = model_range_warnings(forward, result)
    messages += slab_edge_warnings(thickness_mm=thickness, port_diameter_mm=meta.port_diameter_mm,
                                   wavelength_nm=result.wavelength_nm, mua_per_mm=result.mua_per_mm,
                                   musp_per_mm=result.musp_per_mm)
    messages += outcome_warnings(
        wavelength_nm=result.wavelength_nm, mua_per_mm=result.mua_per_mm,
        musp_per_mm=result.musp_per_mm, mua_sd_per_mm=result.mua_sd_per_mm,
        musp_sd_per_mm=result.musp_sd_per_mm, correlation=correlation)
    return _finish(result, measurement, messages)
