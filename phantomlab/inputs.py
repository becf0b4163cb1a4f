"""Reading what a person hands over, safely (layer 0).

One place for the checks every file and typed value goes through before any layer uses it:

* :func:`read_text_file` / :func:`read_bytes_file`: a regular file only (no folder, device or
  pipe), bounded in size (:mod:`phantomlab.limits`, ``file_mb``) before it is read whole,
  UTF-8 with or without a byte-order mark; a refusal never quotes the file's content;
* :func:`decode_text`, :func:`parse_toml`: the same for bytes already in memory (an upload)
  and for TOML text;
* :func:`contained_path`: a data file named inside a stock, recipe or sidecar file must lie
  in that file's folder tree, or in a folder the lab allows with ``PHANTOMLAB_DATA_DIRS``;
* :func:`check_temperature_c`, :func:`check_finite`, :func:`parse_date`: values that cannot
  be (below absolute zero, NaN, a date that is not one).
"""

from __future__ import annotations

import datetime as _dt
import math
import os
import stat
import tomllib
from pathlib import Path

from phantomlab.errors import InputError
from phantomlab.limits import check_limit, limit

__all__ = [
    "float_array",
    "ABSOLUTE_ZERO_C",
    "MAX_TEMPERATURE_C",
    "DATA_DIRS_VARIABLE",
    "regular_file",
    "read_text_file",
    "read_bytes_file",
    "decode_text",
    "parse_toml",
    "contained_path",
    "trust_folder",
    "check_temperature_c",
    "check_finite",
    "parse_time_of_day",
    "parse_date_and_time",
    "parse_date",
]

#: Absolute zero [°C] (the kelvin's definition, BIPM SI Brochure 2019).
ABSOLUTE_ZERO_C = -273.15
#: Highest temperature accepted for a phantom, its mixing or its measurement [°C]
#: (common practice, no source: resins post-cure below 200 °C; above 500 °C it is a typo).
MAX_TEMPERATURE_C = 500.0
#: Environment variable listing folders (separated by os.pathsep) that stock, recipe and
#: sidecar files may also take data files from.
DATA_DIRS_VARIABLE = "PHANTOMLAB_DATA_DIRS"

_BOM = "\ufeff"


def regular_file(path, *, what: str) -> Path:
    """A path that names an existing regular file (no folder, device or pipe), else one line."""
    file = Path(path)
    try:
        info = file.stat()
    except FileNotFoundError:
        raise InputError(f"{what} {str(file)!r} not found") from None
    except OSError as exc:
        raise InputError(f"{what} {str(file)!r} cannot be opened ({exc.strerror or type(exc).__name__})") from None
    if stat.S_ISDIR(info.st_mode):
        raise InputError(f"{what} {str(file)!r} is a folder; a file is expected")
    if not stat.S_ISREG(info.st_mode):
        raise InputError(f"{what} {str(file)!r} is not a regular file (a device or pipe); a file is expected")
    return file


def read_bytes_file(path, *, what: str, limit_name: str = "file_mb") -> bytes:
    """The bytes of a regular file no larger than the limit ``limit_name`` [MB].

    The size is checked before reading, and the read stops one byte past the limit (files
    such as those in ``/proc`` report size 0), so a huge file is never read whole.

    Parameters
    ----------
    path : str or Path
    what : str
        What the file is, for messages (``"measurement file"``).
    limit_name : str
        A size limit of :mod:`phantomlab.limits` in MB.
    """
    file = regular_file(path, what=what)
    allowed = limit(limit_name) * 1_000_000
    check_limit(limit_name, file.stat().st_size / 1e6, given=f"{what} {file.name!r}")
    try:
        with file.open("rb") as handle:
            data = handle.read(allowed + 1)
    except OSError as exc:
        raise InputError(f"{what} {str(file)!r} cannot be read ({exc.strerror or type(exc).__name__})") from None
    if len(data) > allowed:
        check_limit(limit_name, allowed / 1e6 + 1e-6, given=f"{what} {file.name!r}")
    return data


def decode_text(data: bytes, *, what: str, name: str) -> str:
    """UTF-8 text (a leading byte-order mark dropped); never quotes the bytes it refuses."""
    check_limit("file_mb", len(data) / 1e6, given=f"{what} {name!r}")
    try:
        text = bytes(data).decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InputError(
            f"{what} {name!r} is not UTF-8 text (undecodable byte at offset {exc.start}); a text file is expected"
        ) from None
    if "\x00" in text:
        raise InputError(f"{what} {name!r} holds NUL bytes: a binary file, not text")
    return text[1:] if text.startswith(_BOM) else text


def read_text_file(path, *, what: str) -> str:
    """The UTF-8 text of a regular file within the ``file_mb`` limit (BOM accepted)."""
    data = read_bytes_file(path, what=what)
    return decode_text(data, what=what, name=Path(path).name)


def parse_toml(text: str, *, what: str) -> dict:
    """Parse TOML text (a leading byte-order mark dropped) with a one-line refusal.

    tomllib's message gives the line and column only, never the text it failed on.
    """
    if text.startswith(_BOM):
        text = text[1:]
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"{what}: not valid TOML ({exc})") from None
    except RecursionError:
        raise InputError(f"{what}: not valid TOML (nested too deeply)") from None


#: Folders phantomlab itself fills with data files (see :func:`trust_folder`).
_TRUSTED_FOLDERS: set[Path] = set()


def trust_folder(folder) -> None:
    """Let stock files name data files in ``folder``, one phantomlab writes itself.

    The page and the batch log write the CSV contents a stock snapshot carries back to files
    in a folder of their own (:func:`phantomlab.shelf_export.materialise_resolved`); those
    files are numbers phantomlab wrote, not files a person named, so they may be read from
    there whatever folder the stock file lies in.  Symbolic links are still followed and
    refused when they lead elsewhere.
    """
    _TRUSTED_FOLDERS.add(Path(folder).resolve())


def _allowed_folders() -> list[Path]:
    text = os.environ.get(DATA_DIRS_VARIABLE, "")
    named = [Path(part).expanduser().resolve() for part in text.split(os.pathsep) if part.strip()]
    return named + sorted(_TRUSTED_FOLDERS)


def contained_path(path_text, *, base_dir, what: str) -> Path:
    """Resolve a data file named in a stock, recipe or sidecar file, inside its folder tree.

    Parameters
    ----------
    path_text : str
        The path as written (relative to ``base_dir``, or absolute).
    base_dir : str or Path
        The folder of the file that names it.
    what : str
        For messages, e.g. ``"stock dye_blue, field spectrum_csv"``.

    Returns
    -------
    Path
        The resolved path (symbolic links followed), inside ``base_dir`` or inside a folder
        listed in ``PHANTOMLAB_DATA_DIRS``.

    Raises
    ------
    InputError
        When it resolves anywhere else; the file is not opened.
    """
    text = str(path_text)
    if "\x00" in text:
        raise InputError(f"{what}: a path may not hold a NUL character")
    base = Path(base_dir).resolve()
    candidate = Path(text).expanduser()
    if not candidate.is_absolute():
        candidate = base / candidate
    try:
        resolved = candidate.resolve()
    except (OSError, RuntimeError):
        raise InputError(f"{what}: {text!r} cannot be resolved to a file") from None
    for folder in (base, *_allowed_folders()):
        if resolved == folder or folder in resolved.parents:
            return resolved
    raise InputError(
        f"{what}: {text!r} lies outside the folder {str(base)!r} of the file that names it; keep data files "
        f"in that folder (or below it), or list their folder in {DATA_DIRS_VARIABLE}"
    )


def check_finite(value, *, name: str) -> float:
    """A finite real number (refuses NaN, ±inf, booleans and text)."""
    if isinstance(value, bool):
        raise InputError(f"{name} must be a number, got {value!r}")
    try:
        number = float(value)
    except (TypeError, ValueError, OverflowError):
        raise InputError(f"{name} must be a number, got {str(value)[:40]!r}") from None
    if not math.isfinite(number):
        raise InputError(f"{name} must be a finite number, got {number!r}")
    return number


def float_array(value, *, name: str):
    """A number or an array of numbers as a float ndarray (refuses text and other objects in one line)."""
    import numpy as np

    try:
        return np.asarray(value, dtype=float)
    except (TypeError, ValueError):
        raise InputError(f"{name} must be a number or an array of numbers, got {str(value)[:40]!r}") from None


def check_temperature_c(value, *, name: str) -> float:
    """A temperature [°C] that can be: finite, above absolute zero, at most 500 °C."""
    number = check_finite(value, name=f"{name} [°C]")
    if not ABSOLUTE_ZERO_C < number <= MAX_TEMPERATURE_C:
        raise InputError(
            f"{name} = {number:g} °C is impossible for a phantom; accepted: above {ABSOLUTE_ZERO_C:g} °C "
            f"(absolute zero) and at most {MAX_TEMPERATURE_C:g} °C"
        )
    return number


#: Earliest date accepted for anything recorded.
EARLIEST_DATE = _dt.date(1900, 1, 1)


def parse_date(value, *, name: str, not_after_today: bool = False) -> _dt.date:
    """A calendar date from ``YYYY-MM-DD`` text (or a date), never a guess.

    Parameters
    ----------
    value : str, datetime.date or datetime.datetime
        ISO text: ``2026-03-01`` (a time after it, ``2026-03-01T10:30``, is accepted and dropped).
    name : str
        For messages (``"--mixed-on"``).
    not_after_today : bool
        Refuse a date after tomorrow (something that has already happened; one day of
        slack for time zones).
    """
    if isinstance(value, _dt.datetime):
        day = value.date()
    elif isinstance(value, _dt.date):
        day = value
    else:
        text = str(value).strip()
        try:
            day = _dt.date.fromisoformat(text[:10]) if len(text) >= 10 else None
            if day is not None and len(text) > 10:
                _dt.datetime.fromisoformat(text)
        except ValueError:
            day = None
        if day is None:
            raise InputError(f"{name} {text[:40]!r} is not a date; accepted: YYYY-MM-DD")
    if day < EARLIEST_DATE:
        raise InputError(f"{name} {day.isoformat()} is before {EARLIEST_DATE.isoformat()}; a typo?")
    if not_after_today and day > _dt.date.today() + _dt.timedelta(days=1):
        raise InputError(f"{name} {day.isoformat()} is in the future; give the day it happened (YYYY-MM-DD)")
    return day


def parse_time_of_day(value, *, name: str) -> str:
    """A time of day as ``HH:MM`` (24 h) from ``HH:MM`` text or a ``datetime.time``.

    Parameters
    ----------
    value : str or datetime.time
        ``14:30`` (seconds, ``14:30:15``, are accepted and dropped).
    name : str
        For messages (``"mixing time"``).
    """
    if isinstance(value, _dt.time):
        moment = value
    else:
        text = str(value).strip()
        try:
            moment = _dt.time.fromisoformat(text) if 4 <= len(text) <= 8 else None
        except ValueError:
            moment = None
        if moment is None:
            raise InputError(f"{name} {text[:20]!r} is not a time of day; accepted: HH:MM (24 h)")
    return f"{moment.hour:02d}:{moment.minute:02d}"


def parse_date_and_time(value, *, name: str, not_after_today: bool = False) -> tuple[_dt.date, str | None]:
    """A date and, when given, its time of day: ``YYYY-MM-DD`` or ``YYYY-MM-DDTHH:MM``.

    A space may stand for the ``T``.  Returns the date (checked as :func:`parse_date` does)
    and the time as ``HH:MM`` or None.
    """
    if isinstance(value, _dt.datetime):
        return parse_date(value, name=name, not_after_today=not_after_today), parse_time_of_day(value.time(), name=name)
    if isinstance(value, _dt.date):
        return parse_date(value, name=name, not_after_today=not_after_today), None
    text = str(value).strip()
    day_text, _, time_text = text.replace("T", " ", 1).partition(" ")
    if time_text.strip():
        try:
            moment = parse_time_of_day(time_text.strip(), name=name)
        except InputError:
            raise InputError(f"{name} {text[:40]!r} is not a date; accepted: YYYY-MM-DD or YYYY-MM-DDTHH:MM") from None
    else:
        moment = None
    return parse_date(day_text, name=name, not_after_today=not_after_today), moment
