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

**Errors.**  All fitted values of one batch are treated together (a *block*).  Their
covariance is the fits' own (2 × 2 per wavelength) plus two kinds of error common to many
values at once, added as rank-one terms and inverted with the Woodbury identity (Press et al.
2007, *Numerical Recipes*, 3rd ed., eq. 2.7.15):

* the dispensing error of each stock: relative SD ``dispensing_rel_sd`` of the dose, the same
  at every wavelength and in every measurement of the batch (one bottle, one weighing);
* the fits' own errors are often correlated across the wavelengths of one measurement (one
  probe placement, one reference calibration, and in a Monte Carlo fit the same photons),
  which no single fit can tell.  Each value keeps the variance σ² its fit gives, and a
  further ρ·σ_i·σ_j with ρ = :data:`WAVELENGTH_CORRELATION` is common to every wavelength of
  that measurement (one rank-one term per quantity): fourteen wavelengths then do not count as
  fourteen independent measurements of the level (the hidden simulated lab's readings show a
  correlation of about 0.4, ``tests/calibration/test_potency_coverage.py``), while the shape
  across wavelengths is still judged against the full σ (a spectral correction is never
  made more significant than the fits say);
* a further scale error of each measurement, relative SD τ for μa and for μs′, the same at
  every wavelength of that measurement (probe calibration, contact, temperature).  τ is estimated
  from the data: the scale each measurement would need, δ̂_m = uᵀC₀⁻¹r / uᵀC₀⁻¹u along its own
  predicted spectrum u, must scatter as its SD says, Σ δ̂²/(v_m + τ²) = M − L (M measurements,
  L lots that carry that quantity and absorb a common scale) — the Paule–Mandel estimator of
  a between-measurement variance (Paule & Mandel 1982, J. Res. NBS 87:377, eq. 3); τ = 0 when
  the scatter is within the SDs or M ≤ L.

The reduced χ² divides by the degrees of freedom left after the data fitted the effective
number of parameters p_D = tr(Σ_post Σ_b J_bᵀ C_b⁻¹ J_b) (Spiegelhalter et al. 2002, J. R.
Stat. Soc. B 64:583, eq. 11 for a normal linear model).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from phantomlab.errors import InputError

__all__ = ["Extension", "SHAPE_PRIOR_SD", "WAVELENGTH_CORRELATION", "Block", "ModelFit", "build_blocks", "fit_model",
           "estimate_scale_sd", "extension_slices"]

#: Prior SD of each shape coefficient.  Δb: power-law exponents of phantom scatterers lie
#: between about 0.5 and 2.5 and a wrong particle size moves b by a few tenths, so 0.5
#: admits that and more (common practice, no source).  r₁, r₂: a shape error of ±20 % across
#: the band is already a different absorber (common practice, no source).
SHAPE_PRIOR_SD = {"musp_power_law": (0.5,), "mua_legendre": (0.2, 0.2)}
#: Correlation of a fit's errors across the wavelengths of one measurement.  Not measurable
#: from one measurement; 0.5 is a middle between independent wavelengths (0) and one
#: common error (1) (common practice, no source; see the module docstring).
WAVELENGTH_CORRELATION = 0.5
_MAX_ITERATIONS = 30
_TOLERANCE = 1e-9
_QUANTITIES = ("mua", "musp")


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


def _weight_matrix(cov: np.ndarray) -> np.ndarray:
    """Inverse of each 2×2 covariance; components with infinite or NaN variance get zero weight."""
    cov = np.asarray(cov, float)
    a, b, c, d = cov[:, 0, 0], cov[:, 0, 1], cov[:, 1, 0], cov[:, 1, 1]
    good_a = np.isfinite(a) & (a > 0)
    good_d = np.isfinite(d) & (d > 0)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        det = a * d - b * c
        full = good_a & good_d & np.isfinite(b) & np.isfinite(c) & (det > 0)
        weights = np.zeros_like(cov)
        weights[:, 0, 0] = np.where(full, d / det, np.where(good_a, 1.0 / np.where(good_a, a, 1.0), 0.0))
        weights[:, 1, 1] = np.where(full, a / det, np.where(good_d, 1.0 / np.where(good_d, d, 1.0), 0.0))
        weights[:, 0, 1] = np.where(full, -b / det, 0.0)
        weights[:, 1, 0] = np.where(full, -c / det, 0.0)
    return weights


@dataclass
class _Part:
    """One observation inside a block: its data and where its values sit in the block."""

    obs: object  # BatchObservation
    columns: tuple  # lot index of every stock row
    y: np.ndarray  # (W, 2) data minus the matrix offset, 0 where missing
    offset: np.ndarray  # (W, 2) the matrix offset
    weights: np.ndarray  # (W, 2, 2) inverse of the fit's covariance (0 where missing)
    variance: np.ndarray  # (W, 2) the fit's variance (inf where missing)
    start: int  # first index in the block's stacked vector
    shared: float = 0.0  # ρ: a further ρ·σ_i·σ_j common to all wavelengths of the measurement

    @property
    def size(self) -> int:
        return 2 * self.obs.wavelength_nm.size

    @property
    def where(self) -> slice:
        return slice(self.start, self.start + self.size)

    @property
    def weighted(self) -> np.ndarray:
        return np.diagonal(self.weights, axis1=1, axis2=2) > 0


@dataclass
class Block:
    """Every fitted value of one batch with their covariance C = D + U Uᵀ (module docstring)."""

    batch_id: str
    parts: list
    factors: np.ndarray  # U, (n, r)
    factor_names: list  # what each column of U is
    _dinv_u: np.ndarray = field(default=None, repr=False)
    _core: np.ndarray = field(default=None, repr=False)

    def __post_init__(self) -> None:
        self._dinv_u = self.apply_dinv(self.factors)
        r = self.factors.shape[1]
        self._core = np.linalg.inv(np.eye(r) + self.factors.T @ self._dinv_u) if r else np.zeros((0, 0))

    @property
    def size(self) -> int:
        return sum(p.size for p in self.parts)

    @property
    def count(self) -> int:
        return int(sum(p.weighted.sum() for p in self.parts))

    @property
    def y(self) -> np.ndarray:
        return np.concatenate([p.y.reshape(-1) for p in self.parts])

    def apply_dinv(self, v: np.ndarray) -> np.ndarray:
        """D⁻¹ v for v of shape (n,) or (n, k)."""
        out = np.zeros_like(v, dtype=float)
        for p in self.parts:
            piece = v[p.where].reshape((p.obs.wavelength_nm.size, 2) + v.shape[1:])
            out[p.where] = np.einsum("wij,wj...->wi...", p.weights, piece).reshape((p.size,) + v.shape[1:])
        return out

    def solve(self, v: np.ndarray) -> np.ndarray:
        """C⁻¹ v by the Woodbury identity (zero weight where a value is missing)."""
        dinv_v = self.apply_dinv(v)
        if not self.factors.shape[1]:
            return dinv_v
        return dinv_v - self._dinv_u @ (self._core @ (self.factors.T @ dinv_v))

    def sigma(self) -> np.ndarray:
        """SD of every value under C [same unit as the value], inf where missing."""
        variance = np.concatenate([p.variance.reshape(-1) for p in self.parts])
        variance = variance + (self.factors**2).sum(axis=1)
        return np.sqrt(variance)


def build_blocks(observations: Sequence, index: dict, levels: np.ndarray, *,
                 scale_sd: tuple[float, float] = (0.0, 0.0)) -> list[Block]:
    """Group the observations by batch and build each block's covariance.

    Parameters
    ----------
    observations : sequence of BatchObservation
    index : dict
        ``{(stock, lot): lot index}``.
    levels : ndarray (K,)
        Potencies the error terms are evaluated at (the prior, then the estimate).
    scale_sd : (float, float)
        τ for μa and μs′ [fraction].
    """
    grouped: dict[str, list] = {}
    for obs in observations:
        grouped.setdefault(obs.batch_id, []).append(obs)
    blocks = []
    for batch_id, members in grouped.items():
        parts, start = [], 0
        for obs in members:
            columns = []
            for ident in obs.stocks:
                if ident not in index:
                    known = ", ".join(f"{s}/{l}" for s, l in index)
                    raise InputError(f"batch {obs.batch_id} used stock {ident[0]} lot {ident[1]} which has no prior; "
                                     f"known: {known}")
                columns.append(index[ident])
            f = obs.volume_fractions
            W = obs.wavelength_nm.size
            carrier = f @ obs.carrier_mua_per_mm  # the stocks' carrier water or solvent: not scaled
            offset = np.stack([(1.0 - f.sum()) * obs.matrix_mua_per_mm + carrier, np.zeros(W)], axis=1)
            y = np.stack([obs.mua_per_mm, obs.musp_per_mm], axis=1) - offset
            cov = obs.covariance.copy()
            finite = np.isfinite(y)
            cov[~finite[:, 0], 0, 0] = np.inf
            cov[~finite[:, 1], 1, 1] = np.inf
            weighted = np.diagonal(_weight_matrix(cov), axis1=1, axis2=2) > 0
            variance = np.where(weighted, np.diagonal(cov, axis1=1, axis2=2), np.inf)
            shared = WAVELENGTH_CORRELATION if W > 1 else 0.0
            weights = _weight_matrix(cov)
            parts.append(_Part(obs=obs, columns=tuple(columns), y=np.where(finite, y, 0.0), offset=offset,
                               weights=weights, variance=variance, start=start, shared=shared))
            start += 2 * W
        n = start
        factors, names = [], []
        stocks = {}
        for p in parts:
            for s, k in enumerate(p.columns):
                stocks.setdefault(k, []).append((p, s))
        for k, uses in stocks.items():
            column = np.zeros(n)
            for p, s in uses:
                rel = p.obs.dispensing_rel_sd
                f = p.obs.volume_fractions[s]
                contribution = np.stack([f * p.obs.intrinsic_mua_per_mm[s], f * p.obs.intrinsic_musp_per_mm[s]], axis=1)
                column[p.where] = (rel * levels[k] * contribution * p.weighted).reshape(-1)
            if np.any(column):
                factors.append(column)
                names.append(("dispensing", k))
        for j, p in enumerate(parts):
            if p.shared > 0:
                sd = np.sqrt(np.where(p.weighted, p.variance, 0.0))
                for q in range(2):
                    column = np.zeros(n)
                    values = np.zeros_like(sd)
                    values[:, q] = math.sqrt(p.shared) * sd[:, q]
                    column[p.where] = values.reshape(-1)
                    if np.any(column):
                        factors.append(column)
                        names.append(("wavelength correlation", j, _QUANTITIES[q]))
            predicted = _level_prediction(p, levels) + p.offset
            for q, tau in enumerate(scale_sd):
                if tau > 0:
                    column = np.zeros(n)
                    values = np.zeros_like(predicted)
                    values[:, q] = tau * predicted[:, q]
                    column[p.where] = (values * p.weighted).reshape(-1)
                    factors.append(column)
                    names.append(("scale", j, _QUANTITIES[q]))
        matrix = np.column_stack(factors) if factors else np.zeros((n, 0))
        blocks.append(Block(batch_id=batch_id, parts=parts, factors=matrix, factor_names=names))
    return blocks


def _level_prediction(part: _Part, levels: np.ndarray) -> np.ndarray:
    obs = part.obs
    f = obs.volume_fractions
    out = np.zeros((obs.wavelength_nm.size, 2))
    for s, k in enumerate(part.columns):
        out[:, 0] += f[s] * obs.intrinsic_mua_per_mm[s] * levels[k]
        out[:, 1] += f[s] * obs.intrinsic_musp_per_mm[s] * levels[k]
    return out


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


def _predict_part(part: _Part, theta: np.ndarray, layout: _Layout):
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


def _paule_mandel(scales: np.ndarray, variances: np.ndarray, dof: int) -> float:
    """τ ≥ 0 with Σ δ²/(v + τ²) = dof (Paule & Mandel 1982, eq. 3); 0 when already below."""
    if dof <= 0 or scales.size == 0:
        return 0.0

    def excess(tau2: float) -> float:
        return float(np.sum(scales**2 / (variances + tau2))) - dof

    if excess(0.0) <= 0:
        return 0.0
    low, high = 0.0, max(float(np.max(scales**2)), 1e-12)
    while excess(high) > 0:
        high *= 4.0
    for _ in range(100):
        middle = 0.5 * (low + high)
        if excess(middle) > 0:
            low = middle
        else:
            high = middle
    return math.sqrt(0.5 * (low + high))


def estimate_scale_sd(fit: ModelFit, base_blocks: Sequence[Block], *, levels: np.ndarray,
                      lots_per_quantity: tuple[int, int]) -> tuple[tuple[float, float], dict]:
    """τ for μa and μs′ from the scale each measurement would need (module docstring).

    Parameters
    ----------
    fit : ModelFit
        The fit whose residuals are judged (its blocks in the same order as ``base_blocks``).
    base_blocks : sequence of Block
        The same blocks WITHOUT scale terms (τ = 0): C₀ for δ̂ and its SD.
    levels : ndarray (K,)
        Potencies the measurements' predicted spectra u are taken at.
    lots_per_quantity : (int, int)
        L, the lots that carry μa and μs′ (they absorb a common scale).

    Returns
    -------
    ((τ_mua, τ_musp), dict)
        The dict holds the measurements' relative scales δ̂ and their SDs for the report.
    """
    taus, report = [], {}
    for q, name in enumerate(_QUANTITIES):
        scales, variances = [], []
        for block, residual in zip(base_blocks, fit.residuals):
            for p in block.parts:
                if not p.weighted[:, q].any():
                    continue
                u = np.zeros(block.size)
                predicted = np.zeros((p.obs.wavelength_nm.size, 2))
                predicted[:, q] = (_level_prediction(p, levels) + p.offset)[:, q]
                u[p.where] = (predicted * p.weighted).reshape(-1)
                cinv_u = block.solve(u)
                information = float(u @ cinv_u)
                if information <= 0:
                    continue
                scales.append(float(cinv_u @ residual) / information)
                variances.append(1.0 / information)
        scales_a, variances_a = np.array(scales), np.array(variances)
        dof = len(scales) - lots_per_quantity[q]
        taus.append(_paule_mandel(scales_a, variances_a, dof))
        report[name] = {"measurements": len(scales), "dof": dof, "scale_sd": taus[-1],
                        "rms_scale": float(np.sqrt(np.mean(scales_a**2))) if scales else None}
    return (taus[0], taus[1]), report


def extension_slices(fit: ModelFit, index: dict) -> dict[tuple, tuple[Extension, slice]]:
    """``{(stock, lot): (Extension, slice of θ)}`` of a fit's extensions."""
    layout = _Layout(len(index), index, fit.extensions)
    out = {}
    for ext in fit.extensions:
        start = layout.extension_of[index[ext.ident]][1]
        out[ext.ident] = (ext, slice(start, start + ext.size))
    return out
