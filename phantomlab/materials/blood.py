"""Blood as a phantom stock: haemoglobin absorption at a given sO₂ and red-cell scattering (layer 1).

Absorption.  Whole blood (or a red-cell suspension, or haemoglobin solution) of haemoglobin
concentration c [g/L] at oxygen saturation sO₂ absorbs, per unit volume fraction of it in
the final mix::

    μa(λ) = ln(10)/10 · c/64 500 · (sO₂ · ε_HbO2(λ) + (1 − sO₂) · ε_Hb(λ))   [1/mm]

with ε per mole of tetramer in 1/(M·cm) (:mod:`phantomlab.materials.haemoglobin`).  sO₂ is
a property of a batch at a moment (it drifts as the blood deoxygenates), never of the stock:
every function here takes it as an argument.

Scattering.  Red cells scatter strongly forward.  The model is Meinke et al. 2007 (their
"standard blood", human red cells in saline, SO₂ > 98 %, under flow), with their empirical
haematocrit functions (Hct in %)::

    μs(Hct)  = (−0.0015 Hct² + 0.1268 Hct) · μs,st(λ)
    μs′(Hct) = 0.1167 Hct · μs′,st(λ)

A blood stock of haematocrit H diluted to a volume fraction f gives a mix haematocrit
100·f·H %; phantoms hold a few per cent of blood at most (mix Hct ≲ 2 %), where the
quadratic (dependent-scattering) term is below 2.5 % of the linear one.  The intrinsic
optics (per unit volume fraction, the mixing rule's convention) therefore keep the linear
term: μs = 12.68 · H · μs,st, μs′ = 11.67 · H · μs′,st, g = 1 − μs′/μs.  Departures, stated:
the quadratic term is dropped (:data:`MAX_LINEAR_MIX_HAEMATOCRIT` bounds where that holds);
the standard data are of oxygenated cells (deoxygenation changes μs by a few per cent near
the Q bands, Friebel et al. 2009) and of cells in saline, not plasma.
"""

from __future__ import annotations

from functools import lru_cache
from importlib import resources

import numpy as np

from phantomlab.errors import InputError
from phantomlab.materials.haemoglobin import (
    DEFAULT_HAEMOGLOBIN_SOURCE,
    EXTINCTION_BASIS,
    extinction_table,
    haemoglobin_mua_per_mm_per_um,
    tetramer_um_from_g_per_l,
)

__all__ = [
    "RED_CELL_FILE",
    "RED_CELL_BAND_NM",
    "MAX_LINEAR_MIX_HAEMATOCRIT",
    "check_so2",
    "blood_mua_per_mm",
    "red_cell_scattering_Meinke2007",
    "isosbestic_points_nm",
]

RED_CELL_FILE = "red_cell_optics_meinke_2007.csv"

#: Band of the Meinke et al. 2007 standard-blood table [nm].
RED_CELL_BAND_NM = (250.0, 1100.0)

#: Mix haematocrit (fraction) up to which the linear scattering term is kept: at 0.02 the
#: dropped quadratic term of Meinke et al. 2007 is 0.0015·2/0.1268 = 2.4 % of the linear one.
MAX_LINEAR_MIX_HAEMATOCRIT = 0.02

# Meinke et al. 2007, model functions (Hct in %): coefficients as transcribed with the table.
_MUS_LINEAR = 0.1268
_MUSP_LINEAR = 0.1167


def check_so2(so2, *, name: str = "sO2") -> np.ndarray:
    """sO₂ as fractions in 0–1; anything else is refused with one line."""
    try:
        values = np.asarray(so2, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name}: {so2!r} is not a number; give a fraction 0-1 (0.97) or say percent") from None
    if values.size == 0 or not np.all(np.isfinite(values)) or np.any(values < 0) or np.any(values > 1):
        bad = next((float(v) for v in np.atleast_1d(values) if not 0 <= v <= 1), None)
        shown = "nan" if bad is None or not np.isfinite(bad) else f"{bad:g}"
        raise InputError(f"{name}: {shown} is outside 0-1; sO2 is a fraction "
                         "(0.97), or give it in percent where a percent field is offered")
    return values


def blood_mua_per_mm(*, wavelength_nm, haemoglobin_g_per_l: float, so2: float,
                     source: str = DEFAULT_HAEMOGLOBIN_SOURCE) -> np.ndarray:
    """μa of undiluted blood (per unit volume fraction of it in a mix) at a given sO₂.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
    haemoglobin_g_per_l : float [g/L]
        Total haemoglobin of the blood stock.
    so2 : float [fraction]
        Oxygen saturation of the batch at the moment considered, 0–1.
    source : str
        Haemoglobin extinction table.

    Returns
    -------
    ndarray [1/mm]
        ln(10)/10 · c/64 500 · (sO₂ ε_HbO2 + (1 − sO₂) ε_Hb) (Beer–Lambert; basis
        :data:`phantomlab.materials.haemoglobin.EXTINCTION_BASIS`).
    """
    (value,) = np.atleast_1d(check_so2(so2))
    concentration_um = float(tetramer_um_from_g_per_l(haemoglobin_g_per_l))
    oxy = haemoglobin_mua_per_mm_per_um("hbo2", wavelength_nm=wavelength_nm, source=source)
    deoxy = haemoglobin_mua_per_mm_per_um("hb", wavelength_nm=wavelength_nm, source=source)
    return concentration_um * (value * oxy + (1.0 - value) * deoxy)


@lru_cache(maxsize=1)
def _red_cell_table() -> tuple[np.ndarray, np.ndarray, np.ndarray, str]:
    text = resources.files("phantomlab").joinpath("data", RED_CELL_FILE).read_text(encoding="utf-8")
    lines = [line.strip() for line in text.splitlines() if line.strip()]
    source = lines[0].lstrip("#").strip()
    header = lines[1].split(",")
    rows = np.array([[float(c) for c in line.split(",")] for line in lines[2:]])
    column = {name: rows[:, i] for i, name in enumerate(header)}
    return column["wavelength_nm"], column["mus_per_mm"], column["musp_per_mm"], source


def red_cell_scattering_Meinke2007(*, wavelength_nm, haematocrit: float) -> tuple[np.ndarray, np.ndarray]:
    """Intrinsic scattering of blood of haematocrit H per unit volume fraction of it in a mix.

    Parameters
    ----------
    wavelength_nm : float or array [nm]
        Refused outside 250–1100 nm (the table).
    haematocrit : float [fraction]
        Red-cell volume fraction of the blood stock, 0 < H <= 0.7.

    Returns
    -------
    (mus_per_mm, g) : ndarray [1/mm], ndarray [-]
        μs = 100 H · 0.1268 · μs,st and μs′ = 100 H · 0.1167 · μs′,st (the linear terms of
        Meinke et al. 2007's model functions), g = 1 − μs′/μs; the table is interpolated
        linearly between rows.

    References
    ----------
    1. Meinke, M., Müller, G., Helfmann, J. & Friebel, M. (2007). Empirical model functions to
       calculate hematocrit-dependent optical properties of human blood. Appl. Opt. 46(10),
       1742–1753. doi:10.1364/AO.46.001742
    """
    if not isinstance(haematocrit, (int, float)) or not 0 < float(haematocrit) <= 0.7:
        raise InputError(f"haematocrit: {haematocrit!r} is not a fraction in (0, 0.7]; whole blood is about 0.4")
    try:
        wavelength = np.asarray(wavelength_nm, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"wavelength_nm must be numbers in nm, got {wavelength_nm!r}") from None
    table_nm, mus_st, musp_st, _ = _red_cell_table()
    lo, hi = RED_CELL_BAND_NM
    finite = wavelength[np.isfinite(wavelength)]
    if finite.size and (finite.min() < lo or finite.max() > hi):
        bad = finite.min() if finite.min() < lo else finite.max()
        raise InputError(f"red-cell scattering (Meinke 2007): wavelength {bad:g} nm outside {lo:g}–{hi:g} nm")
    percent = 100.0 * float(haematocrit)
    mus = _MUS_LINEAR * percent * np.interp(wavelength, table_nm, mus_st)
    musp = _MUSP_LINEAR * percent * np.interp(wavelength, table_nm, musp_st)
    g = 1.0 - musp / mus
    nan = ~np.isfinite(wavelength)
    return np.where(nan, np.nan, mus), np.where(nan, np.nan, g)


def isosbestic_points_nm(*, source: str = DEFAULT_HAEMOGLOBIN_SOURCE, band_nm=None) -> np.ndarray:
    """Wavelengths where the table's HbO2 and Hb columns cross (ε equal) [nm].

    Found between printed rows where ε_HbO2 − ε_Hb changes sign, by linear interpolation of
    the difference; a row where both columns print the same value is itself a point.  Used to
    mark the points on plots of a planned sO₂ series (the μa of every level meets there).
    """
    table = extinction_table(source)
    wavelength = table.wavelength_nm
    difference = table.epsilon_per_molar_per_cm["hbo2"] - table.epsilon_per_molar_per_cm["hb"]
    points = list(wavelength[difference == 0])
    for i in range(len(wavelength) - 1):
        a, b = difference[i], difference[i + 1]
        if a * b < 0:
            points.append(wavelength[i] + (wavelength[i + 1] - wavelength[i]) * a / (a - b))
    points = np.array(sorted(points))
    if band_nm is not None:
        lo, hi = band_nm
        points = points[(points >= lo) & (points <= hi)]
    return points


def basis_note() -> str:
    """The absorption basis in words (for sheets and the page)."""
    return EXTINCTION_BASIS
