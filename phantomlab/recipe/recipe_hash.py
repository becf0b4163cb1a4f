"""One canonical hash of a recipe, the same wherever the recipe comes from (layer 3).

A recipe read from a TOML file, the same recipe rebuilt on the page from its fields, and the
same file with other comments, spacing or key order are the same recipe.  So the hash is the
SHA-256 of the recipe's *parsed definition* written canonically — JSON with sorted keys, no
spaces, every number as a float, dates as ISO 8601 — followed by the bytes of every file the
recipe reads beside it (a target spectrum CSV), in the order given.  ``plan``, ``batch add``,
the sheet, the batch log and the page all show this one ``recipe_hash``.
"""

from __future__ import annotations

import hashlib
import json
import math
from typing import Any, Iterable, Mapping

from phantomlab.jsonable import to_jsonable

__all__ = ["canonical_recipe_hash", "canonical_recipe_text"]


def _numbers_as_floats(value: Any) -> Any:
    if isinstance(value, bool) or value is None or isinstance(value, str):
        return value
    if isinstance(value, (int, float)):
        number = float(value)
        return number if math.isfinite(number) else None
    if isinstance(value, dict):
        return {key: _numbers_as_floats(item) for key, item in value.items()}
    if isinstance(value, list):
        return [_numbers_as_floats(item) for item in value]
    return value


def canonical_recipe_text(definition: Mapping[str, Any]) -> str:
    """The recipe definition as canonical JSON (sorted keys, floats, ISO dates, no spaces)."""
    plain = _numbers_as_floats(to_jsonable(dict(definition)))
    return json.dumps(plain, sort_keys=True, separators=(",", ":"), ensure_ascii=False, allow_nan=False)


def canonical_recipe_hash(definition: Mapping[str, Any], *, files: Iterable[bytes] = ()) -> str:
    """SHA-256 (hex) of :func:`canonical_recipe_text` followed by the bytes of ``files``."""
    digest = hashlib.sha256(canonical_recipe_text(definition).encode("utf-8"))
    for content in files:
        digest.update(content)
    return digest.hexdigest()
