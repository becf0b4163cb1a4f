"""Benchmark: solving a 601-wavelength target with four stocks, with uncertainty.

Demo shelf (recipes/demo-stocks.toml, demo data): water matrix with lipid20, ps1000,
ink_black and dye_nir; target 400–1000 nm in 1 nm steps (601 wavelengths): μa 0.01 → 0.02
/mm rising linearly, μs′ = 1.0 (λ/700 nm)^−1.2 /mm.  The stocks' intrinsic optics are
computed once (``intrinsic_table``, timed separately: that is the optics layer's Mie work);
then

* fast: ``phantomlab.recipe.solve`` on that table — bounded least squares in relative error,
  amounts, pre-dilutions and the propagated SDs of μa and μs′ at all 601 wavelengths;
* naive: ``scipy.optimize.minimize`` (L-BFGS-B, bounds f ≥ 0, finite-difference gradient) of
  the same relative-error sum of squares, doses only (no amounts, no uncertainty).

Run:  .venv/bin/python bench/recipe.py
Target (issue 3): the fast solve with uncertainty < 0.2 s; printed beside the naive time.
"""

from __future__ import annotations

import time
import warnings
from pathlib import Path

import numpy as np
from scipy.optimize import minimize

from phantomlab.errors import PhantomlabWarning
from phantomlab.recipe import load_recipe, parse_recipe, solve
from phantomlab.recipe.plan import intrinsic_table
from phantomlab.recipe.solver import target_rows

RECIPES = Path(__file__).resolve().parents[1] / "recipes"
REPEATS = 5


def _best(function, repeats=REPEATS):
    times = []
    result = None
    for _ in range(repeats):
        start = time.perf_counter()
        result = function()
        times.append(time.perf_counter() - start)
    return min(times), result


def main() -> None:
    warnings.simplefilter("ignore", PhantomlabWarning)  # the water table is held below 600 nm
    base = load_recipe(RECIPES / "demo-nir-liquid.toml")
    wavelength = np.arange(400.0, 1000.0 + 0.5, 1.0)
    target = {
        "wavelength_nm": wavelength.tolist(),
        "mua_per_mm": (0.01 + 0.01 * (wavelength - 400.0) / 600.0).tolist(),
        "musp_power_law": {"a_per_mm": 1.0, "b": 1.2, "reference_nm": 700.0},
    }
    definition = {**base.definition, "stocks": ["lipid20", "ps1000", "ink_black", "dye_nir"], "target": target}
    recipe = parse_recipe(definition, base_dir=RECIPES, shelf=base.shelf)
    assert recipe.target.wavelength_nm.size == 601

    start = time.perf_counter()
    table = intrinsic_table(recipe, recipe.target.wavelength_nm)
    optics_s = time.perf_counter() - start

    fast_s, plan = _best(lambda: solve(recipe, table=table, curve=False))

    potencies = np.array([d.potency for d in plan.doses])
    A, b = target_rows(table, recipe.target, potencies=potencies)

    def cost(x):
        r = A @ x - b
        return float(r @ r)

    def naive():
        return minimize(cost, np.full(4, 1e-3), method="L-BFGS-B", bounds=[(0.0, 1.0)] * 4,
                        options={"maxiter": 20000, "maxfun": 200000, "ftol": 1e-15, "gtol": 1e-12})

    naive_s, result = _best(naive, repeats=3)
    fast_x = np.array([d.volume_fraction for d in plan.doses])
    print("recipe solve, 601 wavelengths, 4 stocks (lipid20, ps1000, ink_black, dye_nir):")
    print(f"  intrinsic optics of the stocks (optics layer, once): {optics_s * 1000:8.1f} ms")
    print(f"  solve with amounts, dilutions and SDs (best of {REPEATS}): {fast_s * 1000:8.1f} ms"
          f"   target < 200 ms: {'met' if fast_s < 0.2 else 'NOT met'}")
    print(f"  naive scipy.optimize.minimize, doses only (best of 3): {naive_s * 1000:8.1f} ms"
          f"   ({result.nfev} function calls)")
    print(f"  ratio naive / fast: {naive_s / fast_s:6.1f}")
    print(f"  cost (relative-error sum of squares): fast {cost(fast_x):.6g}, naive {cost(result.x):.6g}")
    print(f"  doses fast  {np.array2string(fast_x, precision=6)}")
    print(f"  doses naive {np.array2string(result.x, precision=6)}")


if __name__ == "__main__":
    main()
