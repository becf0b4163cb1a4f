"""Raw integrating-sphere readings to μa, μs′ (and g): convert, fit, correct, repeat (layer 3).

The readings of a ``sphere`` measurement (:mod:`phantomlab.calibration.sphere_readings`)
become the slab's total reflectance and transmittance through the sphere equations
(:mod:`phantomlab.calibration.sphere`), which need what the sample does with the diffuse
light inside the spheres (its reflectance and transmittance for diffuse light) and its
unscattered transmittance — properties of the optics being fitted.  So the fit iterates
(the approach of Pickering et al. 1993): convert with the current estimate, fit the slab
(:mod:`phantomlab.calibration.slab_inversion`), compute those properties by adding-doubling
at the fitted optics, convert again; the derived R and T settle within a few rounds (the
sphere's dependence on the sample is weak: it enters through a_sample · r_dif).  The
lost-light correction, when asked for, wraps this loop
(:mod:`phantomlab.calibration.lost_light`).

The SDs of the derived R and T come from the readings' SDs (sidecar noise model or
replicate files), the standard's calibration SD and the wall reflectance SD, by first-order
propagation through the conversion; the correlation the double-sphere conversion puts
between R and T is reported, not used by the fit.

References
----------
Pickering JW et al. 1993, Appl Opt 32:399 (double-integrating-sphere system; conversion of
sphere signals with the inverse adding-doubling loop).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from phantomlab.calibration.fit_slab import _finish, result_from_solution, slab_messages, slab_model, slab_options
from phantomlab.calibration.fitting import FitResult
from phantomlab.calibration.measurements import Measurement
from phantomlab.calibration.slab_inversion import SlabModel, SlabSolution, invert_slab
from phantomlab.calibration.sphere import diffuse_parts_from_readings
from phantomlab.calibration.sphere_readings import normalised_readings
from phantomlab.errors import InputError
from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

__all__ = ["fit_sphere", "SphereConversion", "convert_readings", "MAX_SPHERE_ROUNDS"]

#: Most rounds of convert → fit → convert (they settle in 2–4).
MAX_SPHERE_ROUNDS = 10
#: The conversion has settled when R and T move less than this fraction of their SD in a round.
_SETTLED = 1e-3


@dataclass(frozen=True)
class SphereConversion:
    """Readings turned into the slab's R, T, Tc (arrays (W,)) with SDs.

    ``naive_reflectance`` is r_std · M_R, the plain ratio to the standard, kept to show how
    large the sphere correction was.
    """

    total_reflectance: np.ndarray
    total_reflectance_sd: np.ndarray
    total_transmittance: np.ndarray
    total_transmittance_sd: np.ndarray
    collimated_transmittance: np.ndarray | None
    collimated_transmittance_sd: np.ndarray | None
    correlation_rt: np.ndarray
    naive_reflectance: np.ndarray
    naive_transmittance: np.ndarray

    def data(self):
        tc = np.full(self.total_reflectance.shape, np.nan) if self.collimated_transmittance is None \
            else self.collimated_transmittance
        tc_sd = np.full(self.total_reflectance.shape, np.nan) if self.collimated_transmittance_sd is None \
            else self.collimated_transmittance_sd
        return (np.stack([self.total_reflectance, self.total_transmittance, tc], axis=1),
                np.stack([self.total_reflectance_sd, self.total_transmittance_sd, tc_sd], axis=1))


def _setup_with_walls(setup, wall_1, wall_2):
    return replace(setup, reflection=replace(setup.reflection, wall_reflectance=wall_1),
                   transmission=replace(setup.transmission, wall_reflectance=wall_2))


def convert_readings(measurement: Measurement, *, specular_reflectance, unscattered_transmittance, r_diffuse,
                     t_diffuse) -> SphereConversion:
    """R, T (and Tc) of the sample from its sphere readings, with SDs.

    Parameters
    ----------
    measurement : Measurement
        ``kind='sphere'`` with reading SDs.
    specular_reflectance, unscattered_transmittance, r_diffuse, t_diffuse : array (W,)
        The sample properties the spheres' gains depend on (forward model at the current
        optics; the measured Tc stands for the unscattered transmittance where given).
    """
    meta = measurement.metadata
    spec = meta.sphere
    setup = spec.setup(specular_included=meta.specular_included, unscattered_included=meta.unscattered_included)
    ratios, ratio_sd = normalised_readings(measurement.values, measurement.sd)
    r_std, r_std_sd = spec.standard_at(measurement.wavelength_nm)
    wall_1 = np.full(r_std.shape, float(spec.reflection.wall_reflectance))
    wall_2 = np.full(r_std.shape, float(spec.transmission.wall_reflectance))
    inputs = [ratios[:, 0], ratios[:, 1], r_std, wall_1, wall_2]
    sds = [ratio_sd[:, 0], ratio_sd[:, 1], r_std_sd, np.full(r_std.shape, spec.wall_reflectance_sd),
           np.full(r_std.shape, spec.transmission_wall_reflectance_sd)]

    def totals(m_r, m_t, standard, w1, w2):
        s = _setup_with_walls(setup, w1, w2)
        rd, td = diffuse_parts_from_readings(
            s, normalised_reflection=m_r, normalised_transmission=m_t, standard_reflectance=standard,
            specular_reflectance=specular_reflectance, unscattered_transmittance=unscattered_transmittance,
            r_diffuse=r_diffuse, t_diffuse=t_diffuse)
        reflectance = rd + (specular_reflectance if setup.specular_included else 0.0)
        transmittance = td + (unscattered_transmittance if setup.unscattered_included else 0.0)
        return np.stack([reflectance, transmittance], axis=1)

    base = totals(*inputs)
    jacobian = np.empty(base.shape + (len(inputs),))
    for k, value in enumerate(inputs):  # central differences, every input is O(1)
        step = 1e-6 * np.maximum(np.abs(value), 1e-3)
        up = list(inputs)
        down = list(inputs)
        up[k] = value + step
        down[k] = value - step
        jacobian[:, :, k] = (totals(*up) - totals(*down)) / (2 * step)[:, None]
    variance = np.stack(sds, axis=1) ** 2  # (W, inputs)
    covariance = np.einsum("wik,wk,wjk->wij", jacobian, variance, jacobian)
    with np.errstate(invalid="ignore", divide="ignore"):
        correlation = covariance[:, 0, 1] / np.sqrt(covariance[:, 0, 0] * covariance[:, 1, 1])
    tc = tc_sd = None
    if ratios.shape[1] == 3:
        tc, tc_sd = ratios[:, 2], ratio_sd[:, 2]
    return SphereConversion(
        total_reflectance=base[:, 0], total_reflectance_sd=np.sqrt(covariance[:, 0, 0]),
        total_transmittance=base[:, 1], total_transmittance_sd=np.sqrt(covariance[:, 1, 1]),
        collimated_transmittance=tc, collimated_transmittance_sd=tc_sd, correlation_rt=np.nan_to_num(correlation),
        naive_reflectance=ratios[:, 0] * r_std, naive_transmittance=ratios[:, 1])


def _diffuse_light_properties(model: SlabModel, solution: SlabSolution):
    """r_dif, t_dif (diffuse light on the sample) and T_u, R_sp at the fitted optics."""
    mua, musp, g = solution.mua_per_mm, solution.musp_per_mm, solution.g
    diffuse = slab_reflectance_transmittance(
        mua_per_mm=mua, mus_per_mm=musp / (1.0 - g), g=g, thickness_mm=model.thickness_mm, n=model.n,
        n_outside=model.n_outside, quadrature_points=solution.streams, incidence="diffuse", **model.slides)
    return np.asarray(diffuse.total_reflectance), np.asarray(diffuse.total_transmittance)


def specular_of(model: SlabModel, shape) -> np.ndarray:
    """The specular reflectance of the slab's entry face (independent of the optics)."""
    clear = slab_reflectance_transmittance(mua_per_mm=np.zeros(shape), mus_per_mm=np.zeros(shape), g=0.0,
                                           thickness_mm=model.thickness_mm, n=model.n, n_outside=model.n_outside,
                                           quadrature_points=4, **model.slides)
    return np.asarray(clear.specular_reflectance)


def sphere_rounds(measurement: Measurement, model: SlabModel, *, g, start=None, state=None):
    """Convert → fit → convert until the derived R and T settle.

    Returns
    -------
    (solution, conversion, rounds, state)
        ``state`` (r_dif, t_dif, T_u) to start a later call from (the lost-light loop).
    """
    W = measurement.wavelength_nm.size
    specular = specular_of(model, (W,))
    has_tc = measurement.values.shape[1] == 9
    if state is None:
        # first guess: the plain ratios (the sample as seen without sphere corrections)
        ratios, _ = normalised_readings(measurement.values, None)
        r_std, _ = measurement.metadata.sphere.standard_at(measurement.wavelength_nm)
        r_dif = np.clip(ratios[:, 0] * r_std, 0.0, 1.0)
        t_dif = np.clip(ratios[:, 1], 0.0, 1.0 - r_dif)
        unscattered = ratios[:, 2] if has_tc else np.zeros(W)
    else:
        r_dif, t_dif, unscattered = state
    previous = None
    solution = None
    rounds = 0
    for rounds in range(1, MAX_SPHERE_ROUNDS + 1):
        conversion = convert_readings(measurement, specular_reflectance=specular,
                                      unscattered_transmittance=unscattered, r_diffuse=r_dif, t_diffuse=t_dif)
        data, sd = conversion.data()
        current = data[:, :2]
        if previous is not None and np.all(np.abs(current - previous) <= _SETTLED * sd[:, :2]):
            break
        if np.any(data[:, :2] <= 0) or np.any(data[:, 0] + data[:, 1] > 1.0 + 3 * np.hypot(sd[:, 0], sd[:, 1])):
            bad = np.flatnonzero((data[:, :2] <= 0).any(axis=1) | (data[:, 0] + data[:, 1] > 1.0))[0]
            raise InputError(f"{measurement.name}: at {measurement.wavelength_nm[bad]:g} nm the sphere equations give "
                             f"R = {data[bad, 0]:.4g}, T = {data[bad, 1]:.4g}, not a possible sample; check the "
                             f"sphere geometry, the wall reflectance and the standard")
        solution = invert_slab(model, data=data, sd=sd, g=g, start=start)
        start = np.column_stack([np.log(solution.mua_per_mm), np.log(solution.musp_per_mm), solution.g])
        r_dif, t_dif = _diffuse_light_properties(model, solution)
        if not has_tc:
            unscattered = solution.model[:, 2]
        previous = current
    return solution, conversion, rounds, (r_dif, t_dif, unscattered)


def fit_sphere(measurement: Measurement, *, n=None, n_outside=None, g=None, thickness_mm=None) -> FitResult:
    """Fit μa and μs′ (and g, with collimated readings) to raw sphere readings.

    Parameters
    ----------
    measurement : Measurement
        ``kind='sphere'``; its sidecar's ``[sphere]`` table gives the geometry and standard.
    n, n_outside, g, thickness_mm : float, optional
        Override the sidecar (as for the slab kind).

    Returns
    -------
    FitResult
        As the slab fit's, with ``total_reflectance``, ``total_transmittance`` (and
        ``collimated_transmittance``) derived from the readings and their SDs,
        ``sphere_rounds``, ``sphere_correction_reflectance`` (derived R over the plain
        ratio r_std · M_R) and ``correlation_reflectance_transmittance``.
    """
    if measurement.kind != "sphere":
        raise InputError(f"fit_sphere needs a sphere measurement, got {measurement.kind}")
    if measurement.sd is None:
        raise InputError(f"{measurement.name}: the sphere readings need their noise: give reading_sd_fraction "
                         f"(and reading_sd_floor) in [sphere], or several replicate files")
    n, n_outside, g, thickness = slab_options(measurement, n=n, n_outside=n_outside, g=g, thickness_mm=thickness_mm)
    has_tc = measurement.values.shape[1] == 9
    if g is None and not has_tc:
        raise InputError("the sphere fit needs the anisotropy g (R and T cannot tell it): give --g G or g = ... in "
                         "the sidecar, or measure the collimated beam (columns tc_sample,tc_open,tc_dark)")
    meta = measurement.metadata
    if meta.lost_light == "monte-carlo":
        from phantomlab.calibration.lost_light import fit_with_lost_light

        solution, model, lost, conversion, rounds = fit_with_lost_light(
            measurement, data=None, sd=None, n=n, n_outside=n_outside, g=g, thickness_mm=thickness)
    else:
        model = slab_model(measurement, n=n, n_outside=n_outside, thickness_mm=thickness)
        solution, conversion, rounds, _ = sphere_rounds(measurement, model, g=g)
        lost = None
    data, sd = conversion.data()
    result = result_from_solution(measurement, solution, data=data, sd=sd, g_given=g, thickness_mm=thickness,
                                  kind="sphere", lost_light=lost)
    with np.errstate(invalid="ignore", divide="ignore"):
        correction = conversion.total_reflectance / conversion.naive_reflectance
    extras = dict(result.extras)
    extras.update(sphere_rounds=rounds, sphere_correction_reflectance=correction,
                  sphere_correction_transmittance=conversion.total_transmittance / conversion.naive_transmittance,
                  correlation_reflectance_transmittance=conversion.correlation_rt,
                  sphere_arrangement=meta.sphere.arrangement, standard_source=meta.sphere.standard_source)
    result = replace(result, extras=extras)
    messages = slab_messages(measurement, result, solution, thickness, lost)
    if rounds >= MAX_SPHERE_ROUNDS:
        messages.append(f"the sphere conversion had not settled after {MAX_SPHERE_ROUNDS} rounds")
    return _finish(result, measurement, messages)
