"""Raw readings calibrated on a reference phantom; spectral constraints; the optics kind; replicates.

Reference calibration: R = M_s/M_ref · R_model(ref) with the instrument response cancelling
point by point (Cuccia et al. 2009, J Biomed Opt 14:024012, sec. 2.3); its relative SD is
the quadrature sum of the two readings' and the reference model's (first-order propagation,
Taylor 1997, *An Introduction to Error Analysis*, eq. 3.47).  Power law: Jacques 2013, Phys
Med Biol 58:R37, eq. 2.  Forward data: diffusion (Farrell et al. 1992).
"""

import warnings

import numpy as np
import pytest

from phantomlab.calibration import fit_measurement_file
from phantomlab.calibration.fit_srdr import fit_srdr, srdr_forward
from phantomlab.calibration.measurement_metadata import MeasurementMetadata
from phantomlab.calibration.measurements import parse_measurement_text
from phantomlab.calibration.reference import calibrate_reading
from phantomlab.calibration.spectral import SpectralConstraint
from phantomlab.errors import InputError

RHO = np.linspace(2.0, 12.0, 12)
WL = np.array([650.0, 700.0, 750.0, 800.0])


def _grid_csv(column, values, sd=None, wl=WL, rho=RHO):
    head = f"wavelength_nm,rho_mm,{column}" + (",sd" if sd is not None else "")
    lines = [head]
    for i, w in enumerate(wl):
        for j, r in enumerate(rho):
            lines.append(f"{w:g},{r:.12g},{values[i, j]:.12g}" + (f",{sd[i, j]:.6g}" if sd is not None else ""))
    return "\n".join(lines) + "\n"


def _srdr(mua, musp, n=1.4):
    from phantomlab.transport.diffusion import srdr_reflectance

    return srdr_reflectance(mua_per_mm=np.asarray(mua), musp_per_mm=np.asarray(musp), rho_mm=RHO, n=n)


def test_raw_reading_calibrated_with_a_reference_phantom(tmp_path):
    response = 4.0e5 * np.exp(-0.05 * RHO)[None, :] * np.linspace(0.8, 1.2, WL.size)[:, None]  # instrument
    mua_s, musp_s = np.array([0.01, 0.02, 0.015, 0.03]), np.array([1.2, 1.1, 1.0, 0.9])
    mua_r, musp_r = 0.005, 0.8
    sample = response * _srdr(mua_s, musp_s)
    reference = response * _srdr(np.full(4, mua_r), np.full(4, musp_r))
    (tmp_path / "ref.csv").write_text(_grid_csv("reading", reference, 0.002 * reference))
    (tmp_path / "s.csv").write_text(_grid_csv("reading", sample, 0.002 * sample))
    (tmp_path / "s.toml").write_text(
        f'n = 1.4\n[reference]\nmua_per_mm = {mua_r}\nmusp_per_mm = {musp_r}\n'
        f'mua_sd_per_mm = 0.0001\nmusp_sd_per_mm = 0.008\nreading_csv = "ref.csv"\n')
    fit = fit_measurement_file(tmp_path / "s.csv", kind="srdr", model="kienle1997")
    np.testing.assert_allclose(fit.mua_per_mm, mua_s, rtol=2e-3)
    np.testing.assert_allclose(fit.musp_per_mm, musp_s, rtol=2e-3)
    # a reference known ten times less well gives larger SDs of the sample's optics
    (tmp_path / "s.toml").write_text(
        f'n = 1.4\n[reference]\nmua_per_mm = {mua_r}\nmusp_per_mm = {musp_r}\n'
        f'mua_sd_per_mm = 0.001\nmusp_sd_per_mm = 0.08\nreading_csv = "ref.csv"\n')
    loose = fit_measurement_file(tmp_path / "s.csv", kind="srdr", model="kienle1997")

    def measurement_part(result):  # the SD without the diffusion model's own error (the same in both)
        return np.sqrt(result.musp_sd_per_mm**2 - result.model_covariance[:, 1, 1])

    assert np.all(loose.musp_sd_per_mm > fit.musp_sd_per_mm)
    assert np.all(measurement_part(loose) > 3 * measurement_part(fit))


def test_reference_uncertainty_in_the_calibrated_sd(tmp_path):
    reading = np.ones((1, RHO.size)) * 100.0
    (tmp_path / "ref.csv").write_text(_grid_csv("reading", reading, 0.01 * reading, wl=WL[:1]))
    (tmp_path / "s.csv").write_text(_grid_csv("reading", 2 * reading, 0.02 * 2 * reading, wl=WL[:1]))
    table = {"n": 1.4, "reference": {"mua_per_mm": 0.01, "musp_per_mm": 1.0, "mua_sd_per_mm": 0.0,
                                     "musp_sd_per_mm": 0.0, "reading_csv": str(tmp_path / "ref.csv")}}
    from phantomlab.calibration.measurements import read_measurement

    raw = read_measurement(tmp_path / "s.csv", kind="srdr", sidecar=table)
    calibrated = calibrate_reading(raw, model="farrell1992")
    model = srdr_forward(model="farrell1992", rho_mm=RHO, n=1.4)(np.array([0.01]), np.array([1.0]))
    np.testing.assert_allclose(calibrated.values, 2 * model, rtol=1e-9)  # 12 printed digits
    # reference optics exact: relative SD = sqrt(0.02^2 + 0.01^2) (Taylor 1997, eq. 3.47)
    np.testing.assert_allclose(calibrated.sd / calibrated.values, np.hypot(0.02, 0.01), rtol=1e-9)


def test_reference_reading_on_another_grid_refused(tmp_path):
    (tmp_path / "ref.csv").write_text(_grid_csv("reading", np.ones((1, 3)), wl=WL[:1], rho=RHO[:3]))
    (tmp_path / "s.csv").write_text(_grid_csv("reading", np.ones((1, 4)), wl=WL[:1], rho=RHO[:4]))
    (tmp_path / "s.toml").write_text('n = 1.4\n[reference]\nmua_per_mm = 0.01\nmusp_per_mm = 1.0\nreading_csv = "ref.csv"\n')
    with pytest.raises(InputError, match="must match point by point"):
        fit_measurement_file(tmp_path / "s.csv", kind="srdr", model="kienle1997")


def test_musp_power_law_recovered_jointly():
    wl = np.linspace(600, 900, 13)
    a, b = 1.4, 1.25
    musp = a * (wl / 500.0) ** -b
    mua = 0.01 + 0.005 * np.sin(wl / 40.0)
    R = _srdr(mua, musp)
    rng = np.random.default_rng(21)
    m = parse_measurement_text(_grid_csv("reflectance_per_mm2", R * (1 + 0.01 * rng.standard_normal(R.shape)),
                                         0.01 * R, wl=wl), kind="srdr", metadata=MeasurementMetadata(n=1.4))
    fit = fit_srdr(m, constraint=SpectralConstraint(musp_power_law=True, reference_nm=500.0))
    law = fit.parameters["musp_power_law"]
    assert abs(law["a_per_mm"] - a) < 3 * law["a_sd_per_mm"] + 1e-3
    assert abs(law["b"] - b) < 3 * law["b_sd"] + 1e-3
    np.testing.assert_allclose(fit.musp_per_mm, law["a_per_mm"] * (wl / 500) ** -law["b"], rtol=1e-9)
    np.testing.assert_array_less(np.abs(fit.mua_per_mm / mua - 1), 0.05)


def test_mua_as_non_negative_combination_of_stock_spectra():
    wl = np.linspace(600, 900, 16)
    ink = np.full(wl.size, 20.0)  # flat (intrinsic, per unit amount) [1/mm]
    dye = 400.0 * np.exp(-((wl - 760) / 30) ** 2)
    matrix = 0.002 + 0.00002 * (wl - 600)
    amounts = np.array([3e-4, 2e-5])
    mua = matrix + amounts @ np.vstack([ink, dye])
    musp = np.full(wl.size, 1.0)
    R = _srdr(mua, musp)
    rng = np.random.default_rng(22)
    m = parse_measurement_text(_grid_csv("reflectance_per_mm2", R * (1 + 0.005 * rng.standard_normal(R.shape)),
                                         0.005 * R, wl=wl), kind="srdr", metadata=MeasurementMetadata(n=1.4))
    constraint = SpectralConstraint(mua_basis_per_mm=np.vstack([ink, dye]), mua_basis_names=("ink", "dye"),
                                    mua_offset_per_mm=matrix)
    fit = fit_srdr(m, constraint=constraint)
    for name, true in zip(("ink", "dye"), amounts):
        entry = fit.parameters[f"amount_{name}"]
        assert abs(entry["value"] - true) < 3 * entry["sd"] + 0.01 * true, name


def test_optics_kind_passes_values_through_with_warning_without_sd():
    text = "wavelength_nm,mua_per_mm,musp_per_mm,mua_sd_per_mm,musp_sd_per_mm\n650,0.01,1.0,0.0002,0.02\n"
    fit = fit_measurement_file(text, kind="optics")
    assert fit.model == "direct" and fit.mua_sd_per_mm[0] == 0.0002 and fit.covariance[0, 1, 1] == pytest.approx(4e-4)
    with pytest.warns(Warning, match="carry no uncertainty"):
        bare = fit_measurement_file("wavelength_nm,mua_per_mm,musp_per_mm\n650,0.01,1.0\n", kind="optics")
    assert np.isnan(bare.mua_sd_per_mm[0])


def test_replicate_files_are_combined_before_the_fit(tmp_path):
    R = _srdr(np.array([0.01]), np.array([1.0]))
    rng = np.random.default_rng(23)
    paths = []
    for k in range(3):
        path = tmp_path / f"rep{k}.csv"
        path.write_text(_grid_csv("reflectance_per_mm2", R * (1 + 0.01 * rng.standard_normal(R.shape)), 0.01 * R,
                                  wl=WL[:1]))
        paths.append(path)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        fit = fit_measurement_file(paths, kind="srdr", n=1.4, model="kienle1997")
        single = fit_measurement_file(paths[0], kind="srdr", n=1.4, model="kienle1997")
    assert fit.replicates == 3
    assert fit.mua_sd_per_mm[0] < single.mua_sd_per_mm[0]
    np.testing.assert_allclose(fit.mua_per_mm, [0.01], rtol=0.03)


def test_fit_measurement_file_refuses_unknown_options():
    with pytest.raises(InputError, match="unknown option 'colour'"):
        fit_measurement_file("wavelength_nm,mua_per_mm,musp_per_mm\n650,0.01,1.0\n", kind="optics", colour="red")
    with pytest.raises(InputError, match="unknown measurement kind 'tof'"):
        fit_measurement_file("x\n", kind="tof")


def test_raw_reading_with_the_default_model_uses_the_lookup_for_the_reference_too(tmp_path):
    # the default (Monte Carlo lookup) calibrates the reading with the same model: data made
    # by the lookup itself (cached table g 0.8, n 1.4) come back exactly, and the fit says so
    from phantomlab.calibration.baseline_cache import obtain_baseline
    from phantomlab.calibration.fit_srdr import srdr_forward

    forward = srdr_forward(model="mc", rho_mm=RHO, n=1.4, baseline=obtain_baseline(g=0.8, n=1.4).baseline)
    response = 4.0e5 * np.exp(-0.05 * RHO)[None, :] * np.linspace(0.8, 1.2, WL.size)[:, None]
    mua_s, musp_s = np.array([0.01, 0.02, 0.015, 0.03]), np.array([1.2, 1.1, 1.0, 0.9])
    sample = response * forward(mua_s, musp_s)
    reference = response * forward(np.full(4, 0.005), np.full(4, 0.8))
    (tmp_path / "ref.csv").write_text(_grid_csv("reading", reference, 0.002 * reference))
    (tmp_path / "s.csv").write_text(_grid_csv("reading", sample, 0.002 * sample))
    (tmp_path / "s.toml").write_text('n = 1.4\n[reference]\nmua_per_mm = 0.005\nmusp_per_mm = 0.8\n'
                                     'mua_sd_per_mm = 0.0001\nmusp_sd_per_mm = 0.008\nreading_csv = "ref.csv"\n')
    fit = fit_measurement_file(tmp_path / "s.csv", kind="srdr")
    assert fit.model == "mc-lookup" and fit.extras["baseline_origin"] == "cache"
    np.testing.assert_allclose(fit.mua_per_mm, mua_s, rtol=1e-2)
    np.testing.assert_allclose(fit.musp_per_mm, musp_s, rtol=1e-2)
