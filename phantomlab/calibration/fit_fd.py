"""Inverse fit of frequency-domain measurements: AC amplitude and phase lag (layer 3).

Forward models (:data:`FD_FIT_MODELS`):

* ``kienle1997`` (default), ``contini1997`` — the half-space diffusion models of
  :mod:`phantomlab.transport.frequency_domain` (fluence + flux, or flux alone);
* ``mc`` — the Monte Carlo lookup of a stored half-space baseline, the Fourier transform of its
  time-resolved reflectance (:meth:`~phantomlab.calibration.mc_lookup_time.TimeResolvedLookup.frequency_domain`);
* ``fantini1994`` — the multi-distance slope method for a quick estimate (no SDs).

The fit works on ln R̃ = ln AC − i φ: residuals ln AC_model − ln AC and φ_model − φ (radians),
each divided by its SD (the file's ``amplitude_sd``/``amplitude`` and ``phase_sd_deg``); a file
without SDs weighs both equally (the real and imaginary parts of ln R̃) and the covariance is
scaled by the reduced χ².  A relative amplitude has an unknown scale per wavelength and
frequency, and an unknown phase offset one per wavelength and frequency: both are solved in
closed form at every step (variable projection, Golub & Pereyra 1973), so the search runs over
log μa and log μs′ only; their values are reported (``scale_factor``, ``phase_offset_deg``).

References
----------
Fantini S, Franceschini MA, Gratton E 1994, J Opt Soc Am B 11:2128–2138,
doi:10.1364/JOSAB.11.002128 (the slopes of ln(ρ² AC) and φ against ρ give μa and μs′).
Golub GH, Pereyra V 1973, SIAM J Numer Anal 10:413–432 (variable projection).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phantomlab.calibration.fd_measurements import FrequencyDomainMeasurement
from phantomlab.calibration.fd_offsets import phase_offset_sds
from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.fitting import (
    far_worse_than_data_allow,
    fit_blocks,
    log_to_linear,
    off_step_covariance,
    with_rows,
)
from phantomlab.calibration.identifiability import _bands, outcome_warnings, step_warnings
from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.jsonable import to_jsonable
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

__all__ = ["FD_FIT_MODELS", "FrequencyDomainFit", "fit_fd", "fd_forward", "slope_estimate_Fantini1994"]

FD_FIT_MODELS = ("kienle1997", "contini1997", "mc", "fantini1994")
#: Diffusion's error against Monte Carlo in fd data: (SD of ln amplitude, SD of the phase as a
#: fraction of itself, correlation width in ln ρ).  Empirical: diffusion fits of the transform
#: of the independent half-space Monte Carlo run (μs′/μa 10–1000, 10–20 mm, 0.5 %/0.2° noise)
#: are off by up to 12 % in μa and 10 % in μs′ with data SDs of 1–3 %; with this term 90–97 %
#: of the copies lie within 2 SD on three distance sets (tests/calibration/test_fit_fd_recovery.py).
DIFFUSION_FD_ERROR = (0.012, 0.012, 0.3)
#: Diffusion needs the nearest distance to be this many transport lengths.  # common practice, no source
DIFFUSION_MIN_TRANSPORT_LENGTHS = 5.0
_GRID_MUA = np.geomspace(2e-4, 0.3, 10)
_GRID_MUSP = np.geomspace(0.2, 5.0, 10)


@dataclass(frozen=True)
class FrequencyDomainFit(FitResult):
    """A :class:`FitResult` of an fd measurement.

    Attributes (besides FitResult's)
    --------------------------------
    phase_offset_deg, phase_offset_sd_deg : ndarray (W, F) or None [degrees]
        The fitted system phase (None when the sidecar gave it) and its SD (the data's, through
        μa and μs′ too; :func:`~phantomlab.calibration.fit_quality.assess_fit` scales it by
        the misfit and adds ``phase_offset_model_sd_deg``; :mod:`~phantomlab.calibration.fd_offsets`).
    phase_offset_model_sd_deg : ndarray (W, F) or None [degrees]
        The part of the offset's SD from the model's own error (the lookup's, diffusion's).
    amplitude_scale_factor : ndarray (W, F) or None
        Fitted scale of a relative amplitude (data = factor · model).
    curves : dict
        ``rho_mm``, ``frequency_mhz``, ``amplitude``, ``phase_deg`` (data, offsets removed),
        ``model_amplitude``, ``model_phase_deg`` (W, R, F): for the plots (not in the JSON).
    """

    phase_offset_deg: np.ndarray | None = None
    phase_offset_sd_deg: np.ndarray | None = None
    phase_offset_model_sd_deg: np.ndarray | None = None
    amplitude_scale_factor: np.ndarray | None = None
    curves: dict = field(default_factory=dict, compare=False)

    def to_json(self) -> dict[str, Any]:
        """FitResult's keys plus ``phase_offset_deg`` (W, F) when it was fitted and
        ``amplitude_scale_factor`` (W, F: data = factor · model) for a relative amplitude."""
        payload = super().to_json()
        if self.amplitude_scale_factor is not None:
            payload.update(to_jsonable({"amplitude_scale_factor": self.amplitude_scale_factor,
                                        "frequency_mhz": self.curves.get("frequency_mhz")}))
        if self.phase_offset_deg is not None:
            payload.update(to_jsonable({"phase_offset_deg": self.phase_offset_deg,
                                        "phase_offset_sd_deg": self.phase_offset_sd_deg,
                                        "frequency_mhz": self.curves.get("frequency_mhz")}))
        return payload


def fd_forward(*, model: str, rho_mm, frequency_mhz, n: float, n_outside: float = 1.0, baseline=None):
    """``forward(mua (N,), musp (N,)) -> (ln amplitude, phase lag [rad])``, each (N, R, F)."""
    rho = np.asarray(rho_mm, float)
    freq = np.asarray(frequency_mhz, float)
    grid_rho = np.broadcast_to(rho[:, None], (rho.size, freq.size))
    grid_f = np.broadcast_to(freq[None, :], (rho.size, freq.size))
    v = SPEED_OF_LIGHT_MM_PER_PS / float(n)
    omega = 2 * math.pi * grid_f * 1e-6

    def reference(mua, musp):
        """Im(k) r₁ of the diffusion wave (D = 1/(3μs′)): the unwrapping reference [rad]."""
        d = 1.0 / (3.0 * musp)[:, None, None]
        k = np.sqrt((mua[:, None, None] + 1j * omega[None] / v) / d)
        r1 = np.sqrt(grid_rho[None] ** 2 + (1.0 / musp)[:, None, None] ** 2)
        return np.imag(k) * r1

    if model == "mc":
        from phantomlab.calibration.fit_srdr import check_baseline_indices
        from phantomlab.calibration.mc_lookup_time import time_resolved_lookup

        if baseline is None:
            raise InputError("fd model 'mc' needs a Monte Carlo baseline (--baseline FILE)")
        check_baseline_indices(baseline, n=n, n_outside=n_outside)
        lookup = time_resolved_lookup(baseline)

        def complex_value(mua, musp):
            mus = musp / (1.0 - lookup.g)
            out = lookup.frequency_domain(mua_per_mm=mua, mus_per_mm=mus, rho_mm=grid_rho.ravel(),
                                          frequency_mhz=grid_f.ravel())
            return out.reshape(mua.size, rho.size, freq.size)
    elif model in ("kienle1997", "contini1997"):
        from phantomlab.transport.frequency_domain import frequency_domain_reflectance

        def complex_value(mua, musp):
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PhantomlabWarning)
                return frequency_domain_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=grid_rho,
                                                    frequency_mhz=grid_f, n=n, n_outside=n_outside, model=model)
    else:
        raise InputError(f"unknown fd fit model {model!r}; accepted: {', '.join(FD_FIT_MODELS)}")

    def forward(mua, musp):
        mua = np.atleast_1d(np.asarray(mua, float))
        musp = np.atleast_1d(np.asarray(musp, float))
        value = complex_value(mua, musp)
        ref = reference(mua, musp)
        with np.errstate(divide="ignore", invalid="ignore"):
            log_amplitude = np.log(np.abs(value))
        lag = ref - np.angle(value * np.exp(1j * ref))
        return log_amplitude, lag

    return forward


def slope_estimate_Fantini1994(*, rho_mm, frequency_mhz, amplitude, phase_deg, n: float):
    """μa and μs′ from the slopes of ln(ρ² AC) and φ against ρ (Fantini et al. 1994).

    For ρ ≫ 1/μeff the half-space diffusion solution gives ln(ρ² AC) = S_ac ρ + const and
    φ = S_φ ρ + const with (D = 1/(3(μa + μs′)))

        μa = (ω/(2v)) (S_φ/S_ac − S_ac/S_φ),     μs′ = (S_ac² − S_φ²)/(3μa) − μa,

    S_ac < 0 [1/mm], S_φ > 0 [rad/mm], v = c/n.  Each frequency gives one estimate; they are
    averaged.  A quick estimate: the slopes carry the near-source curvature of the real curves
    (a bias of some per cent at a few transport lengths), so no SD is claimed.

    Parameters
    ----------
    rho_mm : (R,) [mm];  frequency_mhz : (F,) [MHz]
    amplitude, phase_deg : (W, R, F)
    n : float

    Returns
    -------
    (ndarray (W,), ndarray (W,))
        μa and μs′ [1/mm] (NaN where the slopes give no physical answer).
    """
    rho = np.asarray(rho_mm, float)
    v = SPEED_OF_LIGHT_MM_PER_PS / float(n)
    W, R, F = amplitude.shape
    mua = np.full((W, F), np.nan)
    musp = np.full((W, F), np.nan)
    for w in range(W):
        for f in range(F):
            ok = np.isfinite(amplitude[w, :, f]) & np.isfinite(phase_deg[w, :, f])
            if ok.sum() < 2:
                continue
            s_ac = np.polyfit(rho[ok], np.log(rho[ok] ** 2 * amplitude[w, ok, f]), 1)[0]
            s_phi = np.polyfit(rho[ok], np.radians(phase_deg[w, ok, f]), 1)[0]
            omega = 2 * math.pi * frequency_mhz[f] * 1e-6
            if s_ac >= 0 or s_phi <= 0:
                continue
            a = (omega / (2 * v)) * (s_phi / s_ac - s_ac / s_phi)
            if a > 0:
                mua[w, f] = a
                musp[w, f] = (s_ac**2 - s_phi**2) / (3 * a) - a
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        return np.nanmean(mua, axis=1), np.nanmean(np.where(musp > 0, musp, np.nan), axis=1)


def fit_fd(measurement: FrequencyDomainMeasurement, *, model: str = "kienle1997", n: float | None = None,
           n_outside: float | None = None, baseline=None) -> FrequencyDomainFit:
    """Fit μa and μs′ to AC amplitude and phase at one or more distances and frequencies.

    Parameters
    ----------
    measurement : FrequencyDomainMeasurement
    model : {'kienle1997', 'contini1997', 'mc', 'fantini1994'}
    n, n_outside : float, optional
    baseline : Baseline, optional
        For ``model='mc'``.

    Returns
    -------
    FrequencyDomainFit
    """
    if not isinstance(measurement, FrequencyDomainMeasurement):
        raise InputError("fit_fd needs an fd measurement")
    if model not in FD_FIT_MODELS:
        raise InputError(f"unknown fd fit model {model!r}; accepted: {', '.join(FD_FIT_MODELS)}")
    meta = measurement.metadata
    n = meta.n if n is None else n
    if n is None:
        raise InputError("the fd fit needs the phantom's refractive index: give --n N or n = ... in the sidecar")
    n_outside = meta.n_outside if n_outside is None else n_outside
    rho, freq = measurement.rho_mm, measurement.frequency_mhz
    W, R, F = measurement.amplitude.shape
    relative = measurement.amplitude_scale == "relative"
    offset_known = measurement.phase_offset_deg is not None
    phase = measurement.phase_deg - (measurement.phase_offset_deg or 0.0)
    messages: list[str] = []
    if R < 2 and (relative or not offset_known):
        messages.append("one distance with a relative amplitude or an unknown phase offset: mua and musp rest on the "
                        "other quantity alone; measure at two or more distances")
    if model == "fantini1994":
        return _slope_fit(measurement, phase, n, messages)
    forward = fd_forward(model=model, rho_mm=rho, frequency_mhz=freq, n=n, n_outside=n_outside, baseline=baseline)
    log_amp = np.log(measurement.amplitude)
    lag = np.radians(phase)
    with_sd = measurement.amplitude_sd is not None
    sd_log = (measurement.amplitude_sd / measurement.amplitude) if with_sd else np.ones_like(log_amp)
    sd_lag = np.radians(measurement.phase_sd_deg) if with_sd else np.ones_like(lag)
    finite = np.isfinite(log_amp) & np.isfinite(lag)

    def solved(x_rows, rows):
        model_amp, model_lag = forward(np.exp(x_rows[:, 0]), np.exp(x_rows[:, 1]))
        wa, wl = finite[rows] / sd_log[rows] ** 2, finite[rows] / sd_lag[rows] ** 2
        if relative:  # ln scale per (wavelength, frequency), weighted mean over distances
            shift = np.nansum(wa * (log_amp[rows] - model_amp), axis=1) / np.maximum(np.sum(wa, axis=1), 1e-300)
            model_amp = model_amp + shift[:, None, :]
        else:
            shift = np.zeros((rows.size, F))
        if not offset_known:
            offset = np.nansum(wl * (lag[rows] - model_lag), axis=1) / np.maximum(np.sum(wl, axis=1), 1e-300)
            model_lag = model_lag + offset[:, None, :]
        else:
            offset = np.zeros((rows.size, F))
        return model_amp, model_lag, shift, offset

    def residual_fn(x_rows, rows):
        model_amp, model_lag, _, _ = solved(x_rows, rows)
        ra = np.where(finite[rows], (model_amp - np.nan_to_num(log_amp[rows])) / sd_log[rows], 0.0)
        rl = np.where(finite[rows], (model_lag - np.nan_to_num(lag[rows])) / sd_lag[rows], 0.0)
        return np.concatenate([ra.reshape(rows.size, -1), rl.reshape(rows.size, -1)], axis=1)

    if model == "mc":  # start from the diffusion fit's grid (cheap); the lookup refines from there
        diffusion = fd_forward(model="kienle1997", rho_mm=rho, frequency_mhz=freq, n=n, n_outside=n_outside)
        lookup_forward, forward = forward, diffusion
        x0 = _grid_start(residual_fn, W)
        forward = lookup_forward
    else:
        x0 = _grid_start(residual_fn, W)
    mask = np.concatenate([finite.reshape(W, -1), finite.reshape(W, -1)], axis=1)
    bounds = dict(lower=[np.log(1e-6), np.log(1e-3)], upper=[np.log(5.0), np.log(50.0)])
    outcome = fit_blocks(residual_fn, x0, mask=mask, row_aware=True, **bounds)
    nuisance = (F if relative else 0) + (0 if offset_known else F)
    dof = mask.sum(axis=1) - 2 - nuisance
    poor = (np.flatnonzero(far_worse_than_data_allow(outcome.chi2, dof)) if model == "mc" and with_sd
            else np.zeros(0, int))
    if poor.size:
        # the lookup's objective is rough: a row that stopped far worse than its data allow is
        # fitted again from the converged diffusion fit, and the better solution kept
        def on_poor(x_rows, rows):
            return residual_fn(x_rows, poor[rows])

        forward = diffusion
        smooth = fit_blocks(on_poor, outcome.x[poor], mask=mask[poor], row_aware=True, **bounds)
        forward = lookup_forward
        again = fit_blocks(on_poor, smooth.x, mask=mask[poor], row_aware=True, **bounds)
        better = np.flatnonzero(again.chi2 < outcome.chi2[poor])
        outcome = with_rows(outcome, poor[better], again, better)
    chi2 = np.nansum(outcome.residuals**2, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        chi2_w = np.where(dof > 0, chi2 / np.maximum(dof, 1), np.nan)
    # a solution on a step of the model (the lookup's reach where its photons end): the SD from the
    # smooth side (across the step the difference claimed μs′ SDs of 0.01–0.02 % at μs′/μa 10)
    jacobian, covariance, stepped = off_step_covariance(residual_fn, outcome, mask)
    messages += step_warnings(wavelength_nm=measurement.wavelength_nm, stepped=stepped, names=["mua", "musp"],
                              lookup=model == "mc")
    if not with_sd:  # SDs from the scatter about the model
        covariance = covariance * np.where(np.isfinite(chi2_w), chi2_w, np.inf)[:, None, None]
    model_in_data = None  # the model's own error in ln amplitude and phase, per wavelength
    if model == "mc" and with_sd:
        from_lookup, model_in_data = _lookup_covariance(jacobian, outcome.x, mask, rho, freq, sd_log, sd_lag, baseline)
        covariance = covariance + from_lookup
    values, cov = log_to_linear(outcome.x, covariance)
    mua, musp = values[:, 0], values[:, 1]
    every = np.arange(W)
    model_amp, model_lag, shift, offset = solved(outcome.x, every)
    model_covariance = None
    if model in ("kienle1997", "contini1997") and with_sd:
        # the phase error as a fraction of the fitted phase, system offset included (as set)
        shape_cov, model_in_data = _diffusion_covariance(jacobian, mask, rho, np.abs(model_lag), sd_log, sd_lag)
        model_covariance = values[:, :, None] * shape_cov * values[:, None, :]
    if model == "mc":
        _check_lookup_reach(baseline, mua, musp, rho, measurement.wavelength_nm)
    sds = np.sqrt(np.diagonal(cov, axis1=1, axis2=2))
    offset_sd = offset_model_sd = None
    if not offset_known:  # their own scatter when no SDs
        offset_sd, offset_model_sd = phase_offset_sds(
            forward, outcome.x, jacobian, mask, finite, sd_log, sd_lag, model_in_data,
            scatter=None if with_sd else np.where(np.isfinite(chi2_w), chi2_w, np.nan))
    total_dof = float(dof[dof > 0].sum())
    chi2_all = float(chi2[dof > 0].sum() / total_dof) if total_dof > 0 else float("nan")
    with np.errstate(invalid="ignore", divide="ignore"):
        correlation = cov[:, 0, 1] / (sds[:, 0] * sds[:, 1])
    messages += _range_warnings(measurement, model, mua, musp)
    messages += outcome_warnings(wavelength_nm=measurement.wavelength_nm, mua_per_mm=mua, musp_per_mm=musp,
                                 mua_sd_per_mm=sds[:, 0], musp_sd_per_mm=sds[:, 1], correlation=correlation)
    messages = list(dict.fromkeys(messages))
    for message in messages:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    label = "mc-lookup" if model == "mc" else f"diffusion-{model}"
    residuals = outcome.residuals.reshape(W, 2, R, F)
    return FrequencyDomainFit(
        kind="fd", model=label, wavelength_nm=measurement.wavelength_nm, mua_per_mm=mua, musp_per_mm=musp,
        mua_sd_per_mm=sds[:, 0], musp_sd_per_mm=sds[:, 1], covariance=cov,
        chi2_red=chi2_all if with_sd else float("nan"), chi2_red_per_wavelength=chi2_w if with_sd else np.full(W, np.nan),
        residuals=residuals, warnings=tuple(messages), source=measurement.source, name=measurement.name,
        replicates=measurement.replicates, dof=total_dof if (with_sd and total_dof > 0) else float("nan"),
        model_covariance=model_covariance, amplitude_scale_factor=np.exp(shift) if relative else None,
        parameters={"amplitude": measurement.amplitude_scale},
        phase_offset_deg=None if offset_known else np.degrees(offset),
        phase_offset_sd_deg=None if offset_known else np.degrees(offset_sd),
        phase_offset_model_sd_deg=None if offset_known else np.degrees(offset_model_sd),
        curves={"rho_mm": rho, "frequency_mhz": freq, "amplitude": measurement.amplitude / (
                    np.exp(shift)[:, None, :] if relative else 1.0),
                "phase_deg": phase - (np.degrees(offset)[:, None, :] if not offset_known else 0.0),
                "model_amplitude": np.exp(model_amp) / (np.exp(shift)[:, None, :] if relative else 1.0),
                "model_phase_deg": np.degrees(model_lag) - (np.degrees(offset)[:, None, :] if not offset_known else 0.0)},
    )


def _diffusion_covariance(jac, mask, rho, lag, sd_log, sd_lag) -> tuple[np.ndarray, list]:
    """Covariance of (log μa, log μs′) from diffusion's own error against Monte Carlo, (W, 2, 2),
    and per wavelength that error's covariance in ln amplitude and phase [rad], (2RF, 2RF).

    An empirical error model (:data:`DIFFUSION_FD_ERROR`): ln amplitude off by σ_A and the
    phase by a fraction σ_φ of itself, fully correlated across the frequencies of a distance
    and across distances as a Gaussian in ln ρ of width h; propagated as δx = −(JᵀJ)⁻¹Jᵀ δr
    (scales and phase offsets re-projected inside J; ``jac`` (W, M, 2) the fit's own, at the
    solution), as the lookup's noise is.
    """
    from phantomlab.calibration.fitting import propagated_error_covariance

    amp_error, phase_error, width = DIFFUSION_FD_ERROR
    W = jac.shape[0]
    F = lag.shape[-1]
    log_rho = np.log(rho)
    corr_rho = np.exp(-((log_rho[:, None] - log_rho[None, :]) ** 2) / (4 * width**2))
    block = np.kron(corr_rho, np.ones((F, F)))
    corr = np.block([[block, np.zeros_like(block)], [np.zeros_like(block), block]])
    out = np.zeros((W, 2, 2))
    in_data = []
    for w in range(W):
        raw = np.nan_to_num(np.concatenate([np.full(lag[w].size, amp_error), (phase_error * lag[w]).ravel()]))
        in_data.append(raw[:, None] * corr * raw[None, :])
        e = raw / np.concatenate([np.ravel(sd_log[w]), np.ravel(sd_lag[w])])
        m = mask[w]
        out[w] = propagated_error_covariance(jac[w][m], np.nan_to_num(e[m]), corr[np.ix_(m, m)])
    return out, in_data


def _lookup_covariance(jac, x, mask, rho, freq, sd_log, sd_lag, baseline) -> tuple[np.ndarray, list]:
    """Covariance of (log μa, log μs′) from the Monte Carlo lookup's own error, (W, 2, 2), and
    per wavelength that error's covariance in ln amplitude and phase [rad], (2RF, 2RF).

    Each distance's transform integrates the lookup over the whole curve: the covariance of
    its error in ln amplitude and phase over every distance and frequency comes from
    :meth:`~phantomlab.calibration.mc_lookup_time.TimeResolvedLookup.transform_error_covariance`
    (photon noise and smoothing bias, correlated along the curve and across distances as the
    smoothing kernels overlap), and is propagated as δx = −(JᵀJ)⁻¹Jᵀ δr (scales and phase
    offsets re-projected inside J; ``jac`` (W, M, 2) the fit's own, at the solution ``x``).
    """
    from phantomlab.calibration.fitting import propagated_error_covariance
    from phantomlab.calibration.mc_lookup_time import time_resolved_lookup

    lookup = time_resolved_lookup(baseline)
    W = x.shape[0]
    out = np.zeros((W, 2, 2))
    in_data = []
    for w in range(W):
        mua, mus = math.exp(x[w, 0]), math.exp(x[w, 1]) / (1.0 - lookup.g)
        covariance = lookup.transform_error_covariance(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho, frequency_mhz=freq)
        in_data.append(covariance)
        scale = np.concatenate([np.ravel(sd_log[w]), np.ravel(sd_lag[w])])  # the residuals' units
        size = np.sqrt(np.clip(np.diag(covariance), 0.0, None))
        with np.errstate(invalid="ignore", divide="ignore"):
            corr = np.where(np.outer(size, size) > 0, covariance / np.outer(size, size), 0.0)
        m = mask[w]
        out[w] = propagated_error_covariance(jac[w][m], (size / scale)[m], corr[np.ix_(m, m)])
    return out, in_data


#: Largest response-weighted relative SD of the lookup over a curve for the fd lookup to
#: serve that distance (the transform integrates the whole curve; at 5 % the lookup alone
#: would move ln amplitude by 0.05).  Chosen, common practice, no source.
FD_SERVED_MAX_RELATIVE_SD = 0.05


def _check_lookup_reach(baseline, mua, musp, rho, wavelength_nm) -> None:
    """Refuse (LookupReachError) a fit whose distances the lookup's photons do not serve at the fitted optics."""
    from phantomlab.calibration.mc_lookup_time import LookupReachError, time_resolved_lookup

    lookup = time_resolved_lookup(baseline)
    for w in range(mua.size):
        mus = float(musp[w]) / (1.0 - lookup.g)
        rel = lookup.curve_relative_sd(mua_per_mm=float(mua[w]), mus_per_mm=mus, rho_mm=rho)
        far = (rho * mus > lookup.u_max) | ~(rel <= FD_SERVED_MAX_RELATIVE_SD)
        if np.any(far):
            r = int(np.flatnonzero(far)[0])
            raise LookupReachError(
                f"at {float(wavelength_nm[w]):g} nm and {float(rho[r]):g} mm its photons give the curve a "
                f"relative error of {float(rel[r]):.2g} (at most {FD_SERVED_MAX_RELATIVE_SD:g} served)")


def _grid_start(residual_fn, W: int) -> np.ndarray:
    """The (μa, μs′) of a log grid with the smallest χ², per wavelength."""
    mua_g = np.repeat(_GRID_MUA, _GRID_MUSP.size)
    musp_g = np.tile(_GRID_MUSP, _GRID_MUA.size)
    grid = np.log(np.stack([mua_g, musp_g], axis=1))
    x0 = np.empty((W, 2))
    for w in range(W):
        rows = np.full(grid.shape[0], w)
        r = residual_fn(grid, rows)
        chi2 = np.where(np.all(np.isfinite(r), axis=1), np.sum(r**2, axis=1), np.inf)
        x0[w] = grid[int(np.argmin(chi2))]
    return x0


def _slope_fit(measurement, phase, n, messages) -> FrequencyDomainFit:
    if measurement.rho_mm.size < 2:
        raise InputError("the slope method (fantini1994) needs at least two distances")
    W = measurement.wavelength_nm.size
    mua, musp = slope_estimate_Fantini1994(rho_mm=measurement.rho_mm, frequency_mhz=measurement.frequency_mhz,
                                           amplitude=measurement.amplitude, phase_deg=phase, n=n)
    messages = list(messages) + [
        "multi-distance slope method (fantini1994): a quick estimate without SDs; it ignores the curvature of "
        "ln(rho^2 AC) near the source (some per cent); fit kienle1997 or mc for values with SDs"]
    for message in messages:
        warnings.warn(message, PhantomlabWarning, stacklevel=3)
    nan = np.full(W, np.nan)
    return FrequencyDomainFit(
        kind="fd", model="slope-fantini1994", wavelength_nm=measurement.wavelength_nm, mua_per_mm=mua,
        musp_per_mm=musp, mua_sd_per_mm=nan, musp_sd_per_mm=nan.copy(), covariance=np.full((W, 2, 2), np.nan),
        chi2_red=float("nan"), chi2_red_per_wavelength=nan.copy(), residuals=np.full((W, 0), np.nan),
        warnings=tuple(dict.fromkeys(messages)), source=measurement.source, name=measurement.name,
        replicates=measurement.replicates, parameters={"amplitude": measurement.amplitude_scale},
        curves={"rho_mm": measurement.rho_mm, "frequency_mhz": measurement.frequency_mhz,
                "amplitude": measurement.amplitude, "phase_deg": phase},
    )


def _range_warnings(measurement, model, mua, musp) -> list[str]:
    messages = []
    wl = measurement.wavelength_nm
    if model in ("kienle1997", "contini1997"):
        lengths = float(np.min(measurement.rho_mm)) * musp
        near = lengths < DIFFUSION_MIN_TRANSPORT_LENGTHS
        if np.any(near):
            messages.append(f"distance short for diffusion at {_bands(wl, near)}: rho*musp = {np.nanmin(lengths):.3g} "
                            f"transport lengths, wanted >= {DIFFUSION_MIN_TRANSPORT_LENGTHS:g}; use the Monte Carlo "
                            "lookup (model mc)")
        from phantomlab.transport.diffusion_validity import MIN_MUSP_TO_MUA_RATIO

        with np.errstate(divide="ignore", invalid="ignore"):
            ratio = musp / mua
        low = ratio < MIN_MUSP_TO_MUA_RATIO
        if np.any(low):
            messages.append(f"diffusion is poor unless musp >> mua: musp/mua = {np.nanmin(ratio):.3g} at "
                            f"{_bands(wl, low)}, wanted >= {MIN_MUSP_TO_MUA_RATIO:g}")
    return messages
