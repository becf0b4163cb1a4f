"""Dose solver: non-negative, bounded least squares in relative error (layer 3).

The unknowns are the volume fractions ``f_i`` of the undiluted stocks in the final mix.  The
model (:mod:`phantomlab.recipe.mixmodel`) is linear in ``f``, so every target point gives one
linear row, scaled so that the residual is the relative error divided by the tolerance:

* μa row at λ:   (μa_m + Σ f_i (p_i a_i − μa_m) − μa_t) · w_a / (tol_a μa_t)
* μs′ row at λ:  (Σ f_i p_i s_i (1 − g_i) − μs′_t) · w_s / (tol_s μs′_t)
* g row at λ:    Σ f_i p_i s_i (g_t − g_i) · w_g / (tol_g μs_t),  μs_t = μs′_t / (1 − g_t)

The g row is ``g_t μs − μs g`` — zero exactly when the mix has anisotropy g_t — and it is
linear in the doses because μs·g is.  Divided by the target μs it is ``(g_t − g) μs/μs_t``,
i.e. the absolute g error (to first order, when μs′ is on target) over its tolerance: a g miss
of one tolerance weighs as much as a μa or μs′ miss of one relative tolerance.

Bounds: ``f_i ≥ 0``; the lab's largest solids fraction ``Σ φ_i f_i ≤ φ_max`` (φ_i the particle
volume fraction inside stock i); the additions cannot exceed the batch, ``Σ f_i ≤ 1``.  The
problem without the two sum constraints is solved by bounded-variable least squares
(``scipy.optimize.lsq_linear``, method ``bvls``: Stark & Parker 1995, Comput Stat 10:129); if
the result breaks a sum constraint, the constrained problem is solved by SLSQP (Kraft 1988,
DFVLR-FB 88-28) from the bounded solution scaled inside the feasible set, and the broken
constraint is reported as the binding limit together with how much the target would need.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import lsq_linear, minimize

from phantomlab.recipe.mixmodel import IntrinsicTable, design_matrices, mix_coefficients
from phantomlab.recipe.targets import Target

__all__ = ["BindingLimit", "SolverOutcome", "solve_fractions", "target_rows"]


@dataclass(frozen=True)
class BindingLimit:
    """A lab or physical limit that keeps the target out of reach.

    Attributes
    ----------
    limit : str
        ``"max_solids_volume_fraction"``, ``"batch_volume"``, ``"matrix_absorption"``,
        ``"max_dilution_steps"``.
    needed, allowed : float
        In the unit of the limit (fractions for the volume limits, 1/mm for absorption,
        steps for dilutions).
    message : str
        One line, e.g. ``"musp at 650 nm needs 7.1 % v/v solids; limit 5 %"``.
    """

    limit: str
    needed: float
    allowed: float
    message: str


@dataclass(frozen=True)
class SolverOutcome:
    """Doses found by :func:`solve_fractions`, with what kept them from the target."""

    volume_fractions: np.ndarray
    unconstrained_volume_fractions: np.ndarray
    binding_limits: tuple
    cost: float


def target_rows(table: IntrinsicTable, target: Target, *, potencies,
                factors=None) -> tuple[np.ndarray, np.ndarray]:
    """Scaled linear rows ``A f ≈ b`` of the relative-error least-squares problem.

    Parameters
    ----------
    table : IntrinsicTable
        On the target's wavelength grid.
    target : Target
    potencies : array (S,)
    factors : (mus_factor, musp_factor) or None
        Dependent-scattering factors on the scattering columns
        (:meth:`~phantomlab.recipe.mixmodel.IntrinsicTable.scattering_factors`); None for
        independent scattering.

    Returns
    -------
    A : ndarray (R, S), b : ndarray (R,)
        One row per targeted (quantity, wavelength), scaled as in the module docstring.
    """
    columns = design_matrices(table, potencies=potencies, factors=factors)
    rows, rhs = [], []
    has = np.isfinite(target.mua_per_mm)
    if np.any(has):
        scale = target.mua_weight / (target.mua_tolerance * target.mua_per_mm[has])
        rows.append(columns["mua"][has] * scale[:, None])
        rhs.append((target.mua_per_mm[has] - table.matrix_mua_per_mm[has]) * scale)
    has = np.isfinite(target.musp_per_mm)
    if np.any(has):
        scale = target.musp_weight / (target.musp_tolerance * target.musp_per_mm[has])
        rows.append(columns["musp"][has] * scale[:, None])
        rhs.append(target.musp_per_mm[has] * scale)
    has = np.isfinite(target.g)
    if np.any(has):
        g_t = target.g[has]
        mus_t = target.g_reference_musp_per_mm[has] / (1.0 - g_t)
        scale = target.g_weight / (target.g_tolerance * mus_t)
        gap = g_t[:, None] * columns["mus"][has] - columns["gmus"][has]
        rows.append(gap * scale[:, None])
        rhs.append(np.zeros(g_t.shape))
    return np.vstack(rows), np.concatenate(rhs)


def solve_fractions(
    table: IntrinsicTable,
    target: Target,
    *,
    potencies,
    max_solids_volume_fraction: float | None = None,
    max_total_volume_fraction: float = 1.0,
    fixed_volume_fractions: dict | None = None,
) -> SolverOutcome:
    """Volume fractions of the stocks that come closest to the target.

    Parameters
    ----------
    table : IntrinsicTable
        Intrinsic optics at potency 1 on the target's wavelength grid.
    target : Target
    potencies : array (S,) [dimensionless]
    max_solids_volume_fraction : float or None [fraction]
        Largest particle volume fraction allowed in the mix (``None``: no limit).
    max_total_volume_fraction : float [fraction]
        Largest sum of stock volume fractions (1: the matrix may be fully displaced).
    fixed_volume_fractions : dict of int to float, optional
        Doses that are given, not solved (stock index → volume fraction; e.g. the blood dose a
        total-haemoglobin target fixes).  Their contribution is taken off the right-hand side
        and off the sum limits; the other doses are solved for what is left.

    Returns
    -------
    SolverOutcome
        ``volume_fractions`` (S,) of the closest feasible recipe; ``binding_limits`` names
        each limit that keeps the target out of reach, with the figure it would need.

    Notes
    -----
    With a dependent-scattering model on the table (``table.packing``), the scattering
    columns carry the factors of the doses (the packing factor W(φ), or each stock's
    angular factors); they are iterated to a fixed point (solve with them, recompute them
    from the new doses) until none changes by more than 1e-9, at most
    :data:`PACKING_ITERATIONS` times.
    """
    fixed = dict(fixed_volume_fractions or {})
    if table.packing == "none":
        return _solve_once(table, target, potencies, max_solids_volume_fraction, max_total_volume_fraction, None,
                           fixed)
    factors = (np.ones(table.mus_per_mm.shape), np.ones(table.mus_per_mm.shape))
    for _ in range(PACKING_ITERATIONS):
        outcome = _solve_once(table, target, potencies, max_solids_volume_fraction, max_total_volume_fraction, factors,
                              fixed)
        updated = table.scattering_factors(outcome.volume_fractions)
        change = max(float(np.max(np.abs(new - old))) for new, old in zip(updated, factors))
        factors = updated
        if change < 1e-9:
            break
    return outcome


#: Most fixed-point steps on the packing factor (each a full solve); W converges in a few
#: steps below φ ≈ 0.3 (tests/recipe/test_dependent_scattering.py).
PACKING_ITERATIONS = 50


def _solve_once(table, target, potencies, max_solids_volume_fraction, max_total_volume_fraction,
                factors, fixed=None) -> SolverOutcome:
    A_all, b_all = target_rows(table, target, potencies=potencies, factors=factors)
    total = A_all.shape[1]
    given = np.zeros(total)
    is_fixed = np.zeros(total, dtype=bool)
    for index, value in (fixed or {}).items():
        given[index], is_fixed[index] = float(value), True
    A, b = A_all[:, ~is_fixed], b_all - A_all[:, is_fixed] @ given[is_fixed]
    count = A.shape[1]

    def full(free_part):
        out = given.copy()
        out[~is_fixed] = free_part
        return out

    if count:
        free = lsq_linear(A, b, bounds=(np.zeros(count), np.full(count, np.inf)), method="bvls", tol=1e-12)
        unconstrained_free = np.clip(free.x, 0.0, None)
    else:
        unconstrained_free = np.zeros(0)
    solids = table.solids_volume_fraction
    constraints = []  # (name, coefficient vector over the free doses, allowed for them)
    if max_solids_volume_fraction is not None and np.any(solids > 0):
        constraints.append(("max_solids_volume_fraction", solids[~is_fixed],
                            float(max_solids_volume_fraction) - float(solids @ given)))
    constraints.append(("batch_volume", np.ones(count), float(max_total_volume_fraction) - float(given.sum())))
    broken = [(n, c, a) for n, c, a in constraints if c @ unconstrained_free > a * (1 + 1e-12)]
    fractions_free = unconstrained_free
    if broken and count:
        fractions_free = _solve_with_sum_limits(A, b, unconstrained_free, constraints)
    fractions, unconstrained = full(fractions_free), full(unconstrained_free)
    binding = []
    for name, _, _ in broken:
        coefficients = solids if name == "max_solids_volume_fraction" else np.ones(total)
        allowed = (float(max_solids_volume_fraction) if name == "max_solids_volume_fraction"
                   else float(max_total_volume_fraction))
        binding.append(_describe_sum_limit(name, table, target, coefficients, allowed,
                                           fractions, unconstrained, potencies))
    binding.extend(_matrix_floor(table, target, fractions, potencies))
    residual = A_all @ fractions - b_all
    return SolverOutcome(
        volume_fractions=fractions,
        unconstrained_volume_fractions=unconstrained,
        binding_limits=tuple(binding),
        cost=float(0.5 * residual @ residual),
    )


def _solve_with_sum_limits(A, b, start, constraints) -> np.ndarray:
    scale = 1.0
    for _, coefficients, allowed in constraints:
        used = coefficients @ start
        if used > allowed:
            scale = min(scale, allowed / used)
    x0 = start * scale * (1 - 1e-9)
    norm = max(float(np.linalg.norm(A)), 1e-300)
    An, bn = A / norm, b / norm

    def cost(x):
        r = An @ x - bn
        return 0.5 * r @ r

    def grad(x):
        return An.T @ (An @ x - bn)

    cons = [
        {"type": "ineq", "fun": (lambda x, c=c, a=a: a - c @ x), "jac": (lambda x, c=c: -c)}
        for _, c, a in constraints
    ]
    result = minimize(cost, x0, jac=grad, bounds=[(0.0, None)] * len(x0), constraints=cons,
                      method="SLSQP", options={"ftol": 1e-16, "maxiter": 500})
    x = np.clip(result.x, 0.0, None)
    for _, coefficients, allowed in constraints:  # tidy round-off just past a limit
        used = coefficients @ x
        if used > allowed:
            x = x * (allowed / used)
    return x if cost(x) <= cost(x0) else x0


def _describe_sum_limit(name, table, target, coefficients, allowed, fractions, unconstrained,
                        potencies) -> BindingLimit:
    if name == "batch_volume":
        needed = float(coefficients @ unconstrained)
        return BindingLimit(
            name, needed, allowed,
            f"the stocks would need {100 * needed:.1f} % of the batch volume; limit "
            f"{100 * allowed:g} % (stocks too weak for this target)",
        )
    achieved = mix_coefficients(table, volume_fractions=fractions, potencies=potencies)
    used = float(coefficients @ fractions)
    has = np.isfinite(target.musp_per_mm) & (achieved["musp_per_mm"] > 0)
    if np.any(has):
        ratio = np.where(has, target.musp_per_mm / np.where(has, achieved["musp_per_mm"], 1.0), 0.0)
        worst = int(np.argmax(ratio))
        needed = max(used * float(ratio[worst]), float(coefficients @ unconstrained))
        where = f"musp at {target.wavelength_nm[worst]:g} nm"
    else:
        needed = float(coefficients @ unconstrained)
        where = "the target"
    return BindingLimit(
        name, needed, allowed,
        f"{where} needs {100 * needed:.1f} % v/v solids; limit {100 * allowed:g} %",
    )


def _matrix_floor(table, target, fractions, potencies) -> list:
    """μa targets below what the matrix alone absorbs (the solver cannot remove absorption)."""
    achieved = mix_coefficients(table, volume_fractions=fractions, potencies=potencies)
    has = np.isfinite(target.mua_per_mm)
    floor = table.matrix_mua_per_mm * (1.0 - fractions.sum())
    short = has & (target.mua_per_mm < floor * (1 - target.mua_tolerance))
    if not np.any(short):
        return []
    ratio = np.where(short, floor / np.where(short, target.mua_per_mm, 1.0), 0.0)
    worst = int(np.argmax(ratio))
    lam = target.wavelength_nm[worst]
    return [BindingLimit(
        "matrix_absorption", float(achieved["mua_per_mm"][worst]), float(target.mua_per_mm[worst]),
        f"mua at {lam:g} nm: the matrix alone absorbs {floor[worst]:.4g} /mm, above the target "
        f"{target.mua_per_mm[worst]:.4g} /mm",
    )]
