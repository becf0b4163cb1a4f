"""Monte Carlo photon transport in a semi-infinite medium or a slab (layer 2).

:func:`simulate` launches a pencil beam at normal incidence on the top face (z = 0) of a
homogeneous medium (μa, μs, Henyey–Greenstein g, index n) under an outside medium of index
``n_outside``, optionally through a non-absorbing glass slide of index ``n_slide`` on each
face, and tallies where the light goes.  The kernels are in
:mod:`phantomlab.transport.montecarlo._kernels`; this module checks inputs, splits the
photons into independent batches with their own random streams, runs them in parallel and
turns the batch tallies into estimates with standard errors
(:class:`~phantomlab.transport.montecarlo.result.MonteCarloResult`).

Every tally is a fraction of the incident power, so for every run
``total_reflectance + total_transmittance + absorbed_fraction = 1 + roulette_balance``
to rounding, where ``roulette_balance`` is zero for the analog estimator and zero on
average (within its standard error) for the weighted one.
"""

from __future__ import annotations

import math
import threading
import time
from contextlib import contextmanager

import numba
import numpy as np

from phantomlab.errors import InputError
from phantomlab.transport.montecarlo import _kernels
from phantomlab.transport.montecarlo._random import batch_states
from phantomlab.transport.montecarlo._validate import (
    check_anisotropy,
    check_choice,
    check_coefficient,
    check_count,
    check_index,
    check_rho_grid,
    check_threads,
)
from phantomlab.transport.montecarlo.result import (
    MonteCarloResult,
    rho_bin_edges_mm,
    specular_reflectance,
    time_bin_edges_ps,
)
from phantomlab.transport.time_domain_images import SPEED_OF_LIGHT_MM_PER_PS

__all__ = ["simulate", "warm_up", "ESTIMATORS", "GEOMETRIES"]

ESTIMATORS = ("weighted", "analog")
GEOMETRIES = ("3d", "rod")
#: Default number of independent batches (the standard errors come from their spread).
DEFAULT_BATCHES = 32
#: Photons of each batch run by one kernel call.  Between calls :func:`simulate` reports
#: progress and Python acts on Ctrl-C (a numba kernel cannot be interrupted).  Every batch
#: continues its own random stream across calls, and the chunking depends on the photon
#: count only, never on threads, so results stay reproducible (up to 2^10 photons per batch
#: a run is one call; beyond, the batch's absorbed tally is summed in 2^10-photon parts).
CHUNK_PHOTONS_PER_BATCH = 1 << 10


def _split(photons: int, batches: int) -> np.ndarray:
    per_batch = np.full(batches, photons // batches, dtype=np.int64)
    per_batch[: photons % batches] += 1
    return per_batch


def _mean_and_se(values: np.ndarray, counts: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Overall per-photon mean of batch totals ``values`` (B, ...) and its standard error."""
    total = counts.sum()
    mean = values.sum(axis=0) / total
    batches = counts.size
    if batches < 2:
        return mean, np.full_like(mean, np.nan)
    shape = (batches,) + (1,) * (values.ndim - 1)
    per_batch = values / counts.reshape(shape)
    spread = (counts.reshape(shape) * (per_batch - mean) ** 2).sum(axis=0)
    return mean, np.sqrt(spread / ((batches - 1) * total))


_WARMED: set[str] = set()

#: Held around every parallel kernel launch: numba's fallback thread pool ("workqueue") must
#: not be entered from two Python threads at once (a page serving two sessions would do that).
KERNEL_LOCK = threading.RLock()


@contextmanager
def kernel_threads(threads: int):
    """Hold :data:`KERNEL_LOCK` with numba running ``threads`` threads; the previous count is restored after."""
    with KERNEL_LOCK:
        previous = numba.get_num_threads()
        numba.set_num_threads(threads)
        try:
            yield
        finally:
            numba.set_num_threads(previous)


def _empty_records(batches: int):
    return (
        np.zeros((batches, 0), dtype=np.float32),
        np.zeros((batches, 0), dtype=np.float32),
        np.zeros((batches, 0), dtype=np.uint16),
        np.zeros(batches, dtype=np.int64),
    )


def warm_up() -> float:
    """Compile (or load from numba's on-disk cache) both kernels; return the seconds spent.

    :func:`simulate` calls this before it starts its clock, so ``seconds`` never includes
    compilation.  Only the first call in a process does work.
    """
    start = time.perf_counter()
    if "kernels" in _WARMED:
        return 0.0
    with KERNEL_LOCK:
        _warm_kernels()
        _WARMED.add("kernels")
    return time.perf_counter() - start


def _warm_kernels() -> None:
    states = batch_states(0, 1)
    counts = np.ones(1, dtype=np.int64)
    tallies = np.zeros((1, len(_kernels.TALLY_NAMES)))
    edges = np.array([0.0, 1.0])
    rho = np.zeros((1, 1))
    rec = _empty_records(1)
    for analog in (False, True):
        _kernels.run_3d(counts, states.copy(), 0.1, 1.0, 0.5, 1.4, 1.0, 0.0, 1.0, 0.0, math.inf,
                        analog, 1.0, 1e-4, 0.1, edges, tallies, rho, False, *rec)
        _kernels.run_rod(counts, states.copy(), 0.1, 1.0, 0.2, 1.4, 1.0, 0.0, 1.0, 0.0, 1.0,
                         analog, 1.0, 1e-4, 0.1, tallies)


def _warm_timed_kernel() -> None:
    """Compile (or load) the time-resolved kernel on its first use in a process."""
    if "timed" in _WARMED:
        return
    with KERNEL_LOCK:
        states = batch_states(0, 1)
        counts = np.ones(1, dtype=np.int64)
        tallies = np.zeros((1, len(_kernels.TALLY_NAMES)))
        edges = np.array([0.0, 1.0])
        for analog in (False, True):
            _kernels.run_3d_timed(counts, states.copy(), 0.1, 1.0, 0.5, 1.4, 1.0, 0.0, 1.0, 0.0, math.inf,
                                  analog, 1.0, 1e-4, 0.1, edges, tallies, np.zeros((1, 1)), edges,
                                  np.zeros((1, 2, 1, 1)), math.inf)
        _WARMED.add("timed")


def _check_common(*, mua_per_mm, mus_per_mm, g, n, n_outside, n_slide, thickness_mm, gated=False):
    mua = check_coefficient("mua_per_mm", mua_per_mm)
    mus = check_coefficient("mus_per_mm", mus_per_mm)
    g = check_anisotropy(g)
    n = check_index("n", n)
    n_outside = check_index("n_outside", n_outside)
    if isinstance(n_slide, (tuple, list)):
        if len(n_slide) != 2:
            raise InputError("n_slide must be one index, None, or a pair (top, bottom)")
        slide = tuple(None if v is None else check_index("n_slide", v) for v in n_slide)
    else:
        value = None if n_slide is None else check_index("n_slide", n_slide)
        slide = (value, value)
    if thickness_mm is None:
        thickness = None
        if mua == 0.0 and not gated:
            raise InputError(
                "mua_per_mm = 0 in a semi-infinite medium gives unbounded photon paths; "
                "give mua_per_mm > 0, a thickness_mm, or a time grid with time_gate=True"
            )
    else:
        thickness = check_coefficient("thickness_mm", thickness_mm)
        if thickness <= 0.0:
            raise InputError(f"thickness_mm must be > 0 [mm] (or None: semi-infinite), got {thickness:g}")
    return mua, mus, g, n, n_outside, slide, thickness


def _launch(geometry, counts, states, mua, mus, g, backscatter, n, n_outside, slide_top,
            slide_bottom, depth, analog, launch_weight, roulette_threshold, roulette_survival,
            kernel_edges, tallies, rho_weights, batches, path_edges=None, path_weights=None,
            path_gate=math.inf) -> float:
    """Run the kernel of one geometry; return its wall time [s]."""
    start = time.perf_counter()
    if path_edges is not None:
        _kernels.run_3d_timed(
            counts, states, mua, mus, g, n, n_outside, slide_top, n_outside, slide_bottom,
            depth, analog, launch_weight, roulette_threshold * launch_weight, roulette_survival,
            kernel_edges, tallies, rho_weights, path_edges, path_weights, path_gate,
        )
    elif geometry == "3d":
        _kernels.run_3d(
            counts, states, mua, mus, g, n, n_outside, slide_top, n_outside, slide_bottom,
            depth, analog, launch_weight, roulette_threshold * launch_weight, roulette_survival,
            kernel_edges, tallies, rho_weights, False, *_empty_records(batches),
        )
    else:
        _kernels.run_rod(
            counts, states, mua, mus, backscatter, n, n_outside, slide_top, n_outside,
            slide_bottom, depth, analog, launch_weight, roulette_threshold * launch_weight,
            roulette_survival, tallies,
        )
    return time.perf_counter() - start


def simulate(
    *,
    mua_per_mm,
    mus_per_mm,
    g,
    n,
    n_outside=1.0,
    thickness_mm=None,
    rho_mm=None,
    time_ps=None,
    time_gate=False,
    photons,
    seed=0,
    threads=None,
    estimator="weighted",
    geometry="3d",
    backscatter_probability=None,
    n_slide=None,
    batches=DEFAULT_BATCHES,
    roulette_threshold=_kernels.ROULETTE_THRESHOLD,
    roulette_survival=_kernels.ROULETTE_SURVIVAL,
    progress=None,
) -> MonteCarloResult:
    """Monte Carlo reflectance, transmittance and absorption of a pencil beam.

    A beam at normal incidence enters the top face (z = 0) of a homogeneous medium filling
    0 < z < ``thickness_mm`` (a slab) or z > 0 (semi-infinite, ``thickness_mm=None``).
    Scattering follows the Henyey–Greenstein phase function; both faces reflect by Fresnel's
    law for unpolarised light (through an optional slide).  One set of scalar optical
    properties per call (loop over wavelengths outside).

    Parameters
    ----------
    mua_per_mm : float [1/mm]
        Absorption coefficient, >= 0 (> 0 for a semi-infinite medium).
    mus_per_mm : float [1/mm]
        Scattering coefficient, >= 0.
    g : float [dimensionless]
        Henyey–Greenstein anisotropy, inside (−1, 1).
    n : float
        Refractive index of the medium, >= 1.
    n_outside : float, default 1.0
        Refractive index above (and below) the medium, >= 1.
    thickness_mm : float or None [mm]
        Slab thickness; None for a semi-infinite medium.
    rho_mm : array_like or None [mm]
        Radial bin centres for R(ρ) (>= 2, increasing); bin edges are the midpoints between
        neighbours (see :func:`rho_bin_edges_mm`).  Not allowed in rod geometry.
    time_ps : array_like or None [ps]
        Time bin centres (>= 2, increasing, >= 0) for the time-resolved tally of both faces;
        edges at the midpoints, as for ``rho_mm`` (which it needs).  Time is the path length
        inside the medium over the speed c/n (slides add no time).
    time_gate : bool, default False
        With ``time_ps``: drop every photon whose path passes the last time edge (a time
        gate: the tallies then count only light that left in time, ``gated_fraction`` the
        rest).  Bounds the cost of weakly absorbing media and allows μa = 0 in a
        semi-infinite medium; the time-resolved values inside the window are unchanged.
    photons : int
        Photons launched, >= 1.
    seed : int, default 0
        Master seed, >= 0; the result depends on it, on ``photons`` and ``batches``, never on
        ``threads``.
    threads : int or None
        Threads (None: every core numba sees).
    estimator : {'weighted', 'analog'}
        Absorption weighting with partial escape and Russian roulette, or analog absorption
        and probabilistic boundary reflection.  Both are unbiased.
    geometry : {'3d', 'rod'}
        Three-dimensional transport, or the one-dimensional rod model in which photons move
        only along ±z and a scattering reverses the direction with probability
        ``backscatter_probability`` (Kubelka 1948).  In the rod every face is met at normal
        incidence, and a forward scattering also counts as a scattering.
    backscatter_probability : float or None
        Rod geometry only: p_b in [0, 1]; None gives (1 − g)/2 (the same mean cosine).
    n_slide : float, None or tuple (top, bottom)
        Index of a non-absorbing glass slide on each face (one number), or per face as a
        tuple such as ``(1.52, None)`` (as in
        :func:`~phantomlab.transport.adding_doubling.slab_reflectance_transmittance`); the
        bottom slide is ignored for a semi-infinite medium.  Slides change where light
        exits by a lateral shift that is not modelled, so R(ρ) with a slide is the
        distribution at the medium surface.
    batches : int, default 32
        Independent batches (each its own random stream) for the standard errors.
    roulette_threshold : float, default 0.1
        Weighted estimator: Russian roulette is played below this fraction of the launch
        weight, in [0, 1) (any value is unbiased; it trades variance for time).
    roulette_survival : float, default 0.1
        Weighted estimator: the survival probability of a roulette game, in (0, 1].
    progress : callable or None
        Called as ``progress(done, photons)`` after every chunk of at most
        :data:`CHUNK_PHOTONS_PER_BATCH` photons per batch (photons done so far, launched in
        all); Ctrl-C (KeyboardInterrupt) stops the run between chunks and nothing is returned.

    Returns
    -------
    MonteCarloResult

    Raises
    ------
    InputError
        Negative or non-finite coefficients, g outside (−1, 1), an index below 1, a
        non-positive thickness, μa = 0 in a semi-infinite medium, photons < 1, threads
        outside 1..cores, an unknown estimator or geometry, a bad radial grid.

    References
    ----------
    Wang L, Jacques SL, Zheng L (1995), Comput Methods Programs Biomed 47:131–146 (photon
    stepping, absorption weighting, roulette, direction update).
    Henyey LG, Greenstein JL (1941), Astrophys J 93:70–83 (phase function).
    Kubelka P (1948), J Opt Soc Am 38:448–457 (the rod model's exact slab solution).
    """
    mua, mus, g, n, n_outside, slide, thickness = _check_common(
        mua_per_mm=mua_per_mm, mus_per_mm=mus_per_mm, g=g, n=n, n_outside=n_outside,
        n_slide=n_slide, thickness_mm=thickness_mm, gated=bool(time_gate) and time_ps is not None,
    )
    photons = check_count("photons", photons)
    seed = check_count("seed", seed, minimum=0)
    threads = check_threads(threads)
    batches = check_count("batches", batches)
    roulette_threshold = check_coefficient("roulette_threshold", roulette_threshold)
    roulette_survival = check_coefficient("roulette_survival", roulette_survival)
    if not (roulette_threshold < 1.0 and 0.0 < roulette_survival <= 1.0):
        raise InputError("roulette_threshold must lie in [0, 1) and roulette_survival in (0, 1]")
    estimator = check_choice("estimator", estimator, ESTIMATORS)
    geometry = check_choice("geometry", geometry, GEOMETRIES)
    if geometry == "rod":
        if rho_mm is not None:
            raise InputError("rho_mm is not available in rod geometry (every photon exits at rho = 0)")
        if backscatter_probability is None:
            backscatter = 0.5 * (1.0 - g)
        else:
            backscatter = check_coefficient("backscatter_probability", backscatter_probability)
            if backscatter > 1.0:
                raise InputError(f"backscatter_probability must lie in [0, 1], got {backscatter:g}")
    else:
        if backscatter_probability is not None:
            raise InputError("backscatter_probability is for geometry='rod' only")
        backscatter = None
    edges = rho_bin_edges_mm(rho_mm) if rho_mm is not None else None
    time_edges = None
    if time_ps is not None:
        if edges is None:
            raise InputError("time_ps needs rho_mm (the time-resolved tally is per radial bin)")
        if geometry != "3d":
            raise InputError("time_ps is not available in rod geometry")
        time_edges = time_bin_edges_ps(time_ps)
    batches = min(batches, photons)

    specular = specular_reflectance(n=n, n_outside=n_outside, n_slide=slide[0])
    launch_weight = 1.0 - specular
    analog = estimator == "analog"
    slide_top = 0.0 if slide[0] is None else slide[0]
    slide_bottom = 0.0 if slide[1] is None else slide[1]
    depth = math.inf if thickness is None else thickness
    counts = _split(photons, batches)
    states = batch_states(seed, batches)
    tallies = np.zeros((batches, len(_kernels.TALLY_NAMES)))
    n_bins = 0 if edges is None else edges.size - 1
    rho_weights = np.zeros((batches, max(n_bins, 1)))
    kernel_edges = np.zeros(0) if edges is None else edges
    path_edges = path_weights = None
    path_gate = math.inf
    if time_edges is not None:
        path_edges = time_edges * (SPEED_OF_LIGHT_MM_PER_PS / n)
        if time_gate:
            path_gate = float(path_edges[-1])
        path_weights = np.zeros((batches, 2, n_bins, time_edges.size - 1))
        _warm_timed_kernel()

    warm_up()
    with kernel_threads(threads):
        seconds = 0.0
        remaining = counts.copy()
        while remaining.any():
            chunk = np.minimum(remaining, CHUNK_PHOTONS_PER_BATCH)
            seconds += _launch(geometry, chunk, states, mua, mus, g, backscatter, n, n_outside,
                               slide_top, slide_bottom, depth, analog, launch_weight,
                               roulette_threshold, roulette_survival, kernel_edges, tallies,
                               rho_weights, batches, path_edges, path_weights, path_gate)
            remaining -= chunk
            if progress is not None:
                progress(int(photons - remaining.sum()), photons)

    names = _kernels.TALLY_NAMES
    columns = {name: tallies[:, i] for i, name in enumerate(names)}
    derived = {
        "diffuse_reflectance": columns["scattered_reflectance"] + columns["unscattered_reflectance"],
        "total_reflectance": columns["scattered_reflectance"] + columns["unscattered_reflectance"],
        "total_transmittance": columns["diffuse_transmittance"] + columns["unscattered_transmittance"],
    }
    estimates: dict[str, float] = {}
    for name in names[1:-1]:
        mean, se = _mean_and_se(columns[name], counts)
        estimates[name], estimates[name + "_sd"] = float(mean), float(se)
    for name, values in derived.items():
        mean, se = _mean_and_se(values, counts)
        estimates[name], estimates[name + "_sd"] = float(mean), float(se)
    estimates["total_reflectance"] += specular
    estimates["roulette_balance"] = estimates.pop("roulette")
    estimates["roulette_balance_sd"] = estimates.pop("roulette_sd")

    rho_values = rho_sd = None
    if edges is not None:
        areas = math.pi * (edges[1:] ** 2 - edges[:-1] ** 2)
        mean, se = _mean_and_se(rho_weights, counts)
        rho_values, rho_sd = mean / areas, se / areas
    timed: dict = {}
    if time_edges is not None:
        areas = math.pi * (edges[1:] ** 2 - edges[:-1] ** 2)
        widths = np.diff(time_edges)
        cell = areas[:, None] * widths[None, :]
        mean, se = _mean_and_se(path_weights, counts)  # (2, R, T)
        timed = {
            "time_ps": np.asarray(time_ps, dtype=float),
            "time_edges_ps": time_edges,
            "reflectance_per_mm2_per_ps": mean[0] / cell,
            "reflectance_per_mm2_per_ps_sd": se[0] / cell,
        }
        if thickness is not None:
            timed["transmittance_per_mm2_per_ps"] = mean[1] / cell
            timed["transmittance_per_mm2_per_ps_sd"] = se[1] / cell
        if math.isfinite(path_gate):
            accounted = tallies[:, [names.index(k) for k in (
                "scattered_reflectance", "unscattered_reflectance", "diffuse_transmittance",
                "unscattered_transmittance", "absorbed_fraction")]].sum(axis=1)
            dropped = counts * launch_weight + tallies[:, names.index("roulette")] - accounted
            gated, gated_se = _mean_and_se(dropped, counts)
            timed["gated_fraction"], timed["gated_fraction_sd"] = float(gated), float(gated_se)
    sigma = estimates["diffuse_reflectance_sd"]
    figure_of_merit = 1.0 / (sigma**2 * seconds) if sigma > 0 and seconds > 0 else math.inf

    return MonteCarloResult(
        geometry=geometry,
        estimator=estimator,
        mua_per_mm=mua,
        mus_per_mm=mus,
        g=g,
        n=n,
        n_outside=n_outside,
        n_slide=None if slide == (None, None) else slide,
        thickness_mm=thickness,
        backscatter_probability=backscatter,
        specular_reflectance=specular,
        specular_reflectance_sd=0.0,
        rho_mm=None if edges is None else check_rho_grid(rho_mm),
        rho_edges_mm=edges,
        reflectance_per_mm2=rho_values,
        reflectance_per_mm2_sd=rho_sd,
        photons=photons,
        batches=batches,
        seed=seed,
        threads=threads,
        interactions=int(tallies[:, names.index("interactions")].sum()),
        seconds=seconds,
        figure_of_merit=figure_of_merit,
        **estimates,
        **timed,
    )
