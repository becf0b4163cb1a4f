"""The hidden simulated lab through its batch log and the command line (issue 13 acceptance).

Six batches of ``hidden_lab.py`` are logged, dispensed and measured (readings from the
independent Monte Carlo run, fitted on the way in with the lookup of the other run).  Then, as
a person would: ``recalibrate`` previews and flags the mis-dosed batch; ONE command excludes
it; ``recalibrate --apply`` records; ``correct`` plans the next batch, which lands within 3 %
of the target at every target wavelength on the true stocks; ``plan --db`` and ``batch add``
give the same doses and hash; the exclusion shows in ``batch show``; bad input is one line
and writes nothing.
"""

import json

import numpy as np
import pytest

from hidden_lab import PHOTON_SHARES, batch_doses, make_lab, photon_shares

from phantomlab.cli import main

MISDOSED = 3  # the fourth batch: 40 % more carbon black than its record says


def _cli(capsys, *argv):
    status = main([*map(str, argv), "--json"])
    captured = capsys.readouterr()
    return status, (json.loads(captured.out) if captured.out.strip() else None), captured.err


def _counts(url):
    from sqlalchemy import func, select

    from phantomlab.store import open_store
    from phantomlab.store.schema import Base

    store = open_store(url)
    try:
        with store.reading() as session:
            return {name: session.scalar(select(func.count()).select_from(table))
                    for name, table in Base.metadata.tables.items()}
    finally:
        store.close()


@pytest.fixture(scope="module")
def logged(tmp_path_factory):
    import warnings

    from phantomlab.errors import PhantomlabWarning
    from phantomlab.store import open_store
    from phantomlab.measurement_workflow import attach_measurement
    from phantomlab.workflows import plan_batch, record_dispensed, record_planned_batch

    folder = tmp_path_factory.mktemp("hidden-log")
    lab = make_lab(folder)
    url = f"sqlite:///{folder / 'lab.sqlite'}"
    shares = photon_shares(lab.data_baseline, PHOTON_SHARES, seed=11)
    store = open_store(url)
    codes = []
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", PhantomlabWarning)
            for j, recorded in enumerate(batch_doses(6, seed=3)):
                plan = plan_batch(store, lab.recipe)
                code = record_planned_batch(store, plan, operator="demo: K. Tern").code
                volume = plan.batch_volume_ml
                rows = [{"stock": key, "volume_ml": f * volume} for key, f in recorded.items()]
                rows.append({"stock": "silicone", "volume_ml": (1 - sum(recorded.values())) * volume})
                record_dispensed(store, code, rows)
                made = dict(recorded)
                if j == MISDOSED:
                    made["carbon_black"] *= 1.4
                reading = lab.reading(made, share=shares[j], seed=100 + j)
                attach_measurement(store, code, kind="srdr", file_name=f"probe-{code}.csv",
                                   raw_content=reading.encode(), sidecar_toml='n = 1.4\ndetector = "ring"\n', model="mc",
                                   baseline=lab.fit_baseline, options={"n": 1.4})
                codes.append(code)
    finally:
        store.close()
    return lab, url, codes


def test_flag_exclude_apply_correct(logged, capsys, record_property):
    lab, url, codes = logged
    status, preview, err = _cli(capsys, "recalibrate", "--db", url)
    assert status == 0, err
    assert preview["applied"] is False and preview["state_id"] is None
    assert [(o["batch_id"], o["measurement_id"]) for o in preview["outliers"]] == [(codes[MISDOSED], None)]
    assert any(f"phantomlab batch exclude {codes[MISDOSED]}" in note for note in preview["notes"])

    # ONE command leaves it out, with its reason
    status, excluded, err = _cli(capsys, "batch", "exclude", codes[MISDOSED], "--reason",
                                 "carbon-black masterbatch weighed twice", "--db", url)
    assert status == 0, err and excluded["excluded"] is True

    status, applied, err = _cli(capsys, "recalibrate", "--apply", "--db", url)
    assert status == 0, err
    assert applied["applied"] is True and applied["outliers"] == []
    assert [e["batch_id"] for e in applied["excluded"]] == [codes[MISDOSED]]
    assert applied["stocks"]["tio2"]["spectral"]["kind"] == "musp_power_law"
    for entry in applied["stocks"].values():
        assert {"potency", "potency_sd", "lot", "potency_before", "spectral"} <= set(entry)

    status, corrected, err = _cli(capsys, "correct", codes[-1], "--db", url)
    assert status == 0, err
    assert corrected["potencies_from"]["state_id"] == applied["state_id"]
    assert corrected["verdict"]["outcome"] in ("PASS", "UNDECIDED")
    fractions = {d["stock"]: d["volume_fraction"] for d in corrected["doses"]}
    made = lab.true_optics(fractions)
    target = lab.recipe.target
    errors = (np.max(np.abs(made.mua_per_mm / target.mua_per_mm - 1)),
              np.max(np.abs(made.musp_per_mm / target.musp_per_mm - 1)))
    record_property("next_batch_max_error_mua_musp", errors)
    assert max(errors) < 0.03

    # plan and batch add: same potencies, same doses, same canonical hash, say which state
    status, planned, err = _cli(capsys, "plan", lab.folder / "lab.toml", "--db", url)
    assert status == 0, err
    status, added, err = _cli(capsys, "batch", "add", lab.folder / "lab.toml", "--db", url, "--corrects", codes[-1])
    assert status == 0, err
    assert [d["volume_ml"] for d in added["doses"]] == [d["volume_ml"] for d in planned["doses"]]
    assert added["recipe_hash"] == planned["recipe_hash"] == lab.recipe.content_hash
    assert added["potencies_from"] == planned["potencies_from"] == corrected["potencies_from"]

    # the exclusion is in the batch's history
    status, shown, err = _cli(capsys, "batch", "show", codes[MISDOSED], "--db", url)
    assert status == 0, err
    (step,) = shown["calibration_exclusions"]
    assert step["event"] == "excluded from calibration" and step["reason"] == "carbon-black masterbatch weighed twice"
    main(["batch", "show", codes[MISDOSED], "--db", url])
    assert "excluded from calibration: carbon-black masterbatch weighed twice" in capsys.readouterr().out
    print(f"next batch after exclusion: max |error| mua {errors[0]:.1%}, musp {errors[1]:.1%}")


@pytest.mark.parametrize("argv, words", [
    (["batch", "exclude", "2026-999", "--reason", "x"], "unknown batch 2026-999"),
    (["calibration", "use", "999"], "calibration state 999 does not exist"),
    (["recalibrate", "--apply"], "nothing to apply: calibration state"),
    (["recalibrate", "--apply", "--dry-run"], "--apply and --dry-run contradict each other"),
])
def test_bad_input_is_one_line_and_writes_nothing(logged, capsys, argv, words):
    _lab, url, _codes = logged
    if words.startswith("nothing to apply"):
        status, _out, err = _cli(capsys, "recalibrate", "--apply", "--db", url)  # record once (or already done)
    before = _counts(url)
    status, out, err = _cli(capsys, *argv, "--db", url)
    assert status == 2 and out is None
    assert err.startswith("phantomlab: error: ") and words in err and err.count("\n") == 1
    assert _counts(url) == before
