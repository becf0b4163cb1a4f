"""Corrected plans and top-ups: what they call and what they refuse.

The physics (the mixing rule) is the optics layer's; here: a potency twice as strong halves
the dose (the mixing rule is linear in f·p, docs/design.md), a top-up's volumes mix back to its
own prediction (mass balance of undiluted stock), and bad requests are refused in one line.
"""

import numpy as np
import pytest

from phantomlab.calibration.correction import corrected_plan, top_up
from phantomlab.errors import InputError


def test_twice_as_strong_scatterer_halves_its_dose(lab):
    recipe = lab["recipe"]
    base = corrected_plan(recipe, potencies={"lipid20": (1.0, 0.01)}).volume_fractions["lipid20"]
    strong = corrected_plan(recipe, potencies={"lipid20": (2.0, 0.01)}).volume_fractions["lipid20"]
    assert strong / base == pytest.approx(0.5, rel=0.02)


def _fit(recipe, fractions, truth, wavelength_nm=None):
    from phantomlab.recipe import predict

    optics = predict(recipe, volume_fractions=fractions, potencies=truth, wavelength_nm=wavelength_nm)
    W = optics.wavelength_nm.size
    return {"wavelength_nm": list(optics.wavelength_nm), "mua_per_mm": list(optics.mua_per_mm),
            "musp_per_mm": list(optics.musp_per_mm), "mua_sd_per_mm": [1e-4] * W, "musp_sd_per_mm": [1e-2] * W}


def test_top_up_volumes_mix_back_to_the_prediction(lab):
    recipe, truth = lab["recipe"], lab["truth"]
    fractions = {"lipid20": 0.03, "ink_black": 3e-5, "dye_nir": 1e-5}
    plan = top_up(recipe, current_volume_ml=300.0, measured=_fit(recipe, fractions, truth), potencies=truth)
    added = {a["stock"]: a["volume_ml"] for a in plan.additions}
    final = {k: (300.0 * fractions[k] + added[k]) / plan.final_volume_ml for k in fractions}
    from phantomlab.recipe import predict

    made = predict(recipe, volume_fractions=final, potencies=truth)
    np.testing.assert_allclose(made.mua_per_mm, plan.predicted_mua_per_mm, rtol=1e-9)
    np.testing.assert_allclose(made.musp_per_mm, plan.predicted_musp_per_mm, rtol=1e-9)
    assert plan.final_volume_ml == pytest.approx(300.0 + sum(added.values()) + plan.diluent_volume_ml)
    payload = plan.to_json()
    assert set(payload) >= {"additions", "diluent", "diluent_volume_ml", "final_volume_ml", "before", "predicted"}


def test_top_up_respects_the_room_left(lab):
    recipe, truth = lab["recipe"], lab["truth"]
    fractions = {"lipid20": 0.02, "ink_black": 2e-5, "dye_nir": 1e-5}
    plan = top_up(recipe, current_volume_ml=450.0, measured=_fit(recipe, fractions, truth), potencies=truth,
                  max_added_ml=10.0)
    assert sum(a["volume_ml"] for a in plan.additions) + plan.diluent_volume_ml <= 10.0 + 1e-9


@pytest.mark.parametrize("volume, words", [(0.0, "current volume 0.0 mL; accepted: > 0"),
                                           (float("nan"), "current volume nan mL; accepted: > 0")])
def test_top_up_bad_volume_refused(lab, volume, words):
    fit = _fit(lab["recipe"], {"lipid20": 0.03}, lab["truth"])
    with pytest.raises(InputError, match=words):
        top_up(lab["recipe"], current_volume_ml=volume, measured=fit)


def test_top_up_needs_the_target_band(lab):
    fit = _fit(lab["recipe"], {"lipid20": 0.03}, lab["truth"], wavelength_nm=[700.0, 750.0])
    with pytest.raises(InputError, match="the measurement covers 700-750 nm, the target 660-850 nm"):
        top_up(lab["recipe"], current_volume_ml=100.0, measured=fit)


def test_top_up_of_a_cast_phantom_refused():
    from phantomlab.recipe import load_recipe

    from pathlib import Path

    recipe = load_recipe(Path(__file__).resolve().parents[2] / "recipes" / "demo-silicone.toml")
    with pytest.raises(InputError, match="only for liquid batches"):
        top_up(recipe, current_volume_ml=100.0, measured={"wavelength_nm": [600], "mua_per_mm": [0.01],
                                                           "musp_per_mm": [1.0]})
