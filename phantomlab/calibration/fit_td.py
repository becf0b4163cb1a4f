"""Inverse fit of time-domain (time-resolved) measurements (layer 3).

Each histogram N_k (wavelength λ, distance ρ) is fitted with

    μ_k = A · c_k(μa, μs′, t0) + B,       c_k = Σ_j h_j S(t_k − τ_j)   (transport/convolution.py)

the forward model R(ρ, t) seen through the measured IRF h (background removed, normalised)
and delayed by t0, times an amplitude A, plus the background B per bin.  μa and μs′ are
shared by the distances of one wavelength; t0 and A belong to each curve (each detector
channel has its own delay and coupling); with a calibrated system (``scale_counts_mm2``) A is
that number and not fitted.  A is solved in closed form at every step (variable projection,
Golub & Pereyra 1973), so the search runs over log μa, log μs′ and the t0s.

**Variance model: Poisson.**  The counts are Poisson with mean μ_k.  The fit minimises Pearson's
χ² = Σ (N_k − μ_k)²/μ_k with the weights held fixed in each pass and taken from the previous
pass's model (the first pass uses max(N_k, 1)): the fixed point is the maximum-likelihood
estimate for Poisson counts (iteratively reweighted least squares; McCullagh & Nelder 1989,
*Generalized Linear Models*, 2nd ed., §2.5).  χ²_red is Pearson's χ² over the degrees of
freedom (window bins − fitted parameters, amplitudes included); its SDs are the (JᵀJ)⁻¹ of the
last pass.  The Monte Carlo lookup's own error enters as a model error of each bin, propagated
to the parameters (:func:`~phantomlab.calibration.td_model_errors.model_error_covariance`): its
photon noise, averaged over the bin's spread in ln t (variance × h/√(h² + s²), correlation
widened to √(h² + s²), h the smoothing kernel's width, s the spread of ln t the bin's response
holds; where the IRF is wider than the curve's rise the fit is far from linear, and the half-space
lookup's noise is carried by refits with its errors drawn instead,
:mod:`~phantomlab.calibration.td_lookup_refits`), and its smoothing bias
(:meth:`~phantomlab.calibration.mc_lookup_time.TimeResolvedLookup.relative_bias`).  On
independent lookups the SDs cover the errors (tests/calibration/test_lookup_sds.py).

**Background** B: the mean count of the bins before the pulse (earlier than two IRF widths
before the curve first reaches 5 % of its peak; at least 10 bins), or the sidecar's
``background_counts``; without either it is 0 and the fit says so.  **Window**: the bins from
where the curve (background removed, 5-bin running mean) first rises to ``window_rise_fraction``
of its peak to where it falls to ``window_tail_fraction``; defaults
:data:`DEFAULT_WINDOW` (# common practice, no source: diffusion models leave out the early
photons where diffusion is poor, from half the peak on the rising edge; the Monte Carlo
lookup, valid early too, starts at 10 %; both end at 1 % of the peak on the tail).

Models (:data:`TD_FIT_MODELS`): the diffusion models of
:mod:`phantomlab.transport.time_domain` (half-space, or slab when a thickness is given;
transmittance needs one); ``mc``, the time-resolved Monte Carlo lookup of a stored
half-space baseline (:mod:`phantomlab.calibration.mc_lookup_time`; reflectance from a thick
phantom only: the baselines are half-space runs); and ``mc-slab``, transmittance through a
slab by contini1997 corrected by direct Monte Carlo runs of slabs
(:mod:`phantomlab.calibration.slab_time_correction`; run by
:func:`phantomlab.calibration.fit_td_slab.fit_td_slab`, the default fit of transmittance).
A ``detector = "fibre"`` sidecar averages any of them over the detection face
(:func:`phantomlab.calibration.td_models.face_average`).

**Diffusion's own error** is part of a diffusion fit's SDs (``model_covariance``, reported as
``diffusion_model_error``): diffusion misses the Monte Carlo curve's shape by a few per cent,
smoothly along the curve, which biases μs′ by 5–35 % at μs′/μa 10–30 and μa by up to 30 %
through a 15 mm slab at μs′/μa 1000 (measured on independent Monte Carlo runs), far beyond the
Poisson SDs.  It is modelled as a relative error of each bin, :data:`DIFFUSION_SHAPE_ERROR`,
correlated along ln t as a Gaussian of the given width, and propagated to the parameters
linearly (the same sandwich as the lookup's noise, :func:`_lookup_covariance`).

References
----------
Patterson MS, Chance B, Wilson BC 1989, Appl Opt 28:2331 (fitting the convolved diffusion
model to time-resolved reflectance for μa and μs′).
Golub GH, Pereyra V 1973, SIAM J Numer Anal 10:413–432 (variable projection).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.fitting import fit_blocks, log_to_linear, off_step_covariance
from phantomlab.calibration.identifiability import outcome_warnings, step_warnings
from phantomlab.calibration.td_checks import td_design_warnings
from phantomlab.calibration.td_lookup_refits import refit_covariance
from phantomlab.calibration.td_model_errors import (
    check_lookup_reach,
    lookup_noise_notes,
    model_error_covariance,
    false_basin_notes,
    sparse_front_notes,
)
from phantomlab.calibration.td_curves import (
    SHIFT_UNIT_PS,
    background_level,
    clean_irf,
    fit_window,
    restart_poor_rows,
    rise_time_ps,
    running_mean,
    start_values,
)
from phantomlab.calibration.td_measurements import TimeDomainMeasurement
from phantomlab.calibration.td_models import TD_FIT_MODELS, face_average, td_curve_model
from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.jsonable import to_jsonable
from phantomlab.transport.convolution import irf_fwhm_ps, prepare_irf

__all__ = ["TD_FIT_MODELS", "DEFAULT_WINDOW", "TimeDomainFit", "fit_td"]

#: Fit window (rise, tail) as fractions of the peak.  # common practice, no source
#: (the slab model starts where diffusion does: its correction changes fastest, and from
#: node to node most, on the early rise)
DEFAULT_WINDOW = {"diffusion": (0.5, 0.01), "mc": (0.1, 0.01), "mc-slab": (0.5, 0.01)}
#: Diffusion's shape error against Monte Carlo in a fit window: (relative SD of a bin,
#: correlation width in ln t).  An empirical error model: set so that diffusion fits of the
#: independent half-space Monte Carlo run (reflectance, ρ 10–20 mm, μs′/μa 10–1000) lie within
#: 2 SD in ≥ 90 % of copies (99 % measured), then checked on the slab run (transmittance, not
#: used to set it: 98 % with contini1997, 93 % with kienle1997);
#: tests/calibration/test_td_model_error.py.
DIFFUSION_SHAPE_ERROR = (0.02, 0.2)
#: The delay t0 takes up more of diffusion's error than that shape error carries: diffusion's
#: light arrives too early and t0 moves the whole curve later.  Measured on the same
#: independent runs (reflectance 12–20 mm and transmittance through 15 mm, μs′/μa 10–1000,
#: IRF 100–300 ps): t0 by kienle1997 and contini1997 was 10–38 ps late, up to 3.9 times the
#: shape error's share of its SD (at μs′/μa 10; 0.6–1.2 times at 100–1000).  This factor on
#: that share covers every case measured; tests/calibration/test_td_time_shift.py.
DIFFUSION_SHIFT_ERROR_SCALE = 4.0
#: The slab model's own shape error between its Monte Carlo runs (``mc-slab``; the same form):
#: sized on fits of each run from the others (every second node left out, so interpolated
#: over twice the step) and checked on the independent slab run; tests/calibration/test_fit_td_slab.py.
SLAB_SHAPE_ERROR = (0.0025, 0.2)
#: Passes of the Poisson reweighting (the weights settle in two).
IRLS_PASSES = 2
#: Levenberg–Marquardt steps of the smooth diffusion model before a lookup fit (0: none).
DIFFUSION_START_STEPS = 6
#: The fit stops when a step changes χ² by less than this (relative): Δχ² of 0.002 over 200
#: bins, so the solution lies within √0.002 ≈ 0.05 SD of the minimum along any direction, far
#: inside its uncertainty; the parameter steps then need no limit of their own (the lookup's
#: table makes the last digits of a finite-difference Jacobian noisy, and chasing them costs
#: calls without moving the answer).
_COST_TOLERANCE = 1e-5
_STEP_TOLERANCE = 1e-2


@dataclass(frozen=True)
class TimeDomainFit(FitResult):
    """A :class:`FitResult` of a td measurement, with what the curves need for a plot.

    Attributes (besides FitResult's)
    --------------------------------
    time_shift_ps, time_shift_sd_ps : ndarray (W, R) [ps]
        Fitted delay t0 of each curve relative to its IRF, and its SD (from the counts and the
        lookup's noise; :func:`~phantomlab.calibration.fit_quality.assess_fit` scales it by the
        misfit and adds ``time_shift_model_sd_ps``).
    time_shift_model_sd_ps : ndarray (W, R) [ps]
        The part of t0's SD from the model's own shape error (diffusion, mc-slab; zeros for
        the lookup, whose error is already in ``time_shift_sd_ps``).
    amplitude : ndarray (W, R)
        A of each curve (counts per unit R·Δt [mm²]); the given scale when calibrated.
    background_counts : ndarray (W, R)
        B per bin as used.
    curves : dict
        ``time_ps`` (K,), ``rho_mm`` (R,), ``counts``, ``model`` (W, R, K), ``window`` (W, R, K)
        bool, ``irf_time_ps`` (J,), ``irf`` (W or 1, J): for the plots (not in the JSON).
    """

    time_shift_ps: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    time_shift_sd_ps: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    time_shift_model_sd_ps: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    amplitude: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    background_counts: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))
    curves: dict = field(default_factory=dict, compare=False)

    def to_json(self) -> dict[str, Any]:
        """FitResult's keys plus ``time_shift_ps``, ``time_shift_sd_ps`` (per wavelength and distance)."""
        payload = super().to_json()
        payload.update(to_jsonable({
            "time_shift_ps": self.time_shift_ps, "time_shift_sd_ps": self.time_shift_sd_ps,
            "rho_mm": self.curves.get("rho_mm"), "amplitude": self.amplitude,
            "background_counts": self.background_counts,
        }))
        return payload


def fit_td(measurement: TimeDomainMeasurement, *, model: str = "kienle1997", n: float | None = None,
           n_outside: float | None = None, thickness_mm: float | None = None, baseline=None,
           window_rise_fraction: float | None = None, window_tail_fraction: float | None = None,
           slab_correction=None, musp_range_per_mm: tuple[float, float] | None = None) -> TimeDomainFit:
    """Fit μa and μs′ (with a time shift and an amplitude per curve) to time-resolved histograms.

    Parameters
    ----------
    measurement : TimeDomainMeasurement
    model : {'kienle1997', 'contini1997', 'patterson1989', 'mc', 'mc-slab'}
        ``mc-slab``: transmittance through a slab, contini1997 corrected by direct Monte Carlo
        runs (:mod:`phantomlab.calibration.slab_time_correction`; give ``slab_correction``;
        :func:`phantomlab.calibration.fit_td_slab.fit_td_slab` chooses and runs them).
    n, n_outside : float, optional
        Phantom and outside index (default: the sidecar's; n is required).
    thickness_mm : float, optional [mm]
        Slab thickness (default: the sidecar's; transmittance needs it).
    baseline : Baseline, optional
        For ``model='mc'``.
    window_rise_fraction, window_tail_fraction : float, optional
        Fit window edges as fractions of the peak (default: the sidecar's, else
        :data:`DEFAULT_WINDOW`).
    slab_correction : SlabCorrection, optional
        For ``model='mc-slab'``.
    musp_range_per_mm : (float, float), optional [1/mm]
        Bounds of μs′ (default 1e-3 to 50); the slab model keeps to its nodes.

    Returns
    -------
    TimeDomainFit
    """
    if not isinstance(measurement, TimeDomainMeasurement):
        raise InputError("fit_td needs a td measurement")
    meta = measurement.metadata
    n = meta.n if n is None else n
    if n is None:
        raise InputError("the td fit needs the phantom's refractive index: give --n N or n = ... in the sidecar")
    n_outside = meta.n_outside if n_outside is None else n_outside
    thickness = measurement.thickness_mm if thickness_mm is None else thickness_mm
    geometry = measurement.geometry
    if geometry == "transmittance" and thickness is None:
        raise InputError("a transmittance fit needs the slab's thickness: give --thickness-mm D")
    if model not in TD_FIT_MODELS:
        raise InputError(f"unknown td fit model {model!r}; accepted: {', '.join(TD_FIT_MODELS)}")
    family = model if model in ("mc", "mc-slab") else "diffusion"
    rise = window_rise_fraction or measurement.window_rise_fraction or DEFAULT_WINDOW[family][0]
    tail = window_tail_fraction or measurement.window_tail_fraction or DEFAULT_WINDOW[family][1]
    shape = td_curve_model(model=model, geometry=geometry, thickness_mm=thickness, n=n, n_outside=n_outside,
                           baseline=baseline, slab_correction=slab_correction)
    if meta.detector == "fibre":
        shape = face_average(shape, core_mm=float(meta.fibre_core_mm), rho_mm=measurement.rho_mm)
    elif meta.detector != "point":
        raise InputError(f"{measurement.name}: detector = {meta.detector!r} is for srdr; a td fit takes 'point' or "
                         "'fibre' (with fibre_core_mm)")
    W, R, K = measurement.counts.shape
    present = np.isfinite(measurement.counts[..., 0])
    if not np.all(present):
        i, j = np.argwhere(~present)[0]
        raise InputError(f"{measurement.name}: no curve at {measurement.wavelength_nm[i]:g} nm and "
                         f"{measurement.rho_mm[j]:g} mm; every wavelength needs every distance")
    counts = measurement.counts.reshape(W * R, K)
    irf = clean_irf(measurement.irf, measurement.irf_time_ps)
    irf_of_curve = np.repeat(np.arange(W), R) if irf.shape[0] == W and W > 1 else np.zeros(W * R, int)
    fwhm = irf_fwhm_ps(measurement.irf_time_ps, irf)[irf_of_curve]
    messages: list[str] = []
    background = np.empty(W * R)
    windows = np.zeros((W * R, K), bool)
    guessed_zero = []
    for c in range(W * R):
        if measurement.background_counts is not None:
            background[c] = measurement.background_counts
        else:
            estimate = background_level(counts[c], measurement.time_ps, fwhm[c])
            if estimate is None:
                guessed_zero.append(c)
            background[c] = 0.0 if estimate is None else estimate
        windows[c] = fit_window(counts[c] - background[c], rise, tail)
        signal = (counts[c] - background[c])[windows[c]]
        # a pulse must stand out of the curve's own typical level (its median) by its noise, 5 SD
        level = float(np.median(counts[c]))
        standout = float(running_mean(counts[c]).max()) - level > 5.0 * np.sqrt(max(level, 1.0))
        if windows[c].sum() < 3 or not np.any(signal > 0) or not standout:
            w, r = divmod(c, R)
            raise InputError(f"{measurement.name}: row {measurement.first_row[w, r]}, column counts: no counts above "
                             f"the background in the fit window at {measurement.wavelength_nm[w]:g} nm, "
                             f"{measurement.rho_mm[r]:g} mm")
    irf_peak = float(np.max(measurement.irf))
    data_peak = float(np.nanmax(counts))
    if irf_peak < data_peak:
        messages.append(f"the IRF holds fewer counts at its peak ({irf_peak:.3g}) than the data ({data_peak:.3g}): its own "
                        "noise enters the model and the SDs do not count it; measure the IRF with more counts")
    if guessed_zero:
        messages.append(f"no bins before the pulse to estimate the background from ({len(guessed_zero)} curves); "
                        "taken as 0 (give background_counts in the sidecar)")
    rho_curve = np.tile(measurement.rho_mm, W)
    absolute = measurement.scale_counts_mm2
    # the fit needs only the bins of the windows and the IRF's non-zero span: crop both once
    used = np.flatnonzero(windows.any(axis=0))
    crop = slice(int(used[0]), int(used[-1]) + 1)
    pulse = np.flatnonzero(irf.any(axis=0))
    irf_span = slice(int(pulse[0]), int(pulse[-1]) + 1) if pulse.size >= 2 else slice(None)
    time = measurement.time_ps[crop]
    full_counts, full_windows = counts, windows
    # curves whose IRF is wider than their rise (10 % to the peak): warned, and their lookup
    # error carried by refits (below)
    irf_wider = np.array([fwhm[k] > rise_time_ps(counts[k] - background[k], measurement.step_ps)
                          for k in range(W * R)])
    counts, windows = counts[:, crop], windows[:, crop]
    K = time.size
    response = prepare_irf(time_ps=time, irf_time_ps=measurement.irf_time_ps[irf_span], irf=irf[:, irf_span])
    # the starting grid only ranks (μa, μs′) pairs: the IRF taken as a rectangle per bin
    # (an error of about 1e-3 of the peak, far below what separates the grid's pairs) on a
    # lattice a third the size
    coarse = prepare_irf(time_ps=time, irf_time_ps=measurement.irf_time_ps[irf_span], irf=irf[:, irf_span],
                         subdivisions=1)

    # the lookup's objective is rough on the scale of its photon noise: it starts from the
    # smooth diffusion model's grid and fit (same geometry), which lands in the right basin
    smooth_shape = shape if family == "diffusion" else td_curve_model(
        model="kienle1997" if model == "mc" else "contini1997", geometry=geometry, thickness_mm=thickness, n=n,
        n_outside=n_outside)
    if smooth_shape is not shape and meta.detector == "fibre":
        smooth_shape = face_average(smooth_shape, core_mm=float(meta.fibre_core_mm), rho_mm=measurement.rho_mm)

    def expected(mua_c, musp_c, shift_c, curves, sd=None, using=None, through=None):
        """Shape c (unit amplitude), amplitude A and μ for the given curves."""
        use = shape if using is None else using
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            c = (response if through is None else through).counts(
                lambda times: use(mua_c, musp_c, rho_curve[curves], times), shift_c, irf_rows=irf_of_curve[curves],
                smooth_start=True)
        data = counts[curves] - background[curves][:, None]
        if absolute is not None:
            amplitude = np.full(curves.size, float(absolute))
        else:
            weight = windows[curves] / (sd**2 if sd is not None else np.maximum(counts[curves], 1.0))
            amplitude = np.sum(weight * c * data, axis=1) / np.maximum(np.sum(weight * c * c, axis=1), 1e-300)
            amplitude = np.maximum(amplitude, 1e-300)
        return c, amplitude, amplitude[:, None] * c + background[curves][:, None]

    start = start_values(lambda *a, **k: expected(*a, using=smooth_shape, through=coarse, **k), counts, background,
                         windows, time, W, R)
    P = 2 + R
    musp_low, musp_high = (1e-3, 50.0) if musp_range_per_mm is None else musp_range_per_mm
    lower = np.concatenate([[np.log(1e-6), np.log(musp_low)], np.full(R, (time[0] - time[-1]) / SHIFT_UNIT_PS)])
    upper = np.concatenate([[np.log(5.0), np.log(musp_high)], np.full(R, (time[-1] - time[0]) / SHIFT_UNIT_PS)])
    start = np.clip(start, lower + 1e-9, upper - 1e-9)
    sd = np.sqrt(np.maximum(counts, 1.0))
    mask = windows.reshape(W, R * K)
    if smooth_shape is not shape:
        def smooth_residual(x_rows, rows):
            curves = (rows[:, None] * R + np.arange(R)[None, :]).ravel()
            _, _, mu = expected(np.repeat(np.exp(x_rows[:, 0]), R), np.repeat(np.exp(x_rows[:, 1]), R),
                                x_rows[:, 2:].ravel() * SHIFT_UNIT_PS, curves, sd[curves], using=smooth_shape,
                                through=coarse)
            return ((mu - counts[curves]) / sd[curves]).reshape(rows.size, R * K)

        if model == "mc" and DIFFUSION_START_STEPS:  # a few steps of diffusion first (mc-slab is smooth)
            start = fit_blocks(smooth_residual, start, mask=mask, lower=lower, upper=upper, row_aware=True,
                               max_nfev=DIFFUSION_START_STEPS, tolerance=1e-3,
                               step_tolerance=_STEP_TOLERANCE).x  # a start only
    def curve_residual(x_rows, curves, sd, using=None):
        """Normalised residuals (rows, R·K) of the given curves (R a row) at parameters x_rows."""
        _, _, mu = expected(np.repeat(np.exp(x_rows[:, 0]), R), np.repeat(np.exp(x_rows[:, 1]), R),
                            x_rows[:, 2:].ravel() * SHIFT_UNIT_PS, curves, sd[curves], using=using)
        return ((mu - counts[curves]) / sd[curves]).reshape(x_rows.shape[0], R * K)

    outcome = None
    x = start
    for attempt in range(IRLS_PASSES):
        def residual_fn(x_rows, rows, sd=sd):
            return curve_residual(x_rows, (rows[:, None] * R + np.arange(R)[None, :]).ravel(), sd)

        # later passes start at the previous solution and only follow the new weights: a few steps
        outcome = fit_blocks(residual_fn, x, mask=mask, lower=lower, upper=upper, row_aware=True,
                             max_nfev=None if attempt == 0 else 4, tolerance=_COST_TOLERANCE,
                             step_tolerance=_STEP_TOLERANCE)
        if attempt == 0 and smooth_shape is not shape:
            outcome = restart_poor_rows(outcome, residual_fn, smooth_residual, mask=mask, lower=lower, upper=upper,
                                            tolerance=_COST_TOLERANCE, step_tolerance=_STEP_TOLERANCE)
        x = outcome.x
        curves = np.arange(W * R)
        c, amplitude, mu = expected(np.repeat(np.exp(x[:, 0]), R), np.repeat(np.exp(x[:, 1]), R), x[:, 2:].ravel() * SHIFT_UNIT_PS,
                                    curves, sd)
        sd = np.sqrt(np.maximum(mu, 1e-12))
    reference = None  # the smooth diffusion model fitted to the same counts: a false basin's witness
    if family == "mc" and smooth_shape is not shape:
        reference = fit_blocks(smooth_residual, start, mask=mask, lower=lower, upper=upper, row_aware=True,
                               tolerance=_COST_TOLERANCE, step_tolerance=_STEP_TOLERANCE)
    # a solution on a step of the model (the lookup, before its light rose over a ramp where its
    # photons begin): the SD from the smooth side's derivative, and said (a difference across
    # the step claimed SDs of 0.01 %)
    jacobian, cov_log, stepped = off_step_covariance(residual_fn, outcome, mask)
    messages += step_warnings(wavelength_nm=measurement.wavelength_nm, stepped=stepped,
                              names=["mua", "musp"] + ["t0"] * R, lookup=family == "mc")
    model_sd = getattr(shape, "relative_sd", None)
    # each bin holds the response over the IRF's width: a model error's size and its time are
    # the response-weighted means over what the bin holds (one convolution for all of them)
    mua_c, musp_c = np.repeat(np.exp(x[:, 0]), R), np.repeat(np.exp(x[:, 1]), R)
    shifts = SHIFT_UNIT_PS * x[:, 2:].ravel()

    def weighted(*extras):
        """Σ over what each bin holds of the response times each ``extra(times)``, (E, W·R, K): one call."""
        N, E = mua_c.size, len(extras)

        def stacked(times):  # every block of N rows holds the same times
            values = shape(mua_c, musp_c, rho_curve, times[:N])
            return np.concatenate([values * extra(times[:N]) for extra in extras], axis=0)

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            return response.counts(stacked, np.tile(shifts, E), irf_rows=np.tile(irf_of_curve, E),
                                   smooth_start=True).reshape(E, N, -1)

    def log_time_of(times):
        return np.log(np.maximum(times, 1e-3))

    extras = [log_time_of, lambda times: log_time_of(times) ** 2]
    with_bias = getattr(shape, "relative_bias", None)
    if model_sd is not None:
        extras += [lambda times: model_sd(musp_c, rho_curve, np.maximum(times, 1e-3)),
                   lambda times: shape.bandwidth_at(musp_c, rho_curve, np.maximum(times, 1e-3))]
        if with_bias is not None:
            extras.append(lambda times: with_bias(musp_c, rho_curve, np.maximum(times, 1e-3)))
    with np.errstate(divide="ignore", invalid="ignore"):
        held = np.maximum(c, 1e-300)
        sums = weighted(*extras) / held[None]
        log_time = sums[0]
        log_time_spread = np.sqrt(np.clip(sums[1] - log_time**2, 0.0, None))
    log_time = np.where(np.isfinite(log_time), log_time, 0.0)
    log_time_spread = np.where(np.isfinite(log_time_spread), log_time_spread, 0.0)
    if model_sd is not None:
        # the lookup's own photon noise, correlated along the curve as its smoothing kernel is,
        # and the smoothing's bias
        rel, width = sums[2], sums[3]
        bias = sums[4] if with_bias is not None else np.zeros_like(rel)
        rel = np.where(np.isfinite(rel), rel, 0.0)
        bias = np.where(np.isfinite(bias), bias, 0.0)
        width = np.where(np.isfinite(width) & (width > 0), width, shape.default_bandwidth)
        # a bin holds the response over a spread of ln t (the IRF and the bin): the lookup's
        # noise, correlated over ``width`` in ln t, is averaged over that spread, which lowers
        # its variance by width/√(width² + spread²) and widens its correlation to
        # √(width² + spread²) (Gaussian kernels)
        widened = np.sqrt(width**2 + log_time_spread**2)
        noise_cov = model_error_covariance(
            jacobian, mask, [((amplitude[:, None] * c * rel * np.sqrt(width / widened)) / sd, widened)],
            log_time, W, R, K)
        # with the smoothing's own bias (TimeResolvedLookup.relative_bias), correlated as the noise
        bias_cov = model_error_covariance(jacobian, mask, [((amplitude[:, None] * c * bias) / sd, widened)],
                                          log_time, W, R, K)
        if family == "mc" and np.any(irf_wider):
            # where the IRF is wider than the curve's rise the fit is far from linear (t0 and μs′
            # trade): the noise's share by refits with the lookup's errors drawn
            # (td_lookup_refits; linear, averaged, independent lookups lay 7–10 SD off; unaveraged
            # it claimed 10–75 times their spread).  A fit stopped on a step of its model sticks
            # there when refitted: it keeps the linear share unaveraged, which covers but can be
            # far too wide (35 % against a spread of 0.8 % when the lookup had a step where its
            # photons begin, 10 M baseline, μs′/μa 10, 12 mm; td_lookup_refits)
            wide_rows = irf_wider.reshape(W, R).any(axis=1)
            stuck = wide_rows & stepped.any(axis=1)
            if stuck.any():
                def of_stuck(values):  # (W·R, K) -> the stuck rows' curves
                    return values.reshape(W, R, K)[stuck].reshape(-1, K)

                unaveraged = [(of_stuck((amplitude[:, None] * c * rel) / sd), of_stuck(width))]
                noise_cov[stuck] = model_error_covariance(jacobian[stuck], mask[stuck], unaveraged, of_stuck(log_time),
                                                          int(stuck.sum()), R, K)
            wide = np.flatnonzero(wide_rows & ~stuck)
            if wide.size:
                noise_cov[wide] = refit_covariance(
                    lambda x_rows, curves, model: curve_residual(x_rows, curves.ravel(), sd, using=model), shape,
                    x=x, rows=wide, curves_per_row=R, musp_per_mm=musp_c, rho_mm=rho_curve, mask=mask, lower=lower,
                    upper=upper, tolerance=_COST_TOLERANCE, step_tolerance=_STEP_TOLERANCE,
                    tau_range_ps=(1.0, float(time[-1] - time[0] + measurement.irf_time_ps[irf_span][-1]
                                               - measurement.irf_time_ps[irf_span][0] + np.abs(shifts).max() + 100.0)))
        from_counts = cov_log
        cov_log = cov_log + noise_cov + bias_cov
        if family == "mc":
            messages += lookup_noise_notes(measurement.wavelength_nm, from_counts, cov_log)
    values, cov = log_to_linear(x[:, :2], cov_log[:, :2, :2])
    model_covariance = None
    shift_model_sd = np.zeros((W, R))
    if family in ("diffusion", "mc-slab"):
        # diffusion's own shape error against Monte Carlo (DIFFUSION_SHAPE_ERROR), or the slab
        # model's between its runs, propagated like the lookup's noise; assess_fit adds it to
        # the SDs (diffusion_model_error, slab_model_error)
        relative, width = DIFFUSION_SHAPE_ERROR if family == "diffusion" else SLAB_SHAPE_ERROR
        shape_cov = model_error_covariance(jacobian, mask,
                                       [(relative * amplitude[:, None] * c / sd, np.full(log_time.shape, width))],
                                       log_time, W, R, K)
        model_covariance = values[:, :, None] * shape_cov[:, :2, :2] * values[:, None, :]
        # t0 takes up much of a model's error on the rise: by kienle1997 it was 10–31 ps late
        # on independent Monte Carlo data where the counts alone gave it an SD of 0.2–1 ps
        shift_model_sd = SHIFT_UNIT_PS * np.sqrt(np.clip(np.diagonal(shape_cov, axis1=1, axis2=2)[:, 2:], 0, None))
        if family == "diffusion":
            shift_model_sd = DIFFUSION_SHIFT_ERROR_SCALE * shift_model_sd
    mua_fit, musp_fit = values[:, 0], values[:, 1]
    mua_sd = np.sqrt(np.diagonal(cov, axis1=1, axis2=2))[:, 0]
    musp_sd = np.sqrt(np.diagonal(cov, axis1=1, axis2=2))[:, 1]
    shift_sd = SHIFT_UNIT_PS * np.sqrt(np.clip(np.diagonal(cov_log, axis1=1, axis2=2)[:, 2:], 0, None))
    amplitudes_fitted = 0 if absolute is not None else R
    dof = mask.sum(axis=1) - P - amplitudes_fitted
    K_full = measurement.time_ps.size
    residuals = np.full((W, R, K_full), np.nan)
    residuals[:, :, crop] = outcome.residuals.reshape(W, R, K)
    # the model on the whole histogram, for the plots
    whole = prepare_irf(time_ps=measurement.time_ps, irf_time_ps=measurement.irf_time_ps[irf_span],
                        irf=irf[:, irf_span], direct=False)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        c_full = whole.counts(lambda times: shape(np.repeat(mua_fit, R), np.repeat(musp_fit, R), rho_curve, times),
                              SHIFT_UNIT_PS * x[:, 2:].ravel(), irf_rows=irf_of_curve, smooth_start=True)
    mu_full = amplitude[:, None] * c_full + background[:, None]
    chi2 = np.nansum(residuals**2, axis=(1, 2))
    with np.errstate(invalid="ignore", divide="ignore"):
        chi2_w = np.where(dof > 0, chi2 / np.maximum(dof, 1), np.nan)
        total_dof = float(dof[dof > 0].sum())
        chi2_all = float(chi2[dof > 0].sum() / total_dof) if total_dof > 0 else float("nan")
        correlation = cov[:, 0, 1] / (mua_sd * musp_sd)
    messages += td_design_warnings(measurement, full_counts.reshape(W, R, K_full) - background.reshape(W, R, 1),
                                 full_windows.reshape(W, R, K_full), fwhm.reshape(W, R), irf_wider.reshape(W, R),
                                 family, geometry, thickness, mua_fit, musp_fit, rise)
    messages += outcome_warnings(wavelength_nm=measurement.wavelength_nm, mua_per_mm=mua_fit, musp_per_mm=musp_fit,
                                 mua_sd_per_mm=mua_sd, musp_sd_per_mm=musp_sd, correlation=correlation)
    lookup = getattr(shape, "lookup", None)
    if lookup is not None:
        check_lookup_reach(lookup, measurement, musp_fit, x[:, 2:] * SHIFT_UNIT_PS, full_windows, irf,
                            irf_of_curve, R)
        messages += sparse_front_notes(measurement.wavelength_nm, measurement.rho_mm, mua_fit, musp_fit, lookup.g)
        if reference is not None:
            messages += false_basin_notes(measurement.wavelength_nm, musp_fit, np.exp(reference.x[:, 1]))
    messages = list(dict.fromkeys(messages))
    for message in messages:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    label = {"mc": "mc-lookup", "mc-slab": "mc-slab"}.get(model, f"diffusion-{model}")
    return TimeDomainFit(
        kind="td", model=label, wavelength_nm=measurement.wavelength_nm, mua_per_mm=mua_fit, musp_per_mm=musp_fit,
        mua_sd_per_mm=mua_sd, musp_sd_per_mm=musp_sd, covariance=cov, chi2_red=chi2_all, chi2_red_per_wavelength=chi2_w,
        residuals=residuals, warnings=tuple(messages), source=measurement.source, name=measurement.name,
        replicates=measurement.replicates, dof=total_dof if total_dof > 0 else float("nan"),
        model_covariance=model_covariance,
        parameters={"window_rise_fraction": rise, "window_tail_fraction": tail},
        time_shift_ps=SHIFT_UNIT_PS * x[:, 2:], time_shift_sd_ps=shift_sd, time_shift_model_sd_ps=shift_model_sd,
        amplitude=amplitude.reshape(W, R),
        background_counts=background.reshape(W, R),
        curves={"time_ps": measurement.time_ps, "rho_mm": measurement.rho_mm, "counts": measurement.counts,
                "model": mu_full.reshape(W, R, K_full), "window": full_windows.reshape(W, R, K_full),
                "irf_time_ps": measurement.irf_time_ps, "irf": irf, "geometry": geometry},
    )
