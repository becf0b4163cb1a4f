"""The page keeps what it computed between runs; every change must still show on the next run.

The page's caches (``phantomlab/ui/page_cache.py``) are shared by every session of the
server and keyed on the state of the log, of the files and of the inputs.  Each test here
changes one thing behind the page's back, as another session or process would (writing
through the store directly, editing a file), and checks that the same page session shows
the change on its very next run, computed afresh by the layer that owns it.
"""

from __future__ import annotations

import base64
import datetime as _dt
import json
import os
import shutil
import tomllib
import warnings
from pathlib import Path

import numpy as np
import pytest

from phantomlab.errors import PhantomlabWarning

REPO = Path(__file__).resolve().parents[2]
YEAR = _dt.date.today().year


def _numbers(value) -> list[float]:
    """A plotted array as sent to the browser (a list, or plotly's typed array in base 64)."""
    if isinstance(value, dict):
        return list(np.frombuffer(base64.b64decode(value["bdata"]), dtype=np.dtype(value["dtype"])))
    return list(value)


def _store(demo_file):
    from phantomlab.store import open_store

    return open_store(f"sqlite:///{demo_file}")


def _rerun(app):
    app.run()
    assert not app.exception, [e.message for e in app.exception]
    return app


def _log_table(app):
    frames = [f.value for f in app.dataframe if "measurements" in f.value.columns and "batch" in f.value.columns]
    assert frames, "the list of batches is not shown"
    return frames[0].set_index("batch")


def test_a_measurement_attached_by_another_session_is_offered_and_fitted_on_the_next_run(page, go_to, demo_file):
    from phantomlab.calibration import fit_measurement_file
    from phantomlab.measurement_workflow import attach_measurement

    refit = go_to(page, "Fit and correct")
    before = refit.selectbox(key="refit.measurement").options
    csv = REPO / "recipes" / "measurements" / "demo-nir-liquid-srdr.csv"
    sidecar = csv.with_suffix(".toml").read_text(encoding="utf-8")
    store = _store(demo_file)
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            attached = attach_measurement(store, f"{YEAR}-003", kind="srdr", file_name=csv.name,
                                          raw_content=csv.read_bytes(), sidecar_toml=sidecar, model="kienle1997")
    finally:
        store.close()
    _rerun(refit)
    options = refit.selectbox(key="refit.measurement").options
    added = [o for o in options if o not in before]
    assert len(added) == 1 and f"id {attached.measurement_id})" in added[0]
    refit.selectbox(key="refit.measurement").set_value(added[0])
    refit.selectbox(key="refit.model.srdr").set_value("kienle1997")
    _rerun(refit)
    expected = fit_measurement_file(csv.read_text(encoding="utf-8"), kind="srdr", sidecar=tomllib.loads(sidecar),
                                    model="kienle1997")
    shown = [m.value for m in refit.markdown if m.value.startswith("Model **")][0]
    assert f"reduced χ² **{expected.chi2_red:.3g}**" in shown
    charts = {json.loads(c.proto.spec)["layout"]["title"]["text"]: json.loads(c.proto.spec)
              for c in refit.get("plotly_chart")}
    fitted = [t for t in charts["Fitted μa against target"]["data"] if t["name"].startswith("fitted μa")][0]
    assert _numbers(fitted["y"]) == pytest.approx(expected.mua_per_mm, rel=1e-9)


def test_a_status_change_by_another_session_shows_on_the_next_run(page, go_to, demo_file):
    from phantomlab.workflows import change_status

    log = go_to(page, "Batch log")
    log.multiselect(key="batches.filter_status").set_value(["planned", "mixed", "characterised", "retired"])
    _rerun(log)
    code = f"{YEAR}-001"
    assert _log_table(log).loc[code, "status"] == "characterised"
    store = _store(demo_file)
    try:
        change_status(store, code, "retired", note="used up", recorded_by="another session")
    finally:
        store.close()
    _rerun(log)
    assert _log_table(log).loc[code, "status"] == "retired"


def test_a_calibration_recorded_by_another_session_is_used_on_the_next_run(page, go_to, open_tab, demo_file):
    from phantomlab.recalibration import calibration_list, recalibrate

    refit = go_to(page, "Fit and correct")
    open_tab(refit, "refit.tab", "Recalibrate the stocks")
    assert any("No calibration recorded yet." == c.value for c in refit.caption)
    open_tab(refit, "refit.tab", "Correct the next batch")
    caption = [c.value for c in refit.caption if c.value.startswith("Corrects batch")]
    assert caption
    comparison = [f.value for f in refit.dataframe if "next batch [mL undiluted]" in f.value.columns][0]
    store = _store(demo_file)
    try:
        done = recalibrate(store, apply=True, recorded_by="another session")
        states = calibration_list(store)
    finally:
        store.close()
    _rerun(refit)
    assert [c.value for c in refit.caption if c.value.startswith("Corrects batch")] != caption
    after = [f.value for f in refit.dataframe if "next batch [mL undiluted]" in f.value.columns][0]
    assert any(f"state {done.state_id}" in text or "calibrat" in text for text in after["potency used"])
    assert list(after["next batch [mL undiluted]"]) != list(comparison["next batch [mL undiluted]"])
    open_tab(refit, "refit.tab", "Recalibrate the stocks")
    assert not any("No calibration recorded yet." == c.value for c in refit.caption)
    history = [f.value for f in refit.dataframe if "potencies" in f.value.columns and "state" in f.value.columns]
    assert history and list(history[0]["state"]) == [s["state_id"] for s in states] == [done.state_id]


@pytest.fixture
def lab_page(demo_file, tmp_path, monkeypatch, downloads):
    """The page on a lab database (a copy of the demo log) with a stock file in a folder of the test's own."""
    from streamlit.testing.v1 import AppTest

    folder = tmp_path / "lab-shelf"
    shutil.copytree(REPO / "recipes", folder, ignore=shutil.ignore_patterns("*.py", "measurements"))
    monkeypatch.setenv("PHANTOMLAB_DB", f"sqlite:///{demo_file}")
    monkeypatch.setenv("PHANTOMLAB_SHELF", str(folder / "demo-stocks.toml"))
    app = AppTest.from_file(str(REPO / "app.py"), default_timeout=120)
    _rerun(app)
    return app, folder


def _dye_volume(app) -> float:
    frames = [f.value for f in app.dataframe if "undiluted volume [mL]" in f.value.columns]
    assert frames, "the doses table is not shown"
    return float(frames[0].set_index("stock").loc["dye_nir", "undiluted volume [mL]"])


def _touch_later(path: Path) -> None:
    stat = path.stat()
    os.utime(path, ns=(stat.st_atime_ns, stat.st_mtime_ns + 2_000_000_000))


def test_an_edited_spectrum_file_of_the_shelf_is_read_on_the_next_run(lab_page):
    """The dye's absorption spectrum doubled in its file: the plan needs half as much dye.

    μa of the mixture is linear in each stock's volume fraction times its intrinsic μa
    (the mixing model of docs/design.md), so a doubled dye spectrum is met by exactly half
    the dye volume, the other doses unchanged.
    """
    app, folder = lab_page
    assert app.selectbox(key="design.start").value == "demo-nir-liquid.toml"
    before = _dye_volume(app)
    spectrum = folder / "spectra" / "dye_nir.csv"
    lines = spectrum.read_text(encoding="utf-8").splitlines()
    doubled = [line if line.startswith("#") or line.startswith("wavelength") else
               f"{line.split(',')[0]},{2.0 * float(line.split(',')[1]):.6g}" for line in lines]
    spectrum.write_text("\n".join(doubled) + "\n", encoding="utf-8")
    _touch_later(spectrum)
    _rerun(app)
    assert _dye_volume(app) == pytest.approx(before / 2.0, rel=2e-3)


def test_an_edited_stock_file_is_read_on_the_next_run(lab_page):
    """The dye's potency written as 2 in the stock file: half the dye, as for a doubled spectrum."""
    app, folder = lab_page
    app.checkbox(key="design.use_calibrated").uncheck()
    _rerun(app)
    before = _dye_volume(app)
    stock_file = folder / "demo-stocks.toml"
    text = stock_file.read_text(encoding="utf-8")
    start = text.index("[stocks.dye_nir]")
    end = text.index("[stocks.", start + 1)
    section = text[start:end].replace("potency = 1.0", "potency = 2.0", 1)
    stock_file.write_text(text[:start] + section + text[end:], encoding="utf-8")
    _touch_later(stock_file)
    _rerun(app)
    assert _dye_volume(app) == pytest.approx(before / 2.0, rel=2e-3)


def test_two_databases_in_one_process_each_show_their_own_log(page, go_to, demo_file, tmp_path, monkeypatch):
    """The caches are shared by the server's sessions: keyed on the database, never mixed up."""
    from streamlit.testing.v1 import AppTest

    from phantomlab.workflows import change_status

    first = go_to(page, "Batch log")
    other = tmp_path / "other" / "phantomlab-demo.sqlite"
    other.parent.mkdir()
    shutil.copyfile(demo_file, other)
    store = _store(other)
    try:
        change_status(store, f"{YEAR}-001", "retired", note="only in the other log")
    finally:
        store.close()
    monkeypatch.setenv("PHANTOMLAB_DEMO_DB", str(other))
    second = AppTest.from_file(str(REPO / "app.py"), default_timeout=120)
    _rerun(second)
    go_to(second, "Batch log")
    assert f"{YEAR}-001" not in _log_table(second).index  # retired: left out by the status filter
    monkeypatch.setenv("PHANTOMLAB_DEMO_DB", str(demo_file))
    _rerun(first)
    assert _log_table(first).loc[f"{YEAR}-001", "status"] == "characterised"
