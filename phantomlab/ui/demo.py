"""The demo database: an invented lab's shelf and three demo batches (layer 5; demo data, invented).

On first use the page seeds a database file of its own (never a lab's database, see
:mod:`phantomlab.ui.workspace`) through the store layer's public API:

* every stock of the demo shelf ``recipes/demo-stocks.toml`` as a stock lot;
* one oximeter-test batch of ``recipes/demo-oximeter-blood.toml`` (blood in lipid emulsion),
  planned, "mixed" on the day of the demo deoxygenation series with invented small
  deviations, and its oxygenation series ``recipes/measurements/demo-oximeter-series.csv``
  with the blood-gas readings ``demo-oximeter-references.csv`` (synthetic, made by
  ``make_demo_oxygenation.py``), unmixed and stored as ``phantomlab oxygenation add`` does;
  seeded first, so it is the oldest batch (its series is dated 2 March 2026);
* two batches of the demo recipe ``recipes/demo-nir-liquid.toml``, planned, "mixed" with
  invented small deviations from the sheet, and "measured" with a fibre probe: the
  reflectance files are synthetic, made here by the transport layer's diffusion model
  (Kienle & Patterson 1997) from the optics the recipe layer predicts for what was dispensed
  with invented "true" stock potencies, plus a fixed invented noise, and their stored fits
  are diffusion fits (``kienle1997``, the model that made them), not the default Monte
  Carlo lookup: a lookup fit needs the Monte Carlo baseline for the batch's g, whose first
  build (about a minute) the first start must not wait for.  Each file's ``# source:`` line
  and each fit's model say so; refitting one on the page with the default model is
  possible (it builds the baseline once).  The first batch is measured twice (day 1 and
  day 15) so the page can show drift with phantom age.

The invented probe file the page offers for trying the loop (:func:`demo_measurement_csv`)
is made differently: from a shipped table of direct Monte Carlo runs of the demo emulsion
(:mod:`phantomlab.ui.demo_light`) at each wavelength's g of the batch's scattering model, so
that the default fit describes it (fit quality GOOD) without being the model that made it,
in milliseconds.

Nothing here is a real measurement; every file says so in its ``# source:`` line.  The
seeding writes to a temporary file that replaces the demo file only when complete, so a
killed first run never leaves a half-seeded demo database.
"""

from __future__ import annotations

import datetime as _dt
import os
import threading
from pathlib import Path

import numpy as np

from phantomlab.ui.widgets import Outcome
from phantomlab.ui.workspace import Workspace

__all__ = ["DEMO_RECIPE", "DEMO_OXIMETER_RECIPE", "ensure_demo_database", "seed_demo_database",
           "demo_batch_optics", "demo_measurement_csv", "monte_carlo_srdr_csv", "synthetic_srdr_csv"]

#: The demo recipe both demo batches are planned from.
DEMO_RECIPE = "demo-nir-liquid.toml"
#: The demo oximeter-test batch: its recipe, its series and reference readings (beside the
#: recipes, in ``measurements/``), the day it was mixed and measured (the series' own dates),
#: the chromophores unmixed (the series was made from haemoglobin and water) and invented
#: dispensing deviations.
DEMO_OXIMETER_RECIPE = "demo-oximeter-blood.toml"
DEMO_OXIMETER_SERIES = "demo-oximeter-series.csv"
DEMO_OXIMETER_READINGS = "demo-oximeter-references.csv"
DEMO_OXIMETER_DAY = _dt.date(2026, 3, 2)
DEMO_OXIMETER_CHROMOPHORES = "hbo2,hb,water"
DEMO_OXIMETER_DEVIATIONS = {"lipid20": 0.006, "blood_kb1": -0.004}
#: Invented "true" potencies of the demo lots (what the calibration loop should find).
DEMO_TRUE_POTENCIES = {"lipid20": 1.06, "ink_black": 0.85, "dye_nir": 1.08}
#: Invented dispensing deviations (fraction of the planned amount) of the two NIR demo batches.
DEMO_DEVIATIONS = ({"lipid20": 0.008, "ink_black": -0.015, "dye_nir": 0.005},
                   {"lipid20": -0.004, "ink_black": 0.010, "dye_nir": -0.012})
#: Invented slow loss of μs′ with phantom age (creaming of the emulsion), per day.
DEMO_MUSP_LOSS_PER_DAY = 0.0015
#: Source distances of the synthetic probe [mm] and the relative SD of its readings.
DEMO_RHO_MM = np.arange(2.0, 12.0 + 0.5, 1.0)
DEMO_RELATIVE_SD = 0.02
DEMO_OPERATOR = "demo: K. Tern"
#: How many days before the first run each demo batch was "mixed".
DEMO_MIXED_DAYS_AGO = (20, 12)
DEMO_INDEX = 1.33
DEMO_SIDECAR = f'n = {DEMO_INDEX}\ninstrument = "demo fibre probe (invented)"\n'

#: Version of the demo data.  Raise it whenever the demo batches, stocks or the models that
#: make their measurements change: a demo database seeded by another version is re-seeded
#: (it holds demo data only), so the page never fits old demo files with a newer model.
DEMO_SEED_VERSION = 4

_lock = threading.Lock()


#: Demo database files (path, device, inode, change time) found seeded by this process: a
#: file put in its place or written to since is looked at again.
_checked: set[tuple] = set()


def _identity(demo_file) -> tuple | None:
    try:
        stat = Path(demo_file).stat()
    except OSError:
        return None
    return (str(demo_file), stat.st_dev, stat.st_ino, stat.st_ctime_ns)  # ctime: a rewrite looks again


def _seeded_version(demo_file) -> int | None:
    """The demo version a demo database was seeded with (SQLite's ``user_version``; None if unreadable)."""
    import sqlite3

    try:
        with sqlite3.connect(f"file:{Path(demo_file)}?mode=ro", uri=True) as connection:
            return int(connection.execute("PRAGMA user_version").fetchone()[0])
    except sqlite3.Error:
        return None


def _mark_seeded(demo_file) -> None:
    import sqlite3

    connection = sqlite3.connect(str(demo_file))
    try:
        connection.execute(f"PRAGMA user_version = {int(DEMO_SEED_VERSION)}")
        connection.commit()
    finally:
        connection.close()


def synthetic_srdr_csv(*, wavelength_nm, mua_per_mm, musp_per_mm, seed: int, label: str) -> str:
    """An srdr measurement file (docs/formats.md) made by the diffusion model, with noise.

    Demo data, invented: R(ρ) from Kienle & Patterson 1997 (fluence plus flux), multiplied by
    (1 + 0.02 ε) with ε drawn from a seeded normal generator; the ``sd`` column is 2 %.  The
    seeded demo batches' files (fitted with ``kienle1997``, the model that made them).
    """
    from phantomlab.transport.diffusion import srdr_reflectance  # layer 2

    generator = np.random.default_rng(seed)
    lines = [f"# source: demo data, invented ({label}; synthetic, diffusion model Kienle & Patterson 1997 + 2 % "
             f"noise; fitted with that model, kienle1997, not the default Monte Carlo lookup)",
             "wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    for wavelength, mua, musp in zip(wavelength_nm, mua_per_mm, musp_per_mm):
        clean = np.asarray(srdr_reflectance(mua_per_mm=float(mua), musp_per_mm=float(musp),
                                            rho_mm=DEMO_RHO_MM, n=DEMO_INDEX), dtype=float).ravel()
        noisy = clean * (1.0 + DEMO_RELATIVE_SD * generator.standard_normal(clean.size))
        for rho, value, exact in zip(DEMO_RHO_MM, noisy, clean):
            lines.append(f"{wavelength:g},{rho:g},{value:.6e},{DEMO_RELATIVE_SD * exact:.3e}")
    return "\n".join(lines) + "\n"


def monte_carlo_srdr_csv(*, wavelength_nm, mua_per_mm, musp_per_mm, g, seed: int, label: str) -> str:
    """An srdr measurement file (docs/formats.md) of the demo emulsion's Monte Carlo light, with noise.

    Demo data, invented: R(ρ) at :data:`DEMO_RHO_MM` from the shipped table of direct Monte
    Carlo runs (:func:`phantomlab.ui.demo_light.demo_light_reflectance`: n 1.33, g of each
    wavelength interpolated between the table's g 0.50–0.66), multiplied by (1 + 0.02 ε)
    with ε drawn from a seeded normal generator; the ``sd`` column is the 2 % and the
    table's photon noise combined.  Distances the table does not serve (its photon noise
    above 1.5 %, far out at high absorption) are left out.

    Parameters
    ----------
    wavelength_nm, mua_per_mm, musp_per_mm : array (W,) [nm, 1/mm, 1/mm]
    g : array (W,) [dimensionless]
        The scatterer's anisotropy at each wavelength (a demo batch: its scattering model's,
        the g the default fit takes per wavelength).

    Raises
    ------
    InputError
        μs′/μa or g outside the table (20–1000, 0.50–0.66) at some wavelength, or no distance served.
    """
    from phantomlab.errors import InputError
    from phantomlab.ui.demo_light import demo_light_info, demo_light_reflectance

    info = demo_light_info()
    g = np.asarray(g, float).reshape(-1)
    if g.size != np.size(wavelength_nm):
        raise InputError(f"demo measurement: {g.size} values of g for {np.size(wavelength_nm)} wavelengths; "
                         "accepted: one g per wavelength")
    generator = np.random.default_rng(seed)
    lines = [f"# source: demo data, invented ({label}; synthetic, phantomlab Monte Carlo run directly for the demo "
             f"emulsion at each wavelength's g of the batch's scattering model ({g[0]:.3f} at {wavelength_nm[0]:g} nm "
             f"to {g[-1]:.3f} at {wavelength_nm[-1]:g} nm), n {info['n']:g}, shipped table demo_light_mc.npz "
             f"+ 2 % noise)",
             "wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    for wavelength, mua, musp, anisotropy in zip(wavelength_nm, mua_per_mm, musp_per_mm, g):
        clean, photon_sd = demo_light_reflectance(mua_per_mm=float(mua), musp_per_mm=float(musp),
                                                  g=float(anisotropy), rho_mm=DEMO_RHO_MM)
        noisy = clean * (1.0 + DEMO_RELATIVE_SD * generator.standard_normal(clean.size))
        sd = np.hypot(DEMO_RELATIVE_SD * clean, photon_sd)
        for rho, value, error in zip(DEMO_RHO_MM, noisy, sd):
            if np.isfinite(value):
                lines.append(f"{wavelength:g},{rho:g},{value:.6e},{error:.3e}")
    if len(lines) == 2:
        raise InputError("demo measurement: the demo Monte Carlo table serves none of the probe's distances "
                         "for this batch's optics")
    return "\n".join(lines) + "\n"


def _seed_oximeter_batch(store, workspace: Workspace) -> str:
    """The demo oximeter-test batch with its deoxygenation series (demo data, invented)."""
    from phantomlab.oxygenation_workflow import record_oxygenation_series  # layer 5
    from phantomlab.recipe import load_recipe, solve  # layer 3
    from phantomlab.store import get_batch, set_status  # layer 4
    from phantomlab.ui.recording import record_dispensed, record_planned_batch

    recipe = load_recipe(workspace.recipes_folder / DEMO_OXIMETER_RECIPE)
    plan = solve(recipe)
    code = record_planned_batch(store, plan, operator=DEMO_OPERATOR, notes="demo data, invented: oximeter test",
                                planned_on=DEMO_OXIMETER_DAY - _dt.timedelta(days=1))
    rows = [{"stock": d.stock, "volume_ml": d.volume_ml * (1.0 + DEMO_OXIMETER_DEVIATIONS.get(d.stock, 0.0))}
            for d in plan.doses if d.used]  # undiluted stock, as `batch actual` rows
    record_dispensed(store, code, rows, recorded_by=DEMO_OPERATOR, mixed_on=DEMO_OXIMETER_DAY)
    measurements = workspace.recipes_folder / "measurements"
    record_oxygenation_series(
        store, code, name="demo: yeast deoxygenation, 60 min", series_file_name=DEMO_OXIMETER_SERIES,
        series_content=(measurements / DEMO_OXIMETER_SERIES).read_bytes(),
        readings_file_name=DEMO_OXIMETER_READINGS,
        readings_content=(measurements / DEMO_OXIMETER_READINGS).read_bytes(),
        chromophores=DEMO_OXIMETER_CHROMOPHORES, recorded_by=DEMO_OPERATOR,
    )
    with store.transaction() as session:
        set_status(session, get_batch(session, code), "characterised",
                   note="demo: oxygenation series measured", recorded_by=DEMO_OPERATOR)
    return code


def seed_demo_database(workspace: Workspace) -> None:
    """Write the demo shelf and the three demo batches into the workspace's demo database."""
    from phantomlab.materials import load_shelf  # layer 1
    from phantomlab.recipe import load_recipe, predict, solve  # layer 3
    from phantomlab.store import open_store, record_stock_lot, set_status, get_batch  # layer 4
    from phantomlab.ui.recording import attach_measurement, record_dispensed, record_planned_batch

    if not workspace.is_demo:
        raise RuntimeError("demo data go into the demo database only")
    store = open_store(workspace.database_url)
    try:
        shelf = load_shelf(workspace.shelf_path)
        with store.transaction() as session:
            for stock in shelf.values():
                record_stock_lot(session, stock, shelf_path=str(workspace.shelf_path),
                                 recorded_by=DEMO_OPERATOR)
        _seed_oximeter_batch(store, workspace)
        recipe = load_recipe(workspace.recipes_folder / DEMO_RECIPE)
        plan = solve(recipe)
        today = _dt.date.today()
        truth = {k: (v, 0.0) for k, v in DEMO_TRUE_POTENCIES.items() if k in recipe.stock_keys}
        measured_days = ((1.0, 15.0), (2.0,))
        for number, deviations in enumerate(DEMO_DEVIATIONS):
            mixed_on = today - _dt.timedelta(days=DEMO_MIXED_DAYS_AGO[number])
            code = record_planned_batch(store, plan, operator=DEMO_OPERATOR,
                                        notes="demo data, invented",
                                        planned_on=mixed_on - _dt.timedelta(days=1))
            amounts = {d.stock: d.volume_ml * (1.0 + deviations.get(d.stock, 0.0)) for d in plan.doses if d.used}
            rows = [{"stock": key, "volume_ml": volume} for key, volume in amounts.items()]  # undiluted stock
            record_dispensed(store, code, rows, recorded_by=DEMO_OPERATOR, mixed_on=mixed_on)
            fractions = {k: v / plan.batch_volume_ml for k, v in amounts.items()}
            made = predict(recipe, volume_fractions=fractions, potencies=truth or None)
            for index, age in enumerate(measured_days[number]):
                musp = made.musp_per_mm * (1.0 - DEMO_MUSP_LOSS_PER_DAY * age)
                text = synthetic_srdr_csv(
                    wavelength_nm=made.wavelength_nm, mua_per_mm=made.mua_per_mm, musp_per_mm=musp,
                    seed=100 * number + index, label=f"batch {code}, day {age:g}",
                )
                attach_measurement(  # fitted with the model that made the file (no baseline build at first start)
                    store, code, kind="srdr", file_name=f"demo-{code}-day{age:g}.csv", model="kienle1997",
                    raw_content=text.encode("utf-8"), sidecar_toml=DEMO_SIDECAR,
                    measured_on=mixed_on + _dt.timedelta(days=int(age)), phantom_age_days=age,
                    instrument="demo fibre probe (invented)", recorded_by=DEMO_OPERATOR,
                )
            with store.transaction() as session:
                set_status(session, get_batch(session, code), "characterised",
                           note="demo: measured", recorded_by=DEMO_OPERATOR)
    finally:
        store.close()
    if workspace.demo_file is not None:
        _mark_seeded(workspace.demo_file)


def _seed_into_place(workspace: Workspace) -> None:
    final = Path(workspace.demo_file)
    final.parent.mkdir(parents=True, exist_ok=True)
    partial = final.with_name(final.name + f".seeding-{os.getpid()}")
    for leftover in (partial, Path(f"{partial}-wal"), Path(f"{partial}-shm")):
        leftover.unlink(missing_ok=True)
    seeding = Workspace(database_url=f"sqlite:///{partial}", shelf_path=workspace.shelf_path,
                        is_demo=True, demo_file=partial)
    seed_demo_database(seeding)
    os.replace(partial, final)
    for leftover in (Path(f"{partial}-wal"), Path(f"{partial}-shm"), Path(f"{final}-wal"), Path(f"{final}-shm")):
        leftover.unlink(missing_ok=True)


def ensure_demo_database(workspace: Workspace) -> Outcome:
    """Seed the demo database on first use, and again when another version seeded it (demo data only)."""
    import streamlit as st

    from phantomlab.ui.widgets import call_layer

    if not workspace.is_demo or workspace.demo_file is None:
        return Outcome(error="the demo seeding was asked for a lab database; refused")
    with _lock:
        exists = Path(workspace.demo_file).is_file()
        identity = _identity(workspace.demo_file) if exists else None
        if identity is not None and identity in _checked:
            return Outcome(value=False)  # this very file was found seeded before (no query per run)
        if exists and _seeded_version(workspace.demo_file) == DEMO_SEED_VERSION:
            _checked.add(identity)
            return Outcome(value=False)
        first = ("First run: writing" if not exists else
                 "The demo database was made by another phantomlab version: rewriting")
        with st.spinner(f"{first} the demo shelf and three demo batches into the demo database "
                        "(demo data, invented)…"):
            outcome = call_layer("Seeding the demo database", _seed_into_place, workspace, show=False)
    return outcome if not outcome.ok else Outcome(value=True)


def demo_batch_optics(store, code: str):
    """The optics of a demo batch as mixed: the recipe layer's prediction of the amounts recorded,
    with the invented "true" potencies :data:`DEMO_TRUE_POTENCIES` (demo only).

    Returns
    -------
    phantomlab.recipe.plan_result.Prediction
    """
    from phantomlab.errors import InputError
    from phantomlab.recipe import predict  # layer 3
    from phantomlab.store import get_batch, plan_of  # layer 4
    from phantomlab.ui.recording import batch_recipe

    recipe = batch_recipe(store, code)
    with store.reading() as session:
        batch = get_batch(session, code)
        amounts = list(batch.actual_amounts or [])
        volume_ml = float(plan_of(session, batch).plan["batch_volume_ml"])
    if not amounts:
        raise InputError(f"batch {code}: record the amounts dispensed first")
    fractions = {row["stock"]: float(row["volume_fraction"]) if row.get("volume_fraction") is not None
                 else float(row["volume_ml"]) / volume_ml  # as recorded (the matrix counted when given)
                 for row in amounts if row["stock"] in recipe.stock_keys}
    truth = {k: (v, 0.0) for k, v in DEMO_TRUE_POTENCIES.items() if k in recipe.stock_keys}
    return predict(recipe, volume_fractions=fractions, potencies=truth or None)


def demo_measurement_csv(store, code: str, *, seed: int = 7) -> str:
    """An invented srdr file of a demo batch as mixed (demo only): for trying the loop on the page.

    The optics are :func:`demo_batch_optics`, turned into R(ρ) by :func:`monte_carlo_srdr_csv`
    (the demo emulsion's Monte Carlo light, 2 % noise) at each wavelength's g of the batch's
    scattering model (:func:`phantomlab.measurement_workflow.batch_anisotropy`, the g the page's default
    fit, the Monte Carlo lookup, takes per wavelength): the default fit describes it.

    Raises
    ------
    InputError
        The batch's plan predicts no g, or its g or optics lie outside the demo's table.
    """
    from phantomlab.errors import InputError
    from phantomlab.measurement_workflow import batch_anisotropy

    made = demo_batch_optics(store, code)
    found = batch_anisotropy(store, code, wavelength_nm=made.wavelength_nm, per_wavelength=True)
    if found is None:
        raise InputError(f"demo measurement: batch {code}'s plan predicts no g of its scatterers; "
                         "accepted: a batch of a recipe with a scattering model")
    return monte_carlo_srdr_csv(wavelength_nm=made.wavelength_nm, mua_per_mm=made.mua_per_mm,
                                musp_per_mm=made.musp_per_mm, g=found[0], seed=seed,
                                label=f"batch {code}, invented on the page")
