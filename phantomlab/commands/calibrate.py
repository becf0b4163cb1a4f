"""``phantomlab recalibrate``: stock potencies from the whole batch history (layer 5, no physics).

    phantomlab recalibrate [--db URL] [--recipe RECIPE.toml] [--json]            (preview)
    phantomlab recalibrate --apply [--operator NAME] [--db URL] [--json]         (record it)

Reads every batch of the log that was mixed and has fitted measurements (amounts actually
dispensed, else the planned doses; the newest fit of each measurement; batches and
measurements excluded with ``phantomlab batch exclude`` left out), runs the potency update
(:func:`phantomlab.calibration.update_potencies`: potency SDs widened by the Birge ratio when
χ²ᵣ > 1, spectral corrections where the data support them, outliers flagged), and shows each
stock lot's potency now → after ± SD, the batches that moved it, the outliers and χ²ᵣ.  It
PREVIEWS by default and records nothing; ``--apply`` records the result as a new calibration
state, which ``plan``, ``batch add`` and ``correct`` then use.  ``--dry-run`` is the preview
said explicitly.  The work is :func:`phantomlab.recalibration.recalibrate`, the same function
the page calls.

JSON (docs/contract.md): ``stocks`` {KEY: {potency, potency_sd, lot, potency_before, potency_sd_before,
before_from, spectral}}, ``chi2_red``, ``birge_ratio``, ``sd_widened``, ``scale_sd``,
``outliers`` [{batch_id, measurement_id, reason, ...}], ``excluded``, ``applied``,
``state_id`` (None for a preview), ``fingerprint``, ``notes``; extras ``moved_by``, ``lots``,
``spectral_selection``, ``residuals``, ``batches``, ``fit_ids``, ``skipped``, ``before``,
``after``, ``calibration_state_id`` and ``dry_run`` (as before).
"""

from __future__ import annotations

import warnings

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import InputError, PhantomlabWarning

__all__ = ["register"]


def register(subparsers) -> None:
    parser = subparsers.add_parser(
        "recalibrate",
        help="preview the stock potencies the batch log supports; --apply records them",
        description="Bayesian update of every stock lot's potency from the batch log (fitted optics "
        "and amounts dispensed), the stock file as the prior.  Shows what would change; records "
        "nothing without --apply.",
    )
    parser.add_argument("--db", metavar="URL", default=None,
                        help="SQLAlchemy URL of the batch log (default: $PHANTOMLAB_DB, else phantomlab.sqlite)")
    parser.add_argument("--recipe", metavar="RECIPE.toml", default=None,
                        help="recipe file to use where a batch's recorded recipe file is not there any more")
    parser.add_argument("--apply", action="store_true", help="record the result as a new calibration state")
    parser.add_argument("--dry-run", action="store_true", help="preview only (the default), said explicitly")
    parser.add_argument("--operator", metavar="NAME", help="who records the calibration (with --apply)")
    add_json_option(parser)
    parser.set_defaults(handler=_recalibrate)


def _sd(value: float, sd: float) -> str:
    return f"{value:.4f} ± {sd:.4f}"


def _table(payload: dict) -> str:
    lines = [f"calibration from {len(payload['batches'])} batch(es), {len(payload['fit_ids'])} fit(s)"
             + (f", {len(payload['excluded'])} exclusion(s) in force" if payload["excluded"] else "")]
    header = f"{'stock':<14} {'lot':<18} {'now':>17} {'after':>17} {'change':>8}  moved by (batch: shift, z left out)"
    lines += [header, "-" * len(header)]
    shown = {}
    for item in payload["lots"]:
        key = item["stock"]
        stock = payload["stocks"].get(key, {})
        if stock.get("lot") != item["lot"]:
            continue  # an older lot: estimated, not stored
        shown[key] = stock
        before, sd_before = stock.get("potency_before", item["potency_before"]), stock.get("potency_sd_before",
                                                                                            item["potency_sd_before"])
        moved = []
        for m in payload["moved_by"].get(key, []):
            z = m.get("leave_out_z")
            moved.append(f"{m['batch_id']}: {m['shift']:+.3f}" + (f", z {z:+.1f}" if z is not None else ""))
        lines.append(f"{key:<14} {str(item['lot']):<18} {_sd(before, sd_before):>17} "
                     f"{_sd(item['potency'], item['potency_sd']):>17} {100 * (item['potency'] / before - 1):+7.1f}%  "
                     f"{'; '.join(moved) or '-'}")
    chi2 = payload.get("chi2_red")
    lines.append(f"reduced chi2 {chi2:.3g}" if chi2 is not None else "reduced chi2: no degrees of freedom")
    lines += [f"  {note}" for note in payload["notes"]]
    tested = any(m.get("leave_out_z") is not None for moves in payload["moved_by"].values() for m in moves)
    if tested and not payload["outliers"]:
        lines.append("no outlier: every batch agrees with the others within 3 SD (leave-one-batch-out test)")
    if payload["applied"]:
        lines.append(f"recorded as calibration state {payload['state_id']}; plan, batch add and correct use it "
                     "(undo: phantomlab calibration use STATE_ID)")
    else:
        lines.append("PREVIEW: nothing recorded; `phantomlab recalibrate --apply` records this")
    return "\n".join(lines)


def _recalibrate(args) -> CommandResult:
    from phantomlab.recalibration import recalibrate
    from phantomlab.store import open_store

    if args.apply and args.dry_run:
        raise InputError("--apply and --dry-run contradict each other; give one (the preview is the default)")
    store = open_store(args.db, create=False)
    try:
        done = recalibrate(store, recipe_override=args.recipe, apply=args.apply, recorded_by=args.operator)
    finally:
        store.close()
    for message in done.skipped:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    return CommandResult(payload=done.payload, text=_table(done.payload))
