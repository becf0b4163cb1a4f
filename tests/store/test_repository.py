"""Create and read every entity of the batch log; versions, retraction and history."""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field

import pytest
from sqlalchemy import select

from phantomlab.errors import InputError
from phantomlab.store import (
    add_fit,
    add_measurement,
    batch_history,
    batch_lots,
    calibration_potencies,
    correct,
    fits_of,
    get_batch,
    get_measurement,
    history_of,
    latest_calibration_state,
    latest_potencies,
    list_batches,
    measurements_of,
    next_batch_code,
    plan_of,
    potencies_for_shelf,
    recipe_of,
    record_actual,
    record_calibration,
    record_recipe,
    record_stock_lot,
    retract,
    set_status,
    unretract,
)
from phantomlab.store.schema import Batch, CalibrationState, Fit, Measurement, Recipe, StockLot



@dataclass(frozen=True)
class FakeStock:
    """Stand-in for phantomlab.materials.Stock: the store only reads these attributes."""

    key: str
    kind: str = "absorber"
    lot: str | None = "demo-lot-1"
    expiry: object = None
    potency: float = 1.0
    potency_sd: float = 0.1
    definition: dict = field(default_factory=dict)


@dataclass(frozen=True)
class FakeRecipe:
    """Stand-in for phantomlab.recipe.Recipe (the attributes the store snapshots)."""

    name: str
    content_hash: str
    version: str = "1"
    path: str | None = None
    definition: dict = field(default_factory=dict)


# --- stock lots --------------------------------------------------------------------------


def test_stock_lot_snapshot_is_stored_and_reused(store):
    stock = FakeStock(key="ink1", lot="L-7", expiry=_dt.date(2027, 5, 1), potency=0.9,
                      potency_sd=0.2, definition={"kind": "absorber", "spectrum": [[600, 1.5]]})
    with store.transaction() as session:
        first = record_stock_lot(session, stock, shelf_path="shelf.toml")
        again = record_stock_lot(session, stock)
    assert again.id == first.id
    with store.reading() as session:
        row = session.get(StockLot, first.id)
        assert (row.stock_key, row.lot, row.kind) == ("ink1", "L-7", "absorber")
        assert row.expiry == _dt.date(2027, 5, 1)
        assert row.definition == {"kind": "absorber", "spectrum": [[600, 1.5]]}
        assert (row.potency_prior, row.potency_sd_prior) == (0.9, 0.2)
        assert row.shelf_path == "shelf.toml"


def test_changed_stock_definition_becomes_a_new_version(store):
    with store.transaction() as session:
        first = record_stock_lot(session, FakeStock(key="ink1", lot="L-7", definition={"a": 1}))
        second = record_stock_lot(session, FakeStock(key="ink1", lot="L-7", definition={"a": 2}))
        other_lot = record_stock_lot(session, FakeStock(key="ink1", lot="L-8", definition={"a": 2}))
    assert second.uid == first.uid and second.version == 2 and second.supersedes_id == first.id
    assert other_lot.uid != first.uid
    with store.reading() as session:
        versions = history_of(session, StockLot, first.uid)
        assert [v.definition for v in versions] == [{"a": 1}, {"a": 2}]


def test_bad_expiry_refused(store):
    with store.transaction() as session, pytest.raises(InputError, match="expiry 'soon' is not a date"):
        record_stock_lot(session, FakeStock(key="ink1", expiry="soon", definition={}))


# --- recipes -----------------------------------------------------------------------------


def test_recipe_is_content_hashed_and_versioned(store):
    with store.transaction() as session:
        first = record_recipe(session, FakeRecipe(name="r", content_hash="h1", definition={"v": 1}))
        same = record_recipe(session, FakeRecipe(name="r", content_hash="h1", definition={"v": 1}))
        changed = record_recipe(session, FakeRecipe(name="r", content_hash="h2", definition={"v": 2}))
        old_again = record_recipe(session, FakeRecipe(name="r", content_hash="h1", definition={"v": 1}))
    assert same.id == first.id
    assert (changed.uid, changed.version, changed.supersedes_id) == (first.uid, 2, first.id)
    assert old_again.id == first.id
    with store.reading() as session:
        assert [r.content_hash for r in history_of(session, Recipe, first.uid)] == ["h1", "h2"]


# --- batches -----------------------------------------------------------------------------


def test_batch_ids_count_up_within_the_year(store, planned_batch):
    year = _dt.date.today().year
    with store.transaction() as session:
        a = planned_batch(session)
        b = planned_batch(session)
        assert next_batch_code(session, year=1999) == "1999-001"
    assert (a.code, b.code) == (f"{year}-001", f"{year}-002")


def test_batch_is_read_back_whole(store, planned_batch):
    with store.transaction() as session:
        batch = planned_batch(session, operator="A. Demo")
        code = batch.code
    with store.reading() as session:
        row = get_batch(session, code)
        assert (row.status, row.version, row.operator) == ("planned", 1, "A. Demo")
        assert plan_of(session, row).plan["doses"][0]["stock"] == "dyeA"
        assert plan_of(session, row).sheet_html == f"<html><body>batch {code}</body></html>"
        assert recipe_of(session, row).name == "demo recipe"
        assert list(batch_lots(session, row)) == ["dyeA"]
        assert batch_lots(session, row)["dyeA"].lot == "demo-lot-1"
        assert [b.code for b in list_batches(session)] == [code]


def test_status_moves_forward_only_and_keeps_history(store, planned_batch):
    with store.transaction() as session:
        code = planned_batch(session).code
    with store.transaction() as session:
        set_status(session, get_batch(session, code), "mixed", recorded_by="A. Demo")
    with store.transaction() as session:
        with pytest.raises(InputError, match="status moves forward only"):
            set_status(session, get_batch(session, code), "planned")
        with pytest.raises(InputError, match="status 'broken' not accepted; accepted: planned, mixed"):
            set_status(session, get_batch(session, code), "broken")
    with store.reading() as session:
        history = batch_history(session, code)
        assert [(h.version, h.status) for h in history] == [(1, "planned"), (2, "mixed")]
        assert history[1].mixed_on == _dt.date.today()
        assert history[1].change_note == "status planned -> mixed"
        assert history[1].plan_id == history[0].plan_id


def test_actual_amounts_make_a_new_version_and_mark_mixed(store, planned_batch):
    with store.transaction() as session:
        code = planned_batch(session).code
    amounts = [{"stock": "dyeA", "volume_ml": 1.02, "volume_fraction": 0.0102}]
    with store.transaction() as session:
        record_actual(session, get_batch(session, code), amounts=amounts,
                      prediction={"mua_per_mm": [0.0102]}, alarms=[])
    with store.transaction() as session:
        corrected = record_actual(session, get_batch(session, code), amounts=amounts[:],
                                  prediction=None, alarms=["outside"])
    assert corrected.version == 3 and corrected.change_note == "amounts dispensed corrected"
    with store.reading() as session:
        row = get_batch(session, code)
        assert row.status == "mixed" and row.actual_alarms == ["outside"]
        assert batch_history(session, code)[1].actual_prediction == {"mua_per_mm": [0.0102]}


def test_unknown_and_malformed_batch_ids(store):
    with store.reading() as session:
        with pytest.raises(InputError, match="unknown batch 2026-999"):
            get_batch(session, "2026-999")
        with pytest.raises(InputError, match="accepted: YEAR-SEQUENCE like 2026-031"):
            get_batch(session, "batch one")


# --- measurements and fits ---------------------------------------------------------------


RAW = b"# source: demo data, invented\r\nwavelength_nm,mua_per_mm,musp_per_mm\r\n650,0.0101,0.99\r\n\xff"


def test_measurement_keeps_the_file_byte_for_byte_and_fits_attach(store, planned_batch):
    with store.transaction() as session:
        batch = planned_batch(session)
        measurement = add_measurement(
            session, batch, kind="optics", file_name="m1.csv", raw_content=RAW,
            metadata_toml="n = 1.33\n", instrument="demo probe", geometry={"rho_mm": [1, 2]},
            measured_on=_dt.date(2026, 3, 4), phantom_age_days=2.0, temperature_c=21.5,
        )
        fit = add_fit(session, measurement, results={
            "model": "direct", "wavelength_nm": [650], "mua_per_mm": [0.0101],
            "musp_per_mm": [0.99], "chi2_red": 1.1, "warnings": ["demo warning"]},
            covariance=[[1e-8, 0], [0, 1e-4]])
        code, measurement_id = batch.code, measurement.id
    with store.reading() as session:
        (row,) = measurements_of(session, get_batch(session, code))
        assert row.raw_content == RAW
        assert row.content_sha256 == __import__("hashlib").sha256(RAW).hexdigest()
        assert (row.kind, row.instrument, row.geometry, row.temperature_c) == (
            "optics", "demo probe", {"rho_mm": [1, 2]}, 21.5)
        assert row.measured_on == _dt.date(2026, 3, 4) and row.phantom_age_days == 2.0
        (fit_row,) = fits_of(session, get_measurement(session, measurement_id))
        assert (fit_row.model, fit_row.chi2_red, fit_row.warnings) == ("direct", 1.1, ["demo warning"])
        assert fit_row.covariance == [[1e-8, 0], [0, 1e-4]]
        assert fit_row.id == fit.id


def test_measurement_survives_later_batch_versions(store, planned_batch):
    with store.transaction() as session:
        batch = planned_batch(session)
        add_measurement(session, batch, kind="srdr", file_name="r.csv", raw_content=b"x\n")
        set_status(session, get_batch(session, batch.code), "mixed")
    with store.reading() as session:
        assert len(measurements_of(session, get_batch(session, batch.code))) == 1


@pytest.mark.parametrize(
    "kwargs, match",
    [
        ({"kind": "ultrasound", "raw_content": b"x"}, "measurement kind 'ultrasound' not accepted"),
        ({"kind": "srdr", "raw_content": b""}, "is empty"),
        ({"kind": "srdr", "raw_content": b"x", "phantom_age_days": -1.0}, "must be >= 0"),
    ],
)
def test_bad_measurement_refused(store, planned_batch, kwargs, match):
    with store.transaction() as session:
        batch = planned_batch(session)
        with pytest.raises(InputError, match=match):
            add_measurement(session, batch, file_name="m.csv", **kwargs)


def test_fit_without_model_refused(store, planned_batch):
    with store.transaction() as session:
        m = add_measurement(session, planned_batch(session), kind="srdr", file_name="r.csv", raw_content=b"x")
        with pytest.raises(InputError, match="needs its model name"):
            add_fit(session, m, results={"mua_per_mm": [0.1]})


# --- calibration states ------------------------------------------------------------------


class _Shelf:
    def __init__(self, lots):
        self._stocks = {k: FakeStock(key=k, lot=v, definition={}) for k, v in lots.items()}

    def keys(self):
        return self._stocks.keys()

    def __getitem__(self, key):
        return self._stocks[key]


def test_calibration_state_round_trip_and_latest(store):
    with store.transaction() as session:
        record_stock_lot(session, FakeStock(key="ink1", lot="L1", definition={}))
        first = record_calibration(
            session, potencies={"ink1": (1.2, 0.05, "L1"), "ps1": (0.95, 0.02, "P1")},
            computed_from={"fit_ids": [1, 2], "batches": ["2026-001"]}, method="weighted mean")
    with store.transaction() as session:
        record_calibration(session, potencies={"ink1": (1.25, 0.04, "L1")},
                           computed_from={"fit_ids": [3]}, method="weighted mean")
    assert latest_potencies(store) == {"ink1": (1.25, 0.04, "L1"), "ps1": (0.95, 0.02, "P1")}
    with store.reading() as session:
        rows = calibration_potencies(session, session.get(CalibrationState, first.id))
        assert [(r.stock_key, r.potency, r.potency_sd, r.lot) for r in rows] == [
            ("ink1", 1.2, 0.05, "L1"), ("ps1", 0.95, 0.02, "P1")]
        assert rows[0].stock_lot_id is not None and rows[1].stock_lot_id is None
        assert session.get(CalibrationState, first.id).computed_from["batches"] == ["2026-001"]
        assert latest_calibration_state(session).computed_from == {"fit_ids": [3]}


def test_new_lot_on_the_shelf_starts_from_the_prior(store):
    with store.transaction() as session:
        record_calibration(session, potencies={"ink1": (1.2, 0.05, "L1")},
                           computed_from={}, method="m")
        record_calibration(session, potencies={"ink1": (0.8, 0.05, "L2")},
                           computed_from={}, method="m")
    assert latest_potencies(store, shelf=_Shelf({"ink1": "L1"})) == {"ink1": (1.2, 0.05, "L1")}
    assert latest_potencies(store, shelf=_Shelf({"ink1": "L3"})) == {}
    assert potencies_for_shelf(store, _Shelf({"ink1": "L2"})) == {"ink1": (0.8, 0.05)}


def test_retracted_calibration_is_ignored_but_kept(store):
    with store.transaction() as session:
        record_calibration(session, potencies={"ink1": (1.2, 0.05, "L1")}, computed_from={}, method="m")
        bad = record_calibration(session, potencies={"ink1": (3.0, 0.05, "L1")}, computed_from={}, method="m")
    with store.transaction() as session:
        retract(session, session.get(CalibrationState, bad.id), note="fit used the wrong probe")
    assert latest_potencies(store) == {"ink1": (1.2, 0.05, "L1")}
    with store.reading() as session:
        versions = history_of(session, CalibrationState, bad.uid)
        assert [v.retracted for v in versions] == [False, True]
        assert calibration_potencies(session, versions[1])[0].potency == 3.0


@pytest.mark.parametrize(
    "potencies, match",
    [
        ({}, "at least one stock potency"),
        ({"ink1": (0.0, 0.1, None)}, "accepted: a finite number > 0"),
        ({"ink1": (1.0, float("nan"), None)}, "accepted: a finite number >= 0"),
        ({"ink1": (1.0,)}, "must be \\(potency, potency_sd, lot\\)"),
    ],
)
def test_bad_calibration_refused(store, potencies, match):
    with store.transaction() as session, pytest.raises(InputError, match=match):
        record_calibration(session, potencies=potencies, computed_from={}, method="m")


# --- versioning and retraction, generic ----------------------------------------------------


@pytest.mark.parametrize("model", [Batch, Measurement, Fit])
def test_correct_retract_unretract_chain(store, planned_batch, model):
    with store.transaction() as session:
        batch = planned_batch(session)
        measurement = add_measurement(session, batch, kind="srdr", file_name="r.csv", raw_content=b"x")
        fit = add_fit(session, measurement, results={"model": "m"})
        row = {Batch: batch, Measurement: measurement, Fit: fit}[model]
        uid = row.uid
    with store.transaction() as session:
        head = history_of(session, model, uid)[-1]
        corrected = correct(session, head, note="typo", recorded_by="reviewer",
                            **({"notes": "fixed"} if model is Batch else
                               {"instrument": "probe B"} if model is Measurement else {"model": "m2"}))
        gone = retract(session, corrected, note="wrong sample")
        back = unretract(session, gone, note="right sample after all")
    with store.reading() as session:
        chain = history_of(session, model, uid)
        assert [v.version for v in chain] == [1, 2, 3, 4]
        assert [v.retracted for v in chain] == [False, False, True, False]
        assert [v.supersedes_id for v in chain] == [None] + [v.id for v in chain[:-1]]
        assert chain[1].recorded_by == "reviewer" and chain[2].change_note == "wrong sample"
        assert back.id == chain[-1].id


def test_only_the_newest_version_can_be_corrected(store, planned_batch):
    with store.transaction() as session:
        batch = planned_batch(session)
        correct(session, batch, note="first", notes="a")
        with pytest.raises(InputError, match="is not the newest"):
            correct(session, batch, note="second", notes="b")
        with pytest.raises(InputError, match="needs a note saying why"):
            correct(session, get_batch(session, batch.code), note="  ", notes="b")
        with pytest.raises(InputError, match="cannot change colour"):
            correct(session, get_batch(session, batch.code), note="x", colour="red")


def test_retracted_batch_leaves_the_list_but_stays_readable(store, planned_batch):
    with store.transaction() as session:
        code = planned_batch(session).code
        retract(session, get_batch(session, code), note="never made")
        with pytest.raises(InputError, match="already retracted"):
            retract(session, get_batch(session, code), note="again")
        with pytest.raises(InputError, match="is retracted"):
            set_status(session, get_batch(session, code), "mixed")
    with store.reading() as session:
        assert list_batches(session) == []
        assert [b.code for b in list_batches(session, include_retracted=True)] == [code]
        assert len(batch_history(session, code)) == 2
        assert session.scalar(select(Batch).where(Batch.code == code, Batch.version == 1)).status == "planned"


def test_one_calibration_state_can_hold_two_lots_of_a_stock(store):
    with store.transaction() as session:
        state = record_calibration(
            session, potencies={("ink1", "L1"): (1.2, 0.05), ("ink1", "L2"): (0.7, 0.04)},
            computed_from={"batches": ["2026-001", "2026-002"]}, method="m")
        rows = calibration_potencies(session, state)
        assert [(r.lot, r.potency) for r in rows] == [("L1", 1.2), ("L2", 0.7)]
    assert latest_potencies(store, shelf=_Shelf({"ink1": "L2"})) == {"ink1": (0.7, 0.04, "L2")}
    assert latest_potencies(store, shelf=_Shelf({"ink1": "L1"})) == {"ink1": (1.2, 0.05, "L1")}


def test_calibration_evidence_lists_batches_with_amounts_and_fits(store, planned_batch):
    from phantomlab.store import calibration_evidence

    with store.transaction() as session:
        planned = planned_batch(session)  # no amounts: left out
        mixed = planned_batch(session)
        mixed = record_actual(session, mixed, amounts=[{"stock": "dyeA", "volume_ml": 1.0, "volume_fraction": 0.01}],
                              prediction=None, alarms=[])
        unfitted = planned_batch(session)  # amounts but no fit: left out
        record_actual(session, unfitted, amounts=[{"stock": "dyeA", "volume_ml": 1.0}], prediction=None, alarms=[])
        m = add_measurement(session, mixed, kind="optics", file_name="m.csv", raw_content=b"x", phantom_age_days=3.0)
        add_fit(session, m, results={"model": "direct", "mua_per_mm": [0.01]})
        newer = add_fit(session, m, results={"model": "direct", "mua_per_mm": [0.011]})
        add_measurement(session, planned, kind="optics", file_name="p.csv", raw_content=b"x")
    with store.reading() as session:
        (evidence,) = calibration_evidence(session)
    assert evidence.batch_id == mixed.code
    assert evidence.amounts[0]["volume_fraction"] == 0.01 and evidence.batch_volume_ml == 100.0
    assert evidence.lots == {"dyeA": "demo-lot-1"} and evidence.priors == {("dyeA", "demo-lot-1"): (1.0, 0.1)}
    assert [(f.fit_id, f.phantom_age_days, f.results["mua_per_mm"]) for f in evidence.fits] == [(newer.id, 3.0, [0.011])]
