"""Page "Stock shelf": stocks and lots, new stocks from cuvette readings, edits, stock optics.

Flows:

* the list of stocks and lots with expiry, the stock file's potency and the calibrated one;
* a new absorber stock from cuvette absorbance files of a dilution series: the fitted
  intrinsic spectrum with its SD, the linearity check per wavelength, then "add to the
  shelf" (a stock-lot record in the batch log);
* edit a stock's lot, expiry, potency prior or hazards: a new version of its record;
* the intrinsic optics (μa, μs′, g per volume fraction) of any stock, plotted.

The fits and the optics are the materials and optics layers' own; the page reads the files
and shows the results.
"""

from __future__ import annotations

import datetime as _dt
import hashlib
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.errors import InputError
from phantomlab.ui import services
from phantomlab.ui.plain_text import code_span, plain
from phantomlab.ui.bench_record import by_field, remember_by
from phantomlab.ui.plots import Chart, Series, line_figure, show_chart, show_figure
from phantomlab.ui.widgets import call_layer, number_list_field, quantity_field
from phantomlab.ui.workspace import Workspace

__all__ = ["show"]

TITLE = "Stock shelf"
CUVETTE_REQUIRED = ("wavelength_nm", "absorbance")
CUVETTE_OPTIONAL = ("stock_volume_fraction",)


# ---- the list -----------------------------------------------------------------------------------


def _shelf_table(shelf, origin: dict, calibrated: dict) -> pd.DataFrame:
    today = _dt.date.today()
    rows = []
    for key, stock in shelf.items():
        if stock.expiry is None:
            expiry = "none given"
        else:
            days = (stock.expiry - today).days
            expiry = stock.expiry.isoformat() + (" EXPIRED" if days < 0 else f" ({days} d left)" if days <= 60 else "")
        found = calibrated.get(key)
        rows.append({  # narrow enough for a laptop screen: short headers, one column per fact
            "stock": key,
            "kind": stock.kind,
            "lot": stock.lot or "",
            "expiry": expiry,
            "potency (file)": f"{stock.potency:.3g} ± {stock.potency_sd:.2g}",
            "calibrated": f"{found[0]:.3g} ± {found[1]:.2g}" if found else "—",
            "hazards": ", ".join(stock.hazards),
            "defined in": origin.get(key, "stock file"),
        })
    return pd.DataFrame(rows)


# ---- intrinsic optics ---------------------------------------------------------------------------


@st.cache_resource(show_spinner=False, max_entries=32)
def _intrinsic(_stock, _matrix, token: str, wavelength: tuple, so2: float | None = None):
    from phantomlab.optics import intrinsic_optics  # layer 2

    return intrinsic_optics(_stock, wavelength_nm=np.asarray(wavelength), matrix=_matrix, so2=so2)


def _optics_section(shelf) -> None:
    st.subheader("Intrinsic optics of a stock")
    st.caption("Per volume fraction of the undiluted stock in the final mix: a stock dosed at "
               "1 % v/v adds 0.01 × these values.")
    keys = list(shelf.keys())
    matrices = list(shelf.of_kind("matrix"))
    c1, c2, c3 = st.columns(3)
    first = next((i for i, k in enumerate(keys) if shelf[k].kind != "matrix"), 0)
    key = c1.selectbox("Stock", keys, index=first, key="shelf.optics_stock")
    matrix_key = c2.selectbox("In the matrix", matrices, key="shelf.optics_matrix",
                              help="Its refractive index sets the Mie relative index.")
    wavelength = number_list_field("Wavelengths [nm] (400:1000:10 or 650,750,850)",
                                   default="600:1000:10", key="shelf.optics_wavelengths",
                                   name="wavelengths", positive=True, container=c3)
    if wavelength is None or key is None or matrix_key is None:
        return
    stock, matrix = shelf[key], shelf[matrix_key]
    so2 = None
    if stock.kind == "blood":  # its absorption depends on the sO2 of the moment, not on the stock
        so2 = st.number_input("sO₂ of the blood at that moment [%]", min_value=0.0, max_value=100.0, value=100.0,
                              step=5.0, key="shelf.optics_so2") / 100.0
    token = f"{key}|{stock.lot}|{hash(repr(stock.definition))}|{matrix_key}"
    with st.spinner(f"Computing the optics of {key}…"):
        found = call_layer(f"Optics of {key}", _intrinsic, stock, matrix, token, tuple(wavelength), so2)
    if not found.ok:
        return
    charts, g = _optics_charts(token, tuple(wavelength), so2, found.value, key)  # once per stock, grid, sO₂
    left, right = st.columns(2)
    with left:
        show_chart(charts[0])
    with right:
        if len(charts) > 1:
            show_chart(charts[1])
            st.caption(f"g (scattering model, not a measurement): {g.min():.3f} – {g.max():.3f}")
        else:
            st.info(f"{plain(key)} does not scatter (μs′ = 0).")


@st.cache_resource(show_spinner=False, max_entries=32)
def _optics_charts(token: str, wavelength: tuple, so2: float | None, _optics, key: str):
    """The intrinsic-optics charts of one stock on one grid at one sO₂ (the arguments of
    :func:`_intrinsic`), built once."""
    optics = _optics
    musp = np.asarray(optics.musp_per_mm, dtype=float)
    mua = np.asarray(optics.mua_per_mm, dtype=float)
    mua_sd = getattr(optics, "mua_sd_per_mm", None)
    table = pd.DataFrame({"wavelength_nm": optics.wavelength_nm, "mua_per_mm": mua,
                          "mus_per_mm": optics.mus_per_mm, "g": optics.g, "musp_per_mm": musp})
    figure = line_figure(
        [Series(f"{key} μa", optics.wavelength_nm, mua,
                sd=None if mua_sd is None or not np.any(mua_sd) else mua_sd)],
        x_label="wavelength [nm]", y_label="intrinsic μa [1/mm per volume fraction]",
        title=f"{key}: absorption", log_y=bool(np.all(mua > 0) and mua.max() / mua.min() > 100),
    )
    charts = [Chart(figure, table, f"{key}-intrinsic-optics", "shelf.optics_mua")]
    if np.any(musp > 0):
        figure = line_figure(
            [Series(f"{key} μs′", optics.wavelength_nm, musp)],
            x_label="wavelength [nm]", y_label="intrinsic μs′ [1/mm per volume fraction]",
            title=f"{key}: reduced scattering",
        )
        charts.append(Chart(figure, table, f"{key}-intrinsic-musp", "shelf.optics_musp"))
    return charts, np.asarray(optics.g, dtype=float)


# ---- cuvette dilution series --------------------------------------------------------------------


def _read_uploads(uploads) -> list[tuple[str, object]]:
    """Each uploaded cuvette file as (name, CsvTable), read by the materials layer's reader."""
    from phantomlab.materials.spectra import read_csv_table  # layer 1

    folder = Path(tempfile.mkdtemp(prefix="phantomlab-cuvette-"))
    tables = []
    for index, upload in enumerate(uploads):
        path = folder / f"{index:02d}-{Path(upload.name).name}"
        path.write_bytes(upload.getvalue())
        table = read_csv_table(path, required=CUVETTE_REQUIRED, optional=CUVETTE_OPTIONAL,
                               context=f"cuvette file {upload.name}")
        tables.append((upload.name, table))
    return tables


def _series_columns(tables, fractions: dict[str, float | None]):
    """The readings of all files as one dilution series (wavelength, fraction, absorbance)."""
    wavelength, fraction, absorbance = [], [], []
    for name, table in tables:
        columns = table.columns
        if "stock_volume_fraction" in columns:
            f = np.asarray(columns["stock_volume_fraction"], dtype=float)
        else:
            given = fractions.get(name)
            if given is None or not np.isfinite(given) or given <= 0:
                raise InputError(f"cuvette file {name}: give the stock's share of the cuvette sample "
                                 "(the file has no stock_volume_fraction column)")
            f = np.full(columns["wavelength_nm"].shape, given)
        wavelength.append(np.asarray(columns["wavelength_nm"], dtype=float))
        fraction.append(f)
        absorbance.append(np.asarray(columns["absorbance"], dtype=float))
    return np.concatenate(wavelength), np.concatenate(fraction), np.concatenate(absorbance)


def _series_csv(wavelength, fraction, absorbance, names) -> str:
    lines = [f"# source: cuvette readings imported on the page from {', '.join(names)}",
             "wavelength_nm,stock_volume_fraction,absorbance"]
    lines += [f"{w:.10g},{f:.10g},{a:.10g}" for w, f, a in zip(wavelength, fraction, absorbance)]
    return "\n".join(lines) + "\n"


def _cuvette_section(workspace: Workspace, store, shelf) -> None:
    from phantomlab.materials import HAZARD_KEYS, fit_dilution_series  # layer 1

    st.subheader("New absorber stock from cuvette readings")
    st.caption(
        "Upload blank-corrected base-10 absorbance of a dilution series, one path length: one file "
        "with columns wavelength_nm,stock_volume_fraction,absorbance, or one file per dilution with "
        "wavelength_nm,absorbance (give each file's stock share below). At least 3 dilutions."
    )
    uploads = st.file_uploader("Cuvette files (CSV)", type=["csv"], accept_multiple_files=True,
                               key="shelf.cuvette_files")
    path_mm = quantity_field("Cuvette path length (with unit: 10 mm, 1 cm)", kind="length",
                             default="10 mm", key="shelf.cuvette_path", minimum=0.0)
    if not uploads:
        return
    read = call_layer("Reading the cuvette files", _read_uploads, uploads)
    if not read.ok:
        return
    tables = read.value
    fractions: dict[str, float | None] = {}
    missing = [name for name, table in tables if "stock_volume_fraction" not in table.columns]
    if missing:
        edited = st.data_editor(
            pd.DataFrame({"file": missing, "stock in the cuvette sample [% v/v]": [np.nan] * len(missing)}),
            disabled=["file"], hide_index=True, key="shelf.cuvette_fractions",
        )
        for name, percent in zip(edited["file"], edited["stock in the cuvette sample [% v/v]"]):
            fractions[name] = None if pd.isna(percent) else float(percent) / 100.0
    if path_mm is None:
        return
    columns = call_layer("Collecting the dilution series", _series_columns, tables, fractions)
    if not columns.ok:
        return
    wavelength, fraction, absorbance = columns.value
    fitted = call_layer("Fitting the dilution series", fit_dilution_series, wavelength_nm=wavelength,
                        stock_volume_fraction=fraction, absorbance=absorbance, path_length_mm=path_mm)
    if not fitted.ok:
        return
    fit = fitted.value
    st.markdown(f"**Fitted intrinsic attenuation** from {len(fit.fractions)} dilutions "
                f"({', '.join(f'{100 * f:.3g} %' for f in fit.fractions)} v/v), path {path_mm:g} mm.")
    left, right = st.columns(2)
    table = pd.DataFrame({
        "wavelength_nm": fit.wavelength_nm, "intrinsic_per_mm": fit.coefficient_per_mm,
        "intrinsic_sd_per_mm": fit.coefficient_sd_per_mm,
        "nonlinearity_percent": 100.0 * fit.relative_nonlinearity, "nonlinear": fit.nonlinear,
    })
    with left:
        figure = line_figure(
            [Series("intrinsic μ (undiluted stock)", fit.wavelength_nm, fit.coefficient_per_mm,
                    sd=fit.coefficient_sd_per_mm)],
            x_label="wavelength [nm]", y_label="intrinsic attenuation [1/mm]",
            title="Fitted intrinsic spectrum ± 1 SD",
        )
        show_figure(figure, table=table, file_stem="cuvette-fit", key="shelf.cuvette_fit")
    with right:
        figure = line_figure(
            [Series("departure from a straight line", fit.wavelength_nm, 100.0 * fit.relative_nonlinearity)],
            x_label="wavelength [nm]", y_label="curvature at the strongest dilution [%]",
            title="Linearity check (Beer–Lambert)",
        )
        from phantomlab.materials.spectra import NONLINEARITY_THRESHOLD

        figure.add_hline(y=100 * NONLINEARITY_THRESHOLD, line_dash="dot", line_color="#b5462f",
                         annotation_text=f"flagged beyond ±{100 * NONLINEARITY_THRESHOLD:g} % (when significant)",
                         annotation_position="top left")
        figure.add_hline(y=-100 * NONLINEARITY_THRESHOLD, line_dash="dot", line_color="#b5462f")
        show_figure(figure, table=table, file_stem="cuvette-linearity", key="shelf.cuvette_linearity")
    if fit.any_nonlinear:
        st.warning(f"Beer–Lambert bends at {int(np.sum(fit.nonlinear))} of {fit.wavelength_nm.size} "
                   "wavelengths: dilute further or check for aggregation and stray light.")
    else:
        st.success("Linear within the check at every wavelength (no significant curvature).")

    with st.form("shelf.cuvette_add"):
        st.markdown("**Add it to the shelf** (a new stock-lot record in the batch log)")
        c1, c2, c3 = st.columns(3)
        key = c1.text_input("Stock key (short name, letters, digits, _)", key="shelf.new_key")
        lot = c2.text_input("Lot or bottle", key="shelf.new_lot")
        expiry = c3.date_input("Expiry date", value=None, key="shelf.new_expiry")
        potency_sd = c1.number_input("Potency SD prior [fraction, e.g. 0.1 for 10 %]", min_value=0.0,
                                     max_value=2.0, value=0.10, step=0.01, key="shelf.new_potency_sd")
        albedo = c2.number_input("Single-scattering albedo [0–1) (inks scatter, dyes: 0)",
                                 min_value=0.0, max_value=0.99, value=0.0, step=0.05, key="shelf.new_albedo")
        hazards = c3.multiselect("Hazards", list(HAZARD_KEYS), key="shelf.new_hazards")
        by = by_field("shelf.new_by", container=c1)
        pressed = st.form_submit_button("Add to the shelf", type="primary")
    if pressed:
        names = [name for name, _ in tables]
        definition = {
            "kind": "absorber",
            "cuvette_path_mm": float(path_mm),
            "potency": 1.0,
            "potency_sd": float(potency_sd),
            "lot": lot.strip(),
            "hazards": list(hazards),
        }
        if albedo > 0:
            definition["albedo"] = float(albedo)
        if expiry is not None:
            definition["expiry"] = expiry
        text = _series_csv(wavelength, fraction, absorbance, names)
        added = call_layer("Adding the stock", _add_stock, store, key.strip(), definition,
                           {"cuvette_csv": text}, recorded_by=by or None)
        if added.ok:
            remember_by(by)
            st.session_state["shelf.notice"] = (
                f"Stock **{key.strip()}** added to the shelf (record version {added.value}).")
            st.rerun()


def _add_stock(store, key: str, definition: dict, files: dict[str, str], *, recorded_by: str | None = None) -> int:
    """Check a stock definition with the stock parser and record it as a page stock."""
    import re

    from phantomlab.materials import parse_shelf  # layer 1
    from phantomlab.ui.recording import record_page_stock

    if not re.fullmatch(r"[A-Za-z][A-Za-z0-9_]*", key or ""):
        raise InputError(f"stock key {key!r} not accepted; use a letter then letters, digits or _")
    folder = services._cache_folder()
    table = dict(definition)
    for field_name, text in files.items():
        digest = hashlib.sha256(text.encode("utf-8")).hexdigest()[:16]
        path = folder / f"{key}-{field_name}-{digest}.csv"
        path.write_text(text, encoding="utf-8")
        table[field_name] = str(path)
    shelf = parse_shelf({"stocks": {key: table}}, base=folder)
    return record_page_stock(store, shelf[key], recorded_by=recorded_by)


# ---- edit a stock -----------------------------------------------------------------------------------


def _edit_section(workspace: Workspace, store, shelf) -> None:
    from phantomlab.materials import HAZARD_KEYS  # layer 1

    st.subheader("Edit a stock (a new version)")
    st.caption("A change is recorded as a new version of the stock's record; the old version "
               "stays in the batch log, and batches keep the version they were planned with. "
               "A new bottle of the same stock: give it a new lot.")
    keys = list(shelf.keys())
    key = st.selectbox("Stock to edit", keys, key="shelf.edit_stock")
    if key is None:
        return
    stock = shelf[key]
    with st.form(f"shelf.edit_form.{key}"):
        c1, c2, c3 = st.columns(3)
        lot = c1.text_input("Lot or bottle", value=stock.lot)
        expiry = c2.date_input("Expiry date", value=stock.expiry)
        potency = c3.number_input("Potency prior [factor]", min_value=0.01, value=float(stock.potency),
                                  step=0.01, format="%.3f")
        potency_sd = c1.number_input("Potency SD prior [factor]", min_value=0.0,
                                     value=float(stock.potency_sd), step=0.01, format="%.3f")
        hazards = c2.multiselect("Hazards", list(HAZARD_KEYS), default=list(stock.hazards))
        name = c3.text_input("Description", value=stock.name)
        by = by_field(f"shelf.edit_by.{key}", container=c1)
        pressed = st.form_submit_button("Record the new version", type="primary")
    if pressed:
        edited = call_layer("Recording the new version", _edit_stock, workspace, store, key,
                            lot=lot.strip(), expiry=expiry, potency=potency, potency_sd=potency_sd,
                            hazards=hazards, name=name.strip(), recorded_by=by or None)
        if edited.ok:
            remember_by(by)
            st.session_state["shelf.notice"] = f"Stock **{key}** recorded as version {edited.value}."
            st.rerun()


def _edit_stock(workspace: Workspace, store, key: str, *, recorded_by: str | None = None, **changes) -> int:
    from phantomlab.materials import parse_shelf  # layer 1
    from phantomlab.ui.recording import record_page_stock

    document, _origin = services.page_document(workspace, store)
    table = dict(document["stocks"][key])
    for field_name in ("lot", "potency", "potency_sd", "hazards", "name"):
        table[field_name] = changes[field_name]
    if not table["name"]:
        table.pop("name")
    if changes["expiry"] is None:
        table.pop("expiry", None)
    else:
        table["expiry"] = changes["expiry"]
    shelf = parse_shelf({"stocks": {key: table}}, base=workspace.shelf_path.parent)
    return record_page_stock(store, shelf[key], recorded_by=recorded_by)


def _export_section(workspace: Workspace, store, origin: dict) -> None:
    """Write the stock file with this page's stocks as one stock file the command line reads."""
    from phantomlab.shelf_export import export_shelf  # layer 5 workflow, shared with `stock export`

    added = sorted(key for key, where in origin.items() if where != "stock file")
    if not added:
        return
    folder = workspace.page_recipes_folder()
    target = folder / f"{workspace.shelf_path.stem}-with-page-stocks.toml"
    st.caption(f"Stocks from this page ({plain(', '.join(added))}) live in the batch log only; the command line "
               f"reads them from an exported stock file.")
    if st.button(f"Write them with the stock file to {target.name}", key="shelf.export"):
        folder.mkdir(parents=True, exist_ok=True)
        done = call_layer("Exporting the shelf", export_shelf, store, workspace.shelf_path, target, force=True)
        if done.ok:
            st.success(f"Wrote {done.value.path} ({len(done.value.stocks)} stocks, CSV files in "
                       f"{target.stem}-files/). Use it as any stock file: phantomlab plan RECIPE.toml with "
                       f"stocks_file = \"{target.name}\".")


def show(workspace: Workspace) -> None:
    st.header(TITLE)
    store = services.store_for(workspace)
    loaded = call_layer("Reading the shelf", services.load_page_shelf, workspace, store)
    if not loaded.ok:
        return
    shelf, origin = loaded.value
    notice = st.session_state.pop("shelf.notice", None)
    if notice:
        st.success(notice)
    st.caption(f"Stock file {code_span(workspace.shelf_path)} ({plain(shelf.name or 'no name')}), with the stocks "
               "added or edited on this page.")
    calibrated = call_layer("Reading the calibration", services.calibrated_potencies, store, shelf)
    table = _shelf_table(shelf, origin, calibrated.value or {})
    st.dataframe(table, hide_index=True, width="stretch", height=36 * (len(table) + 1) + 4)
    _export_section(workspace, store, origin)
    lists, new, edit = st.tabs(["Intrinsic optics", "New stock from cuvette readings", "Edit a stock"])
    with lists:
        _optics_section(shelf)
    with new:
        _cuvette_section(workspace, store, shelf)
    with edit:
        _edit_section(workspace, store, shelf)
