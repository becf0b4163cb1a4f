"""The DEFAULT srdr and sfdi fit (no model named) on independent Monte Carlo data.

Reference data: direct runs of the project's Monte Carlo engine at each medium (weighted
estimator, the medium's own μa and μs, the measurement's own radial bins, seeds 3001+ and
3101+; ``fixtures/make_default_fit_fixtures.py``), which the default model — a lookup that
re-weights and scales one stored analog baseline per (g, n) (Graaff et al. 1993, Appl Opt
32:426; Kienle & Patterson 1996, Phys Med Biol 41:2221) — never saw.  20 media: μs′/μa = 10,
30, 100, 300, 1000 × n = 1.33, 1.43 × g = 0.7, 0.9; 40 distances from 1 mm to
min(20 mm, 4.5/μ_eff); sfdi at fx = 0-0.3 /mm.  The tests add the measurement noise with
fixed seeds (the fixtures' own photon SEs stay in the data and in their SD column).

Tolerances (issue 11): absolute data within 3 % (μa) and 2 % (μs′), relative data within
6 % and 3 %.  Held in two ways: the fit of each noiseless independent curve (the model's own
accuracy), and six noisy copies at 1 % noise, each within the tolerance or, where the
design's statistical SD of a copy exceeds 30 % of it (high albedo; sfdi μa), within 3.5 of
its SDs, and their mean within the tolerance or 3 SDs of a mean.
"""

import json
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration import fit_measurement_file

FIXTURES = Path(__file__).parent / "fixtures"
COPIES = 6


@pytest.fixture(scope="module")
def srdr_cases():
    data = np.load(FIXTURES / "mc_default_srdr.npz")
    return {key: data[key] for key in data.files}


@pytest.fixture(scope="module")
def sfdi_cases():
    data = np.load(FIXTURES / "mc_default_sfdi.npz")
    return {key: data[key] for key in data.files}


def _srdr_csv(cases, case, *, noise, seed, relative):
    rho, R, se = cases["rho_mm"][case], cases["reflectance_per_mm2"][case], cases["sd"][case]
    rng = np.random.default_rng(seed)
    scale = 37.5 if relative else 1.0  # an instrument's unknown gain
    column = "reflectance_relative" if relative else "reflectance_per_mm2"
    lines = [f"wavelength_nm,rho_mm,{column},sd"]
    sd = np.sqrt((noise * R) ** 2 + se**2)
    for copy in range(COPIES):  # each copy a "wavelength" of its own: fitted independently
        values = R * (1.0 + noise * rng.standard_normal(R.size))
        for r, v, s in zip(rho, values, sd):
            lines.append(f"{600 + 10 * copy},{r:.6g},{scale * v:.9g},{scale * s:.6g}")
    return "\n".join(lines) + "\n"


def _fit_srdr(cases, case, **kw):
    text = _srdr_csv(cases, case, **kw)
    # the fixture's values are ring averages between the distances' midpoints (make_default_fit_fixtures.py)
    return fit_measurement_file(text, kind="srdr", n=float(cases["n"][case]), g=float(cases["g"][case]),
                                detector="ring")


def _errors(fit, mua, musp):
    return fit.mua_per_mm / mua - 1.0, fit.musp_per_mm / musp - 1.0


CASES = range(20)
def _tolerances(relative):
    return (0.06, 0.03) if relative else (0.03, 0.02)


def _hold_copies(e_mua, e_musp, fit, mua, musp, tol_mua, tol_musp):
    """Each copy within the tolerance or 3.5 of its SDs; their mean within it or 3 SDs of a mean.

    3.5 SD for single copies: over the 40 srdr and 20 sfdi case sets (about 700 fitted values)
    a normal error passes 3 SD about twice by chance, 3.5 SD about once in three runs.
    """
    for errors, sd, tol, name in ((e_mua, fit.mua_sd_per_mm / mua, tol_mua, "mua"),
                                  (e_musp, fit.musp_sd_per_mm / musp, tol_musp, "musp")):
        assert np.all(np.abs(errors) < np.maximum(tol, 3.5 * sd)), (name, np.round(100 * errors, 2),
                                                                     np.round(100 * sd, 2))
        mean_allowed = max(tol, 3.0 * float(np.sqrt(np.mean(sd**2) / errors.size)))
        assert abs(np.mean(errors)) < mean_allowed, (name, np.mean(errors), mean_allowed)


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("relative", [False, True], ids=["absolute", "relative"])
def test_default_srdr_fit_of_the_noiseless_curve_is_within_the_tolerance(srdr_cases, case, relative):
    """The model's own accuracy: the independent run's curve as measured (its photon SEs as the SD).

    Relative data at μs′/μa = 10 (μs′ = 0.5 /mm, 0.5-8 transport lengths) rest on the shape
    within a few transport lengths of the source.  Until the lookup smoothed its table there
    (``lookup_smoothing.smooth_near``, 0.2-5 transport lengths), this fit landed μa +7 % for
    two of the four media (cases 0 and 15): the million-photon table's 1-1.4 % node noise
    near the source, and the wide local-line kernel at one transport length that this noise
    called for, bent the curve there (a 4-million-photon baseline gave +1.8 %).  Measured
    now: μa +2.7, −3.6, −3.3, +3.3 % for cases 0, 5, 10, 15 (SDs 1.4-2.0 %), μs′ within 2.3 %.
    """
    mua, musp = float(srdr_cases["mua_per_mm"][case]), float(srdr_cases["musp_per_mm"][case])
    fit = _fit_srdr(srdr_cases, case, noise=0.0, seed=1, relative=relative)
    e_mua, e_musp = _errors(fit, mua, musp)
    tol_mua, tol_musp = _tolerances(relative)
    assert abs(e_mua[0]) < tol_mua and abs(e_musp[0]) < tol_musp, (100 * e_mua[0], 100 * e_musp[0])


@pytest.mark.parametrize("case", CASES)
@pytest.mark.parametrize("relative", [False, True], ids=["absolute", "relative"])
def test_default_srdr_fit_recovers_independent_monte_carlo(srdr_cases, case, relative, record_property):
    # six noisy copies (1 % noise): their mean within the tolerance, and each copy within it
    # or, where the design's own SD is large (high albedo: the data's noise, the fixture's
    # photon SEs up to 2 % and the lookup's own at far distances), within 3.5 of its SDs
    mua, musp = float(srdr_cases["mua_per_mm"][case]), float(srdr_cases["musp_per_mm"][case])
    fit = _fit_srdr(srdr_cases, case, noise=0.01, seed=100 + case, relative=relative)
    assert fit.model == "mc-lookup"  # the default, with no model named
    assert fit.extras["g_used"] == pytest.approx(float(srdr_cases["g"][case]))
    assert fit.extras["g_origin"] == "option" and fit.extras["baseline_origin"] == "cache"
    e_mua, e_musp = _errors(fit, mua, musp)
    record_property("worst_mua_musp", (float(np.max(np.abs(e_mua))), float(np.max(np.abs(e_musp)))))
    _hold_copies(e_mua, e_musp, fit, mua, musp, *_tolerances(relative))


@pytest.mark.parametrize("case", [4, 14])
@pytest.mark.parametrize("relative", [False, True], ids=["absolute", "relative"])
def test_default_srdr_fit_at_two_percent_noise(srdr_cases, case, relative):
    # the same rule at 2 % noise, at μs′/μa = 1000 (where the noise weighs most)
    mua, musp = float(srdr_cases["mua_per_mm"][case]), float(srdr_cases["musp_per_mm"][case])
    fit = _fit_srdr(srdr_cases, case, noise=0.02, seed=300 + case, relative=relative)
    e_mua, e_musp = _errors(fit, mua, musp)
    _hold_copies(e_mua, e_musp, fit, mua, musp, *_tolerances(relative))


def _sfdi_csv(cases, case, *, noise, seed):
    fx, R, se = cases["fx_per_mm"], cases["reflectance"][case], cases["sd"][case]
    rng = np.random.default_rng(seed)
    sd = np.sqrt((noise * R) ** 2 + se**2)
    lines = ["wavelength_nm,fx_per_mm,reflectance,sd"]
    for copy in range(COPIES):
        values = R * (1.0 + noise * rng.standard_normal(R.size))
        for f, v, s in zip(fx, values, sd):
            lines.append(f"{600 + 10 * copy},{f:.6g},{v:.9g},{s:.6g}")
    return "\n".join(lines) + "\n"


def _fit_sfdi(cases, case, *, noise, seed):
    text = _sfdi_csv(cases, case, noise=noise, seed=seed)
    return fit_measurement_file(text, kind="sfdi", n=float(cases["n"][case]), g=float(cases["g"][case]))


@pytest.mark.parametrize("case", CASES)
def test_default_sfdi_fit_of_the_noiseless_curve_is_within_the_tolerance(sfdi_cases, case):
    mua, musp = float(sfdi_cases["mua_per_mm"][case]), float(sfdi_cases["musp_per_mm"][case])
    fit = _fit_sfdi(sfdi_cases, case, noise=0.0, seed=1)
    assert fit.model == "mc-lookup"
    e_mua, e_musp = _errors(fit, mua, musp)
    assert abs(e_mua[0]) < 0.03 and abs(e_musp[0]) < 0.02, (100 * e_mua[0], 100 * e_musp[0])


@pytest.mark.parametrize("case", CASES)
def test_default_sfdi_fit_recovers_independent_monte_carlo(sfdi_cases, case, record_property):
    # the rule of the srdr copies (absolute tolerances).  At fx <= 0.3 /mm and high albedo
    # μa acts on R(fx) only weakly (the SD of one copy reaches 3-8 % at μs′/μa = 100-1000
    # with 1 % noise): there the SD part of the rule applies
    mua, musp = float(sfdi_cases["mua_per_mm"][case]), float(sfdi_cases["musp_per_mm"][case])
    fit = _fit_sfdi(sfdi_cases, case, noise=0.01, seed=500 + case)
    e_mua, e_musp = _errors(fit, mua, musp)
    record_property("worst_mua_musp", (float(np.max(np.abs(e_mua))), float(np.max(np.abs(e_musp)))))
    _hold_copies(e_mua, e_musp, fit, mua, musp, 0.03, 0.02)


def test_the_command_line_default_is_the_lookup_and_states_its_inputs(srdr_cases, tmp_path, capsys):
    from phantomlab.cli import main

    case = 12
    (tmp_path / "probe.csv").write_text(_srdr_csv(srdr_cases, case, noise=0.01, seed=7, relative=False))
    (tmp_path / "probe.toml").write_text(f"n = {float(srdr_cases['n'][case])}\n")
    g = float(srdr_cases["g"][case])
    assert main(["fit", str(tmp_path / "probe.csv"), "--kind", "srdr", "--g", f"{g}", "--json"]) == 0
    payload = json.loads(capsys.readouterr().out)
    assert payload["model"] == "mc-lookup"
    assert (payload["n_used"], payload["n_origin"]) == (pytest.approx(float(srdr_cases["n"][case])), "sidecar")
    assert (payload["n_outside_used"], payload["n_outside_origin"]) == (1.0, "default")
    assert payload["g_origin"] == "option" and payload["baseline"].endswith("baseline-g0.90-n1.330-out1.000.npz")
    assert payload["baseline_origin"] == "cache"
    assert "g_note" in payload


def _g_effect(srdr_cases):
    """Half the log ratio of R at g = 0.9 and 0.7 (same μs′, μa, n, distances), per ρμs′, all pairs."""
    out = []
    for low in range(10):  # cases 0-9 at g = 0.7, 10-19 the same media at g = 0.9
        high = low + 10
        assert srdr_cases["g"][low] == 0.7 and srdr_cases["g"][high] == 0.9
        assert srdr_cases["mua_per_mm"][low] == srdr_cases["mua_per_mm"][high]
        x = srdr_cases["rho_mm"][low] * srdr_cases["musp_per_mm"][low]
        y = 0.5 * np.abs(np.log(srdr_cases["reflectance_per_mm2"][high] / srdr_cases["reflectance_per_mm2"][low]))
        out.append((x, y))
    return out


def test_the_g_note_states_what_the_independent_runs_measure(srdr_cases):
    # fit_inputs.G_SENSITIVITY_PER_0_1 is how much R moves per 0.1 of g at each distance in
    # transport lengths: the largest half log ratio R(g = 0.9)/R(g = 0.7) over the ten pairs
    # of fixture media, at or above it and within 1.5x + 0.3 % of it (photon noise included)
    from phantomlab.calibration.fit_inputs import G_SENSITIVITY_PER_0_1, G_SENSITIVITY_TRANSPORT_LENGTHS

    pairs = _g_effect(srdr_cases)
    for node, stated in zip(G_SENSITIVITY_TRANSPORT_LENGTHS, G_SENSITIVITY_PER_0_1):
        measured = max(float(np.interp(np.log(node), np.log(x), y)) for x, y in pairs if x[0] <= node * 1.0001)
        assert measured <= stated <= 1.5 * measured + 0.003, (node, measured, stated)
