"""μa, μs′ and g of slabs from R, T and the collimated transmittance Tc, on independent Monte Carlo data.

``fixtures/mc_slab_tc_cases.json`` (made by ``fixtures/make_slab_tc_fixture.py``): 16 slabs
between glass slides, 0.5–3 mm, albedo 0.5–0.99, g 0.6–0.95; R and T from the photon Monte
Carlo (4 million photons each), Tc from Beer–Lambert with the faces (typed in the script
on its own, and checked here against the Monte Carlo's unscattered tally).  Issue 15's
acceptance: μa within 3 %, μs′ within 2 %, g within 0.02 (here on the Monte Carlo numbers
as they are, whose own noise is ≤ 0.1 %), and with 1 % noise SDs that cover the truth
within 2 SD for at least 90 % of the fits.
"""

import json
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration import fit_measurement_file
from phantomlab.calibration.measurement_metadata import MeasurementMetadata
from phantomlab.calibration.measurements import parse_measurement_text
from phantomlab.calibration.slab_inversion import SlabModel, invert_slab
from phantomlab.errors import InputError

FIXTURES = Path(__file__).parent / "fixtures"
CASES = json.loads((FIXTURES / "mc_slab_tc_cases.json").read_text())["cases"]


def _model(case):
    return SlabModel(thickness_mm=case["thickness_mm"], n=1.4, slides=dict(n_slide=1.52))


def _truth(case):
    return np.array([case["total_reflectance"], case["total_transmittance"], case["collimated_transmittance"]])


def test_collimated_formula_agrees_with_the_monte_carlo_unscattered_tally():
    for case in CASES:
        sd = case["mc_unscattered_transmittance_sd"]
        if sd > 0:
            assert abs(case["mc_unscattered_transmittance"] - case["collimated_transmittance"]) < 4 * sd


@pytest.mark.parametrize("index", range(len(CASES)))
def test_mua_musp_and_g_from_monte_carlo_slabs(index):
    case = CASES[index]
    truth = _truth(case)
    sd = 0.01 * truth
    sd[:2] = np.hypot(sd[:2], [case["total_reflectance_sd"], case["total_transmittance_sd"]])
    solution = invert_slab(_model(case), data=truth[None], sd=sd[None])
    assert solution.converged[0]
    assert solution.mua_per_mm[0] == pytest.approx(case["mua_per_mm"], rel=0.03)
    assert solution.musp_per_mm[0] == pytest.approx(case["musp_per_mm"], rel=0.02)
    assert solution.g[0] == pytest.approx(case["g"], abs=0.02)


def test_sd_coverage_with_one_percent_noise():
    # 20 noisy copies of each slab (1 % relative noise on R, T, Tc, the SD the fit is told):
    # |fit − truth| < 2 SD for at least 90 % of the fits, for each of μa, μs′ and g
    # (a normal distribution puts 95.4 % there).
    rng = np.random.default_rng(2024)
    copies = 20
    z = []
    for case in CASES:
        truth = _truth(case)
        data = truth * (1 + 0.01 * rng.standard_normal((copies, 3)))
        solution = invert_slab(_model(case), data=data, sd=np.tile(0.01 * truth, (copies, 1)))
        sds = np.sqrt(np.diagonal(solution.covariance, axis1=1, axis2=2))
        z.append(np.column_stack([(solution.mua_per_mm - case["mua_per_mm"]) / sds[:, 0],
                                  (solution.musp_per_mm - case["musp_per_mm"]) / sds[:, 1],
                                  (solution.g - case["g"]) / sds[:, 2]]))
    coverage = np.mean(np.abs(np.concatenate(z)) < 2, axis=0)
    assert np.all(coverage >= 0.90), coverage


def test_without_collimated_transmittance_g_given_gives_mua_and_musp():
    rng = np.random.default_rng(7)
    z = []
    for case in CASES:
        truth = _truth(case).copy()
        truth[2] = np.nan
        clean = invert_slab(_model(case), data=truth[None], sd=(0.01 * truth)[None], g=case["g"])
        assert clean.mua_per_mm[0] == pytest.approx(case["mua_per_mm"], rel=0.03)
        assert clean.musp_per_mm[0] == pytest.approx(case["musp_per_mm"], rel=0.02)
        data = truth * (1 + 0.01 * rng.standard_normal((20, 3)))
        noisy = invert_slab(_model(case), data=data, sd=np.tile(0.01 * truth, (20, 1)), g=case["g"])
        sds = np.sqrt(np.diagonal(noisy.covariance, axis1=1, axis2=2))
        z.append(np.column_stack([(noisy.mua_per_mm - case["mua_per_mm"]) / sds[:, 0],
                                  (noisy.musp_per_mm - case["musp_per_mm"]) / sds[:, 1]]))
    assert np.all(np.mean(np.abs(np.concatenate(z)) < 2, axis=0) >= 0.90)


def _slab_text(cases, *, with_sd=True):
    header = "wavelength_nm,total_reflectance,total_transmittance,collimated_transmittance"
    header += ",sd_r,sd_t,sd_tc" if with_sd else ""
    lines = ["# source: demo data, invented (photon Monte Carlo slabs)", header]
    for k, case in enumerate(cases):
        truth = _truth(case)
        row = [600 + 10 * k, *truth] + (list(0.01 * truth) if with_sd else [])
        lines.append(",".join(repr(float(v)) for v in row))
    return "\n".join(lines) + "\n"


def test_slab_file_with_collimated_column_returns_g_and_its_sd():
    same = [c for c in CASES if c["thickness_mm"] == 1.0]
    fit = fit_measurement_file(_slab_text(same), kind="slab", n=1.4, thickness_mm=1.0, n_slide=1.52, slides="both")
    payload = fit.to_json()
    assert payload["g_fitted"] is True and len(payload["g_sd"]) == len(same)
    np.testing.assert_allclose(payload["g"], [c["g"] for c in same], atol=0.02)
    assert payload["collimated_transmittance"] == pytest.approx([c["collimated_transmittance"] for c in same])
    assert payload["dof"] is None and payload["chi2_red"] is None  # three numbers, three unknowns
    # with g given, Tc is a check: one degree of freedom per wavelength
    fixed = fit_measurement_file(_slab_text(same), kind="slab", n=1.4, thickness_mm=1.0, n_slide=1.52,
                                 slides="both", g=0.8)
    assert fixed.dof == len(same) and fixed.to_json()["g_sd"] is None and fixed.extras["g_fitted"] is False


@pytest.mark.parametrize("text, words", [
    ("wavelength_nm,total_reflectance,total_transmittance,collimated_transmittance\n700,0.3,0.4,0.01\n",
     "needs the data's SDs"),
    ("wavelength_nm,total_reflectance,total_transmittance,collimated_transmittance,sd_r,sd_t,sd_tc\n"
     "700,0.3,0.4,0,0.01,0.01,0.001\n", "collimated_transmittance: 0; accepted: > 0"),
    ("wavelength_nm,total_reflectance,total_transmittance,collimated_transmittance,sd_r,sd_t\n"
     "700,0.3,0.4,0.01,0.01,0.01\n", "give all SD columns or none"),
    ("wavelength_nm,total_reflectance,collimated_transmittance\n700,0.3,0.01\n", "header lacks the value column"),
])
def test_bad_collimated_files_refused_in_one_line(text, words):
    with pytest.raises(InputError, match=words):
        fit_measurement_file(text, kind="slab", n=1.4, thickness_mm=1.0)


def test_parsed_slab_keeps_three_columns():
    m = parse_measurement_text(_slab_text(CASES[:2]), kind="slab", metadata=MeasurementMetadata(n=1.4))
    assert m.values.shape == (2, 3) and m.sd.shape == (2, 3)
