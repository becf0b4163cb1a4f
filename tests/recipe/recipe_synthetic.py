"""Synthetic inputs for the recipe tests: made-up smooth spectra, clearly not physics claims.

The solver, dilution planner and uncertainty code are checked on these against exact
properties (a forward model solved back, constraints, sampled propagation); the physics of real
stocks is the optics layer's, tested there.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import numpy as np

from phantomlab.materials import Shelf, Stock
from phantomlab.recipe import parse_recipe
from phantomlab.recipe.mixmodel import IntrinsicTable

WAVELENGTH_NM = np.arange(500.0, 901.0, 50.0)
KEYS = ("sca", "sca2", "abs1", "abs2")


def synthetic_table(wavelength_nm=WAVELENGTH_NM) -> IntrinsicTable:
    """Four invented stocks: two scatterers (g 0.8 and 0.6), a banded absorber, an ink-like one."""
    lam = np.asarray(wavelength_nm, dtype=float)
    x = (lam - 500.0) / 400.0
    mus = np.array([
        200.0 * (lam / 600.0) ** -1.2,
        150.0 * (lam / 600.0) ** -2.0,
        np.zeros_like(lam),
        0.5 + 0.0 * lam,
    ])
    g = np.array([0.8 + 0 * lam, 0.6 + 0 * lam, 0 * lam, 0.5 + 0 * lam])
    mua = np.array([
        0.001 + 0 * lam,
        0.002 + 0 * lam,
        0.2 + 5.0 * np.exp(-0.5 * ((lam - 650.0) / 80.0) ** 2),
        2.0 + 3.0 * x,
    ])
    return IntrinsicTable(
        wavelength_nm=lam, stock_keys=KEYS, mua_per_mm=mua, mus_per_mm=mus, g=g,
        matrix_mua_per_mm=0.002 + 0.003 * x**2,
        solids_volume_fraction=[0.025 / 1.05, 0.025 / 1.05, 0.0, 0.0],
        density_g_per_ml=[1.0, 1.0, 1.0, 1.0],
        matrix_density_g_per_ml=1.0,
    )


def _stock(key, kind, *, potency_sd=0.05, solids=0.0, hazards=(), expiry=None, density=1.0):
    return Stock(key=key, kind=kind, lot=f"synthetic-{key}", expiry=expiry, potency=1.0,
                 potency_sd=potency_sd, hazards=tuple(hazards), density_g_per_ml=density,
                 solids_volume_fraction=solids, definition={}, spec=None, name="synthetic")


def synthetic_shelf(*, expired: bool = False) -> Shelf:
    stocks = {
        "water": _stock("water", "matrix", potency_sd=0.0),
        "sca": _stock("sca", "spheres", solids=0.025 / 1.05),
        "sca2": _stock("sca2", "spheres", solids=0.025 / 1.05),
        "abs1": _stock("abs1", "absorber", potency_sd=0.10, hazards=("dye",),
                       expiry=dt.date(2001, 1, 1) if expired else None),
        "abs2": _stock("abs2", "absorber", potency_sd=0.15, hazards=("ink",)),
    }
    return Shelf(path=None, stocks=stocks, name="synthetic shelf")


def synthetic_recipe(target: dict, *, limits=None, preparation=None, batch=("batch_volume_ml", 500.0),
                     stocks=KEYS, expired=False, **extra):
    definition = {"name": "synthetic test recipe", "version": "t1", "matrix": "water",
                  "stocks": list(stocks), batch[0]: batch[1], "target": target, **extra}
    if limits is not None:
        definition["limits"] = limits
    if preparation is not None:
        definition["preparation"] = preparation
    return parse_recipe(definition, base_dir=Path("."), shelf=synthetic_shelf(expired=expired))


def forward_target(table: IntrinsicTable, fractions, *, with_g=False) -> dict:
    from phantomlab.recipe.mixmodel import mix_coefficients

    mix = mix_coefficients(table, volume_fractions=np.asarray(fractions), potencies=np.ones(len(fractions)))
    target = {
        "wavelength_nm": table.wavelength_nm.tolist(),
        "mua_per_mm": mix["mua_per_mm"].tolist(),
        "musp_per_mm": mix["musp_per_mm"].tolist(),
    }
    if with_g:
        target["g_wavelength_nm"] = table.wavelength_nm.tolist()
        target["g"] = mix["g"].tolist()
    return target
