"""What the potency calibration learns from (layer 4): batches with amounts and fits.

:func:`calibration_evidence` lists every current batch that has both the amounts really
dispensed and at least one current fit, with everything a potency update needs from the
batch log: the amounts, the planned batch volume, the lot and prior of each stock, the
recipe as recorded, and each measurement's newest fit with the phantom's age.  The
physics (volume fractions, observation models) stays in the calibration layer.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from sqlalchemy.orm import Session

from phantomlab.store.batches import batch_lots, list_batches, plan_of, recipe_of
from phantomlab.store.measurements import fits_of, measurements_of

__all__ = ["BatchEvidence", "FitEvidence", "calibration_evidence"]


@dataclass(frozen=True)
class FitEvidence:
    """The newest current fit of one measurement."""

    measurement_id: int
    fit_id: int
    kind: str
    phantom_age_days: float | None
    results: dict[str, Any]


@dataclass(frozen=True)
class BatchEvidence:
    """One batch as the potency calibration sees it.

    Attributes
    ----------
    batch_id : str
    amounts : list of dict
        As recorded by ``batch actual``: ``stock``, ``volume_ml`` [mL], ``mass_g`` [g],
        ``volume_fraction`` (undiluted stock in what was made), ...
    batch_volume_ml : float [mL]
        Planned batch volume.
    lots : dict
        ``{stock_key: lot}`` (None for a stock without a lot).
    priors : dict
        ``{(stock_key, lot): (potency_prior, potency_sd_prior)}`` from the stock file
        snapshot.
    potencies_used : dict
        What the plan used (``potency``, ``potency_sd``, ``source``, ...).
    recipe_name, recipe_hash : str
    recipe_path : str or None
    recipe_definition : dict
    fits : tuple of FitEvidence
    """

    batch_id: str
    amounts: list
    batch_volume_ml: float
    lots: dict
    priors: dict
    potencies_used: dict
    recipe_name: str
    recipe_hash: str
    recipe_path: str | None
    recipe_definition: dict
    fits: tuple = field(default_factory=tuple)


def calibration_evidence(session: Session) -> list[BatchEvidence]:
    """Every current batch with recorded amounts and at least one fit, in ID order."""
    found = []
    for batch in list_batches(session):
        if not batch.actual_amounts:
            continue
        fits = []
        for measurement in measurements_of(session, batch):
            rows = sorted(fits_of(session, measurement), key=lambda f: (f.recorded_at, f.id))
            if rows:
                fits.append(FitEvidence(measurement.id, rows[-1].id, measurement.kind,
                                        measurement.phantom_age_days, dict(rows[-1].results)))
        if not fits:
            continue
        plan_row = plan_of(session, batch)
        recipe = recipe_of(session, batch)
        lots = batch_lots(session, batch)
        found.append(BatchEvidence(
            batch_id=batch.code,
            amounts=list(batch.actual_amounts),
            batch_volume_ml=float(plan_row.plan.get("batch_volume_ml") or 0.0),
            lots={key: row.lot for key, row in lots.items()},
            priors={(key, row.lot): (row.potency_prior, row.potency_sd_prior) for key, row in lots.items()
                    if row.potency_prior is not None and row.potency_sd_prior is not None},
            potencies_used=dict(plan_row.potencies_used),
            recipe_name=recipe.name, recipe_hash=recipe.content_hash, recipe_path=recipe.source_path,
            recipe_definition=dict(recipe.definition), fits=tuple(fits),
        ))
    return found
