"""Across the batches of one recipe (layer 5): spread of the fitted optics and drift with age.

Plain statistics of what the batch log holds: per batch the mean of its measurements' newest
fits at each wavelength, then across batches the mean, the sample SD (n − 1) and the CV; and
each fit against the phantom's age at the time of measurement.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui.plots import Chart, Series, line_figure, show_chart, target_series
from phantomlab.ui.tables import plural

__all__ = ["latest_fit", "log_fingerprint", "spread_section"]


def latest_fit(measurement: dict) -> dict | None:
    fits = sorted(measurement["fits"], key=lambda f: (f["recorded_at"], f["id"]))
    return fits[-1]["results"] if fits else None


def _fit_points(batches: list[dict]) -> pd.DataFrame:
    """One row per (batch, measurement, wavelength) with the newest fit's μa and μs′."""
    rows = []
    for batch in batches:
        for m in batch["measurements"]:
            fit = latest_fit(m)
            if not fit:
                continue
            for i, w in enumerate(fit.get("wavelength_nm", [])):
                rows.append({
                    "batch": batch["code"], "measurement": m["id"], "phantom_age_days": m["phantom_age_days"],
                    "wavelength_nm": float(w), "mua_per_mm": fit["mua_per_mm"][i],
                    "mua_sd_per_mm": fit["mua_sd_per_mm"][i], "musp_per_mm": fit["musp_per_mm"][i],
                    "musp_sd_per_mm": fit["musp_sd_per_mm"][i],
                })
    return pd.DataFrame(rows)


def log_fingerprint(batches: list[dict]) -> str:
    """The state of the batches the charts and records depend on: versions, measurements, fits."""
    return json.dumps([[b["uid"], b["version"], [[m["id"], m["phantom_age_days"], [f["id"] for f in m["fits"]]]
                                                 for m in b["measurements"]]] for b in batches])


def _spread(chosen: list[dict]):
    points = _fit_points(chosen)
    if points.empty:
        return points, None, None
    # per batch: the mean of its measurements at each wavelength; then spread across batches
    per_batch = points.groupby(["batch", "wavelength_nm"], as_index=False)[["mua_per_mm", "musp_per_mm"]].mean()
    spread = per_batch.groupby("wavelength_nm").agg(
        batches=("batch", "nunique"), mua_mean=("mua_per_mm", "mean"), mua_sd=("mua_per_mm", "std"),
        musp_mean=("musp_per_mm", "mean"), musp_sd=("musp_per_mm", "std")).reset_index()
    spread["mua_cv_percent"] = 100 * spread["mua_sd"] / spread["mua_mean"]
    spread["musp_cv_percent"] = 100 * spread["musp_sd"] / spread["musp_mean"]
    return points, per_batch, spread


@st.cache_resource(show_spinner=False, max_entries=16)
def _spread_charts(key: str, _chosen: list[dict]):
    """The spread charts and tables of one recipe's batches, built once per state of the log (``key``)."""
    points, per_batch, spread = _spread(_chosen)
    if per_batch is None:
        return points, None, None, []
    target = _chosen[0]["plan"].get("target", {}) if _chosen else {}
    charts = []
    for quantity, symbol in (("mua", "μa"), ("musp", "μs′")):
        series = [Series(f"batch {code}", group["wavelength_nm"].to_numpy(), group[f"{quantity}_per_mm"].to_numpy(),
                         mode="lines+markers")
                  for code, group in per_batch.groupby("batch")]
        wanted = np.asarray([np.nan if v is None else v for v in target.get(f"{quantity}_per_mm", [])], dtype=float)
        if wanted.size and np.any(np.isfinite(wanted)):
            has = np.isfinite(wanted)
            series.append(target_series(f"target {symbol}", np.asarray(target["wavelength_nm"])[has], wanted[has]))
        figure = line_figure(series, x_label="wavelength [nm]", y_label=f"fitted {symbol} [1/mm]",
                             title=f"Spread of {symbol} across batches")
        charts.append(Chart(figure, per_batch, f"spread-{quantity}", f"batches.spread.{quantity}"))
    return points, per_batch, spread, charts


@st.cache_resource(show_spinner=False, max_entries=32)
def _drift_charts(key: str, at: float, _picked: pd.DataFrame) -> list[Chart]:
    """The drift charts at one wavelength, built once per state of the log (``key``)."""
    charts = []
    for quantity, symbol in (("mua", "μa"), ("musp", "μs′")):
        series = [Series(f"batch {code}", group["phantom_age_days"].to_numpy(), group[f"{quantity}_per_mm"].to_numpy(),
                         sd=group[f"{quantity}_sd_per_mm"].to_numpy(), mode="lines+markers")
                  for code, group in _picked.groupby("batch")]
        figure = line_figure(series, x_label="phantom age [days]", y_label=f"fitted {symbol} at {at:g} nm [1/mm]",
                             title=f"Drift of {symbol} with phantom age")
        charts.append(Chart(figure, _picked, f"drift-{quantity}-{at:g}nm", f"batches.drift.{quantity}"))
    return charts


def spread_section(batches: list[dict]) -> None:
    st.subheader("Across the batches of one recipe")
    recipes = sorted({b["recipe"] for b in batches})
    if not recipes:
        return
    recipe = st.selectbox("Recipe", recipes, key="batches.spread_recipe")
    chosen = [b for b in batches if b["recipe"] == recipe and not b["retracted"]]
    key = json.dumps([recipe, log_fingerprint(chosen)])
    points, per_batch, spread, charts = _spread_charts(key, chosen)
    if per_batch is None:
        st.info("No fitted measurement of this recipe's batches yet.")
        return
    count = per_batch["batch"].nunique()
    st.caption(f"{plural(count, 'measured batch', 'measured batches')} of this recipe; CV = SD across batches / "
               "mean (each batch: the mean of its measurements).")
    for column, chart in zip(st.columns(2), charts):
        with column:
            show_chart(chart)
    shown = spread[["wavelength_nm", "batches", "mua_mean", "mua_cv_percent", "musp_mean", "musp_cv_percent"]]
    st.dataframe(shown.rename(columns={
        "wavelength_nm": "wavelength [nm]", "mua_mean": "mean μa [1/mm]", "mua_cv_percent": "μa CV [%]",
        "musp_mean": "mean μs′ [1/mm]", "musp_cv_percent": "μs′ CV [%]"}), hide_index=True, width="stretch")

    aged = points.dropna(subset=["phantom_age_days"])
    if aged.empty:
        st.caption("No measurement has a phantom age (the batch's mixing date) yet.")
        return
    wavelengths = sorted(aged["wavelength_nm"].unique())
    at = st.selectbox("Drift with phantom age at wavelength [nm]", wavelengths, key="batches.drift_wavelength",
                      format_func=lambda w: f"{w:g} nm")
    picked = aged[aged["wavelength_nm"] == at].sort_values("phantom_age_days")
    for column, chart in zip(st.columns(2), _drift_charts(key, float(at), picked)):
        with column:
            show_chart(chart)
