"""The page's invented probe file: Monte Carlo light of the demo emulsion that the default fit describes.

`phantomlab/data/demo_light_mc.npz` (demo data, invented; `make_demo_light.py` beside it) holds
direct runs of our Monte Carlo engine at 13 ratios μs′/μa; `phantomlab.ui.demo_light`
interpolates it.  Checked here against a direct run of the same engine at a ratio between
the table's (another seed and photon count: an independent estimate of the same light), and
end to end: the invented file of a seeded demo batch, attached with the default model (the
Monte Carlo lookup, a stored analog run re-weighted and scaled: another model), fits GOOD and
gives back the optics it was made from.
"""

import shutil
import warnings

import numpy as np
import pytest

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.ui.demo_light import demo_light_info, demo_light_reflectance


def test_the_table_interpolated_between_its_ratios_agrees_with_a_direct_run():
    from phantomlab.transport.montecarlo import simulate

    info = demo_light_info()
    assert info["source"].startswith("demo data, invented") and info["g"] == 0.58 and info["n"] == 1.33
    musp, mua = 1.2, 1.2 / 120.0  # μs′/μa = 120 lies between the table's 102 and 141
    rho = np.array([2.0, 4.0, 6.0, 8.0])
    table, table_sd = demo_light_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho)
    centres = np.sort(np.concatenate([rho - 0.1, rho, rho + 0.1]))  # 0.1 mm rings around each ρ
    run = simulate(mua_per_mm=mua, mus_per_mm=musp / (1.0 - info["g"]), g=info["g"], n=info["n"],
                   rho_mm=centres, photons=400_000, seed=777)
    direct, direct_sd = run.reflectance_per_mm2[1::3], run.reflectance_per_mm2_sd[1::3]
    z = (table - direct) / np.hypot(table_sd, direct_sd)
    assert np.all(np.abs(z) < 3.0), z  # photon noise of both; the interpolation error is below it
    assert np.all(np.abs(table / direct - 1.0) < 0.06)


def test_optics_outside_the_table_are_refused_in_one_line():
    with pytest.raises(InputError, match=r"musp/mua = 5 is outside") as caught:
        demo_light_reflectance(mua_per_mm=0.2, musp_per_mm=1.0, rho_mm=[2.0])
    assert "\n" not in str(caught.value)
    with pytest.raises(InputError, match="accepted: both > 0"):
        demo_light_reflectance(mua_per_mm=0.0, musp_per_mm=1.0, rho_mm=[2.0])


def test_far_distances_at_high_absorption_are_left_out_not_invented():
    values, sd = demo_light_reflectance(mua_per_mm=0.05, musp_per_mm=1.0, rho_mm=[2.0, 6.0, 20.0, 30.0])
    assert np.all(np.isfinite(values[:2])) and np.all(np.isnan(values[2:])) and np.all(np.isnan(sd[2:]))


def test_the_invented_file_of_a_demo_batch_fits_good_with_the_default_model(seeded_demo_file, tmp_path):
    from phantomlab.store import list_batches, open_store
    from phantomlab.ui.demo import demo_batch_optics, demo_measurement_csv
    from phantomlab.ui.recording import attach_measurement

    copy = tmp_path / "demo.sqlite"
    shutil.copyfile(seeded_demo_file, copy)
    store = open_store(f"sqlite:///{copy}", create=False)
    try:
        with store.reading() as session:
            code = list_batches(session)[1].code  # the first batch of the demo NIR liquid
        text = demo_measurement_csv(store, code)
        assert text.startswith("# source: demo data, invented") and "Monte Carlo" in text.splitlines()[0]
        made = demo_batch_optics(store, code)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            _, fit = attach_measurement(store, code, kind="srdr", file_name="demo.csv",
                                        raw_content=text.encode("utf-8"), sidecar_toml="n = 1.33\n")
    finally:
        store.close()
    result = fit.to_json()
    assert result["model"] == "mc-lookup" and result["g_origin"] == "batch"
    # the batch's g per wavelength (0.64-0.51), one baseline per step of 0.02; the invented light
    # is the shipped table's g 0.58 at every wavelength (docs/design.md, demo data)
    assert result["g_used"] == pytest.approx([0.64, 0.62, 0.58, 0.54, 0.52])
    assert result["fit_quality"] == "good", result["fit_quality_reason"]
    for key in ("mua", "musp"):
        z = (np.asarray(result[f"{key}_per_mm"]) - getattr(made, f"{key}_per_mm")) / np.asarray(
            result[f"{key}_sd_per_mm"])
        assert np.all(np.abs(z) < 2.5), (key, z)  # 10 values; the table's g is the batch's mean g (0.58)
