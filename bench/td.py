"""Benchmark of the time-domain and frequency-domain fits (issue 14): prints its figures.

    .venv/bin/python bench/td.py

* one td curve (400 bins of 10 ps, IRF of 150 ps FWHM, 1e5 counts at the peak) fitted with the
  Monte Carlo lookup once the baseline and its lookup table exist (target <= 50 ms), and with
  diffusion; beside them, in the same process, the same curve fitted the plain way (scipy's
  least_squares over μa, μs′, t0 and the amplitude, a numerical convolution by np.convolve at
  every call) as the ratio's baseline;
* 20 wavelengths in one file (target <= 1 s);
* 20 wavelengths where the IRF (300 ps) is wider than the curve's rise (μs′/μa 10 at 11 mm):
  there the lookup's noise is carried by 24 refits a wavelength (td_lookup_refits.py); the
  same fit with the refits left out, in the same process, is the ratio's baseline;
* an fd file (5 distances, 3 frequencies, 20 wavelengths);
* transmittance through a 15 mm slab with the Monte Carlo slab model (``mc-slab``) once its
  slab runs exist (the test cache, tests/calibration/fixtures/slab-cache), point detector and
  a 6 mm detection face, beside contini1997 (the model it corrects) in the same process; the
  data are mc-slab's own curves with Poisson noise.

Times are the process's CPU time (one BLAS thread: run with OPENBLAS_NUM_THREADS=1), with the
wall time beside it: on a machine shared with other jobs the wall time is inflated by them.

The baseline is the test fixture's (tests/calibration/fixtures/mc_baseline.npz) when present,
else one of 500 000 photons is built first.  Synthetic data (demo, invented): the lookup's own
curves with Poisson noise — a timing bench, not an accuracy check.
"""

from __future__ import annotations

import time
import warnings
from pathlib import Path

import numpy as np
from scipy.optimize import least_squares

from phantomlab.calibration.fd_measurements import read_fd
from phantomlab.calibration.fit_fd import fit_fd
from phantomlab.calibration.fit_td import fit_td
from phantomlab.calibration.mc_lookup_time import time_resolved_lookup
from phantomlab.calibration.td_measurements import irf_table, read_td
from phantomlab.errors import PhantomlabWarning
from phantomlab.transport.convolution import irf_convolved_counts
from phantomlab.transport.frequency_domain import amplitude_and_phase
from phantomlab.transport.montecarlo import build_baseline, load_baseline
from phantomlab.transport.time_domain import time_resolved_rows

warnings.simplefilter("ignore", PhantomlabWarning)
FIXTURE = Path(__file__).resolve().parents[1] / "tests" / "calibration" / "fixtures" / "mc_baseline.npz"
STEP = 10.0
TIME = np.arange(0.0, 4000.0, STEP) + STEP / 2
IRF_TIME = np.arange(0.0, 1000.0, STEP) + STEP / 2
IRF = np.exp(-0.5 * ((IRF_TIME - 300.0) / (150.0 / 2.3548)) ** 2)


def _baseline():
    if FIXTURE.is_file():
        return load_baseline(FIXTURE), "fixture"
    start = time.perf_counter()
    made = build_baseline(mua_per_mm=0.0003, mus_per_mm=5.0, g=0.8, n=1.4, photons=500_000, seed=3)
    return made, f"built in {time.perf_counter() - start:.1f} s"


def _td_text(lookup, wavelengths, rng, *, irf=IRF, rho=15.0, ratio=None):
    rows = ["wavelength_nm,rho_mm,time_ps,counts"]
    for i, wl in enumerate(wavelengths):
        mua, musp = 0.005 + 0.0005 * i, 1.0 + 0.01 * i
        mua = mua if ratio is None else musp / ratio
        counts = irf_convolved_counts(
            model=lambda t: lookup.point(mua_per_mm=np.full(t.shape[0], mua), mus_per_mm=np.full(t.shape[0], musp / 0.2),
                                         rho_mm=np.full(t.shape, rho), time_ps=t),
            time_ps=TIME, irf_time_ps=IRF_TIME, irf=irf, shift_ps=80.0)[0]
        noisy = rng.poisson(counts / counts.max() * 1e5 + 3.0)
        rows += [f"{wl:g},{rho:g},{t:g},{c}" for t, c in zip(TIME, noisy)]
    return "\n".join(rows) + "\n"


def td_fits(baseline) -> None:
    lookup = time_resolved_lookup(baseline)
    rng = np.random.default_rng(1)
    sidecar = {"n": 1.4, "irf": irf_table(IRF_TIME, np.round(IRF * 1e7))}
    one = read_td(_td_text(lookup, [800.0], rng), sidecar=sidecar)
    twenty = read_td(_td_text(lookup, np.linspace(650, 900, 20), rng), sidecar=sidecar)
    fit_td(one, model="mc", baseline=baseline)  # warm-up
    for model in ("mc", "kienle1997"):
        repeats = 5
        wall, cpu = time.perf_counter(), time.process_time()
        for _ in range(repeats):
            fit = fit_td(one, model=model, baseline=baseline)
        single, single_cpu = ((time.perf_counter() - wall) / repeats, (time.process_time() - cpu) / repeats)
        wall, cpu = time.perf_counter(), time.process_time()
        fit_td(twenty, model=model, baseline=baseline)
        many, many_cpu = time.perf_counter() - wall, time.process_time() - cpu
        print(f"td fit, model {model}: one curve {1000 * single_cpu:.0f} ms CPU ({1000 * single:.0f} ms wall) "
              f"(target <= 50 ms); 20 wavelengths {many_cpu:.2f} s CPU ({many:.2f} s wall) (target <= 1 s); "
              f"chi2_red {fit.chi2_red:.2f}")
    # the plain way: least_squares over (log mua, log musp, t0, log A), np.convolve of the
    # model on the data grid at every call (no variable projection, no precomputation)
    data = one.counts[0, 0]
    irf = IRF / IRF.sum()

    def residual(x):
        model = time_resolved_rows(mua_per_mm=np.exp(x[0]), musp_per_mm=np.exp(x[1]), rho_mm=15.0,
                                   time_ps=TIME - IRF_TIME[0] - x[2], n=1.4)
        expected = np.exp(x[3]) * np.convolve(model, irf)[:TIME.size] * STEP + 3.0
        return (expected - data) / np.sqrt(np.maximum(data, 1.0))

    cpu = time.process_time()
    plain = least_squares(residual, [np.log(0.004), np.log(0.8), 0.0, np.log(1e5 / 5e-5)], x_scale="jac")
    loop = time.process_time() - cpu
    print(f"plain least_squares of the same curve (diffusion, np.convolve, {plain.nfev} calls, started near the "
          f"answer): {1000 * loop:.0f} ms CPU; ratio plain/ours (diffusion) {loop / single_cpu:.1f}x")


def td_wide_irf_fits(baseline) -> None:
    import phantomlab.calibration.fit_td as fit_td_module

    lookup = time_resolved_lookup(baseline)
    wide = np.exp(-0.5 * ((IRF_TIME - 300.0) / (300.0 / 2.3548)) ** 2)
    sidecar = {"n": 1.4, "irf": irf_table(IRF_TIME, np.round(wide * 1e7))}
    twenty = read_td(_td_text(lookup, np.linspace(650, 900, 20), np.random.default_rng(3), irf=wide, rho=11.0,
                              ratio=10.0), sidecar=sidecar)
    cpu = time.process_time()
    fit = fit_td(twenty, model="mc", baseline=baseline)
    with_refits = time.process_time() - cpu
    refits = fit_td_module.refit_covariance
    fit_td_module.refit_covariance = lambda *a, rows, x, **k: np.zeros((len(rows), x.shape[1], x.shape[1]))
    try:
        cpu = time.process_time()
        fit_td(twenty, model="mc", baseline=baseline)
        without = time.process_time() - cpu
    finally:
        fit_td_module.refit_covariance = refits
    print("td fit, IRF wider than the rise (mu_s'/mu_a 10, 11 mm, IRF 300 ps), 20 wavelengths: "
          f"{with_refits:.2f} s CPU "
          f"with the refits, {without:.2f} s without; ratio {with_refits / without:.1f}x "
          f"(median mu_s' SD {100 * np.median(fit.musp_sd_per_mm / fit.musp_per_mm):.1f} %)")


def fd_fits(baseline) -> None:
    rng = np.random.default_rng(2)
    rho = np.array([10.0, 15.0, 20.0, 25.0, 30.0])
    freq = np.array([100.0, 200.0, 300.0])
    rows = ["wavelength_nm,rho_mm,frequency_mhz,amplitude,phase_deg,amplitude_sd,phase_sd_deg"]
    for i, wl in enumerate(np.linspace(650, 900, 20)):
        amp, phase = amplitude_and_phase(mua_per_mm=0.005 + 0.0005 * i, musp_per_mm=1.0, rho_mm=rho[:, None],
                                         frequency_mhz=freq[None, :], n=1.4)
        amp = amp * (1 + 0.005 * rng.standard_normal(amp.shape))
        phase = phase + 10 + 0.2 * rng.standard_normal(phase.shape)
        rows += [f"{wl:g},{r:g},{f:g},{a:.6g},{p:.4f},{0.005 * a:.3g},0.2"
                 for r, ar, pr in zip(rho, amp, phase) for f, a, p in zip(freq, ar, pr)]
    m = read_fd("\n".join(rows) + "\n", sidecar={"n": 1.4})
    for model in ("kienle1997", "mc"):
        cpu = time.process_time()
        fit_fd(m, model=model, baseline=baseline)
        print(f"fd fit, model {model}, 20 wavelengths x 5 distances x 3 frequencies: "
              f"{time.process_time() - cpu:.2f} s CPU")


def slab_fits() -> None:
    from phantomlab.calibration.slab_time_correction import SlabCorrection
    from phantomlab.calibration.slab_time_nodes import load_node, node_file_name

    cache = FIXTURE.parent / "slab-cache"
    taus = (16.0, 19.03)
    paths = [cache / node_file_name(g=0.8, n=1.4, n_outside=1.0, tau_prime=t) for t in taus]
    if not all(p.is_file() for p in paths):
        print("slab model: the test cache's slab runs are missing (tests/calibration/fixtures/make_slab_nodes.py)")
        return
    start = time.process_time()
    correction = SlabCorrection([load_node(p) for p in paths])
    print(f"slab model: tables of {len(taus)} slab runs made in {time.process_time() - start:.2f} s CPU (once per "
          "process and run)")
    from phantomlab.calibration.td_models import face_average, td_curve_model

    slab_model = td_curve_model(model="mc-slab", geometry="transmittance", thickness_mm=15.0, n=1.4, n_outside=1.0,
                                slab_correction=correction)
    for face in (None, 6.0):
        # the model's own curves (on the same face) with Poisson noise: a timing bench
        shape = slab_model if face is None else face_average(slab_model, core_mm=face, rho_mm=np.zeros(1))
        rng = np.random.default_rng(3)
        rows = ["wavelength_nm,rho_mm,time_ps,counts"]
        for i, wl in enumerate(np.linspace(650, 900, 20)):
            response = shape(np.array([0.01 + 0.0005 * i]), np.array([1.2]), np.zeros(1), TIME[None, :])[0]
            counts = np.convolve(response, IRF)[:TIME.size]
            rows += [f"{wl:g},0,{t:g},{c}" for t, c in zip(TIME, rng.poisson(counts / counts.max() * 1e5 + 3.0))]
        text = "\n".join(rows) + "\n"
        sidecar = {"n": 1.4, "irf": irf_table(IRF_TIME, np.round(IRF * 1e7)), "geometry": "transmittance",
                   "thickness_mm": 15.0, **({"detector": "fibre", "fibre_core_mm": face} if face else {})}
        twenty = read_td(text, sidecar=sidecar)
        one = read_td("\n".join(rows[:1 + TIME.size]) + "\n", sidecar=sidecar)
        times = {}
        for model in ("contini1997", "mc-slab"):
            options = {"slab_correction": correction, "musp_range_per_mm": (16.0 / 15, 19.03 / 15)} \
                if model == "mc-slab" else {}
            cpu = time.process_time()
            fit_td(one, model=model, **options)
            single = time.process_time() - cpu
            cpu = time.process_time()
            fit_td(twenty, model=model, **options)
            times[model] = (single, time.process_time() - cpu)
        label = "point detector" if face is None else f"{face:g} mm face"
        print(f"td transmittance, {label}: mc-slab one curve {1000 * times['mc-slab'][0]:.0f} ms CPU, 20 wavelengths "
              f"{times['mc-slab'][1]:.2f} s CPU; contini1997 {1000 * times['contini1997'][0]:.0f} ms, "
              f"{times['contini1997'][1]:.2f} s; ratio mc-slab/contini1997 {times['mc-slab'][1] / times['contini1997'][1]:.1f}x")


def main() -> None:
    baseline, how = _baseline()
    start = time.perf_counter()
    time_resolved_lookup(baseline)
    print(f"baseline ({how}): {baseline.detected} photons; time-resolved lookup table built in "
          f"{time.perf_counter() - start:.1f} s (once per baseline)")
    td_fits(baseline)
    td_wide_irf_fits(baseline)
    fd_fits(baseline)
    slab_fits()


if __name__ == "__main__":
    main()
