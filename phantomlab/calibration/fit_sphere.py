"""Raw integrating-sphere readings to μa, μs′ (and g) (layer 3).

The readings of a ``sphere`` measurement (:mod:`phantomlab.calibration.sphere_readings`),
normalised to the standard and the open beam (M_R, M_T and M_Tc), are fitted directly: the
forward model (:class:`SphereReadingsModel`) runs adding-doubling for the collimated beam
and for diffuse light at the optics being tried and puts the results through the sphere
equations (:mod:`phantomlab.calibration.sphere`), so the sphere's dependence on the sample
(the substitution error, and the exchange between two spheres) is exact at every step —
the forward half of the method of Pickering et al. (1993), without an outer loop of
convert → fit → convert (tried first: the double sphere made it oscillate and need ten
rounds).  The same per-wavelength solver as the slab kind
(:mod:`phantomlab.calibration.slab_inversion`) fits μa, μs′ and, with the collimated
readings, g; the lost-light correction, when asked for, wraps it
(:mod:`phantomlab.calibration.lost_light`).

The slab's R and T derived from the readings (the contract's ``total_reflectance`` and
``total_transmittance``) are computed once at the fitted optics (:func:`convert_readings`),
with SDs from the readings' SDs (sidecar noise model or replicate files), the standard's
calibration SD and the wall reflectance SD by first-order propagation; the correlation the
double-sphere conversion puts between R and T is reported.  In the fit itself the
standard's and the wall's SDs enter as an effective SD of M_R and M_T.

References
----------
Pickering JW et al. 1993, Appl Opt 32:399 (double-integrating-sphere system; sphere signals
predicted from the slab's optics inside the inverse adding-doubling search).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from phantomlab.calibration.fit_slab import _finish, result_from_solution, slab_messages, slab_model, slab_options
from phantomlab.calibration.slab_inversion import _pick
from phantomlab.calibration.fit_result import FitResult
from phantomlab.calibration.measurements import Measurement
from phantomlab.calibration.slab_inversion import SlabModel, invert_slab
from phantomlab.calibration.sphere import (
    SphereSetup,
    diffuse_parts_from_readings,
    open_beam_signal,
    sample_signals,
    standard_signal,
)
from phantomlab.calibration.sphere_readings import normalised_readings
from phantomlab.errors import InputError
from phantomlab.transport.adding_doubling import slab_reflectance_transmittance

__all__ = ["fit_sphere", "SphereConversion", "SphereReadingsModel", "convert_readings", "readings_model",
           "readings_data"]


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


def specular_of(model: SlabModel, shape) -> np.ndarray:
    """The specular reflectance of the slab's entry face (independent of the optics)."""
    clear = slab_reflectance_transmittance(mua_per_mm=np.zeros(shape), mus_per_mm=np.zeros(shape), g=0.0,
                                           thickness_mm=model.thickness_mm, n=model.n, n_outside=model.n_outside,
                                           quadrature_points=4, **model.slides)
    return np.asarray(clear.specular_reflectance)


@dataclass(frozen=True)
class SphereReadingsModel:
    """The normalised readings M_R, M_T and M_Tc as functions of the slab's optics.

    Every evaluation runs adding-doubling for the collimated beam (R_d, R_sp, T_d, T_u) and
    for diffuse light (r_dif, t_dif, what the sample does to the light inside the spheres),
    then the sphere equations; so the substitution error is corrected at the optics being
    tried, with no outer loop.  Same interface as
    :class:`~phantomlab.calibration.slab_inversion.SlabModel` (the solver takes either).
    """

    slab: SlabModel
    setup: SphereSetup
    reference_reflection: np.ndarray  # detector signal of the standard, per wavelength (W,)
    reference_transmission: np.ndarray  # detector signal of the open beam (W,)

    @property
    def thickness_mm(self) -> float:
        return self.slab.thickness_mm

    def start_key(self):
        slab = self.slab.start_key()
        if slab is None:
            return None
        return ("sphere", slab, self.setup, float(np.mean(self.reference_reflection)),
                float(np.mean(self.reference_transmission)))

    def parts(self, mua, musp, g, *, streams=None, rows=None):
        """Collimated and diffuse-light properties of the slab: dict of (N,) arrays."""
        mua, musp, g = np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, float)) for v in (mua, musp, g)))
        slab = self.slab
        common = dict(mua_per_mm=mua, mus_per_mm=musp / (1.0 - g), g=g, thickness_mm=slab.thickness_mm, n=slab.n,
                      n_outside=slab.n_outside, quadrature_points=streams, **slab.slides)
        beam = slab_reflectance_transmittance(**common)
        diffuse = slab_reflectance_transmittance(**common, incidence="diffuse")
        capture_r = 1.0 if slab.capture_reflectance is None else _pick(slab.capture_reflectance, rows)
        capture_t = 1.0 if slab.capture_transmittance is None else _pick(slab.capture_transmittance, rows)
        return dict(diffuse_reflectance=capture_r * np.asarray(beam.diffuse_reflectance),
                    specular_reflectance=np.asarray(beam.specular_reflectance),
                    diffuse_transmittance=capture_t * np.asarray(beam.diffuse_transmittance),
                    unscattered_transmittance=np.asarray(beam.unscattered_transmittance),
                    r_diffuse=np.asarray(diffuse.total_reflectance), t_diffuse=np.asarray(diffuse.total_transmittance))

    def observables(self, mua, musp, g, *, streams=None, rows=None, incidence="collimated"):
        parts = self.parts(mua, musp, g, streams=streams, rows=rows)
        s_r, s_t = sample_signals(self.setup, **parts)
        size = s_r.size
        if rows is None and size != self.reference_reflection.size:  # a start table: any wavelength's
            ref_r, ref_t = np.mean(self.reference_reflection), np.mean(self.reference_transmission)
        else:
            ref_r, ref_t = _pick(self.reference_reflection, rows), _pick(self.reference_transmission, rows)
        return np.stack([s_r / ref_r, s_t / ref_t, parts["unscattered_transmittance"]], axis=-1)


def readings_model(measurement: Measurement, slab: SlabModel) -> SphereReadingsModel:
    meta = measurement.metadata
    setup = meta.sphere.setup(specular_included=meta.specular_included,
                              unscattered_included=meta.unscattered_included)
    r_std, _ = meta.sphere.standard_at(measurement.wavelength_nm)
    return SphereReadingsModel(slab=slab, setup=setup,
                               reference_reflection=standard_signal(setup, standard_reflectance=r_std),
                               reference_transmission=open_beam_signal(setup, shape=r_std.shape))


def readings_data(measurement: Measurement, model: SphereReadingsModel):
    """Normalised readings and their SDs: the readings' own, plus the standard's and the wall's.

    The standard's calibration SD and the wall reflectance SD act on the model of every
    reading alike; they enter as an effective SD of M_R and M_T (first order, at the
    sample seen through a first conversion).
    """
    spec = measurement.metadata.sphere
    ratios, ratio_sd = normalised_readings(measurement.values, measurement.sd)
    W = ratios.shape[0]
    data = np.full((W, 3), np.nan)
    sd = np.full((W, 3), np.nan)
    data[:, :ratios.shape[1]] = ratios
    sd[:, :ratios.shape[1]] = ratio_sd
    r_std, r_std_sd = spec.standard_at(measurement.wavelength_nm)
    specular = specular_of(model.slab, (W,))
    first = convert_readings(measurement, specular_reflectance=specular, unscattered_transmittance=np.zeros(W),
                             r_diffuse=np.clip(ratios[:, 0] * r_std, 0, 0.999),
                             t_diffuse=np.clip(ratios[:, 1], 0, 0.5))
    sample = dict(diffuse_reflectance=first.total_reflectance - (specular if model.setup.specular_included else 0),
                  specular_reflectance=specular, diffuse_transmittance=first.total_transmittance,
                  unscattered_transmittance=np.zeros(W), r_diffuse=np.clip(first.total_reflectance, 0, 0.999),
                  t_diffuse=np.clip(first.total_transmittance, 0, 0.999 - np.clip(first.total_reflectance, 0, 0.999)))

    def normalised(setup, standard):
        s_r, s_t = sample_signals(setup, **sample)
        return np.stack([s_r / standard_signal(setup, standard_reflectance=standard),
                         s_t / open_beam_signal(setup, shape=(W,))], axis=1)

    setup = model.setup
    base = normalised(setup, r_std)
    extra = np.zeros((W, 2))
    for changed, size in (
            (lambda h: normalised(setup, r_std + h), r_std_sd),
            (lambda h: normalised(_setup_with_walls(setup, float(setup.reflection.wall_reflectance) + h,
                                                    float(setup.transmission.wall_reflectance)), r_std),
             np.full(W, spec.wall_reflectance_sd)),
            (lambda h: normalised(_setup_with_walls(setup, float(setup.reflection.wall_reflectance),
                                                    float(setup.transmission.wall_reflectance) + h), r_std),
             np.full(W, spec.transmission_wall_reflectance_sd))):
        step = 1e-6
        extra += ((changed(step) - base) / step * size[:, None]) ** 2
    sd[:, :2] = np.sqrt(sd[:, :2] ** 2 + extra)
    return data, sd


def _impossible_warning(measurement, data, sd) -> list[str]:
    impossible = (data[:, :2] <= 0).any(axis=1) | (data[:, 0] + data[:, 1] > 1.0 + 3 * np.hypot(sd[:, 0], sd[:, 1]))
    if not np.any(impossible):
        return []
    bad = np.flatnonzero(impossible)[0]
    return [f"at {measurement.wavelength_nm[bad]:g} nm the sphere equations give R = {data[bad, 0]:.4g}, "
            f"T = {data[bad, 1]:.4g}, not a possible sample; check the sphere geometry, the wall reflectance "
            f"and the standard"]


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
        ``normalised_readings`` (M_R, M_T[, M_Tc]) and SDs, ``sphere_correction_reflectance``
        (derived R over the plain ratio r_std · M_R) and
        ``correlation_reflectance_transmittance``.
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
    slab = slab_model(measurement, n=n, n_outside=n_outside, thickness_mm=thickness)
    model = readings_model(measurement, slab)
    data, sd = readings_data(measurement, model)
    if meta.lost_light == "monte-carlo":
        from phantomlab.calibration.lost_light import fit_with_lost_light

        solution, model, lost = fit_with_lost_light(measurement, data=data, sd=sd, n=n, n_outside=n_outside, g=g,
                                                    thickness_mm=thickness, model=model)
    else:
        solution, lost = invert_slab(model, data=data, sd=sd, g=g), None
    parts = model.parts(solution.mua_per_mm, solution.musp_per_mm, solution.g, streams=solution.streams)
    conversion = convert_readings(measurement, specular_reflectance=parts["specular_reflectance"],
                                  unscattered_transmittance=(data[:, 2] if has_tc else parts["unscattered_transmittance"]),
                                  r_diffuse=parts["r_diffuse"], t_diffuse=parts["t_diffuse"])
    derived, derived_sd = conversion.data()
    result = result_from_solution(measurement, solution, data=derived, sd=derived_sd, g_given=g,
                                  thickness_mm=thickness, kind="sphere", lost_light=lost)
    slab_values = slab.observables(solution.mua_per_mm, solution.musp_per_mm, solution.g, streams=solution.streams)
    with np.errstate(invalid="ignore", divide="ignore"):
        correction = conversion.total_reflectance / conversion.naive_reflectance
    extras = dict(result.extras)
    extras.update(model_total_reflectance=slab_values[:, 0], model_total_transmittance=slab_values[:, 1],
                  normalised_readings=data[:, :(3 if has_tc else 2)],
                  normalised_readings_sd=sd[:, :(3 if has_tc else 2)],
                  sphere_correction_reflectance=correction,
                  sphere_correction_transmittance=conversion.total_transmittance / conversion.naive_transmittance,
                  correlation_reflectance_transmittance=conversion.correlation_rt,
                  sphere_arrangement=meta.sphere.arrangement, standard_source=meta.sphere.standard_source)
    result = replace(result, extras=extras)
    messages = slab_messages(measurement, result, solution, thickness, lost)
    messages += _impossible_warning(measurement, derived, derived_sd)
    return _finish(result, measurement, messages)
