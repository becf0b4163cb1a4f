"""Make the demo oxygenation series of the Kestrel Bay Optics Lab (demo data, invented).

`demo-oximeter-series.csv` stands for the μa spectra of a liquid blood phantom (whole blood
at about 35 µM total haemoglobin in buffer with lipid emulsion) being deoxygenated by yeast
over an hour, measured every 5 minutes at 650–950 nm every 10 nm; `demo-oximeter-references.csv`
for blood-gas analyser readings of samples drawn now and then.  Both are synthetic:

* true sO2(t) = 0.02 + 0.96 / (1 + exp((t − 30 min) / 7 min)), total haemoglobin 35 µM,
  water fraction 0.97, the phantom at 37 °C (the measuring temperature of
  demo-oximeter-blood.toml);
* μa = ln(10)/10 · 1e-6 · c · (sO2 ε_HbO2 + (1 − sO2) ε_Hb) + 0.97 μa_water, with ε from the
  Gratzer & Kollias table shipped with phantomlab and water from phantomlab.materials.water
  at 37 °C (IOCCG 2018 temperature coefficients),
  times (1 + 0.01 e), e from a seeded normal generator; the SD column is 1 %;
* reference readings: the true sO2 at their times plus a normal error of 0.01, in percent,
  rounded to 0.1 %.

Nothing here is a real measurement.  Regenerate (from the repository root):
    .venv/bin/python recipes/measurements/make_demo_oxygenation.py
"""

import datetime as dt
import math
from pathlib import Path

import numpy as np

from phantomlab.materials.haemoglobin import haemoglobin_mua_per_mm_per_um
from phantomlab.materials.water import water_absorption_at_temperature

HERE = Path(__file__).resolve().parent
START = dt.datetime(2026, 3, 2, 10, 0)
WAVELENGTH_NM = np.arange(650.0, 951.0, 10.0)
THB_UM = 35.0
WATER_FRACTION = 0.97
TEMPERATURE_C = 37.0
SERIES_MINUTES = range(0, 61, 5)
READING_MINUTES = (2, 13, 24, 31, 38, 47, 58)


def true_so2(minutes: float) -> float:
    return 0.02 + 0.96 / (1.0 + math.exp((minutes - 30.0) / 7.0))


def main() -> None:
    rng = np.random.default_rng(20260302)
    hbo2 = haemoglobin_mua_per_mm_per_um("hbo2", wavelength_nm=WAVELENGTH_NM)
    hb = haemoglobin_mua_per_mm_per_um("hb", wavelength_nm=WAVELENGTH_NM)
    water = WATER_FRACTION * water_absorption_at_temperature(WAVELENGTH_NM, temperature_c=TEMPERATURE_C)
    lines = [
        "# source: demo data, invented (Kestrel Bay Optics Lab oximeter-test series; synthetic: "
        "Gratzer & Kollias haemoglobin table, 35 uM, water at 37 C, yeast deoxygenation over 60 min, 1 % noise; "
        "made by make_demo_oxygenation.py)",
        "measured_at,wavelength_nm,mua_per_mm,mua_sd_per_mm",
    ]
    for minutes in SERIES_MINUTES:
        so2 = true_so2(minutes)
        mua = THB_UM * (so2 * hbo2 + (1 - so2) * hb) + water
        noisy = mua * (1 + 0.01 * rng.standard_normal(mua.size))
        stamp = (START + dt.timedelta(minutes=minutes)).isoformat(timespec="minutes")
        lines += [f"{stamp},{w:g},{m:.6g},{0.01 * t:.3g}" for w, m, t in zip(WAVELENGTH_NM, noisy, mua)]
    (HERE / "demo-oximeter-series.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    readings = [
        "# source: demo data, invented (Kestrel Bay Optics Lab; blood-gas analyser readings, synthetic: "
        "true sO2 + 0.01 normal error; made by make_demo_oxygenation.py)",
        "measured_at,reference_so2_percent,method,instrument",
    ]
    for minutes in READING_MINUTES:
        value = min(100.0, max(0.0, 100 * (true_so2(minutes) + 0.01 * rng.standard_normal())))
        stamp = (START + dt.timedelta(minutes=minutes)).isoformat(timespec="minutes")
        readings.append(f"{stamp},{value:.1f},blood-gas analyser,KBOL analyser 2")
    (HERE / "demo-oximeter-references.csv").write_text("\n".join(readings) + "\n", encoding="utf-8")


if __name__ == "__main__":
    main()
