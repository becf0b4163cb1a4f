"""SDs of the system phase offsets an fd fit estimates beside μa and μs′ (layer 3).

An fd fit with no ``phase_offset_deg`` in the sidecar solves, at every (μa, μs′), one phase
offset per wavelength and frequency: the weighted mean over distances of data minus model
(:func:`~phantomlab.calibration.fit_fd.fit_fd`, variable projection).  Its SD is therefore not
only that of a mean of the phase data: the offset moves with μa and μs′ (the model's phase
at every distance changes with them), and the model's own error (the Monte Carlo lookup's, or
diffusion's) enters it directly when it is common to the distances.

Linearised at the fit, a perturbation d of the data (ln amplitude and phase [rad] at every
distance and frequency) moves the parameters by δx = (JᵀJ)⁻¹Jᵀ (d/σ) (J the fit's projected
Jacobian in residual units, σ the data SDs) and the offset at frequency f by

    δo_f = Σ_ρ w̃_ρf d_lag,ρf − G_f δx,     G_f = Σ_ρ w̃_ρf ∂φ_model,ρf/∂x,

w̃ the normalised weights 1/σ_lag² over distances.  So Cov(o) = B (D + C) Bᵀ with B the map
above, D = diag(σ²) the data and C the model's error covariance in the same units.  Measured
before (the mean's own SD only): on the transform of an independent Monte Carlo run, 0.082°
where the copies spread by 0.15–0.36° (42–75 % within 2 SD with the lookup, 12–54 % with
diffusion; tests/calibration/test_fit_fd_recovery.py).
"""

from __future__ import annotations

import numpy as np

__all__ = ["phase_offset_sds"]

#: Step in ln μa, ln μs′ of the central differences of the model's phase.
_STEP = 1e-4


def phase_offset_sds(forward, x, jacobian, mask, finite, sd_log, sd_lag, model_in_data, *, scatter=None):
    """SDs [rad] of the fitted phase offsets, (W, F): from the data and from the model's error.

    Parameters
    ----------
    forward : callable
        ``forward(mua (W,), musp (W,)) -> (ln amplitude, phase lag [rad])``, each (W, R, F).
    x : ndarray (W, 2)
        ln μa, ln μs′ at the fit.
    jacobian : ndarray (W, M, 2)
        The fit's Jacobian of its residuals (M = 2RF: ln amplitude rows, then phase rows).
    mask : ndarray (W, M) bool
        Residuals used.
    finite : ndarray (W, R, F) bool
        Data present.
    sd_log, sd_lag : ndarray (W, R, F)
        The data SDs of ln amplitude and phase [rad] (ones when the file has none).
    model_in_data : list of ndarray (M, M) or None
        Per wavelength the model's error covariance in ln amplitude and phase [rad].
    scatter : ndarray (W,) or None
        When the file has no SDs: χ²ᵣ per wavelength, the data part's scale.

    Returns
    -------
    (ndarray (W, F), ndarray (W, F))
        The data's share (with ``scatter`` applied) and the model's share.
    """
    W, R, F = sd_lag.shape
    mua, musp = np.exp(x[:, 0]), np.exp(x[:, 1])
    slope = np.stack([(forward(mua * np.exp(_STEP), musp)[1] - forward(mua * np.exp(-_STEP), musp)[1]) / (2 * _STEP),
                      (forward(mua, musp * np.exp(_STEP))[1] - forward(mua, musp * np.exp(-_STEP))[1]) / (2 * _STEP)],
                     axis=-1)  # (W, R, F, 2)
    weight = np.where(finite, 1.0 / sd_lag**2, 0.0)
    weight = weight / np.maximum(weight.sum(axis=1, keepdims=True), 1e-300)  # over distances
    data_sd = np.full((W, F), np.nan)
    model_sd = np.zeros((W, F))
    for w in range(W):
        gain_f = np.einsum("rf,rfk->fk", weight[w], np.nan_to_num(slope[w]))  # (F, 2)
        used = mask[w]
        sigma = np.concatenate([np.ravel(sd_log[w]), np.ravel(sd_lag[w])])[used]
        j = jacobian[w][used]
        try:
            solve = np.linalg.solve(j.T @ j, j.T / sigma[None, :])  # δx per data change, (2, M')
        except np.linalg.LinAlgError:
            solve = np.linalg.pinv(j.T @ j) @ (j.T / sigma[None, :])
        direct = np.zeros((F, 2 * R * F))
        for f in range(F):
            direct[f, R * F + np.arange(R) * F + f] = weight[w, :, f]
        b = direct[:, used] - gain_f @ solve  # (F, M')
        data = np.einsum("fm,m,gm->fg", b, sigma**2, b).diagonal()
        if scatter is not None:
            data = data * scatter[w]
        data_sd[w] = np.sqrt(np.clip(data, 0.0, None))
        if model_in_data is not None:
            covariance = np.nan_to_num(model_in_data[w])[np.ix_(used, used)]
            model_sd[w] = np.sqrt(np.clip((b @ covariance @ b.T).diagonal(), 0.0, None))
    return data_sd, model_sd
