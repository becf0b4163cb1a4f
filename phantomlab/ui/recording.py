"""Writing to the batch log from the page (layer 5): each action is one store transaction.

Only calls: the store layer's repository functions do the writing, the recipe layer renders
the sheet.  A refusal (unknown batch, wrong unit, busy database) arrives as an
:class:`~phantomlab.errors.InputError` and the page shows its one line.
"""

from __future__ import annotations

from typing import Any, Mapping

from phantomlab import __version__
from phantomlab.ui.services import PAGE_STOCK_SOURCE

__all__ = ["record_planned_batch", "record_page_stock"]


def record_planned_batch(
    store,
    plan,
    *,
    potencies: Mapping[str, Any] | None = None,
    origin: Mapping[str, str] | None = None,
    operator: str | None = None,
    notes: str | None = None,
    planned_on=None,
) -> str:
    """Record a solved plan as a new batch (status ``planned``) and return its batch ID.

    The sheet stored with the batch is rendered with that ID (not a draft).  ``origin`` says,
    per stock key, whether the definition came from the stock file or the page.
    """
    from phantomlab.store import (  # layer 4
        add_batch,
        latest_calibration_state,
        next_batch_code,
        record_recipe,
        record_stock_lot,
    )

    recipe = plan.recipe
    origin = dict(origin or {})
    shelf_path = str(recipe.shelf.path) if recipe.shelf.path is not None else None
    with store.transaction() as session:
        recipe_row = record_recipe(session, recipe, recorded_by=operator)
        lots = {}
        for key in (recipe.matrix_key, *recipe.stock_keys):
            source = PAGE_STOCK_SOURCE if origin.get(key, "").startswith("page") else shelf_path
            lots[key] = record_stock_lot(session, recipe.stock(key), shelf_path=source,
                                         recorded_by=operator)
        code = next_batch_code(session)
        state = latest_calibration_state(session) if potencies else None
        used = {dose.stock: {"potency": dose.potency, "potency_sd": dose.potency_sd,
                             "source": dose.potency_source, "lot": dose.lot}
                for dose in plan.doses}
        add_batch(
            session,
            code=code,
            recipe=recipe_row,
            plan=plan.to_json(),
            sheet_html=_sheet_html(plan, code),
            potencies_used=used,
            lots=lots,
            software_version=__version__,
            calibration_state_id=state.id if state is not None else None,
            operator=operator,
            notes=notes,
            planned_on=planned_on,
        )
    return code


def saved_batch_sheets(store, plan, code: str) -> dict:
    """The sheet of a just-saved batch as stored (HTML) and as CSV, to hand over for download."""
    from phantomlab.recipe.sheet import render_sheet_csv  # layer 3
    from phantomlab.store import get_batch, plan_of  # layer 4

    with store.reading() as session:
        html = plan_of(session, get_batch(session, code)).sheet_html
    return {"code": code, "html": html, "csv": render_sheet_csv(plan, batch_id=code, draft=False)}


def _sheet_html(plan, code: str) -> str:
    from phantomlab.recipe.sheet import render_sheet_html  # layer 3

    return render_sheet_html(plan, batch_id=code, draft=False)


def write_page_recipe(folder, definition: Mapping[str, Any], *, base_dir=None, shelf=None):
    """Write a recipe designed on the page as a TOML file and read it back as that file.

    The file makes a batch planned on the page usable from the command line too (``batch
    actual``, ``recalibrate`` and ``correct`` read a batch's recipe from its file).  A target
    spectrum file is copied beside it.  Identical definitions share one file (its name holds
    a hash of the content).

    Returns
    -------
    phantomlab.recipe.Recipe
        Parsed from the file (its path and content hash are the file's).
    """
    import datetime as _dt
    import hashlib
    import shutil
    import tomllib
    from pathlib import Path

    import tomli_w

    from phantomlab.recipe import parse_recipe  # layer 3

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    definition = json_plain(dict(definition))
    target = dict(definition.get("target") or {})
    if "spectrum_csv" in target and base_dir is not None:
        source = Path(base_dir) / str(target["spectrum_csv"])
        digest = hashlib.sha256(source.read_bytes()).hexdigest()[:12]
        copied = folder / f"target-{digest}.csv"
        if not copied.exists():
            shutil.copyfile(source, copied)
        target["spectrum_csv"] = copied.name
        definition["target"] = target
    body = tomli_w.dumps(definition)
    digest = hashlib.sha256(body.encode("utf-8")).hexdigest()[:12]
    slug = "".join(c if c.isalnum() else "-" for c in str(definition.get("name", "recipe")).lower()).strip("-")
    path = folder / f"{slug[:40] or 'recipe'}-{digest}.toml"
    if not path.exists():
        header = (f"# recipe designed on the phantomlab page, {_dt.date.today().isoformat()}\n"
                  f"# (written when a batch was saved; the batch log keeps its content hash)\n")
        path.write_text(header + body, encoding="utf-8")
    raw = path.read_bytes()
    return parse_recipe(tomllib.loads(raw.decode("utf-8")), base_dir=folder, path=path, raw=raw, shelf=shelf)


def json_plain(value):
    """Numbers, strings, lists and tables only (numpy values made plain), for TOML."""
    from phantomlab.jsonable import to_jsonable

    return to_jsonable(value)


def record_page_stock(store, stock, *, recorded_by: str | None = None):
    """Record a stock added or edited on the page as a (new version of a) stock lot."""
    from phantomlab.store import record_stock_lot  # layer 4

    with store.transaction() as session:
        row = record_stock_lot(session, stock, shelf_path=PAGE_STOCK_SOURCE, recorded_by=recorded_by)
        version = row.version
    return version


# ---- a recorded batch: its recipe, what was dispensed, its measurements -------------------------


def batch_recipe(store, code: str, *, recipes_folder=None):
    """The recipe of a recorded batch, rebuilt from the snapshots the batch log keeps.

    The shelf is the stock-lot snapshots the plan used (their spectra included), so the
    recipe is the one the batch was planned from even if the stock file changed since.
    """
    from pathlib import Path

    from phantomlab.materials import parse_shelf  # layer 1
    from phantomlab.recipe import parse_recipe  # layer 3
    from phantomlab.store import batch_lots, get_batch, recipe_of  # layer 4
    from phantomlab.ui.services import _cache_folder, _materialise_resolved

    with store.reading() as session:
        batch = get_batch(session, code)
        recipe_row = recipe_of(session, batch)
        lots = batch_lots(session, batch)
        definition = dict(recipe_row.definition)
        source_path = recipe_row.source_path
        stocks = {key: dict(lot.definition) for key, lot in lots.items()}
    folder = _cache_folder()
    document = {"stocks": {key: _materialise_resolved(key, table, folder) for key, table in stocks.items()}}
    base = Path(source_path).parent if source_path else Path(recipes_folder or ".")
    shelf = parse_shelf(document, base=base, path=None, today=_far_past())
    return parse_recipe(definition, base_dir=base, shelf=shelf)


def _far_past():
    import datetime as _dt

    return _dt.date(1970, 1, 1)  # an old batch's lots are not re-checked for expiry here


def plan_potencies(store, code: str) -> dict[str, tuple[float, float]]:
    """The potencies a batch was planned with: ``{stock: (potency, sd)}``."""
    from phantomlab.store import get_batch, plan_of  # layer 4

    with store.reading() as session:
        used = dict(plan_of(session, get_batch(session, code)).potencies_used or {})
    out = {}
    for key, value in used.items():
        if isinstance(value, dict) and "potency" in value:
            out[key] = (float(value["potency"]), float(value.get("potency_sd", 0.0)))
    return out


def record_dispensed(store, code: str, amounts: Mapping[str, tuple[float, str]], *,
                     recorded_by: str | None = None, recipes_folder=None, mixed_on=None):
    """Record the amounts really dispensed and predict the optics of what was really made.

    Parameters
    ----------
    amounts : mapping of stock key to (amount, unit) or (amount, unit, stock_fraction)
        What went into the batch: unit ``"mL"`` (volume) or ``"g"`` (mass); with
        ``stock_fraction`` < 1 the amount is of a pre-dilution holding that fraction of the
        stock (1 in 10 → 0.1), and the undiluted stock is amount × fraction.

    Returns
    -------
    (batch version, Prediction, list of alarm lines)
    """
    import numpy as np

    from phantomlab.errors import InputError
    from phantomlab.recipe import predict  # layer 3
    from phantomlab.store import get_batch, plan_of, record_actual  # layer 4

    recipe = batch_recipe(store, code, recipes_folder=recipes_folder)
    with store.reading() as session:
        plan_json = dict(plan_of(session, get_batch(session, code)).plan)
    volume_ml = float(plan_json["batch_volume_ml"])
    planned = {d["stock"]: d for d in plan_json.get("doses", [])}
    fractions: dict[str, float] = {}
    rows = []
    for key, given in amounts.items():
        amount, unit = given[0], given[1]
        stock_fraction = float(given[2]) if len(given) > 2 else 1.0
        if not 0 < stock_fraction <= 1:
            raise InputError(f"{key}: stock fraction of the pre-dilution {stock_fraction!r} must lie in (0, 1]")
        if key not in recipe.stock_keys:
            raise InputError(f"{key!r} is not a stock of this batch; its stocks: {', '.join(recipe.stock_keys)}")
        if not (np.isfinite(amount) and amount >= 0):
            raise InputError(f"{key}: amount {amount!r} must be a number >= 0")
        stock = recipe.stock(key)
        undiluted = float(amount) * stock_fraction
        if unit == "mL":
            volume, mass = undiluted, undiluted * stock.density_g_per_ml
        elif unit == "g":
            mass, volume = undiluted, undiluted / stock.density_g_per_ml
        else:
            raise InputError(f"{key}: unit {unit!r} not accepted; accepted: mL, g")
        fractions[key] = volume / volume_ml
        # the row layout of `phantomlab batch actual` (undiluted stock; no matrix row: the
        # planned batch volume is the total)
        rows.append({"stock": key, "volume_ml": volume, "mass_g": mass,
                     "given": {"volume_ml" if unit == "mL" else "mass_g": float(amount)},
                     "dilution_factor": 1.0 / stock_fraction,
                     "planned_volume_ml": planned.get(key, {}).get("volume_ml"),
                     "planned_mass_g": planned.get(key, {}).get("mass_g"), "volume_fraction": fractions[key]})
    from phantomlab.commands.batch import tolerance_alarms  # the same alarm lines as `batch actual`
    from phantomlab.jsonable import to_jsonable

    prediction = predict(recipe, volume_fractions=fractions, potencies=plan_potencies(store, code) or None)
    target = plan_json.get("target") or to_jsonable(recipe.target.to_json())
    alarms = tolerance_alarms(
        target=target, predicted=to_jsonable(prediction.to_json()), planned=plan_json.get("predicted"),
        mua_tolerance=float(target.get("mua_tolerance_percent", 100 * recipe.target.mua_tolerance)) / 100,
        musp_tolerance=float(target.get("musp_tolerance_percent", 100 * recipe.target.musp_tolerance)) / 100,
    )
    with store.transaction() as session:
        batch = record_actual(session, get_batch(session, code), amounts=rows,
                              prediction=prediction.to_json(), alarms=alarms, recorded_by=recorded_by,
                              mixed_on=mixed_on)
        version = batch.version
    return version, prediction, alarms


def attach_measurement(
    store,
    code: str,
    *,
    kind: str,
    file_name: str,
    raw_content: bytes,
    sidecar_toml: str | None = None,
    model: str | None = None,
    measured_on=None,
    phantom_age_days: float | None = None,
    instrument: str | None = None,
    recorded_by: str | None = None,
    baseline=None,
    options: Mapping[str, Any] | None = None,
):
    """Fit a measurement file and store the file (byte for byte) with its fit.

    The file is fitted first: a file that does not parse is refused and nothing is written.

    Returns
    -------
    (measurement id, FitResult)
    """
    import tomllib

    from phantomlab.calibration import fit_measurement_file  # layer 3
    from phantomlab.errors import InputError
    from phantomlab.store import add_fit, add_measurement, get_batch  # layer 4

    try:
        text = raw_content.decode("utf-8")
    except UnicodeDecodeError:
        raise InputError(f"measurement file {file_name!r} is not UTF-8 text; a CSV file is expected") from None
    if "\n" not in text:
        text += "\n"
    sidecar = {}
    if sidecar_toml:
        try:
            sidecar = tomllib.loads(sidecar_toml)
        except tomllib.TOMLDecodeError as exc:
            raise InputError(f"measurement metadata (TOML) not readable: {exc}") from None
    fit_options = {k: v for k, v in dict(options or {}).items() if v is not None}
    result = fit_measurement_file(text, kind=kind, sidecar=sidecar, model=model, baseline=baseline,
                                  **fit_options)
    with store.transaction() as session:
        batch = get_batch(session, code)
        measurement = add_measurement(
            session, batch, kind=kind, file_name=file_name, raw_content=raw_content,
            metadata_toml=sidecar_toml or None, instrument=instrument or sidecar.get("instrument"),
            measured_on=measured_on, phantom_age_days=phantom_age_days, recorded_by=recorded_by,
        )
        payload = result.to_json()
        add_fit(session, measurement, results=payload, model=result.model,
                covariance=payload.get("covariance_mua_musp"), warnings=list(result.warnings),
                chi2_red=None if result.chi2_red != result.chi2_red else float(result.chi2_red),
                recorded_by=recorded_by)
        measurement_id = measurement.id
    return measurement_id, result


# ---- recalibration ---------------------------------------------------------------------------------


def recalibrate_from_log(store, *, recorded_by: str | None = None):
    """Estimate every stock lot's potency from the whole batch log and record the result.

    The batch history is gathered by the very function ``phantomlab recalibrate`` uses
    (:func:`phantomlab.commands.calibrate.gather_history`), the update is the calibration
    layer's, and, as the command does, one potency per stock key is stored: that of the lot
    of the newest batch.

    Returns
    -------
    (PotencyUpdate, calibration state id, list of skipped batches)
    """
    from phantomlab.calibration import update_potencies  # layer 3
    from phantomlab.commands.calibrate import METHOD, gather_history  # the command line's reader
    from phantomlab.errors import InputError
    from phantomlab.store import record_calibration  # layer 4

    with store.transaction() as session:
        history = gather_history(session)
        if not history["observations"]:
            raise InputError("no mixed batch with a fitted measurement in the batch log; record the amounts "
                             "dispensed and attach a measurement first"
                             + (f" ({'; '.join(history['skipped'])})" if history["skipped"] else ""))
        update = update_potencies(history["priors"], history["observations"])
        payload = update.to_json()
        stored = {key: (float(update.potency[k]), float(update.potency_sd[k]), lot)
                  for k, (key, lot) in enumerate(update.stocks) if history["latest_lot"].get(key) == lot}
        state = record_calibration(
            session, potencies=stored, method=METHOD, recorded_by=recorded_by,
            computed_from={"batches": history["batches"], "fit_ids": history["fit_ids"],
                           "moved_by": payload["moved_by"], "lots": payload["lots"]},
        )
        state_id = state.id
    return update, state_id, list(history["skipped"])


def calibration_history(store) -> list[dict]:
    """Every calibration state (oldest first) with its potencies: one row per stock lot."""
    from phantomlab.store import calibration_potencies  # layer 4
    from phantomlab.store.history import current
    from phantomlab.store.schema import CalibrationState

    rows = []
    with store.reading() as session:
        states = sorted(session.scalars(current(session, CalibrationState)), key=lambda s: (s.recorded_at, s.id))
        for number, state in enumerate(states, start=1):
            batches = sorted((state.computed_from or {}).get("batches", []))
            for potency in calibration_potencies(session, state):
                rows.append({"calibration": number, "recorded at (UTC)": state.recorded_at,
                             "stock": potency.stock_key, "lot": potency.lot or "",
                             "potency": potency.potency, "potency_sd": potency.potency_sd,
                             "from batches": ", ".join(batches)})
    return rows
