"""Transmittance through a slab: diffusion fits on independent Monte Carlo data.

The Monte Carlo lookup answers for a half-space only (the baselines are half-space runs; a slab
fixes the thickness in scattering lengths, so one baseline could not scale with μs), so
transmittance is fitted with the slab diffusion models (Contini et al. 1997 image series;
``kienle1997`` fluence + flux by default).  Data: the direct run of
``fixtures/mc_td_slab.npz`` (15 mm slab, μs′ = 1.2 /mm, g = 0.8, n = 1.4: 18 transport
lengths), the on-axis value from the first rings (R = a + bρ² fitted to the ring averages
within 2.5 mm: the transmitted profile is flat to second order there), seen through an IRF of
200 ps at 10⁵ counts at the peak.  What diffusion achieves here is measured, not assumed: the
tolerance is the acceptance's (μa 3 %, μs′ 2 %).
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

import td_fixture_data as fixture
from phantomlab.calibration.fit_td import fit_td
from phantomlab.calibration.td_measurements import irf_table, read_td
from phantomlab.errors import PhantomlabWarning

pytestmark = pytest.mark.skipif(not (fixture.FIXTURES / "mc_td_slab.npz").is_file(),
                                reason="fixtures/mc_td_slab.npz missing: run fixtures/make_td_fixtures.py slab")
MUSP = 1.2


def _on_axis(run, mua):
    values, sd = fixture.absorbed(run, mua)
    edges = run["rho_edges_mm"][:4]  # rings 0-1, 1-2, 2-3 mm
    # ring average of a + bρ²: a + b (r₂⁴ − r₁⁴)/(2 (r₂² − r₁²)); least squares per time bin
    design = np.stack([np.ones(3), (edges[1:] ** 4 - edges[:-1] ** 4) / (2 * (edges[1:] ** 2 - edges[:-1] ** 2))], 1)
    weights = 1.0 / np.maximum(sd[:3], 1e-300) ** 2
    out = np.empty(values.shape[1])
    var = np.empty(values.shape[1])
    for k in range(values.shape[1]):
        w = weights[:, k] if np.all(np.isfinite(weights[:, k])) and np.all(sd[:3, k] > 0) else np.ones(3)
        normal = design.T @ (w[:, None] * design)
        cov = np.linalg.pinv(normal)
        out[k] = (cov @ design.T @ (w * values[:3, k]))[0]
        var[k] = cov[0, 0] if np.all(sd[:3, k] > 0) else 0.0
    return out, np.sqrt(var)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
@pytest.mark.parametrize("ratio", [30.0, 100.0, 300.0])
def test_transmittance_recovery_with_slab_diffusion(ratio):
    run = fixture.slab()
    mua = MUSP / ratio
    point, point_sd = _on_axis(run, mua)
    curve = fixture.instrument_from_response(run["time_ps"], point, point_sd, fwhm_ps=200.0, shift_ps=95.0,
                                             peak_counts=1e5, window_ps=(0.0, 5000.0))
    rng = np.random.default_rng(int(ratio))
    copies = {(700.0 + i, 0.0): rng.poisson(curve.lam) for i in range(10)}
    m = read_td(fixture.td_csv(copies, curve.time_ps),
                sidecar={"n": 1.4, "geometry": "transmittance", "thickness_mm": 15.0,
                         "irf": irf_table(curve.irf_time_ps, np.round(curve.irf / curve.irf.max() * 1e8))})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", PhantomlabWarning)
        fit = fit_td(m)
    mua_err = fit.mua_per_mm / mua - 1
    musp_err = fit.musp_per_mm / MUSP - 1
    print(f"ratio {ratio:g}: mua {100 * np.median(mua_err):+.2f} %, musp {100 * np.median(musp_err):+.2f} %, "
          f"SDs {100 * np.median(fit.mua_sd_per_mm) / mua:.2f} %, {100 * np.median(fit.musp_sd_per_mm) / MUSP:.2f} %, "
          f"chi2 {fit.chi2_red:.2f}")
    assert np.all(np.abs(mua_err) <= 0.03) and np.all(np.abs(musp_err) <= 0.02)
