"""fd fits on independent Monte Carlo data: the Fourier transform of the direct run's curves.

Data: amplitude and phase at 6 distances (10–20 mm) and 100, 200, 300 MHz from the direct
Monte Carlo run of ``fixtures/mc_td_half_space.npz`` (μs′ = 1.2 /mm, g = 0.8, n = 1.4), made
relative (× 3.7) with 0.5 % noise and shifted by an unknown system phase with 0.2° noise, the
SD columns saying so; twelve copies per case as twelve "wavelengths".  The lookup fitting them
is built from the other Monte Carlo fixture (the baseline), so this is a test on independent
data; the Monte Carlo run's own noise is far below 0.5 % in the transform (it sums the whole
curve).
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

import td_fixture_data as fixture
from phantomlab.calibration.fd_measurements import read_fd
from phantomlab.calibration.fit_fd import fit_fd
from phantomlab.errors import PhantomlabWarning
from phantomlab.transport.montecarlo import load_baseline

pytestmark = pytest.mark.skipif(not (fixture.FIXTURES / "mc_td_half_space.npz").is_file(),
                                reason="fixtures/mc_td_half_space.npz missing: run fixtures/make_td_fixtures.py")
MUSP = 1.2
RHO = (10.0, 12.0, 14.0, 16.0, 18.0, 20.0)
FREQ = (100.0, 200.0, 300.0)


def _file(run, mua, rng, copies=12, distances=RHO):
    rows = ["wavelength_nm,rho_mm,frequency_mhz,amplitude,phase_deg,amplitude_sd,phase_sd_deg"]
    values, sd = fixture.absorbed(run, mua)
    step = float(run["time_ps"][1] - run["time_ps"][0])
    exact = {}
    for rho in distances:
        curve, _ = fixture.point_value(run, values, sd, rho)
        for f in FREQ:
            exact[rho, f] = np.sum(curve * np.exp(-2j * math.pi * f * 1e-6 * run["time_ps"])) * step
    for copy in range(copies):
        for rho in distances:
            for f in FREQ:
                amp = 3.7 * abs(exact[rho, f]) * (1 + 0.005 * rng.standard_normal())
                phase = -math.degrees(np.angle(exact[rho, f])) + 17.0 + 0.2 * rng.standard_normal()
                rows.append(f"{700 + copy},{rho:g},{f:g},{amp:.8e},{phase:.5f},{0.005 * amp:.4e},0.2")
    return read_fd("\n".join(rows) + "\n", sidecar={"n": 1.4, "amplitude": "relative"})


@pytest.fixture(scope="module")
def run():
    return fixture.half_space()


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize("model", ["kienle1997", "mc"])
@pytest.mark.parametrize("ratio", [30.0, 100.0, 300.0])
def test_fd_recovery_on_the_transform_of_direct_runs(run, model, ratio):
    baseline = load_baseline(fixture.FIXTURES / "mc_baseline.npz") if model == "mc" else None
    rng = np.random.default_rng(int(ratio))
    mua = MUSP / ratio
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        fit = fit_fd(_file(run, mua, rng), model=model, baseline=baseline)
    mua_err = fit.mua_per_mm / mua - 1
    musp_err = fit.musp_per_mm / MUSP - 1
    print(f"{model} ratio {ratio:g}: mua {100 * np.median(mua_err):+.2f} % (SD {100 * np.median(fit.mua_sd_per_mm) / mua:.2f} %), "
          f"musp {100 * np.median(musp_err):+.2f} % (SD {100 * np.median(fit.musp_sd_per_mm) / MUSP:.2f} %), "
          f"chi2 {fit.chi2_red:.2f}")
    if model == "mc":
        # the lookup: the copies' median within the acceptance's 3 % / 2 %, and the SDs, scaled by
        # √χ²_red where it exceeds 1 (the lookup's own noise shows as excess χ²; the central
        # fit-quality verdict applies that Birge factor), covering the truth
        assert abs(np.median(mua_err)) <= 0.03 and abs(np.median(musp_err)) <= 0.02
        birge = np.sqrt(np.maximum(fit.chi2_red_per_wavelength, 1.0))
        z = np.concatenate([(fit.mua_per_mm - mua) / (birge * fit.mua_sd_per_mm),
                            (fit.musp_per_mm - MUSP) / (birge * fit.musp_sd_per_mm)])
        assert np.mean(np.abs(z) <= 2) >= 0.9
    else:
        # diffusion (the default until the cached baseline lands): its bias on Monte Carlo data,
        # as measured (μa 2–3 % low, μs′ within +2.2 %)
        assert -0.04 < np.median(mua_err) < 0.0 and abs(np.median(musp_err)) < 0.03
    assert np.all(np.abs(np.median(fit.phase_offset_deg, axis=0) - 17.0) < 1.0)
    # the system phase's SD (fd_offsets.py), as the page and the command line print it: measured
    # (8 copies, μs′/μa 30–1000): 92–100 % within 2 SD with the lookup, 100 % with diffusion; the
    # mean's own SD alone (0.082°) held 42–75 % and 12–54 %
    from phantomlab.calibration.fit_quality import assess_fit

    assessed = assess_fit(fit)
    z = (assessed.phase_offset_deg - 17.0) / assessed.phase_offset_sd_deg
    assert np.mean(np.abs(z) <= 2) >= 0.9, (assessed.phase_offset_deg, assessed.phase_offset_sd_deg)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize("distances", [(10.0, 12.0, 14.0, 16.0, 18.0, 20.0), (10.0, 11.0, 12.0, 13.0, 14.0),
                                       (10.0, 14.0, 20.0)])
def test_diffusion_fd_sds_hold_diffusions_own_error(run, distances):
    """Diffusion's error is part of its SDs (``diffusion_model_error``): ≥ 90 % within 2 SD.

    Without it the data SDs alone covered 31–68 % of the copies (μa −12 % at μs′/μa 1000 and
    μs′ +10 % at 10, with SDs of 1–3 %); with it 90–97 % (measured when the term was set).
    """
    from phantomlab.calibration.fit_quality import assess_fit

    inside = total = 0
    for ratio in (10.0, 30.0, 100.0, 300.0, 1000.0):
        mua = MUSP / ratio
        data = _file(run, mua, np.random.default_rng(int(ratio)), copies=8, distances=distances)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            fit = assess_fit(fit_fd(data, model="kienle1997"))
        assert "diffusion_model_error" in fit.sd_includes
        for values, sd, truth in ((fit.mua_per_mm, fit.mua_sd_per_mm, mua), (fit.musp_per_mm, fit.musp_sd_per_mm, MUSP)):
            inside += int(np.sum(np.abs(values - truth) <= 2 * sd))
            total += values.size
    assert inside / total >= 0.90, inside / total


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_an_fd_lookup_fit_in_a_far_basin_is_started_again():
    """μs′/μa = 10 at 10–15 mm, the transform of the gated low-noise run (fixtures/mc_td_half_space_early.npz).

    From the diffusion grid's start the lookup stopped in a far basin for some copies: measured
    before the restart, μa up to +97 % and μs′ −51 % on this baseline, 60 % of the values within
    2 SD.
    """
    baseline = load_baseline(fixture.FIXTURES / "mc_baseline.npz")
    mua = MUSP / 10.0
    fit = fit_fd(_file(fixture.half_space_early(), mua, np.random.default_rng(5), copies=10,
                       distances=(10.0, 11.0, 12.0, 13.0, 14.0, 15.0)), model="mc", baseline=baseline)
    assert np.all(np.abs(fit.mua_per_mm / mua - 1) < 0.15) and np.all(np.abs(fit.musp_per_mm / MUSP - 1) < 0.15)
    birge = np.sqrt(np.maximum(fit.chi2_red_per_wavelength, 1.0))
    z = np.concatenate([(fit.mua_per_mm - mua) / (birge * fit.mua_sd_per_mm),
                        (fit.musp_per_mm - MUSP) / (birge * fit.musp_sd_per_mm)])
    assert np.mean(np.abs(z) <= 2) >= 0.85, z
    # copies stopped on the step where the lookup's photons began: a difference across it had
    # claimed μs′ SDs of 0.01–0.02 % (two copies here) beside the others' 5–6 %; the lookup now
    # rises over a ramp there (mc_lookup_time_table.front_ramp): no copy stops on a step
    assert np.all(fit.musp_sd_per_mm / MUSP > 0.01), fit.musp_sd_per_mm
    assert not any("step of the model" in w for w in fit.warnings), fit.warnings


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_the_phase_offset_sd_matches_the_spread_of_its_fits():
    """The linear algebra of fd_offsets.py, on data the model describes exactly (kienle1997 data
    fitted with kienle1997, 0.5 % and 0.2° noise, 64 copies, offset 17°): the offsets' spread is
    their SD (ratio 0.8–1.25), which the mean's own SD (1/√Σw, without the offset's share of μa
    and μs′) understates 1.5–3-fold here (100–300 MHz)."""
    from phantomlab.transport.frequency_domain import amplitude_and_phase

    rng = np.random.default_rng(64)
    rho = np.array([10.0, 12.0, 14.0, 16.0, 18.0, 20.0])
    amp, phase = amplitude_and_phase(mua_per_mm=0.012, musp_per_mm=1.2, rho_mm=rho[:, None],
                                     frequency_mhz=np.array(FREQ)[None, :], n=1.4)
    rows = ["wavelength_nm,rho_mm,frequency_mhz,amplitude,phase_deg,amplitude_sd,phase_sd_deg"]
    for copy in range(64):
        noisy_amp = 2.0 * amp * (1 + 0.005 * rng.standard_normal(amp.shape))
        noisy_phase = phase + 17.0 + 0.2 * rng.standard_normal(phase.shape)
        rows += [f"{700 + copy},{r:g},{f:g},{a:.8e},{p:.5f},{0.005 * a:.4e},0.2"
                 for r, ar, pr in zip(rho, noisy_amp, noisy_phase) for f, a, p in zip(FREQ, ar, pr)]
    fit = fit_fd(read_fd("\n".join(rows) + "\n", sidecar={"n": 1.4, "amplitude": "relative"}), model="kienle1997")
    spread = np.std(fit.phase_offset_deg, axis=0, ddof=1)
    sd = np.median(fit.phase_offset_sd_deg, axis=0)
    assert np.all((0.8 < spread / sd) & (spread / sd < 1.25)), (spread, sd)
    mean_only = 0.2 / math.sqrt(rho.size)
    assert np.all(spread > 1.4 * mean_only), (spread, mean_only)
