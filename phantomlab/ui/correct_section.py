"""The correction half of "Fit and correct" (layer 5): corrected plan, top-up.

* Recalibrate: :mod:`phantomlab.ui.calibration_section` (preview, confirm, exclusions,
  rollback), re-exported here as :func:`recalibrate_section`.
* Correct: for a batch of the log, the next batch's plan with the calibrated potencies
  (against the batch's own plan), its predicted optics ± SD and verdict against the recipe's
  tolerances, which potencies it used, its sheet (naming the batch it corrects) and a button
  to save it; or, for a liquid batch still on the bench, the add-only top-up that brings it
  to the target.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui import services
from phantomlab.ui.calibration_section import recalibrate_section
from phantomlab.ui.page_cache import cached_on
from phantomlab.ui.plain_text import plain
from phantomlab.ui.plots import Chart, Series, line_figure, show_chart, target_series
from phantomlab.ui.widgets import call_layer, quantity_field, show_warnings
from phantomlab.ui.workspace import Workspace

__all__ = ["recalibrate_section", "correction_section"]


# ---- correction -------------------------------------------------------------------------------------


def correction_key(workspace: Workspace, store, batch: dict) -> str:
    """Everything the corrected plan of ``batch`` depends on, as one string.

    The state of the log (the batch's snapshots, the calibration, page stocks), the stock
    file's folder (the shelf of today), the folder of the batch's recipe (a target spectrum
    it names) and the day (lots expire): the plan, its figures and sheet are computed once
    per key (``st.cache_resource``) and again after any change.
    """
    import datetime as _dt
    import json
    from pathlib import Path

    from phantomlab.ui.page_cache import folder_state, log_state

    shelf = workspace.shelf_path
    source = batch.get("recipe_source")
    recipe_folder = Path(source).parent if source else workspace.recipes_folder
    return json.dumps([log_state(store), batch["code"], str(shelf) if shelf else None,
                       folder_state(shelf.parent) if shelf else (), folder_state(recipe_folder),
                       _dt.date.today().isoformat()], default=str)


def _next_recipe(workspace: Workspace, store, code: str):
    """The batch's recipe on today's shelf (the lots now on it), and the calibrated potencies."""
    from phantomlab.errors import InputError
    from phantomlab.ui.recording import batch_recipe
    from phantomlab.correction_workflow import shelf_potencies

    recipe = batch_recipe(store, code, recipes_folder=workspace.recipes_folder)
    try:
        shelf, origin = services.load_page_shelf(workspace, store)
    except InputError:  # no stock file given: plan with the lots the batch used
        shelf, origin = {}, {}
    missing = [k for k in (recipe.matrix_key, *recipe.stock_keys) if k not in shelf]
    if not missing:
        recipe = recipe.with_shelf(shelf)
    return recipe, shelf_potencies(store, recipe), origin, missing


def _dose_comparison(previous: dict, plan) -> pd.DataFrame:
    before = {d["stock"]: d for d in previous.get("doses", [])}
    rows = []
    for dose in plan.doses:
        old = before.get(dose.stock, {})
        old_volume = old.get("volume_ml")
        rows.append({
            "stock": dose.stock, "lot": dose.lot,
            "previous batch [mL undiluted]": old_volume,
            "next batch [mL undiluted]": dose.volume_ml,
            "change [%]": (100.0 * (dose.volume_ml / old_volume - 1.0)) if old_volume else np.nan,
            "potency used": f"{dose.potency:.3f} ± {dose.potency_sd:.3f} ({dose.potency_source})",
        })
    return pd.DataFrame(rows)


def _potencies_from(store, recipe, potencies):
    from phantomlab.recalibration import potencies_from

    with store.reading() as session:
        return potencies_from(session, recipe, potencies)


def _describe(source) -> str:
    from phantomlab.recalibration import describe_potencies_from

    return describe_potencies_from(source)


def _judged(plan) -> tuple[str, str, pd.DataFrame]:
    """(outcome, its line, the table per quantity and wavelength) of the predicted next batch."""
    from phantomlab.calibration.verdict import judge
    from phantomlab.jsonable import to_jsonable

    plan_json = to_jsonable(plan.to_json())
    verdict = judge(target=plan_json["target"], values=plan_json["predicted"])
    rows = [{"quantity": r["quantity"].replace("musp", "μs′").replace("mua", "μa"), "λ [nm]": r["wavelength_nm"],
             "predicted vs target [%]": r["deviation_percent"], "± SD [%]": r["sd_percent"],
             "tolerance [±%]": r["tolerance_percent"], "verdict": r["outcome"] or "–"} for r in verdict.rows]
    return verdict.outcome, verdict.lines(what="predicted")[-1], pd.DataFrame(rows)


def _verdict(judged: tuple[str, str, pd.DataFrame]) -> None:
    """The predicted next batch against the recipe's tolerances, by the one verdict rule."""
    outcome, line, table = judged
    heading = {"PASS": st.success, "FAIL": st.error, "UNDECIDED": st.warning}.get(outcome, st.info)
    heading("Predicted next batch: " + line)
    st.dataframe(table, hide_index=True, width="stretch",
                 column_config={"predicted vs target [%]": st.column_config.NumberColumn(format="%+.1f"),
                                "± SD [%]": st.column_config.NumberColumn(format="%.1f")})


def _plan_charts(plan) -> list:
    """The next batch's predicted μa and μs′ against the target, as charts."""
    target = plan.target
    predicted = plan.curve if plan.curve is not None else plan.predicted
    charts = []
    for quantity, symbol in (("mua", "μa"), ("musp", "μs′")):
        wanted = getattr(target, f"{quantity}_per_mm")
        has = np.isfinite(wanted)
        series = [Series(f"next batch {symbol}", predicted.wavelength_nm, getattr(predicted, f"{quantity}_per_mm"),
                         sd=getattr(predicted, f"{quantity}_sd_per_mm"))]
        if np.any(has):
            series.append(target_series(f"target {symbol}", target.wavelength_nm[has], wanted[has]))
        figure = line_figure(series, x_label="wavelength [nm]", y_label=f"{symbol} [1/mm]",
                             title=f"Next batch: predicted {symbol}")
        table = pd.DataFrame({"wavelength_nm": predicted.wavelength_nm,
                              f"{quantity}_per_mm": getattr(predicted, f"{quantity}_per_mm"),
                              f"{quantity}_sd_per_mm": getattr(predicted, f"{quantity}_sd_per_mm")})
        charts.append(Chart(figure, table, f"next-batch-{quantity}", f"correct.{quantity}"))
    return charts


def _top_up_section(workspace: Workspace, store, batch: dict, recipe, key: str) -> None:
    from phantomlab.correction_workflow import top_up_batch

    st.markdown("**Add-only top-up of this batch** (liquid batches still on the bench)")
    if not any(m["fits"] for m in batch["measurements"]):
        st.caption("The batch has no fitted measurement yet.")
        return
    if recipe.by_mass or recipe.preparation.kind != "liquid":
        st.caption(f"This is a {recipe.preparation.kind} batch: a cast or set phantom cannot be topped up.")
        return
    c1, c2 = st.columns(2)
    volume = quantity_field("Volume in the vessel now (with unit: 480 mL)", kind="volume",
                            default=f"{batch['plan'].get('batch_volume_ml', 500):g} mL",
                            key=f"correct.topup_volume.{batch['code']}", minimum=0.0, container=c1)
    room = quantity_field("Room left in the vessel (with unit: 50 mL)", kind="volume", default="100 mL",
                          key=f"correct.topup_room.{batch['code']}", minimum=0.0, container=c2)
    if volume is None or room is None:
        return
    outcome = call_layer("Planning the top-up", cached_on, key, f"top-up {volume!r} {room!r}", top_up_batch, store,
                         batch["code"], recipe, current_volume_ml=volume, max_added_ml=room, show=False)
    if not outcome.ok:
        st.error(plain(outcome.error))
        return
    st.caption(f"From the newest fit of {plain(outcome.value.file_name)} "
               f"(measurement {outcome.value.measurement_id}).")
    plan = outcome.value.result
    show_warnings(list(plan.warnings) + outcome.warnings)
    rows = [{"add": a["stock"], "volume [mL]": a["volume_ml"], "mass [g]": a.get("mass_g"),
             "note": "below the smallest dispensable volume" if a.get("below_min_dispense") else ""}
            for a in plan.additions]
    rows.append({"add": f"{plan.diluent} (diluent)", "volume [mL]": plan.diluent_volume_ml,
                 "mass [g]": plan.diluent_volume_ml * recipe.matrix.density_g_per_ml, "note": ""})
    st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch")
    errors = plan.relative_error()
    st.dataframe(pd.DataFrame({
        "wavelength [nm]": plan.wavelength_nm,
        "μa now vs target [%]": 100 * errors["mua_before"], "μa after [%]": 100 * errors["mua_after"],
        "μs′ now vs target [%]": 100 * errors["musp_before"], "μs′ after [%]": 100 * errors["musp_after"],
    }), hide_index=True, width="stretch")
    st.caption(f"Final volume {plan.final_volume_ml:.4g} mL. Stir well and measure again before use.")


def correction_section(workspace: Workspace, store) -> None:
    from phantomlab.ui.batches_page import read_log
    from phantomlab.ui.plan_view import doses_table, saved_sheet_downloads, sheet_downloads
    from phantomlab.ui.recording import record_planned_batch, saved_batch_sheets

    st.subheader("Correct the next batch")
    loaded = call_layer("Reading the batch log", read_log, store)
    batches = [b for b in (loaded.value or []) if not b["retracted"]]
    if not batches:
        st.info("No batch in the log yet.")
        return
    codes = [b["code"] for b in batches]
    code = st.selectbox("From batch", codes, index=len(codes) - 1, key="correct.batch",
                        format_func=lambda c: f"{c} · {next(b['recipe'] for b in batches if b['code'] == c)}")
    batch = next(b for b in batches if b["code"] == code)
    key = correction_key(workspace, store, batch)
    found = call_layer("Rebuilding the recipe", cached_on, key, "recipe", _next_recipe, workspace, store, code)
    if not found.ok:
        return
    recipe, potencies, origin, missing = found.value
    if missing and workspace.shelf_path is None:
        st.info("No stock file given: planning with the lots the batch used.")
    elif missing:
        st.warning(f"Not on today's shelf: {plain(', '.join(missing))}; planning with the lots the batch used.")
    if not potencies:
        st.info("No calibrated potency for the lots on the shelf yet: recalibrate first, or the plan "
                "uses the stock file's potencies.")
    next_tab, topup_tab = st.tabs(["Next batch", "Top-up of this batch"])
    with next_tab:
        from phantomlab.correction_workflow import next_batch_plan

        with st.spinner("Solving the corrected plan…"):
            solved = call_layer("Solving the corrected plan", cached_on, key, "plan", next_batch_plan, store, recipe)
        if solved.ok:
            plan, potencies = solved.value
            for limit in plan.binding_limits:
                st.error(f"The target cannot be met: {plain(limit.message)}")
            source = call_layer("Reading the calibration state", cached_on, key, "source", _potencies_from, store,
                                recipe, potencies, show=False).value
            described = _describe(source)
            st.caption(plain(f"Corrects batch {code}; {described}."))
            shown = cached_on(key, "shown", lambda: {
                "doses": _dose_comparison(batch["plan"], plan), "verdict": _judged(plan),
                "charts": _plan_charts(plan), "amounts": doses_table(plan)})
            st.dataframe(shown["doses"], hide_index=True, width="stretch")
            _verdict(shown["verdict"])
            for column, chart in zip(st.columns(2), shown["charts"]):
                with column:
                    show_chart(chart)
            with st.expander("Full amounts of the next batch"):
                st.dataframe(shown["amounts"], hide_index=True, width="stretch")
            sheet_downloads(plan, batch_id=None, key="correct.sheet", note=f"Corrects batch {code}; {described}",
                            cache_key=key)
            if st.button("Save the corrected plan as a new batch", type="primary", key="correct.save"):
                saved = call_layer("Saving the batch", record_planned_batch, store, plan, origin=origin,
                                   notes=f"corrected after batch {code}", corrects=code)
                if saved.ok:
                    sheets = call_layer("Reading the stored sheet", saved_batch_sheets, store, plan, saved.value)
                    st.session_state["correct.saved"] = {**(sheets.value or {"code": saved.value}), "after": code}
            done = st.session_state.get("correct.saved")
            if done and done.get("after") == code:
                st.success(f"Saved as batch **{done['code']}** (status: planned).")
                saved_sheet_downloads(done, key="correct.saved_sheet")
    with topup_tab:
        _top_up_section(workspace, store, batch, recipe, key)
