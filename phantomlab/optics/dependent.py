"""Dependent scattering of densely packed particles: the packing factor (layer 2).

When particles fill more than a few % of the volume their positions are correlated (they
cannot overlap), the waves they scatter interfere, and the bulk scattering grows less than in
proportion to their number.  For hard spheres the correction to independent scattering at
small scattering vector q is the structure factor S(q → 0), which for the Percus–Yevick
solution has a closed form in the volume fraction f (Wertheim 1963; Thiele 1963):

    W(f) = S(0) = (1 − f)⁴ / (1 + 2f)²

This is Twersky's packing factor for spheres (Twersky 1975), the one Aernouts et al. 2014
found to describe the bulk μs of Intralipid dilutions from 1 to 100 % v/v.  Applied to all
scattering angles it is the small-particle limit (size ≪ wavelength); for particles of the
order of the wavelength the true reduction is smaller (S(q) → 1 at large q), so the factor
is an upper estimate of the correction there.

The angular model (``"percus_yevick_angular"``) weighs each scattering direction by the
Percus–Yevick structure factor S(q) of hard spheres (Wertheim 1963; closed form of Ashcroft
& Lekner 1966) at its scattering vector q = 2k sin(θ/2), k the wavenumber in the medium:

    μs  = N ∫ S(q) dCsca/dΩ dΩ,        μs(1 − g) = N ∫ S(q) (1 − cos θ) dCsca/dΩ dΩ

with the Mie differential cross-section of the particles' size distribution
(:mod:`phantomlab.optics.mie_angular`).  The factors on μs and μs′ are these integrals over
their independent-scattering values; both tend to W(f) for small particles and to 1 as f → 0.
For a size distribution the structure factor is that of equal hard spheres with the same
number density and volume fraction (diameter (⟨d³⟩)^(1/3)): an approximation, exact only for
equal spheres.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError

__all__ = ["packing_factor_PercusYevick", "structure_factor_PercusYevick", "AngularScattering",
           "angular_scattering", "PACKING_MODELS", "ANGULAR_MODELS"]


def packing_factor_PercusYevick(*, volume_fraction) -> np.ndarray:
    """Percus–Yevick packing factor W(f) = (1 − f)⁴/(1 + 2f)² of hard spheres.

    Parameters
    ----------
    volume_fraction : float or array [fraction]
        Particle volume fraction f, 0 <= f < 0.64 (random close packing).

    Returns
    -------
    ndarray [dimensionless]
        Factor on μs and μs′ of independent scattering; 1 at f = 0, decreasing.

    Notes
    -----
    W is the isothermal compressibility of the hard-sphere fluid in units of the ideal gas,
    S(0) = ∂(βp)/∂ρ⁻¹, from the Percus–Yevick compressibility equation of state
    βp/ρ = (1 + f + f²)/(1 − f)³ (Thiele 1963, eq. 23; Wertheim 1963).

    References
    ----------
    1. Wertheim, M. S. (1963). Exact solution of the Percus-Yevick integral equation for hard
       spheres. Phys. Rev. Lett. 10(8), 321–323.
    2. Thiele, E. (1963). Equation of state for hard spheres. J. Chem. Phys. 39(2), 474–479.
    3. Twersky, V. (1975). Transparency of pair-correlated, random distributions of small
       scatterers, with applications to the cornea. J. Opt. Soc. Am. 65(5), 524–530.
    4. Aernouts, B. et al. (2014). Dependent scattering in Intralipid phantoms in the
       600–1850 nm range. Opt. Express 22(5), 6086–6098.
    """
    f = np.asarray(volume_fraction, dtype=float)
    if np.any(~np.isfinite(f)) or np.any(f < 0) or np.any(f >= 0.64):
        raise InputError(f"packing factor: volume fraction must lie in [0, 0.64), got {volume_fraction!r}")
    return (1.0 - f) ** 4 / (1.0 + 2.0 * f) ** 2


#: Volume fractions the hard-sphere closed forms accept: [0, random close packing).
_CLOSE_PACKING = 0.64
#: Below this q·d the structure factor is summed as a power series (the closed form cancels).
_SERIES_BELOW = 1.0
_SERIES_TERMS = 12


def _check_fraction(volume_fraction, what: str) -> np.ndarray:
    f = np.asarray(volume_fraction, dtype=float)
    if np.any(~np.isfinite(f)) or np.any(f < 0) or np.any(f >= _CLOSE_PACKING):
        raise InputError(f"{what}: volume fraction must lie in [0, 0.64), got {volume_fraction!r}")
    return f


def structure_factor_PercusYevick(*, q_diameter, volume_fraction) -> np.ndarray:
    """Structure factor S(q) of hard spheres in the Percus–Yevick approximation.

    Parameters
    ----------
    q_diameter : float or array [dimensionless]
        Scattering vector times the sphere diameter, Q = q d ≥ 0.
    volume_fraction : float or array [fraction]
        f, 0 <= f < 0.64; broadcast against ``q_diameter``.

    Returns
    -------
    ndarray [dimensionless]
        S = 1 / (1 − ρ ĉ(q)); S(0) = (1 − f)⁴/(1 + 2f)² (:func:`packing_factor_PercusYevick`),
        S → 1 at large Q and at f → 0.

    Notes
    -----
    The direct correlation function of the Percus–Yevick hard-sphere fluid is, for r < d,
    c(r) = −α − β (r/d) − γ (r/d)³ and 0 beyond (Wertheim 1963, eq. 7; Thiele 1963), with
    α = (1 + 2f)²/(1 − f)⁴, β = −6f (1 + f/2)²/(1 − f)⁴, γ = f α / 2.  Its Fourier transform
    gives (Ashcroft & Lekner 1966, eq. 8; in the form of Kinning & Thomas 1984, eq. A5)

        −ρ ĉ = 24 f G(Q)/Q,
        G(Q) = α (sin Q − Q cos Q)/Q² + β (2Q sin Q + (2 − Q²) cos Q − 2)/Q³
               + γ (−Q⁴ cos Q + 4[(3Q² − 6) cos Q + (Q³ − 6Q) sin Q + 6])/Q⁵.

    Below Q = 1 the same transform is summed as its power series,
    G/Q = Σ_j (−1)^j Q^{2j}/(2j + 1)! · (α/(2j + 3) + β/(2j + 4) + γ/(2j + 6)), because the closed
    form loses digits to cancellation there.

    References
    ----------
    1. Wertheim, M. S. (1963). Exact solution of the Percus-Yevick integral equation for hard
       spheres. Phys. Rev. Lett. 10(8), 321–323.
    2. Ashcroft, N. W. & Lekner, J. (1966). Structure and resistivity of liquid metals. Phys.
       Rev. 145(1), 83–90.
    3. Kinning, D. J. & Thomas, E. L. (1984). Hard-sphere interactions between spherical
       domains in diblock copolymers. Macromolecules 17(9), 1712–1718.
    """
    f = _check_fraction(volume_fraction, "structure factor")
    q = np.asarray(q_diameter, dtype=float)
    if np.any(~np.isfinite(q)) or np.any(q < 0):
        raise InputError(f"structure factor: q·d must be finite and >= 0, got {q_diameter!r}")
    q, f = np.broadcast_arrays(q, f)
    alpha = (1 + 2 * f) ** 2 / (1 - f) ** 4
    beta = -6 * f * (1 + f / 2) ** 2 / (1 - f) ** 4
    gamma = f * alpha / 2
    small = q < _SERIES_BELOW
    g_over_q = np.empty(q.shape)
    qs = q[small]
    total = np.zeros(qs.shape)
    term = np.ones(qs.shape)  # (−1)^j Q^{2j}/(2j+1)!
    a_s, b_s, c_s = alpha[small], beta[small], gamma[small]
    for j in range(_SERIES_TERMS):
        total += term * (a_s / (2 * j + 3) + b_s / (2 * j + 4) + c_s / (2 * j + 6))
        term = -term * qs**2 / ((2 * j + 2) * (2 * j + 3))
    g_over_q[small] = total
    ql = q[~small]
    s, c = np.sin(ql), np.cos(ql)
    g = (alpha[~small] * (s - ql * c) / ql**2
         + beta[~small] * (2 * ql * s + (2 - ql**2) * c - 2) / ql**3
         + gamma[~small] * (-(ql**4) * c + 4 * ((3 * ql**2 - 6) * c + (ql**3 - 6 * ql) * s + 6)) / ql**5)
    g_over_q[~small] = g / ql
    return 1.0 / (1.0 + 24.0 * f * g_over_q)


@dataclass(frozen=True)
class AngularScattering:
    """What the angular dependent-scattering model needs of one stock's particles.

    Attributes
    ----------
    mu, weights : ndarray (A,)
        Gauss–Legendre nodes in cos θ and their weights.
    cross_section_um2_per_sr : ndarray (W, A) [µm²/sr]
        Mean differential scattering cross-section ⟨dCsca/dΩ⟩ of the size distribution.
    q_diameter : ndarray (W, A) [dimensionless]
        q d at each wavelength and angle, d the equivalent hard-sphere diameter (⟨d³⟩)^(1/3).
    """

    mu: np.ndarray
    weights: np.ndarray
    cross_section_um2_per_sr: np.ndarray
    q_diameter: np.ndarray

    def factors(self, *, volume_fraction: float) -> tuple[np.ndarray, np.ndarray]:
        """Factors on μs and on μs′ at particle volume fraction f in the batch.

        Returns
        -------
        mus_factor, musp_factor : ndarray (W,) [dimensionless]
            ∫ S(q) dCsca/dΩ dΩ over ∫ dCsca/dΩ dΩ, and the same with the weight (1 − cos θ).
        """
        f = float(_check_fraction(volume_fraction, "angular packing factor"))
        structure = structure_factor_PercusYevick(q_diameter=self.q_diameter, volume_fraction=f)
        weighted = self.cross_section_um2_per_sr * self.weights
        transport = weighted * (1.0 - self.mu)
        plain_mus, plain_musp = weighted.sum(axis=-1), transport.sum(axis=-1)
        mus = np.divide((weighted * structure).sum(axis=-1), plain_mus, out=np.ones_like(plain_mus),
                        where=plain_mus > 0)
        musp = np.divide((transport * structure).sum(axis=-1), plain_musp, out=np.ones_like(plain_musp),
                         where=plain_musp > 0)
        return mus, musp


def angular_scattering(*, wavelength_nm, particle_index, matrix_index, diameters_um, number_weights
                       ) -> AngularScattering:
    """The angular data of a sphere size distribution for the ``percus_yevick_angular`` model.

    Parameters
    ----------
    wavelength_nm : array (W,) [nm]
    particle_index : complex or array (W,)
        n − i k of the particles.
    matrix_index : float or array (W,)
        Real index of the medium.
    diameters_um : array (D,) [µm]
    number_weights : array (D,)

    Returns
    -------
    AngularScattering
    """
    from phantomlab.optics.mie_angular import angle_grid, ensemble_differential_cross_section

    wavelength = np.atleast_1d(np.asarray(wavelength_nm, dtype=float))
    n_matrix = np.broadcast_to(np.asarray(matrix_index, dtype=float), wavelength.shape)
    d = np.atleast_1d(np.asarray(diameters_um, dtype=float))
    w = np.atleast_1d(np.asarray(number_weights, dtype=float))
    k_per_um = 2.0 * np.pi * n_matrix / (wavelength / 1000.0)
    mu, weights = angle_grid(float(0.5 * d.max() * k_per_um.max()))
    cross_section = ensemble_differential_cross_section(
        wavelength_nm=wavelength, particle_index=particle_index, matrix_index=n_matrix,
        diameters_um=d, number_weights=w, mu=mu)
    hard_sphere_um = float(np.cbrt(np.sum(w * d**3) / np.sum(w)))
    q_diameter = k_per_um[:, None] * np.sqrt(2.0 * (1.0 - mu))[None, :] * hard_sphere_um
    return AngularScattering(mu, weights, cross_section, q_diameter)


#: Dependent-scattering models by name (as in recipe files); "none" is independent scattering.
#: Each gives the small-q packing factor W(f); the angular models use it for stocks without a
#: Mie size distribution (emulsions, absorbers) and S(q) for the rest.
PACKING_MODELS = {
    "none": None,
    "percus_yevick": packing_factor_PercusYevick,
    "percus_yevick_angular": packing_factor_PercusYevick,
}

#: The models that weigh each scattering angle by S(q) (:class:`AngularScattering`).
ANGULAR_MODELS = frozenset({"percus_yevick_angular"})
