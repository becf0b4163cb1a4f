"""The errors of the potency calibration: one covariance per batch (layer 3).

All fitted values of one batch are treated together (a *block*).  Their covariance is the
fits' own (2 × 2 per wavelength) plus errors common to many values at once, added as
rank-one terms and inverted with the Woodbury identity (Press et al. 2007, *Numerical
Recipes*, 3rd ed., eq. 2.7.15):

* the dispensing error of each stock: relative SD ``dispensing_rel_sd`` of the dose, the same
  at every wavelength and in every measurement of the batch (one bottle, one weighing);
* the fits' own errors are often correlated across the wavelengths of one measurement (one
  probe placement, one reference calibration, and in a Monte Carlo fit the same photons),
  which no single fit can tell.  Each value keeps the variance σ² its fit gives, and a
  further ρ·σ_i·σ_j with ρ = :data:`WAVELENGTH_CORRELATION` is common to every wavelength of
  that measurement (one rank-one term per quantity): fourteen wavelengths then do not count as
  fourteen independent measurements of the level (the hidden simulated lab's readings show a
  correlation of about 0.5, ``tests/calibration/test_potency_coverage.py``), while the shape
  across wavelengths is still judged against the full σ (a spectral correction is never
  made more significant than the fits say);
* a further scale error of each measurement, relative SD τ for μa and for μs′, the same at
  every wavelength of that measurement (probe calibration, contact, temperature).  τ is estimated
  from the data: the scale each measurement would need, δ̂_m = uᵀC₀⁻¹r / uᵀC₀⁻¹u along its own
  predicted spectrum u, must scatter as its SD says, Σ δ̂²/(v_m + τ²) = M − L (M measurements,
  L lots that carry that quantity and absorb a common scale) — the Paule–Mandel estimator of
  a between-measurement variance (Paule & Mandel 1982, J. Res. NBS 87:377, eq. 3); τ = 0 when
  the scatter is within the SDs or M ≤ L.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np

from phantomlab.errors import InputError

__all__ = ["WAVELENGTH_CORRELATION", "Block", "Part", "build_blocks", "estimate_scale_sd"]

#: Correlation of a fit's errors across the wavelengths of one measurement.  Not measurable
#: from one measurement; 0.5 is a middle between independent wavelengths (0) and one
#: common error (1) (common practice, no source; see the module docstring).
WAVELENGTH_CORRELATION = 0.5
_QUANTITIES = ("mua", "musp")


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
class Part:
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
            parts.append(Part(obs=obs, columns=tuple(columns), y=np.where(finite, y, 0.0), offset=offset,
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


def _level_prediction(part: Part, levels: np.ndarray) -> np.ndarray:
    obs = part.obs
    f = obs.volume_fractions
    out = np.zeros((obs.wavelength_nm.size, 2))
    for s, k in enumerate(part.columns):
        out[:, 0] += f[s] * obs.intrinsic_mua_per_mm[s] * levels[k]
        out[:, 1] += f[s] * obs.intrinsic_musp_per_mm[s] * levels[k]
    return out


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


def estimate_scale_sd(fit, base_blocks: Sequence[Block], *, levels: np.ndarray,
                      lots_per_quantity: tuple[int, int]) -> tuple[tuple[float, float], dict]:
    """τ for μa and μs′ from the scale each measurement would need (module docstring).

    Parameters
    ----------
    fit : phantomlab.calibration.potency_model.ModelFit
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


