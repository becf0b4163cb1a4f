"""Showing a solved plan (layer 5): its amounts as tables and its mixing sheet as downloads.

Shared by "Design a phantom" and the corrected plan of "Fit and correct"; the sheet is the
recipe layer's rendering (:mod:`phantomlab.recipe.sheet`), the one the command line prints.
"""

from __future__ import annotations

import pandas as pd
import streamlit as st

from phantomlab.ui.widgets import call_layer

__all__ = ["doses_table", "matrix_table", "saved_sheet_downloads", "sheet_downloads"]

def doses_table(plan) -> pd.DataFrame:
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


def matrix_table(plan) -> pd.DataFrame:
    return pd.DataFrame(
        [{"what to measure": label, "amount": f"{amount:.4g} {unit}",
          "tolerance": f"± {tolerance:.2g} {unit}"} for label, amount, unit, tolerance in plan.matrix.parts]
    )


def sheet_downloads(plan, *, batch_id: str | None, key: str, note: str | None = None) -> None:
    """HTML and CSV downloads of the plan's sheet; ``note`` is boxed under its heading (e.g. the
    batch a corrected plan corrects and the calibration state it uses)."""
    from phantomlab.recipe.sheet import render_sheet_csv, render_sheet_html  # layer 3

    stem = f"sheet-{batch_id}" if batch_id else "sheet-draft"
    html = call_layer("Rendering the sheet", render_sheet_html, plan, batch_id=batch_id,
                      draft=batch_id is None, note=note)
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
