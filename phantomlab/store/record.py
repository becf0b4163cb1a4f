"""The printable batch record for review (layer 4): what went in, what came out, pass or fail.

:func:`batch_record` gathers, from the batch log alone, everything a reviewer needs about
one batch: recipe and version, stocks and lots, the calibration state used, the software
version, planned and actual amounts, measured against target optics with SD and a pass or
fail against the recipe's tolerance, and, across all batches of the same recipe, the spread
(coefficient of variation) of the measured optics and their drift with phantom age.
:func:`render_batch_record_html` prints it as one self-contained HTML page.

The statistics are plain descriptive ones: CV = sample SD / mean (n − 1 in the SD) over the
batches' newest fits; drift = least-squares slope of the measured value against phantom
age over every fit, with its standard error, given relative to the mean per 30 days.
"""

from __future__ import annotations

import datetime as _dt
import html
import math
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from phantomlab import __version__
from phantomlab.store.batches import batch_history, batch_lots, get_batch, plan_of, recipe_of
from phantomlab.store.calibrations import calibration_potencies
from phantomlab.store.history import current
from phantomlab.store.measurements import fits_of, measurements_of
from phantomlab.store.schema import Batch, BatchPlan, CalibrationState, Recipe

__all__ = ["NOT_A_STANDARD", "batch_record", "render_batch_record_html", "series_statistics"]

NOT_A_STANDARD = (
    "This phantom is not a certified reference standard. Its optical properties are as "
    "measured and fitted above, with the uncertainties shown; follow the safety data sheets "
    "and your local rules when making, handling and measuring it."
)


def _values(sequence) -> np.ndarray:
    return np.asarray([np.nan if v is None else v for v in (sequence or [])], dtype=float)


def _on_grid(fit: dict[str, Any] | None, key: str, grid: np.ndarray) -> np.ndarray:
    """A fitted spectrum on the target grid (linear interpolation inside the fitted band)."""
    from phantomlab.calibration.verdict import on_grid  # layer 3: the one verdict implementation

    return on_grid(fit, key, grid)


def _newest_fit(session: Session, batch: Batch):
    """(measurement, fit) of the newest current fit of a batch, or (None, None)."""
    best = (None, None)
    for measurement in measurements_of(session, batch):
        for fit in fits_of(session, measurement):
            if best[1] is None or fit.id > best[1].id:
                best = (measurement, fit)
    return best


def _checks(target: dict[str, Any], fit: dict[str, Any] | None,
            predicted: dict[str, Any] | None = None) -> list[dict[str, Any]]:
    """One row per targeted value: target, measured ± SD, deviation, verdict (``outcome`` PASS,
    FAIL or UNDECIDED by :func:`phantomlab.calibration.verdict.judge`, the rule every command
    uses; ``pass`` True, False or None); with ``predicted`` (the optics predicted from the
    amounts really dispensed) also that."""
    from phantomlab.calibration.verdict import judge

    verdict = judge(target=target, values=fit)
    rows = []
    for row in verdict.rows:
        name, w = row["quantity"], row["wavelength_nm"]
        at = np.array([w])
        expected = _on_grid(predicted, f"{name}_per_mm", at)[0] if predicted else np.nan
        expected_sd = _on_grid(predicted, f"{name}_sd_per_mm", at)[0] if predicted else np.nan
        rows.append({
            "quantity": name, "wavelength_nm": w, "target_per_mm": row["target_per_mm"],
            "measured_per_mm": row["value_per_mm"], "measured_sd_per_mm": row["sd_per_mm"],
            "deviation_percent": row["deviation_percent"], "sd_percent": row["sd_percent"],
            "tolerance_percent": row["tolerance_percent"], "outcome": row["outcome"], "pass": row["pass"],
            "predicted_from_actual_per_mm": float(expected) if np.isfinite(expected) else None,
            "predicted_from_actual_sd_per_mm": float(expected_sd) if np.isfinite(expected_sd) else None,
        })
    return rows


def _anisotropy(results: dict[str, Any] | None) -> str | None:
    """One line on g for slab and sphere fits: fitted (mean ± SD over the band) or assumed."""
    if not results or "g_fitted" not in results:
        return None
    g = _values(results.get("g"))
    if not g.size or not np.any(np.isfinite(g)):
        return None
    if not results["g_fitted"]:
        return f"g {np.nanmean(g):.3g} assumed (given, not fitted)"
    sd = _values(results.get("g_sd"))
    spread = f", SD {np.nanmin(sd):.2g}–{np.nanmax(sd):.2g}" if sd.size and np.any(np.isfinite(sd)) else ""
    return (f"g fitted from the collimated transmittance: {np.nanmin(g):.3g}–{np.nanmax(g):.3g} over the band"
            f"{spread}")


def series_statistics(points: list[dict[str, Any]], *, grid: np.ndarray) -> dict[str, Any]:
    """CV across batches and drift with phantom age of measured μa and μs′ on ``grid``.

    Parameters
    ----------
    points : list of dict
        One per fit: ``batch_id``, ``fit_id``, ``phantom_age_days`` [days] (or None),
        ``newest`` (the batch's newest fit), ``mua_per_mm`` and ``musp_per_mm`` on ``grid``.
    grid : ndarray [nm]

    Returns
    -------
    dict
        ``cv_percent`` per quantity and wavelength (None with fewer than 2 batches),
        ``drift_percent_per_30_days`` and its ``drift_se_percent_per_30_days`` (None with
        fewer than 3 aged points or a single age), and the counts.
    """
    result: dict[str, Any] = {"wavelength_nm": grid.tolist(), "batches": 0, "fits": len(points)}
    newest = [p for p in points if p["newest"]]
    result["batches"] = len(newest)
    for name in ("mua", "musp"):
        cv, drift, drift_se = [], [], []
        for i in range(grid.size):
            values = np.array([p[f"{name}_per_mm"][i] for p in newest], dtype=float)
            values = values[np.isfinite(values)]
            if values.size >= 2 and values.mean() > 0:
                cv.append(float(100.0 * values.std(ddof=1) / values.mean()))
            else:
                cv.append(None)
            aged = [(p["phantom_age_days"], p[f"{name}_per_mm"][i]) for p in points
                    if p["phantom_age_days"] is not None and np.isfinite(p[f"{name}_per_mm"][i])]
            ages = np.array([a for a, _ in aged], dtype=float)
            ys = np.array([y for _, y in aged], dtype=float)
            if ages.size >= 3 and np.ptp(ages) > 0 and ys.mean() > 0:
                design = np.column_stack([np.ones_like(ages), ages])
                coef, *_ = np.linalg.lstsq(design, ys, rcond=None)
                residual = ys - design @ coef
                dof = ages.size - 2
                sigma2 = float(residual @ residual) / dof if dof > 0 else math.nan
                cov = sigma2 * np.linalg.inv(design.T @ design)
                scale = 100.0 * 30.0 / ys.mean()
                drift.append(float(coef[1] * scale))
                drift_se.append(float(math.sqrt(cov[1, 1]) * scale) if math.isfinite(sigma2) else None)
            else:
                drift.append(None)
                drift_se.append(None)
        result[f"{name}_cv_percent"] = cv
        result[f"{name}_drift_percent_per_30_days"] = drift
        result[f"{name}_drift_se_percent_per_30_days"] = drift_se
    return result


def _series(session: Session, recipe: Recipe, grid: np.ndarray) -> dict[str, Any]:
    versions = select(Recipe.id).where(Recipe.uid == recipe.uid)
    plans = select(BatchPlan.id).where(BatchPlan.recipe_id.in_(versions))
    batches = list(session.scalars(current(session, Batch).where(Batch.plan_id.in_(plans))))
    points = []
    for batch in sorted(batches, key=lambda b: b.code):
        newest_measurement, newest_fit = _newest_fit(session, batch)
        for measurement in measurements_of(session, batch):
            for fit in fits_of(session, measurement):
                points.append({
                    "batch_id": batch.code, "fit_id": fit.id, "phantom_age_days": measurement.phantom_age_days,
                    "newest": newest_fit is not None and fit.id == newest_fit.id,
                    "mua_per_mm": _on_grid(fit.results, "mua_per_mm", grid).tolist(),
                    "musp_per_mm": _on_grid(fit.results, "musp_per_mm", grid).tolist(),
                })
    stats = series_statistics(points, grid=grid)
    stats["points"] = [{**p, "mua_per_mm": [None if not math.isfinite(v) else v for v in p["mua_per_mm"]],
                        "musp_per_mm": [None if not math.isfinite(v) else v for v in p["musp_per_mm"]]}
                       for p in points]
    stats["recipe"] = recipe.name
    return stats


def batch_record(session: Session, code: str) -> dict[str, Any]:
    """Everything the printable record shows about batch ``code`` (plain JSON values)."""
    batch = get_batch(session, code)
    plan_row = plan_of(session, batch)
    recipe = recipe_of(session, batch)
    plan = plan_row.plan
    target = plan.get("target") or {}
    today = _dt.date.today()
    lots = [{"stock": key, "kind": lot.kind, "lot": lot.lot, "expiry": lot.expiry,
             "expired": bool(lot.expiry and lot.expiry < batch.planned_on),
             "definition_sha256": lot.definition_sha256, "snapshot_version": lot.version}
            for key, lot in batch_lots(session, batch).items()]
    state = session.get(CalibrationState, plan_row.calibration_state_id) if plan_row.calibration_state_id else None
    calibration = None
    if state is not None:
        calibration = {
            "state_id": state.id, "recorded_at": state.recorded_at, "method": state.method,
            "computed_from": state.computed_from, "retracted_since": _retracted_later(session, state),
            "potencies": [{"stock": p.stock_key, "lot": p.lot, "potency": p.potency, "potency_sd": p.potency_sd}
                          for p in calibration_potencies(session, state)],
        }
    actual = {a["stock"]: a for a in (batch.actual_amounts or [])}
    amounts = []
    matrix = plan.get("matrix") or {}
    planned_lines = [(matrix["stock"], matrix.get("volume_ml"), matrix.get("mass_g"))] if matrix.get("stock") else []
    planned_lines += [(d["stock"], d.get("volume_ml"), d.get("mass_g")) for d in plan.get("doses", [])]
    for stock, planned_ml, planned_g in planned_lines:
        got = actual.get(stock, {})
        if stock == matrix.get("stock") and not got:
            continue  # the matrix as planned: not measured with the amounts
        actual_ml = got.get("volume_ml")
        amounts.append({
            "stock": stock, "planned_volume_ml": planned_ml, "planned_mass_g": planned_g,
            "actual_volume_ml": actual_ml, "actual_mass_g": got.get("mass_g"),
            "difference_percent": (100.0 * (actual_ml / planned_ml - 1.0)
                                   if actual_ml is not None and planned_ml else None),
            "given": got.get("given"), "dilution_factor": got.get("dilution_factor"),
            "predilution": got.get("predilution"),
        })
    measurement, fit = _newest_fit(session, batch)
    from phantomlab.calibration.verdict import judge  # layer 3: the one verdict implementation

    checks = _checks(target, fit.results if fit else None, batch.actual_prediction)
    outcome = judge(target=target, values=fit.results if fit else None).outcome
    grid = _values(target.get("wavelength_nm"))
    return {
        "batch_id": batch.code, "status": batch.status, "retracted": batch.retracted,
        "version": batch.version, "operator": batch.operator, "planned_on": batch.planned_on,
        "mixed_on": batch.mixed_on, "notes": batch.notes, "cure_details": batch.cure_details,
        "matrix_details": batch.matrix_details,
        "recipe": {"name": recipe.name, "version": recipe.recipe_version, "content_hash": recipe.content_hash,
                   "record_version": recipe.version, "source_path": recipe.source_path},
        "software_version_at_planning": plan_row.software_version, "software_version_now": __version__,
        "lots": lots, "potencies_used": plan_row.potencies_used, "calibration": calibration,
        "corrects_batch": plan.get("corrects_batch"), "potencies_from": plan.get("potencies_from"),
        "amounts": amounts, "planned_prediction": plan.get("predicted"),
        "actual_prediction": batch.actual_prediction, "alarms": batch.actual_alarms or [],
        "target": target, "plan_warnings": plan.get("sheet_notes", plan.get("warnings", [])),
        "measurement": None if measurement is None else {
            "measurement_id": measurement.id, "kind": measurement.kind, "file": measurement.file_name,
            "measured_on": measurement.measured_on, "phantom_age_days": measurement.phantom_age_days,
            "instrument": measurement.instrument, "fit_id": fit.id, "model": fit.model,
            "chi2_red": fit.chi2_red, "fit_warnings": fit.warnings, "anisotropy": _anisotropy(fit.results),
            "fit_quality": (fit.results or {}).get("fit_quality"),
            "fit_quality_reason": (fit.results or {}).get("fit_quality_reason"),
            "sd_includes": (fit.results or {}).get("sd_includes") or []},
        "checks": checks, "outcome": outcome, "pass": None if outcome is None else outcome == "PASS",
        "series": _series(session, recipe, grid),
        "history": [{"version": v.version, "status": v.status, "retracted": v.retracted,
                     "recorded_at": v.recorded_at, "recorded_by": v.recorded_by, "change_note": v.change_note}
                    for v in batch_history(session, batch.code)],
        "printed_on": today, "not_a_standard": NOT_A_STANDARD,
    }


def _state_line(calibration: dict[str, Any] | None) -> str:
    if not calibration:
        return "none: the stock file's potencies"
    return f"state {calibration['state_id']} of {_cell(calibration['recorded_at'])}"


def _retracted_later(session: Session, state: CalibrationState) -> bool:
    newest = session.scalars(
        select(CalibrationState).where(CalibrationState.uid == state.uid).order_by(CalibrationState.version.desc())
    ).first()
    return bool(newest is not None and newest.retracted)


# ---- HTML ------------------------------------------------------------------------------------


def _cell(value: Any, digits: int = 4) -> str:
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, float):
        return f"{value:.{digits}g}" if math.isfinite(value) else "–"
    if isinstance(value, (_dt.datetime,)):
        return value.strftime("%Y-%m-%d %H:%M UTC")
    return html.escape(str(value))


def _table(header: list[str], rows: list[list[Any]], *, classes: list[str] | None = None,
           css: str | None = None) -> str:
    head = "".join(f"<th>{html.escape(h)}</th>" for h in header)
    body = []
    for i, row in enumerate(rows):
        row_class = f' class="{classes[i]}"' if classes and classes[i] else ""
        body.append(f"<tr{row_class}>" + "".join(f"<td>{_cell(v)}</td>" for v in row) + "</tr>")
    table = f"<table class='{css}'>" if css else "<table>"
    return f"{table}<thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>"


_STYLE = """
@page { size: A4; margin: 12mm 12mm; }
body { font-family: sans-serif; font-size: 9pt; margin: 0; color: #222; }
h1 { font-size: 14pt; margin: 0 0 2mm 0; }
h2 { font-size: 10.5pt; margin: 4mm 0 1mm 0; border-bottom: 1px solid #999; break-after: avoid; }
table { border-collapse: collapse; margin: 1mm 0; width: 100%; }
td, th { border: 1px solid #bbb; padding: 0.4mm 1.5mm; text-align: left; vertical-align: top; }
th { background: #eee; } tr { break-inside: avoid; }
table.wide td, table.wide th { font-size: 7.5pt; padding: 0.3mm 0.8mm; }
tr.fail td { background: #f6d5d5; } tr.pass td { background: #dcefdc; }
.verdict { font-size: 11pt; font-weight: bold; } .caution { border: 2px solid #a33; padding: 1.5mm; }
.small { font-size: 7.5pt; }
table.sign td { height: 8mm; width: 30%; } table.sign th { width: 20%; }
table.nowrap td { white-space: nowrap; }
@media screen { body { margin: 2em; max-width: 190mm; } }
"""

#: At most this many wavelengths in a table; failing rows are always shown (the JSON holds all).
MAX_TABLE_WAVELENGTHS = 8


def _shown(count: int) -> set[int]:
    """Indices of at most :data:`MAX_TABLE_WAVELENGTHS` evenly spread wavelengths."""
    if count <= MAX_TABLE_WAVELENGTHS:
        return set(range(count))
    return set(np.unique(np.round(np.linspace(0, count - 1, MAX_TABLE_WAVELENGTHS)).astype(int)).tolist())


def render_batch_record_html(record: dict[str, Any]) -> str:
    """The batch record as one self-contained, printable HTML page (A4)."""
    r = record
    verdict = {"PASS": "PASS: every targeted value within tolerance (at 2 SD)",
               "FAIL": "FAIL: at least one targeted value outside tolerance (at 2 SD)",
               "UNDECIDED": "UNDECIDED: none outside tolerance, but the SD is too wide to show every value inside",
               None: "not decided: no fitted measurement yet"}[
        r.get("outcome") or {True: "PASS", False: "FAIL", None: None}[r["pass"]]]
    quality = (r["measurement"] or {}).get("fit_quality")
    if r["pass"] is not None and quality in ("poor", "failed"):
        verdict += (" — but the fit is poor: the model does not describe the measurement, so the measured "
                    "values are not reliable" if quality == "poor" else " — but the fit failed")
    parts = [
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>",
        f"<title>Batch record {html.escape(r['batch_id'])}</title><style>{_STYLE}</style></head><body>",
        f"<h1>Batch record {html.escape(r['batch_id'])}"
        f"{' — RETRACTED' if r['retracted'] else ''}</h1>",
        f"<p class='verdict'>{html.escape(verdict)}</p>",
        _table(["field", "value"], [
            ["recipe", r["recipe"]["name"]], ["recipe version", r["recipe"]["version"]],
            ["recipe content hash", r["recipe"]["content_hash"]], ["status", r["status"]],
            ["corrects batch", r.get("corrects_batch") or "–"],
            ["calibration state used", _state_line(r.get("calibration"))],
            ["operator", r["operator"]], ["planned on", r["planned_on"]],
            ["mixed on", " ".join(str(x) for x in (r["mixed_on"], (r["cure_details"] or {}).get("mixing_time"))
                                  if x) or None],
            ["cure / setting", (r["cure_details"] or {}).get("schedule")],
            ["mixing temperature [°C]", (r["cure_details"] or {}).get("mixing_temperature_c")],
            ["notes", r["notes"]],
            ["software version (planning / this record)",
             f"{r['software_version_at_planning']} / {r['software_version_now']}"],
            ["record printed on", r["printed_on"]],
        ]),
        "<h2>Stocks and lots</h2>",
        _table(["stock", "kind", "lot", "expiry", "expired when planned", "snapshot"],
               [[x["stock"], x["kind"], x["lot"], x["expiry"], x["expired"],
                 f"v{x['snapshot_version']} {x['definition_sha256'][:12]}"] for x in r["lots"]],
               classes=["fail" if x["expired"] else "" for x in r["lots"]]),
        "<h2>Calibration state used</h2>",
    ]
    used = r["potencies_used"] or {}
    parts.append(_table(["stock", "potency", "SD", "lot", "source", "calibration state"],
                        [[k, v.get("potency"), v.get("potency_sd"), v.get("lot"), v.get("source"),
                          v.get("calibration_state_id")] for k, v in used.items()]))
    if r["calibration"]:
        c = r["calibration"]
        parts.append(f"<p>Calibration state {c['state_id']} of {_cell(c['recorded_at'])}, method "
                     f"{_cell(c['method'])}{' (retracted since)' if c['retracted_since'] else ''}.</p>")
    else:
        parts.append("<p>No calibrated potencies applied: every stock at its stock-file prior.</p>")
    parts += [
        "<h2>Planned and actual amounts (undiluted stock)</h2>",
        _table(["stock", "planned [mL]", "planned [g]", "actual [mL]", "actual [g]", "difference [%]"],
               [[a["stock"], a["planned_volume_ml"], a["planned_mass_g"], a["actual_volume_ml"],
                 a["actual_mass_g"], _percent(a["difference_percent"])] for a in r["amounts"]]),
        "<p class='small'>Undiluted stock that ended in the batch (a pre-diluted dose counts its "
        "stock only; the matrix counts the diluent the pre-dilutions carried in); the difference is "
        "of the actual from the planned volume; a dash in the actual columns: not recorded with "
        "<code>batch actual</code> or the page.</p>",
    ]
    made = [(a["stock"], step) for a in r["amounts"] for step in a.get("predilution") or []]
    if made:
        parts += [
            "<h2>Pre-dilutions as made</h2>",
            _table(["pre-dilution", "of", "actual taken", "actual diluent", "dilution planned", "dilution made"],
                   [[step["step"], step["source"], f"{step['taken']:.4g} {step['unit']}",
                     f"{step['diluent']:.4g} {step['unit']}", f"1 in {1.0 / step['planned_share']:.4g}",
                     f"1 in {1.0 / step['share']:.4g}"] for _stock, step in made]),
        ]
    for alarm in r["alarms"]:
        parts.append(f"<p class='caution'>{html.escape(alarm)}</p>")
    if r["plan_warnings"]:
        parts.append("<h2>Notes from the planner (when the batch was planned)</h2><ul class='small'>")
        parts += [f"<li>{html.escape(str(w))}</li>" for w in r["plan_warnings"]]
        parts.append("</ul>")
    parts.append("<h2>Measured against target optics</h2>")
    m = r["measurement"]
    if m:
        parts.append(f"<p>Measurement {m['measurement_id']} ({_cell(m['kind'])}, {_cell(m['file'])}, "
                     f"{_cell(m['instrument'])}), measured {_cell(m['measured_on'])} at phantom age "
                     f"{_cell(m['phantom_age_days'])} days; fit {m['fit_id']} with {_cell(m['model'])}, "
                     f"reduced χ² {_cell(m['chi2_red'], 3)}.</p>")
        parts.append(_fit_quality_html(m))
        if m.get("anisotropy"):
            parts.append(f"<p>{html.escape(m['anisotropy'])}.</p>")
        for warning in m["fit_warnings"] or []:
            parts.append(f"<p class='small'>fit warning: {html.escape(str(warning))}</p>")
    checks = r["checks"]
    grid = sorted({c["wavelength_nm"] for c in checks})
    keep = {grid[i] for i in _shown(len(grid))}
    rows = [c for c in checks if c["wavelength_nm"] in keep or c.get("outcome") == "FAIL" or c["pass"] is False]
    parts.append(_table(
        ["quantity", "λ [nm]", "target [1/mm]", "predicted from actual amounts ± SD [1/mm]",
         "measured [1/mm]", "SD [1/mm]", "deviation [%]", "tolerance [±%]", "result"],
        [[c["quantity"].replace("musp", "μs′").replace("mua", "μa"), c["wavelength_nm"], c["target_per_mm"],
          _with_sd(c.get("predicted_from_actual_per_mm"), c.get("predicted_from_actual_sd_per_mm")),
          c["measured_per_mm"], c["measured_sd_per_mm"], _percent(c["deviation_percent"]),
          c["tolerance_percent"], c.get("outcome") or {True: "PASS", False: "FAIL", None: "–"}[c["pass"]]]
         for c in rows],
        classes=[{"PASS": "pass", "FAIL": "fail"}.get(c.get("outcome") or {True: "PASS", False: "FAIL"}.get(c["pass"]), "")
                 for c in rows], css="nowrap",
    ))
    parts.append("<p class='small'>Deviation: measured against target. Result: PASS when the deviation "
                 "plus 2 SD of the fit stays within the recipe's tolerance, FAIL when the deviation minus "
                 "2 SD leaves it, else UNDECIDED (guarded acceptance, ISO 14253-1, JCGM 106:2012)."
                 + (f" {len(keep)} of {len(grid)} wavelengths shown (every failing one included); the "
                    "JSON of <code>batch record --json</code> holds all." if len(keep) < len(grid) else "")
                 + "</p>")
    s = r["series"]
    batches = f"{s['batches']} batch{'es' if s['batches'] != 1 else ''} with fits"
    fits = f"{s['fits']} fit{'s' if s['fits'] != 1 else ''}"
    parts.append(f"<h2>All batches of this recipe ({batches}, {fits})</h2>")
    shown = sorted(_shown(len(s["wavelength_nm"])))
    rows = [[s["wavelength_nm"][i], _cv(s["mua_cv_percent"][i]), _cv(s["musp_cv_percent"][i]),
             _drift(s, "mua", i), _drift(s, "musp", i)] for i in shown]
    parts.append(_table(["λ [nm]", "μa CV [%]", "μs′ CV [%]", "μa drift [%/30 d] ± SE",
                         "μs′ drift [%/30 d] ± SE"], rows))
    parts.append("<p class='small'>CV: sample SD / mean of each batch's newest fit (needs 2 batches); "
                 "drift: least-squares slope against phantom age over every fit (needs 3 aged fits).</p>")
    waves = [s["wavelength_nm"][i] for i in shown]
    parts.append(_table(["batch", "fit", "age [days]", "newest"] + [f"μa {w:g} nm" for w in waves]
                        + [f"μs′ {w:g} nm" for w in waves],
                        [[p["batch_id"], p["fit_id"], p["phantom_age_days"], p["newest"],
                          *[p["mua_per_mm"][i] for i in shown], *[p["musp_per_mm"][i] for i in shown]]
                         for p in s["points"]], css="wide nowrap"))
    parts += [
        "<h2>History of this record</h2>",
        _table(["version", "recorded", "by", "status", "retracted", "change"],
               [[h["version"], h["recorded_at"], h["recorded_by"], h["status"], h["retracted"],
                 h["change_note"] or "recorded"] for h in r["history"]]),
        "<h2>Review</h2>",
        "<table class='sign'><tr><th>reviewed by</th><td></td><th>date</th><td></td></tr>"
        "<tr><th>decision (release / remake / retire)</th><td></td><th>signature</th><td></td></tr></table>",
        f"<p class='caution'>{html.escape(r['not_a_standard'])}</p>",
        "</body></html>",
    ]
    return "\n".join(parts)


def _fit_quality_html(measurement: dict[str, Any]) -> str:
    """The fit's verdict as one paragraph: a caution for poor or failed, small print for good."""
    quality = measurement.get("fit_quality")
    if quality is None:
        return "<p class='small'>fit quality: not assessed (fit stored by an earlier version)</p>"
    reason = html.escape(str(measurement.get("fit_quality_reason") or ""))
    includes = ", ".join(str(part).replace("_", " ") for part in measurement.get("sd_includes") or [])
    sds = f" SDs include: {html.escape(includes)}." if includes else ""
    if quality == "good":
        return f"<p class='small'>Fit quality good: {reason}.{sds}</p>"
    head = "Fit quality POOR" if quality == "poor" else "Fit quality FAILED"
    return f"<p class='caution'><strong>{head}</strong>: {reason}.{sds}</p>"


def _with_sd(value: float | None, sd: float | None) -> str | None:
    if value is None:
        return None
    return f"{value:.4g}" + (f" ± {sd:.2g}" if sd is not None else "")


def _cv(value: float | None) -> str | None:
    return None if value is None else f"{value:.2f}"


def _percent(value: float | None) -> str | None:
    if value is None or not math.isfinite(value):
        return None
    return "0.0" if round(value, 1) == 0 else f"{value:+.1f}"


def _drift(series: dict[str, Any], name: str, i: int) -> str | None:
    value = series[f"{name}_drift_percent_per_30_days"][i]
    se = series[f"{name}_drift_se_percent_per_30_days"][i]
    if value is None:
        return None
    return f"{value:+.2f} ± {se:.2f}" if se is not None else f"{value:+.2f}"
