"""Oxygenation series files: parsing, refusals, and the reference-vs-fitted comparison."""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pytest

from phantomlab.calibration.so2_series import (
    ReferenceReading,
    compare_with_references,
    parse_reference_csv,
    parse_series_csv,
    unmix_series,
)
from phantomlab.errors import InputError

# Gratzer & Kollias rows (Prahl 1999 compilation), 1/(M cm) per mole of tetramer: (nm, HbO2, Hb)
ROWS = [(700, 290, 1794.28), (760, 586, 1548.52), (800, 816, 761.72), (850, 1058, 691.32), (900, 1198, 761.84)]


def _series_text(so2_by_time, thb_um=30.0):
    lines = ["# source: test", "measured_at,wavelength_nm,mua_per_mm,mua_sd_per_mm"]
    for stamp, so2 in so2_by_time:
        for w, e1, e2 in ROWS:
            mua = math.log(10) / 10 * 1e-6 * thb_um * (so2 * e1 + (1 - so2) * e2)
            lines.append(f"{stamp},{w},{mua:.9g},{0.01 * mua:.4g}")
    return "\n".join(lines) + "\n"


def test_series_grouped_by_time_and_unmixed():
    text = _series_text([("2026-03-02T10:10", 0.5), ("2026-03-02T10:00", 0.9), ("2026-03-02 10:20:30", 0.1)])
    points = parse_series_csv(text)
    assert [p.measured_at for p in points] == [dt.datetime(2026, 3, 2, 10, 0), dt.datetime(2026, 3, 2, 10, 10),
                                               dt.datetime(2026, 3, 2, 10, 20, 30)]
    results = unmix_series(points, chromophores=("hbo2", "hb"), source="gratzer-kollias")
    assert [round(r.so2, 6) for r in results] == [0.9, 0.5, 0.1]
    assert all(r.thb_um == pytest.approx(30.0, rel=1e-6) for r in results)


@pytest.mark.parametrize(
    "text, message",
    [
        ("measured_at,wavelength_nm,mua_per_mm\n,700,0.01\n", r"line 2: no time \(measured_at\)"),
        ("measured_at,wavelength_nm,mua_per_mm\nyesterday,700,0.01\n", "line 2, column measured_at: not a date and time"),
        ("measured_at,wavelength_nm,mua_per_mm\n2026-03-02T10:00+01:00,700,0.01\n", "carries a time zone"),
        ("measured_at,wavelength_nm\n2026-03-02T10:00,700\n", "header lacks mua_per_mm"),
        ("measured_at,wavelength_nm,mua_per_mm,musp_per_mm\n", "column 'musp_per_mm': not a series column"),
        ("measured_at,wavelength_nm,mua_per_mm\n2026-03-02T10:00,700,-1\n", "mua_per_mm: must be >= 0"),
        ("measured_at,wavelength_nm,mua_per_mm\n2026-03-02T10:00,700,0.1\n2026-03-02T10:00,700,0.2\n",
         "lists a wavelength twice"),
        ("", "empty"),
    ],
)
def test_series_refusals(text, message):
    with pytest.raises(InputError, match=message):
        parse_series_csv(text)


def test_series_limits():
    rows = "".join(f"2026-03-02T10:00,{600 + i * 0.001},0.01\n" for i in range(200_001))
    with pytest.raises(InputError, match="at most 200000"):
        parse_series_csv("measured_at,wavelength_nm,mua_per_mm\n" + rows)


def test_references_fraction_and_percent():
    fraction = parse_reference_csv("measured_at,reference_so2\n2026-03-02T10:05,0.97\n2026-03-02T10:01,0.99\n")
    percent = parse_reference_csv("measured_at,reference_so2_percent,method\n2026-03-02T10:05,97,co-oximeter\n")
    assert [r.so2 for r in fraction] == [0.99, 0.97]  # in time order
    assert percent[0].so2 == pytest.approx(0.97) and percent[0].method == "co-oximeter"


@pytest.mark.parametrize(
    "text, message",
    [
        ("measured_at,reference_so2\n2026-03-02T10:05,1.2\n", "1.2 is outside 0-1"),
        ("measured_at,reference_so2\n2026-03-02T10:05,97\n", "use reference_so2_percent for %"),
        ("measured_at,reference_so2_percent\n2026-03-02T10:05,-3\n", "-3 is outside 0-100 %"),
        ("measured_at,reference_so2_percent\n2026-03-02T10:05,101\n", "101 is outside 0-100 %"),
        ("measured_at,reference_so2\n,0.9\n", "line 2: no time"),
        ("reference_so2\n0.9\n", "header lacks measured_at"),
        ("measured_at,reference_so2,reference_so2_percent\n2026-03-02T10:05,0.9,90\n", "exactly one of"),
        ("measured_at,so2\n2026-03-02T10:05,0.9\n", "column 'so2': not a reference column"),
        ("measured_at,reference_so2\n", "no readings"),
    ],
)
def test_reference_refusals(text, message):
    with pytest.raises(InputError, match=message):
        parse_reference_csv(text)


def test_comparison_interpolates_inside_and_takes_the_nearest_outside():
    t0 = dt.datetime(2026, 3, 2, 10, 0)
    times = [t0, t0 + dt.timedelta(minutes=10)]
    readings = [ReferenceReading(t0 + dt.timedelta(minutes=4), 0.8), ReferenceReading(t0 + dt.timedelta(minutes=13), 0.5)]
    rows = compare_with_references(times, [0.9, 0.6], [0.01, 0.03], readings)
    assert rows[0].how == "interpolated" and rows[0].fitted_so2 == pytest.approx(0.78)  # 0.9 - 0.3 * 4/10
    assert rows[0].fitted_so2_sd == pytest.approx(0.018) and rows[0].gap_min == pytest.approx(4.0)
    assert rows[0].difference == pytest.approx(-0.02)
    assert rows[1].how == "nearest" and rows[1].fitted_so2 == 0.6 and rows[1].gap_min == pytest.approx(3.0)
    assert np.isfinite(rows[1].difference)
