"""Speed of the deterministic transport models over a 601-wavelength spectrum.

    .venv/bin/python bench/transport.py

Prints, for adding-doubling (601 wavelengths, one slab) and for diffusion R(ρ) (601
wavelengths × 50 distances): the batched time (best of several repeats), the time of a naive
loop calling the same function once per wavelength, and their ratio; for adding-doubling
also the layer solved by doubling instead of the default eigen-decomposition.  Target (issue 4):
adding-doubling for 601 wavelengths well under a second.  The optical properties are a
demo spectrum (invented, tissue-like power law), not measured data.
"""

from __future__ import annotations

import time

import numpy as np

from phantomlab.transport.adding_doubling import slab_reflectance_transmittance
from phantomlab.transport.diffusion import srdr_reflectance

WAVELENGTH_NM = np.linspace(400.0, 1000.0, 601)
# Demo spectrum (invented): μs′ = 1.5 (λ/500 nm)^−1.3 /mm, g = 0.8, μa from 0.005 to 0.1 /mm.
MUSP = 1.5 * (WAVELENGTH_NM / 500.0) ** -1.3
G = np.full_like(WAVELENGTH_NM, 0.8)
MUS = MUSP / (1.0 - G)
MUA = 0.005 + 0.095 * np.exp(-(((WAVELENGTH_NM - 560.0) / 60.0) ** 2))
N = np.full_like(WAVELENGTH_NM, 1.40)
RHO_MM = np.linspace(2.0, 25.0, 50)


def best_of(function, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def adding_doubling_batched():
    return slab_reflectance_transmittance(
        mua_per_mm=MUA, mus_per_mm=MUS, g=G, thickness_mm=2.0, n=N, n_slide=1.52
    )


def adding_doubling_doubling():
    return slab_reflectance_transmittance(
        mua_per_mm=MUA, mus_per_mm=MUS, g=G, thickness_mm=2.0, n=N, n_slide=1.52, method="doubling"
    )


def adding_doubling_loop():
    for k in range(WAVELENGTH_NM.size):
        slab_reflectance_transmittance(
            mua_per_mm=MUA[k], mus_per_mm=MUS[k], g=G[k], thickness_mm=2.0, n=N[k], n_slide=1.52
        )


def diffusion_batched():
    return srdr_reflectance(mua_per_mm=MUA, musp_per_mm=MUSP, rho_mm=RHO_MM, n=N)


def diffusion_loop():
    for k in range(WAVELENGTH_NM.size):
        srdr_reflectance(mua_per_mm=MUA[k], musp_per_mm=MUSP[k], rho_mm=RHO_MM, n=N[k])


def main() -> None:
    adding_doubling_batched()  # warm caches (quadrature rules)
    batched = best_of(adding_doubling_batched, 5)
    loop = best_of(adding_doubling_loop, 1)
    doubling = best_of(adding_doubling_doubling, 3)
    print(f"adding-doubling, {WAVELENGTH_NM.size} wavelengths, g = 0.8 (24 streams), slides on both faces:")
    print(f"  batched over wavelength : {batched * 1e3:8.1f} ms  (target: well under 1000 ms)")
    print(f"  per-wavelength loop     : {loop * 1e3:8.1f} ms")
    print(f"  ratio loop / batched    : {loop / batched:8.1f}")
    print(f"  layer by doubling       : {doubling * 1e3:8.1f} ms  (ratio doubling / eigen {doubling / batched:.1f})")
    batched = best_of(diffusion_batched, 20)
    loop = best_of(diffusion_loop, 3)
    print(f"diffusion R(rho) farrell1992, {WAVELENGTH_NM.size} wavelengths x {RHO_MM.size} distances:")
    print(f"  batched                 : {batched * 1e3:8.2f} ms")
    print(f"  per-wavelength loop     : {loop * 1e3:8.2f} ms")
    print(f"  ratio loop / batched    : {loop / batched:8.1f}")


if __name__ == "__main__":
    main()
