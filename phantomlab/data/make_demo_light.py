"""Make ``demo_light_mc.npz``: Monte Carlo R(ρ) of the demo emulsion, for the page's invented probe files.

Demo data, invented.  The page offers an invented srdr file of a demo batch "as mixed"
(:func:`phantomlab.ui.demo.demo_measurement_csv`) for trying the loop; it must be made in
milliseconds, and should be light the default fit (the Monte Carlo lookup) describes without
being the lookup itself.  This table is that light: the project's own Monte Carlo engine
(``phantomlab.transport.montecarlo.simulate``, weighted estimator) run directly for a
semi-infinite medium under a normally incident pencil beam, n = 1.33 under air,
Henyey–Greenstein g = :data:`G` (the demo lipid emulsion's g averaged over 660–850 nm, from
its scattering model), at μs′ = 1 /mm and μs′/μa in :data:`RATIOS`.  R(ρ)/μs′² of a
half-space depends only on μs′/μa and ρ μs′ at fixed g and indices, so one μs′ serves all:
R(ρ; μa, μs′) = μs′² T(ρ μs′; μs′/μa).

Each node ρ μs′ in :data:`NODES` (transport lengths) is read as a point detector: the run's
ring of width :data:`RING` centred on it (R's curvature over 0.2 transport lengths biases it
by < 0.2 %).  Stored: ``ratio`` (Q,), ``x`` (X,) [transport lengths], ``reflectance`` (Q, X)
[1/mm² at μs′ = 1 /mm] and ``sd`` (Q, X) (standard errors from 32 batches of photons),
``photons``, ``seed`` (Q,), ``provenance`` and ``interpolation_error`` (the largest relative
error of the ratio interpolation, leave-one-out over the inner ratios where the photon
noise is below 1 %: with twice the table's spacing and the nodes' own photon noise in it, an
upper bound; 0.029 for the stored table, whose nodes carry 0.2–1 % photon noise within 12
transport lengths).  :mod:`phantomlab.ui.demo_light` reads it; tests/ui/test_demo_light.py
checks the table between its ratios against a direct run.

Regenerate (from the repository root; about 7 minutes on two shared cores):

    OPENBLAS_NUM_THREADS=1 nice -n 10 .venv/bin/python phantomlab/data/make_demo_light.py
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline

from phantomlab.transport.montecarlo import simulate

HERE = Path(__file__).parent
OUT = HERE / "demo_light_mc.npz"
G = 0.58
N = 1.33
RATIOS = tuple(float(v) for v in np.round(np.geomspace(20.0, 1000.0, 13), 3))
NODES = np.round(np.arange(1.0, 24.01, 0.5), 3)
RING = 0.2
PHOTONS = 4_000_000
FIRST_SEED = 5101


def rings(nodes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bin centres whose midpoints make a ring of width RING around each node, and where the nodes are."""
    centres = np.sort(np.concatenate([nodes - RING, nodes, nodes + RING]))
    return centres, np.arange(1, centres.size, 3)


def leave_one_out(ratio, reflectance, sd) -> float:
    """Largest relative error of the cubic interpolation in log ratio, each inner ratio left out."""
    worst = 0.0
    log_q = np.log(ratio)
    for k in range(1, ratio.size - 1):
        keep = np.arange(ratio.size) != k
        good = np.all(sd[:, :] < 0.01 * reflectance, axis=0)
        spline = CubicSpline(log_q[keep], np.log(reflectance[keep][:, good]), axis=0)
        error = np.abs(np.exp(spline(log_q[k])) / reflectance[k, good] - 1.0)
        worst = max(worst, float(np.max(error)))
    return worst


def main() -> None:
    centres, at_node = rings(NODES)
    values, errors, seeds = [], [], []
    for k, ratio in enumerate(RATIOS):
        start = time.perf_counter()
        run = simulate(mua_per_mm=1.0 / ratio, mus_per_mm=1.0 / (1.0 - G), g=G, n=N, n_outside=1.0,
                       rho_mm=centres, photons=PHOTONS, seed=FIRST_SEED + k)
        values.append(run.reflectance_per_mm2[at_node])
        errors.append(run.reflectance_per_mm2_sd[at_node])
        seeds.append(FIRST_SEED + k)
        relative = errors[-1] / values[-1]
        print(f"ratio {ratio:g}: {time.perf_counter() - start:.0f} s, photon noise {relative.min():.4f}-"
              f"{relative.max():.4f}", flush=True)
    reflectance, sd = np.array(values), np.array(errors)
    ratio = np.array(RATIOS)
    worst = leave_one_out(ratio, reflectance, sd)
    print(f"interpolation in the ratio, leave-one-out: largest relative error {worst:.4f}")
    provenance = {
        "source": "demo data, invented: phantomlab Monte Carlo (weighted estimator) run directly, "
                  "phantomlab/data/make_demo_light.py",
        "g": G, "n": N, "n_outside": 1.0, "musp_per_mm": 1.0, "ring_transport_lengths": RING,
        "phase_function": "Henyey-Greenstein", "geometry": "semi-infinite, normal pencil beam",
    }
    np.savez_compressed(OUT, provenance=np.array(json.dumps(provenance)), ratio=ratio, x=NODES,
                        reflectance=reflectance, sd=sd, photons=np.array(PHOTONS), seed=np.array(seeds),
                        interpolation_error=np.array(worst))


if __name__ == "__main__":
    main()
