"""How the matrix is prepared: the ``[preparation]`` table of a recipe file (layer 3).

Kinds and their fields (temperatures in °C, times in the unit their name says):

``liquid``    ``stir_minutes`` (10).
``gelatin``   ``gel_percent_w_v`` (required; g of gel powder per 100 mL of matrix),
              ``swell_minutes`` (15), ``dissolve_temperature_c`` (50), ``add_temperature_c`` (38),
              ``set_temperature_c`` (4), ``set_time_h`` (12).  FIELD.md: dissolve 40–60 °C, add
              the scatterer at ≈35–40 °C, set at 4 °C (the μs′ of emulsions in gel depends on the
              mixing temperature and time, so the sheet records them).
``agar``      ``gel_percent_w_v`` (required), ``dissolve_temperature_c`` (90),
              ``add_temperature_c`` (50), ``set_temperature_c`` (20), ``set_time_h`` (1).
              FIELD.md: dissolve 85–95 °C, gels at ≈35–40 °C.
``silicone``  ``base_to_curing_agent`` (required; parts of base per part of curing agent by
              mass, 10 for 10:1 w/w), ``mix_minutes`` (5), ``degas_minutes`` (15),
              ``degas_pressure_kpa`` (optional), ``cure_temperature_c`` (20), ``cure_time_h``
              (24).  FIELD.md: cure 24–48 h at room temperature or 1–4 h at 60–100 °C.
``resin``     ``hardener_parts_per_100_resin`` (required, by mass), ``mix_minutes`` (3),
              ``degas_minutes`` (10), ``cure_temperature_c`` (20), ``cure_time_h`` (24),
              ``post_cure_temperature_c`` and ``post_cure_time_h`` (optional),
              ``max_pour_mass_g`` (optional: larger pours overheat).

Every kind also takes ``measure_temperature_c`` (20, accepted 0–60 °C): the temperature the
optics are predicted for (the water of the batch absorbs at it).  The defaults are the middle of FIELD.md's ranges (# from memory, as FIELD.md
marks them); a recipe states its own.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any

from phantomlab.errors import InputError
from phantomlab.materials.water import LIQUID_WATER_RANGE_C

__all__ = ["Preparation", "parse_preparation", "measure_temperature_of", "PREPARATION_KINDS"]

_COMMON = {"measure_temperature_c": 20.0}
PREPARATION_KINDS: dict[str, dict[str, float | None]] = {
    "liquid": {**_COMMON, "stir_minutes": 10.0},
    "gelatin": {**_COMMON, "gel_percent_w_v": None, "swell_minutes": 15.0,
                "dissolve_temperature_c": 50.0, "add_temperature_c": 38.0,
                "set_temperature_c": 4.0, "set_time_h": 12.0},
    "agar": {**_COMMON, "gel_percent_w_v": None, "dissolve_temperature_c": 90.0,
             "add_temperature_c": 50.0, "set_temperature_c": 20.0, "set_time_h": 1.0},
    "silicone": {**_COMMON, "base_to_curing_agent": None, "mix_minutes": 5.0,
                 "degas_minutes": 15.0, "degas_pressure_kpa": math.nan,
                 "cure_temperature_c": 20.0, "cure_time_h": 24.0},
    "resin": {**_COMMON, "hardener_parts_per_100_resin": None, "mix_minutes": 3.0,
              "degas_minutes": 10.0, "cure_temperature_c": 20.0, "cure_time_h": 24.0,
              "post_cure_temperature_c": math.nan, "post_cure_time_h": math.nan,
              "max_pour_mass_g": math.nan},
}
_RANGES = {  # field -> (low, high) accepted
    "gel_percent_w_v": (0.1, 30.0),
    "base_to_curing_agent": (0.5, 100.0),
    "hardener_parts_per_100_resin": (1.0, 200.0),
    "degas_pressure_kpa": (0.0, 101.325),
    "max_pour_mass_g": (0.0, 1e6),
    "measure_temperature_c": LIQUID_WATER_RANGE_C,  # the water tables' temperature correction holds there
}
#: Fields whose range includes zero.
_ZERO_ALLOWED = ("degas_pressure_kpa", "measure_temperature_c")


@dataclass(frozen=True)
class Preparation:
    """The matrix preparation of a recipe.

    Attributes
    ----------
    kind : str
        One of :data:`PREPARATION_KINDS`.
    values : dict of str to float
        Every field of the kind (defaults filled in; NaN for optional fields not given);
        temperatures [°C], times [min or h as named], ratios [by mass].
    """

    kind: str
    values: dict = field(default_factory=dict)

    def __getitem__(self, name: str) -> float:
        return self.values[name]

    def given(self, name: str) -> bool:
        value = self.values.get(name)
        return value is not None and not (isinstance(value, float) and math.isnan(value))

    @property
    def temperature_c(self) -> float:
        return float(self.values["measure_temperature_c"])

    @property
    def two_part(self) -> bool:
        return self.kind in ("silicone", "resin")

    def to_json(self) -> dict[str, Any]:
        return {"kind": self.kind, **{k: (None if isinstance(v, float) and math.isnan(v) else v)
                                      for k, v in self.values.items()}}


def parse_preparation(table: Any, *, default_kind: str = "liquid") -> Preparation:
    """Build a :class:`Preparation` from the ``[preparation]`` table.

    Raises
    ------
    InputError
        Unknown kind or field, a missing required field, a value out of range.
    """
    table = {} if table is None else table
    if not isinstance(table, dict):
        raise InputError("preparation: must be a table")
    kind = table.get("kind", default_kind)
    if kind not in PREPARATION_KINDS:
        raise InputError(f"preparation: unknown kind {kind!r}; kinds: {', '.join(PREPARATION_KINDS)}")
    fields = PREPARATION_KINDS[kind]
    values: dict[str, float] = {}
    for key, value in table.items():
        if key == "kind":
            continue
        if key not in fields:
            raise InputError(
                f"preparation ({kind}): unknown field {key!r}; accepted: {', '.join(fields)}"
            )
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise InputError(f"preparation ({kind}): {key} = {value!r}; give a number")
        low, high = _RANGES.get(key, (-50.0, 300.0) if key.endswith("_c") else (0.0, 1e4))
        if not low <= value <= high or (key in _RANGES and value <= 0 and key not in _ZERO_ALLOWED):
            raise InputError(f"preparation ({kind}): {key} = {value!r}; accepted {low:g} to {high:g}")
        values[key] = float(value)
    for key, default in fields.items():
        if key not in values:
            if default is None:
                raise InputError(f"preparation ({kind}): {key} is required")
            values[key] = default
    return Preparation(kind=kind, values=values)


def measure_temperature_of(definition: Any) -> float:
    """``measure_temperature_c`` of a recipe's parsed TOML (a batch's recorded recipe) [°C]; 20 when not given."""
    table = definition.get("preparation") if isinstance(definition, dict) else None
    value = table.get("measure_temperature_c") if isinstance(table, dict) else None
    return _COMMON["measure_temperature_c"] if value is None else float(value)
