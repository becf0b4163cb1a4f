"""Recipe files (TOML): what to make, from which stocks, within which limits (layer 3).

Top-level fields (docs/formats.md; those marked * came after the first design):

``name``            what the phantom is (required)
``version`` *       the recipe's own version string ("1" when not given)
``stocks_file``     the shelf, relative to the recipe file (required); it must lie in the
                    recipe's folder tree or a folder listed in ``PHANTOMLAB_DATA_DIRS``
                    (a recipe whose path the batch log recorded may name it anywhere)
``matrix``          key of the matrix stock on the shelf (required)
``stocks``          keys of the stocks the solver may use (required, at least one)
``batch_volume_ml`` final volume of the batch [mL] — or —
``batch_mass_g`` *  final mass [g] (silicone and resin are weighed)
``notes`` *         free text printed on the sheet
``dependent_scattering`` * ``"none"`` (default: independent scattering, doses add linearly)
                    or ``"percus_yevick"``: the solver and the prediction multiply the
                    batch's scattering by the Percus–Yevick packing factor of its particle
                    volume fraction (:mod:`phantomlab.optics.dependent`); or
                    ``"percus_yevick_angular"``: sphere and powder stocks get the structure
                    factor S(q) weighed over their Mie scattering angles, the other stocks
                    the packing factor
``[target]``        see :mod:`phantomlab.recipe.targets`
``[limits]``        see :mod:`phantomlab.recipe.limits`
``[preparation]`` * see :mod:`phantomlab.recipe.preparation`
``[series]`` *      calibration series defaults: ``levels``, ``low``, ``high`` (multiples of the
                    recipe's dose), ``batch_volume_ml`` or ``batch_mass_g``
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from phantomlab.errors import InputError
from phantomlab.inputs import contained_path, decode_text, parse_toml, read_bytes_file
from phantomlab.recipe.limits import Limits, parse_limits
from phantomlab.recipe.preparation import Preparation, parse_preparation
from phantomlab.recipe.targets import Target, parse_target

__all__ = ["Recipe", "load_recipe", "parse_recipe"]

_TOP_LEVEL = {
    "name", "version", "stocks_file", "matrix", "stocks", "batch_volume_ml", "batch_mass_g",
    "notes", "target", "limits", "preparation", "series", "dependent_scattering", "oxygenation",
}


@dataclass(frozen=True)
class Recipe:
    """A parsed, validated recipe.

    Attributes
    ----------
    name, version : str
    content_hash : str
        The canonical recipe hash (:func:`phantomlab.recipe.recipe_hash.canonical_recipe_hash`):
        SHA-256 of the parsed definition written canonically, then of its target spectrum
        file, if any.  The same recipe has the same hash from a file (whatever its comments
        and spacing) and from the page; two batches with the same hash were made from the
        same recipe.
    path : Path or None
    shelf : phantomlab.materials.Shelf
    matrix_key : str
    stock_keys : tuple of str
    batch_volume_ml : float or None [mL]
    batch_mass_g : float or None [g]
        Exactly one of the two is given.
    target : Target
    limits : Limits
    preparation : Preparation
    series : dict
        Calibration-series defaults (may be empty).
    notes : str
    definition : dict
        The parsed TOML as given.
    dependent_scattering : str
        ``"none"`` or a key of :data:`phantomlab.optics.dependent.PACKING_MODELS`.
    oxygenation : phantomlab.recipe.oxygenation.Oxygenation or None
        The ``[oxygenation]`` table of a recipe with a blood stock (sO₂ levels, total
        haemoglobin), else None.
    """

    name: str
    version: str
    content_hash: str
    path: Path | None
    shelf: Any
    matrix_key: str
    stock_keys: tuple
    batch_volume_ml: float | None
    batch_mass_g: float | None
    target: Target
    limits: Limits
    preparation: Preparation
    series: dict
    notes: str
    definition: dict
    dependent_scattering: str = "none"
    oxygenation: Any = None

    @property
    def by_mass(self) -> bool:
        return self.batch_mass_g is not None

    @property
    def matrix(self):
        """The matrix :class:`~phantomlab.materials.Stock`."""
        return self.shelf[self.matrix_key]

    def stock(self, key: str):
        return self.shelf[key]

    def with_shelf(self, shelf) -> "Recipe":
        """The same recipe on another shelf (e.g. with calibrated potencies)."""
        from dataclasses import replace

        return replace(self, shelf=shelf)


def load_recipe(path, *, recorded: bool = False) -> Recipe:
    """Read and validate a recipe file.

    Parameters
    ----------
    path : str or Path
        The recipe TOML file.
    recorded : bool
        The path comes from the batch log (a batch's recipe file, recorded by phantomlab when
        the batch was planned, e.g. one the page wrote naming the lab's stock file): its
        ``stocks_file`` may lie outside the recipe's folder.  A recipe a person hands over
        (``recorded=False``) may name a stock file only inside its own folder tree or a
        folder listed in ``PHANTOMLAB_DATA_DIRS`` (:func:`phantomlab.inputs.contained_path`).

    Returns
    -------
    Recipe

    Raises
    ------
    InputError
        One line naming what is wrong: unreadable TOML, unknown or missing field, unknown stock
        (with the shelf's keys), bad target, limits or preparation.
    """
    path = Path(path)
    raw = read_bytes_file(path, what="recipe file")
    definition = parse_toml(decode_text(raw, what="recipe file", name=path.name), what=f"recipe {path.name}")
    return parse_recipe(definition, base_dir=path.parent, path=path, contain_stocks_file=not recorded)


def _number(definition: dict, key: str) -> float | None:
    if key not in definition:
        return None
    value = definition[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) or value <= 0:
        raise InputError(f"recipe: {key} = {value!r}; give a number > 0")
    return float(value)


def parse_recipe(definition: dict, *, base_dir: Path, path: Path | None = None, shelf=None,
                 contain_stocks_file: bool = True) -> Recipe:
    """Validate a parsed recipe table (see :func:`load_recipe`).

    ``shelf`` may be given to skip reading ``stocks_file`` (tests, the page).  With
    ``contain_stocks_file`` (the default) ``stocks_file`` must resolve inside ``base_dir`` or a
    folder of ``PHANTOMLAB_DATA_DIRS``; the page passes False for its own recipes, which name
    the lab's stock file wherever the lab keeps it.
    """
    unknown = sorted(set(definition) - _TOP_LEVEL)
    if unknown:
        key = unknown[0]
        hint = ""
        if key.startswith("batch_volume") or key.startswith("batch_mass"):
            hint = " (the batch is batch_volume_ml in mL or batch_mass_g in g)"
        raise InputError(f"recipe: unknown field {key!r}{hint}; accepted: {', '.join(sorted(_TOP_LEVEL))}")
    for key in ("name", "matrix", "stocks"):
        if key not in definition:
            raise InputError(f"recipe: {key} is missing")
    if shelf is None and "stocks_file" not in definition:
        raise InputError("recipe: stocks_file is missing (the shelf TOML, relative to the recipe)")
    name = str(definition["name"]).strip()
    if not name:
        raise InputError("recipe: name is empty")
    version = str(definition.get("version", "1"))

    volume = _number(definition, "batch_volume_ml")
    mass = _number(definition, "batch_mass_g")
    if (volume is None) == (mass is None):
        raise InputError("recipe: give exactly one of batch_volume_ml [mL] or batch_mass_g [g]")

    base_dir = Path(base_dir)
    if shelf is None:
        from phantomlab.materials import load_shelf  # layer 1

        if not isinstance(definition["stocks_file"], str):
            raise InputError("recipe: stocks_file must be the stock file's path as text")
        if contain_stocks_file:
            shelf_path = contained_path(definition["stocks_file"], base_dir=base_dir, what="recipe: stocks_file")
        else:
            shelf_path = base_dir / definition["stocks_file"]
        if not shelf_path.is_file():
            raise InputError(f"recipe: stocks_file {str(shelf_path)!r} not found")
        shelf = load_shelf(shelf_path)

    matrix_key = definition["matrix"]
    if not isinstance(matrix_key, str):
        raise InputError("recipe: matrix must be the key of a matrix stock")
    matrix = shelf[matrix_key]  # unknown key -> InputError listing the shelf's keys
    if matrix.kind != "matrix":
        raise InputError(f"recipe: matrix {matrix_key!r} is a {matrix.kind} stock, not a matrix")
    stocks = definition["stocks"]
    if not isinstance(stocks, list) or not stocks or not all(isinstance(s, str) for s in stocks):
        raise InputError("recipe: stocks must be a non-empty list of stock keys")
    if len(set(stocks)) != len(stocks):
        raise InputError("recipe: a stock is listed twice in stocks")
    for key in stocks:
        stock = shelf[key]
        if stock.kind == "matrix":
            raise InputError(f"recipe: {key!r} is a matrix stock; list it as matrix, not in stocks")

    target_table = definition.get("target")
    target = parse_target(target_table, base_dir=base_dir)
    limits: Limits = parse_limits(definition.get("limits"))
    default_kind = "silicone" if matrix_key.startswith("silicone") else "liquid"
    preparation = parse_preparation(definition.get("preparation"), default_kind=default_kind)
    series = definition.get("series", {})
    if not isinstance(series, dict):
        raise InputError("recipe: series must be a table (levels, low, high, batch_volume_ml)")

    from phantomlab.optics.dependent import PACKING_MODELS  # layer 2
    from phantomlab.recipe.recipe_hash import canonical_recipe_hash

    dependent = definition.get("dependent_scattering", "none")
    if dependent not in PACKING_MODELS:
        raise InputError(f"recipe: dependent_scattering = {dependent!r}; accepted: "
                         f"{', '.join(repr(k) for k in PACKING_MODELS)}")
    from phantomlab.recipe.oxygenation import parse_oxygenation

    oxygenation = parse_oxygenation(definition.get("oxygenation"), shelf=shelf, stock_keys=stocks)
    files = []
    if isinstance(target_table, dict) and "spectrum_csv" in target_table:
        files.append(read_bytes_file(contained_path(target_table["spectrum_csv"], base_dir=base_dir,
                                                    what="target: spectrum_csv"), what="target: spectrum file"))
    return Recipe(
        name=name,
        version=version,
        content_hash=canonical_recipe_hash(definition, files=files),
        path=path,
        shelf=shelf,
        matrix_key=matrix_key,
        stock_keys=tuple(stocks),
        batch_volume_ml=volume,
        batch_mass_g=mass,
        target=target,
        limits=limits,
        preparation=preparation,
        series=dict(series),
        notes=str(definition.get("notes", "")),
        definition=definition,
        dependent_scattering=dependent,
        oxygenation=oxygenation,
    )
