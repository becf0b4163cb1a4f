"""The calibration workflows, one implementation for the command line and the page (layer 5).

* :func:`recalibrate` — every mixed batch with fits (:func:`gather_history`, exclusions left
  out), the potency update of the calibration layer (Birge-widened SDs, spectral corrections
  where the data support them, outliers), compared with the potencies in force now.  It
  PREVIEWS by default (nothing is written); ``apply=True`` records one calibration state in
  the same transaction, refused when it would record nothing new;
* :func:`exclude_batch` / :func:`include_batch` — leave a batch or one measurement out of the
  calibration (or take it back), with a reason kept in the append-only history;
* :func:`calibration_list` / :func:`use_calibration` — every recorded state, and a rollback
  that makes an earlier one current again (a new state pointing at it);
* :func:`potencies_from` — which potencies a plan uses: the stock file's, or calibration
  state N of date D (``plan``, ``batch add``, ``correct`` and the sheets say it).

Nothing here imports argparse, ``phantomlab.cli`` or streamlit; no physics lives here either
(the update is :func:`phantomlab.calibration.update_potencies`).
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from phantomlab.errors import InputError
from phantomlab.jsonable import to_jsonable

__all__ = [
    "METHOD",
    "Recalibration",
    "batch_volume_fractions",
    "calibration_list",
    "describe_potencies_from",
    "exclude_batch",
    "exclusions_in_force",
    "gather_history",
    "include_batch",
    "potencies_from",
    "recalibrate",
    "use_calibration",
]

METHOD = ("bayesian least squares with spectral corrections, outlier test and Birge widening "
          "(phantomlab.calibration.potency, v2)")


def batch_volume_fractions(batch, plan: dict, recipe) -> tuple[dict[str, float], str]:
    """Volume fractions actually dispensed (recorded amounts), else the planned ones."""
    if batch.actual_amounts:
        fractions = {row["stock"]: float(row["volume_fraction"]) for row in batch.actual_amounts
                     if row.get("stock") in recipe.stock_keys and row.get("volume_fraction") is not None}
        if fractions:
            return fractions, "actual"
    fractions = {d["stock"]: float(d["volume_fraction"]) for d in plan.get("doses", [])
                 if d.get("stock") in recipe.stock_keys}
    return fractions, "planned"


def _excluded(session) -> tuple[set, set, list]:
    from phantomlab.store import calibration_exclusions  # layer 4

    batches, measurements, listed = set(), set(), []
    for row in calibration_exclusions(session):
        if row.measurement_id is None:
            batches.add(row.batch_code)
        else:
            measurements.add(row.measurement_id)
        listed.append({"batch_id": row.batch_code, "measurement_id": row.measurement_id,
                       "reason": row.change_note, "recorded_at": row.recorded_at, "recorded_by": row.recorded_by})
    return batches, measurements, listed


def gather_history(session, *, recipe_override: str | Path | None = None) -> dict[str, Any]:
    """Priors and observations of every mixed batch with fits in the log, exclusions left out.

    Returns
    -------
    dict
        ``priors`` (list of PotencyPrior), ``observations`` (list of BatchObservation, one per
        fitted measurement), ``fit_ids``, ``batches`` ({code: "actual"|"planned"}),
        ``skipped`` (list of str), ``latest_lot`` ({stock: lot of the newest batch}),
        ``excluded`` (the exclusions in force, with reasons).
    """
    from phantomlab.calibration.observations import observation_from_fit  # layer 3
    from phantomlab.calibration.potency import PotencyPrior
    from phantomlab.store import batch_lots, fits_of, list_batches, measurements_of, plan_of, recipe_of
    from phantomlab.workflows import batch_recipe_file

    excluded_batches, excluded_measurements, excluded = _excluded(session)
    priors: dict[tuple, PotencyPrior] = {}
    observations, fit_ids, skipped = [], [], []
    used: dict[str, str] = {}
    latest_lot: dict[str, str | None] = {}
    for batch in list_batches(session):
        if batch.status not in ("mixed", "characterised", "retired") or batch.code in excluded_batches:
            continue
        fits = []
        for measurement in measurements_of(session, batch):
            if measurement.id in excluded_measurements:
                continue
            rows = fits_of(session, measurement)
            if rows:
                fits.append((measurement, max(rows, key=lambda r: (r.recorded_at, r.id))))
        if not fits:
            continue
        try:
            recipe, _notes = batch_recipe_file(recipe_of(session, batch), recipe_override)
        except InputError as exc:
            skipped.append(f"batch {batch.code}: {exc}")
            continue
        plan = plan_of(session, batch).plan
        fractions, source = batch_volume_fractions(batch, plan, recipe)
        lot_rows = batch_lots(session, batch)
        lots = {}
        for key in recipe.stock_keys:
            row = lot_rows.get(key)
            stock = recipe.stock(key)
            lot = row.lot if row is not None else stock.lot
            lot = None if lot in (None, "") else str(lot)
            lots[key] = lot
            latest_lot[key] = lot
            if (key, lot) not in priors:
                potency = row.potency_prior if row is not None and row.potency_prior is not None else stock.potency
                sd = row.potency_sd_prior if row is not None and row.potency_sd_prior else stock.potency_sd
                priors[(key, lot)] = PotencyPrior(stock=key, lot=lot, potency=float(potency), potency_sd=float(sd))
        for measurement, fit in fits:
            try:
                observations.append(observation_from_fit(
                    recipe, batch_id=batch.code, volume_fractions=fractions, fit=fit.results, lots=lots,
                    measurement_id=measurement.id))
            except InputError as exc:
                skipped.append(f"batch {batch.code} fit {fit.id}: {exc}")
                continue
            fit_ids.append(fit.id)
            used[batch.code] = source
    return {"priors": list(priors.values()), "observations": observations, "fit_ids": fit_ids,
            "batches": used, "skipped": skipped, "latest_lot": latest_lot, "excluded": excluded}


@dataclass(frozen=True)
class Recalibration:
    """A calibration computed from the whole log: previewed, or recorded (``applied``)."""

    update: Any  # phantomlab.calibration.PotencyUpdate
    payload: dict
    state_id: int | None  # the recorded state; None for a preview
    skipped: list
    applied: bool = False
    notes: list = field(default_factory=list)

    @property
    def fingerprint(self) -> str:
        return self.payload["fingerprint"]


def _fingerprint(history: dict, recipe_override, spectral: str) -> str:
    content = {"fit_ids": sorted(history["fit_ids"]), "spectral": spectral,
               "excluded": sorted((e["batch_id"], e["measurement_id"] or 0) for e in history["excluded"]),
               "recipe_override": str(recipe_override or "")}
    return hashlib.sha256(json.dumps(content, sort_keys=True).encode()).hexdigest()[:16]


def _in_force(session) -> tuple[dict, Any]:
    from phantomlab.store import latest_calibration_state, latest_potencies  # layer 4

    return latest_potencies(session), latest_calibration_state(session)


def recalibrate(store, *, recipe_override: str | Path | None = None, apply: bool = False,
                expect_fingerprint: str | None = None, spectral: str = "auto",
                recorded_by: str | None = None) -> Recalibration:
    """Estimate every stock lot's potency from the whole batch log; record it only with ``apply``.

    One potency per stock key is kept: that of the lot of the newest batch (an older lot's
    estimate is shown, not stored).  Gathering, update and (with ``apply``) the write are ONE
    transaction.

    Parameters
    ----------
    apply : bool
        Record the result as a new calibration state (default: preview only).
    expect_fingerprint : str, optional
        With ``apply``: the fingerprint of the preview the person saw; refused when the log
        changed since (new fits, exclusions), so what is recorded is what was shown.
    spectral : {"auto", "off"}
        Spectral corrections where the data support them, or scalar potencies only.

    Returns
    -------
    Recalibration
        ``payload``: ``stocks`` {KEY: {potency, potency_sd, lot, potency_before,
        potency_sd_before, before_from, spectral}}, ``chi2_red``, ``birge_ratio``,
        ``sd_widened``, ``scale_sd``, ``outliers``, ``excluded``, ``applied``, ``state_id``,
        ``fingerprint``, ``notes`` and the update's report (``moved_by``, ``lots``,
        ``spectral_selection``, ``residuals``, ``batches``, ``fit_ids``, ``skipped``).

    Raises
    ------
    InputError
        No mixed batch with a fitted measurement; with ``apply``: nothing new to record (the
        current state was computed from the same fits and exclusions), or the log changed
        since the preview.
    """
    from phantomlab.calibration import update_potencies  # layer 3
    from phantomlab.store import record_calibration  # layer 4

    opened = store.transaction() if apply else store.reading()
    with opened as session:
        history = gather_history(session, recipe_override=recipe_override)
        if not history["observations"]:
            raise InputError(
                "no mixed batch with a fitted measurement in the batch log (excluded ones left out); record the "
                "amounts dispensed and attach a measurement first"
                + (f" ({'; '.join(history['skipped'])})" if history["skipped"] else "")
            )
        fingerprint = _fingerprint(history, recipe_override, spectral)
        update = update_potencies(history["priors"], history["observations"], spectral=spectral)
        payload = update.to_json()
        in_force, current_state = _in_force(session)
        stored = {}
        for k, (key, lot) in enumerate(update.stocks):
            if history["latest_lot"].get(key) != lot:
                continue
            correction = update.spectral.get((key, lot))
            stored[key] = (float(update.potency[k]), float(update.potency_sd[k]), lot,
                           correction.to_json() if correction is not None else None)
            now = in_force.get(key)
            if now is not None and now[2] == lot:
                before = {"potency_before": float(now[0]), "potency_sd_before": float(now[1]),
                          "before_from": {"state_id": current_state.id if current_state else None}}
            else:
                before = {"potency_before": float(update.prior_potency[k]),
                          "potency_sd_before": float(update.prior_sd[k]), "before_from": "stock file"}
            payload["stocks"][key] = {"potency": stored[key][0], "potency_sd": stored[key][1], "lot": lot,
                                      **before, "spectral": stored[key][3]}
        notes = _notes(update, history)
        state_id = None
        if apply:
            if expect_fingerprint is not None and expect_fingerprint != fingerprint:
                raise InputError("the batch log changed since this preview (new fits or exclusions); preview again "
                                 "and confirm what is shown")
            if current_state is not None and (current_state.computed_from or {}).get("fingerprint") == fingerprint:
                raise InputError(f"nothing to apply: calibration state {current_state.id} was computed from the "
                                 "same fits and exclusions")
            state = record_calibration(
                session, potencies=stored, method=METHOD, recorded_by=recorded_by,
                computed_from={"batches": history["batches"], "fit_ids": history["fit_ids"],
                               "moved_by": payload["moved_by"], "lots": payload["lots"],
                               "excluded": history["excluded"], "outliers": payload["outliers"],
                               "chi2_red": payload["chi2_red"], "birge_ratio": payload["birge_ratio"],
                               "scale_sd": payload["scale_sd"], "fingerprint": fingerprint,
                               "spectral_selection": payload["spectral_selection"]},
            )
            state_id = state.id
    payload.update({"fit_ids": history["fit_ids"], "batches": sorted(history["batches"]),
                    "skipped": history["skipped"], "excluded": to_jsonable(history["excluded"]),
                    "applied": bool(apply), "state_id": state_id, "calibration_state_id": state_id,
                    "dry_run": not apply, "fingerprint": fingerprint, "notes": notes})
    return Recalibration(update=update, payload=to_jsonable(payload), state_id=state_id,
                         skipped=list(history["skipped"]), applied=bool(apply), notes=notes)


def _notes(update, history) -> list[str]:
    notes = []
    if update.birge_ratio > 1.0:
        notes.append(f"reduced chi2 {update.chi2_red:.3g} > 1: the fits scatter more than their SDs say; every potency "
                     f"SD is widened by sqrt(chi2_red) = {update.birge_ratio:.2f} (Birge ratio)")
    scale = {k: v for k, v in update.scale_sd.items() if v > 0}
    if scale:
        notes.append("the measurements scatter in scale beyond their SDs by " + ", ".join(
            f"{100 * v:.1f} % in {k.replace('musp', 'mus′')}" for k, v in scale.items())
            + " (Paule-Mandel); that is in the potency SDs")
    tested = any(m.get("leave_out_z") is not None for moves in update.moved_by.values() for m in moves)
    if not tested:
        notes.append("outlier test not run: it needs a stock lot used by at least three batches (the one left out "
                     "and two others)")
    for outlier in update.outliers:
        what = (f"--measurement {outlier['measurement_id']} " if outlier["measurement_id"] is not None else "")
        notes.append(f"OUTLIER: {outlier['reason']}; to leave it out: phantomlab batch exclude "
                     f"{outlier['batch_id']} {what}--reason TEXT")
    for key_lot, correction in update.spectral.items():
        notes.append(f"{key_lot[0]} (lot {key_lot[1] or '-'}): spectral correction {correction.describe()}")
    for item in history["excluded"]:
        what = f"measurement {item['measurement_id']} of batch" if item["measurement_id"] else "batch"
        notes.append(f"left out: {what} {item['batch_id']} ({item['reason']})")
    return notes


# ---- exclusions ------------------------------------------------------------------------------------


def exclude_batch(store, code: str, *, measurement_id: int | None = None, reason: str,
                  recorded_by: str | None = None) -> dict[str, Any]:
    """Leave batch ``code`` (or one of its measurements) out of every later calibration."""
    from phantomlab.store import exclude_from_calibration, get_batch  # layer 4

    with store.transaction() as session:
        batch = get_batch(session, code)
        row = exclude_from_calibration(session, batch, measurement_id=measurement_id, reason=reason,
                                       recorded_by=recorded_by)
        return {"batch_id": batch.code, "measurement_id": row.measurement_id, "excluded": True,
                "reason": row.change_note, "version": row.version, "recorded_at": row.recorded_at}


def include_batch(store, code: str, *, measurement_id: int | None = None, reason: str | None = None,
                  recorded_by: str | None = None) -> dict[str, Any]:
    """Take an excluded batch (or measurement) into the calibration again."""
    from phantomlab.store import get_batch, include_in_calibration  # layer 4

    with store.transaction() as session:
        batch = get_batch(session, code)
        row = include_in_calibration(session, batch, measurement_id=measurement_id, reason=reason,
                                     recorded_by=recorded_by)
        return {"batch_id": batch.code, "measurement_id": row.measurement_id, "excluded": False,
                "reason": row.change_note, "version": row.version, "recorded_at": row.recorded_at}


def exclusions_in_force(store) -> list[dict[str, Any]]:
    """The batches and measurements left out of the calibration now, with their reasons."""
    with store.reading() as session:
        return to_jsonable(_excluded(session)[2])


# ---- states and rollback -------------------------------------------------------------------------


def calibration_list(store) -> list[dict[str, Any]]:
    """Every calibration state (oldest first) with its potencies; ``current`` marks the one in force."""
    from phantomlab.store import calibration_states  # layer 4

    with store.reading() as session:
        return to_jsonable(calibration_states(session))


def use_calibration(store, state_id, *, note: str | None = None, recorded_by: str | None = None) -> dict[str, Any]:
    """Make calibration state ``state_id`` current again (a new state that points at it)."""
    from phantomlab.store import latest_potencies, restore_calibration_state  # layer 4

    with store.transaction() as session:
        restored = restore_calibration_state(session, state_id, note=note, recorded_by=recorded_by)
        potencies = latest_potencies(session)
        return to_jsonable({"state_id": restored.id, "restores_state_id": restored.restores_state_id,
                            "recorded_at": restored.recorded_at, "notes": restored.notes,
                            "potencies": {k: {"potency": v[0], "potency_sd": v[1], "lot": v[2],
                                              "spectral": v.spectral} for k, v in potencies.items()}})


def potencies_from(session, recipe, potencies: Mapping[str, tuple] | None) -> Any:
    """``"stock file"``, or ``{"state_id", "recorded_at", "restores_state_id"}`` of the state in force.

    A plan uses a calibration state when at least one of the recipe's stocks takes its
    potency from it (the lot on the shelf was calibrated); the state named is the current one.
    """
    from phantomlab.store import latest_calibration_state  # layer 4

    used = [key for key in recipe.stock_keys if key in (potencies or {})]
    if not used:
        return "stock file"
    state = latest_calibration_state(session)
    if state is None:
        return "stock file"
    return to_jsonable({"state_id": state.id, "recorded_at": state.recorded_at,
                        "restores_state_id": state.restores_state_id})


def describe_potencies_from(value: Any) -> str:
    """One line for a sheet or a terminal."""
    if not isinstance(value, Mapping):
        return "potencies from the stock file"
    text = f"potencies from calibration state {value['state_id']} of {str(value['recorded_at'])[:16].replace('T', ' ')} UTC"
    if value.get("restores_state_id"):
        text += f" (a rollback to state {value['restores_state_id']})"
    return text
