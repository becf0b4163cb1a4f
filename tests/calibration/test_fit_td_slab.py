"""Transmittance through a slab with the Monte Carlo-corrected model (``mc-slab``, the default).

Data: the independent slab run ``fixtures/mc_td_slab_deep.npz`` (our engine, seeds 3101–3128,
120 million photons, μs = 6 /mm at g 0.8 (μs′ 1.2 /mm), n 1.4, 15 mm: τ′ = 18), averaged over
the disc within 6 mm of the axis and fitted as what a detection face 12 mm wide on the axis
records (``detector = "fibre"``, ``fibre_core_mm = 12``; the model is averaged over the same
face).  The model's nodes come from ``fixtures/slab-cache`` (made by
``fixtures/make_slab_nodes.py`` with the product's own settings: other seeds, thickness 10 mm,
other μs, τ′ = 11.31–22.63, none at 18).

The reference run's own photon noise is part of every comparison: copies of the expected curve
made from the run's response perturbed by its standard error per 5-ps bin *before* the
instrument (perturbing the counts per data bin instead would treat the run's noise as
independent from bin to bin, while the IRF spreads it over some twenty bins, and so
understate it four- to fivefold).  Its spread is ``ref``; a fit's error is judged against
√(SD² + ref²).

Measured on the expected counts (IRF 200 ps, 10⁶ counts at the peak), error of μa / μs′ [%]:

============  ===================  ===================  ==================  ==================
μs′/μa        mc-slab              contini1997          ref (run's noise)   mc-slab SD
============  ===================  ===================  ==================  ==================
10            −0.6 / −1.2          −2.6 / −17.5         0.3 / 0.6           1.2 / 2.9
30            +0.4 / +0.9          −2.8 / −12.7         0.2 / 0.5           0.6 / 1.4
100           +0.5 / +0.2          −4.5 / −9.7          0.2 / 0.2           0.7 / 0.8
300           +0.2 / −0.3          −8.3 / −8.0          0.8 / 0.3           1.3 / 0.6
1000          +1.8 / −0.2          −18.9 / −7.1         2.0 / 0.3           4.0 / 0.5
============  ===================  ===================  ==================  ==================

With IRF 100 and 300 ps at 10⁵ counts the model's errors stay within 2.2 % (μa) and 1.4 % (μs′)
over μs′/μa 10–1000.  Poisson copies at 10⁵ counts spread further (μs′ 1.6 % at μs′/μa 30
with IRF 300 ps; 10–12 % at μs′/μa 10 with IRF 300 ps, where the IRF is wider than the curve's
rise, and the linear SD, 12 %, holds them: 16 and 40 copies, 100 % and 98 % within 2 SD; six
copies had suggested an understatement of 1.5 times); over 15 cases × 6 copies, 97.6 % lie
within 2 √(SD² + ref²).  With the 12-million-photon run alone μa at 300 and
1000 looked +6 % and +21 % off: the reference's noise, and the nodes' noise that a kernel too
narrow after the peak left in the model (since widened, slab_time_correction.py).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import td_fixture_data as fixture
from phantomlab.calibration.fit_quality import assess_fit
from phantomlab.calibration.fit_td import fit_td
from phantomlab.calibration.slab_time_correction import SlabCorrection
from phantomlab.calibration.slab_time_nodes import load_node, node_file_name, node_grid, obtain_nodes
from phantomlab.calibration.td_measurements import irf_table, read_td
from phantomlab.calibration.td_models import face_average, td_curve_model
from phantomlab.errors import InputError

CACHE = fixture.FIXTURES / "slab-cache"
pytestmark = pytest.mark.skipif(not (fixture.FIXTURES / "mc_td_slab_deep.npz").is_file() or not CACHE.is_dir(),
                                reason="slab fixtures missing: run fixtures/make_td_fixtures.py slab deep and "
                                       "fixtures/make_slab_nodes.py")
MUSP = 1.2
DISC_MM = 6.0
REF_COPIES = 5
POISSON_COPIES = 3
REF_ROWS = slice(1, 1 + REF_COPIES)
POISSON_ROWS = slice(1 + REF_COPIES, None)


def _nodes(*taus):
    return [load_node(CACHE / node_file_name(g=0.8, n=1.4, n_outside=1.0, tau_prime=t)) for t in taus]


def _disc(run, mua):
    values, sd = fixture.absorbed(run, mua)
    edges = run["rho_edges_mm"]
    area = np.pi * np.diff(edges**2)
    inside = edges[1:] <= DISC_MM + 1e-9
    mean = (values[inside] * area[inside, None]).sum(0) / area[inside].sum()
    se = np.sqrt(((sd[inside] * area[inside, None]) ** 2).sum(0)) / area[inside].sum()
    return mean, se


def _measurement(ratio, fwhm, peak, seed):
    """One case as rows: the expected counts (row 0), reference copies (the run's noise, rows
    :data:`REF_ROWS`) and Poisson copies (rows :data:`POISSON_ROWS`)."""
    run = fixture.slab_deep()
    mua = MUSP / ratio
    mean, se = _disc(run, mua)
    curve = fixture.instrument_from_response(run["time_ps"], mean, se, fwhm_ps=fwhm, shift_ps=120.0,
                                             peak_counts=peak, window_ps=(0.0, 5000.0))
    rng = np.random.default_rng(seed)
    rows = {(699.0, 0.0): curve.lam}
    for k in range(REF_COPIES):
        perturbed = mean + se * rng.standard_normal(mean.size)
        copy = fixture.instrument_from_response(run["time_ps"], perturbed, 0 * perturbed, fwhm_ps=fwhm, shift_ps=120.0,
                                                peak_counts=peak, window_ps=(0.0, 5000.0))
        rows[(700.0 + k, 0.0)] = copy.lam * curve.lam.max() / copy.lam.max()
    for k in range(POISSON_COPIES):
        rows[(720.0 + k, 0.0)] = rng.poisson(curve.lam)
    sidecar = {"n": 1.4, "irf": irf_table(curve.irf_time_ps, np.round(curve.irf / curve.irf.max() * 1e8)),
               "geometry": "transmittance", "thickness_mm": 15.0, "detector": "fibre", "fibre_core_mm": 2 * DISC_MM,
               "background_counts": 5.0}
    return mua, read_td(fixture.td_csv(rows, curve.time_ps), sidecar=sidecar)


def _errors(fit, mua):
    """Per parameter: the model's error on the expected counts, the Poisson copies' errors and z, the run's noise."""
    out = {}
    for name, truth in (("mua", mua), ("musp", MUSP)):
        values = getattr(fit, f"{name}_per_mm")
        sd = getattr(fit, f"{name}_sd_per_mm")[POISSON_ROWS]
        ref_sd = np.std(values[REF_ROWS], ddof=1)
        data = values[POISSON_ROWS]
        out[name] = (values[0] / truth - 1, data / truth - 1, (data - truth) / np.sqrt(sd**2 + ref_sd**2),
                     ref_sd / truth)
    return out


@pytest.fixture(scope="module")
def correction():
    return SlabCorrection(_nodes(13.45, 16.0, 19.03, 22.63))


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize("ratio, fwhm, peak", [(10.0, 200.0, 1e6), (30.0, 100.0, 1e5), (100.0, 200.0, 1e6),
                                               (300.0, 300.0, 1e5), (1000.0, 200.0, 1e6)])
def test_slab_model_recovers_the_independent_run(correction, ratio, fwhm, peak):
    mua, measurement = _measurement(ratio, fwhm, peak, seed=int(ratio + fwhm))
    fit = assess_fit(fit_td(measurement, model="mc-slab", slab_correction=correction,
                            musp_range_per_mm=(13.45 / 15, 22.63 / 15)), sd_parts=("poisson_counts",))
    diffusion = fit_td(measurement, model="contini1997")
    errors = _errors(fit, mua)
    report = {name: (round(100 * b, 2), np.round(100 * e, 2), np.round(z, 2), round(100 * r, 2))
              for name, (b, e, z, r) in errors.items()}
    # the acceptance (issue 14) on the model's error, the fit of the expected counts: μa within
    # 3 %, μs′ within 2 %, or within twice the run's own noise where that is larger (μa at
    # μs′/μa 1000: 2 %); the Poisson copies add their own spread, which the SDs must hold
    for name, tolerance in (("mua", 0.03), ("musp", 0.02)):
        bias, _, _, ref = errors[name]
        assert abs(bias) <= max(tolerance, 2.0 * ref), (name, report)
    # and far closer than the slab diffusion model it corrects (μs′ −7 to −18 % there)
    assert abs(errors["musp"][0]) < 0.4 * abs(diffusion.musp_per_mm[0] / MUSP - 1)
    # the SDs, with the run's own noise, hold the copies' errors, and say something: μs′ SDs of
    # 50–120 % were claimed at μs′/μa 10 before the runs' noise was averaged over what a bin
    # holds where the IRF is wider than the curve's rise
    assert np.all(np.abs(errors["mua"][2]) <= 2.5) and np.all(np.abs(errors["musp"][2]) <= 2.5), report
    assert np.median(fit.musp_sd_per_mm[POISSON_ROWS]) < 0.08 * MUSP, fit.musp_sd_per_mm
    assert "slab_model_error" in fit.sd_includes


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_the_linear_sd_holds_where_the_irf_is_wider_than_the_rise(correction):
    """μs′/μa 10 through 15 mm, IRF 300 ps (wider than the 10 %-to-peak rise), 10⁵ counts: 64
    Poisson copies of the deep run's expected counts.  Their spread and the fit's linear SDs
    (measured with the test instrument mended, td_fixture_data.py: 104 copies over three seeds,
    91 % (μs′) and 93 % (μa) within 2 SD, spread/SD 0.94–1.01 and 0.88–0.91; the fit is far
    from linear here and the tails are a little heavy: 24 copies gave 87.5 % for μs′)."""
    run = fixture.slab_deep()
    mua = MUSP / 10.0
    mean, se = _disc(run, mua)
    curve = fixture.instrument_from_response(run["time_ps"], mean, se, fwhm_ps=300.0, shift_ps=120.0,
                                             peak_counts=1e5, window_ps=(0.0, 5000.0))
    rng = np.random.default_rng(388)
    rows = {(720.0 + k, 0.0): rng.poisson(curve.lam) for k in range(64)}
    sidecar = {"n": 1.4, "irf": irf_table(curve.irf_time_ps, np.round(curve.irf / curve.irf.max() * 1e8)),
               "geometry": "transmittance", "thickness_mm": 15.0, "detector": "fibre", "fibre_core_mm": 2 * DISC_MM,
               "background_counts": 5.0}
    fit = assess_fit(fit_td(read_td(fixture.td_csv(rows, curve.time_ps), sidecar=sidecar), model="mc-slab",
                            slab_correction=correction, musp_range_per_mm=(13.45 / 15, 22.63 / 15)),
                     sd_parts=("poisson_counts",))
    assert any("wider than the curve's rise" in w for w in fit.warnings)
    for values, sd, truth in ((fit.mua_per_mm, fit.mua_sd_per_mm, mua), (fit.musp_per_mm, fit.musp_sd_per_mm, MUSP)):
        assert np.mean(np.abs(values - truth) <= 2 * sd) >= 0.9, (values / truth - 1, sd / truth)
        ratio = np.std(values, ddof=1) / np.median(sd)
        assert 0.5 < ratio < 1.3, ratio  # the SD neither far too small nor far too large


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_each_node_is_fitted_from_the_others():
    """Leave one node out: its run (independent, another seed) fitted from the others, which
    bracket it at twice the usual step; the SDs with the run's own noise cover ≥ 90 %."""
    nodes = _nodes(11.31, 13.45, 16.0, 19.03, 22.63)
    rng = np.random.default_rng(77)
    z_all, worst = [], 0.0
    for k in (1, 3):
        node, others = nodes[k], nodes[:k] + nodes[k + 1:]
        correction = SlabCorrection(others)
        d, musp = node.thickness_mm, node.musp_per_mm
        edges = node.rho_edges_mm
        area = np.pi * np.diff(edges**2)
        inside = edges[1:] <= 0.3 * d + 1e-9
        t = node.time_ps
        grid = np.arange(2.5, t[-1], 5.0)
        for ratio in (30.0, 100.0):
            mua = musp / ratio
            rate = mua * fixture.C_MM_PER_PS / 1.4
            weight = np.exp(-rate * t)
            mean = np.interp(grid, t, (node.values[inside] * area[inside, None]).sum(0) / area[inside].sum() * weight)
            se = np.interp(grid, t, np.sqrt(((node.sd[inside] * area[inside, None]) ** 2).sum(0)) / area[inside].sum()
                           * weight) * math.sqrt((t[1] - t[0]) / 5.0)
            window = (0.0, float(grid[-1]))
            curve = fixture.instrument_from_response(grid, mean, se, fwhm_ps=150.0, shift_ps=100.0, peak_counts=1e6,
                                                     window_ps=window)
            rows = {}
            for j in range(REF_COPIES):
                perturbed = mean + se * rng.standard_normal(mean.size)
                copy = fixture.instrument_from_response(grid, perturbed, 0 * perturbed, fwhm_ps=150.0, shift_ps=100.0,
                                                        peak_counts=1e6, window_ps=window)
                rows[(700.0 + j, 0.0)] = copy.lam * curve.lam.max() / copy.lam.max()
            for j in range(POISSON_COPIES):
                rows[(720.0 + j, 0.0)] = rng.poisson(curve.lam)
            sidecar = {"n": 1.4, "irf": irf_table(curve.irf_time_ps, np.round(curve.irf / curve.irf.max() * 1e8)),
                       "geometry": "transmittance", "thickness_mm": d, "detector": "fibre", "fibre_core_mm": 0.6 * d,
                       "background_counts": 5.0}
            measurement = read_td(fixture.td_csv(rows, curve.time_ps), sidecar=sidecar)
            fit = assess_fit(fit_td(measurement, model="mc-slab", slab_correction=correction,
                                    musp_range_per_mm=(others[0].tau_prime / d, others[-1].tau_prime / d)),
                             sd_parts=("poisson_counts",))
            for name, truth in (("mua", mua), ("musp", musp)):
                values = getattr(fit, f"{name}_per_mm")
                ref_sd = np.std(values[:REF_COPIES], ddof=1)
                z = (values[REF_COPIES:] - truth) / np.sqrt(getattr(fit, f"{name}_sd_per_mm")[REF_COPIES:] ** 2
                                                             + ref_sd**2)
                z_all += list(z)
                worst = max(worst, float(np.max(np.abs(values[REF_COPIES:] / truth - 1))))
    z_all = np.abs(np.array(z_all))
    assert np.mean(z_all <= 2.0) >= 0.9, np.round(z_all, 2)
    assert worst < 0.05  # interpolated over twice the step, 4.5 % at most when measured


def test_node_grid_brackets_and_names():
    assert node_grid(14.6, 16.8) == [13.45, 16.0, 19.03]
    assert node_grid(16.0, 16.0) == [16.0, 19.03]
    assert node_file_name(g=0.8, n=1.4, n_outside=1.0, tau_prime=16.0) == "slab-time-g0.80-n1.400-out1.000-tau16.00.npz"


def test_table_reproduces_the_run_it_was_smoothed_from():
    """The smoothing's own check: DE × C at the node's τ′ against the node's tallies, 3 SE per 50-ps bin."""
    from phantomlab.transport.time_domain import time_resolved

    node = _nodes(16.0)[0]
    correction = SlabCorrection([node])
    ring = 3
    rho = 0.5 * (node.rho_edges_mm[ring] + node.rho_edges_mm[ring + 1])
    t = node.time_ps
    model = time_resolved(mua_per_mm=0.0, musp_per_mm=node.musp_per_mm, rho_mm=rho, time_ps=t, n=1.4,
                          thickness_mm=node.thickness_mm, geometry="transmittance", model="contini1997")
    model = model * correction.factor(musp_per_mm=np.array([node.musp_per_mm]), rho_mm=np.array([rho]),
                                      time_ps=t[None, :], thickness_mm=node.thickness_mm)[0]
    per = 10
    usable = (t.size // per) * per
    tally = node.values[ring, :usable].reshape(-1, per).sum(1)
    se = np.sqrt((node.sd[ring, :usable] ** 2).reshape(-1, per).sum(1))
    smooth = model[:usable].reshape(-1, per).sum(1)
    used = tally > 10 * se  # where the run holds photons
    assert used.sum() > 20
    z = (tally[used] - smooth[used]) / se[used]
    assert np.mean(np.abs(z) <= 3.0) >= 0.95, np.round(z, 1)


@pytest.mark.parametrize("rho", [0.0, 1.7])
def test_face_average_against_exact_disc_average(rho):
    """A Gaussian exp(−ρ²/s²) averaged over a disc of radius a: on the axis (s²/a²)(1 − e^(−a²/s²))
    (exact); off it, scipy's adaptive 2-D quadrature."""
    from scipy.integrate import dblquad

    s, a = 2.0, 1.5

    def shape(mua, musp, r, times):
        return np.exp(-np.asarray(r, float)[:, None] ** 2 / s**2) * np.ones_like(times)

    averaged = face_average(shape, core_mm=2 * a, rho_mm=np.array([rho]))
    value = averaged(np.array([0.0]), np.array([1.0]), np.array([rho]), np.zeros((1, 1)))[0, 0]
    if rho == 0.0:
        exact = s**2 / a**2 * (1 - math.exp(-a**2 / s**2))
    else:
        exact = dblquad(lambda r, phi: r * math.exp(-(rho**2 + r**2 + 2 * rho * r * math.cos(phi)) / s**2),
                        0, 2 * math.pi, 0, a)[0] / (math.pi * a**2)
    assert value == pytest.approx(exact, rel=1e-5)  # 6 × 6 Gauss–Legendre nodes: 3e-6 off the axis


@pytest.mark.parametrize("rho", [0.0, 1.5])
def test_face_sd_at_its_exact_limits(rho):
    """The face's relative SD: one SD s everywhere gives s when the points are fully correlated
    and s·√Σ share² when they are independent; the shares are the points' light (their weights
    times the response)."""
    s = 0.02

    def shape(mua, musp, r, times):
        return np.exp(-np.asarray(r, float)[:, None] / 3.0) * np.ones_like(times)

    shape.points = lambda mua, musp, r, times: np.exp(-np.asarray(r, float)[:, None, :] / 3.0) * np.ones(
        np.shape(times) + (1,))
    shape.relative_sd_points = lambda musp, r, times: np.full(np.shape(times) + (np.shape(r)[-1],), s)
    times = np.ones((1, 4))
    for expected in (None, "independent"):
        shape.correlation_points = (lambda r: np.ones(np.shape(r) + (np.shape(r)[-1],))) if expected is None else (
            lambda r: np.broadcast_to(np.eye(np.shape(r)[-1]), np.shape(r) + (np.shape(r)[-1],)))
        averaged = face_average(shape, core_mm=4.0, rho_mm=np.array([rho]))
        got = averaged.relative_sd(np.array([1.0]), np.array([rho]), times)
        if expected is None:
            np.testing.assert_allclose(got, s, rtol=1e-12)
        else:
            # the face's points and weights, as face_average lays them out (6 × 6 Gauss–Legendre)
            x, w = np.polynomial.legendre.leggauss(6)
            r = 1.0 * (x + 1.0)
            wr = w * r / 2.0
            if rho == 0.0:
                d, wq = r, wr
            else:
                phi = 0.5 * np.pi * (x + 1.0)
                d = np.sqrt(rho**2 + r[:, None] ** 2 + 2 * rho * r[:, None] * np.cos(phi[None, :])).ravel()
                wq = (wr[:, None] * 0.5 * w[None, :]).ravel()
            light = wq * np.exp(-d / 3.0)
            np.testing.assert_allclose(got, s * np.sqrt(np.sum((light / light.sum()) ** 2)), rtol=1e-12)


@pytest.mark.parametrize("model", ["contini1997", "mc-slab"])
@pytest.mark.parametrize("rho", [(0.0, 0.0), (0.0, 2.5)])
def test_face_points_in_one_call_equal_the_face_point_by_point(correction, model, rho):
    """The models' ``points`` (every face point at once, depth sums shared) against one call per point."""
    rho = np.array(rho)
    times = np.tile(np.linspace(20.0, 6000.0, 300), (2, 1))
    mua, musp = np.array([0.012, 0.0012]), np.array([1.1, 1.25])
    shape = td_curve_model(model=model, geometry="transmittance", thickness_mm=15.0, n=1.4, n_outside=1.0,
                           slab_correction=correction)
    together = face_average(shape, core_mm=8.0, rho_mm=rho)(mua, musp, rho, times)
    del shape.points
    one_by_one = face_average(shape, core_mm=8.0, rho_mm=rho)(mua, musp, rho, times)
    np.testing.assert_allclose(together, one_by_one, rtol=1e-12, atol=1e-14 * one_by_one.max())


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_default_transmittance_fit_is_the_slab_model(tmp_path):
    from phantomlab.calibration.fit_file import fit_measurement_file

    mua, measurement = _measurement(100.0, 150.0, 3e5, seed=5)
    curve_rows = {(750.0, 0.0): measurement.counts[1 + REF_COPIES, 0]}
    csv = tmp_path / "slab.csv"
    csv.write_text(fixture.td_csv(curve_rows, measurement.time_ps))
    (tmp_path / "irf.csv").write_text(fixture.irf_csv(measurement.irf_time_ps, measurement.irf[0]))
    csv.with_suffix(".toml").write_text('n = 1.4\ngeometry = "transmittance"\nthickness_mm = 15.0\nirf = "irf.csv"\n'
                                        'detector = "fibre"\nfibre_core_mm = 12.0\nbackground_counts = 5.0\n')
    fit = fit_measurement_file(csv, kind="td", g=0.8, baseline_dir=CACHE)
    payload = fit.to_json()
    assert payload["model"] == "mc-slab"
    assert payload["slab_nodes"] == [16.0, 19.03]  # diffusion said 16.4 transport lengths, the fit 18
    assert "corrected by direct Monte Carlo runs of slabs" in payload["model_note"]
    assert abs(payload["musp_per_mm"][0] / MUSP - 1) < 0.04 and abs(payload["mua_per_mm"][0] / mua - 1) < 0.04


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_offset_beyond_the_nodes_falls_back_to_diffusion(tmp_path):
    from phantomlab.calibration.fit_file import fit_measurement_file
    from phantomlab.transport.time_domain import time_resolved

    t = np.arange(5.0, 4000.0, 10.0)
    response = time_resolved(mua_per_mm=0.01, musp_per_mm=1.0, rho_mm=8.0, time_ps=t, n=1.4, thickness_mm=15.0,
                             geometry="transmittance", model="contini1997")
    irf = np.exp(-0.5 * ((t - 300.0) / 40.0) ** 2)
    counts = np.convolve(response, irf)[: t.size]
    counts = np.random.default_rng(3).poisson(counts / counts.max() * 1e5 + 2.0)
    csv = tmp_path / "offset.csv"
    csv.write_text(fixture.td_csv({(800.0, 8.0): counts}, t))
    (tmp_path / "irf.csv").write_text(fixture.irf_csv(t, np.round(irf * 1e6)))
    csv.with_suffix(".toml").write_text('n = 1.4\ngeometry = "transmittance"\nthickness_mm = 15.0\nirf = "irf.csv"\n')
    fit = fit_measurement_file(csv, kind="td", baseline_dir=tmp_path / "empty-cache")
    assert fit.model == "diffusion-contini1997"
    assert "lateral offset of 8 mm is beyond" in fit.extras["model_note"]
    assert not (tmp_path / "empty-cache").exists()  # nothing was run or written


def test_damaged_node_file_is_refused_in_one_line(tmp_path):
    name = node_file_name(g=0.8, n=1.4, n_outside=1.0, tau_prime=16.0)
    (tmp_path / name).write_bytes(b"not a node")
    with pytest.raises(InputError) as caught:
        obtain_nodes([16.0], g=0.8, n=1.4, n_outside=1.0, folder=tmp_path)
    assert "\n" not in str(caught.value) and name in str(caught.value)


def test_obtain_builds_a_missing_node_once(tmp_path):
    calls = []
    nodes = obtain_nodes([8.0], g=0.8, n=1.4, n_outside=1.0, folder=tmp_path, photons=2000,
                         progress=lambda done, total: calls.append((done, total)))
    assert (tmp_path / node_file_name(g=0.8, n=1.4, n_outside=1.0, tau_prime=8.0)).is_file()
    assert calls and calls[-1] == (2000, 2000)
    again = obtain_nodes([8.0], g=0.8, n=1.4, n_outside=1.0, folder=tmp_path, photons=2000,
                         progress=lambda done, total: calls.append("built again"))
    assert "built again" not in calls
    assert np.array_equal(again[0].values, nodes[0].values.astype(np.float32))


@pytest.mark.parametrize("sidecar, message", [
    ({"detector": "fibre", "fibre_core_mm": 13.0}, "fibre_core_mm = 13; accepted: > 0 and at most 12 mm"),
    ({"detector": "ring"}, "detector = 'ring'; accepted for td: point, fibre"),
    ({"fibre_core_mm": 3.0}, "fibre_core_mm is given but detector is not 'fibre'"),
])
def test_td_detector_bad_input(sidecar, message):
    t = np.arange(5.0, 500.0, 10.0)
    text = fixture.td_csv({(800.0, 0.0): np.ones(t.size)}, t)
    full = {"n": 1.4, "irf": irf_table(t, np.ones(t.size)), "geometry": "transmittance", "thickness_mm": 10.0, **sidecar}
    with pytest.raises(InputError, match=message.replace("(", r"\(").replace(")", r"\)")):
        read_td(text, sidecar=full)


def test_baseline_list_and_clear_include_the_slab_runs(tmp_path, monkeypatch, capsys):
    import json
    import shutil

    from phantomlab.cli import main

    for tau in (16.0, 19.03):
        name = node_file_name(g=0.8, n=1.4, n_outside=1.0, tau_prime=tau)
        shutil.copy(CACHE / name, tmp_path / name)
    monkeypatch.setenv("PHANTOMLAB_BASELINE_DIR", str(tmp_path))
    assert main(["baseline", "list", "--json"]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert [r["tau_prime"] for r in listed["slab_runs"]] == [16.0, 19.03] and listed["baselines"] == []
    assert main(["baseline", "clear", "--json"]) == 0
    assert len(json.loads(capsys.readouterr().out)["removed"]) == 2
    assert not list(tmp_path.glob("slab-time-*"))
