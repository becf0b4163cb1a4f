"""Integrating-sphere equations (calibration/sphere.py) against exact limits and a sphere Monte Carlo.

Sources beside each check:
* Goebel 1967, Appl Opt 6:125, eq. 2 (a cap port's share of the sphere's area) and the
  single-sphere multiplier a_d / (1 − Σ a_i r_i) that follows from uniform exchange;
* exact algebraic limits: a sample equal to the standard reads as the standard; ports that
  shrink to nothing leave the plain ratio R / r_std; a lossless wall sends every photon to
  a port;
* ``fixtures/sphere_mc_signals.json``: photons bouncing in spheres with cap ports, made by
  ``fixtures/make_sphere_mc_fixture.py`` with ``sphere_monte_carlo.py`` (geometry drawn
  photon by photon, no area fractions used); a small live run checks the file.
"""

import json
import sys
from pathlib import Path

import numpy as np
import pytest

from phantomlab.calibration.sphere import (
    Sphere,
    SphereSetup,
    detector_gains,
    diffuse_parts_from_readings,
    open_beam_signal,
    port_fraction,
    sample_signals,
    standard_signal,
)
from phantomlab.errors import InputError

HERE = Path(__file__).parent
sys.path.insert(0, str(HERE))
sys.path.insert(0, str(HERE / "fixtures"))

import make_sphere_mc_fixture as fixture  # noqa: E402
from sphere_monte_carlo import simulate_signals  # noqa: E402

FIXTURE = json.loads((HERE / "fixtures" / "sphere_mc_signals.json").read_text())


def test_port_fraction_is_the_cap_share():
    # Goebel 1967 eq. 2: a port as wide as the sphere is a hemisphere, half the area.
    assert port_fraction(port_diameter_mm=50.0, sphere_diameter_mm=50.0) == pytest.approx(0.5, abs=1e-15)
    # small ports: (d/D)²/4, the flat-disc value (Goebel 1967, first approximate form)
    assert port_fraction(port_diameter_mm=1.0, sphere_diameter_mm=100.0) == pytest.approx(0.25e-4, rel=1e-4)
    # exact cap of a 20 mm port in a 50 mm sphere: (1 − √(1 − 0.16))/2
    assert port_fraction(port_diameter_mm=20.0, sphere_diameter_mm=50.0) == pytest.approx(
        (1 - np.sqrt(0.84)) / 2, rel=1e-14)


def test_single_unbaffled_sphere_gain_is_goebels_multiplier():
    # Uniform exchange (Goebel 1967): unit power emitted by the wall reaches the detector
    # with a_d / (1 − a_w r_w − a_s r_s).
    sphere = Sphere(diameter_mm=80, sample_port_mm=20, detector_port_mm=6, open_port_mm=12,
                    wall_reflectance=0.96, baffle=False)
    setup = SphereSetup(reflection=sphere, transmission=sphere)
    r_s = 0.4
    gains = detector_gains(setup, r_diffuse=r_s, t_diffuse=0.0)
    expected = sphere.detector_fraction / (1 - sphere.wall_fraction * 0.96 - sphere.sample_fraction * r_s)
    assert gains[0, 0, 0] == pytest.approx(expected, rel=1e-12)
    assert gains[0, 1, 0] == pytest.approx(expected, rel=1e-12)  # no baffle: the sample's light alike


def test_sample_equal_to_the_standard_reads_as_the_standard():
    sphere = Sphere(diameter_mm=50, sample_port_mm=20, detector_port_mm=10, open_port_mm=15,
                    wall_reflectance=0.97, baffle=True)
    setup = SphereSetup(reflection=sphere, transmission=sphere, specular_included=True)
    r_std = 0.8
    signal_r, _ = sample_signals(setup, diffuse_reflectance=r_std, specular_reflectance=0.0,
                                 diffuse_transmittance=0.0, unscattered_transmittance=0.0,
                                 r_diffuse=r_std, t_diffuse=0.0)
    assert signal_r[0] / standard_signal(setup, standard_reflectance=r_std)[0] == pytest.approx(1.0, abs=1e-14)
    rd, _ = diffuse_parts_from_readings(setup, normalised_reflection=1.0, normalised_transmission=0.5,
                                        standard_reflectance=r_std, specular_reflectance=0.0,
                                        unscattered_transmittance=0.0, r_diffuse=r_std, t_diffuse=0.0)
    assert rd[0] == pytest.approx(r_std, abs=1e-14)


@pytest.mark.parametrize("arrangement", ["single", "double"])
def test_vanishing_ports_leave_the_plain_ratio(arrangement):
    # Ports of 1 µm in a 100 mm sphere: with a baffle the sample's light first meets the wall,
    # as the specular light does, so M_R = R_total / r_std and M_T = T_total, up to ~a_port.
    tiny = dict(diameter_mm=100, sample_port_mm=1e-3, detector_port_mm=1e-3, open_port_mm=1e-3,
                wall_reflectance=0.9, baffle=True)
    setup = SphereSetup(reflection=Sphere(**tiny), transmission=Sphere(**tiny), arrangement=arrangement)
    parts = dict(diffuse_reflectance=0.3, specular_reflectance=0.04, diffuse_transmittance=0.4,
                 unscattered_transmittance=0.05, r_diffuse=0.35, t_diffuse=0.3)
    s_r, s_t = sample_signals(setup, **parts)
    m_r = s_r[0] / standard_signal(setup, standard_reflectance=0.98)[0]
    m_t = s_t[0] / open_beam_signal(setup)[0]
    assert m_r == pytest.approx((0.3 + 0.04) / 0.98, rel=1e-6)
    assert m_t == pytest.approx(0.4 + 0.05, rel=1e-6)


def test_lossless_wall_sends_all_light_to_a_port():
    # r_wall → 1, no open port: the open beam in the transmission sphere ends on the detector
    # or leaves through the empty sample port, in proportion to their areas.
    sphere = Sphere(diameter_mm=60, sample_port_mm=20, detector_port_mm=10, open_port_mm=0.0,
                    wall_reflectance=1 - 1e-12, baffle=False)
    setup = SphereSetup(reflection=sphere, transmission=sphere)
    expected = sphere.detector_fraction / (sphere.detector_fraction + sphere.sample_fraction)
    assert open_beam_signal(setup)[0] == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("index", range(len(FIXTURE["results"])))
def test_signals_agree_with_the_sphere_monte_carlo(index):
    result = FIXTURE["results"][index]
    setup = fixture.setup_of(result["case"])
    model = np.ravel(sample_signals(setup, **fixture.SAMPLE))
    mean, se = np.array(result["sample"])
    assert np.all(np.abs(model - mean) < 3.5 * se), (model, mean, se)
    standard = standard_signal(setup, standard_reflectance=fixture.STANDARD_REFLECTANCE)[0]
    assert abs(standard - result["standard"][0]) < 3.5 * result["standard"][1]
    assert abs(open_beam_signal(setup)[0] - result["open"][0]) < 3.5 * result["open"][1]


@pytest.mark.parametrize("index", range(len(FIXTURE["results"])))
def test_readings_of_the_monte_carlo_spheres_give_back_the_sample(index):
    # The substitution error: the naive ratio r_std · M_R is 8-20 % off in these spheres;
    # the sphere equations with the sample's own r_dif, t_dif recover R_d and T_d within
    # 4 standard errors of the Monte Carlo readings.
    result = FIXTURE["results"][index]
    setup = fixture.setup_of(result["case"])
    (s_r, s_t), (se_r, se_t) = np.array(result["sample"])
    std, se_std = result["standard"]
    opn, se_open = result["open"]
    m_r, m_t = s_r / std, s_t / opn
    sample = fixture.SAMPLE
    rd, td = diffuse_parts_from_readings(
        setup, normalised_reflection=m_r, normalised_transmission=m_t,
        standard_reflectance=fixture.STANDARD_REFLECTANCE, specular_reflectance=sample["specular_reflectance"],
        unscattered_transmittance=sample["unscattered_transmittance"], r_diffuse=sample["r_diffuse"],
        t_diffuse=sample["t_diffuse"])
    rel_r = np.hypot(se_r / s_r, se_std / std) + (se_t / s_t if setup.arrangement == "double" else 0)
    rel_t = np.hypot(se_t / s_t, se_open / opn) + (se_r / s_r if setup.arrangement == "double" else 0)
    assert rd[0] == pytest.approx(sample["diffuse_reflectance"], rel=4 * rel_r)
    assert td[0] == pytest.approx(sample["diffuse_transmittance"], rel=4 * rel_t)
    naive_r = m_r * fixture.STANDARD_REFLECTANCE
    assert abs(naive_r - (sample["diffuse_reflectance"] + sample["specular_reflectance"])) > 0.05


def test_live_monte_carlo_run_matches_the_fixture():
    # The stored numbers still come from the sphere Monte Carlo: a fresh, smaller run of the
    # standard in the first case agrees within 4 combined standard errors.
    result = FIXTURE["results"][0]
    setup = fixture.setup_of(result["case"])
    mean, se = simulate_signals(setup, sources=dict(sample_1=fixture.STANDARD_REFLECTANCE),
                                r_diffuse=fixture.STANDARD_REFLECTANCE, t_diffuse=0.0, coupled=False,
                                photons=40_000, seed=7, batches=10)
    stored, stored_se = result["standard"]
    assert abs(mean[0] - stored) < 4 * np.hypot(se[0], stored_se)


@pytest.mark.parametrize("kwargs, words", [
    (dict(diameter_mm=50, sample_port_mm=49, detector_port_mm=49, open_port_mm=49, wall_reflectance=0.9),
     "port fractions sum to"),
    (dict(diameter_mm=50, sample_port_mm=60, detector_port_mm=5, open_port_mm=5, wall_reflectance=0.9),
     "sample_port_mm = 60"),
    (dict(diameter_mm=50, sample_port_mm=20, detector_port_mm=5, open_port_mm=5, wall_reflectance=1.0),
     "wall_reflectance"),
    (dict(diameter_mm=-5, sample_port_mm=20, detector_port_mm=5, open_port_mm=5, wall_reflectance=0.9),
     "diameter_mm"),
])
def test_bad_geometry_refused_in_one_line(kwargs, words):
    with pytest.raises(InputError, match=words):
        Sphere(**kwargs)
