"""The joint fit of a band under spectral constraints (layer 3).

:func:`joint_fit` fits every wavelength of a band at once when a :class:`SpectralConstraint`
ties them together: μs′(λ) = a (λ/λ₀)^−b (Jacques 2013, Phys Med Biol 58:R37, eq. 2) and/or
μa(λ) = μa_m(λ) + Σ_k c_k ε_k(λ) with c_k ≥ 0 (the stocks' intrinsic absorption spectra, so the
fit reports stock amounts).  The parameters θ (amounts, a and b, a log scale per wavelength for
relative data) map to (μa, μs′) per wavelength (:class:`_JointMap`); the covariance of θ is
carried to each wavelength's (μa, μs′) through that map's Jacobian.  The per-wavelength fits
and the entry point are in :mod:`phantomlab.calibration.spectral`.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from scipy import sparse

from phantomlab.calibration.fitting import fit_joint
from phantomlab.errors import InputError

__all__ = ["SpectralConstraint", "joint_fit", "MUA_BOUNDS_PER_MM", "MUSP_BOUNDS_PER_MM"]

#: Bounds of the fitted coefficients [1/mm]: far outside any phantom, inside what models take.
MUA_BOUNDS_PER_MM = (1e-6, 50.0)
MUSP_BOUNDS_PER_MM = (1e-3, 500.0)


@dataclass(frozen=True)
class SpectralConstraint:
    """Optional constraints that tie the wavelengths of a fit together.

    Attributes
    ----------
    musp_power_law : bool
        Fit μs′ = a (λ/λ₀)^−b instead of one μs′ per wavelength.
    reference_nm : float [nm]
        λ₀ of the power law.
    mua_basis_per_mm : ndarray (K, W) or None [1/mm]
        Intrinsic absorption spectra ε_k of the stocks, on the measurement's grid (may be
        negative where a stock absorbs less than the matrix it displaces).
    mua_basis_names : tuple of str
        Names of the K spectra (stock keys), used in ``FitResult.parameters``.
    mua_offset_per_mm : ndarray (W,) or None [1/mm]
        The matrix's own absorption μa_m(λ) (0 if None).
    """

    musp_power_law: bool = False
    reference_nm: float = 500.0
    mua_basis_per_mm: np.ndarray | None = None
    mua_basis_names: tuple = ()
    mua_offset_per_mm: np.ndarray | None = None

    @property
    def active(self) -> bool:
        return self.musp_power_law or self.mua_basis_per_mm is not None



class _JointMap:
    """θ ↦ (μa(λ), μs′(λ), log scale(λ)) for the joint fit with constraints."""

    def __init__(self, constraint: SpectralConstraint, wavelength_nm: np.ndarray, relative: bool):
        self.c = constraint
        self.wl = wavelength_nm
        self.W = wavelength_nm.size
        self.relative = relative
        if constraint.mua_basis_per_mm is not None:
            basis = np.atleast_2d(np.asarray(constraint.mua_basis_per_mm, float))
            if basis.shape[1] != self.W:
                raise InputError(f"mua basis has {basis.shape[1]} wavelengths, the measurement {self.W}")
            if not np.all(np.isfinite(basis)):
                raise InputError("mua basis spectra must be finite [1/mm]")
            self.basis = basis
            self.offset = (np.zeros(self.W) if constraint.mua_offset_per_mm is None
                           else np.broadcast_to(np.asarray(constraint.mua_offset_per_mm, float), (self.W,)))
            self.n_mua = basis.shape[0]
        else:
            self.basis = None
            self.n_mua = self.W
        self.n_musp = 2 if constraint.musp_power_law else self.W
        self.n_scale = self.W if relative else 0
        self.P = self.n_mua + self.n_musp + self.n_scale

    def split(self, theta):
        a = theta[: self.n_mua]
        s = theta[self.n_mua: self.n_mua + self.n_musp]
        k = theta[self.n_mua + self.n_musp:]
        if self.basis is not None:
            mua = self.offset + a @ self.basis
            mua = np.maximum(mua, MUA_BOUNDS_PER_MM[0])
        else:
            mua = np.exp(a)
        if self.c.musp_power_law:
            musp = np.exp(s[0]) * (self.wl / self.c.reference_nm) ** (-s[1])
        else:
            musp = np.exp(s)
        return mua, musp, (k if self.relative else None)

    def start(self, mua0, musp0, log_scale0):
        if self.basis is not None:
            from scipy.optimize import nnls

            c, _ = nnls(self.basis.T, np.maximum(mua0 - self.offset, 0.0))
            a = np.maximum(c, 1e-6)
        else:
            a = np.log(mua0)
        if self.c.musp_power_law:
            slope, intercept = np.polyfit(np.log(self.wl / self.c.reference_nm), np.log(musp0), 1) \
                if self.W > 1 else (0.0, np.log(musp0[0]))
            s = np.array([intercept, -slope])
        else:
            s = np.log(musp0)
        parts = [a, s] + ([log_scale0] if self.relative else [])
        return np.concatenate(parts)

    def bounds(self):
        if self.basis is not None:
            lo_a, hi_a = np.zeros(self.n_mua), np.full(self.n_mua, np.inf)
        else:
            lo_a, hi_a = np.full(self.W, np.log(MUA_BOUNDS_PER_MM[0])), np.full(self.W, np.log(MUA_BOUNDS_PER_MM[1]))
        if self.c.musp_power_law:
            lo_s, hi_s = np.array([np.log(MUSP_BOUNDS_PER_MM[0]), -2.0]), np.array([np.log(MUSP_BOUNDS_PER_MM[1]), 6.0])
        else:
            lo_s, hi_s = np.full(self.W, np.log(MUSP_BOUNDS_PER_MM[0])), np.full(self.W, np.log(MUSP_BOUNDS_PER_MM[1]))
        lo_k, hi_k = np.full(self.n_scale, -np.inf), np.full(self.n_scale, np.inf)
        return np.concatenate([lo_a, lo_s, lo_k]), np.concatenate([hi_a, hi_s, hi_k])

    def sparsity(self, M):
        rows = []
        W = self.W
        blocks_a = np.ones((W, self.n_mua)) if self.basis is not None else np.eye(W)
        blocks_s = np.ones((W, 2)) if self.c.musp_power_law else np.eye(W)
        pattern = [blocks_a, blocks_s] + ([np.eye(W)] if self.relative else [])
        per_w = np.concatenate(pattern, axis=1)  # (W, P)
        rows = np.repeat(per_w, M, axis=0)  # (W*M, P) row order = w-major
        return sparse.csr_matrix(rows)

    def optics_jacobian(self, theta):
        """d(μa, μs′)/dθ at each wavelength, shape (W, 2, P), by forward differences."""
        base_a, base_s, _ = self.split(theta)
        jac = np.zeros((self.W, 2, self.P))
        for p in range(self.n_mua + self.n_musp):
            step = 1e-7 * max(1.0, abs(theta[p]))
            t = theta.copy()
            t[p] += step
            a, s, _ = self.split(t)
            jac[:, 0, p] = (a - base_a) / step
            jac[:, 1, p] = (s - base_s) / step
        return jac


def joint_fit(forward, data, sd, mask, relative, start, scale_by_chi2, constraint, wavelength_nm):
    """The constrained fit of a band: a dict of per-wavelength arrays and the constraint's parameters with SDs."""
    mapping = _JointMap(constraint, wavelength_nm, relative)
    W, M = data.shape
    mua0, musp0 = start
    log_scale0 = np.zeros(W)
    if relative:
        with warnings.catch_warnings(), np.errstate(all="ignore"):
            warnings.simplefilter("ignore")
            m0 = forward(mua0, musp0)
            log_scale0 = np.nanmean(np.log(np.where(mask, data, np.nan)) - np.log(np.where(mask, m0, np.nan)), axis=1)
    theta0 = mapping.start(mua0, musp0, log_scale0)
    lower, upper = mapping.bounds()
    safe = np.where(mask, data, 0.0)

    def residuals(theta):
        mua, musp, log_scale = mapping.split(theta)
        model = forward(mua, musp)
        if relative:
            model = model * np.exp(log_scale)[:, None]
        return np.where(mask, (model - safe) / sd, np.nan)

    outcome = fit_joint(residuals, theta0, lower=lower, upper=upper, scale_by_chi2=scale_by_chi2,
                        jac_sparsity=mapping.sparsity(M) if mapping.P > 20 else None)
    theta = outcome.x
    mua, musp, log_scale = mapping.split(theta)
    J = mapping.optics_jacobian(theta)
    with np.errstate(invalid="ignore"):
        cov = np.einsum("wip,pq,wjq->wij", J, np.nan_to_num(outcome.covariance, posinf=1e300), J)
    cov = np.where(np.isfinite(np.diag(outcome.covariance)).all(), cov, np.where(cov > 1e290, np.inf, cov))
    residual_grid = outcome.residuals.reshape(W, M)
    chi2_w = np.nansum(residual_grid**2, axis=1)
    dof_w = mask.sum(axis=1) - mapping.P / W
    parameters = {}
    csd = np.sqrt(np.diag(outcome.covariance))
    if mapping.basis is not None:
        for k, name in enumerate(constraint.mua_basis_names or [f"spectrum{k}" for k in range(mapping.n_mua)]):
            parameters[f"amount_{name}"] = {"value": float(theta[k]), "sd": float(csd[k])}
    if constraint.musp_power_law:
        i = mapping.n_mua
        a = float(np.exp(theta[i]))
        parameters["musp_power_law"] = {
            "a_per_mm": a, "a_sd_per_mm": float(a * csd[i]), "b": float(theta[i + 1]),
            "b_sd": float(csd[i + 1]), "reference_nm": float(constraint.reference_nm),
        }
    scale = scale_sd = None
    if relative:
        i0 = mapping.n_mua + mapping.n_musp
        scale = np.exp(log_scale)
        scale_sd = scale * csd[i0:]
    corr = cov[:, 0, 1] / np.sqrt(cov[:, 0, 0] * cov[:, 1, 1])
    with np.errstate(invalid="ignore", divide="ignore"):
        chi2_red_w = np.where(dof_w > 0, chi2_w / np.maximum(dof_w, 1e-12), np.nan)
    return dict(mua=mua, musp=musp, cov=cov, chi2=np.array([outcome.chi2]), dof=np.array([outcome.dof]),
                chi2_red_w=chi2_red_w, residuals=residual_grid, scale=scale, scale_sd=scale_sd,
                parameters=parameters, correlation=corr, converged=np.full(W, bool(outcome.success)))
