"""Oxygenation series in the batch log: stored with the batch in one transaction, refused
input writes nothing, an older database upgrades to hold them, the lab archive keeps them."""

from __future__ import annotations

import datetime as _dt
import math
from pathlib import Path

import pytest
from sqlalchemy import text

from phantomlab.errors import InputError
from phantomlab.oxygenation_workflow import oxygenation_of, record_oxygenation_series
from phantomlab.store import get_batch, open_store
from phantomlab.store.archive import export_lab, import_lab
from phantomlab.store.migrate import current_revision, head_revision, upgrade

MEASUREMENTS = Path(__file__).resolve().parents[2] / "recipes" / "measurements"
SERIES = (MEASUREMENTS / "demo-oximeter-series.csv").read_bytes()
READINGS = (MEASUREMENTS / "demo-oximeter-references.csv").read_bytes()


def _record(store, code, **changes):
    options = dict(name="yeast run 1", series_file_name="demo-oximeter-series.csv", series_content=SERIES,
                   chromophores="hbo2,hb,water", readings_file_name="demo-oximeter-references.csv",
                   readings_content=READINGS, recorded_by="demo operator",
                   water_temperature_c=37.0)  # the demo series was measured at 37 °C; the test batch's recipe says 20
    options.update(changes)
    return record_oxygenation_series(store, code, **options)


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_series_stored_with_its_batch(store, planned_batch):
    with store.transaction() as session:
        code = planned_batch(session).code
    recorded = _record(store, code)
    assert len(recorded.computation.points) == 13 and len(recorded.computation.readings) == 7
    (series,) = oxygenation_of(store, code)
    assert series["name"] == "yeast run 1" and series["chromophores"] == ["hbo2", "hb", "water"]
    assert [p["measured_at"] for p in series["points"]][0] == "2026-03-02T10:00:00"
    # demo data: true sO2 0.02 + 0.96 / (1 + exp((t - 30) / 7)) at 35 uM; the fitted values follow it
    for point in series["points"]:
        truth = 0.02 + 0.96 / (1 + math.exp((point["minutes"] - 30) / 7))
        assert point["so2"] == pytest.approx(truth, abs=0.02) and point["thb_um"] == pytest.approx(35, rel=0.03)
    assert [round(row["reference_so2"], 3) for row in series["comparison"]][:2] == [0.96, 0.897]
    assert all(abs(row["difference"]) < 0.03 for row in series["comparison"])
    with store.reading() as session:
        from phantomlab.store.oxygenation import oxygenation_series_of

        (row,) = oxygenation_series_of(session, get_batch(session, code))
        assert row.series_content == SERIES and row.readings_content == READINGS and len(row.series_sha256) == 64


@pytest.mark.parametrize(
    "changes, message",
    [
        ({"readings_content": b"measured_at,reference_so2\n2026-03-02T10:05,1.5\n"}, "1.5 is outside 0-1"),
        ({"readings_content": b"measured_at,reference_so2_percent\n,95\n"}, "no time"),
        ({"series_content": b"measured_at,wavelength_nm,mua_per_mm\n2026-03-02T10:00,700,x\n"}, "column mua_per_mm: not a number"),
        ({"chromophores": "hbo2,water"}, "give both hbo2 and hb"),
        ({"name": ""}, "series name must be"),
    ],
)
def test_refused_input_writes_nothing(store, planned_batch, counts, changes, message):
    with store.transaction() as session:
        code = planned_batch(session).code
    before = counts(store)
    with pytest.raises(InputError, match=message):
        _record(store, code, **changes)
    assert counts(store) == before


def test_unknown_batch_refused(store, counts):
    before = counts(store)
    with pytest.raises(InputError, match="unknown batch 2026-777"):
        _record(store, "2026-777")
    assert counts(store) == before


def test_upgrade_from_0003_then_store_a_series(db_url):
    engine = open_store(db_url, upgrade=False).engine
    assert upgrade(engine, "0003") == "0003"
    now = _dt.datetime(2026, 3, 1, 12, 0)
    with engine.begin() as connection:  # a batch as revision 0003 wrote it
        connection.execute(text(
            "INSERT INTO recipes (uid, version, retracted, recorded_at, name, content_hash, definition) "
            "VALUES ('r1', 1, false, :now, 'old recipe', 'h1', '{}')"), {"now": now})
        connection.execute(text(
            "INSERT INTO batch_plans (recipe_id, plan, potencies_used, software_version, created_at) "
            "SELECT id, '{\"doses\": []}', '{}', '0.0.9', :now FROM recipes WHERE uid = 'r1'"), {"now": now})
        connection.execute(text(
            "INSERT INTO batches (uid, version, retracted, recorded_at, code, plan_id, status, planned_on) "
            "SELECT 'b1', 1, false, :now, '2026-001', MAX(id), 'mixed', :day FROM batch_plans"),
            {"now": now, "day": now.date()})
    engine.dispose()
    store = open_store(db_url)
    assert current_revision(store.engine) == head_revision()
    _record(store, "2026-001")
    assert len(oxygenation_of(store, "2026-001")) == 1
    store.close()


@pytest.mark.filterwarnings("ignore::phantomlab.errors.PhantomlabWarning")
def test_archive_keeps_the_series(store, planned_batch, tmp_path):
    with store.transaction() as session:
        code = planned_batch(session).code
    _record(store, code)
    export_lab(store, tmp_path / "lab.zip")
    target = open_store(f"sqlite:///{tmp_path / 'copy.sqlite'}")
    assert import_lab(target, tmp_path / "lab.zip")["oxygenation_series"] == 1
    assert oxygenation_of(target, code) == oxygenation_of(store, code)
    target.close()
