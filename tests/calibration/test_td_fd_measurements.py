"""Reading td and fd measurement files: layouts, sidecar keys, one-line refusals.

Every refusal names the file, the row (and file line) and the column, and echoes no cell
content beyond the offending number (rule 8).  The numbers in these files are made up here
(layout checks, no physics).
"""

import math

import numpy as np
import pytest

from phantomlab.calibration import read_measurement
from phantomlab.calibration.fd_measurements import read_fd
from phantomlab.calibration.fit_file import fit_measurement_file
from phantomlab.calibration.td_measurements import read_td, sidecar_with_inline_irf
from phantomlab.errors import InputError

STEP = 20.0


def _td_text(times=None, counts=None, wavelengths=(700.0,), rho=(15.0,)):
    times = np.arange(10.0, 2000.0, STEP) if times is None else np.asarray(times)
    if counts is None:
        counts = np.round(1000 * np.exp(-0.5 * ((times - 600) / 150) ** 2)) + 3
    lines = ["wavelength_nm,rho_mm,time_ps,counts"]
    for w in wavelengths:
        for r in rho:
            lines += [f"{w:g},{r:g},{t:g},{c:g}" for t, c in zip(times, counts)]
    return "\n".join(lines) + "\n"


def _irf_text(step=STEP, start=0.0, stop=800.0):
    t = np.arange(start, stop, step) + step / 2
    c = np.round(1e5 * np.exp(-0.5 * ((t - 300) / 40) ** 2))
    return "time_ps,counts\n" + "\n".join(f"{a:g},{b:g}" for a, b in zip(t, c)) + "\n"


def _write(tmp_path, text, irf=None, sidecar='n = 1.4\nirf = "irf.csv"\n', name="m"):
    (tmp_path / f"{name}.csv").write_text(text)
    if sidecar is not None:
        (tmp_path / f"{name}.toml").write_text(sidecar)
    (tmp_path / "irf.csv").write_text(_irf_text() if irf is None else irf)
    return tmp_path / f"{name}.csv"


def test_td_file_reads_with_its_irf(tmp_path):
    path = _write(tmp_path, _td_text(wavelengths=(700.0, 800.0), rho=(10.0, 15.0)))
    m = read_measurement(path, kind="td")
    assert m.kind == "td" and m.geometry == "reflectance"
    assert m.counts.shape == (2, 2, np.arange(10.0, 2000.0, STEP).size)
    assert m.irf.shape[0] == 1 and m.step_ps == pytest.approx(STEP)
    assert m.metadata.n == 1.4 and m.irf_name == "irf.csv"


def test_irf_inline_in_the_sidecar_round_trips(tmp_path):
    path = _write(tmp_path, _td_text())
    m = read_td(path)
    text = sidecar_with_inline_irf('n = 1.4\nirf = "irf.csv"\ninstrument = "demo TCSPC"\n', m)
    import tomllib

    table = tomllib.loads(text)
    assert table["instrument"] == "demo TCSPC" and isinstance(table["irf"], dict)
    again = read_td(_td_text(), sidecar=table)
    assert np.array_equal(again.irf, m.irf) and np.array_equal(again.irf_time_ps, m.irf_time_ps)


def test_one_irf_per_wavelength(tmp_path):
    t = np.arange(0.0, 800.0, STEP) + STEP / 2
    rows = ["wavelength_nm,time_ps,counts"]
    for w, centre in ((700, 300.0), (800, 340.0)):
        rows += [f"{w},{a:g},{round(1e5 * math.exp(-0.5 * ((a - centre) / 40) ** 2))}" for a in t]
    path = _write(tmp_path, _td_text(wavelengths=(700.0, 800.0)), irf="\n".join(rows) + "\n")
    m = read_td(path)
    assert m.irf.shape == (2, t.size)
    assert np.argmax(m.irf[1]) > np.argmax(m.irf[0])


@pytest.mark.parametrize("make, match", [
    (lambda p: _write(p, _td_text(), sidecar="n = 1.4\n"), r"m.csv: a td measurement needs its instrument response"),
    (lambda p: _write(p, _td_text(), irf=_irf_text(step=10.0)),
     r"irf.csv: row 1 \(file line 2\), column time_ps: the IRF's time step is 10 ps, the data's 20 ps"),
    (lambda p: _write(p, _td_text(times=[10.0, 30.0, 20.0], counts=[1, 2, 3])),
     r"m.csv: row 3 \(file line 4\), column time_ps: 20 after 30"),
    (lambda p: _write(p, _td_text(times=[-10.0, 10.0, 30.0], counts=[1, 2, 3])),
     r"m.csv: row 1 \(file line 2\), column time_ps: -10 is negative"),
    (lambda p: _write(p, _td_text(times=[10.0, 30.0, 60.0], counts=[1, 2, 3])),
     r"m.csv: row 1 \(file line 2\), column time_ps: bins must be evenly spaced"),
    (lambda p: _write(p, _td_text().replace("\n700,15,30,", "\n700,15,30,-")),
     r"m.csv: row 2 \(file line 3\), column counts: .* is negative"),
    (lambda p: _write(p, _td_text().replace(",counts\n", ",photons\n")),
     r"m.csv: header, column photons: not a column of this file"),
    (lambda p: _write(p, _td_text().replace("rho_mm", "rho_cm")),
     r"m.csv: header, column rho_cm: .*must be rho_mm"),
    (lambda p: _write(p, _td_text().replace("\n700,15,30,", "\n700,15,30,x")),
     r"m.csv: row 2 \(file line 3\), column counts: not a number"),
    (lambda p: _write(p, _td_text(), sidecar='n = 1.4\nirf = "irf.csv"\ngeometry = "transmittance"\n'),
     r"m.toml: geometry = \"transmittance\" needs thickness_mm"),
    (lambda p: _write(p, _td_text(), sidecar='n = 1.4\nirf = "irf.csv"\ngeometry = "sideways"\n'),
     r"m.toml: geometry = 'sideways'; accepted: reflectance, transmittance"),
    (lambda p: _write(p, _td_text(), sidecar='n = 1.4\nirf = "missing.csv"\n'),
     r"IRF file .*missing.csv' not found"),
])
def test_bad_td_input_is_one_line_naming_file_row_and_column(tmp_path, make, match):
    with pytest.raises(InputError, match=match) as caught:
        read_td(make(tmp_path))
    assert "\n" not in str(caught.value)


def test_a_histogram_without_counts_in_the_window_is_refused_naming_its_row(tmp_path):
    flat = _td_text(wavelengths=(700.0, 800.0)).splitlines()
    # the second curve (800 nm) holds nothing but a constant background
    header, first, second = flat[0], flat[1:1 + 100], flat[1 + 100:]
    second = [",".join(line.split(",")[:3] + ["5"]) for line in second]
    path = _write(tmp_path, "\n".join([header] + first + second) + "\n")
    with pytest.raises(InputError, match=r"m.csv: row 101, column counts: no counts above the background in the "
                                         r"fit window at 800 nm, 15 mm"):
        fit_measurement_file(path, kind="td")


FD_HEADER = "wavelength_nm,rho_mm,frequency_mhz,amplitude,phase_deg"


def _fd_text(phases=None):
    rows = [FD_HEADER]
    phase = phases or {10: 12.0, 15: 20.0, 20: 28.0, 25: 36.5}
    for rho, p in phase.items():
        rows.append(f"690,{rho},100,{math.exp(-0.2 * rho) / rho**2:.6g},{p}")
    return "\n".join(rows) + "\n"


def test_fd_file_reads():
    m = read_fd(_fd_text(), sidecar={"n": 1.4, "amplitude": "absolute", "phase_offset_deg": 3.5})
    assert m.amplitude.shape == (1, 4, 1) and m.amplitude_scale == "absolute" and m.phase_offset_deg == 3.5


@pytest.mark.parametrize("text, sidecar, match", [
    (_fd_text({10: 0.21, 15: 0.35, 20: 0.49, 25: 0.64}), {},
     r"<text>: row 1, column phase_deg: the phases at 100 MHz grow by .* degrees/mm, too little for degrees "
     r"\(they look like radians\)"),
    (_fd_text().replace("phase_deg", "phase_rad"), {}, r"header, column phase_rad: .*must be phase_deg"),
    (_fd_text().replace("\n690,15,100,", "\n690,15,-100,"), {}, r"row 2 \(file line 3\), column frequency_mhz"),
    (_fd_text().replace("\n690,20,", "\n690,12,"), {}, r"row 3 \(file line 4\), column rho_mm: 12 after 15"),
    (_fd_text(), {"amplitude": "calibrated"}, r"metadata: amplitude = 'calibrated'; accepted: absolute, relative"),
    (FD_HEADER + ",amplitude_sd\n690,10,100,1,2,0.1\n", {}, r"header gives amplitude_sd but not all of"),
])
def test_bad_fd_input_is_one_line(text, sidecar, match):
    with pytest.raises(InputError, match=match) as caught:
        read_fd(text, sidecar=sidecar)
    assert "\n" not in str(caught.value)


def test_td_replicates_add_their_counts(tmp_path):
    a = _write(tmp_path, _td_text(), name="a")
    b = _write(tmp_path, _td_text(), name="b")
    from phantomlab.calibration.measurements import combine_replicates

    both = combine_replicates([read_td(a), read_td(b)])
    assert both.replicates == 2 and np.array_equal(both.counts, 2 * read_td(a).counts)
