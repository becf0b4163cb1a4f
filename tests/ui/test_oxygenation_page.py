"""The batch log page shows a batch's oxygenation series (AppTest): fitted vs reference sO₂
over time and the reference-vs-fitted table, equal to what the workflow layer computes."""

from __future__ import annotations

import base64
import datetime as _dt
import json

import numpy as np
import pytest

from phantomlab.ui.workspace import REPO_ROOT

MEASUREMENTS = REPO_ROOT / "recipes" / "measurements"
YEAR = _dt.date.today().year


@pytest.fixture
def recorded(demo_file):
    """The demo oxygenation series recorded with the first NIR demo batch, as the page's form does."""
    import warnings

    from phantomlab.errors import PhantomlabWarning
    from phantomlab.oxygenation_workflow import oxygenation_of, record_oxygenation_series
    from phantomlab.store import open_store

    store = open_store(f"sqlite:///{demo_file}")
    code = f"{YEAR}-002"
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            record_oxygenation_series(
                store, code, name="yeast run 1", series_file_name="demo-oximeter-series.csv",
                series_content=(MEASUREMENTS / "demo-oximeter-series.csv").read_bytes(),
                readings_file_name="demo-oximeter-references.csv",
                readings_content=(MEASUREMENTS / "demo-oximeter-references.csv").read_bytes(),
                chromophores="hbo2,hb,water", water_temperature_c=37.0)  # the series was measured at 37 °C
        (series,) = oxygenation_of(store, code)
    finally:
        store.close()
    return code, series


def _values(data):
    """A plotly array as the page sent it (a list, or typed binary data)."""
    if isinstance(data, dict) and "bdata" in data:
        return np.frombuffer(base64.b64decode(data["bdata"]), dtype=np.dtype(data["dtype"])).tolist()
    return list(data)


def test_series_plot_and_table_on_the_page(page, go_to, open_tab, recorded):
    code, series = recorded
    app = go_to(page, "Batch log")
    app.selectbox(key="batches.open").set_value(code).run()
    assert not app.exception, [e.message for e in app.exception]
    open_tab(app, "batches.tab", "Oxygenation series")
    charts = {json.loads(c.proto.spec)["layout"]["title"]["text"]: json.loads(c.proto.spec)
              for c in app.get("plotly_chart")}
    assert "Fitted vs reference sO₂ over time" in charts and "Total haemoglobin over time" in charts
    traces = {t["name"].split(" (")[0]: t for t in charts["Fitted vs reference sO₂ over time"]["data"] if "name" in t}
    assert _values(traces["fitted sO₂"]["y"]) == pytest.approx([100 * p["so2"] for p in series["points"]])
    assert _values(traces["reference sO₂"]["y"]) == pytest.approx([100 * r["reference_so2"] for r in series["readings"]])
    tables = [f.value for f in app.dataframe if "reference sO₂ [%]" in f.value.columns]
    assert tables, "the reference-vs-fitted table is not shown"
    table = tables[0]
    # shown to 0.1 %
    assert list(table["reference sO₂ [%]"]) == pytest.approx([100 * r["reference_so2"] for r in series["comparison"]], abs=0.051)
    assert list(table["fitted sO₂ [%]"]) == pytest.approx([100 * r["fitted_so2"] for r in series["comparison"]], abs=0.051)
    # the demo readings follow the fitted curve within a few per cent (synthetic: 1 % reading noise)
    assert np.max(np.abs(table["fitted − reference [%]"])) < 3.0


def test_no_series_yet(page, go_to, open_tab):
    app = go_to(page, "Batch log")
    assert not app.exception
    open_tab(app, "batches.tab", "Oxygenation series")
    assert any("No oxygenation series recorded for this batch yet" in c.value for c in app.caption)
    assert any(b.proto.label == "Unmix and record" for b in app.get("button"))


def test_the_demo_oximeter_batch_shows_its_series_on_a_fresh_start(page, go_to, open_tab):
    """Batch -001 of a freshly seeded demo database is the oximeter test with its series."""
    app = go_to(page, "Batch log")
    app.selectbox(key="batches.open").set_value(f"{YEAR}-001").run()
    assert not app.exception, [e.message for e in app.exception]
    open_tab(app, "batches.tab", "Oxygenation series")
    titles = [json.loads(c.proto.spec)["layout"]["title"]["text"] for c in app.get("plotly_chart")]
    assert "Fitted vs reference sO₂ over time" in titles and "Total haemoglobin over time" in titles
    tables = [f.value for f in app.dataframe if "reference sO₂ [%]" in f.value.columns]
    assert tables and len(tables[0]) == 7  # the seven demo blood-gas readings
    assert not any("No oxygenation series recorded for this batch yet" in c.value for c in app.caption)
