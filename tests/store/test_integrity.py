"""Integrity: one transaction per command, crash safety, concurrent writers, bad input.

Writers run as separate Python processes (subprocess) on the same database, as two
commands typed in two terminals would.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import textwrap
import time

import pytest
from sqlalchemy import text

from phantomlab.errors import InputError
from phantomlab.store import add_measurement, get_batch, list_batches, open_store
from phantomlab.store.schema import Measurement

WORKER = textwrap.dedent(
    """
    import sys, time
    from types import SimpleNamespace as NS
    from phantomlab.store import (StoreBusyError, add_batch, add_measurement, next_batch_code,
                                  open_store, record_recipe, record_stock_lot)

    url, mode, arg = sys.argv[1], sys.argv[2], float(sys.argv[3])
    timeout = float(sys.argv[4]) if len(sys.argv) > 4 else 20.0

    def plan_batch(session):
        lot = record_stock_lot(session, NS(key="dyeA", kind="absorber", lot="L1", expiry=None,
                                           potency=1.0, potency_sd=0.1, definition={"a": 1}))
        recipe = record_recipe(session, NS(name="demo", version="1", content_hash="h", path=None,
                                           definition={"name": "demo"}))
        code = next_batch_code(session)
        return add_batch(session, code=code, recipe=recipe, plan={"doses": []}, sheet_html="<p>",
                         potencies_used={}, lots={"dyeA": lot}, software_version="test")

    store = open_store(url, busy_timeout_s=timeout)
    try:
        if mode == "many":
            for _ in range(int(arg)):
                with store.transaction() as session:
                    plan_batch(session)
            print("done", flush=True)
        elif mode == "hold":
            with store.transaction() as session:
                plan_batch(session)
                print("holding", flush=True)
                sys.stdin.readline()  # hold the write lock until the test says so
            print("released", flush=True)
        elif mode == "big":
            with store.transaction() as session:
                batch = plan_batch(session)
                for i in range(int(arg)):
                    add_measurement(session, batch, kind="srdr", file_name=f"m{i}.csv",
                                    raw_content=b"wavelength_nm,rho_mm,reflectance_per_mm2\\n" * 200)
                    if i == 200:
                        print("writing", flush=True)
            print("finished", flush=True)
    except StoreBusyError as exc:
        print("busy:", exc, flush=True)
        sys.exit(3)
    """
)


@pytest.fixture
def worker(tmp_path):
    script = tmp_path / "writer.py"
    script.write_text(WORKER)

    def start(url, mode, arg, timeout=20.0):
        return subprocess.Popen(
            [sys.executable, str(script), url, mode, str(arg), str(timeout)],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
        )

    return start


def _seed(store, planned_batch):
    with store.transaction() as session:
        batch = planned_batch(session)
        add_measurement(session, batch, kind="optics", file_name="keep.csv", raw_content=b"keep me\n")
        return batch.code


def _sqlite_integrity(store):
    if store.dialect == "sqlite":
        with store.reading() as session:
            assert session.execute(text("PRAGMA integrity_check")).scalar() == "ok"
            assert session.execute(text("PRAGMA foreign_key_check")).all() == []


def test_kill_9_in_the_middle_of_a_large_write_leaves_the_database_as_before(
    store, db_url, planned_batch, counts, worker
):
    code = _seed(store, planned_batch)
    before = counts(store)
    process = worker(db_url, "big", 1_000_000)
    line = process.stdout.readline()
    assert line.strip() == "writing", process.stderr.read()
    time.sleep(0.3)  # well inside the write: a million rows take minutes
    os.kill(process.pid, signal.SIGKILL)
    process.wait(timeout=30)
    assert process.returncode == -signal.SIGKILL
    reopened = open_store(db_url, busy_timeout_s=20)
    assert counts(reopened) == before
    _sqlite_integrity(reopened)
    with reopened.reading() as session:
        assert [b.code for b in list_batches(session)] == [code]
        (kept,) = session.query(Measurement).all()
        assert kept.raw_content == b"keep me\n"
    with reopened.transaction() as session:  # and the database takes writes again
        planned_batch(session)
    reopened.close()


def test_two_concurrent_writers_both_succeed(store, db_url, worker):
    first = worker(db_url, "many", 8)
    second = worker(db_url, "many", 8)
    outputs = [p.communicate(timeout=120) for p in (first, second)]
    assert [p.returncode for p in (first, second)] == [0, 0], outputs
    with store.reading() as session:
        codes = [b.code for b in list_batches(session)]
    year = codes[0].split("-")[0]
    assert codes == [f"{year}-{n:03d}" for n in range(1, 17)]
    _sqlite_integrity(store)


def test_second_writer_gets_database_busy_when_the_first_holds_too_long(
    store, db_url, worker, counts
):
    holder = worker(db_url, "hold", 0)
    assert holder.stdout.readline().strip() == "holding", holder.stderr.read()
    before = counts(store)  # readers are not blocked by the writer
    impatient = worker(db_url, "many", 1, timeout=0.5)
    out, err = impatient.communicate(timeout=60)
    assert impatient.returncode == 3, (out, err)
    assert out.startswith("busy: database busy, try again")
    holder.communicate("release\n", timeout=60)
    assert holder.returncode == 0
    after = counts(store)
    assert after["batches"] == before["batches"] + 1  # only the holder's batch


def test_error_inside_a_transaction_rolls_everything_back(store, planned_batch, counts):
    before = counts(store)
    with pytest.raises(InputError, match="kind 'x-ray' not accepted"):
        with store.transaction() as session:
            batch = planned_batch(session)
            add_measurement(session, batch, kind="srdr", file_name="ok.csv", raw_content=b"ok")
            add_measurement(session, batch, kind="x-ray", file_name="bad.csv", raw_content=b"x")
    assert counts(store) == before


def test_foreign_keys_are_enforced(store, counts):
    before = counts(store)
    with pytest.raises(InputError, match="database refused the change"):
        with store.transaction() as session:
            session.add(Measurement(uid="u", version=1, retracted=False, batch_id=424242,
                                    kind="srdr", file_name="m.csv", raw_content=b"x",
                                    content_sha256="0"))
    assert counts(store) == before


def test_reading_writes_nothing(store, planned_batch, counts):
    before = counts(store)
    with store.reading() as session:
        planned_batch(session)
    assert counts(store) == before


def test_unknown_batch_in_a_command_writes_nothing(store, counts):
    before = counts(store)
    with pytest.raises(InputError, match="unknown batch 2026-404"):
        with store.transaction() as session:
            add_measurement(session, get_batch(session, "2026-404"), kind="srdr",
                            file_name="m.csv", raw_content=b"x")
    assert counts(store) == before


def test_a_version_number_taken_twice_is_a_conflict_and_writes_nothing(store, planned_batch, counts):
    from phantomlab.store import StoreConflictError
    from phantomlab.store.schema import Batch

    with store.transaction() as session:
        code = planned_batch(session).code
    before = counts(store)
    with pytest.raises(StoreConflictError, match="changed the same record meanwhile; try again"):
        with store.transaction() as session:
            head = get_batch(session, code)
            session.add(Batch(uid=head.uid, version=head.version, code=code, plan_id=head.plan_id,
                              status="mixed", planned_on=head.planned_on, retracted=False))
    assert counts(store) == before
