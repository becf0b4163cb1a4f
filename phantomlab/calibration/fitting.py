"""The fitting framework shared by every inverse fit (layer 3).

Weighted non-linear least squares with :func:`scipy.optimize.least_squares`; the covariance
of the parameters from the Jacobian at the solution, C = (JᵀJ)⁻¹ for residuals already
divided by their SDs (Press et al. 1992, *Numerical Recipes*, 2nd ed., sec. 15.5, eq.
15.5.15), scaled by the reduced χ² when the data carry no SDs of their own.  Coefficients
are fitted as natural logarithms (they stay positive, and the problem is better
conditioned); the covariance is carried back to linear units by the delta method,
C_lin = D C_log D with D = diag(x).

Two entry points:

* :func:`fit_blocks` — many independent small problems (one per wavelength), solved as one
  sparse problem so the forward model is called vectorised over all wavelengths at once;
* :func:`fit_joint` — one problem whose parameters are shared across the band (spectral
  constraints).

What every fit returns is :class:`~phantomlab.calibration.fit_result.FitResult`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
from scipy.optimize import least_squares

__all__ = ["BlockOutcome", "JointOutcome", "far_worse_than_data_allow", "with_rows", "fit_blocks", "fit_joint", "finite_jacobian",
           "stacked_jacobian", "step_aware_jacobian", "off_step_covariance", "log_to_linear",
           "propagated_error_covariance"]

#: Relative step of the forward-difference Jacobian in log-parameters.
_STEP = 1e-5
#: A block still running after the last iteration counts as converged if its last accepted
#: step lowered χ² by less than this (the parameters then move by < 0.1 SD).
_SETTLED_CHI2 = 1e-2


@dataclass(frozen=True)
class BlockOutcome:
    """Solution of W independent problems of P parameters each.

    Attributes
    ----------
    x : ndarray, shape (W, P)
        Parameters at the solution (in the fitted, e.g. log, space).
    covariance : ndarray, shape (W, P, P)
        Covariance of ``x`` (inf on the diagonal where the data do not determine a parameter).
    residuals : ndarray, shape (W, M)
        Normalised residuals (model − data)/SD at the solution; NaN where no data.
    chi2 : ndarray, shape (W,)
    dof : ndarray, shape (W,)
        Number of data points minus number of parameters.
    chi2_red : ndarray, shape (W,)
        χ²/dof (NaN where dof ≤ 0).
    success : bool
        Every block converged (see ``settled``).
    nfev : int
    settled : ndarray of bool (W,) or None
        Per block: met its stopping rule, or its last step changed χ² by less than a
        hundredth (the parameters then move by under a tenth of their SD).
    jacobian : ndarray (W, M, P) or None
        Jacobian of the normalised residuals at the solution (zero where no data), the one
        ``covariance`` comes from: callers that propagate other errors reuse it.
    """

    x: np.ndarray
    covariance: np.ndarray
    residuals: np.ndarray
    chi2: np.ndarray
    dof: np.ndarray
    chi2_red: np.ndarray
    success: bool
    nfev: int
    settled: np.ndarray | None = None
    jacobian: np.ndarray | None = None


#: A block's χ² this many SDs of the χ² distribution (√(2 dof)) above its mean (dof) marks a
#: solution far worse than its data allow (a far basin of a rough objective): 4 SD is passed
#: by chance about once in 10⁴ blocks at 100 degrees of freedom (common practice, no source).
FAR_ABOVE_EXPECTATION_SD = 4.0


def far_worse_than_data_allow(chi2, dof) -> np.ndarray:
    """Blocks whose χ² lies more than :data:`FAR_ABOVE_EXPECTATION_SD` SDs above the χ² mean, (W,) bool."""
    chi2 = np.asarray(chi2, float)
    dof = np.maximum(np.asarray(dof, float), 1.0)
    with np.errstate(invalid="ignore"):
        return np.isfinite(chi2) & (chi2 > dof + FAR_ABOVE_EXPECTATION_SD * np.sqrt(2.0 * dof))


def with_rows(outcome: BlockOutcome, rows, other: BlockOutcome, other_rows) -> BlockOutcome:
    """``outcome`` with its ``rows`` taken from ``other``'s ``other_rows`` (every per-block field)."""
    from dataclasses import replace

    def put(mine, theirs):
        if mine is None or theirs is None:
            return mine
        merged = np.array(mine, copy=True)
        merged[rows] = np.asarray(theirs)[other_rows]
        return merged

    return replace(outcome, x=put(outcome.x, other.x), covariance=put(outcome.covariance, other.covariance),
                   residuals=put(outcome.residuals, other.residuals), chi2=put(outcome.chi2, other.chi2),
                   dof=put(outcome.dof, other.dof), chi2_red=put(outcome.chi2_red, other.chi2_red),
                   settled=put(outcome.settled, other.settled), jacobian=put(outcome.jacobian, other.jacobian),
                   nfev=outcome.nfev + other.nfev)


@dataclass(frozen=True)
class JointOutcome:
    """Solution of one problem of P parameters: ``x`` (P,), ``covariance`` (P, P), and the rest."""

    x: np.ndarray
    covariance: np.ndarray
    residuals: np.ndarray
    chi2: float
    dof: int
    chi2_red: float
    success: bool
    nfev: int


def _masked(residual_fn: Callable[[np.ndarray], np.ndarray], mask: np.ndarray):
    def wrapped(x):
        r = np.asarray(residual_fn(x), dtype=float)
        return np.where(mask, r, 0.0)

    return wrapped


def _inside(x, lo, hi):
    """Clip a starting point strictly inside finite bounds."""
    span = np.where(np.isfinite(hi - lo), hi - lo, 1.0)
    with np.errstate(invalid="ignore"):
        low = np.where(np.isfinite(lo), lo + 1e-9 * span, -np.inf)
        high = np.where(np.isfinite(hi), hi - 1e-9 * span, np.inf)
    return np.clip(x, low, high)


def propagated_error_covariance(jacobian: np.ndarray, error: np.ndarray, correlation: np.ndarray) -> np.ndarray:
    """Covariance of the fitted parameters from a model error, (P, P).

    A model error δμ moves the normalised residuals by e = δμ/σ and the least-squares solution
    by δx = −(JᵀJ)⁻¹Jᵀe (linearised at the fit); with e of SDs ``error`` and correlation
    ``correlation``, Cov(δx) = G (e eᵀ ∘ C) Gᵀ, G = (JᵀJ)⁻¹Jᵀ.

    Parameters
    ----------
    jacobian : ndarray (M, P)
        Jacobian of the normalised residuals at the fit (rows used only).
    error : ndarray (M,)
        SD of the model error of each residual, in the residuals' units.
    correlation : ndarray (M, M)
        Correlation of those errors.
    """
    j = np.asarray(jacobian, float)
    try:
        gain = np.linalg.solve(j.T @ j, j.T)
    except np.linalg.LinAlgError:
        gain = np.linalg.pinv(j.T @ j) @ j.T
    e = np.asarray(error, float)
    return gain @ (e[:, None] * correlation * e[None, :]) @ gain.T


def finite_jacobian(residual_fn: Callable[[np.ndarray], np.ndarray], x: np.ndarray) -> np.ndarray:
    """Forward-difference Jacobian of a block residual function.

    Parameters
    ----------
    residual_fn : callable
        Maps parameters of shape (W, P) to residuals of shape (W, M).
    x : ndarray, shape (W, P)

    Returns
    -------
    ndarray, shape (W, M, P)
    """
    base = residual_fn(x)
    jac = np.empty(base.shape + (x.shape[1],))
    for p in range(x.shape[1]):
        step = _STEP * np.maximum(1.0, np.abs(x[:, p]))
        shifted = x.copy()
        shifted[:, p] += step
        jac[:, :, p] = (residual_fn(shifted) - base) / step[:, None]
    return jac


def stacked_jacobian(row_fn: Callable[[np.ndarray, np.ndarray], np.ndarray], x: np.ndarray, rows: np.ndarray,
                     base: np.ndarray, sign: float = 1.0) -> np.ndarray:
    """:func:`finite_jacobian` of a row-aware residual function in one call.

    The P forward steps of every block go to ``row_fn`` together, as P·W rows (``rows``
    repeated): a forward model vectorised over rows pays its fixed cost per call once instead
    of P times.  The steps and the differences are those of :func:`finite_jacobian`.

    Parameters
    ----------
    row_fn : callable
        ``row_fn(x_rows, rows)`` → residuals (len(rows), M); rows may repeat.
    x : ndarray, shape (W, P)
    rows : ndarray of int, shape (W,)
    base : ndarray, shape (W, M)
        ``row_fn(x, rows)``, already known to the caller.
    sign : float
        +1 forward differences, −1 backward.

    Returns
    -------
    ndarray, shape (W, M, P)
    """
    W, P = x.shape
    step = sign * _STEP * np.maximum(1.0, np.abs(x))  # (W, P)
    shifted = np.repeat(x[None, :, :], P, axis=0)  # (P, W, P)
    shifted[np.arange(P), :, np.arange(P)] += step.T
    moved = np.asarray(row_fn(shifted.reshape(P * W, P), np.tile(rows, P)), dtype=float).reshape(P, W, -1)
    return np.moveaxis((moved - base[None]) / step.T[:, :, None], 0, 2)


#: A Jacobian column whose forward and backward differences differ by more than this factor
#: spans a step of the model, not its curvature: a smooth model's one-sided differences
#: agree to O(step × curvature), about 1e-4 of the column at the steps used here.
STEP_DISAGREEMENT = 10.0


def step_aware_jacobian(row_fn: Callable[[np.ndarray, np.ndarray], np.ndarray], x: np.ndarray, base: np.ndarray,
                        forward: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """The Jacobian at a solution with each column that spans a step of the model taken from its smooth side.

    A model with a jump (a table read up to the edge of its data, say) can hold a
    least-squares solution right at the jump: a forward difference across it is the jump over
    the step, enormous, and (JᵀJ)⁻¹ then claims a tiny variance.  The backward differences
    are formed too (one call, :func:`stacked_jacobian`); where a column's two sides differ by
    more than :data:`STEP_DISAGREEMENT` (in norm) the smaller one, the smooth side's
    derivative, is kept.

    Parameters
    ----------
    row_fn : callable
        ``row_fn(x_rows, rows)`` → residuals, zero where there are no data (rows may repeat).
    x : ndarray (W, P)
    base : ndarray (W, M)
        The residuals at ``x`` (zero where no data).
    forward : ndarray (W, M, P)
        The forward-difference Jacobian at ``x``.

    Returns
    -------
    (ndarray (W, M, P), ndarray of bool (W, P))
        The Jacobian, and which columns were taken across a step.
    """
    W = x.shape[0]
    backward = stacked_jacobian(row_fn, x, np.arange(W), base, sign=-1.0)
    size_forward = np.sqrt(np.sum(forward**2, axis=1))  # (W, P)
    size_backward = np.sqrt(np.sum(backward**2, axis=1))
    larger, smaller = np.maximum(size_forward, size_backward), np.minimum(size_forward, size_backward)
    stepped = np.isfinite(larger) & (larger > STEP_DISAGREEMENT * smaller)
    keep_backward = stepped & (size_backward < size_forward)
    return np.where(keep_backward[:, None, :], backward, forward), stepped


def off_step_covariance(residual_fn: Callable[[np.ndarray, np.ndarray], np.ndarray], outcome: "BlockOutcome",
                        mask: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """A row-aware fit's Jacobian and covariance at its solution, each step of the model taken from its smooth side.

    Parameters
    ----------
    residual_fn : callable
        The fit's ``residual_fn(x_rows, rows)`` (rows may repeat).
    outcome : BlockOutcome
        Its outcome (``jacobian`` the forward differences at ``x``).
    mask : ndarray of bool (W, M)

    Returns
    -------
    (jacobian (W, M, P), covariance (W, P, P), stepped (W, P) bool)
        See :func:`step_aware_jacobian`; rows with a step get (JᵀJ)⁻¹ of the smooth side.
    """
    jacobian, stepped = step_aware_jacobian(lambda x_rows, rows: np.where(mask[rows], residual_fn(x_rows, rows), 0.0),
                                            outcome.x, np.where(mask, np.nan_to_num(outcome.residuals), 0.0),
                                            outcome.jacobian)
    covariance = outcome.covariance
    on_step = np.flatnonzero(stepped.any(axis=1))
    if on_step.size:
        covariance = covariance.copy()
        covariance[on_step] = _invert_normal(jacobian[on_step])
    return jacobian, covariance, stepped


def _invert_normal(jac: np.ndarray) -> np.ndarray:
    """Batched (JᵀJ)⁻¹ with inf where the normal matrix is singular.

    Well-conditioned blocks (condition number ≤ 1e14, from the eigenvalues of the symmetric
    normal matrix) are inverted together; the others one by one with the pseudo-inverse.
    """
    normal = np.einsum("wmp,wmq->wpq", jac, jac)
    out = np.empty_like(normal)
    finite = np.all(np.isfinite(normal), axis=(1, 2))
    eig = np.full(normal.shape[:2], np.nan)
    if finite.any():
        eig[finite] = np.linalg.eigvalsh(normal[finite])
    with np.errstate(divide="ignore", invalid="ignore"):
        cond = np.abs(eig).max(axis=1) / np.abs(eig).min(axis=1)
    good = finite & np.isfinite(cond) & (cond <= 1e14)
    if good.any():
        out[good] = np.linalg.inv(normal[good])
    for w in np.where(~good)[0]:
        matrix = normal[w]
        inverse = np.linalg.pinv(np.nan_to_num(matrix))
        diag = np.diag(matrix)
        # a parameter with (near) no information gets an infinite variance
        values = eig[w] if np.all(np.isfinite(eig[w])) else np.linalg.eigvalsh(np.nan_to_num(matrix))
        if np.abs(values).min() <= 1e-14 * max(np.nanmax(np.abs(diag)) if np.any(np.isfinite(diag)) else 0.0,
                                                1e-300) or not np.all(np.isfinite(matrix)):
            inverse = inverse.copy()
            np.fill_diagonal(inverse, np.inf)
        out[w] = inverse
    return out


def fit_blocks(
    residual_fn: Callable[[np.ndarray], np.ndarray],
    x0: np.ndarray,
    *,
    mask: np.ndarray,
    lower: np.ndarray | float = -np.inf,
    upper: np.ndarray | float = np.inf,
    scale_by_chi2: bool = False,
    max_nfev: int | None = None,
    row_aware: bool = False,
    tolerance: float = 1e-9,
    step_tolerance: float = 1e-7,
) -> BlockOutcome:
    """Solve W independent least-squares problems at once.

    Parameters
    ----------
    residual_fn : callable
        Maps parameters (W, P) to normalised residuals (W, M): (model − data)/SD.
    x0 : ndarray, shape (W, P)
        Starting point.
    mask : ndarray of bool, shape (W, M)
        True where a data point exists.
    lower, upper : float or array broadcastable to (W, P)
        Bounds.
    scale_by_chi2 : bool
        Multiply each block's covariance by its reduced χ² (data without SDs of their own).
    max_nfev : int, optional
        Most Levenberg–Marquardt iterations.
    row_aware : bool
        ``residual_fn(x_rows, rows)`` evaluates only the given rows (blocks): then only the
        wavelengths still converging cost forward-model calls.
    tolerance, step_tolerance : float
        A block stops when a step lowers its cost by less than ``tolerance`` (relative) and
        moves no parameter by more than ``step_tolerance``.

    Returns
    -------
    BlockOutcome

    Notes
    -----
    Handing the W problems to ``scipy.optimize.least_squares`` as one sparse problem makes
    them share one trust region and one stopping rule (slow, and some wavelengths stop
    early); they are solved instead by a batched Levenberg–Marquardt with a damping factor
    per wavelength, every forward call vectorised over all wavelengths.  The covariance is
    (JᵀJ)⁻¹ at the solution, as for :func:`fit_joint`.

    References
    ----------
    Marquardt DW 1963, J Soc Ind Appl Math 11:431 (damped Gauss–Newton steps).
    """
    x0 = np.atleast_2d(np.asarray(x0, dtype=float))
    W, P = x0.shape
    mask = np.asarray(mask, dtype=bool)
    lo = np.broadcast_to(np.asarray(lower, dtype=float), (W, P))
    hi = np.broadcast_to(np.asarray(upper, dtype=float), (W, P))
    if row_aware:
        def row_fn(x_rows, rows):
            return np.where(mask[rows], np.asarray(residual_fn(x_rows, rows), dtype=float), 0.0)

        def block_fn(x_all):  # the full evaluation for the covariance
            return row_fn(x_all, np.arange(W))
    else:
        block_fn = _masked(residual_fn, mask)

        def row_fn(x_rows, rows):
            full = np.array(x_start, copy=True)
            full[rows] = x_rows
            return block_fn(full)[rows]
    x_start = _inside(x0, lo, hi)
    x, at_solution, nfev, settled = _batched_levenberg_marquardt(
        row_fn, x_start, lo, hi, max_iterations=max_nfev or 60, tolerance=tolerance, step_tolerance=step_tolerance,
        stacked=row_aware)
    jac = (stacked_jacobian(row_fn, x, np.arange(W), at_solution) if row_aware
           else finite_jacobian(block_fn, x))
    covariance = _invert_normal(jac)
    residuals = np.where(mask, at_solution, np.nan)
    chi2 = np.nansum(residuals**2, axis=1)
    dof = mask.sum(axis=1) - P
    with np.errstate(invalid="ignore", divide="ignore"):
        chi2_red = np.where(dof > 0, chi2 / np.maximum(dof, 1), np.nan)
    if scale_by_chi2:
        factor = np.where(np.isfinite(chi2_red), chi2_red, np.inf)
        covariance = covariance * factor[:, None, None]
    return BlockOutcome(
        x=x, covariance=covariance, residuals=residuals, chi2=chi2, dof=dof,
        chi2_red=chi2_red, success=bool(np.all(settled)), nfev=nfev, settled=settled, jacobian=jac,
    )


def _batched_levenberg_marquardt(row_fn, x, lo, hi, *, max_iterations=60, tolerance=1e-9, step_tolerance=1e-7,
                                 stacked=False):
    """Levenberg–Marquardt on W independent problems at once, each with its own damping.

    Steps solve (JᵀJ + λ diag(JᵀJ)) δ = −Jᵀr per block (Marquardt 1963), are projected onto
    the bounds, accepted where the cost falls (λ /= 3) and refused elsewhere (λ *= 4);
    a block stops when its relative cost change falls below ``tolerance`` and its step below
    ``step_tolerance``, or when a refused step would change its cost by less than ``tolerance``.
    ``row_fn(x_rows, rows)`` evaluates only the blocks still running; with ``stacked`` (rows may
    repeat) the Jacobian's P steps go to it in one call (:func:`stacked_jacobian`).

    Returns (x, r, nfev, settled): r the residuals at x (W, M); settled (W,) is False where a block ran out of iterations while
    its last accepted step still lowered its χ² by more than :data:`_SETTLED_CHI2` (times
    its mean square residual, for data without SDs); a smaller change moves the parameters
    by well under a tenth of their SD (in a quadratic valley Δχ² = (δ/σ)²), so such a block
    has settled for every purpose of the fit even if not to ``tolerance``.
    """
    W, P = x.shape
    x = x.copy()
    everything = np.arange(W)
    r = row_fn(x, everything)
    cost = np.sum(r**2, axis=1)
    lam = np.full(W, 1e-3)
    active = np.ones(W, bool)
    last_drop = np.full(W, np.inf)
    nfev = 1
    identity = np.eye(P)[None]  # the damping's diagonal, built once
    for _ in range(max_iterations):
        rows = np.flatnonzero(active)
        if rows.size == 0:
            break
        xa, ra = x[rows], r[rows]
        if stacked:  # the steps in one call, from the residuals already known
            jac = stacked_jacobian(row_fn, xa, rows, ra)
        else:
            jac = finite_jacobian(lambda xx: row_fn(xx, rows), xa)
        nfev += P
        grad = np.einsum("wmp,wm->wp", jac, ra)
        normal = np.einsum("wmp,wmq->wpq", jac, jac)
        diag = np.maximum(np.diagonal(normal, axis1=1, axis2=2), 1e-12)
        pending = np.ones(rows.size, bool)  # rows still looking for an accepted step
        for _inner in range(8):
            sub = rows[pending]
            damped = normal[pending] + (lam[sub][:, None] * diag[pending])[:, :, None] * identity
            try:
                step = -np.linalg.solve(damped, grad[pending][..., None])[..., 0]
            except np.linalg.LinAlgError:
                step = -np.einsum("wpq,wq->wp", np.linalg.pinv(damped), grad[pending])
            # nan_to_num costs more than the rest of the step: only where a step is not finite;
            # the array methods below (.clip, .sum, .max, .any) are numpy's functions without
            # their dispatch, which cost more than the arithmetic on these small blocks
            trial = (x[sub] + (step if np.isfinite(step).all() else np.nan_to_num(step))).clip(lo[sub], hi[sub])
            r_trial = row_fn(trial, sub)
            nfev += 1
            cost_trial = (r_trial**2).sum(axis=1)
            better = np.isfinite(cost_trial) & (cost_trial <= cost[sub])
            change = np.abs(cost[sub] - cost_trial) / np.maximum(cost[sub], 1e-300)
            moved = np.abs(trial - x[sub]).max(axis=1)
            # converged: an accepted step that changes little, or a refused one whose cost differs
            # from the current by less than the tolerance (no decrease left to find)
            done = (change < tolerance) & ((better & (moved < step_tolerance)) | ~better)
            accepted = sub[better]
            last_drop[accepted] = (cost[sub] - cost_trial)[better]
            x[accepted] = trial[better]
            r[accepted] = r_trial[better]
            cost[accepted] = cost_trial[better]
            lam[accepted] = np.maximum(lam[accepted] / 3.0, 1e-12)
            refused = sub[~better]
            lam[refused] *= 4.0
            active[sub[done]] = False
            active[refused[lam[refused] > 1e10]] = False
            still = pending.copy()
            still[pending] = ~better & (lam[sub] <= 1e10)
            pending = still
            if not pending.any():
                break
    unit = np.maximum(1.0, cost / max(r.shape[1], 1))
    return x, r, nfev, ~(active & (last_drop > _SETTLED_CHI2 * unit))


def fit_joint(
    residual_fn: Callable[[np.ndarray], np.ndarray],
    x0: np.ndarray,
    *,
    lower: np.ndarray | float = -np.inf,
    upper: np.ndarray | float = np.inf,
    scale_by_chi2: bool = False,
    jac_sparsity=None,
    max_nfev: int | None = None,
) -> JointOutcome:
    """Solve one weighted least-squares problem with shared parameters.

    Parameters
    ----------
    residual_fn : callable
        Maps parameters (P,) to normalised residuals of any shape (NaN entries are ignored).
    x0 : ndarray, shape (P,)
    lower, upper : float or ndarray (P,)
    scale_by_chi2 : bool
        Multiply the covariance by the reduced χ².
    jac_sparsity : optional
        Passed to ``least_squares`` (for many parameters with local influence).

    Returns
    -------
    JointOutcome
    """
    x0 = np.asarray(x0, dtype=float).ravel()
    P = x0.size
    probe = np.asarray(residual_fn(x0), dtype=float).ravel()
    mask = np.isfinite(probe)

    def flat(x):
        r = np.asarray(residual_fn(x), dtype=float).ravel()
        return np.where(mask, np.nan_to_num(r, nan=0.0), 0.0)

    lo = np.broadcast_to(np.asarray(lower, dtype=float), (P,))
    hi = np.broadcast_to(np.asarray(upper, dtype=float), (P,))
    start = _inside(x0, lo, hi)
    result = least_squares(
        flat, start, bounds=(lo, hi), method="trf", x_scale="jac",
        jac_sparsity=jac_sparsity, tr_solver="lsmr" if jac_sparsity is not None else None,
        max_nfev=max_nfev or 100 * P, xtol=1e-10, ftol=1e-10, gtol=1e-10,
    )
    x = result.x
    jac = finite_jacobian(lambda xx: flat(xx[0])[None, :], x[None, :])
    covariance = _invert_normal(jac)[0]
    residuals = np.where(mask, flat(x), np.nan)
    chi2 = float(np.nansum(residuals**2))
    dof = int(mask.sum() - P)
    chi2_red = chi2 / dof if dof > 0 else float("nan")
    if scale_by_chi2:
        covariance = covariance * (chi2_red if np.isfinite(chi2_red) else np.inf)
    return JointOutcome(
        x=x, covariance=covariance, residuals=residuals, chi2=chi2, dof=dof,
        chi2_red=chi2_red, success=bool(result.success), nfev=int(result.nfev),
    )


def log_to_linear(x_log: np.ndarray, cov_log: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Delta method: values exp(x) and covariance D C D with D = diag(exp(x)), batched."""
    values = np.exp(x_log)
    with np.errstate(invalid="ignore"):
        cov = cov_log * values[..., :, None] * values[..., None, :]
    return values, cov
