"""Page "Design a phantom": stocks and targets in, doses, predicted optics and the sheet out.

Flow: pick the matrix and the stocks from the shelf, give the batch size and the target (as
points, a power law for μs′, or an uploaded spectrum), set the lab's limits; the recipe
layer solves the doses (:func:`phantomlab.recipe.solve`), and the page shows the doses,
predicted against target μa and μs′ with their ±1 SD band, the residual per wavelength,
which limit binds when the target is out of reach, the cautions, the mixing sheet to
download (HTML, CSV), and a button that records the plan as a new batch.
"""

from __future__ import annotations

import json
import tomllib
from dataclasses import replace
from pathlib import Path

import streamlit as st

from phantomlab.errors import InputError
from phantomlab.ui import services
from phantomlab.ui.cautions import show_cautions
from phantomlab.ui.so2_design import KEEP as SO2_KEEP
from phantomlab.ui.so2_design import so2_series_plot
from phantomlab.ui.design_fields import NEW_RECIPE, apply_start, read_fields, read_recipe_definition
from phantomlab.ui.plan_view import (doses_table, matrix_table, predilutions_table, saved_sheet_downloads,
                                     sheet_downloads)
from phantomlab.ui.plain_text import plain
from phantomlab.ui.plan_figures import plan_charts
from phantomlab.ui.plots import show_chart
from phantomlab.ui.widgets import call_layer, show_warnings
from phantomlab.ui.workspace import Workspace

__all__ = ["show"]

TITLE = "Design a phantom"
#: Widget keys whose values outlive a visit to another page (see phantomlab.ui.main).
KEEP = (
    "design.start", "design.name", "design.matrix", "design.stocks", "design.size_by", "design.size",
    "design.shape", "design.table_unit", "design.mua_tol", "design.musp_tol", "design.pl_wavelengths",
    "design.pl_a", "design.pl_b", "design.pl_ref", "design.pl_mua", "design.lim_min_ul",
    "design.lim_pipette_pct", "design.lim_balance_mg", "design.lim_solids_pct", "design.lim_steps",
    "design.lim_dead_ml", "design.dependent", "design.use_calibrated", "design.operator", "design.notes", *SO2_KEEP,
)
# ---- starting values -------------------------------------------------------------------------


# ---- reading the fields ------------------------------------------------------------------------


# ---- solving and showing -----------------------------------------------------------------------


def _same_as_file(definition: dict, path: Path) -> bool:
    """Whether the fields describe the recipe file unchanged (then the file itself is used)."""
    try:
        stat = path.stat()
    except OSError:
        return False
    return _same_as_file_cached(json.dumps(services.plain(definition), sort_keys=True), str(path),
                                stat.st_mtime_ns, stat.st_size)


@st.cache_data(show_spinner=False, max_entries=32)
def _same_as_file_cached(definition_json: str, path_text: str, mtime_ns: int, size: int) -> bool:
    """:func:`_same_as_file`, once per fields and state of the file (its time and size in the key)."""
    from phantomlab.recipe.limits import parse_limits  # layer 3
    from phantomlab.recipe.targets import parse_target

    definition, path = json.loads(definition_json), Path(path_text)
    try:
        original = read_recipe_definition(path)
        for key in ("name", "matrix", "stocks", "batch_volume_ml", "batch_mass_g"):
            if definition.get(key) != original.get(key):
                return False
        if definition.get("dependent_scattering", "none") != original.get("dependent_scattering", "none"):
            return False
        if parse_limits(definition.get("limits")) != parse_limits(original.get("limits")):
            return False
        mine = parse_target(definition["target"], base_dir=path.parent).to_json()
        theirs = parse_target(original.get("target"), base_dir=path.parent).to_json()
        return json.dumps(mine, sort_keys=True) == json.dumps(theirs, sort_keys=True)
    except (InputError, KeyError, TypeError):
        return False


@st.cache_resource(show_spinner=False, max_entries=16)
def _solved(definition_json: str, base_dir: str, source: str, _shelf, shelf_token: str, potencies_json: str):
    """Solve the recipe the fields describe; a recipe file left unchanged is used as the file
    (same content hash and version as ``phantomlab plan`` gives it), on the page's shelf."""
    from phantomlab.recipe import parse_recipe, solve  # layer 3

    if source:
        path = Path(source)
        raw = path.read_bytes()
        recipe = parse_recipe(tomllib.loads(raw.decode("utf-8")), base_dir=path.parent, path=path,
                              shelf=_shelf)
    else:
        definition = json.loads(definition_json)
        recipe = parse_recipe(definition, base_dir=Path(base_dir), shelf=_shelf)
    potencies = {k: tuple(v) for k, v in json.loads(potencies_json).items()} or None
    return solve(recipe, potencies=potencies)


def _recipe_download(definition: dict, source: str) -> None:
    """The recipe as a TOML file (the file itself when it is unchanged)."""
    import tomli_w

    from phantomlab.ui.recording import json_plain

    if source:
        data, name = Path(source).read_bytes(), Path(source).name
    else:
        data = tomli_w.dumps(json_plain(definition)).encode("utf-8")
        name = "".join(c if c.isalnum() else "-" for c in definition["name"].lower()).strip("-") + ".toml"
    st.download_button("Download the recipe (TOML)", data=data, file_name=name or "recipe.toml",
                       mime="application/toml", key="design.recipe_toml", on_click="ignore",
                       help="For `phantomlab plan RECIPE.toml` on the command line.")


def _sheet_preview(plan) -> None:
    from phantomlab.recipe.sheet import render_sheet_html  # layer 3

    with st.expander("Preview the sheet (as it prints, marked DRAFT until saved)"):
        # our own rendering of the plan (the renderer escapes every typed text), never stored HTML
        html = call_layer("Rendering the sheet", render_sheet_html, plan, draft=True)
        if html.ok:
            st.iframe(html.value, height=1100)


def _save_batch(workspace: Workspace, store, plan, origin: dict, *, definition: dict,
                base_dir: Path, source: str, token: str) -> None:
    from phantomlab.ui.recording import record_planned_batch, saved_batch_sheets, write_page_recipe

    saves = st.session_state.get("design.saves", 0)  # in the key: a second click on a form saved reaches none
    with st.form(f"design.save_form.{saves}", border=True):
        st.markdown("**Save this plan as a new batch** (the batch log gives it an ID; the sheet "
                    "then carries that ID instead of DRAFT).")
        operator = st.text_input("Operator (your name or initials)", key="design.operator")
        notes = st.text_area("Notes for the batch record (optional)", key="design.notes")
        pressed = st.form_submit_button("Save as a new batch", type="primary")
    if pressed:
        if not source:  # edited on the page: the recipe becomes a file, so the command line finds it
            written = call_layer("Writing the recipe file", write_page_recipe, workspace.page_recipes_folder(),
                                 definition, base_dir=base_dir, shelf=plan.recipe.shelf)
            if not written.ok:
                return
            plan = replace(plan, recipe=written.value)
        outcome = call_layer(
            "Saving the batch", record_planned_batch, store, plan,
            origin=origin, operator=operator.strip() or None,
            notes=notes.strip() or None,
        )
        if outcome.ok:
            st.session_state["design.saves"] = saves + 1
            sheets = call_layer("Reading the stored sheet", saved_batch_sheets, store, plan, outcome.value)
            st.session_state["design.saved_batch"] = {**(sheets.value or {"code": outcome.value}),
                                                      "token": token}
            st.rerun()  # draw the next form (a new key) at once
    saved = st.session_state.get("design.saved_batch")
    if saved and saved.get("token") == token:  # only while the fields still describe that batch
        st.success(f"Saved as batch **{saved['code']}** (status: planned). Record what you dispense on "
                   "the page *Batch log*.")
        saved_sheet_downloads(saved, key="design.saved_sheet")


def show(workspace: Workspace) -> None:
    st.header(TITLE)
    st.caption("Pick stocks from the shelf, give the target optics, and get the amounts to mix.")
    store = services.store_for(workspace)
    loaded = call_layer("Reading the shelf", services.load_page_shelf, workspace, store)
    if not loaded.ok:
        return
    shelf, origin = loaded.value

    names = services.recipe_catalogue(workspace)  # file name -> recipe name, read once per folder state
    files = list(names)
    choices = files + [NEW_RECIPE]
    if "design.started_from" not in st.session_state:
        from phantomlab.ui.demo import DEMO_RECIPE

        first = DEMO_RECIPE if DEMO_RECIPE in files else (files[0] if files else NEW_RECIPE)
        started = call_layer("Reading the recipe", apply_start, workspace, shelf, first)
        if not started.ok:
            apply_start(workspace, shelf, NEW_RECIPE)
        st.session_state["design.start"] = st.session_state["design.started_from"]

    def restart() -> None:
        call_layer("Reading the recipe", apply_start, workspace, shelf, st.session_state["design.start"])

    st.selectbox("Start from", choices, key="design.start", on_change=restart,
                 format_func=lambda c: f"{names[c]} — {c}" if names.get(c) else c,
                 help="A recipe file fills in the fields below; change any of them.")
    definition, base_dir = read_fields(workspace, shelf)
    if definition is None:
        st.info("Correct the field(s) marked in red above to see the amounts and the sheet.")
        chosen = [k for k in [st.session_state.get("design.matrix"), *st.session_state.get("design.stocks", [])]
                  if k in shelf]
        show_cautions([shelf[k] for k in chosen])
        return

    st.session_state.setdefault("design.use_calibrated", True)
    use_calibrated = st.checkbox("Use the calibrated potencies from the batch log",
                                 key="design.use_calibrated")
    potencies = {}
    if use_calibrated:
        found = call_layer("Reading the calibration", services.calibrated_potencies, store, shelf)
        potencies = found.value or {}
    started = st.session_state.get("design.start", NEW_RECIPE)
    source = ""
    if started != NEW_RECIPE and _same_as_file(definition, workspace.recipes_folder / started):
        source = str(workspace.recipes_folder / started)
    elif started != NEW_RECIPE:
        definition["version"] = f"{definition['version']}, edited on the page"
    token = json.dumps(services.plain(definition), sort_keys=True)
    # the shelf as read (page stocks, stock file, its spectra, the day) and the recipe's folder
    # (a target spectrum file): a change to either solves again
    from phantomlab.ui.page_cache import folder_state

    inputs = json.dumps([services.shelf_state(workspace, store), folder_state(base_dir)], default=str)
    with st.spinner("Solving the doses…"):
        solved = call_layer(
            "Solving the recipe", _solved, token, str(base_dir), source, shelf,
            inputs, json.dumps(potencies, sort_keys=True), show=False,
        )
    if not solved.ok:
        st.error(plain(solved.error))
        return
    plan = solved.value

    st.subheader("Predicted against target")
    if plan.binding_limits:
        lines = "\n".join(f"- {plain(b.message)}" for b in plan.binding_limits)
        st.error(f"**The target cannot be met.** The plan below is the closest feasible recipe.\n\n{lines}")
    show_warnings(plan.sheet_notes)  # the bench's notes: no command names, no command-line-only notes
    met = plan.residuals
    summary = []
    for label, key in (("μa", "mua_met"), ("μs′", "musp_met")) + ((("g", "g_met"),) if plan.target.has_g else ()):
        summary.append(f"{label} {'within' if met.get(key) else 'outside'} tolerance")
    st.markdown(" · ".join(summary) + f" · batch {plan.batch_volume_ml:.4g} mL, {plan.batch_mass_g:.4g} g")
    solve_key = json.dumps([token, str(base_dir), source, potencies, inputs], sort_keys=True, default=str)
    charts = plan_charts(solve_key, plan)  # built once per solve
    for column, chart in zip(st.columns(2), charts["spectra"]):
        with column:
            show_chart(chart)
    so2_series_plot(plan)
    for chart in charts["g"] + charts["residual"]:
        show_chart(chart)

    st.subheader("Amounts")
    st.dataframe(doses_table(plan), hide_index=True, width="stretch")
    diluted = predilutions_table(plan)
    if not diluted.empty:
        st.markdown("**Pre-dilutions** (make in this order, the day of use)")
        st.dataframe(diluted, hide_index=True, width="stretch")
    st.markdown("**Matrix**")
    st.dataframe(matrix_table(plan), hide_index=True, width="stretch")

    used = [plan.recipe.matrix] + [plan.recipe.stock(d.stock) for d in plan.doses if d.used]
    show_cautions(used, preparation_kind=plan.recipe.preparation.kind, recipe=plan.recipe)

    st.subheader("Mixing sheet")
    sheet_downloads(plan, batch_id=None, key="design.sheet", cache_key=solve_key)
    _sheet_preview(plan)
    _recipe_download(definition, source)
    _save_batch(workspace, store, plan, origin, definition=definition, base_dir=base_dir,
                source=source, token=solve_key)
