"""A whole lab exported as one archive and imported again loses nothing."""

from __future__ import annotations

import datetime as _dt
import json
import zipfile

import pytest

from phantomlab.errors import InputError
from phantomlab.store import (
    add_fit,
    add_measurement,
    get_batch,
    open_store,
    record_actual,
    record_calibration,
    retract,
    set_status,
)
from phantomlab.store.archive import export_lab, import_lab
from phantomlab.store.migrate import head_revision

RAW = b"# source: demo data, invented\nwavelength_nm,rho_mm,reflectance_per_mm2\n650,1.0,0.0123\n\x00\xff"


def _fill(store, planned_batch):
    with store.transaction() as session:
        batch = planned_batch(session)
        planned_batch(session, recipe_name="other recipe", stock_key="ink2", lot="L9")
        batch = record_actual(session, batch, amounts=[{"stock": "dyeA", "volume_ml": 1.01}],
                              prediction={"mua_per_mm": [0.01]}, alarms=[])
        measurement = add_measurement(session, batch, kind="srdr", file_name="probe/run 1.csv",
                                      raw_content=RAW, measured_on=_dt.date(2026, 2, 3),
                                      phantom_age_days=1.5, temperature_c=22.0)
        add_fit(session, measurement, results={"model": "farrell1992", "mua_per_mm": [0.0101]},
                covariance=[[1.0, 0.1], [0.1, 2.0]])
        record_calibration(session, potencies={"dyeA": (1.1, 0.05, "demo-lot-1")},
                           computed_from={"fit_ids": [1]}, method="weighted mean")
        set_status(session, get_batch(session, batch.code), "characterised")
        retract(session, get_batch(session, "%s" % batch.code), note="demo retraction")
        return batch.code


def _tables(path):
    with zipfile.ZipFile(path) as archive:
        return {n: archive.read(n) for n in archive.namelist() if n != "manifest.json"}


def test_round_trip_loses_nothing(store, db_url, planned_batch, tmp_path, counts):
    code = _fill(store, planned_batch)
    first = tmp_path / "lab.zip"
    manifest = export_lab(store, first)
    assert manifest["tables"]["batches"] == 5 and manifest["schema_revision"] == head_revision()

    target = open_store(f"sqlite:///{tmp_path / 'copy.sqlite'}")
    assert import_lab(target, first)["measurements"] == 1
    second = tmp_path / "again.zip"
    export_lab(target, second)
    assert _tables(first) == _tables(second)
    assert counts(target) == counts(store)
    with target.reading() as session:
        assert get_batch(session, code).retracted
    # new records after an import continue the ids without collisions
    with target.transaction() as session:
        planned_batch(session)
    target.close()


def test_round_trip_into_the_same_engine(store, planned_batch, tmp_path, counts, request):
    """SQLite -> SQLite and PostgreSQL -> fresh PostgreSQL (ids and sequences kept)."""
    _fill(store, planned_batch)
    path = tmp_path / "lab.zip"
    export_lab(store, path)
    server = name = None
    if store.dialect == "sqlite":
        target_url = f"sqlite:///{tmp_path / 'copy.sqlite'}"
    else:
        server = request.getfixturevalue("postgres_server")
        name = server.new_database()
        target_url = server.url(name)
    target = open_store(target_url)
    try:
        import_lab(target, path)
        assert counts(target) == counts(store)
        again = tmp_path / "again.zip"
        export_lab(target, again)
        assert _tables(path) == _tables(again)
        with target.transaction() as session:
            newest = planned_batch(session)  # ids continue after the imported ones
        assert newest.id == counts(store)["batches"] + 1
    finally:
        target.close()
        if server is not None:
            server.drop_database(name)


def test_archive_holds_readable_csv_and_the_raw_files(store, planned_batch, tmp_path):
    _fill(store, planned_batch)
    path = tmp_path / "lab.zip"
    export_lab(store, path)
    with zipfile.ZipFile(path) as archive:
        assert archive.read("measurements/1/run 1.csv") == RAW
        header = archive.read("batches.csv").decode().splitlines()[0]
        assert header.startswith("code,version,status,retracted,operator")
        rows = json.loads(archive.read("tables/batches.json"))
        assert {r["status"] for r in rows} == {"planned", "mixed", "characterised"}


def test_import_into_a_database_with_data_is_refused(store, planned_batch, tmp_path, counts):
    _fill(store, planned_batch)
    path = tmp_path / "lab.zip"
    export_lab(store, path)
    before = counts(store)
    with pytest.raises(InputError, match="import a lab archive into an empty database"):
        import_lab(store, path)
    assert counts(store) == before


@pytest.mark.parametrize(
    "damage, match",
    [
        ("not a zip", "is not a zip archive"),
        ("no manifest", "no manifest.json"),
        ("wrong format", "archive format or format version not accepted"),
        ("bad bytes", "does not match its SHA-256"),
        ("missing table", "tables/fits.json is missing"),
    ],
)
def test_damaged_archive_refused_and_nothing_written(store, planned_batch, tmp_path, counts, damage, match):
    _fill(store, planned_batch)
    good = tmp_path / "lab.zip"
    export_lab(store, good)
    members = {}
    with zipfile.ZipFile(good) as archive:
        members = {n: archive.read(n) for n in archive.namelist()}
    bad = tmp_path / "bad.zip"
    if damage == "not a zip":
        bad.write_bytes(b"plain text")
    else:
        manifest = json.loads(members["manifest.json"])
        if damage == "no manifest":
            members.pop("manifest.json")
        elif damage == "wrong format":
            manifest["format"] = "something else"
        elif damage == "bad bytes":
            rows = json.loads(members["tables/measurements.json"])
            rows[0]["raw_content"] = {"base64": "AAAA"}
            members["tables/measurements.json"] = json.dumps(rows).encode()
        elif damage == "missing table":
            members.pop("tables/fits.json")
        if "manifest.json" in members:
            members["manifest.json"] = json.dumps(manifest).encode()
        with zipfile.ZipFile(bad, "w") as archive:
            for name, data in members.items():
                archive.writestr(name, data)
    empty = open_store(f"sqlite:///{tmp_path / 'empty.sqlite'}")
    before = counts(empty)
    with pytest.raises(InputError, match=match):
        import_lab(empty, bad)
    assert counts(empty) == before
    empty.close()


def test_export_name_must_be_zip(store, tmp_path):
    with pytest.raises(InputError, match="must end in .zip"):
        export_lab(store, tmp_path / "lab.tar")
