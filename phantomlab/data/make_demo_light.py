"""Make ``demo_light_mc.npz``: Monte Carlo R(ρ) of the demo emulsion, for the page's invented probe files.

Demo data, invented.  The page offers an invented srdr file of a demo batch "as mixed"
(:func:`phantomlab.ui.demo.demo_measurement_csv`) for trying the loop; it must be made in
milliseconds, and should be light the default fit (the Monte Carlo lookup) describes without
being the lookup itself.  This table is that light: the project's own Monte Carlo engine
(``phantomlab.transport.montecarlo.simulate``, weighted estimator) run directly for a
semi-infinite medium under a normally incident pencil beam, n = 1.33 under air,
Henyey–Greenstein g in :data:`G_NODES` (0.50–0.66: the demo lipid emulsion's g from its
scattering model falls from 0.64 at 660 nm to 0.51 at 850 nm, the wavelengths of the demo
probe files; the default fit takes each wavelength at its own g,
:mod:`phantomlab.calibration.band_g`, so the light must be made at that g too), at
μs′ = 1 /mm and μs′/μa in :data:`RATIOS`.  R(ρ)/μs′² of a half-space depends only on μs′/μa
and ρ μs′ at fixed g and indices, so one μs′ serves all: R(ρ; μa, μs′) = μs′² T(ρ μs′; μs′/μa, g).

Each node ρ μs′ in :data:`NODES` (transport lengths) is read as a point detector: the run's
ring of width :data:`RING` centred on it (R's curvature over 0.2 transport lengths biases it
by < 0.2 %).  Stored: ``g`` (G,), ``ratio`` (Q,), ``x`` (X,) [transport lengths],
``reflectance`` (G, Q, X) [1/mm² at μs′ = 1 /mm] and ``sd`` (G, Q, X) (standard errors from
32 batches of photons), ``photons``, ``seed`` (G, Q) (:data:`FIRST_SEED` on: none of the
lookup's baseline seeds, so the demo light stays independent of the default fit's lookup),
``provenance``, and the interpolation errors, each the largest relative error leave-one-out
over the inner nodes where the photon noise is below 1 % (with twice the table's spacing and
the nodes' own photon noise in it, an upper bound): ``interpolation_error`` in the ratio
(cubic spline in log ratio; 0.044 for the stored table) and ``g_interpolation_error`` in g
(straight lines of log R in g; 0.029).  R changes with g by a few per cent per 0.1, smoothly:
leave-one-out in g, the straight lines' errors scatter as the nodes' photon noise does (root
mean square 0.9 of it, mean 0.02 %: no curvature seen at twice the spacing), while a cubic
spline through the noisy nodes amplifies it (largest 0.048, 1.5 times the noise), so g is
interpolated linearly.
:mod:`phantomlab.ui.demo_light` reads it; tests/ui/test_demo_light.py checks the table
between its nodes against a direct run.

Regenerate (from the repository root; 35 minutes on one core, 2116 s for the stored table
with the machine shared; 3 million photons a run, 65 runs, 0.2-1 % photon noise within 12
transport lengths):

    OPENBLAS_NUM_THREADS=1 nice -n 10 .venv/bin/python phantomlab/data/make_demo_light.py

``--errors`` recomputes only the stored interpolation errors from the stored runs.
"""

from __future__ import annotations

import json
import sys
import time
from pathlib import Path

import numpy as np
from scipy.interpolate import CubicSpline

from phantomlab.transport.montecarlo import simulate

HERE = Path(__file__).parent
OUT = HERE / "demo_light_mc.npz"
G_NODES = (0.50, 0.54, 0.58, 0.62, 0.66)
N = 1.33
RATIOS = tuple(float(v) for v in np.round(np.geomspace(20.0, 1000.0, 13), 3))
NODES = np.round(np.arange(1.0, 24.01, 0.5), 3)
RING = 0.2
PHOTONS = 3_000_000
FIRST_SEED = 8101


def rings(nodes: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bin centres whose midpoints make a ring of width RING around each node, and where the nodes are."""
    centres = np.sort(np.concatenate([nodes - RING, nodes, nodes + RING]))
    return centres, np.arange(1, centres.size, 3)


def leave_one_out(axis_values, reflectance, sd, *, linear: bool = False) -> float:
    """Largest relative error of the interpolation of log R along the first axis, each inner node left out.

    ``axis_values`` (K,) are the nodes in the variable interpolated (log ratio, or g);
    ``reflectance`` and ``sd`` (K, ...) the table along them.  Cubic spline, or straight
    lines when ``linear``.  Only points whose photon noise is below 1 % at every node are
    compared.
    """
    worst = 0.0
    nodes = np.asarray(axis_values, float)
    flat = reflectance.reshape(reflectance.shape[0], -1)
    good = np.all(sd.reshape(flat.shape) < 0.01 * flat, axis=0)
    for k in range(1, nodes.size - 1):
        keep = np.arange(nodes.size) != k
        log_r = np.log(flat[keep][:, good])
        if linear:
            below = int(np.flatnonzero(nodes[keep] < nodes[k])[-1])
            weight = (nodes[k] - nodes[keep][below]) / (nodes[keep][below + 1] - nodes[keep][below])
            guess = (1.0 - weight) * log_r[below] + weight * log_r[below + 1]
        else:
            guess = CubicSpline(nodes[keep], log_r, axis=0)(nodes[k])
        error = np.abs(np.exp(guess) / flat[k, good] - 1.0)
        worst = max(worst, float(np.max(error)))
    return worst


def interpolation_errors(ratio, g_nodes, reflectance, sd) -> tuple[float, float]:
    """The stored errors: in the ratio (cubic in log ratio, worst over g) and in g (linear)."""
    in_ratio = max(leave_one_out(np.log(ratio), reflectance[i], sd[i]) for i in range(len(g_nodes)))
    return in_ratio, leave_one_out(g_nodes, reflectance, sd, linear=True)


def main() -> None:
    centres, at_node = rings(NODES)
    reflectance = np.zeros((len(G_NODES), len(RATIOS), NODES.size))
    sd = np.zeros_like(reflectance)
    seeds = np.zeros((len(G_NODES), len(RATIOS)), int)
    began = time.perf_counter()
    for i, g in enumerate(G_NODES):
        for k, ratio in enumerate(RATIOS):
            start = time.perf_counter()
            seeds[i, k] = FIRST_SEED + i * len(RATIOS) + k
            run = simulate(mua_per_mm=1.0 / ratio, mus_per_mm=1.0 / (1.0 - g), g=g, n=N, n_outside=1.0,
                           rho_mm=centres, photons=PHOTONS, seed=int(seeds[i, k]), threads=1)
            reflectance[i, k] = run.reflectance_per_mm2[at_node]
            sd[i, k] = run.reflectance_per_mm2_sd[at_node]
            relative = sd[i, k] / reflectance[i, k]
            print(f"g {g:g} ratio {ratio:g}: {time.perf_counter() - start:.0f} s, photon noise "
                  f"{relative.min():.4f}-{relative.max():.4f}", flush=True)
    ratio = np.array(RATIOS)
    g_nodes = np.array(G_NODES)
    in_ratio, in_g = interpolation_errors(ratio, g_nodes, reflectance, sd)
    print(f"leave-one-out, largest relative error: in the ratio {in_ratio:.4f}, in g {in_g:.4f}; "
          f"{time.perf_counter() - began:.0f} s in all")
    provenance = {
        "source": "demo data, invented: phantomlab Monte Carlo (weighted estimator) run directly, "
                  "phantomlab/data/make_demo_light.py",
        "g_nodes": list(G_NODES), "n": N, "n_outside": 1.0, "musp_per_mm": 1.0, "ring_transport_lengths": RING,
        "phase_function": "Henyey-Greenstein", "geometry": "semi-infinite, normal pencil beam",
        "run_seconds": round(time.perf_counter() - began),
    }
    np.savez_compressed(OUT, provenance=np.array(json.dumps(provenance)), g=g_nodes, ratio=ratio, x=NODES,
                        reflectance=reflectance, sd=sd, photons=np.array(PHOTONS), seed=seeds,
                        interpolation_error=np.array(in_ratio), g_interpolation_error=np.array(in_g))


def errors_only() -> None:
    """Recompute the stored interpolation errors from the stored runs (no simulation)."""
    with np.load(OUT) as data:
        table = {key: np.array(data[key]) for key in data.files}
    in_ratio, in_g = interpolation_errors(table["ratio"], table["g"], table["reflectance"], table["sd"])
    print(f"leave-one-out, largest relative error: in the ratio {in_ratio:.4f}, in g {in_g:.4f}")
    table.update(interpolation_error=np.array(in_ratio), g_interpolation_error=np.array(in_g))
    np.savez_compressed(OUT, **table)


if __name__ == "__main__":
    errors_only() if sys.argv[1:] == ["--errors"] else main()
