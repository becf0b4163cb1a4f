"""``phantomlab recalibrate``: stock potencies from the whole batch history (layer 5, no physics).

    phantomlab recalibrate [--db URL] [--recipe RECIPE.toml] [--dry-run] [--json]

Reads every batch of the log that was mixed and has fitted measurements (amounts actually
dispensed, else the planned doses; the newest fit of each measurement), turns each fit into
a linear observation of the potencies of the lots it used
(:func:`phantomlab.calibration.observations.observation_from_fit`), and runs the Bayesian
update (:func:`phantomlab.calibration.update_potencies`) from the stock file's prior of every
lot (the snapshot the batch log kept).  The result is stored as a new calibration state
(unless ``--dry-run``), which ``phantomlab plan --db`` then uses.  The work is
:func:`phantomlab.workflows.recalibrate`, the same function the page calls.

JSON: ``stocks`` {KEY: {potency, potency_sd, lot}} (docs/contract.md); extras ``before``, ``after``,
``moved_by`` (per stock: the batches that moved it, each with its shift and information
share), ``lots``, ``batches``, ``fit_ids``, ``skipped``, ``calibration_state_id``, ``chi2_red``.
"""

from __future__ import annotations

import warnings

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import PhantomlabWarning

__all__ = ["register"]


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
    from phantomlab.store import open_store
    from phantomlab.workflows import recalibrate

    store = open_store(args.db)
    try:
        done = recalibrate(store, recipe_override=args.recipe, dry_run=args.dry_run)
    finally:
        store.close()
    for message in done.skipped:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    return CommandResult(payload=done.payload, text=_table(done.payload))
