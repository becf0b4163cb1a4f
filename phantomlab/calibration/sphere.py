"""Integrating spheres: detector readings of a slab turned into its reflectance and transmittance (layer 3).

An instrument model, kept beside :mod:`phantomlab.calibration.reference` (which turns probe
readings into absolute reflectance): it says how much of the light a sample sends into a
sphere reaches the sphere's detector, so that raw readings become the sample's R and T.

The sphere (Goebel 1967): a perfect sphere of diameter D whose wall and ports reflect
diffusely.  A port of diameter d is a spherical cap and takes the fraction

    a = (1 − √(1 − (d/D)²)) / 2                                    (Goebel 1967, eq. 2)

of the sphere's area; light leaving any element of the sphere surface diffusely lands on
every other element with the same irradiance, so each "bounce" spreads over the wall, the
ports and the sample in proportion to their fractions a_wall, a_sample, a_detector, a_open
(a_wall = 1 − the ports).  The wall returns r_wall of what lands on it, the sample port
returns the sample's reflectance for diffuse light r_dif (and, between two spheres, passes
t_dif into the other sphere), the detector counts what lands on it (its own reflection is
taken as 0), an open port (the beam's entrance; an exit port for the unscattered beam)
loses it.  A baffle between sample and detector keeps light leaving the sample from
landing on the detector directly; it lands on the (wall-coated) baffle instead.

This makes a Markov chain over four kinds of diffuse light — emitted by wall 1, by the
sample into sphere 1, by wall 2, by the sample into sphere 2 (sphere 1 is the reflection
sphere, sphere 2 the transmission sphere) — and the expected detector signal g_s for unit
power emitted as kind s solves (1 − Q) g = d, Q the transition fractions, d the fractions
landing on each detector (the exchange of light between two spheres through the sample:
Pickering et al. 1992, 1993).  A single sphere leaves t_dif out (the light transmitted out
of the sphere is lost); two spheres keep it.

What the collimated beam puts into the chain (per unit beam power): the sample's diffuse
reflectance R_d as light emitted by the sample into sphere 1; the specular reflection R_sp
onto wall 1 (``specular_included``; else it leaves through the entrance port); the diffuse
transmittance T_d into sphere 2; the unscattered beam T_u onto wall 2
(``unscattered_included``; else it leaves through the open port of sphere 2).  The
reflectance standard (diffuse reflectance r_std at the sample port) and the open beam (the
beam entering the empty transmission sphere, landing on its wall) give the reference
signals.  So the normalised readings

    M_R = (r_sample − r_dark)/(r_standard − r_dark),   M_T = (t_sample − t_dark)/(t_open − t_dark)

are linear in (R_d, T_d) once r_dif, t_dif, R_sp and T_u are known: a 2 × 2 system per
wavelength (diagonal for a single sphere).  Because the sphere's gain depends on what sits
in its port, a sample darker than the standard gives a reading lower than its reflectance
(the substitution error); solving the chain with the sample's own r_dif corrects it.  The
sample's r_dif, t_dif and T_u come from the forward model at the fitted optics, so the fit
iterates (:mod:`phantomlab.calibration.fit_sphere`).

Departures and assumptions, written down:

* ports are caps of the sphere (Goebel's geometry), so light from the sample port can land
  on the sample port again (a fraction a_sample of it); a flat sample does not see itself,
  a difference of order a_sample · r_dif (0.1–1 %) in the gain;
* every surface is Lambertian, the detector port black, the baffle coated like the wall;
  the sample is symmetric (the same r_dif seen from either sphere);
* the beam reflected by the slab's far face is counted with the diffuse reflectance;
* ``t_open`` is read with the transmission sphere alone (its sample port open to the room).

References
----------
Goebel DG 1967, Appl Opt 6:125–128, doi:10.1364/AO.6.000125 (generalised integrating-sphere
theory: cap fractions, uniform exchange).
Pickering JW, Moes CJM, Sterenborg HJCM, Prahl SA, van Gemert MJC 1992, J Opt Soc Am A
9:621–631, doi:10.1364/JOSAA.9.000621 (two integrating spheres with an intervening
scattering sample: single-sphere powers, the exchange between spheres, baffles).
Pickering JW, Prahl SA, van Wieringen N, Beek JF, Sterenborg HJCM, van Gemert MJC 1993,
Appl Opt 32:399–410, doi:10.1364/AO.32.000399 (double-integrating-sphere system).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError

__all__ = [
    "ARRANGEMENTS",
    "Sphere",
    "SphereSetup",
    "port_fraction",
    "detector_gains",
    "sample_signals",
    "standard_signal",
    "open_beam_signal",
    "diffuse_parts_from_readings",
]

#: One sphere moved between reflection and transmission, or two spheres with the sample between.
ARRANGEMENTS = ("single", "double")

# Kinds of diffuse light in the chain (index of the state).
_WALL_1, _SAMPLE_1, _WALL_2, _SAMPLE_2 = range(4)


def port_fraction(*, port_diameter_mm, sphere_diameter_mm):
    """Fraction of a sphere's area taken by a port (a spherical cap).

    Parameters
    ----------
    port_diameter_mm : float or array [mm]
        Port diameter (0 for no port), smaller than the sphere's.
    sphere_diameter_mm : float [mm]

    Returns
    -------
    float or ndarray [dimensionless]
        (1 − √(1 − (d/D)²)) / 2 (Goebel 1967, eq. 2); ≈ (d/D)²/4 for small ports.
    """
    ratio = np.asarray(port_diameter_mm, dtype=float) / float(sphere_diameter_mm)
    # 2 sin²(θ/2) form of (1 − cos θ)/2 with cos θ = √(1 − ratio²): no cancellation for small ports
    return 0.5 * ratio**2 / (1.0 + np.sqrt(1.0 - ratio**2))


@dataclass(frozen=True)
class Sphere:
    """One integrating sphere.

    Attributes
    ----------
    diameter_mm : float [mm]
    sample_port_mm : float [mm]
        The port the sample covers.
    detector_port_mm : float [mm]
    open_port_mm : float [mm]
        Open port(s) where light leaves: the beam's entrance of the reflection sphere; an
        exit port of the transmission sphere (0 if none).
    wall_reflectance : float or ndarray (W,) [dimensionless]
        Diffuse reflectance of the wall coating.
    baffle : bool
        A baffle keeps light leaving the sample from reaching the detector directly.
    """

    diameter_mm: float
    sample_port_mm: float
    detector_port_mm: float
    open_port_mm: float
    wall_reflectance: float | np.ndarray
    baffle: bool = True

    def __post_init__(self):
        if not np.isfinite(self.diameter_mm) or self.diameter_mm <= 0:
            raise InputError(f"sphere diameter_mm = {self.diameter_mm!r}; accepted: > 0 mm")
        for name in ("sample_port_mm", "detector_port_mm", "open_port_mm"):
            value = getattr(self, name)
            if not np.isfinite(value) or value < 0 or value >= self.diameter_mm:
                raise InputError(f"sphere {name} = {value!r}; accepted: 0 to below the sphere diameter "
                                 f"({self.diameter_mm:g} mm)")
        if self.sample_port_mm <= 0 or self.detector_port_mm <= 0:
            raise InputError("sphere sample_port_mm and detector_port_mm must be > 0 mm")
        wall = np.asarray(self.wall_reflectance, dtype=float)
        if not np.all(np.isfinite(wall)) or np.any(wall < 0) or np.any(wall >= 1):
            raise InputError(f"sphere wall_reflectance {self.wall_reflectance!r}; accepted: 0 to below 1")
        total = self.sample_fraction + self.detector_fraction + self.open_fraction
        if total >= 1.0:
            raise InputError(f"sphere port fractions sum to {total:.3g}; accepted: below 1 "
                             f"(ports smaller than the sphere)")

    @property
    def sample_fraction(self) -> float:
        return float(port_fraction(port_diameter_mm=self.sample_port_mm, sphere_diameter_mm=self.diameter_mm))

    @property
    def detector_fraction(self) -> float:
        return float(port_fraction(port_diameter_mm=self.detector_port_mm, sphere_diameter_mm=self.diameter_mm))

    @property
    def open_fraction(self) -> float:
        return float(port_fraction(port_diameter_mm=self.open_port_mm, sphere_diameter_mm=self.diameter_mm))

    @property
    def wall_fraction(self) -> float:
        return 1.0 - self.sample_fraction - self.detector_fraction - self.open_fraction


@dataclass(frozen=True)
class SphereSetup:
    """The spheres of a measurement and what they collect.

    Attributes
    ----------
    reflection, transmission : Sphere
        Sphere 1 (sample at its port, beam through its open port) and sphere 2 (sample at
        its port, beam arriving through the sample).  A single sphere moved between the two
        measurements is given twice.
    arrangement : {'single', 'double'}
        'double': both spheres at once, light passing between them through the sample.
    specular_included : bool
        The specular reflection stays in sphere 1 (lands on its wall).
    unscattered_included : bool
        The unscattered beam stays in sphere 2 (lands on its wall).
    """

    reflection: Sphere
    transmission: Sphere
    arrangement: str = "single"
    specular_included: bool = True
    unscattered_included: bool = True

    def __post_init__(self):
        if self.arrangement not in ARRANGEMENTS:
            raise InputError(f"sphere arrangement {self.arrangement!r}; accepted: {', '.join(ARRANGEMENTS)}")


def _wall(sphere: Sphere, shape) -> np.ndarray:
    return np.broadcast_to(np.asarray(sphere.wall_reflectance, dtype=float), shape)


def detector_gains(setup: SphereSetup, *, r_diffuse, t_diffuse, coupled: bool | None = None) -> np.ndarray:
    """Expected signal of each detector per unit power emitted as each kind of diffuse light.

    Parameters
    ----------
    setup : SphereSetup
    r_diffuse, t_diffuse : float or array (W,) [dimensionless]
        Reflectance and transmittance of what sits in the sample ports, for diffuse light.
    coupled : bool, optional
        Light passes between the spheres through the sample (default: the 'double'
        arrangement).

    Returns
    -------
    ndarray (W, 4, 2)
        g[w, s, k]: signal of detector k (0 reflection, 1 transmission sphere), as the
        fraction of power landing on its port, for unit power emitted by wall 1, the sample
        into sphere 1, wall 2, the sample into sphere 2 (s = 0..3); (1 − Q) g = d.
    """
    r = np.atleast_1d(np.asarray(r_diffuse, dtype=float))
    t = np.atleast_1d(np.asarray(t_diffuse, dtype=float))
    r, t = np.broadcast_arrays(r, t)
    shape = r.shape
    coupled = setup.arrangement == "double" if coupled is None else coupled
    through = t if coupled else np.zeros(shape)
    q = np.zeros(shape + (4, 4))
    d = np.zeros((4, 2))
    for k, (sphere, wall_state, sample_state, other_sample) in enumerate(
            ((setup.reflection, _WALL_1, _SAMPLE_1, _SAMPLE_2), (setup.transmission, _WALL_2, _SAMPLE_2, _SAMPLE_1))):
        wall = _wall(sphere, shape)
        a_w, a_s, a_d = sphere.wall_fraction, sphere.sample_fraction, sphere.detector_fraction
        for source in (wall_state, sample_state):
            shielded = sphere.baffle and source == sample_state
            q[..., source, wall_state] = (a_w + (a_d if shielded else 0.0)) * wall
            q[..., source, sample_state] = a_s * r
            q[..., source, other_sample] = a_s * through
            d[source, k] = 0.0 if shielded else a_d
    system = np.eye(4) - q
    return np.linalg.solve(system, np.broadcast_to(d, shape + (4, 2)))


def _source_vector(setup: SphereSetup, *, diffuse_reflectance, specular_reflectance, diffuse_transmittance,
                   unscattered_transmittance, shape) -> np.ndarray:
    """Diffuse power put into the chain by the beam on the sample, per kind of light (W, 4)."""
    p = np.zeros(shape + (4,))
    p[..., _SAMPLE_1] = diffuse_reflectance
    if setup.specular_included:
        p[..., _WALL_1] = _wall(setup.reflection, shape) * specular_reflectance
    p[..., _SAMPLE_2] = diffuse_transmittance
    if setup.unscattered_included:
        p[..., _WALL_2] = _wall(setup.transmission, shape) * unscattered_transmittance
    return p


def sample_signals(setup: SphereSetup, *, diffuse_reflectance, specular_reflectance, diffuse_transmittance,
                   unscattered_transmittance, r_diffuse, t_diffuse):
    """Detector signals with the sample in place, per unit beam power.

    Parameters
    ----------
    setup : SphereSetup
    diffuse_reflectance, specular_reflectance : float or array (W,) [dimensionless]
        The sample's reflectance for the collimated beam: the part leaving diffusely (R_d)
        and the specular part (R_sp).
    diffuse_transmittance, unscattered_transmittance : float or array (W,) [dimensionless]
        T_d and T_u for the collimated beam.
    r_diffuse, t_diffuse : float or array (W,) [dimensionless]
        The sample's reflectance and transmittance for diffuse light.

    Returns
    -------
    (signal_reflection, signal_transmission) : ndarrays (W,)
        Fractions of the beam power landing on each detector port (single arrangement: the
        reflection and transmission measurements made one after the other).
    """
    arrays = np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, dtype=float)) for v in (
        diffuse_reflectance, specular_reflectance, diffuse_transmittance, unscattered_transmittance,
        r_diffuse, t_diffuse)))
    rd, rsp, td, tu, r, t = arrays
    gains = detector_gains(setup, r_diffuse=r, t_diffuse=t)
    p = _source_vector(setup, diffuse_reflectance=rd, specular_reflectance=rsp, diffuse_transmittance=td,
                       unscattered_transmittance=tu, shape=rd.shape)
    signals = np.einsum("ws,wsk->wk", p, gains)
    return signals[:, 0], signals[:, 1]


def standard_signal(setup: SphereSetup, *, standard_reflectance) -> np.ndarray:
    """Reflection-sphere detector signal with the reflectance standard in the sample port (W,)."""
    r = np.atleast_1d(np.asarray(standard_reflectance, dtype=float))
    gains = detector_gains(setup, r_diffuse=r, t_diffuse=np.zeros_like(r), coupled=False)
    return r * gains[:, _SAMPLE_1, 0]


def open_beam_signal(setup: SphereSetup, *, shape=(1,)) -> np.ndarray:
    """Transmission-sphere detector signal for the open beam (sample port empty, beam on its wall)."""
    zeros = np.zeros(shape)
    gains = detector_gains(setup, r_diffuse=zeros, t_diffuse=zeros, coupled=False)
    return _wall(setup.transmission, shape) * gains[:, _WALL_2, 1]


def diffuse_parts_from_readings(setup: SphereSetup, *, normalised_reflection, normalised_transmission,
                                standard_reflectance, specular_reflectance, unscattered_transmittance,
                                r_diffuse, t_diffuse):
    """The sample's diffuse reflectance and transmittance from normalised sphere readings.

    Parameters
    ----------
    setup : SphereSetup
    normalised_reflection : array (W,) [dimensionless]
        M_R = (r_sample − r_dark)/(r_standard − r_dark).
    normalised_transmission : array (W,) [dimensionless]
        M_T = (t_sample − t_dark)/(t_open − t_dark).
    standard_reflectance : array (W,) [dimensionless]
        Calibrated reflectance of the standard.
    specular_reflectance, unscattered_transmittance : array (W,) [dimensionless]
        R_sp (from the faces' indices) and T_u (measured collimated transmission, or the
        forward model at the current optics).
    r_diffuse, t_diffuse : array (W,) [dimensionless]
        The sample's reflectance and transmittance for diffuse light (forward model).

    Returns
    -------
    (diffuse_reflectance, diffuse_transmittance) : ndarrays (W,)
        R_d and T_d of the sample for the collimated beam: the solution of the 2 × 2 linear
        system signal_k(R_d, T_d) = M_k × reference signal_k.
    """
    m_r, m_t, r_std, rsp, tu, r, t = np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, dtype=float)) for v in (
        normalised_reflection, normalised_transmission, standard_reflectance, specular_reflectance,
        unscattered_transmittance, r_diffuse, t_diffuse)))
    shape = m_r.shape
    gains = detector_gains(setup, r_diffuse=r, t_diffuse=t)
    target = np.stack([m_r * standard_signal(setup, standard_reflectance=r_std),
                       m_t * open_beam_signal(setup, shape=shape)], axis=-1)
    known = _source_vector(setup, diffuse_reflectance=0.0, specular_reflectance=rsp, diffuse_transmittance=0.0,
                           unscattered_transmittance=tu, shape=shape)
    target = target - np.einsum("ws,wsk->wk", known, gains)
    matrix = np.stack([gains[:, _SAMPLE_1, :], gains[:, _SAMPLE_2, :]], axis=-1)  # (W, k, [R_d, T_d])
    solution = np.linalg.solve(matrix, target[..., None])[..., 0]
    return solution[:, 0], solution[:, 1]
