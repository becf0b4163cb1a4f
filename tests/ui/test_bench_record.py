"""The whole bench record on the page (AppTest), against ``batch actual`` / ``batch show``.

What these tests hold:

* the page's form is the mixing sheet's: the same lines in the same order with the same
  rounding as the sheet stored with the batch (read from its HTML);
* everything the sheet asks the technician to write down is recorded from the page — the
  matrix (water) as measured, the pre-dilutions as made (actual taken, actual diluent), a
  dose weighed instead of pipetted (mass through the stock's density), the day and time of
  mixing, its temperature, the cure schedule and who recorded it — and the page stores
  exactly what ``phantomlab batch actual`` stores for the same sheet (``batch show --json``);
* the stored volume fractions are the bench arithmetic done here by hand: each step's
  dilution (taken + diluent) / taken, the stock = amount / dilution, a mass / density, the
  batch volume = matrix + the diluent the pre-dilutions carried + the stocks (volumes
  additive);
* the batch record downloads from the batch's page with its verdict (PASS for a batch
  measured on target, FAIL for one measured 25 % off);
* one click, one record: a second click on a form already recorded records nothing.
"""

from __future__ import annotations

import datetime as _dt
import html as _html
import json
import re
import shutil
from pathlib import Path

import pytest

from phantomlab.cli import main
from phantomlab.ui.workspace import REPO_ROOT

#: Test data, invented: the emulsion's density for these tests (the demo shelf gives none,
#: i.e. 1 g/mL, which would hide whether a mass is turned into volume at all).
LIPID_DENSITY_G_PER_ML = 1.02
MIXED_ON = _dt.date.today() - _dt.timedelta(days=2)
BY = "K. Bay (demo)"
CURE = "stirred 10 min; liquid, no cure"
#: The sheet's lines as typed at the bench (demo data, invented), and the same in CSV.
TYPED = {
    "ink_black-D1.taken": "101 uL", "ink_black-D1.diluent": "0.905 mL",
    "dye_nir-D1.taken": "98 µL", "dye_nir-D1.diluent": "902 uL",
    "water": "476.0 mL", "dye_nir": "160 uL", "ink_black": "0.180 mL", "lipid20": "24.35 g",
}
CSV = ("stock,volume_ml,mass_g,dilution_factor,diluent_ml,diluent_g\n"
       "water,476.0,,,,\nink_black-D1,0.101,,,0.905,\ndye_nir-D1,0.098,,,0.902,\n"
       "dye_nir,0.160,,,,\nink_black,0.180,,,,\nlipid20,,24.35,,,\n")


def _cli(capsys, *argv):
    capsys.readouterr()
    status = main([str(a) for a in argv] + ["--json"])
    out, err = capsys.readouterr()
    assert status == 0, err
    return json.loads(out)


@pytest.fixture
def recipe_file(tmp_path) -> Path:
    """The demo recipe and shelf, copied, with the emulsion's density given (test data)."""
    folder = tmp_path / "recipes"
    shutil.copytree(REPO_ROOT / "recipes", folder)
    stocks = folder / "demo-stocks.toml"
    text = stocks.read_text(encoding="utf-8")
    text = text.replace("lipid_percent_w_v = 20\n",
                        f"lipid_percent_w_v = 20\ndensity_g_per_ml = {LIPID_DENSITY_G_PER_ML}  # test data, invented\n", 1)
    stocks.write_text(text, encoding="utf-8")
    recipe = folder / "demo-nir-liquid.toml"
    # a recipe of its own (another content hash): the log keeps one recipe row per content, with
    # the path it was first recorded from, and `batch actual` reads the stocks beside that path
    recipe.write_text(recipe.read_text(encoding="utf-8").replace('version = "1"', 'version = "1-test"', 1),
                      encoding="utf-8")
    return recipe


@pytest.fixture
def two_batches(demo_file, recipe_file, capsys):
    """Two planned batches of the same recipe, planned by `batch add`: one for the page, one for the CLI."""
    db = f"sqlite:///{demo_file}"
    page = _cli(capsys, "batch", "add", recipe_file, "--db", db)["batch_id"]
    cli = _cli(capsys, "batch", "add", recipe_file, "--db", db)["batch_id"]
    return db, page, cli


def _open(app, go_to, code):
    app = go_to(app, "Batch log")
    app.selectbox(key="batches.open").set_value(code).run()
    assert not app.exception, [e.message for e in app.exception]
    return app


def _field(app, code, name):
    found = [t for t in app.text_input if t.key.startswith(f"bench.{code}.v") and t.key.endswith(f".{name}")]
    assert len(found) == 1, (name, [t.key for t in app.text_input])
    return found[0]


def _record_button(app):
    found = [b for b in app.get("button") if b.proto.label in ("Record the amounts", "Record corrected amounts")]
    assert len(found) == 1
    return found[0]


def _fill_bench_record(app, code):
    for name, text in TYPED.items():
        _field(app, code, name).set_value(text)
    app.date_input(key=f"bench.{code}.v1.mixed_on").set_value(MIXED_ON)
    _field(app, code, "mixing_time").set_value("14:30")
    _field(app, code, "temperature").set_value("21 °C")
    _field(app, code, "cure").set_value(CURE)
    _field(app, code, "by").set_value(BY)


def _shown(db, code, capsys):
    shown = _cli(capsys, "batch", "show", code, "--db", db)
    return {key: shown[key] for key in ("actual_amounts", "actual_prediction", "alarms", "cure_details",
                                        "mixed_on", "status")} | {
        "by": shown["history"][-1]["recorded_by"], "change": shown["history"][-1]["change_note"],
        "versions": len(shown["history"])}


def _same(a, b):
    """Nested equality, floats to 1e-12 relative ("101 uL" and 0.101 may differ in the last bit)."""
    if isinstance(a, dict):
        assert set(a) == set(b), (set(a) ^ set(b))
        for key in a:
            _same(a[key], b[key])
    elif isinstance(a, list):
        assert len(a) == len(b)
        for x, y in zip(a, b):
            _same(x, y)
    elif isinstance(a, float) and isinstance(b, float):
        assert b == pytest.approx(a, rel=1e-12, abs=1e-15)
    else:
        assert a == b


def _sheet_lines(sheet_html: str):
    """(number, label, amount) of the sheet's amounts table and (step, amount taken) of its pre-dilutions."""
    amounts = re.findall(r"<tr><td>(\d+)</td><td>([^<]*)</td><td>[^<]*</td><td>[^<]*</td><td class='num'>([^<]*)</td>",
                         sheet_html)
    steps = re.findall(r"<tr><td class='key'>([^<]*-D\d)</td><td class='num'>([^<±]*) ±", sheet_html)
    return ([(int(n), _html.unescape(label), _html.unescape(amount)) for n, label, amount in amounts],
            [(_html.unescape(label), _html.unescape(amount).strip()) for label, amount in steps])


def test_the_form_follows_the_sheet_line_by_line(page, go_to, two_batches):
    db, code, _ = two_batches
    app = _open(page, go_to, code)
    from phantomlab.store import get_batch, open_store, plan_of

    store = open_store(db)
    try:
        with store.reading() as session:
            sheet = plan_of(session, get_batch(session, code)).sheet_html
    finally:
        store.close()
    amounts, steps = _sheet_lines(sheet)
    assert len(amounts) == 4 and len(steps) == 2, (amounts, steps)  # water + 3 doses; 2 pre-dilutions
    labels = [t.label for t in app.text_input if t.key.startswith(f"bench.{code}.v1.")]
    on_page = []
    for label in labels:
        found = re.match(r"(\d+) · (.+?)(?: from .+)?: sheet (\S+ \S+)", label)
        if found:
            on_page.append((int(found[1]), found[2], found[3]))
    assert on_page == amounts  # same lines, same order, same rounding (e.g. 177 µL, not 177.2 µL)
    taken = [(m[1], m[2]) for m in (re.match(r"(\S+) actual taken \(sheet (\S+ \S+) of", x) for x in labels) if m]
    assert taken == steps


def test_the_page_records_the_whole_sheet_as_batch_actual_does(page, go_to, open_tab, two_batches, tmp_path, capsys,
                                                                recipe_file, downloads):
    db, by_page, by_cli = two_batches
    app = _open(page, go_to, by_page)
    _fill_bench_record(app, by_page)
    _record_button(app).click()
    app.run()
    assert not app.exception, [e.message for e in app.exception]
    assert not [e.value for e in app.error if not e.value.startswith("ALARM")], [e.value for e in app.error]
    assert any(f"Amounts of batch {by_page} recorded (version 2, by {BY})" in s.value for s in app.success)

    amounts = tmp_path / "amounts.csv"
    amounts.write_text(CSV, encoding="utf-8")
    _cli(capsys, "batch", "actual", by_cli, amounts, "--mixed-on", f"{MIXED_ON.isoformat()}T14:30",
         "--mixing-temperature-c", "21", "--cure", CURE, "--operator", BY, "--db", db)

    page_record, cli_record = _shown(db, by_page, capsys), _shown(db, by_cli, capsys)
    _same(cli_record, page_record)
    assert page_record["cure_details"] == {"schedule": CURE, "mixing_temperature_c": 21.0, "mixing_time": "14:30"}
    assert page_record["mixed_on"] == MIXED_ON.isoformat() and page_record["by"] == BY
    assert page_record["status"] == "mixed" and page_record["versions"] == 2

    # the bench arithmetic, by hand
    rows = {row["stock"]: row for row in page_record["actual_amounts"]}
    ink_dilution = (0.101 + 0.905) / 0.101
    dye_dilution = (0.098 + 0.902) / 0.098
    ink, dye, lipid = 0.180 / ink_dilution, 0.160 / dye_dilution, 24.35 / LIPID_DENSITY_G_PER_ML
    carried = (0.180 - ink) + (0.160 - dye)
    water = 476.0 + carried
    total = water + ink + dye + lipid
    assert rows["ink_black"]["dilution_factor"] == pytest.approx(ink_dilution, rel=1e-12)
    assert rows["dye_nir"]["dilution_factor"] == pytest.approx(dye_dilution, rel=1e-12)
    assert rows["lipid20"]["volume_ml"] == pytest.approx(lipid, rel=1e-12)
    assert rows["lipid20"]["given"] == {"mass_g": 24.35}
    assert rows["water"]["volume_ml"] == pytest.approx(water, rel=1e-12)
    for key, volume in (("ink_black", ink), ("dye_nir", dye), ("lipid20", lipid), ("water", water)):
        assert rows[key]["volume_fraction"] == pytest.approx(volume / total, rel=1e-12)
    assert [s["step"] for s in rows["ink_black"]["predilution"]] == ["ink_black-D1"]
    assert rows["ink_black"]["predilution"][0]["taken"] == pytest.approx(0.101, rel=1e-12)

    # the page shows what it recorded, next to the form
    recorded = [f.value for f in app.dataframe if "as given" in f.value.columns]
    assert recorded and "24.35 g" in set(recorded[0]["as given"])

    # measured: on target (this batch), 25 % over in μs′ and μa (the other): PASS and FAIL records
    target = page_record["actual_prediction"]  # any smooth spectrum; the verdict is against the target
    plan_target = _cli(capsys, "batch", "show", by_page, "--db", db)["plan"]["target"]

    def optics(factor):
        lines = ["# test data, invented", "wavelength_nm,mua_per_mm,musp_per_mm,mua_sd_per_mm,musp_sd_per_mm"]
        for w, a, s in zip(plan_target["wavelength_nm"], plan_target["mua_per_mm"], plan_target["musp_per_mm"]):
            lines.append(f"{w},{a * factor!r},{s * factor!r},{a * 0.005!r},{s * 0.005!r}")
        return "\n".join(lines) + "\n"

    assert target is not None
    open_tab(app, "batches.tab", "Measurements")
    app.selectbox(key="batches.kind").set_value("optics").run()
    app.file_uploader(key="batches.file").set_value(("on-target.csv", optics(1.0).encode(), "text/csv"))
    [b for b in app.get("button") if b.proto.label == "Fit and attach"][0].click()
    app.run()
    assert not app.exception
    off = tmp_path / "off.csv"
    off.write_text(optics(1.25), encoding="utf-8")
    _cli(capsys, "batch", "measure", by_cli, off, "--kind", "optics", "--db", db)

    app = _open(app, go_to, by_page)
    name, content = downloads.content(app, f"Download the batch record of {by_page}")
    assert name == f"batch-record-{by_page}.html"
    record = content.decode("utf-8")
    assert "PASS: every targeted value within tolerance" in record  # 0 % off, SD 0.5 %: inside at 2 SD
    assert any("PASS" in s.value for s in app.success)
    assert "14:30" in record and CURE in record and "ink_black-D1" in record  # the bench record in it
    app = _open(app, go_to, by_cli)
    name, content = downloads.content(app, f"Download the batch record of {by_cli}")
    assert "FAIL: at least one targeted value outside tolerance" in content.decode("utf-8")
    assert any("FAIL" in e.value for e in app.error)


def test_a_second_click_on_a_recorded_form_records_nothing(page, go_to, two_batches, capsys):
    db, code, _ = two_batches
    app = _open(page, go_to, code)
    for name in ("dye_nir", "ink_black", "lipid20"):
        _field(app, code, name).set_value(TYPED[name])
    button = _record_button(app)
    button.click()
    app.run()
    assert _shown(db, code, capsys)["versions"] == 2
    button.click()  # the same button again (a double click, a slow network)
    app.run()
    assert not app.exception
    assert _shown(db, code, capsys)["versions"] == 2  # no second record
    assert [t for t in app.text_input if t.key.startswith(f"bench.{code}.v2.")]  # a fresh form for corrections


@pytest.mark.parametrize("name, text, said", [
    ("lipid20", "24 nm", "unit of another kind"),
    ("ink_black", "0.18 g", "made by volume"),
    ("ink_black-D1.taken", "0.1 g", "made by volume (µL, mL)"),
    ("ink_black-D1.diluent", "", "give both the actual taken and the actual diluent"),
])
def test_a_line_that_cannot_be_read_records_nothing(page, go_to, two_batches, capsys, name, text, said):
    db, code, _ = two_batches
    app = _open(page, go_to, code)
    for field, value in TYPED.items():
        _field(app, code, field).set_value(text if field == name else value)
    if name.endswith(".diluent"):
        _field(app, code, "ink_black-D1.taken").set_value("101 uL")
    _record_button(app).click()
    app.run()
    assert not app.exception
    errors = [e.value for e in app.error]
    assert any(said in e for e in errors), errors
    assert _shown(db, code, capsys)["versions"] == 1  # nothing written


def test_a_second_click_on_save_makes_no_second_batch(page, demo_file):
    from phantomlab.store import list_batches, open_store

    def batches():
        store = open_store(f"sqlite:///{demo_file}")
        try:
            with store.reading() as session:
                return len(list_batches(session))
        finally:
            store.close()

    before = batches()
    button = [b for b in page.get("button") if b.proto.label == "Save as a new batch"][0]
    button.click()
    page.run()
    assert any("Saved as batch" in s.value for s in page.success)
    assert batches() == before + 1
    button.click()  # the same button again
    page.run()
    assert not page.exception
    assert batches() == before + 1


def test_the_two_forms_stay_drawn_while_another_tab_is_open(page, go_to, open_tab, two_batches):
    """The bench record and the measurement to attach are forms whose typed lines and uploads live
    in the browser until sent: they are drawn whichever tab is open (the other tabs are lazy), so a
    look at another tab loses nothing."""
    _, code, _ = two_batches
    app = _open(page, go_to, code)
    for label in ("Measurements", "History", "Oxygenation series"):
        open_tab(app, "batches.tab", label)
        assert _field(app, code, "cure")  # the bench record, drawn under its hidden tab
        assert [t for t in app.text_input if t.key == "batches.instrument"]  # the measurement form
    assert not [d for d in app.dataframe if "event" in d.value.columns]  # History is lazy: closed, not drawn
