"""The linear mixing model the dose solver works on (layer 3).

A batch is the matrix plus stocks at volume fractions ``f_i`` of the *undiluted* stock in the
final mix; the matrix fills the rest, ``1 − Σ f_i`` (the additions displace matrix, the final
volume is fixed).  With each stock's intrinsic optics per unit volume fraction at potency 1
(``a_i`` absorption of the ingredient, ``c_i`` absorption of its carrier water or solvent,
``s_i`` scattering, ``g_i`` anisotropy) and its potency ``p_i`` (docs/design.md: the potency
scales the ingredient, not the carrier), the mixing rule of the optics layer
(``phantomlab.optics.mix_optics``, independent scattering) reads

    μa   = (1 − Σ f_i) μa_m + Σ f_i (p_i a_i + c_i)  =  μa_m + Σ f_i (p_i a_i + c_i − μa_m)
    μs   = W Σ f_i p_i s_i
    μs′  = W Σ f_i p_i s_i (1 − g_i)
    μs·g = W Σ f_i p_i s_i g_i

with W = 1 (independent scattering, the default).  Every line is then linear in the doses
``f``: the solver is a linear least-squares problem.  With a dependent-scattering model
(``packing = "percus_yevick"``) W = W(φ) is the packing factor of the particle volume
fraction φ = Σ f_i φ_i of the batch (:mod:`phantomlab.optics.dependent`); the solver then
iterates on W.  The angular model (``packing = "percus_yevick_angular"``) gives each stock
with a Mie size distribution its own factors at each wavelength, F_i(φ, λ) on μs and
F′_i(φ, λ) on μs′ (:class:`~phantomlab.optics.dependent.AngularScattering`); the lines read

    μs   = Σ f_i p_i s_i F_i,    μs′ = Σ f_i p_i s_i (1 − g_i) F′_i,    μs·g = μs − μs′

and the other stocks take F = F′ = W(φ).

References
----------
van de Hulst H C 1957, *Light Scattering by Small Particles* (Wiley), ch. 4: additivity of
    extinction and scattering of independent particles, used for the sums above.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from phantomlab.errors import InputError
from phantomlab.optics.dependent import ANGULAR_MODELS, PACKING_MODELS

__all__ = ["IntrinsicTable", "design_matrices", "mix_coefficients"]


@dataclass(frozen=True)
class IntrinsicTable:
    """Intrinsic optics of the stocks of one recipe on one wavelength grid, at potency 1.

    Attributes
    ----------
    wavelength_nm : ndarray (W,) [nm]
    stock_keys : tuple of str (S,)
        The added stocks, in the order of the rows below (the matrix is not among them).
    mua_per_mm, mus_per_mm : ndarray (S, W) [1/mm]
        Per unit volume fraction of the undiluted stock in the final mix, potency 1
        (``mua_per_mm`` includes the carrier part below).
    g : ndarray (S, W) [dimensionless]
    matrix_mua_per_mm : ndarray (W,) [1/mm]
        The matrix's own absorption.
    solids_volume_fraction : ndarray (S,) [fraction]
        Particle volume fraction inside each undiluted stock (0 for absorbers).
    density_g_per_ml : ndarray (S,) [g/mL]
    matrix_density_g_per_ml : float [g/mL]
    mua_carrier_per_mm : ndarray (S, W) [1/mm] or None
        The part of ``mua_per_mm`` that the potency does not scale (carrier water, solvent);
        None means 0.
    packing : str
        Dependent-scattering model: ``"none"`` (independent scattering) or a key of
        :data:`phantomlab.optics.dependent.PACKING_MODELS`.
    angular : tuple or None
        For the angular models: per stock its
        :class:`~phantomlab.optics.dependent.AngularScattering`, or None for a stock without
        a Mie size distribution.
    """

    wavelength_nm: np.ndarray
    stock_keys: tuple
    mua_per_mm: np.ndarray
    mus_per_mm: np.ndarray
    g: np.ndarray
    matrix_mua_per_mm: np.ndarray
    solids_volume_fraction: np.ndarray
    density_g_per_ml: np.ndarray
    matrix_density_g_per_ml: float = 1.0
    mua_carrier_per_mm: np.ndarray | None = None
    packing: str = "none"
    angular: tuple | None = None

    def __post_init__(self) -> None:
        wavelength = np.atleast_1d(np.asarray(self.wavelength_nm, dtype=float))
        count = len(self.stock_keys)
        shape = (count, wavelength.size)
        object.__setattr__(self, "wavelength_nm", wavelength)
        object.__setattr__(self, "stock_keys", tuple(self.stock_keys))
        for name in ("mua_per_mm", "mus_per_mm", "g"):
            values = np.asarray(getattr(self, name), dtype=float).reshape(shape)
            object.__setattr__(self, name, values)
        carrier = 0.0 if self.mua_carrier_per_mm is None else self.mua_carrier_per_mm
        object.__setattr__(self, "mua_carrier_per_mm",
                           np.broadcast_to(np.asarray(carrier, dtype=float), shape).copy())
        if self.packing not in PACKING_MODELS:
            raise InputError(f"unknown dependent-scattering model {self.packing!r}; "
                             f"known: {', '.join(PACKING_MODELS)}")
        if self.angular is not None:
            if len(self.angular) != count:
                raise InputError("intrinsic optics: angular scattering must be given for every stock (or None)")
            object.__setattr__(self, "angular", tuple(self.angular))
        object.__setattr__(
            self,
            "matrix_mua_per_mm",
            np.broadcast_to(np.asarray(self.matrix_mua_per_mm, float), wavelength.shape).copy(),
        )
        for name in ("solids_volume_fraction", "density_g_per_ml"):
            values = np.broadcast_to(np.asarray(getattr(self, name), float), (count,)).copy()
            object.__setattr__(self, name, values)
        arrays = (self.mua_per_mm, self.mus_per_mm, self.matrix_mua_per_mm)
        if any(np.any(~np.isfinite(a)) or np.any(a < 0) for a in arrays):
            raise InputError("intrinsic optics: mua and mus must be finite and >= 0 [1/mm]")
        if np.any(~np.isfinite(self.g)) or np.any(np.abs(self.g) >= 1):
            raise InputError("intrinsic optics: g must be finite and inside (-1, 1)")
        if np.any(self.density_g_per_ml <= 0) or self.matrix_density_g_per_ml <= 0:
            raise InputError("intrinsic optics: densities must be > 0 g/mL")

    @property
    def musp_per_mm(self) -> np.ndarray:
        """Intrinsic reduced scattering s_i (1 − g_i) at potency 1 [1/mm], shape (S, W)."""
        return self.mus_per_mm * (1.0 - self.g)

    @property
    def mua_ingredient_per_mm(self) -> np.ndarray:
        """The potency-scaled part of the intrinsic μa at potency 1 [1/mm], shape (S, W)."""
        return self.mua_per_mm - self.mua_carrier_per_mm

    def mua_at(self, potencies) -> np.ndarray:
        """Intrinsic μa of each stock at the given potencies, p a_i + c_i [1/mm], shape (S, W)."""
        p = np.asarray(potencies, dtype=float)[:, None]
        return p * self.mua_ingredient_per_mm + self.mua_carrier_per_mm

    def packing_factor(self, volume_fractions) -> np.ndarray:
        """Small-q packing factor W for doses ``volume_fractions`` (..., S).

        1 for independent scattering; else the packing model's W(φ), φ = Σ f_i φ_i.
        """
        f = np.asarray(volume_fractions, dtype=float)
        phi = f @ self.solids_volume_fraction
        model = PACKING_MODELS[self.packing]
        if model is None:
            return np.ones_like(phi)
        return model(volume_fraction=np.clip(phi, 0.0, 0.63))

    def scattering_factors(self, volume_fractions) -> tuple[np.ndarray, np.ndarray]:
        """Factors F on each stock's μs and F′ on its μs′ for doses ``volume_fractions``.

        Parameters
        ----------
        volume_fractions : array (..., S) [fraction]

        Returns
        -------
        mus_factor, musp_factor : ndarray (..., S, W) [dimensionless]
            1 for independent scattering; W(φ) for every stock with the small-q model; with
            an angular model, a stock's own S(q)-weighted factors where it has angular data.
        """
        f = np.asarray(volume_fractions, dtype=float)
        phi = np.clip(f @ self.solids_volume_fraction, 0.0, 0.63)
        shape = phi.shape + self.mus_per_mm.shape
        small_q = np.asarray(self.packing_factor(f), dtype=float)
        mus_factor = np.broadcast_to(small_q[..., None, None], shape).copy()
        musp_factor = mus_factor.copy()
        if self.packing in ANGULAR_MODELS and self.angular is not None:
            for index, angular in enumerate(self.angular):
                if angular is None:
                    continue
                for sample in np.ndindex(phi.shape):
                    mus_factor[sample + (index,)], musp_factor[sample + (index,)] = angular.factors(
                        volume_fraction=float(phi[sample]))
        return mus_factor, musp_factor

    def index_of(self, key: str) -> int:
        try:
            return self.stock_keys.index(key)
        except ValueError:
            raise InputError(
                f"stock {key!r} is not in this recipe; its stocks: {', '.join(self.stock_keys)}"
            ) from None


def design_matrices(table: IntrinsicTable, *, potencies, factors=None) -> dict[str, np.ndarray]:
    """Columns of the linear model, one per stock, for given potencies.

    Parameters
    ----------
    table : IntrinsicTable
    potencies : array (S,) [dimensionless]
    factors : (mus_factor, musp_factor) or None
        Dependent-scattering factors on each stock's μs and μs′ (scalars or (S, W) arrays,
        :meth:`IntrinsicTable.scattering_factors`); None is independent scattering.  The
        solver passes the factors of its current doses when the table has a packing model.

    Returns
    -------
    dict of ndarray (W, S)
        ``mua`` (μa − μa_m per unit f, displacement included), ``mus``, ``musp`` and ``gmus``
        (μs·g per unit f) [1/mm].
    """
    p = np.asarray(potencies, dtype=float)[:, None]
    mus_factor, musp_factor = (1.0, 1.0) if factors is None else factors
    mus = p * mus_factor * table.mus_per_mm
    musp = p * musp_factor * table.musp_per_mm
    return {
        "mua": (table.mua_at(potencies) - table.matrix_mua_per_mm[None, :]).T,
        "mus": mus.T,
        "musp": musp.T,
        "gmus": (mus - musp).T,
    }


def mix_coefficients(table: IntrinsicTable, *, volume_fractions, potencies) -> dict[str, np.ndarray]:
    """μa, μs, μs′ and g of the mix; vectorised over leading sample dimensions.

    Parameters
    ----------
    table : IntrinsicTable
    volume_fractions : array (..., S) [fraction]
        Volume fraction of each undiluted stock in the final mix.
    potencies : array (..., S) [dimensionless]

    Returns
    -------
    dict of ndarray (..., W)
        ``mua_per_mm``, ``mus_per_mm``, ``musp_per_mm`` [1/mm] and ``g`` (0 where μs = 0).
    """
    f = np.asarray(volume_fractions, dtype=float)
    p = np.asarray(potencies, dtype=float)
    fp = f * p
    matrix_fraction = 1.0 - f.sum(axis=-1, keepdims=True)
    mua = matrix_fraction * table.matrix_mua_per_mm + fp @ table.mua_ingredient_per_mm + f @ table.mua_carrier_per_mm
    mus_factor, musp_factor = table.scattering_factors(f)
    mus = np.einsum("...s,...sw->...w", fp, mus_factor * table.mus_per_mm)
    musp = np.einsum("...s,...sw->...w", fp, musp_factor * table.musp_per_mm)
    gmus = mus - musp
    g = np.divide(gmus, mus, out=np.zeros_like(mus), where=mus > 0)
    return {"mua_per_mm": mua, "mus_per_mm": mus, "musp_per_mm": musp, "g": g}
