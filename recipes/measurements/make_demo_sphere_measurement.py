"""Make the demo integrating-sphere readings `demo-silicone-sphere.csv` (demo data, invented).

The file stands for raw sphere readings of a 1.5 mm slab cut from a batch of
`recipes/demo-silicone.toml`, measured at the invented Kestrel Bay Optics Lab in a single
150 mm sphere (beam through a 20 mm entrance port, sample at a 25 mm port, 6 mm detector
behind a baffle, wall reflectance 0.975) and with a small aperture far from the sample for
the collimated beam.  The slab's "true" optics are the recipe's prediction for the planned
amounts with invented true potencies (tio2 1.08, carbon_black 0.92): μa, μs′ and g.  The
readings come from the project's own models — adding-doubling for the slab (collimated and
diffuse light) and the sphere equations of `phantomlab.calibration.sphere` — with a detector
gain of 20000 counts, a dark reading of 12 counts and 0.3 % noise from a seeded generator.
The standard's spectrum `demo-sphere-standard.csv` is invented too.  Nothing here is a real
measurement, and the lab and its instruments do not exist.

Regenerate (from the repository root):
    .venv/bin/python recipes/measurements/make_demo_sphere_measurement.py
"""

from pathlib import Path

import numpy as np

from phantomlab.calibration.sphere import Sphere, SphereSetup, open_beam_signal, sample_signals, standard_signal
from phantomlab.recipe import load_recipe, predict, solve
from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

HERE = Path(__file__).resolve().parent
TRUE_POTENCIES = {"tio2": (1.08, 0.0), "carbon_black": (0.92, 0.0)}
THICKNESS_MM = 1.5
INDEX = 1.41
SPHERE = dict(diameter_mm=150.0, sample_port_mm=25.0, detector_port_mm=6.0, open_port_mm=20.0,
              wall_reflectance=0.975, baffle=True)
STANDARD_NM = np.array([400.0, 500.0, 600.0, 700.0, 800.0, 900.0, 1000.0])
STANDARD_R = np.array([0.968, 0.975, 0.978, 0.980, 0.981, 0.980, 0.978])  # invented
GAIN, DARK, COLLIMATED_GAIN, COLLIMATED_DARK = 20000.0, 12.0, 50000.0, 3.0
RELATIVE_SD = 0.003


def main() -> None:
    recipe = load_recipe(HERE.parent / "demo-silicone.toml")
    plan = solve(recipe)
    made = predict(recipe, volume_fractions=plan.volume_fractions, potencies=TRUE_POTENCIES)
    wavelength = np.asarray(made.wavelength_nm, float)
    mua, musp, g = (np.asarray(v, float) for v in (made.mua_per_mm, made.musp_per_mm, made.g))
    slab = dict(mua_per_mm=mua, mus_per_mm=musp / (1 - g), g=g, thickness_mm=THICKNESS_MM, n=INDEX)
    beam = slab_reflectance_transmittance(**slab)
    diffuse = slab_reflectance_transmittance(**slab, incidence="diffuse")
    sphere = Sphere(**SPHERE)
    setup = SphereSetup(reflection=sphere, transmission=sphere)
    s_r, s_t = sample_signals(setup, diffuse_reflectance=beam.diffuse_reflectance,
                              specular_reflectance=beam.specular_reflectance,
                              diffuse_transmittance=beam.diffuse_transmittance,
                              unscattered_transmittance=beam.unscattered_transmittance,
                              r_diffuse=diffuse.total_reflectance, t_diffuse=diffuse.total_transmittance)
    r_std = np.interp(wavelength, STANDARD_NM, STANDARD_R)
    standard = standard_signal(setup, standard_reflectance=r_std)
    opened = open_beam_signal(setup, shape=wavelength.shape)
    generator = np.random.default_rng(20261204)

    def noisy(value):
        return value * (1.0 + RELATIVE_SD * generator.standard_normal(np.shape(value)))

    columns = [noisy(GAIN * s_r + DARK), noisy(GAIN * standard + DARK), np.full(wavelength.shape, DARK),
               noisy(GAIN * s_t + DARK), noisy(GAIN * opened + DARK), np.full(wavelength.shape, DARK),
               noisy(COLLIMATED_GAIN * beam.unscattered_transmittance + COLLIMATED_DARK),
               noisy(np.full(wavelength.shape, COLLIMATED_GAIN + COLLIMATED_DARK)),
               np.full(wavelength.shape, COLLIMATED_DARK)]
    lines = ["# source: demo data, invented (Kestrel Bay Optics Lab, synthetic sphere readings of a demo "
             "silicone slab; made by make_demo_sphere_measurement.py)",
             "wavelength_nm,r_sample,r_standard,r_dark,t_sample,t_open,t_dark,tc_sample,tc_open,tc_dark"]
    for k, w in enumerate(wavelength):
        lines.append(f"{w:g}," + ",".join(f"{c[k]:.2f}" for c in columns))
    (HERE / "demo-silicone-sphere.csv").write_text("\n".join(lines) + "\n")
    standard_lines = ["# demo data, invented: calibrated reflectance of the Kestrel Bay demo sphere standard",
                      "wavelength_nm,reflectance,sd"]
    standard_lines += [f"{w:g},{r:.3f},0.004" for w, r in zip(STANDARD_NM, STANDARD_R)]
    (HERE / "demo-sphere-standard.csv").write_text("\n".join(standard_lines) + "\n")
    (HERE / "demo-silicone-sphere.toml").write_text(f"""# demo data, invented: metadata of demo-silicone-sphere.csv
# (Kestrel Bay Optics Lab, an invented lab; the sphere and its standard do not exist)
instrument = "Kestrel Bay demo sphere (invented)"
n = {INDEX}
thickness_mm = {THICKNESS_MM}
specular_included = true
unscattered_included = true
beam_diameter_mm = 4.0
sample_diameter_mm = 40.0
# lost_light = "monte-carlo"   # correct for light lost at the port and edge (slower)

[sphere]
arrangement = "single"
diameter_mm = {SPHERE['diameter_mm']}
sample_port_mm = {SPHERE['sample_port_mm']}
entrance_port_mm = {SPHERE['open_port_mm']}
detector_port_mm = {SPHERE['detector_port_mm']}
wall_reflectance = {SPHERE['wall_reflectance']}
wall_reflectance_sd = 0.003
baffle = true
standard_csv = "demo-sphere-standard.csv"
reading_sd_fraction = {RELATIVE_SD}
reading_sd_floor = 1.0
""")
    print("true optics (demo):")
    for w, a, s, gg in zip(wavelength, mua, musp, g):
        print(f"  {w:g} nm: mua {a:.5f} /mm, musp {s:.4f} /mm, g {gg:.3f}")


if __name__ == "__main__":
    main()
