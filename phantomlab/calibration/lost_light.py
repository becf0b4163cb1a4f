"""Correcting a slab fit for light lost at the ports and edges of a finite sample (layer 3).

Adding-doubling describes an infinitely wide slab under an infinitely wide beam; a real
sample is lit by a beam a few millimetres wide and its light spreads sideways, so part of
the diffuse reflectance and transmittance leaves the sample outside the sphere's port, or
through its edge, and is never measured.  Left out, the fit reads the missing light as
absorption: a few per cent of R and T become 5–30 % in μa (Lemaillet et al. 2015; Zhu et
al. 2007).

The correction (``lost_light = "monte-carlo"`` in the sidecar):

1. fit the slab as if nothing were lost;
2. at the fitted optics, run the Monte Carlo of the finite sample
   (:func:`phantomlab.transport.montecarlo.finite_sample.simulate_finite_sample`: the beam's
   disc, the sample's edge, the ports as radii) and take the fraction of the diffuse
   reflectance and transmittance that reaches each port, c_R and c_T, as the captured
   Monte Carlo light over adding-doubling's diffuse R and T at the same optics;
3. refit with the model's diffuse R and T multiplied by c_R and c_T (the specular
   reflection and the unscattered beam, both inside the beam's disc, are captured whole);
4. repeat 2–3 at the new optics until μa and μs′ move by less than a tenth of their SD
   (two to four rounds: c changes slowly with the optics).

The Monte Carlo runs at up to ``lost_light_wavelengths`` wavelengths spread over the band
(each with ``lost_light_photons`` photons and a fixed seed, so successive rounds use
correlated samples); c is interpolated linearly in wavelength between them.  The photon
noise of c is added to the data's SDs.  A warning names the wavelengths where more than
:data:`LOST_LIGHT_WARNING_FRACTION` of the diffuse light is lost.

References
----------
Lemaillet P, Bouchard JP, Hwang J, Allen DW 2015, J Biomed Opt 20:121310 (edge losses turn
a 2–3 % error in R and T into 5–30 % in μa).
Zhu D, Lu W, Zeng S, Luo Q 2007, J Biomed Opt 12:064004 (Monte Carlo of the light lost by a
sample with slides between two integrating spheres).
"""

from __future__ import annotations

from dataclasses import dataclass, replace

import numpy as np

from phantomlab.calibration.identifiability import _bands
from phantomlab.calibration.slab_inversion import SlabModel, invert_slab
from phantomlab.errors import InputError
from phantomlab.limits import check_limit

__all__ = ["LostLight", "fit_with_lost_light", "LOST_LIGHT_WARNING_FRACTION", "MAX_LOST_LIGHT_ROUNDS"]

#: Lost fractions above this (of the diffuse R or T) are named in a warning.
LOST_LIGHT_WARNING_FRACTION = 0.03  # our reporting threshold ("a few per cent"), no source
#: Most rounds of Monte Carlo → refit.
MAX_LOST_LIGHT_ROUNDS = 6
#: Convergence: μa and μs′ move by less than this fraction of their SD in a round (or by
#: less than this fraction of themselves).
_CONVERGED = 0.1
#: Seed of the first Monte Carlo wavelength (the k-th uses SEED + k, the same in every round).
SEED = 5150


@dataclass(frozen=True)
class LostLight:
    """The lost-light correction as applied (capture = fraction of the diffuse light measured).

    Attributes
    ----------
    wavelength_nm : ndarray (W,) [nm]
    capture_reflectance, capture_transmittance : ndarray (W,)
        Interpolated to every wavelength.
    capture_reflectance_sd, capture_transmittance_sd : ndarray (W,)
    monte_carlo_wavelength_nm : ndarray (K,) [nm]
    edge_loss : ndarray (K,)
        Fraction of the incident power lost through the sample's edge at those wavelengths.
    rounds : int
    converged : bool
    photons : int
    beam_diameter_mm, sample_diameter_mm : float, float or None [mm]
    port_diameters_mm : tuple (reflection, transmission) [mm]
    """

    wavelength_nm: np.ndarray
    capture_reflectance: np.ndarray
    capture_transmittance: np.ndarray
    capture_reflectance_sd: np.ndarray
    capture_transmittance_sd: np.ndarray
    monte_carlo_wavelength_nm: np.ndarray
    edge_loss: np.ndarray
    rounds: int
    converged: bool
    photons: int
    beam_diameter_mm: float
    sample_diameter_mm: float | None
    port_diameters_mm: tuple

    def to_json(self) -> dict:
        """Top-level keys of the fit JSON."""
        return {
            "lost_light": "monte-carlo",
            "lost_reflectance_fraction": 1.0 - self.capture_reflectance,
            "lost_reflectance_fraction_sd": self.capture_reflectance_sd,
            "lost_transmittance_fraction": 1.0 - self.capture_transmittance,
            "lost_transmittance_fraction_sd": self.capture_transmittance_sd,
            "lost_light_wavelength_nm": self.monte_carlo_wavelength_nm,
            "lost_light_edge_fraction": self.edge_loss,
            "lost_light_rounds": self.rounds,
            "lost_light_converged": self.converged,
            "lost_light_photons": self.photons,
            "lost_light_geometry": {"beam_diameter_mm": self.beam_diameter_mm,
                                    "sample_diameter_mm": self.sample_diameter_mm,
                                    "reflection_port_mm": self.port_diameters_mm[0],
                                    "transmission_port_mm": self.port_diameters_mm[1]},
        }

    def warnings(self, wavelength_nm) -> list[str]:
        lost = np.fmax(1.0 - self.capture_reflectance, 1.0 - self.capture_transmittance)
        large = lost > LOST_LIGHT_WARNING_FRACTION
        messages = []
        if np.any(large):
            messages.append(
                f"lost light corrected by Monte Carlo: up to {100 * np.max(1 - self.capture_reflectance):.1f} % of "
                f"the diffuse reflectance and {100 * np.max(1 - self.capture_transmittance):.1f} % of the diffuse "
                f"transmittance leave outside the ports or through the edge at {_bands(wavelength_nm, large)} "
                f"(above {100 * LOST_LIGHT_WARNING_FRACTION:.0f} %: mua rests on this correction)")
        if not self.converged:
            messages.append(f"the lost-light correction had not settled after {self.rounds} rounds")
        return messages


def _geometry(measurement):
    meta = measurement.metadata
    beam = meta.beam_diameter_mm
    if meta.sphere is not None:
        ports = (meta.sphere.reflection.sample_port_mm, meta.sphere.transmission.sample_port_mm)
    else:
        ports = (meta.port_diameter_mm, meta.port_diameter_mm)
    if beam is None or ports[0] is None:
        raise InputError("lost_light = \"monte-carlo\" needs beam_diameter_mm and the port diameter "
                         "(port_diameter_mm, or the sample ports of [sphere]) in the sidecar")
    if beam >= min(ports):
        raise InputError(f"beam_diameter_mm = {beam:g} is not smaller than the port ({min(ports):g} mm); accepted: "
                         f"a beam narrower than the ports")
    if meta.sample_diameter_mm is not None and meta.sample_diameter_mm < max(ports):
        raise InputError(f"sample_diameter_mm = {meta.sample_diameter_mm:g} is smaller than the port "
                         f"({max(ports):g} mm); accepted: a sample that covers the ports")
    return beam, meta.sample_diameter_mm, ports


def _slides(meta):
    if meta.slides == "none" or meta.n_slide is None:
        return None
    return {"both": meta.n_slide, "top": (meta.n_slide, None), "bottom": (None, meta.n_slide)}[meta.slides]


def _slab_of(model):
    return model.slab if hasattr(model, "slab") else model


def _with_capture(model, capture_r, capture_t):
    slab = replace(_slab_of(model), capture_reflectance=capture_r, capture_transmittance=capture_t)
    return replace(model, slab=slab) if hasattr(model, "slab") else slab


def _monte_carlo_capture(measurement, solution, rows, *, n, n_outside, thickness_mm, slab: SlabModel):
    """c_R, c_T (and SDs, edge loss) at the fitted optics of the given wavelengths."""
    from phantomlab.transport.adding_doubling import slab_reflectance_transmittance
    from phantomlab.transport.montecarlo.finite_sample import simulate_finite_sample

    meta = measurement.metadata
    beam, sample, ports = _geometry(measurement)
    radii = sorted({ports[0] / 2, ports[1] / 2})
    mua, musp, g = solution.mua_per_mm[rows], solution.musp_per_mm[rows], solution.g[rows]
    ad = slab_reflectance_transmittance(mua_per_mm=mua, mus_per_mm=musp / (1 - g), g=g, thickness_mm=thickness_mm,
                                        n=n, n_outside=n_outside, quadrature_points=solution.streams[rows],
                                        **slab.slides)
    out = np.zeros((rows.size, 5))
    for k in range(rows.size):
        run = simulate_finite_sample(
            mua_per_mm=float(mua[k]), mus_per_mm=float(musp[k] / (1 - g[k])), g=float(g[k]), n=n,
            n_outside=n_outside, thickness_mm=thickness_mm, beam_diameter_mm=beam, capture_radii_mm=radii,
            sample_diameter_mm=sample, n_slide=_slides(meta), photons=meta.lost_light_photons, seed=SEED + k)
        i_r, i_t = radii.index(ports[0] / 2), radii.index(ports[1] / 2)
        r_ad = float(np.asarray(ad.diffuse_reflectance)[k])
        t_ad = float(np.asarray(ad.diffuse_transmittance)[k])
        captured_t = run.captured_transmittance[i_t] - run.unscattered_transmittance
        sd_t = np.hypot(run.captured_transmittance_sd[i_t], run.unscattered_transmittance_sd)
        out[k] = (run.captured_reflectance[i_r] / r_ad, captured_t / t_ad, run.captured_reflectance_sd[i_r] / r_ad,
                  sd_t / t_ad, run.edge_loss)
    return out


def fit_with_lost_light(measurement, *, data, sd, n, n_outside, g, thickness_mm, model=None):
    """Fit with the model's diffuse R and T scaled by Monte Carlo capture fractions, iterated.

    Parameters
    ----------
    measurement : Measurement
        Its sidecar gives ``beam_diameter_mm``, the port(s), optionally
        ``sample_diameter_mm``, ``lost_light_photons`` and ``lost_light_wavelengths``.
    data, sd : ndarray (W, 3)
        What the model is fitted to (R, T, Tc or the sphere's normalised readings).
    n, n_outside, g, thickness_mm
        As for the slab fit (g None: fitted).
    model : SlabModel or SphereReadingsModel, optional
        Default: the slab kind's model.

    Returns
    -------
    (solution, model, LostLight)
        The solution with the correction, the corrected model, and the correction.
    """
    from phantomlab.calibration.fit_slab import slab_model

    _geometry(measurement)  # refuse a bad geometry before any work
    meta = measurement.metadata
    count = min(measurement.wavelength_nm.size, meta.lost_light_wavelengths)
    check_limit("mc_photons", meta.lost_light_photons * count * MAX_LOST_LIGHT_ROUNDS,
                given=f"lost_light_photons {meta.lost_light_photons} x {count} wavelengths x up to "
                      f"{MAX_LOST_LIGHT_ROUNDS} rounds")
    if model is None:
        model = slab_model(measurement, n=n, n_outside=n_outside, thickness_mm=thickness_mm)
    slab = _slab_of(model)
    W = measurement.wavelength_nm.size
    count = min(W, meta.lost_light_wavelengths)
    rows = np.unique(np.round(np.linspace(0, W - 1, count)).astype(int))
    wavelength = np.asarray(measurement.wavelength_nm, float)
    solution = invert_slab(model, data=data, sd=sd, g=g)
    capture = np.ones((W, 2))
    capture_sd = np.zeros((W, 2))
    edge = np.zeros(rows.size)
    converged = False
    rounds = 0
    for rounds in range(1, MAX_LOST_LIGHT_ROUNDS + 1):
        values = _monte_carlo_capture(measurement, solution, rows, n=n, n_outside=n_outside,
                                      thickness_mm=thickness_mm, slab=slab)
        for j in range(2):
            capture[:, j] = np.interp(wavelength, wavelength[rows], values[:, j])
            capture_sd[:, j] = np.interp(wavelength, wavelength[rows], values[:, 2 + j])
        edge = values[:, 4]
        corrected = _with_capture(model, capture[:, 0], capture[:, 1])
        # the photon noise of the correction, as an SD of what it corrects
        uncorrected = _with_capture(model, None, None)
        noise = np.zeros_like(sd)
        noise[:, 0] = _diffuse_part(uncorrected, solution, 0) * capture_sd[:, 0]
        noise[:, 1] = _diffuse_part(uncorrected, solution, 1) * capture_sd[:, 1]
        sd_total = np.sqrt(sd**2 + noise**2)
        start = np.column_stack([np.log(solution.mua_per_mm), np.log(solution.musp_per_mm), solution.g])
        previous = solution
        solution = invert_slab(corrected, data=data, sd=sd_total, g=g, start=start)
        with np.errstate(invalid="ignore", divide="ignore"):
            moved = np.stack([np.abs(solution.mua_per_mm - previous.mua_per_mm) / np.sqrt(solution.covariance[:, 0, 0]),
                              np.abs(solution.musp_per_mm - previous.musp_per_mm) / np.sqrt(solution.covariance[:, 1, 1]),
                              np.abs(solution.mua_per_mm / previous.mua_per_mm - 1) / _CONVERGED])
        change = np.nanmax(np.min(moved, axis=0))
        model_used = corrected
        if change < _CONVERGED:
            converged = True
            break
    beam, sample, ports = _geometry(measurement)
    lost = LostLight(wavelength_nm=wavelength, capture_reflectance=capture[:, 0],
                     capture_transmittance=capture[:, 1], capture_reflectance_sd=capture_sd[:, 0],
                     capture_transmittance_sd=capture_sd[:, 1], monte_carlo_wavelength_nm=wavelength[rows],
                     edge_loss=edge, rounds=rounds, converged=converged, photons=meta.lost_light_photons,
                     beam_diameter_mm=beam, sample_diameter_mm=sample, port_diameters_mm=tuple(ports))
    return solution, model_used, lost


def _diffuse_part(model, solution, column):
    """How much of observable ``column`` scales with the diffuse light (dM/dc at c = 1)."""
    step = 1e-4
    ones = np.ones(solution.mua_per_mm.size)
    capture = [ones, ones]
    capture[column] = ones * (1 - step)
    base = _with_capture(model, ones, ones).observables(solution.mua_per_mm, solution.musp_per_mm, solution.g,
                                                         streams=solution.streams)[:, column]
    less = _with_capture(model, *capture).observables(solution.mua_per_mm, solution.musp_per_mm, solution.g,
                                                       streams=solution.streams)[:, column]
    return (base - less) / step
