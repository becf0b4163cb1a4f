"""The one PASS/FAIL rule: guarded acceptance with a 2-SD guard band (ISO 14253-1:2017 sec. 5-6;
JCGM 106:2012 sec. 8.3).  Worked cases at the edges of each zone, written out by hand."""

import pytest

from phantomlab.calibration.verdict import GUARD_K, judge

TARGET = {"wavelength_nm": [650.0, 750.0], "mua_per_mm": [0.01, 0.01], "musp_per_mm": [1.0, None],
          "mua_tolerance_percent": 5, "musp_tolerance_percent": 3}


def _values(mua, mua_sd, musp=1.0, musp_sd=0.0):
    return {"wavelength_nm": [650.0, 750.0], "mua_per_mm": mua, "mua_sd_per_mm": mua_sd,
            "musp_per_mm": [musp, musp], "musp_sd_per_mm": [musp_sd, musp_sd]}


@pytest.mark.parametrize("mua, sd, outcome", [
    (0.0104, 0.00005, "PASS"),       # 4 % + 2 x 0.5 % = 5 %: on the edge, inside
    (0.0104, 0.00006, "UNDECIDED"),  # 4 % + 2 x 0.6 % = 5.2 % > 5 %, and 4 % - 1.2 % < 5 %
    (0.0108, 0.00010, "FAIL"),       # 8 % - 2 x 1 % = 6 % > 5 %
    (0.0107, 0.00010, "UNDECIDED"),  # 7 % - 2 % = 5 %: not beyond
    (0.0096, 0.0, "PASS"),           # no SD: plain acceptance, -4 % inside
])
def test_zones(mua, sd, outcome):
    verdict = judge(target=TARGET, values=_values([mua, 0.01], [sd, 0.0]))
    first = verdict.rows[0]
    assert GUARD_K == 2.0
    assert first["outcome"] == outcome
    assert first["pass"] is {"PASS": True, "FAIL": False, "UNDECIDED": None}[outcome]


def test_batch_outcome_and_json():
    failing = judge(target=TARGET, values=_values([0.0108, 0.01], [0.0001, 0.0]))
    assert failing.outcome == "FAIL" and failing.to_json()["pass"] is False
    assert [r["wavelength_nm"] for r in failing.failing()] == [650.0]
    undecided = judge(target=TARGET, values=_values([0.0104, 0.01], [0.0001, 0.0]))
    assert undecided.outcome == "UNDECIDED" and undecided.to_json()["pass"] is False
    passing = judge(target=TARGET, values=_values([0.01, 0.01], [0.0, 0.0]))
    assert passing.outcome == "PASS" and passing.to_json()["pass"] is True
    assert len(passing.rows) == 3  # mua at both wavelengths, musp where targeted
    lines = undecided.lines()
    assert lines[-1].startswith("UNDECIDED") and "the value itself is inside" in lines[0]


def test_values_on_another_grid_are_interpolated_inside_their_band():
    values = {"wavelength_nm": [600.0, 700.0], "mua_per_mm": [0.009, 0.011], "mua_sd_per_mm": [0.0, 0.0],
              "musp_per_mm": [1.0, 1.0], "musp_sd_per_mm": [0.0, 0.0]}
    verdict = judge(target=TARGET, values=values)
    at_650, at_750 = verdict.rows[0], verdict.rows[1]
    assert at_650["value_per_mm"] == pytest.approx(0.010)  # halfway
    assert at_750["value_per_mm"] is None and at_750["outcome"] is None  # outside the measured band
    assert judge(target=TARGET, values=None).outcome is None
