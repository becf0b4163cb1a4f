"""Design by sO₂: the ``[oxygenation]`` table of a recipe and the μa of each planned sO₂ level (layer 3).

A recipe with a blood stock says at which oxygen saturation its μa target holds and which
levels the batch will be taken through (deoxygenated with yeast or nitrogen, re-oxygenated)::

    [oxygenation]
    thb_um = 30                         # total haemoglobin in the final mix [µM tetramer]
    so2_levels = [1.0, 0.75, 0.5, 0.25, 0.0]   # or so2_levels_percent = [100, 75, ...]
    so2 = 1.0                           # where the [target] μa holds (default: the first level)
    blood_stock = "blood_a"             # default: the recipe's only blood stock
    deoxygenation = "yeast"             # yeast, nitrogen or none (for the cautions)

``thb_um`` fixes the blood dose (it is not solved for): f = thb_um / (p · c), with c the
stock's haemoglobin in µM of tetramer (64 500 g/mol) and p its potency; the other stocks
are then solved for the rest of the target (μs′, and μa at ``so2`` if given).  Without
``thb_um`` the blood is solved like any absorber, with its μa at ``so2``.

:func:`so2_series` gives, for the planned doses, the predicted μa(λ) at every level (only
the blood's absorption changes with sO₂) and the isosbestic points of the haemoglobin
table in the band, where all levels meet.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from phantomlab.errors import InputError

__all__ = ["Oxygenation", "DEOXYGENATION_METHODS", "MAX_SO2_LEVELS", "parse_oxygenation", "blood_fraction",
           "process_hazards",
           "So2Level", "So2Series", "so2_series"]

#: How a series is deoxygenated: the method → the hazard key whose caution it brings.
DEOXYGENATION_METHODS: dict[str, str | None] = {"yeast": "yeast", "nitrogen": None, "none": None}

#: Most sO₂ levels one recipe plans.
MAX_SO2_LEVELS = 21

_FIELDS = ("thb_um", "so2", "so2_percent", "so2_levels", "so2_levels_percent", "blood_stock", "deoxygenation")


@dataclass(frozen=True)
class Oxygenation:
    """The ``[oxygenation]`` table, checked.

    Attributes
    ----------
    blood_stock : str
    so2 : float [fraction]
        Where the recipe's μa target holds; the plan's own prediction is at this sO₂.
    levels : tuple of float [fraction]
        The planned series (``so2`` first if it is not among them).
    thb_um : float or None [µM tetramer]
        Total haemoglobin in the final mix (fixes the blood dose), or None (solved).
    deoxygenation : str
        Key of :data:`DEOXYGENATION_METHODS`.
    """

    blood_stock: str
    so2: float
    levels: tuple
    thb_um: float | None
    deoxygenation: str = "none"

    def to_json(self) -> dict[str, Any]:
        return {"blood_stock": self.blood_stock, "so2": self.so2, "so2_levels": list(self.levels),
                "thb_um": self.thb_um, "deoxygenation": self.deoxygenation}


def _fractions(table, name: str, *, many: bool):
    percent = f"{name}_percent"
    if name in table and percent in table:
        raise InputError(f"recipe [oxygenation]: give {name} or {percent}, not both")
    key = name if name in table else percent if percent in table else None
    if key is None:
        return None
    raw = table[key]
    values = raw if many else [raw]
    if many and (not isinstance(raw, list) or not raw):
        raise InputError(f"recipe [oxygenation]: {key} must be a non-empty list of numbers")
    if many and len(raw) > MAX_SO2_LEVELS:
        raise InputError(f"recipe [oxygenation]: {key} has {len(raw)} levels; at most {MAX_SO2_LEVELS}")
    top = 100.0 if key.endswith("_percent") else 1.0
    out = []
    for value in values:
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not np.isfinite(value):
            raise InputError(f"recipe [oxygenation]: {key} must hold numbers, got {value!r}")
        if not 0 <= value <= top:
            hint = " (a fraction; for percent use " + percent + ")" if top == 1.0 else " (percent)"
            raise InputError(f"recipe [oxygenation]: {key} = {value:g} is outside 0-{top:g}{hint}")
        out.append(float(value) / top)
    return tuple(out) if many else out[0]


def parse_oxygenation(table, *, shelf, stock_keys) -> Oxygenation | None:
    """Check the ``[oxygenation]`` table against the recipe's stocks.

    A recipe with a blood stock needs the table (its μa depends on sO₂); a recipe without one
    may not have it.  sO₂ outside 0–1 (or 0–100 for the ``_percent`` fields) is refused.
    """
    blood = [k for k in stock_keys if shelf[k].kind == "blood"]
    if table is None:
        if blood:
            raise InputError(
                f"recipe: stock {blood[0]!r} is blood; add [oxygenation] with so2 or so2_levels "
                "(the sO2 of the batch the target is for)"
            )
        return None
    if not isinstance(table, dict):
        raise InputError("recipe: oxygenation must be a table [oxygenation]")
    unknown = sorted(set(table) - set(_FIELDS))
    if unknown:
        raise InputError(f"recipe [oxygenation]: unknown field {unknown[0]!r}; accepted: {', '.join(_FIELDS)}")
    if not blood:
        raise InputError("recipe: [oxygenation] needs a blood stock among the recipe's stocks")
    key = table.get("blood_stock")
    if key is None:
        if len(blood) > 1:
            raise InputError(f"recipe [oxygenation]: several blood stocks ({', '.join(blood)}); name one as blood_stock")
        key = blood[0]
    elif key not in blood:
        raise InputError(f"recipe [oxygenation]: blood_stock {key!r} is not a blood stock of the recipe "
                         f"({', '.join(blood)})")
    levels = _fractions(table, "so2_levels", many=True)
    so2 = _fractions(table, "so2", many=False)
    if so2 is None and levels is None:
        raise InputError("recipe [oxygenation]: give so2 (where the target holds) or so2_levels (the series)")
    if so2 is None:
        so2 = levels[0]
    if levels is None:
        levels = (so2,)
    if not any(abs(so2 - v) < 1e-12 for v in levels):
        levels = (so2, *levels)
    thb = table.get("thb_um")
    if thb is not None:
        if isinstance(thb, bool) or not isinstance(thb, (int, float)) or not 0 < thb <= 5000:
            raise InputError(f"recipe [oxygenation]: thb_um must be a number in (0, 5000] µM, got {thb!r}")
        thb = float(thb)
    method = table.get("deoxygenation", "none")
    if method not in DEOXYGENATION_METHODS:
        raise InputError(f"recipe [oxygenation]: deoxygenation {method!r}; accepted: {', '.join(DEOXYGENATION_METHODS)}")
    return Oxygenation(key, float(so2), tuple(levels), thb, method)


def process_hazards(recipe) -> tuple:
    """(hazard key, source) pairs a recipe's oxygenation brings beyond its stocks (yeast)."""
    oxygenation = getattr(recipe, "oxygenation", None)
    if oxygenation is None:
        return ()
    key = DEOXYGENATION_METHODS.get(oxygenation.deoxygenation)
    return ((key, f"{oxygenation.deoxygenation} deoxygenation"),) if key else ()


def blood_fraction(oxygenation: Oxygenation, *, stock, potency: float) -> float:
    """Volume fraction of the blood stock that gives ``thb_um`` in the final mix.

    f = thb / (p · c), c the stock's haemoglobin in µM of tetramer (64 500 g/mol).
    """
    from phantomlab.materials.haemoglobin import tetramer_um_from_g_per_l

    concentration = float(tetramer_um_from_g_per_l(stock.spec.haemoglobin_g_per_l)) * potency
    fraction = oxygenation.thb_um / concentration
    if fraction >= 1:
        raise InputError(
            f"recipe [oxygenation]: thb_um = {oxygenation.thb_um:g} µM needs more than the undiluted "
            f"{stock.key} ({concentration:.4g} µM)"
        )
    return fraction


@dataclass(frozen=True)
class So2Level:
    """Predicted μa of the planned batch at one sO₂."""

    so2: float
    mua_per_mm: np.ndarray
    mua_sd_per_mm: np.ndarray

    def to_json(self) -> dict[str, Any]:
        return {"so2": self.so2, "mua_per_mm": self.mua_per_mm, "mua_sd_per_mm": self.mua_sd_per_mm}


@dataclass(frozen=True)
class So2Series:
    """The planned sO₂ series of one plan: μa per level and the isosbestic points."""

    blood_stock: str
    blood_volume_fraction: float
    thb_um: float
    wavelength_nm: np.ndarray
    levels: tuple
    isosbestic_nm: np.ndarray
    source: str
    deoxygenation: str

    def to_json(self) -> dict[str, Any]:
        return {
            "blood_stock": self.blood_stock,
            "blood_volume_fraction": self.blood_volume_fraction,
            "thb_um": self.thb_um,
            "wavelength_nm": self.wavelength_nm,
            "levels": [level.to_json() for level in self.levels],
            "isosbestic_nm": self.isosbestic_nm,
            "extinction_source": self.source,
            "deoxygenation": self.deoxygenation,
        }


def so2_series(plan, *, wavelength_nm=None) -> So2Series | None:
    """μa of the planned batch at every sO₂ level of its recipe (None without ``[oxygenation]``).

    Parameters
    ----------
    plan : phantomlab.recipe.Plan
    wavelength_nm : array, optional [nm]
        Default: the plan's dense curve grid if it has one, else the target grid.

    Returns
    -------
    So2Series or None
        For each level the mix μa from :func:`phantomlab.recipe.predict` with the blood's
        intrinsic optics at that sO₂ (same doses and potencies as the plan); the total
        haemoglobin from the blood dose; the isosbestic points of the stock's table inside
        the grid's band.
    """
    from phantomlab.materials.blood import isosbestic_points_nm
    from phantomlab.materials.haemoglobin import tetramer_um_from_g_per_l
    from phantomlab.recipe.plan import intrinsic_table, predict

    recipe = plan.recipe
    oxygenation = getattr(recipe, "oxygenation", None)
    if oxygenation is None:
        return None
    if wavelength_nm is None:
        wavelength_nm = plan.curve.wavelength_nm if plan.curve is not None else plan.predicted.wavelength_nm
    grid = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    fractions = plan.volume_fractions
    potencies = {d.stock: (d.potency, d.potency_sd) for d in plan.doses}
    levels = []
    for value in oxygenation.levels:
        table = intrinsic_table(recipe, grid, so2=value)
        prediction = predict(recipe, volume_fractions=fractions, potencies=potencies, wavelength_nm=grid, table=table,
                             dose_relative_sd={d.stock: d.relative_sd for d in plan.doses})
        levels.append(So2Level(value, prediction.mua_per_mm, prediction.mua_sd_per_mm))
    stock = recipe.stock(oxygenation.blood_stock)
    dose = plan.dose(oxygenation.blood_stock)
    thb = dose.volume_fraction * dose.potency * float(tetramer_um_from_g_per_l(stock.spec.haemoglobin_g_per_l))
    points = isosbestic_points_nm(source=stock.spec.extinction_source, band_nm=(grid.min(), grid.max()))
    return So2Series(oxygenation.blood_stock, dose.volume_fraction, thb, grid, tuple(levels), points,
                     stock.spec.extinction_source, oxygenation.deoxygenation)
