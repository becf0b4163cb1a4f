"""The recalibration half of "Fit and correct" (layer 5): preview, confirm, exclusions, rollback.

Every action is a call of :mod:`phantomlab.recalibration`, the functions the command line
runs (``recalibrate`` / ``--apply``, ``batch exclude|include``, ``calibration list|use``):

* **Preview**: each stock lot's potency now → after ± SD, its spectral correction, the
  batches that moved it (shift, and how far leaving the batch out moves it), χ²ᵣ, the Birge
  widening and the outliers.  Nothing is recorded;
* **Record this calibration**: records exactly what was previewed (refused when the log
  changed since — preview again);
* **Leave out / take back** a batch or one measurement, with a reason kept in the history;
* **History**: every calibration state, the potency of each lot across them, and a rollback
  that makes an earlier state current again (a new state pointing at it).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui import services
from phantomlab.ui.plain_text import plain
from phantomlab.ui.page_cache import cached_on, log_state
from phantomlab.ui.plots import Chart, Series, line_figure, show_chart
from phantomlab.ui.widgets import call_layer, show_warnings
from phantomlab.ui.workspace import Workspace

__all__ = ["recalibrate_section", "preview_table"]

PREVIEW = "calibrate.preview"
NOTICE = "calibrate.notice"
ERROR = "calibrate.error"


def _act(what: str, function, *args, forget_preview: bool = True, message=None, keep=None, **kwargs) -> None:
    """A button's callback: run the workflow before the page is drawn again (the tab stays open).

    The one-line refusal or the notice is kept for the section to show; ``keep`` stores the
    result under that session key; a write forgets the preview, which no longer holds.
    """
    outcome = call_layer(what, function, *args, show=False, **kwargs)
    if not outcome.ok:
        st.session_state[ERROR] = outcome.error
        return
    if forget_preview:
        st.session_state.pop(PREVIEW, None)
    if keep:
        st.session_state[keep] = outcome.value
    if message is not None:
        st.session_state[NOTICE] = message(outcome.value)


def _by() -> str | None:
    return (st.session_state.get("calibrate.by") or "").strip() or None


def preview_table(payload: dict) -> pd.DataFrame:
    """One row per stock lot that would be stored: now → after, change, spectral, movers."""
    rows = []
    for key, entry in payload["stocks"].items():
        moved = []
        for m in payload["moved_by"].get(key, []):
            z = m.get("leave_out_z")
            moved.append(f"{m['batch_id']} ({m['shift']:+.3f}" + (f", z {z:+.1f})" if z is not None else ")"))
        before = entry.get("potency_before", payload["before"][key]["potency"])
        rows.append({
            "stock": key, "lot": entry["lot"] or "",
            "potency now": f"{before:.3f} ± {entry.get('potency_sd_before', 0.0):.3f}",
            "now from": ("stock file" if entry.get("before_from") == "stock file"
                         else f"state {(entry.get('before_from') or {}).get('state_id')}"),
            "potency after": f"{entry['potency']:.3f} ± {entry['potency_sd']:.3f}",
            "change [%]": 100.0 * (entry["potency"] / before - 1.0),
            "spectral correction": (entry.get("spectral") or {}).get("text", "none"),
            "moved by (batch: shift, z left out)": "; ".join(moved) or "no batch informs it",
        })
    return pd.DataFrame(rows)


def _log_key(store) -> str:
    """The state of the log as a cache key (:func:`phantomlab.ui.page_cache.log_state`)."""
    return json.dumps(log_state(store), default=str)


def _log_choices(store) -> list[dict]:
    from phantomlab.ui.batches_page import read_log

    return [b for b in read_log(store) if not b["retracted"]]


def _payload(recalibration) -> dict:
    return recalibration.payload


def _preview(store) -> None:
    from phantomlab.recalibration import recalibrate

    _act("Previewing the recalibration", lambda: _payload(recalibrate(store)), forget_preview=False, keep=PREVIEW)


def _apply(store) -> None:
    from phantomlab.recalibration import recalibrate

    payload = st.session_state.get(PREVIEW) or {}
    _act("Recording the calibration", recalibrate, store, apply=True, expect_fingerprint=payload.get("fingerprint"),
         recorded_by=_by(),
         message=lambda done: (f"Calibration recorded (state {done.state_id}) from {len(done.payload['batches'])} "
                               f"batch(es); reduced χ² {done.payload['chi2_red']:.3g}. Plans now use these potencies."))


def _show_preview(store) -> None:
    payload = st.session_state.get(PREVIEW)
    if not payload:
        return
    st.info(f"Preview from {len(payload['batches'])} batch(es), {len(payload['fit_ids'])} fit(s)"
            + (f", {len(payload['excluded'])} left out" if payload["excluded"] else "")
            + ": nothing is recorded until you confirm.")
    c1, c2, c3 = st.columns(3)
    c1.metric("reduced χ²", "—" if payload["chi2_red"] is None else f"{payload['chi2_red']:.3g}")
    c2.metric("SDs widened by (Birge ratio)", f"× {payload['birge_ratio']:.2f}")
    c3.metric("outliers", str(len(payload["outliers"])))
    for outlier in payload["outliers"]:
        st.warning(plain(f"Outlier: {outlier['reason']}. Leave it out below if you know why."))
    show_warnings([n for n in payload["notes"] if not n.startswith("OUTLIER")])
    st.dataframe(preview_table(payload), hide_index=True, width="stretch",
                 column_config={"change [%]": st.column_config.NumberColumn(format="%+.1f")})
    st.button("Record this calibration", type="primary", key="calibrate.apply", on_click=_apply, args=(store,))


def _exclude(store, codes_measurements) -> None:
    from phantomlab.recalibration import exclude_batch

    code = st.session_state.get("calibrate.exclude_batch")
    which = st.session_state.get("calibrate.exclude_what") or "the whole batch"
    measurement_id = None if which == "the whole batch" else int(which.split()[1])
    _act("Leaving it out", exclude_batch, store, code, measurement_id=measurement_id,
         reason=st.session_state.get("calibrate.exclude_reason") or "", recorded_by=_by(),
         message=lambda done: (f"{which.capitalize()} of batch {done['batch_id']} left out of the calibration. "
                               "Preview again to see the effect."))


def _include(store, in_force, labels) -> None:
    from phantomlab.recalibration import include_batch

    chosen = st.session_state.get("calibrate.include_which")
    item = in_force[labels.index(chosen)]
    _act("Taking it back", include_batch, store, item["batch_id"], measurement_id=item["measurement_id"],
         reason=(st.session_state.get("calibrate.include_reason") or "").strip() or None, recorded_by=_by(),
         message=lambda done: f"{chosen} is in the calibration again. Preview again to see the effect.")


def _exclusions(store) -> None:
    from phantomlab.recalibration import exclusions_in_force

    st.markdown("**Leave a batch or a measurement out of the calibration** (the reason is kept)")
    found = call_layer("Reading the batch log", _log_choices, store, show=False)
    batches = found.value or []
    codes = [b["code"] for b in batches]
    if not codes:
        return
    flagged = [o["batch_id"] for o in (st.session_state.get(PREVIEW) or {}).get("outliers", [])]
    default = codes.index(flagged[0]) if flagged and flagged[0] in codes else len(codes) - 1
    c1, c2, c3 = st.columns([1, 1, 2])
    code = c1.selectbox("Batch", codes, index=default, key="calibrate.exclude_batch")
    batch = next(b for b in batches if b["code"] == code)
    options = ["the whole batch"] + [f"measurement {m['id']} ({m['file_name']})" for m in batch["measurements"]]
    c2.selectbox("What", options, key="calibrate.exclude_what")
    c3.text_input("Why (kept in the history)", key="calibrate.exclude_reason")
    st.button("Leave it out of the calibration", key="calibrate.exclude", on_click=_exclude, args=(store, None))
    in_force = call_layer("Reading the exclusions", cached_on, _log_key(store), "exclusions", exclusions_in_force,
                          store, show=False).value or []
    if in_force:
        st.markdown("**Left out now**")
        st.dataframe(pd.DataFrame([{"batch": e["batch_id"], "measurement": e["measurement_id"] or "whole batch",
                                    "reason": e["reason"], "by": e["recorded_by"] or "",
                                    "since (UTC)": str(e["recorded_at"])[:16].replace("T", " ")} for e in in_force]),
                     hide_index=True, width="stretch")
        labels = [f"{e['batch_id']}" + (f" measurement {e['measurement_id']}" if e["measurement_id"] else "")
                  for e in in_force]
        d1, d2 = st.columns([1, 2])
        d1.selectbox("Take back", labels, key="calibrate.include_which")
        d2.text_input("Why (kept in the history)", key="calibrate.include_reason")
        st.button("Take it back into the calibration", key="calibrate.include", on_click=_include,
                  args=(store, in_force, labels))


def _history_chart(states: list[dict], shelf) -> Chart | None:
    """Each stock lot's potency from its stock-file prior (0) through every calibration state."""
    rows = [{"calibration": n, "state": s["state_id"], "recorded at (UTC)": s["recorded_at"],
             "stock": p["stock"], "lot": p["lot"] or "", "potency": p["potency"], "potency_sd": p["potency_sd"]}
            for n, s in enumerate(states, start=1) for p in s["potencies"]]
    if not rows:
        return None
    frame = pd.DataFrame(rows)
    series = []
    for (stock, lot), group in frame.groupby(["stock", "lot"]):
        x = group["calibration"].to_numpy(float)
        y = group["potency"].to_numpy(float)
        sd = group["potency_sd"].to_numpy(float)
        if shelf is not None and stock in shelf and (shelf[stock].lot or "") == lot:
            prior = shelf[stock]
            x, y, sd = np.r_[0.0, x], np.r_[prior.potency, y], np.r_[prior.potency_sd, sd]
        series.append(Series(f"{stock} (lot {lot or '-'})", x, y, sd=sd, mode="lines+markers"))
    figure = line_figure(series, x_label="calibration [0 = stock file, then each recorded state]",
                         y_label="potency factor [dimensionless]",
                         title="Potency of each stock lot across calibrations")
    count = len(states)
    figure.update_xaxes(tickvals=list(range(count + 1)),
                        ticktext=["stock file"] + [f"state {s['state_id']}" for s in states])
    return Chart(figure, frame, "potency-history", "calibrate.history")


def _use(store) -> None:
    from phantomlab.recalibration import use_calibration

    chosen = st.session_state.get("calibrate.use_state")
    _act("Rolling back", use_calibration, store, chosen,
         note=(st.session_state.get("calibrate.use_note") or "").strip() or None, recorded_by=_by(),
         message=lambda done: (f"Calibration state {chosen} is current again (recorded as state {done['state_id']}); "
                               "plans now use its potencies."))


def _history(workspace: Workspace, store) -> None:
    from phantomlab.recalibration import calibration_list

    st.markdown("**Recorded calibrations**")
    key = _log_key(store)
    found = call_layer("Reading the calibrations", cached_on, key, "calibrations", calibration_list, store)
    states = found.value or []
    shelf = call_layer("Reading the shelf", services.load_page_shelf, workspace, store, show=False).value
    chart = cached_on(json.dumps([key, services.shelf_state(workspace, store) if shelf else None], default=str),
                      "history chart", _history_chart, states, shelf[0] if shelf else None)
    if chart is None:
        st.caption("No calibration recorded yet.")
    else:
        show_chart(chart)
    if not states:
        return
    st.dataframe(pd.DataFrame([{
        "state": s["state_id"], "recorded at (UTC)": str(s["recorded_at"])[:16].replace("T", " "),
        "by": s["recorded_by"] or "",
        "from": (f"rollback to state {s['restores_state_id']}" if s["restores_state_id"]
                 else f"{len(s['batches'])} batch(es)" + (f", {len(s['excluded'])} left out" if s["excluded"] else "")),
        "current": "yes" if s["current"] else "",
        "potencies": "; ".join(f"{p['stock']} {p['potency']:.3f} ± {p['potency_sd']:.3f}" for p in s["potencies"]),
    } for s in states]), hide_index=True, width="stretch")
    earlier = [s["state_id"] for s in states if not s["current"]]
    if earlier:
        c1, c2 = st.columns([1, 2])
        c1.selectbox("Make an earlier state current again", earlier, index=len(earlier) - 1, key="calibrate.use_state")
        c2.text_input("Why (kept with the new state)", key="calibrate.use_note")
        st.button("Roll back to this state", key="calibrate.use", on_click=_use, args=(store,))


def recalibrate_section(workspace: Workspace, store) -> None:
    st.subheader("Recalibrate the stocks")
    st.caption("Every characterised batch (amounts dispensed + a fitted measurement) informs the potency of "
               "the stock lots it used; the stock file's potency and SD are the prior. Preview first: "
               "nothing is recorded until you confirm.")
    st.text_input("Recorded by", key="calibrate.by")
    st.button("Preview the recalibration", type="primary", key="calibrate.run", on_click=_preview, args=(store,))
    error = st.session_state.pop(ERROR, None)
    if error:
        st.error(plain(error))
    notice = st.session_state.pop(NOTICE, None)
    if notice:
        st.success(plain(notice))
    _show_preview(store)
    _exclusions(store)
    _history(workspace, store)
