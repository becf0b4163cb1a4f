"""Speed and memory of the Monte Carlo engine (issue 4).

    .venv/bin/python bench/mc.py            # about a minute on two cores

Case: semi-infinite medium, μa = 0.01 /mm, μs = 10 /mm, g = 0.9, n = 1.4 in air, pencil
beam.  Prints

* the JIT compile time, measured apart in a child process with an empty numba cache
  (and the time to load the compiled kernels from the on-disk cache in this process);
* photons/s and interactions/s on one thread and on all cores, for both estimators (best
  of three runs each), the
  scaling to all cores, and the ratio against a same-process reference: a tight numba loop
  doing only the arithmetic of an interaction (random step, Henyey–Greenstein direction)
  in an unbounded medium;
* a baseline of at least 10⁶ detected photons: build time, bytes in memory and on disk, and
  the lookup speed of ``Baseline.srdr`` (per (μa, μs) pair, and one least-squares fit of
  μa and μs to a 20-distance R(ρ) as a calibration would do it);
* the peak resident memory of the whole benchmark.

Targets: ≥ 1.5e7 interactions/s per core; near-linear scaling to 2 cores; the baseline
< 50 MB on disk and in memory; a fit < 50 ms; peak memory < 500 MB.  The script exits
with status 1 if a target is missed (speed on a busy shared machine can miss by load:
read the figures).  Adding-doubling and diffusion timings are in bench/transport.py.
"""

from __future__ import annotations

import math
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numba
import numpy as np
from numba import njit
from scipy.optimize import least_squares

from phantomlab.transport.montecarlo import build_baseline, simulate, warm_up
from phantomlab.transport.montecarlo._random import batch_states, uniform

CASE = dict(mua_per_mm=0.01, mus_per_mm=10.0, g=0.9, n=1.4, n_outside=1.0)
TARGET_INTERACTIONS_PER_CORE = 1.5e7
#: Every timing is the best of this many runs (the machine is shared with other work).
REPEATS = 3
failures: list[str] = []


def verdict(ok: bool, what: str) -> str:
    if not ok:
        failures.append(what)
    return "ok" if ok else "MISSED"


def compile_time_in_fresh_cache() -> float:
    """Seconds to compile every kernel in a child process with an empty numba cache."""
    with tempfile.TemporaryDirectory() as cache:
        env = dict(os.environ, NUMBA_CACHE_DIR=cache)
        code = ("import time; t = time.perf_counter(); "
                "from phantomlab.transport.montecarlo import warm_up; warm_up(); "
                "print(time.perf_counter() - t)")
        out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True,
                             text=True, check=True)
        return float(out.stdout.strip().splitlines()[-1])


@njit(cache=True)
def _reference_loop(state, interactions, g):
    """The arithmetic of one interaction, nothing else: step, HG angle, direction."""
    ux, uy, uz = 0.0, 0.0, 1.0
    z = 0.0
    g2 = g * g
    for _ in range(interactions):
        z += -math.log(1.0 - uniform(state)) * uz
        tmp = (1.0 - g2) / (1.0 - g + 2.0 * g * uniform(state))
        cos_t = (1.0 + g2 - tmp * tmp) / (2.0 * g)
        sin_t = math.sqrt(max(0.0, 1.0 - cos_t * cos_t))
        phi = 2.0 * math.pi * uniform(state)
        cp, sp = math.cos(phi), math.sin(phi)
        if abs(uz) > 0.99999:
            ux, uy, uz = sin_t * cp, sin_t * sp, math.copysign(cos_t, uz)
        else:
            root = math.sqrt(1.0 - uz * uz)
            nx = sin_t * (ux * uz * cp - uy * sp) / root + ux * cos_t
            ny = sin_t * (uy * uz * cp + ux * sp) / root + uy * cos_t
            uz = -sin_t * cp * root + uz * cos_t
            ux, uy = nx, ny
    return z


def reference_rate(repeats: int = REPEATS, clock=time.perf_counter) -> float:
    """Best of ``repeats`` runs of the reference loop [interactions/s of ``clock``: wall time, or
    ``time.process_time`` for interactions per CPU-second, which other jobs on the machine change less]."""
    state = batch_states(1, 1)[0].copy()
    _reference_loop(state, 10, 0.9)
    count = 10_000_000
    best = 0.0
    for _ in range(repeats):
        start = clock()
        _reference_loop(state, count, 0.9)
        best = max(best, count / (clock() - start))
    return best


def main() -> int:
    cores = int(numba.config.NUMBA_NUM_THREADS)
    print(f"Monte Carlo benchmark: semi-infinite, mua {CASE['mua_per_mm']} /mm, mus "
          f"{CASE['mus_per_mm']} /mm, g {CASE['g']}, n {CASE['n']} in air; {cores} cores\n")

    cold = compile_time_in_fresh_cache()
    start = time.perf_counter()
    warm_up()
    cached = time.perf_counter() - start
    print(f"JIT compile (empty cache, child process): {cold:6.2f} s")
    print(f"load compiled kernels from disk cache:    {cached:6.2f} s  (excluded from 'seconds')\n")

    reference = reference_rate()
    print(f"reference tight loop (1 thread): {reference:.3g} interactions/s\n")
    print(f"{'estimator':9s} {'threads':>7s} {'photons':>8s} {'seconds':>8s} {'photons/s':>10s} "
          f"{'interact/s':>11s} {'per core':>10s} {'vs ref':>7s} {'FOM(Rd)':>9s}")
    rates, cpu_rates = {}, {}
    for estimator in ("weighted", "analog"):
        for threads in sorted({1, cores}):
            photons = 20_000 * threads
            runs, cpu = [], []
            for _ in range(REPEATS):
                cpu_start = time.process_time()
                runs.append(simulate(**CASE, photons=photons, seed=1, threads=threads,
                                     estimator=estimator))
                cpu.append(time.process_time() - cpu_start)
            result = min(runs, key=lambda run: run.seconds)
            rate = result.interactions / result.seconds
            cpu_rates[(estimator, threads)] = result.interactions / min(cpu)
            rates[(estimator, threads)] = rate
            print(f"{estimator:9s} {threads:7d} {photons:8d} {result.seconds:8.2f} "
                  f"{photons / result.seconds:10.3g} {rate:11.3g} {rate / threads:10.3g} "
                  f"{rate / threads / reference:7.2f} {result.figure_of_merit:9.3g}")
    per_core = rates[("weighted", 1)]
    print(f"\ninteractions/s per core (weighted, 1 thread, wall clock): {per_core:.3g}  target >= "
          f"{TARGET_INTERACTIONS_PER_CORE:.2g}: {verdict(per_core >= TARGET_INTERACTIONS_PER_CORE, 'per-core speed')}")
    print("interactions per CPU-second (other jobs on the machine do not count against it; "
          "thread spin-waits do): " + ", ".join(
              f"{est} {thr} thr {value:.3g}" for (est, thr), value in cpu_rates.items()))
    if cores > 1:
        scaling = rates[("weighted", cores)] / rates[("weighted", 1)]
        print(f"scaling 1 -> {cores} threads: x{scaling:.2f} (ideal x{cores}; other jobs on the "
              f"machine lower it): {verdict(scaling >= 0.75 * cores, 'scaling')}")
        efficiency = cpu_rates[("weighted", cores)] / cpu_rates[("weighted", 1)]
        print(f"parallel efficiency by CPU time (interactions per CPU-second, {cores} threads vs 1): "
              f"{efficiency:.2f}")

    print("\nbaseline (analog run at the case's mua, mus; every detected photon kept)")
    # R_d is about 0.6 here, so 1.7e6 launched photons leave >= 1e6 detected
    baseline = build_baseline(mua_per_mm=CASE["mua_per_mm"], mus_per_mm=CASE["mus_per_mm"],
                              g=CASE["g"], n=CASE["n"], photons=1_700_000, seed=3)
    print(f"  launched {baseline.photons}, detected {baseline.detected}, built in {baseline.seconds:.1f} s")
    with tempfile.TemporaryDirectory() as folder:
        path = baseline.save(Path(folder) / "baseline.npz")
        on_disk = path.stat().st_size
    rho = np.linspace(1.0, 10.0, 20)
    mua = np.full(100, 0.02)
    mus = np.linspace(5.0, 20.0, 100)
    start = time.perf_counter()
    baseline.srdr(mua_per_mm=mua[:1], mus_per_mm=mus[:1], rho_mm=rho)  # builds the table
    table_build = time.perf_counter() - start
    start = time.perf_counter()
    baseline.srdr(mua_per_mm=mua, mus_per_mm=mus, rho_mm=rho)
    per_pair = (time.perf_counter() - start) / mua.size
    in_memory = baseline.nbytes + sum(
        a.nbytes for part in baseline._cache.values() if isinstance(part, tuple)
        for a in part if isinstance(a, np.ndarray))
    enough = baseline.detected >= 1_000_000
    print(f"  detected >= 1e6: {verdict(enough, 'baseline size')}")
    print(f"  photon arrays in memory {baseline.nbytes / 1e6:.1f} MB; with lookup table "
          f"{in_memory / 1e6:.1f} MB: {verdict(in_memory < 50e6, 'baseline memory')}")
    print(f"  on disk (compressed .npz) {on_disk / 1e6:.1f} MB: {verdict(on_disk < 50e6, 'baseline disk')}")
    print(f"  lookup table built in {table_build * 1e3:.0f} ms; srdr per (mua, mus) pair "
          f"(20 distances, 100 pairs in one call): {per_pair * 1e3:.3f} ms")

    # a fit as a calibration would do it: log R(rho) at 20 distances, (log mua, log mus)
    # bounded so that mua/mus stays above the baseline's reference ratio
    truth_mua, truth_mus = 0.03, 8.0
    truth = baseline.srdr(mua_per_mm=truth_mua, mus_per_mm=truth_mus, rho_mm=rho)
    calls = 0

    def residual(x):
        nonlocal calls
        calls += 1
        model = baseline.srdr(mua_per_mm=math.exp(x[0]), mus_per_mm=math.exp(x[1]), rho_mm=rho)
        return np.log(model) - np.log(truth)

    bounds = ([math.log(0.02), math.log(4.0)], [math.log(0.2), math.log(20.0)])
    start = time.perf_counter()
    fit = least_squares(residual, x0=[math.log(0.05), math.log(12.0)], bounds=bounds)
    fit_time = time.perf_counter() - start
    found_mua, found_mus = np.exp(fit.x)
    print(f"  one fit of (mua, mus) to R(rho) at 20 distances: {fit_time * 1e3:.1f} ms, "
          f"{calls} lookups, found mua {found_mua:.4f} ({truth_mua}), mus {found_mus:.3f} "
          f"({truth_mus}): {verdict(fit_time < 0.05, 'fit speed')}")
    recovered = abs(found_mua / truth_mua - 1) < 1e-3 and abs(found_mus / truth_mus - 1) < 1e-3
    print(f"  fit recovers the values that made its data: {verdict(recovered, 'fit recovery')}")

    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024  # Linux: kilobytes
    print(f"\npeak resident memory of this benchmark: {peak / 1e6:.0f} MB: "
          f"{verdict(peak < 500e6, 'peak memory')}")
    if failures:
        print("missed:", ", ".join(failures))
        return 1
    return 0


if __name__ == "__main__":
    sys.exit(main())
