"""Exclusions from the calibration and rollback of calibration states: append-only, exact, refused
cleanly (one line, nothing written)."""

from __future__ import annotations

import pytest

from phantomlab.errors import InputError
from phantomlab.store import (
    add_measurement,
    calibration_exclusions,
    calibration_states,
    exclude_from_calibration,
    exclusion_history,
    get_batch,
    include_in_calibration,
    latest_potencies,
    record_calibration,
    restore_calibration_state,
)

SPECTRAL = {"kind": "musp_power_law", "reference_nm": 720.0, "half_width_nm": 0.0,
            "coefficients": {"delta_b": -0.5}, "potency": 0.8, "covariance": [[1e-4, 0.0], [0.0, 4e-4]]}


def test_exclude_include_exclude_keeps_every_step(store, planned_batch):
    with store.transaction() as session:
        batch = planned_batch(session)
        code = batch.code
        exclude_from_calibration(session, batch, reason="ink weighed twice", recorded_by="A. Demo")
    with store.transaction() as session:
        include_in_calibration(session, get_batch(session, code), reason="the second weighing was a tare")
    with store.transaction() as session:
        exclude_from_calibration(session, get_batch(session, code), reason="probe slipped after all")
    with store.reading() as session:
        (row,) = calibration_exclusions(session)
        assert (row.batch_code, row.measurement_id, row.version) == (code, None, 3)
        steps = exclusion_history(session, code)
    assert [s["event"] for s in steps] == ["excluded from calibration", "included in calibration again",
                                           "excluded from calibration"]
    assert [s["reason"] for s in steps] == ["ink weighed twice", "the second weighing was a tare",
                                            "probe slipped after all"]
    assert steps[0]["recorded_by"] == "A. Demo"


def test_a_measurement_is_excluded_on_its_own(store, planned_batch):
    with store.transaction() as session:
        batch = planned_batch(session)
        measurement = add_measurement(session, batch, kind="optics", file_name="m.csv",
                                      raw_content=b"wavelength_nm,mua_per_mm,musp_per_mm\n650,0.01,1\n")
        exclude_from_calibration(session, batch, measurement_id=measurement.id, reason="air bubble")
        other = planned_batch(session, recipe_name="other")
        with pytest.raises(InputError, match=f"measurement {measurement.id} is not a measurement of batch"):
            exclude_from_calibration(session, other, measurement_id=measurement.id, reason="x")
    with store.reading() as session:
        (row,) = calibration_exclusions(session)
        assert row.measurement_id == measurement.id


@pytest.mark.parametrize("action, words", [
    ("exclude twice", "is already excluded from the calibration (since"),
    ("include unexcluded", "is not excluded from the calibration; excluded now: nothing"),
    ("no reason", "give a reason (--reason TEXT)"),
    ("long reason", "reason of 501 characters; accepted: at most 500"),
])
def test_refusals_write_nothing(store, planned_batch, counts, action, words):
    with store.transaction() as session:
        batch = planned_batch(session)
        code = batch.code
        if action == "exclude twice":
            exclude_from_calibration(session, batch, reason="first")
    before = counts(store)
    with pytest.raises(InputError, match=words.replace("(", r"\(").replace(")", r"\)")):
        with store.transaction() as session:
            batch = get_batch(session, code)
            if action == "exclude twice":
                exclude_from_calibration(session, batch, reason="again")
            elif action == "include unexcluded":
                include_in_calibration(session, batch)
            elif action == "no reason":
                exclude_from_calibration(session, batch, reason="   ")
            else:
                exclude_from_calibration(session, batch, reason="x" * 501)
    assert counts(store) == before


def test_rollback_restores_the_exact_earlier_potencies(store):
    with store.transaction() as session:
        first = record_calibration(session, potencies={"ink": (1.23456789, 0.0345, "L1"),
                                                       "tio2": (0.8123, 0.021, "T1", SPECTRAL)},
                                   computed_from={"batches": ["2026-001"]}, method="m")
    after_first = latest_potencies(store)
    assert after_first["tio2"].spectral == SPECTRAL
    with store.transaction() as session:
        record_calibration(session, potencies={"ink": (1.5, 0.02, "L1"), "dye": (0.9, 0.03, "D1")},
                           computed_from={"batches": ["2026-001", "2026-002"]}, method="m")
    assert latest_potencies(store)["ink"] == (1.5, 0.02, "L1")
    with store.transaction() as session:
        restored = restore_calibration_state(session, first.id, recorded_by="A. Demo")
    back = latest_potencies(store)
    assert back == after_first  # exactly, floats and all; the dye calibrated later is gone again
    assert "dye" not in back and back["tio2"].spectral == SPECTRAL
    with store.reading() as session:
        states = calibration_states(session)
    assert [s["state_id"] for s in states][-1] == restored.id
    assert states[-1]["restores_state_id"] == first.id and states[-1]["current"]
    assert len(states) == 3  # history is kept: the rollback is a new state


@pytest.mark.parametrize("target, words", [(999, "calibration state 999 does not exist"),
                                           ("last", "is current already; nothing to restore"),
                                           ("x", "calibration state 'x' is not a number")])
def test_rollback_refusals_write_nothing(store, counts, target, words):
    with store.transaction() as session:
        state = record_calibration(session, potencies={"ink": (1.2, 0.02, "L1")}, computed_from={}, method="m")
    before = counts(store)
    with pytest.raises(InputError, match=words):
        with store.transaction() as session:
            restore_calibration_state(session, state.id if target == "last" else target)
    assert counts(store) == before
