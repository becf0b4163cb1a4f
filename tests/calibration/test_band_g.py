"""A band whose scatterer's g changes, fitted with one Monte Carlo baseline per g step.

Check data are independent of the lookup that fits: the simulated lab's Monte Carlo light
(tests/calibration/fixtures/mc_lab_srdr.npz: direct weighted runs, each wavelength with its
own g from the emulsion model, 0.50-0.65, two million photons each; made by
make_default_fit_fixtures.py lab) and the demo probe file (made by
recipes/measurements/make_demo_measurement.py, ten million photons per wavelength).  The
lookup's tables for g 0.50-0.64 in steps of 0.02 are in the test cache (tests/conftest.py).
"""

import json
import shutil
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration import fit_measurement_file
from phantomlab.calibration.band_g import G_STEP, g_steps, wavelength_groups
from phantomlab.cli import main
from phantomlab.errors import InputError

FIXTURES = Path(__file__).parent / "fixtures"
ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "recipes" / "measurements" / "demo-nir-liquid-srdr.csv"


def _lab_text(seed: int):
    data = np.load(FIXTURES / "mc_lab_srdr.npz")
    R, se, rho = data["reflectance_per_mm2"], data["sd"], data["rho_mm"]
    noisy = R * (1 + 0.01 * np.random.default_rng(seed).standard_normal(R.shape))  # a probe's 1 % noise
    sd = np.sqrt((0.01 * R) ** 2 + se**2)
    lines = ["wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    for i, w in enumerate(data["wavelength_nm"]):
        lines += [f"{w:g},{r:.6g},{v:.9g},{e:.6g}" for r, v, e in zip(rho, noisy[i], sd[i])]
    return "\n".join(lines) + "\n", data


def test_rounding_to_the_step_leaves_at_most_half_a_step():
    g = np.linspace(0.503, 0.647, 40)
    steps = g_steps(g)
    assert np.max(np.abs(steps - g)) <= G_STEP / 2 + 1e-12
    groups = wavelength_groups(steps)
    assert [value for value, _ in groups] == sorted({float(v) for v in steps}, reverse=True)
    assert sorted(np.concatenate([index for _, index in groups]).tolist()) == list(range(g.size))


def test_sds_cover_the_true_optics_of_independent_monte_carlo_light_with_g_per_wavelength():
    z_musp, z_all, ends = [], [], []
    for seed in (1, 2, 3):
        text, data = _lab_text(seed)
        truth_musp = data["mus_per_mm"] * (1 - data["g"])
        fit = fit_measurement_file(text, kind="srdr", n=1.33, g_fallback=(data["g"], "batch"), detector="ring")
        assert fit.fit_quality == "good" and fit.extras["g_origin"] == "batch"
        assert fit.wavelength_nm == pytest.approx(data["wavelength_nm"])  # merged back in order
        assert np.max(np.abs(np.asarray(fit.extras["g_used"]) - data["g"])) <= G_STEP / 2 + 1e-9
        assert len(fit.extras["baseline"]) == np.unique(g_steps(data["g"])).size
        zs = (fit.musp_per_mm - truth_musp) / fit.musp_sd_per_mm
        za = (fit.mua_per_mm - data["mua_per_mm"]) / fit.mua_sd_per_mm
        z_musp.append(zs)
        z_all.append(np.r_[zs, za])
        ends.append(zs[[0, 1, -2, -1]])
    z_all = np.concatenate(z_all)
    # 132 values: at least 90 % within 2 SD (a normal gives 95 %), none beyond 3
    assert np.mean(np.abs(z_all) < 2) >= 0.9 and np.max(np.abs(z_all)) < 3
    # the band's ends, where one g for the band was off by 0.07: no systematic shift left
    assert abs(np.mean(ends)) < 1.0


def test_the_sidecar_g_spectrum_is_checked_in_one_line(tmp_path):
    text = DEMO.read_text(encoding="utf-8")
    for spectrum, what in (({"wavelength_nm": [660, 850], "g": [0.6]}, "g_spectrum has"),
                           ({"wavelength_nm": [850, 660], "g": [0.6, 0.5]}, "g_spectrum has"),
                           ({"wavelength_nm": [660, 850], "g": [0.6, 1.2]}, "g_spectrum has"),
                           ({"g": [0.6]}, "not a table"),
                           ({"wavelength_nm": [700, 850], "g": [0.6, 0.5]}, "covers 700-850 nm")):
        with pytest.raises(InputError) as caught:
            fit_measurement_file(text, kind="srdr", sidecar={"n": 1.33, "g_spectrum": spectrum})
        assert what in str(caught.value) and "\n" not in str(caught.value)


def test_an_option_g_wins_over_the_sidecar_spectrum():
    fit = fit_measurement_file(DEMO, kind="srdr", g=0.58)
    assert fit.extras["g_used"] == pytest.approx(0.58) and fit.extras["g_origin"] == "option"


def test_a_spectral_constraint_keeps_one_g_and_says_why():
    from phantomlab.calibration.spectral import SpectralConstraint

    fit = fit_measurement_file(DEMO, kind="srdr", constraint=SpectralConstraint(musp_power_law=True))
    assert fit.extras["g_used"] == pytest.approx(0.58) and "couples the wavelengths" in fit.extras["g_note"]


def test_batch_measure_takes_the_batch_g_per_wavelength(tmp_path, capsys):
    recipe = ROOT / "recipes" / "demo-nir-liquid.toml"
    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    # the demo file with a sidecar that gives no g: the batch's scattering model gives it
    measurement = tmp_path / "probe.csv"
    shutil.copy2(DEMO, measurement)
    measurement.with_suffix(".toml").write_text('n = 1.33\ndetector = "point"\n', encoding="utf-8")

    def run(*argv):
        status = main([*map(str, argv), "--json"])
        captured = capsys.readouterr()
        assert status == 0, captured.err
        return json.loads(captured.out)

    code = run("batch", "add", recipe, "--db", db)["batch_id"]
    fit = run("batch", "measure", code, measurement, "--kind", "srdr", "--db", db)["fit"]
    assert fit["g_origin"] == "batch" and fit["g_used"] == pytest.approx([0.64, 0.62, 0.58, 0.54, 0.52])
    assert fit["fit_quality"] == "good" and "one baseline per step" in fit["g_note"]


@pytest.mark.builds_baseline
def test_the_builds_of_a_band_report_progress_as_one_bar(tmp_path, monkeypatch):
    from phantomlab.calibration import baseline_cache

    monkeypatch.setattr(baseline_cache, "CACHE_PHOTONS", 20_000)  # small ones for the test
    # one of the five g steps is cached already: four builds, one bar of 4 x 20,000 photons
    shutil.copy2(FIXTURES / "baseline-cache" / "baseline-g0.58-n1.330-out1.000.lookup.npz", tmp_path)
    seen = []
    fit = fit_measurement_file(DEMO, kind="srdr", baseline_dir=tmp_path, progress=lambda done, total: seen.append(
        (done, total)))
    assert {total for _, total in seen} == {80_000}
    done = [d for d, _ in seen]
    assert done == sorted(done) and done[-1] == 80_000
    assert fit.extras["baseline_origin"] == "cache (built now)" and len(fit.extras["baseline"]) == 5
