"""The fields of "Design a phantom" (layer 5): what a person types, read into a recipe definition.

:func:`read_fields` draws the matrix, stocks, batch size, target (points, power law for μs′
or an uploaded spectrum), tolerances and lab limits, refuses bad input next to its field,
and returns the recipe definition (the TOML table of docs/formats.md) or None.
:func:`apply_start` fills the fields from a recipe file.  No physics here: the recipe layer
parses and solves the definition.
"""

from __future__ import annotations

import hashlib
import tempfile
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.errors import InputError
from phantomlab.ui.plain_text import plain
from phantomlab.ui.so2_design import oxygenation_defaults, oxygenation_fields
from phantomlab.ui.widgets import number_list_field, quantity_field
from phantomlab.ui.workspace import Workspace

__all__ = ["NEW_RECIPE", "SHAPES", "apply_start", "read_fields", "read_recipe_definition"]

NEW_RECIPE = "(a new recipe)"
SHAPES = ("Points", "Power law for μs′", "Spectrum file")
TABLE_UNITS = {"1/mm": 1.0, "1/cm": 0.1}
POINT_COLUMNS = ("wavelength [nm]", "μa", "μs′")
#: Target fields the page has no field for; kept from the starting recipe as they are.
EXTRA_TARGET_KEYS = ("g_wavelength_nm", "g", "g_tolerance", "mua_weight", "musp_weight", "g_weight")
#: Limits the page has fields for; any other limit of the starting recipe is kept as it is.
SHOWN_LIMITS = ("min_dispense_ul", "pipette_rel_error", "balance_resolution_mg",
                "max_solids_volume_fraction", "max_dilution_steps", "dead_volume_ml")


#: The recipe's dependent-scattering choices (recipe key ``dependent_scattering``) as the page names them.
DEPENDENT_LABELS = {
    "none": "none: independent scattering (doses add linearly)",
    "percus_yevick": "Percus–Yevick packing factor of the particle volume fraction",
    "percus_yevick_angular": "Percus–Yevick structure factor over the Mie angles (sphere stocks)",
}


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
    values["design.dependent"] = str(definition.get("dependent_scattering", "none"))
    values["design.extra"] = {
        k: definition[k] for k in ("preparation", "notes", "series") if k in definition
    }
    values.update(oxygenation_defaults(definition))
    values["design.extra_matrix"] = definition.get("matrix")
    values["design.source_version"] = str(definition.get("version", "1"))
    values["design.editor_version"] = st.session_state.get("design.editor_version", 0) + 1
    return values


def read_recipe_definition(path: Path) -> dict:
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except (OSError, tomllib.TOMLDecodeError) as exc:
        raise InputError(f"cannot read recipe {path.name}: {exc}") from None


def apply_start(workspace: Workspace, shelf, choice: str) -> None:
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
        definition = read_recipe_definition(workspace.recipes_folder / choice)
    st.session_state.pop("design.points_current", None)  # the old recipe's table must not come back
    for key, value in _defaults_from(definition, shelf).items():
        st.session_state[key] = value
    st.session_state["design.started_from"] = choice


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
    # one folder per content, written once: the same upload gives the same folder on every run
    # (so the solve and its figures are reused), a new content a new folder
    content = upload.getvalue()
    folder = Path(tempfile.gettempdir()) / f"phantomlab-target-{hashlib.sha256(content).hexdigest()[:20]}"
    written = folder / "target.csv"
    if not (written.is_file() and written.read_bytes() == content):
        folder.mkdir(mode=0o700, exist_ok=True)
        from phantomlab.outputs import write_bytes_atomically

        write_bytes_atomically(folder / "target.csv", content, what="target spectrum")
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
        if st.session_state.get("design.dependent") not in DEPENDENT_LABELS:
            st.session_state["design.dependent"] = "none"
        st.selectbox("Dense scatterers (dependent scattering)", list(DEPENDENT_LABELS), key="design.dependent",
                     format_func=DEPENDENT_LABELS.get,
                     help="Above about 10 % v/v of particles or emulsion, scattering no longer adds linearly; "
                          "the Percus–Yevick corrections lower the predicted scattering accordingly. The plan "
                          "warns above that range whichever you choose.")
    return {
        **st.session_state.get("design.extra_limits", {}),
        "min_dispense_ul": float(min_ul),
        "pipette_rel_error": float(pipette) / 100.0,
        "balance_resolution_mg": float(balance),
        "max_solids_volume_fraction": float(solids) / 100.0,
        "max_dilution_steps": int(steps),
        "dead_volume_ml": float(dead),
    }


def read_fields(workspace: Workspace, shelf) -> tuple[dict | None, Path]:
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
    st.caption(plain(_lots_caption(shelf, [matrix, *stocks] if matrix else stocks)))

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
    oxygenation = oxygenation_fields(shelf, stocks)
    limits = _limits()
    if target is None or not ok or oxygenation is None:
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
    if st.session_state.get("design.dependent", "none") != "none":
        definition["dependent_scattering"] = st.session_state["design.dependent"]
    if oxygenation:
        definition["oxygenation"] = oxygenation
    return definition, base_dir
