"""What the ``phantomlab batch`` actions share: the log opened, options read, output written (layer 5).

The batch log of ``--db`` (:func:`open_log`), a date option (:func:`date_option`), an output
file's path checked before any work (:func:`output_path`) and written whole
(:func:`write_output`), a value as the text output shows it (:func:`fmt_value`).  Used by
:mod:`phantomlab.commands.batch`, :mod:`phantomlab.commands.batch_review` and
:mod:`phantomlab.commands.batch_exclusion`.
"""

from __future__ import annotations

import datetime as _dt
import math
from pathlib import Path
from typing import Any

from phantomlab.errors import InputError

__all__ = ["open_log", "date_option", "output_path", "write_output", "fmt_value"]


def open_log(args, *, create: bool = False):
    """The batch log of ``--db``; only ``batch add`` and ``batch list`` create a new one."""
    from phantomlab.store import open_store

    return open_store(args.db, create=create)


def date_option(text: str | None, *, option: str) -> _dt.date | None:
    """The date of a ``YYYY-MM-DD`` option (not after today), or None when not given."""
    from phantomlab.inputs import parse_date

    return None if text is None else parse_date(text, name=option, not_after_today=True)


def output_path(path: str | None, *, option: str, suffix: str) -> Path | None:
    """The output file an option names, its suffix and folder checked before any work; None when not given."""
    if path is None:
        return None
    target = Path(path)
    if target.suffix.lower() != suffix:
        raise InputError(f"{option} {path!r} must end in {suffix}")
    if not target.parent.exists():
        raise InputError(f"{option}: folder {str(target.parent)!r} does not exist")
    return target


def write_output(path: Path, text: str, *, option: str) -> None:
    """Write ``text`` to ``path`` whole or not at all."""
    from phantomlab.outputs import write_text_atomically  # whole or not at all

    write_text_atomically(path, text, what=option)


def fmt_value(value: Any, digits: int = 4) -> str:
    """A value for the text output: ``-`` for None or a non-finite number."""
    if value is None:
        return "-"
    if isinstance(value, float):
        return f"{value:.{digits}g}" if math.isfinite(value) else "-"
    return str(value)
