"""The lab's limits of a recipe file: what it can dispense, weigh and tolerate (layer 3).

``[limits]`` fields (docs/formats.md; those marked * came after the first design), units in
the names:

``min_dispense_ul``               smallest volume the lab pipettes [µL] (default 10)
``pipette_rel_error``             relative error of a pipetted amount, one SD [fraction] (0.01)
``balance_resolution_mg``         readability of the balance [mg] (1)
``min_weigh_mg`` *                smallest mass the lab weighs [mg] (default 20 × resolution)
``max_solids_volume_fraction``    largest particle volume fraction in the mix [fraction] (0.05)
``max_dilution_steps``            most serial pre-dilution steps [count] (3)
``dead_volume_ml``                lost in each dilution's vessel and tubing [mL] (0.1)
``max_dilution_factor_per_step`` * largest (a + b)/a of one pre-dilution step (100)
``max_dilution_vessel_ml`` *      largest pre-dilution made in one vessel [mL] (50)
``min_dilution_ml`` *             smallest pipetted working dilution the lab makes [mL] (1)
``min_dilution_g`` *              smallest weighed working dilution (masterbatch) [g] (1)
``matrix_rel_error`` *            relative error of the matrix amount, one SD [fraction] (0.005)

Defaults are # common practice, no source: a lab states its own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from phantomlab.errors import InputError

__all__ = ["Limits", "parse_limits"]


@dataclass(frozen=True)
class Limits:
    """Lab limits in canonical units (mL, g, fractions).

    Attributes
    ----------
    min_dispense_ml : float [mL]
    pipette_rel_error : float [fraction, one SD]
    balance_resolution_g : float [g]
    min_weigh_g : float [g]
    max_solids_volume_fraction : float or None [fraction]
    max_dilution_steps : int
    dead_volume_ml : float [mL]
    max_dilution_factor_per_step : float
    max_dilution_vessel_ml : float [mL]
    matrix_rel_error : float [fraction, one SD]
    min_dilution_ml : float [mL]
        Smallest working dilution made by pipette: below about 1 mL a dilution is hard to mix
        and loses a noticeable share to the vessel.
    min_dilution_g : float [g]
        Smallest working dilution made by weighing (a masterbatch in silicone or resin base).
    """

    min_dispense_ml: float = 0.010
    pipette_rel_error: float = 0.01
    balance_resolution_g: float = 0.001
    min_weigh_g: float = 0.020
    max_solids_volume_fraction: float | None = 0.05
    max_dilution_steps: int = 3
    dead_volume_ml: float = 0.1
    max_dilution_factor_per_step: float = 100.0
    max_dilution_vessel_ml: float = 50.0
    matrix_rel_error: float = 0.005
    min_dilution_ml: float = 1.0  # common practice, no source
    min_dilution_g: float = 1.0  # common practice, no source

    def to_json(self) -> dict[str, Any]:
        return {
            "min_dispense_ul": 1000.0 * self.min_dispense_ml,
            "pipette_rel_error": self.pipette_rel_error,
            "balance_resolution_mg": 1000.0 * self.balance_resolution_g,
            "min_weigh_mg": 1000.0 * self.min_weigh_g,
            "max_solids_volume_fraction": self.max_solids_volume_fraction,
            "max_dilution_steps": self.max_dilution_steps,
            "dead_volume_ml": self.dead_volume_ml,
            "max_dilution_factor_per_step": self.max_dilution_factor_per_step,
            "max_dilution_vessel_ml": self.max_dilution_vessel_ml,
            "matrix_rel_error": self.matrix_rel_error,
            "min_dilution_ml": self.min_dilution_ml,
            "min_dilution_g": self.min_dilution_g,
        }


# field -> (attribute, factor to canonical, lowest allowed, highest allowed, accepted text)
_FIELDS = {
    "min_dispense_ul": ("min_dispense_ml", 1e-3, 0.0, math.inf, "a volume > 0 in µL"),
    "pipette_rel_error": ("pipette_rel_error", 1.0, 0.0, 0.5, "a fraction in [0, 0.5], e.g. 0.01 for 1 %"),
    "balance_resolution_mg": ("balance_resolution_g", 1e-3, 0.0, math.inf, "a mass > 0 in mg"),
    "min_weigh_mg": ("min_weigh_g", 1e-3, 0.0, math.inf, "a mass > 0 in mg"),
    "max_solids_volume_fraction": ("max_solids_volume_fraction", 1.0, 0.0, 1.0,
                                   "a fraction in (0, 1], e.g. 0.05 for 5 % v/v"),
    "max_dilution_steps": ("max_dilution_steps", 1, 0, 10, "a whole number from 0 to 10"),
    "dead_volume_ml": ("dead_volume_ml", 1.0, 0.0, math.inf, "a volume >= 0 in mL"),
    "max_dilution_factor_per_step": ("max_dilution_factor_per_step", 1.0, 2.0, 1e6, "a number >= 2"),
    "max_dilution_vessel_ml": ("max_dilution_vessel_ml", 1.0, 0.0, math.inf, "a volume > 0 in mL"),
    "matrix_rel_error": ("matrix_rel_error", 1.0, 0.0, 0.5, "a fraction in [0, 0.5]"),
    "min_dilution_ml": ("min_dilution_ml", 1.0, 0.0, math.inf, "a volume >= 0 in mL"),
    "min_dilution_g": ("min_dilution_g", 1.0, 0.0, math.inf, "a mass >= 0 in g"),
}
_ZERO_ALLOWED = {"pipette_rel_error", "dead_volume_ml", "max_dilution_steps", "matrix_rel_error",
                 "min_dilution_ml", "min_dilution_g"}


def parse_limits(table: Any) -> Limits:
    """Build :class:`Limits` from the ``[limits]`` table (missing fields keep their defaults).

    Raises
    ------
    InputError
        Unknown field, a value that is not a number, or a value out of range.
    """
    if table is None:
        return Limits()
    if not isinstance(table, dict):
        raise InputError("limits: must be a table of numbers")
    values: dict[str, Any] = {}
    for key, value in table.items():
        if key not in _FIELDS:
            raise InputError(f"limits: unknown field {key!r}; accepted: {', '.join(_FIELDS)}")
        attribute, factor, low, high, accepted = _FIELDS[key]
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise InputError(f"limits: {key} = {value!r}; give {accepted}")
        too_low = value < low if key in _ZERO_ALLOWED else value <= low
        if too_low or value > high:
            raise InputError(f"limits: {key} = {value!r}; give {accepted}")
        if key == "max_dilution_steps":
            if int(value) != value:
                raise InputError(f"limits: {key} = {value!r}; give {accepted}")
            values[attribute] = int(value)
        else:
            values[attribute] = float(value) * factor
    if "min_weigh_g" not in values and "balance_resolution_g" in values:
        values["min_weigh_g"] = 20.0 * values["balance_resolution_g"]  # common practice, no source
    limits = Limits(**values)
    if limits.min_dilution_ml > limits.max_dilution_vessel_ml:
        raise InputError(f"limits: min_dilution_ml = {limits.min_dilution_ml:g} is larger than "
                         f"max_dilution_vessel_ml = {limits.max_dilution_vessel_ml:g}; give a smallest "
                         "working dilution that fits the largest vessel")
    return limits
