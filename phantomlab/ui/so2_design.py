"""Design by sO₂ on "Design a phantom" (layer 5): the oxygenation fields and the series plot.

When the chosen stocks include a blood stock, :func:`oxygenation_fields` asks for the total
haemoglobin in the final mix [µM], the sO₂ levels of the planned series [%] and the
deoxygenation method, and returns the recipe's ``[oxygenation]`` table (the recipe layer
checks it: an sO₂ outside 0–100 % is refused next to the field).  :func:`so2_series_plot`
shows the predicted μa at every level with the isosbestic points marked.  No formula here.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui.plain_text import plain
from phantomlab.ui.plots import Series, line_figure, show_figure
from phantomlab.ui.widgets import number_list_field

__all__ = ["KEEP", "oxygenation_defaults", "oxygenation_fields", "so2_series_plot"]

KEEP = ("design.ox_thb", "design.ox_levels", "design.ox_method")
METHODS = ("yeast", "nitrogen", "none")


def oxygenation_defaults(definition: dict) -> dict:
    """Session-state values of the oxygenation fields from a recipe definition."""
    table = definition.get("oxygenation") or {}
    if "so2_levels_percent" in table:
        levels = [float(v) for v in table["so2_levels_percent"]]
    elif "so2_levels" in table:
        levels = [100.0 * float(v) for v in table["so2_levels"]]
    else:
        levels = [100.0, 75.0, 50.0, 25.0, 0.0]
    return {
        "design.ox_thb": str(table.get("thb_um", 30)),
        "design.ox_levels": ",".join(f"{v:g}" for v in levels),
        "design.ox_method": table.get("deoxygenation", "yeast") if table.get("deoxygenation", "yeast") in METHODS else "none",
    }


def oxygenation_fields(shelf, stocks) -> dict | None:
    """The ``[oxygenation]`` table the fields describe; {} without a blood stock, None when refused."""
    blood = [k for k in stocks if shelf[k].kind == "blood"]
    if not blood:
        return {}
    st.subheader("Oxygenation (blood stock)")
    st.caption("The blood dose is fixed by the total haemoglobin you want in the batch; the μa of every "
               "sO₂ level of the series is predicted below. sO₂ belongs to the batch at a moment, not to the stock.")
    c1, c2, c3 = st.columns([1, 2, 1])
    for key, value in oxygenation_defaults({}).items():
        st.session_state.setdefault(key, value)
    text = c1.text_input("Total haemoglobin in the batch [µM, tetramer]", key="design.ox_thb")
    ok = True
    try:
        thb = float(text)
        if not 0 < thb <= 5000:
            raise ValueError
    except ValueError:
        c1.error("Total haemoglobin: not a number in (0, 5000] µM (tetramer, 64 500 g/mol)")
        ok = False
    levels = number_list_field("sO₂ levels of the series [%] (first: where μa is planned)", default="100,75,50,25,0",
                               key="design.ox_levels", name="sO2 levels", container=c2)
    if levels is not None and (np.any(levels < 0) or np.any(levels > 100)):
        bad = levels[(levels < 0) | (levels > 100)][0]
        c2.error(f"sO2 levels: {bad:g} % is outside 0-100 %")
        levels = None
    method = c3.selectbox("Deoxygenation", METHODS, key="design.ox_method")
    if not ok or levels is None:
        return None
    return {"thb_um": thb, "so2_levels_percent": [float(v) for v in levels], "deoxygenation": method,
            "blood_stock": blood[0]}


def so2_series_plot(plan) -> None:
    """μa at every planned sO₂ level, isosbestic points as dashed vertical lines."""
    from phantomlab.recipe.oxygenation import so2_series  # layer 3

    series = so2_series(plan)
    if series is None:
        return
    traces = [Series(f"μa at sO₂ {100 * level.so2:.0f} %", series.wavelength_nm, level.mua_per_mm,
                     sd=level.mua_sd_per_mm) for level in series.levels]
    figure = line_figure(traces, x_label="wavelength [nm]", y_label="μa [1/mm]",
                         title="Planned sO₂ series: μa at each level (isosbestic points dashed)")
    for point in series.isosbestic_nm:
        figure.add_vline(x=float(point), line_dash="dash", line_color="#777777",
                         annotation_text=f"isosbestic {point:.0f} nm", annotation_position="top")
    table = pd.DataFrame({"wavelength_nm": series.wavelength_nm,
                          **{f"mua_per_mm_at_so2_{100 * level.so2:g}": level.mua_per_mm for level in series.levels}})
    st.caption(f"{plain(series.blood_stock)}: {100 * series.blood_volume_fraction:.3g} % v/v = total haemoglobin "
               f"{series.thb_um:.3g} µM (tetramer; table {series.source}); isosbestic points in the band: "
               + (", ".join(f"{p:.0f}" for p in series.isosbestic_nm) or "none") + " nm.")
    show_figure(figure, table=table, file_stem="planned-so2-series", key="design.so2_series")
