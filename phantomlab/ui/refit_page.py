"""Page "Fit and correct": refit a measurement, recalibrate the stocks, correct the next batch.

Flows:

* choose a batch and one of its measurements (or upload a file), choose the forward model
  and fit (the calibration layer); see the data with the fitted model and the normalised
  residuals (slabs and sphere readings: R, T and the collimated transmittance measured
  against the model per wavelength), and the fitted μa and μs′ (and g, when the collimated
  transmittance gives it) with their SD against the batch's target; keep the fit in the
  batch log.  The default srdr/sfdi model, the Monte Carlo lookup, takes its baseline from
  the per-user cache for g (the batch's scattering model, else the field) and n; a missing
  one is built once with a progress bar and a stop button (``baseline_build.py``); the page
  says which n, g and baseline the fit used and where they came from;
* recalibrate the stock potencies from the batch log: each factor before and after, the
  batches that moved it, and its history across calibrations;
* the corrected plan of the next batch with the calibrated potencies (sheet, save as a new
  batch), or for a liquid batch still on the bench an add-only top-up;
* the caution for lasers and bright sources used in characterisation (and for the pulsed and
  modulated sources of time- and frequency-domain systems when such a measurement is fitted);
* td and fd measurements (an uploaded td file needs its IRF file too) are shown by
  :mod:`phantomlab.ui.time_view`: histograms with model and IRF on a log time axis, amplitude
  and phase against distance.
"""

from __future__ import annotations

import time
from pathlib import Path

import numpy as np
import streamlit as st

from phantomlab.ui import refit_cache, services
from phantomlab.ui.cautions import show_light_source_caution
from phantomlab.ui.plain_text import plain
from phantomlab.ui.plots import show_chart
from phantomlab.ui.refit_figures import data_charts, result_charts
from phantomlab.ui.time_view import PULSED_SOURCES
from phantomlab.ui.widgets import call_layer, show_warnings
from phantomlab.ui.workspace import Workspace

__all__ = ["show"]

TITLE = "Fit and correct"
UPLOAD = "(upload a file, not stored)"
#: The page's tabs; only the open one runs. Its label is kept under TAB_KEY, across pages too.
TABS = ("Fit a measurement", "Recalibrate the stocks", "Correct the next batch")
TAB_KEY = "refit.tab"
#: Fields kept while their tab is closed or another page is shown (never buttons or uploads).
KEEP = (TAB_KEY, "refit.measurement", "refit.upload_kind", "refit.n", "refit.power_law", "refit.geometry",
        "refit.td_thickness", "refit.thickness", "refit.fit_g", "refit.g", "refit.td_baseline_file",
        "refit.baseline", "refit.photons", "refit.baseline_g", "refit.baseline_mus", "refit.baseline_mua",
        # the recalibrate and correct tabs: typed text and the batch chosen (not the choices
        # whose options change with what was just recorded)
        "calibrate.by", "calibrate.exclude_batch", "calibrate.exclude_reason", "calibrate.include_reason",
        "calibrate.use_note", "correct.batch")
KEEP_PREFIXES = ("refit.model.", "refit.mc_g.", "refit.shown.", "correct.topup_")


# ---- the measurement to fit -------------------------------------------------------------------


def _measurement_choices(store) -> list[dict]:
    from phantomlab.ui.batches_page import read_log

    out = []
    for batch in read_log(store):
        for m in batch["measurements"]:
            out.append({"label": f"batch {batch['code']} · {m['file_name']} ({m['kind']}, id {m['id']})",
                        "batch": batch, "measurement": m})
    return out


def _stored_model(measurement_row: dict | None, kind: str) -> str | None:
    """The model of a stored measurement's newest fit, as the model list names it (None: none stored)."""
    from phantomlab.calibration.fit_file import FIT_MODELS  # layer 3

    fits = (measurement_row or {}).get("fits") or []
    if not fits:
        return None
    newest = max(fits, key=lambda f: (f["recorded_at"], f["id"]))
    name = str(newest["model"]).removeprefix("diffusion-")
    name = "mc" if name == "mc-lookup" else name
    return name if name in FIT_MODELS[kind] else None


def _stored_file(store, measurement_id: int) -> tuple[bytes, str | None]:
    return refit_cache.stored_file(store, measurement_id)


def _read(text: str, kind: str, sidecar: dict, options: dict):
    return refit_cache.measurement_read(text, kind, sidecar, options)


def _irf_inline(raw: bytes, name: str) -> dict:
    """An uploaded IRF file as the sidecar's inline ``[irf]`` table (the td reader checks it)."""
    from phantomlab.calibration.td_measurements import irf_table, parse_irf_text  # layer 3

    times, counts, wavelengths = parse_irf_text(raw.decode("utf-8", "replace"), name=name)
    return irf_table(times, counts, wavelengths)


def _suggested_g(store, batch, measurement, sidecar: dict) -> tuple[float, str]:
    """g for the Monte Carlo baseline: the sidecar's (its band mean for a [g_spectrum]), else the
    batch's scattering model (its band mean), else the default."""
    from phantomlab.calibration.baseline_cache import DEFAULT_G  # layer 3

    if sidecar.get("g") is not None:
        return float(sidecar["g"]), "sidecar"
    spectrum = _g_per_wavelength(store, batch, measurement, sidecar)
    if spectrum is not None:
        return round(float(np.mean(spectrum[0])), 2), spectrum[1]
    if batch is not None and measurement is not None:
        found = call_layer("Reading the batch's scattering model", refit_cache.batch_g, store, batch["code"],
                           measurement.wavelength_nm, show=False)
        if found.ok and found.value is not None:
            return round(float(found.value[0]), 2), "batch"
    return DEFAULT_G, "default"


def _g_per_wavelength(store, batch, measurement, sidecar: dict):
    """g per wavelength of the measurement: the sidecar's [g_spectrum], else the batch's scattering
    model (a list and its origin), or None."""
    if measurement is None or sidecar.get("g") is not None:
        return None
    if measurement.metadata.g_spectrum is not None:
        from phantomlab.calibration.band_g import g_of_spectrum  # layer 3

        found = call_layer("Reading the sidecar's g per wavelength", g_of_spectrum, measurement, show=False)
        return ([float(v) for v in found.value], "sidecar") if found.ok else None
    if batch is None:
        return None
    found = call_layer("Reading the batch's scattering model", refit_cache.batch_g, store, batch["code"],
                       measurement.wavelength_nm, per_wavelength=True, show=False)
    return found.value if found.ok else None


def _baseline_folder(workspace: Workspace) -> Path:
    """Demo: ``demo-data/baselines``; a lab: ``phantomlab-baselines`` in the working folder."""
    if workspace.is_demo:
        folder = Path(workspace.demo_file).parent / "baselines"
    else:
        folder = Path.cwd() / "phantomlab-baselines"
    folder.mkdir(parents=True, exist_ok=True)
    return folder


def _baseline_section(workspace: Workspace, n: float):
    """Choose or build the Monte Carlo baseline for an 'mc' fit; returns a Baseline or None."""
    from phantomlab.transport.montecarlo import build_baseline, load_baseline  # layer 2

    folder = _baseline_folder(workspace)
    files = sorted(p.name for p in folder.glob("*.npz"))
    pending = st.session_state.pop("refit.baseline_pending", None)
    if pending in files:
        st.session_state["refit.baseline"] = pending
    notice = st.session_state.pop("refit.baseline_notice", None)
    if notice:
        st.success(notice)
    st.markdown("**Monte Carlo baseline** — one simulation, re-weighted for every μa and μs′ of the fit.")
    chosen = st.selectbox("Baseline file", files + ["(build a new one)"], key="refit.baseline")
    if chosen != "(build a new one)":
        found = call_layer("Loading the baseline", load_baseline, folder / chosen)
        return found.value
    c1, c2, c3, c4 = st.columns(4)
    photons = c1.number_input("Photons [count]", min_value=10_000, max_value=20_000_000, value=1_000_000,
                              step=100_000, key="refit.photons",
                              help="about 25 s per million on two cores; more photons, less noise far from "
                              "the source (the fit adds the baseline's own noise to the data's SDs)")
    g = c2.number_input("Anisotropy g [dimensionless]", min_value=0.0, max_value=0.95, value=0.8, step=0.05,
                        key="refit.baseline_g")
    mus = c3.number_input("Reference μs [1/mm]", min_value=0.1, value=10.0, step=1.0, key="refit.baseline_mus")
    mua = c4.number_input("Reference μa [1/mm] (smallest μa/μs it can answer)", min_value=1e-5, value=0.001,
                          step=0.001, format="%.4g", key="refit.baseline_mua")
    if not st.button("Build the baseline", key="refit.build"):
        return None
    target = folder / f"baseline-g{g:g}-n{n:g}-{int(photons)}ph.npz"
    with st.status(f"Building a Monte Carlo baseline with {int(photons):,} photons…", expanded=True) as status:
        status.write("Compiling the engine on first use, then simulating; this takes a while on a laptop.")
        started = time.monotonic()
        built = call_layer("Building the baseline", build_baseline, mua_per_mm=float(mua), mus_per_mm=float(mus),
                           g=float(g), n=float(n), photons=int(photons), seed=1)
        if not built.ok:
            status.update(label="Baseline not built", state="error")
            return None
        built.value.save(target)
        status.update(label="Baseline built", state="complete")
    st.session_state["refit.baseline_pending"] = target.name
    st.session_state["refit.baseline_notice"] = (
        f"Baseline built in {time.monotonic() - started:.1f} s ({int(photons):,} photons) and kept as "
        f"{target.name}; later fits can use it.")
    st.rerun()


def _fit(key: str, text: str, kind: str, sidecar: dict, model: str, options: dict, g_fallback, power_law: bool,
         baseline=None):
    """The fit, once per ``key`` (:func:`phantomlab.ui.refit_cache.fit_key` of these inputs)."""
    from phantomlab.calibration import fit_measurement_file  # layer 3
    from phantomlab.calibration.spectral import SpectralConstraint

    constraint = SpectralConstraint(musp_power_law=True) if power_law else None
    return refit_cache.fitted(key, fit_measurement_file, text, kind=kind, sidecar=sidecar, model=model,
                              constraint=constraint, g_fallback=g_fallback, baseline=baseline, **options)


# ---- showing a fit ------------------------------------------------------------------------------


def _show_data_and_model(charts) -> None:
    """Data + model beside the normalised residuals (built once per fit: ``refit_figures``)."""
    if charts is None:
        st.caption("Optics measured by another instrument: the fit takes them as they are.")
        return
    data, residuals = charts
    left, right = st.columns([3, 2])
    with left:
        show_chart(data)
    with right:
        show_chart(residuals)


def _show_result(charts: dict) -> None:
    """Fitted μa and μs′ against the target, and g when the fit returned it."""
    for column, chart in zip(st.columns(2), charts["fitted"]):
        with column:
            show_chart(chart)
    if charts["g_note"]:
        st.caption(charts["g_note"])
    if charts["g"] is not None:
        show_chart(charts["g"])


def _fit_section(workspace: Workspace, store) -> None:
    from phantomlab.calibration.fit_file import FIT_MODELS  # layer 3

    st.subheader("Fit a measurement")
    choices = call_layer("Reading the batch log", _measurement_choices, store).value or []
    labels = [c["label"] for c in choices] + [UPLOAD]
    newest = max(range(len(choices)), key=lambda i: choices[i]["measurement"]["id"], default=0)
    picked = st.selectbox("Measurement", labels, index=newest, key="refit.measurement",
                          help="The newest measurement first; any stored one, or a file of your own")
    target, batch, sidecar_text, measurement_row = None, None, None, None
    if picked == UPLOAD:
        c1, c2 = st.columns([1, 3])
        kind = c1.selectbox("Kind", list(FIT_MODELS), key="refit.upload_kind")
        upload = c2.file_uploader("Measurement file (CSV)", type=["csv"], key="refit.upload")
        irf_upload = None
        if kind == "td":
            irf_upload = c2.file_uploader("Its instrument response (IRF CSV: time_ps,counts)", type=["csv"],
                                          key="refit.upload_irf")
        if upload is None or (kind == "td" and irf_upload is None):
            st.info("Upload a measurement file to fit it" + (" and its IRF file." if kind == "td" else "."))
            return
        raw = upload.getvalue()
    else:
        choice = choices[labels.index(picked)]
        batch, measurement_row = choice["batch"], choice["measurement"]
        kind = measurement_row["kind"]
        raw, sidecar_text = _stored_file(store, measurement_row["id"])
        target = batch["plan"].get("target")
    import tomllib

    try:
        sidecar = tomllib.loads(sidecar_text) if sidecar_text else {}
    except tomllib.TOMLDecodeError as exc:
        st.error(plain(f"The stored metadata of this measurement is not valid TOML: {exc}"))
        return
    if picked == UPLOAD and kind == "td":
        inline = call_layer("Reading the IRF file", _irf_inline, irf_upload.getvalue(), irf_upload.name)
        if not inline.ok:
            return
        sidecar["irf"] = inline.value
    c1, c2, c3, c4 = st.columns(4)
    stored_model = _stored_model(measurement_row, kind)
    model = c1.selectbox("Forward model", FIT_MODELS[kind], key=f"refit.model.{kind}",
                         index=FIT_MODELS[kind].index(stored_model) if stored_model else 0,
                         help="mc (default): the Monte Carlo lookup, good at every distance and albedo; "
                              "diffusion: fast, poor within ~1 transport mean free path of the source and "
                              "biased in μa at high albedo. A stored measurement opens with the model of "
                              "its stored fit")
    n = c2.number_input("Phantom refractive index n [dimensionless]", min_value=1.0, max_value=3.0,
                        value=float(sidecar.get("n", 1.33)), step=0.01, key="refit.n")
    power_law = c3.checkbox("Fit μs′ as a power law", key="refit.power_law",
                            help="μs′ = a (λ/500 nm)^−b fitted jointly across the band",
                            disabled=kind in ("slab", "sphere", "optics", "td", "fd"))
    if kind in ("td", "fd"):
        power_law = False
        st.caption(PULSED_SOURCES)
    # the field starts at the sidecar's n: passed as an option only when changed (the fit says where n came from)
    options: dict = {} if sidecar.get("n") is not None and abs(float(n) - float(sidecar["n"])) < 1e-12 else {"n": float(n)}
    if kind == "td":
        geometry = c4.selectbox("Geometry", ("reflectance", "transmittance"),
                                index=1 if sidecar.get("geometry") == "transmittance" else 0, key="refit.geometry")
        options["geometry"] = geometry
        if geometry == "transmittance":
            options["thickness_mm"] = c4.number_input("Slab thickness [mm]", min_value=0.01,
                                                      value=float(sidecar.get("thickness_mm", 20.0)), step=0.5,
                                                      key="refit.td_thickness")
    if kind in ("slab", "sphere"):
        options["thickness_mm"] = c4.number_input("Slab thickness [mm]", min_value=0.01,
                                                  value=float(sidecar.get("thickness_mm", 2.0)), step=0.1,
                                                  key="refit.thickness")
        collimated = any(name in raw.decode("utf-8", "replace") for name in ("collimated_transmittance", "tc_sample"))
        fit_g = c3.checkbox("Fit g from the collimated transmittance", value=collimated and "g" not in sidecar,
                            key="refit.fit_g", help="needs the collimated_transmittance column (slab) or the "
                            "tc_* readings (sphere); otherwise g is assumed")
        if not fit_g:
            options["g"] = c4.number_input("Anisotropy g assumed [dimensionless]", min_value=0.0, max_value=0.99,
                                           value=float(sidecar.get("g", 0.8)), step=0.05, key="refit.g")
    if kind == "optics":
        options.pop("n", None)
    text = raw.decode("utf-8", "replace")
    if "\n" not in text:  # the layer reads a one-line string as a path: an upload is text, never a server path
        text += "\n"
    read = call_layer("Reading the measurement", _read, text, kind, sidecar, options, show=False)
    baseline, g_fallback, given_baseline = None, None, None
    band_baselines: dict = {}  # the cached baselines by g (rounded as the cache names them)
    lookup_applies = not (kind == "td" and (options.get("geometry") == "transmittance"
                                             or options.get("thickness_mm") is not None))
    if model == "mc" and kind in ("td", "fd") and st.checkbox(
            "Use a baseline file of this workspace instead of the cached one", key="refit.td_baseline_file"):
        given_baseline = baseline = _baseline_section(workspace, float(n))
        if baseline is None:
            st.info("Choose or build a baseline to fit with the Monte Carlo model.")
            return
    elif model == "mc" and kind == "td" and options.get("geometry") == "transmittance" and read.ok:
        # the default fit of transmittance: the Monte Carlo slab model, its slab runs cached
        from phantomlab.calibration.baseline_cache import DEFAULT_G  # layer 3
        from phantomlab.ui.baseline_build import page_slab_nodes

        options["g"] = float(sidecar.get("g", DEFAULT_G))
        # read as the fit reads it (g among the options): the slab runs' first nodes come from
        # the contini1997 fit of this measurement, which the fit then finds already made
        read = call_layer("Reading the measurement", _read, text, kind, sidecar, options, show=False)
        if read.ok and not page_slab_nodes(measurement=read.value, g=options["g"], key="refit.slab"):
            return
        model = None  # the default fit reads the cached runs (or falls back to diffusion, said)
    elif model == "mc" and kind in ("td", "fd") and not lookup_applies:
        model = None  # the default fit: diffusion, and its note says why
    elif model == "mc":
        from phantomlab.ui.baseline_build import page_baseline

        measurement = read.value if read.ok else None
        suggested, origin = _suggested_g(store, batch, measurement, sidecar)
        spectrum = _g_per_wavelength(store, batch, measurement, sidecar) if kind in ("srdr", "sfdi") else None
        g = c4.number_input("Anisotropy g of the scatterers [dimensionless]", min_value=0.0, max_value=0.95,
                            value=float(suggested), step=0.01, format="%.2f", key=f"refit.mc_g.{picked}",
                            help=f"for the Monte Carlo baseline; suggested from the {origin}"
                                 + ("" if origin != "default" else " (no batch model or sidecar value)")
                                 + ("; left as suggested, each wavelength is fitted with a baseline near its own g "
                                    "(one per step of 0.02); changed, the whole band with this one g"
                                    if spectrum is not None else ""))
        if abs(g - suggested) > 1e-9:
            options["g"] = float(g)
            spectrum = None
        else:
            g_fallback = (float(suggested), origin)
        values = [float(g)]
        if spectrum is not None:  # the baselines the band fit reads (one, unless g changes by a step or more)
            from phantomlab.calibration.band_g import lookup_g_values  # layer 3

            g_fallback = (list(spectrum[0]), spectrum[1])
            chosen = call_layer("Choosing the Monte Carlo baselines", lookup_g_values, measurement,
                                g_fallback=g_fallback, show=False)
            values = chosen.value if chosen.ok else values
        for k, value in enumerate(values):
            cached = page_baseline(g=value, n=float(n), n_outside=float(sidecar.get("n_outside", 1.0)),
                                   key="refit.baseline" if k == 0 else f"refit.baseline.{k}",
                                   time_resolved=kind in ("td", "fd"))
            if cached is None:
                return
            band_baselines[round(value, 2)] = cached.baseline
        if kind in ("td", "fd"):
            model, options["g"] = None, float(g)  # the default fit reads the cached file (it may fall back, said)
        elif len(values) == 1 and spectrum is None:
            baseline = cached.baseline
    # the baseline files' state (the per-user cache and the page's folder), and the file chosen
    # for a td/fd fit with a baseline of its own (a folder may hold several)
    baselines = (refit_cache.baseline_files(None, _baseline_folder(workspace)),
                 st.session_state.get("refit.baseline") if given_baseline is not None else None)
    key = refit_cache.fit_key(text, kind=kind, sidecar=sidecar, model=model, options=options, g_fallback=g_fallback,
                              power_law=power_law, baselines=baselines)
    with st.spinner("Fitting…"):
        fitted = call_layer("Fitting the measurement", _fit, key, text, kind, sidecar, model, options, g_fallback,
                            bool(power_law), given_baseline, show=False)
    if not fitted.ok:
        st.error(plain(fitted.error))
        return
    result = fitted.value
    chi2 = f"{result.chi2_red:.3g}" if np.isfinite(result.chi2_red) else "– (no degrees of freedom)"
    st.markdown(f"Model **{result.model}** · reduced χ² **{chi2}** · {result.wavelength_nm.size} wavelength(s)")
    for line in result.parameter_lines():
        if line.startswith(("musp power law", "amount of")):
            st.markdown(plain(line.replace("musp", "μs′").replace("lambda", "λ")))
    show_fit_quality(result)
    show_warnings(result.warnings)
    from phantomlab.ui.baseline_build import describe_inputs

    used = describe_inputs(dict(result.extras))
    if used:
        st.caption(plain(f"Used: {used}"))
    if result.extras.get("model_note"):
        st.caption(plain(result.extras["model_note"]))
    if result.extras.get("g_note"):
        st.caption(plain(result.extras["g_note"]))
    if read.ok and kind in ("td", "fd"):
        from phantomlab.ui.time_view import show_fd_fit, show_td_fit

        wavelengths = list(np.asarray(result.wavelength_nm, float))
        shown = st.multiselect("Wavelengths to show [nm]", wavelengths, default=wavelengths[:1],
                               key=f"refit.shown.{picked}", format_func=lambda w: f"{w:g} nm")
        (show_td_fit if kind == "td" else show_fd_fit)(result, shown)
    elif read.ok:
        measurement = read.value
        wavelengths = list(np.asarray(measurement.wavelength_nm, float))
        default = [wavelengths[i] for i in sorted({0, len(wavelengths) // 2, len(wavelengths) - 1})]
        shown = st.multiselect("Wavelengths to show [nm]", wavelengths, default=default,
                               key=f"refit.shown.{picked}", format_func=lambda w: f"{w:g} nm")
        if baseline is None and band_baselines and kind in ("srdr", "sfdi"):  # the cached ones the fit read
            used = result.extras.get("g_used")
            used = used if isinstance(used, list) else [used] * len(wavelengths)
            baseline = [band_baselines.get(round(float(g), 2)) for g in used]
            baseline = baseline if all(b is not None for b in baseline) else None
        if shown and (baseline is not None or model != "mc"):
            _show_data_and_model(data_charts(key, shown, measurement=measurement, result=result, model=model,
                                             baseline=baseline))
    _show_result(result_charts(key, target, result=result))
    if measurement_row is not None:
        if st.button("Keep this fit in the batch log", key="refit.keep"):
            from phantomlab.ui.recording import keep_fit

            kept = call_layer("Keeping the fit", keep_fit, store, measurement_row["id"], result)
            if kept.ok:
                st.success(f"Fit kept with measurement {measurement_row['id']} of batch {batch['code']}.")


def show_fit_quality(result) -> None:
    """The fit's verdict beside its numbers: red for poor or failed, a caption when good."""
    quality = getattr(result, "fit_quality", None)
    if quality is None:
        return
    reason = result.fit_quality_reason or ""
    reason = reason[:1].upper() + reason[1:]
    if quality == "poor":
        st.error(f"**Fit quality: POOR.** {reason}.")
    elif quality == "failed":
        st.error(f"**Fit quality: FAILED.** {reason}.")
    else:
        st.caption(f"Fit quality: good. {reason}.")
    if result.sd_includes:
        st.caption("SDs include: " + ", ".join(part.replace("_", " ") for part in result.sd_includes))


def show(workspace: Workspace) -> None:
    st.header(TITLE)
    show_light_source_caution()
    store = services.store_for(workspace)
    fit_tab, calibrate_tab, correct_tab = st.tabs(list(TABS), key=TAB_KEY, on_change="rerun")
    # Lazy tabs: only the open tab's content runs; a tab's fields are drawn anew when it opens.
    if fit_tab.open:
        with fit_tab:
            _fit_section(workspace, store)
    elif calibrate_tab.open:
        from phantomlab.ui import correct_section

        with calibrate_tab:
            correct_section.recalibrate_section(workspace, store)
    elif correct_tab.open:
        from phantomlab.ui import correct_section

        with correct_tab:
            correct_section.correction_section(workspace, store)
