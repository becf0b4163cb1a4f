"""How far the diffusion models are from Monte Carlo: measured error maps (layer 2).

The maps hold ε = R_diffusion / R_MonteCarlo − 1 for a semi-infinite medium, measured with
the project's own Monte Carlo engine run directly (``phantomlab/data/diffusion_mc_error.npz``,
made by ``phantomlab/data/make_diffusion_mc_error.py``), over

* srdr (``kienle1997``, ``farrell1992``): μs′/μa (2 … 3000), ρ μs′ (0.025 … 100 transport
  lengths) and the relative index n/n_outside (1 … 1.5);
* sfdi (``cuccia2009``): μs′/μa, fx/μs′ (0 … 1) and n/n_outside.

For a half-space R(ρ)/μs′² depends only on μs′/μa, ρ μs′, n/n_outside and the phase
function, so runs at μs′ = 1 /mm cover every μs′.  The runs use Henyey–Greenstein g = 0.8;
extra runs at g = 0.7 and 0.9 (n = 1.4) give how much ε moves with g (``g_sd``: half their
difference, taken for every index).

How the maps are made from the tallies (:func:`compute_maps`, run by the script; a test
recomputes them from the stored tallies and the diffusion code as it is, so they cannot
drift apart):

* srdr: the diffusion R(ρ) is averaged over each Monte Carlo annulus (8-point Gauss–Legendre
  in ρ, weighted by 2πρ), ε per annulus, then smoothed in ln ρ by a cubic smoothing spline
  (scipy ``make_smoothing_spline``) weighted by the Monte Carlo standard errors, its
  smoothing chosen so that the weighted residual sum of squares equals the number of annuli
  used (Reinsch 1967, Numer Math 10:177); the map's own noise (``noise_sd``) is the spread
  of the smooth over 16 noisy copies of the tallies.  Annuli with a relative standard error
  above :data:`MAX_TALLY_REL_SD` are not used; beyond the last one used the value there is
  held (``extrapolated``).
* sfdi: the Monte Carlo R(fx) is the zero-order Hankel transform of the annulus tallies,
  R(fx) = 2π ∫ R(ρ) J₀(2π fx ρ) ρ dρ (Cuccia et al. 2009, eq. 8), with the light reconstructed inside each annulus by
  histopolation (:func:`hankel_of_annuli`), plus the part beyond 100 transport lengths from the
  ``kienle1997`` tail scaled to the last annuli.

References
----------
Kienle A, Patterson MS 1997, J Opt Soc Am A 14:246; Farrell TJ, Patterson MS, Wilson B 1992,
Med Phys 19:879; Cuccia DJ et al. 2009, J Biomed Opt 14:024012.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import lru_cache
from importlib import resources

import numpy as np

__all__ = [
    "MAP_FILE",
    "SRDR_MAP_MODELS",
    "SFDI_MAP_MODELS",
    "FX_OVER_MUSP_GRID",
    "MAX_TALLY_REL_SD",
    "DiffusionError",
    "compute_maps",
    "hankel_of_annuli",
    "load_maps",
    "srdr_diffusion_error",
    "sfdi_diffusion_error",
]

MAP_FILE = "diffusion_mc_error.npz"
SRDR_MAP_MODELS = ("kienle1997", "farrell1992")
SFDI_MAP_MODELS = ("cuccia2009",)
#: Spatial frequencies of the sfdi map, in units of μs′ [dimensionless, fx/μs′].
FX_OVER_MUSP_GRID = np.array([0.0, 0.005, 0.01, 0.02, 0.05, 0.1, 0.15, 0.2, 0.3, 0.5, 0.7, 1.0])
#: Annuli whose Monte Carlo relative standard error exceeds this are left out of the srdr map.
MAX_TALLY_REL_SD = 0.2
#: Noisy copies of the tallies used to measure the smooth map's own noise.
_NOISE_COPIES = 16
_MAP_G = 0.8
_SPREAD_N = 1.4


@dataclass(frozen=True)
class DiffusionError:
    """Measured error of a diffusion model against Monte Carlo at given points.

    Attributes
    ----------
    eps : ndarray
        R_diffusion / R_MonteCarlo − 1 (shape of the query: S + G).
    g_sd : ndarray
        How much ε moves with the anisotropy g (half the change from g = 0.7 to 0.9).
    noise_sd : ndarray
        The map's own Monte Carlo noise after smoothing.
    outside : ndarray of bool (S)
        The query lies outside the measured range (μs′/μa, index, or distance/frequency) and
        the nearest measured value was used.
    """

    eps: np.ndarray
    g_sd: np.ndarray
    noise_sd: np.ndarray
    outside: np.ndarray


def _annulus_nodes(edges: np.ndarray, order: int = 8):
    x, w = np.polynomial.legendre.leggauss(order)
    a, b = edges[:-1], edges[1:]
    nodes = 0.5 * (b - a)[:, None] * x + 0.5 * (b + a)[:, None]
    weights = 0.5 * (b - a)[:, None] * w * 2.0 * np.pi * nodes / (np.pi * (b * b - a * a))[:, None]
    return nodes, weights


def _smooth(x, y, sd, rng):
    """Smoothing spline of y(x) with χ² = N (weights 1/sd²) and its pointwise noise SD."""
    from scipy.interpolate import make_smoothing_spline

    w = 1.0 / sd**2
    target = float(x.size)
    best = None
    for lam in np.geomspace(1e-8, 1e2, 41):  # smallest smoothing whose χ² reaches N
        spline = make_smoothing_spline(x, y, w=w, lam=lam)
        chi2 = float(np.sum(w * (spline(x) - y) ** 2))
        best = (lam, spline)
        if chi2 >= target:
            break
    lam, spline = best
    copies = np.array([make_smoothing_spline(x, y + sd * rng.standard_normal(y.size), w=w, lam=lam)(x)
                       for _ in range(_NOISE_COPIES)])
    return spline(x), copies.std(axis=0, ddof=1)


def _hankel_weights(edges: np.ndarray, fx: np.ndarray) -> np.ndarray:
    """∫_bin J₀(2π fx ρ) 2πρ dρ for every (fx, bin): (F, B)."""
    from scipy.special import j1

    k = 2.0 * np.pi * fx[:, None]
    a, b = edges[None, :-1], edges[None, 1:]
    with np.errstate(divide="ignore", invalid="ignore"):
        out = 2.0 * np.pi * (b * j1(k * b) - a * j1(k * a)) / k
    return np.where(k > 0, out, np.pi * (b * b - a * a))


def _tail_hankel(*, mua, n, start, scale, fx):
    """∫_start^∞ scale · R_kienle1997(ρ) J₀(2π fx ρ) 2πρ dρ at μs′ = 1 /mm (far tail)."""
    from scipy.special import j0

    from phantomlab.transport.diffusion import srdr_reflectance

    mu_eff = np.sqrt(3.0 * mua * (mua + 1.0))
    rho = np.linspace(start, start + 40.0 / mu_eff, 4000)
    R = srdr_reflectance(mua_per_mm=mua, musp_per_mm=1.0, rho_mm=rho, n=n)
    return np.trapezoid(scale * R[None, :] * j0(2 * np.pi * fx[:, None] * rho[None, :]) * 2 * np.pi * rho[None, :],
                        rho, axis=1)


def hankel_of_annuli(*, average, edges, fx) -> np.ndarray:
    """R(fx) = 2π ∫ R(ρ) J₀(2π fx ρ) ρ dρ from annulus averages R̄ (Cuccia et al. 2009, eq. 8).

    The light inside radius ρ, C(ρ) = ∫₀^ρ R 2πρ′ dρ′, is known exactly at the annulus edges
    (cumulative sums of R̄ × area); a cubic spline of C in ρ² (C ∝ ρ² near the source)
    reconstructs it between them (histopolation), and R(fx) = ∫ J₀(2π fx ρ) dC(ρ) is summed
    on a fine grid.  On the map's annuli this is within 0.01 % of the exact transform of
    exp(−ρ) and within 0.2 % for a diffusion R(ρ) peaked at the source, up to fx = 1 /mm at
    μs′ = 1 /mm; the plain sum Σ R̄_b ∫_b J₀ 2πρ dρ (R constant in each annulus) is off by up
    to 4 % and 36 % there (tests/transport/test_diffusion_error.py).  Light beyond the last
    edge is not included.

    Parameters
    ----------
    average : ndarray (B,)
        Annulus averages of R [1/mm²] (NaN where nothing was tallied: taken as 0).
    edges : ndarray (B + 1,) [mm]
    fx : ndarray (F,) [1/mm]

    Returns
    -------
    ndarray (F,)
    """
    from scipy.interpolate import CubicSpline
    from scipy.special import j0

    average = np.where(np.isfinite(average), average, 0.0)
    edges = np.asarray(edges, float)
    cumulative = np.concatenate([[0.0], np.cumsum(average * np.pi * (edges[1:] ** 2 - edges[:-1] ** 2))])
    spline = CubicSpline(edges**2, cumulative)
    near = min(2.0, edges[-1])
    grid = np.unique(np.concatenate([np.linspace(edges[0], near, 4001), np.geomspace(near, edges[-1], 40001)]))
    light = np.diff(spline(grid**2))
    middle = 0.5 * (grid[1:] + grid[:-1])
    k = 2.0 * np.pi * np.asarray(fx, float)
    return j0(k[:, None] * middle[None, :]) @ light


def compute_maps(tallies) -> dict:
    """The error maps from the Monte Carlo tallies and the diffusion code as it is now.

    Parameters
    ----------
    tallies : mapping
        The arrays the script stores: ``rho_edges_musp`` (B + 1), ``g``, ``n``, ``ratio`` (K),
        ``reflectance``, ``reflectance_sd`` (K, B) [1/mm² at μs′ = 1 /mm].

    Returns
    -------
    dict of ndarray
        ``ratio_nodes`` (Nr), ``n_nodes`` (Nn), ``rho_musp`` (B), ``fx_over_musp`` (F); per srdr
        model ``srdr_<model>_eps``, ``_noise_sd``, ``_extrapolated`` (Nr, Nn, B) and ``_g_sd``
        (Nr, B); ``sfdi_cuccia2009_eps``, ``_noise_sd`` (Nr, Nn, F) and ``_g_sd`` (Nr, F);
        ``sfdi_mc_reflectance`` (Nr, Nn, F).
    """
    import warnings

    from phantomlab.errors import PhantomlabWarning
    from phantomlab.transport.diffusion import srdr_reflectance
    from phantomlab.transport.spatial_frequency_domain import sfdi_reflectance

    edges = np.asarray(tallies["rho_edges_musp"], float)
    centres = 0.5 * (edges[1:] + edges[:-1])
    g_all = np.asarray(tallies["g"], float)
    n_all = np.asarray(tallies["n"], float)
    ratio_all = np.asarray(tallies["ratio"], float)
    R_all = np.asarray(tallies["reflectance"], float)
    sd_all = np.asarray(tallies["reflectance_sd"], float)
    ratios = np.unique(ratio_all)
    indices = np.unique(n_all[g_all == _MAP_G])
    nodes, weights = _annulus_nodes(edges)
    hankel = _hankel_weights(edges, FX_OVER_MUSP_GRID)
    rng = np.random.default_rng(20240611)
    out = {"ratio_nodes": ratios, "n_nodes": indices, "rho_musp": centres, "fx_over_musp": FX_OVER_MUSP_GRID.copy()}

    def run_index(g, n, ratio):
        hit = np.where((g_all == g) & (n_all == n) & (ratio_all == ratio))[0]
        return int(hit[0]) if hit.size else None

    def srdr_eps(k, model):
        R, sd = R_all[k], sd_all[k]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            D = srdr_reflectance(mua_per_mm=1.0 / ratio_all[k], musp_per_mm=1.0, rho_mm=nodes.ravel(),
                                 n=n_all[k], model=model).reshape(nodes.shape)
        d_bin = np.sum(D * weights, axis=1)
        with np.errstate(divide="ignore", invalid="ignore"):
            rel = sd / R
            eps = d_bin / R - 1.0
        used = np.isfinite(eps) & (R > 0) & (rel < MAX_TALLY_REL_SD) & (rel > 0)
        last = int(np.max(np.where(used)[0]))
        used[last + 1:] = False
        smooth, noise = _smooth(np.log(centres[used]), eps[used], (1.0 + eps[used]) * rel[used], rng)
        full = np.interp(np.log(centres), np.log(centres[used]), smooth)  # held beyond the ends
        full_noise = np.interp(np.log(centres), np.log(centres[used]), noise)
        return full, full_noise, centres > centres[last]

    def sfdi_mc(k):
        R, sd = R_all[k], sd_all[k]
        R = np.where(np.isfinite(R), R, 0.0)
        mua, n = 1.0 / ratio_all[k], n_all[k]

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            value = hankel_of_annuli(average=R, edges=edges, fx=FX_OVER_MUSP_GRID)
            # the far tail beyond the last annulus: kienle1997's shape, scaled to the last good annuli
            good = np.where((R > 0) & (sd / np.where(R > 0, R, 1.0) < MAX_TALLY_REL_SD))[0][-4:]
            D = srdr_reflectance(mua_per_mm=mua, musp_per_mm=1.0, rho_mm=nodes[good].ravel(),
                                 n=n).reshape(nodes[good].shape)
            scale = float(np.sum(R[good]) / np.sum(np.sum(D * weights[good], axis=1)))
            value = value + _tail_hankel(mua=mua, n=n, start=edges[-1], scale=scale, fx=FX_OVER_MUSP_GRID)
        value_sd = np.sqrt((hankel**2) @ np.where(np.isfinite(sd), sd, 0.0) ** 2)
        return value, value_sd

    for model in SRDR_MAP_MODELS:
        eps = np.full((ratios.size, indices.size, centres.size), np.nan)
        noise = np.full_like(eps, np.nan)
        extrapolated = np.zeros(eps.shape, bool)
        g_sd = np.zeros((ratios.size, centres.size))
        for i, ratio in enumerate(ratios):
            for j, n in enumerate(indices):
                k = run_index(_MAP_G, n, ratio)
                eps[i, j], noise[i, j], extrapolated[i, j] = srdr_eps(k, model)
            low, high = run_index(0.7, _SPREAD_N, ratio), run_index(0.9, _SPREAD_N, ratio)
            if low is not None and high is not None:
                g_sd[i] = 0.5 * np.abs(srdr_eps(high, model)[0] - srdr_eps(low, model)[0])
        out[f"srdr_{model}_eps"], out[f"srdr_{model}_noise_sd"] = eps, noise
        out[f"srdr_{model}_extrapolated"], out[f"srdr_{model}_g_sd"] = extrapolated, g_sd

    F = FX_OVER_MUSP_GRID.size
    eps = np.full((ratios.size, indices.size, F), np.nan)
    noise = np.full_like(eps, np.nan)
    mc = np.full_like(eps, np.nan)
    g_sd = np.zeros((ratios.size, F))

    def cuccia_eps(k):
        value, value_sd = sfdi_mc(k)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            model = sfdi_reflectance(mua_per_mm=1.0 / ratio_all[k], musp_per_mm=1.0, fx_per_mm=FX_OVER_MUSP_GRID,
                                     n=n_all[k])
        return model / value - 1.0, model / value * value_sd / value, value

    for i, ratio in enumerate(ratios):
        for j, n in enumerate(indices):
            eps[i, j], noise[i, j], mc[i, j] = cuccia_eps(run_index(_MAP_G, n, ratio))
        low, high = run_index(0.7, _SPREAD_N, ratio), run_index(0.9, _SPREAD_N, ratio)
        if low is not None and high is not None:
            g_sd[i] = 0.5 * np.abs(cuccia_eps(high)[0] - cuccia_eps(low)[0])
    out["sfdi_cuccia2009_eps"], out["sfdi_cuccia2009_noise_sd"] = eps, noise
    out["sfdi_cuccia2009_g_sd"], out["sfdi_mc_reflectance"] = g_sd, mc
    return out


@lru_cache(maxsize=1)
def load_maps() -> dict:
    """The stored maps (read once): the arrays of :func:`compute_maps` plus ``provenance``."""
    with resources.files("phantomlab").joinpath("data", MAP_FILE).open("rb") as handle:
        with np.load(handle, allow_pickle=False) as data:
            return {key: np.array(data[key]) for key in data.files}


@lru_cache(maxsize=8)
def _interpolators(kind: str, model: str):
    from scipy.interpolate import RegularGridInterpolator

    maps = load_maps()
    axis = np.log(maps["rho_musp"]) if kind == "srdr" else maps["fx_over_musp"]
    grid = (np.log(maps["ratio_nodes"]), maps["n_nodes"], axis)
    prefix = f"{kind}_{model}"
    eps = RegularGridInterpolator(grid, maps[f"{prefix}_eps"])
    noise = RegularGridInterpolator(grid, maps[f"{prefix}_noise_sd"])
    g_sd = RegularGridInterpolator((grid[0], grid[2]), maps[f"{prefix}_g_sd"])
    return grid, eps, noise, g_sd


def _query(kind, model, *, mua_per_mm, musp_per_mm, n, n_outside, axis, scaled_axis) -> DiffusionError:
    grid, eps_i, noise_i, g_i = _interpolators(kind, model)
    mua, musp, n_rel = np.broadcast_arrays(np.asarray(mua_per_mm, float), np.asarray(musp_per_mm, float),
                                           np.asarray(n, float) / np.asarray(n_outside, float))
    with np.errstate(divide="ignore", invalid="ignore"):
        log_ratio = np.log(np.where(mua > 0, musp / mua, np.inf))
    axis = np.asarray(axis, float)
    coordinate = scaled_axis(axis[(None,) * mua.ndim + (Ellipsis,)], musp[(Ellipsis,) + (None,) * axis.ndim])
    shape = np.broadcast_shapes(mua.shape + axis.shape, coordinate.shape)
    spread = (Ellipsis,) + (None,) * axis.ndim
    lo = [g[0] for g in grid]
    hi = [g[-1] for g in grid]
    r = np.broadcast_to(np.clip(log_ratio, lo[0], hi[0])[spread], shape)
    m = np.broadcast_to(np.clip(n_rel, lo[1], hi[1])[spread], shape)
    c = np.broadcast_to(np.clip(coordinate, lo[2], hi[2]), shape)
    finite = np.isfinite(r) & np.isfinite(m) & np.isfinite(c)
    points = np.stack([np.where(finite, r, lo[0]), np.where(finite, m, lo[1]), np.where(finite, c, lo[2])], axis=-1)
    eps = np.where(finite, eps_i(points), np.nan)
    noise = np.where(finite, noise_i(points), np.nan)
    g_sd = np.where(finite, g_i(points[..., [0, 2]]), np.nan)
    outside_point = (np.broadcast_to(log_ratio[spread], shape) < lo[0]) | (np.broadcast_to(log_ratio[spread], shape) > hi[0]) \
        | (np.broadcast_to(n_rel[spread], shape) < lo[1] - 1e-9) | (np.broadcast_to(n_rel[spread], shape) > hi[1] + 1e-9) \
        | (np.broadcast_to(coordinate, shape) > hi[2])
    outside = np.any(outside_point.reshape(mua.shape + (-1,)), axis=-1) if axis.ndim else outside_point
    return DiffusionError(eps=eps, g_sd=g_sd, noise_sd=noise, outside=outside)


def srdr_diffusion_error(*, model: str, mua_per_mm, musp_per_mm, rho_mm, n, n_outside=1.0) -> DiffusionError:
    """Measured ε = R_diffusion/R_MonteCarlo − 1 of an srdr diffusion model at given optics.

    Parameters
    ----------
    model : {'kienle1997', 'farrell1992'}
    mua_per_mm, musp_per_mm, n, n_outside : float or array (S)
    rho_mm : array (G) [mm]

    Returns
    -------
    DiffusionError
        Arrays of shape S + G (``outside``: S).
    """
    from phantomlab.transport.arguments import choose

    choose(dict.fromkeys(SRDR_MAP_MODELS), model, "srdr diffusion error map")
    return _query("srdr", model, mua_per_mm=mua_per_mm, musp_per_mm=musp_per_mm, n=n, n_outside=n_outside,
                  axis=rho_mm, scaled_axis=lambda rho, musp: np.log(np.maximum(rho * musp, 1e-300)))


def sfdi_diffusion_error(*, model: str = "cuccia2009", mua_per_mm, musp_per_mm, fx_per_mm, n,
                         n_outside=1.0) -> DiffusionError:
    """Measured ε = R_diffusion/R_MonteCarlo − 1 of the sfdi diffusion model at given optics.

    Parameters
    ----------
    model : {'cuccia2009'}
    mua_per_mm, musp_per_mm, n, n_outside : float or array (S)
    fx_per_mm : array (G) [1/mm]

    Returns
    -------
    DiffusionError
        Arrays of shape S + G (``outside``: S).
    """
    from phantomlab.transport.arguments import choose

    choose(dict.fromkeys(SFDI_MAP_MODELS), model, "sfdi diffusion error map")
    return _query("sfdi", model, mua_per_mm=mua_per_mm, musp_per_mm=musp_per_mm, n=n, n_outside=n_outside,
                  axis=fx_per_mm, scaled_axis=lambda fx, musp: fx / musp)
