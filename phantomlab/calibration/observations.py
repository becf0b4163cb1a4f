"""From a batch's record to the inputs of the potency update (layer 3).

A characterised batch gives: the recipe it was made from, the volume fractions actually
dispensed, the lots used, and one or more fits of its measurements.  This module turns that
into :class:`~phantomlab.calibration.potency.BatchObservation` objects (intrinsic optics
at potency 1 from the recipe's stocks on the fit's wavelength grid) and the
:class:`~phantomlab.calibration.potency.PotencyPrior` of every lot.  No database here: the
command layer reads the batch log and calls these functions.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

import numpy as np

from phantomlab.calibration.potency import BatchObservation, PotencyPrior
from phantomlab.errors import InputError

__all__ = ["observation_from_fit", "volume_fractions_from_amounts", "priors_from_recipe", "fit_arrays",
           "stock_constraint"]


def fit_arrays(fit) -> dict[str, np.ndarray]:
    """wavelength, mua, musp and the (W, 2, 2) covariance of a FitResult or its JSON object."""
    if hasattr(fit, "to_json"):
        return {"wavelength_nm": np.asarray(fit.wavelength_nm, float),
                "mua_per_mm": np.asarray(fit.mua_per_mm, float),
                "musp_per_mm": np.asarray(fit.musp_per_mm, float),
                "covariance": np.asarray(fit.covariance, float)}
    try:
        wavelength = np.asarray(fit["wavelength_nm"], float)
        mua = np.asarray(fit["mua_per_mm"], float)
        musp = np.asarray(fit["musp_per_mm"], float)
    except (KeyError, TypeError, ValueError):
        raise InputError("a fit object needs wavelength_nm, mua_per_mm and musp_per_mm") from None

    def numbers(values):
        return np.array([np.nan if v is None else float(v) for v in values], float)

    if fit.get("covariance_mua_musp") is not None:
        cov = np.array([[[np.inf if v is None else v for v in row] for row in block]
                        for block in fit["covariance_mua_musp"]], float)
    else:
        sa = numbers(fit.get("mua_sd_per_mm", [None] * mua.size))
        ss = numbers(fit.get("musp_sd_per_mm", [None] * mua.size))
        cov = np.zeros((mua.size, 2, 2))
        cov[:, 0, 0] = np.where(np.isfinite(sa), sa**2, np.inf)
        cov[:, 1, 1] = np.where(np.isfinite(ss), ss**2, np.inf)
    return {"wavelength_nm": wavelength, "mua_per_mm": mua, "musp_per_mm": musp, "covariance": cov}


def volume_fractions_from_amounts(recipe, *, amounts: Sequence[Mapping[str, Any]], batch_volume_ml: float) -> dict[str, float]:
    """Volume fractions of the undiluted stocks from amounts dispensed.

    Parameters
    ----------
    recipe : phantomlab.recipe.Recipe
    amounts : sequence of mappings
        ``{"stock": KEY, "volume_ml": V}`` or ``{"stock": KEY, "mass_g": M}`` (mass through
        the stock's density), of the undiluted stock; the matrix may be listed and is skipped.
    batch_volume_ml : float [mL]
        Final volume of the batch.

    Returns
    -------
    dict of str to float
    """
    if not batch_volume_ml > 0:
        raise InputError(f"batch volume {batch_volume_ml!r} mL; accepted: > 0")
    fractions: dict[str, float] = {}
    for row in amounts:
        key = str(row.get("stock"))
        if key == recipe.matrix_key:
            continue
        if key not in recipe.stock_keys:
            raise InputError(f"amount for {key!r}, not a stock of recipe {recipe.name!r}")
        if row.get("volume_ml") is not None:
            volume = float(row["volume_ml"])
        elif row.get("mass_g") is not None:
            volume = float(row["mass_g"]) / recipe.stock(key).density_g_per_ml
        else:
            raise InputError(f"amount for {key!r} has neither volume_ml nor mass_g")
        if not np.isfinite(volume) or volume < 0:
            raise InputError(f"amount for {key!r}: {volume!r} mL; accepted: >= 0")
        fractions[key] = fractions.get(key, 0.0) + volume / batch_volume_ml
    return fractions


def priors_from_recipe(recipe, *, lots: Mapping[str, str | None] | None = None,
                       overrides: Mapping[tuple, tuple[float, float]] | None = None) -> list[PotencyPrior]:
    """The stock file's potency and potency_sd of every added stock of a recipe, per lot.

    ``lots`` names the lot a batch used (default: the shelf's); ``overrides`` maps
    (stock, lot) to a (potency, sd) prior that replaces the stock file's (e.g. the lot's
    snapshot in the batch log).
    """
    lots = dict(lots or {})
    overrides = dict(overrides or {})
    priors = []
    for key in recipe.stock_keys:
        stock = recipe.stock(key)
        lot = lots.get(key, stock.lot)
        lot = None if lot in (None, "") else str(lot)
        potency, sd = overrides.get((key, lot), (stock.potency, stock.potency_sd))
        priors.append(PotencyPrior(stock=key, lot=lot, potency=float(potency), potency_sd=float(sd)))
    return priors


def observation_from_fit(
    recipe,
    *,
    batch_id: str,
    volume_fractions: Mapping[str, float],
    fit,
    lots: Mapping[str, str | None] | None = None,
    dispensing_rel_sd: float | None = None,
    measurement_id: int | None = None,
) -> BatchObservation:
    """One batch's fitted optics as a linear observation of its stocks' potencies.

    Parameters
    ----------
    recipe : phantomlab.recipe.Recipe
        The recipe the batch was made from (its shelf gives the intrinsic optics).
    batch_id : str
    volume_fractions : mapping of stock key to fraction
        As dispensed (stocks left out: 0).
    fit : FitResult or the fit JSON object
    lots : mapping of stock key to lot, optional
        Default: the lots on the recipe's shelf.
    dispensing_rel_sd : float, optional
        Relative SD of each dose (default: the recipe's pipette_rel_error, else 0.01); one
        error per stock and batch, common to every wavelength and measurement of the batch.
    measurement_id : int, optional
        The stored measurement the fit belongs to.

    Returns
    -------
    BatchObservation
        On the wavelengths of the fit inside every stock's spectrum.
    """
    from phantomlab.recipe.plan import intrinsic_table  # layer 3, the recipe's own optics

    arrays = fit_arrays(fit)
    unknown = sorted(set(volume_fractions) - set(recipe.stock_keys))
    if unknown:
        raise InputError(f"batch {batch_id}: {unknown[0]!r} is not a stock of recipe {recipe.name!r}")
    table = intrinsic_table(recipe, arrays["wavelength_nm"])
    fractions = np.array([float(volume_fractions.get(k, 0.0)) for k in table.stock_keys])
    _, musp_factor = table.scattering_factors(fractions)  # dependent scattering of this batch
    lots = dict(lots or {})
    stocks = []
    for key in table.stock_keys:
        lot = lots.get(key, recipe.stock(key).lot)
        stocks.append((key, None if lot in (None, "") else str(lot)))
    if dispensing_rel_sd is None:
        dispensing_rel_sd = float(getattr(recipe.limits, "pipette_rel_error", 0.01) or 0.01)
    return BatchObservation(
        batch_id=str(batch_id), stocks=tuple(stocks), volume_fractions=fractions,
        wavelength_nm=table.wavelength_nm, intrinsic_mua_per_mm=table.mua_ingredient_per_mm,
        intrinsic_musp_per_mm=musp_factor * table.musp_per_mm, matrix_mua_per_mm=table.matrix_mua_per_mm,
        carrier_mua_per_mm=table.mua_carrier_per_mm,
        mua_per_mm=arrays["mua_per_mm"], musp_per_mm=arrays["musp_per_mm"],
        covariance=arrays["covariance"], dispensing_rel_sd=dispensing_rel_sd, measurement_id=measurement_id,
    )


def stock_constraint(recipe, *, musp_power_law: bool = False, reference_nm: float = 500.0):
    """A spectral constraint "μa = matrix + Σ c_k ε_k" from a recipe's stocks, for any grid.

    Returns a function ``wavelength_nm -> SpectralConstraint`` (the fit calls it with the
    measurement's wavelengths): the basis ε_k is each added stock's intrinsic absorption at
    potency 1, the offset the matrix's own; the fitted amounts c_k are then volume fraction ×
    potency of each stock.
    """
    from phantomlab.calibration.spectral import SpectralConstraint
    from phantomlab.recipe.plan import intrinsic_table

    def build(wavelength_nm) -> SpectralConstraint:
        table = intrinsic_table(recipe, wavelength_nm)
        return SpectralConstraint(musp_power_law=musp_power_law, reference_nm=reference_nm,
                                  mua_basis_per_mm=table.mua_per_mm - table.matrix_mua_per_mm[None, :],
                                  mua_basis_names=table.stock_keys, mua_offset_per_mm=table.matrix_mua_per_mm)

    return build
