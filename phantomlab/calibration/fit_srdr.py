"""Inverse fit of spatially resolved reflectance R(ρ) (layer 3).

Two forward models (from :mod:`phantomlab.transport`):

* diffusion (``farrell1992``, ``kienle1997``): fitted only to distances beyond
  ``min_transport_mfp`` transport mean free paths 1/μt′ (default 2; the fit runs once on
  all distances, then again without those too close to the source, until the set of
  distances kept no longer changes with the fitted μt′);
* ``mc``: a Monte Carlo lookup built on a stored baseline (``Baseline.srdr``, re-weighting
  and scaling of one run), valid at every distance, near the source included.  The baseline
  was run at one anisotropy g; the fit reports μs′ = μs (1 − g).

Absolute data give μa and μs′ directly; relative data (``reflectance_relative``) fit an
unknown scale factor per wavelength too.  Absolute ``reflectance_per_mm2`` is per unit power
*incident* on the surface, specular reflection excluded (DEVELOPERS.md, "Reflectance
conventions"); both forward models follow that convention.

What the diffusion models can do on Monte Carlo data (n = 1.4 in air, μs′ = 1 /mm, g = 0.8,
ρ from 2 to 8 mm, 1 % noise; ``tests/calibration/test_fit_srdr.py``): ``kienle1997`` is
0.8–5.7 % above Monte Carlo there, which gives μs′ within 4 % but μa +3 % at μs′/μa = 30,
+8 to +11 % at 100, +21 to +28 % at 300 and +65 to +87 % at 1000 (at high albedo μa rests
on the absolute level, which a few per cent of model error moves a lot; the fit warns from
μs′/μa = 200).  ``farrell1992`` (flux only) is 8–21 % *below* Monte Carlo at 3–8 transport
lengths at n = 1.4 and biases μs′ by +20 to +80 % and μa by −30 to −100 %: the fit warns
when it is used at a mismatched boundary.
"""

from __future__ import annotations

import warnings
from dataclasses import replace

import numpy as np

from phantomlab.calibration.band_lookup import BandBaselines, routed_forward
from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.identifiability import _bands, outcome_warnings, srdr_design_warnings
from phantomlab.calibration.model_error import diffusion_error_warnings, diffusion_fit_error
from phantomlab.calibration.measurements import Measurement
from phantomlab.calibration.spectral import SpectralConstraint, fit_spectrum, merge_rows
from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["SRDR_FIT_MODELS", "DIFFUSION_MIN_TRANSPORT_MFP", "fit_srdr", "srdr_forward",
           "flux_only_mismatch_warnings"]

#: Forward models of the srdr fit.
SRDR_FIT_MODELS = ("kienle1997", "farrell1992", "mc")

#: Diffusion fits leave out distances closer than this many transport mean free paths 1/μt′.
#: Measured (tests/transport/test_montecarlo_models.py, tests/calibration/test_fit_srdr.py):
#: at 1–2 transport lengths the diffusion models are 4–13 % off Monte Carlo, beyond 2 the
#: fluence-plus-flux model at n = 1.4 is within 1–5 %.
DIFFUSION_MIN_TRANSPORT_MFP = 2.0

#: Passes of the "leave out the near distances and refit" step at most (the kept set follows
#: the fitted μt′; it settles in one or two).
_NEAR_SOURCE_PASSES = 3


_LOOKUPS: dict[int, tuple] = {}


def smooth_lookup(baseline):
    """The :class:`~phantomlab.calibration.mc_lookup.SmoothLookup` of a baseline (built once)."""
    import weakref

    from phantomlab.calibration.mc_lookup import SmoothLookup

    tabulated = getattr(baseline, "lookup", None)
    if isinstance(tabulated, SmoothLookup):  # a TabulatedBaseline carries its own
        return tabulated
    entry = _LOOKUPS.get(id(baseline))
    if entry is not None and entry[0]() is baseline:
        return entry[1]
    lookup = SmoothLookup(baseline)
    try:
        reference = weakref.ref(baseline)
    except TypeError:  # objects without weak references: keep a strong one
        reference = (lambda obj: (lambda: obj))(baseline)
    _LOOKUPS[id(baseline)] = (reference, lookup)
    return lookup


#: Largest difference of refractive index between a measurement and the baseline it is
#: fitted with (the boundary reflection, and so R, depends on both indices; 0.005 moves the
#: Fresnel entry loss and the internal reflection of a 1.4/air surface by well under 1 %).
BASELINE_INDEX_TOLERANCE = 0.005


def check_baseline_indices(baseline, *, n: float, n_outside: float) -> None:
    """Refuse a baseline made for other refractive indices than the measurement's."""
    made_n = float(getattr(baseline, "n", n))
    made_outside = float(getattr(baseline, "n_outside", n_outside))
    if abs(made_n - float(n)) > BASELINE_INDEX_TOLERANCE or abs(made_outside - float(n_outside)) > BASELINE_INDEX_TOLERANCE:
        raise InputError(
            f"the Monte Carlo baseline was made for n = {made_n:g} under n_outside = {made_outside:g}, the "
            f"measurement has n = {float(n):g} under n_outside = {float(n_outside):g}; build one for it "
            f"(phantomlab baseline build OUT.npz --g G --n {float(n):g} --n-outside {float(n_outside):g})")


def baseline_absorption_floor(baseline):
    """Smallest μa/μs a baseline answers for (its μa_ref/μs_ref), with a hair of margin.

    A float; per wavelength, (W,), for a :class:`~phantomlab.calibration.band_lookup.BandBaselines`.
    """
    ratio = getattr(baseline, "minimum_absorption_ratio", None)
    if ratio is None:
        ratio = float(baseline.mua_per_mm) / float(baseline.mus_per_mm)
    ratio = np.asarray(ratio, float) * (1.0 + 1e-7)
    return float(ratio) if ratio.ndim == 0 else ratio


def srdr_forward(*, model: str, rho_mm, n: float, n_outside: float = 1.0, baseline=None, detector: str = "point",
                 fibre_core_mm: float | None = None):
    """The forward model R(ρ) of the fit as ``forward(mua (N,), musp (N,)) -> (N, R)`` [1/mm²].

    R(ρ) per unit incident power, specular reflection excluded (the project's convention for
    absolute ``reflectance_per_mm2``), for every model.

    Parameters
    ----------
    model : {'farrell1992', 'kienle1997', 'mc'}
    rho_mm : array (R,) [mm]
    n, n_outside : float
    baseline : Baseline or BandBaselines, optional
        Needed for ``mc``; a :class:`~phantomlab.calibration.band_lookup.BandBaselines`
        models each group of wavelengths with its own baseline (the model then answers for
        the whole band at once).
    detector : {'point', 'ring', 'fibre'}
        How each distance is sampled (the sidecar's ``detector``, see
        :data:`phantomlab.calibration.measurements.DETECTORS`): the lookup's point value at ρ
        (default), its average over the annulus between the midpoints of neighbouring
        distances (``rho_bin_edges_mm``), or its average over a fibre face of diameter
        ``fibre_core_mm`` [mm] centred at ρ.  The diffusion models are always point values.
    """
    rho = np.asarray(rho_mm, float)
    if model == "mc" and isinstance(baseline, BandBaselines):  # one baseline per g step, rows routed
        return routed_forward([srdr_forward(model=model, rho_mm=rho, n=n, n_outside=n_outside, baseline=part,
                                            detector=detector, fibre_core_mm=fibre_core_mm)
                               for part in baseline.baselines], baseline)
    if model == "mc":
        if baseline is None:
            raise InputError("srdr model 'mc' needs a Monte Carlo baseline (--baseline FILE)")
        check_baseline_indices(baseline, n=n, n_outside=n_outside)
        from phantomlab.transport.montecarlo import rho_bin_edges_mm

        lookup = smooth_lookup(baseline)
        g = lookup.g
        floor = baseline_absorption_floor(baseline)
        if detector == "ring":
            edges = rho_bin_edges_mm(rho)
            outer = edges[1:]

            def values(mua, mus):
                return lookup.annuli(mua_per_mm=mua, mus_per_mm=mus, edges_mm=edges)

            def relative(mua, mus):
                return lookup.annuli_relative_sd(mua_per_mm=mua, mus_per_mm=mus, edges_mm=edges)
        elif detector == "fibre":
            if fibre_core_mm is None or not fibre_core_mm > 0:
                raise InputError("detector 'fibre' needs fibre_core_mm (the core diameter in mm), > 0")
            outer = rho + 0.5 * float(fibre_core_mm)

            def values(mua, mus):
                return lookup.fibre(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho, core_mm=float(fibre_core_mm))

            def relative(mua, mus):
                return lookup.point_relative_sd(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho)
        elif detector == "point":
            outer = rho

            def values(mua, mus):
                return lookup.point(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho)

            def relative(mua, mus):
                return lookup.point_relative_sd(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho)
        else:
            raise InputError(f"detector = {detector!r}; accepted: point, ring, fibre")

        def forward(mua, musp):
            mus = np.asarray(musp, float) / (1.0 - g)
            # the baseline answers only for mua/mus >= its reference ratio: hold the trial there
            mua = np.maximum(np.asarray(mua, float), floor * mus)
            return values(mua, mus)

        def model_sd(mua, musp):
            mus = np.asarray(musp, float) / (1.0 - g)
            mua = np.maximum(np.asarray(mua, float), floor * mus)
            return forward(mua, musp) * relative(mua, mus)

        forward.lookup = lookup
        forward.outer_mm = outer
        forward.rho_max_mm = float(outer[-1])
        forward.model_sd = model_sd
        forward.detector = detector
        return forward
    if model not in SRDR_FIT_MODELS:
        raise InputError(f"unknown srdr fit model {model!r}; accepted: {', '.join(SRDR_FIT_MODELS)}")
    from phantomlab.transport.diffusion import srdr_model

    # the grid, the indices and the surface checked and computed once, not on every call of the fit
    reflectance = srdr_model(rho_mm=rho, n=n, n_outside=n_outside, model=model)

    def forward(mua, musp):
        return reflectance(np.asarray(mua, float), np.asarray(musp, float))

    return forward


def _ring_grid_notes(measurement) -> list[str]:
    """The ring detector's annuli are cut between neighbouring distances of the whole file: say so
    where a wavelength lacks readings at some of them (its rings are then not cut from its own).

    Measured: five media, each on its own grid of 20 rings, fitted together as five wavelengths
    of one file had χ²ᵣ 6–36 per wavelength and μa off by up to +20 %; each alone, χ²ᵣ 0.7–1.2.
    """
    missing = ~np.isfinite(np.asarray(measurement.values, float))
    partial = np.flatnonzero(missing.any(axis=1) & ~missing.all(axis=1))
    if partial.size == 0:
        return []
    where = ", ".join(f"{measurement.wavelength_nm[w]:g} nm" for w in partial[:3]) + (" ..." if partial.size > 3 else "")
    return [f"detector = ring: the rings are cut between neighbouring distances of the whole file "
            f"({missing.shape[1]} distances); at {where} some distances have no reading, and the rings there "
            f"are still those of the whole grid (one instrument with readings missing). If that wavelength "
            f"was read on rings of its own, fit it in a file of its own"]


def fit_srdr(
    measurement: Measurement,
    *,
    model: str = "kienle1997",
    n: float | None = None,
    n_outside: float | None = None,
    baseline=None,
    constraint: SpectralConstraint | None = None,
    min_transport_mfp: float = DIFFUSION_MIN_TRANSPORT_MFP,
    start: tuple[np.ndarray, np.ndarray] | None = None,
) -> FitResult:
    """Fit μa and μs′ to a spatially resolved reflectance measurement.

    Parameters
    ----------
    measurement : Measurement
        ``kind='srdr'``, scale ``absolute`` or ``relative`` (raw readings are calibrated
        first, see :func:`phantomlab.calibration.reference.calibrate_reading`).  Absolute
        values [1/mm²] are per unit incident power, specular reflection excluded.
    model : {'kienle1997', 'farrell1992', 'mc'}, default 'kienle1997' (fluence + flux: within a few % of Monte Carlo at a mismatched surface, where the flux-only farrell1992 is 8-21 % low)
    n, n_outside : float, optional
        Phantom and outside refractive index (default: the measurement's metadata).
    baseline : Baseline or BandBaselines, optional
        Monte Carlo baseline for ``model='mc'``; a
        :class:`~phantomlab.calibration.band_lookup.BandBaselines` (one baseline per group
        of wavelengths) needs ``start``.
    constraint : SpectralConstraint, optional
        Joint fit across the band (power-law μs′, μa from stock spectra).
    min_transport_mfp : float
        Diffusion fits ignore distances closer than this many 1/μt′ to the source (default
        :data:`DIFFUSION_MIN_TRANSPORT_MFP` = 2; 0 keeps every distance).  The distances are
        chosen with the fitted μt′ and re-chosen after each refit until they settle; where
        fewer than 3 (relative data: 4) distances would be left, all stay and the fit warns.
    start : (mua (W,), musp (W,)) [1/mm], optional
        Starting values (else a grid search and, with a constraint, the free fit of each
        wavelength first).

    Returns
    -------
    FitResult
        With warnings (also raised as PhantomlabWarning) on identifiability and model range.

    References
    ----------
    Farrell TJ, Patterson MS, Wilson B 1992, Med Phys 19:879 (diffusion R(ρ) and its use to
    recover μa and μs′ by non-linear least squares).
    """
    if measurement.kind != "srdr":
        raise InputError(f"fit_srdr needs an srdr measurement, got {measurement.kind}")
    if measurement.scale == "raw":
        raise InputError("raw srdr readings must be calibrated with the reference phantom first")
    if model not in SRDR_FIT_MODELS:
        raise InputError(f"unknown srdr fit model {model!r}; accepted: {', '.join(SRDR_FIT_MODELS)}")
    meta = measurement.metadata
    n = meta.n if n is None else n
    if n is None:
        raise InputError("the srdr fit needs the phantom's refractive index: give --n N or n = ... in the sidecar")
    n_outside = meta.n_outside if n_outside is None else n_outside
    relative = measurement.scale == "relative"
    rho = measurement.axis
    forward = srdr_forward(model=model, rho_mm=rho, n=n, n_outside=n_outside, baseline=baseline,
                           detector=meta.detector, fibre_core_mm=meta.fibre_core_mm)
    label = "mc-lookup" if model == "mc" else f"diffusion-{model}"
    # relative data take their SDs from the profile chi2, once, on the final fit (below)
    kwargs = dict(kind="srdr", model=label, wavelength_nm=measurement.wavelength_nm,
                  data=measurement.values, sd=measurement.sd, relative=relative, constraint=constraint,
                  profile_sd=False)
    design = srdr_design_warnings(rho_mm=rho, wavelength_nm=measurement.wavelength_nm,
                                  mua_per_mm=np.zeros(1), musp_per_mm=np.full(1, np.inf),
                                  relative=relative)
    design = [m for m in design if m.startswith("too few")]
    design += _ring_grid_notes(measurement) if meta.detector == "ring" else []
    if isinstance(baseline, BandBaselines) and start is None:
        raise InputError("a fit with one baseline per group of wavelengths needs starting values")
    result, correlation = fit_spectrum(forward, start=start, **kwargs)
    messages = list(design)
    final_mask = None
    if model == "mc":
        result, correlation, final_mask, reach_messages = _fit_within_lookup_reach(
            forward, result, correlation, measurement, kwargs)
        messages += reach_messages
    if model != "mc" and min_transport_mfp > 0:
        finite = np.isfinite(measurement.values)
        used = finite  # the distances of the fit just made
        for _ in range(_NEAR_SOURCE_PASSES):
            mutr = result.mua_per_mm + result.musp_per_mm
            near = (rho[None, :] * mutr[:, None] < min_transport_mfp) & finite
            enough = (finite & ~near).sum(axis=1) >= (4 if relative else 3)
            mask = np.where(enough[:, None], finite & ~near, finite)
            changed = np.any(mask != used, axis=1)
            if not changed.any():
                break
            if constraint is not None and constraint.active:
                result, correlation = fit_spectrum(
                    forward, start=(result.mua_per_mm, result.musp_per_mm), mask=mask, **kwargs)
            else:  # refit only the wavelengths whose distances changed
                rows = np.where(changed)[0]
                sub = dict(kwargs, wavelength_nm=measurement.wavelength_nm[rows], data=measurement.values[rows],
                           sd=None if measurement.sd is None else measurement.sd[rows])
                part, part_corr = fit_spectrum(
                    forward, start=(result.mua_per_mm[rows], result.musp_per_mm[rows]), mask=mask[rows], **sub)
                result, correlation = merge_rows(result, correlation, part, part_corr, rows,
                                                 parameters_per_wavelength=3 if relative else 2)
            used = mask
        final_mask = used
        dropped = int((finite & ~used).sum())
        if dropped:
            messages.append(
                f"diffusion fit: left out {dropped} point{'s' if dropped != 1 else ''} within "
                f"{min_transport_mfp:g} transport mean free paths of the source (diffusion is poor there)"
            )
    if relative and not (constraint is not None and constraint.active):
        result, correlation = fit_spectrum(forward, start=(result.mua_per_mm, result.musp_per_mm),
                                           mask=final_mask, **dict(kwargs, profile_sd=True))
    if model == "farrell1992":
        messages += flux_only_mismatch_warnings(n=n, n_outside=n_outside)
    messages += srdr_design_warnings(rho_mm=rho, wavelength_nm=measurement.wavelength_nm,
                                     mua_per_mm=result.mua_per_mm, musp_per_mm=result.musp_per_mm,
                                     relative=relative)
    messages = list(dict.fromkeys(messages))
    if model != "mc":
        # the measured diffusion-vs-Monte-Carlo error at the fitted optics, over the points used
        error = diffusion_fit_error(kind="srdr", model=model, forward=forward, axis=rho, n=n, n_outside=n_outside,
                                    result=result, data=measurement.values, sd=measurement.sd, relative=relative)
        messages += diffusion_error_warnings(error, kind="srdr", wavelength_nm=measurement.wavelength_nm)
        result = replace(result, model_covariance=error.covariance)
    else:
        messages += model_range_warnings(forward, result)
        lowest = baseline_absorption_floor(baseline)
        floor = lowest * result.musp_per_mm / (1.0 - forward.lookup.g)
        pinned = result.mua_per_mm <= floor * 1.01
        if np.any(pinned):
            messages.append(
                f"fitted mua reached the baseline's lowest mua/mus ({float(np.max(lowest)):.3g}) at "
                f"{int(pinned.sum())} wavelengths; the true mua may be lower: build a baseline with a "
                f"smaller reference mua")
    messages += outcome_warnings(
        wavelength_nm=result.wavelength_nm, mua_per_mm=result.mua_per_mm,
        musp_per_mm=result.musp_per_mm, mua_sd_per_mm=result.mua_sd_per_mm,
        musp_sd_per_mm=result.musp_sd_per_mm, correlation=correlation)
    return _finish(result, measurement, messages)


#: Passes of the Monte Carlo fit's "keep the distances the lookup serves, add its noise to
#: the SDs and refit" step at most (the served set follows the fitted optics).
_REACH_PASSES = 4


def _fit_within_lookup_reach(forward, result, correlation, measurement: Measurement, kwargs: dict):
    """Refit a Monte Carlo lookup fit on the distances its baseline serves, its noise in the SDs.

    The first fit (all distances) gives the optics; at those, the distances the lookup
    cannot serve (beyond the baseline's photons and its far-field continuation,
    :meth:`~phantomlab.calibration.mc_lookup.SmoothLookup.served`) are left out — never
    fitted by extrapolation — and named in one line; the lookup's own photon noise is added
    to the data's SDs; the fit runs again from there, until the served set settles.

    Returns
    -------
    (FitResult, correlation, mask or None, messages)
        ``mask`` (W, R) marks the distances used (None: all).

    Raises
    ------
    InputError
        A wavelength keeps fewer than 3 (relative data: 4) distances.
    """
    relative = measurement.scale == "relative"
    rho = measurement.axis
    finite = np.isfinite(measurement.values)
    lookup = forward.lookup
    used = None
    mask = None
    previous = result
    outer = forward.outer_mm
    for _ in range(_REACH_PASSES):
        mus = result.musp_per_mm / (1.0 - lookup.g)
        mua = np.maximum(result.mua_per_mm, baseline_absorption_floor(lookup.baseline) * mus)
        served = lookup.served(mua_per_mm=mua, mus_per_mm=mus, rho_mm=np.broadcast_to(outer, (mua.size, rho.size)))
        wanted = finite & served
        # nothing left out: one refit with the lookup's noise is enough; distances left out
        # (the first solution saw them): refit until the solution no longer moves
        if used is not None and np.array_equal(wanted, used) and (mask is None or _settled(result, previous)):
            break
        used, mask = wanted, (None if np.array_equal(wanted, finite) else wanted)
        if mask is None and measurement.sd is None:
            break  # nothing to leave out, no SDs to add the lookup's noise to
        fewest = 4 if relative else 3
        short = used.sum(axis=1) < fewest
        if np.any(short):
            raise InputError(
                f"the Monte Carlo baseline serves fewer than {fewest} of the distances at "
                f"{_bands(measurement.wavelength_nm, short)} (the lookup's photons reach "
                f"{float(np.min(lookup.served_limit_mm(mua_per_mm=mua, mus_per_mm=mus)[short])):.3g} mm at "
                f"the fitted optics); measure nearer the source or build a baseline with more photons")
        if measurement.sd is not None:
            # the lookup's own photon noise is an uncertainty of the model: add it to the data's SDs
            model_sd = forward.model_sd(result.mua_per_mm, result.musp_per_mm)
            if relative and result.scale_factor is not None:
                model_sd = model_sd * result.scale_factor[:, None]
            kwargs["sd"] = np.sqrt(measurement.sd**2 + model_sd**2)
        previous = result
        result, correlation = fit_spectrum(forward, start=(result.mua_per_mm, result.musp_per_mm), mask=mask,
                                           **kwargs)
    messages = []
    refused = finite & ~used
    if np.any(refused):
        distances = ", ".join(f"{r:.3g}" for r in rho[refused.any(axis=0)])
        messages.append(
            f"Monte Carlo lookup: left out rho = {distances} mm at {_bands(measurement.wavelength_nm, refused.any(axis=1))} "
            f"(beyond what the baseline's photons serve at the fitted optics, "
            f"{float(np.min(lookup.served_limit_mm(mua_per_mm=mua, mus_per_mm=mus))):.3g} mm at the nearest); "
            f"they are not fitted by extrapolation")
    forward.rho_max_mm = float(np.max(np.where(used, outer[None, :], 0.0)))
    return result, correlation, mask, messages


def _settled(result, previous) -> bool:
    """True when a refit moved μa and μs′ by less than 0.3 of their SDs (the lookup's noise,
    added to the SDs at the previous solution, then no longer depends on where the fit started)."""
    moved = [np.abs(getattr(result, name) - getattr(previous, name)) <= 0.3 * getattr(result, sd) + 1e-12
             for name, sd in (("mua_per_mm", "mua_sd_per_mm"), ("musp_per_mm", "musp_sd_per_mm"))]
    finite = np.isfinite(result.mua_sd_per_mm) & np.isfinite(result.musp_sd_per_mm)
    return bool(np.all((moved[0] & moved[1]) | ~finite))


def flux_only_mismatch_warnings(*, n: float, n_outside: float) -> list[str]:
    """The warning for ``farrell1992`` (flux only) at an index-mismatched surface.

    Measured against the project's Monte Carlo (μs′/μa = 100, g = 0.8): 8–21 % below at 3–8
    transport lengths for n = 1.4 in air, 13–16 % at 3–5 for n = 1.33; the fluence-plus-flux
    model (Kienle & Patterson 1997, J Opt Soc Am A 14:246) is within 1–5 % there.
    """
    from phantomlab.transport.diffusion import FLUX_ONLY_MAX_INDEX_MISMATCH

    relative_index = float(n) / float(n_outside)
    if abs(relative_index - 1.0) <= FLUX_ONLY_MAX_INDEX_MISMATCH:
        return []
    return [
        f"srdr model farrell1992 (flux only) at n/n_outside = {relative_index:.3g}: at a mismatched "
        f"surface it reads 8-21 % below Monte Carlo at 3-8 transport mean free paths (n = 1.4 in air), "
        f"which biases musp and mua by tens of per cent; fit with kienle1997 (within 1-5 %) or the "
        f"Monte Carlo lookup (model mc)"
    ]


def model_range_warnings(forward, result) -> list[str]:
    """Warnings the forward model itself raises at the fitted optics (its own validity range)."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        forward(result.mua_per_mm, result.musp_per_mm)
    messages = [" ".join(str(w.message).split()) for w in caught if issubclass(w.category, PhantomlabWarning)]
    lookup = getattr(forward, "lookup", None)
    if lookup is not None:
        message = lookup.reach_warning(mus_per_mm=result.musp_per_mm / (1.0 - lookup.g),
                                       rho_max_mm=getattr(forward, "rho_max_mm", 0.0))
        if message:
            messages.append(message)
    return messages


def _finish(result: FitResult, measurement: Measurement, messages) -> FitResult:
    from dataclasses import replace

    unique = list(dict.fromkeys(list(result.warnings) + list(messages)))
    for message in unique:
        warnings.warn(message, PhantomlabWarning, stacklevel=3)
    return replace(result, warnings=tuple(unique), source=measurement.source, name=measurement.name,
                   replicates=measurement.replicates)
