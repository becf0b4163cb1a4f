"""Canonical units and the parsing of quantities a person types (layer 0).

Inside the code every quantity is a plain float or numpy array in one canonical unit per kind
(docs/design.md, "Canonical units"): wavelength nm, length mm, attenuation coefficients (μa, μs,
μs′) 1/mm, volume mL, mass g, volume and mass fractions dimensionless.  Anything a person
types or a file holds passes through :func:`parse_quantity` at the edge.  A bare number, an
unknown unit or a unit of the wrong kind is refused with one line naming what was given and
which units are accepted.

Unit arithmetic is done by pint (Grecar et al., pint documentation); the ``% w/v``, ``% v/v``
and ``% w/w`` notations of the wet lab are handled here because pint has no notion of them.

Absorbance is base 10 and μa is natural-log: :func:`absorbance_to_mua_per_mm` is the one
place the factor ln(10) is applied to cuvette readings.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache
from pathlib import Path

import numpy as np

from phantomlab.errors import InputError
from phantomlab.limits import check_limit

__all__ = [
    "CANONICAL_UNITS",
    "LN10",
    "absorbance_to_mua_per_mm",
    "mua_per_mm_to_absorbance",
    "parse_quantity",
    "parse_amount",
    "parse_number_list",
    "convert",
]

#: ln(10): converts base-10 absorbance per length to a natural-log attenuation coefficient.
LN10 = math.log(10.0)


@dataclass(frozen=True)
class _Kind:
    canonical: str  # pint expression of the canonical unit
    accepted: str  # human list of accepted spellings, for error messages


CANONICAL_UNITS: dict[str, _Kind] = {
    "wavelength": _Kind("nm", "nm, um, µm"),
    "length": _Kind("mm", "mm, cm, um, µm, m"),
    "attenuation": _Kind("1/mm", "1/mm, /mm, mm^-1, 1/cm, /cm, cm^-1, 1/m"),
    "volume": _Kind("mL", "mL, uL, µL, L"),
    "mass": _Kind("g", "g, mg, ug, kg"),
    "mass_concentration": _Kind("g/mL", "% w/v, g/mL, mg/mL, g/L"),
    "molar_concentration": _Kind("mol/L", "M, mM, uM, mol/L"),
    "volume_fraction": _Kind("", "% v/v, v/v (as a fraction)"),
    "mass_fraction": _Kind("", "% w/w, w/w (as a fraction)"),
    "temperature": _Kind("degC", "degC, °C, K"),
    "time": _Kind("h", "s, min, h, day"),
    "spatial_frequency": _Kind("1/mm", "1/mm, /mm, mm^-1, 1/cm"),
}

#: Longest quantity text read [characters]; a quantity is a number and a unit.
MAX_QUANTITY_CHARS = 100

# What a typed quantity may look like before pint sees it: one number, then a unit made of
# unit words joined by spaces, '*', '·' or '/', each with at most a one-digit power
# ('mm^-1', 'cm**2').  Nothing else reaches pint, so no arithmetic is evaluated
# ('9**9**9 nm' is refused at once instead of being computed).
_NUMBER = r"[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d{1,3})?"
_UNIT_FACTOR = r"°?[^\W\d]+(?:\s*(?:\^|\*\*)\s*[-+]?\d)?"
_QUANTITY = re.compile(
    rf"^\s*{_NUMBER}\s*(?:1\s*/\s*|/\s*)?{_UNIT_FACTOR}(?:\s*(?:[*/·]\s*|\s)\s*{_UNIT_FACTOR})*\s*$"
)

_LAB_FRACTION = re.compile(r"^\s*(?P<num>[-+0-9.eE]+)\s*(?P<pct>%)?\s*(?P<tag>w/v|v/v|w/w)\s*$")


@lru_cache(maxsize=1)
def _registry():
    """pint's unit registry, built once per process on the first typed quantity.

    Reading pint's definition files takes about 0.5 s; pint keeps what it read in a disk
    cache, which brings a later process's build to about 0.06 s.  The cache folder is one per
    pint installation (:func:`_pint_cache_folder`): pint's shared default folder
    (``~/.cache/pint``) records the absolute paths of the definition files, and an entry left
    by another installation that has since been removed makes every later build fail
    (flexcache raises FileNotFoundError instead of reading the files again).  Without a
    usable cache folder the registry is built from the files, as before.
    """
    import pint

    folder = _pint_cache_folder()
    if folder is not None:
        try:
            return pint.UnitRegistry(autoconvert_offset_to_baseunit=True, cache_folder=folder)
        except Exception:  # noqa: BLE001 - a damaged cache: read the files
            pass
    return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


def _pint_cache_folder() -> Path | None:
    """The disk-cache folder of this pint installation (None when it cannot be made).

    ``<user cache>/phantomlab/pint-<version>-<hash of pint's folder>``: two installations
    (two virtual environments) never share entries, so removing one never breaks another.
    """
    import hashlib

    import pint
    import platformdirs

    installed = str(Path(pint.__file__).resolve().parent)
    tag = hashlib.sha256(installed.encode("utf-8")).hexdigest()[:12]
    try:
        folder = platformdirs.user_cache_path("phantomlab") / f"pint-{pint.__version__}-{tag}"
        folder.mkdir(parents=True, exist_ok=True)
    except OSError:
        return None
    return folder


def _kind(kind: str) -> _Kind:
    try:
        return CANONICAL_UNITS[kind]
    except KeyError:
        raise InputError(
            f"unknown quantity kind {kind!r}; known kinds: {', '.join(sorted(CANONICAL_UNITS))}"
        ) from None


def _refuse(text: str, kind: str, why: str) -> InputError:
    spec = _kind(kind)
    return InputError(f"{why} in {text!r} ({kind}); accepted units: {spec.accepted}")


def _parse_lab_fraction(text: str, kind: str) -> float:
    match = _LAB_FRACTION.match(text)
    if match is None:
        raise _refuse(text, kind, "cannot read the amount")
    tag = match.group("tag")
    wanted = {"mass_concentration": "w/v", "volume_fraction": "v/v", "mass_fraction": "w/w"}
    if wanted.get(kind) != tag:
        raise _refuse(text, kind, f"'{tag}' is not a unit of this kind")
    try:
        value = float(match.group("num"))
    except ValueError:
        raise _refuse(text, kind, "cannot read the number") from None
    if not math.isfinite(value):
        raise _refuse(text, kind, "not a finite number")
    if match.group("pct"):
        value /= 100.0
    # w/v percent is grams per 100 mL: 2.5 % w/v = 0.025 g/mL.
    return value


def parse_quantity(text: str, kind: str) -> float:
    """Read a typed quantity and return it in the canonical unit of ``kind``.

    Parameters
    ----------
    text : str
        What a person typed, e.g. ``"0.1 /cm"``, ``"1 mm^-1"``, ``"2.5 % w/v"``, ``"10 uL"``,
        ``"632.8 nm"``.  A bare number is refused: its unit would be a guess.
    kind : str
        One of :data:`CANONICAL_UNITS` (``"attenuation"``, ``"wavelength"``, ...).

    Returns
    -------
    float
        The value in the canonical unit of ``kind`` (nm, mm, 1/mm, mL, g, g/mL, mol/L,
        fraction, °C, h).

    Raises
    ------
    InputError
        For a bare number, an unknown unit or a unit of another kind.
    """
    spec = _kind(kind)
    if not isinstance(text, str):
        raise _refuse(repr(text), kind, "no unit given")
    stripped = text.strip()
    if not stripped:
        raise _refuse(text, kind, "empty quantity")
    if len(stripped) > MAX_QUANTITY_CHARS:
        raise InputError(
            f"a quantity of {len(stripped)} characters ({kind}); at most {MAX_QUANTITY_CHARS}: "
            f"a number and a unit, e.g. 10 mL"
        )
    if re.search(r"\b(w/v|v/v|w/w)\s*$", stripped):
        return _parse_lab_fraction(stripped, kind)
    if "%" in stripped:
        raise _refuse(text, kind, "a bare % is ambiguous (say % w/v, % v/v or % w/w)")
    try:
        float(stripped)
    except ValueError:
        pass
    else:
        raise _refuse(text, kind, "no unit given")
    if kind in ("volume_fraction", "mass_fraction"):
        raise _refuse(text, kind, "not a fraction")
    if not _QUANTITY.match(stripped):
        if not re.match(rf"^\s*{_NUMBER}", stripped):
            raise _refuse(text, kind, "no number before the unit")
        raise _refuse(text, kind, "give a number and a unit (no arithmetic)")
    registry = _registry()
    normalised = stripped.replace("^", "**").replace("°C", "degC").replace("µ", "u").replace("μ", "u")
    normalised = re.sub(r"^([-+0-9.eE]+)\s*/", r"\1 1/", normalised)
    try:
        quantity = registry.Quantity(normalised)
    except Exception:  # pint raises several unrelated types for unparsable text
        raise _refuse(text, kind, "unknown unit") from None
    if not hasattr(quantity, "magnitude") or isinstance(quantity, (int, float)):
        raise _refuse(text, kind, "no unit given")
    try:
        value = quantity.to(spec.canonical).magnitude
    except Exception:
        raise _refuse(text, kind, "unit of another kind") from None
    value = float(value)
    if not math.isfinite(value):
        raise _refuse(text, kind, "not a finite number")
    return value


def parse_amount(text: str) -> tuple[float, str]:
    """Read an amount as dispensed: a volume or a mass, in whichever unit it was typed.

    Parameters
    ----------
    text : str
        ``"67.6 uL"``, ``"12.1 g"``, ``"0.5 mL"``.

    Returns
    -------
    (value, unit) : (float, str)
        The value in mL with ``"mL"``, or in g with ``"g"``.

    Raises
    ------
    InputError
        For a bare number, an unknown unit or a unit that is neither a volume nor a mass.
    """
    try:
        return parse_quantity(text, "volume"), "mL"
    except InputError as volume_error:
        if "unit of another kind" not in str(volume_error):
            said = str(volume_error).replace(" (volume); ", " (an amount); ")
            raise InputError(said.replace(CANONICAL_UNITS["volume"].accepted, _AMOUNT_UNITS)) from None
    try:
        return parse_quantity(text, "mass"), "g"
    except InputError:
        raise InputError(f"unit of another kind in {text!r} (an amount); accepted units: {_AMOUNT_UNITS}") from None


_AMOUNT_UNITS = "mL, uL, µL, L (volume) or g, mg, ug, kg (mass)"


def convert(value, unit: str, kind: str):
    """Convert ``value`` given in ``unit`` to the canonical unit of ``kind``.

    ``value`` may be a scalar or an array; the result has the same shape.
    """
    factor = parse_quantity(f"1 {unit}", kind)
    if kind == "temperature":
        offset = parse_quantity(f"0 {unit}", kind)
        return np.asarray(value, dtype=float) * (factor - offset) + offset
    return np.asarray(value, dtype=float) * factor


def parse_number_list(text: str, *, name: str = "list") -> np.ndarray:
    """Read a command-line list: comma-separated values, or ``START:STOP:STEP`` (STOP included).

    Parameters
    ----------
    text : str
        ``"650,750,850"`` or ``"400:1000:5"``.
    name : str
        The option's name, used in the error message.

    Returns
    -------
    numpy.ndarray of float

    Raises
    ------
    InputError
        Unreadable text, non-finite values, or more values than the ``list_values`` limit
        (:mod:`phantomlab.limits`; counted before anything is built).
    """
    stripped = str(text).strip()
    if not stripped:
        raise InputError(f"{name}: empty list; give values as 650,750,850 or START:STOP:STEP")
    shown = stripped if len(stripped) <= 40 else stripped[:37] + "..."
    try:
        if ":" in stripped:
            parts = [float(p) for p in stripped.split(":")]
            if len(parts) != 3:
                raise ValueError
            start, stop, step = parts
            if not all(math.isfinite(p) for p in parts):
                raise InputError(f"{name}: {shown!r} holds a value that is not a finite number")
            if step <= 0 or stop < start:
                raise InputError(
                    f"{name}: {shown!r} needs START <= STOP and STEP > 0 (START:STOP:STEP)"
                )
            count = math.floor((stop - start) / step + 1e-9) + 1 if math.isfinite((stop - start) / step) else math.inf
            check_limit("list_values", count, given=f"{name} {shown}")
            values = start + step * np.arange(int(count))
        else:
            check_limit("list_values", stripped.count(",") + 1, given=f"{name} {shown}")
            values = np.array([float(p) for p in stripped.split(",") if p.strip() != ""])
    except InputError:
        raise
    except ValueError:
        raise InputError(
            f"{name}: cannot read {shown!r}; give values as 650,750,850 or START:STOP:STEP"
        ) from None
    if values.size == 0 or not np.all(np.isfinite(values)):
        raise InputError(f"{name}: {shown!r} holds no finite numbers" if values.size == 0
                         else f"{name}: {shown!r} holds a value that is not a finite number")
    return values


def absorbance_to_mua_per_mm(absorbance, path_length_mm):
    """Convert base-10 absorbance over a path to the natural-log absorption coefficient.

    μa = ln(10) · A / L (Beer–Lambert law, base 10 for absorbance, base e for μa).

    Parameters
    ----------
    absorbance : float or array [dimensionless, base 10]
    path_length_mm : float [mm]

    Returns
    -------
    float or array [1/mm]
    """
    if not np.all(np.asarray(path_length_mm) > 0):
        raise InputError(f"path length must be > 0 mm, got {path_length_mm}")
    return LN10 * np.asarray(absorbance, dtype=float) / path_length_mm


def mua_per_mm_to_absorbance(mua_per_mm, path_length_mm):
    """Inverse of :func:`absorbance_to_mua_per_mm`: A = μa · L / ln(10)."""
    return np.asarray(mua_per_mm, dtype=float) * path_length_mm / LN10
