"""The model errors of a td fit and the lookup's limits (layer 3), for :mod:`~phantomlab.calibration.fit_td`.

* :func:`model_error_covariance` — a model error δμ of each bin (the Monte Carlo lookup's
  photon noise and smoothing bias, diffusion's or the slab model's shape error), correlated
  along a curve as Gaussian kernels in ln t overlap, carried to the fitted parameters by the
  fit's own Jacobian: δx = −(JᵀJ)⁻¹Jᵀ(δμ/σ) (linearised at the solution; the sandwich of
  :func:`~phantomlab.calibration.fitting.propagated_error_covariance`).
* :func:`lookup_noise_notes` — a note where the lookup's noise, not the counts, sets an SD.
* :func:`check_lookup_reach` — a lookup fit whose windows reach beyond its photons, refused.
* :func:`sparse_front_notes` — a warning where the lookup's earliest photons far out carry a
  strongly absorbed curve, where fits of independent data came out low beyond their SDs.
"""

from __future__ import annotations

import numpy as np

from phantomlab.calibration.identifiability import _bands

__all__ = ["LOOKUP_NOISE_NOTE_SD", "LOOKUP_NOISE_SHARE", "SPARSE_FRONT_U", "SPARSE_FRONT_RATIO", "lookup_noise_notes",
           "check_lookup_reach", "model_error_covariance", "sparse_front_notes", "DIFFUSION_DISAGREEMENT",
           "false_basin_notes"]


#: A note when the Monte Carlo lookup's own noise makes a fitted SD (relative) larger than
#: this and more than :data:`LOOKUP_NOISE_SHARE` times what the counts alone allow: the data
#: could say more than the baseline lets them (common practice, no source: the acceptance's
#: 3 % and a lookup variance three times the counts').
LOOKUP_NOISE_NOTE_SD = 0.03
LOOKUP_NOISE_SHARE = 2.0
#: The lookup's front far out: a strongly absorbed curve (μs′/μa at most
#: :data:`SPARSE_FRONT_RATIO`) at u = ρμs of at least this is read mostly from the baseline's
#: earliest photons far from the source, where they are few.  Measured there with the gated,
#: independent half-space run (tests/calibration/fixtures/mc_td_half_space_early.npz) and the
#: 10-million-photon baseline: from its expected counts (IRF 100 ps) μs′ −6.5 % (μa −1.8 %)
#: at μs′/μa 10, 14 mm (u = 79 from the fitted μs′, 84 from the true one) and −5.8 % at 15 mm;
#: from 12 Poisson copies μs′ −5.6 % at μs′/μa 15 and −3.6 to −4.7 % at 20 (14 mm, IRF
#: 100–150 ps), against SDs of 1.5–1.7 % (0–42 % of the copies within 2 SD); −1.2 % at
#: μs′/μa 30 (14 mm) and −0.8 % at 20 (15 mm), both covered; −1 to −2.4 % at 12–13 mm (u 71–77,
#: μs′/μa 10).  With the 2.3-million test baseline, at μs′/μa 10 and 15 mm, nine of ten
#: copies landed in a false basin at μs′ +60 % (lower χ² than the true one's).  The
#: smoothing's bias term does not reach that far.  u and μs′/μa are taken from the fitted values
#: (the ratio's limit 20 with a margin of 10 % for their own error).
SPARSE_FRONT_U = 78.0
SPARSE_FRONT_RATIO = 22.0


def lookup_noise_notes(wavelength_nm, from_counts, total) -> list[str]:
    """Notes where the lookup's own noise, not the counts, sets μa's or μs′'s SD (log-space covariances (W, P, P))."""
    notes = []
    for p, name in ((1, "musp"), (0, "mua")):
        counts_sd = np.sqrt(np.clip(from_counts[:, p, p], 0.0, None))
        total_sd = np.sqrt(np.clip(total[:, p, p], 0.0, None))
        mostly = np.isfinite(total_sd) & (total_sd > LOOKUP_NOISE_NOTE_SD) & (total_sd > LOOKUP_NOISE_SHARE * counts_sd)
        if mostly.any():
            worst = int(np.flatnonzero(mostly)[np.argmax(total_sd[mostly])])
            notes.append(f"at {_bands(wavelength_nm, mostly)} the SD of {name} (up to {100 * total_sd[worst]:.2g} %) is "
                         f"mostly the Monte Carlo lookup's own photon noise (the counts alone allow "
                         f"{100 * counts_sd[worst]:.2g} %): a baseline with more photons narrows it (command line: "
                         "phantomlab baseline build OUT.npz ... --photons P, then fit with --baseline OUT.npz; page: "
                         "'Use a baseline file of this workspace', then 'Build the baseline' with more photons)")
    return notes


def sparse_front_notes(wavelength_nm, rho_mm, mua_per_mm, musp_per_mm, g) -> list[str]:
    """A warning where a strongly absorbed curve lies at u = ρμs ≥ :data:`SPARSE_FRONT_U` (see there).

    ``rho_mm`` (R,) [mm]; ``mua_per_mm``, ``musp_per_mm`` (W,) [1/mm] the fitted values; g the
    lookup's anisotropy (μs = μs′/(1 − g)).
    """
    rho = np.asarray(rho_mm, float)
    musp, mua = np.asarray(musp_per_mm, float), np.asarray(mua_per_mm, float)
    far = rho.max() * musp / (1.0 - g) >= SPARSE_FRONT_U
    with np.errstate(divide="ignore", invalid="ignore"):
        strong = musp / mua <= SPARSE_FRONT_RATIO
    flagged = far & strong
    if not flagged.any():
        return []
    reach = SPARSE_FRONT_U * (1.0 - g) / musp[flagged].max()
    return [f"at {_bands(wavelength_nm, flagged)} a strongly absorbed curve (musp/mua at most {SPARSE_FRONT_RATIO:g}) "
            f"lies far out (rho*mus {rho.max() * musp[flagged].max() / (1.0 - g):.0f}, above {SPARSE_FRONT_U:g}), where "
            "the Monte Carlo lookup reads few early photons: on independent Monte Carlo data musp came out up to "
            "7 % low there (mua 2 %), beyond its SD, and with a smaller baseline it could land far off (+60 %); "
            f"fit the distances up to {reach:.3g} mm where you have them"]


#: A lookup fit whose μs′ lies more than this factor from that of the smooth diffusion model
#: (kienle1997, fitted to the same counts from the same start) has most likely settled in a
#: false basin of the lookup's objective.  Measured on Poisson copies of the independent runs
#: (tests/calibration/fixtures, quarters of the 10-million-photon baseline, μs′/μa 10–1000,
#: 10–20 mm, IRF 100–300 ps): 1.0–1.55 where the fit was right (diffusion reads μs′ low on
#: strongly absorbed curves), 4.2 for a copy at μs′ +238 % (μs′/μa 10, 11 mm, IRF 300 ps,
#: whose SD read 5 %) and 2.4 at +60 % (15 mm, the 2.3-million test baseline).
DIFFUSION_DISAGREEMENT = 2.0


def false_basin_notes(wavelength_nm, musp_lookup, musp_diffusion) -> list[str]:
    """A warning where the lookup's μs′ and diffusion's (W,) [1/mm] differ by more than the factor
    :data:`DIFFUSION_DISAGREEMENT`."""
    with np.errstate(divide="ignore", invalid="ignore"):
        log_ratio = np.log(np.asarray(musp_lookup, float) / np.asarray(musp_diffusion, float))
    off = np.isfinite(log_ratio) & (np.abs(log_ratio) > np.log(DIFFUSION_DISAGREEMENT))
    if not off.any():
        return []
    worst = float(np.exp(log_ratio[off][np.argmax(np.abs(log_ratio[off]))]))
    return [f"at {_bands(wavelength_nm, off)} the lookup's musp is {worst:.2g} times that of the diffusion model "
            "fitted to the same counts (kienle1997; on independent data 1.0-1.6 times): the fit has most likely "
            "settled in a false basin, which its SD does not show; more distances or a narrower IRF pin it, and "
            "--model kienle1997 shows the other answer"]


def check_lookup_reach(lookup, measurement, musp_fit, shifts_ps, windows, irf, irf_of_curve, R) -> None:
    """Refuse (LookupReachError) a lookup fit whose windows reach beyond the lookup's photons.

    The latest response time a curve's window needs is its last bin less the IRF's peak time
    and the fitted shift t0; :meth:`TimeResolvedLookup.serves` says whether the lookup holds
    enough photons there at the fitted μs.
    """
    from phantomlab.calibration.mc_lookup_time import SERVED_MAX_RELATIVE_SD, LookupReachError

    time = measurement.time_ps
    last = np.array([time[np.flatnonzero(row)[-1]] for row in windows])
    irf_peak = measurement.irf_time_ps[np.argmax(irf, axis=1)][irf_of_curve]
    latest = last - irf_peak - shifts_ps.ravel()
    mus = np.repeat(musp_fit, R) / (1.0 - lookup.g)
    rho = np.tile(measurement.rho_mm, musp_fit.size)
    served = lookup.serves(mus_per_mm=mus, rho_mm=rho, latest_time_ps=latest)
    if not np.all(served):
        c = int(np.flatnonzero(~served)[0])
        w, r = divmod(c, R)
        raise LookupReachError(
            f"at {measurement.wavelength_nm[w]:g} nm and {measurement.rho_mm[r]:g} mm the fit window reaches "
            f"{latest[c]:.0f} ps after the pulse, beyond what its photons cover (relative error at most "
            f"{SERVED_MAX_RELATIVE_SD:g}, {lookup.u_max / mus[c]:.3g} mm at most)")


def model_error_covariance(jac, mask, errors, log_delay, W, R, K) -> np.ndarray:
    """Covariance of the fitted parameters from model errors of each bin, (W, P, P).

    A model error δμ moves the normalised residuals by δμ/σ and the solution by
    δx = −(JᵀJ)⁻¹Jᵀ(δμ/σ) (linearised at the fit, the amplitudes re-projected inside J; J
    computed once for every term).  ``errors`` holds independent terms (e, h), each
    e_k = σ_rel,k μ_k / σ_k of shape (W·R, K), correlated between bins as Gaussian kernels of
    width h_k in ln t overlap:
    ρ_kl = √(2 h_k h_l/(h_k² + h_l²)) exp(−(ln τ_k − ln τ_l)²/(2 (h_k² + h_l²)))
    (a shift of u moves every bin of a curve together, so bins of one curve share the radial
    smoothing fully; curves are independent).  ``jac`` (W, M, P) is the fit's own Jacobian at
    the solution (:attr:`~phantomlab.calibration.fitting.BlockOutcome.jacobian`).
    """
    from phantomlab.calibration.fitting import propagated_error_covariance

    P = jac.shape[2]
    out = np.zeros((W, P, P))
    for w in range(W):
        m = mask[w]
        j = jac[w][m]
        lt = np.asarray(log_delay).reshape(W, R * K)[w][m]
        curve = np.repeat(np.arange(R), K)[m]
        same = curve[:, None] == curve[None, :]
        gap = (lt[:, None] - lt[None, :]) ** 2
        for relative_error, bandwidth in errors:
            e = np.asarray(relative_error).reshape(W, R * K)[w][m]
            h = np.asarray(bandwidth).reshape(W, R * K)[w][m]
            pair = h[:, None] ** 2 + h[None, :] ** 2
            corr = np.where(same, np.sqrt(2 * h[:, None] * h[None, :] / pair) * np.exp(-gap / (2 * pair)), 0.0)
            out[w] += propagated_error_covariance(j, e, corr)
    return out
