"""Time-resolved diffusion reflectance and transmittance of a half-space and a slab (layer 2).

A short pulse enters the top face z = 0 of a homogeneous medium (μa, μs′, index ``n``)
normally; the first reduced interaction at depth z0 = 1/μs′ is an isotropic point source
whose photon density diffuses at v = c/n, the boundaries met by images
(:mod:`phantomlab.transport.time_domain_images`: the infinite-medium fluence Φ∞ of Patterson
et al. 1989, eq. 3, the image positions and the sums J_R, J_T of Contini et al. 1997,
eqs. 35–37).  Three models sit in :data:`TD_MODELS`:

* ``patterson1989`` — zero fluence on the real surface (one negative image at −z0; for a
  slab, the images of both faces), D = 1/(3(μa + μs′)), the light leaving is the flux
  D ∂Φ/∂z (Patterson, Chance & Wilson 1989);
* ``contini1997`` — the extrapolated boundary: zero fluence at z = −z_e and z = s + z_e,
  z_e = 2AD with A from :mod:`phantomlab.transport.boundary`, the infinite series of image
  pairs for a slab of thickness s, the flux by Fick's law (Contini, Martelli & Zaccanti
  1997, eqs. 36 and 37); the half-space is the m = 0 pair;
* ``kienle1997`` (default) — the same sources, with the light leaving taken as
  C1 Φ + C2 J (the fluence-plus-flux combination of Kienle & Patterson 1997, whose
  steady-state form is the project's default R(ρ) model ``srdr``), C1, C2 from the Fresnel
  integrals (:func:`~phantomlab.transport.boundary.fluence_flux_coefficients_Kienle1997`).

**Conventions.**  Every value is per unit energy *incident* on the surface, the specular
reflection not counted: the papers' values (per unit energy that entered) are multiplied by
the Fresnel transmission of the normally incident beam, T = 1 − ((n − n_outside)/(n +
n_outside))² (DEVELOPERS.md, "Reflectance conventions").  Time t = 0 is the moment the pulse
enters; for t ≤ 0 the value is 0.  ``contini1997`` and ``kienle1997`` use D = 1/(3μs′) (so
μa enters only through e^(−μa v t), exactly as in transport theory for a homogeneous medium);
``patterson1989`` keeps the paper's D = 1/(3(μa + μs′)).  The time integral of the flux of
``contini1997`` is the steady-state flux of Farrell et al. 1992 with the same D and a unit
source (checked in the tests); the steady-state ``srdr`` models use D = 1/(3μt′) and the
source strength a′, so they differ from these integrals by O(μa/μs′).

Diffusion is poor at early times (photons that have scattered a few times only), within
about one transport mean free path of the source, and when μs′ is not ≫ μa; the last two
raise a :class:`PhantomlabWarning`, the first is the fit's business (its window).

References
----------
Patterson MS, Chance B, Wilson BC 1989, Appl Opt 28:2331–2336, doi:10.1364/AO.28.002331.
Contini D, Martelli F, Zaccanti G 1997, Appl Opt 36:4587–4599, doi:10.1364/AO.36.004587.
Kienle A, Patterson MS 1997, J Opt Soc Am A 14:246–254, doi:10.1364/JOSAA.14.000246.
Farrell TJ, Patterson MS, Wilson B 1992, Med Phys 19:879–888, doi:10.1118/1.596777.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass
from typing import Callable

import numpy as np

from phantomlab.errors import InputError, PhantomlabWarning
from phantomlab.transport.arguments import as_coefficient, as_index, as_length_grid, as_spectral, choose
from phantomlab.transport.boundary import (
    beam_entry_transmission,
    boundary_coefficient,
    fluence_flux_coefficients_Kienle1997,
)
from phantomlab.transport.diffusion_validity import warn_scattering_dominance
from phantomlab.transport.time_domain_images import (
    MAX_IMAGE_PAIRS,
    SERIES_EXPONENT,
    SPEED_OF_LIGHT_MM_PER_PS,
    checked_thickness,
    checked_time_grid,
    image_series_terms,
)

__all__ = [
    "TD_MODELS",
    "TD_DEFAULT_BOUNDARY",
    "time_resolved",
    "td_diffusion_Patterson1989",
    "td_diffusion_Contini1997",
    "td_diffusion_Kienle1997",
    "time_resolved_rows",
    "time_resolved_evaluator",
]

#: The boundary method each model was published with (used when ``boundary=None``);
#: ``patterson1989`` has no boundary coefficient (zero fluence on the surface).
TD_DEFAULT_BOUNDARY = {"patterson1989": None, "contini1997": "haskell1994", "kienle1997": "haskell1994"}

@dataclass(frozen=True)
class _Medium:
    mua: np.ndarray  # [1/mm], shape S
    musp: np.ndarray  # [1/mm]
    d: np.ndarray  # diffusion coefficient [mm]
    z0: np.ndarray  # source depth [mm]
    zb: np.ndarray  # extrapolation distance [mm] (0: zero boundary)
    v: np.ndarray  # speed in the medium [mm/ps]
    n: np.ndarray
    n_outside: np.ndarray
    entry: np.ndarray  # Fresnel transmission of the normal beam


def _medium(mua_per_mm, musp_per_mm, n, n_outside, boundary, *, d_with_mua: bool) -> _Medium:
    mua = as_coefficient(mua_per_mm, "mua_per_mm")
    musp = as_coefficient(musp_per_mm, "musp_per_mm", strictly_positive=True)
    n_arr = as_index(n, "n")
    n_out = as_index(n_outside, "n_outside")
    mua, musp, n_arr, n_out = as_spectral(mua_per_mm=mua, musp_per_mm=musp, n=n_arr, n_outside=n_out)
    warn_scattering_dominance(mua, musp, stacklevel=3)
    d = 1.0 / (3.0 * (mua + musp)) if d_with_mua else 1.0 / (3.0 * musp)
    if boundary is None:
        zb = np.zeros_like(d)
    else:
        zb = 2.0 * np.asarray(boundary_coefficient(n=n_arr, n_outside=n_out, method=boundary)) * d
    return _Medium(
        mua=mua, musp=musp, d=d, z0=1.0 / musp, zb=zb, v=SPEED_OF_LIGHT_MM_PER_PS / n_arr,
        n=n_arr, n_outside=n_out, entry=np.asarray(beam_entry_transmission(n=n_arr, n_outside=n_out)),
    )


def _warn_close_to_source(rho: np.ndarray, medium: _Medium, geometry: str) -> None:
    if geometry != "reflectance":
        return
    mfp = medium.z0[np.isfinite(medium.z0)]
    near = rho[np.isfinite(rho)]
    if mfp.size and near.size and near.min() < mfp.max():
        warnings.warn(
            f"diffusion R(rho, t) is poor within one transport mean free path of the source:"
            f" rho_mm = {near.min():.3g} < 1/musp = {mfp.max():.3g} mm",
            PhantomlabWarning,
            stacklevel=4,
        )


def _pairs_needed(medium: _Medium, time: np.ndarray, thickness: float | None) -> int:
    if thickness is None:
        return 0
    t = time[np.isfinite(time) & (time > 0)]
    if t.size == 0:
        return 0
    spread = np.sqrt(4.0 * medium.d * medium.v * t.max() * SERIES_EXPONENT)
    period = 2.0 * (thickness + 2.0 * medium.zb)
    ok = np.isfinite(spread) & np.isfinite(period)
    if not np.any(ok):
        return 0
    pairs = int(np.ceil(np.max(spread[ok] / period[ok]))) + 1
    return min(pairs, MAX_IMAGE_PAIRS)


def _surface_terms(medium: _Medium, rho: np.ndarray, time: np.ndarray, thickness: float | None, geometry: str):
    """Fluence rate Φ and outward flux J on the chosen face, each of shape S + G [1/(mm² ps)].

    Per unit energy that *entered* (a unit source at z0 and its images).
    """
    grid_rho, grid_t = np.broadcast_arrays(rho, time)
    extra = (None,) * grid_t.ndim
    lead = (None,) * medium.mua.ndim

    def spread(values):
        return values[(Ellipsis,) + extra]

    return image_series_terms(d=spread(medium.d), v=spread(medium.v), mua=spread(medium.mua), z0=spread(medium.z0),
                  zb=spread(medium.zb), r=grid_rho[lead + (Ellipsis,)], t=grid_t[lead + (Ellipsis,)],
                  thickness=thickness, geometry=geometry,
                  pairs=_pairs_needed(medium, np.asarray(time, float), thickness))


def _evaluate(medium, rho_mm, time_ps, thickness_mm, geometry, combine):
    thickness = checked_thickness(thickness_mm, geometry)
    rho = as_length_grid(rho_mm, "rho_mm")
    time = checked_time_grid(time_ps)
    try:
        np.broadcast_shapes(rho.shape, time.shape)
    except ValueError:
        raise InputError(
            f"rho_mm {rho.shape} and time_ps {time.shape} must broadcast to one grid"
        ) from None
    _warn_close_to_source(rho, medium, geometry)
    fluence, flux = _surface_terms(medium, rho, time, thickness, geometry)
    grid_ndim = fluence.ndim - medium.mua.ndim
    entry = medium.entry[(Ellipsis,) + (None,) * grid_ndim]
    value = entry * combine(fluence, flux, grid_ndim)
    return value[()] if value.ndim == 0 else value


def td_diffusion_Patterson1989(
    *, mua_per_mm, musp_per_mm, rho_mm, time_ps, n, n_outside=1.0, thickness_mm=None,
    geometry="reflectance", boundary=None,
):
    """Time-resolved flux with zero fluence on the surface (Patterson, Chance & Wilson 1989).

    Half-space reflectance (their eq. for R(ρ, t)):
    R(ρ, t) = T (4πDv)^(−3/2) z0 t^(−5/2) exp(−μa v t) exp(−(ρ² + z0²)/(4Dvt)),
    D = 1/(3(μa + μs′)), z0 = 1/μs′; a slab adds the images of both faces (the zero-boundary
    case z_e = 0 of :func:`td_diffusion_Contini1997`'s series).  T is the beam's Fresnel
    transmission (project convention, per unit incident energy).  ``boundary`` must be None:
    the model has no boundary coefficient.

    Parameters
    ----------
    mua_per_mm, musp_per_mm : float or array (S) [1/mm]
    rho_mm : float or array [mm]
        Distance from the beam axis (reflectance: source–detector distance; transmittance:
        lateral offset from the axis).  Broadcast with ``time_ps`` to the grid G.
    time_ps : float or array [ps]
        Time after the pulse entered; values <= 0 give 0.
    n, n_outside : float or array (S)
    thickness_mm : float or None [mm]
        Slab thickness; None for a half-space (reflectance only).
    geometry : {'reflectance', 'transmittance'}

    Returns
    -------
    ndarray (S + G) [1/(mm² ps)]
        Power leaving per unit area and time per unit energy incident (entry loss inside).

    References
    ----------
    Patterson, Chance & Wilson 1989, Appl Opt 28:2331 (zero-boundary dipole, R(ρ, t)).
    """
    if boundary is not None:
        raise InputError("patterson1989 uses zero fluence on the surface: boundary must be None")
    medium = _medium(mua_per_mm, musp_per_mm, n, n_outside, None, d_with_mua=True)
    return _evaluate(medium, rho_mm, time_ps, thickness_mm, geometry, lambda phi, j, _g: j)


def td_diffusion_Contini1997(
    *, mua_per_mm, musp_per_mm, rho_mm, time_ps, n, n_outside=1.0, thickness_mm=None,
    geometry="reflectance", boundary="haskell1994",
):
    """Time-resolved flux with the extrapolated boundary (Contini, Martelli & Zaccanti 1997).

    R(ρ, t) = T J_R and T(ρ, t) = T J_T of :mod:`phantomlab.transport.time_domain_images`
    (Contini et al. eqs. 37, 36): D = 1/(3μs′), z0 = 1/μs′, z_e = 2AD, the image series of a
    slab (the m = 0 pair for the half-space).  Contini et al. take A from the Fresnel integrals (``haskell1994`` here).

    Parameters
    ----------
    mua_per_mm, musp_per_mm, rho_mm, time_ps, n, n_outside, thickness_mm, geometry
        As :func:`td_diffusion_Patterson1989`.
    boundary : {'haskell1994', 'groenhuis1983'}
        Method for A (:data:`phantomlab.transport.boundary.BOUNDARY_METHODS`).

    Returns
    -------
    ndarray (S + G) [1/(mm² ps)]

    References
    ----------
    Contini, Martelli & Zaccanti 1997, Appl Opt 36:4587 (eqs. 35–37).
    """
    medium = _medium(mua_per_mm, musp_per_mm, n, n_outside, boundary, d_with_mua=False)
    return _evaluate(medium, rho_mm, time_ps, thickness_mm, geometry, lambda phi, j, _g: j)


def td_diffusion_Kienle1997(
    *, mua_per_mm, musp_per_mm, rho_mm, time_ps, n, n_outside=1.0, thickness_mm=None,
    geometry="reflectance", boundary="haskell1994",
):
    """Time-resolved light leaving a face as C1 Φ + C2 J (Kienle & Patterson 1997).

    Φ and J are the fluence rate and outward flux of the extrapolated-boundary sources of
    :func:`td_diffusion_Contini1997` on the face (D = 1/(3μs′)); C1 = (1 − R_φ)/4 and
    C2 = (1 − R_j)/2 (0.118 and 0.306 at n = 1.4 in air).  Kienle & Patterson wrote it for the
    half-space; on a slab the same combination is applied at either face (a departure: the
    slab form is ours, the image series Contini's).

    Parameters
    ----------
    As :func:`td_diffusion_Contini1997`.

    Returns
    -------
    ndarray (S + G) [1/(mm² ps)]

    References
    ----------
    Kienle & Patterson 1997, J Opt Soc Am A 14:246 (time-resolved R = C1 Φ + C2 J).
    """
    medium = _medium(mua_per_mm, musp_per_mm, n, n_outside, boundary, d_with_mua=False)
    c1, c2 = fluence_flux_coefficients_Kienle1997(n=medium.n, n_outside=medium.n_outside)

    def combine(phi, j, grid_ndim):
        extra = (Ellipsis,) + (None,) * grid_ndim
        return np.asarray(c1)[extra] * phi + np.asarray(c2)[extra] * j

    return _evaluate(medium, rho_mm, time_ps, thickness_mm, geometry, combine)


#: Registry of time-resolved diffusion models (name → function).
TD_MODELS: dict[str, Callable] = {
    "kienle1997": td_diffusion_Kienle1997,
    "contini1997": td_diffusion_Contini1997,
    "patterson1989": td_diffusion_Patterson1989,
}


def time_resolved(
    *, mua_per_mm, musp_per_mm, rho_mm, time_ps, n, n_outside=1.0, thickness_mm=None,
    geometry="reflectance", model="kienle1997", boundary=None,
):
    """Time-resolved diffuse reflectance or transmittance by a named diffusion model.

    Parameters
    ----------
    mua_per_mm, musp_per_mm : float or array (S) [1/mm]
    rho_mm : float or array [mm]
        Distance from the beam axis; broadcast with ``time_ps`` into the grid G.
    time_ps : float or array [ps]
        Time after the pulse entered the medium.
    n, n_outside : float or array (S)
    thickness_mm : float or None [mm]
        Slab thickness (None: half-space; transmittance needs it).
    geometry : {'reflectance', 'transmittance'}
    model : {'kienle1997', 'contini1997', 'patterson1989'}
        See :data:`TD_MODELS`; unknown names are refused with the valid list.
    boundary : {'haskell1994', 'groenhuis1983'} or None
        Method for A; None takes the model's published choice (:data:`TD_DEFAULT_BOUNDARY`).

    Returns
    -------
    ndarray (S + G) [1/(mm² ps)]
        ``reflectance_per_mm2_per_ps`` or ``transmittance_per_mm2_per_ps``: power leaving per
        unit area and time per unit energy incident on the surface (specular reflection not
        counted).
    """
    function = choose(TD_MODELS, model, "time-resolved model")
    method = TD_DEFAULT_BOUNDARY[model] if boundary is None else boundary
    return function(
        mua_per_mm=mua_per_mm, musp_per_mm=musp_per_mm, rho_mm=rho_mm, time_ps=time_ps, n=n,
        n_outside=n_outside, thickness_mm=thickness_mm, geometry=geometry, boundary=method,
    )


def time_resolved_rows(
    *, mua_per_mm, musp_per_mm, rho_mm, time_ps, n, n_outside=1.0, thickness_mm=None,
    geometry="reflectance", model="kienle1997", boundary=None,
):
    """:func:`time_resolved` with every argument broadcast element by element.

    Where :func:`time_resolved` forms the outer product of per-wavelength inputs (S) and the
    grid (G), here ``mua_per_mm`` of shape (N, 1) and ``time_ps`` of shape (N, L) give (N, L):
    each row its own optical properties and its own times (a fit evaluating many trial
    parameter sets, each shifted by its own t0).  Same models, units and conventions.

    Returns
    -------
    ndarray [1/(mm² ps)], the broadcast shape of all arguments.
    """
    evaluate = time_resolved_evaluator(n=n, n_outside=n_outside, thickness_mm=thickness_mm, geometry=geometry,
                                       model=model, boundary=boundary)
    return evaluate(mua_per_mm=mua_per_mm, musp_per_mm=musp_per_mm, rho_mm=rho_mm, time_ps=time_ps)


def time_resolved_evaluator(*, n: float, n_outside: float = 1.0, thickness_mm=None, geometry="reflectance",
                            model="kienle1997", boundary=None):
    """A fast element-wise evaluator of one model for a fixed medium index and geometry.

    The boundary constants (A, C1, C2, the entry transmission) depend on the indices only and
    are computed here once; the returned function
    ``evaluate(*, mua_per_mm, musp_per_mm, rho_mm, time_ps)`` broadcasts its arguments element
    by element as :func:`time_resolved_rows` does (which calls it).  For fits, which call the
    model many times with the same indices.

    Parameters
    ----------
    n, n_outside : float
        Indices of the medium and of the outside (scalars).
    thickness_mm, geometry, model, boundary
        As :func:`time_resolved`.
    """
    function = choose(TD_MODELS, model, "time-resolved model")
    if model == "patterson1989" and boundary is not None:
        raise InputError("patterson1989 uses zero fluence on the surface: boundary must be None")
    method = TD_DEFAULT_BOUNDARY[model] if boundary is None else boundary
    thickness = checked_thickness(thickness_mm, geometry)
    n_value = float(as_index(n, "n"))
    n_out = float(as_index(n_outside, "n_outside"))
    a_coef = 0.0 if method is None else float(boundary_coefficient(n=n_value, n_outside=n_out, method=method))
    entry = float(beam_entry_transmission(n=n_value, n_outside=n_out))
    c1, c2 = (float(c) for c in fluence_flux_coefficients_Kienle1997(n=n_value, n_outside=n_out))
    with_fluence = function is td_diffusion_Kienle1997
    d_with_mua = function is td_diffusion_Patterson1989
    v = SPEED_OF_LIGHT_MM_PER_PS / n_value

    def evaluate(*, mua_per_mm, musp_per_mm, rho_mm, time_ps):
        mua = as_coefficient(mua_per_mm, "mua_per_mm")
        musp = as_coefficient(musp_per_mm, "musp_per_mm", strictly_positive=True)
        rho = as_length_grid(rho_mm, "rho_mm")
        time = checked_time_grid(time_ps)
        try:
            shape = np.broadcast_shapes(mua.shape, musp.shape, rho.shape, time.shape)
        except ValueError:
            raise InputError("time_resolved_rows: the arguments must broadcast element by element") from None
        d = 1.0 / (3.0 * (mua + musp)) if d_with_mua else 1.0 / (3.0 * musp)
        zb = 2.0 * a_coef * d
        pairs = 0
        if thickness is not None:
            t_live = time[np.isfinite(time) & (time > 0)]
            finite_d = d[np.isfinite(d)] if np.ndim(d) else np.array([d])
            if t_live.size and finite_d.size:
                spread = np.sqrt(4.0 * finite_d.max() * v * t_live.max() * SERIES_EXPONENT)
                pairs = min(int(np.ceil(spread / (2.0 * thickness))) + 1, MAX_IMAGE_PAIRS)
        fluence, flux = image_series_terms(d=d, v=v, mua=mua, z0=1.0 / musp, zb=zb, r=rho, t=time, thickness=thickness,
                               geometry=geometry, pairs=pairs)
        value = c1 * fluence + c2 * flux if with_fluence else flux
        # a thin slab's image series cancels to rounding late in time: no negative light
        return np.broadcast_to(entry * np.maximum(value, 0.0), shape)

    return evaluate
