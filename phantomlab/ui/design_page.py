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
import tempfile
from dataclasses import replace
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.errors import InputError
from phantomlab.ui import services
from phantomlab.ui.cautions import show_cautions
from phantomlab.ui.plots import Series, bar_figure, line_figure, show_figure, target_series
from phantomlab.ui.widgets import call_layer, number_list_field, quantity_field, show_warnings
from phantomlab.ui.workspace import Workspace

__all__ = ["show"]

TITLE = "Design a phantom"
#: Widget keys whose values outlive a visit to another page (see phantomlab.ui.main).
KEEP = (
    "design.start", "design.name", "design.matrix", "design.stocks", "design.size_by", "design.size",
    "design.shape", "design.table_unit", "design.mua_tol", "design.musp_tol", "design.pl_wavelengths",
    "design.pl_a", "design.pl_b", "design.pl_ref", "design.pl_mua", "design.lim_min_ul",
    "design.lim_pipette_pct", "design.lim_balance_mg", "design.lim_solids_pct", "design.lim_steps",
    "design.lim_dead_ml", "design.use_calibrated", "design.operator", "design.notes",
)
NEW_RECIPE = "(a new recipe)"
SHAPES = ("Points", "Power law for μs′", "Spectrum file")
#: Above this many target wavelengths, targets are drawn as a dashed line instead of circles.
MARKED_POINTS = 40
TABLE_UNITS = {"1/mm": 1.0, "1/cm": 0.1}
POINT_COLUMNS = ("wavelength [nm]", "μa", "μs′")
#: Target fields the page has no field for; kept from the starting recipe as they are.
EXTRA_TARGET_KEYS = ("g_wavelength_nm", "g", "g_tolerance", "mua_weight", "musp_weight", "g_weight")
#: Limits the page has fields for; any other limit of the starting recipe is kept as it is.
SHOWN_LIMITS = ("min_dispense_ul", "pipette_rel_error", "balance_resolution_mg",
                "max_solids_volume_fraction", "max_dilution_steps", "dead_volume_ml")


# ---- starting values -------------------------------------------------------------------------


def _defaults_from(definition: dict, shelf) -> dict:
    """Session-state values of the page's fields from a recipe definition."""
    target = definition.get("target", {}) or {}
    values: dict = {
        "design.name": str(definition.get("name", "")),
        "design.matrix": definition.get("matrix"),
        "design.stocks": [k for k in definition.get("stocks", []) if k in shelf],
        "design.table_unit": "1/mm",
    }
    if "batch_mass_g" in definition:
        values["design.size_by"] = "mass"
        values["design.size"] = f"{definition['batch_mass_g']:g} g"
    else:
        values["design.size_by"] = "volume"
        values["design.size"] = f"{definition.get('batch_volume_ml', 500):g} mL"
    wavelength = [float(v) for v in target.get("wavelength_nm", [660, 780, 850])]
    mua = target.get("mua_per_mm")
    musp = target.get("musp_per_mm")
    if "musp_power_law" in target:
        law = target["musp_power_law"]
        values["design.shape"] = SHAPES[1]
        values["design.pl_wavelengths"] = ",".join(f"{v:g}" for v in wavelength)
        values["design.pl_a"] = f"{float(law.get('a_per_mm', 1.0)):g} /mm"
        values["design.pl_b"] = float(law.get("b", 1.0))
        values["design.pl_ref"] = f"{float(law.get('reference_nm', 500)):g} nm"
        values["design.pl_mua"] = ",".join(f"{float(v):g}" for v in (mua or [0.01]))
    else:
        values["design.shape"] = SHAPES[0]
    n = len(wavelength)
    mua = [float(v) for v in mua] if isinstance(mua, list) and len(mua) == n else [np.nan] * n
    musp = [float(v) for v in musp] if isinstance(musp, list) and len(musp) == n else [np.nan] * n
    values["design.points_data"] = pd.DataFrame(
        {POINT_COLUMNS[0]: wavelength, POINT_COLUMNS[1]: mua, POINT_COLUMNS[2]: musp}
    )
    values.setdefault("design.pl_wavelengths", "650:850:50")
    values.setdefault("design.pl_a", "1.0 /mm")
    values.setdefault("design.pl_b", 1.2)
    values.setdefault("design.pl_ref", "500 nm")
    values.setdefault("design.pl_mua", "0.01")
    values["design.extra_target"] = {k: target[k] for k in EXTRA_TARGET_KEYS if k in target}
    values["design.mua_tol"] = float(target.get("mua_tolerance_percent", 5.0))
    values["design.musp_tol"] = float(target.get("musp_tolerance_percent", 5.0))
    limits = definition.get("limits", {}) or {}
    values["design.lim_min_ul"] = float(limits.get("min_dispense_ul", 10.0))
    values["design.lim_pipette_pct"] = 100.0 * float(limits.get("pipette_rel_error", 0.01))
    values["design.lim_balance_mg"] = float(limits.get("balance_resolution_mg", 1.0))
    solids = limits.get("max_solids_volume_fraction", 0.05)
    values["design.lim_solids_pct"] = 100.0 * float(solids if solids is not None else 1.0)
    values["design.lim_steps"] = int(limits.get("max_dilution_steps", 3))
    values["design.lim_dead_ml"] = float(limits.get("dead_volume_ml", 0.1))
    values["design.extra_limits"] = {k: v for k, v in limits.items() if k not in SHOWN_LIMITS}
    values["design.extra"] = {
        k: definition[k] for k in ("preparation", "notes", "series") if k in definition
    }
    values["design.extra_matrix"] = definition.get("matrix")
    values["design.source_version"] = str(definition.get("version", "1"))
    values["design.editor_version"] = st.session_state.get("design.editor_version", 0) + 1
    return values


def _read_recipe_definition(path: Path) -> dict:
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise InputError(f"cannot read recipe {path.name}: {exc}") from None


def _apply_start(workspace: Workspace, shelf, choice: str) -> None:
    if choice == NEW_RECIPE:
        matrices = shelf.of_kind("matrix")
        definition = {
            "name": "my phantom",
            "matrix": matrices[0] if matrices else None,
            "stocks": [],
            "batch_volume_ml": 250,
            "target": {"wavelength_nm": [660, 780, 850]},
        }
    else:
        definition = _read_recipe_definition(workspace.recipes_folder / choice)
    st.session_state.pop("design.points_current", None)  # the old recipe's table must not come back
    for key, value in _defaults_from(definition, shelf).items():
        st.session_state[key] = value
    st.session_state["design.started_from"] = choice


# ---- reading the fields ------------------------------------------------------------------------


def _stock_label(shelf, key: str) -> str:
    """Short label for the pickers: key and kind (lots and expiry are listed under them)."""
    return f"{key} ({shelf[key].kind})"


def _lots_caption(shelf, keys) -> str:
    parts = []
    for key in keys:
        stock = shelf[key]
        text = f"{key}: lot {stock.lot or '(none)'}"
        if stock.expiry is not None:
            text += f", expires {stock.expiry.isoformat()}"
        parts.append(text)
    return " · ".join(parts)


def _points_target(unit_factor: float) -> dict | None:
    version = st.session_state.get("design.editor_version", 0)
    if f"design.points_editor.{version}" not in st.session_state and "design.points_current" in st.session_state:
        # back from another page: the editor's edits are gone, its last table is not
        st.session_state["design.points_data"] = st.session_state.pop("design.points_current")
        version += 1
        st.session_state["design.editor_version"] = version
    edited = st.data_editor(
        st.session_state["design.points_data"],
        num_rows="dynamic",
        key=f"design.points_editor.{version}",
        width="stretch",
        column_config={
            POINT_COLUMNS[0]: st.column_config.NumberColumn("wavelength [nm]", min_value=1.0, format="%g"),
            POINT_COLUMNS[1]: st.column_config.NumberColumn(
                f"μa [{st.session_state['design.table_unit']}]", min_value=0.0, format="%g"),
            POINT_COLUMNS[2]: st.column_config.NumberColumn(
                f"μs′ [{st.session_state['design.table_unit']}]", min_value=0.0, format="%g"),
        },
    )
    st.session_state["design.points_current"] = edited
    table = edited.dropna(subset=[POINT_COLUMNS[0]])
    if table.empty:
        st.error("Target: give at least one row with a wavelength [nm].")
        return None
    wavelength = table[POINT_COLUMNS[0]].to_numpy(float)
    mua = table[POINT_COLUMNS[1]].to_numpy(float) * unit_factor
    musp = table[POINT_COLUMNS[2]].to_numpy(float) * unit_factor
    target: dict = {"wavelength_nm": wavelength.tolist()}
    if np.all(np.isfinite(mua)):
        target["mua_per_mm"] = mua.tolist()
    elif np.any(np.isfinite(mua)):
        st.error("Target: fill μa in every row, or leave the whole μa column empty.")
        return None
    if np.all(np.isfinite(musp)):
        target["musp_per_mm"] = musp.tolist()
    elif np.any(np.isfinite(musp)):
        st.error("Target: fill μs′ in every row, or leave the whole μs′ column empty.")
        return None
    if "mua_per_mm" not in target and "musp_per_mm" not in target:
        st.error("Target: give μa or μs′ (or both) at the wavelengths.")
        return None
    return target


def _power_law_target(unit_factor: float) -> dict | None:
    left, right = st.columns(2)
    wavelength = number_list_field(
        "Wavelengths [nm] (650,750,850 or 600:900:10)",
        default=st.session_state.get("design.pl_wavelengths", "650:850:50"),
        key="design.pl_wavelengths", name="wavelengths", positive=True, container=left,
    )
    a = quantity_field(
        "μs′ at the reference wavelength, a (with unit: 1.2 /mm, 12 /cm)", kind="attenuation",
        default=st.session_state.get("design.pl_a", "1.0 /mm"), key="design.pl_a", minimum=0.0,
        container=right,
    )
    b = right.number_input("Power b [dimensionless]", min_value=0.0, max_value=5.0, step=0.05,
                           key="design.pl_b")
    reference = quantity_field(
        "Reference wavelength λ0 (with unit: 500 nm)", kind="wavelength",
        default=st.session_state.get("design.pl_ref", "500 nm"), key="design.pl_ref", minimum=0.0,
        container=left,
    )
    mua = number_list_field(
        f"μa [{st.session_state['design.table_unit']}]: one value for every wavelength, or one "
        "per wavelength",
        default=st.session_state.get("design.pl_mua", "0.01"), key="design.pl_mua", name="μa",
        container=left,
    )
    st.caption("μs′(λ) = a (λ/λ0)^−b  (Jacques 2013, Phys Med Biol 58:R37, eq. 1)")
    if wavelength is None or a is None or reference is None or mua is None:
        return None
    if np.any(mua < 0):
        left.error("μa: values must be >= 0")
        return None
    if mua.size == 1:
        mua = np.full(wavelength.size, mua[0])
    if mua.size != wavelength.size:
        left.error(f"μa: {mua.size} values for {wavelength.size} wavelengths; give one or one each")
        return None
    return {
        "wavelength_nm": wavelength.tolist(),
        "mua_per_mm": (mua * unit_factor).tolist(),
        "musp_power_law": {"a_per_mm": a, "b": float(b), "reference_nm": reference},
    }


def _spectrum_target() -> tuple[dict | None, Path | None]:
    upload = st.file_uploader(
        "Target spectrum (CSV: wavelength_nm,mua_per_mm,musp_per_mm[,g]; coefficients in 1/mm; "
        "an empty cell = not targeted there)",
        type=["csv"], key="design.spectrum_file",
    )
    if upload is None:
        st.info("Upload a target spectrum file to continue.")
        return None, None
    folder = Path(tempfile.mkdtemp(prefix="phantomlab-target-"))
    (folder / "target.csv").write_bytes(upload.getvalue())
    return {"spectrum_csv": "target.csv"}, folder


def _limits() -> dict:
    with st.expander("Lab limits"):
        c1, c2, c3 = st.columns(3)
        min_ul = c1.number_input("Smallest volume to pipette [µL]", min_value=0.1, step=1.0,
                                 key="design.lim_min_ul")
        pipette = c1.number_input("Pipette error, 1 SD [% of volume]", min_value=0.0,
                                  max_value=50.0, step=0.1, key="design.lim_pipette_pct")
        balance = c2.number_input("Balance resolution [mg]", min_value=0.001, step=0.1,
                                  key="design.lim_balance_mg")
        solids = c2.number_input("Largest particle volume fraction [% v/v]", min_value=0.01,
                                 max_value=100.0, step=0.5, key="design.lim_solids_pct")
        steps = c3.number_input("Most pre-dilution steps [count]", min_value=0, max_value=10,
                                step=1, key="design.lim_steps")
        dead = c3.number_input("Dead volume in vessels and tubing [mL]", min_value=0.0,
                               step=0.05, key="design.lim_dead_ml")
    return {
        **st.session_state.get("design.extra_limits", {}),
        "min_dispense_ul": float(min_ul),
        "pipette_rel_error": float(pipette) / 100.0,
        "balance_resolution_mg": float(balance),
        "max_solids_volume_fraction": float(solids) / 100.0,
        "max_dilution_steps": int(steps),
        "dead_volume_ml": float(dead),
    }


def _definition(workspace: Workspace, shelf) -> tuple[dict | None, Path]:
    """The recipe definition the fields describe (None when a field is refused)."""
    ok = True
    name = st.text_input("Recipe name", key="design.name")
    if not name.strip():
        st.error("Recipe name: give the phantom a name.")
        ok = False
    matrices = list(shelf.of_kind("matrix"))
    if st.session_state.get("design.matrix") not in matrices:
        st.session_state["design.matrix"] = matrices[0] if matrices else None
    others = [k for k in shelf.keys() if shelf[k].kind != "matrix"]
    st.session_state["design.stocks"] = [k for k in st.session_state.get("design.stocks", []) if k in others]
    left, middle, right = st.columns([2, 1, 2])
    matrix = left.selectbox("Matrix", matrices, key="design.matrix",
                            format_func=lambda k: _stock_label(shelf, k))
    size_by = middle.radio("Batch size by", ["volume", "mass"], horizontal=True, key="design.size_by",
                           help="Silicone and resin batches are weighed: give a mass.")
    size = quantity_field(
        "Batch volume (with unit: 500 mL, 0.25 L)" if size_by == "volume"
        else "Batch mass (with unit: 200 g, 0.5 kg)",
        kind="volume" if size_by == "volume" else "mass",
        default=st.session_state.get("design.size", "500 mL"), key="design.size", minimum=0.0,
        container=right,
    )
    ok = ok and size is not None
    stocks = st.multiselect("Stocks the solver may use", others, key="design.stocks",
                            format_func=lambda k: _stock_label(shelf, k))
    if not stocks:
        st.error("Stocks: choose at least one scatterer or absorber.")
        ok = False
    st.caption(_lots_caption(shelf, [matrix, *stocks] if matrix else stocks))

    st.subheader("Target")
    c1, c2, c3, c4 = st.columns([2, 1, 1, 1])
    shape = c1.radio("Give the target as", SHAPES, horizontal=True, key="design.shape")
    unit = c2.selectbox("Unit of the coefficients typed below", list(TABLE_UNITS),
                        key="design.table_unit")
    mua_tol = c3.number_input("μa tolerance [± %]", min_value=0.1, max_value=100.0, step=0.5,
                              key="design.mua_tol")
    musp_tol = c4.number_input("μs′ tolerance [± %]", min_value=0.1, max_value=100.0, step=0.5,
                               key="design.musp_tol")
    base_dir = workspace.recipes_folder
    if shape == SHAPES[0]:
        target = _points_target(TABLE_UNITS[unit])
    elif shape == SHAPES[1]:
        target = _power_law_target(TABLE_UNITS[unit])
    else:
        target, folder = _spectrum_target()
        if folder is not None:
            base_dir = folder
    extra_target = dict(st.session_state.get("design.extra_target", {}))
    if target is not None and shape != SHAPES[2] and extra_target:
        target.update(extra_target)
        if "g" in extra_target:
            pairs = ", ".join(f"{g:g} at {w:g} nm" for w, g in zip(extra_target.get("g_wavelength_nm", []),
                                                                    extra_target["g"]))
            st.caption(f"Anisotropy target from the recipe file: g = {pairs} (tolerance ±"
                       f"{extra_target.get('g_tolerance', 0.01):g}); the solver blends sphere stocks to meet it.")
    limits = _limits()
    if target is None or not ok:
        return None, base_dir
    target["mua_tolerance_percent"] = float(mua_tol)
    target["musp_tolerance_percent"] = float(musp_tol)
    definition = {
        "name": name.strip(),
        "version": st.session_state.get("design.source_version", "1"),
        "stocks_file": str(workspace.shelf_path),
        "matrix": matrix,
        "stocks": list(stocks),
        ("batch_volume_ml" if size_by == "volume" else "batch_mass_g"): float(size),
        "target": target,
        "limits": limits,
    }
    extra = dict(st.session_state.get("design.extra", {}))
    if st.session_state.get("design.extra_matrix") != matrix:
        extra.pop("preparation", None)  # the starting recipe's preparation was for its matrix
    definition.update(extra)
    return definition, base_dir


# ---- solving and showing -----------------------------------------------------------------------


def _same_as_file(definition: dict, path: Path) -> bool:
    """Whether the fields describe the recipe file unchanged (then the file itself is used)."""
    from phantomlab.recipe.limits import parse_limits  # layer 3
    from phantomlab.recipe.targets import parse_target

    try:
        original = _read_recipe_definition(path)
        for key in ("name", "matrix", "stocks", "batch_volume_ml", "batch_mass_g"):
            if definition.get(key) != original.get(key):
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
        recipe = parse_recipe(tomllib.loads(raw.decode("utf-8")), base_dir=path.parent, path=path, raw=raw,
                              shelf=_shelf)
    else:
        definition = json.loads(definition_json)
        recipe = parse_recipe(definition, base_dir=Path(base_dir), shelf=_shelf)
    potencies = {k: tuple(v) for k, v in json.loads(potencies_json).items()} or None
    return solve(recipe, potencies=potencies)


def _doses_table(plan) -> pd.DataFrame:
    rows = []
    for dose in plan.doses:
        if dose.dilution is not None and dose.dilution.steps:
            steps = "; ".join(
                f"{s.label}: {s.source_amount:.4g} {dose.dilution.unit} {s.source} + "
                f"{s.diluent_amount:.4g} {dose.dilution.unit} {dose.dilution.diluent}"
                for s in dose.dilution.steps
            )
            source = dose.dilution.dispense_from
        else:
            steps, source = "", f"{dose.stock} stock"
        rows.append({
            "stock": dose.stock,
            "dispense": (f"{dose.dispense_amount:.4g} {dose.unit} ± {dose.tolerance:.2g} of {source}"
                         if dose.used else "not used"),
            "pre-dilution": steps,
            "volume fraction [% v/v]": 100.0 * dose.volume_fraction,
            "stock volume [mL]": dose.volume_ml,
            "stock mass [g]": dose.mass_g,
            "lot": dose.lot,
            "expiry": dose.expiry.isoformat() if dose.expiry else "",
            "potency": f"{dose.potency:.3g} ± {dose.potency_sd:.2g} ({dose.potency_source})",
        })
    return pd.DataFrame(rows)


def _matrix_table(plan) -> pd.DataFrame:
    return pd.DataFrame(
        [{"what to measure": label, "amount": f"{amount:.4g} {unit}",
          "tolerance": f"± {tolerance:.2g} {unit}"} for label, amount, unit, tolerance in plan.matrix.parts]
    )


def _spectrum_plots(plan) -> None:
    target = plan.target
    dense = plan.curve if plan.curve is not None else plan.predicted
    at_points = plan.predicted
    columns = st.columns(2)
    for column, quantity, symbol in ((columns[0], "mua", "μa"), (columns[1], "musp", "μs′")):
        wanted = getattr(target, f"{quantity}_per_mm")
        series = [
            Series(f"predicted {symbol}", dense.wavelength_nm, getattr(dense, f"{quantity}_per_mm"),
                   sd=getattr(dense, f"{quantity}_sd_per_mm")),
        ]
        if at_points.wavelength_nm.size <= MARKED_POINTS:
            series.append(Series("predicted at target wavelengths", at_points.wavelength_nm,
                                 getattr(at_points, f"{quantity}_per_mm"), mode="markers"))
        has = np.isfinite(wanted)
        if np.any(has) and np.count_nonzero(has) > MARKED_POINTS:
            series.append(Series(f"target {symbol}", target.wavelength_nm[has], wanted[has], dash="dash",
                                 colour="#000000"))
        elif np.any(has):
            series.append(target_series(f"target {symbol}", target.wavelength_nm[has], wanted[has]))
        figure = line_figure(series, x_label="wavelength [nm]", y_label=f"{symbol} [1/mm]",
                             title=f"{symbol}: predicted against target")
        table = pd.DataFrame({
            "wavelength_nm": at_points.wavelength_nm,
            f"target_{quantity}_per_mm": wanted,
            f"predicted_{quantity}_per_mm": getattr(at_points, f"{quantity}_per_mm"),
            f"predicted_{quantity}_sd_per_mm": getattr(at_points, f"{quantity}_sd_per_mm"),
        })
        with column:
            show_figure(figure, table=table, file_stem=f"predicted-{quantity}", key=f"design.{quantity}")


def _g_plot(plan) -> None:
    """g of the mix (scattering model) against the g target, where the recipe has one."""
    target = plan.target
    dense = plan.curve if plan.curve is not None else plan.predicted
    has = np.isfinite(target.g)
    figure = line_figure(
        [Series("g of the mix (scattering model, not a measurement)", dense.wavelength_nm, dense.g),
         target_series("target g", target.wavelength_nm[has], target.g[has])],
        x_label="wavelength [nm]", y_label="g [dimensionless]", title="Anisotropy g: predicted against target",
    )
    table = pd.DataFrame({"wavelength_nm": plan.predicted.wavelength_nm, "target_g": target.g,
                          "predicted_g": plan.predicted.g})
    show_figure(figure, table=table, file_stem="predicted-g", key="design.g")


def _residual_plot(plan) -> None:
    residuals = plan.residuals
    wavelength = np.asarray(residuals["wavelength_nm"], dtype=float)
    mua = 100.0 * np.asarray(residuals["mua_relative"], dtype=float)
    musp = 100.0 * np.asarray(residuals["musp_relative"], dtype=float)
    bars = {}
    if np.any(np.isfinite(mua)):
        bars["μa"] = mua
    if np.any(np.isfinite(musp)):
        bars["μs′"] = musp
    tolerances = {"μa": 100.0 * plan.target.mua_tolerance, "μs′": 100.0 * plan.target.musp_tolerance}
    figure = bar_figure(wavelength, bars, x_label="wavelength [nm]",
                        y_label="predicted / target − 1 [%]",
                        title="Residual per wavelength", bands={k: tolerances[k] for k in bars})
    table = pd.DataFrame({"wavelength_nm": wavelength, "mua_residual_percent": mua,
                          "musp_residual_percent": musp})
    show_figure(figure, table=table, file_stem="residual-per-wavelength", key="design.residual")


def _sheet_downloads(plan, *, batch_id: str | None, key: str) -> None:
    from phantomlab.recipe.sheet import render_sheet_csv, render_sheet_html  # layer 3

    stem = f"sheet-{batch_id}" if batch_id else "sheet-draft"
    html = call_layer("Rendering the sheet", render_sheet_html, plan, batch_id=batch_id,
                      draft=batch_id is None)
    csv = call_layer("Rendering the sheet CSV", render_sheet_csv, plan, batch_id=batch_id,
                     draft=batch_id is None)
    left, right = st.columns(2)
    if html.ok:
        left.download_button(
            "Download the mixing sheet (HTML)" if batch_id is None
            else f"Download the sheet of batch {batch_id} (HTML)",
            data=html.value.encode("utf-8"), file_name=f"{stem}.html", mime="text/html",
            key=f"{key}.html", on_click="ignore",
        )
    if csv.ok:
        right.download_button(
            "Download the mixing sheet (CSV)" if batch_id is None
            else f"Download the sheet of batch {batch_id} (CSV)",
            data=csv.value.encode("utf-8"), file_name=f"{stem}.csv", mime="text/csv",
            key=f"{key}.csv", on_click="ignore",
        )


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


def _save_batch(workspace: Workspace, store, plan, potencies: dict, origin: dict, *, definition: dict,
                base_dir: Path, source: str, token: str) -> None:
    from phantomlab.ui.recording import record_planned_batch, saved_batch_sheets, write_page_recipe

    with st.form("design.save_form", border=True):
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
            potencies=potencies, origin=origin, operator=operator.strip() or None,
            notes=notes.strip() or None,
        )
        if outcome.ok:
            sheets = call_layer("Reading the stored sheet", saved_batch_sheets, store, plan, outcome.value)
            st.session_state["design.saved_batch"] = {**(sheets.value or {"code": outcome.value}),
                                                      "token": token}
    saved = st.session_state.get("design.saved_batch")
    if saved and saved.get("token") == token:  # only while the fields still describe that batch
        st.success(f"Saved as batch **{saved['code']}** (status: planned). Record what you dispense on "
                   "the page *Batch log*.")
        saved_sheet_downloads(saved, key="design.saved_sheet")


def saved_sheet_downloads(saved: dict, *, key: str) -> None:
    """Downloads of a saved batch's sheet: the HTML as stored in the batch log, and its CSV."""
    code = saved["code"]
    left, right = st.columns(2)
    if saved.get("html"):
        left.download_button(f"Download the sheet of batch {code} (HTML)", data=saved["html"].encode("utf-8"),
                             file_name=f"sheet-{code}.html", mime="text/html", key=f"{key}.html",
                             on_click="ignore")
    if saved.get("csv"):
        right.download_button(f"Download the sheet of batch {code} (CSV)", data=saved["csv"].encode("utf-8"),
                              file_name=f"sheet-{code}.csv", mime="text/csv", key=f"{key}.csv",
                              on_click="ignore")


def show(workspace: Workspace) -> None:
    st.header(TITLE)
    st.caption("Pick stocks from the shelf, give the target optics, and get the amounts to mix.")
    store = services.store_for(workspace)
    loaded = call_layer("Reading the shelf", services.load_page_shelf, workspace, store)
    if not loaded.ok:
        return
    shelf, origin = loaded.value

    files = [p.name for p in services.recipe_files(workspace)]
    choices = files + [NEW_RECIPE]
    if "design.started_from" not in st.session_state:
        from phantomlab.ui.demo import DEMO_RECIPE

        first = DEMO_RECIPE if DEMO_RECIPE in files else (files[0] if files else NEW_RECIPE)
        started = call_layer("Reading the recipe", _apply_start, workspace, shelf, first)
        if not started.ok:
            _apply_start(workspace, shelf, NEW_RECIPE)
        st.session_state["design.start"] = st.session_state["design.started_from"]

    def restart() -> None:
        call_layer("Reading the recipe", _apply_start, workspace, shelf, st.session_state["design.start"])

    names = {}
    for choice in files:
        try:
            names[choice] = str(_read_recipe_definition(workspace.recipes_folder / choice).get("name", ""))
        except InputError:
            names[choice] = ""
    st.selectbox("Start from", choices, key="design.start", on_change=restart,
                 format_func=lambda c: f"{names[c]} — {c}" if names.get(c) else c,
                 help="A recipe file fills in the fields below; change any of them.")
    definition, base_dir = _definition(workspace, shelf)
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
    with st.spinner("Solving the doses…"):
        solved = call_layer(
            "Solving the recipe", _solved, token, str(base_dir), source, shelf,
            str(id(shelf)), json.dumps(potencies, sort_keys=True), show=False,
        )
    if not solved.ok:
        st.error(solved.error)
        return
    plan = solved.value

    st.subheader("Predicted against target")
    if plan.binding_limits:
        lines = "\n".join(f"- {b.message}" for b in plan.binding_limits)
        st.error(f"**The target cannot be met.** The plan below is the closest feasible recipe.\n\n{lines}")
    others = [w for w in plan.warnings if w not in {b.message for b in plan.binding_limits}
              and w != "closest feasible recipe given"]
    show_warnings(others)
    met = plan.residuals
    summary = []
    for label, key in (("μa", "mua_met"), ("μs′", "musp_met")) + ((("g", "g_met"),) if plan.target.has_g else ()):
        summary.append(f"{label} {'within' if met.get(key) else 'outside'} tolerance")
    st.markdown(" · ".join(summary) + f" · batch {plan.batch_volume_ml:.4g} mL, {plan.batch_mass_g:.4g} g")
    _spectrum_plots(plan)
    if plan.target.has_g:
        _g_plot(plan)
    _residual_plot(plan)

    st.subheader("Amounts")
    st.dataframe(_doses_table(plan), hide_index=True, width="stretch")
    st.markdown("**Matrix**")
    st.dataframe(_matrix_table(plan), hide_index=True, width="stretch")

    used = [plan.recipe.matrix] + [plan.recipe.stock(d.stock) for d in plan.doses if d.used]
    show_cautions(used, preparation_kind=plan.recipe.preparation.kind)

    st.subheader("Mixing sheet")
    _sheet_downloads(plan, batch_id=None, key="design.sheet")
    _sheet_preview(plan)
    _recipe_download(definition, source)
    _save_batch(workspace, store, plan, potencies, origin, definition=definition, base_dir=base_dir,
                source=source, token=token + json.dumps(potencies, sort_keys=True))
