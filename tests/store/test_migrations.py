"""Alembic migrations: the head equals the schema, and an older database upgrades in place."""

from __future__ import annotations

import datetime as _dt

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import inspect, text

from phantomlab.errors import InputError
from phantomlab.store import get_batch, latest_potencies, measurements_of, open_store, record_calibration
from phantomlab.store.migrate import current_revision, head_revision, upgrade
from phantomlab.store.schema import Base


def test_head_is_the_fifth_revision():
    assert head_revision() == "0005"


def test_migrated_database_matches_the_declared_schema(store):
    with store.engine.connect() as connection:
        context = MigrationContext.configure(connection, opts={"compare_type": True})
        differences = compare_metadata(context, Base.metadata)
    assert differences == []


def _engine(url):
    return open_store(url, upgrade=False).engine


def test_upgrade_from_the_first_schema_keeps_data(db_url):
    engine = _engine(db_url)
    assert upgrade(engine, "0001") == "0001"
    assert current_revision(engine) == "0001"
    columns = {c["name"] for c in inspect(engine).get_columns("measurements")}
    assert "temperature_c" not in columns
    # a database as version 0001 wrote it: raw rows, as an older phantomlab would
    now = _dt.datetime(2026, 3, 1, 12, 0)
    with engine.begin() as connection:
        connection.execute(text(
            "INSERT INTO recipes (uid, version, retracted, recorded_at, name, content_hash, definition) "
            "VALUES ('r1', 1, false, :now, 'old recipe', 'h1', '{}')"), {"now": now})
        connection.execute(text(
            "INSERT INTO batch_plans (recipe_id, plan, potencies_used, software_version, created_at) "
            "SELECT id, '{\"doses\": []}', '{}', '0.0.9', :now FROM recipes WHERE uid = 'r1'"), {"now": now})
        connection.execute(text(
            "INSERT INTO batches (uid, version, retracted, recorded_at, code, plan_id, status, planned_on) "
            "SELECT 'b1', 1, false, :now, '2026-001', MAX(id), 'planned', :day FROM batch_plans"),
            {"now": now, "day": now.date()})
        connection.execute(text(
            "INSERT INTO measurements (uid, version, retracted, recorded_at, batch_id, kind, file_name, "
            "raw_content, content_sha256) SELECT 'm1', 1, false, :now, id, 'optics', 'm.csv', :raw, 'x' "
            "FROM batches WHERE uid = 'b1'"),
            {"now": now, "raw": b"wavelength_nm,mua_per_mm,musp_per_mm\n650,0.01,1.0\n"})
        connection.execute(text(
            "INSERT INTO calibration_states (uid, version, retracted, recorded_at, method, computed_from, "
            "software_version) VALUES ('c1', 1, false, :now, 'old method', '{}', '0.0.9')"), {"now": now})
        connection.execute(text(
            "INSERT INTO calibration_potencies (state_id, stock_key, lot, potency, potency_sd) "
            "SELECT id, 'dyeA', 'L1', 1.25, 0.05 FROM calibration_states WHERE uid = 'c1'"))
    engine.dispose()

    store = open_store(db_url)  # upgrades in place
    assert current_revision(store.engine) == head_revision()
    columns = {c["name"] for c in inspect(store.engine).get_columns("measurements")}
    assert "temperature_c" in columns
    with store.reading() as session:
        batch = get_batch(session, "2026-001")
        (measurement,) = measurements_of(session, batch)
        assert measurement.raw_content == b"wavelength_nm,mua_per_mm,musp_per_mm\n650,0.01,1.0\n"
        assert measurement.temperature_c is None
    assert latest_potencies(store) == {"dyeA": (1.25, 0.05, "L1")}
    with store.transaction() as session:  # 0003: a second lot of the same stock in one state
        record_calibration(session, potencies={("dyeA", "L1"): (1.2, 0.05), ("dyeA", "L2"): (0.9, 0.05)},
                           computed_from={}, method="new method")
    store.close()


def test_opening_twice_does_not_migrate_again(db_url):
    first = open_store(db_url)
    first.close()
    second = open_store(db_url)
    assert current_revision(second.engine) == head_revision()
    second.close()


def test_database_from_a_newer_phantomlab_is_refused(db_url):
    store = open_store(db_url)
    with store.engine.begin() as connection:
        connection.execute(text("UPDATE alembic_version SET version_num = '9999'"))
    store.close()
    with pytest.raises(InputError, match="newer than this phantomlab"):
        open_store(db_url)


def test_unknown_target_revision_refused(db_url):
    engine = _engine(db_url)
    with pytest.raises(InputError, match="unknown schema revision"):
        upgrade(engine, "0042")
    engine.dispose()
