"""Uncertainty of the predicted optics: stock potencies and dispensing errors (layer 3).

First-order (linear) propagation (JCGM 100:2008, *Guide to the expression of uncertainty in
measurement*, eq. 10), all inputs independent:

* potency ``p_i`` with SD ``σ_p,i``: ∂c/∂p_i = f_i c_i⁰ (c_i⁰ the stock's intrinsic μa or μs′
  at potency 1);
* the amount of each component actually delivered, ``D_j`` (stocks and matrix), with relative
  SD ``σ_j``: the mix is c = Σ_j D_j c_j / Σ_j D_j, so ∂c/∂ln D_j = f_j (c_j − c).

Dispensing errors (:func:`amount_relative_sd`): a pipetted amount has the lab's pipette
relative error (taken as one standard deviation); a weighed amount is two readings of a
digital balance (tare and gross), each rounded to the resolution ``d``, a uniform error of SD
``d/√12`` (JCGM 100:2008, 4.3.7), so SD ``d/√6``.  A pre-diluted dose adds, per step of
factor r = a/(a+b), the error of the factor: d ln r = (1 − r)(d ln a − d ln b).
"""

from __future__ import annotations

import math

import numpy as np

from phantomlab.recipe.mixmodel import IntrinsicTable, mix_coefficients

__all__ = ["amount_relative_sd", "dose_relative_sd", "propagate_sd"]


def amount_relative_sd(amount: float, *, by: str, pipette_rel_error: float,
                       balance_resolution_g: float) -> float:
    """Relative SD of one dispensed amount.

    Parameters
    ----------
    amount : float [mL when ``by="pipette"``, g when ``by="balance"``]
    by : str
        ``"pipette"`` or ``"balance"``.
    pipette_rel_error : float [fraction, one SD]
    balance_resolution_g : float [g]

    Returns
    -------
    float [fraction]
    """
    if amount <= 0:
        return 0.0
    if by == "pipette":
        return float(pipette_rel_error)
    return float(balance_resolution_g / math.sqrt(6.0) / amount)  # two readings, d/sqrt(12) each


def dose_relative_sd(*, dispense_amount: float, steps, by: str, pipette_rel_error: float,
                     balance_resolution_g: float) -> float:
    """Relative SD of the undiluted stock delivered, through any pre-dilution steps.

    Parameters
    ----------
    dispense_amount : float [mL or g]
        Amount of stock (or of the last dilution) put into the batch.
    steps : sequence of DilutionStep
    by, pipette_rel_error, balance_resolution_g
        As :func:`amount_relative_sd`.

    Returns
    -------
    float [fraction]
    """
    kwargs = dict(by=by, pipette_rel_error=pipette_rel_error, balance_resolution_g=balance_resolution_g)
    variance = amount_relative_sd(dispense_amount, **kwargs) ** 2
    for step in steps:
        r = step.factor
        variance += (1.0 - r) ** 2 * (
            amount_relative_sd(step.source_amount, **kwargs) ** 2
            + amount_relative_sd(step.diluent_amount, **kwargs) ** 2
        )
    return math.sqrt(variance)


def propagate_sd(
    table: IntrinsicTable,
    *,
    volume_fractions,
    potencies,
    potency_sd,
    dose_rel_sd,
    matrix_rel_sd: float = 0.0,
    potency_sd_by_wavelength=None,
) -> dict[str, np.ndarray]:
    """SD of the predicted μa and μs′ at every wavelength of ``table``.

    Parameters
    ----------
    table : IntrinsicTable
    volume_fractions : array (S,) [fraction]
    potencies, potency_sd : array (S,) [dimensionless]
    dose_rel_sd : array (S,) [fraction]
        Relative SD of each delivered dose (:func:`dose_relative_sd`).
    matrix_rel_sd : float [fraction]
        Relative SD of the matrix amount.
    potency_sd_by_wavelength : dict, optional
        ``{"mua": (S, W), "musp": (S, W)}``: the SD of each stock's effective potency at
        every wavelength, for a lot with a spectral correction
        (:func:`phantomlab.recipe.spectral_potency.potency_sd_by_wavelength`); replaces
        ``potency_sd`` for that quantity.

    Returns
    -------
    dict
        ``mua_sd_per_mm``, ``musp_sd_per_mm`` : ndarray (W,) [1/mm].
    """
    f = np.asarray(volume_fractions, dtype=float)
    p = np.asarray(potencies, dtype=float)
    sp = np.asarray(potency_sd, dtype=float)
    sd = np.asarray(dose_rel_sd, dtype=float)
    mix = mix_coefficients(table, volume_fractions=f, potencies=p)
    f_matrix = 1.0 - f.sum()
    out = {}
    _, musp_factor = table.scattering_factors(f)  # dependent scattering; its own change with f is left out
    for name, scaled, fixed, matrix_value in (
        ("mua", table.mua_ingredient_per_mm, table.mua_carrier_per_mm, table.matrix_mua_per_mm),
        ("musp", musp_factor * table.musp_per_mm, 0.0, np.zeros_like(table.matrix_mua_per_mm)),
    ):
        c_mix = mix[f"{name}_per_mm"]
        spread = sp[:, None] if potency_sd_by_wavelength is None else potency_sd_by_wavelength[name]
        by_potency = f[:, None] * spread * scaled  # (S, W): the potency scales the ingredient only
        by_dose = (f * sd)[:, None] * (p[:, None] * scaled + fixed - c_mix[None, :])
        by_matrix = f_matrix * matrix_rel_sd * (matrix_value - c_mix)
        variance = (by_potency**2).sum(axis=0) + (by_dose**2).sum(axis=0) + by_matrix**2
        out[f"{name}_sd_per_mm"] = np.sqrt(variance)
    return out
