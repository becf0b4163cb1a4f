"""Do the SDs we print cover the truth?  Coverage on independent Monte Carlo data.

Every SD is a claim: on data from an independent model (the project's Monte Carlo run
directly, ``fixtures/make_mc_fixtures.py``: other seeds than the error maps' runs and the
baseline's), with 1 % noise added here, at least 90 % of the fitted values must lie within
2 SD of the truth (a normal distribution gives 95.4 %), for

* the diffusion fit (``kienle1997``), whose SDs carry the measured model error
  (``phantomlab.calibration.model_error``) and the misfit scale (on point values, see
  :func:`point_values`);
* the Monte Carlo lookup, whose SDs carry its own photon noise and the misfit scale;

absolute and relative data, on the short probe (0.4–8 mm) and on the long-reach probe
(0.4 mm to 12–40 mm), μs′/μa = 10 … 1000, n = 1.4, g = 0.8; and off the error map's nodes:

* srdr, ``fixtures/mc_default_srdr.npz`` (made by make_default_fit_fixtures.py): 20 media,
  μs′/μa = 10 … 1000, n = 1.33 and 1.43, g = 0.7 and 0.9, 40 distances 1–20 mm;
* sfdi (``cuccia2009``), ``fixtures/mc_coverage_cases.npz`` (make_mc_coverage_fixtures.py):
  six media, μs′/μa = 10, 100, 1000, n = 1.33 with g = 0.7 and n = 1.43 with g = 0.9,
  fx = 0 … 0.3 /mm, 1 % noise.

The SDs are those of ``fit_measurement`` (what ``phantomlab fit`` prints).
"""

from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration.fit_file import fit_measurement
from phantomlab.calibration.measurement_metadata import MeasurementMetadata
from phantomlab.calibration.measurements import Measurement

FIXTURES = Path(__file__).parent / "fixtures"
COPIES = 20
#: Issue 11: at least 90 % of the fitted values within 2 SD of the truth.
WANTED = 0.90


def _load(name):
    data = np.load(FIXTURES / name)
    return {key: data[key] for key in data.files}


@pytest.fixture(scope="module")
def short_probe():
    return _load("mc_srdr_cases.npz")


@pytest.fixture(scope="module")
def reach_probe():
    return _load("mc_srdr_reach_cases.npz")


@pytest.fixture(scope="module")
def baseline():
    from phantomlab.transport.montecarlo import load_baseline

    return load_baseline(FIXTURES / "mc_baseline.npz")


def point_values(cases, case, *, n=1.4, musp=1.0, edges=None):
    """The fixture's annulus averages taken to values at the annulus centres.

    The Monte Carlo tallies average R over annuli (edges at the midpoints), up to 25 % wide
    on the long-reach probe; a fibre probe measures at a point, and the diffusion fit models
    points.  On the long-reach probe the two differ by 1–3 % (−2.6 … −6 % at the last
    distance), as much as the model error under test, so the diffusion tests take the data
    to points with the point/average ratio of kienle1997 at the true optics: a geometric
    correction whose own error is the model error times it (below 0.2 %).
    """
    from phantomlab.transport.diffusion import srdr_reflectance
    from phantomlab.transport.diffusion_error import _annulus_nodes
    from phantomlab.transport.montecarlo import rho_bin_edges_mm

    rho = cases["rho_mm"] if cases["rho_mm"].ndim == 1 else cases["rho_mm"][case]
    nodes, weights = _annulus_nodes(rho_bin_edges_mm(rho) if edges is None else edges)
    mua = cases["mua_per_mm"][case]
    average = np.sum(srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=nodes.ravel(), n=n)
                     .reshape(nodes.shape) * weights, axis=1)
    return srdr_reflectance(mua_per_mm=mua, musp_per_mm=musp, rho_mm=rho, n=n) / average


def _copies(cases, case, seed, relative, points=False):
    rho = cases["rho_mm"] if cases["rho_mm"].ndim == 1 else cases["rho_mm"][case]
    R, mc_sd = cases["reflectance_per_mm2"][case], cases["sd"][case]
    if points:
        R, mc_sd = R * point_values(cases, case), mc_sd * point_values(cases, case)
    rng = np.random.default_rng(seed)
    values = R[None, :] * (1 + 0.01 * rng.standard_normal((COPIES, R.size)))
    sd = np.broadcast_to(np.sqrt((0.01 * R) ** 2 + mc_sd**2), values.shape)
    factor = 37.5 if relative else 1.0
    return Measurement(kind="srdr", scale="relative" if relative else "absolute",
                       wavelength_nm=650.0 + 10.0 * np.arange(COPIES), axis=rho, values=factor * values,
                       sd=factor * sd, source="test data (Monte Carlo + 1 % noise)",
                       # the fixture's values are rings between midpoints; point values when converted
                       metadata=MeasurementMetadata(n=1.4, n_outside=1.0, detector="point" if points else "ring"))


def _coverage(cases, *, model, relative, baseline=None, seed=0, cases_used=range(5)):
    z_mua, z_musp, fits = [], [], []
    for case in cases_used:
        fit = fit_measurement(_copies(cases, case, seed + case, relative, points=model != "mc"), model=model,
                              baseline=baseline)
        z_mua.append((fit.mua_per_mm - cases["mua_per_mm"][case]) / fit.mua_sd_per_mm)
        z_musp.append((fit.musp_per_mm - 1.0) / fit.musp_sd_per_mm)
        fits.append(fit)
    z_mua, z_musp = np.abs(np.concatenate(z_mua)), np.abs(np.concatenate(z_musp))
    return np.mean(z_mua < 2), np.mean(z_musp < 2), fits


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize("relative", [False, True], ids=["absolute", "relative"])
@pytest.mark.parametrize("probe", ["short", "reach"])
def test_diffusion_sds_with_the_model_error_cover_the_truth(short_probe, reach_probe, probe, relative):
    cases = short_probe if probe == "short" else reach_probe
    mua_inside, musp_inside, fits = _coverage(cases, model="kienle1997", relative=relative,
                                              seed=5000 + 100 * relative + 10 * (probe == "reach"))
    assert mua_inside >= WANTED and musp_inside >= WANTED, (mua_inside, musp_inside)
    assert all("diffusion_model_error" in fit.sd_includes for fit in fits)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize("relative", [False, True], ids=["absolute", "relative"])
def test_lookup_sds_cover_the_truth_on_long_reach_data(reach_probe, baseline, relative):
    mua_inside, musp_inside, fits = _coverage(reach_probe, model="mc", relative=relative, baseline=baseline,
                                              seed=6000 + 100 * relative)
    assert mua_inside >= WANTED and musp_inside >= WANTED, (mua_inside, musp_inside)
    assert all("lookup_photon_noise" in fit.sd_includes for fit in fits)
    assert all(fit.fit_quality == "good" for fit in fits), [f.fit_quality_reason for f in fits]


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_lookup_sds_cover_the_truth_on_the_short_probe(short_probe, baseline):
    mua_inside, musp_inside, _ = _coverage(short_probe, model="mc", relative=False, baseline=baseline, seed=6500)
    assert mua_inside >= WANTED and musp_inside >= WANTED, (mua_inside, musp_inside)


@pytest.fixture(scope="module")
def other_media():
    return _load("mc_default_srdr.npz")


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize("relative", [False, True], ids=["absolute", "relative"])
def test_diffusion_sds_cover_the_truth_off_the_maps_nodes(other_media, relative):
    # n = 1.33 / 1.43 (between and beside the map's 1.33, 1.4, 1.5), g = 0.7 / 0.9 (the map's
    # runs are at 0.8; its g spread comes from n = 1.4): 20 media x 10 copies
    copies = COPIES // 2
    z_mua, z_musp = [], []
    rng = np.random.default_rng(7000 + relative)
    for case in range(other_media["ratio"].size):
        n, musp = float(other_media["n"][case]), float(other_media["musp_per_mm"][case])
        points = point_values(other_media, case, n=n, musp=musp)
        R = other_media["reflectance_per_mm2"][case] * points
        mc_sd = other_media["sd"][case] * points
        values = R[None, :] * (1 + 0.01 * rng.standard_normal((copies, R.size)))
        sd = np.broadcast_to(np.sqrt((0.01 * R) ** 2 + mc_sd**2), values.shape)
        factor = 37.5 if relative else 1.0
        m = Measurement(kind="srdr", scale="relative" if relative else "absolute",
                        wavelength_nm=650.0 + 10.0 * np.arange(copies), axis=other_media["rho_mm"][case],
                        values=factor * values, sd=factor * sd, source="test data (Monte Carlo + 1 % noise)",
                        metadata=MeasurementMetadata(n=n, n_outside=1.0))
        fit = fit_measurement(m, model="kienle1997")
        z_mua.append((fit.mua_per_mm - other_media["mua_per_mm"][case]) / fit.mua_sd_per_mm)
        z_musp.append((fit.musp_per_mm - musp) / fit.musp_sd_per_mm)
    mua_inside = np.mean(np.abs(np.concatenate(z_mua)) < 2)
    musp_inside = np.mean(np.abs(np.concatenate(z_musp)) < 2)
    assert mua_inside >= WANTED and musp_inside >= WANTED, (mua_inside, musp_inside)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_sfdi_diffusion_sds_cover_the_truth():
    # cuccia2009 on Monte Carlo R(fx), fx = 0-0.3 /mm at musp = 1 /mm, 1 % noise: the
    # diffusion model is 2-30 % off here (more at high fx, low albedo, matched boundary), and
    # the SDs must carry that
    data = _load("mc_coverage_cases.npz")
    fx = data["fx_per_mm"]
    rng = np.random.default_rng(7500)
    z_mua, z_musp = [], []
    for case in range(data["ratio"].size):
        R, mc_sd = data["sfdi_reflectance"][case], data["sfdi_sd"][case]
        values = R[None, :] * (1 + 0.01 * rng.standard_normal((COPIES, R.size)))
        sd = np.broadcast_to(np.sqrt((0.01 * R) ** 2 + mc_sd**2), values.shape)
        m = Measurement(kind="sfdi", scale="absolute", wavelength_nm=650.0 + 10.0 * np.arange(COPIES), axis=fx,
                        values=values, sd=sd, source="test data (Monte Carlo + 1 % noise)",
                        metadata=MeasurementMetadata(n=float(data["n"][case]), n_outside=1.0))
        fit = fit_measurement(m, model="cuccia2009")
        assert "diffusion_model_error" in fit.sd_includes
        z_mua.append((fit.mua_per_mm - data["mua_per_mm"][case]) / fit.mua_sd_per_mm)
        z_musp.append((fit.musp_per_mm - 1.0) / fit.musp_sd_per_mm)
    mua_inside = np.mean(np.abs(np.concatenate(z_mua)) < 2)
    musp_inside = np.mean(np.abs(np.concatenate(z_musp)) < 2)
    assert mua_inside >= WANTED and musp_inside >= WANTED, (mua_inside, musp_inside)
