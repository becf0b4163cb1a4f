"""The bench record of one batch on the page (layer 5): what the mixing sheet asks to write down.

The form follows the sheet line by line, in its order and rounding
(:func:`phantomlab.recipe.dispensed.bench_lines`): the pre-dilutions as made (actual taken,
actual diluent), the matrix lines and the doses as dispensed — by volume or by mass (a mass
of a stock becomes volume through the stock's density, as ``mass_g`` does in the amounts
CSV) — when and how the batch was mixed (date, time, temperature, cure or setting
schedule) and who recorded it.  The typed lines become the rows ``phantomlab batch actual``
reads from its amounts CSV, and the same workflow stores them
(:func:`phantomlab.workflows.record_dispensed`), so the page and the command line store the
same thing.

One submit, one record: a form's key holds the batch version it was drawn for.  Once the
record is written the batch has a new version, so a second click on the same button (a
double click, a slow network) reaches a form that no longer exists and records nothing.
"""

from __future__ import annotations

import datetime as _dt
from typing import Mapping

import pandas as pd
import streamlit as st

from phantomlab.errors import InputError
from phantomlab.ui.plain_text import plain
from phantomlab.ui.widgets import call_layer
from phantomlab.ui.workspace import Workspace

__all__ = ["amounts_form", "batch_record_download", "by_field", "form_rows", "recorded_amounts_table",
           "recorded_predilutions_table", "mixing_summary",
           "remember_by", "shown_notice", "set_notice"]

#: Where the name last typed in a "By" field is kept, to pre-fill the next one.
BY_KEY = "bench.by"
#: Longest name accepted in a "By" field [characters].
MAX_NAME_CHARS = 80


# ---- who ---------------------------------------------------------------------------------------


def by_field(key: str, *, container=None, label: str = "By (name or initials)") -> str:
    """A "By" field pre-filled with the name last used on the page; returns the name typed."""
    place = container if container is not None else st
    if key not in st.session_state and st.session_state.get(BY_KEY):
        st.session_state[key] = st.session_state[BY_KEY]
    return place.text_input(label, key=key, max_chars=MAX_NAME_CHARS,
                            help="Kept in the batch's history with this change.").strip()


def remember_by(name: str) -> None:
    """Keep the name for the next "By" field (after a change was recorded)."""
    if name:
        st.session_state[BY_KEY] = name


# ---- notices next to the button ----------------------------------------------------------------


def set_notice(where: str, text: str) -> None:
    """Keep a success line to show next to the button ``where`` after the rerun."""
    st.session_state[f"bench.notice.{where}"] = text


def shown_notice(where: str, *, container=None) -> None:
    """Show (once) the success line kept for ``where``."""
    text = st.session_state.pop(f"bench.notice.{where}", None)
    if text:
        (container if container is not None else st).success(plain(text))


# ---- the form's lines into rows ------------------------------------------------------------------


def form_rows(lines, typed: Mapping[str, str]) -> tuple[list[dict], list[str]]:
    """Turn what was typed against the sheet's lines into the amounts rows of ``batch actual``.

    Parameters
    ----------
    lines : list of BenchLine
        :func:`phantomlab.recipe.dispensed.bench_lines` of the batch's plan.
    typed : mapping
        Text per field: ``name`` for a matrix line or dose, ``name + ".taken"`` and
        ``name + ".diluent"`` for a pre-dilution step.

    Returns
    -------
    rows, refusals : list of dict, list of str
        The rows (:func:`phantomlab.recipe.dispensed.parse_amounts_csv` layout) and one line per
        field that could not be read.  An empty matrix line means "as planned" (as the amounts
        CSV without a matrix row); a pre-dilution left empty is taken as planned; an empty
        dose is refused (0 for a stock left out).
    """
    from phantomlab.units import parse_amount  # layer 0

    rows: list[dict] = []
    refusals: list[str] = []
    made_steps: set[str] = set()
    for line in lines:
        if line.kind != "predilution":
            continue
        taken, diluent = (str(typed.get(f"{line.name}.{part}", "") or "").strip() for part in ("taken", "diluent"))
        if not taken and not diluent:
            continue
        if not (taken and diluent):
            refusals.append(f"pre-dilution {line.name}: give both the actual taken and the actual diluent, "
                            "or neither (the planned dilution is then used)")
            continue
        try:
            taken_value, taken_unit = parse_amount(taken)
            diluent_value, diluent_unit = parse_amount(diluent)
        except InputError as exc:
            refusals.append(f"pre-dilution {line.name}: {exc}")
            continue
        if taken_unit != line.unit or diluent_unit != line.unit:
            what = "volume (µL, mL)" if line.unit == "mL" else "mass (mg, g)"
            refusals.append(f"pre-dilution {line.name} is made by {what}: give the actual taken and diluent "
                            f"in {'µL or mL' if line.unit == 'mL' else 'mg or g'}")
            continue
        amount_key, diluent_key = ("volume_ml", "diluent_ml") if line.unit == "mL" else ("mass_g", "diluent_g")
        rows.append({"stock": line.name, amount_key: taken_value, diluent_key: diluent_value})
        made_steps.add(line.stock)
    for line in lines:
        if line.kind == "predilution":
            continue
        text = str(typed.get(line.name, "") or "").strip()
        if not text and line.kind == "matrix":
            continue
        try:
            value, unit = parse_amount(text)
        except InputError as exc:
            refusals.append(f"{line.name}: {exc}")
            continue
        row = {"stock": line.name, "volume_ml" if unit == "mL" else "mass_g": value}
        if line.kind == "dose" and line.stock not in made_steps:
            row["dilution_factor"] = line.dilution_factor  # of what the sheet dispenses it from
        rows.append(row)
    return rows, refusals


# ---- the form --------------------------------------------------------------------------------------


def _typed(prefix: str, lines) -> dict[str, str]:
    typed = {}
    for line in lines:
        names = (f"{line.name}.taken", f"{line.name}.diluent") if line.kind == "predilution" else (line.name,)
        for name in names:
            typed[name] = st.session_state.get(f"{prefix}.{name}", "")
    return typed


def _predilution_fields(prefix: str, steps) -> None:
    st.markdown("**Pre-dilutions as made** (as the sheet's table; leave both empty if made as planned)")
    for step in steps:
        left, right = st.columns(2)
        left.text_input(f"{step.name} actual taken (sheet {step.amount_text} of {step.source})",
                        key=f"{prefix}.{step.name}.taken")
        right.text_input(f"{step.name} actual diluent (sheet {step.diluent_text} {step.diluent})",
                         key=f"{prefix}.{step.name}.diluent")


def _amount_fields(prefix: str, amounts) -> None:
    st.markdown("**Amounts into the batch** (as the sheet's lines; by volume or by mass, with the unit)")
    column, _ = st.columns([3, 2])  # one line under the other, as on the sheet
    for line in amounts:
        where = "" if line.kind == "matrix" else f" from {line.source}"
        column.text_input(
            f"{line.number} · {line.label}{where}: sheet {line.amount_text} {line.tolerance_text}".strip(),
            key=f"{prefix}.{line.name}",
            help=("Empty: the matrix as planned." if line.kind == "matrix" else
                  "A mass (g, mg) of the stock is turned into volume with the stock's density; "
                  "0 mL for a stock left out."),
        )


def _mixing_fields(prefix: str) -> None:
    st.markdown("**How it was mixed**")
    c1, c2, c3 = st.columns(3)
    today = _dt.date.today()
    c1.date_input("Mixed on", value=today, min_value=_dt.date(1900, 1, 1), max_value=today,
                  key=f"{prefix}.mixed_on")
    c2.text_input("Mixing time (HH:MM, 24 h; optional)", key=f"{prefix}.mixing_time", placeholder="HH:MM")
    c3.text_input("Mixing temperature (with unit: 21 °C; optional)", key=f"{prefix}.temperature",
                  placeholder="e.g. 21 °C")
    c4, c5 = st.columns([2, 1])
    c4.text_input("Cure or setting schedule as done (optional)", key=f"{prefix}.cure",
                  placeholder="e.g. 24 h at 21 °C", max_chars=200)
    by_field(f"{prefix}.by", container=c5)
    st.text_input("Notes (optional; added to the batch's notes)", key=f"{prefix}.notes", max_chars=500)


def amounts_form(workspace: Workspace, store, batch: dict) -> None:
    """The sheet's lines to fill in as dispensed, how it was mixed, and one button to record them."""
    from phantomlab.recipe.dispensed import bench_lines  # layer 3
    from phantomlab.ui.recording import record_dispensed

    code = batch["code"]
    st.markdown("**What was dispensed** — type what went into the batch, line by line as on the sheet, "
                "each with its unit.")
    if batch["status"] not in ("planned", "mixed") or batch["retracted"]:
        st.caption(f"The batch is {batch['status']}: amounts are recorded while it is planned or mixed.")
        shown_notice(f"amounts.{code}")
        return
    lines = bench_lines(batch["plan"])
    if not any(line.kind == "dose" for line in lines):
        st.info("The plan of this batch doses no stock.")
        return
    prefix = f"bench.{code}.v{batch['version']}"  # a new version after each record: a new form
    steps = [line for line in lines if line.kind == "predilution"]
    with st.form(f"{prefix}.form", border=True):
        if steps:
            _predilution_fields(prefix, steps)
        _amount_fields(prefix, [line for line in lines if line.kind != "predilution"])
        _mixing_fields(prefix)
        label = "Record the amounts" if not batch["actual_amounts"] else "Record corrected amounts"
        pressed = st.form_submit_button(label, type="primary")
    shown_notice(f"amounts.{code}")
    if not pressed:
        return
    rows, refusals = form_rows(lines, _typed(prefix, lines))
    temperature = str(st.session_state.get(f"{prefix}.temperature", "")).strip()
    temperature_c = None
    if temperature:
        from phantomlab.units import parse_quantity

        try:
            temperature_c = parse_quantity(temperature, "temperature")
        except InputError as exc:
            refusals.append(f"mixing temperature: {exc}")
    if refusals:
        for line in refusals:
            st.error(plain(line))
        st.caption("Nothing was recorded. Give every dose with its unit (0 mL for a stock left out).")
        return
    by = str(st.session_state.get(f"{prefix}.by", "")).strip()
    outcome = call_layer(
        "Recording the amounts", record_dispensed, store, code, rows, recorded_by=by or None,
        recipes_folder=workspace.recipes_folder, mixed_on=st.session_state.get(f"{prefix}.mixed_on"),
        mixing_time=str(st.session_state.get(f"{prefix}.mixing_time", "")).strip() or None,
        cure=str(st.session_state.get(f"{prefix}.cure", "")).strip() or None,
        mixing_temperature_c=temperature_c,
        notes=str(st.session_state.get(f"{prefix}.notes", "")).strip() or None,
    )
    if outcome.ok:
        done = outcome.value
        remember_by(by)
        verdict = ("within the recipe tolerance" if not done.alarms
                   else f"{len(done.alarms)} alarm{'s' if len(done.alarms) != 1 else ''}: see below")
        set_notice(f"amounts.{code}", f"Amounts of batch {code} recorded (version {done.version}"
                   + (f", by {by}" if by else "") + f"); {verdict}.")
        st.rerun()


# ---- what was recorded ------------------------------------------------------------------------------


def _amount_text(value, unit: str) -> str:
    from phantomlab.recipe.procedure import format_amount  # layer 3

    return "" if value is None else format_amount(float(value), unit)


def recorded_amounts_table(batch: dict) -> pd.DataFrame:
    """The amounts as recorded: as given, what of, as undiluted stock, planned."""
    rows = []
    for item in batch.get("actual_amounts") or []:
        given = item.get("given") or {}
        if "lines" in given:
            as_given = "; ".join(
                f"{name.split(':', 1)[-1]} " + ", ".join(_amount_text(v, "mL" if k == "volume_ml" else "g")
                                                         for k, v in amount.items())
                for name, amount in given["lines"].items())
        else:
            as_given = ", ".join(_amount_text(v, "mL" if k == "volume_ml" else "g") for k, v in given.items())
        factor = float(item.get("dilution_factor") or 1.0)
        made = item.get("predilution") or []
        rows.append({
            "line": item["stock"],
            "as given": as_given,
            "of": (f"{made[-1]['step']} (1 in {factor:.4g} as made)" if made else
                   f"pre-dilution 1 in {factor:.4g}" if factor > 1 else
                   "matrix + carried diluent" if "carried_diluent_volume_ml" in item else "stock"),
            "undiluted [mL]": _amount_text(item.get("volume_ml"), "mL"),
            "undiluted [g]": _amount_text(item.get("mass_g"), "g"),
            "planned [mL]": _amount_text(item.get("planned_volume_ml"), "mL"),
        })
    return pd.DataFrame(rows)


def recorded_predilutions_table(batch: dict) -> pd.DataFrame:
    """The pre-dilutions as made (actual taken, actual diluent), against the plan."""
    rows = []
    for item in batch.get("actual_amounts") or []:
        for step in item.get("predilution") or []:
            rows.append({"pre-dilution": step["step"], "of": step["source"],
                         "actual taken": _amount_text(step["taken"], step["unit"]),
                         "actual diluent": _amount_text(step["diluent"], step["unit"]),
                         "planned": f"1 in {1.0 / step['planned_share']:.4g}",
                         "made": f"1 in {1.0 / step['share']:.4g}"})
    return pd.DataFrame(rows)


def mixing_summary(batch: dict) -> str:
    """One line: when, at what temperature and how the batch was mixed and cured."""
    cure = batch.get("cure_details") or {}
    parts = []
    if batch.get("mixed_on"):
        parts.append(f"mixed {batch['mixed_on']}" + (f" {cure['mixing_time']}" if cure.get("mixing_time") else ""))
    if cure.get("mixing_temperature_c") is not None:
        parts.append(f"at {cure['mixing_temperature_c']:g} °C")
    if cure.get("schedule"):
        parts.append(f"cure: {cure['schedule']}")
    return " · ".join(parts)


# ---- the batch record ----------------------------------------------------------------------------


@st.cache_data(show_spinner=False, max_entries=32)
def _batch_record(database_url: str, code: str, fingerprint: str) -> tuple[str, str | None]:
    """The batch record as printed (HTML) and its verdict, per state of the log (``fingerprint``)."""
    from phantomlab.store.record import batch_record, render_batch_record_html  # layer 4
    from phantomlab.ui.services import _open_store

    with _open_store(database_url).reading() as session:
        record = batch_record(session, code)
    outcome = record.get("outcome") or {True: "PASS", False: "FAIL", None: None}[record["pass"]]
    return render_batch_record_html(record), outcome


VERDICTS = {"PASS": "PASS: every targeted value within tolerance (at 2 SD)",
            "FAIL": "FAIL: at least one targeted value outside tolerance (at 2 SD)",
            "UNDECIDED": "UNDECIDED: none outside tolerance, but the SD is too wide to show every value inside",
            None: "not decided yet: no fitted measurement"}


def batch_record_download(workspace: Workspace, batch: dict, *, fingerprint: str) -> None:
    """The batch record (HTML: PASS/FAIL/UNDECIDED per wavelength, history, the review sign-off) to download.

    ``fingerprint`` names the state of the log the record depends on (this batch's version,
    measurements and fits, and the other batches of its recipe); the record is built once per
    state.
    """
    code = batch["code"]
    outcome = call_layer("Building the batch record", _batch_record, workspace.database_url, code, fingerprint)
    if not outcome.ok:
        return
    html, verdict = outcome.value
    left, right = st.columns(2, vertical_alignment="center")
    left.download_button(f"Download the batch record of {code} (HTML)", data=html.encode("utf-8"),
                         file_name=f"batch-record-{code}.html", mime="text/html", key=f"bench.record.{code}",
                         on_click="ignore",
                         help="The printable review record, as `phantomlab batch record` writes it: planned and "
                              "actual amounts, measured against target with PASS/FAIL, history, sign-off.")
    shown = {"PASS": right.success, "FAIL": right.error, "UNDECIDED": right.warning}.get(verdict, right.info)
    shown(f"Batch record: {VERDICTS[verdict]}")
