"""Cells of the page's tables as people read them (layer 5): no "None", no mixed column types.

Streamlit hands a table to the browser through pyarrow, which refuses (and logs a
traceback for) a column holding dates and strings together; and it shows a missing value
as "None".  Every cell that may be empty goes through these helpers, so each column holds one
type and an empty cell is empty.
"""

from __future__ import annotations

import datetime as _dt
import math
from typing import Any

__all__ = ["day_text", "moment_text", "number_text", "plural"]


def day_text(value: Any) -> str:
    """A date as ``YYYY-MM-DD`` (a datetime's day), or ``""``."""
    if value is None or value == "":
        return ""
    if isinstance(value, _dt.datetime):
        return value.date().isoformat()
    if isinstance(value, _dt.date):
        return value.isoformat()
    return str(value)


def moment_text(value: Any) -> str:
    """A date and time as ``YYYY-MM-DD HH:MM``, or ``""``."""
    if isinstance(value, _dt.datetime):
        return value.strftime("%Y-%m-%d %H:%M")
    return day_text(value)


def number_text(value: Any, digits: int = 4) -> str:
    """A number to ``digits`` significant figures, or ``""`` when missing or not finite."""
    if value is None or isinstance(value, bool):
        return "" if value is None else str(value)
    try:
        number = float(value)
    except (TypeError, ValueError):
        return str(value)
    return f"{number:.{digits}g}" if math.isfinite(number) else ""


def plural(count: int, singular: str, plural_form: str | None = None) -> str:
    """``"1 point"``, ``"3 points"``."""
    return f"{count} {singular if count == 1 else (plural_form or singular + 's')}"
