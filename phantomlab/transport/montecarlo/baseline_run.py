"""One analog Monte Carlo run recorded as a :class:`~phantomlab.transport.montecarlo.baseline.Baseline` (layer 2).

:func:`build_baseline` runs the engine's 3-D kernel once in a semi-infinite medium at a
reference (μa_ref, μs_ref) and keeps, for every photon that leaves the top face, its exit
radius, path length and number of scatterings; what a baseline then gives, and why, is in
:mod:`phantomlab.transport.montecarlo.baseline`.
"""

from __future__ import annotations

import math
import time

import numpy as np

from phantomlab.transport.montecarlo import _kernels
from phantomlab.transport.montecarlo._random import batch_states
from phantomlab.transport.montecarlo._validate import check_threads
from phantomlab.transport.montecarlo.baseline import Baseline, check_baseline_inputs
from phantomlab.transport.montecarlo.result import specular_reflectance
from phantomlab.transport.montecarlo.simulate import DEFAULT_BATCHES, _split, kernel_threads, warm_up

__all__ = ["build_baseline"]


def build_baseline(
    *,
    mua_per_mm,
    mus_per_mm,
    g,
    n,
    n_outside=1.0,
    photons,
    seed=0,
    threads=None,
    batches=DEFAULT_BATCHES,
    progress=None,
) -> Baseline:
    """Run the analog Monte Carlo once in a semi-infinite medium and keep every exit.

    Parameters
    ----------
    mua_per_mm : float [1/mm]
        Reference absorption, > 0.  It keeps every path finite and sets the smallest
        μa/μs the baseline can answer for: μa_ref/μs_ref.  A smaller value costs more time
        (paths grow as 1/μa_ref).
    mus_per_mm : float [1/mm]
        Reference scattering, > 0.
    g : float
        Henyey–Greenstein anisotropy in (−1, 1) (fixed for every re-use).
    n, n_outside : float
        Indices of the medium and of the outside, >= 1 (fixed for every re-use).
    photons : int
        Photons launched; about R_d × photons are stored (10 bytes each).
    seed : int
        Master seed (the run does not depend on ``threads``).
    threads : int or None
        Threads (None: every core).
    batches : int
        Independent random streams.
    progress : callable, optional
        Called as ``progress(done, total)`` [photons] after every group of ``threads``
        batches (the batches run in groups so that the caller hears of progress and can stop
        the run: an exception raised by ``progress``, or a KeyboardInterrupt, ends the build
        between two groups and nothing is returned).  Running in groups does not change the
        numbers: a batch depends on (seed, batch index) only.

    Returns
    -------
    Baseline

    References
    ----------
    See :mod:`phantomlab.transport.montecarlo.baseline`.
    """
    inputs = check_baseline_inputs({"mua_per_mm": mua_per_mm, "mus_per_mm": mus_per_mm, "g": g, "n": n,
                            "n_outside": n_outside, "photons": photons, "seed": seed,
                            "batches": batches})
    threads = check_threads(threads)
    batches = min(inputs["batches"], inputs["photons"])
    inputs["batches"] = batches
    counts = _split(inputs["photons"], batches)
    states = batch_states(inputs["seed"], batches)
    capacity = int(counts.max())
    rec_rho = np.zeros((batches, capacity), dtype=np.float32)
    rec_path = np.zeros((batches, capacity), dtype=np.float32)
    rec_nscat = np.zeros((batches, capacity), dtype=np.uint16)
    rec_count = np.zeros(batches, dtype=np.int64)
    tallies = np.zeros((batches, len(_kernels.TALLY_NAMES)))
    launch_weight = 1.0 - specular_reflectance(n=inputs["n"], n_outside=inputs["n_outside"])
    warm_up()
    rho_weights = np.zeros((batches, 1))
    total = int(counts.sum())
    if progress is not None:
        progress(0, total)
    seconds = 0.0
    for first in range(0, batches, threads):
        group = slice(first, min(first + threads, batches))
        with kernel_threads(threads):
            start = time.perf_counter()
            _kernels.run_3d(
                counts[group], states[group], inputs["mua_per_mm"], inputs["mus_per_mm"], inputs["g"],
                inputs["n"], inputs["n_outside"], 0.0, inputs["n_outside"], 0.0, math.inf, True,
                launch_weight, 0.0, 1.0, np.zeros(0), tallies[group], rho_weights[group], True,
                rec_rho[group], rec_path[group], rec_nscat[group], rec_count[group],
            )
            seconds += time.perf_counter() - start
        if progress is not None:
            progress(int(counts[: group.stop].sum()), total)
    pieces = [slice(0, int(c)) for c in rec_count]
    return Baseline(
        exit_radius_mm=np.concatenate([rec_rho[b, s] for b, s in enumerate(pieces)]),
        path_length_mm=np.concatenate([rec_path[b, s] for b, s in enumerate(pieces)]),
        scatterings=np.concatenate([rec_nscat[b, s] for b, s in enumerate(pieces)]),
        seconds=seconds,
        **inputs,
    )
