"""The batch log through the page (AppTest): list, record a batch's amounts, attach, status, spread.

Interface tests: what the page writes is read back from the store, and what it shows is
compared with the layers it calls (``phantomlab.recipe.predict``) and with plain statistics
(the sample SD with n − 1, as numpy's ``std(ddof=1)`` defines it).
"""

from __future__ import annotations

import datetime as _dt
import json

import numpy as np
import pandas as pd
import pytest

from phantomlab.recipe import load_recipe, predict, solve
from phantomlab.ui.workspace import REPO_ROOT

DEMO_RECIPE = REPO_ROOT / "recipes" / "demo-nir-liquid.toml"
YEAR = _dt.date.today().year


def _store(demo_file):
    from phantomlab.store import open_store

    return open_store(f"sqlite:///{demo_file}")


@pytest.fixture
def planned(demo_file):
    """A third, planned batch of the demo recipe, recorded the way the design page does."""
    from phantomlab.ui.recording import record_planned_batch

    plan = solve(load_recipe(DEMO_RECIPE))
    store = _store(demo_file)
    try:
        code = record_planned_batch(store, plan, operator="tester")
    finally:
        store.close()
    return code, plan


def _log(app) -> pd.DataFrame:
    frames = [f.value for f in app.dataframe if "measurements" in f.value.columns and "batch" in f.value.columns]
    assert frames, "the batch list is not shown"
    return frames[0]


def test_lists_the_demo_batches(page, go_to):
    app = go_to(page, "Batch log")
    table = _log(app)
    # -001: the oximeter-test batch (its oxygenation series is no reflectance measurement);
    # -002, -003: the NIR liquid, measured on day 1 and 15, and on day 2.
    assert list(table["batch"]) == [f"{YEAR}-001", f"{YEAR}-002", f"{YEAR}-003"]
    assert set(table["status"]) == {"characterised"}
    assert list(table["measurements"]) == [0, 2, 1]


def test_filters_by_status(page, go_to):
    app = go_to(page, "Batch log")
    app.multiselect(key="batches.filter_status").set_value(["planned"]).run()
    assert not app.exception
    assert _log(app).empty
    assert any("No batch matches" in c.value for c in app.caption)


def _dispensed_text(dose, undiluted_ml: float) -> str:
    """What the technician types: the amount of the stock or of its pre-dilution, in µL."""
    fraction = 1.0
    for step in (dose.dilution.steps if dose.dilution else ()):
        fraction *= step.factor
    return f"{1000.0 * undiluted_ml / fraction!r} uL"


def _field(app, code: str, name: str):
    """The bench-record field ``name`` of batch ``code`` (its key holds the batch version)."""
    found = [t for t in app.text_input if t.key.startswith(f"bench.{code}.v") and t.key.endswith(f".{name}")]
    assert len(found) == 1, [t.key for t in app.text_input]
    return found[0]


def _record_button(app):
    return [b for b in app.get("button") if b.proto.label.startswith("Record ") and "amounts" in b.proto.label][0]


def _edit_amounts(app, code: str, plan, undiluted_ml: list[float]) -> None:
    used = [d for d in plan.doses if d.used]
    for dose, volume in zip(used, undiluted_ml):
        _field(app, code, dose.stock).set_value(_dispensed_text(dose, volume))
    _record_button(app).click()
    app.run()
    assert not app.exception


def test_recording_the_amounts_predicts_what_was_made(page, go_to, planned, demo_file):
    code, plan = planned
    app = go_to(page, "Batch log")
    assert app.selectbox(key="batches.open").value == code
    used = [d for d in plan.doses if d.used]
    amounts = [d.volume_ml * 1.01 for d in used]
    _edit_amounts(app, code, plan, amounts)
    assert any(f"Amounts of batch {code} recorded" in s.value for s in app.success)
    from phantomlab.store import get_batch

    store = _store(demo_file)
    try:
        with store.reading() as session:
            batch = get_batch(session, code)
            status, prediction = batch.status, batch.actual_prediction
    finally:
        store.close()
    assert status == "mixed"
    fractions = {d.stock: a / plan.batch_volume_ml for d, a in zip(used, amounts)}
    expected = predict(load_recipe(DEMO_RECIPE), volume_fractions=fractions)
    assert prediction["mua_per_mm"] == pytest.approx(list(expected.mua_per_mm), rel=1e-9)
    assert prediction["musp_per_mm"] == pytest.approx(list(expected.musp_per_mm), rel=1e-9)
    titles = [json.loads(c.proto.spec)["layout"]["title"]["text"] for c in app.get("plotly_chart")]
    assert "μa of what was dispensed" in titles


def test_amounts_far_from_the_sheet_raise_an_alarm(page, go_to, planned):
    code, plan = planned
    app = go_to(page, "Batch log")
    used = [d for d in plan.doses if d.used]
    _edit_amounts(app, code, plan, [d.volume_ml * (2.0 if d.stock == "ink_black" else 1.0) for d in used])
    alarms = [e.value for e in app.error if e.value.startswith("ALARM")]
    assert alarms and all("from target (tolerance ±" in a for a in alarms)  # the `batch actual` lines


def test_an_unfilled_amount_is_refused(page, go_to, planned):
    code, _plan = planned
    app = go_to(page, "Batch log")
    _record_button(app).click()
    app.run()
    assert not app.exception
    assert any("empty quantity" in e.value for e in app.error)


def test_an_amount_without_its_unit_is_refused(page, go_to, planned):
    code, plan = planned
    app = go_to(page, "Batch log")
    used = [d for d in plan.doses if d.used]
    for dose in used:
        _field(app, code, dose.stock).set_value("12")
    _record_button(app).click()
    app.run()
    assert sum("no unit given" in e.value for e in app.error) == len(used)


def test_a_pre_diluted_amount_is_taken_back_to_the_stock(page, go_to, planned, demo_file):
    """44.6 uL of a 1-in-10 pre-dilution is 4.46 uL of stock (the sheet's own arithmetic)."""
    code, plan = planned
    diluted = [d for d in plan.doses if d.used and d.dilution is not None and d.dilution.steps]
    assert diluted, "the demo recipe pre-dilutes its absorbers"
    app = go_to(page, "Batch log")
    _edit_amounts(app, code, plan, [d.volume_ml for d in plan.doses if d.used])
    from phantomlab.store import get_batch

    store = _store(demo_file)
    try:
        with store.reading() as session:
            rows = {r["stock"]: r for r in get_batch(session, code).actual_amounts}
    finally:
        store.close()
    for dose in diluted:
        assert rows[dose.stock]["volume_ml"] == pytest.approx(dose.volume_ml, rel=1e-12)
        assert rows[dose.stock]["given"]["volume_ml"] == pytest.approx(dose.dispense_amount, rel=1e-12)


OPTICS_FILE = ("# source: test data, invented\n"
               "wavelength_nm,mua_per_mm,musp_per_mm,mua_sd_per_mm,musp_sd_per_mm\n"
               "660,0.0101,1.02,0.0005,0.03\n700,0.0099,0.97,0.0005,0.03\n750,0.0121,0.93,0.0005,0.03\n"
               "800,0.0118,0.88,0.0005,0.03\n850,0.0122,0.84,0.0005,0.03\n")


def _attach(app, open_tab, name: str, content: bytes):
    open_tab(app, "batches.tab", "Measurements")
    app.selectbox(key="batches.kind").set_value("optics").run()
    app.file_uploader(key="batches.file").set_value((name, content, "text/csv"))
    [b for b in app.get("button") if b.proto.label == "Fit and attach"][0].click()
    app.run()
    assert not app.exception


def test_attaching_a_measurement_keeps_the_file_and_its_fit(page, go_to, open_tab, planned, demo_file):
    code, _plan = planned
    app = go_to(page, "Batch log")
    _attach(app, open_tab, "probe.csv", OPTICS_FILE.encode())
    assert any("probe.csv attached" in s.value for s in app.success)
    open_tab(app, "batches.tab", "History")
    history = [f.value for f in app.dataframe if {"fit", "model", "file"} <= set(f.value.columns)]
    assert history and list(history[0]["file"]) == ["probe.csv"]
    from phantomlab.store import fits_of, get_batch, measurements_of

    store = _store(demo_file)
    try:
        with store.reading() as session:
            (measurement,) = measurements_of(session, get_batch(session, code))
            (fit,) = fits_of(session, measurement)
            assert measurement.raw_content == OPTICS_FILE.encode()
            assert fit.results["musp_per_mm"] == pytest.approx([1.02, 0.97, 0.93, 0.88, 0.84])
    finally:
        store.close()


def test_a_bad_measurement_file_is_refused_and_nothing_is_stored(page, go_to, open_tab, planned, demo_file):
    code, _plan = planned
    app = go_to(page, "Batch log")
    bad = OPTICS_FILE.replace("0.0099", "-0.0099").encode()
    _attach(app, open_tab, "bad.csv", bad)
    errors = [e.value for e in app.error]
    assert errors and all("\n" not in e for e in errors)
    from phantomlab.store import get_batch, measurements_of

    store = _store(demo_file)
    try:
        with store.reading() as session:
            assert measurements_of(session, get_batch(session, code)) == []
    finally:
        store.close()


def test_status_moves_forward_and_the_history_keeps_every_version(page, go_to, open_tab, planned):
    code, _plan = planned
    app = go_to(page, "Batch log")
    prefix = f"batches.status.{code}.v1"
    app.selectbox(key=f"{prefix}.status").set_value("retired")
    app.text_input(key=f"{prefix}.note").set_value("test: dropped")
    app.text_input(key=f"{prefix}.by").set_value("T. Ester")
    [b for b in app.get("button") if b.proto.label == "Change the status"][0].click()
    app.run()
    assert not app.exception
    assert any("is now retired" in s.value and "by T. Ester" in s.value for s in app.success)
    app.multiselect(key="batches.filter_status").set_value(["retired"]).run()
    open_tab(app, "batches.tab", "History")
    history = [f.value for f in app.dataframe if "change" in f.value.columns][0]
    assert list(history["status"]) == ["planned", "retired"]
    assert history["change"].iloc[-1] == "test: dropped"
    assert history["by"].iloc[-1] == "T. Ester"  # who changed it, as `batch status --operator`


def test_spread_across_batches_and_drift_with_age(page, go_to, downloads, demo_file):
    app = go_to(page, "Batch log")
    titles = [json.loads(c.proto.spec)["layout"]["title"]["text"] for c in app.get("plotly_chart")]
    for title in ("Spread of μa across batches", "Spread of μs′ across batches",
                  "Drift of μa with phantom age", "Drift of μs′ with phantom age"):
        assert title in titles
    spread = [f.value for f in app.dataframe if "μs′ CV [%]" in f.value.columns][0]
    # independent: per batch the mean of its fits, then the sample SD (n - 1) over the batches
    from phantomlab.store import fits_of, list_batches, measurements_of

    store = _store(demo_file)
    per_batch = {}
    try:
        with store.reading() as session:
            for batch in list_batches(session):
                fits = [fits_of(session, m)[-1].results for m in measurements_of(session, batch)]
                if fits:  # the oximeter-test batch has an oxygenation series, no reflectance fit
                    per_batch[batch.code] = np.mean([f["musp_per_mm"] for f in fits], axis=0)
    finally:
        store.close()
    values = np.array(list(per_batch.values()))
    expected = 100 * values.std(axis=0, ddof=1) / values.mean(axis=0)
    assert spread["μs′ CV [%]"].to_numpy() == pytest.approx(expected, rel=1e-9)
    assert set(spread["batches"]) == {2}


def test_the_demo_offers_an_invented_measurement_that_attaches_and_fits(page, go_to, open_tab, planned, downloads):
    code, plan = planned
    app = go_to(page, "Batch log")
    _edit_amounts(app, code, plan, [d.volume_ml for d in plan.doses if d.used])
    open_tab(app, "batches.tab", "Measurements")
    name, content = downloads.content(app, "Demo only: download an invented probe measurement")
    assert content.decode().startswith("# source: demo data, invented")
    app.selectbox(key="batches.kind").set_value("srdr").run()
    app.file_uploader(key="batches.file").set_value((name, content, "text/csv"))
    [b for b in app.get("button") if b.proto.label == "Fit and attach"][0].click()
    app.run()
    assert not app.exception
    # fitted with the default model, the Monte Carlo lookup (its baseline for the batch's g from the test cache);
    # the invented file is Monte Carlo light of the demo emulsion at the batch's g per wavelength
    # (phantomlab/ui/demo_light.py), which it describes
    assert any("attached" in s.value and "mc-lookup" in s.value and "fit quality good" in s.value
               for s in app.success), [s.value for s in app.success]


def test_a_batch_of_other_scatterers_gets_no_invented_measurement_and_is_told_why(page, go_to, open_tab):
    # the demo oximeter batch (blood in lipid emulsion, g about 0.80) lies outside the demo light's g 0.50-0.66
    app = go_to(page, "Batch log")
    codes = app.selectbox(key="batches.open").options
    app.selectbox(key="batches.open").set_value(codes[0]).run()
    open_tab(app, "batches.tab", "Measurements")
    assert not app.exception and not app.error
    assert not [b for b in app.get("download_button") if b.proto.label.startswith("Demo only: download an invented")]
    said = [c.value for c in app.caption if c.value.startswith("Demo only: no invented probe measurement")]
    assert said and "g = 0.8" in said[0] and "outside the demo's Monte Carlo table (0.5 to 0.66" in said[0], said
