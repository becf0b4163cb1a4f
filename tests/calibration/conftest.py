"""Shared pieces of the calibration tests: a simulated lab on the demo shelf (demo data, invented).

The lab's bottles have hidden true potencies 20–40 % away from the stock file's 1.0, and the
stock file admits that with a wide prior (potency_sd 0.25–0.35), as issue 5 asks.  The
target of the lab's recipe is the optics of a known dose made with the true potencies, so
that a perfectly calibrated plan can hit it exactly: what the test measures is calibration,
not the reach of the stocks.
"""

import re
import shutil
import sys
from pathlib import Path

import numpy as np
import pytest

# the td/fd tests' Monte Carlo data builder (td_fixture_data.py) is imported by name
# (the suite runs in importlib mode)
sys.path.insert(0, str(Path(__file__).parent))

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "recipes"

#: Hidden truth of the simulated lab (demo data, invented): 30 % strong, 35 % weak, 25 % strong.
TRUE_POTENCY = {"lipid20": 1.30, "ink_black": 0.65, "dye_nir": 1.25}
#: The stock file's prior SDs, wide enough to admit the truth.
PRIOR_SD = {"lipid20": 0.30, "ink_black": 0.35, "dye_nir": 0.25}
#: The dose whose true optics are the target (volume fractions of undiluted stock).
REACHABLE_DOSE = {"lipid20": 0.045, "ink_black": 4.0e-5, "dye_nir": 2.5e-5}
TARGET_NM = [660.0, 700.0, 750.0, 800.0, 850.0]
MEASURE_NM = np.arange(650.0, 861.0, 10.0)
RHO_MM = np.linspace(2.0, 15.0, 20)


def _set_potency_sd(text: str, key: str, sd: float) -> str:
    pattern = re.compile(rf"(\[stocks\.{key}\][^\[]*?potency_sd = )[0-9.]+", re.S)
    new, count = pattern.subn(rf"\g<1>{sd}", text)
    assert count == 1, key
    return new


def _recipe_text(target_mua, target_musp) -> str:
    return "\n".join([
        "# demo data, invented: the simulated lab's recipe (calibration tests)",
        'name = "demo: simulated-lab liquid"',
        'version = "1"',
        'stocks_file = "demo-stocks.toml"',
        'matrix = "water"',
        'stocks = ["lipid20", "ink_black", "dye_nir"]',
        "batch_volume_ml = 500",
        "[target]",
        f"wavelength_nm = {TARGET_NM}",
        f"mua_per_mm = {[float(f'{v:.6g}') for v in target_mua]}",
        f"musp_per_mm = {[float(f'{v:.6g}') for v in target_musp]}",
        "[limits]",
        "min_dispense_ul = 5",
        "pipette_rel_error = 0.005",
        "[preparation]",
        'kind = "liquid"',
        "",
    ])


@pytest.fixture(scope="module")
def lab(tmp_path_factory):
    """A folder with the demo shelf (wide priors), the lab recipe, and the hidden truth."""
    from phantomlab.recipe import load_recipe, predict

    folder = tmp_path_factory.mktemp("lab")
    shutil.copytree(DEMO / "spectra", folder / "spectra")
    text = (DEMO / "demo-stocks.toml").read_text()
    for key, sd in PRIOR_SD.items():
        text = _set_potency_sd(text, key, sd)
    (folder / "demo-stocks.toml").write_text(text)
    # first a recipe with any target, to compute the true optics of the reachable dose
    (folder / "lab.toml").write_text(_recipe_text([0.01] * 5, [1.0] * 5))
    draft = load_recipe(folder / "lab.toml")
    truth = {k: (p, 0.0) for k, p in TRUE_POTENCY.items()}
    reach = predict(draft, volume_fractions=REACHABLE_DOSE, potencies=truth)
    (folder / "lab.toml").write_text(_recipe_text(reach.mua_per_mm, reach.musp_per_mm))
    recipe = load_recipe(folder / "lab.toml")
    return {"folder": folder, "recipe": recipe, "truth": truth, "true_optics": true_optics,
            "measure": synthetic_srdr_csv}


def true_optics(recipe, fractions, truth, wavelength_nm=None):
    """What a batch really is: the forward model of its doses with the hidden potencies."""
    from phantomlab.recipe import predict

    return predict(recipe, volume_fractions=fractions, potencies=truth, wavelength_nm=wavelength_nm)


def synthetic_srdr_csv(recipe, fractions, truth, *, seed: int, model: str = "kienle1997") -> str:
    """A fibre-probe measurement of the batch: diffusion R(ρ) of its true optics, 1 % noise."""
    from phantomlab.transport.diffusion import srdr_reflectance

    optics = true_optics(recipe, fractions, truth, MEASURE_NM)
    R = srdr_reflectance(mua_per_mm=optics.mua_per_mm, musp_per_mm=optics.musp_per_mm, rho_mm=RHO_MM, n=1.33,
                         model=model)
    rng = np.random.default_rng(seed)
    noisy = R * (1 + 0.01 * rng.standard_normal(R.shape))
    lines = ["# source: demo data, invented (simulated lab: diffusion forward model, 1 % noise)",
             "wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    for i, w in enumerate(MEASURE_NM):
        for j, r in enumerate(RHO_MM):
            lines.append(f"{w:g},{r:.6g},{noisy[i, j]:.9g},{0.01 * R[i, j]:.6g}")
    return "\n".join(lines) + "\n"


import sys as _sys  # noqa: E402  (hidden_lab.py beside this file is imported by name; importlib mode)

_sys.path.insert(0, str(Path(__file__).parent))
