"""Transmittance through a slab: the slab diffusion models against the direct Monte Carlo run.

The half-space Monte Carlo lookup cannot answer for a slab (a slab fixes the thickness in
scattering lengths, so one baseline could not scale with μs); transmittance is fitted by default
with the slab model that corrects contini1997 by direct Monte Carlo runs of slabs
(test_fit_td_slab.py), and with the slab diffusion models (Contini et al. 1997 image series;
``kienle1997`` fluence + flux, ``contini1997`` flux) on request or where that model does not
apply.  How good they are is measured
here on ``fixtures/mc_td_slab.npz`` (15 mm slab, μs′ = 1.2 /mm, g = 0.8, n = 1.4: 18 transport
lengths; μa = 0.012 /mm by Beer–Lambert weights), averaged over the disc within 6 mm of the axis
(the run holds too few photons on the axis alone for a 10⁵-count test), in 50-ps bins over the
diffusion fit window (half the peak on the rise to 5 % on the tail; earlier still, at 5–20 % of
the peak, Monte Carlo is 40–55 % below diffusion): the shape of Monte Carlo over diffusion drifts by some per cent along the
curve, more for kienle1997 than for contini1997 — enough to bias a fit by several per cent
(so the acceptance's 3 %/2 % recovery is not claimed for transmittance; the fit's SDs hold
that error: test_td_model_error.py).  The test holds the measured envelopes so that a change
shows.
"""

from __future__ import annotations

import numpy as np
import pytest

import td_fixture_data as fixture
from phantomlab.transport.time_domain import time_resolved

pytestmark = pytest.mark.skipif(not (fixture.FIXTURES / "mc_td_slab.npz").is_file(),
                                reason="fixtures/mc_td_slab.npz missing: run fixtures/make_td_fixtures.py slab")


@pytest.mark.parametrize("model, level, spread", [("kienle1997", (1.02, 1.09), 0.16), ("contini1997", (0.97, 1.04), 0.08)])
def test_slab_diffusion_against_monte_carlo_transmittance(model, level, spread):
    run = fixture.slab()
    mua = 0.012
    values, sd = fixture.absorbed(run, mua)
    edges = run["rho_edges_mm"]
    area = np.pi * np.diff(edges**2)
    disc = (values * area[:, None]).sum(axis=0) / area.sum()
    disc_sd = np.sqrt(((sd * area[:, None]) ** 2).sum(axis=0)) / area.sum()
    x, w = np.polynomial.legendre.leggauss(12)
    radius = edges[-1] / 2 * (x + 1)
    weight = edges[-1] / 2 * w * 2 * np.pi * radius / area.sum()  # the model averaged over the disc
    t = run["time_ps"]
    model_disc = sum(wi * time_resolved(mua_per_mm=mua, musp_per_mm=1.2, rho_mm=ri, time_ps=t, n=1.4, thickness_mm=15.0,
                                        geometry="transmittance", model=model) for ri, wi in zip(radius, weight))
    mc = disc.reshape(-1, 10).sum(axis=1)
    mc_sd = np.sqrt((disc_sd**2).reshape(-1, 10).sum(axis=1))
    diffusion = model_disc.reshape(-1, 10).sum(axis=1)
    first = int(np.argmax(mc >= 0.5 * mc.max()))  # the diffusion fit window: from half the peak on the rise
    used = (np.arange(mc.size) >= first) & (mc > 0.05 * mc.max())
    ratio = mc[used] / diffusion[used]
    overall = mc[used].sum() / diffusion[used].sum()  # per incident energy on both sides
    assert level[0] < overall < level[1]
    assert np.all(mc_sd[used] / mc[used] < 0.03)  # the run resolves per-cent differences
    assert ratio.max() - ratio.min() < spread
    print(f"{model}: MC/diffusion {overall:.3f} overall, from {ratio.min():.3f} to {ratio.max():.3f} along the curve")
