"""Benchmark: intrinsic spectrum of a polydisperse sphere stock, vectorised vs a naive loop.

1.0 µm polystyrene, 5 % size CV (normal, 61 size nodes), 2.5 % w/v, in water, on 601
wavelengths (400–1000 nm, 1 nm).  The fast path is ``intrinsic_optics`` (indices, one
call of the numpy Mie engine on the flattened wavelength × size grid, averages); the
baseline makes one miepython call per (wavelength, size) pair with the same indices and
averages.  For reference the same grid is also run through one call of miepython's
``efficiencies_mx`` on the flattened arrays (engine "miepython").

Run:  .venv/bin/python bench/optics.py
Target (issue 2): fast path < 0.2 s and >= 10x faster than the naive loop.
"""

from __future__ import annotations

import time
import warnings

import numpy as np

from phantomlab.errors import PhantomlabWarning
from phantomlab.materials import parse_shelf, refractive_index
from phantomlab.optics import intrinsic_optics, sphere_ensemble_optics, sphere_ensemble_optics_naive

SHELF = {
    "stocks": {
        "water": {"kind": "matrix", "material": "water", "density_g_per_ml": 1.0},
        "ps1000": {
            "kind": "spheres",
            "material": "polystyrene",
            "diameter_um": 1.0,
            "size_cv": 0.05,
            "solids_percent_w_v": 2.5,
            "particle_density_g_per_ml": 1.05,
        },
    }
}


def best_of(repeats, function):
    times = []
    result = None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        times.append(time.perf_counter() - start)
    return min(times), result


def main() -> None:
    from pathlib import Path

    warnings.simplefilter("ignore", PhantomlabWarning)  # 400-600 nm water hold: not the point here
    shelf = parse_shelf(SHELF, base=Path("."))
    stock, water = shelf["ps1000"], shelf["water"]
    wavelength = np.linspace(400.0, 1000.0, 601)
    sizes = stock.spec.sizes
    intrinsic_optics(stock, wavelength_nm=wavelength[:3], matrix=water)  # warm-up (imports, numba)

    fast_s, fast = best_of(5, lambda: intrinsic_optics(stock, wavelength_nm=wavelength, matrix=water))

    n_matrix = refractive_index("water", wavelength_nm=wavelength)
    n_particle = refractive_index("polystyrene", wavelength_nm=wavelength)
    grid = dict(
        wavelength_nm=wavelength, particle_index=n_particle, matrix_index=n_matrix,
        diameters_um=sizes.diameters_um, number_weights=sizes.number_weights,
        volume_fraction=stock.solids_volume_fraction,
    )
    naive_s, slow = best_of(1, lambda: sphere_ensemble_optics_naive(**grid))
    mx_s, via_mx = best_of(1, lambda: sphere_ensemble_optics(**grid, engine="miepython"))
    agree = float(np.max(np.abs(fast.mus_per_mm / slow.mus_per_mm - 1)))
    agree_g = float(np.max(np.abs(fast.g - slow.g)))
    print(f"stock: 1.0 um polystyrene, CV 5 %, {sizes.diameters_um.size} size nodes x {wavelength.size} wavelengths")
    print(f"vectorised intrinsic_optics (numpy engine): {fast_s * 1000:8.1f} ms  (best of 5; target < 200 ms)")
    print(f"naive loop, one miepython call per pair:     {naive_s * 1000:8.1f} ms")
    print(f"one miepython efficiencies_mx on the grid:   {mx_s * 1000:8.1f} ms")
    print(f"ratio naive / vectorised: {naive_s / fast_s:6.1f}x  (target >= 10x)")
    print(f"max relative difference of mus vs naive: {agree:.1e}; max |difference of g|: {agree_g:.1e}")


if __name__ == "__main__":
    main()
