"""Can the data tell μa from μs′?  Warnings on the measurement design and on the fit (layer 3).

Two kinds of check, each returning one-line messages (the fit modules raise them as
:class:`~phantomlab.errors.PhantomlabWarning` and keep them in ``FitResult.warnings``):

* design checks, before looking at the numbers: too few or too close source–detector
  distances, too few or too close spatial frequencies;
* outcome checks, from the fitted covariance: a strong correlation between the fitted log μa
  and log μs′ together with a large relative SD.

Where a diffusion model is poor (near the source, low albedo, high spatial frequency) is no
longer a rule of thumb here: the fits warn from the measured diffusion-vs-Monte-Carlo error
maps (:mod:`phantomlab.calibration.model_error`).

The thresholds are rules of thumb of the trade, marked as such.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "MIN_SPAN_TRANSPORT_MFP",
    "MAX_CORRELATION",
    "MAX_RELATIVE_SD",
    "srdr_design_warnings",
    "sfdi_design_warnings",
    "outcome_warnings",
    "slab_edge_warnings",
    "step_warnings",
]

#: Smallest span of source–detector distances, in transport mean free paths 1/μt′, over which
#: μa and μs′ separate (common practice, no source).
MIN_SPAN_TRANSPORT_MFP = 2.0
#: Smallest reach μ_eff·ρ_max of the farthest distance, μ_eff = √(3 μa (μa + μs′)) (diffusion
#: theory; Farrell et al. 1992, Med Phys 19:879): μa shapes R(ρ) mainly through the far tail,
#: so a probe that ends short of one attenuation length leaves μa loose.  Measured with 1 %
#: noise (Fisher information of the Monte Carlo lookup, tests/calibration/test_fit_srdr.py):
#: a probe to 8 mm at μs′ = 1 /mm gives μa to 0.9 % at μs′/μa = 100 (reach 1.4), 2 % at 300
#: (0.8) and 5 % at 1000 (0.44), relative data 5 %, 10 % and 23 %.
MIN_REACH_ATTENUATION_LENGTHS = 1.0
#: Fewest distinct spatial frequencies for an sfdi fit, and the smallest frequency span [1/mm]
#: (common practice, no source: a planar and one patterned frequency near 0.1 /mm).
MIN_FREQUENCIES = 2
MIN_FREQUENCY_SPAN_PER_MM = 0.05
#: |correlation| of fitted log μa and log μs′ above which, with a large SD, they are confounded.
MAX_CORRELATION = 0.95
#: Relative SD above which a fitted coefficient is reported as undetermined.
MAX_RELATIVE_SD = 0.25
#: Light beyond about 3 lateral spread lengths of the port edge is negligible
#: (common practice, no source).
EDGE_SPREAD_FACTOR = 3.0


def _bands(wavelength_nm, flags) -> str:
    """A compact list of the wavelengths where ``flags`` holds: '650-700 nm (3 of 11)'."""
    wl = np.asarray(wavelength_nm)[np.asarray(flags, bool)]
    if wl.size == 1:
        return f"{wl[0]:g} nm"
    return f"{wl.min():g}-{wl.max():g} nm ({wl.size} of {np.size(wavelength_nm)} wavelengths)"


def step_warnings(*, wavelength_nm, stepped, names, lookup: bool) -> list[str]:
    """The note of a fit that stops on a step of its model (``stepped`` (W, P) from
    :func:`~phantomlab.calibration.fitting.off_step_covariance`, ``names`` one per parameter)."""
    stepped = np.asarray(stepped, bool)
    if not stepped.any():
        return []
    changed = ", ".join(dict.fromkeys(names[p] for p in np.flatnonzero(stepped.any(axis=0))))
    return [f"at {_bands(wavelength_nm, stepped.any(axis=1))} the fit stops on a step of the model (in {changed}): "
            + ("the Monte Carlo lookup is read at the edge of its reach; " if lookup else "")
            + "the SDs come from the smooth side and may understate the spread; a baseline with more photons or a "
              "shorter distance avoids it"]


def srdr_design_warnings(*, rho_mm, wavelength_nm, mua_per_mm, musp_per_mm, relative: bool) -> list[str]:
    """Design checks of a spatially resolved reflectance measurement.

    Parameters
    ----------
    rho_mm : array (R,) [mm]
        Source–detector distances used by the fit.
    wavelength_nm : array (W,) [nm]
    mua_per_mm, musp_per_mm : array (W,) [1/mm]
        Fitted (or expected) optics, for the span in transport mean free paths.
    relative : bool
        Relative data need one more distance (the scale factor).

    Returns
    -------
    list of str
    """
    messages = []
    rho = np.unique(np.asarray(rho_mm, float))
    needed = 4 if relative else 3
    if rho.size < needed:
        messages.append(
            f"too few source-detector distances ({rho.size}) to separate mua from musp"
            f"{' and the scale factor' if relative else ''}; accepted: at least {needed}"
        )
        return messages
    mutr = np.asarray(mua_per_mm) + np.asarray(musp_per_mm)
    span = (rho.max() - rho.min()) * mutr
    short = span < MIN_SPAN_TRANSPORT_MFP
    if np.any(short):
        messages.append(
            f"too short a distance range: rho {rho.min():g}-{rho.max():g} mm spans "
            f"{np.min(span):.2g} transport mean free paths at {_bands(wavelength_nm, short)}; "
            f"mua and musp separate poorly below {MIN_SPAN_TRANSPORT_MFP:g}"
        )
    mua = np.asarray(mua_per_mm, float)
    musp = np.asarray(musp_per_mm, float)
    with np.errstate(invalid="ignore"):
        mu_eff = np.sqrt(3.0 * mua * (mua + musp))
    reach = rho.max() * mu_eff
    near = np.isfinite(reach) & (mua > 0) & (reach < MIN_REACH_ATTENUATION_LENGTHS)
    if np.any(near):
        wanted = float(np.max(2.0 / mu_eff[near]))
        messages.append(
            f"the farthest distance ({rho.max():g} mm) reaches only {np.min(reach[near]):.2g} attenuation "
            f"lengths 1/mu_eff at {_bands(wavelength_nm, near)}: mua acts mainly through the far tail, so it "
            f"is loosely determined below {MIN_REACH_ATTENUATION_LENGTHS:g}; distances out to about "
            f"{wanted:.3g} mm would pin it"
        )
    return messages


def sfdi_design_warnings(*, fx_per_mm) -> list[str]:
    """Design checks of a spatial-frequency-domain measurement: enough distinct frequencies."""
    fx = np.unique(np.asarray(fx_per_mm, float))
    if fx.size < MIN_FREQUENCIES:
        return [
            f"too few spatial frequencies ({fx.size}) to separate mua from musp; "
            f"accepted: at least {MIN_FREQUENCIES} (e.g. 0 and 0.1 /mm)"
        ]
    if fx.max() - fx.min() < MIN_FREQUENCY_SPAN_PER_MM:
        return [
            f"spatial frequencies {fx.min():g}-{fx.max():g} /mm are too close to separate mua "
            f"from musp; accepted: a span of at least {MIN_FREQUENCY_SPAN_PER_MM:g} /mm"
        ]
    return []


def outcome_warnings(*, wavelength_nm, mua_per_mm, musp_per_mm, mua_sd_per_mm, musp_sd_per_mm,
                     correlation) -> list[str]:
    """Checks of the fitted covariance: confounded or undetermined coefficients."""
    with np.errstate(invalid="ignore", divide="ignore"):
        rel_a = np.asarray(mua_sd_per_mm) / np.asarray(mua_per_mm)
        rel_s = np.asarray(musp_sd_per_mm) / np.asarray(musp_per_mm)
        corr = np.abs(np.nan_to_num(np.asarray(correlation, float), nan=1.0))
        undetermined = ~np.isfinite(rel_a) | ~np.isfinite(rel_s)
        large = (np.nan_to_num(rel_a, nan=np.inf) > MAX_RELATIVE_SD) | (np.nan_to_num(rel_s, nan=np.inf) > MAX_RELATIVE_SD)
    messages = []
    if np.any(undetermined):
        messages.append(
            f"the data cannot tell mua from musp at {_bands(wavelength_nm, undetermined)}: "
            f"the fit leaves them undetermined (infinite SD)"
        )
    confounded = large & ~undetermined & (corr > MAX_CORRELATION)
    if np.any(confounded):
        messages.append(
            f"the data cannot tell mua from musp at {_bands(wavelength_nm, confounded)}: "
            f"correlation {np.max(corr[confounded]):.3f} between them, relative SD up to "
            f"{100 * np.nanmax(np.fmax(rel_a, rel_s)[confounded]):.0f} % (accepted: below "
            f"{100 * MAX_RELATIVE_SD:.0f} %)"
        )
    loose = large & ~undetermined & ~confounded
    if np.any(loose):
        messages.append(
            f"fitted mua or musp has a relative SD above {100 * MAX_RELATIVE_SD:.0f} % at "
            f"{_bands(wavelength_nm, loose)}"
        )
    return messages


def slab_edge_warnings(*, thickness_mm, port_diameter_mm, wavelength_nm, mua_per_mm, musp_per_mm) -> list[str]:
    """Warn about light lost at the edges of the sphere port (not modelled by adding-doubling).

    The lateral spread of light in the slab is taken as the larger of the thickness and the
    diffusion length 1/μeff (μeff = √(3 μa (μa + μs′))); a port radius below
    :data:`EDGE_SPREAD_FACTOR` spread lengths loses a noticeable part of it.

    References
    ----------
    Lemaillet P et al. 2015, J Biomed Opt 20:121310 (edge losses turn a 2–3 % error in R and
    T into a 5–30 % error in μa).
    """
    if port_diameter_mm is None:
        return [
            "edge losses not checked: give port_diameter_mm in the sidecar; light lost at the "
            "slab edges (not in adding-doubling) turns a 2-3 % R/T error into 5-30 % in mua"
        ]
    mua = np.asarray(mua_per_mm)
    musp = np.asarray(musp_per_mm)
    mueff = np.sqrt(3 * mua * (mua + musp))
    spread = np.maximum(thickness_mm, 1.0 / np.maximum(mueff, 1e-12))
    lossy = port_diameter_mm / 2 < EDGE_SPREAD_FACTOR * spread
    if np.any(lossy):
        return [
            f"light lost at the slab edges: port radius {port_diameter_mm / 2:g} mm is below "
            f"{EDGE_SPREAD_FACTOR:g} lateral spread lengths (up to {np.max(spread[lossy]):.3g} mm) at "
            f"{_bands(wavelength_nm, lossy)}; adding-doubling does not model this, so mua is "
            f"overestimated"
        ]
    return []
