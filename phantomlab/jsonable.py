"""Turn results (numpy arrays, dataclasses, paths) into plain JSON values (layer 0).

Non-finite floats become ``null``: the automation contract promises valid JSON.
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import math
from pathlib import Path
from typing import Any

import numpy as np

__all__ = ["to_jsonable"]


def to_jsonable(value: Any) -> Any:
    """Recursively convert ``value`` to dicts, lists, str, float, int, bool and None."""
    if isinstance(value, dict):
        return {str(k): to_jsonable(v) for k, v in value.items()}
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: to_jsonable(getattr(value, f.name)) for f in dataclasses.fields(value)}
    if isinstance(value, np.ndarray):
        return [to_jsonable(v) for v in value.tolist()]
    if isinstance(value, (list, tuple)):
        return [to_jsonable(v) for v in value]
    if isinstance(value, (np.floating, float)):
        number = float(value)
        return number if math.isfinite(number) else None
    if isinstance(value, (np.integer,)):
        return int(value)
    if isinstance(value, np.bool_):
        return bool(value)
    if isinstance(value, (Path,)):
        return str(value)
    if isinstance(value, (_dt.date, _dt.datetime)):
        return value.isoformat()
    return value
