"""Measurements of a batch: a file read and fitted, then stored with its fit (layer 5).

One implementation for ``phantomlab batch measure`` and the page's "Fit and attach" and refit
tabs:

* :func:`attach_measurement` — read and fit a measurement file BEFORE any write (a file that
  does not parse writes nothing; a long fit holds no lock), then store the file byte for
  byte with its metadata, geometry and fit in one transaction; :func:`keep_fit` stores a
  later refit the same way;
* :func:`batch_anisotropy` — the g of the batch's scattering model, for the Monte Carlo
  lookup's baseline when the file gives none;
* :func:`fit_verdict` — PASS / FAIL / UNDECIDED of a fit against the batch's stored target
  and tolerances.

Layer 5 for the reasons :mod:`phantomlab.workflows` gives: it ties the calibration layer's
readers and fits (3) to the store's writes (4).  No argparse, ``phantomlab.cli`` or
streamlit here, and no physics: reading, fitting and judging are layer 3's functions.
"""

from __future__ import annotations

import datetime as _dt
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

import numpy as np

from phantomlab.errors import InputError
from phantomlab.inputs import check_finite, check_temperature_c, decode_text, parse_date, parse_toml
from phantomlab.jsonable import to_jsonable

__all__ = [
    "attach_measurement",
    "AttachedMeasurement",
    "keep_fit",
    "fit_verdict",
    "batch_anisotropy",
]


@dataclass(frozen=True)
class AttachedMeasurement:
    """A measurement stored with a batch, and its fit (None when no fit ran)."""

    code: str
    measurement_id: int
    fit_id: int | None
    fit: Any  # phantomlab.calibration.FitResult or None
    fit_json: dict | None
    measured_on: _dt.date
    phantom_age_days: float | None
    batch_status: str


def attach_measurement(
    store,
    code: str,
    *,
    kind: str,
    file_name: str,
    raw_content: bytes,
    sidecar_toml: str | None = None,
    path: str | Path | None = None,
    fit: bool = True,
    model: str | None = None,
    baseline=None,
    options: Mapping[str, Any] | None = None,
    baseline_dir=None,
    rebuild: bool = False,
    progress=None,
    instrument: str | None = None,
    measured_on: _dt.date | None = None,
    phantom_age_days: float | None = None,
    temperature_c: float | None = None,
    recorded_by: str | None = None,
) -> AttachedMeasurement:
    """Read and fit a measurement file, then store the file (byte for byte) with its fit.

    The file is read and fitted before the write transaction opens: a file that does not
    parse is refused and nothing is written, and a long fit holds no lock.

    Parameters
    ----------
    raw_content : bytes
        The file as handed over (stored unchanged); ``sidecar_toml`` its metadata TOML.
    path : path, optional
        Where the file lies, when it is on disk (the command line): it is then read from
        there, so files its sidecar names (a reference reading) are found beside it.
    fit : bool
        False stores the file only.
    model, baseline, options
        The fit's model, Monte Carlo baseline, and metadata options (``n``, ``thickness_mm``
        [mm], ``g``, ...; they win over the sidecar; None values are ignored).  Without a
        ``g`` (option or sidecar), the default Monte Carlo lookup takes g from the batch's
        scattering model (:func:`batch_anisotropy`).
    baseline_dir, rebuild, progress
        The baseline cache folder, whether to build its baseline again, and a build progress
        callback (``phantomlab.calibration.baseline_cache.obtain_baseline``).
    measured_on : date, optional
        Default: the file's metadata date, else today.
    phantom_age_days : float [days], optional
        Default: days since the batch was mixed (refused when negative).
    """
    from phantomlab.calibration import fit_measurement_file, read_measurement  # layer 3
    from phantomlab.store import add_measurement, get_batch  # layer 4

    fit_options = {k: v for k, v in dict(options or {}).items() if v is not None}
    if temperature_c is not None:
        temperature_c = check_temperature_c(temperature_c, name="phantom temperature")
    if phantom_age_days is not None:
        phantom_age_days = check_finite(phantom_age_days, name="phantom age [days]")
        if phantom_age_days < 0:
            raise InputError(f"phantom age {phantom_age_days:g} days is negative; accepted: >= 0")
    if measured_on is not None:
        measured_on = parse_date(measured_on, name="measured on", not_after_today=True)
    text = decode_text(raw_content, what="measurement file", name=file_name)  # size limit, BOM
    if path is not None:
        source: Any = Path(path)
        read_extra: dict[str, Any] = {}
    else:
        if "\n" not in text:  # text, never a path: an upload cannot name a server file
            text += "\n"
        sidecar: dict[str, Any] = {}
        if sidecar_toml:
            sidecar = parse_toml(sidecar_toml, what="measurement metadata (TOML)")
        source, read_extra = text, {"sidecar": sidecar}
    # the geometry options are checked with the file even when no fit runs (--no-fit)
    checked = {k: v for k, v in fit_options.items() if k in ("n", "n_outside", "thickness_mm", "g")}
    if kind == "td":  # the IRF is stored inline with the metadata: a refit from the log needs no other file
        from phantomlab.calibration.td_measurements import sidecar_with_inline_irf  # layer 3

        info = read_measurement(source, kind=kind, irf=fit_options.pop("irf", None), **read_extra, **checked)
        sidecar_toml = sidecar_with_inline_irf(sidecar_toml, info)
        read_extra = {"sidecar": parse_toml(sidecar_toml, what="measurement metadata (TOML)")}
    else:
        info = read_measurement(source, kind=kind, **read_extra, **checked)
    if kind == "sphere":
        sidecar_toml = _sphere_sidecar_for_the_record(sidecar_toml, info)
    result = None
    fit_json = None
    if fit:
        g_fallback = None
        if kind in ("srdr", "sfdi", "td", "fd") and baseline is None:
            g_fallback = batch_anisotropy(store, code, wavelength_nm=info.wavelength_nm,
                                          per_wavelength=kind in ("srdr", "sfdi"))
        result = fit_measurement_file(source, kind=kind, model=model, baseline=baseline, **read_extra,
                                      baseline_dir=baseline_dir, rebuild=rebuild, progress=progress,
                                      g_fallback=g_fallback, **fit_options)
        fit_json = to_jsonable(result.to_json())
    if measured_on is None:
        measured_on = _metadata_date(info) or _dt.date.today()
    geometry = _geometry(info, {"model": model, **fit_options})
    with store.transaction() as session:
        batch = get_batch(session, code)
        age = phantom_age_days
        if age is None and batch.mixed_on is not None:
            age = float((measured_on - batch.mixed_on).days)
            if age < 0:
                raise InputError(
                    f"measured on {measured_on} but batch {batch.code} was mixed on {batch.mixed_on}; "
                    "give the measurement date or the phantom age"
                )
        measurement = add_measurement(
            session, batch, kind=kind, file_name=file_name, raw_content=raw_content,
            metadata_toml=sidecar_toml or None, instrument=instrument or _metadata_value(info, "instrument"),
            geometry=geometry, measured_on=measured_on, phantom_age_days=age, temperature_c=temperature_c,
            recorded_by=recorded_by,
        )
        fit_id = _add_fit(session, measurement, result, recorded_by=recorded_by) if result is not None else None
        attached = AttachedMeasurement(
            code=batch.code, measurement_id=measurement.id, fit_id=fit_id, fit=result, fit_json=fit_json,
            measured_on=measured_on, phantom_age_days=age, batch_status=batch.status,
        )
    return attached


def _sphere_sidecar_for_the_record(sidecar_toml: str | None, measurement) -> str | None:
    """The sidecar as stored with a sphere measurement: the standard's spectrum written inline.

    A sidecar naming ``standard_csv`` would be useless in the database without that file;
    the stored TOML carries the spectrum the fit used instead (the CSV stays byte for byte).
    """
    spec = getattr(measurement.metadata, "sphere", None)
    if not sidecar_toml or spec is None:
        return sidecar_toml
    table = parse_toml(sidecar_toml, what="measurement metadata (TOML)")
    sphere = dict(table.get("sphere", {}))
    if "standard_csv" not in sphere:
        return sidecar_toml
    import tomli_w

    source = sphere.pop("standard_csv")
    sphere["standard_wavelength_nm"] = [float(v) for v in spec.standard_wavelength_nm]
    sphere["standard_reflectance"] = [float(v) for v in spec.standard_reflectance]
    sphere["standard_reflectance_sd"] = [float(v) for v in spec.standard_reflectance_sd]
    table["sphere"] = sphere
    return (f"# stored by phantomlab: the standard's spectrum from {source} written inline\n"
            + tomli_w.dumps(table))


def batch_anisotropy(store, code: str, *, wavelength_nm, per_wavelength: bool = False):
    """The anisotropy g of a batch from its scattering model, for the Monte Carlo lookup's baseline.

    The plan's predicted g (Mie or emulsion model of its scatterers, stored with the plan)
    interpolated to the measurement's wavelengths; averaged over them unless
    ``per_wavelength`` (the default srdr/sfdi fit then takes each wavelength with a baseline
    near its own g, :mod:`phantomlab.calibration.band_g`: next to the source R(ρ) moves by
    1–3 % per 0.1 of g, and an emulsion's g changes by more than 0.1 over the red and near
    infrared).

    Returns
    -------
    (float, str), (ndarray (W,), str) or None
        g (one, or one per wavelength) and its origin ``"batch"``; None when the plan
        predicts no g.
    """
    from phantomlab.store import get_batch, plan_of  # layer 4

    with store.reading() as session:
        plan = plan_of(session, get_batch(session, code)).plan or {}
    predicted = plan.get("predicted") or {}
    try:
        grid = np.asarray(predicted.get("wavelength_nm") or [], float)
        values = np.asarray([np.nan if v is None else v for v in predicted.get("g") or []], float)
    except (TypeError, ValueError):
        return None
    good = np.isfinite(grid) & np.isfinite(values) if grid.shape == values.shape else np.zeros(0, bool)
    if not np.any(good):
        return None
    order = np.argsort(grid[good])
    wanted = np.asarray(wavelength_nm, float)
    spectrum = np.interp(wanted, grid[good][order], values[good][order])
    if not np.all((spectrum >= 0.0) & (spectrum < 1.0)):
        return None
    return (spectrum, "batch") if per_wavelength else (float(np.mean(spectrum)), "batch")


def keep_fit(store, measurement_id: int, result, *, recorded_by: str | None = None) -> int:
    """Store a (re)fit of a stored measurement, as :func:`attach_measurement` stores its fit."""
    from phantomlab.store import get_measurement  # layer 4

    with store.transaction() as session:
        return _add_fit(session, get_measurement(session, measurement_id), result, recorded_by=recorded_by)


def fit_verdict(store_or_session, code: str, fit_json: Mapping[str, Any] | None):
    """PASS, FAIL or UNDECIDED of a batch's fitted optics against its recipe's tolerances.

    The one rule of :func:`phantomlab.calibration.verdict.judge` (the batch record uses it too),
    against the target and tolerances of the batch's stored plan.

    Returns
    -------
    phantomlab.calibration.verdict.Verdict
    """
    from phantomlab.calibration.verdict import judge  # layer 3
    from phantomlab.store import get_batch, plan_of  # layer 4

    if hasattr(store_or_session, "reading"):
        with store_or_session.reading() as session:
            return fit_verdict(session, code, fit_json)
    plan = plan_of(store_or_session, get_batch(store_or_session, code)).plan
    return judge(target=plan.get("target") or {}, values=fit_json)


def _add_fit(session, measurement, result, *, recorded_by: str | None) -> int:
    from phantomlab.store import add_fit  # layer 4

    row = add_fit(session, measurement, results=to_jsonable(result.to_json()), model=result.model,
                  covariance=to_jsonable(result.covariance), warnings=list(result.warnings),
                  chi2_red=_finite(result.chi2_red), recorded_by=recorded_by)
    return row.id


def _finite(value):
    try:
        number = float(value)
    except (TypeError, ValueError):
        return None
    return number if math.isfinite(number) else None


def _metadata_value(measurement, name: str):
    metadata = getattr(measurement, "metadata", None)
    value = getattr(metadata, name, None) if metadata is not None else None
    return None if value in (None, "") else value


def _metadata_date(measurement) -> _dt.date | None:
    value = _metadata_value(measurement, "date")
    if isinstance(value, _dt.date):
        return value
    if isinstance(value, str):
        try:
            return _dt.date.fromisoformat(value[:10])
        except ValueError:
            return None
    return None


def _geometry(measurement, options: Mapping[str, Any]) -> dict[str, Any] | None:
    metadata = getattr(measurement, "metadata", None)
    geometry: dict[str, Any] = {}
    if metadata is not None:
        geometry.update({k: v for k, v in to_jsonable(metadata).items() if v is not None}
                        if not isinstance(metadata, dict) else metadata)
    geometry.update({k: v for k, v in options.items() if v is not None and k != "baseline"})
    axis_name = getattr(measurement, "axis_name", None)
    axis = getattr(measurement, "axis", None)
    if axis_name and axis is not None and np.size(axis):
        geometry[axis_name] = sorted({float(v) for v in np.ravel(axis)})
    if not geometry.get("reference"):
        geometry.pop("reference", None)
    return to_jsonable(geometry) or None
