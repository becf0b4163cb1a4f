"""Writing a file so that it exists whole or not at all (layer 0).

:func:`write_text_atomically` writes to a temporary file beside the target and renames it
into place (``os.replace`` is atomic on one file system), so a run killed while writing
leaves the old file, or none, never a half-written one.  :func:`check_writable_folder`
refuses an unwritable destination before any work is recorded.  :func:`save_npz_atomically`
does the same for numpy archives (baselines and their tables).
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np

from phantomlab.errors import InputError

__all__ = ["check_writable_folder", "write_text_atomically", "write_bytes_atomically", "save_npz_atomically"]


def check_writable_folder(path, *, what: str) -> Path:
    """Refuse, in one line, a target whose folder is missing or not writable."""
    target = Path(path)
    folder = target.parent
    if not folder.is_dir():
        raise InputError(f"{what}: folder {str(folder)!r} does not exist")
    if target.is_dir():
        raise InputError(f"{what}: {str(target)!r} is a folder; give a file name")
    if not os.access(folder, os.W_OK | os.X_OK):
        raise InputError(f"{what}: cannot write in folder {str(folder)!r} (permission denied)")
    return target


def write_bytes_atomically(path, data: bytes, *, what: str) -> Path:
    """Write ``data`` to ``path`` through a temporary file renamed into place.

    Raises
    ------
    InputError
        When the file cannot be written (the temporary file is removed).
    """
    target = check_writable_folder(path, what=what)
    mode = target.stat().st_mode & 0o777 if target.is_file() else 0o644  # mkstemp makes 0600
    handle, partial = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".partial", dir=target.parent)
    try:
        with os.fdopen(handle, "wb") as stream:
            os.fchmod(stream.fileno(), mode)
            stream.write(data)
            stream.flush()
            os.fsync(stream.fileno())
        os.replace(partial, target)
    except OSError as exc:
        Path(partial).unlink(missing_ok=True)
        raise InputError(f"{what}: cannot write {str(target)!r} ({exc.strerror or type(exc).__name__})") from None
    except BaseException:  # Ctrl-C while writing: leave nothing half-written
        Path(partial).unlink(missing_ok=True)
        raise
    return target


def write_text_atomically(path, text: str, *, what: str) -> Path:
    """:func:`write_bytes_atomically` for UTF-8 text."""
    return write_bytes_atomically(path, text.encode("utf-8"), what=what)


def save_npz_atomically(path, *, compressed: bool, **arrays) -> Path:
    """Write numpy ``arrays`` as an ``.npz`` archive at ``path``, whole or not at all.

    Through a temporary ``.NAME.*.part`` file beside it, renamed into place.  An ``OSError``
    (folder not writable, disk full) reaches the caller, who decides what it means; nothing
    half-written is left either way.
    """
    destination = Path(path)
    handle, temporary = tempfile.mkstemp(prefix=f".{destination.name}.", suffix=".part",
                                         dir=destination.parent if str(destination.parent) else ".")
    try:
        with os.fdopen(handle, "wb") as stream:
            (np.savez_compressed if compressed else np.savez)(stream, **arrays)
        os.replace(temporary, destination)
    except BaseException:
        Path(temporary).unlink(missing_ok=True)
        raise
    return destination
