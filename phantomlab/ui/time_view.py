"""The fit view of time-domain and frequency-domain measurements (layer 5: plots only).

td: per chosen wavelength and distance, the histogram (markers), the fitted model convolved with
the IRF (line) and the IRF scaled to the data's peak (dashed), on a log time axis and log
counts, the fit window marked; beside it the normalised residuals (model − data)/SD in the
window.  fd: AC amplitude (log) and phase lag against distance, data and model per frequency
(the fitted scale and phase offset removed from the data).  The numbers come from the fit
(:class:`~phantomlab.calibration.fit_td.TimeDomainFit`, ``FrequencyDomainFit``).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import streamlit as st

from phantomlab.ui.plots import COLOURS, Series, line_figure, show_figure

__all__ = ["show_td_fit", "show_fd_fit", "PULSED_SOURCES"]

#: The caution of time-resolved and frequency-domain sources (beside the characterisation line).
PULSED_SOURCES = (
    "time-resolved and frequency-domain systems: picosecond pulsed and modulated laser diodes, often "
    "invisible near-infrared of class 3B; the peak power of a pulse train is far above its average — "
    "use eyewear for the wavelength and keep the fibres connected while the source is on"
)


def show_td_fit(result, shown_wavelengths) -> None:
    """Data, model, IRF and residuals of a td fit, one row of plots per wavelength and distance."""
    curves = result.curves
    time = np.asarray(curves["time_ps"], float)
    rho = np.asarray(curves["rho_mm"], float)
    wavelength = np.asarray(result.wavelength_nm, float)
    irf = np.asarray(curves["irf"], float)
    irf_time = np.asarray(curves["irf_time_ps"], float)
    for shown in shown_wavelengths:
        w = int(np.argmin(np.abs(wavelength - shown)))
        for r, distance in enumerate(rho):
            data = np.asarray(curves["counts"][w, r], float)
            model = np.asarray(curves["model"][w, r], float)
            window = np.asarray(curves["window"][w, r], bool)
            live = time > 0
            irf_row = irf[w if irf.shape[0] > 1 else 0]
            scale = data.max() / max(irf_row.max(), 1e-300)
            shift = float(np.asarray(result.time_shift_ps)[w, r])
            shift_sd = float(np.asarray(result.time_shift_sd_ps)[w, r])
            series = [
                Series("data (counts)", time[live & (data > 0)], data[live & (data > 0)], mode="markers",
                       colour=COLOURS[0]),
                Series("model ⊗ IRF", time[live & (model > 0)], model[live & (model > 0)], colour=COLOURS[1]),
                Series("IRF (scaled to the peak)", irf_time[(irf_time > 0) & (irf_row > 0)],
                       scale * irf_row[(irf_time > 0) & (irf_row > 0)], dash="dash", colour=COLOURS[5]),
            ]
            title = (f"{wavelength[w]:g} nm, {'ρ' if curves.get('geometry') == 'reflectance' else 'offset'} "
                     f"{distance:g} mm: time shift {shift:.1f}"
                     + (f" ± {shift_sd:.2g}" if np.isfinite(shift_sd) else "") + " ps")
            figure = line_figure(series, x_label="time [ps] (log)", y_label="counts per bin (log)", log_y=True,
                                 log_x=True, title=title, height=360)
            if window.any():
                figure.add_vrect(x0=time[window][0], x1=time[window][-1], fillcolor="#c08a00", opacity=0.08,
                                 line_width=0, annotation_text="fit window", annotation_position="top left")
            residual = np.asarray(result.residuals[w, r], float)
            ok = np.isfinite(residual) & live
            residual_figure = line_figure([Series("(model − data)/SD", time[ok], residual[ok], mode="markers",
                                                  colour=COLOURS[2])],
                                          x_label="time [ps] (log)", y_label="(model − data) / SD [dimensionless]",
                                          log_x=True, title="Normalised residuals in the window", height=360)
            residual_figure.add_hline(y=0, line_color="#4b4b4b")
            table = pd.DataFrame({"time_ps": time, "counts": data, "model_counts": model, "in_window": window,
                                  "normalised_residual": residual})
            left, right = st.columns([3, 2])
            stem = f"td-{wavelength[w]:g}nm-{distance:g}mm"
            with left:
                show_figure(figure, table=table, file_stem=stem, key=f"refit.td.{w}.{r}")
            with right:
                show_figure(residual_figure, table=table, file_stem=f"{stem}-residuals", key=f"refit.td.res.{w}.{r}")


def show_fd_fit(result, shown_wavelengths) -> None:
    """AC amplitude and phase against distance, data and model per frequency."""
    curves = result.curves
    rho = np.asarray(curves["rho_mm"], float)
    freq = np.asarray(curves["frequency_mhz"], float)
    wavelength = np.asarray(result.wavelength_nm, float)
    if "model_amplitude" not in curves:
        st.caption("The slope method gives no model curves; fit kienle1997 or mc to see them.")
        return
    for shown in shown_wavelengths:
        w = int(np.argmin(np.abs(wavelength - shown)))
        amp_series, phase_series, rows = [], [], []
        for f, frequency in enumerate(freq):
            colour = COLOURS[f % len(COLOURS)]
            amp_series += [Series(f"data {frequency:g} MHz", rho, curves["amplitude"][w, :, f], mode="markers",
                                  colour=colour),
                           Series(f"model {frequency:g} MHz", rho, curves["model_amplitude"][w, :, f], dash="dot",
                                  colour=colour)]
            phase_series += [Series(f"data {frequency:g} MHz", rho, curves["phase_deg"][w, :, f], mode="markers",
                                    colour=colour),
                             Series(f"model {frequency:g} MHz", rho, curves["model_phase_deg"][w, :, f], dash="dot",
                                    colour=colour)]
            for r, distance in enumerate(rho):
                rows.append({"frequency_mhz": frequency, "rho_mm": distance,
                             "amplitude": curves["amplitude"][w, r, f],
                             "model_amplitude": curves["model_amplitude"][w, r, f],
                             "phase_deg": curves["phase_deg"][w, r, f],
                             "model_phase_deg": curves["model_phase_deg"][w, r, f]})
        table = pd.DataFrame(rows)
        left, right = st.columns(2)
        with left:
            show_figure(line_figure(amp_series, x_label="distance ρ [mm]", y_label="AC amplitude [1/mm²] (log)",
                                    log_y=True, title=f"{wavelength[w]:g} nm: amplitude", height=360),
                        table=table, file_stem=f"fd-{wavelength[w]:g}nm-amplitude", key=f"refit.fd.amp.{w}")
        with right:
            show_figure(line_figure(phase_series, x_label="distance ρ [mm]", y_label="phase lag [degrees]",
                                    title=f"{wavelength[w]:g} nm: phase", height=360),
                        table=table, file_stem=f"fd-{wavelength[w]:g}nm-phase", key=f"refit.fd.phase.{w}")
