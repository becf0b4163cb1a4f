"""What the diffusion models' known error does to fitted μa and μs′ (layer 3).

The transport layer holds measured maps of ε = R_diffusion/R_MonteCarlo − 1
(:mod:`phantomlab.transport.diffusion_error`).  A diffusion fit of data that follow the true
transport (Monte Carlo) lands off the truth θ* by a bias b that depends on ε over the points
fitted, on their SDs and on the design.  It is found in two steps:

1. to first order (weighted least squares, Jacobian J of the normalised residuals in
   ln μa, ln μs′ [, ln scale]) b ≈ −(JᵀJ)⁻¹ Jᵀ r with r = ε/(1 + ε) · R_diffusion/σ, since at
   the truth the diffusion model exceeds the data by R ε/(1 + ε) (the bias of a misspecified
   least-squares fit; White 1981, J Am Stat Assoc 76:419; Seber & Wild 1989, *Nonlinear
   Regression*, sec. 12.2); evaluated at the fit θ̂ it gives the truth θ* ≈ θ̂ − b, and
   evaluated again at θ* the bias.  On the Monte Carlo fixtures (absolute data) this
   predicts the bias of every case within 0.1 in ln μa (+9 % predicted against +10 % found
   at μs′/μa = 100, +60 % against +80 % at 1000);
2. relative data: noise-free data are made from the map at θ*, R_diffusion(θ*)/(1 + ε), on
   the same points with the same SDs, and fitted as the data were; b = θ̂(made) − θ*.  Their
   χ² valley along (μa, μs′, scale) is curved, and the first-order step can miss a shape
   error's effect on μs′ by a factor of ten there (short probe, μs′/μa = 30: −1 % predicted,
   −10 % found; the refit: −10 %).

The map's own uncertainty — how ε moves with g (0.7–0.9) and its Monte Carlo noise — is
carried the same way, as two more made-up data sets (ε + g_sd, ε + noise_sd; the three are
fitted in one batched call).  The model-error covariance in ln parameters is

    C_model = b bᵀ + b_g b_gᵀ + b_noise b_noiseᵀ,

carried to linear units by the delta method with the fitted values (as the statistical
covariance).  It is added to the fit's SDs (by :func:`phantomlab.calibration.fit_quality.assess_fit`)
and its square root, the expected error, is what the warnings state wherever it exceeds
:data:`WARN_EXPECTED_ERROR` (5 %).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np

from phantomlab.calibration.spectral import MUA_BOUNDS_PER_MM, MUSP_BOUNDS_PER_MM
from phantomlab.errors import PhantomlabWarning
from phantomlab.transport.diffusion_error import sfdi_diffusion_error, srdr_diffusion_error

__all__ = ["WARN_EXPECTED_ERROR", "FitModelError", "diffusion_fit_error", "diffusion_error_warnings"]

#: A diffusion fit warns where the expected error (model-error SD) of μa or μs′ exceeds this.
WARN_EXPECTED_ERROR = 0.05
_STEP = 1e-5
_LOG_LOWER = np.log([MUA_BOUNDS_PER_MM[0], MUSP_BOUNDS_PER_MM[0]])
_LOG_UPPER = np.log([MUA_BOUNDS_PER_MM[1], MUSP_BOUNDS_PER_MM[1]])


@dataclass(frozen=True)
class FitModelError:
    """The diffusion model's error carried to the fitted coefficients, per wavelength.

    Attributes
    ----------
    model : str
    bias : ndarray (W, 2)
        Expected ln(fitted/true) of (μa, μs′).
    expected_error : ndarray (W, 2)
        √ of the diagonal of ``covariance_log``: the relative error the model adds.
    covariance_log : ndarray (W, 2, 2)
        In (ln μa, ln μs′).
    covariance : ndarray (W, 2, 2) [1/mm²]
        In (μa, μs′), by the delta method at the fitted values.
    outside : ndarray of bool (W,)
        The data reach outside the measured map (nearest values used).
    """

    model: str
    bias: np.ndarray
    expected_error: np.ndarray
    covariance_log: np.ndarray
    covariance: np.ndarray
    outside: np.ndarray


def _shift(J, mask, shape_r):
    """−(JᵀJ)⁻¹ Jᵀ r per wavelength over the used points, (W, P)."""
    r = np.where(mask, np.nan_to_num(shape_r), 0.0)
    Jm = np.where(mask[..., None], J, 0.0)
    normal = np.einsum("wmp,wmq->wpq", Jm, Jm)
    rhs = np.einsum("wmp,wm->wp", Jm, r)
    try:
        return -np.linalg.solve(normal, rhs[..., None])[..., 0]
    except np.linalg.LinAlgError:  # a singular block: pseudo-inverses, block by block
        return -np.einsum("wpq,wq->wp", np.linalg.pinv(normal), rhs)


def diffusion_fit_error(*, kind: str, model: str, forward, axis, n: float, n_outside: float, result,
                        data, sd, relative: bool) -> FitModelError:
    """The known error of a diffusion model carried to the fitted μa and μs′.

    Parameters
    ----------
    kind : {'srdr', 'sfdi'}
    model : str
        ``kienle1997``, ``farrell1992`` (srdr) or ``cuccia2009`` (sfdi).
    forward : callable
        The fit's ``forward(mua (N,), musp (N,)) -> (N, M)``.
    axis : array (M,)
        Distances [mm] (srdr) or spatial frequencies [1/mm] (sfdi).
    n, n_outside : float
    result : FitResult
        The fit; its residuals say which points were used (NaN: left out).
    data, sd : ndarray (W, M) or sd None
        The data and their SDs as fitted (None: relative weights |data|, as the fit used).
    relative : bool
        Data with an unknown scale per wavelength (fitted as a third parameter).

    Returns
    -------
    FitModelError
    """
    mua = np.asarray(result.mua_per_mm, float)
    musp = np.asarray(result.musp_per_mm, float)
    data = np.asarray(data, float)
    sigma = np.abs(data) if sd is None else np.asarray(sd, float)
    mask = np.isfinite(np.asarray(result.residuals, float)) & np.isfinite(sigma) & (sigma > 0) & np.isfinite(data)
    sigma = np.where(mask, sigma, 1.0)
    scale = (np.asarray(result.scale_factor, float) if relative and result.scale_factor is not None
             else np.ones(mua.size))
    lookup = srdr_diffusion_error if kind == "srdr" else sfdi_diffusion_error
    axis_name = "rho_mm" if kind == "srdr" else "fx_per_mm"
    fitted = np.log(np.column_stack([mua, musp]))
    with warnings.catch_warnings(), np.errstate(all="ignore"):
        warnings.simplefilter("ignore", PhantomlabWarning)

        def evaluate(theta):
            a, s = np.exp(theta[:, 0]), np.exp(theta[:, 1])
            error = lookup(model=model, mua_per_mm=a, musp_per_mm=s, n=n, n_outside=n_outside, **{axis_name: axis})
            return error, np.asarray(forward(a, s), float) * scale[:, None]

        def linear_shifts(theta):
            """b, b_g, b_noise to first order at θ (White 1981), and the map there."""
            error, base = evaluate(theta)
            columns = []
            for p in range(2):
                step = np.zeros_like(theta)
                step[:, p] = _STEP
                columns.append((evaluate_forward(forward, theta + step) * scale[:, None] - base) / _STEP)
            if relative:
                columns.append(base)
            J = np.stack(columns, axis=-1) / sigma[..., None]
            over = base / sigma
            return ([_shift(J, mask, shape * over)[:, :2]
                     for shape in (error.eps / (1.0 + error.eps), error.g_sd, error.noise_sd)], error)

        def inside(theta):
            """A truth estimate held inside the fit's own bounds (a row the data hardly
            determine can have a first-order bias of any size)."""
            return np.clip(np.nan_to_num(theta), _LOG_LOWER, _LOG_UPPER)

        # the first-order bias at the fit gives the truth to start from; evaluated again there
        (linear, _, _), error = linear_shifts(fitted)
        truth = inside(fitted - np.nan_to_num(linear))
        (bias, b_g, b_noise), error = linear_shifts(truth)
        if relative:
            # a curved valley answers a shape error non-linearly: the bias by refitting
            # noise-free data made from the map at that truth (ε, and ε moved by its g and
            # noise uncertainty), on the same points with the same SDs, as the data were fitted
            truth = inside(fitted - np.nan_to_num(bias))
            error, base = evaluate(truth)
            W = truth.shape[0]
            made = np.concatenate([base / (1.0 + error.eps), base / (1.0 + error.eps + error.g_sd),
                                   base / (1.0 + error.eps + error.noise_sd)])
            refit = _refit(forward, made, np.tile(sigma, (3, 1)), np.tile(mask, (3, 1)), relative,
                           np.tile(fitted, (3, 1)))
            ok = np.all(np.isfinite(refit.reshape(3, W, 2)), axis=(0, 2))
            bias = np.where(ok[:, None], refit[:W] - truth, bias)
            b_g = np.where(ok[:, None], refit[W:2 * W] - refit[:W], b_g)
            b_noise = np.where(ok[:, None], refit[2 * W:] - refit[:W], b_noise)
    terms = [np.nan_to_num(v) for v in (bias, b_g, b_noise)]
    cov_log = sum(np.einsum("wi,wj->wij", t, t) for t in terms)
    values = np.exp(fitted)
    cov = cov_log * values[:, :, None] * values[:, None, :]
    expected = np.sqrt(np.diagonal(cov_log, axis1=1, axis2=2))
    return FitModelError(model=model, bias=bias, expected_error=expected, covariance_log=cov_log,
                         covariance=cov, outside=np.asarray(error.outside, bool))


def evaluate_forward(forward, theta):
    """forward at log parameters (N, 2)."""
    return np.asarray(forward(np.exp(theta[:, 0]), np.exp(theta[:, 1])), float)


def _refit(forward, data, sd, mask, relative, start):
    """ln(μa, μs′) fitted to noise-free data on the same points with the same weights."""
    from phantomlab.calibration.spectral import fit_spectrum

    rows = data.shape[0]
    result, _ = fit_spectrum(forward, kind="model-error", model="refit", wavelength_nm=np.arange(rows, dtype=float),
                             data=np.where(mask, data, np.nan), sd=sd, relative=relative,
                             start=(np.exp(start[:, 0]), np.exp(start[:, 1])), mask=mask, profile_sd=False)
    return np.log(np.column_stack([result.mua_per_mm, result.musp_per_mm]))


def _percent(value: float, *, sign: bool = False) -> str:
    """A percentage with two significant digits, never in exponent form."""
    digits = 0 if abs(value) >= 10 else 1
    return f"{value:{'+' if sign else ''}.{digits}f}"


def diffusion_error_warnings(error: FitModelError, *, kind: str, wavelength_nm) -> list[str]:
    """One-line warnings where the expected error exceeds 5 %, and where the map was left.

    The expected error is stated with the bias it comes from, e.g. "mua expected error 31 %
    (bias +28 %)".
    """
    from phantomlab.calibration.identifiability import _bands

    wl = np.asarray(wavelength_nm)
    messages = []
    large = np.any(error.expected_error > WARN_EXPECTED_ERROR, axis=1)
    if np.any(large):
        parts = []
        for p, name in enumerate(("mua", "musp")):
            expected = error.expected_error[large, p]
            worst = int(np.nanargmax(expected))
            bias = 100.0 * np.expm1(error.bias[large, p][worst])
            parts.append(f"{name} up to {_percent(100 * expected[worst])} % (bias {_percent(bias, sign=True)} %)")
        messages.append(
            f"diffusion model {error.model} against Monte Carlo (measured error map): expected error of the fitted "
            f"{' and '.join(parts)} at {_bands(wl, large)}; the SDs include it; the Monte Carlo lookup "
            f"(model mc) has no such error")
    if np.any(error.outside):
        reach = ("musp/mua 2-3000, n/n_outside 1-1.5 and rho*musp up to 100" if kind == "srdr"
                 else "musp/mua 2-3000, n/n_outside 1-1.5 and fx/musp up to 1")
        messages.append(
            f"the diffusion error map covers {reach}; at {_bands(wl, error.outside)} the fit lies outside it and "
            f"the nearest measured error was used")
    return messages
