"""Stock potency factors from the batch history by Bayesian linear least squares (layer 3).

A stock's potency ``p`` multiplies the intrinsic optics of its ingredient, not the absorption
``c_i`` of its carrier water or solvent (docs/design.md).  With the volume fractions ``f_i``
actually dispensed in batch b and each stock's intrinsic optics at potency 1 (``a_i(λ)``
absorption of the ingredient, ``s′_i(λ)`` reduced scattering, times the packing factor W of
the batch under a dependent-scattering model), the mixing rule of the optics layer is linear in
the potencies:

    μa(λ)  − (1 − Σ f_i) μa_m(λ) − Σ_i f_i c_i(λ) = Σ_i f_i a_i(λ)  p_i
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

Beyond this scalar model, :func:`update_potencies` may give a lot a spectral correction when
the data support it (:mod:`phantomlab.calibration.potency_checks` states the rule; the model
and its Gauss–Newton posterior are in :mod:`phantomlab.calibration.potency_model`), flags
batches and measurements the others contradict, and widens every SD by the Birge ratio
√χ²ᵣ when χ²ᵣ > 1 (Birge 1932, Phys. Rev. 40:207; Taylor et al. 1969 the same for
fundamental constants): the fits then scatter more than their SDs say, and a potency SD
from those SDs alone would claim more than the data support.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any, Mapping, Sequence

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["PotencyPrior", "BatchObservation", "PotencyUpdate", "update_potencies", "birge_ratio"]


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
    measurement_id : int, optional
        The stored measurement the fit belongs to (for outlier reports and exclusions).
    carrier_mua_per_mm : ndarray (S, W) [1/mm], optional
        The part of each stock's absorption the potency does not scale (its carrier water or
        solvent; docs/design.md); ``intrinsic_mua_per_mm`` is then the ingredient's alone.
        Default 0.
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
    measurement_id: int | None = None
    carrier_mua_per_mm: np.ndarray | None = None

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
        if self.carrier_mua_per_mm is None:
            object.__setattr__(self, "carrier_mua_per_mm", np.zeros((S, W)))
        for name in ("intrinsic_mua_per_mm", "intrinsic_musp_per_mm", "carrier_mua_per_mm"):
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
    """Posterior potencies, with what they were before, what moved them and what to doubt.

    Attributes
    ----------
    stocks : tuple of (str, str or None)
        (stock key, lot) of each factor.
    prior_potency, prior_sd : ndarray (K,)
    potency : ndarray (K,)
        Posterior mode of each lot's level.
    potency_sd : ndarray (K,)
        Posterior SD, widened by :attr:`birge_ratio` (what is reported and stored).
    potency_sd_unwidened : ndarray (K,)
        The posterior SD from the fits' own SDs.
    covariance : ndarray (K, K)
        Posterior covariance of the levels, widened likewise.
    moved_by : dict
        ``{(stock, lot): [{"batch_id", "measurement_ids", "shift", "information_share",
        "leave_out_z"}, ...]}``: each batch's exact share of the shift p_post − p₀
        (final linearisation), its share of the posterior information, and how far leaving
        its batch out moves the lot (in SD; None when the lot is not tested).
    chi2_red : float
        Reduced χ² of the observations at the posterior (NaN without degrees of freedom).
    birge_ratio : float
        √χ²ᵣ when χ²ᵣ > 1, else 1: the factor every SD is widened by.
    spectral : dict
        ``{(stock, lot): SpectralCorrection}`` of the lots whose correction the data support.
    selection : list of dict
        Every spectral candidate the rule considered, used or not, and why.
    outliers : list of dict
        ``{batch_id, measurement_id, reason, z, stock, lot}``.
    residuals : list of dict
        Per observation: ``batch_id``, ``measurement_id``, ``rms_z`` and ``max_abs_z`` of its
        standardised residuals (data − model over each value's SD).
    scale_sd : dict
        ``{"mua": τ, "musp": τ}``: the relative SD of a measurement's scale error the data
        show beyond the fits' SDs (Paule–Mandel; :mod:`~phantomlab.calibration.potency_model`).
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
    potency_sd_unwidened: np.ndarray | None = None
    birge_ratio: float = 1.0
    spectral: Mapping[tuple, Any] = field(default_factory=dict)
    selection: tuple = ()
    outliers: tuple = ()
    residuals: tuple = ()
    dof: float = float("nan")
    scale_sd: Mapping[str, float] = field(default_factory=dict)
    scale_report: Mapping[str, Any] = field(default_factory=dict)

    def as_potencies(self) -> dict[str, tuple]:
        """``{stock_key: (potency, potency_sd, lot, spectral or None)}`` for the recipe solver."""
        return {s: (float(p), float(sd), lot, self.spectral.get((s, lot)))
                for (s, lot), p, sd in zip(self.stocks, self.potency, self.potency_sd)}

    def to_json(self) -> dict[str, Any]:
        """``stocks`` {KEY: {potency, potency_sd, lot, spectral}} plus the report's extras."""
        stocks, before, after, moved = {}, {}, {}, {}
        for k, (stock, lot) in enumerate(self.stocks):
            correction = self.spectral.get((stock, lot))
            stocks[stock] = {"potency": float(self.potency[k]), "potency_sd": float(self.potency_sd[k]), "lot": lot,
                             "spectral": correction.to_json() if correction is not None else None}
            before[stock] = {"potency": float(self.prior_potency[k]), "potency_sd": float(self.prior_sd[k]), "lot": lot}
            after[stock] = dict(stocks[stock])
            moved[stock] = list(self.moved_by.get((stock, lot), []))
        unwidened = self.potency_sd if self.potency_sd_unwidened is None else self.potency_sd_unwidened
        lots = [
            {"stock": s, "lot": l, "potency_before": float(p0), "potency_sd_before": float(s0),
             "potency": float(p), "potency_sd": float(sd), "potency_sd_unwidened": float(u),
             "spectral": (self.spectral[(s, l)].to_json() if (s, l) in self.spectral else None)}
            for (s, l), p0, s0, p, sd, u in zip(self.stocks, self.prior_potency, self.prior_sd, self.potency,
                                                self.potency_sd, unwidened)
        ]
        finite = np.isfinite(self.chi2_red)
        return {
            "stocks": stocks, "before": before, "after": after, "moved_by": moved, "lots": lots,
            "batches": list(self.batches),
            "chi2_red": float(self.chi2_red) if finite else None,
            "dof": float(self.dof) if np.isfinite(self.dof) else None,
            "birge_ratio": float(self.birge_ratio),
            "sd_widened": bool(self.birge_ratio > 1.0),
            "spectral_selection": [dict(item) for item in self.selection],
            "outliers": [dict(item) for item in self.outliers],
            "residuals": [dict(item) for item in self.residuals],
            "scale_sd": dict(self.scale_sd),
        }


def birge_ratio(chi2_red: float) -> float:
    """√χ²ᵣ when χ²ᵣ > 1, else 1 (Birge 1932, Phys. Rev. 40:207): the factor SDs are widened by."""
    return math.sqrt(chi2_red) if math.isfinite(chi2_red) and chi2_red > 1.0 else 1.0


def update_potencies(
    priors: Sequence[PotencyPrior],
    observations: Sequence[BatchObservation],
    *,
    spectral: str = "auto",
    check_outliers: bool = True,
) -> PotencyUpdate:
    """Bayesian update of stock-lot potencies, with the corrections the data support.

    Parameters
    ----------
    priors : sequence of PotencyPrior
        One per stock lot to estimate (the stock file's values, or a previous calibration).
        A lot used by a batch but not listed here is refused.
    observations : sequence of BatchObservation
        The characterised batches (one per fitted measurement).
    spectral : {"auto", "off"}
        ``"auto"``: spectral corrections where the rule of
        :mod:`~phantomlab.calibration.potency_checks` says the data support them;
        ``"off"``: one scalar potency per lot (the model of the module docstring).
    check_outliers : bool
        Run the leave-one-batch-out test.

    Returns
    -------
    PotencyUpdate
        SDs widened by the Birge ratio when χ²ᵣ > 1.

    Raises
    ------
    InputError
        For duplicate priors, a batch using a lot without a prior, or an unknown ``spectral``.

    References
    ----------
    Gelman A et al. 2013, *Bayesian Data Analysis*, 3rd ed., CRC Press, sec. 14.2.
    Tarantola A 2005, *Inverse Problem Theory*, SIAM, eq. 3.37 and 3.51.
    Birge R T 1932, Phys. Rev. 40:207.
    """
    from phantomlab.calibration.potency_checks import Calibration, find_outliers, select_extensions
    from phantomlab.calibration.potency_model import extension_slices
    from phantomlab.recipe.spectral_potency import SpectralCorrection

    if spectral not in ("auto", "off"):
        raise InputError(f"spectral {spectral!r}; accepted: auto, off")
    priors = list(priors)
    idents = [p.ident for p in priors]
    if len(set(idents)) != len(idents):
        raise InputError("update_potencies: a stock lot is listed twice among the priors")
    index = {ident: k for k, ident in enumerate(idents)}
    K = len(priors)
    p0 = np.array([p.potency for p in priors], float)
    sd0 = np.array([p.potency_sd for p in priors], float)
    calibration = Calibration(priors, observations)
    if spectral == "auto" and calibration.observations:
        extensions, selection, _scale = select_extensions(calibration)
    else:
        extensions, selection = [], []
    fit, scale, scale_report = calibration.fit_with_scale(extensions, scale_from=calibration.fullest)
    ratio = birge_ratio(fit.chi2_red)
    covariance_all = fit.covariance * ratio**2
    potency = fit.theta[:K]
    outliers, loo = (find_outliers(calibration, extensions) if check_outliers and calibration.observations
                     else ([], {}))
    moved_by: dict[tuple, list] = {ident: [] for ident in idents}
    posterior_information = np.linalg.inv(fit.covariance)
    residuals = []
    for block, shift, info, residual in zip(fit.blocks, fit.shifts, fit.information, fit.residuals):
        lots = sorted({k for part in block.parts for k in part.columns})
        for k in lots:
            total = posterior_information[k, k]
            moved_by[idents[k]].append({
                "batch_id": block.batch_id,
                "measurement_ids": [part.obs.measurement_id for part in block.parts],
                "shift": float(shift[k]),
                "information_share": float(info[k, k] / total) if total > 0 else 0.0,
                "leave_out_z": loo.get(block.batch_id, {}).get(k),
            })
        z_all = residual / block.sigma()
        for part in block.parts:
            z = z_all[part.where]
            z = z[np.isfinite(z) & part.weighted.reshape(-1)]
            residuals.append({"batch_id": block.batch_id, "measurement_id": part.obs.measurement_id,
                              "rms_z": float(np.sqrt(np.mean(z**2))) if z.size else None,
                              "max_abs_z": float(np.max(np.abs(z))) if z.size else None})
    corrections = {}
    for ident, (ext, where) in extension_slices(fit, index).items():
        k = index[ident]
        positions = [k, *range(where.start, where.stop)]
        corrections[ident] = SpectralCorrection(
            kind=ext.kind, reference_nm=ext.reference_nm, half_width_nm=ext.half_width_nm,
            coefficients=tuple(fit.theta[where]), potency=float(fit.theta[k]),
            covariance=tuple(map(tuple, covariance_all[np.ix_(positions, positions)])))
    for k, ident in enumerate(idents):
        if potency[k] <= 0:
            warnings.warn(
                f"calibrated potency of {ident[0]} (lot {ident[1]}) is {potency[k]:.3g}, not > 0: "
                f"the batch data contradict the mixing model (check units of doses and fits)",
                PhantomlabWarning, stacklevel=2,
            )
    unwidened = np.sqrt(np.diag(fit.covariance)[:K])
    return PotencyUpdate(
        stocks=tuple(idents), prior_potency=p0, prior_sd=sd0, potency=potency.copy(),
        potency_sd=unwidened * ratio, covariance=covariance_all[:K, :K], moved_by=moved_by,
        chi2_red=fit.chi2_red, batches=tuple(o.batch_id for o in observations),
        potency_sd_unwidened=unwidened, birge_ratio=ratio, spectral=corrections,
        selection=tuple(selection), outliers=tuple(outliers), residuals=tuple(residuals), dof=fit.dof,
        scale_sd={"mua": scale[0], "musp": scale[1]}, scale_report=scale_report,
    )
