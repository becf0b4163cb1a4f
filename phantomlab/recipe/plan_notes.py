"""What a plan says about itself: residuals against the target and the notes on misses (layer 3).

The residuals of a prediction against the recipe's target (relative for μa and μs′,
absolute for g, each with whether it is met), and the plain-language notes a plan carries:
a target missed beyond its tolerance, a predicted SD wider than the tolerance, and
scatterers too dense to add linearly (dependent scattering, Aernouts et al. 2014).
:mod:`phantomlab.recipe.plan` puts them in the plan's ``warnings`` and ``sheet_notes``.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from phantomlab.recipe.mixmodel import IntrinsicTable
from phantomlab.recipe.plan_result import Prediction
from phantomlab.recipe.recipe_file import Recipe
from phantomlab.recipe.targets import Target

__all__ = ["dependent_scattering_notes", "miss_notes", "spread_notes", "target_residuals"]


def target_residuals(target: Target, predicted: Prediction) -> dict[str, Any]:
    def relative(pred, want):
        out = np.full(want.shape, np.nan)
        has = np.isfinite(want)
        out[has] = pred[has] / want[has] - 1.0
        return out

    mua = relative(predicted.mua_per_mm, target.mua_per_mm)
    musp = relative(predicted.musp_per_mm, target.musp_per_mm)
    g = predicted.g - target.g
    return {
        "wavelength_nm": target.wavelength_nm,
        "mua_relative": mua,
        "musp_relative": musp,
        "g_absolute": g,
        "mua_met": bool(np.all(np.abs(mua[np.isfinite(mua)]) <= target.mua_tolerance * (1 + 1e-9))),
        "musp_met": bool(np.all(np.abs(musp[np.isfinite(musp)]) <= target.musp_tolerance * (1 + 1e-9))),
        "g_met": bool(np.all(np.abs(g[np.isfinite(g)]) <= target.g_tolerance * (1 + 1e-9))),
    }


def miss_notes(target: Target, residuals: dict) -> list[str]:
    notes = []
    for name, key, tol, scale, unit in (
        ("mua", "mua_relative", target.mua_tolerance, 100.0, "%"),
        ("musp", "musp_relative", target.musp_tolerance, 100.0, "%"),
        ("g", "g_absolute", target.g_tolerance, 1.0, ""),
    ):
        values = residuals[key]
        finite = np.isfinite(values)
        if not np.any(finite):
            continue
        worst = int(np.nanargmax(np.where(finite, np.abs(values), -1.0)))
        if abs(values[worst]) > tol * (1 + 1e-9):
            fmt = "+.1f" if unit else "+.3f"
            notes.append(
                f"{name} not met within tolerance: at {target.wavelength_nm[worst]:g} nm "
                f"{scale * values[worst]:{fmt}}{unit} (tolerance ±{scale * tol:g}{unit})"
            )
    return notes


def spread_notes(target: Target, predicted: Prediction, *, for_bench: bool = False) -> list[str]:
    """One note when the predicted SD alone is wider than the target's tolerance.

    ``for_bench``: the wording for the sheet and the page (no command names)."""
    parts = []
    for name, want, sd, tol in (("mua", target.mua_per_mm, predicted.mua_sd_per_mm, target.mua_tolerance),
                                ("musp", target.musp_per_mm, predicted.musp_sd_per_mm, target.musp_tolerance)):
        has = np.isfinite(want) & (want > 0)
        if not np.any(has):
            continue
        relative = np.where(has, sd / np.where(has, want, 1.0), -1.0)
        worst = int(np.argmax(relative))
        if relative[worst] > tol * (1 + 1e-9):
            parts.append(f"{name} up to {100 * relative[worst]:.2g} % (at {target.wavelength_nm[worst]:g} nm; "
                         f"tolerance ±{100 * tol:g} %)")
    if not parts:
        return []
    remedy = ("calibrate them with a calibration series" if for_bench
              else "calibrate them (plan --series)")
    return [f"predicted SD wider than the tolerance: {' and '.join(parts)}; the stock potencies are not "
            f"known well enough to land within it first time: {remedy} or titrate and re-measure"]


def dependent_scattering_notes(recipe: Recipe, table: IntrinsicTable, fractions: np.ndarray) -> list[str]:
    """Plain-language warnings where a batch's scatterers are too dense to add linearly.

    An emulsion stock above :data:`~phantomlab.optics.mixing.EMULSION_LINEAR_LIMIT` of the
    batch volume, or a particle volume fraction above
    :data:`~phantomlab.optics.mixing.INDEPENDENT_SCATTERING_LIMIT` (Aernouts et al. 2014,
    Opt. Express 22:6086).  Each says whether the prediction is corrected.
    """
    from phantomlab.optics.mixing import EMULSION_LINEAR_LIMIT, INDEPENDENT_SCATTERING_LIMIT  # layer 2

    from phantomlab.optics.dependent import ANGULAR_MODELS

    corrected = table.packing != "none"
    angular = [i for i, a in enumerate(table.angular or ()) if a is not None]
    if corrected and table.packing in ANGULAR_MODELS and angular:
        _, musp_factor = table.scattering_factors(fractions)
        low, high = float(np.min(musp_factor[angular])), float(np.max(musp_factor[angular]))
        others = [table.stock_keys[i] for i in range(len(table.stock_keys)) if i not in angular]
        tail = (f"the prediction includes the angular Percus–Yevick correction (factor {low:.3f}–{high:.3f} on the "
                f"μs′ of {', '.join(table.stock_keys[i] for i in angular)} across the wavelengths"
                + (f"; the small-particle factor {float(table.packing_factor(fractions)):.3f} on "
                   f"{', '.join(others)}, an upper estimate of the reduction)" if others else ")"))
    elif corrected:
        tail = (f"the prediction includes the Percus–Yevick packing correction (factor "
                f"{float(table.packing_factor(fractions)):.3f} on the scattering; an upper estimate of "
                "the reduction for particles comparable to the wavelength)")
    else:
        tail = ("the predicted scattering is too high; the recipe can switch on the "
                "dependent-scattering correction (Percus–Yevick packing factor)")
    notes = []
    for key, fraction in zip(table.stock_keys, fractions):
        if recipe.stock(key).kind == "emulsion" and fraction > EMULSION_LINEAR_LIMIT:
            notes.append(
                f"{key} makes up {100 * fraction:.1f} % of the batch volume, above the about "
                f"{100 * EMULSION_LINEAR_LIMIT:g} % where an emulsion's scattering stops growing in proportion "
                f"(dependent scattering, Aernouts et al. 2014); {tail}"
            )
    particles = float(fractions @ table.solids_volume_fraction)
    if particles > INDEPENDENT_SCATTERING_LIMIT:
        notes.append(
            f"the particles fill {100 * particles:.1f} % of the batch volume, above the "
            f"{100 * INDEPENDENT_SCATTERING_LIMIT:g} % where scattering stops adding up linearly "
            f"(dependent scattering); {tail}"
        )
    return notes
