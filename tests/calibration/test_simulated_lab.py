"""The whole loop in a simulated lab: plan → mix → measure → fit → recalibrate → plan again.

Hidden true potencies are 25–35 % away from the stock file's (conftest.TRUE_POTENCY); the
first batch, planned with the stock file, misses; after one batch measured with Monte Carlo
light (direct runs, each wavelength with its own g) and fitted with the default model, and
the potency update, the second batch must land within 2 % of the target μa and μs′ at every
target wavelength (issue 11; issue 5 asked 3 % with diffusion light).  The first batch's error is recorded in the test output for comparison.
"""

import json
from pathlib import Path

import numpy as np

from phantomlab.calibration import fit_measurement_file, update_potencies
from phantomlab.calibration.correction import corrected_plan, top_up
from phantomlab.calibration.observations import observation_from_fit, priors_from_recipe
from phantomlab.recipe import solve

FIXTURES = Path(__file__).parent / "fixtures"


def _errors(optics, target):
    return (np.max(np.abs(optics.mua_per_mm / target.mua_per_mm - 1)),
            np.max(np.abs(optics.musp_per_mm / target.musp_per_mm - 1)))


def _monte_carlo_light(recipe, fractions, *, seed: int):
    """The first batch measured with Monte Carlo light (fixture), 1 % noise: (CSV text, the fixture).

    The fixture holds direct weighted Monte Carlo runs at the batch's true optics, each
    wavelength with its own g from the emulsion model (0.50-0.65): independent of the
    lookup the default fit uses, which assumes one g for the batch (the plan's predicted g
    averaged over the band, as ``measurement_workflow.batch_anisotropy`` gives it).
    """
    data = np.load(FIXTURES / "mc_lab_srdr.npz")
    header = json.loads(str(data["header_json"]))
    stored = header["volume_fractions"]
    assert all(abs(stored[k] / fractions[k] - 1) < 1e-6 for k in fractions), \
        "the planner's first batch changed: regenerate mc_lab_srdr.npz (make_default_fit_fixtures.py lab)"
    R, se, rho = data["reflectance_per_mm2"], data["sd"], data["rho_mm"]
    rng = np.random.default_rng(seed)
    noisy = R * (1 + 0.01 * rng.standard_normal(R.shape))
    sd = np.sqrt((0.01 * R) ** 2 + se**2)
    lines = ["# source: demo data, invented (simulated lab: direct Monte Carlo light, 1 % noise)",
             "wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    for i, w in enumerate(data["wavelength_nm"]):
        lines += [f"{w:g},{r:.6g},{v:.9g},{e:.6g}" for r, v, e in zip(rho, noisy[i], sd[i])]
    return "\n".join(lines) + "\n", data


def test_second_batch_lands_within_2_percent_with_monte_carlo_light(lab, record_property):
    recipe, truth = lab["recipe"], lab["truth"]
    first = solve(recipe, curve=False)
    made_first = lab["true_optics"](recipe, first.volume_fractions, truth)
    first_error = _errors(made_first, recipe.target)
    record_property("first_batch_max_error_mua_musp", first_error)
    assert max(first_error) > 0.15  # the uncalibrated shelf really is off

    text, light = _monte_carlo_light(recipe, first.volume_fractions, seed=1)
    optics = lab["true_optics"](recipe, first.volume_fractions, truth, light["wavelength_nm"])
    assert np.allclose(light["mua_per_mm"], optics.mua_per_mm, rtol=1e-6)  # the fixture is this batch
    # g of the batch's scattering model, as batch measure takes it (measurement_workflow.batch_anisotropy)
    g = float(np.mean(np.interp(light["wavelength_nm"], first.predicted.wavelength_nm, first.predicted.g)))
    # the default model; the stored light is ring-binned between the distances' midpoints
    fit = fit_measurement_file(text, kind="srdr", n=1.33, g_fallback=(g, "batch"), detector="ring")
    assert fit.model == "mc-lookup" and fit.extras["g_origin"] == "batch"
    observation = observation_from_fit(recipe, batch_id="SIM-1", volume_fractions=first.volume_fractions, fit=fit)
    update = update_potencies(priors_from_recipe(recipe), [observation])
    for k, (key, _lot) in enumerate(update.stocks):
        # the posterior must cover the truth (3 SD) and be far tighter than the prior
        assert abs(update.potency[k] - truth[key][0]) < 3 * update.potency_sd[k] + 0.01, key
        assert update.potency_sd[k] < 0.5 * update.prior_sd[k], key

    second = corrected_plan(recipe, potencies=update.as_potencies())
    made_second = lab["true_optics"](recipe, second.volume_fractions, truth)
    second_error = _errors(made_second, recipe.target)
    record_property("second_batch_max_error_mua_musp", second_error)
    print(f"first batch max |error| mua {first_error[0]:.1%}, musp {first_error[1]:.1%}; "
          f"second batch mua {second_error[0]:.1%}, musp {second_error[1]:.1%}")
    assert second_error[0] < 0.02 and second_error[1] < 0.02


def test_top_up_brings_a_weak_batch_to_target(lab):
    recipe, truth = lab["recipe"], lab["truth"]
    # a batch made with too little of everything (70 % of the reachable dose, true potencies)
    reach = {"lipid20": 0.045, "ink_black": 4.0e-5, "dye_nir": 2.5e-5}
    weak = {k: 0.7 * v for k, v in reach.items()}
    # measured and fitted with the diffusion model (the top-up's arithmetic is under test here)
    fit = fit_measurement_file(lab["measure"](recipe, weak, truth, seed=5), kind="srdr", n=1.33, model="kienle1997")
    plan = top_up(recipe, current_volume_ml=450.0, measured=fit,
                  potencies={k: (p, 0.01) for k, (p, _) in truth.items()})
    # mixing the additions in (mass balance of undiluted stock) gives the final doses
    added = {a["stock"]: a["volume_ml"] for a in plan.additions}
    final = {k: (450.0 * weak[k] + added[k]) / plan.final_volume_ml for k in weak}
    made = lab["true_optics"](recipe, final, truth)
    before = lab["true_optics"](recipe, weak, truth)
    assert max(_errors(before, recipe.target)) > 0.2
    assert max(_errors(made, recipe.target)) < 0.03
    assert all(a["volume_ml"] >= 0 for a in plan.additions) and plan.diluent_volume_ml >= 0


def test_top_up_of_a_strong_batch_adds_diluent(lab):
    recipe, truth = lab["recipe"], lab["truth"]
    strong = {"lipid20": 0.045 * 1.2, "ink_black": 4.0e-5 * 1.2, "dye_nir": 2.5e-5 * 1.2}
    # measured and fitted with the flux-only model, the case this tolerance was set on
    fit = fit_measurement_file(lab["measure"](recipe, strong, truth, seed=6, model="farrell1992"), kind="srdr",
                               n=1.33, model="farrell1992")
    plan = top_up(recipe, current_volume_ml=400.0, measured=fit,
                  potencies={k: (p, 0.01) for k, (p, _) in truth.items()})
    # everything 20 % too strong: about 80 mL of diluent (400 mL x 0.2) and little else
    assert abs(plan.diluent_volume_ml - 80.0) < 8.0
    added = {a["stock"]: a["volume_ml"] for a in plan.additions}
    assert sum(added.values()) < 0.05 * plan.diluent_volume_ml
    final = {k: (400.0 * strong[k] + added[k]) / plan.final_volume_ml for k in strong}
    made = lab["true_optics"](recipe, final, truth)
    # the top-up can be no better than the measurement it starts from (1 % noise: a few % in mua)
    mua_error, musp_error = _errors(made, recipe.target)
    assert mua_error < 0.05 and musp_error < 0.03
