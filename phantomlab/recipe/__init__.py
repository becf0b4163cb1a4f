"""Recipes (layer 3): targets, the dose solver, pre-dilutions, uncertainty, mixing sheets.

Public names (docs/apis): :func:`load_recipe` → :class:`Recipe`; :func:`solve` → :class:`Plan`
(``Plan.to_json()`` is the ``phantomlab plan`` JSON); :func:`predict` → :class:`Prediction`;
the sheet renderers live in :mod:`phantomlab.recipe.sheet`.
"""

from phantomlab.recipe.plan import Dose, MatrixAmounts, Plan, Prediction, predict, solve
from phantomlab.recipe.recipe_file import Recipe, load_recipe, parse_recipe

__all__ = ["Dose", "MatrixAmounts", "Plan", "Prediction", "Recipe", "load_recipe", "parse_recipe",
           "predict", "solve"]
