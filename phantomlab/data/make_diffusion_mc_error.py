"""Make ``diffusion_mc_error.npz``: Monte Carlo R(ρ) tallies for the diffusion error maps.

Run once (about 30–60 min on two shared cores; resumable: finished runs are kept in
``diffusion_mc_error.partial.json`` beside this script and skipped on a rerun):

    cd <repo> && OPENBLAS_NUM_THREADS=1 nice -n 10 .venv/bin/python phantomlab/data/make_diffusion_mc_error.py

and, after a change of the diffusion code, recompute only the maps from the stored tallies
(seconds; ``tests/transport/test_diffusion_error.py`` fails until this is done):

    .venv/bin/python phantomlab/data/make_diffusion_mc_error.py maps

The project's own Monte Carlo engine (``phantomlab.transport.montecarlo.simulate``,
weighted estimator), run directly, for a semi-infinite medium under a normally incident
pencil beam, at μs′ = 1 /mm (every length below is in transport lengths 1/μs′: R(ρ)/μs′²
of a half-space depends only on μs′/μa, ρ μs′, the relative index n/n_outside and the
phase function, so one μs′ covers all), for

* μs′/μa in :data:`RATIOS` (2 … 3000) and n in :data:`INDICES` (1.0 … 1.5 against air),
  Henyey–Greenstein g = 0.8 (the map);
* the same ratios at n = 1.4 with g = 0.7 and 0.9 (how much the map moves with g).

Tallies: R(ρ) on :data:`RHO_CENTRES` (fine linear bins near the source for the
spatial-frequency transform, log bins from 2 to 100 transport lengths), with standard
errors from the spread of 32 batches, and the total diffuse reflectance.  Photons per run:
a 20 000-photon pilot (seed 2900 + run) sets the count for a relative SE of
:data:`TARGET_REL_SD` at ρ μs′ = 5 (or at 4/μ_eff where that is nearer), capped by :data:`MAX_SECONDS_PER_RUN`; the counts and
seeds (3001 + run) are stored.  The diffusion-vs-Monte-Carlo error maps are computed from
these tallies at load time by :mod:`phantomlab.calibration.diffusion_error`, so they follow
the diffusion code as it is.
"""

from __future__ import annotations

import json
import time
from pathlib import Path

import numpy as np

from phantomlab.transport.montecarlo import simulate

HERE = Path(__file__).parent
OUT = HERE / "diffusion_mc_error.npz"
PARTIAL = HERE / "diffusion_mc_error.partial.json"

MUSP_PER_MM = 1.0
RATIOS = (2.0, 3.0, 5.0, 10.0, 20.0, 50.0, 100.0, 300.0, 1000.0, 3000.0)
INDICES = (1.0, 1.15, 1.33, 1.4, 1.5)
G_MAP = 0.8
G_SPREAD = (0.7, 0.9)
N_SPREAD = 1.4
RHO_CENTRES = np.concatenate([np.arange(0.025, 2.0, 0.05), np.geomspace(2.0, 100.0, 46)])
TARGET_REL_SD = 0.004
MAX_SECONDS_PER_RUN = 90.0
PILOT_PHOTONS = 20_000


#: Order of the runs (their index gives the seeds): the index of most phantoms and its g
#: spread first.
RUN_ORDER = ((G_MAP, 1.0), (G_MAP, 1.4), (0.7, 1.4), (0.9, 1.4), (G_MAP, 1.33), (G_MAP, 1.5), (G_MAP, 1.15))


def runs():
    """Every (g, n, ratio) of the file, in a fixed order (its index gives the seeds)."""
    assert {n for g, n in RUN_ORDER if g == G_MAP} == set(INDICES)
    return [(g, n, ratio) for g, n in RUN_ORDER for ratio in RATIOS]


def one_run(index: int, g: float, n: float, ratio: float) -> dict:
    mua = MUSP_PER_MM / ratio
    mus = MUSP_PER_MM / (1.0 - g)
    pilot = simulate(mua_per_mm=mua, mus_per_mm=mus, g=g, n=n, rho_mm=RHO_CENTRES, photons=PILOT_PHOTONS,
                     seed=2900 + index)
    # the reference distance: 5 transport lengths, or 4 attenuation lengths 1/mu_eff if nearer
    mu_eff = np.sqrt(3.0 * mua * (mua + MUSP_PER_MM))
    at = int(np.argmin(np.abs(RHO_CENTRES - min(5.0, 4.0 / mu_eff))))
    rel = float(pilot.reflectance_per_mm2_sd[at] / pilot.reflectance_per_mm2[at])
    wanted = int(PILOT_PHOTONS * (rel / TARGET_REL_SD) ** 2)
    affordable = int(PILOT_PHOTONS * MAX_SECONDS_PER_RUN / max(pilot.seconds, 1e-3))
    photons = max(PILOT_PHOTONS, min(wanted, affordable))
    start = time.perf_counter()
    run = simulate(mua_per_mm=mua, mus_per_mm=mus, g=g, n=n, rho_mm=RHO_CENTRES, photons=photons,
                   seed=3001 + index)
    seconds = time.perf_counter() - start
    print(f"run {index}: g {g} n {n} ratio {ratio:g}: {photons} photons, {seconds:.0f} s, rel sd at {RHO_CENTRES[at]:.3g} "
          f"{run.reflectance_per_mm2_sd[at] / run.reflectance_per_mm2[at]:.4f}", flush=True)
    return {"g": g, "n": n, "ratio": ratio, "photons": photons, "seed": 3001 + index, "seconds": seconds,
            "reflectance_per_mm2": run.reflectance_per_mm2.tolist(),
            "reflectance_per_mm2_sd": run.reflectance_per_mm2_sd.tolist(),
            "diffuse_reflectance": run.diffuse_reflectance, "diffuse_reflectance_sd": run.diffuse_reflectance_sd}


def main() -> None:
    done = json.loads(PARTIAL.read_text()) if PARTIAL.exists() else {}
    plan = runs()
    for index, (g, n, ratio) in enumerate(plan):
        key = f"{g}/{n}/{ratio}"
        if key in done:
            continue
        done[key] = one_run(index, g, n, ratio)
        PARTIAL.write_text(json.dumps(done))
    rows = [done[f"{g}/{n}/{ratio}"] for g, n, ratio in plan]
    tallies = {
        "rho_edges_musp": np.array(_edges(RHO_CENTRES)),
        "rho_centres_musp": RHO_CENTRES,
        "g": np.array([r["g"] for r in rows]),
        "n": np.array([r["n"] for r in rows]),
        "ratio": np.array([r["ratio"] for r in rows]),
        "photons": np.array([r["photons"] for r in rows]),
        "seed": np.array([r["seed"] for r in rows]),
        "reflectance": np.array([r["reflectance_per_mm2"] for r in rows]),
        "reflectance_sd": np.array([r["reflectance_per_mm2_sd"] for r in rows]),
        "diffuse_reflectance": np.array([r["diffuse_reflectance"] for r in rows]),
        "diffuse_reflectance_sd": np.array([r["diffuse_reflectance_sd"] for r in rows]),
    }
    write(tallies)
    PARTIAL.unlink()


def write(tallies) -> None:
    """Compute the maps from the tallies and store both (with the provenance line first)."""
    from phantomlab.transport.diffusion_error import compute_maps

    provenance = (
        "source: phantomlab Monte Carlo (weighted estimator, simulate.py) run directly by "
        "phantomlab/data/make_diffusion_mc_error.py; half-space, pencil beam at normal incidence, "
        "musp = 1 /mm (lengths in transport lengths), n_outside = 1; seeds 3001 + run; maps by "
        "phantomlab.transport.diffusion_error.compute_maps")
    tallies = {key: np.asarray(value) for key, value in tallies.items() if key != "provenance"
               and not key.startswith(("srdr_", "sfdi_")) and key not in ("ratio_nodes", "n_nodes", "rho_musp",
                                                                         "fx_over_musp")}
    maps = compute_maps(tallies)
    np.savez_compressed(OUT, provenance=np.array(provenance), **tallies, **maps)
    print(f"wrote {OUT} ({OUT.stat().st_size / 1e3:.0f} kB)")


def _edges(centres):
    from phantomlab.transport.montecarlo import rho_bin_edges_mm

    return rho_bin_edges_mm(centres)


if __name__ == "__main__":
    import sys

    if sys.argv[1:] == ["maps"]:  # recompute the maps from the stored tallies (diffusion code changed)
        with np.load(OUT) as stored:
            write({key: stored[key] for key in stored.files})
    else:
        main()
