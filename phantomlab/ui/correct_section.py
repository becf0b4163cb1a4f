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
from phantomlab.ui.plain_text import plain
from phantomlab.ui.plots import Series, line_figure, show_figure, target_series
from phantomlab.ui.widgets import call_layer, quantity_field, show_warnings
from phantomlab.ui.workspace import Workspace

__all__ = ["recalibrate_section", "correction_section"]


# ---- correction -------------------------------------------------------------------------------------


def _next_recipe(workspace: Workspace, store, code: str):
    """The batch's recipe on today's shelf (the lots now on it), and the calibrated potencies."""
    from phantomlab.errors import InputError
    from phantomlab.ui.recording import batch_recipe
    from phantomlab.workflows import shelf_potencies

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


def _verdict(plan) -> None:
    """The predicted next batch against the recipe's tolerances, by the one verdict rule."""
    from phantomlab.calibration.verdict import judge
    from phantomlab.jsonable import to_jsonable

    plan_json = to_jsonable(plan.to_json())
    verdict = judge(target=plan_json["target"], values=plan_json["predicted"])
    heading = {"PASS": st.success, "FAIL": st.error, "UNDECIDED": st.warning}.get(verdict.outcome, st.info)
    heading("Predicted next batch: " + verdict.lines(what="predicted")[-1])
    rows = [{"quantity": r["quantity"].replace("musp", "μs′").replace("mua", "μa"), "λ [nm]": r["wavelength_nm"],
             "predicted vs target [%]": r["deviation_percent"], "± SD [%]": r["sd_percent"],
             "tolerance [±%]": r["tolerance_percent"], "verdict": r["outcome"] or "–"} for r in verdict.rows]
    st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch",
                 column_config={"predicted vs target [%]": st.column_config.NumberColumn(format="%+.1f"),
                                "± SD [%]": st.column_config.NumberColumn(format="%.1f")})


def _plan_plots(plan) -> None:
    target = plan.target
    predicted = plan.curve if plan.curve is not None else plan.predicted
    columns = st.columns(2)
    for column, quantity, symbol in ((columns[0], "mua", "μa"), (columns[1], "musp", "μs′")):
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
        with column:
            show_figure(figure, table=table, file_stem=f"next-batch-{quantity}", key=f"correct.{quantity}")


def _top_up_section(workspace: Workspace, store, batch: dict, recipe) -> None:
    from phantomlab.workflows import top_up_batch

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
    outcome = call_layer("Planning the top-up", top_up_batch, store, batch["code"], recipe,
                         current_volume_ml=volume, max_added_ml=room, show=False)
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
    found = call_layer("Rebuilding the recipe", _next_recipe, workspace, store, code)
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
        from phantomlab.workflows import next_batch_plan

        with st.spinner("Solving the corrected plan…"):
            solved = call_layer("Solving the corrected plan", next_batch_plan, store, recipe)
        if solved.ok:
            plan, potencies = solved.value
            for limit in plan.binding_limits:
                st.error(f"The target cannot be met: {plain(limit.message)}")
            source = call_layer("Reading the calibration state", _potencies_from, store, recipe, potencies,
                                show=False).value
            st.caption(plain(f"Corrects batch {code}; {_describe(source)}."))
            st.dataframe(_dose_comparison(batch["plan"], plan), hide_index=True, width="stretch")
            _verdict(plan)
            _plan_plots(plan)
            with st.expander("Full amounts of the next batch"):
                st.dataframe(doses_table(plan), hide_index=True, width="stretch")
            sheet_downloads(plan, batch_id=None, key="correct.sheet", note=f"Corrects batch {code}; {_describe(source)}")
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
        _top_up_section(workspace, store, batch, recipe)
