"""``phantomlab batch ...``: the batch log at the bench (layer 5: input and output, no physics).

    phantomlab batch add RECIPE.toml [--sheet FILE.html] [--operator NAME] [--notes TEXT]
    phantomlab batch actual BATCH_ID AMOUNTS.csv [--mixed-on DATE] [--cure TEXT] ...
    phantomlab batch status BATCH_ID STATUS [--note TEXT]
    phantomlab batch measure BATCH_ID FILE.csv --kind {srdr,sfdi,slab,optics} [...]
    phantomlab batch list [--status S] [--all]
    phantomlab batch show BATCH_ID
    phantomlab batch record BATCH_ID --html FILE.html
    phantomlab batch retract BATCH_ID --reason TEXT
    phantomlab batch amend BATCH_ID --reason TEXT [--set-operator NAME] [--set-notes TEXT] ...
    phantomlab batch export FILE.zip

Every sub-command takes ``--db URL`` (default ``$PHANTOMLAB_DB``, else ``phantomlab.sqlite``
in the working folder) and ``--json``, and runs in ONE database transaction.  Planning and
prediction are the recipe layer's (``solve``, ``predict``, ``render_sheet_html``); fits are
the calibration layer's (``fit_measurement_file``); this module only moves data between
them, the files and the store.
"""

from __future__ import annotations

import argparse
import csv
import datetime as _dt
import io
import math
import warnings
from pathlib import Path
from typing import Any

import numpy as np

from phantomlab import __version__
from phantomlab.cli import CommandResult, add_json_option
from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.jsonable import to_jsonable

__all__ = ["register", "parse_amounts_csv", "tolerance_alarms"]

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

    actual = actions.add_parser("actual", help="record the amounts really dispensed and predict what was made")
    actual.add_argument("batch_id", metavar="BATCH_ID")
    actual.add_argument("amounts", metavar="AMOUNTS.csv",
                        help="stock,volume_ml or stock,mass_g (undiluted stock; optional dilution_factor column)")
    actual.add_argument("--recipe", metavar="RECIPE.toml", help="the recipe file, if it moved since planning")
    actual.add_argument("--mixed-on", metavar="DATE", help="day the batch was mixed (YYYY-MM-DD; default today)")
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
    measure.add_argument("--kind", required=True, choices=("srdr", "sfdi", "slab", "optics"))
    measure.add_argument("--instrument", metavar="NAME")
    measure.add_argument("--measured-on", metavar="DATE", help="YYYY-MM-DD (default: the file's metadata, else today)")
    measure.add_argument("--age-days", type=float, metavar="D",
                         help="phantom age at measurement [days] (default: from the mixing date)")
    measure.add_argument("--temperature-c", type=float, metavar="T", help="phantom temperature [°C]")
    measure.add_argument("--model", metavar="M", help="forward model of the fit")
    measure.add_argument("--n", type=float, metavar="N", help="refractive index of the phantom")
    measure.add_argument("--thickness-mm", type=float, metavar="D")
    measure.add_argument("--g", type=float, metavar="G")
    measure.add_argument("--baseline", metavar="FILE", help="Monte Carlo baseline for --model mc")
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

    handlers = {
        add: _add, actual: _actual, status: _status, measure: _measure, listing: _list,
        show: _show, record: _record, retract: _retract, fix: _correct, export: _export,
    }
    for parser, handler in handlers.items():
        add_db_option(parser)
        add_json_option(parser)
        parser.set_defaults(handler=handler)
    batch.set_defaults(handler=_no_action)


def _no_action(args) -> CommandResult:
    raise InputError(
        "batch: give an action: add, actual, status, measure, list, show, record, retract, amend, export"
    )


# ---- small helpers ---------------------------------------------------------------------------


def _open(args):
    from phantomlab.store import open_store

    return open_store(args.db)


def _date(text: str | None, *, option: str) -> _dt.date | None:
    if text is None:
        return None
    try:
        return _dt.date.fromisoformat(str(text).strip())
    except ValueError:
        raise InputError(f"{option} {text!r} is not a date; accepted: YYYY-MM-DD") from None


def _writable(path: str | None, *, option: str, suffix: str) -> Path | None:
    if path is None:
        return None
    target = Path(path)
    if target.suffix.lower() != suffix:
        raise InputError(f"{option} {path!r} must end in {suffix}")
    if not target.parent.exists():
        raise InputError(f"{option}: folder {str(target.parent)!r} does not exist")
    return target


def _write(path: Path, text: str, *, option: str) -> None:
    try:
        path.write_text(text, encoding="utf-8")
    except OSError as exc:
        raise InputError(f"{option}: cannot write {str(path)!r} ({exc.strerror or exc})") from None


def _fmt(value: Any, digits: int = 4) -> str:
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.{digits}g}" if math.isfinite(value) else "-"
    return str(value)


# ---- amounts and tolerance (pure; tested on their own) ----------------------------------------


def parse_amounts_csv(text: str, *, source: str = "amounts file") -> list[dict[str, Any]]:
    """Rows ``{stock, volume_ml | mass_g, dilution_factor}`` of an amounts CSV.

    Header: ``stock`` and ``volume_ml`` and/or ``mass_g`` (one of them filled per row), and an
    optional ``dilution_factor`` (amount given of a pre-dilution 1:factor; the undiluted
    equivalent is amount / factor).  Lines starting with ``#`` are comments.
    """
    lines = [line for line in text.splitlines() if line.strip() and not line.lstrip().startswith("#")]
    if not lines:
        raise InputError(f"{source} is empty; accepted header: stock,volume_ml or stock,mass_g")
    reader = csv.DictReader(io.StringIO("\n".join(lines)))
    header = [h.strip() for h in (reader.fieldnames or [])]
    accepted = {"stock", "volume_ml", "mass_g", "dilution_factor"}
    wrong = [h for h in header if h not in accepted]
    if wrong or "stock" not in header or not ({"volume_ml", "mass_g"} & set(header)):
        raise InputError(
            f"{source}: columns {','.join(header)} not accepted (amounts in mL or g only); "
            "accepted: stock,volume_ml or stock,mass_g [,dilution_factor]"
        )
    rows: list[dict[str, Any]] = []
    seen: set[str] = set()
    for number, raw in enumerate(reader, start=2):
        row = {k.strip(): (v or "").strip() for k, v in raw.items() if k is not None}
        stock = row.get("stock", "")
        if not stock:
            raise InputError(f"{source} line {number}: no stock name")
        if stock in seen:
            raise InputError(f"{source} line {number}: stock {stock!r} given twice")
        seen.add(stock)
        given = {k: row.get(k, "") for k in ("volume_ml", "mass_g") if row.get(k, "")}
        if len(given) != 1:
            raise InputError(f"{source} line {number}: give exactly one of volume_ml or mass_g for {stock!r}")
        (unit, text_value), = given.items()
        value = _non_negative(text_value, where=f"{source} line {number}, {unit}")
        factor = 1.0
        if row.get("dilution_factor"):
            factor = _non_negative(row["dilution_factor"], where=f"{source} line {number}, dilution_factor")
            if factor < 1:
                raise InputError(f"{source} line {number}: dilution_factor {factor:g} must be >= 1")
        rows.append({"stock": stock, unit: value, "dilution_factor": factor})
    if not rows:
        raise InputError(f"{source} has a header but no amounts")
    return rows


def _non_negative(text: str, *, where: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"{where}: {text!r} is not a number (give the bare number in the column's unit)") from None
    if not (math.isfinite(value) and value >= 0):
        raise InputError(f"{where}: {text!r} must be a finite number >= 0")
    return value


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


# ---- batch add -------------------------------------------------------------------------------


def _render_sheet(plan, code: str) -> str:
    try:
        from phantomlab.recipe.sheet import render_sheet_html
    except ImportError:
        raise InputError("the mixing-sheet renderer (phantomlab.recipe.sheet) is missing from this installation") from None
    return render_sheet_html(plan, batch_id=code, draft=False)


def _add(args) -> CommandResult:
    from phantomlab.recipe import load_recipe, solve
    from phantomlab.store import (
        add_batch,
        latest_potencies,
        latest_potency_states,
        next_batch_code,
        record_recipe,
        record_stock_lot,
    )

    sheet_path = _writable(args.sheet, option="--sheet", suffix=".html")
    recipe = load_recipe(args.recipe)
    store = _open(args)
    try:
        with store.reading() as session:
            calibrated = latest_potencies(session, shelf=recipe.shelf)
            states = latest_potency_states(session, shelf=recipe.shelf)
        plan = solve(recipe, potencies=calibrated)
        plan_json = to_jsonable(plan.to_json())
        shelf_path = str(getattr(recipe.shelf, "path", "") or "") or None
        with store.transaction() as session:
            lots = {
                key: record_stock_lot(session, recipe.stock(key), shelf_path=shelf_path, recorded_by=args.operator)
                for key in (recipe.matrix_key, *recipe.stock_keys)
            }
            recipe_row = record_recipe(session, recipe, recorded_by=args.operator)
            code = next_batch_code(session)
            sheet_html = _render_sheet(plan, code)
            potencies_used = {
                dose.stock: {
                    "potency": dose.potency, "potency_sd": dose.potency_sd, "lot": dose.lot,
                    "source": dose.potency_source, "calibration_state_id": states.get(dose.stock)
                    if dose.potency_source == "calibrated" else None,
                }
                for dose in plan.doses
            }
            used_states = sorted({v["calibration_state_id"] for v in potencies_used.values()} - {None})
            batch = add_batch(
                session, code=code, recipe=recipe_row, plan=plan_json, sheet_html=sheet_html,
                potencies_used=potencies_used, lots=lots, software_version=__version__,
                calibration_state_id=used_states[-1] if used_states else None,
                operator=args.operator, notes=args.notes,
                matrix_details={"matrix": recipe.matrix_key, "lot": recipe.matrix.lot,
                                "preparation": plan_json.get("preparation")},
            )
            if sheet_path is not None:
                _write(sheet_path, sheet_html, option="--sheet")
    finally:
        store.close()
    today = _dt.date.today()
    expired = [{"stock": key, "lot": lot.lot, "expiry": lot.expiry} for key, lot in lots.items()
               if lot.expiry is not None and lot.expiry < today]
    for item in expired:
        if not any(item["stock"] in w and item["expiry"].isoformat() in w for w in plan.warnings):
            warnings.warn(f"{item['stock']}: lot {item['lot'] or '(none)'} expired on "
                          f"{item['expiry'].isoformat()}", PhantomlabWarning, stacklevel=2)
    payload = {
        "batch_id": code,
        "status": batch.status,
        **plan_json,
        "potencies_used": potencies_used,
        "lots": {key: lot.lot for key, lot in lots.items()},
        "expired_lots": expired,
        "sheet": str(sheet_path) if sheet_path else None,
        "warnings": list(plan.warnings),
    }
    lines = [f"batch {code} planned from {recipe.name} (version {recipe.version}), status planned"]
    for dose in plan_json["doses"]:
        lines.append(
            f"  {dose['stock']:<12} lot {dose.get('lot') or '-':<18} {_fmt(dose['volume_ml'])} mL"
            f"  ({_fmt(dose['mass_g'])} g, volume fraction {_fmt(dose['volume_fraction'])})"
        )
    if sheet_path:
        lines.append(f"mixing sheet: {sheet_path}")
    else:
        lines.append("no sheet written (give --sheet FILE.html to print one)")
    return CommandResult(payload=payload, text="\n".join(lines))


# ---- batch actual ----------------------------------------------------------------------------


def _recipe_for(recipe_row, override: str | None):
    from phantomlab.recipe import load_recipe

    source = override or recipe_row.source_path
    if not source or not Path(source).is_file():
        raise InputError(
            f"recipe file {source!r} of this batch is not there any more; give it with --recipe RECIPE.toml"
        )
    recipe = load_recipe(source)
    notes = []
    if recipe.content_hash != recipe_row.content_hash:
        notes.append(
            f"recipe file {source} changed since the batch was planned (hash {recipe.content_hash[:10]} "
            f"vs {recipe_row.content_hash[:10]}); predicting with the file as it is now"
        )
    return recipe, notes


def _actual(args) -> CommandResult:
    from phantomlab.recipe import predict
    from phantomlab.store import batch_lots, get_batch, plan_of, recipe_of, record_actual
    from phantomlab.store.snapshots import content_sha256

    path = Path(args.amounts)
    if not path.is_file():
        raise InputError(f"amounts file {args.amounts!r} not found")
    rows = parse_amounts_csv(path.read_text(encoding="utf-8-sig"), source=path.name)
    mixed_on = _date(args.mixed_on, option="--mixed-on")
    from phantomlab.store import StoreConflictError

    store = _open(args)
    try:
        # Read and predict without holding the write lock; then write, checking that no
        # other command changed the batch meanwhile.
        with store.reading() as session:
            batch = get_batch(session, args.batch_id)
            plan_row = plan_of(session, batch)
            recipe_row = recipe_of(session, batch)
            lots = batch_lots(session, batch)
        recipe, notes = _recipe_for(recipe_row, args.recipe)
        for key, lot in lots.items():
            if key in recipe.shelf.keys() and content_sha256(recipe.stock(key).definition) != lot.definition_sha256:
                notes.append(f"stock {key}: the stock file changed since planning; predicting with it as it is now")
        amounts, fractions = _fractions(rows, recipe, plan_row.plan)
        potencies = {
            key: (v["potency"], v["potency_sd"]) for key, v in plan_row.potencies_used.items()
            if key in recipe.stock_keys
        }
        prediction = to_jsonable(predict(recipe, volume_fractions=fractions, potencies=potencies).to_json())
        target = plan_row.plan.get("target") or to_jsonable(recipe.target.to_json())
        alarms = tolerance_alarms(
            target=target, predicted=prediction, planned=plan_row.plan.get("predicted"),
            mua_tolerance=float(target.get("mua_tolerance_percent", 100 * recipe.target.mua_tolerance)) / 100,
            musp_tolerance=float(target.get("musp_tolerance_percent", 100 * recipe.target.musp_tolerance)) / 100,
        )
        cure = {k: v for k, v in {"schedule": args.cure,
                                  "mixing_temperature_c": args.mixing_temperature_c}.items() if v is not None}
        with store.transaction() as session:
            head = get_batch(session, args.batch_id)
            if head.id != batch.id:
                raise StoreConflictError(
                    f"batch {head.code} changed while its amounts were being predicted; try again"
                )
            updated = record_actual(session, head, amounts=amounts, prediction=prediction, alarms=alarms,
                                    recorded_by=args.operator, mixed_on=mixed_on, cure_details=cure,
                                    notes=args.notes)
    finally:
        store.close()
    for message in notes + alarms:
        warnings.warn(message, PhantomlabWarning, stacklevel=2)
    payload = {
        "batch_id": updated.code, "status": updated.status, "version": updated.version,
        "amounts": amounts, "volume_fractions": fractions, "predicted": prediction, "target": target,
        "alarm": bool(alarms), "alarms": alarms, "within_tolerance": not alarms,
        "planned_predicted": plan_row.plan.get("predicted"),
    }
    lines = [f"batch {updated.code}: amounts recorded (version {updated.version}, status {updated.status})"]
    for item in amounts:
        lines.append(f"  {item['stock']:<12} {_fmt(item['volume_ml'])} mL  volume fraction {_fmt(item['volume_fraction'])}"
                     f"  (planned {_fmt(item.get('planned_volume_ml'))} mL)")
    lines.append("predicted optics of what was made:")
    for i, w in enumerate(prediction["wavelength_nm"]):
        lines.append(f"  {w:g} nm  mua {_fmt(prediction['mua_per_mm'][i])} ± {_fmt(prediction['mua_sd_per_mm'][i], 2)} /mm"
                     f"   mus' {_fmt(prediction['musp_per_mm'][i])} ± {_fmt(prediction['musp_sd_per_mm'][i], 2)} /mm")
    lines.append("within the recipe tolerance" if not alarms else f"{len(alarms)} ALARM(S): outside the recipe tolerance")
    return CommandResult(payload=payload, text="\n".join(lines))


def _fractions(rows, recipe, plan: dict) -> tuple[list[dict[str, Any]], dict[str, float]]:
    """Volumes of undiluted stock and their volume fractions in what was made.

    With the matrix among the rows, the batch volume is the sum of all volumes (volumes
    taken as additive); without it, the planned batch volume.
    """
    known = (recipe.matrix_key, *recipe.stock_keys)
    planned = {d["stock"]: d for d in plan.get("doses", [])}
    amounts = []
    for row in rows:
        key = row["stock"]
        if key not in known:
            raise InputError(f"amounts: {key!r} is not a stock of this batch; its stocks: {', '.join(known)}")
        stock = recipe.matrix if key == recipe.matrix_key else recipe.stock(key)
        factor = row["dilution_factor"]
        if "volume_ml" in row:
            volume = row["volume_ml"] / factor
            mass = volume * stock.density_g_per_ml
        else:
            mass = row["mass_g"] / factor
            volume = mass / stock.density_g_per_ml
        amounts.append({"stock": key, "volume_ml": volume, "mass_g": mass,
                        "given": {k: row[k] for k in ("volume_ml", "mass_g") if k in row},
                        "dilution_factor": factor,
                        "planned_volume_ml": planned.get(key, {}).get("volume_ml"),
                        "planned_mass_g": planned.get(key, {}).get("mass_g")})
    has_matrix = any(a["stock"] == recipe.matrix_key for a in amounts)
    total = sum(a["volume_ml"] for a in amounts) if has_matrix else float(plan.get("batch_volume_ml") or 0)
    if not total > 0:
        raise InputError("amounts: the batch volume comes out as 0 mL; give the matrix amount too")
    for a in amounts:
        a["volume_fraction"] = a["volume_ml"] / total
    fractions = {a["stock"]: a["volume_fraction"] for a in amounts if a["stock"] != recipe.matrix_key}
    missing = [k for k in recipe.stock_keys if k not in fractions and planned.get(k, {}).get("volume_fraction", 0) > 0]
    if missing:
        raise InputError(f"amounts: no amount for {', '.join(missing)}; give 0 for a stock left out")
    if sum(fractions.values()) >= 1:
        raise InputError("amounts: the stocks add up to the whole batch volume or more; give the matrix amount")
    return amounts, fractions


# ---- status, retract --------------------------------------------------------------------------


def _status(args) -> CommandResult:
    from phantomlab.store import get_batch, set_status

    store = _open(args)
    try:
        with store.transaction() as session:
            batch = get_batch(session, args.batch_id)
            before = batch.status
            updated = set_status(session, batch, args.status.strip().lower(), note=args.note,
                                 recorded_by=args.operator)
    finally:
        store.close()
    payload = {"batch_id": updated.code, "status": updated.status, "previous_status": before,
               "version": updated.version}
    return CommandResult(payload=payload, text=f"batch {updated.code}: {before} -> {updated.status}")


def _retract(args) -> CommandResult:
    from phantomlab.store import get_batch, retract

    store = _open(args)
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
        changes["mixed_on"] = _date(args.set_mixed_on, option="--set-mixed-on")
    if not changes:
        raise InputError("batch amend: nothing to amend; give --set-operator, --set-notes or --set-mixed-on")
    store = _open(args)
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
    lines += [f"  {key}: {_fmt(before[key])} -> {_fmt(value)}" for key, value in changes.items()]
    return CommandResult(payload=payload, text="\n".join(lines))


# ---- batch measure ---------------------------------------------------------------------------


def _measure(args) -> CommandResult:
    from phantomlab.store import add_fit, add_measurement, get_batch

    path = Path(args.file)
    if not path.is_file():
        raise InputError(f"measurement file {args.file!r} not found")
    raw = path.read_bytes()
    sidecar = path.with_suffix(".toml")
    metadata_toml = sidecar.read_text(encoding="utf-8") if sidecar.is_file() else None
    measured_on = _date(args.measured_on, option="--measured-on")
    options = {"model": args.model, "n": args.n, "thickness_mm": args.thickness_mm, "g": args.g,
               "baseline": args.baseline}
    from phantomlab.calibration import fit_measurement_file, read_measurement  # layer 3

    fit_json = None
    fit_result = None
    fit_note = None
    # Read (and fit) before opening a transaction: a file that does not parse writes nothing,
    # and a long fit holds no lock.
    measurement_info = read_measurement(path, kind=args.kind)
    if args.no_fit:
        fit_note = "no fit ran (--no-fit): the file is stored"
    else:
        fit_result = fit_measurement_file(path, kind=args.kind, **{k: v for k, v in options.items() if v is not None})
        fit_json = to_jsonable(fit_result.to_json())
    if measured_on is None:
        measured_on = _metadata_date(measurement_info) or _dt.date.today()
    store = _open(args)
    try:
        with store.transaction() as session:
            batch = get_batch(session, args.batch_id)
            age = args.age_days
            if age is None and batch.mixed_on is not None:
                age = float((measured_on - batch.mixed_on).days)
                if age < 0:
                    raise InputError(
                        f"measured on {measured_on} but batch {batch.code} was mixed on {batch.mixed_on}; "
                        "give --measured-on or --age-days"
                    )
            measurement = add_measurement(
                session, batch, kind=args.kind, file_name=path.name, raw_content=raw,
                metadata_toml=metadata_toml, instrument=args.instrument or _metadata_value(measurement_info, "instrument"),
                geometry=_geometry(measurement_info, options), measured_on=measured_on,
                phantom_age_days=age, temperature_c=args.temperature_c, recorded_by=args.operator,
            )
            fit_id = None
            if fit_result is not None:
                fit_row = add_fit(session, measurement, results=fit_json, model=fit_result.model,
                                  covariance=to_jsonable(fit_result.covariance),
                                  warnings=list(fit_result.warnings), chi2_red=_finite(fit_result.chi2_red),
                                  recorded_by=args.operator)
                fit_id = fit_row.id
            code, measurement_id, status = batch.code, measurement.id, batch.status
    finally:
        store.close()
    if fit_note:
        warnings.warn(fit_note, PhantomlabWarning, stacklevel=2)
    payload = {"batch_id": code, "measurement_id": measurement_id, "fit": fit_json,
               "fit_id": fit_id, "fit_ran": fit_json is not None, "kind": args.kind,
               "file": path.name, "measured_on": measured_on, "phantom_age_days": age,
               "batch_status": status}
    lines = [f"batch {code}: measurement {measurement_id} ({args.kind}, {path.name}) stored"
             + (f", phantom age {age:g} days" if age is not None else "")]
    if fit_json is not None:
        lines.append(f"fit {fit_id} ({fit_json.get('model')}, reduced chi2 {_fmt(fit_json.get('chi2_red'), 3)}):")
        for i, w in enumerate(fit_json.get("wavelength_nm", [])):
            lines.append(f"  {w:g} nm  mua {_fmt(fit_json['mua_per_mm'][i])} ± {_fmt(fit_json['mua_sd_per_mm'][i], 2)} /mm"
                         f"   mus' {_fmt(fit_json['musp_per_mm'][i])} ± {_fmt(fit_json['musp_sd_per_mm'][i], 2)} /mm")
    else:
        lines.append(fit_note)
    if status == "mixed":
        lines.append(f"when characterisation is complete: phantomlab batch status {code} characterised")
    return CommandResult(payload=payload, text="\n".join(lines))


def _finite(value):
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def _metadata_value(measurement, name: str):
    metadata = getattr(measurement, "metadata", None)
    value = getattr(metadata, name, None) if metadata is not None else None
    return None if value in (None, "") else value


def _metadata_date(measurement) -> _dt.date | None:
    value = _metadata_value(measurement, "date")
    if isinstance(value, _dt.date):
        return value
    if isinstance(value, str):
        try:
            return _dt.date.fromisoformat(value[:10])
        except ValueError:
            return None
    return None


def _geometry(measurement, options) -> dict[str, Any] | None:
    metadata = getattr(measurement, "metadata", None)
    geometry = {}
    if metadata is not None:
        geometry.update({k: v for k, v in to_jsonable(metadata).items() if v is not None}
                        if not isinstance(metadata, dict) else metadata)
    geometry.update({k: v for k, v in options.items() if v is not None and k != "baseline"})
    axis_name = getattr(measurement, "axis_name", None)
    axis = getattr(measurement, "axis", None)
    if axis_name and axis is not None and np.size(axis):
        geometry[axis_name] = sorted({float(v) for v in np.ravel(axis)})
    if not geometry.get("reference"):
        geometry.pop("reference", None)
    return to_jsonable(geometry) or None


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


def _list(args) -> CommandResult:
    from phantomlab.store import list_batches

    store = _open(args)
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
            f"{_fmt(row['planned_on']):<11} {_fmt(row['mixed_on']):<11} {row['measurements']:>4}  "
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


def _show(args) -> CommandResult:
    from phantomlab.store import batch_history, batch_lots, fits_of, get_batch, measurements_of, plan_of
    from phantomlab.store.history import history_of
    from phantomlab.store.schema import Measurement

    store = _open(args)
    try:
        with store.reading() as session:
            batch = get_batch(session, args.batch_id)
            plan_row = plan_of(session, batch)
            summary = _batch_summary(session, batch)
            history = [_version_json(v) for v in batch_history(session, batch.code)]
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
            }
    finally:
        store.close()
    lines = [f"batch {summary['batch_id']}  {summary['status']}{' (RETRACTED)' if summary['retracted'] else ''}"
             f"  recipe {summary['recipe']} v{summary['recipe_version']}",
             f"  planned {summary['planned_on']}  mixed {_fmt(summary['mixed_on'])}  operator {_fmt(summary['operator'])}"]
    lines.append("  stocks and lots: " + ", ".join(f"{k} ({v['lot'] or 'no lot'})" for k, v in lots.items()))
    for m in measurements:
        lines.append(f"  measurement {m['measurement_id']}: {m['kind']} {m['file']} age {_fmt(m['phantom_age_days'])} d,"
                     f" {len(m['fits'])} fit(s){' RETRACTED' if m['retracted'] else ''}")
    for alarm in payload["alarms"]:
        lines.append(f"  {alarm}")
    lines.append("history:")
    for v in history:
        lines.append(f"  v{v['version']}  {v['recorded_at']:%Y-%m-%d %H:%M}  {v['status']:<13}"
                     f"{' retracted' if v['retracted'] else ''}  {v['change_note'] or 'recorded'}"
                     f"{' by ' + v['recorded_by'] if v['recorded_by'] else ''}")
    return CommandResult(payload=payload, text="\n".join(lines))


# ---- record, export --------------------------------------------------------------------------


def _record(args) -> CommandResult:
    from phantomlab.store.record import batch_record, render_batch_record_html

    target = _writable(args.html, option="--html", suffix=".html")
    store = _open(args)
    try:
        with store.reading() as session:
            record = batch_record(session, args.batch_id)
    finally:
        store.close()
    _write(target, render_batch_record_html(record), option="--html")
    payload = {"batch_id": record["batch_id"], "html": str(target), "pass": record["pass"],
               "checks": record["checks"], "series": record["series"]}
    verdict = {True: "PASS", False: "FAIL", None: "not measured yet"}[record["pass"]]
    return CommandResult(payload=payload, text=f"batch record of {record['batch_id']} written to {target}: {verdict}")


def _export(args) -> CommandResult:
    from phantomlab.store.archive import export_lab

    store = _open(args)
    try:
        manifest = export_lab(store, args.archive)
    finally:
        store.close()
    payload = {"archive": args.archive, **manifest}
    counts = ", ".join(f"{n} {name}" for name, n in manifest["tables"].items() if n)
    return CommandResult(payload=payload, text=f"lab exported to {args.archive}: {counts or 'empty log'}")
