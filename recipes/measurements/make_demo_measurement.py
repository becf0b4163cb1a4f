"""Make the demo fibre-probe measurement `demo-nir-liquid-srdr.csv` (demo data, invented).

The file stands for a spatially resolved reflectance reading of a batch mixed from
`recipes/demo-nir-liquid.toml` exactly as planned, but with invented "true" stock potencies
that differ from the stock file (so the calibration loop has something to find):
lipid20 1.12, ink_black 0.80, dye_nir 1.10.  R(rho) comes from the project's own diffusion
model (Kienle & Patterson 1997 fluence-plus-flux, index 1.33 in air) at 5 wavelengths and
14 distances from 2 to 15 mm, multiplied by (1 + 0.01 e) with e from a seeded normal
generator; the sd column is 1 %.  Nothing here is a real measurement.

Regenerate (from the repository root):  .venv/bin/python recipes/measurements/make_demo_measurement.py
"""

from pathlib import Path

import numpy as np

from phantomlab.recipe import load_recipe, predict, solve
from phantomlab.transport.diffusion import srdr_reflectance

HERE = Path(__file__).resolve().parent
TRUE_POTENCIES = {"lipid20": (1.12, 0.0), "ink_black": (0.80, 0.0), "dye_nir": (1.10, 0.0)}
RHO_MM = np.arange(2.0, 16.0, 1.0)
INDEX = 1.33
RELATIVE_SD = 0.01


def main() -> None:
    recipe = load_recipe(HERE.parent / "demo-nir-liquid.toml")
    plan = solve(recipe)
    made = predict(recipe, volume_fractions=plan.volume_fractions, potencies=TRUE_POTENCIES)
    generator = np.random.default_rng(20261201)
    lines = [
        "# source: demo data, invented (synthetic: diffusion model Kienle & Patterson 1997 "
        "with invented true potencies, 1 % noise; made by make_demo_measurement.py)",
        "wavelength_nm,rho_mm,reflectance_per_mm2,sd",
    ]
    for wavelength, mua, musp in zip(made.wavelength_nm, made.mua_per_mm, made.musp_per_mm):
        clean = np.asarray(
            srdr_reflectance(mua_per_mm=float(mua), musp_per_mm=float(musp), rho_mm=RHO_MM,
                             n=INDEX, model="kienle1997"),
            dtype=float,
        ).ravel()
        noisy = clean * (1.0 + RELATIVE_SD * generator.standard_normal(clean.size))
        for rho, value, exact in zip(RHO_MM, noisy, clean):
            lines.append(f"{wavelength:g},{rho:g},{value:.6e},{RELATIVE_SD * exact:.3e}")
    (HERE / "demo-nir-liquid-srdr.csv").write_text("\n".join(lines) + "\n")
    (HERE / "demo-nir-liquid-srdr.toml").write_text(
        "# demo data, invented: metadata of demo-nir-liquid-srdr.csv\n"
        f"n = {INDEX}\nn_outside = 1.0\ninstrument = \"demo fibre probe (invented)\"\n"
    )


if __name__ == "__main__":
    main()
