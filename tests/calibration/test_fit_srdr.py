"""srdr fits: recovery of μa and μs′ from Monte Carlo data, SD coverage, relative data.

The reference data are the project's own Monte Carlo (made once by
``fixtures/make_mc_fixtures.py``, seeds independent of the baseline's), with 1 % Gaussian
noise added here with fixed seeds, in two probe designs:

* ``mc_srdr_reach_cases.npz`` — distances out to 8…40 mm, further as absorption falls.  On
  it every noisy copy is held to the tolerances of issue 5: absolute data μa within 5 %, μs′
  within 3 % over μs′/μa = 10…1000; relative data 10 % and 5 %; and the SDs cover the truth
  about as often as they should.
* ``mc_srdr_cases.npz`` — a short probe, 0.4–8 mm for every medium.  At μs′/μa ≥ 300 such a
  probe cannot pin μa in a single copy (its Fisher information gives SDs of 2–5 %
  absolute, 10–23 % relative): there the tests hold the SDs to what the copies do and the
  warnings to the cases that cannot tell.
Diffusion is checked where it is valid (Farrell et al. 1992, Med Phys 19:879: beyond about
one transport mean free path and μs′ ≫ μa) on data made by the diffusion model itself, and
against the same Monte Carlo data beyond two transport lengths with the tolerances the
physics gives (measured; see ``test_diffusion_fit_of_mc_data_beyond_two_transport_lengths``).
Absolute ``reflectance_per_mm2`` is per unit incident power on both sides (DEVELOPERS.md,
"Reflectance conventions").
"""

import re
import warnings
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration.fit_srdr import fit_srdr
from phantomlab.calibration.measurement_metadata import MeasurementMetadata
from phantomlab.calibration.measurements import parse_measurement_text
from phantomlab.errors import InputError, PhantomlabWarning

FIXTURES = Path(__file__).parent / "fixtures"


@pytest.fixture(scope="module")
def mc_cases():
    data = np.load(FIXTURES / "mc_srdr_cases.npz")
    return {key: data[key] for key in data.files}


@pytest.fixture(scope="module")
def reach_cases():
    """The same five media measured by a probe whose reach grows as absorption falls."""
    data = np.load(FIXTURES / "mc_srdr_reach_cases.npz")
    return {key: data[key] for key in data.files}


@pytest.fixture(scope="module")
def baseline():
    from phantomlab.transport.montecarlo import load_baseline

    return load_baseline(FIXTURES / "mc_baseline.npz")


def _text(rho, values, sd, relative=False):
    column = "reflectance_relative" if relative else "reflectance_per_mm2"
    lines = ["# source: test data (Monte Carlo + 1 % noise)", f"wavelength_nm,rho_mm,{column},sd"]
    for i, row in enumerate(np.atleast_2d(values)):
        for j, r in enumerate(rho):
            lines.append(f"{650 + 10 * i},{r:.6g},{row[j]:.9g},{np.atleast_2d(sd)[i, j]:.6g}")
    return "\n".join(lines)


def _noisy(case_values, case_sd, rng, copies):
    """``copies`` noisy versions of one Monte Carlo R(ρ): 1 % noise on top of the MC's own."""
    noisy = case_values[None, :] * (1 + 0.01 * rng.standard_normal((copies, case_values.size)))
    sd = np.sqrt((0.01 * case_values) ** 2 + case_sd**2)
    return noisy, np.broadcast_to(sd, noisy.shape)


def _measurement(rho, values, sd, relative=False):
    return parse_measurement_text(_text(rho, values, sd, relative), kind="srdr",
                                  metadata=MeasurementMetadata(n=1.4, n_outside=1.0, detector="ring"))


@pytest.mark.parametrize("case", range(5))
def test_mc_lookup_recovers_absolute_mc_data(mc_cases, baseline, case):
    # eight noisy copies (one per "wavelength"): their mean within the 5 % / 3 %, and
    # every copy within 3 of its own stated SDs.  (At musp/mua = 1000 a probe reaching 8 mm
    # gives one copy an SD of about 7 % in mua: the Fisher information of the design, not the fit.)
    rho = mc_cases["rho_mm"]
    mua_true = mc_cases["mua_per_mm"][case]
    musp_true = 1.0  # fixture header: musp_per_mm = 1.0
    values, sd = _noisy(mc_cases["reflectance_per_mm2"][case], mc_cases["sd"][case],
                        np.random.default_rng(100 + case), copies=8)
    fit = fit_srdr(_measurement(rho, values, sd), model="mc", baseline=baseline)
    assert fit.model == "mc-lookup"
    assert abs(np.mean(fit.mua_per_mm) / mua_true - 1) < 0.05
    assert abs(np.mean(fit.musp_per_mm) / musp_true - 1) < 0.03
    np.testing.assert_array_less(np.abs(fit.mua_per_mm - mua_true), 3 * fit.mua_sd_per_mm)
    np.testing.assert_array_less(np.abs(fit.musp_per_mm - musp_true), 3 * fit.musp_sd_per_mm)
    if case <= 2:  # musp/mua <= 100: every single copy within the tolerance
        np.testing.assert_array_less(np.abs(fit.mua_per_mm / mua_true - 1), 0.05)
        np.testing.assert_array_less(np.abs(fit.musp_per_mm / musp_true - 1), 0.03)
    # 8 mm reaches 1.4 attenuation lengths at musp/mua = 100, 0.8 at 300 and 0.44 at 1000:
    # the fit says that the reach is short exactly where single copies stray
    short_reach = any("attenuation lengths" in message for message in fit.warnings)
    assert short_reach == (case >= 3), fit.warnings


@pytest.mark.parametrize("case", range(4))
def test_mc_lookup_recovers_relative_mc_data(mc_cases, baseline, case):
    rho = mc_cases["rho_mm"]
    mua_true = mc_cases["mua_per_mm"][case]
    values, sd = _noisy(mc_cases["reflectance_per_mm2"][case], mc_cases["sd"][case],
                        np.random.default_rng(200 + case), copies=8)
    scale = 37.5  # an arbitrary instrument scale the fit must absorb
    fit = fit_srdr(_measurement(rho, scale * values, scale * sd, relative=True), model="mc", baseline=baseline)
    # the median copy within the 10 % / 5 % (relative data have a curved valley along
    # which a single copy can stray further than its linearised SD says: see DEVELOPERS.md)
    assert abs(np.median(fit.mua_per_mm) / mua_true - 1) < 0.10
    assert abs(np.median(fit.musp_per_mm) - 1.0) < 0.05
    np.testing.assert_allclose(np.median(fit.scale_factor), scale, rtol=0.1)


def test_relative_data_at_the_highest_albedo_warn_that_mua_is_undetermined(mc_cases, baseline):
    # musp/mua = 1000 and rho <= 8 mm (8 transport mean free paths): without the absolute scale
    # the shape hardly depends on mua; the fit must say so rather than report a number as good
    values, sd = _noisy(mc_cases["reflectance_per_mm2"][4], mc_cases["sd"][4], np.random.default_rng(250), copies=4)
    with pytest.warns(PhantomlabWarning, match="relative SD above 25 %|cannot tell mua from musp"):
        fit = fit_srdr(_measurement(mc_cases["rho_mm"], values, sd, relative=True), model="mc", baseline=baseline)
    assert np.all(fit.mua_sd_per_mm / fit.mua_per_mm > 0.25)


def test_mc_lookup_sd_covers_the_truth_about_as_often_as_it_should(mc_cases, baseline):
    # 40 noisy copies of each case: standardised errors |z| < 1 about 68 % of the time.
    # The fixture's own MC noise is common to the copies, so allow a generous band (0.5-0.85).
    z_all = []
    for case in range(5):
        values, sd = _noisy(mc_cases["reflectance_per_mm2"][case], mc_cases["sd"][case],
                            np.random.default_rng(300 + case), copies=40)
        fit = fit_srdr(_measurement(mc_cases["rho_mm"], values, sd), model="mc", baseline=baseline)
        z_all.append((fit.mua_per_mm - mc_cases["mua_per_mm"][case]) / fit.mua_sd_per_mm)
        z_all.append((fit.musp_per_mm - 1.0) / fit.musp_sd_per_mm)
    z = np.concatenate(z_all)
    inside = np.mean(np.abs(z) < 1)
    assert 0.5 < inside < 0.85, inside


@pytest.mark.parametrize("ratio", [30.0, 300.0])
def test_relative_data_sd_covers_the_truth_where_the_valley_is_curved(ratio):
    # Relative data from the fluence-plus-flux model itself (the fit's model: no model error),
    # a short probe (2-8 mm), 1 % noise, 200 copies.  The valley along (mua, musp, scale) is
    # curved and flat-bottomed there (SDs of mua 15 % and 31 %); the SDs come from the profile
    # chi2, so |z| < 1, < 2 and > 3 should hold about 68.3 %, 95.4 % and 0.27 % of the fits
    # (normal distribution).  Measured: 0.58-0.64, 0.89-0.94, at most 3 of 200 beyond 3.
    # (At musp/mua = 1000 this probe cannot tell: a tenth of the copies put mua at zero, and
    # the fit says so, test_relative_data_at_the_highest_albedo_warn_that_mua_is_undetermined.)
    from phantomlab.transport.diffusion import srdr_reflectance

    rho = np.linspace(2.0, 8.0, 13)
    R = srdr_reflectance(mua_per_mm=1.0 / ratio, musp_per_mm=1.0, rho_mm=rho, n=1.4)
    values = R[None, :] * (1 + 0.01 * np.random.default_rng(5).standard_normal((200, rho.size)))
    fit = fit_srdr(_measurement(rho, values, np.broadcast_to(0.01 * R, values.shape), relative=True),
                   model="kienle1997", min_transport_mfp=0)
    for z in ((fit.mua_per_mm - 1.0 / ratio) / fit.mua_sd_per_mm, (fit.musp_per_mm - 1.0) / fit.musp_sd_per_mm):
        z = np.abs(z)
        assert 0.55 < np.mean(z < 1) < 0.92, np.mean(z < 1)
        assert np.mean(z < 2) > 0.85, np.mean(z < 2)
        assert np.sum(z > 3) <= 4, np.sum(z > 3)


# The long-reach design (fixtures/mc_srdr_reach_cases.npz): the same media, 20 distances from
# 0.4 mm to 8, 12, 16, 30 and 40 mm for musp/mua = 10, 30, 100, 300 and 1000 (mu_eff * rho_max
# about 2-5).  This is the design the per-copy tolerances are held on: every noisy
# copy, not their mean.


@pytest.mark.parametrize("case", range(5))
def test_mc_lookup_recovers_every_copy_of_absolute_long_reach_data(reach_cases, baseline, case):
    # issue 5: absolute data, mua within 5 % and musp within 3 % for musp/mua = 10...1000.
    # Measured on these copies: mua -0.6...+0.5 % (10), 0.0...+0.9 % (30), -0.5...+1.0 % (100),
    # -0.3...+2.4 % (300), -2.4...+2.3 % (1000); musp within -0.8...+0.4 % throughout
    # (40 copies per case: mua at most 4.0 % off, at 1000).
    rho = reach_cases["rho_mm"][case]
    mua_true = reach_cases["mua_per_mm"][case]
    values, sd = _noisy(reach_cases["reflectance_per_mm2"][case], reach_cases["sd"][case],
                        np.random.default_rng(500 + case), copies=8)
    with warnings.catch_warnings():
        warnings.simplefilter("error", PhantomlabWarning)  # a design that can tell: no warning
        fit = fit_srdr(_measurement(rho, values, sd), model="mc", baseline=baseline)
    np.testing.assert_array_less(np.abs(fit.mua_per_mm / mua_true - 1), 0.05)
    np.testing.assert_array_less(np.abs(fit.musp_per_mm / 1.0 - 1), 0.03)


@pytest.mark.parametrize("case", range(5))
def test_mc_lookup_recovers_every_copy_of_relative_long_reach_data(reach_cases, baseline, case):
    # issue 5: relative data (an unknown instrument scale fitted too), mua within 10 % and
    # musp within 5 % for musp/mua = 10...1000.  Measured on these copies: mua -5.6...+4.7 %,
    # musp -3.4...+3.2 % (the widest at musp/mua = 10 and 30, where the SD of mua is 2.4-2.7 %)
    # (40 copies per case: mua at most 7.0 % off, musp 3.6 %).
    rho = reach_cases["rho_mm"][case]
    mua_true = reach_cases["mua_per_mm"][case]
    values, sd = _noisy(reach_cases["reflectance_per_mm2"][case], reach_cases["sd"][case],
                        np.random.default_rng(600 + case), copies=8)
    scale = 37.5  # an arbitrary instrument scale the fit must absorb
    with warnings.catch_warnings():
        warnings.simplefilter("error", PhantomlabWarning)
        fit = fit_srdr(_measurement(rho, scale * values, scale * sd, relative=True), model="mc", baseline=baseline)
    np.testing.assert_array_less(np.abs(fit.mua_per_mm / mua_true - 1), 0.10)
    np.testing.assert_array_less(np.abs(fit.musp_per_mm / 1.0 - 1), 0.05)
    np.testing.assert_array_less(np.abs(fit.scale_factor / scale - 1), 0.10)


@pytest.mark.parametrize("relative", [False, True], ids=["absolute", "relative"])
def test_mc_lookup_sd_covers_the_truth_on_long_reach_data(reach_cases, baseline, relative):
    # 40 noisy copies of each case: |z| < 1 for about 68 % and |z| < 2 for about 95 % of the
    # fits (normal distribution).  The fixture's own MC noise is common to a case's copies,
    # so the bands are generous; an SD that under-covers (a curved valley read linearly)
    # fails the |z| < 3 count.  Measured: absolute 0.73 / 0.98 / 1.0, relative 0.72 /
    # 0.95 / 1.0 (the lookup's own noise, in the SDs, is smoothed and so partly common).  (With the lookup table as counted and linearised SDs, 9 of 40 relative
    # copies at musp/mua = 10 on a 0.4-8 mm probe lay beyond 3 SD.)
    z_all = []
    for case in range(5):
        values, sd = _noisy(reach_cases["reflectance_per_mm2"][case], reach_cases["sd"][case],
                            np.random.default_rng(700 + case + 10 * relative), copies=40)
        factor = 37.5 if relative else 1.0
        fit = fit_srdr(_measurement(reach_cases["rho_mm"][case], factor * values, factor * sd, relative=relative),
                       model="mc", baseline=baseline)
        z_all.append((fit.mua_per_mm - reach_cases["mua_per_mm"][case]) / fit.mua_sd_per_mm)
        z_all.append((fit.musp_per_mm - 1.0) / fit.musp_sd_per_mm)
        if relative:  # the printed instrument scale's SD too (measured alone: 0.75 / 0.945 / 1.0)
            z_all.append((fit.scale_factor - factor) / fit.scale_factor_sd)
    z = np.abs(np.concatenate(z_all))
    assert 0.55 < np.mean(z < 1) < 0.85, np.mean(z < 1)
    assert np.mean(z < 2) > 0.88, np.mean(z < 2)
    assert np.mean(z < 3) > 0.97, np.mean(z < 3)


# Case: the Monte Carlo fixtures (n = 1.4 in air, musp = 1 /mm, g = 0.8, rho 0.4-8 mm, i.e. up
# to 8 transport lengths), 1 % noise, eight copies; fluence-plus-flux diffusion (Kienle &
# Patterson 1997, JOSA A 14:246) with the fit's default, distances beyond 2 transport mean
# free paths only.  Expected from the literature: that model within a few per cent of Monte
# Carlo beyond about two transport lengths at high albedo (# from memory); measured on these
# fixtures +0.8 ... +5.7 % (test_diffusion_model_level_on_the_fit_fixtures).  What that gives
# (measured, the band of the eight copies), and the tolerance held:
#   musp/mua   mua error          musp error        held: mua, musp
#   30         +2.7 ... +3.6 %    -2.8 ... -1.1 %   0 ... +6 %, 4 %
#   100        +8.1 ... +11.3 %   -1.9 ...  0.0 %   0 ... +15 %, 4 %
#   300        +21 ... +28 %      -2.6 ...  0.0 %   +10 ... +40 %, 4 %
#   1000       +65 ... +87 %      -3.5 ... +0.1 %   +40 ... +120 %, 4 %
# musp is good to a few per cent throughout; mua is biased high, the more the higher the
# albedo: over 8 transport lengths mua acts mostly through the absolute level, which a
# few-percent model error moves a lot.  Its statistical SD (1-5 %) does not cover that; the
# measured error map (phantomlab/transport/diffusion_error.py) predicts the bias, the fit warns
# with it where the expected error passes 5 % and puts it into the SDs (test_sd_coverage.py).  Before the entry loss (1 - R_sp = 0.972) went into the diffusion
# models the same fits read mua +24 % at 100 and +162 % at 1000, musp -6 %.
DIFFUSION_FIT_BANDS = {  # case: (mua low, mua high, |musp| max), relative errors
    1: (0.0, 0.06, 0.04),
    2: (0.0, 0.15, 0.04),
    3: (0.10, 0.40, 0.04),
    4: (0.40, 1.20, 0.04),
}


@pytest.mark.parametrize("case", sorted(DIFFUSION_FIT_BANDS))  # musp/mua = 30, 100, 300, 1000
def test_diffusion_fit_of_mc_data_beyond_two_transport_lengths(mc_cases, case):
    rho = mc_cases["rho_mm"]
    values, sd = _noisy(mc_cases["reflectance_per_mm2"][case], mc_cases["sd"][case],
                        np.random.default_rng(400 + case), copies=8)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        fit = fit_srdr(_measurement(rho, values, sd), model="kienle1997")
    low, high, musp_tolerance = DIFFUSION_FIT_BANDS[case]
    mua_error = fit.mua_per_mm / mc_cases["mua_per_mm"][case] - 1
    assert np.all((mua_error > low) & (mua_error < high)), np.round(mua_error, 3)
    np.testing.assert_array_less(np.abs(fit.musp_per_mm - 1.0), musp_tolerance)
    # the points inside 2 transport mean free paths (0.4-1.6 mm, and 2.0 mm where the fitted
    # mutr came out below 1 /mm) were left out, and said so
    said = [re.search(r"left out (\d+) points? within 2 transport mean free paths", m) for m in fit.warnings]
    counts = [int(found.group(1)) for found in said if found]
    assert len(counts) == 1 and 8 * 4 <= counts[0] <= 8 * 5, fit.warnings
    # the measured diffusion-vs-Monte-Carlo error map predicts the bias: the warning (where the
    # expected error passes 5 %: musp/mua = 100 and up here) states the largest over the copies,
    # within 0.12 in ln mua of the range the copies show (measured: stated +9.9, +30, +98 %;
    # the copies +8 ... +11, +21 ... +28, +65 ... +87 %)
    messages = [str(w.message) for w in caught]
    stated = [re.search(r"expected error of the fitted mua up to [0-9.]+ % \(bias ([-+0-9.]+) %\)", m) for m in messages]
    stated = [float(found.group(1)) for found in stated if found]
    assert bool(stated) == (mc_cases["ratio"][case] >= 100), messages
    if stated:
        found = np.log1p(mua_error)
        assert found.min() - 0.12 < np.log1p(stated[0] / 100) < found.max() + 0.12, (stated, np.round(mua_error, 3))


def test_diffusion_model_level_on_the_fit_fixtures(mc_cases):
    # The model error behind the bands above: kienle1997 over Monte Carlo (both per unit
    # incident power, annulus averages) beyond 2 transport lengths, musp/mua = 30-1000:
    # measured +0.8 ... +5.7 %; held to 0 ... +7 %.
    from phantomlab.transport.diffusion import srdr_reflectance
    from phantomlab.transport.montecarlo import rho_bin_edges_mm

    rho = mc_cases["rho_mm"]
    edges = rho_bin_edges_mm(rho)
    beyond = rho >= 2.0
    for case in range(1, 5):
        averages = []
        for low, high in zip(edges[:-1], edges[1:]):
            r = np.linspace(low, high, 101)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", PhantomlabWarning)
                value = srdr_reflectance(mua_per_mm=mc_cases["mua_per_mm"][case], musp_per_mm=1.0, rho_mm=r,
                                         n=1.4, model="kienle1997")
            averages.append(np.trapezoid(value * 2 * np.pi * r, r) / (np.pi * (high**2 - low**2)))
        deviation = np.array(averages)[beyond] / mc_cases["reflectance_per_mm2"][case][beyond] - 1
        assert np.all((deviation > 0.0) & (deviation < 0.07)), (case, np.round(deviation, 3))


def test_flux_only_model_warns_at_a_mismatched_boundary(mc_cases):
    # farrell1992 at n = 1.4 in air is 8-21 % below Monte Carlo at 3-8 transport lengths
    # (tests/transport/test_montecarlo_models.py); fitted to the musp/mua = 100 fixture it
    # misses musp by +75 ... +83 % and mua by -80 ... -84 % (measured).  The fit must say so.
    values, sd = _noisy(mc_cases["reflectance_per_mm2"][2], mc_cases["sd"][2], np.random.default_rng(3), 2)
    with pytest.warns(PhantomlabWarning, match=r"farrell1992 \(flux only\) at n/n_outside = 1\.4"):
        fit = fit_srdr(_measurement(mc_cases["rho_mm"], values, sd), model="farrell1992")
    assert np.all(fit.musp_per_mm > 1.3)  # the bias the warning is about
    # matched boundary: no such warning
    m = parse_measurement_text(_text(mc_cases["rho_mm"], values, sd), kind="srdr",
                               metadata=MeasurementMetadata(n=1.0, n_outside=1.0))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always", PhantomlabWarning)
        fit_srdr(m, model="farrell1992")
    assert not any("flux only" in str(w.message) for w in caught)


def test_near_source_points_follow_the_fitted_transport_length():
    # Data from the fluence-plus-flux model itself (exact for the fit) at musp = 0.5 /mm, the
    # two nearest distances doubled (a near-source excess the model cannot follow).  The first
    # pass on all points lands at musp = 0.72 /mm and would leave out only rho < 2.8 mm (3
    # points); re-chosen with the refitted mutr, the distances inside 2/mutr = 3.96 mm go
    # (5 points) and the fit is exact.
    from phantomlab.transport.diffusion import srdr_reflectance

    rho = np.array([0.5, 1.0, 2.0, 3.0, 3.9, 4.1, 5.0, 6.0, 8.0, 10.0, 12.0])
    R = srdr_reflectance(mua_per_mm=0.005, musp_per_mm=0.5, rho_mm=rho, n=1.4, model="kienle1997")
    data = R.copy()
    data[:2] *= 2.0
    text = _text(rho, data, 0.01 * R)
    m = parse_measurement_text(text, kind="srdr", metadata=MeasurementMetadata(n=1.4, n_outside=1.0, detector="ring"))
    with pytest.warns(PhantomlabWarning, match="left out 5 points within 2 transport mean free paths"):
        fit = fit_srdr(m, model="kienle1997")
    assert fit.mua_per_mm[0] == pytest.approx(0.005, rel=1e-4)
    assert fit.musp_per_mm[0] == pytest.approx(0.5, rel=1e-4)
    with pytest.warns(PhantomlabWarning, match="left out 2 points within 1 transport mean free paths"):
        fit_srdr(m, model="kienle1997", min_transport_mfp=1.0)


def test_diffusion_round_trip_over_a_band():
    from phantomlab.transport.diffusion import srdr_reflectance

    rng = np.random.default_rng(9)
    wl = np.linspace(600, 900, 31)
    rho = np.linspace(1.5, 12, 20)
    mua = 0.005 + 0.02 * np.exp(-((wl - 700) / 60) ** 2)
    musp = 1.3 * (wl / 600) ** -1.1
    R = srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=1.33)
    out = ["wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    for i, w in enumerate(wl):
        for j in range(rho.size):
            out.append(f"{w:g},{rho[j]:.6g},{R[i, j] * (1 + 0.01 * rng.standard_normal()):.9g},{0.01 * R[i, j]:.6g}")
    m = parse_measurement_text("\n".join(out), kind="srdr", metadata=MeasurementMetadata(n=1.33))
    fit = fit_srdr(m)
    z = np.concatenate([(fit.mua_per_mm - mua) / fit.mua_sd_per_mm, (fit.musp_per_mm - musp) / fit.musp_sd_per_mm])
    assert np.max(np.abs(z)) < 4.5
    assert fit.chi2_red == pytest.approx(1.0, abs=0.2)


def test_diffusion_warns_at_low_albedo_with_the_expected_error(mc_cases):
    # musp/mua = 10 Monte Carlo data (short probe): the fluence-plus-flux fit lands musp about
    # 6 % low (measured -5.6 %); the error map expects that and says so (> 5 %)
    values, sd = _noisy(mc_cases["reflectance_per_mm2"][0], mc_cases["sd"][0], np.random.default_rng(1), 1)
    with pytest.warns(PhantomlabWarning, match=r"musp up to [0-9.]+ % \(bias -[0-9.]+ %\)") as caught:
        fit = fit_srdr(_measurement(mc_cases["rho_mm"], values, sd), model="kienle1997")
    bias = [re.search(r"musp up to [0-9.]+ % \(bias ([-0-9.]+) %\)", str(w.message)) for w in caught]
    bias = [float(found.group(1)) for found in bias if found][0]
    assert abs(bias / 100 - (fit.musp_per_mm[0] - 1.0)) < 0.02, (bias, fit.musp_per_mm)


def test_srdr_fit_needs_an_index():
    m = parse_measurement_text("wavelength_nm,rho_mm,reflectance_per_mm2\n650,1,0.1\n650,2,0.01\n650,3,0.001\n",
                               kind="srdr")
    with pytest.raises(InputError, match="needs the phantom's refractive index"):
        fit_srdr(m)


def test_unknown_model_and_missing_baseline_refused():
    m = parse_measurement_text("wavelength_nm,rho_mm,reflectance_per_mm2\n650,1,0.1\n650,2,0.01\n650,3,0.001\n",
                               kind="srdr", metadata=MeasurementMetadata(n=1.4))
    with pytest.raises(InputError, match="unknown srdr fit model 'dipole'; accepted: kienle1997, farrell1992, mc"):
        fit_srdr(m, model="dipole")
    with pytest.raises(InputError, match="needs a Monte Carlo baseline"):
        fit_srdr(m, model="mc")


def test_a_baseline_for_other_indices_is_refused(mc_cases, baseline):
    # the baseline (n = 1.4 in air) cannot stand for a water phantom (n = 1.33): R depends on
    # the boundary, so the fit refuses rather than answer for the wrong surface
    values, sd = _noisy(mc_cases["reflectance_per_mm2"][2], mc_cases["sd"][2], np.random.default_rng(8), 1)
    water = parse_measurement_text(_text(mc_cases["rho_mm"], values, sd), kind="srdr",
                                   metadata=MeasurementMetadata(n=1.33, n_outside=1.0))
    with pytest.raises(InputError, match=r"baseline was made for n = 1\.4 under n_outside = 1, the measurement "
                                         r"has n = 1\.33 under n_outside = 1; build one for it"):
        fit_srdr(water, model="mc", baseline=baseline)
    from phantomlab.calibration.fit_sfdi import sfdi_forward

    with pytest.raises(InputError, match=r"n_outside = 1\.52"):
        sfdi_forward(model="mc", fx_per_mm=np.array([0.0, 0.1]), n=1.4, n_outside=1.52, baseline=baseline)


def test_a_ring_file_whose_wavelengths_lack_some_distances_says_how_its_rings_are_cut(reach_cases, baseline):
    """Rings are cut between neighbouring distances of the whole file.  Five media, each read on
    its own grid of 20 rings, put into one file as five wavelengths: each wavelength lacks the
    others' distances, and its model rings are the whole grid's, not its own (measured: χ²ᵣ 6–36
    per wavelength, μa up to +20 % off; each alone χ²ᵣ 0.7–1.2).  The fit says so; a file on one
    grid gets no such note."""
    lines = ["# source: test data (Monte Carlo + 1 % noise)", "wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    for i, case in enumerate((4, 2)):
        values, sd = _noisy(reach_cases["reflectance_per_mm2"][case], reach_cases["sd"][case],
                            np.random.default_rng(5), copies=1)
        lines += [f"{650 + 50 * i},{r:.6g},{v:.9g},{s:.6g}"
                  for r, v, s in zip(reach_cases["rho_mm"][case], values[0], sd[0])]
    mixed = parse_measurement_text("\n".join(lines) + "\n", kind="srdr",
                                   metadata=MeasurementMetadata(n=1.4, n_outside=1.0, detector="ring"))
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        fit = fit_srdr(mixed, model="mc", baseline=baseline)
        alone = fit_srdr(_measurement(reach_cases["rho_mm"][4], *_noisy(reach_cases["reflectance_per_mm2"][4],
                                                                         reach_cases["sd"][4], np.random.default_rng(5),
                                                                         copies=1)), model="mc", baseline=baseline)
    assert any("rings of its own" in w and "650 nm" in w for w in fit.warnings), fit.warnings
    assert not any("rings of its own" in w for w in alone.warnings)
