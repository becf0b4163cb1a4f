"""CSV rows of the td and fd measurement files: header, numbers, order (layer 3).

Shared by :mod:`phantomlab.calibration.td_measurements` and
:mod:`phantomlab.calibration.fd_measurements`.  Every refusal is one
:class:`~phantomlab.errors.InputError` line naming the file, the row (and file line) and the
column; a cell's text is never echoed.
"""

from __future__ import annotations

import csv
import io
import math
import tomllib
from pathlib import Path

import numpy as np

from phantomlab.calibration.measurements import WAVELENGTH_RANGE_NM
from phantomlab.errors import InputError

__all__ = ["MAX_ROWS", "MAX_TIME_BINS", "STEP_TOLERANCE", "read_rows", "check_wavelength", "check_sorted",
           "uniform_step", "read_source", "fraction_value", "positive_value"]

#: Most data rows a td or fd file may hold (20 wavelengths × 8 distances × 4096 bins fit).
MAX_ROWS = 1_000_000
#: Time bins of one curve at most.
MAX_TIME_BINS = 65536
#: Relative tolerance of "the same time step" (bin centres are printed rounded).
STEP_TOLERANCE = 1e-3


def read_rows(text: str, *, name: str, required: tuple[str, ...], optional: tuple[str, ...] = (),
          layout: str) -> tuple[str | None, list[tuple[str, dict[str, float]]]]:
    """Header check and numbers of every data row: (source, [(where, {column: value})])."""
    lines = text.splitlines()
    source = None
    start = 0
    while start < len(lines) and (not lines[start].strip() or lines[start].lstrip().startswith("#")):
        stripped = lines[start].strip()
        if stripped.lower().startswith("# source:"):
            source = stripped.split(":", 1)[1].strip() or None
        start += 1
    if start >= len(lines):
        raise InputError(f"{name}: no header row; expected {layout}")
    rows = list(csv.reader(io.StringIO("\n".join(lines[start:]))))
    header = [h.strip() for h in rows[0]]
    seen = set()
    for column in header:
        if column in seen:
            raise InputError(f"{name}: header, column {column}: appears twice")
        seen.add(column)
        if column not in required + optional:
            hint = ""
            stem = column.rsplit("_", 1)[0]
            for known in required + optional:
                if known.rsplit("_", 1)[0] == stem:
                    hint = f"; this column must be {known} (unit not accepted)"
            raise InputError(f"{name}: header, column {column}: not a column of this file{hint} ({layout})")
    for column in required:
        if column not in header:
            raise InputError(f"{name}: header lacks column {column}; expected {layout}")
    given_optional = [c for c in optional if c in header]
    if given_optional and len(given_optional) != len(optional):
        raise InputError(f"{name}: header gives {','.join(given_optional)} but not all of {','.join(optional)}")
    body = [(i, r) for i, r in enumerate(rows[1:], start=1) if any(c.strip() for c in r)]
    if not body:
        raise InputError(f"{name}: no data rows after the header")
    if len(body) > MAX_ROWS:
        raise InputError(f"{name}: {len(body)} data rows; at most {MAX_ROWS} are accepted")
    index = {c: i for i, c in enumerate(header)}
    records = []
    for row_number, row in body:
        where = f"{name}: row {row_number} (file line {start + 1 + row_number})"
        if len(row) != len(header):
            raise InputError(f"{where}: {len(row)} cells, the header has {len(header)}")
        record = {}
        for column in header:
            text_cell = row[index[column]].strip()
            if not text_cell:
                raise InputError(f"{where}, column {column}: empty cell; every cell needs a number")
            try:
                value = float(text_cell)
            except ValueError:
                raise InputError(f"{where}, column {column}: not a number (cells hold bare numbers in the "
                                 "unit the header names)") from None
            if not math.isfinite(value):
                raise InputError(f"{where}, column {column}: not a finite number")
            record[column] = value
        records.append((where, record))
    return source, records


def check_wavelength(where: str, value: float) -> None:
    """Refuse a wavelength outside the plausible range (most likely another unit)."""
    lo, hi = WAVELENGTH_RANGE_NM
    if not lo <= value <= hi:
        raise InputError(f"{where}, column wavelength_nm: {value:g} outside {lo:g}-{hi:g} nm (is it in um?)")


def check_sorted(records, keys: tuple[str, ...], name_of_order: str) -> None:
    """Refuse the first row whose (keys) do not strictly increase lexicographically."""
    previous = None
    for where, record in records:
        current = tuple(record[k] for k in keys)
        if previous is not None:
            if current <= previous:
                # the first column where the order breaks
                for key, a, b in zip(keys, current, previous):
                    if a != b or key == keys[-1]:
                        raise InputError(
                            f"{where}, column {key}: {a:g} after {b:g}; rows must be sorted by {name_of_order} "
                            f"(each combination once)")
        previous = current


def uniform_step(times: np.ndarray, *, where: str, column: str = "time_ps") -> float:
    """The common step [ps] of increasing bin centres; uneven steps are refused."""
    steps = np.diff(times)
    step = float(np.median(steps))
    bad = np.flatnonzero(np.abs(steps - step) > STEP_TOLERANCE * step)
    if bad.size:
        raise InputError(f"{where}, column {column}: bins must be evenly spaced (one time step of {step:g} ps); "
                         f"a step of {steps[bad[0]]:g} ps at bin {bad[0] + 2}")
    return step


def fraction_value(table, key, where):
    """A sidecar fraction strictly between 0 and 1 (None when absent)."""
    if table.get(key) is None:
        return None
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not 0.0 < float(value) < 1.0:
        raise InputError(f"{where}: {key} = {value!r}; accepted: a fraction of the peak between 0 and 1")
    return float(value)


def positive_value(table, key, where, *, allow_zero=False):
    """A sidecar number > 0 (or >= 0) (None when absent)."""
    if table.get(key) is None:
        return None
    value = table[key]
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(float(value)) or (
            float(value) < 0 if allow_zero else float(value) <= 0):
        raise InputError(f"{where}: {key} = {value!r}; accepted: a number {'>= 0' if allow_zero else '> 0'}")
    return float(value)


def read_source(path_or_text, options: dict):
    """(text, name, folder, sidecar table, sidecar name) of a file path or of CSV text.

    ``options['sidecar']`` (popped) is a mapping used instead of the TOML file beside the CSV.
    """
    sidecar_given = options.pop("sidecar", None)
    if isinstance(path_or_text, Path) or ("\n" not in str(path_or_text)):
        path = Path(path_or_text)
        if not path.is_file():
            raise InputError(f"measurement file {str(path)!r} not found")
        text = path.read_text(encoding="utf-8")
        if sidecar_given is not None:
            table = dict(sidecar_given)
        else:
            sidecar = path.with_suffix(".toml")
            table = {}
            if sidecar.is_file():
                try:
                    table = tomllib.loads(sidecar.read_text(encoding="utf-8"))
                except tomllib.TOMLDecodeError as exc:
                    raise InputError(f"{sidecar.name}: not valid TOML ({exc})") from None
        return text, path.name, path.parent, table, path.with_suffix(".toml").name
    return str(path_or_text), "<text>", None, dict(sidecar_given or {}), "metadata"
