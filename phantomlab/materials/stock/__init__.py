"""The stocks on the shelf (layer 1): the stock model, the stock file and its fields.

One module per job:

* :mod:`~phantomlab.materials.stock.model`: :class:`Stock` (one bottle) and :class:`Shelf`;
* :mod:`~phantomlab.materials.stock.stock_file`: the stock file format (its docstring),
  :func:`load_shelf` / :func:`parse_shelf` and the parser of each kind by name;
* :mod:`~phantomlab.materials.stock.fields`: the field table ``_FIELDS`` (every field each
  kind accepts, with what it expects), the names a field may choose from and the
  unknown-field check;
* :mod:`~phantomlab.materials.stock.readers`: the field readers every refusal goes through;
* :mod:`~phantomlab.materials.stock.kinds`: each kind's spec dataclass and parser (matrix,
  particles: spheres and powder, emulsion, absorber with its solvent, blood);
* :mod:`~phantomlab.materials.stock.hazards`: hazard keys and their caution texts.

Every name is importable from here as before; ``_FIELDS`` too (the docs tests and
:mod:`phantomlab.shelf_export` read it).
"""

from phantomlab.materials.stock.fields import (
    _FIELDS,
    BLOOD_SPECIES,
    EMULSION_MODELS,
    KINDS,
    RED_CELL_SCATTERING,
    SOLVENTS,
)
from phantomlab.materials.stock.hazards import BLOOD_HAZARDS, HAZARD_KEYS
from phantomlab.materials.stock.kinds.absorber import AbsorberSpec
from phantomlab.materials.stock.kinds.blood import BLOOD_DENSITY_G_PER_ML, BLOOD_WATER_VOLUME_FRACTION, BloodSpec
from phantomlab.materials.stock.kinds.emulsion import SOYBEAN_OIL_DENSITY_G_PER_ML, EmulsionSpec
from phantomlab.materials.stock.kinds.matrix import MatrixSpec
from phantomlab.materials.stock.kinds.particles import RANDOM_CLOSE_PACKING, PowderSpec, SpheresSpec
from phantomlab.materials.stock.model import Shelf, Stock
from phantomlab.materials.stock.stock_file import load_shelf, parse_shelf

__all__ = [
    "KINDS",
    "HAZARD_KEYS",
    "EMULSION_MODELS",
    "SOLVENTS",
    "MatrixSpec",
    "SpheresSpec",
    "PowderSpec",
    "EmulsionSpec",
    "AbsorberSpec",
    "BloodSpec",
    "BLOOD_HAZARDS",
    "Stock",
    "Shelf",
    "load_shelf",
    "parse_shelf",
]
