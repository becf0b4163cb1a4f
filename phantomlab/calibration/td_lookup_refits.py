"""The lookup's photon noise carried to a td fit's parameters by refits (layer 3).

Where the IRF is wider than the curve's rise, t0 and μs′ trade along a long, curved valley of
χ², and a small error in the model's rise moves the solution far along it and not in
proportion: the linear sandwich of
:func:`~phantomlab.calibration.td_model_errors.model_error_covariance` then misjudges the
lookup's share of the SDs (averaged over the IRF's width it claimed too little: two of four
independent quarter lookups lay 7–10 SD off; unaveraged, it claimed 10–75 times the spread of
fits by independent lookups of Poisson copies).  Here the share is found by doing what the
error does (a parametric bootstrap of the model error; Efron B, Tibshirani RJ 1993, *An
Introduction to the Bootstrap*, ch. 6):

1. For each curve draw ``draws`` relative model errors δ_d(ln τ) from the lookup's own error
   model: SD σ(τ) (``relative_sd``) and a Gaussian correlation in ln τ whose width h(τ)
   (``bandwidth_at``) follows the smoothing kernel, with the non-stationary kernel of Gibbs
   (1997) that the linear propagation uses, ρ(τ₁, τ₂) = √(2h₁h₂/(h₁² + h₂²))
   exp(−(ln τ₁ − ln τ₂)²/(2(h₁² + h₂²))).  They are drawn at the fitted μs′ on a grid in ln τ
   (the response's own times, before the IRF) and held fixed in τ.
2. Refit the same counts (the same Poisson weights) with the model R(τ)(1 + δ_d(τ)), from the
   solution, every draw at once.
3. The covariance is the mean of (x_d − x̂)(x_d − x̂)ᵀ over the draws (x in the fit's own
   parameters, log μa, log μs′ and the t0s): about the fit, not the draws' mean, so a shift
   of the solution that the errors cause on average counts too.

The draws use a fixed seed: the same data give the same SDs.  With 24 draws the SD itself is
known to about ±15 % (1/√(2·24)).

Measured (quarters of the 10-million-photon baseline, each fitting Poisson copies of the
independent gated run; μs′/μa 10–20, 10–13 mm, IRF 200–300 ps, 10⁵–10⁶ counts at the peak):
92–100 % of errors within 2 SD per case, 95–98 % over all, z rms 0.76–0.88; the median SD
0.4–4 times the rms error.  A fit that stops on a step of its model sticks there when
refitted; fit_td keeps the linear share unaveraged for it, and says it stopped on a step.  The
lookup had such a step where a distance's first photons begin (the response jumped from 0 to
2–8 % of its peak): there that share read 35 % against a spread of 0.8 % (10 M baseline,
μs′/μa 10, 12 mm, IRF 200 ps).  Its light now rises over a ramp there
(:func:`~phantomlab.calibration.mc_lookup_time_table.front_ramp`); measured again on quarters of
the 10 M baseline (μs′/μa 10–15, 10–12 mm, IRF 200–300 ps, 6 copies a quarter) no fit stops on
a step, 92–100 % of errors lie within 2 SD, and at μs′/μa 15, 12 mm, IRF 250 ps the median SD
is 2.5 % against errors of 1.7 % rms (38 % with the step).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from phantomlab.calibration.fitting import fit_blocks

__all__ = ["REFIT_DRAWS", "noise_fields", "PerturbedShape", "refit_covariance"]

#: Draws of the lookup's error per curve (each a refit of the curve).
REFIT_DRAWS = 24
#: Nodes of the grid in ln τ the draws are made on (spacing ≈ 0.02 over 1 ps to 5 ns, well
#: inside the narrowest correlation width the lookups give, about 0.1).
GRID_NODES = 384
_SEED = 14_2026


def noise_fields(relative_sd: Callable, bandwidth_at: Callable, default_bandwidth: float, *,
                 musp_per_mm: np.ndarray, rho_mm: np.ndarray, log_tau: np.ndarray, draws: int,
                 rng: np.random.Generator) -> np.ndarray:
    """Relative model errors δ (N, draws, G) of N curves on the grid ``log_tau`` (G,) [ln ps].

    ``relative_sd`` and ``bandwidth_at`` take ``(musp (N,), rho (N,), times (N, L))``, as a
    lookup's curve model carries them (:func:`~phantomlab.calibration.td_models.td_curve_model`).
    σ is capped at 1 (where the lookup holds few photons the response is nearly nil).
    """
    N, G = musp_per_mm.size, log_tau.size
    times = np.broadcast_to(np.exp(log_tau), (N, G))
    with np.errstate(invalid="ignore", divide="ignore"):
        sigma = np.asarray(relative_sd(musp_per_mm, rho_mm, times), dtype=float)
        width = np.asarray(bandwidth_at(musp_per_mm, rho_mm, times), dtype=float)
    sigma = np.clip(np.where(np.isfinite(sigma), sigma, 1.0), 0.0, 1.0)
    width = np.where(np.isfinite(width) & (width > 0), width, default_bandwidth)
    gap = (log_tau[:, None] - log_tau[None, :]) ** 2
    out = np.empty((N, draws, G))
    for k in range(N):
        h = width[k]
        pair = h[:, None] ** 2 + h[None, :] ** 2
        covariance = sigma[k][:, None] * sigma[k][None, :] * np.sqrt(2 * h[:, None] * h[None, :] / pair) \
            * np.exp(-gap / (2 * pair))
        values, vectors = np.linalg.eigh(covariance)
        root = vectors * np.sqrt(np.clip(values, 0.0, None))
        out[k] = (root @ rng.standard_normal((G, draws))).T
    return out


class PerturbedShape:
    """A curve model times (1 + δ(ln τ)) with one δ per row of the times it is called with.

    ``fields`` (N, G) on a uniform grid in ln τ starting at ``log_tau_start`` with step
    ``log_tau_step``; linear in between, 0 outside; the product is kept ≥ 0.
    """

    def __init__(self, shape: Callable, fields: np.ndarray, log_tau_start: float, log_tau_step: float):
        self.shape, self.fields = shape, fields
        self.start, self.step = log_tau_start, log_tau_step

    def __call__(self, mua, musp, rho, times):
        base = self.shape(mua, musp, rho, times)
        G = self.fields.shape[1]
        with np.errstate(divide="ignore", invalid="ignore"):
            position = (np.log(np.maximum(times, 1e-300)) - self.start) / self.step
        inside = (position >= 0) & (position <= G - 1)
        low = np.clip(np.floor(position), 0, G - 2).astype(np.int64)
        fraction = np.clip(position - low, 0.0, 1.0)
        rows = np.broadcast_to(self.fields, (times.shape[0], G))
        delta = (np.take_along_axis(rows, low, axis=1) * (1 - fraction)
                 + np.take_along_axis(rows, low + 1, axis=1) * fraction)
        return base * np.maximum(1.0 + np.where(inside, delta, 0.0), 0.0)


def refit_covariance(residual: Callable, shape, *, x: np.ndarray, rows: np.ndarray, curves_per_row: int,
                     musp_per_mm: np.ndarray, rho_mm: np.ndarray, tau_range_ps: tuple[float, float],
                     mask: np.ndarray, lower: np.ndarray, upper: np.ndarray, tolerance: float,
                     step_tolerance: float, draws: int = REFIT_DRAWS) -> np.ndarray:
    """Covariance (len(rows), P, P) of the fit's parameters from the lookup's noise, by refits.

    Parameters
    ----------
    residual : callable
        ``residual(x_rows (V, P), curves (V, R), model)`` gives the normalised residuals
        (V, M) of those curves' measured counts fitted by ``model`` (the fit's own IRFs,
        backgrounds, windows and weights).
    shape : callable
        The lookup's curve model, with ``relative_sd``, ``bandwidth_at``, ``default_bandwidth``.
    x : ndarray (W, P)
        The fit's solution (log μa, log μs′, t0s).
    rows : ndarray of int
        The wavelengths to refit.
    curves_per_row : int
        R, the distances of a wavelength (curve index = row·R + r).
    musp_per_mm, rho_mm : ndarray (W·R,)
        Each curve's fitted μs′ [1/mm] and distance [mm].
    tau_range_ps : (float, float) [ps]
        Delays the model is evaluated at (the grid spans them).
    mask, lower, upper, tolerance, step_tolerance
        As for :func:`~phantomlab.calibration.fitting.fit_blocks` (mask (W, M)).
    """
    R = curves_per_row
    rows = np.asarray(rows, dtype=np.int64)
    curves = (rows[:, None] * R + np.arange(R)[None, :]).ravel()
    log_tau = np.linspace(np.log(max(tau_range_ps[0], 1e-3)), np.log(tau_range_ps[1]), GRID_NODES)
    fields = noise_fields(shape.relative_sd, shape.bandwidth_at, shape.default_bandwidth,
                          musp_per_mm=musp_per_mm[curves], rho_mm=rho_mm[curves], log_tau=log_tau, draws=draws,
                          rng=np.random.default_rng(_SEED))  # (rows·R, D, G)
    G = log_tau.size
    # virtual rows: each wavelength once per draw; their curves and fields in (V, R) order
    owner = np.repeat(rows, draws)
    virtual_curves = owner[:, None] * R + np.arange(R)[None, :]
    virtual_fields = fields.reshape(rows.size, R, draws, G).transpose(0, 2, 1, 3).reshape(rows.size * draws, R, G)
    step = float(log_tau[1] - log_tau[0])

    def residual_fn(x_rows, which):
        model = PerturbedShape(shape, virtual_fields[which].reshape(-1, G), float(log_tau[0]), step)
        return residual(x_rows, virtual_curves[which], model)

    outcome = fit_blocks(residual_fn, x[owner], mask=mask[owner], lower=lower, upper=upper, row_aware=True,
                         tolerance=tolerance, step_tolerance=step_tolerance)
    delta = (outcome.x - x[owner]).reshape(rows.size, draws, -1)
    return np.einsum("wdp,wdq->wpq", delta, delta) / draws
