"""Raw instrument readings to absolute reflectance with a reference phantom (layer 3).

The usual bench practice for fibre probes and spatial-frequency cameras: measure a reference
phantom of known optics on the same instrument, in the same session and geometry; the
instrument response then cancels point by point,

    R_sample(x) = M_sample(x) / M_reference(x) · R_model(x; μa_ref, μs′_ref),

with x the distance ρ or the frequency fx and R_model the forward model of the fit (Cuccia
et al. 2009, J Biomed Opt 14:024012, sec. 2.3 for sfdi; the same for srdr).  The SD of the
calibrated reflectance combines, in quadrature and relative to the value, the sample
reading's SD, the reference reading's SD and the reference's own uncertainty carried through
the forward model (first-order, ∂R/∂μa · σ_μa and ∂R/∂μs′ · σ_μs′).
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np

from phantomlab.calibration.measurements import Measurement
from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["calibrate_reading", "reference_reflectance"]


def _reference_optics_on(spec, wavelength_nm: np.ndarray):
    if spec.wavelength_nm.size == 1 and not np.isfinite(spec.wavelength_nm[0]):
        ones = np.ones(wavelength_nm.shape)
        return (spec.mua_per_mm[0] * ones, spec.musp_per_mm[0] * ones,
                spec.mua_sd_per_mm[0] * ones, spec.musp_sd_per_mm[0] * ones)
    grid = spec.wavelength_nm
    if wavelength_nm.min() < grid.min() - 1e-9 or wavelength_nm.max() > grid.max() + 1e-9:
        raise InputError(
            f"reference optics cover {grid.min():g}-{grid.max():g} nm, the measurement "
            f"{wavelength_nm.min():g}-{wavelength_nm.max():g} nm"
        )
    return tuple(np.interp(wavelength_nm, grid, a) for a in
                 (spec.mua_per_mm, spec.musp_per_mm, spec.mua_sd_per_mm, spec.musp_sd_per_mm))


def reference_reflectance(forward, *, mua_per_mm, musp_per_mm, mua_sd_per_mm, musp_sd_per_mm):
    """Model reflectance of the reference phantom and its SD from the reference's uncertainty.

    Parameters
    ----------
    forward : callable
        ``forward(mua (W,), musp (W,)) -> (W, M)``.
    mua_per_mm, musp_per_mm, mua_sd_per_mm, musp_sd_per_mm : ndarray (W,) [1/mm]

    Returns
    -------
    (ndarray (W, M), ndarray (W, M))
        Reflectance and its SD.
    """
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        base = forward(mua_per_mm, musp_per_mm)
        h_a = 1e-4 * mua_per_mm + 1e-9
        h_s = 1e-4 * musp_per_mm
        d_a = (forward(mua_per_mm + h_a, musp_per_mm) - base) / h_a[:, None]
        d_s = (forward(mua_per_mm, musp_per_mm + h_s) - base) / h_s[:, None]
    sd = np.sqrt((d_a * mua_sd_per_mm[:, None]) ** 2 + (d_s * musp_sd_per_mm[:, None]) ** 2)
    return base, sd


def calibrate_reading(measurement: Measurement, *, model: str, baseline=None, n=None, n_outside=None) -> Measurement:
    """Turn a raw srdr or sfdi reading into absolute reflectance with its reference phantom.

    Parameters
    ----------
    measurement : Measurement
        ``scale='raw'``, with ``metadata.reference`` holding the reference optics and its
        reading (same wavelengths and distances or frequencies).
    model : str
        Forward model of the fit (the reference is modelled with the same one).
    baseline : Baseline, optional
        For ``model='mc'``.
    n, n_outside : float, optional
        Override the metadata; the reference's own ``n`` is used when it gives one.

    Returns
    -------
    Measurement
        ``scale='absolute'`` with SDs (None when the readings carry no SD columns).
    """
    if measurement.scale != "raw":
        return measurement
    spec = measurement.metadata.reference
    if spec is None or spec.reading is None:
        raise InputError("raw readings need a reference phantom reading: reading_csv in the sidecar's [reference] table")
    reading = spec.reading
    if reading.wavelength_nm.shape != measurement.wavelength_nm.shape or not np.allclose(
        reading.wavelength_nm, measurement.wavelength_nm
    ) or reading.axis.shape != measurement.axis.shape or not np.allclose(reading.axis, measurement.axis):
        raise InputError(
            f"reference reading {reading.name} has other wavelengths or "
            f"{measurement.axis_name} than {measurement.name}; they must match point by point"
        )
    if np.any(reading.values[np.isfinite(reading.values)] <= 0):
        raise InputError(f"reference reading {reading.name} holds a reading <= 0; accepted: > 0")
    meta = measurement.metadata
    n_sample = meta.n if n is None else n
    n_ref = spec.n if spec.n is not None else n_sample
    if n_ref is None:
        raise InputError("the reference calibration needs the refractive index: give n in the sidecar or --n")
    n_out = meta.n_outside if n_outside is None else n_outside
    if measurement.kind == "srdr":
        from phantomlab.calibration.fit_srdr import srdr_forward

        forward = srdr_forward(model=model, rho_mm=measurement.axis, n=n_ref, n_outside=n_out, baseline=baseline)
    elif measurement.kind == "sfdi":
        from phantomlab.calibration.fit_sfdi import sfdi_forward

        forward = sfdi_forward(model=model, fx_per_mm=measurement.axis, n=n_ref, n_outside=n_out, baseline=baseline)
    else:
        raise InputError(f"raw readings with a reference phantom are accepted for srdr and sfdi, not {measurement.kind}")
    mua, musp, mua_sd, musp_sd = _reference_optics_on(spec, measurement.wavelength_nm)
    model_ref, model_ref_sd = reference_reflectance(
        forward, mua_per_mm=mua, musp_per_mm=musp, mua_sd_per_mm=mua_sd, musp_sd_per_mm=musp_sd)
    ratio = measurement.values / reading.values
    reflectance = ratio * model_ref
    sd = None
    if measurement.sd is not None and reading.sd is not None:
        rel = np.sqrt((measurement.sd / measurement.values) ** 2 + (reading.sd / reading.values) ** 2
                      + (model_ref_sd / model_ref) ** 2)
        sd = rel * reflectance
    else:
        warnings.warn(
            "the raw readings carry no sd column: the reference phantom's uncertainty cannot be "
            "combined with theirs; SDs come from the scatter of the residuals",
            PhantomlabWarning, stacklevel=2,
        )
    return replace(measurement, scale="absolute", values=reflectance, sd=sd)
