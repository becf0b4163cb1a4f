"""The unscattered light of a slab between two faces, on any angular quadrature (layer 2).

Light that crosses the sample without being scattered follows one direction μ (inside the
sample) from face to face.  With the faces' reflectances seen from inside, r_top(μ) and
r_bottom(μ), their transmittances t_top(μ) and t_bottom(μ), and the attenuation
e = exp(−τ/μ) of one crossing, the geometric series of its inter-face reflections gives,
per unit power arriving along μ from outside (incoherent faces),

    through = t_top e t_bottom / (1 − r_top r_bottom e²),
    back    = t_top e² r_bottom t_top / (1 − r_top r_bottom e²)

(e.g. Prahl 1995, ch. 5).  For diffuse (Lambertian) light the sum over directions is an
angular integral.  Near grazing incidence the faces' Fresnel reflectance rises from a few
per cent to 1 within a few critical cosines μc of the critical direction, so where the
sample's index is close to the outside's (μc small) that rise is narrow: the slab solver's
24 streams per hemisphere missed it by up to 5e-4 of the incident power (at
n/n_outside = 1.00125), while the Gauss rule of :data:`EXACT_NODES` nodes in s, μ = μc + (1 − μc) s², resolves it to 1e-14
(tests/transport/test_slab_direct.py, against scipy's adaptive quadrature).

References
----------
Prahl SA 1995, "The adding-doubling method", in Welch AJ, van Gemert MJC (eds),
*Optical-Thermal Response of Laser-Irradiated Tissue*, Plenum, ch. 5.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.transport.quadrature import gauss_rule
from phantomlab.transport.slab_boundary import Face, face_response

__all__ = ["DirectLight", "EXACT_NODES", "diffuse_entry_rule", "direct_light"]

#: Gauss nodes in s of the angular integral of the unscattered light under diffuse
#: incidence (enough for 1e-14 of the incident power at any n/n_outside; see the docstring).
EXACT_NODES = 128


@dataclass(frozen=True)
class DirectLight:
    """Unscattered light per unit incident power, arrays over wavelength.

    Attributes
    ----------
    specular : ndarray (W,)
        Turned back by the first face (and its slide) without entering the sample,
        including light outside the cone that can enter.
    reflected : ndarray (W, K)
        Entered, reflected by the far face without scattering and left through the first
        face (one column per optical thickness given).
    transmitted : ndarray (W, K)
        Crossed the sample without scattering and left through the far face.
    """

    specular: np.ndarray
    reflected: np.ndarray
    transmitted: np.ndarray


def diffuse_entry_rule(mu_critical: np.ndarray, n: np.ndarray, n_outside: np.ndarray):
    """Directions and weights of Lambertian light entering the sample, shape (W, EXACT_NODES).

    Light of unit power outside arrives, by n² μ dμ = n_outside² μ0 dμ0, in the cone
    μ >= μc inside with weight (n/n_outside)² 2 μ dμ; the weights sum to 1 where n >= n_outside
    (the rule integrates the polynomial 2 μ dμ/ds exactly) and to (n/n_outside)² below it.
    """
    s, ws = gauss_rule(EXACT_NODES)
    span = (1.0 - mu_critical)[:, None]
    mu = mu_critical[:, None] + span * s[None, :] ** 2  # kink of the Fresnel transmission at μc
    jacobian = span * 2.0 * s[None, :] * ws[None, :]
    weight = ((n / n_outside) ** 2)[:, None] * 2.0 * mu * jacobian
    return mu, weight


def direct_light(optical_thickness: np.ndarray, mu: np.ndarray, weight: np.ndarray,
                 top: Face | tuple, bottom: Face | tuple) -> DirectLight:
    """The unscattered light for power ``weight`` arriving along directions ``mu``.

    Parameters
    ----------
    optical_thickness : ndarray (W, K) [dimensionless]
        τ of the sample, one column per case wanted (e.g. with and without delta-M scaling).
    mu, weight : ndarrays (W, M)
        Directions inside the sample and the incident power along each (summing to at most 1).
    top, bottom : Face, or its :func:`~phantomlab.transport.slab_boundary.face_response` along ``mu``
        The illuminated face and the far face (the responses, when the caller has them already).

    Returns
    -------
    DirectLight
    """
    top_in, top_out, top_t = face_response(top, mu) if isinstance(top, Face) else top
    bottom_in, _, bottom_t = face_response(bottom, mu) if isinstance(bottom, Face) else bottom
    specular = np.sum(weight * top_out, axis=1) + (1.0 - np.sum(weight, axis=1))
    attenuation = np.exp(-optical_thickness[:, :, None] / mu[:, None, :])  # (W, K, M)
    loop = 1.0 - (top_in * bottom_in)[:, None, :] * attenuation**2
    # A clear layer between two totally reflecting faces (loop = 0) is entered by nothing:
    # its face transmission is 0 too, so the 0/0 is 0.
    trapped = loop <= 1e-300
    safe_loop = np.where(trapped, 1.0, loop)
    entering = (weight * top_t)[:, None, :]
    through = np.where(trapped, 0.0, entering * attenuation * bottom_t[:, None, :] / safe_loop)
    back = np.where(trapped, 0.0, entering * attenuation**2 * (bottom_in * top_t)[:, None, :] / safe_loop)
    return DirectLight(specular=specular, reflected=np.sum(back, axis=2), transmitted=np.sum(through, axis=2))
