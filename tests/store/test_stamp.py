"""The log's state stamp (store/stamp.py): the page's caches are keyed on it.

It must change with every kind of write a page or another process makes (a new batch, a
status change, a measurement, a fit, a calibration state, an exclusion, a retraction) and
stay the same while nothing is written; checked on SQLite and PostgreSQL (the ``store``
fixture runs both).
"""

from __future__ import annotations

from phantomlab.store import (
    add_fit,
    add_measurement,
    exclude_from_calibration,
    get_batch,
    log_stamp,
    record_calibration,
    retract,
    set_status,
)


def _stamp(store) -> tuple[int, ...]:
    with store.reading() as session:
        return log_stamp(session)


def test_stamp_changes_with_every_write_and_only_then(store, planned_batch):
    empty = _stamp(store)
    assert empty == _stamp(store)
    assert set(empty) == {0}
    seen = [empty]

    def changed() -> None:
        now = _stamp(store)
        assert now not in seen, "a write left the stamp unchanged"
        assert _stamp(store) == now, "the stamp changed without a write"
        seen.append(now)

    with store.transaction() as session:
        code = planned_batch(session).code
    changed()
    with store.transaction() as session:
        set_status(session, get_batch(session, code), "mixed", recorded_by="A. Demo")
    changed()
    with store.transaction() as session:
        measurement = add_measurement(session, get_batch(session, code), kind="srdr", file_name="m.csv",
                                      raw_content=b"wavelength_nm,rho_mm,reflectance_per_mm2\n650,5,0.001\n")
        measurement_id = measurement.id
    changed()
    with store.transaction() as session:
        from phantomlab.store import get_measurement

        add_fit(session, get_measurement(session, measurement_id), model="kienle1997",
                results={"mua_per_mm": [0.01]}, chi2_red=1.0)
    changed()
    with store.transaction() as session:
        record_calibration(session, potencies={"dyeA": (1.1, 0.05, "demo-lot-1")}, method="weighted mean",
                           computed_from={"batches": [code]})
    changed()
    with store.transaction() as session:
        exclude_from_calibration(session, get_batch(session, code), reason="test")
    changed()
    with store.transaction() as session:
        retract(session, get_batch(session, code), note="test")
    changed()
    # a refused write (rolled back) leaves the stamp as it was
    before = _stamp(store)
    try:
        with store.transaction() as session:
            set_status(session, get_batch(session, code), "planned")
    except Exception:  # noqa: BLE001 - the refusal itself is tested in test_repository.py
        pass
    assert _stamp(store) == before
