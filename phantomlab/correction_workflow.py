"""The next batch and the top-up, planned from the batch log's calibrations and fits (layer 5).

One implementation for ``phantomlab correct`` and the page's correction section:

* :func:`next_batch_plan` — the next batch of a recipe planned with the calibrated potencies
  of the lots on its shelf (:func:`shelf_potencies`);
* :func:`top_up_batch` — the add-only top-up of a liquid batch still on the bench, from its
  newest fitted measurement (:func:`newest_fit`).

Layer 5 for the reasons :mod:`phantomlab.workflows` gives: it reads the store (4) and hands
the numbers to the calibration layer's corrections (3); it writes nothing.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

from phantomlab.errors import InputError

__all__ = [
    "shelf_potencies",
    "next_batch_plan",
    "newest_fit",
    "top_up_batch",
    "TopUpOfBatch",
]


def shelf_potencies(store_or_session, recipe) -> dict[str, tuple[float, float, str | None]]:
    """``{stock: (potency, sd, lot)}``: the newest calibration of each lot on the recipe's shelf.

    Only the recipe's own stocks; a stock whose lot on the shelf was never calibrated is left
    out (it keeps the stock file's prior).
    """
    from phantomlab.store import latest_potencies  # layer 4

    found = latest_potencies(store_or_session, shelf=recipe.shelf)
    return {key: value for key, value in found.items() if key in recipe.stock_keys}


def next_batch_plan(store, recipe):
    """The next batch of ``recipe`` planned with :func:`shelf_potencies`.

    Returns
    -------
    (phantomlab.recipe.Plan, dict)
        The corrected plan and the potencies it used ``{stock: (potency, sd, lot)}``.
    """
    from phantomlab.calibration.correction import corrected_plan  # layer 3

    potencies = shelf_potencies(store, recipe)
    return corrected_plan(recipe, potencies=potencies), potencies


def newest_fit(session, batch):
    """The newest fit of the batch's newest fitted measurement (by time recorded), or None."""
    from phantomlab.store import fits_of, measurements_of  # layer 4

    best = None
    for measurement in measurements_of(session, batch):
        fits = fits_of(session, measurement)
        if fits and (best is None or (measurement.recorded_at, measurement.id) > best[0]):
            best = ((measurement.recorded_at, measurement.id),
                    max(fits, key=lambda f: (f.recorded_at, f.id)), measurement)
    return None if best is None else (best[1], best[2])


@dataclass(frozen=True)
class TopUpOfBatch:
    """The top-up of a batch, and the fit and potencies it comes from."""

    code: str
    result: Any  # phantomlab.calibration.correction.TopUp
    fit_id: int
    measurement_id: int
    file_name: str
    current_volume_ml: float
    potencies: dict


def top_up_batch(store, code: str, recipe, *, current_volume_ml: float | None = None,
                 max_added_ml: float | None = None) -> TopUpOfBatch:
    """What to add to a liquid batch still on the bench to bring it to its target.

    Parameters
    ----------
    recipe : Recipe
        The batch's recipe (on the shelf whose calibrated potencies are to be used).
    current_volume_ml : float [mL], optional
        The volume in the vessel now (default: the planned batch volume).
    max_added_ml : float [mL], optional
        Room left in the vessel.
    """
    from phantomlab.calibration.correction import top_up  # layer 3
    from phantomlab.store import get_batch, plan_of  # layer 4

    with store.reading() as session:
        batch = get_batch(session, code, include_retracted=False)
        found = newest_fit(session, batch)
        if found is None:
            raise InputError(f"batch {batch.code} has no fitted measurement; attach a measurement first")
        fit, measurement = found
        fitted, fit_id = dict(fit.results), fit.id
        measurement_id, file_name = measurement.id, measurement.file_name
        planned_volume = plan_of(session, batch).plan.get("batch_volume_ml")
        code = batch.code
        potencies = shelf_potencies(session, recipe)
    volume = current_volume_ml if current_volume_ml is not None else planned_volume
    if volume is None:
        raise InputError("give the batch's present volume in mL")
    result = top_up(recipe, current_volume_ml=float(volume), measured=fitted, potencies=potencies,
                    max_added_ml=max_added_ml)
    return TopUpOfBatch(code=code, result=result, fit_id=fit_id, measurement_id=measurement_id,
                        file_name=file_name, current_volume_ml=float(volume), potencies=potencies)
