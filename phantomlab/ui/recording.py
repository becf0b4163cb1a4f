"""Writing to the batch log from the page (layer 5): each action is one store transaction.

Only calls: the workflows the command line runs too (:mod:`phantomlab.workflows`: a batch
recorded with its sheet, the amounts dispensed; :mod:`phantomlab.measurement_workflow`: a
measurement with its fit) do the work; this
module turns the page's fields into their arguments.  The calibration's writes (record a
calibration, exclusions, rollback) are calls of :mod:`phantomlab.recalibration` from
:mod:`phantomlab.ui.calibration_section`.  A refusal (unknown batch, wrong unit, busy database) arrives as an
:class:`~phantomlab.errors.InputError` and the page shows its one line.
"""

from __future__ import annotations

from typing import Any, Mapping

from phantomlab.ui.services import PAGE_STOCK_SOURCE

__all__ = ["record_planned_batch", "record_page_stock"]


def record_planned_batch(
    store,
    plan,
    *,
    origin: Mapping[str, str] | None = None,
    operator: str | None = None,
    notes: str | None = None,
    planned_on=None,
    corrects: str | None = None,
) -> str:
    """Record a solved plan as a new batch (status ``planned``) and return its batch ID.

    :func:`phantomlab.workflows.record_planned_batch`, as ``phantomlab batch add`` records
    it: the sheet is rendered with the ID (not a draft), the potencies used name the
    calibration state they came from.  ``origin`` says, per stock key, whether the definition
    came from the stock file or the page (a page stock's lot is recorded as added on the
    page).  The plan's doses carry the potencies it was solved with.
    """
    from phantomlab.workflows import record_planned_batch as record

    sources = {key: PAGE_STOCK_SOURCE for key, where in dict(origin or {}).items()
               if str(where).startswith("page")}
    return record(store, plan, lot_sources=sources, operator=operator, notes=notes, planned_on=planned_on,
                  corrects=corrects).code


def saved_batch_sheets(store, plan, code: str) -> dict:
    """The sheet of a just-saved batch as stored (HTML) and as CSV, to hand over for download."""
    from phantomlab.recipe.sheet import render_sheet_csv  # layer 3
    from phantomlab.store import get_batch, plan_of  # layer 4

    with store.reading() as session:
        html = plan_of(session, get_batch(session, code)).sheet_html
    return {"code": code, "html": html, "csv": render_sheet_csv(plan, batch_id=code, draft=False)}


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
    return parse_recipe(tomllib.loads(raw.decode("utf-8")), base_dir=folder, path=path, shelf=shelf)


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
    from phantomlab.shelf_export import materialise_resolved
    from phantomlab.ui.services import _cache_folder

    with store.reading() as session:
        batch = get_batch(session, code)
        recipe_row = recipe_of(session, batch)
        lots = batch_lots(session, batch)
        definition = dict(recipe_row.definition)
        source_path = recipe_row.source_path
        stocks = {key: dict(lot.definition) for key, lot in lots.items()}
    folder = _cache_folder()
    document = {"stocks": {key: materialise_resolved(key, table, folder) for key, table in stocks.items()}}
    base = Path(source_path).parent if source_path else Path(recipes_folder or ".")
    shelf = parse_shelf(document, base=base, path=None, today=_far_past())
    return parse_recipe(definition, base_dir=base, shelf=shelf)


def _far_past():
    import datetime as _dt

    return _dt.date(1970, 1, 1)  # an old batch's lots are not re-checked for expiry here


def record_dispensed(store, code: str, rows, *, recorded_by: str | None = None, recipes_folder=None,
                     mixed_on=None, mixing_time=None, cure: str | None = None,
                     mixing_temperature_c: float | None = None, notes: str | None = None):
    """Record the sheet's lines as dispensed and predict the optics of what was really made.

    :func:`phantomlab.workflows.record_dispensed`, as ``phantomlab batch actual`` records
    them, with the recipe rebuilt from the batch's snapshots (:func:`batch_recipe`).

    Parameters
    ----------
    rows : list of dict
        The rows ``batch actual`` reads from its amounts CSV
        (:func:`phantomlab.recipe.dispensed.parse_amounts_csv`): matrix lines, pre-dilution
        steps (actual taken and diluent) and doses, each in mL or g.

    Returns
    -------
    phantomlab.workflows.DispensedBatch
    """
    from phantomlab.workflows import record_dispensed as record

    recipe = batch_recipe(store, code, recipes_folder=recipes_folder)
    return record(store, code, list(rows), recipe=recipe, recorded_by=recorded_by, mixed_on=mixed_on,
                  mixing_time=mixing_time, cure=cure, mixing_temperature_c=mixing_temperature_c, notes=notes)


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

    :func:`phantomlab.measurement_workflow.attach_measurement`, as ``phantomlab batch measure`` does
    it: fitted first (a file that does not parse writes nothing); the phantom age defaults
    to the days since mixing.

    Returns
    -------
    (measurement id, FitResult)
    """
    from phantomlab.measurement_workflow import attach_measurement as attach

    done = attach(store, code, kind=kind, file_name=file_name, raw_content=raw_content,
                  sidecar_toml=sidecar_toml, model=model, baseline=baseline, options=options,
                  instrument=instrument, measured_on=measured_on, phantom_age_days=phantom_age_days,
                  recorded_by=recorded_by)
    return done.measurement_id, done.fit


def keep_fit(store, measurement_id: int, result, *, recorded_by: str | None = None) -> int:
    """Keep a refit with its stored measurement (:func:`phantomlab.measurement_workflow.keep_fit`)."""
    from phantomlab.measurement_workflow import keep_fit as keep

    return keep(store, measurement_id, result, recorded_by=recorded_by)
