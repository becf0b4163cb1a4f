"""Independent Monte Carlo time-domain data for the td/fd tests, built from the stored fixture.

The fixture (``fixtures/mc_td_half_space.npz``, made by ``fixtures/make_td_fixtures.py``) is a
direct run of the project's Monte Carlo engine at μa = 0 with a time gate: R(ρ, t) on 1-mm
rings and 5-ps bins.  From it this module builds what an instrument would record, with code of
its own (none of the fit's convolution or lookup):

* **absorption** by the exact Beer–Lambert weight of each 5-ps bin, the bin average of
  exp(−μa v t) (v = c/n);
* **point values** from ring averages: a ring [ρ − h, ρ + h] averages R with the weight 2πρ′,
  R̄ = R + R′h²/(3ρ) + R″h²/6 + O(h⁴), so R(ρ) = R̄ − R′Δ²/(12ρ) − R″Δ²/24 with Δ = 2h and the
  derivatives from central differences of the neighbouring rings;
* **the instrument**: an IRF shaped as an exponentially modified Gaussian (a Gaussian of the
  chosen FWHM with a 40 ps exponential tail, common practice, no source), convolved with the
  curve by a plain sum on the 5-ps grid (the midpoint rule at each bin's centre; checked
  against the continuous convolution, its best delay is t0 to 0.1 ps), delayed by t0, summed
  into 10-ps bins, scaled to the
  chosen counts at the peak, plus a flat background, and Poisson noise (numpy's generator).

The expected counts λ carry the Monte Carlo run's own standard error (``lam_sd``); tests use
it to separate the fit's error from the reference curve's.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy.special import erfc

FIXTURES = Path(__file__).parent / "fixtures"
C_MM_PER_PS = 0.299792458  # SI definition of the metre
DATA_STEP_PS = 10.0
IRF_TAIL_PS = 40.0  # common practice, no source: a detector's diffusion tail of some tens of ps


@dataclass(frozen=True)
class Curve:
    time_ps: np.ndarray  # data bin centres
    lam: np.ndarray  # expected counts
    lam_sd: np.ndarray  # their SD from the Monte Carlo run
    irf_time_ps: np.ndarray
    irf: np.ndarray  # expected IRF counts per bin (no noise)


def half_space():
    data = np.load(FIXTURES / "mc_td_half_space.npz")
    return {key: data[key] for key in data.files}


def half_space_early():
    """The gated low-noise run for early, strongly absorbing curves (``fixtures/mc_td_half_space_early.npz``)."""
    data = np.load(FIXTURES / "mc_td_half_space_early.npz")
    return {key: data[key] for key in data.files}


def slab():
    data = np.load(FIXTURES / "mc_td_slab.npz")
    return {key: data[key] for key in data.files}


def slab_deep():
    """The slab run with several times its photons (``fixtures/mc_td_slab_deep.npz``: it and more runs, merged)."""
    data = np.load(FIXTURES / "mc_td_slab_deep.npz")
    return {key: data[key] for key in data.files}


def absorbed(run, mua_per_mm: float):
    """R and its SE at μa: each 5-ps bin times the bin average of exp(−μa v t)."""
    v = C_MM_PER_PS / float(run["n"])
    step = float(run["time_ps"][1] - run["time_ps"][0])
    lo = run["time_ps"] - step / 2
    rate = mua_per_mm * v
    factor = np.exp(-rate * lo) * (-np.expm1(-rate * step)) / (rate * step) if rate > 0 else np.ones_like(lo)
    return run["values"] * factor, run["sd"] * factor


def point_value(run, values, sd, rho_mm: float):
    """R(ρ, t) at a ring centre from that ring and its two neighbours (1-mm rings)."""
    rho = run["rho_mm"]
    j = int(np.argmin(np.abs(rho - rho_mm)))
    if not (0 < j < rho.size - 1) or abs(rho[j] - rho_mm) > 1e-9:
        raise ValueError("the point value needs a ring centred on rho with a ring on each side")
    delta = float(rho[j + 1] - rho[j])
    first = (values[j + 1] - values[j - 1]) / (2 * delta)
    second = (values[j + 1] - 2 * values[j] + values[j - 1]) / delta**2
    point = values[j] - first * delta**2 / (12 * rho[j]) - second * delta**2 / 24
    # the rings are independent: the coefficients of R̄_j, R̄_{j+1}, R̄_{j−1} in the point value
    a = delta / (24 * rho[j])
    variance = (1 + 1 / 12) ** 2 * sd[j] ** 2 + (a + 1 / 24) ** 2 * sd[j + 1] ** 2 + (a - 1 / 24) ** 2 * sd[j - 1] ** 2
    return point, np.sqrt(variance)


def irf_shape(time_ps: np.ndarray, fwhm_ps: float, centre_ps: float) -> np.ndarray:
    """Exponentially modified Gaussian (density per ps) with a Gaussian part of the given FWHM."""
    sigma = fwhm_ps / (2 * math.sqrt(2 * math.log(2)))
    x = time_ps - centre_ps
    tau = IRF_TAIL_PS
    return (0.5 / tau) * np.exp(sigma**2 / (2 * tau**2) - x / tau) * erfc((sigma**2 / tau - x) / (sigma * math.sqrt(2)))


def instrument_curve(run, *, mua_per_mm, rho_mm, fwhm_ps, shift_ps, peak_counts, background=5.0,
                     irf_centre_ps=400.0, window_ps=(0.0, 6000.0)) -> Curve:
    """Expected counts per 10-ps bin of a TCSPC recording of the fixture's medium at μa.

    The response R(ρ, t) (point value) is delayed by ``shift_ps`` relative to the IRF, whose
    Gaussian part is centred at ``irf_centre_ps`` of the histogram's time axis.
    """
    values, sd = absorbed(run, mua_per_mm)
    point, point_sd = point_value(run, values, sd, rho_mm)
    return instrument_from_response(run["time_ps"], point, point_sd, fwhm_ps=fwhm_ps, shift_ps=shift_ps,
                                    peak_counts=peak_counts, background=background, irf_centre_ps=irf_centre_ps,
                                    window_ps=window_ps)


def instrument_from_response(time_ps, point, point_sd, *, fwhm_ps, shift_ps, peak_counts, background=5.0,
                             irf_centre_ps=400.0, window_ps=(0.0, 6000.0)) -> Curve:
    """:func:`instrument_curve` from a response R(t) [per ps] and its SE on the run's bins."""
    fine_step = float(time_ps[1] - time_ps[0])
    fine_t = np.arange(window_ps[0], window_ps[1], fine_step) + fine_step / 2
    irf_fine = irf_shape(fine_t, fwhm_ps, irf_centre_ps) * fine_step  # probability per fine bin (the IRF file)
    # the convolution's kernel: the IRF at the bins' starts.  A response bin (centre c) and an
    # IRF bin (centre c') land at c + c', half a fine bin after the centre of the output bin
    # they are summed into; sampled at the starts, the sum is the midpoint rule of the
    # continuous convolution at each output bin's centre (with the IRF at the centres, the
    # recorded delay was shift_ps − 2.5 ps: the fits' t0 came out 2.5 ps "early")
    kernel = irf_shape(fine_t - fine_step / 2, fwhm_ps, irf_centre_ps) * fine_step
    k = int(round(shift_ps / fine_step))
    response = np.zeros(fine_t.size)
    response_var = np.zeros(fine_t.size)
    n = min(point.size, fine_t.size - k)
    response[k:k + n] = point[:n] * fine_step  # per fine bin
    response_var[k:k + n] = (point_sd[:n] * fine_step) ** 2
    lam = np.convolve(response, kernel)[:fine_t.size]
    var = np.convolve(response_var, kernel**2)[:fine_t.size]  # bins of the MC run are independent
    per = int(round(DATA_STEP_PS / fine_step))
    usable = (fine_t.size // per) * per
    lam = lam[:usable].reshape(-1, per).sum(axis=1)
    var = var[:usable].reshape(-1, per).sum(axis=1)
    data_t = fine_t[:usable].reshape(-1, per).mean(axis=1)
    scale = peak_counts / lam.max()
    irf_data = irf_fine[:usable].reshape(-1, per).sum(axis=1)
    return Curve(time_ps=data_t, lam=scale * lam + background, lam_sd=scale * np.sqrt(var),
                 irf_time_ps=data_t, irf=irf_data)


def td_csv(curves: dict[tuple[float, float], np.ndarray], time_ps) -> str:
    """The td CSV text of counts per (wavelength, distance)."""
    lines = ["# source: Monte Carlo test data (phantomlab engine, fixtures/make_td_fixtures.py)",
             "wavelength_nm,rho_mm,time_ps,counts"]
    for (wl, rho), counts in sorted(curves.items()):
        lines += [f"{wl:g},{rho:g},{t:g},{c:.10g}" for t, c in zip(time_ps, counts)]
    return "\n".join(lines) + "\n"


def irf_csv(time_ps, counts) -> str:
    return "time_ps,counts\n" + "\n".join(f"{t:g},{c:.10g}" for t, c in zip(time_ps, counts)) + "\n"
