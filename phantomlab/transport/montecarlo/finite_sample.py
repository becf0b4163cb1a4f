"""Monte Carlo of a finite sample under a beam of finite width: what reaches the ports (layer 2).

A slab of radius ``sample_diameter_mm / 2`` (or unbounded) lit by a normally incident beam
of uniform irradiance over a disc of diameter ``beam_diameter_mm``, centred on the sample
and the ports.  Photons are walked by the same kernel as :func:`simulate`
(:func:`phantomlab.transport.montecarlo._kernels.run_3d_finite`); a photon that reaches the
sample's edge is lost there (an open, non-reflecting edge), and the light leaving each face
is tallied by its distance from the centre, so the part that leaves inside a port of radius
r (and reaches the sphere) is the sum of the bins below r.  What leaves outside, or through
the edge, is the light a sphere measurement loses.

Glass slides are the kernel's: two Fresnel interfaces with incoherent reflections, without
a lateral shift in the glass (thin slides compared with the ports).

References
----------
Wang L, Jacques SL, Zheng L 1995, Comput Methods Programs Biomed 47:131 (the photon walk).
Zhu D, Lu W, Zeng S, Luo Q 2007, J Biomed Opt 12:064004 (light lost by a sample between two
integrating spheres, by Monte Carlo: its size grows as the port shrinks and the sample
thickens, and it biases μa far more than μs).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError
from phantomlab.transport.montecarlo import _kernels
from phantomlab.transport.montecarlo._random import batch_states
from phantomlab.transport.montecarlo._validate import check_count, check_threads
from phantomlab.transport.montecarlo.result import specular_reflectance
from phantomlab.transport.montecarlo.simulate import DEFAULT_BATCHES, KERNEL_LOCK, _check_common, _mean_and_se, _split, kernel_threads

__all__ = ["FiniteSampleResult", "simulate_finite_sample", "MAX_CAPTURE_RADII"]

#: Most capture radii (ports) one run tallies.
MAX_CAPTURE_RADII = 16


@dataclass(frozen=True, eq=False)
class FiniteSampleResult:
    """Where the light goes for a finite beam on a finite sample; fractions of the incident power.

    Attributes
    ----------
    capture_radii_mm : ndarray (K,) [mm]
    captured_reflectance, captured_reflectance_sd : ndarray (K,)
        Light leaving the top face within each radius (specular reflection excluded).
    captured_transmittance, captured_transmittance_sd : ndarray (K,)
        Light leaving the bottom face within each radius (unscattered beam included).
    diffuse_reflectance, diffuse_reflectance_sd : float
        All light leaving the top face, specular excluded.
    total_transmittance, unscattered_transmittance (+ ``_sd``) : float
    edge_loss, edge_loss_sd : float
        Light that reached the sample's edge.
    absorbed_fraction, roulette_balance : float
        Light absorbed in the sample; weight created minus destroyed by roulette (so
        diffuse R + specular + T + absorbed + edge = 1 + roulette_balance).
    specular_reflectance : float
    photons, seed : int
    seconds : float [s]
    """

    capture_radii_mm: np.ndarray
    captured_reflectance: np.ndarray
    captured_reflectance_sd: np.ndarray
    captured_transmittance: np.ndarray
    captured_transmittance_sd: np.ndarray
    diffuse_reflectance: float
    diffuse_reflectance_sd: float
    total_transmittance: float
    total_transmittance_sd: float
    unscattered_transmittance: float
    unscattered_transmittance_sd: float
    edge_loss: float
    edge_loss_sd: float
    absorbed_fraction: float
    roulette_balance: float
    specular_reflectance: float
    photons: int
    seed: int
    seconds: float


_WARMED = set()


def _warm() -> None:
    if "finite" in _WARMED:
        return
    states = batch_states(0, 1)
    counts = np.ones(1, dtype=np.int64)
    tallies = np.zeros((1, len(_kernels.TALLY_NAMES)))
    edges = np.array([0.0, 1.0, 2.0])
    with KERNEL_LOCK:
        for analog in (False, True):
            _kernels.run_3d_finite(counts, states.copy(), 0.1, 1.0, 0.5, 1.4, 1.0, 0.0, 1.0, 0.0, 1.0, analog,
                                   1.0, 1e-4, 0.1, edges, tallies, np.zeros((1, 2)), np.zeros((1, 2)), 0.5, 3.0,
                                   np.zeros((1, 1)))
    _WARMED.add("finite")


def simulate_finite_sample(*, mua_per_mm, mus_per_mm, g, n, thickness_mm, beam_diameter_mm, capture_radii_mm,
                           sample_diameter_mm=None, n_outside=1.0, n_slide=None, photons, seed=0, threads=None,
                           batches=DEFAULT_BATCHES, estimator="weighted") -> FiniteSampleResult:
    """Light of a finite beam on a finite slab that leaves each face within given radii.

    Parameters
    ----------
    mua_per_mm, mus_per_mm : float [1/mm]
    g, n, n_outside : float
    thickness_mm : float [mm]
    beam_diameter_mm : float [mm]
        Diameter of the uniformly lit disc (> 0).
    capture_radii_mm : sequence of float [mm]
        Port radii to tally within (increasing, larger than the beam's radius, at most
        :data:`MAX_CAPTURE_RADII`).
    sample_diameter_mm : float or None [mm]
        Diameter of the sample (at least the largest port); None: unbounded.
    n_slide : float, None or (top, bottom)
        Slides as in :func:`simulate`.
    photons, seed, threads, batches : int
    estimator : {'weighted', 'analog'}

    Returns
    -------
    FiniteSampleResult
    """
    mua, mus, g, n, n_outside, slide, thickness = _check_common(
        mua_per_mm=mua_per_mm, mus_per_mm=mus_per_mm, g=g, n=n, n_outside=n_outside, n_slide=n_slide,
        thickness_mm=thickness_mm)
    if thickness is None:
        raise InputError("a finite sample needs thickness_mm")
    try:
        beam = float(beam_diameter_mm)
        radii = np.atleast_1d(np.asarray(capture_radii_mm, dtype=float))
    except (TypeError, ValueError):
        raise InputError("beam_diameter_mm and capture_radii_mm must be numbers [mm]") from None
    if not math.isfinite(beam) or beam <= 0:
        raise InputError(f"beam_diameter_mm = {beam_diameter_mm!r}; accepted: > 0 mm")
    if radii.ndim != 1 or not 1 <= radii.size <= MAX_CAPTURE_RADII or not np.all(np.isfinite(radii)) \
            or np.any(np.diff(radii) <= 0):
        raise InputError(f"capture_radii_mm: 1 to {MAX_CAPTURE_RADII} increasing radii [mm] expected")
    if radii[0] < beam / 2:
        raise InputError(f"a port of radius {radii[0]:g} mm is narrower than the beam ({beam:g} mm wide); "
                         f"accepted: ports wider than the beam")
    edge = math.inf
    if sample_diameter_mm is not None:
        edge = float(sample_diameter_mm) / 2
        if not math.isfinite(edge) or edge < radii[-1]:
            raise InputError(f"sample_diameter_mm = {sample_diameter_mm!r}; accepted: at least the largest port "
                             f"({2 * radii[-1]:g} mm)")
    photons = check_count("photons", photons)
    seed = check_count("seed", seed, minimum=0)
    threads = check_threads(threads)
    batches = min(check_count("batches", batches), photons)
    if estimator not in ("weighted", "analog"):
        raise InputError(f"estimator {estimator!r}; accepted: weighted, analog")
    specular = specular_reflectance(n=n, n_outside=n_outside, n_slide=slide[0])
    launch = 1.0 - specular
    edges = np.concatenate([[0.0], radii, [edge if math.isfinite(edge) else 1e12]])
    counts = _split(photons, batches)
    states = batch_states(seed, batches)
    tallies = np.zeros((batches, len(_kernels.TALLY_NAMES)))
    top = np.zeros((batches, edges.size - 1))
    bottom = np.zeros((batches, edges.size - 1))
    extra = np.zeros((batches, 1))
    _warm()
    with kernel_threads(threads):
        start = time.perf_counter()
        _kernels.run_3d_finite(
            counts, states, mua, mus, g, n, n_outside, 0.0 if slide[0] is None else slide[0], n_outside,
            0.0 if slide[1] is None else slide[1], thickness, estimator == "analog", launch,
            _kernels.ROULETTE_THRESHOLD * launch, _kernels.ROULETTE_SURVIVAL, edges, tallies, top, bottom,
            beam / 2, edge, extra)
        seconds = time.perf_counter() - start
    names = _kernels.TALLY_NAMES
    column = {name: tallies[:, i] for i, name in enumerate(names)}
    inside_r, inside_r_sd = _mean_and_se(np.cumsum(top, axis=1)[:, :-1], counts)
    inside_t, inside_t_sd = _mean_and_se(np.cumsum(bottom, axis=1)[:, :-1], counts)
    reflected, reflected_sd = _mean_and_se(column["scattered_reflectance"] + column["unscattered_reflectance"], counts)
    transmitted, transmitted_sd = _mean_and_se(column["diffuse_transmittance"] + column["unscattered_transmittance"],
                                               counts)
    unscattered, unscattered_sd = _mean_and_se(column["unscattered_transmittance"], counts)
    lost, lost_sd = _mean_and_se(extra[:, 0], counts)
    return FiniteSampleResult(
        capture_radii_mm=radii, captured_reflectance=inside_r, captured_reflectance_sd=inside_r_sd,
        captured_transmittance=inside_t, captured_transmittance_sd=inside_t_sd,
        diffuse_reflectance=float(reflected), diffuse_reflectance_sd=float(reflected_sd),
        total_transmittance=float(transmitted), total_transmittance_sd=float(transmitted_sd),
        unscattered_transmittance=float(unscattered), unscattered_transmittance_sd=float(unscattered_sd),
        edge_loss=float(lost), edge_loss_sd=float(lost_sd),
        absorbed_fraction=float(column["absorbed_fraction"].sum() / counts.sum()),
        roulette_balance=float(column["roulette"].sum() / counts.sum()), specular_reflectance=specular, photons=photons,
        seed=seed, seconds=seconds)
