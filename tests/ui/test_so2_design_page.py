"""Design by sO₂ on the page (AppTest): the oxygenation fields of a blood recipe, the planned
series plot with the isosbestic points, and a refused sO₂ next to its field."""

from __future__ import annotations

import base64
import json

import numpy as np
import pytest

from phantomlab.recipe import load_recipe, solve
from phantomlab.recipe.oxygenation import so2_series
from phantomlab.ui.workspace import REPO_ROOT

BLOOD_RECIPE = REPO_ROOT / "recipes" / "demo-oximeter-blood.toml"


def _values(data):
    if isinstance(data, dict) and "bdata" in data:
        return np.frombuffer(base64.b64decode(data["bdata"]), dtype=np.dtype(data["dtype"])).tolist()
    return list(data)


def _start_blood(page):
    page.selectbox(key="design.start").set_value("demo-oximeter-blood.toml").run()
    assert not page.exception, [e.message for e in page.exception]
    return page


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_series_plot_equals_the_recipe_layer(page):
    app = _start_blood(page)
    assert app.text_input(key="design.ox_thb").value == "35"
    assert app.text_input(key="design.ox_levels").value == "100,75,50,25,0"
    charts = {json.loads(c.proto.spec)["layout"]["title"]["text"]: json.loads(c.proto.spec)
              for c in app.get("plotly_chart")}
    title = "Planned sO₂ series: μa at each level (isosbestic points dashed)"
    assert title in charts
    expected = so2_series(solve(load_recipe(BLOOD_RECIPE)))
    traces = {t["name"].split(" (")[0]: t for t in charts[title]["data"] if t.get("name", "").startswith("μa at")}
    for level in expected.levels:
        shown = traces[f"μa at sO₂ {100 * level.so2:.0f} %"]
        assert _values(shown["y"]) == pytest.approx(list(level.mua_per_mm), rel=1e-9)
    shapes = charts[title]["layout"].get("shapes", [])
    assert [s["x0"] for s in shapes] == pytest.approx(list(expected.isosbestic_nm))
    text = " ".join(m.value for m in app.markdown)
    assert "yeast (deoxygenation)" in text and "clinical waste" in text


def test_so2_out_of_range_refused_next_to_the_field(page):
    app = _start_blood(page)
    app.text_input(key="design.ox_levels").set_value("100,50,120").run()
    assert not app.exception
    assert any("120 % is outside 0-100 %" in e.value for e in app.error)
    assert not [c for c in app.get("plotly_chart") if "Planned sO₂" in json.loads(c.proto.spec)["layout"]["title"]["text"]]


def test_shelf_page_shows_blood_optics_at_the_chosen_so2(page, go_to):
    from phantomlab.materials import load_shelf
    from phantomlab.optics import intrinsic_optics

    app = go_to(page, "Stock shelf")
    app.selectbox(key="shelf.optics_stock").set_value("blood_kb1").run()
    app.number_input(key="shelf.optics_so2").set_value(40.0).run()
    assert not app.exception, [e.message for e in app.exception]
    charts = {json.loads(c.proto.spec)["layout"]["title"]["text"]: json.loads(c.proto.spec)
              for c in app.get("plotly_chart")}
    shown = _values(charts["blood_kb1: absorption"]["data"][-1]["y"])
    expected = intrinsic_optics(load_shelf(REPO_ROOT / "recipes" / "demo-stocks.toml")["blood_kb1"],
                                wavelength_nm=np.arange(600.0, 1001.0, 10.0), matrix=None, so2=0.4)
    assert shown == pytest.approx(list(expected.mua_per_mm), rel=1e-9)
