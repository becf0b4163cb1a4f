"""The figures of a solved plan (layer 5): predicted against target, g, residual per wavelength.

Built once per solve and kept (:func:`plan_charts`, keyed on what was solved): a rerun of
the page that changes nothing in the recipe draws the stored figures instead of building
them again, which was most of the cost of a rerun.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui.plots import Chart, Series, bar_figure, line_figure, target_series

__all__ = ["MARKED_POINTS", "plan_charts", "spectrum_charts", "g_chart", "residual_chart"]

#: Above this many target wavelengths, targets are drawn as a dashed line instead of circles.
MARKED_POINTS = 40


def spectrum_charts(plan, *, key_prefix: str = "design") -> list[Chart]:
    """μa and μs′ predicted (dense curve with its ±1 SD band) against the target."""
    target = plan.target
    dense = plan.curve if plan.curve is not None else plan.predicted
    at_points = plan.predicted
    charts = []
    for quantity, symbol in (("mua", "μa"), ("musp", "μs′")):
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
        charts.append(Chart(figure, table, f"predicted-{quantity}", f"{key_prefix}.{quantity}"))
    return charts


def g_chart(plan, *, key_prefix: str = "design") -> Chart:
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
    return Chart(figure, table, "predicted-g", f"{key_prefix}.g")


def residual_chart(plan, *, key_prefix: str = "design") -> Chart:
    """Predicted / target − 1 per wavelength [%], with the tolerances."""
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
    figure = bar_figure(wavelength, bars, x_label="wavelength [nm]", y_label="predicted / target − 1 [%]",
                        title="Residual per wavelength", bands={k: tolerances[k] for k in bars})
    table = pd.DataFrame({"wavelength_nm": wavelength, "mua_residual_percent": mua,
                          "musp_residual_percent": musp})
    return Chart(figure, table, "residual-per-wavelength", f"{key_prefix}.residual")


@st.cache_resource(show_spinner=False, max_entries=16)
def plan_charts(solve_key: str, _plan) -> dict[str, list[Chart]]:
    """Every chart of a plan, built once per ``solve_key`` (what was solved: fields, potencies).

    The figures are shared between reruns and sessions and never changed after building.
    """
    return {
        "spectra": spectrum_charts(_plan),
        "g": [g_chart(_plan)] if _plan.target.has_g else [],
        "residual": [residual_chart(_plan)],
    }
