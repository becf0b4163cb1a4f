"""Planning and mixing a batch: the batch-log workflows of both front ends (layer 5).

Each function here is one thing a lab does with the batch log, written once so that
``phantomlab batch ...`` and the Streamlit page cannot drift apart:

* :func:`plan_batch` + :func:`record_planned_batch` — solve a recipe with the calibrated
  potencies of the lots on its shelf, record it as a batch (stock-lot snapshots, recipe,
  plan, sheet rendered with the batch ID) in ONE transaction;
* :func:`record_dispensed` — the amounts really dispensed (the ``batch actual`` row layout),
  the recipe layer's prediction of what was made at the plan's potencies, and the alarm
  lines of :func:`tolerance_alarms`; read and predicted first, then one write transaction
  that refuses if the batch changed meanwhile;
* :func:`change_status` — a batch moved forward (``batch status``, the page's status button).

The other workflows have modules of their own beside this one:
:mod:`phantomlab.measurement_workflow` (attach and fit a measurement, keep a refit, the
verdict), :mod:`phantomlab.correction_workflow` (next batch, top-up),
:mod:`phantomlab.recalibration` (the potency update, exclusions, rollback) and
:mod:`phantomlab.oxygenation_workflow` (an oxygenation series).

Layer 5 because each workflow ties the recipe and calibration layers (3) to the store (4)
and reads the files a person hands over; the store layer holds the schema and queries only
and never imports layer 3's solvers for its own writes.  Nothing here imports argparse,
``phantomlab.cli`` or streamlit: the commands and the page only turn their input into these
calls and show what comes back.  No physics lives here either: prediction, fits and the
potency update are the layers' own functions.
"""
from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping, Sequence

import numpy as np

from phantomlab.errors import InputError
from phantomlab.inputs import check_temperature_c, parse_date_and_time, parse_time_of_day
from phantomlab.jsonable import to_jsonable
from phantomlab.outputs import check_writable_folder, write_text_atomically
from phantomlab.recipe.dispensed import parse_amounts_csv, undiluted_amounts  # layer 3, pure

__all__ = [
    "plan_potencies",
    "parse_amounts_csv",
    "tolerance_alarms",
    "batch_recipe_file",
    "plan_batch",
    "record_planned_batch",
    "RecordedBatch",
    "record_dispensed",
    "DispensedBatch",
    "change_status",
]


# ---- amounts and tolerance (pure) -------------------------------------------------------------


def _array(values, shape) -> np.ndarray:
    array = np.asarray([np.nan if v is None else v for v in (values or [])], dtype=float)
    return array if array.shape == shape else np.full(shape, np.nan)


def tolerance_alarms(*, target: dict[str, Any], predicted: dict[str, Any],
                     mua_tolerance: float, musp_tolerance: float,
                     planned: dict[str, Any] | None = None, what: str = "predicted") -> list[str]:
    """One line per wavelength where ``predicted`` leaves the target's relative tolerance.

    Parameters
    ----------
    target, predicted : dict
        ``wavelength_nm`` and ``mua_per_mm`` / ``musp_per_mm`` lists on one grid (None or
        NaN where a value is not targeted).
    mua_tolerance, musp_tolerance : float [fraction]
        Relative tolerances of the recipe.
    planned : dict, optional
        The plan's own prediction: when it already missed the target there, the line says so.
    """
    alarms = []
    wavelength = np.asarray(target["wavelength_nm"], dtype=float)
    for name, key, tol in (("mua", "mua_per_mm", mua_tolerance), ("musp", "musp_per_mm", musp_tolerance)):
        want = _array(target.get(key), wavelength.shape)
        have = _array(predicted.get(key), wavelength.shape)
        plan = _array((planned or {}).get(key), wavelength.shape)
        for w, a, b, p in zip(wavelength, want, have, plan):
            if np.isfinite(a) and a > 0 and np.isfinite(b):
                deviation = b / a - 1.0
                if abs(deviation) > tol * (1 + 1e-9):
                    line = (f"ALARM: {what} {name} at {w:g} nm is {100 * deviation:+.1f}% from target "
                            f"(tolerance ±{100 * tol:g}%)")
                    if np.isfinite(p) and abs(p / a - 1.0) > tol * (1 + 1e-9):
                        line += f"; the plan itself was {100 * (p / a - 1.0):+.1f}%"
                    alarms.append(line)
    return alarms


# ---- a batch's recipe file ------------------------------------------------------------------------


def batch_recipe_file(recipe_row, override: str | Path | None = None):
    """The recipe a batch was planned from, read from its recorded file (or ``override``).

    Returns
    -------
    (Recipe, list of str)
        The recipe and notes (the file changed since the batch was planned).
    """
    from phantomlab.recipe import load_recipe  # layer 3

    source = str(override or recipe_row.source_path or "") or None
    if not source or not Path(source).is_file():
        raise InputError(
            f"recipe file {source!r} of this batch is not there any more; give it with --recipe RECIPE.toml"
        )
    # a path the batch log recorded may name its stock file anywhere; one typed with --recipe not
    recipe = load_recipe(source, recorded=override is None)
    notes = []
    if recipe.content_hash != recipe_row.content_hash:
        notes.append(
            f"recipe file {source} changed since the batch was planned (hash {recipe.content_hash[:10]} "
            f"vs {recipe_row.content_hash[:10]}); predicting with the file as it is now"
        )
    return recipe, notes


# ---- plan and record a batch ----------------------------------------------------------------------


def plan_potencies(store, recipe) -> tuple[dict, Any]:
    """The calibrated potencies of the lots on the recipe's shelf, and where they come from.

    Returns
    -------
    (dict, str or dict)
        ``{stock: CalibratedPotency}`` (:func:`phantomlab.store.latest_potencies` with the
        shelf; a stock whose lot was never calibrated is left out and keeps the stock file's
        prior), and ``potencies_from``: ``"stock file"`` or ``{"state_id", "recorded_at",
        "restores_state_id"}`` (:func:`phantomlab.recalibration.potencies_from`).
    """
    from phantomlab.recalibration import potencies_from
    from phantomlab.store import latest_potencies  # layer 4

    with store.reading() as session:
        calibrated = latest_potencies(session, shelf=recipe.shelf)
        source = potencies_from(session, recipe, calibrated)
    return calibrated, source


def plan_batch(store, recipe):
    """Solve ``recipe`` with the newest calibrated potency of each lot now on its shelf.

    A stock whose lot was never calibrated keeps the stock file's prior (:func:`plan_potencies`).

    Returns
    -------
    phantomlab.recipe.Plan
    """
    from phantomlab.recipe import solve  # layer 3

    calibrated, _source = plan_potencies(store, recipe)
    return solve(recipe, potencies=calibrated)


@dataclass(frozen=True)
class RecordedBatch:
    """A batch just recorded: its ID and what was stored with it."""

    code: str
    status: str
    plan_json: dict
    potencies_used: dict
    lots: dict  # stock key -> lot name (or None)
    expired_lots: list  # [{stock, lot, expiry}] of lots past their expiry date today
    sheet_html: str
    sheet_path: Path | None = None
    notes: list = field(default_factory=list)  # expired lots the plan's warnings do not name yet
    potencies_from: Any = "stock file"  # "stock file" or {"state_id", "recorded_at", ...}
    corrects_batch: str | None = None


def record_planned_batch(
    store,
    plan,
    *,
    lot_sources: Mapping[str, str | None] | None = None,
    operator: str | None = None,
    notes: str | None = None,
    planned_on: _dt.date | None = None,
    sheet_path: str | Path | None = None,
    corrects: str | None = None,
) -> RecordedBatch:
    """Record a solved plan as a new batch (status ``planned``) in ONE transaction.

    Parameters
    ----------
    plan : phantomlab.recipe.Plan
        From :func:`plan_batch` (or a corrected plan).
    lot_sources : mapping, optional
        Per stock key, the ``shelf_path`` to record with its lot snapshot (where the
        definition came from); default: the recipe's stock file.
    sheet_path : path, optional
        Also write the sheet (HTML, with the batch ID) there.  Its folder is checked before
        anything is recorded; the file is written only after the commit, through a temporary
        file renamed into place, so a run killed at any moment never leaves a sheet naming a
        batch ID that was not recorded (the ID would go to the next batch).
    corrects : str, optional
        The batch this one corrects (a corrected plan): kept in the plan as ``corrects_batch``
        and named on the sheet with the calibration state used.

    Returns
    -------
    RecordedBatch
    """
    from phantomlab import __version__
    from phantomlab.recalibration import describe_potencies_from, potencies_from
    from phantomlab.recipe.sheet import render_sheet_html  # layer 3
    from phantomlab.store import (  # layer 4
        add_batch,
        get_batch,
        latest_potency_states,
        next_batch_code,
        record_recipe,
        record_stock_lot,
    )

    recipe = plan.recipe
    plan_json = to_jsonable(plan.to_json())
    shelf_path = str(getattr(recipe.shelf, "path", "") or "") or None
    sources = dict(lot_sources or {})
    target = Path(sheet_path) if sheet_path is not None else None
    if target is not None:
        check_writable_folder(target, what="sheet")
    with store.transaction() as session:
        states = latest_potency_states(session, shelf=recipe.shelf)
        lots = {
            key: record_stock_lot(session, recipe.stock(key), shelf_path=sources.get(key, shelf_path),
                                  recorded_by=operator)
            for key in (recipe.matrix_key, *recipe.stock_keys)
        }
        recipe_row = record_recipe(session, recipe, recorded_by=operator)
        code = next_batch_code(session)
        calibrated = {d.stock: d.potency for d in plan.doses if d.potency_source == "calibrated"}
        source = potencies_from(session, recipe, calibrated)
        corrected = None
        if corrects is not None:
            corrected = get_batch(session, corrects).code
        plan_json["potencies_from"] = source
        if corrected is not None:
            plan_json["corrects_batch"] = corrected
        note = describe_potencies_from(source).capitalize()
        if corrected is not None:
            note = f"Corrects batch {corrected}; {describe_potencies_from(source)}"
        sheet_html = render_sheet_html(plan, batch_id=code, draft=False, note=note)
        potencies_used = {
            dose.stock: {
                "potency": dose.potency, "potency_sd": dose.potency_sd, "lot": dose.lot,
                "source": dose.potency_source,
                "calibration_state_id": states.get(dose.stock) if dose.potency_source == "calibrated" else None,
            }
            for dose in plan.doses
        }
        used_states = sorted({v["calibration_state_id"] for v in potencies_used.values()} - {None})
        batch = add_batch(
            session, code=code, recipe=recipe_row, plan=plan_json, sheet_html=sheet_html,
            potencies_used=potencies_used, lots=lots, software_version=__version__,
            calibration_state_id=used_states[-1] if used_states else None,
            operator=operator, notes=notes, planned_on=planned_on,
            matrix_details={"matrix": recipe.matrix_key, "lot": recipe.matrix.lot,
                            "preparation": plan_json.get("preparation")},
        )
        status = batch.status
        lot_names = {key: lot.lot for key, lot in lots.items()}
        today = _dt.date.today()
        expired = [{"stock": key, "lot": lot.lot, "expiry": lot.expiry} for key, lot in lots.items()
                   if lot.expiry is not None and lot.expiry < today]
    if target is not None:  # after the commit: the batch ID on the sheet is recorded
        try:
            write_text_atomically(target, sheet_html, what="sheet")
        except InputError as exc:
            raise InputError(f"batch {code} is recorded, but its sheet was not written ({exc}); the sheet "
                             "is stored with the batch (the page's batch log offers it)") from None
    unsaid = [f"{item['stock']}: lot {item['lot'] or '(none)'} expired on {item['expiry'].isoformat()}"
              for item in expired
              if not any(item["stock"] in w and item["expiry"].isoformat() in w for w in plan.warnings)]
    return RecordedBatch(code=code, status=status, plan_json=plan_json, potencies_used=potencies_used,
                         lots=lot_names, expired_lots=expired, sheet_html=sheet_html, sheet_path=target,
                         notes=unsaid, potencies_from=source, corrects_batch=corrected)


# ---- what was dispensed -------------------------------------------------------------------------


@dataclass(frozen=True)
class DispensedBatch:
    """The amounts of a batch recorded, with the prediction of what was made."""

    code: str
    status: str
    version: int
    amounts: list  # rows as stored (undiluted stock: volume_ml, mass_g, volume_fraction, ...)
    volume_fractions: dict
    prediction: Any  # phantomlab.recipe.Prediction
    prediction_json: dict
    target: dict
    planned_predicted: dict | None
    alarms: list
    notes: list  # what the caller should say besides the alarms (recipe or stock file changed)


def record_dispensed(
    store,
    code: str,
    rows: Sequence[Mapping[str, Any]],
    *,
    recipe=None,
    recipe_file: str | Path | None = None,
    mixed_on: _dt.date | str | None = None,
    mixing_time: _dt.time | str | None = None,
    cure: str | None = None,
    mixing_temperature_c: float | None = None,
    notes: str | None = None,
    recorded_by: str | None = None,
) -> DispensedBatch:
    """Record the amounts really dispensed and predict the optics of what was really made.

    Parameters
    ----------
    rows : list of dict
        The sheet's lines as :func:`parse_amounts_csv` gives them
        (:mod:`phantomlab.recipe.dispensed`): ``{stock, volume_ml | mass_g,
        dilution_factor}`` an amount [mL or g] of the stock or of its pre-dilution 1 in
        ``dilution_factor``; a pre-dilution step (``KEY-D1``) with its actual taken and
        ``diluent_ml | diluent_g``; the matrix, whole or by its lines (``KEY:part_a``...).
        With the matrix given, the batch volume is the matrix as measured + the diluent the
        pre-dilutions carried + the undiluted stocks (volumes additive); without it, the
        planned one.
    recipe : Recipe, optional
        The batch's recipe; default: read from the file it was planned from (or
        ``recipe_file``), saying so in ``notes`` when that file changed.
    mixed_on : date or str, optional
        The day it was mixed (``YYYY-MM-DD``; a time after it, ``YYYY-MM-DDTHH:MM``, is kept
        as ``mixing_time`` unless that is given); default: today, or the day already recorded.
    mixing_time : time or str, optional
        Time of day of mixing (``HH:MM``), kept in ``cure_details["mixing_time"]``.
    cure, mixing_temperature_c : str, float [°C], optional
        The cure or setting schedule as done, and the mixing temperature.

    Returns
    -------
    DispensedBatch
        The prediction is at the potencies the plan used; the alarms are
        :func:`tolerance_alarms` against the plan's target and tolerances.
    """
    from phantomlab.recipe import predict  # layer 3
    from phantomlab.store import StoreConflictError, batch_lots, get_batch, plan_of, recipe_of, record_actual
    from phantomlab.store.snapshots import content_sha256

    if mixing_temperature_c is not None:
        mixing_temperature_c = check_temperature_c(mixing_temperature_c, name="mixing temperature")
    if mixed_on is not None:
        mixed_on, said_time = parse_date_and_time(mixed_on, name="mixed on", not_after_today=True)
        mixing_time = mixing_time if mixing_time is not None else said_time
    if mixing_time is not None:
        mixing_time = parse_time_of_day(mixing_time, name="mixing time")
    # Read and predict without holding the write lock; then write, checking that no other
    # writer changed the batch meanwhile.
    with store.reading() as session:
        batch = get_batch(session, code)
        batch_id = batch.id
        plan_row = plan_of(session, batch)
        plan, potencies_used = dict(plan_row.plan), dict(plan_row.potencies_used or {})
        recipe_row = recipe_of(session, batch)
        lot_sha = {key: lot.definition_sha256 for key, lot in batch_lots(session, batch).items()}
        said = []
        if recipe is None:
            recipe, said = batch_recipe_file(recipe_row, recipe_file)
    said = list(said)
    for key, sha in lot_sha.items():
        if key in recipe.shelf.keys() and content_sha256(recipe.stock(key).definition) != sha:
            said.append(f"stock {key}: the stock file changed since planning; predicting with it as it is now")
    amounts, fractions = undiluted_amounts(rows, recipe, plan)
    potencies = {key: (float(v["potency"]), float(v.get("potency_sd", 0.0)))
                 for key, v in potencies_used.items()
                 if key in recipe.stock_keys and isinstance(v, Mapping) and "potency" in v}
    prediction = predict(recipe, volume_fractions=fractions, potencies=potencies or None)
    prediction_json = to_jsonable(prediction.to_json())
    target = plan.get("target") or to_jsonable(recipe.target.to_json())
    alarms = tolerance_alarms(
        target=target, predicted=prediction_json, planned=plan.get("predicted"),
        mua_tolerance=float(target.get("mua_tolerance_percent", 100 * recipe.target.mua_tolerance)) / 100,
        musp_tolerance=float(target.get("musp_tolerance_percent", 100 * recipe.target.musp_tolerance)) / 100,
    )
    cure = " ".join(str(cure).split()) if cure is not None else None
    cure_details = {k: v for k, v in {"schedule": cure or None, "mixing_temperature_c": mixing_temperature_c,
                                      "mixing_time": mixing_time}.items() if v is not None}
    with store.transaction() as session:
        head = get_batch(session, code)
        if head.id != batch_id:
            raise StoreConflictError(f"batch {head.code} changed while its amounts were being predicted; try again")
        updated = record_actual(session, head, amounts=amounts, prediction=prediction_json, alarms=alarms,
                                recorded_by=recorded_by, mixed_on=mixed_on, cure_details=cure_details,
                                notes=notes)
        result = DispensedBatch(
            code=updated.code, status=updated.status, version=updated.version, amounts=amounts,
            volume_fractions=fractions, prediction=prediction, prediction_json=prediction_json, target=target,
            planned_predicted=plan.get("predicted"), alarms=alarms, notes=said,
        )
    return result


def change_status(store, code: str, status: str, *, note: str | None = None,
                  recorded_by: str | None = None) -> tuple[str, Any]:
    """Move a batch to ``status`` (forward only; a new version) in one transaction.

    Returns
    -------
    (previous status, the new batch version row)
    """
    from phantomlab.store import get_batch, set_status  # layer 4

    with store.transaction() as session:
        batch = get_batch(session, code)
        before = batch.status
        updated = set_status(session, batch, str(status).strip().lower(), note=note, recorded_by=recorded_by)
    return before, updated
