"""What a solved plan holds: predicted optics, doses, matrix amounts, the plan (layer 3).

The frozen result types of :func:`phantomlab.recipe.plan.solve` and their JSON form (the
``phantomlab plan --json`` object, docs/contract.md).  Amounts are in mL or g, coefficients
in 1/mm, fractions of the final mix.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from phantomlab.errors import InputError
from phantomlab.recipe.dilution import DilutionPlan
from phantomlab.recipe.recipe_file import Recipe
from phantomlab.recipe.targets import Target

__all__ = ["Dose", "MatrixAmounts", "Plan", "Prediction", "UNUSED_FRACTION"]

#: Doses below this volume fraction count as "not used".
UNUSED_FRACTION = 1e-12


@dataclass(frozen=True)
class Prediction:
    """Predicted optics of a mix, with standard deviations.

    Attributes
    ----------
    wavelength_nm : ndarray (W,) [nm]
    mua_per_mm, mus_per_mm, musp_per_mm : ndarray (W,) [1/mm]
    g : ndarray (W,) — from the scattering model (Mie / emulsion model), not a measurement
    mua_sd_per_mm, musp_sd_per_mm : ndarray (W,) [1/mm]
    """

    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    mus_per_mm: np.ndarray
    musp_per_mm: np.ndarray
    g: np.ndarray
    mua_sd_per_mm: np.ndarray
    musp_sd_per_mm: np.ndarray

    def to_json(self) -> dict[str, Any]:
        return {
            "wavelength_nm": self.wavelength_nm,
            "mua_per_mm": self.mua_per_mm,
            "musp_per_mm": self.musp_per_mm,
            "g": self.g,
            "mua_sd_per_mm": self.mua_sd_per_mm,
            "musp_sd_per_mm": self.musp_sd_per_mm,
            "mus_per_mm": self.mus_per_mm,
        }


@dataclass(frozen=True)
class Dose:
    """One stock's share of the batch and how to dispense it.

    Attributes
    ----------
    stock, kind, lot : str
    expiry : datetime.date or None
    volume_fraction : float [fraction] — of the undiluted stock in the final mix
    volume_ml, mass_g : float [mL], [g] — of the undiluted stock
    by : str — ``"pipette"`` (amount in mL) or ``"balance"`` (amount in g); ``""`` if unused
    dilution : DilutionPlan or None
    dispense_amount : float [mL or g] — what goes into the batch (stock, or last dilution)
    tolerance : float [same unit] — ± k = 2 dispensing error (at least the balance resolution)
    relative_sd : float — of the delivered dose, dilution steps included
    potency, potency_sd : float; potency_source : str (``"shelf"`` or ``"calibrated"``)
    """

    stock: str
    kind: str
    lot: str
    expiry: _dt.date | None
    volume_fraction: float
    volume_ml: float
    mass_g: float
    by: str
    dilution: DilutionPlan | None
    dispense_amount: float
    tolerance: float
    relative_sd: float
    potency: float
    potency_sd: float
    potency_source: str = "shelf"

    @property
    def used(self) -> bool:
        return self.volume_fraction > UNUSED_FRACTION

    @property
    def unit(self) -> str:
        return "g" if self.by == "balance" else "mL"

    def to_json(self) -> dict[str, Any]:
        return {
            "stock": self.stock,
            "volume_fraction": self.volume_fraction,
            "volume_ml": self.volume_ml,
            "mass_g": self.mass_g,
            "dilution": _dilution_json(self.dilution),
            "kind": self.kind,
            "lot": self.lot,
            "expiry": self.expiry,
            "dispense_by": self.by or None,
            "dispense_amount": self.dispense_amount,
            "dispense_unit": self.unit if self.used else None,
            "dispense_from": self.dilution.dispense_from if self.dilution else f"{self.stock} stock",
            "tolerance": self.tolerance,
            "relative_sd": self.relative_sd,
            "potency": self.potency,
            "potency_sd": self.potency_sd,
            "potency_source": self.potency_source,
        }


def _dilution_json(dilution: DilutionPlan | None):
    if dilution is None or not dilution.steps:
        return None
    return [
        {
            "label": step.label,
            "source": step.source,
            "source_amount": step.source_amount,
            "diluent": dilution.diluent,
            "diluent_amount": step.diluent_amount,
            "total_amount": step.total_amount,
            "factor": step.factor,
            "unit": dilution.unit,
        }
        for step in dilution.steps
    ]


@dataclass(frozen=True)
class MatrixAmounts:
    """The matrix part of the batch, as the technician measures it.

    Attributes
    ----------
    volume_fraction : float — of the matrix in the final mix (1 − Σ f_i)
    volume_ml, mass_g : float — total matrix in the batch (carried diluent included)
    carried_diluent_volume_ml, carried_diluent_mass_g : float — brought in by pre-dilutions
    parts : tuple of (label, amount, unit, tolerance)
        What to measure: water (liquid), gel powder + water (gels), base + curing agent
        (silicone), resin + hardener (resin).
    """

    volume_fraction: float
    volume_ml: float
    mass_g: float
    carried_diluent_volume_ml: float
    carried_diluent_mass_g: float
    parts: tuple

    def to_json(self) -> dict[str, Any]:
        return {
            "volume_fraction": self.volume_fraction,
            "volume_ml": self.volume_ml,
            "mass_g": self.mass_g,
            "carried_diluent_volume_ml": self.carried_diluent_volume_ml,
            "carried_diluent_mass_g": self.carried_diluent_mass_g,
            "parts": [{"label": a, "amount": b, "unit": c, "tolerance": d} for a, b, c, d in self.parts],
        }


@dataclass(frozen=True)
class Plan:
    """Everything the sheet, the batch log and the page need about one planned batch."""

    recipe: Recipe
    batch_volume_ml: float
    batch_mass_g: float
    doses: tuple
    matrix: MatrixAmounts
    predicted: Prediction
    curve: Prediction | None
    target: Target
    residuals: dict
    binding_limits: tuple
    warnings: tuple
    created: _dt.date = field(default_factory=_dt.date.today)
    #: The notes for the person at the bench (the sheet, the page): the plan's warnings without
    #: those only the command line needs (ignored potencies of stocks not in the recipe, the
    #: binding limits the sheet boxes on its own) and without command names.
    sheet_notes: tuple = ()

    def dose(self, stock: str) -> Dose:
        for dose in self.doses:
            if dose.stock == stock:
                return dose
        raise InputError(f"plan: no dose for {stock!r}; stocks: {', '.join(d.stock for d in self.doses)}")

    @property
    def volume_fractions(self) -> dict[str, float]:
        return {d.stock: d.volume_fraction for d in self.doses}

    def to_json(self) -> dict[str, Any]:
        """The ``phantomlab plan`` JSON object (docs/contract.md: stable keys first, then extras)."""
        recipe = self.recipe
        return {
            "recipe": recipe.name,
            "batch_volume_ml": self.batch_volume_ml,
            "doses": [d.to_json() for d in self.doses],
            "predicted": self.predicted.to_json(),
            "target": self.target.to_json(),
            "warnings": list(self.warnings),
            "sheet_notes": list(self.sheet_notes),
            "recipe_version": recipe.version,
            "recipe_hash": recipe.content_hash,
            "recipe_path": str(recipe.path) if recipe.path else None,
            "batch_mass_g": self.batch_mass_g,
            "by_mass": recipe.by_mass,
            "matrix": {"stock": recipe.matrix_key, "lot": recipe.matrix.lot, **self.matrix.to_json()},
            "preparation": recipe.preparation.to_json(),
            "limits": recipe.limits.to_json(),
            "residuals": self.residuals,
            "binding_limits": [
                {"limit": b.limit, "needed": b.needed, "allowed": b.allowed, "message": b.message}
                for b in self.binding_limits
            ],
            "g_source": "scattering model (Mie / emulsion model), not a measurement",
            "created": self.created,
            **self._so2_json(),
        }

    def _so2_json(self) -> dict[str, Any]:
        """``so2_series``: μa at every planned sO₂ level (recipes with ``[oxygenation]``)."""
        if getattr(self.recipe, "oxygenation", None) is None:
            return {}
        from phantomlab.recipe.oxygenation import so2_series

        return {"so2_series": so2_series(self, wavelength_nm=self.target.wavelength_nm).to_json()}
