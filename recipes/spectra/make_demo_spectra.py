"""Write the invented demo spectra of the Kestrel Bay Optics Lab shelf (demo data, invented).

Regenerate with:  python recipes/spectra/make_demo_spectra.py
The shapes are smooth made-up curves (Gaussian bands, a power law); they describe no real
product.  Every file starts with the provenance line "# source: demo data, invented".
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
PROVENANCE = "# source: demo data, invented"
WAVELENGTH_NM = np.arange(400.0, 1000.0 + 0.5, 5.0)


def band(wavelength_nm, centre_nm, width_nm):
    return np.exp(-0.5 * ((wavelength_nm - centre_nm) / width_nm) ** 2)


def write(name: str, header: str, rows) -> None:
    lines = [PROVENANCE, header]
    lines += [",".join(f"{v:.6g}" for v in row) for row in rows]
    (HERE / name).write_text("\n".join(lines) + "\n", encoding="utf-8")


def main() -> None:
    w = WAVELENGTH_NM
    # Blue dye stock: one band at 610 nm with a shoulder at 660 nm, intrinsic mua [1/mm].
    blue = 40.0 * band(w, 610.0, 45.0) + 18.0 * band(w, 665.0, 30.0) + 0.4
    write("dye_blue.csv", "wavelength_nm,mua_per_mm", zip(w, blue))
    # NIR dye stock: a band at 790 nm, intrinsic mua [1/mm].
    nir = 55.0 * band(w, 790.0, 40.0) + 6.0 * band(w, 720.0, 35.0) + 0.15
    write("dye_nir.csv", "wavelength_nm,mua_per_mm", zip(w, nir))
    # Molar extinction table (base 10) of a red-absorbing dye [1/(M cm)].
    epsilon = 9.0e4 * band(w, 662.0, 28.0) + 1.2e4 * band(w, 610.0, 40.0) + 800.0
    write("dye_ext660-extinction.csv", "wavelength_nm,epsilon_per_molar_per_cm", zip(w, epsilon))
    # Black ink: cuvette dilution series, 10 mm path, blank-corrected base-10 absorbance.
    # Intrinsic attenuation of the undiluted ink: 320 (lambda/600 nm)^-0.85 [1/mm].
    attenuation = 320.0 * (w / 600.0) ** -0.85
    rows = []
    for fraction in (1.5e-4, 3.0e-4, 4.5e-4, 6.0e-4):
        absorbance = attenuation * fraction * 10.0 / np.log(10.0)
        # a small invented scatter of the readings (fixed, reproducible)
        wobble = 1.0 + 0.004 * np.sin(w / 37.0 + fraction * 1.0e4)
        rows += [(wl, fraction, a) for wl, a in zip(w, absorbance * wobble)]
    write("ink_black-cuvette.csv", "wavelength_nm,stock_volume_fraction,absorbance", rows)
    # Carbon-black powder for silicone: collimated attenuation per volume fraction of the dry
    # powder (its particle volume in the final mix), a smooth power law
    # 1.2e4 (lambda/600 nm)^-1.0 [1/mm]; the stock file splits it with its albedo.
    carbon = 1.2e4 * (w / 600.0) ** -1.0
    write("carbon_black.csv", "wavelength_nm,mut_per_mm", zip(w, carbon))


if __name__ == "__main__":
    main()
