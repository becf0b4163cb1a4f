"""Recovery of μa and μs′ from independent Monte Carlo time-resolved data (issue 14 acceptance).

Data: the direct Monte Carlo run of ``fixtures/mc_td_half_space.npz`` (μs′ = 1.2 /mm, g = 0.8,
n = 1.4, not the baseline the lookup is built from) seen through an IRF of 100–300 ps FWHM,
delayed by an unknown t0, at 10⁵–10⁶ counts at the peak, with Poisson noise
(``td_fixture_data.py``).  Twenty noisy copies of each case go into one file as twenty
"wavelengths" (one fit call).

Two sources of error are told apart: the expected counts λ carry the Monte Carlo run's own
photon noise, which every copy of a case shares.  Its effect on the fitted values (SD_ref) is
measured by fitting λ perturbed by that noise; a copy's error is then compared with
√(SD_fit² + SD_ref²).  The acceptance: μa within 3 %, μs′ within 2 % for every copy; at least
90 % of the copies within 2 of those SDs.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import td_fixture_data as fixture
from phantomlab.calibration.fit_td import fit_td
from phantomlab.calibration.td_measurements import irf_table, read_td
from phantomlab.errors import PhantomlabWarning
from phantomlab.transport.montecarlo import load_baseline

pytestmark = pytest.mark.skipif(not (fixture.FIXTURES / "mc_td_half_space.npz").is_file(),
                                reason="fixtures/mc_td_half_space.npz missing: run fixtures/make_td_fixtures.py")

MUSP = 1.2  # the run's μs′ [1/mm]
#: (μs′/μa, ρ [mm], IRF FWHM [ps], t0 [ps], counts at the peak); 10-ps bins
CASES = [
    (100.0, 15.0, 300.0, 210.0, 1e5),
    (300.0, 15.0, 150.0, 35.0, 1e6),
    (1000.0, 20.0, 250.0, 165.0, 1e5),
]
#: Low albedo: the lookup's own noise (2.3 million photons) leaves μs′ an SD above the 2 %
#: tolerance there; the test holds the SDs to coverage instead.
LOW_ALBEDO = [(30.0, 15.0, 200.0, 60.0, 1e6)]
COPIES = 20
PERTURBED = 12


@pytest.fixture(scope="module")
def run():
    return fixture.half_space()


@pytest.fixture(scope="module")
def baseline():
    return load_baseline(fixture.FIXTURES / "mc_baseline.npz")


def _measurement(curve, rows):
    curves = {(700.0 + i, curve_rho): counts for i, (curve_rho, counts) in enumerate(rows)}
    irf_counts = np.round(curve.irf / curve.irf.max() * 1e8)  # the IRF measured with far more counts
    return read_td(fixture.td_csv(curves, curve.time_ps),
                   sidecar={"n": 1.4, "irf": irf_table(curve.irf_time_ps, irf_counts)})


def _fit(measurement, model, baseline):
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        return fit_td(measurement, model=model, baseline=baseline if model == "mc" else None)


def _case(run, baseline, model, case, seed):
    ratio, rho, fwhm, shift, peak = case
    mua = MUSP / ratio
    curve = fixture.instrument_curve(run, mua_per_mm=mua, rho_mm=rho, fwhm_ps=fwhm, shift_ps=shift,
                                     peak_counts=peak, window_ps=(0.0, 5000.0))
    rng = np.random.default_rng(seed)
    copies = _fit(_measurement(curve, [(rho, rng.poisson(curve.lam)) for _ in range(COPIES)]), model, baseline)
    perturbed = _fit(_measurement(curve, [(rho, curve.lam + curve.lam_sd * rng.standard_normal(curve.lam.size))
                                          for _ in range(PERTURBED)]), model, baseline)
    return mua, copies, perturbed


def _check(run, baseline, model, cases=CASES, tolerances=True):
    report = []
    inside = total = 0
    for k, case in enumerate(cases):
        mua, copies, perturbed = _case(run, baseline, model, case, seed=4000 + k)
        for name, truth, tolerance in (("mua", mua, 0.03), ("musp", MUSP, 0.02)):
            values = getattr(copies, f"{name}_per_mm")
            sd = getattr(copies, f"{name}_sd_per_mm")
            sd_ref = float(np.std(getattr(perturbed, f"{name}_per_mm"), ddof=1))
            error = values / truth - 1
            z = (values - truth) / np.sqrt(sd**2 + sd_ref**2)
            inside += int(np.sum(np.abs(z) <= 2))
            total += values.size
            report.append(f"ratio {case[0]:g} {name}: error {100 * np.median(error):+.2f} % "
                          f"(worst {100 * error[np.argmax(np.abs(error))]:+.2f} %), SD {100 * np.median(sd) / truth:.2f} %, "
                          f"SD_ref {100 * sd_ref / truth:.2f} %, |z|<=2 {np.mean(np.abs(z) <= 2):.0%}")
            if tolerances:
                assert np.all(np.abs(error) <= tolerance), report[-1]
    print("\n".join(report))
    assert inside / total >= 0.90, (inside / total, report)
    return report


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_recovery_with_the_monte_carlo_lookup(run, baseline):
    _check(run, baseline, "mc")


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_low_albedo_sds_cover_the_truth(run, baseline):
    _check(run, baseline, "mc", LOW_ALBEDO, tolerances=False)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_diffusion_bias_on_monte_carlo_data_stays_as_measured(run, baseline):
    """The default model until the cached baseline lands (kienle1997): its bias, measured here.

    Diffusion misses the Monte Carlo curves' shape by a few per cent (early photons, the
    boundary), which the fit turns into μa low by 3–4 % and μs′ low by 2–5 % at μs′/μa =
    100–1000 (10-ps bins, window from half the peak): beyond the acceptance's 3 %/2 % and beyond
    its SDs.  This test holds that measured envelope, so that a change shows.
    """
    for k, case in enumerate(CASES):
        mua, copies, _ = _case(run, baseline, "kienle1997", case, seed=4000 + k)
        mua_error = np.median(copies.mua_per_mm) / mua - 1
        musp_error = np.median(copies.musp_per_mm) / MUSP - 1
        assert -0.06 < mua_error < 0.0 and -0.07 < musp_error < 0.0, (case, mua_error, musp_error)


def _default_fit(curve, rows, **sidecar):
    """The default command's fit (no model named), through the session's test cache."""
    from phantomlab.calibration.fit_file import fit_measurement_file

    curves = {(700.0 + i, curve_rho): counts for i, (curve_rho, counts) in enumerate(rows)}
    irf_counts = np.round(curve.irf / curve.irf.max() * 1e8)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        return fit_measurement_file(fixture.td_csv(curves, curve.time_ps), kind="td",
                                    sidecar={"n": 1.4, "g": 0.8, "irf": irf_table(curve.irf_time_ps, irf_counts),
                                             **sidecar})


def test_the_default_td_fit_is_the_lookup_on_the_cached_baseline_and_says_so(run):
    """Independent data (fixtures/mc_td_half_space.npz, seed 3001) at μs′/μa = 300, ρ 15 mm, IRF 150 ps.

    The session cache holds the stored 2.5-million-photon test baseline as the td/fd cache file
    (tests/conftest.py), so the default fit must use the lookup, name it, and recover the truth
    within the acceptance's 3 % (μa) / 2 % (μs′).
    """
    ratio, rho, fwhm, shift, peak = CASES[1]
    curve = fixture.instrument_curve(run, mua_per_mm=MUSP / ratio, rho_mm=rho, fwhm_ps=fwhm, shift_ps=shift,
                                     peak_counts=peak, window_ps=(0.0, 5000.0))
    rng = np.random.default_rng(4100)
    fit = _default_fit(curve, [(rho, rng.poisson(curve.lam)) for _ in range(4)])
    assert fit.model == "mc-lookup"
    assert fit.extras["model_note"].startswith("td model: the Monte Carlo lookup")
    assert fit.extras["baseline"].endswith("baseline-g0.80-n1.400-out1.000-time.npz")
    assert np.all(np.abs(fit.mua_per_mm / (MUSP / ratio) - 1) <= 0.03)
    assert np.all(np.abs(fit.musp_per_mm / MUSP - 1) <= 0.02)


def test_the_default_td_fit_falls_back_to_diffusion_with_a_note_where_the_lookup_does_not_apply(run):
    """A slab (thickness given): the half-space lookup does not apply; the fit says diffusion and why."""
    ratio, rho, fwhm, shift, peak = CASES[1]
    curve = fixture.instrument_curve(run, mua_per_mm=MUSP / ratio, rho_mm=rho, fwhm_ps=fwhm, shift_ps=shift,
                                     peak_counts=peak, window_ps=(0.0, 5000.0))
    rng = np.random.default_rng(4101)
    fit = _default_fit(curve, [(rho, rng.poisson(curve.lam))], thickness_mm=60.0)
    assert fit.model == "diffusion-kienle1997"
    assert "instead of the default Monte Carlo model, because" in fit.extras["model_note"]
    assert "60 mm slab" in fit.extras["model_note"]


def test_an_explicit_lookup_beyond_its_photons_is_refused_in_one_line(run):
    """At 20 mm with the window to 1 % of the peak but a tiny baseline, the lookup cannot serve: refused, not fitted."""
    from phantomlab.calibration.mc_lookup_time import LookupReachError
    from phantomlab.transport.montecarlo import build_baseline

    small = build_baseline(mua_per_mm=0.002, mus_per_mm=10.0, g=0.8, n=1.4, photons=3000, seed=11)
    ratio, rho, fwhm, shift, peak = CASES[2]
    curve = fixture.instrument_curve(run, mua_per_mm=MUSP / ratio, rho_mm=rho, fwhm_ps=fwhm, shift_ps=shift,
                                     peak_counts=peak, window_ps=(0.0, 5000.0))
    measurement = _measurement(curve, [(rho, np.random.default_rng(5).poisson(curve.lam))])
    with pytest.raises(LookupReachError, match="does not serve these data"):
        _fit(measurement, "mc", small)


#: μs′/μa = 10 at 10–12 mm, 10⁶ counts (the gated low-noise run): the lookup's rising edge,
#: smoothed along τ/u (mc_lookup_time_table.py).  Smoothed at fixed s as before, the same
#: copies on this baseline gave medians of μs′ −2.6/−7.4/−4.2 % and μa −1.2/−2.9/−1.6 %
#: (now −1.0/−1.8/−1.0 % and −0.5/−1.1/−0.3 %).
STRONG = [(10.0, 10.0, 100.0, 60.0, 1e6), (10.0, 12.0, 150.0, 120.0, 1e6), (10.0, 11.0, 200.0, 90.0, 1e6)]


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_strong_absorption_is_recovered_without_bias_and_covered(baseline):
    """Independent data: ``fixtures/mc_td_half_space_early.npz`` (seed 3301), 20 Poisson copies a case.

    Each case's median error within the acceptance (μa 3 %, μs′ 2 %) and 90 % of the copies
    within 2 SD (with the reference run's own noise, SD_ref, as in :func:`_check`).  Single
    copies reach μs′ −3 to −4 % here: the copies' own spread is 0.75–1.8 % (the counts'
    information at this albedo), so a per-copy 2 % is out of reach at 10⁶ counts.  The SDs
    cover them and are not needlessly wide: the median SD at most three times the copies' rms
    error.  Where the IRF is about as wide as the rise (11 mm, IRF 200 ps) the lookup's share
    comes from refits (td_lookup_refits.py); before, kept linear and unaveraged, μs′ read 21 %
    at 10 mm and 62 % at 11 mm against errors of 1–4 % (averaged, two of four independent
    lookups' fits at IRF 300 ps had lain 7–10 SD off).
    """
    run = fixture.half_space_early()
    inside = total = 0
    report = []
    for k, (ratio, rho, fwhm, shift, peak) in enumerate(STRONG):
        mua = MUSP / ratio
        curve = fixture.instrument_curve(run, mua_per_mm=mua, rho_mm=rho, fwhm_ps=fwhm, shift_ps=shift,
                                         peak_counts=peak, window_ps=(0.0, 1400.0))
        rng = np.random.default_rng(4500 + k)
        copies = _fit(_measurement(curve, [(rho, rng.poisson(curve.lam)) for _ in range(COPIES)]), "mc", baseline)
        perturbed = _fit(_measurement(curve, [(rho, curve.lam + curve.lam_sd * rng.standard_normal(curve.lam.size))
                                              for _ in range(PERTURBED)]), "mc", baseline)
        for name, truth, tolerance in (("mua", mua, 0.03), ("musp", MUSP, 0.02)):
            values = getattr(copies, f"{name}_per_mm")
            sd = np.hypot(getattr(copies, f"{name}_sd_per_mm"), np.std(getattr(perturbed, f"{name}_per_mm"), ddof=1))
            error = values / truth - 1
            inside += int(np.sum(np.abs(values - truth) <= 2 * sd))
            total += values.size
            rms = float(np.sqrt(np.mean(error**2)))
            report.append(f"{rho:g} mm {name}: median {100 * np.median(error):+.2f} %, rms {100 * rms:.2f} %, "
                          f"median SD {100 * np.median(sd) / truth:.2f} %")
            assert abs(np.median(error)) <= tolerance, report
            assert np.median(sd) / truth <= 3.0 * rms, report
    print("\n".join(report))
    assert inside / total >= 0.90, (inside / total, report)


#: Strong absorption far out (μs′/μa = 10 at 12 mm): the short diffusion start (its shape and
#: time shift off by the early photons) left the first pass in a far basin: measured before the
#: restart, μs′ +15 % (up to +34 %) on this baseline.  (At 15 mm it stopped at +106 %, χ²ᵣ 1196;
#: there the lookup itself now prefers a false basin: test_at_fifteen_mm_a_strongly_absorbed_curve_…)
FAR_STRONG = [(10.0, 12.0, 150.0, 120.0, 1e6)]


@pytest.mark.parametrize("case", FAR_STRONG)
def test_a_lookup_fit_that_stops_in_a_far_basin_is_started_again(case, baseline):
    """Independent data: the gated low-noise run ``fixtures/mc_td_half_space_early.npz`` (seed 3301)."""
    ratio, rho, fwhm, shift, peak = case
    run = fixture.half_space_early()
    curve = fixture.instrument_curve(run, mua_per_mm=MUSP / ratio, rho_mm=rho, fwhm_ps=fwhm, shift_ps=shift,
                                     peak_counts=peak, window_ps=(0.0, 1000.0))
    rng = np.random.default_rng(3)
    fit = _fit(_measurement(curve, [(rho, rng.poisson(curve.lam)) for _ in range(10)]), "mc", baseline)
    error = fit.musp_per_mm / MUSP - 1
    assert np.all(np.abs(error) < 0.15), error
    assert np.all(np.abs(fit.musp_per_mm - MUSP) < 2.5 * fit.musp_sd_per_mm), (fit.musp_per_mm, fit.musp_sd_per_mm)
    assert np.all(fit.chi2_red_per_wavelength < 5.0), fit.chi2_red_per_wavelength


def _profile_along_musp(baseline, curve, rho, mua, relative_steps):
    """χ² of the expected counts along μs′ (μa fixed, amplitude and time shift best at each):
    the lookup (TimeResolvedLookup.curves) seen through the IRF (prepare_irf), nothing of fit_td."""
    from scipy.optimize import minimize_scalar

    from phantomlab.calibration.mc_lookup_time import time_resolved_lookup
    from phantomlab.transport.convolution import prepare_irf

    lookup = time_resolved_lookup(baseline)
    response = prepare_irf(time_ps=curve.time_ps, irf_time_ps=curve.irf_time_ps, irf=curve.irf)
    data = curve.lam - 5.0  # the fixture's flat background
    window = data > 0.01 * data.max()
    weight = 1.0 / curve.lam[window]

    def chi2(musp, shift):
        mus = np.full(1, musp / (1.0 - baseline.g))
        model = response.counts(lambda t: lookup.curves(mua_per_mm=np.full(1, mua), mus_per_mm=mus, rho_mm=[rho],
                                                        time_ps=t), np.atleast_1d(shift), smooth_start=True)[0][window]
        amplitude = np.sum(weight * model * data[window]) / np.sum(weight * model * model)
        return float(np.sum(weight * (amplitude * model - data[window]) ** 2))

    return np.array([minimize_scalar(lambda shift: chi2(MUSP * (1 + step), shift), bounds=(60.0, 180.0),
                                     method="bounded", options={"xatol": 1e-4}).fun for step in relative_steps])


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_at_fifteen_mm_a_strongly_absorbed_curve_is_flagged_on_every_copy(baseline):
    """μs′/μa = 10 at 15 mm (IRF 100 ps, 10⁶ counts; the gated run, seed 3301; u = ρμs = 90).

    This baseline (2.3 million photons) holds so few early photons that far out that its
    lookup fits these copies better at μs′ +60 % than at the truth (measured: χ²ᵣ 1.5–3.0
    there against 2.3–3.3 when started from the truth, where μs′ comes out within 1 %); nine of
    ten copies land there, one within 0.3 %.  (The lookup's old step at its first photons kept
    them in the true basin; the 10-million-photon baseline lands all ten at −4.9 to −6.5 %.)
    No restart can mend a model that prefers the wrong answer: the fit must say so, and does,
    on every copy, whichever basin it lands in; and the copies in the false basin, whose SD
    (15 %) does not reach the truth, are told apart by the diffusion model fitted to the same
    counts (μs′ −34 % here: 2.4 times below the lookup's, td_model_errors.DIFFUSION_DISAGREEMENT).
    """
    run = fixture.half_space_early()
    curve = fixture.instrument_curve(run, mua_per_mm=MUSP / 10.0, rho_mm=15.0, fwhm_ps=100.0, shift_ps=60.0,
                                     peak_counts=1e6, window_ps=(0.0, 1000.0))
    rng = np.random.default_rng(3)
    fit = _fit(_measurement(curve, [(15.0, rng.poisson(curve.lam)) for _ in range(10)]), "mc", baseline)
    far = [w for w in fit.warnings if "lies far out" in w]
    assert far and "(10 of 10 wavelengths)" in far[0] and "far off" in far[0], fit.warnings
    off = np.abs(fit.musp_per_mm / MUSP - 1) > 0.3
    basin = [w for w in fit.warnings if "false basin" in w]
    assert off.any() == bool(basin), (fit.musp_per_mm, fit.warnings)
    if basin:  # the note names exactly the copies that lie far off
        wavelengths = fit.wavelength_nm[off]
        named = f"{wavelengths[0]:g} nm" if wavelengths.size == 1 else (
            f"{wavelengths.min():g}-{wavelengths.max():g} nm ({wavelengths.size} of 10 wavelengths)")
        assert basin[0].startswith(f"at {named} "), (basin, fit.musp_per_mm)


def test_the_lookup_rises_without_a_step_where_its_photons_begin(baseline):
    """μs′/μa = 20 at 13 mm (IRF 100 ps, 10⁶ counts; the gated low-noise run, seed 3301).

    A strongly absorbing curve is read from the lookup's earliest photons.  The table used to end
    there in a step (no light before a distance's first photon, 2–8 % of the peak after it);
    where the step crossed a time sample of the convolution the χ² jumped, and this fit stopped
    on it: its second differences along μs′ (0.2 % steps, time shift refitted) read up to 51
    against a median of 10 (Δχ² ≈ 4 per 1 % of μs′ at μs′/μa 10, 12 mm).  The lookup now rises
    over a ramp centred where the step stood (mc_lookup_time_table.front_ramp): measured
    after, the largest second difference is 1.05 times the median, and the fit does not stop
    on a step.  The SD stays the lookup's several per cent, and covers.
    """
    run = fixture.half_space_early()
    mua = MUSP / 20.0
    curve = fixture.instrument_curve(run, mua_per_mm=mua, rho_mm=13.0, fwhm_ps=100.0, shift_ps=120.0,
                                     peak_counts=1e6, window_ps=(0.0, 1400.0))
    profile = _profile_along_musp(baseline, curve, 13.0, mua, np.arange(-0.02, 0.0201, 0.002))
    second = np.abs(np.diff(profile, 2))
    assert second.max() <= 1.3 * np.median(second), second
    fit = _fit(_measurement(curve, [(13.0, curve.lam)]), "mc", baseline)
    assert not any("step of the model" in w for w in fit.warnings), fit.warnings
    assert fit.musp_sd_per_mm[0] / MUSP > 0.01, fit.musp_sd_per_mm  # the lookup's noise here: several per cent
    assert abs(fit.musp_per_mm[0] - MUSP) < 2 * fit.musp_sd_per_mm[0]
    assert abs(fit.mua_per_mm[0] - mua) < 2 * fit.mua_sd_per_mm[0]
    # the SD here is the lookup's, not the counts': said, with what a larger baseline would give
    assert any("mostly the Monte Carlo lookup's own photon noise" in w and "--photons" in w for w in fit.warnings)


def test_the_lookup_noise_note_stays_away_where_the_counts_set_the_sd(run, baseline):
    """μs′/μa = 300 at 15 mm (IRF 150 ps, 10⁶ counts): SDs under 2 %, no note."""
    ratio, rho, fwhm, shift, peak = CASES[1]
    curve = fixture.instrument_curve(run, mua_per_mm=MUSP / ratio, rho_mm=rho, fwhm_ps=fwhm, shift_ps=shift,
                                     peak_counts=peak, window_ps=(0.0, 5000.0))
    fit = _fit(_measurement(curve, [(rho, curve.lam)]), "mc", baseline)
    assert not any("own photon noise" in w for w in fit.warnings), fit.warnings


def test_a_strongly_absorbed_curve_far_out_is_flagged_where_the_lookup_reads_low(baseline):
    """Independent data: the gated run ``fixtures/mc_td_half_space_early.npz``, its expected counts.

    At μs′/μa 10 and 14 mm (u = ρμs = 79 from the fitted μs′) the lookup's fit runs low beyond what its smoothing
    bias term carries (measured: μs′ −5.9 % on this baseline, −6.5 % on a 10-million-photon one
    whose SD of 1.6 % does not cover it), and at μs′/μa 20 Poisson copies ran −3.6 to −4.7 %
    there on the larger baseline (SD 1.7 %): the fit warns (``td_model_errors.SPARSE_FRONT_U``).
    At 12 mm (u = 71; −1.7 %) it does not.  The measured size is held here too, so that a
    better front shows up as a failure of this test and the warning can go.
    """
    run = fixture.half_space_early()
    errors = {}
    for ratio, rho in ((10.0, 12.0), (10.0, 14.0), (20.0, 14.0)):
        mua = MUSP / ratio
        curve = fixture.instrument_curve(run, mua_per_mm=mua, rho_mm=rho, fwhm_ps=100.0, shift_ps=120.0,
                                         peak_counts=1e6, window_ps=(0.0, 1400.0))
        fit = _fit(_measurement(curve, [(rho, curve.lam)]), "mc", baseline)
        errors[ratio, rho] = float(fit.musp_per_mm[0] / MUSP - 1)
        flagged = any("lies far out" in w for w in fit.warnings)
        assert flagged == (rho == 14.0), (ratio, rho, fit.warnings)
    assert -0.09 <= errors[10.0, 14.0] <= -0.03, errors
    assert abs(errors[10.0, 12.0]) <= 0.03, errors
