"""``phantomlab recalibrate``: stock potencies from the whole batch history (layer 5, no physics).

    phantomlab recalibrate [--db URL] [--recipe RECIPE.toml] [--dry-run] [--json]

Reads every batch of the log that was mixed and has fitted measurements (amounts actually
dispensed, else the planned doses; the newest fit of each measurement), turns each fit into
a linear observation of the potencies of the lots it used
(:func:`phantomlab.calibration.observations.observation_from_fit`), and runs the Bayesian
update (:func:`phantomlab.calibration.update_potencies`) from the stock file's prior of every
lot (the snapshot the batch log kept).  The result is stored as a new calibration state
(unless ``--dry-run``), which ``phantomlab plan --db`` then uses.

JSON: ``stocks`` {KEY: {potency, potency_sd, lot}} (DESIGN.md); extras ``before``, ``after``,
``moved_by`` (per stock: the batches that moved it, each with its shift and information
share), ``lots``, ``batches``, ``fit_ids``, ``skipped``, ``calibration_state_id``, ``chi2_red``.
"""

from __future__ import annotations

import warnings
from pathlib import Path
from typing import Any

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["register", "gather_history", "load_batch_recipe", "batch_volume_fractions"]

METHOD = "bayesian-linear-least-squares (phantomlab.calibration.potency, v1)"


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "recalibrate",
        help="estimate stock potencies from every characterised batch and store them",
        description="Bayesian linear least-squares update of every stock lot's potency from the "
        "batch log (fitted optics and amounts dispensed), the stock file as the prior.",
    )
    parser.add_argument("--db", metavar="URL", default=None,
                        help="SQLAlchemy URL of the batch log (default: $PHANTOMLAB_DB, else phantomlab.sqlite)")
    parser.add_argument("--recipe", metavar="RECIPE.toml", default=None,
                        help="recipe file to use where a batch's recorded recipe file is not there any more")
    parser.add_argument("--dry-run", action="store_true", help="compute and show, but store nothing")
    add_json_option(parser)
    parser.set_defaults(handler=_recalibrate)


def load_batch_recipe(recipe_row, override: str | None = None):
    """The recipe a batch was planned from, read from its recorded file (or ``override``)."""
    from phantomlab.recipe import load_recipe

    source = override or recipe_row.source_path
    if not source or not Path(source).is_file():
        raise InputError(f"recipe file {source!r} is not there any more; give it with --recipe RECIPE.toml")
    return load_recipe(source)


def batch_volume_fractions(batch, plan: dict, recipe) -> tuple[dict[str, float], str]:
    """Volume fractions actually dispensed (``batch actual``), else the planned ones."""
    if batch.actual_amounts:
        fractions = {row["stock"]: float(row["volume_fraction"]) for row in batch.actual_amounts
                     if row.get("stock") in recipe.stock_keys and row.get("volume_fraction") is not None}
        if fractions:
            return fractions, "actual"
    fractions = {d["stock"]: float(d["volume_fraction"]) for d in plan.get("doses", [])
                 if d.get("stock") in recipe.stock_keys}
    return fractions, "planned"


def gather_history(session, *, recipe_override: str | None = None) -> dict[str, Any]:
    """Priors and observations of every mixed batch with fits in the log.

    Returns
    -------
    dict
        ``priors`` (list of PotencyPrior), ``observations`` (list of BatchObservation),
        ``fit_ids``, ``batches`` ({code: "actual"|"planned"}), ``skipped`` (list of str),
        ``latest_lot`` ({stock: lot of the newest batch}).
    """
    from phantomlab.calibration.observations import observation_from_fit
    from phantomlab.calibration.potency import PotencyPrior
    from phantomlab.store import batch_lots, fits_of, list_batches, measurements_of, plan_of, recipe_of

    priors: dict[tuple, PotencyPrior] = {}
    observations, fit_ids, skipped = [], [], []
    used: dict[str, str] = {}
    latest_lot: dict[str, str | None] = {}
    for batch in list_batches(session):
        if batch.status not in ("mixed", "characterised", "retired"):
            continue
        fits = []
        for measurement in measurements_of(session, batch):
            rows = fits_of(session, measurement)
            if rows:
                fits.append(max(rows, key=lambda r: (r.recorded_at, r.id)))
        if not fits:
            continue
        try:
            recipe = load_batch_recipe(recipe_of(session, batch), recipe_override)
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
        for fit in fits:
            try:
                observations.append(observation_from_fit(
                    recipe, batch_id=batch.code, volume_fractions=fractions, fit=fit.results, lots=lots))
            except InputError as exc:
                skipped.append(f"batch {batch.code} fit {fit.id}: {exc}")
                continue
            fit_ids.append(fit.id)
            used[batch.code] = source
    return {"priors": list(priors.values()), "observations": observations, "fit_ids": fit_ids,
            "batches": used, "skipped": skipped, "latest_lot": latest_lot}


def _table(payload: dict) -> str:
    lines = [f"calibration from {len(payload['batches'])} batch(es), {len(payload['fit_ids'])} fit(s)"]
    header = f"{'stock':<14} {'lot':<20} {'before':>16} {'after':>16}  moved by"
    lines += [header, "-" * len(header)]
    for item in payload["lots"]:
        key = item["stock"]
        moved = ", ".join(f"{m['batch_id']} ({m['shift']:+.3f})" for m in payload["moved_by"].get(key, [])
                          if payload["stocks"][key]["lot"] == item["lot"]) or "-"
        lines.append(f"{key:<14} {str(item['lot']):<20} {item['potency_before']:7.3f} ± {item['potency_sd_before']:<6.3f}"
                     f" {item['potency']:7.3f} ± {item['potency_sd']:<6.3f}  {moved}")
    if payload.get("calibration_state_id") is not None:
        lines.append(f"stored as calibration state {payload['calibration_state_id']}; "
                     "`phantomlab plan RECIPE.toml --db URL` uses it")
    elif payload.get("dry_run"):
        lines.append("dry run: nothing stored")
    return "\n".join(lines)


def _recalibrate(args) -> CommandResult:
    from phantomlab.calibration import update_potencies
    from phantomlab.store import open_store, record_calibration

    store = open_store(args.db)
    try:
        with store.transaction() as session:
            history = gather_history(session, recipe_override=args.recipe)
            if not history["observations"]:
                raise InputError(
                    "no mixed batch with a fitted measurement in the batch log; record amounts with "
                    "`phantomlab batch actual` and measurements with `phantomlab batch measure` first"
                    + (f" ({'; '.join(history['skipped'])})" if history["skipped"] else "")
                )
            update = update_potencies(history["priors"], history["observations"])
            payload = update.to_json()
            # one stored potency per stock key: the lot of the newest batch
            stored = {}
            for k, (key, lot) in enumerate(update.stocks):
                if history["latest_lot"].get(key) == lot:
                    stored[key] = (float(update.potency[k]), float(update.potency_sd[k]), lot)
                    payload["stocks"][key] = {"potency": stored[key][0], "potency_sd": stored[key][1], "lot": lot}
            state_id = None
            if not args.dry_run:
                state = record_calibration(
                    session, potencies=stored, method=METHOD,
                    computed_from={"batches": history["batches"], "fit_ids": history["fit_ids"],
                                   "moved_by": payload["moved_by"], "lots": payload["lots"]},
                )
                state_id = state.id
    finally:
        store.close()
    for message in history["skipped"]:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    payload.update({"fit_ids": history["fit_ids"], "batches": sorted(history["batches"]),
                    "skipped": history["skipped"], "calibration_state_id": state_id, "dry_run": bool(args.dry_run)})
    return CommandResult(payload=payload, text=_table(payload))
