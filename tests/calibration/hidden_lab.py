"""A hidden simulated lab for the calibration tests (demo data, invented: Kestrel Bay Optics Lab).

The lab casts silicone blocks with two scatterers, rutile TiO₂ powder from the demo shelf and
an alumina powder of its own (``ALUMINA_STOCK``, flatter μs′), blended to set the slope of
μs′, and carbon-black powder (absorber).  What the labels say and what the bottles hold
differ:

* the TiO₂ grains are 0.32 µm, not the 0.25 µm of the stock file (μs′ falls less steeply
  with wavelength: a *size* error), and the powder scatters at ``TRUE_LEVEL["tio2"]`` of what
  the file predicts at its reference size (a *level* error);
* the alumina and the carbon black are what they say but for their level
  (``TRUE_LEVEL``).

The stock file admits its ignorance with wide priors (``PRIOR_SD``).  A batch really is the
mixing model of its doses with the TRUE stocks (:meth:`HiddenLab.true_optics`); it is
"measured" with a fibre probe (spatially resolved reflectance, n = 1.4 in air, 1.5–8 mm) whose
readings come from an independent Monte Carlo run (``fixtures/mc_lab_baseline.npz``, seed 31,
see ``fixtures/make_lab_baseline.py``) with 1 % reading noise on top, and fitted with the
Monte Carlo lookup of the OTHER stored run (``fixtures/mc_baseline.npz``, seed 7).  Each
reading of one lab uses a disjoint random share of the stored photons (thinning: every
launched photon is given to one of ``PHOTON_SHARES`` shares at random, so each share is an
independent run of about a sixth of the photons), so the Monte Carlo noise of two readings is
independent, as two real measurements' noise would be.
"""

from __future__ import annotations

import shutil
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

REPO = Path(__file__).resolve().parents[2]
DEMO = REPO / "recipes"
FIXTURES = Path(__file__).parent / "fixtures"

#: Hidden truth (demo data, invented).
TRUE_LEVEL = {"tio2": 0.80, "alumina1": 1.15, "carbon_black": 1.30}
TRUE_TIO2_DIAMETER_UM = 0.32
LABEL_TIO2_DIAMETER_UM = 0.25
PRIOR_SD = {"tio2": 0.30, "alumina1": 0.30, "carbon_black": 0.35}
#: The dose (volume fractions of undiluted stock) whose true optics are the recipe's target.
REACHABLE_DOSE = {"tio2": 1.5e-4, "alumina1": 1.0e-3, "carbon_black": 1.2e-6}
#: The lab's own alumina powder (demo data, invented; alumina powders scatter in silicone
#: phantoms, Malitson & Dodge 1972 index).
ALUMINA_STOCK = """
[stocks.alumina1]
kind = "powder"
name = "alumina powder, 1 µm (demo)"
material = "alumina"
diameter_um = 1.0
size_distribution = "lognormal"
size_cv = 0.3
particle_density_g_per_ml = 3.95
potency = 1.0
potency_sd = 0.3
lot = "demo-AL1-07"
hazards = ["nano_powder"]
"""
TARGET_NM = [600.0, 660.0, 700.0, 780.0, 850.0]
MEASURE_NM = np.arange(600.0, 861.0, 20.0)
RHO_MM = np.array([1.5, 2.0, 2.5, 3.0, 4.0, 5.0, 6.0, 7.0, 8.0])
PROBE_N = 1.4
READING_NOISE = 0.01
PHOTON_SHARES = 6


def _stock_text(*, diameter_um: float) -> str:
    text = (DEMO / "demo-stocks.toml").read_text() + ALUMINA_STOCK
    start = text.index("[stocks.tio2]")
    where = text.index(f"diameter_um = {LABEL_TIO2_DIAMETER_UM}", start)
    text = text[:where] + f"diameter_um = {diameter_um}" + text[where + len(f"diameter_um = {LABEL_TIO2_DIAMETER_UM}"):]
    for key, sd in PRIOR_SD.items():
        start = text.index(f"[stocks.{key}]")
        where = text.index("potency_sd = ", start)
        end = text.index("\n", where)
        text = text[:where] + f"potency_sd = {sd}" + text[end:]
    return text


def _recipe_text(stocks_file: str, mua, musp) -> str:
    return "\n".join([
        "# demo data, invented: the hidden simulated lab's silicone recipe (calibration tests)",
        'name = "demo: hidden-lab silicone"',
        'version = "1"',
        f'stocks_file = "{stocks_file}"',
        'matrix = "silicone"',
        'stocks = ["tio2", "alumina1", "carbon_black"]',
        "batch_mass_g = 300",
        "[target]",
        f"wavelength_nm = {TARGET_NM}",
        f"mua_per_mm = {[float(f'{v:.6g}') for v in mua]}",
        f"musp_per_mm = {[float(f'{v:.6g}') for v in musp]}",
        "mua_tolerance_percent = 5",
        "musp_tolerance_percent = 3",
        "[limits]",
        "balance_resolution_mg = 1",
        "min_weigh_mg = 50",
        "max_solids_volume_fraction = 0.02",
        "max_dilution_steps = 3",
        "min_dilution_g = 10",
        "pipette_rel_error = 0.01",
        "[preparation]",
        'kind = "silicone"',
        "base_to_curing_agent = 10",
        "",
    ])


def photon_shares(baseline, count: int, seed: int) -> list:
    """``count`` independent runs made of disjoint random shares of one stored run.

    Every launched photon goes to one share with probability 1/count (multinomial thinning of
    a Poisson-free fixed count: the detected photons are assigned at random, the undetected
    ones are split by a multinomial draw), so share m is an analog run of its own launched
    photons, independent of the others.
    """
    from phantomlab.transport.montecarlo.baseline import Baseline

    rng = np.random.default_rng(seed)
    owner = rng.integers(count, size=baseline.detected)
    undetected = rng.multinomial(baseline.photons - baseline.detected, [1.0 / count] * count)
    shares = []
    for m in range(count):
        mask = owner == m
        shares.append(Baseline(
            exit_radius_mm=np.ascontiguousarray(baseline.exit_radius_mm[mask]),
            path_length_mm=np.ascontiguousarray(baseline.path_length_mm[mask]),
            scatterings=np.ascontiguousarray(baseline.scatterings[mask]),
            mua_per_mm=baseline.mua_per_mm, mus_per_mm=baseline.mus_per_mm, g=baseline.g, n=baseline.n,
            n_outside=baseline.n_outside, photons=int(mask.sum() + undetected[m]), seed=baseline.seed,
            batches=baseline.batches))
    return shares


@dataclass
class HiddenLab:
    """The lab's folder, its recipe as labelled, and the truth behind it."""

    folder: Path
    recipe: object
    truth_recipe: object
    data_baseline: object
    fit_baseline: object
    truth: dict = field(default_factory=dict)
    measure_nm: np.ndarray = field(default_factory=lambda: MEASURE_NM)

    def true_optics(self, fractions, wavelength_nm=None):
        """What a batch of these doses really is (true stocks, true levels)."""
        from phantomlab.recipe import predict

        return predict(self.truth_recipe, volume_fractions=fractions, potencies=self.truth,
                       wavelength_nm=wavelength_nm)

    def reading(self, fractions, *, share, seed: int) -> str:
        """A probe reading of the batch (CSV text): Monte Carlo R(ρ) + 1 % noise, with its SD."""
        optics = self.true_optics(fractions, self.measure_nm)
        mus = optics.musp_per_mm / (1.0 - share.g)
        reflectance, sd = share.srdr_with_sd(mua_per_mm=optics.mua_per_mm, mus_per_mm=mus, rho_mm=RHO_MM)
        rng = np.random.default_rng(seed)
        noisy = reflectance * (1.0 + READING_NOISE * rng.standard_normal(reflectance.shape))
        total_sd = np.sqrt(sd**2 + (READING_NOISE * reflectance) ** 2)
        lines = ["# source: demo data, invented (hidden simulated lab: independent Monte Carlo run, 1 % noise)",
                 "wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
        for i, w in enumerate(self.measure_nm):
            for j, r in enumerate(RHO_MM):
                lines.append(f"{w:g},{r:g},{noisy[i, j]:.9g},{total_sd[i, j]:.6g}")
        return "\n".join(lines) + "\n"

    def fit(self, text: str):
        """The lab's fit of a reading: Monte Carlo lookup of the other stored run."""
        from phantomlab.calibration import fit_measurement_file
        from phantomlab.errors import PhantomlabWarning

        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            return fit_measurement_file(text, kind="srdr", n=PROBE_N, model="mc", baseline=self.fit_baseline,
                                        detector="ring")


def make_lab(folder: Path, *, data_baseline=None, fit_baseline=None,
             true_level: dict | None = None, true_diameter_um: float = TRUE_TIO2_DIAMETER_UM) -> HiddenLab:
    """Write the lab's stock files and recipe into ``folder`` and return the lab."""
    from phantomlab.recipe import load_recipe
    from phantomlab.transport.montecarlo import load_baseline

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    if not (folder / "spectra").exists():
        shutil.copytree(DEMO / "spectra", folder / "spectra")
    (folder / "demo-stocks.toml").write_text(_stock_text(diameter_um=LABEL_TIO2_DIAMETER_UM))
    (folder / "true-stocks.toml").write_text(_stock_text(diameter_um=true_diameter_um))
    levels = dict(TRUE_LEVEL if true_level is None else true_level)
    truth = {k: (v, 0.0) for k, v in levels.items()}
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        (folder / "truth.toml").write_text(_recipe_text("true-stocks.toml", [0.01] * 5, [1.0] * 5))
        draft = load_recipe(folder / "truth.toml")
        from phantomlab.recipe import predict

        target = predict(draft, volume_fractions=REACHABLE_DOSE, potencies=truth)
        (folder / "truth.toml").write_text(_recipe_text("true-stocks.toml", target.mua_per_mm, target.musp_per_mm))
        (folder / "lab.toml").write_text(_recipe_text("demo-stocks.toml", target.mua_per_mm, target.musp_per_mm))
        recipe = load_recipe(folder / "lab.toml")
        truth_recipe = load_recipe(folder / "truth.toml")
    return HiddenLab(
        folder=folder, recipe=recipe, truth_recipe=truth_recipe, truth=truth,
        data_baseline=data_baseline or load_baseline(FIXTURES / "mc_lab_baseline.npz"),
        fit_baseline=fit_baseline or load_baseline(FIXTURES / "mc_baseline.npz"),
    )


def batch_doses(count: int, *, seed: int, spread: float = 0.25) -> list[dict]:
    """Doses of ``count`` batches around the reachable dose (the lab tried several strengths)."""
    rng = np.random.default_rng(seed)
    return [{k: v * float(np.exp(rng.uniform(-spread, spread))) for k, v in REACHABLE_DOSE.items()}
            for _ in range(count)]
