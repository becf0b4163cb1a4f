"""``fit --kind sphere``: raw sphere readings to μa, μs′ (and g), bad readings refused.

The readings are made from slabs of known optics through the sphere equations, which the
sphere Monte Carlo of ``test_sphere.py`` holds; one set of slabs comes from the photon
Monte Carlo (``fixtures/mc_slab_cases.npz``, independent of the adding-doubling code the
fit inverts).  Here the loop is checked: convert with the sample's own diffuse
reflectance, fit, convert again — it must give back the slab the readings were made from,
which the plain ratio to the standard does not.
"""

import json
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration import fit_measurement_file
from phantomlab.calibration.sphere import Sphere, SphereSetup, open_beam_signal, sample_signals, standard_signal
from phantomlab.cli import main
from phantomlab.errors import InputError
from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

FIXTURES = Path(__file__).parent / "fixtures"

SIDECAR = """# demo data, invented
n = 1.4
thickness_mm = {thickness}
n_slide = 1.52
slides = "both"
{extra}
[sphere]
arrangement = "{arrangement}"
diameter_mm = 80.0
sample_port_mm = 22.0
entrance_port_mm = 12.0
detector_port_mm = 8.0
wall_reflectance = 0.97
baffle = true
standard_csv = "standard.csv"
reading_sd_fraction = 0.002
"""
STANDARD = "wavelength_nm,reflectance,sd\n400,0.97,0.003\n1000,0.98,0.003\n"


def _setup(arrangement):
    sphere = Sphere(diameter_mm=80.0, sample_port_mm=22.0, detector_port_mm=8.0, open_port_mm=12.0,
                    wall_reflectance=0.97, baffle=True)
    return SphereSetup(reflection=sphere, transmission=sphere, arrangement=arrangement)


def write_readings(folder: Path, *, wavelength, mua, mus, g, thickness, arrangement="single", collimated=True,
                   rc=None, tc=None, extra="", name="sample"):
    """Readings of a slab in the spheres (optionally with the slab's R, T given: rc, tc)."""
    slab = dict(mua_per_mm=mua, mus_per_mm=mus, g=g, thickness_mm=thickness, n=1.4, n_slide=1.52)
    beam = slab_reflectance_transmittance(**slab)
    diffuse = slab_reflectance_transmittance(**slab, incidence="diffuse")
    rd = beam.diffuse_reflectance if rc is None else rc - beam.specular_reflectance
    td = beam.diffuse_transmittance if tc is None else tc - beam.unscattered_transmittance
    setup = _setup(arrangement)
    s_r, s_t = sample_signals(setup, diffuse_reflectance=rd, specular_reflectance=beam.specular_reflectance,
                              diffuse_transmittance=td, unscattered_transmittance=beam.unscattered_transmittance,
                              r_diffuse=diffuse.total_reflectance, t_diffuse=diffuse.total_transmittance)
    r_std = np.interp(wavelength, [400, 1000], [0.97, 0.98])
    standard = standard_signal(setup, standard_reflectance=r_std)
    opened = open_beam_signal(setup, shape=np.shape(wavelength))
    gain, dark = 5000.0, 3.0
    header = "wavelength_nm,r_sample,r_standard,r_dark,t_sample,t_open,t_dark"
    header += ",tc_sample,tc_open,tc_dark" if collimated else ""
    rows = ["# source: demo data, invented (sphere equations and adding-doubling)", header]
    for k, w in enumerate(wavelength):
        row = [w, gain * s_r[k] + dark, gain * standard[k] + dark, dark, gain * s_t[k] + dark,
               gain * opened[k] + dark, dark]
        if collimated:
            row += [1e5 * beam.unscattered_transmittance[k] + 1.0, 1e5 + 1.0, 1.0]
        rows.append(",".join(f"{v:.10g}" for v in row))
    (folder / f"{name}.csv").write_text("\n".join(rows) + "\n")
    (folder / f"{name}.toml").write_text(SIDECAR.format(thickness=thickness, arrangement=arrangement, extra=extra))
    (folder / "standard.csv").write_text(STANDARD)
    return folder / f"{name}.csv"


@pytest.mark.parametrize("arrangement", ["single", "double"])
def test_readings_give_back_mua_musp_and_g(tmp_path, arrangement):
    wavelength = np.array([550.0, 650.0, 750.0, 850.0])
    mua = np.array([0.08, 0.03, 0.015, 0.01])
    g = np.array([0.7, 0.75, 0.8, 0.85])
    musp = np.array([1.6, 1.3, 1.1, 0.9])
    path = write_readings(tmp_path, wavelength=wavelength, mua=mua, mus=musp / (1 - g), g=g, thickness=0.8,
                          arrangement=arrangement)
    fit = fit_measurement_file(path, kind="sphere")
    np.testing.assert_allclose(fit.mua_per_mm, mua, rtol=2e-4)
    np.testing.assert_allclose(fit.musp_per_mm, musp, rtol=2e-4)
    np.testing.assert_allclose(fit.extras["g"], g, atol=2e-4)
    assert fit.extras["g_fitted"] is True and np.all(np.isfinite(fit.extras["g_sd"]))
    # the sphere correction was large: the plain ratio misses R by > 5 %
    assert np.max(np.abs(fit.extras["sphere_correction_reflectance"] - 1)) > 0.05
    payload = fit.to_json()
    for key in ("g", "g_sd", "total_reflectance", "total_reflectance_sd", "total_transmittance",
                "total_transmittance_sd", "collimated_transmittance", "collimated_transmittance_sd"):
        assert key in payload and len(payload[key]) == 4


def test_without_collimated_readings_g_stays_an_input(tmp_path):
    wavelength = np.array([600.0, 700.0])
    mua, musp, g = np.array([0.02, 0.01]), np.array([1.2, 1.0]), 0.8
    path = write_readings(tmp_path, wavelength=wavelength, mua=mua, mus=musp / (1 - g), g=g, thickness=1.0,
                          collimated=False)
    with pytest.raises(InputError, match="needs the anisotropy g"):
        fit_measurement_file(path, kind="sphere")
    fit = fit_measurement_file(path, kind="sphere", g=g)
    np.testing.assert_allclose(fit.mua_per_mm, mua, rtol=2e-4)
    assert fit.extras["g_fitted"] is False and fit.to_json()["g_sd"] is None
    assert fit.parameters["g"] == {"value": 0.8, "sd": None, "assumed": True}


@pytest.mark.parametrize("case", range(3))
def test_independent_monte_carlo_slab_through_the_spheres(tmp_path, case):
    # R and T of a photon Monte Carlo slab (not adding-doubling), seen through the spheres:
    # the fit recovers the slab's μa and μs′ within 3 SD + 1 % (the MC's own noise is in the SD).
    data = np.load(FIXTURES / "mc_slab_cases.npz")
    mua, mus = float(data["mua_per_mm"][case]), float(data["mus_per_mm"][case])
    if not np.isfinite(data["n_slide"][case]):
        pytest.skip("the sphere sidecar here puts slides on both faces")
    path = write_readings(tmp_path, wavelength=np.array([700.0]), mua=np.array([mua]), mus=np.array([mus]),
                          g=0.8, thickness=float(data["thickness_mm"][case]), collimated=False,
                          rc=np.array([data["total_reflectance"][case]]),
                          tc=np.array([data["total_transmittance"][case]]))
    fit = fit_measurement_file(path, kind="sphere", g=0.8)
    assert abs(fit.mua_per_mm[0] - mua) < 3 * fit.mua_sd_per_mm[0] + 0.01 * mua
    assert abs(fit.musp_per_mm[0] - mus * 0.2) < 3 * fit.musp_sd_per_mm[0] + 0.01 * mus * 0.2


def _edit(path: Path, row: int, column: str, value: float):
    lines = path.read_text().splitlines()
    header = lines[1].split(",")
    cells = lines[row + 1].split(",")
    cells[header.index(column)] = repr(value)
    lines[row + 1] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n")


def _make(tmp_path):
    return write_readings(tmp_path, wavelength=np.array([600.0, 700.0]), mua=np.array([0.02, 0.01]),
                          mus=np.array([6.0, 5.0]), g=0.8, thickness=1.0)


@pytest.mark.parametrize("change, words", [
    (lambda p: _edit(p, 1, "r_sample", 1e6), "column r_sample: 1e+06 above the standard reading"),
    (lambda p: _edit(p, 2, "t_sample", 1.0), "column t_sample: negative net signal -2 after the dark reading"),
    (lambda p: _edit(p, 1, "r_dark", 1e9), "net signal"),
    (lambda p: p.with_suffix(".toml").write_text(p.with_suffix(".toml").read_text().replace(
        "detector_port_mm = 8.0", "detector_port_mm = 79.0").replace("sample_port_mm = 22.0", "sample_port_mm = 79.0")
        .replace("entrance_port_mm = 12.0", "entrance_port_mm = 79.0")),
     "port fractions sum to"),
    (lambda p: (p.parent / "standard.csv").write_text("wavelength_nm,reflectance\n650,0.97\n900,0.98\n"),
     "calibrated from 650 to 900 nm; the measurement needs 600 to 700 nm"),
    (lambda p: p.with_suffix(".toml").write_text(p.with_suffix(".toml").read_text().replace(
        'standard_csv = "standard.csv"', 'standard_csv = "../outside/standard.csv"')), "lies outside the folder"),
    (lambda p: p.with_suffix(".toml").write_text(p.with_suffix(".toml").read_text().replace(
        'standard_csv = "standard.csv"', 'standard_csv = "/etc/standard.csv"')), "lies outside the folder"),
    (lambda p: p.with_suffix(".toml").write_text(p.with_suffix(".toml").read_text().replace(
        "wall_reflectance = 0.97", "wall_reflectance = 1.2")), "wall_reflectance = 1.2"),
    (lambda p: p.with_suffix(".toml").write_text(p.with_suffix(".toml").read_text().replace(
        "baffle = true", "baffles = true")), "unknown key 'baffles'"),
])
def test_bad_readings_refused_in_one_line(tmp_path, capsys, change, words):
    folder = tmp_path / "measurement"
    folder.mkdir()
    (tmp_path / "outside").mkdir()
    (tmp_path / "outside" / "standard.csv").write_text(STANDARD)
    path = _make(folder)
    change(path)
    with pytest.raises(InputError, match=words.replace("(", r"\(").replace("+", r"\+")):
        fit_measurement_file(path, kind="sphere")
    capsys.readouterr()
    assert main(["fit", str(path), "--kind", "sphere"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("phantomlab: error: ") and err.count("\n") == 1, err


def test_batch_measure_keeps_the_standard_with_the_record_and_refits_from_the_database(tmp_path, capsys):
    from phantomlab.store import get_batch, measurements_of, open_store

    db = f"sqlite:///{tmp_path / 'lab.sqlite'}"
    recipe = Path(__file__).resolve().parents[2] / "recipes" / "demo-nir-liquid.toml"
    capsys.readouterr()
    assert main(["batch", "add", str(recipe), "--db", db, "--json"]) == 0
    code = json.loads(capsys.readouterr().out)["batch_id"]
    path = _make(tmp_path)
    assert main(["batch", "measure", code, str(path), "--kind", "sphere", "--db", db, "--json"]) == 0
    stored = json.loads(capsys.readouterr().out)
    assert stored["fit"]["g_fitted"] is True
    bad = tmp_path / "bad"
    bad.mkdir()
    bad_path = _make(bad)
    _edit(bad_path, 1, "r_sample", 1e6)
    assert main(["batch", "measure", code, str(bad_path), "--kind", "sphere", "--db", db]) == 2
    capsys.readouterr()
    store = open_store(db)
    with store.reading() as session:
        rows = measurements_of(session, get_batch(session, code))
        assert len(rows) == 1  # the refused file wrote nothing
        row = rows[0]
        assert row.raw_content == path.read_bytes()
        assert "standard_csv" not in row.metadata_toml and "standard_reflectance" in row.metadata_toml
        text, sidecar = row.raw_content.decode(), __import__("tomllib").loads(row.metadata_toml)
    store.close()
    refit = fit_measurement_file(text, kind="sphere", sidecar=sidecar)
    np.testing.assert_allclose(refit.mua_per_mm, stored["fit"]["mua_per_mm"], rtol=1e-6)
