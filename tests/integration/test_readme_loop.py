"""The loop README.md shows, run through the command line on a temporary SQLite batch log.

``test_readme_walk_through_runs_as_written`` runs the README's shell block itself, in a
temporary folder, so the walk-through cannot drift from the commands; the other test checks
what the loop computes.  The demo probe file `recipes/measurements/demo-nir-liquid-srdr.csv` was made (by the script
beside it) from the demo recipe with invented "true" potencies lipid20 1.12, ink_black 0.80,
dye_nir 1.10, by our Monte Carlo engine run directly (g of the emulsion model per wavelength)
with its photon noise and 1 % probe noise; ``batch measure`` fits it with the default model,
the Monte Carlo lookup with g per wavelength from its sidecar (the emulsion model, 0.64-0.51,
rounded to 0.02: one baseline per step, their tables in the test cache of tests/conftest.py): recalibration must move the potencies towards those values, and
the corrected plan must differ from the first in the direction that compensates.  The preview
records nothing; ``--apply`` does, and from then on ``plan`` and ``batch add`` give the same
doses and the same recipe hash, and say which calibration state they used.
"""

import json
import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from phantomlab.cli import main

ROOT = Path(__file__).resolve().parents[2]
RECIPE = ROOT / "recipes" / "demo-nir-liquid.toml"
MEASUREMENT = ROOT / "recipes" / "measurements" / "demo-nir-liquid-srdr.csv"


def run(capsys, *argv):
    status = main([*map(str, argv), "--json"])
    captured = capsys.readouterr()
    assert status == 0, captured.err
    return json.loads(captured.out)


def test_plan_log_dispense_measure_recalibrate_correct(tmp_path, capsys):
    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    first = run(capsys, "plan", RECIPE)
    added = run(capsys, "batch", "add", RECIPE, "--operator", "A. Tech", "--db", db)
    code = added["batch_id"]
    planned = {d["stock"]: d["volume_ml"] for d in added["doses"]}
    assert planned == pytest.approx({d["stock"]: d["volume_ml"] for d in first["doses"]})

    amounts = tmp_path / "dispensed.csv"
    amounts.write_text("stock,volume_ml\n" + "".join(f"{k},{v:.6g}\n" for k, v in planned.items()))
    actual = run(capsys, "batch", "actual", code, amounts, "--db", db)
    assert actual["within_tolerance"] is True

    measured = run(capsys, "batch", "measure", code, MEASUREMENT, "--kind", "srdr", "--db", db)
    assert measured["fit"]["model"] == "mc-lookup"
    # g per wavelength from the sidecar's [g_spectrum] (the emulsion model), rounded to 0.02: one
    # baseline per g step (phantomlab.calibration.band_g), their tables in the test cache
    assert measured["fit"]["g_used"] == pytest.approx([0.64, 0.62, 0.58, 0.54, 0.52])
    assert measured["fit"]["g_origin"] == "sidecar" and measured["fit"]["fit_quality"] == "good"
    assert len(measured["fit"]["wavelength_nm"]) == 5

    assert measured["verdict"]["outcome"] in ("PASS", "FAIL", "UNDECIDED")
    assert len(measured["verdict"]["per_wavelength"]) == 10  # mua and musp at the 5 target wavelengths

    preview = run(capsys, "recalibrate", "--db", db)
    assert preview["applied"] is False and preview["state_id"] is None
    assert run(capsys, "plan", RECIPE, "--db", db)["potencies_from"] == "stock file"  # nothing recorded
    applied = run(capsys, "recalibrate", "--apply", "--db", db)
    assert applied["applied"] is True and applied["stocks"] == preview["stocks"]
    calibrated = applied["stocks"]
    # invented truth of the demo file (see the module docstring); the prior is 1.0 for each
    # one measurement against a prior of 1.00 ± 0.03: with honest fit SDs (misfit and the
    # diffusion model's measured error included) the lipid potency moves more than half-way
    # to its invented truth 1.12, and the truth stays within 2 of its (posterior) SDs (measured:
    # 1.114 ± 0.018; with one baseline at the band's mean g 0.58, 1.116 ± 0.024)
    lipid = calibrated["lipid20"]
    assert 1.06 < lipid["potency"] < 1.15 and abs(lipid["potency"] - 1.12) < 2 * lipid["potency_sd"]
    assert calibrated["ink_black"]["potency"] == pytest.approx(0.80, abs=0.05)
    dye = calibrated["dye_nir"]  # weakly determined beside the ink: its truth within 2 SD
    assert abs(dye["potency"] - 1.10) < 2 * dye["potency_sd"]

    second = run(capsys, "plan", RECIPE, "--db", db)
    assert second["potencies_from"]["state_id"] == applied["state_id"]
    logged = run(capsys, "batch", "add", RECIPE, "--db", db, "--corrects", code)
    assert [d["volume_ml"] for d in logged["doses"]] == [d["volume_ml"] for d in second["doses"]]
    assert logged["recipe_hash"] == second["recipe_hash"] == first["recipe_hash"]
    assert logged["potencies_from"] == second["potencies_from"] and logged["corrects_batch"] == code
    doses = {d["stock"]: d["volume_ml"] for d in second["doses"]}
    assert doses["lipid20"] < planned["lipid20"]  # stronger emulsion than the stock file said
    assert doses["ink_black"] > planned["ink_black"]  # weaker ink
    shown = run(capsys, "batch", "show", code, "--db", db)
    assert shown["batch_id"] == code


def test_readme_walk_through_runs_as_written(tmp_path):
    """Every command of README's "The loop from the command line" block, as written, in bash."""
    bash = shutil.which("bash")
    if bash is None:
        pytest.skip("bash is not installed")
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme[readme.index("## The loop from the command line"):]
    block = re.search(r"```bash\n(.*?)```", section, flags=re.S).group(1)
    # the block starts by activating .venv; here the test's own interpreter stands in for it
    script = "\n".join(line for line in block.splitlines() if not line.startswith("source .venv"))
    (tmp_path / "recipes").symlink_to(ROOT / "recipes")
    environment = {**os.environ, "PATH": f"{Path(sys.executable).parent}{os.pathsep}{os.environ.get('PATH', '')}"}
    environment.pop("PHANTOMLAB_DB", None)
    done = subprocess.run([bash, "-e", "-o", "pipefail", "-c", script], cwd=tmp_path, env=environment,
                          capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr[-2000:]
    assert re.search(r"logged batch 20\d\d-001 ", done.stdout), done.stdout[-2000:]
    assert (tmp_path / "sheet.html").is_file() and (tmp_path / "record.html").is_file()
    assert (tmp_path / "phantomlab.sqlite").is_file()
