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

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui import services
from phantomlab.ui.plots import Series, line_figure, show_figure
from phantomlab.ui.widgets import call_layer, show_warnings
from phantomlab.ui.workspace import Workspace

__all__ = ["recalibrate_section", "preview_table"]

PREVIEW = "calibrate.preview"
NOTICE = "calibrate.notice"


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


def _log_choices(store) -> list[dict]:
    from phantomlab.ui.batches_page import read_log

    return [b for b in read_log(store) if not b["retracted"]]


def _preview(store) -> None:
    from phantomlab.recalibration import recalibrate

    outcome = call_layer("Previewing the recalibration", recalibrate, store)
    if outcome.ok:
        st.session_state[PREVIEW] = outcome.value.payload


def _show_preview(store, by: str) -> None:
    from phantomlab.recalibration import recalibrate

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
        st.warning(f"Outlier: {outlier['reason']}. Leave it out below if you know why.")
    show_warnings([n for n in payload["notes"] if not n.startswith("OUTLIER")])
    st.dataframe(preview_table(payload), hide_index=True, width="stretch")
    if st.button("Record this calibration", type="primary", key="calibrate.apply"):
        done = call_layer("Recording the calibration", recalibrate, store, apply=True,
                          expect_fingerprint=payload["fingerprint"], recorded_by=by.strip() or None)
        if done.ok:
            st.session_state.pop(PREVIEW, None)
            st.session_state[NOTICE] = (f"Calibration recorded (state {done.value.state_id}) from "
                                        f"{len(done.value.payload['batches'])} batch(es); reduced χ² "
                                        f"{done.value.payload['chi2_red']:.3g}. Plans now use these potencies.")
            st.rerun()


def _exclusions(store, by: str) -> None:
    from phantomlab.recalibration import exclude_batch, exclusions_in_force, include_batch

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
    which = c2.selectbox("What", options, key="calibrate.exclude_what")
    reason = c3.text_input("Why (kept in the history)", key="calibrate.exclude_reason")
    measurement_id = None if which == options[0] else int(which.split()[1])
    if st.button("Leave it out of the calibration", key="calibrate.exclude"):
        done = call_layer("Leaving it out", exclude_batch, store, code, measurement_id=measurement_id,
                          reason=reason, recorded_by=by.strip() or None)
        if done.ok:
            st.session_state.pop(PREVIEW, None)
            st.session_state[NOTICE] = (f"{which.capitalize()} of batch {code} left out of the calibration. "
                                        "Preview again to see the effect.")
            st.rerun()
    in_force = call_layer("Reading the exclusions", exclusions_in_force, store, show=False).value or []
    if in_force:
        st.markdown("**Left out now**")
        st.dataframe(pd.DataFrame([{"batch": e["batch_id"], "measurement": e["measurement_id"] or "whole batch",
                                    "reason": e["reason"], "by": e["recorded_by"] or "",
                                    "since (UTC)": e["recorded_at"]} for e in in_force]),
                     hide_index=True, width="stretch")
        labels = [f"{e['batch_id']}" + (f" measurement {e['measurement_id']}" if e["measurement_id"] else "")
                  for e in in_force]
        d1, d2 = st.columns([1, 2])
        chosen = d1.selectbox("Take back", labels, key="calibrate.include_which")
        why = d2.text_input("Why (kept in the history)", key="calibrate.include_reason")
        if st.button("Take it back into the calibration", key="calibrate.include"):
            item = in_force[labels.index(chosen)]
            done = call_layer("Taking it back", include_batch, store, item["batch_id"],
                              measurement_id=item["measurement_id"], reason=why.strip() or None,
                              recorded_by=by.strip() or None)
            if done.ok:
                st.session_state.pop(PREVIEW, None)
                st.session_state[NOTICE] = f"{chosen} is in the calibration again. Preview again to see the effect."
                st.rerun()


def _history_plot(states: list[dict], shelf) -> None:
    """Each stock lot's potency from its stock-file prior (0) through every calibration state."""
    rows = [{"calibration": n, "state": s["state_id"], "recorded at (UTC)": s["recorded_at"],
             "stock": p["stock"], "lot": p["lot"] or "", "potency": p["potency"], "potency_sd": p["potency_sd"]}
            for n, s in enumerate(states, start=1) for p in s["potencies"]]
    if not rows:
        st.caption("No calibration recorded yet.")
        return
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
    show_figure(figure, table=frame, file_stem="potency-history", key="calibrate.history")


def _history(workspace: Workspace, store, by: str) -> None:
    from phantomlab.recalibration import calibration_list, use_calibration

    st.markdown("**Recorded calibrations**")
    found = call_layer("Reading the calibrations", calibration_list, store)
    states = found.value or []
    shelf = call_layer("Reading the shelf", services.load_page_shelf, workspace, store, show=False).value
    _history_plot(states, shelf[0] if shelf else None)
    if not states:
        return
    st.dataframe(pd.DataFrame([{
        "state": s["state_id"], "recorded at (UTC)": s["recorded_at"], "by": s["recorded_by"] or "",
        "from": (f"rollback to state {s['restores_state_id']}" if s["restores_state_id"]
                 else f"{len(s['batches'])} batch(es)" + (f", {len(s['excluded'])} left out" if s["excluded"] else "")),
        "current": "yes" if s["current"] else "",
        "potencies": "; ".join(f"{p['stock']} {p['potency']:.3f} ± {p['potency_sd']:.3f}" for p in s["potencies"]),
    } for s in states]), hide_index=True, width="stretch")
    earlier = [s["state_id"] for s in states if not s["current"]]
    if earlier:
        c1, c2 = st.columns([1, 2])
        chosen = c1.selectbox("Make an earlier state current again", earlier, index=len(earlier) - 1,
                              key="calibrate.use_state")
        note = c2.text_input("Why (kept with the new state)", key="calibrate.use_note")
        if st.button("Roll back to this state", key="calibrate.use"):
            done = call_layer("Rolling back", use_calibration, store, chosen, note=note.strip() or None,
                              recorded_by=by.strip() or None)
            if done.ok:
                st.session_state.pop(PREVIEW, None)
                st.session_state[NOTICE] = (f"Calibration state {chosen} is current again (recorded as state "
                                            f"{done.value['state_id']}); plans now use its potencies.")
                st.rerun()


def recalibrate_section(workspace: Workspace, store) -> None:
    st.subheader("Recalibrate the stocks")
    st.caption("Every characterised batch (amounts dispensed + a fitted measurement) informs the potency of "
               "the stock lots it used; the stock file's potency and SD are the prior. Preview first: "
               "nothing is recorded until you confirm.")
    notice = st.session_state.pop(NOTICE, None)
    if notice:
        st.success(notice)
    by = st.text_input("Recorded by", key="calibrate.by")
    if st.button("Preview the recalibration", type="primary", key="calibrate.run"):
        with st.spinner("Updating the potencies…"):
            _preview(store)
    _show_preview(store, by)
    _exclusions(store, by)
    _history(workspace, store, by)
