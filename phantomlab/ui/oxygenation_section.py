"""Batch log page, one batch: its oxygenation series (layer 5).

Shows every stored series of the batch as fitted sO₂ (± 1 SD) over time with the reference
readings (blood-gas analyser, co-oximeter) as open markers, the reference-vs-fitted table and
total haemoglobin over time; and a form that records a new series through
:func:`phantomlab.oxygenation_workflow.record_oxygenation_series` (the command line's
``phantomlab oxygenation add``).  No formula lives here.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui.plain_text import plain
from phantomlab.ui.plots import Series, line_figure, show_figure
from phantomlab.ui.widgets import call_layer

__all__ = ["oxygenation_section", "comparison_table"]

DEMO_FILES = Path(__file__).resolve().parents[2] / "recipes" / "measurements"
REFERENCE_COLOUR = "#000000"


def _percent(value, digits: int = 1):
    return None if value is None else round(100.0 * float(value), digits)


def comparison_table(series: dict) -> pd.DataFrame:
    """Reference vs fitted sO₂ at each reading, in percent (0.1 %; SD 0.01 %)."""
    rows = []
    for row in series["comparison"]:
        rows.append({
            "time": row["measured_at"].replace("T", " "),
            "minutes": row["minutes"],
            "reference sO₂ [%]": _percent(row["reference_so2"]),
            "fitted sO₂ [%]": _percent(row["fitted_so2"]),
            "fitted SD [%]": _percent(row["fitted_so2_sd"], 2),
            "fitted − reference [%]": _percent(row["difference"]),
            "gap to nearest fit [min]": round(row["gap_min"], 1),
            "how": row["how"],
            "method": row["method"] or "",
        })
    return pd.DataFrame(rows)


def _figures(series: dict, key: str) -> None:
    points = series["points"]
    minutes = np.array([p["minutes"] for p in points], dtype=float)
    so2 = np.array([np.nan if p["so2"] is None else 100 * p["so2"] for p in points])
    so2_sd = np.array([np.nan if p["so2_sd"] is None else 100 * p["so2_sd"] for p in points])
    traces = [Series("fitted sO₂ (unmixed μa)", minutes, so2, sd=so2_sd, mode="lines+markers")]
    readings = series["comparison"]
    if readings:
        traces.append(Series("reference sO₂ (" + ", ".join(sorted({r["method"] or "reading" for r in readings})) + ")",
                             np.array([r["minutes"] for r in readings], dtype=float),
                             np.array([100 * r["reference_so2"] for r in readings]),
                             mode="markers", colour=REFERENCE_COLOUR, symbol="diamond-open"))
    start = points[0]["measured_at"].replace("T", " ")[:16]
    figure = line_figure(traces, x_label=f"time since {start} [min]", y_label="sO₂ [%]",
                         title="Fitted vs reference sO₂ over time")
    table = pd.DataFrame({"minutes": minutes, "fitted_so2_percent": so2, "fitted_so2_sd_percent": so2_sd})
    if readings:
        references = pd.DataFrame({"minutes": [r["minutes"] for r in readings],
                                   "reference_so2_percent": [100 * r["reference_so2"] for r in readings]})
        table = pd.concat([table, references], ignore_index=True).sort_values("minutes")
    show_figure(figure, table=table, file_stem=f"{series['name']}-so2", key=f"{key}.so2")
    thb = np.array([p["thb_um"] for p in points], dtype=float)
    thb_sd = np.array([np.nan if p["thb_sd_um"] is None else p["thb_sd_um"] for p in points])
    figure = line_figure([Series("total haemoglobin (tetramer)", minutes, thb, sd=thb_sd, mode="lines+markers")],
                         x_label=f"time since {start} [min]", y_label="total haemoglobin [µM]",
                         title="Total haemoglobin over time", height=260)
    show_figure(figure, table=pd.DataFrame({"minutes": minutes, "thb_um": thb, "thb_sd_um": thb_sd}),
                file_stem=f"{series['name']}-thb", key=f"{key}.thb")


def _stored(store, code: str) -> None:
    from phantomlab.oxygenation_workflow import oxygenation_of

    loaded = call_layer("Reading the oxygenation series", oxygenation_of, store, code)
    if not loaded.ok:
        return
    if not loaded.value:
        st.caption("No oxygenation series recorded for this batch yet.")
        return
    names = [f"{s['name']} (recorded {s['recorded_at'][:16].replace('T', ' ')} UTC)" for s in loaded.value]
    chosen = st.selectbox("Series", names, index=len(names) - 1, key=f"oxygenation.series.{code}")
    series = loaded.value[names.index(chosen)]
    files = series["series_file_name"] + (f", {series['readings_file_name']}" if series["readings_file_name"] else "")
    st.caption(f"{len(series['points'])} time points unmixed into {', '.join(series['chromophores'])} with the "
               f"{series['source']} haemoglobin table"
               + ("" if series.get("water_temperature_c") is None else f", water at {series['water_temperature_c']:g} °C")
               + f"; {len(series['readings'])} reference readings (files {plain(files)}).")
    _figures(series, key=f"oxygenation.{code}.{series['series_id']}")
    st.markdown("**Reference vs fitted sO₂** (fitted value interpolated in time to each reading)")
    if series["comparison"]:
        st.dataframe(comparison_table(series), hide_index=True, width="stretch")
    else:
        st.caption("No reference readings with this series.")
    for point in series["points"]:
        for message in point["warnings"]:
            st.warning(plain(f"{point['measured_at'].replace('T', ' ')}: {message}"))


def _record_form(workspace, store, batch: dict) -> None:
    from phantomlab.materials.haemoglobin import DEFAULT_HAEMOGLOBIN_SOURCE, HAEMOGLOBIN_SOURCES
    from phantomlab.oxygenation_workflow import record_oxygenation_series

    code = batch["code"]
    st.markdown("**Record an oxygenation series** — μa spectra over time "
                "(`measured_at,wavelength_nm,mua_per_mm[,mua_sd_per_mm]`) and, beside them, reference sO₂ "
                "readings (`measured_at,reference_so2` as a fraction or `reference_so2_percent`, "
                "`[method][,instrument]`); every reading needs its time. Water absorbs at the measuring "
                "temperature of the batch's recipe.")
    if batch["retracted"]:
        st.caption("The batch is retracted: a series cannot be recorded.")
        return
    if workspace.is_demo:
        c1, c2 = st.columns(2)
        for column, name, label in ((c1, "demo-oximeter-series.csv", "series"),
                                    (c2, "demo-oximeter-references.csv", "reference readings")):
            column.download_button(f"Demo only: download the invented {label} (CSV)",
                                   data=(DEMO_FILES / name).read_bytes(), file_name=name, mime="text/csv",
                                   key=f"oxygenation.demo.{label}", on_click="ignore")
    with st.form(f"oxygenation.record.{code}", clear_on_submit=True):
        series_file = st.file_uploader("Series file: μa over time (CSV)", type=["csv"], key="oxygenation.file")
        readings_file = st.file_uploader("Reference sO₂ readings (CSV, optional)", type=["csv"],
                                         key="oxygenation.readings")
        c1, c2, c3 = st.columns(3)
        extra = c1.multiselect("Besides HbO₂ and Hb, unmix", ["water", "lipid"], default=["water"],
                               key="oxygenation.extra")
        source = c2.selectbox("Haemoglobin table", list(HAEMOGLOBIN_SOURCES),
                              index=list(HAEMOGLOBIN_SOURCES).index(DEFAULT_HAEMOGLOBIN_SOURCE),
                              key="oxygenation.source")
        name = c3.text_input("Name of the series", key="oxygenation.name",
                             placeholder="default: the file's name")
        pressed = st.form_submit_button("Unmix and record", type="primary")
    if not pressed:
        return
    if series_file is None:
        st.error("Series file: choose a CSV file first.")
        return
    outcome = call_layer(
        "Recording the oxygenation series", record_oxygenation_series, store, code,
        name=name.strip() or Path(series_file.name).stem, series_file_name=series_file.name,
        series_content=series_file.getvalue(), chromophores=["hbo2", "hb", *extra], source=source,
        readings_file_name=None if readings_file is None else readings_file.name,
        readings_content=None if readings_file is None else readings_file.getvalue(),
    )
    if outcome.ok:
        recorded = outcome.value
        st.session_state["batches.notice"] = plain(
            f"Oxygenation series {recorded.name!r} recorded with batch {code}: "
            f"{len(recorded.computation.points)} time points, {len(recorded.computation.readings)} reference readings."
        )
        st.rerun()


def oxygenation_section(workspace, store, batch: dict) -> None:
    """The oxygenation series of one batch: plots, reference-vs-fitted table, and the record form."""
    _stored(store, batch["code"])
    _record_form(workspace, store, batch)
