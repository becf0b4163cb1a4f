"""``phantomlab batch list|show|record|export``: reading the batch log back (layer 5).

    phantomlab batch list [--status S] [--all]
    phantomlab batch show BATCH_ID
    phantomlab batch record BATCH_ID --html FILE.html
    phantomlab batch export FILE.zip

Four actions of ``phantomlab batch`` (their options are registered by
:mod:`phantomlab.commands.batch`); each only reads the log: the batches with their summary,
one batch with its full history (versions, lots, measurements and fits, calibration
exclusions), the printable batch record (:mod:`phantomlab.store.record`) and the whole lab
as one archive (:mod:`phantomlab.store.archive`).  JSON keys: docs/contract.md.
"""

from __future__ import annotations

from typing import Any

from phantomlab.cli import CommandResult
from phantomlab.commands._batch_io import fmt_value, open_log, output_path, write_output
from phantomlab.errors import InputError

__all__ = ["list_handler", "show_handler", "record_handler", "export_handler"]


# ---- list, show ------------------------------------------------------------------------------


def _batch_summary(session, batch) -> dict[str, Any]:
    from phantomlab.store import measurements_of, recipe_of

    recipe = recipe_of(session, batch)
    return {
        "batch_id": batch.code, "status": batch.status, "retracted": batch.retracted,
        "version": batch.version, "recipe": recipe.name, "recipe_version": recipe.recipe_version,
        "operator": batch.operator, "planned_on": batch.planned_on, "mixed_on": batch.mixed_on,
        "measurements": len(measurements_of(session, batch)),
        "alarm": bool(batch.actual_alarms),
    }


def list_handler(args) -> CommandResult:
    from phantomlab.store import list_batches

    if args.status is not None:
        from phantomlab.store.schema import BATCH_STATUSES

        if args.status not in BATCH_STATUSES:
            raise InputError(f"--status {args.status!r} not accepted; accepted: {', '.join(BATCH_STATUSES)}")
    store = open_log(args, create=True)
    try:
        with store.reading() as session:
            rows = [_batch_summary(session, b) for b in
                    list_batches(session, status=args.status, include_retracted=args.all)]
    finally:
        store.close()
    lines = [f"{'batch':<10} {'status':<14} {'planned':<11} {'mixed':<11} {'meas':>4}  recipe"]
    for row in rows:
        lines.append(
            f"{row['batch_id']:<10} {row['status'] + (' (retracted)' if row['retracted'] else ''):<14} "
            f"{fmt_value(row['planned_on']):<11} {fmt_value(row['mixed_on']):<11} {row['measurements']:>4}  "
            f"{row['recipe']} v{row['recipe_version']}"
        )
    if not rows:
        lines = ["no batches in the log yet (phantomlab batch add RECIPE.toml)"]
    return CommandResult(payload={"batches": rows}, text="\n".join(lines))


def _version_json(row) -> dict[str, Any]:
    return {"version": row.version, "status": row.status, "retracted": row.retracted,
            "recorded_at": row.recorded_at, "recorded_by": row.recorded_by,
            "change_note": row.change_note, "notes": row.notes, "mixed_on": row.mixed_on,
            "actual_amounts": row.actual_amounts, "actual_alarms": row.actual_alarms,
            "cure_details": row.cure_details}


def show_handler(args) -> CommandResult:
    from phantomlab.store import batch_history, batch_lots, exclusion_history, fits_of, get_batch, measurements_of, plan_of
    from phantomlab.store.history import history_of
    from phantomlab.store.schema import Measurement

    store = open_log(args)
    try:
        with store.reading() as session:
            batch = get_batch(session, args.batch_id)
            plan_row = plan_of(session, batch)
            summary = _batch_summary(session, batch)
            history = [_version_json(v) for v in batch_history(session, batch.code)]
            exclusions = exclusion_history(session, batch.code)
            lots = {key: {"lot": lot.lot, "kind": lot.kind, "expiry": lot.expiry,
                          "snapshot_version": lot.version, "definition_sha256": lot.definition_sha256}
                    for key, lot in batch_lots(session, batch).items()}
            measurements = []
            for m in measurements_of(session, batch, include_retracted=True):
                fits = fits_of(session, m, include_retracted=True)
                measurements.append({
                    "measurement_id": m.id, "kind": m.kind, "file": m.file_name, "instrument": m.instrument,
                    "measured_on": m.measured_on, "phantom_age_days": m.phantom_age_days,
                    "retracted": m.retracted, "versions": len(history_of(session, Measurement, m.uid)),
                    "fits": [{"fit_id": f.id, "model": f.model, "chi2_red": f.chi2_red,
                              "retracted": f.retracted, "result": f.results} for f in fits],
                })
            payload = {
                **summary, "plan": plan_row.plan, "potencies_used": plan_row.potencies_used,
                "calibration_state_id": plan_row.calibration_state_id,
                "software_version": plan_row.software_version, "lots": lots,
                "actual_amounts": batch.actual_amounts, "actual_prediction": batch.actual_prediction,
                "alarms": batch.actual_alarms or [], "matrix_details": batch.matrix_details,
                "cure_details": batch.cure_details, "notes": batch.notes,
                "measurements": measurements, "history": history,
                "calibration_exclusions": exclusions,
                "excluded_from_calibration": bool(exclusions) and exclusions[-1]["event"].startswith("excluded"),
                "corrects_batch": plan_row.plan.get("corrects_batch"),
                "potencies_from": plan_row.plan.get("potencies_from"),
            }
    finally:
        store.close()
    lines = [f"batch {summary['batch_id']}  {summary['status']}{' (RETRACTED)' if summary['retracted'] else ''}"
             f"  recipe {summary['recipe']} v{summary['recipe_version']}",
             f"  planned {summary['planned_on']}  mixed {fmt_value(summary['mixed_on'])}  operator {fmt_value(summary['operator'])}"]
    lines.append("  stocks and lots: " + ", ".join(f"{k} ({v['lot'] or 'no lot'})" for k, v in lots.items()))
    for m in measurements:
        lines.append(f"  measurement {m['measurement_id']}: {m['kind']} {m['file']} age {fmt_value(m['phantom_age_days'])} d,"
                     f" {len(m['fits'])} fit(s){' RETRACTED' if m['retracted'] else ''}")
    for alarm in payload["alarms"]:
        lines.append(f"  {alarm}")
    lines.append("history:")
    events = [(v["recorded_at"], f"  v{v['version']}  {v['recorded_at']:%Y-%m-%d %H:%M}  {v['status']:<13}"
                                 f"{' retracted' if v['retracted'] else ''}  {v['change_note'] or 'recorded'}"
                                 f"{' by ' + v['recorded_by'] if v['recorded_by'] else ''}") for v in history]
    for step in exclusions:
        what = f"measurement {step['measurement_id']} " if step["measurement_id"] else ""
        events.append((step["recorded_at"], f"      {step['recorded_at']:%Y-%m-%d %H:%M}  {what}{step['event']}: "
                                            f"{step['reason']}{' by ' + step['recorded_by'] if step['recorded_by'] else ''}"))
    lines += [text for _when, text in sorted(events, key=lambda item: item[0])]
    return CommandResult(payload=payload, text="\n".join(lines))


# ---- record, export --------------------------------------------------------------------------


def record_handler(args) -> CommandResult:
    from phantomlab.store.record import batch_record, render_batch_record_html

    target = output_path(args.html, option="--html", suffix=".html")
    store = open_log(args)
    try:
        with store.reading() as session:
            record = batch_record(session, args.batch_id)
    finally:
        store.close()
    write_output(target, render_batch_record_html(record), option="--html")
    payload = {"batch_id": record["batch_id"], "html": str(target), "pass": record["pass"],
               "outcome": record["outcome"], "checks": record["checks"], "series": record["series"],
               "corrects_batch": record.get("corrects_batch"), "calibration": record.get("calibration")}
    verdict = record["outcome"] or "not measured yet"
    return CommandResult(payload=payload, text=f"batch record of {record['batch_id']} written to {target}: {verdict}")


def export_handler(args) -> CommandResult:
    from phantomlab.store.archive import export_lab

    store = open_log(args)
    try:
        manifest = export_lab(store, args.archive)
    finally:
        store.close()
    payload = {"archive": args.archive, **manifest}
    counts = ", ".join(f"{n} {name}" for name, n in manifest["tables"].items() if n)
    return CommandResult(payload=payload, text=f"lab exported to {args.archive}: {counts or 'empty log'}")
