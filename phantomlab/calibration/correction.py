"""Correcting course: the next batch's plan, and a top-up for a liquid batch still on the bench (layer 3).

* :func:`corrected_plan` — the recipe solver (``phantomlab.recipe.solve``) with the
  calibrated potencies in place of the stock file's.
* :func:`top_up` — for a liquid batch of volume V₀ whose optics were just measured
  (μa₀, μs′₀), the additions v_i ≥ 0 of undiluted stocks and v_d ≥ 0 of diluent (the matrix)
  that bring it closest to the target.  Mixing is linear in volume (independent scattering,
  the mixing rule of the optics layer), so the final optics are

      μ_final = (V₀ μ₀ + Σ v_i p_i μ_i⁰ + v_d μ_m) / (V₀ + Σ v_i + v_d)

  and μ_final = T is linear in the volumes:
  Σ v_i (p_i μ_i⁰ − T) + v_d (μ_m − T) = V₀ (T − μ₀).  The rows for μa and μs′ at every
  target wavelength, each divided by V₀·T (relative error), are solved by bounded linear
  least squares (``scipy.optimize.lsq_linear``).  Nothing can be taken out: if the batch is
  too strong in both μa and μs′ the answer is diluent plus what restores the balance.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np
from scipy.optimize import lsq_linear

from phantomlab.calibration.observations import fit_arrays
from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["corrected_plan", "TopUp", "top_up"]


def corrected_plan(recipe, *, potencies: Mapping[str, tuple]):
    """The plan of the next batch with calibrated potencies.

    Parameters
    ----------
    recipe : phantomlab.recipe.Recipe
    potencies : mapping
        ``{stock_key: (potency, potency_sd[, lot])}`` (e.g. ``PotencyUpdate.as_potencies()``
        or the store's ``latest_potencies``).

    Returns
    -------
    phantomlab.recipe.Plan
    """
    from phantomlab.recipe import solve

    return solve(recipe, potencies=potencies)


@dataclass(frozen=True)
class TopUp:
    """What to add to a liquid batch on the bench.

    Attributes
    ----------
    current_volume_ml : float [mL]
    additions : tuple of dict
        ``{"stock", "volume_ml", "mass_g", "below_min_dispense"}`` per stock (zeros included).
    diluent : str
        The matrix stock key (what is added as diluent).
    diluent_volume_ml : float [mL]
    final_volume_ml : float [mL]
    wavelength_nm : ndarray (W,) [nm]
        Target wavelengths.
    before_mua_per_mm, before_musp_per_mm : ndarray (W,) [1/mm]
        The batch as measured.
    predicted_mua_per_mm, predicted_musp_per_mm : ndarray (W,) [1/mm]
        After the top-up (with the calibrated potencies).
    target_mua_per_mm, target_musp_per_mm : ndarray (W,) [1/mm]
    warnings : tuple of str
    """

    current_volume_ml: float
    additions: tuple
    diluent: str
    diluent_volume_ml: float
    final_volume_ml: float
    wavelength_nm: np.ndarray
    before_mua_per_mm: np.ndarray
    before_musp_per_mm: np.ndarray
    predicted_mua_per_mm: np.ndarray
    predicted_musp_per_mm: np.ndarray
    target_mua_per_mm: np.ndarray
    target_musp_per_mm: np.ndarray
    warnings: tuple = ()

    def relative_error(self) -> dict[str, np.ndarray]:
        """Predicted minus target over target, before and after, for μa and μs′."""
        return {
            "mua_before": self.before_mua_per_mm / self.target_mua_per_mm - 1,
            "musp_before": self.before_musp_per_mm / self.target_musp_per_mm - 1,
            "mua_after": self.predicted_mua_per_mm / self.target_mua_per_mm - 1,
            "musp_after": self.predicted_musp_per_mm / self.target_musp_per_mm - 1,
        }

    def to_json(self) -> dict[str, Any]:
        from phantomlab.jsonable import to_jsonable

        errors = self.relative_error()
        return to_jsonable({
            "current_volume_ml": self.current_volume_ml,
            "additions": list(self.additions),
            "diluent": self.diluent,
            "diluent_volume_ml": self.diluent_volume_ml,
            "final_volume_ml": self.final_volume_ml,
            "wavelength_nm": self.wavelength_nm,
            "before": {"mua_per_mm": self.before_mua_per_mm, "musp_per_mm": self.before_musp_per_mm,
                       "mua_rel_error": errors["mua_before"], "musp_rel_error": errors["musp_before"]},
            "predicted": {"mua_per_mm": self.predicted_mua_per_mm, "musp_per_mm": self.predicted_musp_per_mm,
                          "mua_rel_error": errors["mua_after"], "musp_rel_error": errors["musp_after"]},
            "target": {"mua_per_mm": self.target_mua_per_mm, "musp_per_mm": self.target_musp_per_mm},
            "warnings": list(self.warnings),
        })


#: Weight of the small-addition preference of :func:`top_up`, per batch volume added.
SMALL_ADDITION_WEIGHT = 1e-3


def top_up(
    recipe,
    *,
    current_volume_ml: float,
    measured,
    potencies: Mapping[str, tuple] | None = None,
    max_added_ml: float | None = None,
) -> TopUp:
    """Add-only correction of a liquid batch on the bench.

    Parameters
    ----------
    recipe : phantomlab.recipe.Recipe
        A liquid recipe (by volume); its target and stocks are used.
    current_volume_ml : float [mL]
        Volume of the batch now (after samples were taken out).
    measured : FitResult or fit JSON object
        The batch's fitted optics; its wavelengths must cover the target's.
    potencies : mapping, optional
        ``{stock_key: (potency, sd[, lot])}`` calibrated potencies (default: the shelf's).
    max_added_ml : float, optional [mL]
        Room left in the vessel; the total addition is kept below it.

    Returns
    -------
    TopUp

    Raises
    ------
    InputError
        For a recipe by mass (a cured or set phantom cannot be topped up), a non-positive
        volume, or measured optics that do not cover the target wavelengths.
    """
    from phantomlab.recipe.plan import intrinsic_table, resolve_potencies, resolve_spectral
    from phantomlab.recipe.spectral_potency import corrected_table

    if recipe.by_mass:
        raise InputError(f"recipe {recipe.name!r} is by mass (a cast phantom); a top-up is only for liquid batches")
    prep_kind = getattr(getattr(recipe, "preparation", None), "kind", "liquid")
    if prep_kind not in (None, "liquid"):
        raise InputError(f"recipe {recipe.name!r} is a {prep_kind} phantom; a top-up is only for liquid batches")
    if not (np.isfinite(current_volume_ml) and current_volume_ml > 0):
        raise InputError(f"current volume {current_volume_ml!r} mL; accepted: > 0")
    arrays = fit_arrays(measured)
    target = recipe.target
    grid = target.wavelength_nm
    wl = arrays["wavelength_nm"]
    if grid.min() < wl.min() - 1e-9 or grid.max() > wl.max() + 1e-9:
        raise InputError(
            f"the measurement covers {wl.min():g}-{wl.max():g} nm, the target {grid.min():g}-{grid.max():g} nm"
        )
    order = np.argsort(wl)
    mua0 = np.interp(grid, wl[order], arrays["mua_per_mm"][order])
    musp0 = np.interp(grid, wl[order], arrays["musp_per_mm"][order])
    values, _sds, _sources, notes = resolve_potencies(recipe, potencies)
    # a lot's spectral correction (a calibrated shape) bends its intrinsic spectrum here too
    table = corrected_table(intrinsic_table(recipe, grid), resolve_spectral(recipe, potencies))
    a = table.mua_at(values)  # (S, W): the potency scales the ingredient, not its carrier water or solvent
    s = values[:, None] * table.musp_per_mm
    am = table.matrix_mua_per_mm
    t_mua = np.asarray(target.mua_per_mm, float)
    t_musp = np.asarray(target.musp_per_mm, float)
    use_a = np.isfinite(t_mua) & (t_mua > 0)
    use_s = np.isfinite(t_musp) & (t_musp > 0)
    V0 = float(current_volume_ml)
    rows, rhs = [], []
    for w in range(grid.size):
        if use_a[w]:
            rows.append(np.concatenate([a[:, w] - t_mua[w], [am[w] - t_mua[w]]]) / (V0 * t_mua[w]))
            rhs.append((t_mua[w] - mua0[w]) / t_mua[w])
        if use_s[w]:
            rows.append(np.concatenate([s[:, w] - t_musp[w], [-t_musp[w]]]) / (V0 * t_musp[w]))
            rhs.append((t_musp[w] - musp0[w]) / t_musp[w])
    # A weak preference for small additions: without it, a stock plus diluent in the ratio of
    # a whole new batch can fit the target as well as the few mL that correct this one
    # (the rows are relative errors; 1e-3 per batch volume added is far below the noise of a
    # measured fit for additions of a few % of the batch).
    count = a.shape[0] + 1
    rows.extend(np.eye(count) * SMALL_ADDITION_WEIGHT / V0)
    rhs.extend([0.0] * count)
    A = np.array(rows)
    b = np.array(rhs)
    upper = np.inf if max_added_ml is None else float(max_added_ml)
    solution = lsq_linear(A, b, bounds=(0.0, upper), method="bvls")
    volumes = np.maximum(solution.x, 0.0)
    messages = list(notes)
    if max_added_ml is not None and volumes.sum() > max_added_ml:
        volumes *= max_added_ml / volumes.sum()
        messages.append(f"additions scaled down to fit the {max_added_ml:g} mL left in the vessel")
    stock_volumes, diluent = volumes[:-1], float(volumes[-1])
    final = V0 + stock_volumes.sum() + diluent
    mua_final = (V0 * mua0 + stock_volumes @ a + diluent * am) / final
    musp_final = (V0 * musp0 + stock_volumes @ s) / final
    min_dispense = recipe.limits.min_dispense_ml
    additions = []
    for key, volume in zip(table.stock_keys, stock_volumes):
        small = 0 < volume < min_dispense
        additions.append({
            "stock": key, "volume_ml": float(volume),
            "mass_g": float(volume * recipe.stock(key).density_g_per_ml),
            "below_min_dispense": bool(small),
        })
        if small:
            messages.append(
                f"{key}: {1000 * volume:.3g} uL is below the smallest dispensable "
                f"{1000 * min_dispense:g} uL; pre-dilute the stock and add the diluted volume"
            )
    rel = np.concatenate([(mua_final / t_mua - 1)[use_a], (musp_final / t_musp - 1)[use_s]])
    worst = float(np.max(np.abs(rel))) if rel.size else 0.0
    tolerance = min(getattr(target, "mua_tolerance", 0.05) or 0.05, getattr(target, "musp_tolerance", 0.05) or 0.05)
    if worst > tolerance:
        limited = max_added_ml is not None and volumes.sum() >= 0.999 * max_added_ml
        why = (f"the {max_added_ml:g} mL left in the vessel limit it" if limited
               else "an add-only correction cannot take out what is too strong")
        message = (f"the top-up leaves the batch {100 * worst:.0f} % from the target at worst ({why}); "
                   f"consider a new batch")
        messages.append(message)
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    return TopUp(
        current_volume_ml=V0, additions=tuple(additions), diluent=recipe.matrix_key,
        diluent_volume_ml=diluent, final_volume_ml=float(final), wavelength_nm=grid,
        before_mua_per_mm=mua0, before_musp_per_mm=musp0, predicted_mua_per_mm=mua_final,
        predicted_musp_per_mm=musp_final, target_mua_per_mm=t_mua, target_musp_per_mm=t_musp,
        warnings=tuple(dict.fromkeys(messages)),
    )
