"""From a measurement file to fitted optics: the one call the commands and the store use (layer 3).

:func:`fit_measurement_file` reads the file (and its TOML sidecar), calibrates raw readings
with the reference phantom, picks the fit for the kind, and returns a
:class:`~phantomlab.calibration.fitting.FitResult` whose ``to_json()`` is the ``fit``
object of docs/contract.md.
"""

from __future__ import annotations

import warnings
from dataclasses import replace
from pathlib import Path
from typing import Any

import numpy as np

from phantomlab.calibration.fit_quality import assess_fit
from phantomlab.calibration.fitting import FitResult
from phantomlab.calibration.measurements import KINDS, Measurement, combine_replicates, read_measurement
from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["fit_measurement_file", "fit_measurement", "lookup_g_values", "DEFAULT_MODELS", "FIT_MODELS",
           "FALLBACK_MODELS"]

#: Forward models accepted by ``model=`` per kind, the first being the default.  srdr and
#: sfdi default to the Monte Carlo lookup (``mc``): valid at every distance and albedo, where
#: the diffusion models are off by several per cent near the source and bias μa at high
#: albedo; its baseline comes from the per-user cache (baseline_cache.py), built once.
FIT_MODELS: dict[str, tuple[str, ...]] = {
    "srdr": ("mc", "kienle1997", "farrell1992"),
    "sfdi": ("mc", "cuccia2009"),
    "slab": ("adding-doubling",),
    "sphere": ("adding-doubling",),
    "optics": ("direct",),
    # td and fd: the lookup where it applies (reflectance from a thick phantom, the data within
    # its photons' reach); elsewhere the default fit says so and uses FALLBACK_MODELS
    "td": ("mc", "kienle1997", "contini1997", "patterson1989"),
    "fd": ("mc", "kienle1997", "contini1997", "fantini1994"),
}
DEFAULT_MODELS = {kind: models[0] for kind, models in FIT_MODELS.items()}
#: The model the default td/fd fit uses where the Monte Carlo lookup does not apply (named in
#: the fit's ``model_note``).
FALLBACK_MODELS = {"td": "kienle1997", "fd": "kienle1997"}
#: Transmittance through a slab falls back to contini1997 (Contini et al. 1997 flux): on the
#: Monte Carlo slab of tests/calibration/test_td_model_error.py its bias is about half
#: kienle1997's (μs′ −7…−17 % against −12…−25 % at μs′/μa 10–1000).
TRANSMITTANCE_FALLBACK = "contini1997"

#: Options of the fit itself (not metadata): the model, an explicit baseline, a spectral
#: constraint, and for the default Monte Carlo lookup the cache folder, ``rebuild``, a build
#: progress callback and the g of the batch's scattering model as ``(g, origin)``.
_FIT_OPTIONS = ("model", "baseline", "constraint", "baseline_dir", "rebuild", "progress", "g_fallback")

_METADATA_OPTIONS = ("n", "n_outside", "thickness_mm", "g", "n_slide", "slide_thickness_mm", "slides",
                     "specular_included", "unscattered_included", "port_diameter_mm", "beam_diameter_mm",
                     "sample_diameter_mm", "lost_light", "lost_light_photons", "lost_light_wavelengths",
                     "reference", "sidecar", "irf", "geometry", "detector", "fibre_core_mm")


def _load_baseline(baseline):
    if baseline is None or not isinstance(baseline, (str, Path)):
        return baseline
    path = Path(baseline)
    if not path.is_file():
        raise InputError(f"baseline file {str(path)!r} not found")
    from phantomlab.transport.montecarlo import load_baseline

    return load_baseline(path)


def fit_measurement(
    measurement: Measurement,
    *,
    model: str | None = None,
    baseline=None,
    constraint=None,
    n: float | None = None,
    n_outside: float | None = None,
    g: float | None = None,
) -> FitResult:
    """Fit an already-read :class:`Measurement` with the fit of its kind.

    Parameters
    ----------
    measurement : Measurement
    model : str, optional
        One of :data:`FIT_MODELS` for the kind (default the first).
    baseline : Baseline or path, optional
        Monte Carlo baseline for ``model='mc'`` (default: the cached one for g, n, n_outside,
        built once when missing; baseline_cache.py).
    constraint : SpectralConstraint or callable, optional
        A callable is called with the measurement's wavelengths and returns the constraint
        (e.g. :func:`phantomlab.calibration.observations.stock_constraint`).
    n, n_outside, g : float, optional
        Override the metadata.

    Returns
    -------
    FitResult
        Assessed by :func:`phantomlab.calibration.fit_quality.assess_fit`: SDs scaled by the
        misfit and holding the model's known error, ``fit_quality``, ``fit_quality_reason``,
        ``sd_includes``.
    """
    kind = measurement.kind
    if callable(constraint):  # built on the measurement's own wavelengths
        constraint = constraint(measurement.wavelength_nm)
    model = DEFAULT_MODELS[kind] if model is None else model
    if model not in FIT_MODELS[kind]:
        raise InputError(f"unknown {kind} fit model {model!r}; accepted: {', '.join(FIT_MODELS[kind])}")
    baseline = _load_baseline(baseline)
    if kind == "sphere":
        from phantomlab.calibration.fit_sphere import fit_sphere

        return assess_fit(fit_sphere(measurement, n=n, n_outside=n_outside, g=g),
                          sd_parts=("measurement_sd", "sphere_standards") if measurement.sd is not None
                          else ("residual_scatter", "sphere_standards"))
    if kind in ("td", "fd") and constraint is not None:
        raise InputError(f"{kind} fits take no spectral constraint (--musp-power-law, --mua-from-stocks); "
                         "each wavelength is fitted on its own")
    if model == "mc" and baseline is None and kind in ("srdr", "sfdi", "td", "fd"):
        from phantomlab.calibration.fit_inputs import resolve_model_inputs

        if n is not None or n_outside is not None:
            measurement = replace(measurement, metadata=replace(
                measurement.metadata, **{k: v for k, v in (("n", n), ("n_outside", n_outside)) if v is not None}))
        baseline = resolve_model_inputs(measurement, model=model, given={"g": g, "n": n, "n_outside": n_outside},
                                        sidecar={}).baseline
    sd_parts = _sd_parts(measurement, model)
    if measurement.scale == "raw":
        from phantomlab.calibration.reference import calibrate_reading

        measurement = calibrate_reading(measurement, model=model, baseline=baseline, n=n, n_outside=n_outside)
    if kind == "srdr":
        from phantomlab.calibration.fit_srdr import fit_srdr

        result = fit_srdr(measurement, model=model, n=n, n_outside=n_outside, baseline=baseline,
                          constraint=constraint)
    elif kind == "sfdi":
        from phantomlab.calibration.fit_sfdi import fit_sfdi

        result = fit_sfdi(measurement, model=model, n=n, n_outside=n_outside, baseline=baseline,
                          constraint=constraint)
    elif kind == "td":
        from phantomlab.calibration.fit_td import fit_td

        result = fit_td(measurement, model=model, n=n, n_outside=n_outside, baseline=baseline)
    elif kind == "fd":
        from phantomlab.calibration.fit_fd import fit_fd

        result = fit_fd(measurement, model=model, n=n, n_outside=n_outside, baseline=baseline)
    elif kind == "slab":
        from phantomlab.calibration.fit_slab import fit_slab

        result = fit_slab(measurement, n=n, n_outside=n_outside, g=g, constraint=constraint)
    else:
        from phantomlab.calibration.fit_optics import fit_optics

        result = fit_optics(measurement)
    return assess_fit(result, sd_parts=sd_parts)


def _sd_parts(measurement: Measurement, model: str) -> tuple[str, ...]:
    """What the SDs that go into the fit account for (keys of ``fit_quality.SD_PARTS``)."""
    if measurement.kind == "optics":
        return ("as_measured",) if measurement.sd is not None else ()
    if measurement.kind == "td":
        parts = ["poisson_counts"] + (["replicate_spread"] if measurement.replicates > 1 else [])
        return tuple(parts + (["lookup_photon_noise"] if model == "mc" else []))
    if measurement.kind == "fd":
        base = ("measurement_sd",) if measurement.amplitude_sd is not None else ("residual_scatter",)
        return base + (("lookup_photon_noise",) if model == "mc" else ())
    if measurement.sd is None:
        return ("residual_scatter",)
    parts = ["measurement_sd"]
    if measurement.replicates > 1:
        parts.append("replicate_spread")
    if measurement.scale == "raw":
        parts.append("reference_phantom")
    if model == "mc" and measurement.kind == "srdr":
        parts.append("lookup_photon_noise")
    return tuple(parts)


def fit_measurement_file(path_or_text, *, kind: str, **metadata: Any) -> FitResult:
    """Read a measurement file and fit it: the entry point of ``fit`` and ``batch measure``.

    Parameters
    ----------
    path_or_text : str, pathlib.Path, or a list of them
        A CSV file (its TOML sidecar ``NAME.toml`` is read when present), or the CSV text
        itself (a string with a line break).  A list or tuple gives replicate measurements
        of one phantom, combined with their spread before the fit.
    kind : {'srdr', 'sfdi', 'slab', 'sphere', 'optics', 'td', 'fd'}
    **metadata
        Options that win over the sidecar: ``n``, ``n_outside``, ``thickness_mm`` [mm],
        ``g``, ``n_slide``, ``slide_thickness_mm`` [mm], ``slides``, ``specular_included``,
        ``port_diameter_mm``, ``beam_diameter_mm``, ``reference`` (a mapping like the
        sidecar's ``[reference]`` table), ``sidecar`` (a mapping used instead of the TOML
        file, e.g. the metadata stored with a measurement), ``irf`` (td: the IRF CSV) and
        ``geometry`` (td: reflectance or transmittance); and the fit's own ``model``,
        ``baseline`` (a Baseline or a path to one) and ``constraint`` (SpectralConstraint).
        None values are ignored.

    Returns
    -------
    FitResult
        ``.to_json()`` gives the ``fit`` object: wavelength_nm, mua_per_mm, musp_per_mm,
        mua_sd_per_mm, musp_sd_per_mm, model, chi2_red, warnings (plus extras).

    Raises
    ------
    InputError
        One line for a file that does not parse or validate, a missing index or thickness,
        an unknown model.
    """
    if kind not in KINDS:
        raise InputError(f"unknown measurement kind {kind!r}; accepted: {', '.join(KINDS)}")
    fit_options = {key: metadata.pop(key, None) for key in _FIT_OPTIONS}
    unknown = sorted(set(metadata) - set(_METADATA_OPTIONS))
    if unknown:
        raise InputError(
            f"fit_measurement_file: unknown option {unknown[0]!r}; accepted: "
            f"{', '.join(_METADATA_OPTIONS + _FIT_OPTIONS)}"
        )
    sources = list(path_or_text) if isinstance(path_or_text, (list, tuple)) else [path_or_text]
    measurements = [read_measurement(item, kind=kind, **metadata) for item in sources]
    measurement = combine_replicates(measurements)
    requested = fit_options["model"]
    model = DEFAULT_MODELS[kind] if requested is None else requested
    if model not in FIT_MODELS[kind]:
        raise InputError(f"unknown {kind} fit model {model!r}; accepted: {', '.join(FIT_MODELS[kind])}")
    note = None
    if requested is None and kind in FALLBACK_MODELS:
        reason = lookup_not_applicable(measurement)
        if reason is not None:
            model = _fallback_model(kind, measurement)
            note = _fallback_note(model, kind, reason)
    sidecar = _sidecar_table(sources[0], kind, metadata)
    if measurement.metadata.g_spectrum is not None:  # the sidecar's g per wavelength wins over the batch's
        fit_options = {**fit_options, "g_fallback": (_g_of_spectrum(measurement), "sidecar")}
    band = _band_g(measurement, model=model, metadata=metadata, sidecar=sidecar, fit_options=fit_options)
    if band is not None and band.get("steps") is not None:
        result = _fit_band(measurement, sources[0], band, model=model, metadata=metadata, fit_options=fit_options)
        for message in result.warnings:
            warnings.warn(message, PhantomlabWarning, stacklevel=2)
        return result
    if band is not None:  # one g for the band: the mean, as for a batch whose g hardly changes
        fit_options = {**fit_options, "g_fallback": (band["mean"], band["origin"])}
    inputs = _model_inputs(measurement, sources[0], model=model, metadata=metadata, fit_options=fit_options)

    def run(model, inputs):
        return _run(measurement, model, inputs, fit_options)

    from phantomlab.calibration.mc_lookup_time import LookupReachError

    try:
        result, extra = run(model, inputs)
    except LookupReachError as exc:
        if requested is not None or kind not in FALLBACK_MODELS:
            raise
        model = _fallback_model(kind, measurement)
        note = _fallback_note(model, kind, exc.reason)
        inputs = _model_inputs(measurement, sources[0], model=model, metadata=metadata, fit_options=fit_options)
        result, extra = run(model, inputs)
    if requested is None and kind in FALLBACK_MODELS and note is None:
        note = (f"{kind} model: the Monte Carlo lookup (the default; reflectance from a thick phantom, every "
                + ("distance and the whole fit window" if kind == "td" else "distance's whole curve")
                + " within its baseline's reach)")
    result = _with_inputs(result, inputs, measurement).with_warnings(extra)
    if band is not None and band.get("why_one") and result.extras.get("g_note"):
        result = replace(result, extras={**dict(result.extras),
                                         "g_note": f"{result.extras['g_note']}; {band['why_one']}"})
    if note is not None:
        result = replace(result, extras={**dict(result.extras), "model_note": note})
    for message in result.warnings:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    return result


def lookup_not_applicable(measurement: Measurement) -> str | None:
    """Why the Monte Carlo lookup cannot fit this td/fd measurement at all, or None.

    The cached baselines are runs in a semi-infinite medium (half-space): they give
    reflectance from a phantom many transport lengths thick, not transmittance through a slab
    nor reflectance from a thin one.  (Whether the data lie within the lookup's reach is
    known only at the fitted optics: :class:`~phantomlab.calibration.mc_lookup_time.LookupReachError`.)
    """
    geometry = getattr(measurement, "geometry", "reflectance")
    thickness = getattr(measurement, "thickness_mm", None)
    if geometry == "transmittance":
        return (f"the Monte Carlo baselines are half-space runs and these data are transmittance through a "
                f"{thickness:g} mm slab" if thickness is not None else
                "the Monte Carlo baselines are half-space runs and these data are transmittance")
    if thickness is not None:
        return (f"the Monte Carlo baselines are half-space runs and this phantom is a {thickness:g} mm slab "
                "(the diffusion model takes its thickness)")
    return None


def _fallback_model(kind: str, measurement: Measurement) -> str:
    if kind == "td" and getattr(measurement, "geometry", "reflectance") == "transmittance":
        return TRANSMITTANCE_FALLBACK
    return FALLBACK_MODELS[kind]


def _fallback_note(model: str, kind: str, reason: str) -> str:
    return (f"{kind} model: diffusion {model} instead of the default Monte Carlo lookup, "
            f"because {reason}")


def _sidecar_table(source, kind: str, metadata: dict) -> dict:
    """The sidecar mapping as given or read (to tell a sidecar value from a default)."""
    if metadata.get("sidecar") is not None:
        return dict(metadata["sidecar"])
    if isinstance(source, Path) or "\n" not in str(source):
        from phantomlab.calibration.measurements import read_sidecar

        path = Path(source)
        return read_sidecar(path, kind=kind) if path.is_file() else {}
    return {}


def _model_inputs(measurement: Measurement, source, *, model: str, metadata: dict, fit_options: dict):
    from phantomlab.calibration.fit_inputs import resolve_model_inputs

    given = {key: metadata.get(key) for key in ("n", "n_outside", "g")}
    return resolve_model_inputs(
        measurement, model=model, given=given, sidecar=_sidecar_table(source, measurement.kind, metadata),
        g_fallback=fit_options["g_fallback"], baseline=fit_options["baseline"],
        baseline_dir=fit_options["baseline_dir"], rebuild=bool(fit_options["rebuild"]),
        progress=fit_options["progress"])


def _with_inputs(result: FitResult, inputs, measurement: Measurement) -> FitResult:
    """The fit with its inputs and their origins (JSON keys), and the note on g for the lookup."""
    from phantomlab.calibration.fit_inputs import g_sensitivity_note

    result = replace(result, extras={**dict(result.extras), **inputs.to_json()})
    if inputs.g is not None and measurement.kind == "srdr" and inputs.g_origin != "baseline file":
        note = g_sensitivity_note(g=inputs.g, g_origin=inputs.g_origin, rho_mm=measurement.axis,
                                  musp_per_mm=result.musp_per_mm)
        if note:
            result = replace(result, extras={**dict(result.extras), "g_note": note})
    return result


def _run(measurement: Measurement, model: str, inputs, fit_options: dict):
    """:func:`fit_measurement` with the resolved inputs, and its PhantomlabWarnings as lines."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        result = fit_measurement(measurement, model=model, baseline=inputs.baseline if inputs.baseline is not None
                                 else fit_options["baseline"], constraint=fit_options["constraint"])
    return result, [" ".join(str(w.message).split()) for w in caught if issubclass(w.category, PhantomlabWarning)]


def lookup_g_values(measurement: Measurement, *, g_fallback=None, constraint=None) -> list[float]:
    """The g of each cached baseline the default lookup fit of ``measurement`` reads (to build them first).

    Parameters
    ----------
    measurement : Measurement
        Read with its sidecar and options (a ``g`` given wins; else its ``[g_spectrum]``).
    g_fallback : (float or array (W,), str), optional
        The batch's g, one or per wavelength (:func:`phantomlab.workflows.batch_anisotropy`).
    constraint : optional
        The spectral constraint the fit will take (it keeps one g for the band).

    Returns
    -------
    list of float
        Highest first; one value unless the band is fitted per g step
        (:mod:`phantomlab.calibration.band_g`).  Not rounded to the cache's 0.01.
    """
    from phantomlab.calibration.baseline_cache import DEFAULT_G

    if measurement.metadata.g is not None:
        return [float(measurement.metadata.g)]
    options = {"g_fallback": g_fallback, "constraint": constraint, "baseline": None}
    if measurement.metadata.g_spectrum is not None:
        options["g_fallback"] = (_g_of_spectrum(measurement), "sidecar")
    band = _band_g(measurement, model="mc", metadata={}, sidecar={}, fit_options=options)
    if band is None:
        return [float(g_fallback[0])] if g_fallback is not None else [DEFAULT_G]
    if band.get("steps") is None:
        return [band["mean"]]
    return sorted({float(g) for g in band["steps"]}, reverse=True)


def _g_of_spectrum(measurement: Measurement) -> np.ndarray:
    """The sidecar's ``[g_spectrum]`` at the measurement's wavelengths (linear; none outside it)."""
    grid, values = measurement.metadata.g_spectrum
    wavelength = np.asarray(measurement.wavelength_nm, float)
    outside = (wavelength < grid[0] - 1e-9) | (wavelength > grid[-1] + 1e-9)
    if np.any(outside):
        raise InputError(f"g_spectrum covers {grid[0]:g}-{grid[-1]:g} nm but the measurement has "
                         f"{wavelength[outside][0]:g} nm; accepted: a g_spectrum spanning every wavelength measured")
    return np.interp(wavelength, grid, values)


def _band_g(measurement: Measurement, *, model: str, metadata: dict, sidecar: dict, fit_options: dict):
    """How the lookup takes a g given per wavelength (``g_fallback`` of an array), or None.

    None when ``g_fallback`` holds one g (or none).  Else a dict with the band's ``mean`` g
    and its ``origin``, and ``steps`` (g per wavelength rounded to band_g.G_STEP) when the
    wavelengths are fitted in groups of one g each: the srdr/sfdi lookup with the cached
    baselines, g neither given (option, sidecar) nor fixed by a baseline file, no spectral
    constraint (it couples the wavelengths: ``why_one`` says so), calibrated data with SDs,
    and more than one g step over the band.
    """
    fallback = fit_options.get("g_fallback")
    if fallback is None or np.ndim(fallback[0]) == 0:
        return None
    from phantomlab.calibration.band_g import g_steps

    g = np.asarray(fallback[0], float).reshape(-1)
    if g.size != measurement.wavelength_nm.size or not np.all(np.isfinite(g)):
        raise InputError(f"g per wavelength: {g.size} values for {measurement.wavelength_nm.size} wavelengths; "
                         "accepted: one finite g per wavelength of the measurement")
    band = {"mean": float(np.mean(g)), "origin": str(fallback[1])}
    steps = g_steps(g)
    given = metadata.get("g") is not None or sidecar.get("g") is not None or measurement.metadata.g is not None
    if (model != "mc" or measurement.kind not in ("srdr", "sfdi") or given or fit_options.get("baseline") is not None
            or np.unique(steps).size < 2):
        return band
    if fit_options.get("constraint") is not None:
        band["why_one"] = (f"one g for the band although the scattering model's g runs from {g.max():.2f} to "
                           f"{g.min():.2f}: a spectral constraint couples the wavelengths (without it each is "
                           "fitted with a baseline near its own g)")
        return band
    if measurement.scale == "raw" or measurement.sd is None:
        return band
    return {**band, "steps": steps}


def _fit_band(measurement: Measurement, source, band: dict, *, model: str, metadata: dict,
              fit_options: dict) -> FitResult:
    """Fit each group of wavelengths of one g step with its cached baseline, merged in wavelength order."""
    from phantomlab.calibration.band_g import measurement_part, merge_fits, wavelength_groups

    groups = wavelength_groups(band["steps"])
    parts, used = [], []
    for g, index in groups:
        part = measurement_part(measurement, index)
        inputs = _model_inputs(part, source, model=model, metadata=metadata,
                               fit_options={**fit_options, "g_fallback": (g, band["origin"])})
        result, extra = _run(part, model, inputs, fit_options)
        parts.append(result.with_warnings(extra))
        used.append(inputs)
    result = merge_fits(parts, groups, measurement.wavelength_nm.size)
    return _with_band_inputs(result, used, groups, band, measurement)


def _with_band_inputs(result: FitResult, used: list, groups: list, band: dict, measurement: Measurement) -> FitResult:
    """The band fit's inputs: ``g_used`` per wavelength, ``baseline`` one file per g, and the note on g."""
    from phantomlab.calibration.band_g import G_STEP
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

