"""The observation model of the potency calibration and its posterior (layer 3).

Parameters: the potency ``p`` (level) of every stock lot, and for a lot with a spectral
correction (:mod:`phantomlab.recipe.spectral_potency`) its shape coefficients θ.  A batch b
with volume fractions ``f_i`` is predicted at wavelength λ as

    μa(λ)  = (1 − Σ f_i) μa_m(λ) + Σ_i f_i (c_i(λ) + a_i(λ) p_i hᵃ_i(λ; θ_i))
    μs′(λ) = Σ_i f_i s′_i(λ) p_i hˢ_i(λ; θ_i)

(h = 1 for an uncorrected lot; ``c_i`` the absorption of a stock's carrier, which the potency
does not scale; ``s′_i`` includes the batch's packing factor).  The model is linear in every p and in the Legendre
coefficients of an absorber, and mildly non-linear in a scatterer's Δb.  The posterior mode
under the normal prior of every parameter is found by Gauss–Newton on the prior-augmented
least-squares problem (Tarantola 2005, *Inverse Problem Theory*, SIAM, eq. 3.51), and its
covariance is that of the final linearisation (for the purely linear model the exact
conjugate posterior, Gelman et al. 2013, *Bayesian Data Analysis*, 3rd ed., sec. 14.2).

**Errors.**  All fitted values of one batch are treated together, with their covariance
(:mod:`phantomlab.calibration.potency_blocks`).

The reduced χ² divides by the degrees of freedom left after the data fitted the effective
number of parameters p_D = tr(Σ_post Σ_b J_bᵀ C_b⁻¹ J_b) (Spiegelhalter et al. 2002, J. R.
Stat. Soc. B 64:583, eq. 11 for a normal linear model).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from phantomlab.calibration.potency_blocks import Block, Part
from phantomlab.errors import InputError

__all__ = ["Extension", "SHAPE_PRIOR_SD", "ModelFit", "fit_model", "extension_slices"]

#: Prior SD of each shape coefficient.  Δb: power-law exponents of phantom scatterers lie
#: between about 0.5 and 2.5 and a wrong particle size moves b by a few tenths, so 0.5
#: admits that and more (common practice, no source).  r₁, r₂: a shape error of ±20 % across
#: the band is already a different absorber (common practice, no source).
SHAPE_PRIOR_SD = {"musp_power_law": (0.5,), "mua_legendre": (0.2, 0.2)}
_MAX_ITERATIONS = 30
_TOLERANCE = 1e-9


@dataclass(frozen=True)
class Extension:
    """A spectral correction of one lot in the model: kind, and where its shape is anchored."""

    ident: tuple  # (stock, lot)
    kind: str  # "musp_power_law" or "mua_legendre"
    reference_nm: float
    half_width_nm: float = 0.0

    @property
    def size(self) -> int:
        return len(SHAPE_PRIOR_SD[self.kind])


class _Layout:
    """Where each parameter lives in the vector θ = (p_1..p_K, shape coefficients...)."""

    def __init__(self, K: int, index: dict, extensions: Sequence[Extension]):
        self.K = K
        self.extension_of: dict[int, tuple[Extension, int]] = {}
        start = K
        for ext in extensions:
            k = index[ext.ident]
            if k in self.extension_of:
                raise InputError(f"two spectral corrections for stock {ext.ident[0]} lot {ext.ident[1]}")
            self.extension_of[k] = (ext, start)
            start += ext.size
        self.size = start


def _shape_and_derivatives(ext: Extension, theta: np.ndarray, wavelength: np.ndarray):
    """h(λ) and ∂h/∂θ_j (list of arrays) of one extension."""
    if ext.kind == "musp_power_law":
        x = np.log(wavelength / ext.reference_nm)
        h = np.exp(-theta[0] * x)
        return h, [-x * h]
    u = np.clip((wavelength - ext.reference_nm) / ext.half_width_nm, -1.0, 1.0)
    p2 = 0.5 * (3.0 * u * u - 1.0)
    return 1.0 + theta[0] * u + theta[1] * p2, [u, p2]


def _predict_part(part: Part, theta: np.ndarray, layout: _Layout):
    """Model (W, 2) without the matrix offset, and its Jacobian (W, 2, P)."""
    obs = part.obs
    W = obs.wavelength_nm.size
    model = np.zeros((W, 2))
    jac = np.zeros((W, 2, layout.size))
    f = obs.volume_fractions
    for s, k in enumerate(part.columns):
        base = [f[s] * obs.intrinsic_mua_per_mm[s], f[s] * obs.intrinsic_musp_per_mm[s]]
        shape = [np.ones(W), np.ones(W)]
        found = layout.extension_of.get(k)
        if found is not None:
            ext, start = found
            h, derivatives = _shape_and_derivatives(ext, theta[start:start + ext.size], obs.wavelength_nm)
            q = 0 if ext.kind == "mua_legendre" else 1
            for j, d in enumerate(derivatives):
                jac[:, q, start + j] += base[q] * theta[k] * d
            shape[q] = h
        for q in range(2):
            model[:, q] += base[q] * shape[q] * theta[k]
            jac[:, q, k] += base[q] * shape[q]
    return model, jac


def _predict_block(block: Block, theta: np.ndarray, layout: _Layout):
    models, jacs = [], []
    for p in block.parts:
        model, jac = _predict_part(p, theta, layout)
        models.append(model.reshape(-1))
        jacs.append(jac.reshape(-1, layout.size))
    return np.concatenate(models), np.concatenate(jacs)


@dataclass(frozen=True)
class ModelFit:
    """The posterior of one model (a set of extensions) on a set of blocks.

    Attributes
    ----------
    theta, covariance : ndarray (P,), (P, P)
        Posterior mode and covariance (not widened).
    prior_mean, prior_sd : ndarray (P,)
    chi2 : float
        Σ rᵀ C⁻¹ r of the data at the mode.
    count : int
        Number of weighted data values.
    effective_parameters : float
        p_D, the parameters the data fitted.
    shifts : list of ndarray (P,)
        Each block's exact share of θ − prior mean (final linearisation).
    information : list of ndarray (P, P)
        Each block's J_bᵀ C_b⁻¹ J_b.
    residuals : list of ndarray (n_b,)
        Data minus model of each block (stacked as in the block).
    """

    extensions: tuple
    theta: np.ndarray
    covariance: np.ndarray
    prior_mean: np.ndarray
    prior_sd: np.ndarray
    chi2: float
    count: int
    effective_parameters: float
    shifts: list = field(default_factory=list)
    information: list = field(default_factory=list)
    residuals: list = field(default_factory=list)
    blocks: list = field(default_factory=list)

    @property
    def dof(self) -> float:
        return self.count - self.effective_parameters

    @property
    def chi2_red(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")


def fit_model(priors, blocks: Sequence[Block], extensions: Sequence[Extension] = (),
              index: dict | None = None) -> ModelFit:
    """Posterior mode and covariance of the potencies (and shape coefficients) by Gauss–Newton.

    Parameters
    ----------
    priors : sequence of PotencyPrior
    blocks : sequence of Block
        From :func:`build_blocks` (same ``index``).
    extensions : sequence of Extension
        The spectral corrections in the model; each shape coefficient's prior is
        N(0, :data:`SHAPE_PRIOR_SD`).
    """
    index = index or {p.ident: k for k, p in enumerate(priors)}
    K = len(priors)
    layout = _Layout(K, index, extensions)
    P = layout.size
    mean = np.zeros(P)
    sd = np.ones(P)
    mean[:K] = [p.potency for p in priors]
    sd[:K] = [p.potency_sd for p in priors]
    for ext in extensions:
        start = layout.extension_of[index[ext.ident]][1]
        sd[start:start + ext.size] = SHAPE_PRIOR_SD[ext.kind]
    prior_precision = np.diag(1.0 / sd**2)
    theta = mean.copy()
    for _ in range(_MAX_ITERATIONS):
        precision = prior_precision.copy()
        gradient = prior_precision @ (mean - theta)
        for block in blocks:
            model, jac = _predict_block(block, theta, layout)
            cinv_jac = block.solve(jac)
            precision += jac.T @ cinv_jac
            gradient += cinv_jac.T @ (block.y - model)
        step = np.linalg.solve(precision, gradient)
        theta = theta + step
        if np.max(np.abs(step) / np.maximum(sd, 1e-12)) < _TOLERANCE:
            break
    information_total = np.zeros((P, P))
    pieces = []
    chi2 = 0.0
    for block in blocks:
        model, jac = _predict_block(block, theta, layout)
        residual = block.y - model
        cinv_jac = block.solve(jac)
        info = jac.T @ cinv_jac
        information_total += info
        chi2 += float(residual @ block.solve(residual))
        pieces.append((jac, cinv_jac, residual, info))
    covariance = np.linalg.inv(prior_precision + information_total)
    delta = theta - mean
    shifts = [covariance @ (cinv_jac.T @ (residual + jac @ delta)) for jac, cinv_jac, residual, _ in pieces]
    effective = float(np.trace(covariance @ information_total))
    return ModelFit(
        extensions=tuple(extensions), theta=theta, covariance=covariance, prior_mean=mean, prior_sd=sd,
        chi2=chi2, count=int(sum(b.count for b in blocks)), effective_parameters=effective, shifts=shifts,
        information=[info for *_rest, info in pieces], residuals=[res for _j, _c, res, _i in pieces],
        blocks=list(blocks),
    )


def extension_slices(fit: ModelFit, index: dict) -> dict[tuple, tuple[Extension, slice]]:
    """``{(stock, lot): (Extension, slice of θ)}`` of a fit's extensions."""
    layout = _Layout(len(index), index, fit.extensions)
    out = {}
    for ext in fit.extensions:
        start = layout.extension_of[index[ext.ident]][1]
        out[ext.ident] = (ext, slice(start, start + ext.size))
    return out
