"""The pure helpers of the batch log: amounts files, tolerance alarms, series statistics, the
printable batch record."""

from __future__ import annotations

import math

import numpy as np
import pytest

from phantomlab.commands.batch import parse_amounts_csv, tolerance_alarms
from phantomlab.errors import InputError
from phantomlab.store.record import MAX_TABLE_WAVELENGTHS, _checks, render_batch_record_html, series_statistics


def test_amounts_in_ml_g_and_from_a_pre_dilution():
    rows = parse_amounts_csv(
        "# weighed on the demo balance\nstock,volume_ml,mass_g,dilution_factor\n"
        "lipid20,25.0,,\nink,,0.5,\ndye,2.0,,100\n"
    )
    assert rows == [
        {"stock": "lipid20", "volume_ml": 25.0, "dilution_factor": 1.0},
        {"stock": "ink", "mass_g": 0.5, "dilution_factor": 1.0},
        {"stock": "dye", "volume_ml": 2.0, "dilution_factor": 100.0},
    ]


@pytest.mark.parametrize(
    "text, match",
    [
        ("", "is empty"),
        ("stock,volume_ul\nink,5\n", r"header not accepted \(column 2\)"),
        ("stock,volume\nink,5\n", "accepted: stock,volume_ml or stock,mass_g"),
        ("stock,volume_ml\n", "has a header but no amounts"),
        ("stock,volume_ml\nink,five\n", "volume_ml: not a number"),
        ("stock,volume_ml\nink,nan\n", "must be a finite number >= 0"),
        ("stock,volume_ml\nink,-1\n", "must be a finite number >= 0"),
        ("stock,volume_ml\nink,1\nink,2\n", "given twice"),
        ("stock,volume_ml,mass_g\nink,1,1\n", "exactly one of volume_ml or mass_g"),
        ("stock,volume_ml\n,1\n", "no stock name"),
        ("stock,volume_ml,dilution_factor\nink,1,0.5\n", "must be >= 1"),
    ],
)
def test_bad_amounts_refused_with_one_line(text, match):
    with pytest.raises(InputError, match=match):
        parse_amounts_csv(text, source="a.csv")


TARGET = {"wavelength_nm": [650.0, 750.0], "mua_per_mm": [0.010, None], "musp_per_mm": [1.0, 1.0]}


def test_no_alarm_inside_the_tolerance_and_untargeted_values_ignored():
    predicted = {"mua_per_mm": [0.0104, 5.0], "musp_per_mm": [0.97, 1.03]}
    assert tolerance_alarms(target=TARGET, predicted=predicted, mua_tolerance=0.05, musp_tolerance=0.03) == []


def test_alarm_names_quantity_wavelength_deviation_and_tolerance():
    predicted = {"mua_per_mm": [0.0110, 0.0], "musp_per_mm": [1.0, 0.9]}
    planned = {"mua_per_mm": [0.0100, 0.0], "musp_per_mm": [1.0, 0.95]}
    alarms = tolerance_alarms(target=TARGET, predicted=predicted, planned=planned,
                              mua_tolerance=0.05, musp_tolerance=0.03)
    assert alarms == [
        "ALARM: predicted mua at 650 nm is +10.0% from target (tolerance ±5%)",
        "ALARM: predicted musp at 750 nm is -10.0% from target (tolerance ±3%); the plan itself was -5.0%",
    ]


def test_nan_prediction_raises_no_alarm():
    predicted = {"mua_per_mm": [math.nan, math.nan], "musp_per_mm": [None, None]}
    assert tolerance_alarms(target=TARGET, predicted=predicted, mua_tolerance=0.05, musp_tolerance=0.03) == []


def _point(batch, age, mua, musp, newest=True):
    return {"batch_id": batch, "fit_id": 0, "phantom_age_days": age, "newest": newest,
            "mua_per_mm": [mua], "musp_per_mm": [musp]}


def test_series_cv_against_numpy_and_drift_against_polyfit():
    rng = np.random.default_rng(3)
    ages = np.array([0.0, 3.0, 7.0, 14.0, 30.0])
    mua = 0.01 * (1 + 0.02 * rng.standard_normal(5))
    musp = 1.0 - 0.002 * ages + 0.01 * rng.standard_normal(5)
    points = [_point(f"b{i}", a, x, y) for i, (a, x, y) in enumerate(zip(ages, mua, musp))]
    stats = series_statistics(points, grid=np.array([650.0]))
    # independent check: numpy's sample SD and numpy.polyfit's slope and covariance
    assert stats["mua_cv_percent"][0] == pytest.approx(100 * np.std(mua, ddof=1) / np.mean(mua), rel=1e-12)
    coef, cov = np.polyfit(ages, musp, 1, cov=True)
    assert stats["musp_drift_percent_per_30_days"][0] == pytest.approx(coef[0] * 30 * 100 / musp.mean(), rel=1e-9)
    assert stats["musp_drift_se_percent_per_30_days"][0] == pytest.approx(
        math.sqrt(cov[0, 0]) * 30 * 100 / musp.mean(), rel=1e-9)
    assert stats["batches"] == 5 and stats["fits"] == 5


def test_series_needs_two_batches_for_cv_and_three_aged_points_for_drift():
    one = series_statistics([_point("a", 1.0, 0.01, 1.0)], grid=np.array([650.0]))
    assert one["mua_cv_percent"] == [None] and one["mua_drift_percent_per_30_days"] == [None]
    same_age = series_statistics([_point(b, 2.0, 0.01, 1.0) for b in "abc"], grid=np.array([650.0]))
    assert same_age["musp_drift_percent_per_30_days"] == [None]
    assert same_age["mua_cv_percent"] == [0.0]


def test_series_skips_nan_values_and_unknown_ages():
    points = [_point("a", None, 0.010, 1.0), _point("b", 1.0, math.nan, 1.0), _point("c", 2.0, 0.012, 1.1)]
    stats = series_statistics(points, grid=np.array([650.0]))
    assert stats["mua_cv_percent"][0] == pytest.approx(100 * np.std([0.010, 0.012], ddof=1) / 0.011)
    assert stats["mua_drift_percent_per_30_days"] == [None]  # only one aged finite point


# ---- the printable record ------------------------------------------------------------------

GRID = [600.0 + 20.0 * i for i in range(12)]
TWELVE = {"wavelength_nm": GRID, "mua_per_mm": [0.01] * 12, "musp_per_mm": [1.0] * 12,
          "mua_tolerance_percent": 5, "musp_tolerance_percent": 3}


def _fit(mua):
    return {"wavelength_nm": GRID, "mua_per_mm": mua, "musp_per_mm": [1.0] * 12,
            "mua_sd_per_mm": [1e-4] * 12, "musp_sd_per_mm": [0.01] * 12}


def test_checks_carry_the_prediction_from_the_actual_amounts():
    predicted = {"wavelength_nm": GRID, "mua_per_mm": [0.0102] * 12, "mua_sd_per_mm": [0.001] * 12,
                 "musp_per_mm": [0.99] * 12, "musp_sd_per_mm": [0.03] * 12}
    rows = _checks(TWELVE, _fit([0.0104] * 12), predicted)
    assert len(rows) == 24
    first = rows[0]
    assert first["quantity"] == "mua" and first["deviation_percent"] == pytest.approx(4.0)  # 0.0104 / 0.01 - 1
    # +4 % ± 1 % against ±5 %: inside, but not by 2 SD (guarded acceptance, JCGM 106:2012 sec. 8.3)
    assert first["outcome"] == "UNDECIDED" and first["pass"] is None
    close = _checks(TWELVE, {**_fit([0.0104] * 12), "mua_sd_per_mm": [2e-5] * 12})[0]
    assert close["outcome"] == "PASS" and close["pass"] is True  # 4 % + 2 x 0.2 % <= 5 %
    assert first["predicted_from_actual_per_mm"] == 0.0102 and first["predicted_from_actual_sd_per_mm"] == 0.001
    assert _checks(TWELVE, _fit([0.0104] * 12))[0]["predicted_from_actual_per_mm"] is None


def _record(checks, *, batches=1, fits=1):
    series = series_statistics([], grid=np.array(GRID))
    series.update(batches=batches, fits=fits, points=[])
    return {
        "batch_id": "2026-042", "retracted": False, "pass": all(c["pass"] for c in checks),
        "recipe": {"name": "demo: record test", "version": "1", "content_hash": "ab" * 32},
        "status": "characterised", "operator": None, "planned_on": None, "mixed_on": None,
        "cure_details": None, "notes": None, "software_version_at_planning": "0", "software_version_now": "0",
        "printed_on": None, "lots": [], "potencies_used": {}, "calibration": None,
        "amounts": [{"stock": "ink", "planned_volume_ml": 0.1, "planned_mass_g": 0.1, "actual_volume_ml": 0.1,
                     "actual_mass_g": 0.1, "difference_percent": -0.0001}],
        "alarms": [], "plan_warnings": ["demo planner note"], "measurement": None, "checks": checks,
        "series": series, "history": [], "not_a_standard": "not a certified reference standard",
    }


def test_record_prints_on_a4_caps_the_wavelengths_but_keeps_every_failure():
    mua = [0.0104] * 12
    mua[4] = 0.0110  # +10 % at 680 nm: outside the 5 % tolerance, and not among the evenly spread rows
    checks = _checks(TWELVE, _fit(mua))
    html = render_batch_record_html(_record(checks))
    assert "@page { size: A4" in html
    assert html.count("<td>μa</td>") == MAX_TABLE_WAVELENGTHS + 1  # 8 spread rows plus the failing one
    assert "<td>680</td>" in html and "FAIL" in html
    assert "8 of 12 wavelengths shown (every failing one included)" in html
    assert "demo planner note" in html and "reviewed by" in html and "signature" in html
    assert "(1 batch with fits, 1 fit)" in html
    assert "<td>0.0</td>" in html and "-0.0" not in html  # a zero difference has no sign


def test_record_plural_counts():
    html = render_batch_record_html(_record(_checks(TWELVE, _fit([0.01] * 12)), batches=3, fits=4))
    assert "(3 batches with fits, 4 fits)" in html


def test_record_shows_a_poor_fit_beside_the_verdict_and_the_measurement():
    record = _record(_checks(TWELVE, _fit([0.0104] * 12)))
    record["measurement"] = {
        "measurement_id": 7, "kind": "srdr", "file": "kb.csv", "measured_on": None, "phantom_age_days": 3.0,
        "instrument": None, "fit_id": 9, "model": "diffusion-kienle1997", "chi2_red": 23.9, "fit_warnings": [],
        "fit_quality": "poor", "fit_quality_reason": "the model does not describe these data: chi2_red 23.9",
        "sd_includes": ["measurement_sd", "misfit_scale"]}
    html = render_batch_record_html(record)
    assert "tolerance (at 2 SD) — but the fit is poor" in html  # beside whatever the verdict is
    assert ("<p class='caution'><strong>Fit quality POOR</strong>: the model does not describe these data: "
            "chi2_red 23.9. SDs include: measurement sd, misfit scale.</p>") in html
    record["measurement"].update(fit_quality=None, fit_quality_reason=None, sd_includes=[])
    assert "fit quality: not assessed (fit stored by an earlier version)" in render_batch_record_html(record)
