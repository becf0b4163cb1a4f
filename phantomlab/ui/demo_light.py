"""R(ρ) of the demo emulsion from a shipped Monte Carlo table, for the page's invented probe files (layer 5).

Demo data, invented.  ``phantomlab/data/demo_light_mc.npz`` holds direct runs of the
project's Monte Carlo engine for the demo lipid emulsion (g 0.58, n 1.33 under air) at
μs′ = 1 /mm and 13 ratios μs′/μa from 20 to 1000 (made by ``phantomlab/data/make_demo_light.py``,
which states how).  A half-space's R(ρ)/μs′² depends only on μs′/μa and ρ μs′ at fixed g and
indices, so R(ρ; μa, μs′) = μs′² T(ρ μs′; μs′/μa): a cubic spline of log T in log(μs′/μa),
then in ρ μs′.  Milliseconds per file, no simulation at page time, and independent of the
default fit's Monte Carlo lookup (a stored analog run, re-weighted and scaled): the lookup
describes this light only as far as both are right, which is what a demo fit shows.

The table's own photon noise (standard errors of the runs) is returned with each value;
distances where it exceeds :data:`MAX_RELATIVE_SD` (far from the source at high absorption)
are not served (NaN): a real probe loses them in its noise too.
"""

from __future__ import annotations

import json
from functools import lru_cache
from importlib import resources

import numpy as np
from scipy.interpolate import CubicSpline

from phantomlab.errors import InputError

__all__ = ["DEMO_LIGHT_FILE", "MAX_RELATIVE_SD", "demo_light_info", "demo_light_reflectance"]

DEMO_LIGHT_FILE = "demo_light_mc.npz"
#: Largest relative photon noise of the table served at a distance.
MAX_RELATIVE_SD = 0.015


@lru_cache(maxsize=1)
def _table() -> dict:
    with resources.files("phantomlab").joinpath("data", DEMO_LIGHT_FILE).open("rb") as handle:
        with np.load(handle) as data:
            table = {key: np.array(data[key]) for key in data.files}
    counted = np.all(table["reflectance"] > 0.0, axis=0)  # far nodes without photons at some ratio: dropped
    for key in ("reflectance", "sd"):
        table[key] = table[key][:, counted]
    table["x"] = table["x"][counted]
    table["log_ratio"] = np.log(table["ratio"])
    table["log_t"] = CubicSpline(table["log_ratio"], np.log(table["reflectance"]), axis=0)
    table["relative_sd"] = table["sd"] / table["reflectance"]
    return table


def demo_light_info() -> dict:
    """Provenance of the table (source, g, n, n_outside, …) with its ratio range and interpolation error."""
    table = _table()
    info = json.loads(str(table["provenance"]))
    info.update(ratio_range=(float(table["ratio"][0]), float(table["ratio"][-1])),
                interpolation_error=float(table["interpolation_error"]))
    return info


def demo_light_reflectance(*, mua_per_mm: float, musp_per_mm: float, rho_mm) -> tuple[np.ndarray, np.ndarray]:
    """R(ρ) of the demo emulsion and the table's photon noise, per unit incident power, specular excluded.

    Parameters
    ----------
    mua_per_mm, musp_per_mm : float [1/mm]
        Absorption and reduced scattering; μs′/μa within the table's ratios (20–1000).
    rho_mm : array (R,) [mm]

    Returns
    -------
    reflectance, sd : ndarray (R,) [1/mm²]
        NaN where ρ μs′ lies outside the table's 1–24 transport lengths or its photon noise
        exceeds :data:`MAX_RELATIVE_SD`.

    Raises
    ------
    InputError
        μs′/μa outside the table, or non-positive optics.
    """
    table = _table()
    mua, musp = float(mua_per_mm), float(musp_per_mm)
    if not (np.isfinite(mua) and np.isfinite(musp) and mua > 0.0 and musp > 0.0):
        raise InputError(f"demo light: mua {mua_per_mm!r} and musp {musp_per_mm!r} [1/mm]; accepted: both > 0")
    ratio = musp / mua
    low, high = float(table["ratio"][0]), float(table["ratio"][-1])
    if not low <= ratio <= high:
        raise InputError(f"demo light: musp/mua = {ratio:.3g} is outside the demo's Monte Carlo table "
                         f"({low:g} to {high:g}); the invented probe file covers demo batches of that range")
    log_ratio = np.log(ratio)
    log_t = table["log_t"](log_ratio)
    relative = np.array([np.interp(log_ratio, table["log_ratio"], column) for column in table["relative_sd"].T])
    x = np.asarray(rho_mm, float) * musp
    nodes = table["x"]
    inside = (x >= nodes[0]) & (x <= nodes[-1])
    reflectance = np.full(x.shape, np.nan)
    noise = np.full(x.shape, np.nan)
    reflectance[inside] = musp**2 * np.exp(CubicSpline(nodes, log_t)(x[inside]))
    noise[inside] = np.interp(x[inside], nodes, relative)
    noise[noise > MAX_RELATIVE_SD] = np.nan
    reflectance[~np.isfinite(noise)] = np.nan
    return reflectance, noise * reflectance
