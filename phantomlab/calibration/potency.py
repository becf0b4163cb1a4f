"""Stock potency factors from the batch history by Bayesian linear least squares (layer 3).

A stock's potency ``p`` multiplies all of its intrinsic optics (docs/design.md).  With the volume
fractions ``f_i`` actually dispensed in batch b and each stock's intrinsic optics at potency
1 (``a_i(λ)`` absorption, ``s′_i(λ)`` reduced scattering), the mixing rule of the optics layer
is linear in the potencies:

    μa(λ)  − (1 − Σ f_i) μa_m(λ) = Σ_i f_i a_i(λ)  p_i
    μs′(λ)                       = Σ_i f_i s′_i(λ) p_i

so every fitted (μa, μs′) pair, with its 2×2 covariance, is a linear observation y = A p + e
of the potency vector, cross terms included (an ink's own scattering enters the μs′ row, a
scatterer's absorption the μa row).  With the stock file's potency and potency_sd as a
normal prior p ~ N(p₀, Σ₀), the posterior is normal with

    Λ = Σ₀⁻¹ + Σ_b A_bᵀ C_b⁻¹ A_b,         Σ_post = Λ⁻¹,
    p_post = Σ_post (Σ₀⁻¹ p₀ + Σ_b A_bᵀ C_b⁻¹ y_b)

(Gelman et al. 2013, *Bayesian Data Analysis*, 3rd ed., sec. 14.2, conjugate normal linear
regression with known covariance; Tarantola 2005, *Inverse Problem Theory*, eq. 3.37).
The shift p_post − p₀ = Σ_post Σ_b A_bᵀ C_b⁻¹ (y_b − A_b p₀) splits exactly into one term per
batch: that is how "which batches moved each factor" is reported.

Each potency belongs to a stock *lot*: a new lot starts again from the stock file's prior.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["PotencyPrior", "BatchObservation", "PotencyUpdate", "update_potencies"]


@dataclass(frozen=True)
class PotencyPrior:
    """The prior of one stock lot's potency: the stock file's (or last calibration's) value.

    Attributes
    ----------
    stock : str
        Stock key of the shelf.
    lot : str or None
    potency : float [dimensionless]
    potency_sd : float [dimensionless]
    """

    stock: str
    lot: str | None
    potency: float
    potency_sd: float

    def __post_init__(self) -> None:
        if not (np.isfinite(self.potency) and self.potency > 0):
            raise InputError(f"prior of {self.stock}: potency {self.potency!r}; accepted: > 0")
        if not (np.isfinite(self.potency_sd) and self.potency_sd > 0):
            raise InputError(f"prior of {self.stock}: potency_sd {self.potency_sd!r}; accepted: > 0")

    @property
    def ident(self) -> tuple[str, str | None]:
        return (self.stock, self.lot)


@dataclass(frozen=True)
class BatchObservation:
    """What one characterised batch says about the potencies of the lots it used.

    Attributes
    ----------
    batch_id : str
    stocks : tuple of (str, str or None)
        (stock key, lot) of each added stock (the matrix not among them), order of the rows.
    volume_fractions : ndarray (S,) [fraction]
        Volume fraction of each undiluted stock in the final mix, as actually dispensed.
    wavelength_nm : ndarray (W,) [nm]
    intrinsic_mua_per_mm, intrinsic_musp_per_mm : ndarray (S, W) [1/mm]
        Each stock's intrinsic optics at potency 1 on this grid.
    matrix_mua_per_mm : ndarray (W,) [1/mm]
    mua_per_mm, musp_per_mm : ndarray (W,) [1/mm]
        Fitted optics of the batch.
    covariance : ndarray (W, 2, 2) [1/mm^2]
        Covariance of the fitted (mua, musp) at each wavelength.
    dispensing_rel_sd : float
        Relative SD of the mixing model itself (dispensing errors, model error), added to the
        observation covariance in quadrature relative to the predicted values.
    """

    batch_id: str
    stocks: tuple
    volume_fractions: np.ndarray
    wavelength_nm: np.ndarray
    intrinsic_mua_per_mm: np.ndarray
    intrinsic_musp_per_mm: np.ndarray
    matrix_mua_per_mm: np.ndarray
    mua_per_mm: np.ndarray
    musp_per_mm: np.ndarray
    covariance: np.ndarray
    dispensing_rel_sd: float = 0.01

    def __post_init__(self) -> None:
        stocks = tuple((str(s), None if l is None else str(l)) for s, l in self.stocks)
        object.__setattr__(self, "stocks", stocks)
        w = np.atleast_1d(np.asarray(self.wavelength_nm, float))
        S, W = len(stocks), w.size
        object.__setattr__(self, "wavelength_nm", w)
        f = np.atleast_1d(np.asarray(self.volume_fractions, float))
        if f.shape != (S,):
            raise InputError(f"batch {self.batch_id}: {f.size} volume fractions for {S} stocks")
        if np.any(~np.isfinite(f)) or np.any(f < 0) or f.sum() > 1:
            raise InputError(f"batch {self.batch_id}: volume fractions must be >= 0 and sum to <= 1")
        object.__setattr__(self, "volume_fractions", f)
        for name in ("intrinsic_mua_per_mm", "intrinsic_musp_per_mm"):
            a = np.asarray(getattr(self, name), float)
            if a.shape != (S, W):
                raise InputError(f"batch {self.batch_id}: {name} has shape {a.shape}, expected {(S, W)}")
            object.__setattr__(self, name, a)
        for name in ("matrix_mua_per_mm", "mua_per_mm", "musp_per_mm"):
            a = np.broadcast_to(np.asarray(getattr(self, name), float), (W,)).copy()
            object.__setattr__(self, name, a)
        cov = np.asarray(self.covariance, float)
        if cov.shape != (W, 2, 2):
            raise InputError(f"batch {self.batch_id}: covariance has shape {cov.shape}, expected {(W, 2, 2)}")
        object.__setattr__(self, "covariance", cov)


@dataclass(frozen=True)
class PotencyUpdate:
    """Posterior potencies, with what they were before and which batches moved them.

    Attributes
    ----------
    stocks : tuple of (str, str or None)
        (stock key, lot) of each factor.
    prior_potency, prior_sd, potency, potency_sd : ndarray (K,)
    covariance : ndarray (K, K)
        Posterior covariance of the potencies.
    moved_by : dict
        ``{(stock, lot): [{"batch_id", "shift", "information_share"}, ...]}``: each batch's
        exact share of the shift p_post − p₀ and its share of the posterior information.
    chi2_red : float
        Reduced χ² of the observations at the posterior (NaN without degrees of freedom).
    batches : tuple of str
    """

    stocks: tuple
    prior_potency: np.ndarray
    prior_sd: np.ndarray
    potency: np.ndarray
    potency_sd: np.ndarray
    covariance: np.ndarray
    moved_by: Mapping[tuple, list] = field(default_factory=dict)
    chi2_red: float = float("nan")
    batches: tuple = ()

    def as_potencies(self) -> dict[str, tuple[float, float]]:
        """``{stock_key: (potency, potency_sd)}`` for the recipe solver (last lot of a key wins)."""
        return {s: (float(p), float(sd)) for (s, _), p, sd in zip(self.stocks, self.potency, self.potency_sd)}

    def to_json(self) -> dict[str, Any]:
        """``stocks`` {KEY: {potency, potency_sd, lot}} plus ``before``, ``after``, ``moved_by``."""
        stocks, before, after, moved = {}, {}, {}, {}
        for k, (stock, lot) in enumerate(self.stocks):
            stocks[stock] = {"potency": float(self.potency[k]), "potency_sd": float(self.potency_sd[k]), "lot": lot}
            before[stock] = {"potency": float(self.prior_potency[k]), "potency_sd": float(self.prior_sd[k]), "lot": lot}
            after[stock] = dict(stocks[stock])
            moved[stock] = list(self.moved_by.get((stock, lot), []))
        lots = [
            {"stock": s, "lot": l, "potency_before": float(p0), "potency_sd_before": float(s0),
             "potency": float(p), "potency_sd": float(sd)}
            for (s, l), p0, s0, p, sd in zip(self.stocks, self.prior_potency, self.prior_sd, self.potency, self.potency_sd)
        ]
        return {
            "stocks": stocks, "before": before, "after": after, "moved_by": moved, "lots": lots,
            "batches": list(self.batches),
            "chi2_red": float(self.chi2_red) if np.isfinite(self.chi2_red) else None,
        }


def _weight_matrix(cov: np.ndarray) -> np.ndarray:
    """Inverse of a 2×2 covariance; components with infinite or NaN variance get zero weight."""
    W = np.zeros_like(cov)
    for w in range(cov.shape[0]):
        c = cov[w]
        good = np.isfinite(np.diag(c)) & (np.diag(c) > 0)
        if good.all() and np.all(np.isfinite(c)):
            try:
                W[w] = np.linalg.inv(c)
                continue
            except np.linalg.LinAlgError:
                pass
        for i in range(2):
            if good[i]:
                W[w, i, i] = 1.0 / c[i, i]
    return W


def update_potencies(
    priors: Sequence[PotencyPrior], observations: Sequence[BatchObservation]
) -> PotencyUpdate:
    """Bayesian linear least-squares update of stock-lot potencies.

    Parameters
    ----------
    priors : sequence of PotencyPrior
        One per stock lot to estimate (the stock file's values, or a previous calibration).
        A lot used by a batch but not listed here is refused.
    observations : sequence of BatchObservation
        The characterised batches.

    Returns
    -------
    PotencyUpdate

    Raises
    ------
    InputError
        For duplicate priors or a batch using a lot without a prior.

    References
    ----------
    Gelman A et al. 2013, *Bayesian Data Analysis*, 3rd ed., CRC Press, sec. 14.2.
    Tarantola A 2005, *Inverse Problem Theory*, SIAM, eq. 3.37.
    """
    priors = list(priors)
    idents = [p.ident for p in priors]
    if len(set(idents)) != len(idents):
        raise InputError("update_potencies: a stock lot is listed twice among the priors")
    index = {ident: k for k, ident in enumerate(idents)}
    K = len(priors)
    p0 = np.array([p.potency for p in priors], float)
    sd0 = np.array([p.potency_sd for p in priors], float)
    prior_information = np.diag(1.0 / sd0**2)
    information = prior_information.copy()
    rhs = prior_information @ p0
    per_batch = []
    dof = 0
    for obs in observations:
        columns = []
        for ident in obs.stocks:
            if ident not in index:
                raise InputError(
                    f"batch {obs.batch_id} used stock {ident[0]} lot {ident[1]} which has no prior; "
                    f"known: {', '.join(f'{s}/{l}' for s, l in idents)}"
                )
            columns.append(index[ident])
        W = obs.wavelength_nm.size
        f = obs.volume_fractions
        # design rows (2W, K): first all mua rows, then all musp rows, per wavelength pairs
        A = np.zeros((W, 2, K))
        for s, k in enumerate(columns):
            A[:, 0, k] += f[s] * obs.intrinsic_mua_per_mm[s]
            A[:, 1, k] += f[s] * obs.intrinsic_musp_per_mm[s]
        offset = np.stack([(1.0 - f.sum()) * obs.matrix_mua_per_mm, np.zeros(W)], axis=1)
        y = np.stack([obs.mua_per_mm, obs.musp_per_mm], axis=1) - offset
        predicted = np.einsum("wik,k->wi", A, p0) + offset
        cov = obs.covariance.copy()
        rel = obs.dispensing_rel_sd
        cov[:, 0, 0] += (rel * predicted[:, 0]) ** 2
        cov[:, 1, 1] += (rel * predicted[:, 1]) ** 2
        finite = np.isfinite(y)
        cov[~finite[:, 0], 0, 0] = np.inf
        cov[~finite[:, 1], 1, 1] = np.inf
        y = np.where(finite, y, 0.0)
        weights = _weight_matrix(cov)
        info_b = np.einsum("wik,wij,wjl->kl", A, weights, A)
        rhs_b = np.einsum("wik,wij,wj->k", A, weights, y)
        information += info_b
        rhs += rhs_b
        dof += int(np.sum(np.diagonal(weights, axis1=1, axis2=2) > 0))
        per_batch.append((obs, A, weights, y, info_b))
    covariance = np.linalg.inv(information)
    potency = covariance @ rhs
    moved_by: dict[tuple, list] = {ident: [] for ident in idents}
    chi2 = 0.0
    for obs, A, weights, y, info_b in per_batch:
        innovation = y - np.einsum("wik,k->wi", A, p0)
        shift = covariance @ np.einsum("wik,wij,wj->k", A, weights, innovation)
        residual = y - np.einsum("wik,k->wi", A, potency)
        chi2 += float(np.einsum("wi,wij,wj->", residual, weights, residual))
        for ident in set(obs.stocks):
            k = index[ident]
            moved_by[ident].append({
                "batch_id": obs.batch_id,
                "shift": float(shift[k]),
                "information_share": float(info_b[k, k] / information[k, k]),
            })
    potency_sd = np.sqrt(np.diag(covariance))
    for k, ident in enumerate(idents):
        if potency[k] <= 0:
            import warnings

            warnings.warn(
                f"calibrated potency of {ident[0]} (lot {ident[1]}) is {potency[k]:.3g}, not > 0: "
                f"the batch data contradict the mixing model (check units of doses and fits)",
                PhantomlabWarning, stacklevel=2,
            )
    chi2_red = chi2 / dof if dof > 0 else float("nan")
    return PotencyUpdate(
        stocks=tuple(idents), prior_potency=p0, prior_sd=sd0, potency=potency,
        potency_sd=potency_sd, covariance=covariance, moved_by=moved_by, chi2_red=chi2_red,
        batches=tuple(o.batch_id for o in observations),
    )
