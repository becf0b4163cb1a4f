"""The batch-log workflows (:mod:`phantomlab.workflows`, :mod:`phantomlab.measurement_workflow`,
:mod:`phantomlab.correction_workflow`, :mod:`phantomlab.recalibration`): one implementation for both
front ends.

What these tests hold: the command line and the page write the SAME records for the same
input (amounts with a pre-dilution and their alarm lines, a measurement with its metadata
and fit, a batch planned after a recalibration with the calibration state it used), the
workflows reach no page or command-line code, and a top-up uses the newest fitted
measurement.  Bookkeeping checks: the optics come from the recipe and calibration layers,
whose own tests hold their physics.
"""

from __future__ import annotations

import datetime as _dt
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from phantomlab.cli import main
from phantomlab.recipe import load_recipe

RECIPE = Path(__file__).resolve().parents[2] / "recipes" / "demo-nir-liquid.toml"
MEASURED_ON = _dt.date(2026, 3, 5)  # demo data, invented


def _cli(capsys, *argv):
    capsys.readouterr()
    status = main([str(a) for a in argv] + ["--json"])
    out, err = capsys.readouterr()
    assert status == 0, err
    return json.loads(out)


def _optics_text(target: dict, factor: float) -> str:
    """An invented 'optics' measurement: the target scaled by ``factor``, 2 % SDs (demo data)."""
    rows = ["# source: demo data, invented",
            "wavelength_nm,mua_per_mm,musp_per_mm,mua_sd_per_mm,musp_sd_per_mm"]
    for w, a, s in zip(target["wavelength_nm"], target["mua_per_mm"], target["musp_per_mm"]):
        if a is not None and s is not None:
            rows.append(f"{w},{a * factor!r},{s * factor!r},{a * 0.02!r},{s * 0.02!r}")
    return "\n".join(rows) + "\n"


@pytest.fixture
def db(tmp_path):
    return f"sqlite:///{tmp_path / 'log.sqlite'}"


def _batch(db, code):
    from phantomlab.store import get_batch, measurements_of, open_store, plan_of

    store = open_store(db)
    try:
        with store.reading() as session:
            batch = get_batch(session, code)
            plan = plan_of(session, batch)
            measurements = [{"geometry": m.geometry, "instrument": m.instrument,
                             "age": m.phantom_age_days, "raw": m.raw_content}
                            for m in measurements_of(session, batch)]
            return {"amounts": batch.actual_amounts, "alarms": batch.actual_alarms,
                    "prediction": batch.actual_prediction, "status": batch.status,
                    "mixed_on": batch.mixed_on, "potencies_used": plan.potencies_used,
                    "state": plan.calibration_state_id, "matrix": batch.matrix_details,
                    "measurements": measurements}
    finally:
        store.close()


def _same_numbers(a, b):
    """Nested equality, floats to 1e-12 relative (the two paths compute the same expressions)."""
    if isinstance(a, dict):
        assert set(a) == set(b)
        for key in a:
            _same_numbers(a[key], b[key])
    elif isinstance(a, list):
        assert len(a) == len(b)
        for x, y in zip(a, b):
            _same_numbers(x, y)
    elif isinstance(a, float):
        assert b == pytest.approx(a, rel=1e-12, abs=0.0)
    else:
        assert a == b


def test_page_and_command_line_record_the_same_amounts_alarms_and_measurement(db, tmp_path, capsys):
    from phantomlab.store import open_store
    from phantomlab.ui.recording import attach_measurement, record_dispensed

    first = _cli(capsys, "batch", "add", RECIPE, "--db", db)
    second = _cli(capsys, "batch", "add", RECIPE, "--db", db)
    doses = [d for d in first["doses"] if d["volume_fraction"] > 0]
    # one stock 30 % over its dose (an alarm), the other given as 1 in 10 of a pre-dilution
    over, diluted = doses[0]["stock"], doses[1]["stock"]
    amounts = tmp_path / "amounts.csv"
    lines = ["stock,volume_ml,dilution_factor"]
    page_amounts = []  # the rows the page's form gives (phantomlab.ui.bench_record.form_rows)
    for dose in doses:
        volume = dose["volume_ml"] * (1.3 if dose["stock"] == over else 1.0)
        if dose["stock"] == diluted:
            lines.append(f"{dose['stock']},{10 * volume!r},10")
            page_amounts.append({"stock": dose["stock"], "volume_ml": 10 * volume, "dilution_factor": 10.0})
        else:
            lines.append(f"{dose['stock']},{volume!r},1")
            page_amounts.append({"stock": dose["stock"], "volume_ml": volume, "dilution_factor": 1.0})
    amounts.write_text("\n".join(lines) + "\n")
    _cli(capsys, "batch", "actual", first["batch_id"], amounts, "--mixed-on", "2026-03-01", "--db", db)
    store = open_store(db)
    try:
        record_dispensed(store, second["batch_id"], page_amounts, mixed_on=_dt.date(2026, 3, 1))
    finally:
        store.close()

    measurement = tmp_path / "m1.csv"
    text = _optics_text(first["target"], 1.05)
    measurement.write_text(text)
    _cli(capsys, "batch", "measure", first["batch_id"], measurement, "--kind", "optics",
         "--measured-on", MEASURED_ON.isoformat(), "--instrument", "demo probe (invented)", "--db", db)
    store = open_store(db)
    try:
        attach_measurement(store, second["batch_id"], kind="optics", file_name="m1.csv",
                           raw_content=text.encode("utf-8"), measured_on=MEASURED_ON,
                           instrument="demo probe (invented)")
    finally:
        store.close()

    by_cli, by_page = _batch(db, first["batch_id"]), _batch(db, second["batch_id"])
    assert by_cli["alarms"] and all(line.startswith("ALARM: predicted ") for line in by_cli["alarms"])
    assert by_page["alarms"] == by_cli["alarms"]  # the same wording, the same lines
    _same_numbers(by_cli["amounts"], by_page["amounts"])
    _same_numbers(by_cli["prediction"], by_page["prediction"])
    row = next(a for a in by_page["amounts"] if a["stock"] == diluted)
    assert row["dilution_factor"] == 10.0 and row["volume_ml"] == pytest.approx(doses[1]["volume_ml"], rel=1e-12)
    assert by_page["status"] == by_cli["status"] == "mixed"
    # the page's measurement now carries what the command stores: metadata, geometry, age
    assert by_page["measurements"] == by_cli["measurements"]
    assert by_page["measurements"][0]["age"] == 4.0  # 2026-03-01 -> 2026-03-05
    assert by_page["measurements"][0]["raw"] == text.encode("utf-8")


def test_a_batch_saved_on_the_page_names_the_calibration_state_as_batch_add_does(db, tmp_path, capsys):
    from phantomlab.store import open_store
    from phantomlab.ui.recording import record_planned_batch
    from phantomlab.recalibration import recalibrate
    from phantomlab.workflows import plan_batch

    first = _cli(capsys, "batch", "add", RECIPE, "--db", db)
    amounts = tmp_path / "a.csv"
    amounts.write_text("stock,volume_ml\n" + "".join(f"{d['stock']},{d['volume_ml']!r}\n" for d in first["doses"]))
    _cli(capsys, "batch", "actual", first["batch_id"], amounts, "--db", db)
    measurement = tmp_path / "m.csv"
    measurement.write_text(_optics_text(first["target"], 0.9))
    _cli(capsys, "batch", "measure", first["batch_id"], measurement, "--kind", "optics", "--db", db)
    store = open_store(db)
    try:
        calibration = recalibrate(store, apply=True)
        by_page = record_planned_batch(store, plan_batch(store, load_recipe(RECIPE)))
    finally:
        store.close()
    by_cli = _cli(capsys, "batch", "add", RECIPE, "--db", db)["batch_id"]
    page, cli = _batch(db, by_page), _batch(db, by_cli)
    assert calibration.state_id is not None
    assert cli["state"] == page["state"] == calibration.state_id
    _same_numbers(cli["potencies_used"], page["potencies_used"])
    calibrated = [v for v in page["potencies_used"].values() if v["source"] == "calibrated"]
    assert calibrated and all(v["calibration_state_id"] == calibration.state_id for v in calibrated)
    assert page["matrix"] == cli["matrix"] and page["matrix"]["matrix"] == load_recipe(RECIPE).matrix_key


def test_the_top_up_uses_the_newest_fitted_measurement(db, tmp_path, capsys):
    from phantomlab.calibration import fit_measurement_file
    from phantomlab.store import open_store
    from phantomlab.correction_workflow import top_up_batch
    from phantomlab.measurement_workflow import attach_measurement, keep_fit

    added = _cli(capsys, "batch", "add", RECIPE, "--db", db)
    amounts = tmp_path / "a.csv"
    amounts.write_text("stock,volume_ml\n" + "".join(f"{d['stock']},{d['volume_ml']!r}\n" for d in added["doses"]))
    _cli(capsys, "batch", "actual", added["batch_id"], amounts, "--db", db)
    old_text, new_text = _optics_text(added["target"], 0.8), _optics_text(added["target"], 0.95)
    store = open_store(db)
    try:
        old = attach_measurement(store, added["batch_id"], kind="optics", file_name="old.csv",
                                 raw_content=old_text.encode(), measured_on=_dt.date.today())
        new = attach_measurement(store, added["batch_id"], kind="optics", file_name="new.csv",
                                 raw_content=new_text.encode(), measured_on=_dt.date.today())
        # a refit of the OLDER measurement, kept later: it does not describe the batch now
        keep_fit(store, old.measurement_id, fit_measurement_file(old_text, kind="optics"))
        done = top_up_batch(store, added["batch_id"], load_recipe(RECIPE), current_volume_ml=480.0,
                            max_added_ml=100.0)
    finally:
        store.close()
    assert (done.measurement_id, done.fit_id, done.file_name) == (new.measurement_id, new.fit_id, "new.csv")
    assert done.current_volume_ml == 480.0


def test_a_file_that_does_not_parse_writes_nothing(db, capsys):
    from phantomlab.errors import InputError
    from phantomlab.store import open_store
    from phantomlab.measurement_workflow import attach_measurement

    added = _cli(capsys, "batch", "add", RECIPE, "--db", db)
    store = open_store(db)
    try:
        with pytest.raises(InputError, match="not UTF-8"):
            attach_measurement(store, added["batch_id"], kind="optics", file_name="x.csv", raw_content=b"\xff\xfe\x00")
        with pytest.raises(InputError):
            attach_measurement(store, added["batch_id"], kind="optics", file_name="x.csv",
                               raw_content=b"wavelength_nm,colour\n660,red\n")
    finally:
        store.close()
    assert _batch(db, added["batch_id"])["measurements"] == []


def test_the_workflows_reach_no_page_and_no_command_line(tmp_path):
    """A whole loop through the workflows loads neither streamlit nor the page nor the CLI."""
    script = f"""
import sys
from phantomlab.recipe import load_recipe
from phantomlab.store import open_store
from phantomlab import correction_workflow as c, measurement_workflow as m, recalibration as r, workflows as w
store = open_store("sqlite:///{tmp_path / 'w.sqlite'}")
recipe = load_recipe({str(RECIPE)!r})
code = w.record_planned_batch(store, w.plan_batch(store, recipe)).code
plan = w.plan_batch(store, recipe)
rows = [{{"stock": d.stock, "volume_ml": d.volume_ml}} for d in plan.doses]
w.record_dispensed(store, code, rows)
t = plan.target
text = "wavelength_nm,mua_per_mm,musp_per_mm\\n" + "".join(
    f"{{x}},{{a}},{{s}}\\n" for x, a, s in zip(t.wavelength_nm, t.mua_per_mm, t.musp_per_mm) if a == a and s == s)
m.attach_measurement(store, code, kind="optics", file_name="m.csv", raw_content=text.encode())
r.recalibrate(store, apply=True)
c.next_batch_plan(store, recipe)
store.close()
bad = sorted(m for m in sys.modules if m == "streamlit" or m.startswith(("phantomlab.ui", "phantomlab.cli",
                                                                          "phantomlab.commands")))
print(",".join(bad))
"""
    done = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True, timeout=300,
                          env={**os.environ, "OPENBLAS_NUM_THREADS": "1"})
    assert done.returncode == 0, done.stderr[-2000:]
    assert done.stdout.strip() == ""
