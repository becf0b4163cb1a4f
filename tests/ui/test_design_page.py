"""Design a phantom → mixing sheet, through the page (AppTest).

Interface tests (STYLE.md, "Layers are tested differently"): they check what the page shows
and hands over against the layers it calls (the recipe solver, the sheet renderer, the
store), not the physics again.  Unit conversions are exact SI definitions (BIPM SI
Brochure, 9th ed., 2019): 1 L = 1000 mL.
"""

from __future__ import annotations

import datetime as _dt
import io
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from phantomlab.recipe import load_recipe, solve
from phantomlab.ui.workspace import REPO_ROOT

DEMO_RECIPE = REPO_ROOT / "recipes" / "demo-nir-liquid.toml"


def _doses(app):
    frames = [f.value for f in app.dataframe if "undiluted volume [mL]" in f.value.columns]
    assert frames, "the doses table is not shown"
    return frames[0].set_index("stock")


def test_opens_on_the_demo_with_the_notice_and_the_demo_recipe(page, shown_text):
    text = shown_text(page)
    assert "Demo data." in text
    assert "invented lab" in text
    assert page.selectbox(key="design.start").value == "demo-nir-liquid.toml"
    assert "Predicted against target" in [s.value for s in page.subheader]


def test_doses_shown_are_the_recipe_solvers(page):
    expected = solve(load_recipe(DEMO_RECIPE))
    shown = _doses(page)
    for dose in expected.doses:  # shown to 4 significant figures
        assert shown.loc[dose.stock, "undiluted volume [mL]"] == pytest.approx(dose.volume_ml, rel=5e-4)
        assert shown.loc[dose.stock, "undiluted mass [g]"] == pytest.approx(dose.mass_g, rel=5e-4)


def test_plots_are_interactive_and_their_numbers_downloadable(page):
    charts = page.get("plotly_chart")
    assert len(charts) >= 3  # mua, musp, residual
    for chart in charts:
        spec = json.loads(chart.proto.spec)
        assert spec["layout"]["xaxis"]["title"]["text"] == "wavelength [nm]"
        assert "[" in spec["layout"]["yaxis"]["title"]["text"]  # a unit on the y axis too
        assert any("hovertemplate" in trace for trace in spec["data"])
    titles = [json.loads(c.proto.spec)["layout"]["yaxis"]["title"]["text"] for c in charts]
    assert "μa [1/mm]" in titles and "μs′ [1/mm]" in titles
    labels = [b.proto.label for b in page.get("download_button")]
    assert labels.count("Download the plotted numbers (CSV)") >= 3


def test_cautions_block_carries_the_stock_hazards_and_the_closing_line(page, shown_text):
    text = shown_text(page)
    assert "Cautions" in text
    assert "dye: gloves and eye protection" in text  # dye_nir carries the hazard key "dye"
    assert "not a certified reference standard" in text


def test_sheet_download_is_a_draft_holding_every_dose(page, downloads):
    plan = solve(load_recipe(DEMO_RECIPE))
    name, html = downloads.content(page, "Download the mixing sheet (HTML)")
    text = html.decode("utf-8")
    assert name.endswith(".html") and "<html" in text.lower()
    assert "DRAFT" in text
    for dose in plan.doses:
        if dose.used:
            assert dose.stock in text
    name, csv = downloads.content(page, "Download the mixing sheet (CSV)")
    assert name.endswith(".csv")
    assert all(dose.stock in csv.decode("utf-8") for dose in plan.doses if dose.used)


def test_saving_gives_a_batch_id_and_the_stored_sheet_carries_it(page, demo_file, downloads, shown_text):
    from phantomlab.store import get_batch, open_store, plan_of

    page.text_input(key="design.operator").set_value("tester")
    submit = [b for b in page.get("button") if b.proto.label == "Save as a new batch"]
    assert submit, "no save button"
    submit[0].click()
    page.run()
    assert not page.exception
    code = f"{_dt.date.today().year}-004"  # the demo database holds batches -001 to -003
    assert any(code in s.value for s in page.success), shown_text(page)
    store = open_store(f"sqlite:///{demo_file}")
    try:
        with store.reading() as session:
            batch = get_batch(session, code)
            assert batch.status == "planned" and batch.operator == "tester"
            sheet = plan_of(session, batch).sheet_html
    finally:
        store.close()
    assert code in sheet and "DRAFT" not in sheet
    _name, html = downloads.content(page, f"Download the sheet of batch {code} (HTML)")
    assert code in html.decode("utf-8")


def test_batch_volume_in_litres_gives_the_same_doses(page):
    before = _doses(page)["undiluted volume [mL]"]
    page.text_input(key="design.size").set_value("0.5 L").run()
    after = _doses(page)["undiluted volume [mL]"]
    assert list(after) == pytest.approx(list(before), rel=1e-9)


@pytest.mark.parametrize(
    "typed, reason",
    [("500", "no unit given"), ("500 nm", "unit of another kind"), ("lots mL", "no number before the unit"), ("5 blorps", "unknown unit"),
     ("9**9**9 mL", "no arithmetic")],
)
def test_bad_batch_volume_is_refused_next_to_the_field(page, typed, reason, shown_text):
    page.text_input(key="design.size").set_value(typed).run()
    assert not page.exception
    errors = [e.value for e in page.error]
    assert any(reason in e for e in errors), errors
    assert "Predicted against target" not in [s.value for s in page.subheader]


def test_an_unreachable_target_names_the_binding_limit(page, shown_text):
    page.number_input(key="design.lim_solids_pct").set_value(0.5).run()
    assert not page.exception
    errors = " ".join(e.value for e in page.error)
    assert "The target cannot be met" in errors
    assert "limit" in errors
    assert "Predicted against target" in [s.value for s in page.subheader]  # closest feasible recipe


def test_target_from_an_uploaded_spectrum(page, downloads):
    page.radio(key="design.shape").set_value("Spectrum file").run()
    assert any("Upload a target spectrum" in i.value for i in page.info)
    csv = ("wavelength_nm,mua_per_mm,musp_per_mm\n"
           "660,0.010,1.05\n700,0.010,1.00\n750,0.012,0.95\n800,0.012,0.90\n850,0.012,0.86\n")
    page.file_uploader(key="design.spectrum_file").set_value(("target.csv", csv.encode(), "text/csv")).run()
    assert not page.exception
    assert "Predicted against target" in [s.value for s in page.subheader]
    _name, csv = downloads.content(page, "Download the plotted numbers (CSV)")
    table = pd.read_csv(io.BytesIO(csv))
    assert list(table["wavelength_nm"]) == [660.0, 700.0, 750.0, 800.0, 850.0]
    assert list(table["target_mua_per_mm"]) == pytest.approx([0.010, 0.010, 0.012, 0.012, 0.012])


def test_a_target_file_with_a_wrong_column_is_refused_in_one_line(page):
    page.radio(key="design.shape").set_value("Spectrum file").run()
    csv = "wavelength_nm,mua_per_cm\n660,0.1\n700,0.1\n"
    page.file_uploader(key="design.spectrum_file").set_value(("bad.csv", csv.encode(), "text/csv")).run()
    assert not page.exception
    errors = [e.value for e in page.error]
    assert errors and all("\n" not in e for e in errors)
    assert "Predicted against target" not in [s.value for s in page.subheader]


def test_a_new_recipe_asks_for_stocks(page):
    page.selectbox(key="design.start").set_value("(a new recipe)").run()
    assert not page.exception
    assert any("choose at least one" in e.value for e in page.error)


def test_fields_keep_their_values_across_a_visit_to_another_page(page, go_to):
    page.text_input(key="design.size").set_value("250 mL").run()
    page.text_input(key="design.name").set_value("kept name").run()
    before = _doses(page)["undiluted volume [mL]"]
    go_to(page, "Batch log")
    back = go_to(page, "Design a phantom")
    assert back.text_input(key="design.name").value == "kept name"
    assert back.text_input(key="design.size").value == "250 mL"
    assert list(_doses(back)["undiluted volume [mL]"]) == pytest.approx(list(before), rel=1e-12)


def _save(app):
    [b for b in app.get("button") if b.proto.label == "Save as a new batch"][0].click()
    app.run()
    assert not app.exception


def _recipe_row_of(demo_file, code):
    from phantomlab.store import get_batch, open_store, recipe_of

    store = open_store(f"sqlite:///{demo_file}")
    try:
        with store.reading() as session:
            row = recipe_of(session, get_batch(session, code))
            return row.content_hash, row.recipe_version, row.source_path
    finally:
        store.close()


def test_an_unchanged_recipe_file_is_recorded_as_that_file(page, demo_file):
    _save(page)
    content_hash, version, source = _recipe_row_of(demo_file, f"{_dt.date.today().year}-004")
    expected = load_recipe(DEMO_RECIPE)
    assert content_hash == expected.content_hash  # the same recipe as `phantomlab plan` reads
    assert version == expected.version and source == str(DEMO_RECIPE)


def test_an_edited_recipe_is_recorded_as_an_edited_version_in_a_file_of_its_own(page, demo_file):
    page.text_input(key="design.size").set_value("250 mL").run()
    _save(page)
    content_hash, version, source = _recipe_row_of(demo_file, f"{_dt.date.today().year}-004")
    assert content_hash != load_recipe(DEMO_RECIPE).content_hash
    assert version.endswith("edited on the page")
    # the command line reads it as a batch's recorded recipe (batch actual, recalibrate, correct)
    written = load_recipe(source, recorded=True)
    assert Path(source).parent == demo_file.parent / "recipes"
    assert written.content_hash == content_hash and written.batch_volume_ml == 250.0


def test_the_recipe_downloads_as_toml(page, downloads):
    import tomllib

    page.text_input(key="design.size").set_value("250 mL").run()
    _name, data = downloads.content(page, "Download the recipe (TOML)")
    recipe = tomllib.loads(data.decode("utf-8"))
    assert recipe["batch_volume_ml"] == 250.0 and recipe["matrix"] == "water"
    assert recipe["stocks"] == ["lipid20", "ink_black", "dye_nir"]


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")  # the direct solve below
@pytest.mark.parametrize("recipe_file", sorted(p.name for p in (REPO_ROOT / "recipes").glob("demo-*.toml")
                                               if p.name != "demo-stocks.toml"))
def test_every_demo_recipe_opens_and_is_solved_as_its_file(page, recipe_file):
    page.selectbox(key="design.start").set_value(recipe_file).run()
    assert not page.exception
    assert "Predicted against target" in [s.value for s in page.subheader]
    expected = solve(load_recipe(REPO_ROOT / "recipes" / recipe_file))
    shown = _doses(page)
    for dose in expected.doses:
        assert shown.loc[dose.stock, "undiluted volume [mL]"] == pytest.approx(dose.volume_ml, rel=5e-4)
    titles = [json.loads(c.proto.spec)["layout"]["title"]["text"] for c in page.get("plotly_chart")]
    assert ("Anisotropy g: predicted against target" in titles) == expected.target.has_g


def test_a_long_target_spectrum_is_solved_and_drawn_as_a_line(page, downloads):
    wavelength = np.arange(600.0, 900.0 + 1.0, 2.0)  # 151 wavelengths
    lines = ["wavelength_nm,mua_per_mm,musp_per_mm"]
    lines += [f"{w:g},0.011,{1.0 * (w / 750.0) ** -1.2:.6g}" for w in wavelength]
    page.radio(key="design.shape").set_value("Spectrum file").run()
    page.file_uploader(key="design.spectrum_file").set_value(
        ("long.csv", ("\n".join(lines) + "\n").encode(), "text/csv")).run()
    assert not page.exception
    _name, csv = downloads.content(page, "Download the plotted numbers (CSV)")
    assert len(pd.read_csv(io.BytesIO(csv))) == wavelength.size


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")  # the direct solve below
def test_switching_recipes_does_not_bring_back_the_old_table(page):
    page.selectbox(key="design.start").set_value("demo-gel-g.toml").run()
    page.radio(key="design.shape").set_value("Points").run()
    page.selectbox(key="design.start").set_value("demo-silicone.toml").run()
    page.run()
    assert not page.exception
    expected = solve(load_recipe(REPO_ROOT / "recipes" / "demo-silicone.toml"))
    shown = _doses(page)
    for dose in expected.doses:
        assert shown.loc[dose.stock, "undiluted volume [mL]"] == pytest.approx(dose.volume_ml, rel=5e-4)


def test_after_saving_a_changed_field_drops_the_saved_batch_downloads(page):
    _save(page)
    code = f"{_dt.date.today().year}-004"
    labels = [b.proto.label for b in page.get("download_button")]
    assert f"Download the sheet of batch {code} (HTML)" in labels
    page.text_input(key="design.size").set_value("300 mL").run()
    labels = [b.proto.label for b in page.get("download_button")]
    assert not any(code in label for label in labels)  # the sheet of 2026-004 is not the plan shown now


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")  # the direct solve below
def test_the_dependent_scattering_choice_reaches_the_solver_and_the_recipe(page, downloads):
    """The page offers the recipe's dependent_scattering choices; the doses are the solver's for it."""
    import tomllib

    from phantomlab.recipe import parse_recipe

    assert page.selectbox(key="design.dependent").value == "none"
    page.selectbox(key="design.dependent").set_value("percus_yevick").run()
    assert not page.exception
    _name, data = downloads.content(page, "Download the recipe (TOML)")
    definition = tomllib.loads(data.decode("utf-8"))
    assert definition["dependent_scattering"] == "percus_yevick"
    expected = solve(parse_recipe(definition, base_dir=DEMO_RECIPE.parent))
    independent = solve(load_recipe(DEMO_RECIPE))
    shown = _doses(page)
    lipid = [d for d in expected.doses if d.stock == "lipid20"][0]
    assert shown.loc["lipid20", "undiluted volume [mL]"] == pytest.approx(lipid.volume_ml, rel=5e-4)
    # the correction lowers the predicted scattering, so the solver doses more emulsion
    assert lipid.volume_ml > [d for d in independent.doses if d.stock == "lipid20"][0].volume_ml
