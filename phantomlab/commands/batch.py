"""``phantomlab batch ...``: the batch log at the bench (layer 5: input and output, no physics).

    phantomlab batch add RECIPE.toml [--sheet FILE.html] [--operator NAME] [--notes TEXT] [--corrects BATCH_ID]
    phantomlab batch actual BATCH_ID AMOUNTS.csv [--mixed-on DATE] [--cure TEXT] ...
    phantomlab batch status BATCH_ID STATUS [--note TEXT]
    phantomlab batch measure BATCH_ID FILE.csv --kind {srdr,sfdi,slab,sphere,optics,td,fd} [--irf IRF.csv] [...]
    phantomlab batch list [--status S] [--all]
    phantomlab batch show BATCH_ID
    phantomlab batch record BATCH_ID --html FILE.html
    phantomlab batch retract BATCH_ID --reason TEXT
    phantomlab batch amend BATCH_ID --reason TEXT [--set-operator NAME] [--set-notes TEXT] ...
    phantomlab batch export FILE.zip
    phantomlab batch exclude BATCH_ID [--measurement ID] --reason TEXT
    phantomlab batch include BATCH_ID [--measurement ID] [--reason TEXT]

Every sub-command takes ``--db URL`` (default ``$PHANTOMLAB_DB``, else ``phantomlab.sqlite``
in the working folder) and ``--json``, and runs in ONE database transaction.  ``add``,
``actual`` and ``measure`` are the workflows of :mod:`phantomlab.workflows` and
:mod:`phantomlab.measurement_workflow`, ``exclude`` and
``include`` those of :mod:`phantomlab.recalibration` (the page calls the same functions); this
module registers every action's options, reads the options and files of the actions that
write, and prints what comes back.  ``list``, ``show``, ``record`` and ``export`` (reading the
log back) are handled in :mod:`phantomlab.commands.batch_review`, ``exclude`` and ``include``
in :mod:`phantomlab.commands.batch_exclusion`.
"""

from __future__ import annotations

import argparse
import warnings
from pathlib import Path
from typing import Any

from phantomlab.cli import CommandResult, add_json_option
from phantomlab.commands._baseline_options import ProgressBar, add_baseline_options
from phantomlab.commands._batch_io import date_option, fmt_value, open_log, output_path
from phantomlab.commands.fit import input_lines
from phantomlab.commands.batch_exclusion import add_exclusion_actions, exclude_handler, include_handler
from phantomlab.commands.batch_review import export_handler, list_handler, record_handler, show_handler
from phantomlab.errors import InputError, PhantomlabWarning

#: Names this module hands on from :mod:`phantomlab.workflows` (one implementation with the
#: page), loaded on first use (PEP 562): the workflows import the recipe and calibration
#: layers (scipy), about 0.8 s that every ``phantomlab --help`` waited for.
_FROM_WORKFLOWS = ("parse_amounts_csv", "tolerance_alarms")

__all__ = ["register", *_FROM_WORKFLOWS]


def __getattr__(name: str):
    """``parse_amounts_csv`` and ``tolerance_alarms`` of :mod:`phantomlab.workflows`, loaded on first use."""
    if name in _FROM_WORKFLOWS:
        import phantomlab.workflows

        return getattr(phantomlab.workflows, name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")


# ---- parser ----------------------------------------------------------------------------------


def add_db_option(parser: argparse.ArgumentParser) -> None:
    """``--db URL`` of every batch-log command."""
    parser.add_argument(
        "--db", metavar="URL", default=None,
        help="SQLAlchemy URL of the batch log (default: $PHANTOMLAB_DB, else "
        "sqlite:///phantomlab.sqlite in the working folder)",
    )


def register(subparsers) -> None:
    batch = subparsers.add_parser("batch", help="the batch log: plan, record, measure, review batches")
    actions = batch.add_subparsers(dest="batch_command", metavar="ACTION")

    add = actions.add_parser("add", help="plan a batch from a recipe, record it and print its sheet")
    add.add_argument("recipe", metavar="RECIPE.toml")
    add.add_argument("--sheet", metavar="FILE.html", help="write the mixing sheet (with the batch ID) here")
    add.add_argument("--operator", metavar="NAME", help="who makes the batch")
    add.add_argument("--notes", metavar="TEXT", help="free notes kept with the batch")
    add.add_argument("--corrects", metavar="BATCH_ID",
                     help="the batch this one corrects (named on the sheet and in the batch record)")

    actual = actions.add_parser("actual", help="record the amounts really dispensed and predict what was made")
    actual.add_argument("batch_id", metavar="BATCH_ID")
    actual.add_argument("amounts", metavar="AMOUNTS.csv",
                        help="stock,volume_ml or stock,mass_g (undiluted stock; optional dilution_factor column)")
    actual.add_argument("--recipe", metavar="RECIPE.toml", help="the recipe file, if it moved since planning")
    actual.add_argument("--mixed-on", metavar="DATE",
                        help="day the batch was mixed, with the time if known (YYYY-MM-DD or YYYY-MM-DDTHH:MM; "
                             "default today)")
    actual.add_argument("--mixing-temperature-c", type=float, metavar="T", help="mixing temperature [°C]")
    actual.add_argument("--cure", metavar="TEXT", help="cure or setting schedule as done, e.g. '24 h at 21 °C'")
    actual.add_argument("--notes", metavar="TEXT")
    actual.add_argument("--operator", metavar="NAME")

    status = actions.add_parser("status", help="move a batch to planned, mixed, characterised or retired")
    status.add_argument("batch_id", metavar="BATCH_ID")
    status.add_argument("status", metavar="STATUS", help="planned, mixed, characterised or retired")
    status.add_argument("--note", metavar="TEXT")
    status.add_argument("--operator", metavar="NAME")

    measure = actions.add_parser("measure", help="attach a measurement file to a batch and fit it")
    measure.add_argument("batch_id", metavar="BATCH_ID")
    measure.add_argument("file", metavar="FILE.csv")
    measure.add_argument("--kind", required=True, choices=("srdr", "sfdi", "slab", "sphere", "optics", "td", "fd"))
    measure.add_argument("--irf", metavar="IRF.csv", help="td: the instrument response (stored inline)")
    measure.add_argument("--instrument", metavar="NAME")
    measure.add_argument("--measured-on", metavar="DATE", help="YYYY-MM-DD (default: the file's metadata, else today)")
    measure.add_argument("--age-days", type=float, metavar="D",
                         help="phantom age at measurement [days] (default: from the mixing date)")
    measure.add_argument("--temperature-c", type=float, metavar="T", help="phantom temperature [°C]")
    measure.add_argument("--model", metavar="M", help="forward model of the fit")
    measure.add_argument("--n", type=float, metavar="N", help="refractive index of the phantom")
    measure.add_argument("--thickness-mm", type=float, metavar="D")
    measure.add_argument("--g", type=float, metavar="G")
    measure.add_argument("--baseline", metavar="FILE",
                         help="a stored Monte Carlo baseline file instead of the cached one (default model mc: "
                         "g from the batch's scattering model per wavelength, one cached baseline per g step "
                         "of 0.02, each built once)")
    add_baseline_options(measure)
    measure.add_argument("--no-fit", action="store_true", help="store the file only")
    measure.add_argument("--operator", metavar="NAME")

    listing = actions.add_parser("list", help="the batches in the log")
    listing.add_argument("--status", metavar="STATUS")
    listing.add_argument("--all", action="store_true", help="include retracted batches")

    show = actions.add_parser("show", help="one batch with its full history")
    show.add_argument("batch_id", metavar="BATCH_ID")

    record = actions.add_parser("record", help="the printable batch record (HTML) for review")
    record.add_argument("batch_id", metavar="BATCH_ID")
    record.add_argument("--html", required=True, metavar="FILE.html")

    retract = actions.add_parser("retract", help="withdraw a batch (a marked retraction; the data stay)")
    retract.add_argument("batch_id", metavar="BATCH_ID")
    retract.add_argument("--reason", required=True, metavar="TEXT")
    retract.add_argument("--operator", metavar="NAME")

    fix = actions.add_parser("amend", help="amend a batch's operator, notes or mixing date (a new version)")
    fix.add_argument("batch_id", metavar="BATCH_ID")
    fix.add_argument("--reason", required=True, metavar="TEXT", help="why (kept in the history)")
    fix.add_argument("--set-operator", metavar="NAME")
    fix.add_argument("--set-notes", metavar="TEXT", help="replaces the notes")
    fix.add_argument("--set-mixed-on", metavar="DATE", help="YYYY-MM-DD")
    fix.add_argument("--operator", metavar="NAME", help="who makes the correction")

    export = actions.add_parser("export", help="the whole lab as one archive (zip of JSON and CSV)")
    export.add_argument("archive", metavar="FILE.zip")

    exclude, include = add_exclusion_actions(actions)  # commands/batch_exclusion.py

    handlers = {
        add: _add, actual: _actual, status: _status, measure: _measure, listing: list_handler,
        show: show_handler, record: record_handler, retract: _retract, fix: _correct, export: export_handler,
        exclude: exclude_handler, include: include_handler,
    }
    for parser, handler in handlers.items():
        add_db_option(parser)
        add_json_option(parser)
        parser.set_defaults(handler=handler)
    batch.set_defaults(handler=_no_action)


def _no_action(args) -> CommandResult:
    raise InputError(
        "batch: give an action: add, actual, status, measure, list, show, record, retract, amend, export, "
        "exclude, include"
    )


# ---- batch add -------------------------------------------------------------------------------


def _add(args) -> CommandResult:
    from phantomlab.recipe import load_recipe
    from phantomlab.workflows import plan_batch, record_planned_batch

    sheet_path = output_path(args.sheet, option="--sheet", suffix=".html")
    recipe = load_recipe(args.recipe)
    store = open_log(args, create=True)
    try:
        plan = plan_batch(store, recipe)
        recorded = record_planned_batch(store, plan, operator=args.operator, notes=args.notes,
                                        sheet_path=sheet_path, corrects=args.corrects)
    finally:
        store.close()
    for message in recorded.notes:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    code, plan_json = recorded.code, recorded.plan_json
    payload = {
        "batch_id": code,
        "status": recorded.status,
        **plan_json,
        "potencies_used": recorded.potencies_used,
        "lots": recorded.lots,
        "expired_lots": recorded.expired_lots,
        "sheet": str(sheet_path) if sheet_path else None,
        "warnings": list(plan.warnings),
        "potencies_from": recorded.potencies_from,
        "corrects_batch": recorded.corrects_batch,
    }
    from phantomlab.recalibration import describe_potencies_from

    lines = [f"batch {code} planned from {recipe.name} (version {recipe.version}, hash "
             f"{recipe.content_hash[:12]}), status planned; {describe_potencies_from(recorded.potencies_from)}"]
    if recorded.corrects_batch:
        lines.append(f"corrects batch {recorded.corrects_batch}")
    for dose in plan_json["doses"]:
        lines.append(
            f"  {dose['stock']:<12} lot {dose.get('lot') or '-':<18} {fmt_value(dose['volume_ml'])} mL"
            f"  ({fmt_value(dose['mass_g'])} g, volume fraction {fmt_value(dose['volume_fraction'])})"
        )
    if sheet_path:
        lines.append(f"mixing sheet: {sheet_path}")
    else:
        lines.append("no sheet written (give --sheet FILE.html to print one)")
    return CommandResult(payload=payload, text="\n".join(lines))


# ---- batch actual ----------------------------------------------------------------------------


def _actual(args) -> CommandResult:
    from phantomlab.workflows import parse_amounts_csv, record_dispensed

    from phantomlab.inputs import parse_date_and_time, read_text_file

    path = Path(args.amounts)
    rows = parse_amounts_csv(read_text_file(path, what="amounts file"), source=path.name)
    mixed_on, mixing_time = (None, None) if args.mixed_on is None else parse_date_and_time(
        args.mixed_on, name="--mixed-on", not_after_today=True)
    store = open_log(args)
    try:
        done = record_dispensed(store, args.batch_id, rows, recipe_file=args.recipe, mixed_on=mixed_on,
                                mixing_time=mixing_time, cure=args.cure, mixing_temperature_c=args.mixing_temperature_c,
                                notes=args.notes, recorded_by=args.operator)
    finally:
        store.close()
    alarms, prediction = done.alarms, done.prediction_json
    for message in done.notes + alarms:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    payload = {
        "batch_id": done.code, "status": done.status, "version": done.version,
        "amounts": done.amounts, "volume_fractions": done.volume_fractions, "predicted": prediction,
        "target": done.target, "alarm": bool(alarms), "alarms": alarms, "within_tolerance": not alarms,
        "planned_predicted": done.planned_predicted,
    }
    lines = [f"batch {done.code}: amounts recorded (version {done.version}, status {done.status})"]
    for item in done.amounts:
        lines.append(f"  {item['stock']:<12} {fmt_value(item['volume_ml'])} mL  volume fraction {fmt_value(item['volume_fraction'])}"
                     f"  (planned {fmt_value(item.get('planned_volume_ml'))} mL)")
    lines.append("predicted optics of what was made:")
    for i, w in enumerate(prediction["wavelength_nm"]):
        lines.append(f"  {w:g} nm  mua {fmt_value(prediction['mua_per_mm'][i])} ± {fmt_value(prediction['mua_sd_per_mm'][i], 2)} /mm"
                     f"   mus' {fmt_value(prediction['musp_per_mm'][i])} ± {fmt_value(prediction['musp_sd_per_mm'][i], 2)} /mm")
    lines.append("within the recipe tolerance" if not alarms else f"{len(alarms)} ALARM(S): outside the recipe tolerance")
    return CommandResult(payload=payload, text="\n".join(lines))


# ---- status, retract --------------------------------------------------------------------------


def _status(args) -> CommandResult:
    from phantomlab.workflows import change_status

    store = open_log(args)
    try:
        before, updated = change_status(store, args.batch_id, args.status, note=args.note,
                                        recorded_by=args.operator)
    finally:
        store.close()
    payload = {"batch_id": updated.code, "status": updated.status, "previous_status": before,
               "version": updated.version}
    return CommandResult(payload=payload, text=f"batch {updated.code}: {before} -> {updated.status}")


def _retract(args) -> CommandResult:
    from phantomlab.store import get_batch, retract

    store = open_log(args)
    try:
        with store.transaction() as session:
            updated = retract(session, get_batch(session, args.batch_id), note=args.reason,
                              recorded_by=args.operator)
    finally:
        store.close()
    payload = {"batch_id": updated.code, "retracted": True, "version": updated.version,
               "reason": updated.change_note}
    return CommandResult(payload=payload, text=f"batch {updated.code} retracted (its records stay): {updated.change_note}")


def _correct(args) -> CommandResult:
    from phantomlab.store import correct, get_batch

    changes: dict[str, Any] = {}
    if args.set_operator is not None:
        changes["operator"] = args.set_operator
    if args.set_notes is not None:
        changes["notes"] = args.set_notes
    if args.set_mixed_on is not None:
        changes["mixed_on"] = date_option(args.set_mixed_on, option="--set-mixed-on")
    if not changes:
        raise InputError("batch amend: nothing to amend; give --set-operator, --set-notes or --set-mixed-on")
    store = open_log(args)
    try:
        with store.transaction() as session:
            batch = get_batch(session, args.batch_id)
            before = {key: getattr(batch, key) for key in changes}
            updated = correct(session, batch, note=args.reason, recorded_by=args.operator, **changes)
    finally:
        store.close()
    payload = {"batch_id": updated.code, "version": updated.version, "changed": changes, "before": before,
               "reason": updated.change_note}
    lines = [f"batch {updated.code} corrected (version {updated.version}): {updated.change_note}"]
    lines += [f"  {key}: {fmt_value(before[key])} -> {fmt_value(value)}" for key, value in changes.items()]
    return CommandResult(payload=payload, text="\n".join(lines))


# ---- batch measure ---------------------------------------------------------------------------


def _measure(args) -> CommandResult:
    from phantomlab.measurement_workflow import attach_measurement

    from phantomlab.inputs import read_bytes_file, read_text_file

    path = Path(args.file)
    raw_content = read_bytes_file(path, what="measurement file")
    sidecar = path.with_suffix(".toml")
    options = {"n": args.n, "thickness_mm": args.thickness_mm, "g": args.g, "irf": args.irf}
    store = open_log(args)
    try:
        done = attach_measurement(
            store, args.batch_id, kind=args.kind, file_name=path.name, raw_content=raw_content,
            sidecar_toml=read_text_file(sidecar, what="measurement metadata file") if sidecar.is_file() else None,
            path=path,
            fit=not args.no_fit, model=args.model, baseline=args.baseline, options=options,
            baseline_dir=args.baseline_dir, rebuild=args.rebuild, progress=ProgressBar(),
            instrument=args.instrument, measured_on=date_option(args.measured_on, option="--measured-on"),
            phantom_age_days=args.age_days, temperature_c=args.temperature_c, recorded_by=args.operator,
        )
    finally:
        store.close()
    fit_note = None if done.fit_json is not None else "no fit ran (--no-fit): the file is stored"
    if fit_note:
        warnings.warn(fit_note, PhantomlabWarning, stacklevel=2)
    code, age, fit_json, fit_id = done.code, done.phantom_age_days, done.fit_json, done.fit_id
    verdict = _verdict(args, code, fit_json)
    payload = {"batch_id": code, "measurement_id": done.measurement_id, "fit": fit_json,
               "fit_id": fit_id, "fit_ran": fit_json is not None, "kind": args.kind,
               "file": path.name, "measured_on": done.measured_on, "phantom_age_days": age,
               "batch_status": done.batch_status,
               "verdict": verdict.to_json() if verdict is not None else None}
    lines = [f"batch {code}: measurement {done.measurement_id} ({args.kind}, {path.name}) stored"
             + (f", phantom age {age:g} days" if age is not None else "")]
    if fit_json is not None:
        lines.append(f"fit {fit_id} ({fit_json.get('model')}, reduced chi2 {fmt_value(fit_json.get('chi2_red'), 3)}):")
        lines += [f"  {line}" for line in input_lines(fit_json)]
        for i, w in enumerate(fit_json.get("wavelength_nm", [])):
            lines.append(f"  {w:g} nm  mua {fmt_value(fit_json['mua_per_mm'][i])} ± {fmt_value(fit_json['mua_sd_per_mm'][i], 2)} /mm"
                         f"   mus' {fmt_value(fit_json['musp_per_mm'][i])} ± {fmt_value(fit_json['musp_sd_per_mm'][i], 2)} /mm")
    else:
        lines.append(fit_note)
    if verdict is not None:
        lines.append("against the recipe's tolerances (PASS/FAIL at 2 SD of the fit):")
        lines += verdict.lines(what="measured")
    if done.batch_status == "mixed":
        lines.append(f"when characterisation is complete: phantomlab batch status {code} characterised")
    return CommandResult(payload=payload, text="\n".join(lines))



def _verdict(args, code: str, fit_json):
    """The batch's verdict from this fit (:func:`phantomlab.measurement_workflow.fit_verdict`), or None."""
    if fit_json is None:
        return None
    from phantomlab.measurement_workflow import fit_verdict

    store = open_log(args)
    try:
        return fit_verdict(store, code, fit_json)
    finally:
        store.close()
