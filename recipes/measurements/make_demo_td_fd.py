"""Make the demo time-domain and frequency-domain files of the Kestrel Bay Optics Lab (demo data).

The files stand for a characterisation of the lab's (invented) silicone reference phantom
"KB-REF-7" — n = 1.40, μs′ = 1.2 /mm flat across the band, μa 0.0080, 0.0060 and 0.0095 /mm
at 690, 780 and 830 nm — on an invented time-resolved instrument (pulsed diodes, 10-ps bins,
IRF of 150 ps FWHM) and an invented frequency-domain instrument (100, 200, 300 MHz).
Nothing here is a real measurement.

Where the numbers come from: the project's own Monte Carlo (the stored run of
``tests/calibration/fixtures/mc_td_half_space.npz``, made by ``make_td_fixtures.py`` beside it:
μs = 6 /mm, g = 0.8, n = 1.4, μa = 0, 1-mm rings, 5-ps bins), given each wavelength's μa by the
Beer–Lambert weight of each bin, turned into point values at the ring centre from the ring and
its neighbours, then

* td (``demo-reference-td.csv``, ρ = 15 mm): convolved with an IRF (a Gaussian of 150 ps FWHM
  with a 40 ps exponential tail), delayed by 60 ps, summed into 10-ps bins, scaled to 20 000
  counts at the peak plus 4 counts of background per bin, with Poisson noise; the IRF file
  (``demo-reference-irf.csv``) is the same IRF with 2 000 000 counts at its peak, Poisson
  noise, 3 counts of background;
* fd (``demo-reference-fd.csv``, ρ = 10–20 mm): the Fourier transform of the curves
  (R̃ = Σ R(t) e^(−iωt) Δt), amplitude relative (× 3.7) with 0.5 % noise, phase lag + 12.5°
  of system phase with 0.2° noise, both with their SD columns.

The Monte Carlo curves carry their own photon noise (about 0.5 % per 10-ps bin near the peak at
15 mm), which is why the td file has 2·10⁴ counts at the peak rather than 10⁵: at that level the
Poisson noise of the counts is larger than the curves' own.

Regenerate (from the repository root; needs the fixture file):
    .venv/bin/python recipes/measurements/make_demo_td_fd.py
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
from scipy.special import erfc

HERE = Path(__file__).resolve().parent
RUN = HERE.parents[1] / "tests" / "calibration" / "fixtures" / "mc_td_half_space.npz"
C_MM_PER_PS = 0.299792458
WAVELENGTHS = (690.0, 780.0, 830.0)
MUA_PER_MM = (0.0080, 0.0060, 0.0095)
TD_RHO_MM = 15.0
FD_RHO_MM = (10.0, 12.0, 14.0, 16.0, 18.0, 20.0)
FREQUENCIES_MHZ = (100.0, 200.0, 300.0)
STEP_PS = 10.0
SOURCE = ("# source: demo data, invented (Kestrel Bay Optics Lab, reference phantom KB-REF-7): the project's "
          "Monte Carlo, {what}; made by make_demo_td_fd.py")


def _point_curve(run, mua: float, rho: float):
    """R(ρ, t) at the ring centre, per unit incident energy, on the run's 5-ps bins."""
    v = C_MM_PER_PS / float(run["n"])
    t = run["time_ps"]
    step = float(t[1] - t[0])
    rate = mua * v
    factor = np.exp(-rate * (t - step / 2)) * (-np.expm1(-rate * step)) / (rate * step)
    values = run["values"] * factor
    j = int(np.argmin(np.abs(run["rho_mm"] - rho)))
    delta = float(run["rho_mm"][j + 1] - run["rho_mm"][j])
    first = (values[j + 1] - values[j - 1]) / (2 * delta)
    second = (values[j + 1] - 2 * values[j] + values[j - 1]) / delta**2
    # a ring [ρ − Δ/2, ρ + Δ/2] averages R + R′Δ²/(12ρ) + R″Δ²/24
    return t, values[j] - first * delta**2 / (12 * rho) - second * delta**2 / 24


def _irf(time_ps, fwhm_ps=150.0, centre_ps=300.0, tail_ps=40.0):
    sigma = fwhm_ps / (2 * math.sqrt(2 * math.log(2)))
    x = time_ps - centre_ps
    return (0.5 / tail_ps) * np.exp(sigma**2 / (2 * tail_ps**2) - x / tail_ps) * erfc(
        (sigma**2 / tail_ps - x) / (sigma * math.sqrt(2)))


def main() -> None:
    run = {k: v for k, v in np.load(RUN).items()}
    rng = np.random.default_rng(20261204)
    fine_step = float(run["time_ps"][1] - run["time_ps"][0])
    window = np.arange(0.0, 5000.0, fine_step) + fine_step / 2
    irf_fine = _irf(window) * fine_step  # the IRF file: its probability per fine bin
    # the convolution's kernel, the IRF at the bins' starts: a response bin and an IRF bin,
    # summed into an output bin, belong half a bin after its centre; at the starts the sum is
    # the midpoint rule at the centre (with the IRF at the centres, the delay came out 2.5 ps
    # short of the stated 60 ps)
    kernel = _irf(window - fine_step / 2) * fine_step
    per = int(round(STEP_PS / fine_step))
    data_t = window.reshape(-1, per).mean(axis=1)
    lines = [SOURCE.format(what="IRF of 150 ps FWHM and Poisson noise"), "wavelength_nm,rho_mm,time_ps,counts"]
    delay = int(round(60.0 / fine_step))
    for wl, mua in zip(WAVELENGTHS, MUA_PER_MM):
        t, curve = _point_curve(run, mua, TD_RHO_MM)
        response = np.zeros(window.size)
        response[delay:delay + curve.size] = curve[:window.size - delay] * fine_step
        expected = np.convolve(response, kernel)[:window.size].reshape(-1, per).sum(axis=1)
        counts = rng.poisson(expected / expected.max() * 20000.0 + 4.0)
        lines += [f"{wl:g},{TD_RHO_MM:g},{a:g},{c}" for a, c in zip(data_t, counts)]
    (HERE / "demo-reference-td.csv").write_text("\n".join(lines) + "\n")
    irf_counts = rng.poisson(irf_fine.reshape(-1, per).sum(axis=1) / irf_fine.reshape(-1, per).sum(axis=1).max()
                             * 2.0e6 + 3.0)
    keep = data_t < 1500.0
    (HERE / "demo-reference-irf.csv").write_text(
        "time_ps,counts\n" + "\n".join(f"{a:g},{c}" for a, c in zip(data_t[keep], irf_counts[keep])) + "\n")
    (HERE / "demo-reference-td.toml").write_text(
        "# demo data, invented: metadata of demo-reference-td.csv (Kestrel Bay Optics Lab)\n"
        'n = 1.4\nn_outside = 1.0\ngeometry = "reflectance"\nirf = "demo-reference-irf.csv"\n'
        'instrument = "demo time-resolved system (invented)"\n')
    rows = [SOURCE.format(what="Fourier transform of its time-resolved curves, 0.5 % and 0.2 degree noise"),
            "wavelength_nm,rho_mm,frequency_mhz,amplitude,phase_deg,amplitude_sd,phase_sd_deg"]
    for wl, mua in zip(WAVELENGTHS, MUA_PER_MM):
        for rho in FD_RHO_MM:
            t, curve = _point_curve(run, mua, rho)
            for f in FREQUENCIES_MHZ:
                omega = 2 * math.pi * f * 1e-6
                value = np.sum(curve * np.exp(-1j * omega * t)) * fine_step
                amplitude = 3.7 * abs(value) * (1 + 0.005 * rng.standard_normal())
                phase = -math.degrees(np.angle(value)) + 12.5 + 0.2 * rng.standard_normal()
                rows.append(f"{wl:g},{rho:g},{f:g},{amplitude:.6e},{phase:.3f},{0.005 * amplitude:.2e},0.2")
    (HERE / "demo-reference-fd.csv").write_text("\n".join(rows) + "\n")
    (HERE / "demo-reference-fd.toml").write_text(
        "# demo data, invented: metadata of demo-reference-fd.csv (Kestrel Bay Optics Lab)\n"
        'n = 1.4\nn_outside = 1.0\namplitude = "relative"\ninstrument = "demo frequency-domain system (invented)"\n')


if __name__ == "__main__":
    main()
