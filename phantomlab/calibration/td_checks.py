"""Identifiability and model-range checks of a td fit (layer 3).

Each check returns one message naming the values, the limit and what to do (they become the
fit's ``warnings``): a short fit window, an IRF wider than the curve's rise, too few counts, a
window that reaches the end of the histogram, a distance or slab too short for diffusion,
early photons in a diffusion fit, μs′ not much larger than μa.
"""

from __future__ import annotations

import numpy as np

from phantomlab.calibration.identifiability import _bands
from phantomlab.calibration.td_curves import peak_region

__all__ = ["td_design_warnings", "MIN_PEAK_COUNTS", "MIN_WINDOW_BINS", "DIFFUSION_MIN_TRANSPORT_LENGTHS"]

#: Below this many counts at the peak the fit warns.  # common practice, no source
MIN_PEAK_COUNTS = 1000.0
#: Fewest bins the window should hold.  # common practice, no source
MIN_WINDOW_BINS = 20
#: Diffusion needs the distance (or thickness) to be this many transport lengths.
#: # common practice, no source
DIFFUSION_MIN_TRANSPORT_LENGTHS = 5.0


def td_design_warnings(measurement, signal, windows, fwhm, irf_wider, family, geometry, thickness, mua, musp,
                       rise) -> list[str]:
    """Identifiability and model-range checks of a td fit (each message names values and limits).

    ``irf_wider`` (W, R): the curves whose IRF FWHM exceeds their rise from 10 % to the peak
    (the fit decides it once: it also carries their lookup error by refits).
    """
    messages = []
    wl = measurement.wavelength_nm
    step = measurement.step_ps
    short, wide, low, cut = (np.zeros(wl.size, bool) for _ in range(4))
    for w in range(wl.size):
        for r in range(measurement.rho_mm.size):
            s, win = signal[w, r], windows[w, r]
            _, _, top = peak_region(s)
            n_bins = int(win.sum())
            if n_bins < MIN_WINDOW_BINS or n_bins * step < 3 * fwhm[w, r]:
                short[w] = True
            if irf_wider[w, r]:
                wide[w] = True
            if top < MIN_PEAK_COUNTS:
                low[w] = True
            if win[-1]:
                cut[w] = True
    if short.any():
        messages.append(f"fit window short at {_bands(wl, short)}: fewer than {MIN_WINDOW_BINS} bins or less than "
                        "3 IRF widths; lower window_tail_fraction or measure longer")
    if wide.any():
        refits = ("; the lookup's share of the SDs comes from refits with its errors drawn (the fit is far from "
                  "linear there)") if family == "mc" else ""
        messages.append(f"the IRF is wider than the curve's rise (10 % to peak) at {_bands(wl, wide)}: musp rests on "
                        "the IRF's exact shape there (measure the IRF with many counts, on the same system); its SD "
                        "grows accordingly" + refits)
    if low.any():
        messages.append(f"fewer than {MIN_PEAK_COUNTS:g} counts at the peak at {_bands(wl, low)}: the SDs assume "
                        "Poisson counts; measure longer")
    if cut.any():
        messages.append(f"the fit window reaches the end of the histogram at {_bands(wl, cut)}: the tail is cut "
                        "before it falls to window_tail_fraction of the peak")
    if family == "diffusion":
        if geometry == "reflectance":
            lengths = np.min(measurement.rho_mm) * musp
            near = lengths < DIFFUSION_MIN_TRANSPORT_LENGTHS
            if near.any():
                messages.append(f"distance short for diffusion at {_bands(wl, near)}: rho*musp = {lengths[near].min():.3g} "
                                f"transport lengths, wanted >= {DIFFUSION_MIN_TRANSPORT_LENGTHS:g}; use the Monte Carlo "
                                "lookup (model mc)")
        else:
            lengths = thickness * musp
            thin = lengths < DIFFUSION_MIN_TRANSPORT_LENGTHS
            if thin.any():
                messages.append(f"slab thin for diffusion at {_bands(wl, thin)}: thickness*musp = "
                                f"{lengths[thin].min():.3g} transport lengths, wanted >= "
                                f"{DIFFUSION_MIN_TRANSPORT_LENGTHS:g}")
        if rise < 0.3:
            messages.append(f"the window starts at {rise:g} of the peak on the rising edge: early photons, where "
                            "diffusion is poor, are in the fit")
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = musp / mua
    from phantomlab.transport.diffusion_validity import MIN_MUSP_TO_MUA_RATIO

    if family == "diffusion" and np.any(ratio < MIN_MUSP_TO_MUA_RATIO):
        messages.append(f"diffusion is poor unless musp >> mua: musp/mua = {np.nanmin(ratio):.3g} at "
                        f"{_bands(wl, ratio < MIN_MUSP_TO_MUA_RATIO)}, wanted >= {MIN_MUSP_TO_MUA_RATIO:g}")
    return messages

