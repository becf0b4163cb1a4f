"""The page's invented probe file: Monte Carlo light of the demo emulsion that the default fit describes.

`phantomlab/data/demo_light_mc.npz` (demo data, invented; `make_demo_light.py` beside it) holds
direct runs of our Monte Carlo engine at five g (0.50-0.66) and 13 ratios μs′/μa;
`phantomlab.ui.demo_light` interpolates it.  Checked here against direct runs of the same
engine at a g and a ratio between the table's (another seed and photon count: an independent
estimate of the same light), and end to end: the invented file of a seeded demo batch,
made at each wavelength's g of the batch's scattering model and attached with the default
model (the Monte Carlo lookup at that g per wavelength, a stored analog run re-weighted and
scaled: another model), fits GOOD with χ²ᵣ near 1, no one-signed residuals at any wavelength,
and gives back the optics it was made from.
"""

import shutil
import warnings

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.ui.demo_light import demo_light_info, demo_light_reflectance

def _direct_run(*, g, musp, mua, rho_mm, photons, seed):
    """Our engine run directly, 0.1 mm rings around each of ``rho_mm``: R and its photon noise [1/mm²]."""
    from phantomlab.transport.montecarlo import simulate

    info = demo_light_info()
    centres = np.sort(np.concatenate([rho_mm - 0.1, rho_mm, rho_mm + 0.1]))
    run = simulate(mua_per_mm=mua, mus_per_mm=musp / (1.0 - g), g=g, n=info["n"], rho_mm=centres,
                   photons=photons, seed=seed)
    return run.reflectance_per_mm2[1::3], run.reflectance_per_mm2_sd[1::3]


def test_the_table_between_its_g_and_ratios_agrees_with_a_direct_run():
    info = demo_light_info()
    assert info["source"].startswith("demo data, invented") and info["n"] == 1.33
    assert info["g_range"] == (0.50, 0.66)  # covers the demo emulsion's 0.64 (660 nm) to 0.51 (850 nm)
    # g 0.60 lies between the table's 0.58 and 0.62, μs′/μa = 120 between its 102 and 141
    musp, mua, g = 1.2, 1.2 / 120.0, 0.60
    rho = np.array([1.5, 2.5, 3.5, 5.0, 8.0])
    table, table_sd = demo_light_reflectance(mua_per_mm=mua, musp_per_mm=musp, g=g, rho_mm=rho)
    direct, direct_sd = _direct_run(g=g, musp=musp, mua=mua, rho_mm=rho, photons=600_000, seed=777)
    stated = info["interpolation_error"] + info["g_interpolation_error"]  # upper bounds, leave-one-out
    z = (table - direct) / np.hypot(table_sd, direct_sd)
    assert np.all(np.abs(z) < 3.0), z  # photon noise of both; the interpolation error is below it
    assert np.all(np.abs(table / direct - 1.0) < stated + 3.0 * direct_sd / direct), table / direct - 1.0


def test_the_table_follows_g_where_r_depends_on_it():
    # within a few transport lengths R moves by 1-3 % per 0.1 of g (fit_inputs.G_SENSITIVITY_PER_0_1):
    # a direct run at the band's near-infrared end (g 0.52) is described by the table at its own
    # g, worse by the table at the band's mean g 0.58 (the one g it was once made at), worse still
    # at the band's other end (0.64).  μs′/μa = 30 lies between the table's 27.7 and 38.4.
    musp, mua, g = 1.0, 1.0 / 30.0, 0.52
    rho = np.array([1.0, 1.5, 2.0, 2.5, 3.0, 4.0])
    direct, direct_sd = _direct_run(g=g, musp=musp, mua=mua, rho_mm=rho, photons=2_000_000, seed=778)

    def chi2(at_g):
        table, table_sd = demo_light_reflectance(mua_per_mm=mua, musp_per_mm=musp, g=at_g, rho_mm=rho)
        return float(np.sum(((table - direct) / np.hypot(table_sd, direct_sd)) ** 2))

    own, mean, other_end = chi2(g), chi2(0.58), chi2(0.64)
    assert own < 3.0 * rho.size and own < mean < other_end, (own, mean, other_end)


def test_optics_or_g_outside_the_table_are_refused_in_one_line():
    with pytest.raises(InputError, match=r"musp/mua = 5 is outside") as caught:
        demo_light_reflectance(mua_per_mm=0.2, musp_per_mm=1.0, g=0.58, rho_mm=[2.0])
    assert "\n" not in str(caught.value)
    with pytest.raises(InputError, match="accepted: both > 0"):
        demo_light_reflectance(mua_per_mm=0.0, musp_per_mm=1.0, g=0.58, rho_mm=[2.0])
    for g in (0.8, 0.45, float("nan")):  # e.g. the demo oximeter batch (blood in lipid): g 0.80
        with pytest.raises(InputError, match=r"g = \S+ is outside the demo's Monte Carlo table \(0.5 to 0.66") as caught:
            demo_light_reflectance(mua_per_mm=0.01, musp_per_mm=1.0, g=g, rho_mm=[2.0])
        assert "\n" not in str(caught.value)


def test_far_distances_at_high_absorption_are_left_out_not_invented():
    values, sd = demo_light_reflectance(mua_per_mm=0.05, musp_per_mm=1.0, g=0.58, rho_mm=[2.0, 6.0, 20.0, 30.0])
    assert np.all(np.isfinite(values[:2])) and np.all(np.isnan(values[2:])) and np.all(np.isnan(sd[2:]))


def test_the_invented_file_of_a_demo_batch_fits_good_with_the_default_model(seeded_demo_file, tmp_path):
    from phantomlab.store import list_batches, open_store
    from phantomlab.ui.demo import demo_batch_optics, demo_measurement_csv
    from phantomlab.ui.recording import attach_measurement
    from phantomlab.measurement_workflow import batch_anisotropy

    copy = tmp_path / "demo.sqlite"
    shutil.copyfile(seeded_demo_file, copy)
    store = open_store(f"sqlite:///{copy}", create=False)
    try:
        with store.reading() as session:
            code = list_batches(session)[1].code  # the first batch of the demo NIR liquid
        text = demo_measurement_csv(store, code)
        made = demo_batch_optics(store, code)
        g, _ = batch_anisotropy(store, code, wavelength_nm=made.wavelength_nm, per_wavelength=True)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            _, fit = attach_measurement(store, code, kind="srdr", file_name="demo.csv",
                                        raw_content=text.encode("utf-8"), sidecar_toml="n = 1.33\n")
    finally:
        store.close()
    first = text.splitlines()[0]
    assert first.startswith("# source: demo data, invented") and "Monte Carlo" in first
    assert f"{g[0]:.3f} at 660 nm to {g[-1]:.3f} at 850 nm" in first
    result = fit.to_json()
    assert result["model"] == "mc-lookup" and result["g_origin"] == "batch"
    # the batch's g per wavelength (0.64-0.51), one baseline per step of 0.02; the invented light
    # is the table at the same g per wavelength, unrounded (docs/design.md, demo data)
    assert result["g_used"] == pytest.approx([0.64, 0.62, 0.58, 0.54, 0.52])
    assert result["fit_quality"] == "good", result["fit_quality_reason"]
    # 55 values of 2 % noise, 45 degrees of freedom: χ²ᵣ within 3 SD of 1 (its SD is sqrt(2/45) = 0.21)
    assert 0.4 < result["chi2_red"] < 1.6, result["chi2_red"]
    residuals = np.asarray(result["residuals"], float)
    for row in residuals:  # no systematic pattern: no wavelength's residuals all of one sign or far off zero
        row = row[np.isfinite(row)]
        assert 0 < np.sum(row > 0) < row.size and abs(np.mean(row)) < 3.0 / np.sqrt(row.size), row
    for key in ("mua", "musp"):
        z = (np.asarray(result[f"{key}_per_mm"]) - getattr(made, f"{key}_per_mm")) / np.asarray(
            result[f"{key}_sd_per_mm"])
        assert np.all(np.abs(z) < 2.5), (key, z)  # 10 values (largest 0.95 SD measured; 1.22 with the light at g 0.58 for the band)
