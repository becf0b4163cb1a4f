"""``phantomlab baseline build|show``: a stored baseline from the command line, used by ``fit``.

Interface tests: the file holds what ``build_baseline`` made with the same inputs (the
physics of baselines is checked in test_montecarlo_baseline.py), the keys are the ones the
module documents, a fit with ``--model mc`` uses it, bad input ends with one line and exit
status 2, and nothing already saved is lost.
"""

import json

import numpy as np
import pytest

from phantomlab.cli import main
from phantomlab.transport.montecarlo import build_baseline, load_baseline

KEYS = {"file", "g", "n", "n_outside", "mua_ref_per_mm", "mus_ref_per_mm", "photons", "detected", "seed",
        "largest_exit_radius_mm", "max_musp_over_mua", "megabytes", "warnings"}


def _run(capsys, *argv):
    status = main(list(argv))
    captured = capsys.readouterr()
    return status, captured.out, captured.err


@pytest.fixture(scope="module")
def built(tmp_path_factory):
    folder = tmp_path_factory.mktemp("baselines")
    path = folder / "b.npz"
    status = main(["baseline", "build", str(path), "--g", "0.8", "--n", "1.4", "--photons", "20000", "--seed", "4",
                   "--mua-ref-per-mm", "0.002", "--mus-ref-per-mm", "5", "--json"])
    assert status == 0
    return path


def test_build_writes_what_build_baseline_makes(built, capsys):
    stored = load_baseline(built)
    direct = build_baseline(mua_per_mm=0.002, mus_per_mm=5.0, g=0.8, n=1.4, photons=20000, seed=4)
    np.testing.assert_array_equal(stored.exit_radius_mm, direct.exit_radius_mm)
    np.testing.assert_array_equal(stored.path_length_mm, direct.path_length_mm)
    status, out, err = _run(capsys, "baseline", "show", str(built), "--json")
    assert status == 0 and err == ""
    payload = json.loads(out)
    assert set(payload) == KEYS
    assert payload["detected"] == direct.detected and payload["photons"] == 20000
    assert payload["max_musp_over_mua"] == pytest.approx(0.2 * 5.0 / 0.002)  # (1 - g) mus_ref / mua_ref
    assert not list(built.parent.glob("*.part"))  # no temporary file left behind


def test_show_as_text_says_how_to_use_it(built, capsys):
    status, out, _ = _run(capsys, "baseline", "show", str(built))
    assert status == 0
    assert "musp/mua up to 500" in out and f"--kind srdr --baseline {built}" in out


def test_fit_uses_the_built_baseline(built, capsys, tmp_path):
    # data from the same baseline's lookup: the fit must give back the optics it was made with
    from phantomlab.calibration.fit_srdr import srdr_forward

    rho = np.geomspace(0.5, 10.0, 12)
    forward = srdr_forward(model="mc", rho_mm=rho, n=1.4, baseline=load_baseline(built))
    values = forward(np.array([0.01]), np.array([1.0]))[0]
    lines = ["wavelength_nm,rho_mm,reflectance_per_mm2,sd"]
    lines += [f"700,{r:.6g},{v:.9g},{0.01 * v:.6g}" for r, v in zip(rho, values)]
    measurement = tmp_path / "m.csv"
    measurement.write_text("\n".join(lines) + "\n")
    status, out, err = _run(capsys, "fit", str(measurement), "--kind", "srdr", "--n", "1.4", "--model", "mc",
                            "--baseline", str(built), "--json")
    assert status == 0, err
    payload = json.loads(out)
    assert payload["model"] == "mc-lookup"
    assert payload["mua_per_mm"][0] == pytest.approx(0.01, rel=0.01)
    assert payload["musp_per_mm"][0] == pytest.approx(1.0, rel=0.01)


def test_an_existing_file_is_kept_unless_forced(built, capsys):
    before = built.read_bytes()
    status, _, err = _run(capsys, "baseline", "build", str(built), "--g", "0.8", "--n", "1.4", "--photons", "5000")
    assert status == 2
    assert err.strip() == f"phantomlab: error: {built} exists; give --force to replace it, or another file name"
    assert built.read_bytes() == before


def test_an_interrupted_save_leaves_the_old_file(built, monkeypatch, tmp_path):
    target = tmp_path / "keep.npz"
    target.write_bytes(built.read_bytes())
    baseline = load_baseline(target)

    def fail(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(np, "savez_compressed", fail)
    with pytest.raises(OSError, match="disk full"):
        baseline.save(target)
    assert target.read_bytes() == built.read_bytes()
    assert [p.name for p in tmp_path.iterdir()] == ["keep.npz"]


@pytest.mark.parametrize("argv, message", [
    (["baseline", "build", "OUT.txt", "--g", "0.8", "--n", "1.4"], "baseline file must end in .npz, got 'OUT.txt'"),
    (["baseline", "build", "no/such/folder/b.npz", "--g", "0.8", "--n", "1.4"], "folder no/such/folder does not exist"),
    (["baseline", "build", "b.npz", "--g", "0.8", "--n", "1.4", "--photons", "10"],
     "--photons must be at least 1000 for a usable baseline, got 10"),
    (["baseline", "build", "b.npz", "--g", "1.2", "--n", "1.4", "--photons", "5000"],
     "g must lie strictly inside (-1, 1), got 1.2"),
    (["baseline", "show", "missing.npz"], "no baseline file missing.npz"),
    (["baseline"], "baseline: give an action: build, show, list or clear"),
])
def test_bad_input_is_one_line(capsys, tmp_path, monkeypatch, argv, message):
    monkeypatch.chdir(tmp_path)
    status, out, err = _run(capsys, *argv)
    assert status == 2 and out == ""
    assert err.strip() == f"phantomlab: error: {message}"
    assert not list(tmp_path.glob("*.npz"))
