"""The stock model (layer 1): one bottle (:class:`Stock`) and the bottles of one stock file (:class:`Shelf`).

What a bottle holds beyond the common fields is its kind's spec, a frozen dataclass of
:mod:`phantomlab.materials.stock.kinds`.  A stock file becomes a shelf through
:func:`~phantomlab.materials.stock.stock_file.load_shelf`.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Iterator, Mapping

from phantomlab.errors import InputError
from phantomlab.materials.stock.fields import _COMMON, KINDS, _suggest
from phantomlab.materials.stock.hazards import HAZARD_KEYS
from phantomlab.materials.stock.readers import _number

__all__ = ["Stock", "Shelf"]


@dataclass(frozen=True)
class Stock:
    """One bottle on the shelf.

    Attributes
    ----------
    key : str
        Short name of the bottle (its table name in the stock file).
    kind : str
        One of :data:`KINDS`.
    lot : str
        Lot or bottle identifier ("" when not given).
    expiry : datetime.date or None
    potency : float
        Factor on the strength of the stock's scattering or absorbing ingredient (its μs and
        the ingredient's μa scale together; carrier water and solvent do not).
    potency_sd : float
    hazards : tuple of str
        Keys of :data:`HAZARD_KEYS`.
    density_g_per_ml : float [g/mL]
        Density of the undiluted stock (for masses on the sheet).
    solids_volume_fraction : float
        Particle volume fraction inside the undiluted stock (1 for a powder, 0 for absorbers
        and matrices).
    definition : dict
        The TOML table as given (dates as ISO strings) plus ``"resolved"``: the contents of
        every CSV file it names, for database snapshots.
    spec : MatrixSpec | SpheresSpec | PowderSpec | EmulsionSpec | AbsorberSpec | BloodSpec
    name : str
        Free description.
    """

    key: str
    kind: str
    lot: str
    expiry: _dt.date | None
    potency: float
    potency_sd: float
    hazards: tuple[str, ...]
    density_g_per_ml: float
    solids_volume_fraction: float
    definition: dict
    spec: Any
    name: str = ""

    @property
    def cautions(self) -> tuple[str, ...]:
        """The caution text of each hazard key."""
        return tuple(HAZARD_KEYS[h] for h in self.hazards)


@dataclass(frozen=True)
class Shelf:
    """The stocks of one stock file, by key.

    Attributes
    ----------
    path : Path or None
    stocks : dict of str to Stock
    name : str
    """

    path: Path | None
    stocks: Mapping[str, Stock]
    name: str = ""

    def __getitem__(self, key: str) -> Stock:
        try:
            return self.stocks[key]
        except (KeyError, TypeError):
            hint = _suggest(key, self.stocks)
            raise InputError(
                f"unknown stock {key!r}{hint}; stocks on the shelf: {', '.join(self.stocks)}"
            ) from None

    def __contains__(self, key: object) -> bool:
        return key in self.stocks

    def __iter__(self) -> Iterator[str]:
        return iter(self.stocks)

    def __len__(self) -> int:
        return len(self.stocks)

    def keys(self):
        return self.stocks.keys()

    def values(self):
        return self.stocks.values()

    def items(self):
        return self.stocks.items()

    def of_kind(self, kind: str) -> tuple[str, ...]:
        """Keys of the stocks of one kind, in file order."""
        if kind not in KINDS:
            raise InputError(f"unknown stock kind {kind!r}; kinds: {', '.join(KINDS)}")
        return tuple(k for k, s in self.stocks.items() if s.kind == kind)

    def matrix(self, key: str | None = None) -> Stock:
        """The matrix stock named ``key``, or the only matrix on the shelf.

        Raises
        ------
        InputError
            ``key`` is not a matrix, or ``key`` is None and the shelf has no or several
            matrices (the message lists them).
        """
        matrices = self.of_kind("matrix")
        if key is not None:
            stock = self[key]
            if stock.kind != "matrix":
                raise InputError(
                    f"stock {key!r} is of kind {stock.kind}, not a matrix; matrices on the shelf: "
                    f"{', '.join(matrices) or 'none'}"
                )
            return stock
        if len(matrices) == 1:
            return self.stocks[matrices[0]]
        if not matrices:
            raise InputError("the shelf has no matrix stock (kind = \"matrix\"); add one, e.g. water")
        raise InputError(f"the shelf has several matrices ({', '.join(matrices)}); choose one")

    def with_potency(self, key: str, potency: float, potency_sd: float) -> "Shelf":
        """A copy of the shelf with one stock's potency and its SD replaced."""
        stock = self[key]
        _number(potency, key, "potency", _COMMON["potency"], lambda v: v > 0)
        _number(potency_sd, key, "potency_sd", _COMMON["potency_sd"], lambda v: v >= 0)
        stocks = dict(self.stocks)
        stocks[key] = dataclasses.replace(stock, potency=float(potency), potency_sd=float(potency_sd))
        return dataclasses.replace(self, stocks=stocks)
