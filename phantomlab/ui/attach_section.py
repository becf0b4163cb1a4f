"""Batch log, tab "Measurements": attach a measurement file to a batch, fitted on the way in.

The form (file, sidecar, IRF for td; n, thickness, day measured, instrument, who) is drawn
whichever tab of the batch is open (what is uploaded lives in the browser until sent); the
fit runs through :func:`phantomlab.ui.recording.attach_measurement` (the workflow
``batch measure`` uses), its verdict against the recipe's tolerances is shown beside the
form, and the demo's invented probe file is offered under it while the tab is open.
"""

from __future__ import annotations

import datetime as _dt

import pandas as pd
import numpy as np
import streamlit as st

from phantomlab.ui.plain_text import plain
from phantomlab.ui.widgets import call_layer
from phantomlab.ui.workspace import Workspace

__all__ = ["KINDS", "demo_download", "fit_verdict_json", "measure_section", "show_verdict"]

KINDS = ("srdr", "sfdi", "slab", "sphere", "optics", "td", "fd")
KIND_HELP = {
    "srdr": "wavelength_nm,rho_mm,reflectance_per_mm2[,sd] (or reflectance_relative)",
    "sfdi": "wavelength_nm,fx_per_mm,reflectance[,sd]",
    "slab": "wavelength_nm,total_reflectance,total_transmittance[,sd_r,sd_t]",
    "optics": "wavelength_nm,mua_per_mm,musp_per_mm[,mua_sd_per_mm,musp_sd_per_mm]",
    "td": "wavelength_nm,rho_mm,time_ps,counts (+ the IRF file time_ps,counts)",
    "fd": "wavelength_nm,rho_mm,frequency_mhz,amplitude,phase_deg[,amplitude_sd,phase_sd_deg]",
}


@st.cache_data(show_spinner=False, max_entries=16)
def _demo_measurement(database_url: str, code: str, version: int) -> str:
    """The demo's invented measurement of a batch, made once per batch version."""
    from phantomlab.ui.demo import demo_measurement_csv
    from phantomlab.ui.services import _open_store

    return demo_measurement_csv(_open_store(database_url), code)


def demo_download(workspace: Workspace, batch: dict) -> None:
    """Demo only: an invented probe file of what was dispensed, to attach with the form above.

    Drawn after the form and only while the Measurements tab is open (inventing it costs a
    forward model run; the form itself is drawn whichever tab is open)."""
    if not (workspace.is_demo and batch["actual_amounts"]):
        return
    made = call_layer("Inventing a demo measurement", _demo_measurement, workspace.database_url,
                      batch["code"], batch["version"], show=False)
    if not made.ok:  # a batch of other scatterers (g outside the demo emulsion's table): said, not an error box
        st.caption(f"Demo only: no invented probe measurement of this batch. {made.error}")
    else:
        st.download_button(
            "Demo only: download an invented probe measurement of this batch (srdr CSV, n = 1.33)",
            data=made.value.encode("utf-8"), file_name=f"demo-measurement-{batch['code']}.csv",
            mime="text/csv", key="batches.demo_measurement", on_click="ignore",
            help="Synthetic R(ρ) of what was dispensed (invented true potencies; Monte Carlo light of the demo "
                 "emulsion at the batch's g per wavelength, from a shipped table; 2 % noise): attach it "
                 "with the form above to try the loop.")


def measure_section(workspace: Workspace, store, batch: dict) -> None:
    from phantomlab.calibration.fit_file import FIT_MODELS  # layer 3
    from phantomlab.ui.recording import attach_measurement

    st.markdown("**Attach a measurement** — the file is fitted on the way in and kept byte for byte.")
    if batch["retracted"]:
        st.caption("The batch is retracted: measurements cannot be attached.")
        return
    c1, c2, c3 = st.columns(3)
    kind = c1.selectbox("Kind of measurement", KINDS, key="batches.kind",
                        help="srdr: fibre probe R(ρ); sfdi: camera R(fx); slab: integrating sphere R, T; "
                             "optics: μa and μs′ from another instrument; td: time-resolved histograms "
                             "with their IRF; fd: AC amplitude and phase")
    model = c2.selectbox("Fit model", FIT_MODELS[kind], key=f"batches.model.{kind}")
    c3.caption(f"Columns: `{KIND_HELP[kind]}`")
    from phantomlab.ui.bench_record import by_field, remember_by, set_notice, shown_notice

    # the number of measurements in the key: once attached, a second click reaches no form
    with st.form(f"batches.measure.{batch['code']}.{len(batch['measurements'])}", clear_on_submit=True):
        upload = st.file_uploader("Measurement file (CSV)", type=["csv"], key="batches.file")
        sidecar = st.file_uploader("Its metadata file (TOML, optional: n, thickness, instrument, reference; "
                                   "sphere: the [sphere] table with the standard inline)",
                                   type=["toml"], key="batches.sidecar")
        irf_file = st.file_uploader("td only: its instrument response (IRF CSV: time_ps,counts)", type=["csv"],
                                    key="batches.irf")
        d1, d2, d3, d4 = st.columns(4)
        n = d1.number_input("Phantom refractive index n [dimensionless]", min_value=1.0, max_value=3.0,
                            value=1.33, step=0.01, key="batches.n")
        thickness = d2.number_input("Slab thickness [mm] (slab, sphere)", min_value=0.0, value=0.0, step=0.1,
                                    key="batches.thickness")
        measured_on = d3.date_input("Measured on", value=_dt.date.today(), key="batches.measured_on")
        instrument = d4.text_input("Instrument", key="batches.instrument")
        e1, e2 = st.columns([1, 3], vertical_alignment="bottom")
        by = by_field("batches.measure_by", container=e1)
        pressed = e2.form_submit_button("Fit and attach", type="primary")
    shown_notice(f"measure.{batch['code']}")
    verdict = st.session_state.get("batches.verdict")
    if verdict and verdict.get("code") == batch["code"]:  # next to the button, once
        show_verdict(st.session_state.pop("batches.verdict"))
    if not pressed:
        return
    if upload is None:
        st.error("Measurement file: choose a CSV file first.")
        return
    options = {"n": n, "thickness_mm": thickness if thickness > 0 else None}
    sidecar_text = sidecar.getvalue().decode("utf-8", "replace") if sidecar is not None else None
    if kind == "td":
        if irf_file is None and "irf" not in (sidecar_text or ""):
            st.error("A td measurement needs its instrument response: add the IRF file.")
            return
        if irf_file is not None:
            from phantomlab.ui.refit_page import _irf_inline

            inline = call_layer("Reading the IRF file", _irf_inline, irf_file.getvalue(), irf_file.name)
            if not inline.ok:
                return
            sidecar_text = _with_irf(sidecar_text, inline.value)
    if model == "mc" and kind in ("srdr", "sfdi", "td", "fd") and not _baseline_ready(store, batch, kind, upload,
                                                                                    sidecar, n):
        return
    if model == "mc" and kind in ("td", "fd"):
        model = None  # the default fit: the lookup where it applies, else diffusion with a note saying why
    with st.spinner("Fitting the measurement…"):
        outcome = call_layer(
            "Attaching the measurement", attach_measurement, store, batch["code"], kind=kind,
            file_name=upload.name, raw_content=upload.getvalue(),
            sidecar_toml=sidecar_text,
            model=model, measured_on=measured_on,  # the phantom age: days since mixing
            instrument=instrument.strip() or None, options=options, recorded_by=by or None,
        )
    if outcome.ok:
        measurement_id, result = outcome.value
        remember_by(by)
        set_notice(f"measure.{batch['code']}",
                   f"Measurement {upload.name} attached to batch {batch['code']} (id {measurement_id}) and fitted "
                   f"with {result.model}, reduced χ² {result.chi2_red:.3g}; fit quality {result.fit_quality}"
                   + (" — the model does not describe these data (see Fit and correct)."
                      if result.fit_quality == "poor" else "."))
        verdict = call_layer("Judging the batch", fit_verdict_json, store, batch["code"], result, show=False)
        if verdict.ok:
            st.session_state["batches.verdict"] = verdict.value
        st.rerun()


def fit_verdict_json(store, code: str, result) -> dict:
    """The verdict of a fit against the batch's tolerances (:func:`phantomlab.measurement_workflow.fit_verdict`,
    as ``batch measure`` prints it), with its lines for the page."""
    from phantomlab.jsonable import to_jsonable
    from phantomlab.measurement_workflow import fit_verdict

    verdict = fit_verdict(store, code, to_jsonable(result.to_json()))
    return {"code": code, **verdict.to_json(), "lines": verdict.lines(what="measured")}


def show_verdict(verdict: dict) -> None:
    """PASS / FAIL / UNDECIDED per targeted value, right after "Fit and attach"."""
    heading = {"PASS": st.success, "FAIL": st.error, "UNDECIDED": st.warning}.get(verdict["outcome"], st.info)
    heading(plain(f"Batch {verdict['code']} against its recipe's tolerances: {verdict['lines'][-1]}"))
    rows = [{"quantity": r["quantity"].replace("musp", "μs′").replace("mua", "μa"), "λ [nm]": r["wavelength_nm"],
             "measured vs target [%]": r["deviation_percent"], "± SD [%]": r["sd_percent"],
             "tolerance [±%]": r["tolerance_percent"], "verdict": r["outcome"] or "–"}
            for r in verdict["per_wavelength"]]
    st.dataframe(pd.DataFrame(rows), hide_index=True, width="stretch",
                 column_config={"measured vs target [%]": st.column_config.NumberColumn(format="%+.1f"),
                                "± SD [%]": st.column_config.NumberColumn(format="%.1f")})
    st.caption("PASS when the deviation plus 2 SD of the fit stays within tolerance, FAIL when the deviation "
               "minus 2 SD leaves it, else UNDECIDED (the same rule as the batch record).")


def _with_irf(sidecar_text: str | None, irf: dict) -> str:
    """The uploaded sidecar TOML with the IRF written in as its ``[irf]`` table."""
    import tomllib

    import tomli_w

    try:
        table = tomllib.loads(sidecar_text) if sidecar_text else {}
    except tomllib.TOMLDecodeError:
        return sidecar_text or ""  # the workflow refuses the unreadable file in one line
    table["irf"] = irf
    return tomli_w.dumps(table)


def _baseline_ready(store, batch: dict, kind: str, upload, sidecar, n: float) -> bool:
    """Make sure the cached Monte Carlo baseline the default fit will use exists (built with progress)."""
    import tomllib

    from phantomlab.calibration import read_measurement  # layer 3
    from phantomlab.calibration.baseline_cache import DEFAULT_G
    from phantomlab.calibration.band_g import lookup_g_values
    from phantomlab.ui.baseline_build import page_baseline
    from phantomlab.measurement_workflow import batch_anisotropy

    try:
        table = tomllib.loads(sidecar.getvalue().decode("utf-8", "replace")) if sidecar is not None else {}
    except tomllib.TOMLDecodeError:
        return True  # the attach refuses the metadata itself, in one line
    read = call_layer("Reading the measurement", read_measurement, upload.getvalue().decode("utf-8", "replace"),
                      kind=kind, sidecar=table, show=False)
    if not read.ok:
        return True  # the attach names what is wrong with the file
    found = call_layer("Reading the batch's scattering model", batch_anisotropy, store, batch["code"],
                       wavelength_nm=read.value.wavelength_nm, per_wavelength=kind in ("srdr", "sfdi"), show=False)
    fallback = found.value if found.ok else None
    if kind == "td" and table.get("geometry") == "transmittance":
        # the Monte Carlo slab model: its first slab runs, with progress (the fit finds them cached)
        from phantomlab.ui.baseline_build import page_slab_nodes

        batch_g = fallback[0] if fallback is not None and np.ndim(fallback[0]) == 0 else DEFAULT_G
        return page_slab_nodes(measurement=read.value, g=float(table.get("g", batch_g)), key="batches.slab")
    if kind == "td" and table.get("thickness_mm") is not None:
        return True  # the lookup does not apply: the default fit uses diffusion and says so
    # one g, or one per g step of the band (the batch's or the sidecar's g per wavelength)
    values = call_layer("Choosing the Monte Carlo baselines", lookup_g_values, read.value, g_fallback=fallback,
                        show=False)
    if not values.ok:
        return True  # the attach says what is wrong, in one line
    for k, g in enumerate(values.value or [DEFAULT_G]):
        cached = page_baseline(g=float(g), n=float(n), n_outside=float(table.get("n_outside", 1.0)),
                               key="batches.baseline" if k == 0 else f"batches.baseline.{k}", offer_rebuild=False, time_resolved=kind in ("td", "fd"))
        if cached is None:
            return False
    return True
