"""The stocks of a recipe as unmixing chromophores (layer 3): absorber columns, the blood stock's dose.

An **absorber stock** enters the unmixing as a chromophore named by its stock key, its amount
a volume fraction f of the *undiluted* stock in the mix: it adds f · μa_ingredient(λ), the
stock's intrinsic absorption per unit volume fraction (:func:`phantomlab.optics.intrinsic_optics`,
with the potency of its stock file).  The intrinsic μa of an absorber is the potency-scaled
ingredient plus its solvent (``mua_carrier_per_mm``: what the spectrum was blanked against);
the solvent is treated so that nothing is counted twice:

* solvent **water**: left out of the stock's column.  The stock's water is water like the
  rest of the mix's, so the ``water`` chromophore's fraction is then *all* the water in the
  mix (the stock's solvent included); without ``water`` among the chromophores no water is
  modelled at all, the stock's as little as the matrix's;
* solvent **ethanol** or a **given solvent spectrum**: kept in the column (no other
  chromophore holds it, and it comes in proportion to the stock's volume);
* no solvent: the column is the ingredient alone.

A **blood stock** is not a column: its haemoglobin is unmixed as ``hbo2``, ``hb`` (and
``methb``, ``cohb`` if asked), whose sum is the total haemoglobin T [µM tetramer]; its volume
fraction follows as f = T / (p · c) with c the stock's haemoglobin [µM tetramer, 64 500
g/mol] and p its potency (the relation the design uses, :func:`phantomlab.recipe.oxygenation.blood_fraction`),
SD(f) = SD(T) / (p · c).  The blood's own water is again part of the ``water`` fraction.

Other kinds (matrix, spheres, powder, emulsion) are not chromophores: naming one is refused
in one line (an emulsion's oil is the ``lipid`` chromophore).
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from phantomlab.errors import InputError

__all__ = ["absorber_keys", "check_stock_chromophore", "with_recipe_absorbers", "absorber_column",
           "blood_stock_tetramer_um"]


def absorber_keys(stocks: Mapping) -> tuple[str, ...]:
    """Keys of the absorber stocks among ``stocks`` (in their order)."""
    return tuple(key for key, stock in stocks.items() if stock.kind == "absorber")


def check_stock_chromophore(key: str, stocks: Mapping) -> None:
    """Refuse in one line a stock key that cannot be a chromophore (only absorber stocks can)."""
    stock = stocks[key]
    if stock.kind == "absorber":
        return
    absorbers = ", ".join(absorber_keys(stocks)) or "none in this recipe"
    if stock.kind == "blood":
        raise InputError(
            f"chromophores: {key} is a blood stock; its haemoglobin is unmixed as hbo2,hb and its volume "
            "fraction reported from the total (stock_fractions); leave it out of --chromophores"
        )
    hint = " (an emulsion's oil is the lipid chromophore)" if stock.kind == "emulsion" else ""
    article = "an" if stock.kind[:1] in "aeiou" else "a"
    raise InputError(
        f"chromophores: {key} is {article} {stock.kind} stock, not an absorber{hint}; "
        f"absorber stocks of the recipe: {absorbers}"
    )


def with_recipe_absorbers(names, stocks: Mapping) -> tuple[str, ...]:
    """The chromophores asked, plus every absorber stock of the recipe when none was named.

    Naming some stock keys in ``names`` unmixes those only; naming none adds all the
    recipe's absorber stocks (in the recipe's order) after the names given.  A named
    chromophore (``water``, …) is never a stock key, even when a stock is keyed so (the
    demo matrix is keyed ``water``).
    """
    from phantomlab.calibration.unmix import UNMIX_CHROMOPHORES

    names = tuple(names)
    if any(name in stocks and name not in UNMIX_CHROMOPHORES for name in names):
        return names
    clash = [key for key in absorber_keys(stocks) if key in UNMIX_CHROMOPHORES]
    if clash:
        raise InputError(f"recipe: absorber stock {clash[0]} has the name of a chromophore; "
                         "rename it in the stock file to unmix it")
    return names + absorber_keys(stocks)


def absorber_column(stock, *, wavelength_nm) -> np.ndarray:
    """μa added per unit volume fraction of an absorber stock [1/mm], its water solvent left out.

    Parameters
    ----------
    stock : phantomlab.materials.Stock
        An absorber stock (its stock file's potency applies).
    wavelength_nm : array [nm]
        Inside the stock's spectrum (refused outside it, one line).

    Returns
    -------
    ndarray [1/mm per volume fraction]
        ``mua_per_mm`` of :func:`phantomlab.optics.intrinsic_optics` minus its carrier when the
        stock's solvent is water (the water chromophore holds it); with it otherwise.
    """
    from phantomlab.optics.intrinsic import intrinsic_optics  # layer 2

    optics = intrinsic_optics(stock, wavelength_nm=wavelength_nm, matrix=None)
    if stock.spec.solvent == "water":
        return np.asarray(optics.mua_per_mm - optics.mua_carrier_per_mm, dtype=float)
    return np.asarray(optics.mua_per_mm, dtype=float)


def blood_stock_tetramer_um(stock) -> float:
    """Haemoglobin of the undiluted blood stock times its potency [µM tetramer, 64 500 g/mol]."""
    from phantomlab.materials.haemoglobin import tetramer_um_from_g_per_l

    return float(tetramer_um_from_g_per_l(stock.spec.haemoglobin_g_per_l)) * float(stock.potency)
