"""Reflection and transmission of a slab face, bare or under a glass slide (layer 2).

A face is seen along a direction of cosine μ inside the sample (index n).  Without a slide
it is one Fresnel interface n → n_outside.  With a slide (index n_slide, absorption
μa_slide, thickness d_slide) it is two interfaces with incoherent multiple reflections in
the glass; the invariant n sin θ (Snell) gives the directions in the glass and outside.

For interface reflectances r1 (sample–glass), r2 (glass–outside) and the glass
transmission t = exp(−μa_slide d_slide / μ_glass):

    R_inside  = r1 + (1 − r1)² r2 t² / (1 − r1 r2 t²)
    R_outside = r2 + (1 − r2)² r1 t² / (1 − r1 r2 t²)
    T         = (1 − r1)(1 − r2) t / (1 − r1 r2 t²)

(the geometric series of reflections inside the slide, e.g. Prahl 1995, ch. 5, "glass
slides").

References
----------
Prahl SA 1995, "The adding-doubling method", in Welch & van Gemert (eds), *Optical-Thermal
Response of Laser-Irradiated Tissue*, Plenum, ch. 5.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.transport.fresnel import fresnel_reflectance

__all__ = ["Face", "face_response"]


@dataclass(frozen=True)
class Face:
    """One face of the slab: indices and the optional slide (all per wavelength, (W,))."""

    n: np.ndarray  # sample
    n_outside: np.ndarray
    n_slide: np.ndarray | None = None  # None: bare face
    slide_mua_per_mm: np.ndarray | float = 0.0
    slide_thickness_mm: float = 0.0


def face_response(face: Face, mu: np.ndarray):
    """R seen from inside, R seen from outside, and T of a face, along directions ``mu``.

    Parameters
    ----------
    face : Face
    mu : ndarray (W, K)
        Direction cosines inside the sample.

    Returns
    -------
    (r_inside, r_outside, t) : ndarrays (W, K)
    """
    n = face.n[:, None]
    n_out = face.n_outside[:, None]
    sin2 = 1.0 - mu * mu
    if face.n_slide is None:
        r = fresnel_reflectance(cos_incident=mu, n_from=n, n_to=n_out)
        r = np.asarray(r, dtype=float)
        return r, r, 1.0 - r
    ng = np.asarray(face.n_slide, dtype=float)[:, None]
    r1 = np.asarray(fresnel_reflectance(cos_incident=mu, n_from=n, n_to=ng), dtype=float)
    inside_glass = 1.0 - (n / ng) ** 2 * sin2
    mu_glass = np.sqrt(np.clip(inside_glass, 0.0, 1.0))
    r2 = np.asarray(fresnel_reflectance(cos_incident=mu_glass, n_from=ng, n_to=n_out), dtype=float)
    absorption = np.asarray(face.slide_mua_per_mm, dtype=float)
    absorption = absorption[:, None] if absorption.ndim else absorption
    with np.errstate(divide="ignore", invalid="ignore"):
        t_glass = np.where(
            mu_glass > 0, np.exp(-absorption * face.slide_thickness_mm / mu_glass), 0.0
        )
    t_glass = np.where(inside_glass > 0, t_glass, 0.0)
    loop = 1.0 - r1 * r2 * t_glass**2
    with np.errstate(divide="ignore", invalid="ignore"):
        r_in = r1 + (1.0 - r1) ** 2 * r2 * t_glass**2 / loop
        r_out = r2 + (1.0 - r2) ** 2 * r1 * t_glass**2 / loop
        t = (1.0 - r1) * (1.0 - r2) * t_glass / loop
    # loop = 0 only when both interfaces reflect totally (r1 = r2 = 1, t = 1): then R = 1.
    total = loop <= 0.0
    r_in = np.where(total, 1.0, r_in)
    r_out = np.where(total, 1.0, r_out)
    t = np.where(total, 0.0, t)
    return r_in, r_out, t
