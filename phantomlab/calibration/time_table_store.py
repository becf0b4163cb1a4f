"""The td/fd lookup table kept on disk beside a cached time baseline (layer 3).

The time- and frequency-domain lookups (:mod:`phantomlab.calibration.mc_lookup_time`) read a
smoothed table F(u, τ) made from every stored photon of a baseline
(:func:`~phantomlab.calibration.mc_lookup_time_table.smoothed_time_table`).  For the cache's
ten-million-photon baseline, reading the photons and making the table takes 9–14 s, in every
process.  The table itself is about 2 MB; this module writes it beside the baseline as
``NAME-time.lookup.npz`` and reads it back, so a later fit needs neither the photons nor the
smoothing.

A kept table is used only when

* it is of this module's format, and its **code key** matches: the SHA-256 of the source of
  the modules that make the table (the table and smoothing modules and the transport models
  that give its diffusion control, :data:`_CODE_SOURCES`), so any change to that code makes
  the table again instead of serving a stale one (no version number to remember to raise);
* it was made from the baseline file beside it: the file's recorded inputs (g, n, n_outside,
  μa_ref, μs_ref, photons, seed) and its size in bytes.

Anything else (damaged, older code, other photons) is not an error: the table is made again
from the photons and written over the old one.
"""

from __future__ import annotations

import hashlib
import json
import zipfile
from dataclasses import dataclass, field
from functools import lru_cache
from pathlib import Path

import numpy as np

from phantomlab.calibration.mc_lookup import BaselineInputs
from phantomlab.calibration.mc_lookup_time_table import TimeTable, smoothed_time_table
from phantomlab.outputs import save_npz_atomically

__all__ = ["TimeTabulatedBaseline", "tabulate_time_baseline", "read_time_table", "time_table_path",
           "table_code_key"]

TIME_TABLE_FORMAT = "phantomlab-time-table"
#: The source files (relative to the package) whose code decides the table's numbers.
_CODE_SOURCES = ("calibration/mc_lookup_time_table.py", "calibration/lookup_smoothing.py",
                 "transport/time_domain.py", "transport/time_domain_images.py", "transport/boundary.py",
                 "transport/arguments.py")
_INPUT_KEYS = ("g", "n", "n_outside", "mua_per_mm", "mus_per_mm", "photons", "seed")
_ARRAYS = ("u_nodes", "s_nodes", "log_f", "inside", "relative_sd", "relative_bias", "counts")


@dataclass(frozen=True, eq=False)
class TimeTabulatedBaseline(BaselineInputs):
    """A time baseline's inputs with its smoothed table, without the photons.

    Used by the td and fd fits wherever a :class:`~phantomlab.transport.montecarlo.Baseline`
    is (they read ``g``, ``n``, ``n_outside`` and the table).
    """

    time_table: TimeTable = field(repr=False)


@lru_cache(maxsize=1)
def table_code_key() -> str:
    """SHA-256 (hex) of the source of :data:`_CODE_SOURCES`: changes whenever the table's code does."""
    package = Path(__file__).resolve().parent.parent
    digest = hashlib.sha256()
    for name in _CODE_SOURCES:
        digest.update(name.encode())
        digest.update((package / name).read_bytes())
    return digest.hexdigest()


def time_table_path(path: Path) -> Path:
    """``NAME-time.lookup.npz`` beside ``NAME-time.npz``."""
    path = Path(path)
    return path.with_name(path.name[: -len(".npz")] + ".lookup.npz")


def _inputs(baseline) -> dict:
    return {key: (int(getattr(baseline, key)) if key in ("photons", "seed") else float(getattr(baseline, key)))
            for key in _INPUT_KEYS}


def tabulate_time_baseline(baseline, path=None) -> TimeTabulatedBaseline:
    """Make a baseline's table and, when ``path`` (its file) is given, keep it beside the file.

    Parameters
    ----------
    baseline : phantomlab.transport.montecarlo.Baseline
        With its photons.
    path : path, optional
        The baseline's file; the table goes to :func:`time_table_path` of it.  A folder that
        cannot be written is no error (the table is made again next time).
    """
    tabulated = TimeTabulatedBaseline(**_inputs(baseline), time_table=smoothed_time_table(baseline))
    if path is not None:
        try:
            _write(tabulated, Path(path))
        except OSError:
            pass
    return tabulated


def _write(tabulated: TimeTabulatedBaseline, baseline_path: Path) -> None:
    table = tabulated.time_table
    header = {"format": TIME_TABLE_FORMAT, "code_key": table_code_key(),
              "baseline": {key: getattr(tabulated, key) for key in _INPUT_KEYS},
              "baseline_bytes": baseline_path.stat().st_size,
              "tau_max": float(table.tau_max), "u_max": float(table.u_max)}
    save_npz_atomically(time_table_path(baseline_path), compressed=False, header_json=np.array(json.dumps(header)),
                        **{key: getattr(table, key) for key in _ARRAYS})


def read_time_table(baseline_path, inputs: dict) -> TimeTabulatedBaseline | None:
    """The kept table of the baseline file ``baseline_path``, or None when there is none usable.

    Parameters
    ----------
    baseline_path : path
        The baseline file (``NAME-time.npz``).
    inputs : dict
        Its recorded inputs (:func:`phantomlab.transport.montecarlo.load_baseline_inputs`).
    """
    baseline_path = Path(baseline_path)
    source = time_table_path(baseline_path)
    if not source.is_file():
        return None
    try:
        with np.load(source, allow_pickle=False) as data:
            contents = {key: data[key] for key in data.files}
        header = json.loads(str(contents["header_json"]))
        if (not isinstance(header, dict) or header.get("format") != TIME_TABLE_FORMAT
                or header.get("code_key") != table_code_key()
                or int(header["baseline_bytes"]) != baseline_path.stat().st_size):
            return None
        made = header["baseline"]
        if any(abs(float(made[key]) - float(inputs[key])) > 1e-12 for key in _INPUT_KEYS):
            return None
        arrays = {key: np.asarray(contents[key], bool if key == "inside" else float) for key in _ARRAYS}
        shape = (arrays["u_nodes"].size, arrays["s_nodes"].size)
        if any(arrays[key].shape != shape for key in _ARRAYS[2:]) or arrays["u_nodes"].ndim != 1:
            return None
        table = TimeTable(**arrays, tau_max=float(header["tau_max"]), u_max=float(header["u_max"]))
        return TimeTabulatedBaseline(**{key: (int(made[key]) if key in ("photons", "seed") else float(made[key]))
                                        for key in _INPUT_KEYS}, time_table=table)
    except (OSError, ValueError, EOFError, KeyError, TypeError, zipfile.BadZipFile):
        return None
