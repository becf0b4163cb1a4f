"""From a measurement file to fitted optics: the one call the commands and the store use (layer 3).

:func:`fit_measurement_file` reads the file (and its TOML sidecar), calibrates raw readings
with the reference phantom, picks the fit for the kind, and returns a
:class:`~phantomlab.calibration.fit_result.FitResult` whose ``to_json()`` is the ``fit``
object of docs/contract.md.
"""

from __future__ import annotations

import warnings
from dataclasses import replace
from pathlib import Path
from typing import Any

from phantomlab.calibration.fit_quality import assess_fit
from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.measurements import KINDS, Measurement, combine_replicates, read_measurement
from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["fit_measurement_file", "fit_measurement", "DEFAULT_MODELS", "FIT_MODELS", "FALLBACK_MODELS"]

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
#: Transmittance the Monte Carlo slab model does not serve (fit_td_slab.SlabModelOutOfRange)
#: falls back to contini1997 (Contini et al. 1997 flux): on the Monte Carlo slab of
#: tests/calibration/test_td_model_error.py its bias is about half kienle1997's (μs′
#: −7…−17 % against −12…−25 % at μs′/μa 10–1000).
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
    start: tuple | None = None,
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
    start : (mua (W,), musp (W,)) [1/mm], optional
        srdr and sfdi: starting values of the fit (needed with a
        :class:`~phantomlab.calibration.band_lookup.BandBaselines`).

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
    if start is not None and kind not in ("srdr", "sfdi"):
        raise InputError(f"starting values are taken by srdr and sfdi fits only, not {kind}")
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
                          constraint=constraint, start=start)
    elif kind == "sfdi":
        from phantomlab.calibration.fit_sfdi import fit_sfdi

        result = fit_sfdi(measurement, model=model, n=n, n_outside=n_outside, baseline=baseline,
                          constraint=constraint, start=start)
    elif kind == "td":
        from phantomlab.calibration.fit_td import fit_td
        from phantomlab.calibration.fit_td_slab import SlabNodeSource, fit_td_slab

        if isinstance(baseline, SlabNodeSource):
            result = fit_td_slab(measurement, source=baseline, n=n, n_outside=n_outside)
        else:
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
        if model == "mc":
            parts.append("slab_photon_noise" if getattr(measurement, "geometry", "") == "transmittance"
                         else "lookup_photon_noise")
        return tuple(parts)
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
    from phantomlab.calibration.band_g import band_plan, fit_band

    band = band_plan(measurement, model=model, g_fallback=fit_options["g_fallback"], baseline=fit_options["baseline"])
    if band is not None and band.get("steps") is not None:  # one cached baseline per g step
        # each group is fitted on its own (free); a spectral constraint then fits the band
        # jointly from there, each group's rows modelled with its own baseline
        free_options = {**fit_options, "constraint": None}

        def fit_group(part, g, progress):
            inputs = _model_inputs(part, sources[0], model=model, metadata=metadata,
                                   fit_options={**free_options, "g_fallback": (g, band["origin"]), "progress": progress})
            result, extra = _run(part, model, inputs, free_options)
            return result.with_warnings(extra), inputs

        def joint_fit(free, baselines):
            with warnings.catch_warnings(record=True) as caught:
                warnings.simplefilter("always", PhantomlabWarning)
                result = fit_measurement(measurement, model=model, baseline=baselines,
                                         constraint=fit_options["constraint"],
                                         start=(free.mua_per_mm, free.musp_per_mm))
            return result.with_warnings([" ".join(str(w.message).split()) for w in caught
                                         if issubclass(w.category, PhantomlabWarning)])

        result = fit_band(measurement, band, fit_group=fit_group, progress=fit_options["progress"],
                          rebuild=bool(fit_options["rebuild"]), baseline_dir=fit_options["baseline_dir"],
                          joint=joint_fit if fit_options["constraint"] is not None else None)
        for message in result.warnings:
            warnings.warn(message, PhantomlabWarning, stacklevel=2)
        return result
    if band is not None:  # one g for the band: the mean, as for a batch whose g hardly changes
        fit_options = {**fit_options, "g_fallback": (band["mean"], band["origin"])}
    inputs = _model_inputs(measurement, sources[0], model=model, metadata=metadata, fit_options=fit_options)

    def run(model, inputs):
        return _run(measurement, model, inputs, fit_options)

    from phantomlab.calibration.fit_td_slab import SlabModelOutOfRange
    from phantomlab.calibration.mc_lookup_time import LookupReachError

    try:
        result, extra = run(model, inputs)
    except (LookupReachError, SlabModelOutOfRange) as exc:
        if requested is not None or kind not in FALLBACK_MODELS:
            raise
        model = _fallback_model(kind, measurement)
        note = _fallback_note(model, kind, exc.reason)
        inputs = _model_inputs(measurement, sources[0], model=model, metadata=metadata, fit_options=fit_options)
        result, extra = run(model, inputs)
    if requested is None and kind == "td" and getattr(measurement, "geometry", "") == "transmittance" and note is None:
        note = ("td model: contini1997 slab diffusion corrected by direct Monte Carlo runs of slabs (the default for "
                "transmittance; runs at " + ", ".join(f"{t:g}" for t in result.extras.get("slab_nodes", []))
                + " transport lengths)")
    elif requested is None and kind in FALLBACK_MODELS and note is None:
        note = (f"{kind} model: the Monte Carlo lookup (the default; reflectance from a thick phantom, every "
                + ("distance and the whole fit window" if kind == "td" else "distance's whole curve")
                + " within its baseline's reach)")
    result = _with_inputs(result, inputs, measurement).with_warnings(extra)
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
        return None  # the slab model (fit_td_slab.py), Monte Carlo too
    if thickness is not None:
        return (f"the Monte Carlo baselines are half-space runs and this phantom is a {thickness:g} mm slab "
                "(the diffusion model takes its thickness)")
    return None


def _fallback_model(kind: str, measurement: Measurement) -> str:
    if kind == "td" and getattr(measurement, "geometry", "reflectance") == "transmittance":
        return TRANSMITTANCE_FALLBACK
    return FALLBACK_MODELS[kind]


def _fallback_note(model: str, kind: str, reason: str) -> str:
    return (f"{kind} model: diffusion {model} instead of the default Monte Carlo model, "
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
