"""Monte Carlo baseline files: a :class:`Baseline` saved as ``.npz`` and loaded back (layer 2).

A baseline is saved as a compressed ``.npz`` file (docs/formats.md, "Monte Carlo baseline
(.npz)"): the stored photons' exit radius, path length and scatterings, and an
``inputs_json`` record with a format tag, a version and the inputs that made the run.  A
save writes beside the destination and renames, so an interrupted save leaves no half file;
a load checks the size limit before anything is unpacked, then the tag, the version, the
arrays' dtypes and lengths and every input, and refuses a bad file with one
:class:`~phantomlab.errors.InputError` line.
"""

from __future__ import annotations

import json
import zipfile
from pathlib import Path

import numpy as np

from phantomlab.errors import InputError
from phantomlab.outputs import save_npz_atomically
from phantomlab.transport.montecarlo.baseline import (
    INPUT_KEYS,
    PHOTON_ARRAYS,
    Baseline,
    check_baseline_inputs,
)

__all__ = ["save_baseline", "load_baseline", "load_baseline_inputs", "BASELINE_FORMAT", "BASELINE_VERSION"]

#: Tag and version written into every saved baseline (checked on load).
BASELINE_FORMAT = "phantomlab-mc-baseline"
BASELINE_VERSION = 1


def save_baseline(baseline: Baseline, path) -> Path:
    """Write a baseline as a compressed ``.npz`` file with the inputs that made it.

    The file holds the photon arrays of :data:`~phantomlab.transport.montecarlo.baseline.PHOTON_ARRAYS`
    and ``inputs_json``: the format tag, the version and the inputs
    (:data:`~phantomlab.transport.montecarlo.baseline.INPUT_KEYS`).  It is written beside the
    destination and renamed into place.

    Parameters
    ----------
    baseline : Baseline
    path : str or Path
        Destination (written as given; the ``.npz`` suffix is customary).

    Returns
    -------
    Path
    """
    header = {"format": BASELINE_FORMAT, "version": BASELINE_VERSION, **baseline.inputs()}
    # written beside the destination, then renamed: an interrupted save leaves no half file
    return save_npz_atomically(path, compressed=True, inputs_json=np.array(json.dumps(header)),
                               **{name: getattr(baseline, name) for name in PHOTON_ARRAYS})


def _inputs_from_record(source: Path, record) -> dict:
    """The checked inputs of a baseline file's ``inputs_json`` record (format tag and version first)."""
    try:
        header = json.loads(str(record))
    except (TypeError, ValueError):
        raise InputError(f"{str(source)!r}: the inputs record is not valid JSON") from None
    if not isinstance(header, dict) or header.get("format") != BASELINE_FORMAT:
        raise InputError(f"{str(source)!r} is not a phantomlab baseline (format tag missing)")
    if header.get("version") != BASELINE_VERSION:
        raise InputError(
            f"{str(source)!r}: baseline format version {header.get('version')!r}, "
            f"this phantomlab reads version {BASELINE_VERSION}"
        )
    absent = [key for key in INPUT_KEYS if key not in header]
    if absent:
        raise InputError(f"{str(source)!r}: the inputs record lacks {', '.join(absent)}")
    return check_baseline_inputs({key: header[key] for key in INPUT_KEYS})


def load_baseline_inputs(path) -> dict:
    """The inputs record of a baseline file (g, n, n_outside, photons, ...), without its photons.

    Raises
    ------
    InputError
        As :func:`load_baseline` for a missing, unreadable or foreign file, or another version.
    """
    source = Path(path)
    if not source.is_file():
        raise InputError(f"baseline file {str(source)!r} does not exist")
    try:
        with np.load(source, allow_pickle=False) as data:
            if "inputs_json" not in data.files:
                raise InputError(f"{str(source)!r} is not a phantomlab baseline: missing inputs_json")
            record = data["inputs_json"]
    except (OSError, ValueError, EOFError, TypeError, zipfile.BadZipFile) as exc:  # TypeError: a bare .npy
        raise InputError(f"{str(source)!r} is not a readable .npz baseline ({type(exc).__name__})") from None
    return _inputs_from_record(source, record)


def load_baseline(path) -> Baseline:
    """Read a baseline written by :meth:`Baseline.save`, checking it on the way in.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    Baseline

    Raises
    ------
    InputError
        Missing or unreadable file, not a baseline, another format version, missing
        arrays or inputs, wrong dtypes or lengths, non-finite or impossible values.
    """
    from phantomlab.transport.montecarlo._validate import check_baseline_file

    source = Path(path)
    if not source.is_file():
        raise InputError(f"baseline file {str(source)!r} does not exist")
    check_baseline_file(source)  # size limit, before anything is unpacked
    try:
        with np.load(source, allow_pickle=False) as data:
            contents = {key: data[key] for key in data.files}
    except (OSError, ValueError, EOFError, TypeError, zipfile.BadZipFile) as exc:  # TypeError: a bare .npy
        raise InputError(f"{str(source)!r} is not a readable .npz baseline ({type(exc).__name__})") from None
    missing = [key for key in ("inputs_json", *PHOTON_ARRAYS) if key not in contents]
    if missing:
        raise InputError(f"{str(source)!r} is not a phantomlab baseline: missing {', '.join(missing)}")
    inputs = _inputs_from_record(source, contents["inputs_json"])
    arrays = {}
    for name, dtype in PHOTON_ARRAYS.items():
        values = contents[name]
        if values.dtype != dtype:
            raise InputError(f"{str(source)!r}: {name} has dtype {values.dtype}, expected {np.dtype(dtype).name}")
        arrays[name] = np.array(values)
    return Baseline(**arrays, **inputs)
