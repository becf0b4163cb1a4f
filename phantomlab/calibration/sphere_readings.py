"""Raw integrating-sphere readings (measurement kind ``sphere``): the sidecar's sphere table,
the reflectance standard, and the checks of the readings (layer 3).

The file (one row per wavelength)::

    wavelength_nm,r_sample,r_standard,r_dark,t_sample,t_open,t_dark[,tc_sample,tc_open,tc_dark]

``r_*``: reflection-sphere detector with the sample, with the reflectance standard, dark;
``t_*``: transmission-sphere detector with the sample, with the open beam, dark; ``tc_*``:
a detector behind a small aperture far from the sample (collimated transmission) with the
sample, with the open beam, dark.  Any unit, the same within a column group.

The sidecar TOML (beside the CSV) describes the spheres::

    n = 1.41                       # sample; thickness_mm, n_slide, slides, g as for slab
    thickness_mm = 1.0
    specular_included = true       # the specular reflection stays in the sphere
    unscattered_included = true    # the unscattered beam stays in the transmission sphere
    beam_diameter_mm = 4.0         # (lost light: with sample_diameter_mm, lost_light)

    [sphere]
    arrangement = "single"         # or "double" (both spheres at once, sample between)
    diameter_mm = 150.0
    sample_port_mm = 25.0
    entrance_port_mm = 20.0        # where the beam comes in (open while measuring R)
    detector_port_mm = 6.0
    wall_reflectance = 0.98        # [+ wall_reflectance_sd]
    baffle = true
    standard_csv = "standard.csv"  # wavelength_nm,reflectance[,sd]; inside the folder tree
    reading_sd_fraction = 0.003    # relative SD of each reading (noise of the instrument)
    reading_sd_floor = 0.0         # absolute SD floor, in reading units

    [sphere.transmission]          # only where the transmission sphere differs
    diameter_mm = 150.0
    sample_port_mm = 25.0
    detector_port_mm = 6.0
    exit_port_mm = 0.0             # an open port in line with the beam (0: none)
    wall_reflectance = 0.98
    baffle = true

Instead of ``standard_csv`` the standard may be given inline: ``standard_reflectance`` (one
number, or a list with ``standard_wavelength_nm`` and optional ``standard_reflectance_sd``).
"""

from __future__ import annotations

import csv
import io
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from phantomlab.calibration.sphere import ARRANGEMENTS, Sphere, SphereSetup
from phantomlab.errors import InputError
from phantomlab.inputs import contained_path, read_text_file

__all__ = ["SphereSpec", "sphere_spec_from_table", "check_readings", "normalised_readings", "SPHERE_KEYS",
           "TRANSMISSION_KEYS"]

#: Keys of the ``[sphere]`` table, with what each one expects.
SPHERE_KEYS = {
    "arrangement": "single or double",
    "diameter_mm": "sphere diameter [mm]",
    "sample_port_mm": "sample port diameter [mm]",
    "entrance_port_mm": "beam entrance port diameter [mm] (0 if the beam enters through the sample port)",
    "detector_port_mm": "detector port diameter [mm]",
    "wall_reflectance": "diffuse reflectance of the wall coating, 0 to below 1",
    "wall_reflectance_sd": "its standard uncertainty",
    "baffle": "true or false",
    "standard_csv": "file wavelength_nm,reflectance[,sd] of the reflectance standard, inside this folder",
    "standard_reflectance": "the standard's reflectance: a number, or a list with standard_wavelength_nm",
    "standard_wavelength_nm": "wavelengths of an inline standard_reflectance list [nm]",
    "standard_reflectance_sd": "standard uncertainty of the standard's reflectance (number or list)",
    "reading_sd_fraction": "relative SD of each reading, 0 to 0.2",
    "reading_sd_floor": "absolute SD floor of each reading (reading units), >= 0",
    "transmission": "a table: the transmission sphere, where it differs",
}
#: Keys of the ``[sphere.transmission]`` table.
TRANSMISSION_KEYS = {
    "diameter_mm": "sphere diameter [mm]",
    "sample_port_mm": "sample port diameter [mm]",
    "detector_port_mm": "detector port diameter [mm]",
    "exit_port_mm": "open port in line with the beam [mm] (0: none)",
    "wall_reflectance": "diffuse reflectance of the wall coating, 0 to below 1",
    "wall_reflectance_sd": "its standard uncertainty",
    "baffle": "true or false",
}
#: Most rows accepted in a standard file.
MAX_STANDARD_ROWS = 20_000
#: Largest relative reading SD accepted.
MAX_READING_SD_FRACTION = 0.2


@dataclass(frozen=True)
class SphereSpec:
    """What the sidecar says about the spheres and the reflectance standard.

    Attributes
    ----------
    reflection, transmission : Sphere
    arrangement : str
    wall_reflectance_sd, transmission_wall_reflectance_sd : float
    standard_wavelength_nm, standard_reflectance, standard_reflectance_sd : ndarray
        The standard's calibrated spectrum (one point: a constant).
    standard_source : str
        File name or ``inline``.
    reading_sd_fraction, reading_sd_floor : float or None
    """

    reflection: Sphere
    transmission: Sphere
    arrangement: str
    wall_reflectance_sd: float
    transmission_wall_reflectance_sd: float
    standard_wavelength_nm: np.ndarray
    standard_reflectance: np.ndarray
    standard_reflectance_sd: np.ndarray
    standard_source: str
    reading_sd_fraction: float | None
    reading_sd_floor: float

    def setup(self, *, specular_included: bool, unscattered_included: bool) -> SphereSetup:
        return SphereSetup(reflection=self.reflection, transmission=self.transmission,
                           arrangement=self.arrangement, specular_included=specular_included,
                           unscattered_included=unscattered_included)

    def standard_at(self, wavelength_nm, *, name: str = "the standard") -> tuple[np.ndarray, np.ndarray]:
        """The standard's reflectance and SD at these wavelengths (linear interpolation).

        Refuses wavelengths outside the standard's calibrated range.
        """
        wl = np.asarray(wavelength_nm, float)
        if self.standard_wavelength_nm.size == 1:
            return (np.full(wl.shape, self.standard_reflectance[0]), np.full(wl.shape, self.standard_reflectance_sd[0]))
        lo, hi = self.standard_wavelength_nm[0], self.standard_wavelength_nm[-1]
        if wl.min() < lo or wl.max() > hi:
            raise InputError(f"{name} ({self.standard_source}) is calibrated from {lo:g} to {hi:g} nm; the "
                             f"measurement needs {wl.min():g} to {wl.max():g} nm")
        return (np.interp(wl, self.standard_wavelength_nm, self.standard_reflectance),
                np.interp(wl, self.standard_wavelength_nm, self.standard_reflectance_sd))


def _number(table, key, where, *, default=None, low=None, high=None, high_open=False, low_open=False):
    value = table.get(key, default)
    if value is None:
        raise InputError(f"{where}: lacks {key} ({SPHERE_KEYS.get(key) or TRANSMISSION_KEYS.get(key)})")
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{where}: {key} = {value!r}; accepted: a number")
    value = float(value)
    bad = (not np.isfinite(value) or (low is not None and (value <= low if low_open else value < low))
           or (high is not None and (value >= high if high_open else value > high)))
    if bad:
        accepted = f"{'above' if low_open else 'from'} {low:g}" if low is not None else ""
        if high is not None:
            accepted += f"{' ' if accepted else ''}{'below' if high_open else 'up to'} {high:g}"
        raise InputError(f"{where}: {key} = {value!r}; accepted: {accepted}")
    return value


def _boolean(table, key, where, default):
    value = table.get(key, default)
    if not isinstance(value, bool):
        raise InputError(f"{where}: {key} = {value!r}; accepted: true or false")
    return value


def _check_keys(table, allowed, where):
    for key in table:
        if key not in allowed:
            raise InputError(f"{where}: unknown key {key!r}; accepted: {', '.join(allowed)}")


def _inside(path_text, base_dir: Path | None, where: str, key: str) -> Path:
    """A data path named in a sidecar, inside the sidecar's folder tree (``inputs.contained_path``)."""
    if base_dir is None:
        raise InputError(f"{where}: {key} needs the measurement's folder (the file read from disk); for an "
                         f"uploaded or stored file give the standard inline (standard_reflectance, "
                         f"standard_wavelength_nm)")
    return contained_path(path_text, base_dir=base_dir, what=f"{where}: {key}")


def _standard_from_csv(path: Path, where: str):
    if not path.is_file():
        raise InputError(f"{where}: standard_csv file {path.name!r} not found")
    text = read_text_file(path, what=f"{where}: standard_csv file")
    lines = [line for line in text.splitlines() if line.strip() and not line.lstrip().startswith("#")]
    rows = list(csv.reader(io.StringIO("\n".join(lines))))
    if not rows:
        raise InputError(f"{path.name}: empty; a standard file needs wavelength_nm,reflectance[,sd]")
    header = [h.strip() for h in rows[0]]
    if header[:2] != ["wavelength_nm", "reflectance"] or len(header) > 3 or (len(header) == 3 and header[2] != "sd"):
        raise InputError(f"{path.name}: header not accepted; a standard file needs wavelength_nm,reflectance[,sd]")
    if len(rows) - 1 > MAX_STANDARD_ROWS:
        raise InputError(f"{path.name}: {len(rows) - 1} rows; accepted: at most {MAX_STANDARD_ROWS}")
    numbers = []
    for k, row in enumerate(rows[1:], start=1):
        if len(row) != len(header):
            raise InputError(f"{path.name}: row {k}: {len(row)} cells, the header has {len(header)}")
        try:
            numbers.append([float(c) for c in row])
        except ValueError:
            raise InputError(f"{path.name}: row {k}: cells must be numbers") from None
    array = np.array(numbers, float)
    if array.shape[0] < 1:
        raise InputError(f"{path.name}: no data rows")
    sd = array[:, 2] if array.shape[1] == 3 else np.zeros(array.shape[0])
    return array[:, 0], array[:, 1], sd, path.name


def _standard_inline(table, where):
    reflectance = np.atleast_1d(np.asarray(table["standard_reflectance"], dtype=float))
    if reflectance.size > 1:
        if "standard_wavelength_nm" not in table:
            raise InputError(f"{where}: a standard_reflectance list needs standard_wavelength_nm")
        wavelength = np.atleast_1d(np.asarray(table["standard_wavelength_nm"], dtype=float))
    else:
        wavelength = np.array([np.nan])
    sd = np.atleast_1d(np.asarray(table.get("standard_reflectance_sd", 0.0), dtype=float))
    if wavelength.size != reflectance.size or sd.size not in (1, reflectance.size):
        raise InputError(f"{where}: standard_wavelength_nm, standard_reflectance and standard_reflectance_sd "
                         f"must have the same length")
    return wavelength, reflectance, np.broadcast_to(sd, reflectance.shape).copy(), "inline"


def sphere_spec_from_table(table: Mapping[str, Any], *, where: str, base_dir: Path | None) -> SphereSpec:
    """Read the sidecar's ``[sphere]`` table (one-line refusals naming the key)."""
    if isinstance(table, SphereSpec):
        return table
    if not isinstance(table, Mapping):
        raise InputError(f"{where}: [sphere] must be a table ({', '.join(SPHERE_KEYS)})")
    where = f"{where} [sphere]"
    _check_keys(table, SPHERE_KEYS, where)
    arrangement = table.get("arrangement", "single")
    if arrangement not in ARRANGEMENTS:
        raise InputError(f"{where}: arrangement = {arrangement!r}; accepted: {', '.join(ARRANGEMENTS)}")
    diameter = _number(table, "diameter_mm", where, low=0, low_open=True, high=2000)
    reflection = Sphere(
        diameter_mm=diameter,
        sample_port_mm=_number(table, "sample_port_mm", where, low=0, low_open=True, high=diameter, high_open=True),
        detector_port_mm=_number(table, "detector_port_mm", where, low=0, low_open=True, high=diameter, high_open=True),
        open_port_mm=_number(table, "entrance_port_mm", where, low=0, high=diameter, high_open=True),
        wall_reflectance=_number(table, "wall_reflectance", where, low=0, high=1, high_open=True),
        baffle=_boolean(table, "baffle", where, True))
    wall_sd = _number(table, "wall_reflectance_sd", where, default=0.0, low=0, high=0.1)
    transmission, transmission_sd = reflection, wall_sd
    if "transmission" in table:
        other = table["transmission"]
        where_t = f"{where[:-1]}.transmission]"
        if not isinstance(other, Mapping):
            raise InputError(f"{where_t}: must be a table ({', '.join(TRANSMISSION_KEYS)})")
        _check_keys(other, TRANSMISSION_KEYS, where_t)
        merged = {"diameter_mm": diameter, "sample_port_mm": reflection.sample_port_mm,
                  "detector_port_mm": reflection.detector_port_mm, "exit_port_mm": 0.0,
                  "wall_reflectance": float(reflection.wall_reflectance), "baffle": reflection.baffle,
                  "wall_reflectance_sd": wall_sd, **dict(other)}
        d2 = _number(merged, "diameter_mm", where_t, low=0, low_open=True, high=2000)
        transmission = Sphere(
            diameter_mm=d2,
            sample_port_mm=_number(merged, "sample_port_mm", where_t, low=0, low_open=True, high=d2, high_open=True),
            detector_port_mm=_number(merged, "detector_port_mm", where_t, low=0, low_open=True, high=d2,
                                     high_open=True),
            open_port_mm=_number(merged, "exit_port_mm", where_t, low=0, high=d2, high_open=True),
            wall_reflectance=_number(merged, "wall_reflectance", where_t, low=0, high=1, high_open=True),
            baffle=_boolean(merged, "baffle", where_t, True))
        transmission_sd = _number(merged, "wall_reflectance_sd", where_t, low=0, high=0.1)
    if "standard_csv" in table and "standard_reflectance" in table:
        raise InputError(f"{where}: give standard_csv or standard_reflectance, not both")
    if "standard_csv" in table:
        path = _inside(str(table["standard_csv"]), base_dir, where, "standard_csv")
        wavelength, reflectance, sd, source = _standard_from_csv(path, where)
    elif "standard_reflectance" in table:
        wavelength, reflectance, sd, source = _standard_inline(table, where)
    else:
        raise InputError(f"{where}: lacks the reflectance standard; give standard_csv (a file "
                         f"wavelength_nm,reflectance[,sd]) or standard_reflectance")
    if not (np.all(np.isfinite(reflectance)) and np.all((reflectance > 0) & (reflectance <= 1))):
        raise InputError(f"{where}: the standard's reflectance ({source}) must lie above 0 and up to 1")
    if np.any(sd < 0) or not np.all(np.isfinite(sd)):
        raise InputError(f"{where}: the standard's SD ({source}) must be >= 0")
    if wavelength.size > 1 and not np.all(np.diff(wavelength) > 0):
        raise InputError(f"{where}: the standard's wavelengths ({source}) must increase")
    fraction = table.get("reading_sd_fraction")
    if fraction is not None:
        fraction = _number(table, "reading_sd_fraction", where, low=0, high=MAX_READING_SD_FRACTION)
    floor = _number(table, "reading_sd_floor", where, default=0.0, low=0)
    return SphereSpec(reflection=reflection, transmission=transmission, arrangement=arrangement,
                      wall_reflectance_sd=wall_sd, transmission_wall_reflectance_sd=transmission_sd,
                      standard_wavelength_nm=wavelength, standard_reflectance=reflectance,
                      standard_reflectance_sd=sd, standard_source=source, reading_sd_fraction=fraction,
                      reading_sd_floor=floor)


def check_readings(values, value_columns, wavelengths, records, metadata, name):
    """Refuse readings that cannot be right; give each reading its SD from the sidecar.

    Refused, one line naming the row: a net signal (reading − dark) at or below 0 for the
    standard, the open beam or the collimated open beam; a negative net signal of the
    sample; a sample reading above the standard's (reflection) or above the open beam
    (transmission, collimated transmission); a standard not covering the wavelengths.

    Returns
    -------
    (values, sd) : ndarrays (W, 6 or 9)
        ``sd`` is None when the sidecar gives no reading noise (replicate files may give it).
    """
    spec = metadata.sphere
    if spec is None:
        raise InputError(f"{name}: sphere readings need the sphere geometry: add a [sphere] table to the "
                         f"sidecar TOML ({', '.join(k for k in SPHERE_KEYS if k != 'transmission')})")
    column = {c: i for i, c in enumerate(value_columns)}
    groups = [("r_sample", "r_standard", "r_dark", "standard"), ("t_sample", "t_open", "t_dark", "open beam")]
    if "tc_sample" in column:
        groups.append(("tc_sample", "tc_open", "tc_dark", "collimated open beam"))
    for (where, record) in records:
        for sample, reference, dark, label in groups:
            net_reference = record[reference] - record[dark]
            net_sample = record[sample] - record[dark]
            if net_reference <= 0:
                raise InputError(f"{where}, column {reference}: net signal {net_reference:g} after the dark reading "
                                 f"{dark}; accepted: above 0 (is the dark reading in the right column?)")
            if net_sample < 0:
                raise InputError(f"{where}, column {sample}: negative net signal {net_sample:g} after the dark "
                                 f"reading {dark}; accepted: >= 0")
            if record[sample] > record[reference]:
                raise InputError(f"{where}, column {sample}: {record[sample]:g} above the {label} reading "
                                 f"{record[reference]:g} in {reference}; accepted: at most the {label}'s reading")
    spec.standard_at(wavelengths, name=f"{name}: the standard")
    if spec.reading_sd_fraction is None and spec.reading_sd_floor == 0:
        return values, None
    fraction = spec.reading_sd_fraction or 0.0
    sd = np.hypot(fraction * np.abs(values), spec.reading_sd_floor)
    if np.any(sd <= 0):
        raise InputError(f"{name}: a reading of 0 has no SD with reading_sd_fraction alone; give "
                         f"reading_sd_floor in [sphere]")
    return values, sd


def normalised_readings(values, sd):
    """M_R, M_T (and M_Tc) with their SDs by first-order propagation of the reading SDs.

    Parameters
    ----------
    values, sd : ndarray (W, 6 or 9)
        Readings in the column order of the file; ``sd`` may be None.

    Returns
    -------
    (ratios, ratio_sd) : ndarrays (W, 2 or 3)
        (sample − dark)/(reference − dark) per group; SD None when ``sd`` is None.
    """
    values = np.asarray(values, float)
    groups = values.shape[1] // 3
    ratios = np.empty((values.shape[0], groups))
    ratio_sd = None if sd is None else np.empty_like(ratios)
    for k in range(groups):
        sample, reference, dark = values[:, 3 * k], values[:, 3 * k + 1], values[:, 3 * k + 2]
        top, bottom = sample - dark, reference - dark
        ratios[:, k] = top / bottom
        if sd is not None:
            s_sample, s_reference, s_dark = sd[:, 3 * k], sd[:, 3 * k + 1], sd[:, 3 * k + 2]
            # ∂M/∂sample = 1/b, ∂M/∂reference = −t/b², ∂M/∂dark = (t − b)/b²
            ratio_sd[:, k] = np.sqrt((s_sample / bottom) ** 2 + (s_reference * top / bottom**2) ** 2
                                     + (s_dark * (top - bottom) / bottom**2) ** 2)
    return ratios, ratio_sd
