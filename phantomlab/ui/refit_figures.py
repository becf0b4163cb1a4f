"""The figures of a fit on "Fit and correct" (layer 5), built once per fit.

* data and fitted model with the normalised residuals (srdr and sfdi: R against distance or
  spatial frequency at the wavelengths shown; slabs and sphere readings: R, T and the
  collimated transmittance measured against the model per wavelength);
* the fitted μa and μs′ with their SD against the batch's target;
* g fitted from the collimated transmittance, with its SD.

Each is a :class:`~phantomlab.ui.plots.Chart` kept (``st.cache_resource``) under the fit's
key (:func:`phantomlab.ui.refit_cache.fit_key`) with the wavelengths shown or the target:
a rerun shows them again without building them.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui.plots import COLOURS, Chart, Series, line_figure, target_series

__all__ = ["AXIS_LABELS", "data_charts", "result_charts"]

AXIS_LABELS = {"srdr": ("source–detector distance ρ [mm]", "reflectance R(ρ) [1/mm²]"),
               "sfdi": ("spatial frequency fx [1/mm]", "reflectance R(fx) [dimensionless]")}


def _forward(kind: str, model: str, dense, baseline, n, n_outside):
    if kind == "srdr":
        from phantomlab.calibration.fit_srdr import srdr_forward

        return srdr_forward(model=model, rho_mm=dense, n=n, n_outside=n_outside, baseline=baseline)
    from phantomlab.calibration.fit_sfdi import sfdi_forward

    return sfdi_forward(model=model, fx_per_mm=dense, n=n, n_outside=n_outside, baseline=baseline)


def data_charts(fit_key: str, shown_wavelengths, *, measurement, result, model: str, baseline):
    """(data and model, normalised residuals) charts; None for optics measured elsewhere.

    ``baseline``: the Monte Carlo baseline of an ``mc`` fit, or a list of one per wavelength
    (a band fitted per g step).
    """
    shown = tuple(float(w) for w in shown_wavelengths)
    return _data_charts(fit_key, shown, model, measurement, result, baseline)


@st.cache_resource(show_spinner=False, max_entries=16)
def _data_charts(fit_key: str, shown: tuple, model: str, _measurement, _result, _baseline):
    kind = _measurement.kind
    meta = _measurement.metadata
    wavelength = np.asarray(_measurement.wavelength_nm, float)
    index = [int(np.argmin(np.abs(wavelength - w))) for w in shown]
    if kind in AXIS_LABELS:
        x_label, y_label = AXIS_LABELS[kind]
        axis = np.asarray(_measurement.axis, float)
        dense = np.linspace(axis.min(), axis.max(), 80)
        n = meta.n if meta.n is not None else 1.33
        if isinstance(_baseline, (list, tuple)):  # a band fitted per g step: each wavelength's own baseline
            curves = np.vstack([np.asarray(_forward(kind, model, dense, _baseline[i], n, meta.n_outside or 1.0)(
                _result.mua_per_mm[[i]], _result.musp_per_mm[[i]]), float).reshape(1, -1) for i in index])
        else:
            forward = _forward(kind, model, dense, _baseline, n, meta.n_outside or 1.0)
            curves = np.asarray(forward(_result.mua_per_mm[index], _result.musp_per_mm[index]), float)
        if _result.scale_factor is not None:
            curves = curves * np.asarray(_result.scale_factor, float)[index][:, None]
        series, rows = [], []
        for row, i in enumerate(index):
            data = _measurement.values[i]
            sd = None if _measurement.sd is None else _measurement.sd[i]
            colour = COLOURS[row % len(COLOURS)]
            series.append(Series(f"data {wavelength[i]:g} nm", axis, data, sd=sd, mode="markers", colour=colour))
            series.append(Series(f"model {wavelength[i]:g} nm", dense, curves[row], dash="dot", colour=colour))
            for a, d in zip(axis, data):
                rows.append({"wavelength_nm": wavelength[i], "axis": a, "data": d})
        figure = line_figure(series, x_label=x_label, y_label=y_label, log_y=kind == "srdr",
                             title="Data and fitted model", height=380)
        residual_series = [Series(f"{wavelength[i]:g} nm", axis, _result.residuals[i], mode="lines+markers",
                                  colour=COLOURS[row % len(COLOURS)]) for row, i in enumerate(index)]
        residual_x = x_label
    elif kind in ("slab", "sphere"):
        figure, rows, residual_series = _slab_figures(_result, wavelength)
        residual_x = "wavelength [nm]"
    else:
        return None
    residual_figure = line_figure(residual_series, x_label=residual_x, y_label="(model − data) / SD [dimensionless]",
                                  title="Normalised residuals", height=380)
    residual_figure.add_hline(y=0, line_color="#4b4b4b")
    residuals = np.asarray(_result.residuals, float)
    table = pd.DataFrame({"wavelength_nm": np.repeat(wavelength, residuals.size // wavelength.size),
                          "residual": residuals.ravel()})
    return (Chart(figure, pd.DataFrame(rows), "fit-data-and-model", "refit.data"),
            Chart(residual_figure, table, "fit-residuals", "refit.residuals"))


def _slab_figures(result, wavelength):
    """R, T (and Tc) measured (sphere: derived from the readings) against the fitted model."""
    extras = result.extras
    names = [("total_reflectance", "R"), ("total_transmittance", "T")]
    if "collimated_transmittance" in extras:
        names.append(("collimated_transmittance", "Tc"))
    series, rows = [], {"wavelength_nm": wavelength}
    for k, (key, short) in enumerate(names):
        colour = COLOURS[k % len(COLOURS)]
        measured = np.asarray(extras[key], float)
        sd = np.asarray(extras.get(f"{key}_sd", np.zeros_like(measured)), float)
        model = np.asarray(extras[f"model_{key}"], float)
        series.append(Series(f"{short} measured", wavelength, measured, sd=np.nan_to_num(sd), mode="markers",
                             colour=colour))
        series.append(Series(f"{short} model", wavelength, model, dash="dot", colour=colour))
        rows.update({f"{key}_measured": measured, f"{key}_sd": sd, f"{key}_model": model})
    figure = line_figure(series, x_label="wavelength [nm]", y_label="R, T, Tc [dimensionless]",
                         log_y="collimated_transmittance" in extras,
                         title="Measured and fitted reflectance and transmittance", height=380)
    residuals = np.asarray(result.residuals, float).reshape(wavelength.size, -1)
    labels = ["M_R", "M_T", "M_Tc"] if result.kind == "sphere" else ["R", "T", "Tc"]
    residual_series = [Series(labels[j], wavelength, residuals[:, j], mode="lines+markers")
                       for j in range(residuals.shape[1])]
    return figure, pd.DataFrame(rows).to_dict("records"), residual_series


def result_charts(fit_key: str, target: dict | None, *, result) -> dict:
    """``{"fitted": [μa chart, μs′ chart], "g": chart or None, "g_note": text or None}``."""
    return _result_charts(fit_key, json.dumps(target, sort_keys=True, default=str), result, target)


@st.cache_resource(show_spinner=False, max_entries=16)
def _result_charts(fit_key: str, target_json: str, _result, _target: dict | None) -> dict:
    return {"fitted": _against_target(_result, _target), **_anisotropy(_result)}


def _anisotropy(result) -> dict:
    """g fitted from the collimated transmittance with its SD, or the note that g was assumed."""
    extras = result.extras
    if "g_fitted" not in extras:
        return {"g": None, "g_note": None}
    if not extras["g_fitted"]:
        return {"g": None, "g_note": (f"g = {result.parameters['g']['value']:g} was given (assumed, not fitted); a "
                                      "collimated transmittance would let the fit return it.")}
    wavelength = np.asarray(result.wavelength_nm, float)
    g = np.asarray(extras["g"], float)
    sd = np.asarray(extras["g_sd"], float)
    figure = line_figure([Series("fitted g", wavelength, g, sd=np.where(np.isfinite(sd), sd, 0.0),
                                 mode="lines+markers")],
                         x_label="wavelength [nm]", y_label="g [dimensionless]",
                         title="Anisotropy g from the collimated transmittance")
    table = pd.DataFrame({"wavelength_nm": wavelength, "g": g, "g_sd": sd})
    return {"g": Chart(figure, table, "fitted-g", "refit.fitted.g"), "g_note": None}


def _against_target(result, target: dict | None) -> list[Chart]:
    wavelength = np.asarray(result.wavelength_nm, float)
    rows = {"wavelength_nm": wavelength}
    charts = []
    for quantity, symbol in (("mua", "μa"), ("musp", "μs′")):
        value = np.asarray(getattr(result, f"{quantity}_per_mm"), float)
        sd = np.asarray(getattr(result, f"{quantity}_sd_per_mm"), float)
        rows[f"fitted_{quantity}_per_mm"] = value
        rows[f"fitted_{quantity}_sd_per_mm"] = sd
        series = [Series(f"fitted {symbol}", wavelength, value, sd=np.where(np.isfinite(sd), sd, 0.0),
                         mode="lines+markers")]
        title = f"Fitted {symbol}"  # a file not attached to a batch has no target to show
        if target:
            wanted = np.asarray([np.nan if v is None else v for v in target.get(f"{quantity}_per_mm", [])], float)
            if wanted.size and np.any(np.isfinite(wanted)):
                has = np.isfinite(wanted)
                series.append(target_series(f"target {symbol}", np.asarray(target["wavelength_nm"], float)[has],
                                            wanted[has]))
                title = f"Fitted {symbol} against target"
        figure = line_figure(series, x_label="wavelength [nm]", y_label=f"{symbol} [1/mm]", title=title)
        charts.append(Chart(figure, pd.DataFrame(rows), f"fitted-{quantity}", f"refit.fitted.{quantity}"))
    return charts
