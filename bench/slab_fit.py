"""Speed of the per-wavelength slab inversion over a 601-wavelength spectrum.

    OPENBLAS_NUM_THREADS=1 .venv/bin/python bench/slab_fit.py

Prints, for 601 wavelengths (slab 1 mm between glass slides, n = 1.4):

* the three-parameter inversion (μa, μs′, g from R, T and Tc) — target (issue 15): at most
  2 s — and the two-parameter one (g given);
* baselines run in this process: one adding-doubling call for all 601 wavelengths at the
  streams the fit ends on (the inversion's cost in forward calls), and a naive loop of
  ``scipy.optimize.least_squares`` calling adding-doubling one wavelength at a time (timed
  on 12 wavelengths, scaled to 601), with the ratio naive / batched.

The spectrum is a demo (invented, tissue-like power law): μs′ = 1.2 (λ/500 nm)^−1.2 /mm,
g from 0.75 to 0.85, μa 0.01–0.1 /mm.
"""

from __future__ import annotations

import time

import numpy as np
from scipy.optimize import least_squares

from phantomlab.calibration.slab_inversion import SlabModel, invert_slab
from phantomlab.transport.adding_doubling import slab_reflectance_transmittance, streams_for_anisotropy

WAVELENGTH_NM = np.linspace(400.0, 1000.0, 601)
MUSP = 1.2 * (WAVELENGTH_NM / 500.0) ** -1.2
G = 0.75 + 0.1 * (WAVELENGTH_NM - 400.0) / 600.0
MUA = 0.01 + 0.09 * np.exp(-(((WAVELENGTH_NM - 560.0) / 60.0) ** 2))
MODEL = SlabModel(thickness_mm=1.0, n=1.4, slides=dict(n_slide=1.52))
DATA = MODEL.observables(MUA, MUSP, G)
SD = 0.01 * DATA


def best_of(function, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def naive(k: int):
    def residual(x):
        out = MODEL.observables(np.exp(x[0]), np.exp(x[1]), x[2])[0]
        return (out - DATA[k]) / SD[k]

    return least_squares(residual, [np.log(0.03), np.log(1.0), 0.8], bounds=([-14, -7, 0.0], [4, 6, 0.98])).x


def main() -> None:
    from phantomlab.calibration import slab_inversion

    slab_inversion._START_TABLES.clear()
    first = best_of(lambda: invert_slab(MODEL, data=DATA, sd=SD), 1)  # builds the start table once
    three = best_of(lambda: invert_slab(MODEL, data=DATA, sd=SD), 3)
    solution = invert_slab(MODEL, data=DATA, sd=SD)
    two = best_of(lambda: invert_slab(MODEL, data=DATA, sd=SD, g=G), 3)
    streams = streams_for_anisotropy(G)
    forward = best_of(lambda: slab_reflectance_transmittance(
        mua_per_mm=MUA, mus_per_mm=MUSP / (1 - G), g=G, thickness_mm=1.0, n=1.4, n_slide=1.52,
        quadrature_points=streams), 3)
    sample = np.linspace(0, 600, 12).astype(int)
    start = time.perf_counter()
    for k in sample:
        naive(int(k))
    loop = (time.perf_counter() - start) * WAVELENGTH_NM.size / sample.size
    error = max(np.max(np.abs(solution.mua_per_mm / MUA - 1)), np.max(np.abs(solution.musp_per_mm / MUSP - 1)))
    print(f"slab inversion, {WAVELENGTH_NM.size} wavelengths, streams {sorted(set(streams.tolist()))}:")
    print(f"  mua, musp, g from R, T, Tc : {three:8.2f} s  (target: at most 2 s)")
    print(f"  the same, first in process : {first:8.2f} s  (with the start table, computed once per faces)")
    print(f"  mua, musp with g given     : {two:8.2f} s")
    print(f"  one forward call (601)     : {forward * 1e3:8.1f} ms; the three-parameter fit costs "
          f"{three / forward:.1f} of them")
    print(f"  naive least_squares loop   : {loop:8.1f} s (12 wavelengths scaled to 601)")
    print(f"  ratio naive / batched      : {loop / three:8.1f}")
    print(f"  largest error on noise-free data: {error:.1e} (relative), g {np.max(np.abs(solution.g - G)):.1e}")


if __name__ == "__main__":
    main()
