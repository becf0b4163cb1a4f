"""The mixing sheet: one A4 page of HTML, a CSV and a JSON object from one plan (layer 3).

One rendering code path for ``phantomlab plan`` (a draft, marked "DRAFT — not a logged
batch") and ``phantomlab batch add`` (with the batch ID).  The sheet holds: batch ID or draft
mark, date, recipe name, version and hash; the stocks with lots, expiry (an expired lot is a
visible warning) and potencies; the pre-dilutions; the amounts to measure, each with its
tolerance and an empty field for the actual amount; the ordered steps of the matrix
preparation; predicted μa and μs′ with SD at the target wavelengths and a small inline SVG
plot; the warnings of the plan; the cautions of the stocks and matrix; and the closing line.
"""

from __future__ import annotations

import csv
import datetime as _dt
import io
import math
from html import escape
from typing import Any

import numpy as np

from phantomlab.recipe.cautions import CLOSING_LINE, cautions_for
from phantomlab.recipe.dose_amounts import dispense_tolerance
from phantomlab.recipe.procedure import amount_lines, format_amount, format_tolerance, procedure_steps
from phantomlab.recipe.oxygenation import process_hazards
from phantomlab.recipe.so2_sheet import so2_series_csv_rows, so2_series_html, so2_series_svg
from phantomlab.recipe.svgplot import spectra_svg

__all__ = ["render_sheet_html", "render_sheet_csv", "render_series_html", "sheet_json", "dilution_text", "DRAFT_MARK",
           "DILUTION_NOTE", "G_NOTE"]

DRAFT_MARK = "DRAFT — not a logged batch"
G_NOTE = "g comes from the scattering model (Mie / emulsion model), not from a measurement."
TOLERANCE_NOTE = ("± = twice the dispensing error (pipette relative error; balance: at least its "
                  "resolution).")
DILUTION_NOTE = ("\"1 in 10\" = 1 part of the source in 10 parts of the finished dilution. "
                 "Use each pre-dilution the day it is made.")
_MAX_TABLE_WAVELENGTHS = 8
SVG_HEIGHT_PX = 112


def dilution_text(factor: float) -> str:
    """A step's dilution as a technician reads it: ``"1 in 10"`` for a source fraction of 0.1."""
    return f"1 in {1.0 / factor:.4g}"


def _source_text(plan, line) -> str:
    """Where an amount comes from; a pre-dilution with its overall dilution (what ``batch actual``
    takes as ``dilution_factor`` when the dispensed amount of the dilution is logged)."""
    if line.stock is None:
        return line.source
    dilution = plan.dose(line.stock).dilution
    if dilution is None:
        return line.source
    return f"{line.source} ({dilution_text(dilution.overall_factor)} overall)"


def _when(date) -> str:
    return (date or _dt.date.today()).isoformat()


def _expired(stock, date) -> bool:
    return stock.expiry is not None and stock.expiry < (date or _dt.date.today())


def _used_stocks(plan):
    recipe = plan.recipe
    return [recipe.matrix] + [recipe.stock(d.stock) for d in plan.doses if d.used]


def _table_rows(plan) -> np.ndarray:
    """Indices of the target wavelengths shown in the sheet's table (at most 8)."""
    count = plan.target.wavelength_nm.size
    if count <= _MAX_TABLE_WAVELENGTHS:
        return np.arange(count)
    return np.unique(np.round(np.linspace(0, count - 1, _MAX_TABLE_WAVELENGTHS)).astype(int))


def _fmt(value: float, digits: int = 3) -> str:
    if value is None or not math.isfinite(value):
        return "—"
    return f"{value:.{digits}g}"


def sheet_json(plan, *, batch_id: str | None = None, draft: bool = True, date=None) -> dict[str, Any]:
    """``Plan.to_json()`` plus the sheet's own fields (batch, steps, amounts, cautions)."""
    payload = plan.to_json()
    cautions = cautions_for(stocks=_used_stocks(plan), preparation_kind=plan.recipe.preparation.kind,
                            extra_hazards=process_hazards(plan.recipe))
    payload.update({
        "batch_id": batch_id,
        "draft": bool(draft or batch_id is None),
        "sheet_date": _when(date),
        "expired_lots": [
            {"stock": s.key, "lot": s.lot, "expiry": s.expiry} for s in _used_stocks(plan) if _expired(s, date)
        ],
        "amounts": [
            {"line": ln.number, "what": ln.label, "from": ln.source, "amount": ln.amount, "unit": ln.unit,
             "tolerance": ln.tolerance, "how": ln.how, "actual": None}
            for ln in amount_lines(plan)
        ],
        "procedure": procedure_steps(plan),
        "cautions": [{"source": c.source, "text": c.text} for c in cautions],
        "closing_line": CLOSING_LINE,
        "g_note": G_NOTE,
    })
    return payload


_CSS = """
@page { size: A4; margin: 10mm 11mm; }
* { box-sizing: border-box; }
body { font-family: sans-serif; font-size: 8pt; line-height: 1.2; color: #000; margin: 0; }
.page { width: 188mm; margin: 0 auto; }
header { display: flex; justify-content: space-between; gap: 4mm; border-bottom: 1.5pt solid #000; padding-bottom: 1.5mm; }
h1 { font-size: 11.5pt; margin: 0 0 0.8mm 0; }
h2 { font-size: 9pt; margin: 1.8mm 0 0.8mm 0; border-bottom: 0.5pt solid #888; }
.batch { text-align: right; white-space: nowrap; }
.batch .id { font-size: 12pt; font-weight: bold; }
.draft { font-size: 10pt; font-weight: bold; border: 1.2pt dashed #000; padding: 0.8mm 2mm; }
.alert { border: 1.5pt solid #000; font-weight: bold; padding: 0.8mm 2mm; margin: 1.2mm 0; }
table { border-collapse: collapse; width: 100%; }
th, td { border: 0.4pt solid #999; padding: 0.35mm 1.2mm; text-align: left; vertical-align: top; }
th { background: #eee; }
td.num, td.key { text-align: right; white-space: nowrap; }
td.key { text-align: left; }
td.actual { width: 28mm; }
ol, ul { margin: 0; padding-left: 5mm; }
li { margin: 0.15mm 0; }
.small { font-size: 7pt; }
svg.spectra { display: block; margin: 0.5mm auto 0 auto; }
.closing { font-weight: bold; border-top: 1pt solid #000; margin: 1.5mm 0 0 0; padding-top: 1mm; }
.sign { margin-top: 1.5mm; }
.sign td { height: 6mm; width: 30mm; }
@media print { .page { width: auto; } }
"""


def render_sheet_html(plan, *, batch_id: str | None = None, draft: bool = True, date=None,
                      title: str = "Mixing sheet", note: str | None = None) -> str:
    """The printable one-page A4 mixing sheet as a self-contained HTML document.

    Parameters
    ----------
    plan : Plan
    batch_id : str, optional
        The logged batch's ID (``batch add``); without one the sheet is a draft.
    draft : bool
        Mark the sheet "DRAFT — not a logged batch" (always so without ``batch_id``).
    date : datetime.date, optional
        The sheet's date (default today); also the date expiry is checked against.
    title : str
        The heading's first words.
    note : str, optional
        A boxed line under the heading (e.g. a working dilution shared by a series).

    Returns
    -------
    str
        HTML5 with inline CSS and SVG (no external files, scripts or fonts).
    """
    recipe = plan.recipe
    draft = draft or batch_id is None
    e = escape
    out: list[str] = ["<!DOCTYPE html>", '<html lang="en"><head><meta charset="utf-8">',
                      f"<title>{e(title)}: {e(recipe.name)}</title><style>{_CSS}</style></head><body>",
                      '<div class="page">']
    size = (f"{recipe.batch_mass_g:g} g (≈ {plan.batch_volume_ml:.4g} mL)" if recipe.by_mass
            else f"{recipe.batch_volume_ml:g} mL")
    mark = (f'<div class="draft">{e(DRAFT_MARK)}</div>' if draft
            else f'<div class="id">Batch {e(str(batch_id))}</div>')
    out.append(
        f'<header><div><h1>{e(title)}: {e(recipe.name)}</h1>'
        f'<div>Recipe version {e(recipe.version)} · hash {e(recipe.content_hash[:12])} · '
        f'batch size {e(size)} · matrix {e(recipe.matrix_key)} ({e(recipe.preparation.kind)})</div>'
        + (f'<div class="small">{e(recipe.notes)}</div>' if recipe.notes else "")
        + f'</div><div class="batch">{mark}<div>Date {e(_when(date))}</div></div></header>'
    )
    if note:
        out.append(f'<div class="alert note">{e(note)}</div>')
    for stock in _used_stocks(plan):
        if _expired(stock, date):
            out.append(f'<div class="alert expired">EXPIRED LOT: {e(stock.key)} lot {e(stock.lot or "(none)")} '
                       f'expired on {e(stock.expiry.isoformat())}. Do not use without approval.</div>')
    for limit in plan.binding_limits:
        out.append(f'<div class="alert binding">Target out of reach: {e(limit.message)}; '
                   'this sheet gives the closest feasible recipe.</div>')

    # stocks
    described = any(stock.name for stock in _used_stocks(plan))
    out.append("<h2>Stocks</h2><table><tr><th>stock</th>" + ("<th>what it is</th>" if described else "")
               + "<th>kind</th><th>lot</th><th>expiry</th><th>potency (± SD)</th><th>hazards</th></tr>")
    for stock in _used_stocks(plan):
        name = f"<td class='small'>{e(stock.name or '—')}</td>" if described else ""
        dose = next((d for d in plan.doses if d.stock == stock.key), None)
        potency = (f"{dose.potency:.3g} ± {dose.potency_sd:.2g} ({dose.potency_source})" if dose else "—")
        expiry = stock.expiry.isoformat() if stock.expiry else "none given"
        if _expired(stock, date):
            expiry = f"<strong>EXPIRED {e(expiry)}</strong>"
        else:
            expiry = e(expiry)
        out.append(f"<tr><td class='key'>{e(stock.key)}</td>{name}<td>{e(stock.kind)}</td><td>{e(stock.lot or '—')}</td>"
                   f"<td>{expiry}</td><td>{e(potency)}</td><td>{e(', '.join(stock.hazards) or '—')}</td></tr>")
    out.append("</table>")

    # pre-dilutions
    diluted = [d for d in plan.doses if d.dilution]
    if diluted:
        out.append("<h2>Pre-dilutions (make in this order)</h2><table><tr><th>make</th><th>take</th>"
                   "<th>of</th><th>add diluent</th><th>total</th><th>actual taken</th><th>actual diluent</th></tr>")
        for dose in diluted:
            unit = dose.dilution.unit

            def with_tol(amount, unit=unit, by=dose.by):
                tol = dispense_tolerance(amount, by, recipe.limits)
                return f"{format_amount(amount, unit)} ± {format_tolerance(tol, unit)}"

            for step in dose.dilution.steps:
                out.append(
                    f"<tr><td class='key'>{e(step.label)}</td><td class='num'>{e(with_tol(step.source_amount))}</td>"
                    f"<td class='key'>{e(step.source)}</td><td class='num'>{e(with_tol(step.diluent_amount))} "
                    f"{e(dose.dilution.diluent)}</td><td class='num'>{e(format_amount(step.total_amount, unit))} "
                    f"({e(dilution_text(step.factor))})</td><td class='actual'></td><td class='actual'></td></tr>")
        out.append(f"</table><div class='small'>{e(DILUTION_NOTE)} {e(TOLERANCE_NOTE)}</div>")

    # amounts
    out.append("<h2>Amounts into the batch</h2><table><tr><th>line</th><th>what</th><th>from</th>"
               "<th>how</th><th>amount</th><th>tolerance</th><th>actual</th></tr>")
    for line in amount_lines(plan):
        out.append(f"<tr><td>{line.number}</td><td>{e(line.label)}</td><td>{e(_source_text(plan, line))}</td>"
                   f"<td>{e(line.how)}</td><td class='num'>{e(line.text)}</td>"
                   f"<td class='num'>{e(line.tolerance_text)}</td><td class='actual'></td></tr>")
    out.append("</table><div class='small'>" + ("" if diluted else f"{e(TOLERANCE_NOTE)} ")
               + "A pre-diluted dose is given as the amount of its last dilution.</div>")

    # procedure
    out.append("<h2>Steps</h2><ol>")
    out += [f"<li>{e(step)}</li>" for step in procedure_steps(plan)]
    out.append("</ol>")

    # predicted
    rows = _table_rows(plan)
    target, pred = plan.target, plan.predicted
    series = _so2_series(plan)
    others = series[0].levels[1:] if series is not None else ()
    design = (f" at sO₂ {100 * series[0].levels[0].so2:.0f} %" if series is not None else "")
    g_tol = (f" ±{target.g_tolerance:g}" if np.any(np.isfinite(target.g)) else "")
    out.append("<h2>Predicted optics at the target wavelengths</h2><table><tr><th>λ [nm]</th>"
               f"<th>target μa [1/mm] ±{100 * target.mua_tolerance:g} %</th><th>predicted μa{e(design)} ± SD [1/mm]</th>"
               + "".join(f"<th>μa at {100 * level.so2:.0f} %</th>" for level in others)
               + f"<th>target μs′ [1/mm] ±{100 * target.musp_tolerance:g} %</th><th>predicted μs′ ± SD [1/mm]</th>"
               f"<th>target g{e(g_tol)}</th><th>model g</th></tr>")
    for i in rows:
        out.append(
            f"<tr><td class='num'>{target.wavelength_nm[i]:g}</td><td class='num'>{_fmt(target.mua_per_mm[i])}</td>"
            f"<td class='num'>{_fmt(pred.mua_per_mm[i])} ± {_fmt(pred.mua_sd_per_mm[i], 2)}</td>"
            + "".join(f"<td class='num'>{_fmt(level.mua_per_mm[i])}</td>" for level in others)
            + f"<td class='num'>{_fmt(target.musp_per_mm[i])}</td>"
            f"<td class='num'>{_fmt(pred.musp_per_mm[i])} ± {_fmt(pred.musp_sd_per_mm[i], 2)}</td>"
            f"<td class='num'>{_fmt(target.g[i])}</td><td class='num'>{_fmt(pred.g[i])}</td></tr>")
    out.append("</table>")
    shown = "" if rows.size == target.wavelength_nm.size else (
        f" Table shows {rows.size} of {target.wavelength_nm.size} target wavelengths; the CSV and JSON hold all.")
    out.append(f"<div class='small'>{e(G_NOTE)} SD: potencies and dispensing.{e(shown)} "
               "Plot: grey ±1 SD; circles or dashes: target.</div>")
    if series is None:
        out.append(spectra_svg(plan, height=SVG_HEIGHT_PX))
    else:
        out.append(so2_series_html(series[1], table_series=series[0]))
        out.append("<div style='display:flex;justify-content:center;gap:2mm'>"
                   + so2_series_svg(series[1], width=400, height=SVG_HEIGHT_PX)
                   + spectra_svg(plan, width=280, height=SVG_HEIGHT_PX, quantities=("musp",)) + "</div>")

    # warnings and cautions
    others = list(plan.sheet_notes)  # for the bench: no command names, no command-line-only notes
    if others:
        out.append("<h2>Notes from the planner</h2><ul class='small'>")
        out += [f"<li>{e(w)}</li>" for w in others]
        out.append("</ul>")
    out.append("<h2>Cautions</h2><ul>")
    for caution in cautions_for(stocks=_used_stocks(plan), preparation_kind=recipe.preparation.kind,
                                extra_hazards=process_hazards(recipe)):
        said = caution.text.split(":", 1)[0] == caution.source.split(" ", 1)[0]  # "silicone: ..." (silicone preparation)
        source = "" if said else f" <span class='small'>({e(caution.source)})</span>"
        out.append(f"<li class='caution'>{e(caution.text)}{source}</li>")
    out.append("</ul>")
    out.append("<table class='sign'><tr><th>mixed by</th><td></td><th>date / time</th><td></td>"
               "<th>room temperature</th><td></td></tr></table>")
    out.append(f"<p class='closing'>{e(CLOSING_LINE)}</p></div></body></html>")
    return "\n".join(out)


def _so2_series(plan):
    """The planned sO₂ series on the target grid and on the plot's grid, or None."""
    if getattr(plan.recipe, "oxygenation", None) is None:
        return None
    from phantomlab.recipe.oxygenation import so2_series

    at_targets = so2_series(plan, wavelength_nm=plan.target.wavelength_nm)
    dense = so2_series(plan) if plan.curve is not None else at_targets
    return at_targets, dense


def render_sheet_csv(plan, *, batch_id: str | None = None, draft: bool = True, date=None) -> str:
    """The mixing sheet as CSV: ``section,item,value,unit,tolerance,actual,note`` rows.

    Sections: ``batch`` (ID or draft mark, date, recipe), ``stock``, ``predilution``,
    ``amount`` (the empty ``actual`` column is for the technician), ``step``, ``predicted``
    (every target wavelength; ``tolerance`` holds the SD), ``so2_series`` (a recipe with
    ``[oxygenation]``: μa at every planned sO₂ level), ``warning``, ``caution``, ``closing``.
    """
    recipe = plan.recipe
    draft = draft or batch_id is None
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\n")
    writer.writerow(["section", "item", "value", "unit", "tolerance", "actual", "note"])
    writer.writerow(["batch", "batch_id", DRAFT_MARK if draft else batch_id, "", "", "", ""])
    writer.writerow(["batch", "date", _when(date), "", "", "", ""])
    writer.writerow(["batch", "recipe", recipe.name, "", "", "", f"version {recipe.version}"])
    writer.writerow(["batch", "recipe_hash", recipe.content_hash, "", "", "", ""])
    if recipe.by_mass:
        writer.writerow(["batch", "batch_mass", f"{recipe.batch_mass_g:g}", "g", "", "", ""])
    writer.writerow(["batch", "batch_volume", f"{plan.batch_volume_ml:.6g}", "mL", "", "", ""])
    target = plan.target
    writer.writerow(["batch", "mua_tolerance", f"{100 * target.mua_tolerance:g}", "%", "", "", "relative, of the target"])
    writer.writerow(["batch", "musp_tolerance", f"{100 * target.musp_tolerance:g}", "%", "", "", "relative, of the target"])
    if np.any(np.isfinite(target.g)):
        writer.writerow(["batch", "g_tolerance", f"{target.g_tolerance:g}", "", "", "", "absolute"])
    for stock in _used_stocks(plan):
        note = "EXPIRED" if _expired(stock, date) else ""
        writer.writerow(["stock", stock.key, stock.lot, "", "", "",
                         f"expiry {stock.expiry.isoformat() if stock.expiry else 'none given'} {note}".strip()])
    for dose in plan.doses:
        if not dose.dilution:
            continue
        unit = dose.dilution.unit
        for step in dose.dilution.steps:
            for item, amount, note in ((f"{step.label}: take", step.source_amount,
                                        f"of {step.source}; {dilution_text(step.factor)}"),
                                       (f"{step.label}: add diluent", step.diluent_amount, dose.dilution.diluent)):
                tolerance = dispense_tolerance(amount, dose.by, recipe.limits)
                writer.writerow(["predilution", item, f"{amount:.6g}", unit, f"{tolerance:.3g}", "", note])
    for line in amount_lines(plan):
        writer.writerow(["amount", f"{line.number} {line.label}", f"{line.amount:.6g}", line.unit,
                         f"{line.tolerance:.3g}", "", f"{line.how} from {_source_text(plan, line)}"])
    for number, step in enumerate(procedure_steps(plan), start=1):
        writer.writerow(["step", number, step, "", "", "", ""])
    pred = plan.predicted
    for i, lam in enumerate(pred.wavelength_nm):
        writer.writerow(["predicted", f"mua at {lam:g} nm", f"{pred.mua_per_mm[i]:.5g}", "1/mm",
                         f"{pred.mua_sd_per_mm[i]:.3g}", "", f"SD; target {_fmt(plan.target.mua_per_mm[i], 4)}"])
        writer.writerow(["predicted", f"musp at {lam:g} nm", f"{pred.musp_per_mm[i]:.5g}", "1/mm",
                         f"{pred.musp_sd_per_mm[i]:.3g}", "", f"SD; target {_fmt(plan.target.musp_per_mm[i], 4)}"])
        writer.writerow(["predicted", f"g at {lam:g} nm", f"{pred.g[i]:.4g}", "", "", "",
                         f"scattering model, not a measurement; target {_fmt(plan.target.g[i], 3)}"])
    series = _so2_series(plan)
    if series is not None:
        writer.writerows(so2_series_csv_rows(series[0]))
    for warning in plan.sheet_notes:
        writer.writerow(["warning", "", warning, "", "", "", ""])
    for caution in cautions_for(stocks=_used_stocks(plan), preparation_kind=recipe.preparation.kind,
                                extra_hazards=process_hazards(recipe)):
        writer.writerow(["caution", caution.source, caution.text, "", "", "", ""])
    writer.writerow(["closing", "", CLOSING_LINE, "", "", "", ""])
    return buffer.getvalue()


def render_series_html(series, *, date=None) -> str:
    """The sheets of a calibration series in one HTML document, one A4 page per level."""
    pages = []
    head = None
    shared = [d for d in getattr(series, "shared_dilutions", ()) if d.steps]
    note = None
    if shared:
        labels = ", ".join(step.label for d in shared for step in d.steps)
        note = (f"One set of pre-dilutions for the whole series: make {labels} once, as in the "
                "pre-dilution table (they hold enough for every level), and dispense every level from them.")
    for level in series.levels:
        title = f"Calibration series {series.stock}, level {level.level} ({level.multiple:.3g} × recipe dose)"
        has = note is not None and any(d.dilution for d in level.plan.doses)
        html = render_sheet_html(level.plan, draft=True, date=date, title=title, note=note if has else None)
        start = html.index('<div class="page">')
        end = html.rindex("</body>")
        if head is None:
            head = html[:start]
        pages.append(html[start:end])
    joiner = '\n<div style="break-before: page"></div>\n'
    return head + joiner.join(pages) + "</body></html>"
