"""Make the demo fibre-probe measurement `demo-nir-liquid-srdr.csv` (demo data, invented).

The file stands for a spatially resolved reflectance reading of a batch mixed from
`recipes/demo-nir-liquid.toml` exactly as planned, but with invented "true" stock potencies
that differ from the stock file (so the calibration loop has something to find):
lipid20 1.12, ink_black 0.80, dye_nir 1.10.  Nothing here is a real measurement.

How R(ρ) is made: light from the project's own Monte Carlo engine, run directly
(``phantomlab.transport.montecarlo.simulate``, weighted estimator, one run per wavelength
with its own seed) at the batch's optics as the recipe layer predicts them with the true
potencies, with the g of its scattering model *at each wavelength* (the emulsion model:
0.64 at 660 nm to 0.51 at 850 nm) and the recipe's index 1.33 under air.  Each distance is
read as a point detector: the run's ring of width ``RING_MM`` centred on ρ (its bias
against the point value is below 0.2 % at 2 mm: R's curvature over 0.2 mm).  So the file
is independent of the default fit's Monte Carlo lookup (a stored analog run at one g, the
batch's mean, re-weighted and scaled), and agrees with it only as far as both are right.

Noise: each value is the Monte Carlo estimate (its own photon noise, from the spread of 32
batches of photons: 0.3 % at 2 mm to about 2 % at 15 mm, growing with distance as a real
probe's does) multiplied by (1 + 0.01 e), e from a seeded normal generator (the probe's
1 % reading noise); the ``sd`` column combines both, sqrt((0.01 R)² + sd_mc²).

The sidecar `demo-nir-liquid-srdr.toml` gives n, the point detector and g per wavelength
(``[g_spectrum]``: the batch's scattering model at the five wavelengths, what the batch log
would use for this batch), so that a standalone ``phantomlab fit`` uses the same Monte Carlo
baselines as ``phantomlab batch measure`` (one per g step, phantomlab.calibration.band_g).
Only the sidecar changes when that is rewritten; the CSV is the same run.

Regenerate (from the repository root; about 5 minutes on two cores):

    nice -n 10 .venv/bin/python recipes/measurements/make_demo_measurement.py
"""

from pathlib import Path

import numpy as np

from phantomlab.recipe import load_recipe, predict, solve
from phantomlab.transport.montecarlo import simulate

HERE = Path(__file__).resolve().parent
TRUE_POTENCIES = {"lipid20": (1.12, 0.0), "ink_black": (0.80, 0.0), "dye_nir": (1.10, 0.0)}
RHO_MM = np.arange(2.0, 16.0, 1.0)
#: Width of the ring that stands for a point detector at each distance [mm].
RING_MM = 0.2
INDEX = 1.33
RELATIVE_SD = 0.01
PHOTONS = 10_000_000
FIRST_SEED = 4101
NOISE_SEED = 20261201


def point_rings(rho_mm: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bin centres whose midpoints make a ring of width RING_MM around each ρ, and where the ρ bins are."""
    half = RING_MM / 2.0
    centres = np.sort(np.concatenate([rho_mm - 2.0 * half, rho_mm, rho_mm + 2.0 * half]))
    return centres, np.arange(1, centres.size, 3)


def main() -> None:
    recipe = load_recipe(HERE.parent / "demo-nir-liquid.toml")
    plan = solve(recipe)
    made = predict(recipe, volume_fractions=plan.volume_fractions, potencies=TRUE_POTENCIES)
    g_batch = np.interp(made.wavelength_nm, plan.predicted.wavelength_nm, plan.predicted.g)
    generator = np.random.default_rng(NOISE_SEED)
    centres, at_rho = point_rings(RHO_MM)
    lines = [
        "# source: demo data, invented (synthetic: phantomlab Monte Carlo run directly per wavelength, g of the "
        "scattering model per wavelength, n 1.33, invented true potencies, its photon noise plus 1 % probe noise; "
        "made by make_demo_measurement.py)",
        "wavelength_nm,rho_mm,reflectance_per_mm2,sd",
    ]
    for k, (wavelength, mua, mus, g) in enumerate(zip(made.wavelength_nm, made.mua_per_mm, made.mus_per_mm,
                                                     made.g)):
        run = simulate(mua_per_mm=float(mua), mus_per_mm=float(mus), g=float(g), n=INDEX, n_outside=1.0,
                       rho_mm=centres, photons=PHOTONS, seed=FIRST_SEED + k)
        value = run.reflectance_per_mm2[at_rho]
        photon_sd = run.reflectance_per_mm2_sd[at_rho]
        noisy = value * (1.0 + RELATIVE_SD * generator.standard_normal(value.size))
        sd = np.hypot(RELATIVE_SD * value, photon_sd)
        print(f"{wavelength:g} nm: mua {mua:.5f} /mm, musp {made.musp_per_mm[k]:.4f} /mm, g {g:.3f}, "
              f"{run.seconds:.0f} s, photon noise {np.min(photon_sd / value):.4f}-{np.max(photon_sd / value):.4f}",
              flush=True)
        for rho, reading, error in zip(RHO_MM, noisy, sd):
            lines.append(f"{wavelength:g},{rho:g},{reading:.6e},{error:.3e}")
    (HERE / "demo-nir-liquid-srdr.csv").write_text("\n".join(lines) + "\n")
    (HERE / "demo-nir-liquid-srdr.toml").write_text(
        "# demo data, invented: metadata of demo-nir-liquid-srdr.csv (made by make_demo_measurement.py)\n"
        f"n = {INDEX}\nn_outside = 1.0\n"
        "detector = \"point\"\n"
        "instrument = \"demo fibre probe (invented)\"\n"
        "\n"
        "# g of the batch's scattering model (lipid emulsion) at each wavelength: the Monte Carlo lookup\n"
        "# fits each wavelength with a baseline near its own g\n"
        "[g_spectrum]\n"
        f"wavelength_nm = [{', '.join(f'{w:g}' for w in made.wavelength_nm)}]\n"
        f"g = [{', '.join(f'{v:.3f}' for v in g_batch)}]\n"
    )


if __name__ == "__main__":
    main()
