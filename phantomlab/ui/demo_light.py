"""R(ρ) of the demo emulsion from a shipped Monte Carlo table, for the page's invented probe files (layer 5).

Demo data, invented.  ``phantomlab/data/demo_light_mc.npz`` holds direct runs of the
project's Monte Carlo engine for the demo lipid emulsion (n 1.33 under air) at five g from
0.50 to 0.66 (the emulsion's g falls from 0.64 at 660 nm to 0.51 at 850 nm), μs′ = 1 /mm and
13 ratios μs′/μa from 20 to 1000 (made by ``phantomlab/data/make_demo_light.py``, which
states how).  A half-space's R(ρ)/μs′² depends only on μs′/μa and ρ μs′ at fixed g and
indices, so R(ρ; μa, μs′, g) = μs′² T(ρ μs′; μs′/μa, g): a cubic spline of log T in
log(μs′/μa) at each g of the table, then straight lines in g (R changes with g by a few per
cent per 0.1, smoothly; a cubic through the noisy nodes would amplify their photon noise),
then a cubic spline in ρ μs′.  The largest errors of the interpolations in the ratio (0.044)
and in g (0.029), leave-one-out at twice the table's spacing with the nodes' photon noise
in them (upper bounds; in g they scatter as that noise does, no curvature seen), are stored
with the table (:func:`demo_light_info`).  Milliseconds per file, no simulation at page time, and
independent of the default fit's Monte Carlo lookup (a stored analog run, re-weighted and
scaled, with seeds of its own): the lookup describes this light only as far as both are
right, which is what a demo fit shows.

The table's own photon noise (standard errors of the runs, interpolated linearly in log
ratio and g) is returned with each value; distances where it exceeds
:data:`MAX_RELATIVE_SD` (far from the source at high absorption) are not served (NaN): a
real probe loses them in its noise too.
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
    # far nodes without photons at some g and ratio: dropped
    counted = np.all(table["reflectance"] > 0.0, axis=(0, 1))
    for key in ("reflectance", "sd"):
        table[key] = table[key][:, :, counted]
    table["x"] = table["x"][counted]
    table["log_ratio"] = np.log(table["ratio"])
    # one spline in log ratio for every g and node: values (Q, G, X)
    table["log_t"] = CubicSpline(table["log_ratio"], np.log(table["reflectance"]).transpose(1, 0, 2), axis=0)
    table["relative_sd"] = table["sd"] / table["reflectance"]
    return table


def demo_light_info() -> dict:
    """Provenance of the table (source, g_nodes, n, n_outside, …) with its ranges and interpolation errors.

    Returns
    -------
    dict
        The stored provenance, plus ``ratio_range`` and ``g_range`` (first, last node),
        ``interpolation_error`` (in the ratio) and ``g_interpolation_error`` (in g): the
        largest relative errors, leave-one-out (upper bounds).
    """
    table = _table()
    info = json.loads(str(table["provenance"]))
    info.update(ratio_range=(float(table["ratio"][0]), float(table["ratio"][-1])),
                g_range=(float(table["g"][0]), float(table["g"][-1])),
                interpolation_error=float(table["interpolation_error"]),
                g_interpolation_error=float(table["g_interpolation_error"]))
    return info


def _linear_weights(nodes: np.ndarray, value: float) -> tuple[int, float]:
    """Index of the node below ``value`` and the weight of the node above it (linear interpolation)."""
    k = int(np.clip(np.searchsorted(nodes, value, side="right") - 1, 0, nodes.size - 2))
    return k, float((value - nodes[k]) / (nodes[k + 1] - nodes[k]))


def demo_light_reflectance(*, mua_per_mm: float, musp_per_mm: float, g: float,
                           rho_mm) -> tuple[np.ndarray, np.ndarray]:
    """R(ρ) of the demo emulsion and the table's photon noise, per unit incident power, specular excluded.

    Parameters
    ----------
    mua_per_mm, musp_per_mm : float [1/mm]
        Absorption and reduced scattering; μs′/μa within the table's ratios (20–1000).
    g : float [dimensionless]
        Henyey–Greenstein anisotropy, within the table's g (0.50–0.66).
    rho_mm : array (R,) [mm]

    Returns
    -------
    reflectance, sd : ndarray (R,) [1/mm²]
        NaN where ρ μs′ lies outside the table's 1–24 transport lengths or its photon noise
        exceeds :data:`MAX_RELATIVE_SD`.

    Raises
    ------
    InputError
        μs′/μa or g outside the table, or non-positive optics.
    """
    table = _table()
    mua, musp, anisotropy = float(mua_per_mm), float(musp_per_mm), float(g)
    if not (np.isfinite(mua) and np.isfinite(musp) and mua > 0.0 and musp > 0.0):
        raise InputError(f"demo light: mua {mua_per_mm!r} and musp {musp_per_mm!r} [1/mm]; accepted: both > 0")
    ratio = musp / mua
    low, high = float(table["ratio"][0]), float(table["ratio"][-1])
    if not low <= ratio <= high:
        raise InputError(f"demo light: musp/mua = {ratio:.3g} is outside the demo's Monte Carlo table "
                         f"({low:g} to {high:g}); the invented probe file covers demo batches of that range")
    g_nodes = table["g"]
    if not (np.isfinite(anisotropy) and g_nodes[0] <= anisotropy <= g_nodes[-1]):
        raise InputError(f"demo light: g = {anisotropy:g} is outside the demo's Monte Carlo table ({g_nodes[0]:g} to "
                         f"{g_nodes[-1]:g}, the demo emulsion's); the invented probe file covers scatterers of that g")
    log_ratio = np.log(ratio)
    k, along_ratio = _linear_weights(table["log_ratio"], log_ratio)
    i, along_g = _linear_weights(g_nodes, anisotropy)
    at_nodes = table["log_t"](log_ratio)  # (G, X)
    log_t = (1.0 - along_g) * at_nodes[i] + along_g * at_nodes[i + 1]
    corners = table["relative_sd"][i:i + 2, k:k + 2]
    relative = ((1.0 - along_g) * ((1.0 - along_ratio) * corners[0, 0] + along_ratio * corners[0, 1])
                + along_g * ((1.0 - along_ratio) * corners[1, 0] + along_ratio * corners[1, 1]))
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
