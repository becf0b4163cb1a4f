"""Showing a solved plan (layer 5): its amounts as tables and its mixing sheet as downloads.

Shared by "Design a phantom" and the corrected plan of "Fit and correct"; the sheet is the
recipe layer's rendering (:mod:`phantomlab.recipe.sheet`), the one the command line prints.
"""

from __future__ import annotations

import pandas as pd
import streamlit as st

from phantomlab.ui.widgets import call_layer

__all__ = ["doses_table", "draft_sheet_stem", "predilutions_table", "matrix_table", "name_slug", "saved_sheet_downloads", "sheet_downloads"]

def doses_table(plan) -> pd.DataFrame:
    """Per stock: what the sheet dispenses (its rounding), its share, undiluted volume and mass.

    Narrow enough for a laptop screen: the pre-dilutions have a table of their own
    (:func:`predilutions_table`), lots and expiry dates are on the sheet and under the stocks.
    """
    from phantomlab.recipe.procedure import format_amount, format_tolerance  # layer 3

    rows = []
    for dose in plan.doses:
        source = dose.dilution.dispense_from if dose.dilution is not None and dose.dilution.steps else "stock"
        rows.append({
            "stock": dose.stock,
            "dispense (as on the sheet)": (f"{format_amount(dose.dispense_amount, dose.unit)} ± "
                                           f"{format_tolerance(dose.tolerance, dose.unit)} of {source}"
                                           if dose.used else "not used"),
            "share [% v/v]": _figures(100.0 * dose.volume_fraction, 3),
            "undiluted volume [mL]": _figures(dose.volume_ml, 4),
            "undiluted mass [g]": _figures(dose.mass_g, 4),
            "potency": f"{dose.potency:.3g} ± {dose.potency_sd:.2g} ({dose.potency_source})",
        })
    return pd.DataFrame(rows)


def _figures(value: float, digits: int) -> float:
    """A number rounded to ``digits`` significant figures (shown short, still a number)."""
    return float(f"{value:.{digits}g}")


def predilutions_table(plan) -> pd.DataFrame:
    """The pre-dilutions to make, in order, as the sheet's pre-dilution table gives them."""
    from phantomlab.recipe.procedure import format_amount  # layer 3
    from phantomlab.recipe.sheet import dilution_text

    rows = []
    for dose in plan.doses:
        if dose.dilution is None or not dose.dilution.steps:
            continue
        unit = dose.dilution.unit
        for step in dose.dilution.steps:
            rows.append({"make": step.label, "take": format_amount(step.source_amount, unit), "of": step.source,
                         "add diluent": f"{format_amount(step.diluent_amount, unit)} {dose.dilution.diluent}",
                         "total": f"{format_amount(step.total_amount, unit)} ({dilution_text(step.factor)})"})
    return pd.DataFrame(rows)


def matrix_table(plan) -> pd.DataFrame:
    from phantomlab.recipe.procedure import format_amount, format_tolerance  # layer 3

    return pd.DataFrame(
        [{"what to measure": label, "amount": format_amount(amount, unit),
          "tolerance": f"± {format_tolerance(tolerance, unit)}"} for label, amount, unit, tolerance in plan.matrix.parts]
    )


def name_slug(name: str, *, limit: int = 40) -> str:
    """A name as part of a file name: lower case, ``-`` for anything but letters and digits."""
    slug = "".join(c if c.isalnum() else "-" for c in str(name).lower())
    slug = "-".join(part for part in slug.split("-") if part)
    return slug[:limit].strip("-") or "recipe"


def draft_sheet_stem(plan, *, day=None) -> str:
    """``sheet-RECIPE-DATE`` for a sheet not yet logged (docs/formats.md, "Page downloads")."""
    import datetime as _dt

    return f"sheet-{name_slug(plan.recipe.name)}-{(day or _dt.date.today()).isoformat()}"


def sheet_downloads(plan, *, batch_id: str | None, key: str, note: str | None = None,
                    cache_key: str | None = None) -> None:
    """HTML and CSV downloads of the plan's sheet; ``note`` is boxed under its heading (e.g. the
    batch a corrected plan corrects and the calibration state it uses).

    ``cache_key``: a key that names the plan (its solve's inputs); the sheet is then rendered
    once per (key, batch ID, note), not on every run.
    """
    from phantomlab.recipe.sheet import render_sheet_csv, render_sheet_html  # layer 3

    stem = f"sheet-{batch_id}" if batch_id else draft_sheet_stem(plan)
    if cache_key is None:
        html = call_layer("Rendering the sheet", render_sheet_html, plan, batch_id=batch_id,
                          draft=batch_id is None, note=note)
        csv = call_layer("Rendering the sheet CSV", render_sheet_csv, plan, batch_id=batch_id,
                         draft=batch_id is None)
    else:
        import datetime as _dt

        today = _dt.date.today().isoformat()  # the sheet is dated and checks expiry against the day
        html = call_layer("Rendering the sheet", _rendered, cache_key, "html", batch_id, note, today, plan)
        csv = call_layer("Rendering the sheet CSV", _rendered, cache_key, "csv", batch_id, None, today, plan)
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


@st.cache_data(show_spinner=False, max_entries=16)
def _rendered(cache_key: str, kind: str, batch_id: str | None, note: str | None, today: str, _plan) -> str:
    """The sheet of the plan named by ``cache_key`` (``kind``: html or csv), rendered once a day."""
    from phantomlab.recipe.sheet import render_sheet_csv, render_sheet_html  # layer 3

    if kind == "html":
        return render_sheet_html(_plan, batch_id=batch_id, draft=batch_id is None, note=note)
    return render_sheet_csv(_plan, batch_id=batch_id, draft=batch_id is None)


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
