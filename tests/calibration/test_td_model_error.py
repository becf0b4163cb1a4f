"""Diffusion's error in time-domain fits is part of their SDs (issue 14: an SD is a claim).

Diffusion misses the shape of Monte Carlo time-resolved curves by a few per cent, smoothly along
the curve; the fit turns that into μs′ 5–35 % low at μs′/μa 10–30 and μa up to 30 % low
through a 15 mm slab at μs′/μa 1000, with Poisson SDs of a per cent or less.  ``fit_td`` adds a
shape-error term (``DIFFUSION_SHAPE_ERROR``: 2 % per bin, correlated over 0.2 in ln t) to a
diffusion fit's covariance; these tests check its coverage on data from our Monte Carlo run
directly (not the diffusion model that fits):

* the half-space run ``fixtures/mc_td_half_space.npz`` (μs′ 1.2 /mm, g 0.8, n 1.4; the term's
  size was set on it, 99 % of copies within 2 SD when measured);
* the slab run ``fixtures/mc_td_slab.npz`` (transmittance through 15 mm, the same medium),
  which was not used to set it: the independent check (98 % with contini1997, the fallback for
  transmittance, 93 % with kienle1997 when measured).

A copy's error is compared with √(SD_fit² + SD_ref²), SD_ref the spread the Monte Carlo run's
own photon noise gives (fits of the expected counts perturbed by it), as in
test_fit_td_recovery.py.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import td_fixture_data as fixture
from phantomlab.calibration.fit_quality import assess_fit
from phantomlab.calibration.fit_td import fit_td
from phantomlab.calibration.td_measurements import irf_table, read_td
from phantomlab.errors import PhantomlabWarning

pytestmark = pytest.mark.skipif(not (fixture.FIXTURES / "mc_td_slab.npz").is_file(),
                                reason="fixtures/mc_td_slab.npz missing: run fixtures/make_td_fixtures.py")

MUSP = 1.2  # both runs' μs′ [1/mm]
COPIES = 6
PERTURBED = 6
#: (μs′/μa, IRF FWHM [ps], t0 [ps], counts at the peak)
SETTINGS = [(10.0, 100.0, 35.0, 1e5), (30.0, 200.0, 120.0, 1e6), (100.0, 300.0, 210.0, 1e5),
            (300.0, 100.0, 35.0, 1e5), (1000.0, 200.0, 120.0, 1e6)]


def _fit(run, geometry, model, ratio, rho, fwhm, shift, peak, seed):
    mua = MUSP / ratio
    curve = fixture.instrument_curve(run, mua_per_mm=mua, rho_mm=rho, fwhm_ps=fwhm, shift_ps=shift,
                                     peak_counts=peak, window_ps=(0.0, 5000.0))
    rng = np.random.default_rng(seed)
    rows = [rng.poisson(curve.lam) for _ in range(COPIES)]
    rows += [np.maximum(curve.lam + curve.lam_sd * rng.standard_normal(curve.lam.size), 0.0) for _ in range(PERTURBED)]
    sidecar = {"n": 1.4, "irf": irf_table(curve.irf_time_ps, np.round(curve.irf / curve.irf.max() * 1e8))}
    if geometry == "transmittance":
        sidecar.update(geometry="transmittance", thickness_mm=15.0)
    measurement = read_td(fixture.td_csv({(700.0 + i, rho): c for i, c in enumerate(rows)}, curve.time_ps),
                          sidecar=sidecar)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        return mua, assess_fit(fit_td(measurement, model=model), sd_parts=("poisson_counts",))


def _coverage(run, geometry, model, rhos):
    inside = total = 0
    report = []
    for k, (ratio, fwhm, shift, peak) in enumerate(SETTINGS):
        for rho in rhos:
            mua, fit = _fit(run, geometry, model, ratio, rho, fwhm, shift, peak, seed=7000 + 10 * k + int(rho))
            assert "diffusion_model_error" in fit.sd_includes
            for name, truth in (("mua", mua), ("musp", MUSP)):
                values = getattr(fit, f"{name}_per_mm")
                sd = getattr(fit, f"{name}_sd_per_mm")[:COPIES]
                sd_ref = np.std(values[COPIES:], ddof=1)
                z = (values[:COPIES] - truth) / np.sqrt(sd**2 + sd_ref**2)
                inside += int(np.sum(np.abs(z) <= 2))
                total += COPIES
                report.append(f"{ratio:g} {rho:g} mm {name}: error {100 * np.median(values[:COPIES] / truth - 1):+.1f} %, "
                              f"SD {100 * np.median(sd) / truth:.1f} %")
    print("\n".join(report))
    return inside / total, report


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_half_space_diffusion_sds_cover_monte_carlo_reflectance():
    coverage, report = _coverage(fixture.half_space(), "reflectance", "kienle1997", (10.0, 20.0))
    assert coverage >= 0.90, (coverage, report)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_slab_diffusion_sds_cover_monte_carlo_transmittance():
    coverage, report = _coverage(fixture.slab(), "transmittance", "contini1997", (1.5, 3.5))
    assert coverage >= 0.90, (coverage, report)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_without_the_model_error_the_poisson_sds_alone_would_not_cover():
    """The term is needed: the Poisson SDs alone cover a minority of the copies (slab run)."""
    run = fixture.slab()
    mua, fit = _fit(run, "transmittance", "contini1997", 100.0, 2.5, 300.0, 210.0, 1e5, seed=7100)
    poisson_sd = np.sqrt(np.asarray(fit.covariance)[:, 1, 1] - np.asarray(fit.model_covariance)[:, 1, 1])[:COPIES]
    error = np.abs(fit.musp_per_mm[:COPIES] - MUSP)
    assert np.mean(error <= 2 * poisson_sd) < 0.5
    assert np.all(error <= 2 * fit.musp_sd_per_mm[:COPIES])
