"""Mixing sheets: every dose, pre-dilution, caution and the closing line are on the sheet;
the HTML parses (html.parser, standard library) and its SVG is well-formed XML."""

import csv
import datetime as dt
import io
import re
import xml.etree.ElementTree as ET
from html.parser import HTMLParser
from pathlib import Path

import pytest

from phantomlab.materials import HAZARD_KEYS
from phantomlab.recipe import load_recipe, solve
from phantomlab.recipe.cautions import CLOSING_LINE, cautions_for
from phantomlab.recipe.procedure import amount_lines, format_amount
from phantomlab.recipe.sheet import (DILUTION_NOTE, DRAFT_MARK, G_NOTE, dilution_text, render_sheet_csv,
                                     render_sheet_html, sheet_json)

from recipe_synthetic import forward_target, synthetic_recipe, synthetic_table

RECIPES = Path(__file__).resolve().parents[2] / "recipes"
pytestmark = pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
VOID = {"meta", "br", "img", "hr", "input", "link", "col", "area", "base", "embed", "source", "track", "wbr"}


class _Checker(HTMLParser):
    """Collects text and checks that every non-void element is closed in order."""

    def __init__(self):
        super().__init__()
        self.stack, self.text, self.errors = [], [], []
        self.svg = 0

    def handle_starttag(self, tag, attrs):
        if tag not in VOID:
            self.stack.append(tag)
        if tag == "svg":
            self.svg += 1

    def handle_startendtag(self, tag, attrs):
        pass

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"unexpected </{tag}> with open {self.stack[-3:]}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def _parse(html):
    checker = _Checker()
    checker.feed(html)
    checker.close()
    assert checker.errors == [] and checker.stack == []
    return " ".join(" ".join(checker.text).split())


@pytest.fixture(scope="module", params=["demo-nir-liquid", "demo-silicone", "demo-gel-g"])
def demo_plan(request):
    return solve(load_recipe(RECIPES / f"{request.param}.toml"))


def test_sheet_holds_every_dose_predilution_caution(demo_plan):
    html = render_sheet_html(demo_plan)
    text = _parse(html)
    assert DRAFT_MARK in text and CLOSING_LINE in text and G_NOTE in text
    assert demo_plan.recipe.name in text and demo_plan.recipe.content_hash[:12] in text
    for line in amount_lines(demo_plan):
        assert f"{line.text}" in text and line.tolerance_text in text
    used = [d for d in demo_plan.doses if d.used]
    assert used and all(d.stock in text for d in used)
    for dose in used:
        if dose.dilution:
            for step in dose.dilution.steps:
                assert step.label in text
                assert format_amount(step.source_amount, dose.dilution.unit) in text
                assert format_amount(step.diluent_amount, dose.dilution.unit) in text
    stocks = [demo_plan.recipe.matrix] + [demo_plan.recipe.stock(d.stock) for d in used]
    for stock in stocks:
        assert stock.lot in text
        for key in stock.hazards:
            assert HAZARD_KEYS[key] in text
    for caution in cautions_for(stocks=stocks, preparation_kind=demo_plan.recipe.preparation.kind):
        assert caution.text in text
    # one empty "actual" cell per amount line
    assert html.count("<td class='actual'></td>") >= len(amount_lines(demo_plan))


def test_svg_is_well_formed_and_has_both_spectra(demo_plan):
    html = render_sheet_html(demo_plan)
    svg = re.search(r"<svg.*?</svg>", html, re.S).group(0)
    root = ET.fromstring(svg)
    ns = "{http://www.w3.org/2000/svg}"
    assert root.tag == f"{ns}svg"
    assert len(root.findall(f".//{ns}polyline[@class='predicted']")) == 2
    targets = root.findall(f".//{ns}circle[@class='target']")
    t = demo_plan.target
    assert len(targets) == int((t.mua_per_mm == t.mua_per_mm).sum() + (t.musp_per_mm == t.musp_per_mm).sum())


def test_preparation_steps_on_sheets():
    gel = solve(load_recipe(RECIPES / "demo-gel-g.toml"))
    text = _parse(render_sheet_html(gel))
    assert "Heat to 50 °C" in text and "Cool to 38 °C" in text and "set at 4 °C for 12 h" in text
    silicone = solve(load_recipe(RECIPES / "demo-silicone.toml"))
    text = _parse(render_sheet_html(silicone))
    assert "10:1 base to curing agent by mass" in text
    assert "Degas for 15 min at 5 kPa" in text and "cure 4 h at 60 °C" in text
    base, agent = silicone.matrix.parts
    assert format_amount(base[1], "g") in text and format_amount(agent[1], "g") in text


def test_sheet_answers_the_technicians_questions():
    liquid = solve(load_recipe(RECIPES / "demo-nir-liquid.toml"))
    text = _parse(render_sheet_html(liquid))
    assert "1 mL (1 in 10)" in text and DILUTION_NOTE in text  # no bare "1:10"
    assert "target μa [1/mm] ±5 %" in text and "target μs′ [1/mm] ±3 %" in text
    assert "predicted μa ± SD [1/mm]" in text
    assert "Characterise it at 22 °C" in text and "on the day of use" in text
    # the ink's potency SD (0.15) alone is wider than the 5 % tolerance: the sheet says so
    assert any(w.startswith("predicted SD wider than the tolerance: mua up to 14 % (at 660 nm; tolerance ±5 %) "
                            "and musp up to 3.2 % (at 800 nm; tolerance ±3 %)") for w in liquid.warnings)
    gel = solve(load_recipe(RECIPES / "demo-gel-g.toml"), curve=False)
    assert not any(w.startswith("predicted SD wider") for w in gel.warnings)  # SD up to 9.9 % of mua (±10 %), 3.9 % of musp (±5 %)
    silicone = solve(load_recipe(RECIPES / "demo-silicone.toml"))
    text = _parse(render_sheet_html(silicone))
    assert "5 kPa absolute" in text and "working time on the silicone's data sheet" in text
    assert "Weigh carbon_black in a ventilated enclosure onto its diluent, silicone base (part A);" in text
    assert "10 g (1 in 100)" in text and "carbon-black pigment powder (demo)" in text
    assert "carbon_black-D1 (1 in 100 overall)" in text  # the dilution_factor batch actual takes
    gel = solve(load_recipe(RECIPES / "demo-gel-g.toml"))
    powder = gel.matrix.parts[0][1]
    # 17.13 g of gelatin in the 200 mL batch: the stocks dilute the 10 % gel
    assert f"gelatin {100 * powder / 200:.3g} % w/v in the phantom" in _parse(render_sheet_html(gel))


def test_tolerances_print_to_two_significant_figures():
    from phantomlab.recipe.procedure import format_tolerance

    assert format_tolerance(4.758, "mL") == "4.8 mL" and format_tolerance(0.478, "mL") == "480 µL"
    assert format_tolerance(0.001, "g") == "1 mg" and format_tolerance(0.00357, "mL") == "3.6 µL"
    assert format_tolerance(0.0196, "mL") == "20 µL" and format_tolerance(12.34, "g") == "12 g"


def test_dilution_text():
    assert dilution_text(0.1) == "1 in 10" and dilution_text(0.5) == "1 in 2" and dilution_text(0.2) == "1 in 5"


def test_batch_sheet_has_id_not_draft_mark():
    plan = solve(load_recipe(RECIPES / "demo-nir-liquid.toml"))
    text = _parse(render_sheet_html(plan, batch_id="KB-2026-0007", draft=False))
    assert "Batch KB-2026-0007" in text and DRAFT_MARK not in text


def test_expired_lot_is_a_visible_warning():
    table = synthetic_table()
    recipe = synthetic_recipe(forward_target(table, [0.02, 0.01, 0.001, 0.0005]), expired=True)
    plan = solve(recipe, table=table, curve=False)
    assert any("abs1: lot synthetic-abs1 expired on 2001-01-01" == w for w in plan.warnings)
    html = render_sheet_html(plan, date=dt.date(2026, 12, 1))
    assert "EXPIRED LOT: abs1 lot synthetic-abs1 expired on 2001-01-01" in _parse(html)
    assert "class=\"alert expired\"" in html
    rows = list(csv.reader(io.StringIO(render_sheet_csv(plan))))
    assert ["stock", "abs1", "synthetic-abs1", "", "", "", "expiry 2001-01-01 EXPIRED"] in rows


def test_csv_sheet_rows(demo_plan):
    rows = list(csv.DictReader(io.StringIO(render_sheet_csv(demo_plan))))
    sections = {r["section"] for r in rows}
    assert {"batch", "stock", "amount", "step", "predicted", "caution", "closing"} <= sections
    amounts = [r for r in rows if r["section"] == "amount"]
    assert len(amounts) == len(amount_lines(demo_plan)) and all(r["actual"] == "" for r in amounts)
    predicted = [r for r in rows if r["section"] == "predicted" and r["item"].startswith("mua at")]
    assert len(predicted) == demo_plan.predicted.wavelength_nm.size
    assert rows[-1]["value"] == CLOSING_LINE
    tolerances = {r["item"]: r["value"] for r in rows if r["item"].endswith("_tolerance")}
    assert float(tolerances["mua_tolerance"]) == pytest.approx(100 * demo_plan.target.mua_tolerance)
    assert float(tolerances["musp_tolerance"]) == pytest.approx(100 * demo_plan.target.musp_tolerance)
    assert ("g_tolerance" in tolerances) == bool(demo_plan.target.has_g)


def test_sheet_json_is_plan_json_plus_sheet_fields(demo_plan):
    payload = sheet_json(demo_plan)
    for key, value in demo_plan.to_json().items():
        assert key in payload
    assert payload["draft"] is True and payload["batch_id"] is None
    assert payload["closing_line"] == CLOSING_LINE and payload["procedure"]
    assert all(a["actual"] is None for a in payload["amounts"])


def test_series_sheet_one_page_per_level():
    from phantomlab.recipe.calibration_series import plan_series
    from phantomlab.recipe.sheet import render_series_html

    series = plan_series(load_recipe(RECIPES / "demo-silicone.toml"), "tio2", levels=3)
    html = render_series_html(series)
    text = _parse(html)
    assert html.count('<div class="page">') == 4 and html.count("break-before: page") == 3
    for level in series.levels:
        assert f"level {level.level} (" in text
    assert text.count(CLOSING_LINE) == 4
    top = series.levels[-1].plan.dose("tio2")
    assert top.mass_g == pytest.approx(2.0 * series.recipe_plan.dose("tio2").volume_fraction
                                       * series.levels[-1].plan.batch_volume_ml * 4.2, rel=1e-9)


@pytest.mark.parametrize("preparation, batch, expected", [
    ({"kind": "agar", "gel_percent_w_v": 1.5}, ("batch_volume_ml", 200.0),
     ["Heat to 90 °C", "Cool to 50 °C", "boiling agar and microwave superheating"]),
    ({"kind": "resin", "hardener_parts_per_100_resin": 30, "post_cure_temperature_c": 60,
      "post_cure_time_h": 2, "max_pour_mass_g": 150}, ("batch_mass_g", 100.0),
     ["30 parts hardener per 100 resin by mass", "post-cure 2 h at 60 °C", "pour at most 150 g",
      "amine hardeners are skin sensitisers"]),
])
def test_agar_and_resin_sheets(preparation, batch, expected):
    table = synthetic_table()
    recipe = synthetic_recipe(forward_target(table, [0.02, 0.01, 0.001, 0.0005]), preparation=preparation,
                              batch=batch)
    plan = solve(recipe, table=table, curve=False)
    text = _parse(render_sheet_html(plan))
    for phrase in expected:
        assert phrase in text
    for line in amount_lines(plan):
        assert line.text in text
