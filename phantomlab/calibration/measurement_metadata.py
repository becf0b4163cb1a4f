"""A measurement's metadata: the sidecar TOML (or options) read and checked (layer 3).

The keys of docs/formats.md ("Measurement sidecar (TOML)"): the sample's indices and
thickness, slides, sphere ports and beam, the light-loss correction, the srdr detector, the
scatterers' ``[g_spectrum]``, the ``[sphere]`` table (read in
:mod:`phantomlab.calibration.sphere_readings`) and the ``[reference]`` phantom, each turned
into :class:`MeasurementMetadata` by :func:`metadata_from_mapping`.  :func:`read_sidecar`
reads the TOML beside a CSV (``m1.csv`` → ``m1.toml``).  The CSV itself is read in
:mod:`phantomlab.calibration.measurements`.  Everything that cannot be accepted is refused with
one :class:`~phantomlab.errors.InputError` line naming the key.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Mapping

import numpy as np

from phantomlab.errors import InputError
from phantomlab.inputs import contained_path, parse_date, parse_toml, read_text_file
from phantomlab.units import parse_quantity

if TYPE_CHECKING:  # the reading's type lives with the readers, which import this module
    from phantomlab.calibration.measurements import Measurement

__all__ = [
    "MeasurementMetadata",
    "ReferenceSpec",
    "metadata_from_mapping",
    "read_sidecar",
    "DETECTORS",
]

#: The keys a sidecar (or the options) may give; any other is kept in ``extra``, for the record.
_METADATA_KEYS = {
    "n", "n_outside", "thickness_mm", "g", "n_slide", "slide_thickness_mm", "slides",
    "specular_included", "instrument", "date", "port_diameter_mm", "beam_diameter_mm",
    "probe", "operator", "notes", "reference", "phantom_age_days", "temperature_c",
    "unscattered_included", "sample_diameter_mm", "lost_light", "lost_light_photons", "lost_light_wavelengths",
    "sphere", "detector", "fibre_core_mm", "g_spectrum",
}

#: Most entries of a sidecar's ``[g_spectrum]`` table (g of the scatterers per wavelength).
G_SPECTRUM_MAX_ROWS = 5001

#: How a srdr reading samples R(ρ) at each distance (sidecar ``detector``): ``point`` (the
#: default: a detector small next to ρ and to R's curvature), ``ring`` (an annulus between
#: the midpoints of neighbouring distances, as a camera's radial average or a binned
#: simulation), ``fibre`` (a fibre face of core diameter ``fibre_core_mm`` centred at ρ).
DETECTORS = ("point", "ring", "fibre")
#: Largest fibre core diameter a sidecar may give [mm] (detection fibres are 0.05-1 mm;
#: common practice, no source).
FIBRE_CORE_MAX_MM = 5.0

#: Light-loss corrections a sidecar may ask for (``lost_light``).
LOST_LIGHT_METHODS = ("none", "monte-carlo")
#: Limits of the lost-light Monte Carlo settings a user can type.
LOST_LIGHT_PHOTONS_RANGE = (1_000, 10_000_000)
LOST_LIGHT_WAVELENGTHS_RANGE = (1, 50)


@dataclass(frozen=True)
class ReferenceSpec:
    """A reference phantom of known optics measured on the same instrument.

    Attributes
    ----------
    wavelength_nm : ndarray [nm]
        Grid on which the reference optics are given (one value broadcasts to all).
    mua_per_mm, musp_per_mm : ndarray [1/mm]
        The reference phantom's known optics.
    mua_sd_per_mm, musp_sd_per_mm : ndarray [1/mm]
        Their standard uncertainties; they enter the SD of the calibrated reflectance.
    n : float or None
        Refractive index of the reference phantom (defaults to the sample's).
    reading : Measurement or None
        The reference phantom's raw reading, same kind and layout as the sample's.
    """

    wavelength_nm: np.ndarray
    mua_per_mm: np.ndarray
    musp_per_mm: np.ndarray
    mua_sd_per_mm: np.ndarray
    musp_sd_per_mm: np.ndarray
    n: float | None = None
    reading: "Measurement | None" = None


@dataclass(frozen=True)
class MeasurementMetadata:
    """What the fit needs to know beside the numbers (sidecar TOML or options).

    Attributes
    ----------
    n : float or None
        Refractive index of the phantom.
    n_outside : float
        Index of what touches the surface (air 1.0, a probe's glass, ...).
    thickness_mm : float or None [mm]
        Slab thickness (slab kind).
    g : float or None
        Anisotropy assumed for slab and Monte Carlo fits.
    n_slide : float or None
        Index of glass slides on the slab faces.
    slide_thickness_mm : float [mm]
    slides : str
        Which faces carry a slide: ``none``, ``top``, ``bottom`` or ``both``.
    specular_included : bool
        Whether the total reflectance includes the specular part (sphere with the specular
        port closed).
    unscattered_included : bool
        Whether the total transmittance includes the unscattered beam (no exit port in line
        with the beam).
    port_diameter_mm, beam_diameter_mm : float or None [mm]
        Integrating-sphere sample port and beam diameters (edge-loss check, lost light).
    sample_diameter_mm : float or None [mm]
        Diameter of the sample (light reaching its edge is lost).
    lost_light : str
        ``none`` or ``monte-carlo`` (correct the fit for light lost at ports and edges).
    lost_light_photons, lost_light_wavelengths : int
        Photons per Monte Carlo run and most wavelengths run (the rest interpolated).
    sphere : SphereSpec or None
        Sphere geometry and standard of a ``sphere`` measurement.
    detector : str
        srdr: how each distance is sampled, one of :data:`DETECTORS` (default ``point``).
    fibre_core_mm : float or None [mm]
        srdr with ``detector = "fibre"``: the detection fibre's core diameter.
    g_spectrum : (ndarray, ndarray) or None
        The scatterers' g per wavelength (sidecar ``[g_spectrum]``: ``wavelength_nm`` [nm],
        increasing, and ``g``), for the Monte Carlo lookup in place of one ``g``; None when a
        ``g`` is given (option or sidecar: it wins).
    instrument, date : str or None
    reference : ReferenceSpec or None
    extra : dict
        Any other sidecar keys, kept for the record.
    """

    n: float | None = None
    n_outside: float = 1.0
    thickness_mm: float | None = None
    g: float | None = None
    n_slide: float | None = None
    slide_thickness_mm: float = 0.0
    slides: str = "none"
    specular_included: bool = True
    unscattered_included: bool = True
    port_diameter_mm: float | None = None
    beam_diameter_mm: float | None = None
    sample_diameter_mm: float | None = None
    lost_light: str = "none"
    lost_light_photons: int = 100_000
    lost_light_wavelengths: int = 8
    sphere: Any = None
    detector: str = "point"
    fibre_core_mm: float | None = None
    g_spectrum: tuple | None = None
    instrument: str | None = None
    date: str | None = None
    reference: ReferenceSpec | None = None
    extra: Mapping[str, Any] = field(default_factory=dict)


def _float_value(value, key: str, kind_of_quantity: str | None, where: str) -> float:
    if isinstance(value, bool):
        raise InputError(f"{where}: {key} = {value!r}; accepted: a number")
    if isinstance(value, (int, float)):
        if not math.isfinite(value):
            raise InputError(f"{where}: {key} = {value!r}; accepted: a finite number")
        return float(value)
    if isinstance(value, str) and kind_of_quantity:
        return parse_quantity(value, kind_of_quantity)
    raise InputError(f"{where}: {key} = {value!r}; accepted: a number")


def _array_value(value, key: str, where: str) -> np.ndarray:
    try:
        array = np.atleast_1d(np.asarray(value, dtype=float))
    except (TypeError, ValueError):
        raise InputError(f"{where}: {key} = {value!r}; accepted: a number or a list of numbers") from None
    if array.ndim != 1 or not np.all(np.isfinite(array)):
        raise InputError(f"{where}: {key} must be a number or a list of finite numbers")
    return array


def metadata_from_mapping(
    table: Mapping[str, Any], *, where: str, base_dir: Path | None = None, kind: str | None = None
) -> MeasurementMetadata:
    """Build :class:`MeasurementMetadata` from a sidecar table or option values.

    Lengths are given as ``*_mm`` numbers or as strings with units (``"2 mm"``).
    """
    unknown = sorted(set(table) - _METADATA_KEYS)
    extra = {k: table[k] for k in unknown}
    kwargs: dict[str, Any] = {}
    for key, quantity_kind in (("n", None), ("n_outside", None), ("g", None), ("n_slide", None),
                               ("thickness_mm", "length"), ("slide_thickness_mm", "length"),
                               ("port_diameter_mm", "length"), ("beam_diameter_mm", "length")):
        if key in table and table[key] is not None:
            kwargs[key] = _float_value(table[key], key, quantity_kind, where)
    for key in ("n", "n_outside", "n_slide"):
        if key in kwargs and not 1.0 <= kwargs[key] <= 3.0:
            raise InputError(f"{where}: {key} = {kwargs[key]:g}; accepted: 1.0 to 3.0")
    if "g" in kwargs and not -1.0 < kwargs["g"] < 1.0:
        raise InputError(f"{where}: g = {kwargs['g']:g}; accepted: -1 < g < 1")
    if "sample_diameter_mm" in table and table["sample_diameter_mm"] is not None:
        kwargs["sample_diameter_mm"] = _float_value(table["sample_diameter_mm"], "sample_diameter_mm", "length", where)
    for key in ("thickness_mm", "port_diameter_mm", "beam_diameter_mm", "sample_diameter_mm"):
        if key in kwargs and kwargs[key] <= 0:
            raise InputError(f"{where}: {key} = {kwargs[key]:g}; accepted: > 0")
    if "slide_thickness_mm" in kwargs and kwargs["slide_thickness_mm"] < 0:
        raise InputError(f"{where}: slide_thickness_mm = {kwargs['slide_thickness_mm']:g}; accepted: >= 0")
    if "slides" in table and table["slides"] is not None:
        if table["slides"] not in ("none", "top", "bottom", "both"):
            raise InputError(f"{where}: slides = {table['slides']!r}; accepted: none, top, bottom, both")
        kwargs["slides"] = table["slides"]
    for key in ("specular_included", "unscattered_included"):
        if key in table and table[key] is not None:
            if not isinstance(table[key], bool):
                raise InputError(f"{where}: {key} = {table[key]!r}; accepted: true or false")
            kwargs[key] = table[key]
    if "lost_light" in table and table["lost_light"] is not None:
        if table["lost_light"] not in LOST_LIGHT_METHODS:
            raise InputError(f"{where}: lost_light = {table['lost_light']!r}; accepted: "
                             f"{', '.join(LOST_LIGHT_METHODS)}")
        kwargs["lost_light"] = table["lost_light"]
    for key, (low, high) in (("lost_light_photons", LOST_LIGHT_PHOTONS_RANGE),
                             ("lost_light_wavelengths", LOST_LIGHT_WAVELENGTHS_RANGE)):
        if key in table and table[key] is not None:
            value = table[key]
            if isinstance(value, bool) or not isinstance(value, int) or not low <= value <= high:
                raise InputError(f"{where}: {key} = {value!r}; accepted: a whole number from {low} to {high}")
            kwargs[key] = value
    kwargs.update(_detector_from_table(table, where))
    if table.get("g_spectrum") is not None:  # checked even when a g (option or sidecar) wins over it
        spectrum = _g_spectrum_from_table(table["g_spectrum"], where)
        if "g" not in kwargs:
            kwargs["g_spectrum"] = spectrum
    if table.get("sphere") is not None:
        from phantomlab.calibration.sphere_readings import sphere_spec_from_table

        kwargs["sphere"] = sphere_spec_from_table(table["sphere"], where=where, base_dir=base_dir)
    if "instrument" in table and table["instrument"] is not None:
        kwargs["instrument"] = str(table["instrument"])
    if "date" in table and table["date"] is not None:  # a date, never silently today
        kwargs["date"] = parse_date(table["date"], name=f"{where}: date", not_after_today=True).isoformat()
    if table.get("reference") is not None:
        kwargs["reference"] = _reference_from_table(table["reference"], where=where, base_dir=base_dir, kind=kind)
    for key in ("probe", "operator", "notes", "phantom_age_days", "temperature_c"):
        if key in table:
            extra[key] = table[key]
    return MeasurementMetadata(extra=extra, **kwargs)


def _g_spectrum_from_table(table, where: str) -> tuple[np.ndarray, np.ndarray]:
    """``[g_spectrum]`` of a sidecar: ``wavelength_nm`` (increasing, > 0) and ``g`` (0 <= g < 1), same length."""
    accepted = (f"accepted: [g_spectrum] with wavelength_nm = [...] increasing and g = [...] (0 <= g < 1), "
                f"the same length, 1 to {G_SPECTRUM_MAX_ROWS} entries")
    if not isinstance(table, Mapping) or set(table) != {"wavelength_nm", "g"}:
        raise InputError(f"{where}: g_spectrum is not a table of wavelength_nm and g; {accepted}")
    wavelength = _array_value(table["wavelength_nm"], "g_spectrum.wavelength_nm", where)
    g = _array_value(table["g"], "g_spectrum.g", where)
    if (wavelength.size != g.size or not 1 <= g.size <= G_SPECTRUM_MAX_ROWS or np.any(wavelength <= 0)
            or np.any(np.diff(wavelength) <= 0) or np.any(g < 0) or np.any(g >= 1)):
        raise InputError(f"{where}: g_spectrum has {wavelength.size} wavelengths and {g.size} values of g; {accepted}")
    return wavelength, g


def _detector_from_table(table: Mapping[str, Any], where: str) -> dict:
    """``detector`` and ``fibre_core_mm`` of a sidecar, checked (see :data:`DETECTORS`)."""
    out: dict[str, Any] = {}
    detector = table.get("detector")
    if detector is not None:
        if detector not in DETECTORS:
            raise InputError(f"{where}: detector = {detector!r}; accepted: {', '.join(DETECTORS)}")
        out["detector"] = detector
    if table.get("fibre_core_mm") is not None:
        core = _float_value(table["fibre_core_mm"], "fibre_core_mm", "length", where)
        if not 0 < core <= FIBRE_CORE_MAX_MM:
            raise InputError(f"{where}: fibre_core_mm = {core:g}; accepted: > 0 and at most {FIBRE_CORE_MAX_MM:g} mm")
        out["fibre_core_mm"] = core
    if out.get("detector") == "fibre" and "fibre_core_mm" not in out:
        raise InputError(f"{where}: detector = 'fibre' needs fibre_core_mm (the core diameter in mm)")
    if "fibre_core_mm" in out and out.get("detector") != "fibre":
        raise InputError(f"{where}: fibre_core_mm is given but detector is not 'fibre'; add detector = 'fibre'")
    return out


def _reference_from_table(table, *, where: str, base_dir: Path | None, kind: str | None) -> ReferenceSpec:
    if isinstance(table, ReferenceSpec):
        return table
    if not isinstance(table, Mapping):
        raise InputError(f"{where}: [reference] must be a table (mua_per_mm, musp_per_mm, reading_csv)")
    where_ref = f"{where} [reference]"
    for key in ("mua_per_mm", "musp_per_mm"):
        if key not in table:
            raise InputError(f"{where_ref}: lacks {key}; accepted keys: wavelength_nm, mua_per_mm, "
                             f"musp_per_mm, mua_sd_per_mm, musp_sd_per_mm, n, reading_csv")
    mua = _array_value(table["mua_per_mm"], "mua_per_mm", where_ref)
    musp = _array_value(table["musp_per_mm"], "musp_per_mm", where_ref)
    wavelength = _array_value(table.get("wavelength_nm", [float("nan")]), "wavelength_nm", where_ref) \
        if "wavelength_nm" in table else np.array([np.nan])
    size = max(mua.size, musp.size, wavelength.size)
    arrays = {}
    for key, array in (("mua_per_mm", mua), ("musp_per_mm", musp), ("wavelength_nm", wavelength)):
        if array.size not in (1, size):
            raise InputError(f"{where_ref}: {key} has {array.size} values, expected 1 or {size}")
        arrays[key] = np.broadcast_to(array, (size,)).copy()
    if np.any(arrays["mua_per_mm"] < 0) or np.any(arrays["musp_per_mm"] <= 0):
        raise InputError(f"{where_ref}: mua_per_mm must be >= 0 and musp_per_mm > 0")
    sds = {}
    for key, base in (("mua_sd_per_mm", "mua_per_mm"), ("musp_sd_per_mm", "musp_per_mm")):
        if key in table:
            sd = _array_value(table[key], key, where_ref)
            if sd.size not in (1, size) or np.any(sd < 0):
                raise InputError(f"{where_ref}: {key} must be 1 or {size} values >= 0")
            sds[key] = np.broadcast_to(sd, (size,)).copy()
        else:
            sds[key] = np.zeros(size)
    reading = None
    if "reading_csv" in table:
        if base_dir is None:  # text handed over (an upload): no folder to read a file from
            raise InputError(f"{where_ref}: reading_csv is read only beside a measurement file on disk; "
                             "here the measurement came as text (an upload)")
        if kind is None:
            raise InputError(f"{where_ref}: reading_csv needs the measurement kind")
        from phantomlab.calibration.measurements import parse_measurement_text  # the CSV reader

        path = contained_path(table["reading_csv"], base_dir=base_dir, what=f"{where_ref}: reading_csv")
        reading = parse_measurement_text(
            read_text_file(path, what=f"{where_ref}: reading_csv file"), kind=kind, name=path.name,
            metadata=MeasurementMetadata(reference=_PLACEHOLDER_REFERENCE),
        )
        if reading.scale != "raw":
            raise InputError(f"{where_ref}: reading_csv {path.name} must hold a 'reading' column")
    n = _float_value(table["n"], "n", None, where_ref) if "n" in table else None
    return ReferenceSpec(
        wavelength_nm=arrays["wavelength_nm"], mua_per_mm=arrays["mua_per_mm"],
        musp_per_mm=arrays["musp_per_mm"], mua_sd_per_mm=sds["mua_sd_per_mm"],
        musp_sd_per_mm=sds["musp_sd_per_mm"], n=n, reading=reading,
    )


# A reference reading file is itself a raw reading; it needs no reference of its own.
_PLACEHOLDER_REFERENCE = ReferenceSpec(
    wavelength_nm=np.array([np.nan]), mua_per_mm=np.array([0.0]), musp_per_mm=np.array([1.0]),
    mua_sd_per_mm=np.array([0.0]), musp_sd_per_mm=np.array([0.0]),
)


def read_sidecar(csv_path: Path, *, kind: str | None = None) -> dict[str, Any]:
    """Read the TOML sidecar beside a measurement CSV (``m1.csv`` → ``m1.toml``); {} if absent."""
    sidecar = Path(csv_path).with_suffix(".toml")
    if not sidecar.is_file():
        return {}
    return parse_toml(read_text_file(sidecar, what="measurement metadata file"), what=sidecar.name)
