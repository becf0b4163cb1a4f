"""Page "Batch log": list and filter batches; open one to record amounts, measurements, status.

Flows:

* the list of batches (newest version of each) filtered by status, recipe and text;
* one batch: its sheet as stored, the amounts actually dispensed entered against the sheet
  (the recipe layer predicts what was really made, with an alarm outside the tolerance),
  measurement files attached (fitted by the calibration layer on the way in), the status
  moved forward, and the full history of every version;
* across the batches of one recipe: the spread of the fitted μa and μs′ (CV per
  wavelength) and their drift with phantom age, as plots (:mod:`phantomlab.ui.batch_trends`).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui import services
from phantomlab.ui.attach_section import demo_download, measure_section, show_verdict
from phantomlab.ui.batch_trends import latest_fit, log_fingerprint, spread_section
from phantomlab.ui.oxygenation_section import oxygenation_section
from phantomlab.ui.plain_text import plain
from phantomlab.ui.plots import Chart, Series, line_figure, show_chart, target_series
from phantomlab.ui.tables import day_text, moment_text, number_text
from phantomlab.ui.widgets import call_layer
from phantomlab.ui.workspace import Workspace

__all__ = ["show"]

TITLE = "Batch log"
#: The tabs of one batch; only the open one runs. Its label is kept under TAB_KEY, across pages too.
TABS = ("Amounts dispensed", "Measurements", "Oxygenation series", "History")
TAB_KEY = "batches.tab"
KEEP = (TAB_KEY,)
STATUSES = ("planned", "mixed", "characterised", "retired")
#: The list of batches: narrow enough for a laptop screen (the notes are with the batch below).
LOG_COLUMNS = ("batch", "recipe", "status", "mixed on", "operator", "measurements", "alarms")
#: Widths [px] of the columns whose text a person chooses (a long recipe name or operator is
#: cut with "…" in its cell, whole on hover, and never pushes a column out of sight).
LOG_WIDTHS = {"recipe": st.column_config.TextColumn("recipe", width=280),
              "operator": st.column_config.TextColumn("operator", width=110)}


# ---- reading the log ----------------------------------------------------------------------------


def read_log(store) -> list[dict]:
    """Every batch (newest version) with its recipe, measurements and fits, as plain values.

    Read once per state of the log (:func:`phantomlab.ui.page_cache.log_state`) and shared by
    every section and session: treat it as read-only.
    """
    from phantomlab.ui.page_cache import log_state

    return _read_log(log_state(store), store)


@st.cache_resource(show_spinner=False, max_entries=4)
def _read_log(log: tuple, _store) -> list[dict]:
    """:func:`read_log` once per (database URL, state of the log)."""
    from phantomlab.store import fits_of, list_batches, measurements_of, plan_of, recipe_of  # layer 4

    out = []
    with _store.reading() as session:
        for batch in list_batches(session, include_retracted=True):
            recipe = recipe_of(session, batch)
            plan = plan_of(session, batch)
            measurements = []
            for measurement in measurements_of(session, batch):
                fits = fits_of(session, measurement)
                measurements.append({
                    "id": measurement.id, "kind": measurement.kind, "file_name": measurement.file_name,
                    "measured_on": measurement.measured_on, "phantom_age_days": measurement.phantom_age_days,
                    "instrument": measurement.instrument, "recorded_at": measurement.recorded_at,
                    "fits": [{"id": f.id, "model": f.model, "results": dict(f.results),
                              "chi2_red": f.chi2_red, "recorded_at": f.recorded_at} for f in fits],
                })
            out.append({
                "code": batch.code, "uid": batch.uid, "version": batch.version, "status": batch.status,
                "retracted": batch.retracted, "operator": batch.operator, "planned_on": batch.planned_on,
                "mixed_on": batch.mixed_on, "notes": batch.notes, "recipe": recipe.name,
                "cure_details": batch.cure_details,
                "recipe_version": recipe.recipe_version, "recipe_source": recipe.source_path,
                "plan": dict(plan.plan),
                "sheet_html": plan.sheet_html, "actual_amounts": batch.actual_amounts,
                "actual_prediction": batch.actual_prediction, "actual_alarms": batch.actual_alarms,
                "measurements": measurements,
            })
    return out


def read_history(store, code: str) -> pd.DataFrame:
    from phantomlab.store import batch_history  # layer 4

    with store.reading() as session:
        rows = [{
            "version": row.version, "recorded at (UTC)": moment_text(row.recorded_at), "by": row.recorded_by or "",
            "status": row.status, "change": row.change_note or "first record",
            "retracted": "yes" if row.retracted else "",
        } for row in batch_history(session, code)]
    return pd.DataFrame(rows)


def read_exclusions(store, code: str) -> list[dict]:
    """Every step of the batch's exclusion from the calibration (``batch show`` lists the same)."""
    from phantomlab.store import exclusion_history  # layer 4

    with store.reading() as session:
        return [{"recorded at (UTC)": step["recorded_at"], "by": step["recorded_by"] or "",
                 "what": f"measurement {step['measurement_id']}" if step["measurement_id"] else "whole batch",
                 "event": step["event"], "reason": step["reason"] or ""}
                for step in exclusion_history(session, code)]


def _log_table(batches: list[dict]) -> pd.DataFrame:
    rows = []
    for batch in batches:
        rows.append({
            "batch": batch["code"], "recipe": batch["recipe"], "status": batch["status"]
            + (" (retracted)" if batch["retracted"] else ""),
            "mixed on": day_text(batch["mixed_on"]),
            "operator": batch["operator"] or "", "measurements": len(batch["measurements"]),
            "alarms": len(batch["actual_alarms"] or []),
        })
    return pd.DataFrame(rows, columns=LOG_COLUMNS)


# ---- one batch ------------------------------------------------------------------------------------


def _amounts_section(workspace: Workspace, store, batch: dict) -> None:
    from phantomlab.ui.bench_record import (amounts_form, mixing_summary, recorded_amounts_table,
                                            recorded_predilutions_table)

    if batch["actual_amounts"]:
        said = mixing_summary(batch)
        st.markdown("**Recorded**" + (f" — {plain(said)}" if said else ""))
        st.dataframe(recorded_amounts_table(batch), hide_index=True, width="stretch")
        made = recorded_predilutions_table(batch)
        if not made.empty:
            st.dataframe(made, hide_index=True, width="stretch")
    amounts_form(workspace, store, batch)


@st.cache_resource(show_spinner=False, max_entries=32)
def _prediction_charts(key: str, _batch: dict) -> list[Chart]:
    """μa and μs′ of what was dispensed, built once per batch version (``key``)."""
    made = _batch["actual_prediction"]
    target = _batch["plan"].get("target", {})
    planned = _batch["plan"].get("predicted", {})
    charts = []
    for quantity, symbol in (("mua", "μa"), ("musp", "μs′")):
        name = f"{quantity}_per_mm"
        series = [Series(f"what was dispensed, predicted {symbol}", made["wavelength_nm"], made[name],
                         sd=made.get(f"{quantity}_sd_per_mm"), mode="lines+markers")]
        if planned.get(name):
            series.append(Series(f"planned {symbol}", planned["wavelength_nm"], planned[name], mode="markers"))
        wanted = np.asarray([np.nan if v is None else v for v in target.get(name, [])], dtype=float)
        if wanted.size and np.any(np.isfinite(wanted)):
            has = np.isfinite(wanted)
            series.append(target_series(f"target {symbol}", np.asarray(target["wavelength_nm"])[has], wanted[has]))
        figure = line_figure(series, x_label="wavelength [nm]", y_label=f"{symbol} [1/mm]",
                             title=f"{symbol} of what was dispensed")
        table = pd.DataFrame({"wavelength_nm": made["wavelength_nm"], name: made[name],
                              f"{quantity}_sd_per_mm": made.get(f"{quantity}_sd_per_mm")})
        charts.append(Chart(figure, table, f"{_batch['code']}-dispensed-{quantity}", f"batches.made.{quantity}"))
    return charts


def _prediction_plot(batch: dict) -> None:
    if not batch.get("actual_prediction"):
        return
    charts = _prediction_charts(f"{batch['uid']}.{batch['version']}", batch)
    for column, chart in zip(st.columns(2), charts):
        with column:
            show_chart(chart)
    for alarm in batch.get("actual_alarms") or []:
        st.error(plain(alarm))


def _status_section(store, batch: dict) -> None:
    from phantomlab.ui.bench_record import by_field, remember_by, set_notice, shown_notice
    from phantomlab.workflows import change_status  # as `phantomlab batch status`

    code = batch["code"]
    present = STATUSES.index(batch["status"])
    later = list(STATUSES[present + 1:])
    st.markdown(f"**Status:** {batch['status']} (moves forward only: {' → '.join(STATUSES)})")
    if not later or batch["retracted"]:
        shown_notice(f"status.{code}")
        return
    prefix = f"batches.status.{code}.v{batch['version']}"  # a new version after each change: a new form
    with st.form(prefix, border=False):
        c1, c2, c3, c4 = st.columns([1, 2, 1, 1], vertical_alignment="bottom")
        wanted = c1.selectbox("New status", later, key=f"{prefix}.status")
        note = c2.text_input("Why (kept in the history)", key=f"{prefix}.note", max_chars=500)
        by = by_field(f"{prefix}.by", container=c3)
        pressed = c4.form_submit_button("Change the status")
    shown_notice(f"status.{code}")
    if pressed:
        outcome = call_layer("Changing the status", change_status, store, code, wanted,
                             note=note.strip() or None, recorded_by=by or None)
        if outcome.ok:
            remember_by(by)
            set_notice(f"status.{code}", f"Batch {code} is now {wanted} (version {outcome.value[1].version}"
                       + (f", by {by}" if by else "") + ").")
            st.rerun()


def _measurements_table(batch: dict) -> pd.DataFrame:
    rows = []
    for m in batch["measurements"]:
        fit = latest_fit(m) or {}
        rows.append({
            "id": m["id"], "file": m["file_name"], "kind": m["kind"], "measured on": day_text(m["measured_on"]),
            "phantom age [days]": number_text(m["phantom_age_days"], 3), "instrument": m["instrument"] or "",
            "fit model": fit.get("model", ""), "reduced χ²": number_text(fit.get("chi2_red"), 3),
            "fit quality": fit.get("fit_quality") or "not assessed",
            "fit warnings": len(fit.get("warnings", [])),
        })
    return pd.DataFrame(rows)


def _one_batch(workspace: Workspace, store, batch: dict, *, fingerprint: str) -> None:
    from phantomlab.ui.bench_record import batch_record_download

    st.subheader(f"Batch {batch['code']}")
    st.markdown(
        f"Recipe **{plain(batch['recipe'])}** (version {plain(batch['recipe_version'])}) · planned "
        f"{batch['planned_on']}" + (f" · mixed {batch['mixed_on']}" if batch["mixed_on"] else "")
        + (f" · operator {plain(batch['operator'])}" if batch["operator"] else "")
    )
    if batch["notes"]:
        st.caption(f"Notes: {plain(batch['notes'])}")
    if batch["sheet_html"]:
        st.download_button(f"Download the sheet of batch {batch['code']} as printed (HTML)",
                           data=batch["sheet_html"].encode("utf-8"), file_name=f"sheet-{batch['code']}.html",
                           mime="text/html", key="batches.sheet", on_click="ignore")
    batch_record_download(workspace, batch, fingerprint=fingerprint)
    _status_section(store, batch)
    amounts, measure, oxygenation, history = st.tabs(list(TABS), key=TAB_KEY, on_change="rerun")
    # Lazy tabs: only the open tab's content runs, except the two forms (the bench record and the
    # measurement to attach): what is typed or uploaded in a form lives in the browser until it is
    # sent, so they are drawn whichever tab is open and a look at another tab loses nothing.
    with amounts:
        _amounts_section(workspace, store, batch)
        if amounts.open:
            _prediction_plot(batch)
    with measure:
        if batch["measurements"]:
            st.dataframe(_measurements_table(batch), hide_index=True, width="stretch")
        else:
            st.caption("No measurement attached yet.")
        measure_section(workspace, store, batch)
        if measure.open:
            demo_download(workspace, batch)
    if oxygenation.open:
        with oxygenation:
            oxygenation_section(workspace, store, batch)
    elif history.open:
        with history:
            _history_section(store, batch)


def _history_section(store, batch: dict) -> None:
    """The versions of the batch record, its calibration exclusions and its measurements' fits."""
    st.markdown("**Versions of the batch record**")
    st.dataframe(read_history(store, batch["code"]), hide_index=True, width="stretch")
    exclusions = call_layer("Reading the calibration exclusions", read_exclusions, store, batch["code"],
                            show=False).value
    if exclusions:
        st.markdown("**Calibration: left out and taken back** (Fit and correct → Recalibrate)")
        st.dataframe(pd.DataFrame(exclusions), hide_index=True, width="stretch")
    fits = [{"measurement": m["id"], "file": m["file_name"], "fit": f["id"], "model": f["model"],
             "reduced χ²": number_text(f["chi2_red"], 3), "recorded at (UTC)": moment_text(f["recorded_at"])}
            for m in batch["measurements"] for f in sorted(m["fits"], key=lambda f: (f["recorded_at"], f["id"]))]
    if fits:
        st.markdown("**Measurements and their fits** (the newest fit of each measurement counts)")
        st.dataframe(pd.DataFrame(fits), hide_index=True, width="stretch")


def show(workspace: Workspace) -> None:
    st.header(TITLE)
    store = services.store_for(workspace)
    notice = st.session_state.pop("batches.notice", None)  # sections that keep their notice for the top
    if notice:
        st.success(notice)
    loaded = call_layer("Reading the batch log", read_log, store)
    if not loaded.ok:
        return
    batches = loaded.value
    if not batches:
        st.info("No batch yet: design a phantom and save it as a new batch.")
        return
    c1, c2, c3 = st.columns(3)
    statuses = c1.multiselect("Status", STATUSES, default=list(STATUSES[:3]), key="batches.filter_status")
    recipes = sorted({b["recipe"] for b in batches})
    recipe = c2.selectbox("Recipe", ["(all recipes)"] + recipes, key="batches.filter_recipe")
    text = c3.text_input("Search batch ID, operator or notes", key="batches.filter_text").strip().lower()
    shown = [b for b in batches
             if b["status"] in statuses and (recipe == "(all recipes)" or b["recipe"] == recipe)
             and (not text or text in " ".join(str(b[k] or "") for k in ("code", "operator", "notes")).lower())]
    from phantomlab.ui.bench_record import shown_notice

    for code in sorted({b["code"] for b in batches} - {b["code"] for b in shown}):
        shown_notice(f"status.{code}")  # a batch the filter now hides (e.g. just retired)
    verdict = st.session_state.get("batches.verdict")
    if verdict and verdict.get("code") not in {b["code"] for b in shown}:
        show_verdict(st.session_state.pop("batches.verdict"))
    st.dataframe(_log_table(shown), hide_index=True, width="stretch", column_config=LOG_WIDTHS)
    if not shown:
        st.caption("No batch matches the filter.")
    else:
        codes = [b["code"] for b in shown]
        code = st.selectbox("Open batch", codes, index=len(codes) - 1, key="batches.open")
        _one_batch(workspace, store, next(b for b in shown if b["code"] == code), fingerprint=log_fingerprint(batches))
    spread_section(batches)
